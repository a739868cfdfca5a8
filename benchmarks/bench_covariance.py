"""Robust covariance benchmark: HC3 and one-way cluster tests against the classical test and
against statsmodels, measured in the same run.

Run (unset the two OpenBLAS variables for timing only, in this command alone)::

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_covariance.py
    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_covariance.py --json
    ... --threads 1      # limit BLAS threads (threadpoolctl) for the whole run

Needs the ``bench`` extra (statsmodels, threadpoolctl).  statsmodels is a timing and numerical
reference only.  Data: n = 100,000 rows, p = 20 columns (an intercept and 19 standard normal
columns, seeded), errors whose spread grows with the first regressor plus a shared effect per
cluster, 1,000 clusters; a 3-row restriction system.

1. **Robust test on an existing fit** -- ``fit.wald(r)`` (classical), the first
   ``fit.wald(r, covariance="HC3")`` and ``fit.wald(r, covariance=lc.clustered(by=g))`` on a
   fit (the remembered estimates dropped before each call, so each visits the rows once, in
   cache-sized blocks on one BLAS thread), the same tests again (the estimate computed once per
   fit and estimator is reused) and tests on fits prepared with ``fit.with_covariance(...)``,
   interleaved.  Reported as ratios to the classical test.  For information, the cost per test
   on a prepared fit does not grow with n (checked at n = 10,000 and 100,000).

   **Covariance over fit** (the target), in the same round robin: the fit's own time,
   ``lc.fit_arrays(X, y)`` (the factorization of the design; no formula is encoded, so this is
   the baseline), against the first robust test on the fitted model (the pass over the rows,
   the estimate and a 3-row Wald test) and against ``fit.with_covariance(...)`` alone (the
   pass and the estimate).  Target: the first HC3 test and the first one-way cluster test each
   at most 1.5 × the fit, at ``--threads 1`` and at the default.

2. **Robust fit + test against statsmodels** -- lincomb ``fit_arrays(X, y)`` then
   ``wald(r, covariance=...)`` against statsmodels ``OLS(y, X).fit(cov_type="HC3")`` /
   ``fit(cov_type="cluster", cov_kwds={"groups": g})`` then ``f_test((C, d))``, interleaved.
   Target: lincomb faster than statsmodels on each (ratio statsmodels / lincomb > 1).

Before timing, the F statistics are checked against statsmodels (``use_t=True``, so both use F
with df n − k for HC3 and G − 1 for clusters).

Timing: ``time.perf_counter``; two warm-up calls per callable; the competing callables run
interleaved (round robin) in every repeat, so load changes on a shared machine hit them alike;
we report the median time of each and the median of the per-repeat ratios.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable
from typing import Any

import numpy as np

try:
    from _common import blas_line, interleaved, paired_ratio, scaled_main
except ModuleNotFoundError:  # imported as benchmarks.<name> from the repository root
    from benchmarks._common import blas_line, interleaved, paired_ratio, scaled_main


SEED = 20240602
N = 100_000
P = 20
GROUPS = 1_000
PER_TEST_SYSTEMS = 200
#: The first robust test on a fitted model, as a multiple of the fit's own time, at most this.
TARGET = 1.5


def make_data(n: int, seed: int = SEED) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Intercept + 19 standard normal columns; heteroskedastic, cluster-correlated errors."""
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n), rng.normal(size=(n, P - 1))])
    g = rng.integers(0, GROUPS, size=n)
    beta = np.where(np.arange(P) % 2 == 0, 0.0, 0.02)
    beta[0] = 1.0
    effect = rng.normal(size=GROUPS)[g] * 0.5
    y = x @ beta + rng.normal(size=n) * (1.0 + 0.5 * np.abs(x[:, 1])) + effect
    return x, y, g


def run(repeats_scale: float = 1.0) -> dict[str, Any]:
    import warnings

    import scipy.linalg  # noqa: F401 - load scipy's BLAS so threadpoolctl reports it
    import statsmodels.api as sm

    import lincomb as lc

    def reps(n: int) -> int:
        return max(3, int(round(n * repeats_scale)))

    out: dict[str, Any] = {"load_average": {"start": os.getloadavg()[0]}}
    x, y, g = make_data(N)
    c3 = np.zeros((3, P))
    c3[0, 1] = 1.0
    c3[1, 2], c3[1, 3] = 1.0, -1.0
    c3[2, 4], c3[2, 5] = 1.0, 1.0
    d3 = np.array([0.0, 0.0, 0.04])
    r3 = lc.from_matrix(c3, d3)
    cluster = lc.clustered(by=g)
    warnings.simplefilter("error")  # nothing here should warn (1,000 clusters)

    # -- checks against statsmodels (F with df n - k and G - 1) ---------------------------
    f = lc.fit_arrays(x, y)
    sm_hc3 = sm.OLS(y, x).fit(cov_type="HC3", use_t=True).f_test((c3, d3))
    sm_cl = (
        sm.OLS(y, x).fit(cov_type="cluster", cov_kwds={"groups": g}, use_t=True).f_test((c3, d3))
    )
    lc_hc3 = f.wald(r3, covariance="HC3")
    lc_cl = f.wald(r3, covariance=cluster)
    checks = {
        "HC3_F_rel_diff": abs(lc_hc3.stat / float(np.squeeze(sm_hc3.fvalue)) - 1),
        "HC3_p_rel_diff": abs(lc_hc3.p / float(sm_hc3.pvalue) - 1),
        "cluster_F_rel_diff": abs(lc_cl.stat / float(np.squeeze(sm_cl.fvalue)) - 1),
        "cluster_p_rel_diff": abs(lc_cl.p / float(sm_cl.pvalue) - 1),
        "cluster_df_den": (lc_cl.df_error, float(sm_cl.df_denom)),
    }

    # -- 1. tests on one fit, and the covariance against the fit's own time ----------------
    try:
        from lincomb._covariance.cache import forget
    except ModuleNotFoundError:  # a version that remembers no estimates: every call is a first

        def forget(fit: Any = None) -> None:
            pass

    # first tests run on a fit of their own, whose remembered estimates are dropped before
    # each call; tests "again" run on ``f``, whose estimates stay
    fresh = lc.fit_arrays(x, y)

    def first(call: Callable[[], Any]) -> Callable[[], Any]:
        def run_first() -> Any:
            forget(fresh)  # this call visits the rows
            return call()

        return run_first

    f.wald(r3, covariance="HC3")  # remembered from here on
    f.wald(r3, covariance=cluster)
    prepared_hc3 = f.with_covariance("HC3")
    prepared_cl = f.with_covariance(cluster)
    r1 = interleaved(
        {
            "fit": lambda: lc.fit_arrays(x, y),
            "classical": lambda: f.wald(r3),
            "HC3": first(lambda: fresh.wald(r3, covariance="HC3")),
            "cluster": first(lambda: fresh.wald(r3, covariance=cluster)),
            "HC3_only": first(lambda: fresh.with_covariance("HC3")),
            "cluster_only": first(lambda: fresh.with_covariance(cluster)),
            "HC3_again": lambda: f.wald(r3, covariance="HC3"),
            "cluster_again": lambda: f.wald(r3, covariance=cluster),
            "prepared_HC3": lambda: prepared_hc3.wald(r3),
            "prepared_cluster": lambda: prepared_cl.wald(r3),
        },
        reps(15),
    )
    m1 = r1["median"]
    out["on_fit"] = {
        "n": N,
        "p": P,
        "rows": 3,
        "clusters": GROUPS,
        "classical_ms": 1e3 * m1["classical"],
        "HC3_ms": 1e3 * m1["HC3"],
        "cluster_ms": 1e3 * m1["cluster"],
        "HC3_again_ms": 1e3 * m1["HC3_again"],
        "cluster_again_ms": 1e3 * m1["cluster_again"],
        "prepared_HC3_ms": 1e3 * m1["prepared_HC3"],
        "prepared_cluster_ms": 1e3 * m1["prepared_cluster"],
        "HC3_over_classical": paired_ratio(r1, "HC3", "classical"),
        "cluster_over_classical": paired_ratio(r1, "cluster", "classical"),
        "HC3_again_over_classical": paired_ratio(r1, "HC3_again", "classical"),
        "cluster_again_over_classical": paired_ratio(r1, "cluster_again", "classical"),
        "prepared_HC3_over_classical": paired_ratio(r1, "prepared_HC3", "classical"),
        "prepared_cluster_over_classical": paired_ratio(r1, "prepared_cluster", "classical"),
    }
    out["over_fit"] = {
        "baseline": "lc.fit_arrays(X, y)",
        "fit_ms": 1e3 * m1["fit"],
        "HC3_test_ms": 1e3 * m1["HC3"],
        "cluster_test_ms": 1e3 * m1["cluster"],
        "HC3_ms": 1e3 * m1["HC3_only"],
        "cluster_ms": 1e3 * m1["cluster_only"],
        "HC3_test_over_fit": paired_ratio(r1, "HC3", "fit"),
        "cluster_test_over_fit": paired_ratio(r1, "cluster", "fit"),
        "HC3_over_fit": paired_ratio(r1, "HC3_only", "fit"),
        "cluster_over_fit": paired_ratio(r1, "cluster_only", "fit"),
        "target": TARGET,
    }

    # per-test cost on prepared fits does not grow with n
    small_x, small_y, small_g = make_data(10_000, SEED + 7)
    prepared = {
        10_000: lc.fit_arrays(small_x, small_y).with_covariance(lc.clustered(by=small_g)),
        N: prepared_cl,
    }
    rng = np.random.default_rng(SEED + 3)
    systems = []
    for _ in range(PER_TEST_SYSTEMS):
        i, j, h = rng.choice(np.arange(1, P), size=3, replace=False)
        systems.append((lc.coef(f"x{i}") == lc.coef(f"x{j}")) & (lc.coef(f"x{h}") == 0))

    def loop(fit: Any) -> Callable[[], Any]:
        return lambda: [fit.wald(s) for s in systems]

    r1b = interleaved({"n_10000": loop(prepared[10_000]), "n_100000": loop(prepared[N])}, reps(7))
    out["per_test"] = {
        "systems": PER_TEST_SYSTEMS,
        "n_10000_us": 1e6 * r1b["median"]["n_10000"] / PER_TEST_SYSTEMS,
        "n_100000_us": 1e6 * r1b["median"]["n_100000"] / PER_TEST_SYSTEMS,
        "ratio_1e5_to_1e4": paired_ratio(r1b, "n_100000", "n_10000"),
    }

    # -- 2. fit + robust test against statsmodels -----------------------------------------
    def lc_hc3_fit_test() -> Any:
        return lc.fit_arrays(x, y).wald(r3, covariance="HC3")

    def sm_hc3_fit_test() -> Any:
        return sm.OLS(y, x).fit(cov_type="HC3").f_test((c3, d3))

    def lc_cl_fit_test() -> Any:
        return lc.fit_arrays(x, y).wald(r3, covariance=lc.clustered(by=g))

    def sm_cl_fit_test() -> Any:
        return sm.OLS(y, x).fit(cov_type="cluster", cov_kwds={"groups": g}).f_test((c3, d3))

    def lc_fit() -> Any:
        return lc.fit_arrays(x, y)

    r2 = interleaved(
        {
            "lincomb_HC3": lc_hc3_fit_test,
            "statsmodels_HC3": sm_hc3_fit_test,
            "lincomb_cluster": lc_cl_fit_test,
            "statsmodels_cluster": sm_cl_fit_test,
            "lincomb_fit_only": lc_fit,
        },
        reps(9),
    )
    m2 = r2["median"]
    out["vs_statsmodels"] = {
        "lincomb_HC3_ms": 1e3 * m2["lincomb_HC3"],
        "statsmodels_HC3_ms": 1e3 * m2["statsmodels_HC3"],
        "lincomb_cluster_ms": 1e3 * m2["lincomb_cluster"],
        "statsmodels_cluster_ms": 1e3 * m2["statsmodels_cluster"],
        "lincomb_fit_only_ms": 1e3 * m2["lincomb_fit_only"],
        "speedup_HC3": paired_ratio(r2, "statsmodels_HC3", "lincomb_HC3"),
        "speedup_cluster": paired_ratio(r2, "statsmodels_cluster", "lincomb_cluster"),
    }
    out["checks"] = checks
    out["targets"] = {
        "HC3_test_within_1.5x_fit": out["over_fit"]["HC3_test_over_fit"] <= TARGET,
        "cluster_test_within_1.5x_fit": out["over_fit"]["cluster_test_over_fit"] <= TARGET,
        "HC3_faster_than_statsmodels": out["vs_statsmodels"]["speedup_HC3"] > 1,
        "cluster_faster_than_statsmodels": out["vs_statsmodels"]["speedup_cluster"] > 1,
    }
    warnings.resetwarnings()
    out["load_average"]["end"] = os.getloadavg()[0]
    return out


def report(res: dict[str, Any]) -> str:
    a, q, s, c = res["on_fit"], res["per_test"], res["vs_statsmodels"], res["checks"]
    o = res["over_fit"]
    lines = [
        f"python {res['python']}, numpy {res['numpy']}, scipy {res['scipy']},"
        f" statsmodels {res['statsmodels']}; OPENBLAS_CORETYPE={res['env']['OPENBLAS_CORETYPE']}"
        f" OPENBLAS_L2_SIZE={res['env']['OPENBLAS_L2_SIZE']}; thread limit: {res['threads']};"
        f" cpus: {res['cpu_count']}",
        blas_line(res["blas"]),
        f"load average (1 min) at start {res['load_average']['start']:.2f}, at end"
        f" {res['load_average']['end']:.2f} (2 cores shared: ratios are from the same round"
        " robin)",
        "",
        f"1. tests on one fit, n = {a['n']:,}, p = {a['p']}, {a['rows']}-row system,"
        f" {a['clusters']:,} clusters",
        f"   classical wald                {a['classical_ms']:9.3f} ms",
        f"   wald(covariance='HC3')        {a['HC3_ms']:9.3f} ms"
        f"   ({a['HC3_over_classical']:.0f}x classical)",
        f"   wald(covariance=clustered)    {a['cluster_ms']:9.3f} ms"
        f"   ({a['cluster_over_classical']:.0f}x classical)",
        f"   the same HC3 test again       {a['HC3_again_ms']:9.3f} ms"
        f"   ({a['HC3_again_over_classical']:.2f}x classical; estimate remembered)",
        f"   the same cluster test again   {a['cluster_again_ms']:9.3f} ms"
        f"   ({a['cluster_again_over_classical']:.2f}x classical; estimate remembered)",
        f"   prepared HC3 fit, wald        {a['prepared_HC3_ms']:9.3f} ms"
        f"   ({a['prepared_HC3_over_classical']:.2f}x classical)",
        f"   prepared cluster fit, wald    {a['prepared_cluster_ms']:9.3f} ms"
        f"   ({a['prepared_cluster_over_classical']:.2f}x classical)",
        f"   covariance over fit (baseline {o['baseline']}: {o['fit_ms']:.2f} ms), target"
        f" <= {o['target']}x:",
        f"     first wald(covariance='HC3')    {o['HC3_test_ms']:8.2f} ms"
        f"   {o['HC3_test_over_fit']:.2f}x fit  [{_mark(o['HC3_test_over_fit'], o['target'])}]",
        f"     first wald(covariance=clustered) {o['cluster_test_ms']:7.2f} ms"
        f"   {o['cluster_test_over_fit']:.2f}x fit  "
        f"[{_mark(o['cluster_test_over_fit'], o['target'])}]",
        f"     with_covariance('HC3') alone     {o['HC3_ms']:7.2f} ms"
        f"   {o['HC3_over_fit']:.2f}x fit",
        f"     with_covariance(clustered) alone {o['cluster_ms']:7.2f} ms"
        f"   {o['cluster_over_fit']:.2f}x fit",
        f"   per test on a prepared cluster fit: n = 10,000 {q['n_10000_us']:.1f} us,"
        f" n = 100,000 {q['n_100000_us']:.1f} us (ratio {q['ratio_1e5_to_1e4']:.2f})",
        "",
        "2. fit + robust test, against statsmodels fit(cov_type=...) + f_test",
        f"   lincomb HC3          {s['lincomb_HC3_ms']:9.2f} ms   statsmodels"
        f" {s['statsmodels_HC3_ms']:9.2f} ms   statsmodels / lincomb {s['speedup_HC3']:.2f}x",
        f"   lincomb cluster      {s['lincomb_cluster_ms']:9.2f} ms   statsmodels"
        f" {s['statsmodels_cluster_ms']:9.2f} ms   statsmodels / lincomb"
        f" {s['speedup_cluster']:.2f}x",
        f"   (lincomb fit alone   {s['lincomb_fit_only_ms']:9.2f} ms)",
        "",
        "checks vs statsmodels (use_t=True): "
        + ", ".join(f"{k} {v:.1e}" for k, v in c.items() if k != "cluster_df_den")
        + f"; cluster df_error (lincomb, statsmodels) {c['cluster_df_den']}",
        "targets met: " + ", ".join(f"{k}: {v}" for k, v in res["targets"].items()),
    ]
    return "\n".join(lines)


def _mark(ratio: float, target: float) -> str:
    return "target met" if ratio <= target else "TARGET MISSED"


def main(argv: list[str] | None = None) -> int:
    return scaled_main(__doc__, run, report, argv)


if __name__ == "__main__":
    sys.exit(main())
