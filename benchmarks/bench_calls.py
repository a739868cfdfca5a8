"""Per-call cost of tests written with names: single ``fit.wald`` calls and named batches.

Run (unset the two OpenBLAS variables for timing only, in this command alone)::

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_calls.py
    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_calls.py --json
    ... --threads 1      # limit BLAS threads (threadpoolctl) for the whole run

Needs the ``bench`` extra (statsmodels, threadpoolctl).  statsmodels is a timing and numerical
reference only.  Everything is measured in one run, on the data of ``bench_core.py``: n =
100,000 rows, p = 20 columns (an intercept and 19 standard normal columns, seeded), fitted once
by each library; the columns are named ``Intercept, x1 .. x19``.

1. **Single tests in a loop** -- 1,000 different 3-row systems written with names,
   ``(coef("xi") == coef("xj")) & (coef("xh") == 0) & (coef("xa") + coef("xb") == 0.04)``
   (five distinct slopes per system, seeded), built before timing.

   * lincomb: ``[fit.wald(s) for s in systems]``;
   * statsmodels: ``[res.f_test((C_s, d_s)) for ...]`` on the same systems as arrays (its
     fastest form: no parsing of names);
   * for information, a lincomb loop that also builds each system inside the loop, and one
     call repeated on one system.

   Targets: per lincomb call <= 0.1 ms; statsmodels loop / lincomb loop >= 2.

2. **A named batch** -- 1,000 different 2-row systems (``coef("xi") == coef("xj")`` and
   ``coef("xh") == 0``, the systems of ``bench_core.py``), written with names as the README
   writes them, in one ``fit.wald_batch(systems)`` call (resolving the names is timed).

   * statsmodels: a loop of ``res.f_test((C_s, d_s))`` over the same systems;
   * for information, the same systems as a ``(1000, 2, 20)`` array in ``fit.wald_batch``.

   Target: statsmodels loop / named batch >= 100.

3. **For information: the README's form on a formula fit** -- the field trial,
   ``yield_t_ha ~ C(nitrogen) * variety + rainfall_mm`` (216 rows, 13 columns), 1,000 2-row
   systems ``n[a] == n[b]`` and ``coef("rainfall_mm") == 0`` with ``n = term("C(nitrogen)")``
   (the pair of levels drawn at random per system, seeded), in one ``wald_batch`` call, against
   a statsmodels ``f_test`` loop on the same design matrix.

Timing: ``time.perf_counter``; two warm-up calls per callable; competing callables run
interleaved in rounds so that load changes on a shared machine hit them alike; headline ratios
are ratios of median times; ``paired`` ratios use the first call of each callable per round.
On a loaded machine a loop of 1,000 calls waits while other processes run, so it is also timed
in CPU time of this thread (``time.thread_time``, the work done), and one call repeated is
timed call by call (its median is a call that ran uninterrupted).
Before timing, F statistics are checked against statsmodels (largest relative difference).
The load average (1 minute) is printed before and after the run.
"""

from __future__ import annotations

import os
import sys
import time
from typing import Any

import numpy as np

try:
    from _common import blas_line, interleaved, paired_ratio, ratio, scaled_main
    from bench_core import P, make_data, make_systems
except ModuleNotFoundError:  # imported as benchmarks.<name> from the repository root
    from benchmarks._common import blas_line, interleaved, paired_ratio, ratio, scaled_main
    from benchmarks.bench_core import P, make_data, make_systems

SEED = 20261203
N = 100_000
K_SYSTEMS = 1_000


def make_three_row(k: int, seed: int = SEED) -> list[tuple[int, int, int, int, int]]:
    """k distinct picks of five distinct slopes (i, j, h, a, b)."""
    rng = np.random.default_rng(seed)
    seen: set[tuple[int, ...]] = set()
    picks: list[tuple[int, int, int, int, int]] = []
    while len(picks) < k:
        i, j, h, a, b = (int(v) for v in rng.choice(np.arange(1, P), size=5, replace=False))
        if (i, j, h, a, b) not in seen:
            seen.add((i, j, h, a, b))
            picks.append((i, j, h, a, b))
    return picks


def _load() -> float | None:
    return os.getloadavg()[0] if hasattr(os, "getloadavg") else None


def cpu_interleaved(fns: dict[str, Any], rounds: int) -> dict[str, float]:
    """Median CPU time of this thread (``time.thread_time``) per call, round robin: the work
    done, whatever other processes take of the cores meanwhile."""
    times: dict[str, list[float]] = {name: [] for name in fns}
    for _ in range(rounds):
        for name, f in fns.items():
            t0 = time.thread_time()
            f()
            times[name].append(time.thread_time() - t0)
    return {k: float(np.median(v)) for k, v in times.items()}


def run(repeats_scale: float = 1.0) -> dict[str, Any]:
    import statsmodels.api as sm

    import lincomb as lc

    def reps(n: int) -> int:
        return max(3, int(round(n * repeats_scale)))

    out: dict[str, Any] = {"load_average_before": _load()}
    x, y = make_data(N)
    names = ["Intercept"] + [f"x{j}" for j in range(1, P)]
    fit = lc.fit_arrays(x, y, names=names)
    sm_res = sm.OLS(y, x).fit()
    coef = lc.coef

    # -- 1. single named tests in a loop ------------------------------------------------------
    picks = make_three_row(K_SYSTEMS)

    def build(i: int, j: int, h: int, a: int, b: int) -> Any:
        return (
            (coef(names[i]) == coef(names[j]))
            & (coef(names[h]) == 0)
            & (coef(names[a]) + coef(names[b]) == 0.04)
        )

    systems3 = [build(*pk) for pk in picks]
    c3 = np.zeros((K_SYSTEMS, 3, P))
    for s, (i, j, h, a, b) in enumerate(picks):
        c3[s, 0, i], c3[s, 0, j], c3[s, 1, h], c3[s, 2, a], c3[s, 2, b] = 1, -1, 1, 1, 1
    d3 = np.tile([0.0, 0.0, 0.04], (K_SYSTEMS, 1))

    def lc_loop() -> Any:
        return [fit.wald(s) for s in systems3]

    def lc_loop_build() -> Any:
        return [fit.wald(build(*pk)) for pk in picks]

    def sm_loop3() -> Any:
        return [sm_res.f_test((c3[s], d3[s])) for s in range(K_SYSTEMS)]

    lc_f = np.array([t.stat for t in lc_loop()])
    sm_f = np.array([float(np.squeeze(t.fvalue)) for t in sm_loop3()])
    check1 = float(np.max(np.abs(lc_f / sm_f - 1)))
    r1 = interleaved(
        {
            "lincomb_loop": lc_loop,
            "statsmodels_loop": sm_loop3,
            "lincomb_loop_build": lc_loop_build,
        },
        reps(7),
    )
    cpu = cpu_interleaved({"lincomb_loop": lc_loop, "statsmodels_loop": sm_loop3}, reps(5))
    one = systems3[0]
    r1b = interleaved(
        {
            "wald": lambda: fit.wald(one),
            "f_test": lambda: sm_res.f_test((c3[0], d3[0])),
        },
        reps(15),
        inner={"wald": 40, "f_test": 40},
    )
    med = r1["median"]
    out["single"] = {
        "n": N,
        "p": P,
        "rows": 3,
        "systems": K_SYSTEMS,
        "lincomb_per_call_ms": 1e3 * med["lincomb_loop"] / K_SYSTEMS,
        "lincomb_build_and_call_ms": 1e3 * med["lincomb_loop_build"] / K_SYSTEMS,
        "statsmodels_per_call_ms": 1e3 * med["statsmodels_loop"] / K_SYSTEMS,
        "lincomb_loop_ms": 1e3 * med["lincomb_loop"],
        "statsmodels_loop_ms": 1e3 * med["statsmodels_loop"],
        "speedup_loop_vs_statsmodels": ratio(r1, "statsmodels_loop", "lincomb_loop"),
        "paired_speedup_loop_vs_statsmodels": paired_ratio(r1, "statsmodels_loop", "lincomb_loop"),
        "speedup_build_loop_vs_statsmodels": ratio(r1, "statsmodels_loop", "lincomb_loop_build"),
        "lincomb_cpu_per_call_ms": 1e3 * cpu["lincomb_loop"] / K_SYSTEMS,
        "statsmodels_cpu_per_call_ms": 1e3 * cpu["statsmodels_loop"] / K_SYSTEMS,
        "cpu_speedup_loop_vs_statsmodels": cpu["statsmodels_loop"] / cpu["lincomb_loop"],
        "repeated_wald_ms": 1e3 * r1b["median"]["wald"],
        "repeated_f_test_ms": 1e3 * r1b["median"]["f_test"],
        "check_F_rel_diff_vs_statsmodels": check1,
    }

    # -- 2. a named batch of 1,000 two-row systems --------------------------------------------
    c2, d2, picks2 = make_systems(K_SYSTEMS)
    systems2 = [(coef(names[i]) == coef(names[j])) & (coef(names[h]) == 0) for i, j, h in picks2]

    def sm_loop2() -> Any:
        return [sm_res.f_test((c2[s], d2[s])) for s in range(K_SYSTEMS)]

    def batch_named() -> Any:
        return fit.wald_batch(systems2)

    def batch_array() -> Any:
        return fit.wald_batch(c2, d2)

    bn = batch_named()
    sm_f2 = np.array([float(np.squeeze(t.fvalue)) for t in sm_loop2()])
    check2 = {
        "F_rel_diff_named_vs_statsmodels": float(np.max(np.abs(bn.stat / sm_f2 - 1))),
        "F_rel_diff_named_vs_array": float(np.max(np.abs(bn.stat / batch_array().stat - 1))),
    }
    r2 = interleaved(
        {"statsmodels_loop": sm_loop2, "batch_named": batch_named, "batch_array": batch_array},
        reps(7),
        inner={"batch_named": 5, "batch_array": 9},
    )
    cpu2 = cpu_interleaved({"statsmodels_loop": sm_loop2, "batch_named": batch_named}, reps(5))
    med = r2["median"]
    out["batch"] = {
        "systems": K_SYSTEMS,
        "rows": 2,
        "statsmodels_loop_ms": 1e3 * med["statsmodels_loop"],
        "batch_named_ms": 1e3 * med["batch_named"],
        "batch_array_ms": 1e3 * med["batch_array"],
        "speedup_named_vs_statsmodels": ratio(r2, "statsmodels_loop", "batch_named"),
        "paired_speedup_named_vs_statsmodels": paired_ratio(r2, "statsmodels_loop", "batch_named"),
        "speedup_array_vs_statsmodels": ratio(r2, "statsmodels_loop", "batch_array"),
        "batch_named_cpu_ms": 1e3 * cpu2["batch_named"],
        "statsmodels_loop_cpu_ms": 1e3 * cpu2["statsmodels_loop"],
        "cpu_speedup_named_vs_statsmodels": cpu2["statsmodels_loop"] / cpu2["batch_named"],
        "checks": check2,
    }

    # -- 3. the README's form on a formula fit (information) ---------------------------------
    ft = lc.fit("yield_t_ha ~ C(nitrogen) * variety + rainfall_mm", lc.datasets.field_trial())
    sm_ft = sm.OLS(ft.design.y, ft.design.x).fit()
    levels = ["40", "80", "160"]  # the reference level 0 has no column
    rng = np.random.default_rng(SEED + 1)
    pairs = [tuple(rng.choice(levels, size=2, replace=False)) for _ in range(K_SYSTEMS)]
    n = lc.term("C(nitrogen)")
    systems_r = [(n[a] == n[b]) & (coef("rainfall_mm") == 0) for a, b in pairs]
    cr, dr, _ = ft.resolve(systems_r[0])
    stack = np.stack([ft.resolve(s)[0] for s in systems_r])

    def sm_loop_r() -> Any:
        return [sm_ft.f_test((stack[s], dr)) for s in range(K_SYSTEMS)]

    def batch_readme() -> Any:
        return ft.wald_batch(systems_r)

    br = batch_readme()
    sm_fr = np.array([float(np.squeeze(t.fvalue)) for t in sm_loop_r()])
    r3 = interleaved({"statsmodels_loop": sm_loop_r, "batch_named": batch_readme}, reps(7))
    out["readme"] = {
        "systems": K_SYSTEMS,
        "statsmodels_loop_ms": 1e3 * r3["median"]["statsmodels_loop"],
        "batch_named_ms": 1e3 * r3["median"]["batch_named"],
        "speedup_named_vs_statsmodels": ratio(r3, "statsmodels_loop", "batch_named"),
        "check_F_rel_diff_vs_statsmodels": float(np.max(np.abs(br.stat / sm_fr - 1))),
    }
    out["load_average_after"] = _load()
    out["targets"] = {
        "wald_per_call_ms<=0.1": out["single"]["lincomb_per_call_ms"] <= 0.1,
        "wald_loop_speedup_vs_statsmodels>=2": out["single"]["speedup_loop_vs_statsmodels"] >= 2,
        "named_batch_speedup_vs_statsmodels>=100": out["batch"]["speedup_named_vs_statsmodels"]
        >= 100,
    }
    return out


def report(res: dict[str, Any]) -> str:
    s, b, r = res["single"], res["batch"], res["readme"]
    lines = [
        f"python {res['python']}, numpy {res['numpy']}, scipy {res['scipy']},"
        f" statsmodels {res['statsmodels']}; OPENBLAS_CORETYPE={res['env']['OPENBLAS_CORETYPE']}"
        f" OPENBLAS_L2_SIZE={res['env']['OPENBLAS_L2_SIZE']}; thread limit: {res['threads']}",
        blas_line(res["blas"]),
        f"load average (1 min): {res['load_average_before']} before, "
        f"{res['load_average_after']} after; {res['cpu_count']} CPUs",
        "",
        f"1. {s['systems']:,} single {s['rows']}-row tests written with names"
        f" (n = {s['n']:,}, p = {s['p']})",
        f"   lincomb fit.wald loop        {s['lincomb_loop_ms']:8.1f} ms"
        f"  ({s['lincomb_per_call_ms']:.3f} ms per call; target <= 0.1)",
        f"   statsmodels f_test loop      {s['statsmodels_loop_ms']:8.1f} ms"
        f"  ({s['statsmodels_per_call_ms']:.3f} ms per call)",
        f"   statsmodels / lincomb loop      {s['speedup_loop_vs_statsmodels']:.2f}x"
        f"  (target >= 2; paired {s['paired_speedup_loop_vs_statsmodels']:.2f}x)",
        f"   building each system in the loop too: {s['lincomb_build_and_call_ms']:.3f} ms per"
        f" call ({s['speedup_build_loop_vs_statsmodels']:.2f}x statsmodels)",
        f"   CPU time of this thread per call: lincomb {s['lincomb_cpu_per_call_ms']:.3f} ms,"
        f" statsmodels {s['statsmodels_cpu_per_call_ms']:.3f} ms"
        f" ({s['cpu_speedup_loop_vs_statsmodels']:.2f}x)",
        f"   one system repeated: wald {s['repeated_wald_ms']:.3f} ms,"
        f" f_test {s['repeated_f_test_ms']:.3f} ms",
        f"   check: max relative difference of F vs statsmodels"
        f" {s['check_F_rel_diff_vs_statsmodels']:.1e}",
        "",
        f"2. {b['systems']:,} {b['rows']}-row systems written with names in one wald_batch",
        f"   statsmodels f_test loop      {b['statsmodels_loop_ms']:8.1f} ms",
        f"   lincomb wald_batch (named)   {b['batch_named_ms']:8.2f} ms",
        f"   lincomb wald_batch (array)   {b['batch_array_ms']:8.2f} ms",
        f"   statsmodels / named batch       {b['speedup_named_vs_statsmodels']:.0f}x"
        f"  (target >= 100; paired {b['paired_speedup_named_vs_statsmodels']:.0f}x)",
        f"   statsmodels / array batch       {b['speedup_array_vs_statsmodels']:.0f}x",
        f"   CPU time of this thread: named batch {b['batch_named_cpu_ms']:.2f} ms,"
        f" statsmodels loop {b['statsmodels_loop_cpu_ms']:.1f} ms"
        f" ({b['cpu_speedup_named_vs_statsmodels']:.0f}x)",
        "   checks (max relative difference of F): "
        + ", ".join(f"{k} {v:.1e}" for k, v in b["checks"].items()),
        "",
        f"3. the README's form (term levels), field trial, {r['systems']:,} systems (information)",
        f"   statsmodels f_test loop      {r['statsmodels_loop_ms']:8.1f} ms",
        f"   lincomb wald_batch (named)   {r['batch_named_ms']:8.2f} ms"
        f"   ({r['speedup_named_vs_statsmodels']:.0f}x statsmodels; F check"
        f" {r['check_F_rel_diff_vs_statsmodels']:.1e})",
        "",
        "targets met: " + ", ".join(f"{k}: {v}" for k, v in res["targets"].items()),
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    return scaled_main(__doc__, run, report, argv)


if __name__ == "__main__":
    sys.exit(main())
