"""Size of cluster-robust tests with few clusters: a seeded simulation that prints the table.

Run::

    python benchmarks/size_few_clusters.py            # 1,000 replications per row
    python benchmarks/size_few_clusters.py --reps 300 --json

Design (invented): G clusters of 12 rows; a regressor with a skewed cluster-level part
(lognormal) plus within-cluster noise, so that a few clusters carry much leverage; errors with
a cluster effect (intra-cluster correlation 0.5).  The null ``β_x = 0`` is true.  For G = 6, 10
and 30, the rejection rate at 5% of:

* ``plain``: the cluster-robust F with the factor G/(G−1)·(N−1)/(N−K) and df G − 1
  (``lc.clustered(by=g)``);
* ``bias-reduced``: ``lc.clustered(by=g, adjust="bias-reduced")``, t with Satterthwaite df;
* ``jackknife``: ``adjust="jackknife"``, same df construction;
* ``wild (Rademacher)`` and ``wild (Webb)``: ``lc.wild_bootstrap`` with 399 draws (all
  2^G vectors when there are at most 399 of them, G = 6).

Each rate has a Monte-Carlo standard error of ``sqrt(p (1 − p) / reps)`` (about 0.0069 at 5%
with 1,000 replications), printed beside it.
"""

from __future__ import annotations

import sys
import time
import warnings
from typing import Any

import numpy as np

try:
    from _common import emit, machine, parser
except ModuleNotFoundError:  # imported as benchmarks.<name> from the repository root
    from benchmarks._common import emit, machine, parser

METHODS = ("plain", "bias-reduced", "jackknife", "wild (Rademacher)", "wild (Webb)")


def simulate(groups: int, reps: int, seed: int, lc: Any) -> dict[str, float]:
    rng = np.random.default_rng(seed)
    size = 12
    g = np.repeat(np.arange(groups), size)
    n = g.size
    hits = dict.fromkeys(METHODS, 0)
    r = lc.coef("x") == 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(reps):
            x = rng.lognormal(size=groups)[g] + 0.3 * rng.normal(size=n)
            y = rng.normal(size=groups)[g] + rng.normal(size=n)
            f = lc.fit_arrays(np.column_stack([np.ones(n), x]), y, names=["Intercept", "x"])
            hits["plain"] += f.wald(r, covariance=lc.clustered(by=g)).p <= 0.05
            for adj in ("bias-reduced", "jackknife"):
                p = f.wald(r, covariance=lc.clustered(by=g, adjust=adj)).p
                hits[adj] += p <= 0.05
            for kind, name in (("rademacher", "wild (Rademacher)"), ("webb", "wild (Webb)")):
                res = lc.wild_bootstrap(f, r, by=g, draws=399, weights=kind, seed=1)
                hits[name] += res.p <= 0.05
    return {k: v / reps for k, v in hits.items()}


def main(argv: list[str] | None = None) -> int:
    ap = parser(__doc__)
    ap.add_argument("--reps", type=int, default=1000, help="replications per row")
    args = ap.parse_args(argv)
    import lincomb as lc

    t0 = time.perf_counter()
    table = {G: simulate(G, args.reps, 1000 + G, lc) for G in (6, 10, 30)}
    se = float(np.sqrt(0.05 * 0.95 / args.reps))
    lines = [
        f"Rejection rate at 5% under the null ({args.reps} replications each; Monte-Carlo"
        f" s.e. at 5%: {se:.4f})",
        "clusters  " + "  ".join(f"{m:>18}" for m in METHODS),
    ]
    for G, row in table.items():
        cells = [
            f"{row[m]:.3f} ± {np.sqrt(row[m] * (1 - row[m]) / args.reps):.3f}".rjust(18)
            for m in METHODS
        ]
        lines.append(f"{G:>8}  " + "  ".join(cells))
    lines.append(f"elapsed {time.perf_counter() - t0:.1f} s")
    out = {"reps": args.reps, "table": {str(k): v for k, v in table.items()}, "mc_se_at_5pct": se}
    out["machine"] = machine()
    emit("\n".join(lines), out, args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
