"""Wild cluster bootstrap benchmark: 9,999 draws as a ratio to one classical fit.

Run (unset the two OpenBLAS variables for timing only, in this command alone)::

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_bootstrap.py
    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_bootstrap.py --json

Data: n = 100,000 rows, p = 20 columns (an intercept and 19 standard normal columns, seeded),
20 clusters of 5,000 rows with a shared effect per cluster; a one-row restriction.

Measured, interleaved round robin in the same run (median of the rounds, and the median of the
per-round ratios):

* ``fit``: ``lc.fit_arrays(X, y)``, one classical fit (the baseline);
* ``bootstrap``: ``lc.wild_bootstrap(fit, r, by=g, draws=9999, seed=1)`` on that fit (one pass
  over the rows for the per-cluster pieces, the restricted fit, and the 9,999 draws as small
  matrix products).  Target: at most 20× the fit.
* ``draws only``: the draws from the prepared pieces (no pass over the rows).

Both at one BLAS thread (threadpoolctl) and at the library default, in one run.  Before
timing, the vectorized draws are checked against brute-force refits on 20 of the weight
vectors (equal to 1e-10 relative).
"""

from __future__ import annotations

import os
import sys
from typing import Any

import numpy as np

try:
    from _common import blas_line, emit, interleaved, machine, paired_ratio, parser, versions
except ModuleNotFoundError:  # imported as benchmarks.<name> from the repository root
    from benchmarks._common import (
        blas_line,
        emit,
        interleaved,
        machine,
        paired_ratio,
        parser,
        versions,
    )

N, P, G, DRAWS = 100_000, 20, 20, 9999


def _data() -> tuple[Any, Any, Any]:
    rng = np.random.default_rng(20261202)
    x = np.column_stack([np.ones(N), rng.normal(size=(N, P - 1))])
    g = np.repeat(np.arange(G), N // G)
    y = x @ rng.normal(size=P) + rng.normal(size=G)[g] + rng.normal(size=N)
    return x, y, g


def _check(lc: Any, x: Any, y: Any) -> float:
    """Largest relative gap between vectorized draws and brute-force refits (20 vectors)."""
    from lincomb._covariance.wild import bootstrap_weights, draw_statistics

    n = 2_000  # a smaller slice keeps the brute force quick
    xs, ys, gs = x[:n], y[:n], np.repeat(np.arange(G), n // G)
    names = [f"x{j}" for j in range(P)]
    f = lc.fit_arrays(xs, ys, names=names)
    r = lc.coef("x1") == 0
    w, _ = bootstrap_weights("rademacher", G, 20, 3, False)
    _, fast = draw_statistics(f, r, gs, w)
    beta = f.restrict(r).coefficients.to_numpy()
    er = ys - xs @ beta
    brute = []
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for wv in w:
            f2 = lc.fit_arrays(xs, xs @ beta + wv[gs] * er, names=names)
            brute.append(f2.wald(r, covariance=lc.clustered(by=gs)).stat)
    return float(np.max(np.abs(fast - np.array(brute)) / np.abs(np.array(brute))))


def _measure(lc: Any, x: Any, y: Any, g: Any, rounds: int) -> dict[str, Any]:
    from lincomb._covariance.wild import _prepare_null, _setup, _stats, bootstrap_weights

    names = [f"x{j}" for j in range(P)]
    fit = lc.fit_arrays(x, y, names=names)
    r = lc.coef("x1") == 0
    st = _setup(fit, r, g)
    prep = _prepare_null(fit, st, st.target)
    w, _ = bootstrap_weights("rademacher", G, DRAWS, 1, False)
    res = interleaved(
        {
            "fit": lambda: lc.fit_arrays(x, y, names=names),
            "bootstrap": lambda: lc.wild_bootstrap(fit, r, by=g, draws=DRAWS, seed=1),
            "draws_only": lambda: _stats(prep, w),
        },
        rounds,
        warmup=1,
    )
    return {
        "median_s": res["median"],
        "bootstrap_over_fit": paired_ratio(res, "bootstrap", "fit"),
        "draws_only_over_fit": paired_ratio(res, "draws_only", "fit"),
    }


def main(argv: list[str] | None = None) -> int:
    ap = parser(__doc__)
    ap.add_argument("--rounds", type=int, default=7, help="interleaved rounds (default 7)")
    args = ap.parse_args(argv)
    import scipy.linalg  # noqa: F401  (load every BLAS before limiting threads)
    from threadpoolctl import threadpool_limits

    import lincomb as lc

    x, y, g = _data()
    gap = _check(lc, x, y)
    out: dict[str, Any] = {"n": N, "p": P, "clusters": G, "draws": DRAWS, "brute_force_gap": gap}
    with threadpool_limits(1):
        out["one_thread"] = _measure(lc, x, y, g, args.rounds)
    out["default_threads"] = _measure(lc, x, y, g, args.rounds)
    out["machine"] = machine()
    out.update(versions(args.threads))
    lines = [
        f"Wild cluster bootstrap: n = {N:,}, p = {P}, {G} clusters, {DRAWS:,} draws",
        f"load average (1 min): {os.getloadavg()[0]:.2f}; {blas_line(out['machine']['blas'])}",
        f"vectorized draws vs brute-force refits (20 vectors, n = 2,000): max rel. gap {gap:.1e}",
    ]
    for key, title in (("one_thread", "1 BLAS thread"), ("default_threads", "default threads")):
        m = out[key]
        lines.append(
            f"{title:>16}: fit {m['median_s']['fit'] * 1e3:8.1f} ms | bootstrap"
            f" {m['median_s']['bootstrap'] * 1e3:8.1f} ms ({m['bootstrap_over_fit']:.2f}× the"
            f" fit; target ≤ 20) | draws only {m['median_s']['draws_only'] * 1e3:7.1f} ms"
            f" ({m['draws_only_over_fit']:.2f}×)"
        )
    emit("\n".join(lines), out, args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
