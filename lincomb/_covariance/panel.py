"""Panel covariances: Newey–West within units, and Newey–West on scores summed per time point.

``lc.serial(lag, order=time, units=unit)``
    The Newey–West meat with lags only inside each unit: ``M = Σ_i [Γ_{i,0} + Σ_ℓ (1 − ℓ/(L+1))
    (Γ_{i,ℓ} + Γ_{i,ℓ}ᵀ)]`` with ``Γ_{i,ℓ} = Σ_t g_{i,t} g_{i,t−ℓ}ᵀ`` over the rows of unit
    ``i`` in time order (lags count rows of the unit).  Errors of different units are taken
    as independent.  Two rows of one unit at the same time raise
    :class:`~lincomb.errors.TiedTimesError`.
:func:`common_shocks`
    Scores summed over all units at each time point, ``S_t = Σ_{i} g_{i,t}``, then the
    Newey–West meat of the series ``S_t`` in time order (Driscoll and Kraay, 1998, Rev. Econ.
    Stat. 80:549-560): robust to dependence across units at a time (common shocks) and to
    serial dependence up to the lag.  Lags count time points present in the data.

The within-unit meat is computed in memory (one block, rows in unit and time order); a second
pass over chunks or partitions refuses it, as for :func:`~lincomb.serial`, because lagged
products would cross block boundaries.  The time-sum meat is a sum per time label in each block
(merged by adding per label) and a small Newey–West sum at the end, so chunked and Dask second
passes give it too.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from lincomb import _core as core
from lincomb._covariance.estimate import CovarianceEstimate
from lincomb._covariance.meats import (
    Groups,
    Partial,
    _codes,
    _group_sum,
    _LaggedMeat,
    _merge_groups,
    bartlett_meat,
    scores,
)
from lincomb._typing import Array
from lincomb.errors import CovarianceInputError

__all__ = ["UnitSerialMeat", "TimeSumMeat", "bartlett_meat"]


class UnitSerialMeat(_LaggedMeat):
    """Newey–West within units, one block of rows sorted by unit then time."""

    row_blocks = False

    def __init__(
        self,
        fit: Any,
        lag: int,
        names: tuple[str, str],
        small_sample: bool,
        df: float | None,
        units: int,
    ) -> None:
        super().__init__(fit, lag, small_sample, df)
        self.names = names
        self.units = units

    def block(
        self, xc: Array, resid: Array, w: Array | None, labels: tuple[NDArray[Any], ...] = ()
    ) -> Partial:
        """The whole meat (rows in unit and time order; ``labels[0]`` the unit codes)."""
        zt, resid = self._working_rows(xc, resid, w)
        s = scores(zt, resid)
        unit = labels[0]
        same = [unit[ell:] == unit[:-ell] for ell in range(1, min(self.lag, s.shape[0] - 1) + 1)]
        return Partial(resid.size, float(resid @ resid), bartlett_meat(s, self.lag, same))

    def merge(self, *parts: Partial) -> Partial:
        assert len(parts) == 1
        return parts[0]

    def finish(self, part: Partial) -> CovarianceEstimate:
        assert part.gram is not None
        label = (
            f"serial within {self.names[1]} (Bartlett, lag {self.lag}, {self.names[0]};"
            f" {self.units} units)"
        )
        return self._estimate("serial within units", label, part.gram, self.lag, self.df_error)


class TimeSumMeat(_LaggedMeat):
    """Newey–West on the scores summed per time point, as block / merge / finish."""

    fortran = False
    row_blocks = False

    def __init__(
        self, fit: Any, lag: int | None, name: str, small_sample: bool, df: float | None
    ) -> None:
        super().__init__(fit, lag, small_sample, df)
        self.name = name

    def block(
        self, xc: Array, resid: Array, w: Array | None, labels: tuple[NDArray[Any], ...] = ()
    ) -> Partial:
        """Score sums per time label of the block (centred coordinates)."""
        u = resid if w is None else resid * w
        codes, uniq = _codes((labels[0],))
        sums = _group_sum(codes, len(uniq[0]), u, xc)
        return Partial(resid.size, float(resid @ u), groups=(Groups(uniq, sums),))

    def merge(self, *parts: Partial) -> Partial:
        return _merge_groups(parts)

    def finish(self, part: Partial) -> CovarianceEstimate:
        from lincomb._covariance.in_memory import automatic_lag

        groups = part.groups[0]
        times = groups.keys[0]
        t = len(groups)
        if t < 2:
            raise CovarianceInputError(
                f"time {self.name!r} has a single value; scores summed per time point need at"
                " least two time points (and preferably many)."
            )
        order = np.argsort(times, kind="stable")
        lag = automatic_lag(t) if self.lag is None else self.lag
        if lag >= t:
            raise CovarianceInputError(
                f"lag {lag} is not smaller than the {t} time points; a lag must be below the"
                f" number of time points (the automatic rule gives {automatic_lag(t)})."
            )
        k = self.k
        s = core.upper_solve(self.rs, groups.sums[order].T, trans=True).T if k else groups.sums
        meat = bartlett_meat(np.ascontiguousarray(s), lag)
        label = f"common shocks by {self.name} ({t} time points; Bartlett, lag {lag})"
        return self._estimate("common shocks", label, meat, lag, float(t - 1))
