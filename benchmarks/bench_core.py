"""Core benchmark: one fit and test, and many tests on one fit, against baselines in the same run.

Run (unset the two OpenBLAS variables for timing only, in this command alone)::

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_core.py
    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_core.py --json
    ... --threads 1      # limit BLAS threads (threadpoolctl) for the whole run

Needs the ``bench`` extra (statsmodels, threadpoolctl).  statsmodels is a timing and numerical
reference only.  Everything is measured in one run, on the same data:

1. **Single fit** -- n = 100,000 rows, p = 20 columns (an intercept and 19 standard normal
   columns, seeded), a 3-row restriction system.

   * lincomb: ``lc.fit_arrays(X, y)`` then ``fit.wald(lc.from_matrix(C, d))``;
   * bare QR: ``numpy.linalg.qr(Xy, mode="r")`` of the already stacked ``[X y]`` (the least a
     QR-based fit can do; the stacking is not timed);
   * statsmodels: ``OLS(y, X).fit()`` then ``res.f_test((C, d))``.

   Targets: lincomb / bare QR <= 1.2; statsmodels / lincomb >= 3.

2. **Batch** -- 1,000 different 2-row systems on that one fit (row 0 equates two random
   coefficients, row 1 sets a third to zero).

   * lincomb: ``fit.wald_batch(C)`` with a ``(1000, 2, 20)`` array, and with 1,000 restriction
     systems built from names (these are resolved first; building them is not timed);
   * statsmodels: a loop of ``res.f_test((C_s, d_s))`` over the same systems;
   * for information, a loop of lincomb's single-system ``fit.wald``.

   Target: statsmodels loop / lincomb batch >= 100.

3. **Per-system cost vs n** -- the array batch on fits with n = 10,000 and n = 1,000,000 (same
   columns, same systems), per system.  Target: equal within noise.

Timing: ``time.perf_counter``; two warm-up calls per callable; the competing callables of a
figure run interleaved: in rounds, each callable a few times in a row (short ones more often),
so load changes on a shared machine hit them alike.  Headline ratios are ratios of median times
over all calls.  The ``paired`` ratios use only the first call of each callable in each round,
right after the other libraries ran: numpy and scipy each bring their own OpenBLAS, whose threads
keep spinning for a while after a call, so on two cores a first call after the other library
is slower (a "cold" view).  Before timing, the batch
results are checked against statsmodels and the single-system path (max relative difference of
F).  On a machine whose cores are busy, OpenBLAS threads wait for one another: compare a run
with ``--threads 1``.
"""

from __future__ import annotations

import sys
from typing import Any

import numpy as np

try:
    from _common import blas_line, interleaved, paired_ratio, ratio, scaled_main
except ModuleNotFoundError:  # imported as benchmarks.<name> from the repository root
    from benchmarks._common import blas_line, interleaved, paired_ratio, ratio, scaled_main

SEED = 20240601
N_SINGLE = 100_000
P = 20
K_SYSTEMS = 1_000


def make_data(n: int, seed: int = SEED) -> tuple[np.ndarray, np.ndarray]:
    """Intercept + 19 standard normal columns; y with half of the slopes zero plus noise."""
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n), rng.normal(size=(n, P - 1))])
    beta = np.where(np.arange(P) % 2 == 0, 0.0, 0.02)
    beta[0] = 1.0
    y = x @ beta + rng.normal(size=n)
    return x, y


def make_systems(k: int, seed: int = SEED + 1) -> tuple[np.ndarray, np.ndarray, list[tuple]]:
    """k distinct 2-row systems: b_i - b_j = 0 and b_h = 0 (i, j, h distinct slopes)."""
    rng = np.random.default_rng(seed)
    seen: set[tuple[int, int, int]] = set()
    picks = []
    while len(picks) < k:
        i, j, h = (int(v) for v in rng.choice(np.arange(1, P), size=3, replace=False))
        if (i, j, h) not in seen:
            seen.add((i, j, h))
            picks.append((i, j, h))
    c = np.zeros((k, 2, P))
    for s, (i, j, h) in enumerate(picks):
        c[s, 0, i], c[s, 0, j], c[s, 1, h] = 1.0, -1.0, 1.0
    return c, np.zeros((k, 2)), picks


def run(repeats_scale: float = 1.0) -> dict[str, Any]:
    import scipy.linalg  # noqa: F401 - load scipy's BLAS so threadpoolctl reports it
    import statsmodels.api as sm

    import lincomb as lc

    def reps(n: int) -> int:
        return max(3, int(round(n * repeats_scale)))

    out: dict[str, Any] = {}
    x, y = make_data(N_SINGLE)
    xy = np.column_stack([x, y])

    # -- 1. single fit + 3-row test ------------------------------------------------------
    c3 = np.zeros((3, P))
    c3[0, 1] = 1.0
    c3[1, 2], c3[1, 3] = 1.0, -1.0
    c3[2, 4], c3[2, 5] = 1.0, 1.0
    d3 = np.array([0.0, 0.0, 0.04])

    def lincomb_single() -> Any:
        f = lc.fit_arrays(x, y)
        return f.wald(lc.from_matrix(c3, d3))

    def numpy_qr() -> Any:
        return np.linalg.qr(xy, mode="r")

    def statsmodels_single() -> Any:
        res = sm.OLS(y, x).fit()
        return res.f_test((c3, d3))

    w = lincomb_single()
    ref = statsmodels_single()
    single_check = abs(w.stat / float(np.squeeze(ref.fvalue)) - 1)
    r1 = interleaved(
        {"lincomb": lincomb_single, "numpy_qr": numpy_qr, "statsmodels": statsmodels_single},
        reps(5),
        inner={"lincomb": 5, "numpy_qr": 5, "statsmodels": 5},
    )
    f_single = lc.fit_arrays(x, y)
    r1b = interleaved(
        {"fit": lambda: lc.fit_arrays(x, y), "wald": lambda: f_single.wald(lc.from_matrix(c3, d3))},
        reps(15),
    )
    out["single"] = {
        "n": N_SINGLE,
        "p": P,
        "rows": 3,
        "lincomb_ms": 1e3 * r1["median"]["lincomb"],
        "lincomb_fit_ms": 1e3 * r1b["median"]["fit"],
        "lincomb_wald_ms": 1e3 * r1b["median"]["wald"],
        "numpy_qr_ms": 1e3 * r1["median"]["numpy_qr"],
        "statsmodels_ms": 1e3 * r1["median"]["statsmodels"],
        "ratio_to_numpy_qr": ratio(r1, "lincomb", "numpy_qr"),
        "speedup_vs_statsmodels": ratio(r1, "statsmodels", "lincomb"),
        "paired_ratio_to_numpy_qr": paired_ratio(r1, "lincomb", "numpy_qr"),
        "paired_speedup_vs_statsmodels": paired_ratio(r1, "statsmodels", "lincomb"),
        "check_F_rel_diff_vs_statsmodels": single_check,
    }

    # -- 2. 1,000 two-row systems on one fit ------------------------------------------------
    c, d, picks = make_systems(K_SYSTEMS)
    names = f_single.names
    systems = [
        (lc.coef(names[i]) == lc.coef(names[j])) & (lc.coef(names[h]) == 0) for i, j, h in picks
    ]
    sm_res = sm.OLS(y, x).fit()

    def sm_loop() -> Any:
        return [sm_res.f_test((c[s], d[s])) for s in range(K_SYSTEMS)]

    def lc_loop() -> Any:
        return [f_single.wald(lc.from_matrix(c[s], d[s])) for s in range(K_SYSTEMS)]

    def lc_batch() -> Any:
        return f_single.wald_batch(c, d)

    def lc_batch_named() -> Any:
        return f_single.wald_batch(systems)

    b = lc_batch()
    bn = lc_batch_named()
    sm_f = np.array([float(np.squeeze(t.fvalue)) for t in sm_loop()])
    lc_f = np.array([t.stat for t in lc_loop()])
    batch_check = {
        "F_rel_diff_vs_statsmodels": float(np.max(np.abs(b.stat / sm_f - 1))),
        "F_rel_diff_vs_single_wald": float(np.max(np.abs(b.stat / lc_f - 1))),
        "F_rel_diff_named_vs_array": float(np.max(np.abs(bn.stat / b.stat - 1))),
    }
    r2 = interleaved(
        {
            "statsmodels_loop": sm_loop,
            "lincomb_batch": lc_batch,
            "lincomb_batch_named": lc_batch_named,
            "lincomb_wald_loop": lc_loop,
        },
        reps(7),
        inner={"lincomb_batch": 9, "lincomb_batch_named": 3},
    )
    med = r2["median"]
    out["batch"] = {
        "systems": K_SYSTEMS,
        "rows": 2,
        "n": N_SINGLE,
        "statsmodels_loop_ms": 1e3 * med["statsmodels_loop"],
        "statsmodels_per_system_us": 1e6 * med["statsmodels_loop"] / K_SYSTEMS,
        "lincomb_batch_ms": 1e3 * med["lincomb_batch"],
        "lincomb_batch_per_system_us": 1e6 * med["lincomb_batch"] / K_SYSTEMS,
        "lincomb_batch_named_ms": 1e3 * med["lincomb_batch_named"],
        "lincomb_batch_named_per_system_us": 1e6 * med["lincomb_batch_named"] / K_SYSTEMS,
        "lincomb_wald_loop_ms": 1e3 * med["lincomb_wald_loop"],
        "speedup_batch_vs_statsmodels": ratio(r2, "statsmodels_loop", "lincomb_batch"),
        "speedup_batch_named_vs_statsmodels": ratio(r2, "statsmodels_loop", "lincomb_batch_named"),
        "speedup_batch_vs_wald_loop": ratio(r2, "lincomb_wald_loop", "lincomb_batch"),
        "paired_speedup_batch_vs_statsmodels": paired_ratio(
            r2, "statsmodels_loop", "lincomb_batch"
        ),
        "checks": batch_check,
    }

    # -- 3. per-system cost at n = 10,000 and n = 1,000,000 --------------------------------
    fits = {}
    for n in (10_000, 1_000_000):
        xs, ys = make_data(n)
        fits[n] = lc.fit_arrays(xs, ys)
        del xs, ys
    r3 = interleaved(
        {
            "n_10000": lambda: fits[10_000].wald_batch(c, d),
            "n_1000000": lambda: fits[1_000_000].wald_batch(c, d),
        },
        reps(21),
        inner={"n_10000": 3, "n_1000000": 3},
    )
    out["per_system"] = {
        "systems": K_SYSTEMS,
        "n_10000_us": 1e6 * r3["median"]["n_10000"] / K_SYSTEMS,
        "n_1000000_us": 1e6 * r3["median"]["n_1000000"] / K_SYSTEMS,
        "ratio_1e6_to_1e4": ratio(r3, "n_1000000", "n_10000"),
        "paired_ratio_1e6_to_1e4": paired_ratio(r3, "n_1000000", "n_10000"),
    }
    out["targets"] = {
        "single_ratio_to_numpy_qr<=1.2": out["single"]["ratio_to_numpy_qr"] <= 1.2,
        "single_speedup_vs_statsmodels>=3": out["single"]["speedup_vs_statsmodels"] >= 3,
        "batch_speedup_vs_statsmodels>=100": out["batch"]["speedup_batch_vs_statsmodels"] >= 100,
    }
    return out


def report(res: dict[str, Any]) -> str:
    s, b, q = res["single"], res["batch"], res["per_system"]
    lines = [
        f"python {res['python']}, numpy {res['numpy']}, scipy {res['scipy']},"
        f" statsmodels {res['statsmodels']}; OPENBLAS_CORETYPE={res['env']['OPENBLAS_CORETYPE']}"
        f" OPENBLAS_L2_SIZE={res['env']['OPENBLAS_L2_SIZE']}; thread limit: {res['threads']}",
        blas_line(res["blas"]),
        "",
        f"1. single fit, n = {s['n']:,}, p = {s['p']}, {s['rows']}-row Wald test",
        f"   lincomb fit_arrays + wald  {s['lincomb_ms']:9.2f} ms"
        f"   (fit {s['lincomb_fit_ms']:.2f} ms, wald {s['lincomb_wald_ms']:.3f} ms)",
        f"   numpy.linalg.qr([X y], 'r') {s['numpy_qr_ms']:8.2f} ms",
        f"   statsmodels OLS + f_test    {s['statsmodels_ms']:8.2f} ms",
        f"   ratio lincomb / bare QR        {s['ratio_to_numpy_qr']:.2f}   (target <= 1.2;"
        f" paired {s['paired_ratio_to_numpy_qr']:.2f})",
        f"   statsmodels / lincomb          {s['speedup_vs_statsmodels']:.1f}x  (target >= 3;"
        f" paired {s['paired_speedup_vs_statsmodels']:.1f}x)",
        "",
        f"2. {b['systems']:,} different {b['rows']}-row systems on one fit (n = {b['n']:,})",
        f"   statsmodels f_test loop     {b['statsmodels_loop_ms']:9.2f} ms"
        f"  ({b['statsmodels_per_system_us']:.1f} us/system)",
        f"   lincomb wald_batch (array)  {b['lincomb_batch_ms']:9.2f} ms"
        f"  ({b['lincomb_batch_per_system_us']:.2f} us/system)",
        f"   lincomb wald_batch (named)  {b['lincomb_batch_named_ms']:9.2f} ms"
        f"  ({b['lincomb_batch_named_per_system_us']:.2f} us/system; resolves each system)",
        f"   lincomb wald loop           {b['lincomb_wald_loop_ms']:9.2f} ms",
        f"   statsmodels / batch (array)    {b['speedup_batch_vs_statsmodels']:.0f}x"
        f"  (target >= 100; paired {b['paired_speedup_batch_vs_statsmodels']:.0f}x)",
        f"   statsmodels / batch (named)    {b['speedup_batch_named_vs_statsmodels']:.1f}x",
        f"   wald loop / batch (array)      {b['speedup_batch_vs_wald_loop']:.0f}x",
        "   checks (max relative difference of F): "
        + ", ".join(f"{k} {v:.1e}" for k, v in b["checks"].items()),
        "",
        f"3. per-system cost of the array batch ({q['systems']:,} systems)",
        f"   n = 10,000      {q['n_10000_us']:.2f} us/system",
        f"   n = 1,000,000   {q['n_1000000_us']:.2f} us/system"
        f"   (ratio {q['ratio_1e6_to_1e4']:.2f}, paired {q['paired_ratio_1e6_to_1e4']:.2f};"
        " target: equal within noise)",
        "",
        "targets met: " + ", ".join(f"{k}: {v}" for k, v in res["targets"].items()),
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    return scaled_main(__doc__, run, report, argv)


if __name__ == "__main__":
    sys.exit(main())
