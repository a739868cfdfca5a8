"""Row-based covariance estimators computed by a pass over blocks of rows (chunks, partitions).

A sandwich meat is a sum over rows (HC) or over clusters of row sums (cluster-robust), so it can
be accumulated block by block and merged: HC partials are triangular factors of the block's
scores (merged by QR of the stacked factors), cluster partials are score sums per label (merged
by adding).  The formulas, labels, small-sample factors and degrees of freedom are those of
:mod:`lincomb.covariance` (the tests check the results against it on the same data); this
module only changes the order in which the rows are visited.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb import _core as linalg
from lincomb._covariance import estimators as covmod
from lincomb.errors import CovarianceInputError, FewClustersWarning, IncompatibleFitError

Array = NDArray[np.float64]

#: The residual sum of squares seen in a second pass must match the fit's to this relative
#: tolerance, or the blocks are not the fit's rows.
RSS_MATCH_TOL: float = 1e-6


@dataclass(frozen=True)
class Partial:
    """What a block of rows contributes: row count, residual sum of squares, meat pieces."""

    n: int
    rss: float
    factor: Array | None  # HC: triangular factor of the scores
    sums: tuple[pd.DataFrame, ...] = ()  # cluster: score sums per label (one per clustering)


class RowPass:
    """Accumulate a row-based covariance estimator for ``fit`` over blocks of its rows."""

    def __init__(self, fit: Any, covariance: object) -> None:
        est = covmod.as_estimator(covariance)
        if isinstance(est, (covmod.Classical, covmod.Given)):
            raise CovarianceInputError(
                f"the {type(est).__name__.lower()} covariance needs no pass over the rows: pass"
                " it as covariance= to the fit's tests directly."
            )
        if isinstance(est, covmod.Serial):
            raise CovarianceInputError(
                "serial (Newey-West) covariances are not available for fits built from chunks or"
                " partitions: lagged products would cross block boundaries in an order the pass"
                " cannot guarantee. Fit the series in memory instead."
            )
        if isinstance(est, covmod.Clustered):
            bad = [b for b in est.by if not isinstance(b, str)]
            if bad:
                raise CovarianceInputError(
                    "cluster labels for a pass over chunks must be column names of the chunks"
                    f" (arrays cannot be aligned with chunks); got {type(bad[0]).__name__}."
                )
        fit._check_variance()
        self.fit = fit
        self.est = est
        self.sol: linalg.Solution = fit._sol

    # -- per block ---------------------------------------------------------------------------
    def _rows(self, x: Array, y: Array, w: Array | None) -> tuple[Array, Array]:
        sol = self.sol
        kept = sol.kept
        xw = x[:, kept]
        xw -= sol.center[kept]
        xw /= sol.scale[kept]
        resid = y - xw @ sol.theta
        if w is not None:
            sw = np.sqrt(w)
            xw *= sw[:, None]
            resid *= sw
        if sol.rank == 0:
            return np.zeros((0, x.shape[0])), resid
        zt = linalg.upper_solve(sol.r, xw.T, trans=True)
        return zt, resid

    def block(
        self, x: Array, y: Array, w: Array | None, frame: pd.DataFrame | None, where: str
    ) -> Partial:
        zt, resid = self._rows(x, y, w)
        n = resid.size
        rss = float(resid @ resid)
        est = self.est
        if isinstance(est, covmod.Heteroskedastic):
            omega_root = np.abs(resid)
            if est.kind in ("HC2", "HC3", "HC4"):
                adj = covmod._leverage_weights(
                    est.kind, zt, self.fit.n_obs, self.sol.rank, root=True
                )
                omega_root = omega_root * adj
            scores = zt * omega_root
            return Partial(n, rss, linalg.triangular_factor(scores.T))
        assert isinstance(est, covmod.Clustered)
        if frame is None:
            raise CovarianceInputError(
                "cluster-robust covariances need the cluster labels: build the fit from"
                " DataFrame chunks (fit_chunks) whose columns hold the labels."
            )
        scores = (zt * resid).T  # (n, k)
        labels = []
        for name in est.by:
            if name not in frame.columns:
                raise CovarianceInputError(
                    f"{where}: no column {name!r} for the cluster labels. Columns:"
                    f" {[str(c) for c in frame.columns]}"
                )
            col = frame[name]
            bad = np.flatnonzero(col.isna().to_numpy())
            if bad.size:
                raise CovarianceInputError(
                    f"cluster labels {name!r} are missing at row {frame.index[bad[0]]!r} of"
                    f" {where} ({bad.size} missing there); give every row used a cluster or drop"
                    " those rows before fitting."
                )
            labels.append(col.to_numpy())
        keys: list[Any] = list(labels)
        if len(labels) == 2:
            keys.append(pd.MultiIndex.from_arrays(labels))
        sums = tuple(_sum_by(key, scores) for key in keys)
        return Partial(n, rss, None, sums)

    # -- merging and the end ------------------------------------------------------------------
    @staticmethod
    def merge(a: Partial, b: Partial) -> Partial:
        factor = None
        if a.factor is not None and b.factor is not None:
            factor = linalg.triangular_factor(np.vstack([a.factor, b.factor]))
        sums = tuple(
            pd.concat([sa, sb]).groupby(level=list(range(sa.index.nlevels)), sort=False).sum()
            for sa, sb in zip(a.sums, b.sums, strict=True)
        )
        return Partial(a.n + b.n, a.rss + b.rss, factor, sums)

    def finish(self, part: Partial | None) -> covmod.CovarianceEstimate:
        fit, sol, est = self.fit, self.sol, self.est
        n_seen = 0 if part is None else part.n
        if part is None or n_seen != fit.n_obs:
            raise IncompatibleFitError(
                f"the second pass saw {n_seen} rows but the fit used {fit.n_obs}: pass the same"
                " data again (all chunks or partitions, with the same columns)."
            )
        if not math.isclose(part.rss, fit.rss, rel_tol=RSS_MATCH_TOL, abs_tol=0.0):
            raise IncompatibleFitError(
                f"the second pass gives a residual sum of squares of {part.rss:.10g} but the fit"
                f" has {fit.rss:.10g}: the rows passed are not the rows of the fit."
            )
        n, k = fit.n_obs, sol.rank
        if isinstance(est, covmod.Heteroskedastic):
            assert part.factor is not None
            scale = n / (n - k) if est.kind == "HC1" else 1.0
            factor = part.factor * math.sqrt(scale) if scale != 1.0 else part.factor
            return covmod.CovarianceEstimate(
                method=est.kind,
                label=est.kind,
                df_den=float(fit.df_resid),
                scale=scale,
                _sol=sol,
                _factor=factor,
            )
        assert isinstance(est, covmod.Clustered)
        names = [str(b) for b in est.by]
        sizes = [len(s) for s in part.sums[: len(names)]]
        for name, g in zip(names, sizes, strict=True):
            if g < 2:
                raise CovarianceInputError(
                    f"cluster labels {name!r} hold a single cluster; a cluster-robust covariance"
                    " needs at least two clusters (and preferably many more)."
                )
        few = [f"{nm} ({g})" for nm, g in zip(names, sizes, strict=True) if g < covmod.FEW_CLUSTERS]
        if few:
            warnings.warn(
                f"few clusters: {', '.join(few)}. Cluster-robust tests lean on many clusters;"
                f" with fewer than {covmod.FEW_CLUSTERS} their size can be far from nominal."
                " Read the p-values with care, or use a coarser model of the dependence.",
                FewClustersWarning,
                stacklevel=3,
            )

        def factor_of(sums: pd.DataFrame) -> tuple[Array, float]:
            g = len(sums)
            adj = g / (g - 1) * (n - 1) / (n - k) if est.small_sample else 1.0
            return linalg.triangular_factor(sums.to_numpy(dtype=np.float64)), adj

        clipped = 0
        if len(names) == 1:
            t, adj = factor_of(part.sums[0])
            factor = t * math.sqrt(adj)
            scale: float | tuple[float, ...] = adj
            method = "cluster"
            label = f"cluster by {names[0]} ({sizes[0]} groups)"
        else:
            t1, a1 = factor_of(part.sums[0])
            t2, a2 = factor_of(part.sums[1])
            if len(part.sums[2]) > 1:
                t12, a12 = factor_of(part.sums[2])
            else:
                t12, a12 = np.zeros((k, k)), 0.0
            meat = a1 * (t1.T @ t1) + a2 * (t2.T @ t2) - a12 * (t12.T @ t12)
            factor, clipped = covmod._psd_factor(meat)
            scale = (a1, a2, a12)
            method = "two-way cluster"
            label = f"two-way cluster by {names[0]} × {names[1]} ({sizes[0]}, {sizes[1]} groups)"
            if clipped:
                label += f"; {clipped} negative eigenvalue(s) set to 0"
        df_den = float(min(sizes) - 1) if est.df is None else float(est.df)
        return covmod.CovarianceEstimate(
            method=method,
            label=label,
            df_den=df_den,
            groups=tuple(sizes),
            scale=scale,
            clipped=clipped,
            _sol=sol,
            _factor=factor,
        )


def _sum_by(key: Any, scores: Array) -> pd.DataFrame:
    """Score sums per label (rows: labels in order of first appearance)."""
    codes, uniques = pd.factorize(key, sort=False)
    g = len(uniques)
    sums = np.empty((g, scores.shape[1]))
    for j in range(scores.shape[1]):
        sums[:, j] = np.bincount(codes, weights=scores[:, j], minlength=g)
    index = uniques if isinstance(uniques, pd.MultiIndex) else pd.Index(uniques)
    return pd.DataFrame(sums, index=index)
