"""Accuracy benchmark: what iterative refinement costs and what it buys, measured in one run.

Run (unset the two OpenBLAS variables for timing only, in this command alone)::

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python -m benchmarks.bench_accuracy
    ... --threads 1      # limit BLAS threads (threadpoolctl) for the whole run
    ... --json           # the figures as one JSON object on the last line

1. **Cost on a well-conditioned fit** -- n = 100,000 rows, p = 20 (an intercept and 19
   standard normal columns, seeded): the in-memory fit as shipped (it estimates the condition
   number of the working factor, O(p²), and refines only above ``REFINE_COND``) against the
   same fit from the same moments with the check skipped.  Target: ratio <= 1.05.
2. **Digits on an ill-conditioned polynomial** -- raw powers of x on [-8.8, -3.1], degree 10,
   82 equally spaced rows (condition number about 1.5e15), response seeded normal noise plus
   cos(x): the number of correct significant digits (-log10 of the largest relative error) of
   the coefficients, plain and refined, against the exact rational least-squares solution of
   the same float64 data (normal equations in :mod:`fractions`).
"""

from __future__ import annotations

import sys
from fractions import Fraction
from typing import Any

import numpy as np

try:
    import _common
except ImportError:  # imported as benchmarks.bench_accuracy
    from benchmarks import _common


def _exact(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    xf = [[Fraction(float(v)) for v in row] for row in x]
    yf = [Fraction(float(v)) for v in y]
    p = x.shape[1]
    a = [
        [sum(r[i] * r[j] for r in xf) for j in range(p)]
        + [sum(r[i] * yi for r, yi in zip(xf, yf, strict=True))]
        for i in range(p)
    ]
    for c in range(p):
        piv = a[c][c]
        a[c] = [v / piv for v in a[c]]
        for i in range(p):
            if i != c and a[i][c] != 0:
                f = a[i][c]
                a[i] = [u - f * v for u, v in zip(a[i], a[c], strict=True)]
    return np.array([float(a[i][p]) for i in range(p)])


def run(rounds: int) -> dict[str, Any]:
    from lincomb import _core
    from lincomb._fit.linear import fit_from_design, fit_from_moments
    from lincomb._model.design import design_from_arrays

    rng = np.random.default_rng(0)
    n, p = 100_000, 20
    x = np.column_stack([np.ones(n), rng.normal(size=(n, p - 1))])
    y = x @ rng.normal(size=p) + rng.normal(size=n)
    design = design_from_arrays(x, y)
    tol = _core.RANK_TOL

    def shipped() -> Any:
        return fit_from_design(design, tol)

    def unchecked() -> Any:
        m = _core.moments_from_arrays(design.x, design.y, design.weights, design.intercept)
        return fit_from_moments(design, m, tol, rows=False)

    timing = _common.interleaved({"shipped": shipped, "unchecked": unchecked}, rounds)

    t = np.linspace(-8.8, -3.1, 82)
    xp = np.vander(t, 11, increasing=True)
    yp = np.random.default_rng(0).normal(size=82) + np.cos(t)
    exact = _exact(xp, yp)
    m = _core.moments_from_arrays(xp, yp, None, 0)
    sol = _core.solve(m)
    plain = sol.coefficients()
    _, refined = _core.refine(sol, xp, yp)

    def digits(b: np.ndarray) -> float:
        return float(-np.log10(np.max(np.abs(b - exact) / np.abs(exact))))

    return {
        "median_s": timing["median"],
        "ratio": _common.ratio(timing, "shipped", "unchecked"),
        "paired_ratio": _common.paired_ratio(timing, "shipped", "unchecked"),
        "cond_raw": float(np.linalg.cond(xp)),
        "cond_working": _core.condition_estimate(sol),
        "digits_plain": digits(plain),
        "digits_refined": digits(refined),
    }


def report(res: dict[str, Any]) -> str:
    return "\n".join(
        [
            f"well-conditioned fit n=100000 p=20: shipped {res['median_s']['shipped']:.4f} s,"
            f" check skipped {res['median_s']['unchecked']:.4f} s,"
            f" ratio {res['ratio']:.3f} (paired {res['paired_ratio']:.3f}; target <= 1.05)",
            f"polynomial degree 10 (cond {res['cond_raw']:.2g}, working {res['cond_working']:.2g}):"
            f" digits plain {res['digits_plain']:.1f}, refined {res['digits_refined']:.1f}",
            _common.blas_line(res["blas"]),
        ]
    )


def main(argv: list[str] | None = None) -> int:
    return _common.rounds_main(__doc__, run, report, 15, argv)


if __name__ == "__main__":
    sys.exit(main())
