"""Many responses on one design: lincomb.fit_many_arrays against a statsmodels loop.

Run (unset the two OpenBLAS variables for timing only, in this command alone)::

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_many.py
    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_many.py --json
    ... --threads 1        # limit BLAS threads (threadpoolctl) for the whole run
    ... --subset 300       # responses in the timed statsmodels loop (see below)
    ... --rows all         # or a comma list of: wide, missing, complete, tall, frame

Needs the ``bench`` extra (statsmodels, threadpoolctl).  statsmodels is a timing and numerical
reference only.  The script times the ``lincomb`` of the checkout it lives in (its folder goes
first on ``sys.path``; the report names the folder), not an installed copy.

Problem: n = 500 rows, p = 10 columns (an intercept and 9 standard normal columns, seeded),
r = 10,000 responses (standard normal, seeded: an (n, r) float64 matrix of 40 MB), one 2-row
system (``x1 - x2 = 0`` and ``x3 = 0``).

* lincomb: ``lc.fit_many_arrays(X, Y)``, then ``.wald(system)``, then ``.test_frame()`` (the tidy
  frame with Benjamini–Hochberg adjusted p-values): the whole pipeline is timed, with its
  defaults (blocks of responses projected by one thread per CPU, at most 4, each on one BLAS
  thread).
* statsmodels: per response ``OLS(y, X).fit().f_test((C, d))``.  Timing the loop over all
  10,000 responses would take minutes, so it runs over the first ``--subset`` responses and the
  time is **extrapolated linearly** to 10,000 (each response costs the same: same design, same
  size).  Target: statsmodels / lincomb >= 150.

Memory: ``tracemalloc`` (numpy reports its allocations to it) traces one more run of the lincomb
pipeline; we report its peak above the memory held before the run (the input arrays), as a
fraction of the response matrix's size.  Target <= 1.2.

Correctness is checked before timing: F statistics and p-values of the subset against
statsmodels (largest relative difference reported).

Two more rows, each timed round robin (``_common.interleaved``: every round runs lincomb once
and the statsmodels subset loop once; medians over the rounds) against a statsmodels loop in
the same run, extrapolated linearly from its subset of responses as above (CPU time of this
process is reported beside the wall time, as above):

* **missing** (``--rows missing``): n = 2,000 rows, the same kind of design (an intercept and
  9 standard normal columns, seeded), r = 600 responses in which every value is missing with
  probability 0.02 (about 40 scattered missing values per response, so every response has its
  own pattern).  lincomb: ``fit_many_arrays`` + ``wald`` + ``test_frame`` (each response fitted
  on its own observed rows); statsmodels: per response ``OLS(y[obs], X[obs]).fit().f_test``.
  The F and p of the subset are checked against statsmodels first.  Target: statsmodels /
  lincomb >= 50.
* **complete** (``--rows complete``): the first problem (n = 500, p = 10, same seed) with
  r = 2,000 complete responses: the same lincomb pipeline, ``test_frame`` included, against the
  statsmodels loop.  Target >= 150.

One more row, for information (``--rows tall``, no target in the issue):

* **tall**: n = 100,000 rows, the same kind of design, r = 200 complete responses in a
  C-ordered (row by row) matrix, whose blocks of columns would read 128-byte pieces of every
  row: lincomb's pipeline on it, on its F-ordered copy (blocks of columns read whole columns)
  and a statsmodels loop over ``--tall-subset`` responses (extrapolated), round robin.  Both
  are read in wide blocks by chunks of rows (blocks of columns would read short pieces of
  the C-ordered rows, and blocks of the fewest columns of either order would be far larger
  than the cache-sized BLOCK_BYTES); the ratio C / F shows what the storage order costs.

And (``--rows frame``, for information): the 2,000 complete responses of the row above as a
pandas DataFrame, through ``fit_many_arrays(X, frame)`` and through the formula route
``fit_many("~ x1 + ... + x9", data, responses=[...])`` (the design's columns and the responses
in one frame), each against the array pipeline, round robin (ratios of medians).

Timing: ``time.perf_counter``; one warm-up call each; lincomb and the statsmodels subset loop
run interleaved in every repeat so that load changes on a shared machine hit both alike; we
report medians and the median of the per-repeat ratios, in wall time (the target) and in CPU
time of this process, all its threads (``time.process_time``: the work done, whatever the load
of other processes).
"""

from __future__ import annotations

import statistics
import sys
import time
import tracemalloc
from pathlib import Path
from typing import Any

import numpy as np

# time the lincomb of this checkout (its folder first on the path), not an installed copy
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

try:
    from _common import blas_line, emit, interleaved, machine, parser, ratio, thread_limit
except ModuleNotFoundError:  # imported as benchmarks.<name> from the repository root
    from benchmarks._common import (
        blas_line,
        emit,
        interleaved,
        machine,
        parser,
        ratio,
        thread_limit,
    )

SEED = 20240715
N, P, R = 500, 10, 10_000
#: The row with scattered missing values: rows, responses, probability that a value is missing.
N_MISS, R_MISS, MISS_RATE = 2_000, 600, 0.02
#: The row with fewer complete responses.
R_SMALL = 2_000
#: The tall row: rows and responses.
N_TALL, R_TALL = 100_000, 200


def make_data() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(SEED)
    x = np.column_stack([np.ones(N), rng.normal(size=(N, P - 1))])
    y = rng.normal(size=(N, R))
    y[:, ::7] += 0.2 * x[:, [3]]  # a few responses with a real effect on x3
    return x, y


def make_missing() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(SEED + 1)
    x = np.column_stack([np.ones(N_MISS), rng.normal(size=(N_MISS, P - 1))])
    y = rng.normal(size=(N_MISS, R_MISS))
    y[:, ::7] += 0.2 * x[:, [3]]
    y[rng.uniform(size=y.shape) < MISS_RATE] = np.nan
    return x, y


def make_tall() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(SEED + 2)
    x = np.column_stack([np.ones(N_TALL), rng.normal(size=(N_TALL, P - 1))])
    y = rng.normal(size=(N_TALL, R_TALL)) + 5.0
    y[:, ::7] += 0.2 * x[:, [3]]
    return x, y


def run_tall(repeats: int, subset: int) -> dict[str, Any]:
    """The tall row: the pipeline on a C-ordered matrix, on its F-ordered copy, and a
    statsmodels loop over ``subset`` responses, round robin (medians)."""
    import statsmodels.api as sm

    import lincomb as lc

    x, yc = make_tall()
    yf = np.asfortranarray(yc)
    names = [f"x{j}" for j in range(P)]
    system, c, d = _system()

    def pipeline(y: np.ndarray) -> Any:
        res = lc.fit_many_arrays(x, y, names=names).wald(system)
        return res, res.test_frame()

    def sm_subset() -> list[Any]:
        return [sm.OLS(yc[:, j], x).fit().f_test((c, d)) for j in range(subset)]

    res_c, _ = pipeline(yc)
    res_f, _ = pipeline(yf)
    f_rel, p_rel = _agreement(res_c, sm_subset())
    f_cf = float(np.max(np.abs(res_c.stat / res_f.stat - 1)))
    timing = interleaved(
        {"c_order": lambda: pipeline(yc), "f_order": lambda: pipeline(yf), "sm": sm_subset},
        repeats,
        warmup=1,
    )
    med = timing["median"]
    return {
        "n": N_TALL,
        "responses": R_TALL,
        "repeats": repeats,
        "statsmodels_subset": subset,
        "lincomb_c_order_s": med["c_order"],
        "lincomb_f_order_s": med["f_order"],
        "ratio_c_over_f": ratio(timing, "c_order", "f_order"),
        "statsmodels_extrapolated_s": med["sm"] / subset * R_TALL,
        "ratio_statsmodels_over_lincomb_c": ratio(timing, "sm", "c_order") / subset * R_TALL,
        "max_rel_diff_F_c_vs_f": f_cf,
        "max_rel_diff_F_vs_statsmodels": f_rel,
        "max_rel_diff_p_vs_statsmodels": p_rel,
    }


def run_frame(repeats: int) -> dict[str, Any]:
    """The complete responses of the ``complete`` row as a DataFrame, by arrays and by formula,
    against the array pipeline (round robin, medians)."""
    import pandas as pd

    import lincomb as lc

    x, y = make_data()
    y = np.ascontiguousarray(y[:, :R_SMALL])
    names = [f"x{j}" for j in range(P)]
    system, _c, _d = _system()
    frame = pd.DataFrame(y, columns=[f"g{j}" for j in range(R_SMALL)])
    data = pd.concat([pd.DataFrame(x[:, 1:], columns=names[1:]), frame], axis=1)
    formula = "~ " + " + ".join(names[1:])
    responses = list(frame.columns)

    def arrays() -> Any:
        return lc.fit_many_arrays(x, y, names=names).wald(system).test_frame()

    def frame_arrays() -> Any:
        return lc.fit_many_arrays(x, frame, names=names).wald(system).test_frame()

    def frame_formula() -> Any:
        return lc.fit_many(formula, data, responses=responses).wald(system).test_frame()

    stats = [f()["stat"].to_numpy() for f in (arrays, frame_arrays, frame_formula)]
    timing = interleaved(
        {"arrays": arrays, "frame": frame_arrays, "formula": frame_formula}, repeats, warmup=1
    )
    med = timing["median"]
    return {
        "responses": R_SMALL,
        "repeats": repeats,
        "arrays_s": med["arrays"],
        "frame_s": med["frame"],
        "formula_s": med["formula"],
        "ratio_frame_over_arrays": ratio(timing, "frame", "arrays"),
        "ratio_formula_over_arrays": ratio(timing, "formula", "arrays"),
        "max_rel_diff_F_frame_vs_arrays": float(np.max(np.abs(stats[1] / stats[0] - 1))),
        "max_rel_diff_F_formula_vs_arrays": float(np.max(np.abs(stats[2] / stats[0] - 1))),
    }


def _system() -> tuple[Any, np.ndarray, np.ndarray]:
    import lincomb as lc

    system = (lc.coef("x1") == lc.coef("x2")) & (lc.coef("x3") == 0)
    c = np.zeros((2, P))
    c[0, 1], c[0, 2], c[1, 3] = 1.0, -1.0, 1.0
    return system, c, np.zeros(2)


def _agreement(res: Any, ref: list[Any]) -> tuple[float, float]:
    """Largest relative differences of F and p between lincomb's first ``len(ref)`` responses
    and statsmodels' tests of them; an F off by more than 1e-9 stops the benchmark."""
    k = len(ref)
    f_sm = np.array([float(np.squeeze(t.fvalue)) for t in ref])
    p_sm = np.array([float(t.pvalue) for t in ref])
    f_rel = float(np.max(np.abs(res.stat[:k] / f_sm - 1)))
    pos = p_sm > 0  # p-values that underflow to 0 (a strong effect) have no ratio
    p_rel = float(np.max(np.abs(res.p[:k][pos] / p_sm[pos] - 1), initial=0.0))
    assert f_rel < 1e-9, f_rel
    return f_rel, p_rel


def run_against_loop(
    x: np.ndarray, y: np.ndarray, repeats: int, subset: int, target: float
) -> dict[str, Any]:
    """lincomb's pipeline on every response against a statsmodels loop over ``subset`` of
    them (each response on its observed rows), round robin; the loop's time is extrapolated."""
    import statsmodels.api as sm

    import lincomb as lc

    names = [f"x{j}" for j in range(P)]
    system, c, d = _system()
    r = y.shape[1]
    subset = min(subset, r)
    obs = ~np.isnan(y)

    def lincomb_all() -> Any:
        res = lc.fit_many_arrays(x, y, names=names).wald(system)
        return res, res.test_frame()

    def sm_subset() -> list[Any]:
        return [sm.OLS(y[obs[:, j], j], x[obs[:, j]]).fit().f_test((c, d)) for j in range(subset)]

    res, _ = lincomb_all()
    f_rel, p_rel = _agreement(res, sm_subset())
    cpu: dict[str, list[float]] = {"lincomb": [], "statsmodels_subset": []}

    def cpu_timed(name: str, fn: Any) -> Any:
        def call() -> Any:
            c0 = time.process_time()
            out = fn()
            cpu[name].append(time.process_time() - c0)
            return out

        return call

    timing = interleaved(
        {
            "lincomb": cpu_timed("lincomb", lincomb_all),
            "statsmodels_subset": cpu_timed("statsmodels_subset", sm_subset),
        },
        repeats,
        warmup=1,
    )
    med = timing["median"]
    per_round = np.array(timing["times"]["statsmodels_subset"]) / np.array(
        timing["times"]["lincomb"]
    )
    return {
        "n": int(x.shape[0]),
        "p": int(x.shape[1]),
        "responses": r,
        "missing_values": int((~obs).sum()),
        "distinct_patterns": len({obs[:, j].tobytes() for j in range(r)}),
        "statsmodels_subset": subset,
        "repeats": repeats,
        "lincomb_s": med["lincomb"],
        "statsmodels_extrapolated_s": med["statsmodels_subset"] / subset * r,
        "ratio_statsmodels_over_lincomb": ratio(timing, "statsmodels_subset", "lincomb")
        / subset
        * r,
        "ratio_paired": float(np.median(per_round)) / subset * r,
        "lincomb_cpu_s": statistics.median(cpu["lincomb"]),
        "ratio_cpu_time": statistics.median(cpu["statsmodels_subset"])
        / statistics.median(cpu["lincomb"])
        / subset
        * r,
        "target_ratio": target,
        "max_rel_diff_F_vs_statsmodels": f_rel,
        "max_rel_diff_p_vs_statsmodels": p_rel,
    }


def run(repeats: int, subset: int) -> dict[str, Any]:
    import statsmodels.api as sm

    import lincomb as lc

    x, y = make_data()
    names = [f"x{j}" for j in range(P)]
    system = (lc.coef("x1") == lc.coef("x2")) & (lc.coef("x3") == 0)
    c = np.zeros((2, P))
    c[0, 1], c[0, 2], c[1, 3] = 1.0, -1.0, 1.0
    d = np.zeros(2)

    def lincomb_all() -> Any:
        mf = lc.fit_many_arrays(x, y, names=names)
        res = mf.wald(system)
        return res, res.test_frame()

    def sm_subset() -> list[Any]:
        return [sm.OLS(y[:, j], x).fit().f_test((c, d)) for j in range(subset)]

    # correctness first
    res, frame = lincomb_all()
    f_rel, p_rel = _agreement(res, sm_subset())

    times: dict[str, list[float]] = {"lincomb": [], "statsmodels_subset": []}
    ratios, cpu_ratios, cpu_lc = [], [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        lincomb_all()
        t1, c1 = time.perf_counter(), time.process_time()
        sm_subset()
        t2, c2 = time.perf_counter(), time.process_time()
        times["lincomb"].append(t1 - t0)
        times["statsmodels_subset"].append(t2 - t1)
        ratios.append((t2 - t1) / subset * R / (t1 - t0))
        cpu_ratios.append((c2 - c1) / subset * R / (c1 - c0))
        cpu_lc.append(c1 - c0)

    # memory above the input, in a separate traced run
    del res, frame
    tracemalloc.start()
    base = tracemalloc.get_traced_memory()[0]
    tracemalloc.reset_peak()
    out = lincomb_all()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    del out
    extra = peak - base

    med_lc = statistics.median(times["lincomb"])
    med_sm = statistics.median(times["statsmodels_subset"]) / subset * R
    return {
        "n": N,
        "p": P,
        "responses": R,
        "statsmodels_subset": subset,
        "repeats": repeats,
        "lincomb_s": med_lc,
        "statsmodels_extrapolated_s": med_sm,
        "statsmodels_per_response_ms": med_sm / R * 1e3,
        "ratio_statsmodels_over_lincomb": statistics.median(ratios),
        "lincomb_cpu_s": statistics.median(cpu_lc),
        "ratio_cpu_time": statistics.median(cpu_ratios),
        "target_ratio": 150.0,
        "peak_extra_bytes": int(extra),
        "response_bytes": int(y.nbytes),
        "peak_extra_over_responses": extra / y.nbytes,
        "target_memory": 1.2,
        "max_rel_diff_F_vs_statsmodels": f_rel,
        "max_rel_diff_p_vs_statsmodels": p_rel,
        **machine(),
    }


def report_loop(title: str, res: dict[str, Any]) -> list[str]:
    return [
        f"{title}: n = {res['n']}, p = {res['p']}, r = {res['responses']}"
        f" ({res['missing_values']} missing values, {res['distinct_patterns']} distinct"
        f" patterns of observed rows); {res['repeats']} interleaved rounds (medians)",
        f"  lincomb fit_many_arrays + wald + test_frame : {res['lincomb_s'] * 1e3:9.1f} ms",
        f"  statsmodels OLS + f_test loop (extrapolated from {res['statsmodels_subset']}"
        f" responses): {res['statsmodels_extrapolated_s']:8.2f} s",
        f"  ratio statsmodels / lincomb: {res['ratio_statsmodels_over_lincomb']:.0f}x"
        f" (paired by round {res['ratio_paired']:.0f}x; target >= {res['target_ratio']:.0f}x);"
        f" {res['ratio_cpu_time']:.0f}x in CPU time (lincomb {res['lincomb_cpu_s'] * 1e3:.1f} ms"
        " CPU)",
        f"  F vs statsmodels: max relative difference {res['max_rel_diff_F_vs_statsmodels']:.2e}"
        f" (p: {res['max_rel_diff_p_vs_statsmodels']:.2e})",
    ]


def report(res: dict[str, Any]) -> str:
    lines: list[str] = []
    if "lincomb_s" in res:
        lines += [
            f"many responses: n = {res['n']}, p = {res['p']}, r = {res['responses']},"
            f" one 2-row system; {res['repeats']} interleaved repeats (medians)",
            f"  lincomb fit_many_arrays + wald + test_frame : {res['lincomb_s'] * 1e3:9.1f} ms",
            f"  statsmodels OLS + f_test loop (extrapolated from {res['statsmodels_subset']}"
            f" responses): {res['statsmodels_extrapolated_s']:8.2f} s"
            f" ({res['statsmodels_per_response_ms']:.3f} ms per response)",
            f"  ratio statsmodels / lincomb: {res['ratio_statsmodels_over_lincomb']:.0f}x wall"
            f" time (target >= {res['target_ratio']:.0f}x); {res['ratio_cpu_time']:.0f}x in CPU"
            f" time (lincomb {res['lincomb_cpu_s'] * 1e3:.1f} ms CPU)",
            f"  peak memory above the input: {res['peak_extra_bytes'] / 2**20:.1f} MiB ="
            f" {res['peak_extra_over_responses']:.2f} x the response matrix"
            f" ({res['response_bytes'] / 2**20:.1f} MiB; target <= {res['target_memory']})",
            f"  F vs statsmodels: max relative difference"
            f" {res['max_rel_diff_F_vs_statsmodels']:.2e}"
            f" (p: {res['max_rel_diff_p_vs_statsmodels']:.2e})",
        ]
    if "missing" in res:
        lines += report_loop("scattered missing values", res["missing"])
    if "complete" in res:
        lines += report_loop("complete responses", res["complete"])
    if "frame" in res:
        f = res["frame"]
        lines += [
            f"responses in a DataFrame (information): r = {f['responses']};"
            f" {f['repeats']} interleaved rounds (medians)",
            f"  arrays {f['arrays_s'] * 1e3:.1f} ms; DataFrame of responses"
            f" {f['frame_s'] * 1e3:.1f} ms ({f['ratio_frame_over_arrays']:.2f} x); formula"
            f" route {f['formula_s'] * 1e3:.1f} ms ({f['ratio_formula_over_arrays']:.2f} x)",
            f"  F vs arrays: max relative difference {f['max_rel_diff_F_frame_vs_arrays']:.1e}"
            f" (frame), {f['max_rel_diff_F_formula_vs_arrays']:.1e} (formula)",
        ]
    if "tall" in res:
        t = res["tall"]
        lines += [
            f"tall (information): n = {t['n']}, r = {t['responses']} complete responses;"
            f" {t['repeats']} interleaved rounds (medians)",
            f"  lincomb on the C-ordered matrix : {t['lincomb_c_order_s'] * 1e3:9.1f} ms",
            f"  lincomb on its F-ordered copy   : {t['lincomb_f_order_s'] * 1e3:9.1f} ms"
            f"  (C / F = {t['ratio_c_over_f']:.2f})",
            f"  statsmodels OLS + f_test loop (extrapolated from {t['statsmodels_subset']}"
            f" responses): {t['statsmodels_extrapolated_s']:8.2f} s"
            f" ({t['ratio_statsmodels_over_lincomb_c']:.0f}x lincomb on the C-ordered matrix)",
            f"  F: C vs F order max relative difference {t['max_rel_diff_F_c_vs_f']:.2e};"
            f" vs statsmodels {t['max_rel_diff_F_vs_statsmodels']:.2e}",
        ]
    lines += [
        f"  load average at the end: {res['load_average']}; lincomb from {res['lincomb_path']}",
        blas_line(res["blas"]),
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = parser(__doc__)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--subset", type=int, default=300, help="responses in the statsmodels loop")
    ap.add_argument(
        "--rows",
        default="all",
        help="comma list of rows to run: wide, missing, complete, tall, frame (all: the first"
        " three)",
    )
    ap.add_argument("--tall-subset", type=int, default=10, help="responses in the tall loop")
    args = ap.parse_args(argv)
    rows = {"wide", "missing", "complete"} if args.rows == "all" else set(args.rows.split(","))
    import scipy.linalg  # noqa: F401 - load scipy's BLAS so threadpoolctl sees it
    import statsmodels.api  # noqa: F401

    with thread_limit(args.threads):
        res: dict[str, Any] = run(args.repeats, args.subset) if "wide" in rows else machine()
        if "missing" in rows:
            xm, ym = make_missing()
            res["missing"] = run_against_loop(xm, ym, 2 * args.repeats + 1, 100, 50.0)
        if "complete" in rows:
            x, y = make_data()
            res["complete"] = run_against_loop(
                x, y[:, :R_SMALL], 2 * args.repeats + 1, args.subset, 150.0
            )
        if "tall" in rows:
            res["tall"] = run_tall(args.repeats, args.tall_subset)
        if "frame" in rows:
            res["frame"] = run_frame(2 * args.repeats + 1)
        res.update(machine())
    import lincomb

    res["lincomb_path"] = str(Path(lincomb.__file__).parent)
    emit(report(res), res, args.json)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
