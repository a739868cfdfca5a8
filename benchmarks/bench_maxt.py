"""Max-|t| simultaneous intervals against the studentized-range reference, in the same run.

Families (one-way layout, 12 levels, ``simultaneous("max-t")`` at the default tolerance, which
also integrates the adjusted p-values of every row):

* all pairs, 20 per level (balanced: the studentized range quadrature);
* all pairs, unequal group sizes (66 rows of rank 11: the general rule with the pairs control
  family);
* each level against the first, unequal sizes (11 rows of rank 11: the general rule alone);
* all pairs adjusted for a covariate, unequal sizes (66 rows of rank 11, correlated means:
  the general rule alone; no target in the issue, shown for what the general rule costs).

The reference is ``scipy.stats.studentized_range.ppf(0.95, 12, df)``, timed round robin with
the others.  The target of issue 12: at most 5 times the reference, no warning.  Beside each
family: its critical value, the reported 99% error bound on it, and ``|c − exact|`` where an
exact value is known: the studentized range (balanced pairs) and, for each level against the
first, a deterministic two-dimensional integral written here (the rows' correlations are
``λ_i λ_j``: given the first level's mean and ``S`` the rows are independent, common practice).

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE \
        python benchmarks/bench_maxt.py [--threads 1] [--json]

(run from the repository root with it first on ``PYTHONPATH`` to time a working tree.)
"""

from __future__ import annotations

import sys
import warnings
from typing import Any

import numpy as np
import pandas as pd

try:
    from benchmarks import _common
except ImportError:  # run as a script: this folder is first on sys.path
    import _common  # type: ignore[no-redef]

K, N = 12, 20
TARGET = 5.0


def _fit(sizes: list[int], seed: int, covariate: bool = False) -> Any:
    import lincomb as lc

    rng = np.random.default_rng(seed)
    g = np.repeat([f"g{i:02d}" for i in range(K)], sizes)
    trend = np.repeat(np.arange(K), sizes)
    if covariate:
        x = rng.normal(size=g.size) + 0.2 * trend
        y = rng.normal(size=g.size) + 0.3 * trend + 0.5 * x
        return lc.fit("y ~ g + x", pd.DataFrame({"g": g, "y": y, "x": x}))
    y = rng.normal(size=g.size) + 0.3 * trend
    return lc.fit("y ~ g", pd.DataFrame({"g": g, "y": y}))


def many_to_one_exact(sizes: list[int], df: float, level: float = 0.95) -> float:
    """The critical value of each level against the first (unequal sizes, common variance).

    ``T_i = (X_i − X_0) / (S w_i)`` with independent means: the correlations are
    ``λ_i λ_j``, ``λ_i = √(n_i / (n_i + n_0))``, and given ``Z_0`` (the first mean, scaled)
    and ``S`` the rows are independent, so ``P(max|T| <= c) = E_S ∫ φ(z) ∏_i [Φ((cS − λ_i z)
    / √(1−λ_i²)) − Φ((−cS − λ_i z) / √(1−λ_i²))] dz``: adaptive quadrature over ``S``
    (scipy.integrate.quad) of a trapezoid rule in ``z`` on [−12, 12] (801 nodes), root by
    Brent's method.
    """
    from scipy import integrate, optimize, special

    n = np.asarray(sizes, dtype=np.float64)
    lam = np.sqrt(n[1:] / (n[1:] + n[0]))
    b = np.sqrt(1 - lam**2)
    z = np.linspace(-12.0, 12.0, 801)
    wz = np.full(z.size, z[1] - z[0]) * np.exp(-0.5 * z * z) / np.sqrt(2 * np.pi)
    wz[[0, -1]] /= 2

    def given_s(c: float, s: float) -> float:
        arg = (c * s - lam[:, None] * z[None, :]) / b[:, None]
        low = (-c * s - lam[:, None] * z[None, :]) / b[:, None]
        inside = special.ndtr(arg) - special.ndtr(low)
        return float(np.prod(inside, axis=0) @ wz)

    log_norm = np.log(2.0) + (df / 2) * np.log(df / 2) - special.gammaln(df / 2)

    def prob(c: float) -> float:
        def integrand(s: float) -> float:
            dens = np.exp(log_norm + (df - 1) * np.log(s) - df * s * s / 2)
            return given_s(c, s) * float(dens)

        val, _err = integrate.quad(integrand, 1e-6, 4.0, epsabs=1e-13, epsrel=1e-12, limit=200)
        return val

    return float(optimize.brentq(lambda c: prob(c) - level, 2.0, 4.0, xtol=1e-12))


def run(rounds: int) -> dict[str, Any]:
    import scipy.stats as st

    import lincomb as lc

    bal = _fit([N] * K, 1)
    sizes = [int(v) for v in np.random.default_rng(2).integers(12, 29, size=K)]
    unb = _fit(sizes, 3)
    cov = _fit(sizes, 3, covariate=True)
    w_bal = bal.wald(lc.levels("g").pairwise())
    w_unb = unb.wald(lc.levels("g").pairwise())
    w_gen = unb.wald(lc.levels("g").versus("g00"))
    w_cov = cov.wald(lc.levels("g").pairwise())
    df = float(bal.df_error)
    fns = {
        "studentized_range_ppf": lambda: st.studentized_range.ppf(0.95, K, df),
        "maxt_balanced_pairs": lambda: w_bal.simultaneous("max-t"),
        "maxt_unbalanced_pairs": lambda: w_unb.simultaneous("max-t"),
        "maxt_many_to_one": lambda: w_gen.simultaneous("max-t"),
        "maxt_pairs_with_covariate": lambda: w_cov.simultaneous("max-t"),
    }
    sims: dict[str, Any] = {}
    warned: dict[str, list[str]] = {}
    for name, f in fns.items():
        if name.startswith("maxt"):
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always")
                sims[name] = f()
            warned[name] = sorted({str(w.message)[:90] for w in caught})
    with warnings.catch_warnings(record=True):  # counted above, once per family
        warnings.simplefilter("always")
        res = _common.interleaved(fns, rounds, warmup=1)
    exact = {
        "maxt_balanced_pairs": float(st.studentized_range.ppf(0.95, K, df)) / np.sqrt(2),
        "maxt_many_to_one": many_to_one_exact(sizes, float(unb.df_error)),
    }
    res["ratios"] = {name: _common.ratio(res, name, "studentized_range_ppf") for name in sims}
    res["paired_ratios"] = {
        name: _common.paired_ratio(res, name, "studentized_range_ppf") for name in sims
    }
    res["critical_values"] = {name: float(s.critical_value) for name, s in sims.items()}
    res["critical_errors"] = {
        name: float(s.integration.critical_error or 0.0) for name, s in sims.items()
    }
    res["critical_std_errors"] = {
        name: float(s.integration.critical_std_error or 0.0) for name, s in sims.items()
    }
    res["minus_exact"] = {
        name: abs(res["critical_values"][name] - value) for name, value in exact.items()
    }
    res["routines"] = {name: s.integration.text() for name, s in sims.items()}
    res["warnings"] = warned
    res["target_met"] = {
        name: bool(res["ratios"][name] <= TARGET and not warned[name]) for name in sims
    }
    res.pop("times")
    return res


def report(res: dict[str, Any]) -> str:
    lines = [
        f"max-|t| intervals, {K} levels (load average {res['load_average']:.2f} before,"
        f" {res['load_average_after']:.2f} after; threads {res['threads']})",
        f"  reference studentized_range.ppf: {res['median']['studentized_range_ppf']:.4f} s",
    ]
    for name, r in res["ratios"].items():
        met = "met" if res["target_met"][name] else "NOT met"
        lines.append(
            f"  {name}: {res['median'][name]:.4f} s, ratio {r:.2f}"
            f" (paired {res['paired_ratios'][name]:.2f}); target <= {TARGET:g}x, no warning:"
            f" {met}"
        )
        exact = res["minus_exact"].get(name)
        lines.append(
            f"    c = {res['critical_values'][name]:.6f}, reported error <="
            f" {res['critical_errors'][name]:.2g} (99%), s.e. "
            f"{res['critical_std_errors'][name]:.2g}, |c - exact| = "
            + ("unknown" if exact is None else f"{exact:.2g}")
        )
        lines.append(f"    {res['routines'][name]}")
        if res["warnings"][name]:
            lines.append(f"    warnings: {res['warnings'][name]}")
    lines.append(_common.blas_line(res["blas"]))
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    return _common.rounds_main(__doc__, run, report, 5, argv)


if __name__ == "__main__":
    sys.exit(main())
