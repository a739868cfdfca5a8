"""Formula fits: ``lc.fit`` and ``lc.fit_chunks`` against one encoding plus ``lc.fit_arrays``.

Run (unset the two OpenBLAS variables for timing only, in this command alone)::

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_encode.py
    ... --threads 1      # limit BLAS threads (threadpoolctl) for the whole run
    ... --json           # the figures as one JSON object on the last line
    ... --rounds 15      # rounds of the round robin (default 15)

Needs the ``bench`` extra (threadpoolctl).  Run as a script, it measures the ``lincomb`` of the
checkout it lives in (its repository root goes first on ``sys.path``; the report prints the
path imported).

Problem: n = 100,000 rows of 10 standard normal columns ``x1 ... x10``, a 10-level text factor
``g`` (pandas' default text dtype) and a response ``y``, seeded; the formula is
``y ~ x1 + ... + x10 + g`` (p = 20 coefficients).  Timed round robin in one run (each callable
once per round, each call timed on its own, two warm-up calls each):

* baseline: one ``formulaic.model_matrix(formula, df)`` call and ``lc.fit_arrays`` on its
  result (the design frame and the response column), the least a formula fit must do: encode
  once, then fit the arrays;
* ``lc.fit(formula, df)``;
* ``lc.fit_chunks(formula, chunks)`` over the same rows in 10 chunks of 10,000 rows (a list of
  row slices of ``df`` made before timing, as a chunked reader would hand them over).

Targets (issue 12): ``lc.fit`` / baseline <= 1.3 (row 1), and the chunked fit at least 0.7 of
the in-memory formula fit's speed, i.e. time(``lc.fit``) / time(``fit_chunks``) >= 0.7 (row 8).
Headline ratios are ratios of median times; the ``paired`` ratios are medians of the per-round
ratios (they cancel slow drifts of the load).  Before timing, the three fits' coefficients are
checked against one another (max relative difference).
"""

from __future__ import annotations

import os
import sys
from typing import Any

import numpy as np

if __name__ == "__main__":  # measure this checkout's lincomb, not another installed copy
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

try:
    from benchmarks import _common
except ImportError:  # run as a script: this folder is on sys.path
    import _common  # type: ignore[no-redef]

SEED = 20261202
N = 100_000
N_NUMERIC = 10
LEVELS = 10
CHUNK_ROWS = 10_000
FORMULA = "y ~ " + " + ".join(f"x{j}" for j in range(1, N_NUMERIC + 1)) + " + g"
TARGET_FIT_OVER_BASELINE = 1.3
TARGET_FIT_OVER_CHUNKS = 0.7


def make_data(n: int = N, seed: int = SEED) -> Any:
    """10 standard normal columns, a 10-level text factor and a response, seeded."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    df = pd.DataFrame(
        rng.standard_normal((n, N_NUMERIC)), columns=[f"x{j}" for j in range(1, N_NUMERIC + 1)]
    )
    labels = np.array([f"level{k:02d}" for k in range(LEVELS)])
    codes = rng.integers(0, LEVELS, size=n)
    df["g"] = pd.Series(labels[codes], dtype="str")
    slopes = np.where(np.arange(N_NUMERIC) % 3 == 0, 0.0, 0.05)
    df["y"] = 1.0 + df.iloc[:, :N_NUMERIC].to_numpy() @ slopes + 0.1 * codes
    df["y"] += rng.standard_normal(n)
    return df


def run(rounds: int) -> dict[str, Any]:
    import formulaic

    import lincomb as lc

    df = make_data()
    chunks = [df.iloc[s : s + CHUNK_ROWS] for s in range(0, N, CHUNK_ROWS)]

    def baseline() -> Any:
        y, x = formulaic.model_matrix(FORMULA, df)
        return lc.fit_arrays(x, y.iloc[:, 0])

    fns = {
        "baseline_model_matrix_fit_arrays": baseline,
        "fit": lambda: lc.fit(FORMULA, df),
        "fit_chunks": lambda: lc.fit_chunks(FORMULA, chunks),
    }
    ref = baseline().coefficients.to_numpy()
    diffs = {
        name: float(np.max(np.abs(fns[name]().coefficients.to_numpy() / ref - 1)))
        for name in ("fit", "fit_chunks")
    }
    res = _common.interleaved(fns, rounds)
    base, fit, chunked = fns
    res["ratios"] = {
        "fit_over_baseline": _common.ratio(res, fit, base),
        "fit_over_fit_chunks": _common.ratio(res, fit, chunked),
        "fit_chunks_over_baseline": _common.ratio(res, chunked, base),
    }
    res["paired_ratios"] = {
        "fit_over_baseline": _common.paired_ratio(res, fit, base),
        "fit_over_fit_chunks": _common.paired_ratio(res, fit, chunked),
        "fit_chunks_over_baseline": _common.paired_ratio(res, chunked, base),
    }
    res["targets"] = {
        "fit_over_baseline_at_most": TARGET_FIT_OVER_BASELINE,
        "fit_over_fit_chunks_at_least": TARGET_FIT_OVER_CHUNKS,
    }
    res["met"] = {
        "fit_over_baseline": res["ratios"]["fit_over_baseline"] <= TARGET_FIT_OVER_BASELINE,
        "fit_over_fit_chunks": res["ratios"]["fit_over_fit_chunks"] >= TARGET_FIT_OVER_CHUNKS,
    }
    res["max_rel_diff_coefficients"] = diffs
    res["problem"] = {
        "n": N,
        "p": len(ref),
        "formula": FORMULA,
        "chunks": len(chunks),
        "chunk_rows": CHUNK_ROWS,
        "rounds": rounds,
    }
    res["lincomb"] = os.path.dirname(lc.__file__)
    res.pop("times")
    return res


def report(res: dict[str, Any]) -> str:
    m, r, pr, pb = res["median"], res["ratios"], res["paired_ratios"], res["problem"]
    t = res["targets"]

    def ok(key: str) -> str:
        return "met" if res["met"][key] else "NOT met"

    lines = [
        f"formula fits, n = {pb['n']:,}, p = {pb['p']} ({pb['formula']}); {pb['rounds']} rounds"
        f" round robin (load average {res['load_average']:.2f} at the start,"
        f" {res['load_average_after']:.2f} at the end; threads {res['threads']})",
        f"  baseline, model_matrix + fit_arrays: {1e3 * m['baseline_model_matrix_fit_arrays']:.1f}"
        " ms",
        f"  lc.fit: {1e3 * m['fit']:.1f} ms",
        f"  lc.fit_chunks, {pb['chunks']} chunks of {pb['chunk_rows']:,} rows:"
        f" {1e3 * m['fit_chunks']:.1f} ms",
        f"  fit / baseline: {r['fit_over_baseline']:.2f} (paired {pr['fit_over_baseline']:.2f});"
        f" target <= {t['fit_over_baseline_at_most']}: {ok('fit_over_baseline')}",
        f"  fit / fit_chunks (time): {r['fit_over_fit_chunks']:.2f}"
        f" (paired {pr['fit_over_fit_chunks']:.2f}); target >= {t['fit_over_fit_chunks_at_least']}:"
        f" {ok('fit_over_fit_chunks')}",
        f"  fit_chunks / baseline: {r['fit_chunks_over_baseline']:.2f}"
        f" (paired {pr['fit_chunks_over_baseline']:.2f}), for information",
        "  coefficients vs baseline, max rel diff: "
        + ", ".join(f"{k} {v:.1e}" for k, v in res["max_rel_diff_coefficients"].items()),
        f"  lincomb imported from {res['lincomb']}",
        _common.blas_line(res["blas"]),
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    return _common.rounds_main(__doc__, run, report, 15, argv)


if __name__ == "__main__":
    sys.exit(main())
