"""Row-based covariance estimators computed by a second pass over chunks or Dask partitions.

The meats of :mod:`lincomb._covariance.meats` (block / merge / finish) are the ones an
in-memory fit uses; this module only feeds them the blocks a second pass reads (raw design rows
of a chunk or partition, and the cluster labels from its columns) and checks at the end that the
blocks were the fit's rows (row count and residual sum of squares).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb._covariance.bias_reduced import AdjustedClusterMeat
from lincomb._covariance.estimate import CovarianceEstimate
from lincomb._covariance.meats import ClusterMeat, HeteroskedasticMeat, Partial
from lincomb._covariance.panel import TimeSumMeat
from lincomb._covariance.rows import RowMap
from lincomb._covariance.specs import (
    Classical,
    Clustered,
    CommonShocks,
    Given,
    Heteroskedastic,
    Serial,
    as_estimator,
)
from lincomb._typing import Array
from lincomb.errors import CovarianceInputError, IncompatibleFitError

__all__ = ["RSS_MATCH_TOL", "RowPass"]


#: The residual sum of squares seen in a second pass must match the fit's to this relative
#: tolerance, or the blocks are not the fit's rows.
RSS_MATCH_TOL: float = 1e-6


class RowPass:
    """Accumulate a row-based covariance estimator for ``fit`` over blocks of its rows."""

    def __init__(self, fit: Any, covariance: object) -> None:
        est = as_estimator(covariance)
        if isinstance(est, (Classical, Given)):
            raise CovarianceInputError(
                f"the {type(est).__name__.lower()} covariance needs no pass over the rows: pass"
                " it as covariance= to the fit's tests directly."
            )
        if isinstance(est, Serial):
            raise CovarianceInputError(
                "serial (Newey-West) covariances are not available for fits built from chunks or"
                " partitions: lagged products would cross block boundaries in an order the pass"
                " cannot guarantee. Fit the series in memory instead."
            )
        meat: HeteroskedasticMeat | ClusterMeat | AdjustedClusterMeat | TimeSumMeat
        if isinstance(est, CommonShocks):
            if not isinstance(est.time, str):
                raise CovarianceInputError(
                    "the time of a pass over chunks must be a column name of the chunks; got"
                    f" {type(est.time).__name__}."
                )
            meat = TimeSumMeat(fit, est.lag, est.time, est.small_sample, est.df)
        elif isinstance(est, Clustered):
            bad = [b for b in est.by if not isinstance(b, str)]
            if bad:
                raise CovarianceInputError(
                    "cluster labels for a pass over chunks must be column names of the chunks"
                    f" (arrays cannot be aligned with chunks); got {type(bad[0]).__name__}."
                )
            names = tuple(str(b) for b in est.by)
            if est.adjust != "none":
                meat = AdjustedClusterMeat(fit, names[0], est.adjust, est.df)
            else:
                meat = ClusterMeat(fit, names, est.small_sample, est.df, est.two_way_factor)
        else:
            assert isinstance(est, Heteroskedastic)
            meat = HeteroskedasticMeat(fit, est.kind)
        fit.check_variance()
        self.fit = fit
        self.meat = meat
        self.rows = RowMap.of(fit.solution)

    def block(
        self, x: Array, y: Array, w: Array | None, frame: pd.DataFrame | None, where: str
    ) -> Partial:
        """The partial of one chunk or partition (raw design rows ``x``, its data ``frame``)."""
        labels: tuple[NDArray[Any], ...] = ()
        if isinstance(self.meat, ClusterMeat):
            labels = _labels(self.meat.names, frame, where)
        elif isinstance(self.meat, (AdjustedClusterMeat, TimeSumMeat)):
            labels = _labels((self.meat.name,), frame, where)
        xc, resid = self.rows.rows(x, y, fortran=self.meat.fortran)
        return self.meat.block(xc, resid, w, labels)

    def merge(self, a: Partial, b: Partial) -> Partial:
        """Combine the partials of two disjoint blocks."""
        return self.meat.merge(a, b)

    def finish(self, part: Partial | None) -> CovarianceEstimate:
        """The estimate, after checking that the blocks were the fit's rows."""
        fit = self.fit
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
        return self.meat.finish(part)


def _labels(
    names: tuple[str, ...], frame: pd.DataFrame | None, where: str
) -> tuple[NDArray[Any], ...]:
    """The cluster labels of a block, read from its data's columns."""
    if frame is None:
        raise CovarianceInputError(
            "cluster-robust covariances need the cluster labels: build the fit from"
            " DataFrame chunks (fit_chunks) whose columns hold the labels."
        )
    labels = []
    for name in names:
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
    return tuple(labels)
