"""Expected responses with intervals at 1e5 new rows, against statsmodels in the same run.

A fit of ``y ~ g * x + z`` (an invented 5-level factor, two numeric covariates) on 20,000
rows; then 100,000 new rows: lincomb's ``fit.expected(new).row_frame()`` (encoding, mean and
new-observation intervals) against statsmodels' ``get_prediction(new).summary_frame()`` on
the same model, timed round robin, at 1 BLAS thread and at the default in the same run.

    env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python benchmarks/bench_predict.py [--json]
"""

from __future__ import annotations

import os
import sys
from typing import Any

import numpy as np
import pandas as pd

try:
    from benchmarks import _common
except ImportError:  # run as a script: this folder is first on sys.path
    import _common  # type: ignore[no-redef]

N_FIT, N_NEW = 20_000, 100_000


def _frame(n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    g = rng.choice(list("abcde"), size=n)
    x = rng.normal(size=n)
    z = rng.uniform(0, 10, size=n)
    y = 1.0 + 0.5 * x - 0.2 * z + (g == "b") * 0.7 + rng.normal(size=n)
    return pd.DataFrame({"y": y, "g": g, "x": x, "z": z})


def run(rounds: int) -> dict[str, Any]:
    import statsmodels.formula.api as smf

    import lincomb as lc

    formula = "y ~ g * x + z"
    data = _frame(N_FIT, 1)
    new = _frame(N_NEW, 2).drop(columns="y")
    f = lc.fit(formula, data)
    ref = smf.ols(formula, data).fit()
    fns = {
        "statsmodels_summary_frame": lambda: ref.get_prediction(new).summary_frame(),
        "lincomb_expected": lambda: f.expected(new).row_frame(),
    }
    res = _common.interleaved(fns, rounds, warmup=1)
    ours = f.expected(new).row_frame()
    theirs = ref.get_prediction(new).summary_frame()
    res["max_rel_diff_obs_upper"] = float(
        np.max(np.abs(ours["new_upper"].to_numpy() / theirs["obs_ci_upper"].to_numpy() - 1))
    )
    res["ratio"] = _common.ratio(res, "lincomb_expected", "statsmodels_summary_frame")
    res["paired_ratio"] = _common.paired_ratio(res, "lincomb_expected", "statsmodels_summary_frame")
    res.pop("times")
    return res


def report(all_res: dict[str, Any]) -> str:
    lines = [f"expected responses with intervals at {N_NEW:,} new rows (fit on {N_FIT:,})"]
    for key, res in all_res["runs"].items():
        lines.append(
            f"  threads {key}: lincomb {res['median']['lincomb_expected']:.3f} s,"
            f" statsmodels {res['median']['statsmodels_summary_frame']:.3f} s,"
            f" ratio {res['ratio']:.2f} (paired {res['paired_ratio']:.2f});"
            f" max rel. diff of new-observation bounds {res['max_rel_diff_obs_upper']:.1e}"
        )
    lines.append(f"  load average {all_res['load_average']:.2f}")
    lines.append(_common.blas_line(all_res["blas"]))
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = _common.parser(__doc__)
    ap.add_argument("--rounds", type=int, default=5)
    args = ap.parse_args(argv)
    import scipy.linalg  # noqa: F401  (load every BLAS before limiting threads)
    import statsmodels.api  # noqa: F401

    import lincomb  # noqa: F401

    out: dict[str, Any] = {"runs": {}}
    for threads in (1, args.threads):
        with _common.thread_limit(threads):
            out["runs"][str(threads or "default")] = run(args.rounds)
            out["blas"] = _common.blas_info()
    out["load_average"] = os.getloadavg()[0]
    _common.emit(report(out), out, args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
