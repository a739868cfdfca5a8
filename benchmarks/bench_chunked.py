"""Out-of-core fits: lincomb.chunked over generated chunks against one in-memory QR.

Run (unset the two OpenBLAS variables for timing only, in this command alone)::

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_chunked.py
    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_chunked.py --big --json
    ... --threads 1        # limit BLAS threads (threadpoolctl) for the whole run
    ... --chunk 200000     # rows per chunk (default 100,000)

Needs the ``bench`` extra (threadpoolctl).

Problem: p = 20 columns (an intercept and 19 standard normal columns) and a response, generated
chunk by chunk from a seeded generator (chunk ``k`` from ``default_rng([seed, k])``), so no
run ever holds more than one chunk of data.  Cases: n = 2,000,000 rows, and with ``--big``
n = 20,000,000 (about 3.4 GB of data in all, never in memory at once); without ``--big`` the
second case is n = 200,000, which still shows whether memory grows with n.

* Throughput: rows per second of ``fit_array_chunks`` (and of ``fit_chunks`` with the formula
  ``y ~ x1 + ... + x19`` on DataFrame chunks, for information), counting only the time spent
  in lincomb: the generator times itself and that time is subtracted.  Baseline: one in-memory
  QR of the stacked 2,000,000 × 21 matrix ``[X y]``: LAPACK ``dgeqrf`` (scipy) on a
  Fortran-ordered copy made beforehand (stacking and copy not timed), the fastest in-memory QR
  we found; ``numpy.linalg.qr(Xy, mode="r")`` and ``lc.fit_arrays`` on it are shown for
  information.  Target: chunked throughput >= 0.7 × the in-memory QR's.
* Memory: ``tracemalloc`` peak of a whole chunked pass (generation included) above the memory
  held before it, for each n.  Target: the two peaks within 10 %.
* Correctness: coefficients and the F of a 3-row system equal the in-memory fit's (rtol 1e-10)
  for the 2,000,000-row case.

Threads: the chunked fits run with their default ``blas_threads=1`` (each chunk's QR on one
BLAS thread; the limit is lifted while the generator makes the next chunk); the in-memory QR
uses the BLAS threads of the process (all cores unless ``--threads`` is given), so it gets
every advantage threads can give.

Timing: ``time.perf_counter``; the chunked fit and the in-memory QR run interleaved in every
repeat; medians and the median of the per-repeat ratios are reported.
"""

from __future__ import annotations

import statistics
import time
import tracemalloc
from collections.abc import Iterator
from typing import Any

import numpy as np

try:
    from _common import blas_line, emit, machine, parser, thread_limit
except ModuleNotFoundError:  # imported as benchmarks.<name> from the repository root
    from benchmarks._common import blas_line, emit, machine, parser, thread_limit

SEED = 20240801
P = 20
N_MAIN = 2_000_000
N_BIG = 20_000_000
N_SMALL = 200_000
BETA = np.concatenate([[1.0], np.where(np.arange(1, P) % 3 == 0, 0.0, 0.01)])


class Chunks:
    """Seeded chunks of ``(X, y)``; ``seconds`` accumulates the time spent generating."""

    def __init__(self, n: int, chunk: int, frames: bool = False) -> None:
        self.n, self.chunk, self.frames = n, chunk, frames
        self.seconds = 0.0

    def __iter__(self) -> Iterator[Any]:
        import pandas as pd

        cols = [f"x{j}" for j in range(1, P)]
        for k, start in enumerate(range(0, self.n, self.chunk)):
            t0 = time.perf_counter()
            m = min(self.chunk, self.n - start)
            rng = np.random.default_rng([SEED, k])
            x = np.empty((m, P))
            x[:, 0] = 1.0
            x[:, 1:] = rng.standard_normal((m, P - 1))
            y = x @ BETA + rng.standard_normal(m)
            item: Any
            if self.frames:
                item = pd.DataFrame(x[:, 1:], columns=cols)
                item["y"] = y
            else:
                item = (x, y)
            self.seconds += time.perf_counter() - t0
            yield item


def chunked_pass(n: int, chunk: int, frames: bool = False) -> tuple[Any, float, float]:
    """One chunked fit; returns (fit, seconds in lincomb, seconds in all)."""
    import lincomb as lc

    gen = Chunks(n, chunk, frames)
    t0 = time.perf_counter()
    if frames:
        formula = "y ~ " + " + ".join(f"x{j}" for j in range(1, P))
        fit = lc.fit_chunks(formula, gen)
    else:
        fit = lc.fit_array_chunks(gen, names=["Intercept", *[f"x{j}" for j in range(1, P)]])
    total = time.perf_counter() - t0
    return fit, total - gen.seconds, total


def peak_of_pass(n: int, chunk: int) -> int:
    tracemalloc.start()
    base = tracemalloc.get_traced_memory()[0]
    tracemalloc.reset_peak()
    chunked_pass(n, chunk)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak - base


def run(repeats: int, chunk: int, big: bool) -> dict[str, Any]:
    import lincomb as lc

    # memory first (nothing else held yet)
    n_second = N_BIG if big else N_SMALL
    peak_main = peak_of_pass(N_MAIN, chunk)
    t0 = time.perf_counter()
    peak_second = peak_of_pass(n_second, chunk)
    second_seconds = time.perf_counter() - t0

    # the in-memory matrix of the main case (from the same chunks)
    parts = list(Chunks(N_MAIN, chunk))
    x = np.vstack([a for a, _ in parts])
    y = np.concatenate([b for _, b in parts])
    del parts
    xy = np.column_stack([x, y])

    # correctness
    names = ["Intercept", *[f"x{j}" for j in range(1, P)]]
    system = (lc.coef("x1") == 0) & (lc.coef("x2") == lc.coef("x4")) & (lc.coef("x3") == 0)
    ref = lc.fit_arrays(x, y, names=names)
    fit, _, _ = chunked_pass(N_MAIN, chunk)
    coef_rel = float(np.max(np.abs(fit.coefficients.to_numpy() / ref.coefficients.to_numpy() - 1)))
    f_rel = abs(fit.wald(system).stat / ref.wald(system).stat - 1)
    assert coef_rel < 1e-10 and f_rel < 1e-10, (coef_rel, f_rel)
    frame_fit, frame_lib, frame_all = chunked_pass(N_MAIN, chunk, frames=True)
    frame_rel = float(
        np.max(np.abs(frame_fit.coefficients.to_numpy() / ref.coefficients.to_numpy() - 1))
    )

    import scipy.linalg as sla

    lib_t, qr_t, np_t, fit_t, ratios = [], [], [], [], []
    for _ in range(repeats):
        _, lib, _ = chunked_pass(N_MAIN, chunk)
        work = np.asfortranarray(xy)
        t0 = time.perf_counter()
        sla.lapack.dgeqrf(work, overwrite_a=1)
        t1 = time.perf_counter()
        del work
        np.linalg.qr(xy, mode="r")
        t2 = time.perf_counter()
        lc.fit_arrays(x, y, names=names)
        t3 = time.perf_counter()
        lib_t.append(lib)
        qr_t.append(t1 - t0)
        np_t.append(t2 - t1)
        fit_t.append(t3 - t2)
        ratios.append((t1 - t0) / lib)  # throughput ratio = time ratio for the same n

    return {
        "p": P,
        "chunk_rows": chunk,
        "n_main": N_MAIN,
        "n_second": n_second,
        "repeats": repeats,
        "chunked_lincomb_s": statistics.median(lib_t),
        "chunked_rows_per_s": N_MAIN / statistics.median(lib_t),
        "in_memory_qr_s": statistics.median(qr_t),
        "in_memory_qr_rows_per_s": N_MAIN / statistics.median(qr_t),
        "in_memory_fit_arrays_s": statistics.median(fit_t),
        "in_memory_numpy_qr_s": statistics.median(np_t),
        "throughput_ratio_chunked_over_qr": statistics.median(ratios),
        "target_throughput_ratio": 0.7,
        "frame_chunks_lincomb_s": frame_lib,
        "frame_chunks_total_s": frame_all,
        "frame_chunks_throughput_ratio": statistics.median(qr_t) / frame_lib,
        "peak_main_bytes": int(peak_main),
        "peak_second_bytes": int(peak_second),
        "peak_ratio_second_over_main": peak_second / peak_main,
        "second_case_seconds_with_tracing": second_seconds,
        "target_peak_ratio_within": 0.10,
        "max_rel_diff_coefficients": coef_rel,
        "rel_diff_F": f_rel,
        "max_rel_diff_coefficients_frames": frame_rel,
        **machine(),
    }


def report(res: dict[str, Any]) -> str:
    mib = 2**20
    lines = [
        f"chunked fits: p = {res['p']}, chunks of {res['chunk_rows']:,} rows;"
        f" {res['repeats']} interleaved repeats (medians)",
        f"  n = {res['n_main']:,}: fit_array_chunks {res['chunked_lincomb_s']:.3f} s in lincomb"
        f" ({res['chunked_rows_per_s'] / 1e6:.2f} M rows/s)",
        f"  in-memory QR of [X y] (dgeqrf) {res['in_memory_qr_s']:.3f} s"
        f" ({res['in_memory_qr_rows_per_s'] / 1e6:.2f} M rows/s); numpy.linalg.qr"
        f" {res['in_memory_numpy_qr_s']:.3f} s;"
        f" lc.fit_arrays {res['in_memory_fit_arrays_s']:.3f} s",
        f"  throughput chunked / in-memory QR: {res['throughput_ratio_chunked_over_qr']:.2f}"
        f" (target >= {res['target_throughput_ratio']})",
        f"  DataFrame chunks with a formula (fit_chunks): {res['frame_chunks_lincomb_s']:.3f} s"
        f" in lincomb (ratio {res['frame_chunks_throughput_ratio']:.2f}; formulaic encodes the"
        " first chunk, a column plan the others)",
        f"  peak memory of a pass: n = {res['n_main']:,}: {res['peak_main_bytes'] / mib:.1f} MiB;"
        f" n = {res['n_second']:,}: {res['peak_second_bytes'] / mib:.1f} MiB"
        f" (ratio {res['peak_ratio_second_over_main']:.3f}; target within 10 %)",
        f"  n = {res['n_second']:,} pass (traced, generation included):"
        f" {res['second_case_seconds_with_tracing']:.1f} s",
        f"  vs in-memory fit: coefficients max rel diff {res['max_rel_diff_coefficients']:.1e},"
        f" F rel diff {res['rel_diff_F']:.1e} (formula chunks:"
        f" {res['max_rel_diff_coefficients_frames']:.1e})",
        f"  load average at the end: {res['load_average']}",
        blas_line(res["blas"]),
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = parser(__doc__)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--chunk", type=int, default=100_000, help="rows per chunk")
    ap.add_argument("--big", action="store_true", help="second case n = 20,000,000 (slow)")
    args = ap.parse_args(argv)
    import scipy.linalg  # noqa: F401 - load scipy's BLAS so threadpoolctl sees it

    with thread_limit(args.threads):
        res = run(args.repeats, args.chunk, args.big)
    emit(report(res), res, args.json)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
