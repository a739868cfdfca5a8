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

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from lincomb import _core as core
from lincomb._covariance.estimate import CovarianceEstimate, psd_factor
from lincomb._covariance.meats import (
    Groups,
    Partial,
    _codes,
    _group_sum,
    _Meat,
    _weighted,
    _working,
)
from lincomb.errors import CovarianceInputError

__all__ = ["UnitSerialMeat", "TimeSumMeat", "bartlett_meat"]

Array = NDArray[np.float64]


def bartlett_meat(s: Array, lag: int, same: Sequence[NDArray[np.bool_]] | None = None) -> Array:
    """``Σ_t s_t s_tᵀ + Σ_{ℓ≤lag} (1 − ℓ/(lag+1)) (Γ_ℓ + Γ_ℓᵀ)`` for scores ``s`` (T, k) in
    time order; with ``same`` (a function of the lag giving which pairs count) only pairs
    of rows of one unit count.

    Examples
    --------
    >>> import numpy as np
    >>> s = np.array([[1.0], [2.0], [3.0]])
    >>> float(bartlett_meat(s, 1)[0, 0])  # 14 + 0.5 * 2 * (2 + 6)
    22.0
    """
    meat = s.T @ s
    for ell in range(1, min(lag, s.shape[0] - 1) + 1):
        a, b = s[ell:], s[:-ell]
        if same is not None:
            keep = same[ell - 1]
            a, b = a[keep], b[keep]
        gam = a.T @ b
        meat += (1.0 - ell / (lag + 1.0)) * (gam + gam.T)
    return meat


class UnitSerialMeat(_Meat):
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
        super().__init__(fit)
        self.lag = lag
        self.names = names
        self.small_sample = small_sample
        self.df = df
        self.units = units

    def block(
        self, xc: Array, resid: Array, w: Array | None, labels: tuple[NDArray[Any], ...] = ()
    ) -> Partial:
        """The whole meat (rows in unit and time order; ``labels[0]`` the unit codes)."""
        xc, resid = _weighted(xc, resid, w)
        s = np.ascontiguousarray((_working(self.rs, xc) * resid).T)
        unit = labels[0]
        same = [unit[ell:] == unit[:-ell] for ell in range(1, min(self.lag, s.shape[0] - 1) + 1)]
        return Partial(resid.size, float(resid @ resid), bartlett_meat(s, self.lag, same))

    def merge(self, *parts: Partial) -> Partial:
        assert len(parts) == 1
        return parts[0]

    def finish(self, part: Partial) -> CovarianceEstimate:
        assert part.gram is not None
        n, k = self.n_obs, self.k
        scale = n / (n - k) if self.small_sample else 1.0
        factor, clipped = psd_factor(part.gram * scale)
        label = (
            f"serial within {self.names[1]} (Bartlett, lag {self.lag}, {self.names[0]};"
            f" {self.units} units)"
        )
        if clipped:
            label += f"; {clipped} negative eigenvalue(s) set to 0"
        return CovarianceEstimate(
            method="serial within units",
            label=label,
            df_error=self.df_error if self.df is None else float(self.df),
            lag=self.lag,
            scale=scale,
            clipped=clipped,
            _sol=self.sol,
            _factor=factor,
        )


class TimeSumMeat(_Meat):
    """Newey–West on the scores summed per time point, as block / merge / finish."""

    fortran = False
    row_blocks = False

    def __init__(
        self, fit: Any, lag: int | None, name: str, small_sample: bool, df: float | None
    ) -> None:
        super().__init__(fit)
        self.lag = lag
        self.name = name
        self.small_sample = small_sample
        self.df = df

    def block(
        self, xc: Array, resid: Array, w: Array | None, labels: tuple[NDArray[Any], ...] = ()
    ) -> Partial:
        """Score sums per time label of the block (centred coordinates)."""
        u = resid if w is None else resid * w
        codes, uniq = _codes((labels[0],))
        sums = _group_sum(codes, len(uniq[0]), u, xc)
        return Partial(resid.size, float(resid @ u), groups=(Groups(uniq, sums),))

    def merge(self, *parts: Partial) -> Partial:
        if len(parts) == 1:
            return parts[0]
        keys = np.concatenate([p.groups[0].keys[0] for p in parts])
        sums = np.concatenate([p.groups[0].sums for p in parts])
        codes, uniq = _codes((keys,))
        merged = _group_sum(codes, len(uniq[0]), np.ones(codes.size), sums)
        return Partial(
            sum(p.n for p in parts),
            math.fsum(p.rss for p in parts),
            groups=(Groups(uniq, merged),),
        )

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
        n = self.n_obs
        scale = n / (n - k) if self.small_sample else 1.0
        factor, clipped = psd_factor(scale * bartlett_meat(np.ascontiguousarray(s), lag))
        label = f"common shocks by {self.name} ({t} time points; Bartlett, lag {lag})"
        if clipped:
            label += f"; {clipped} negative eigenvalue(s) set to 0"
        return CovarianceEstimate(
            method="common shocks",
            label=label,
            df_error=float(t - 1) if self.df is None else float(self.df),
            lag=lag,
            scale=scale,
            clipped=clipped,
            _sol=self.sol,
            _factor=factor,
        )
