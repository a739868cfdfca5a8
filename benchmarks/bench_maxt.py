"""Max-|t| simultaneous intervals against the studentized-range reference, in the same run.

Families (one-way layout, 12 levels): all pairs with 20 per level (balanced: the studentized
range route), all pairs with unequal group sizes (the general rank-deficient rule) and each
level against the first with unequal sizes (a general full-rank family).  The reference is
``scipy.stats.studentized_range.ppf(0.95, 12, df)``, timed round robin with the others.

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE \
        python benchmarks/bench_maxt.py [--threads 1] [--json]
"""

from __future__ import annotations

import os
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


def _fit(sizes: list[int], seed: int) -> Any:
    import lincomb as lc

    rng = np.random.default_rng(seed)
    g = np.repeat([f"g{i:02d}" for i in range(K)], sizes)
    y = rng.normal(size=g.size) + 0.3 * np.repeat(np.arange(K), sizes)
    return lc.fit("y ~ g", pd.DataFrame({"g": g, "y": y}))


def run(rounds: int) -> dict[str, Any]:
    import scipy.stats as st

    import lincomb as lc

    bal = _fit([N] * K, 1)
    sizes = [int(v) for v in np.random.default_rng(2).integers(12, 29, size=K)]
    unb = _fit(sizes, 3)
    w_bal = bal.wald(lc.levels("g").pairwise())
    w_unb = unb.wald(lc.levels("g").pairwise())
    w_gen = unb.wald(lc.levels("g").versus("g00"))
    df = float(bal.df_error)
    fns = {
        "studentized_range_ppf": lambda: st.studentized_range.ppf(0.95, K, df),
        "maxt_balanced_pairs": lambda: w_bal.simultaneous("max-t"),
        "maxt_unbalanced_pairs": lambda: w_unb.simultaneous("max-t"),
        "maxt_general_many_to_one": lambda: w_gen.simultaneous("max-t"),
    }
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = _common.interleaved(fns, rounds, warmup=1)
        sims = {name: f() for name, f in fns.items() if name.startswith("maxt")}
    ref = float(st.studentized_range.ppf(0.95, K, df)) / np.sqrt(2)
    res["ratios"] = {name: _common.ratio(res, name, "studentized_range_ppf") for name in sims}
    res["paired_ratios"] = {
        name: _common.paired_ratio(res, name, "studentized_range_ppf") for name in sims
    }
    res["critical_values"] = {name: float(s.critical_value) for name, s in sims.items()}
    res["routines"] = {name: s.integration.text() for name, s in sims.items()}
    res["balanced_minus_reference"] = float(sims["maxt_balanced_pairs"].critical_value - ref)
    res["warnings"] = sorted({str(w.message)[:90] for w in caught})
    res.pop("times")
    return res


def report(res: dict[str, Any]) -> str:
    lines = [
        f"max-|t| intervals, {K} levels (load average {res['load_average']:.2f},"
        f" threads {res['threads']})",
        f"  reference studentized_range.ppf: {res['median']['studentized_range_ppf']:.4f} s",
    ]
    for name, r in res["ratios"].items():
        lines.append(
            f"  {name}: {res['median'][name]:.4f} s, ratio {r:.2f}"
            f" (paired {res['paired_ratios'][name]:.2f}), c = {res['critical_values'][name]:.6f}"
        )
        lines.append(f"    {res['routines'][name]}")
    lines.append(f"  balanced critical value - reference: {res['balanced_minus_reference']:.2e}")
    lines.append(f"  warnings: {res['warnings'] or 'none'}")
    lines.append(_common.blas_line(res["blas"]))
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = _common.parser(__doc__)
    ap.add_argument("--rounds", type=int, default=5)
    args = ap.parse_args(argv)
    import scipy.linalg  # noqa: F401  (load every BLAS before limiting threads)

    import lincomb  # noqa: F401

    with _common.thread_limit(args.threads):
        res = run(args.rounds)
        res["blas"] = _common.blas_info()
    res["threads"] = args.threads or "default"
    res["load_average"] = os.getloadavg()[0]
    _common.emit(report(res), res, args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
