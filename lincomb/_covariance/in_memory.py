"""Robust covariances of an in-memory fit: the meats of :mod:`~lincomb._covariance.meats` run
over blocks of the fit's rows.

On the main thread with threadpoolctl installed, rows are visited in blocks of about
:data:`BLOCK_ELEMENTS` numbers (``rows × kept columns``) on one BLAS thread: each block is
centred, solved and summed while it is in cache, and no ``n × k`` work array is allocated.
Elsewhere (worker threads, where thread limits would race) the rows form one block.  The result
is the same up to the order of summation.
"""

from __future__ import annotations

import contextlib
import threading
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb._covariance.bias_reduced import AdjustedClusterMeat
from lincomb._covariance.estimate import CovarianceEstimate
from lincomb._covariance.meats import ClusterMeat, HeteroskedasticMeat, SerialMeat
from lincomb._covariance.panel import TimeSumMeat, UnitSerialMeat
from lincomb._covariance.rows import (
    RowMap,
    cluster_codes,
    fit_rows,
    refuse_missing,
    row_values,
    time_order,
)
from lincomb._settings import blas_limit, can_limit
from lincomb.errors import CovarianceInputError, TiedTimesError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = [
    "BLOCK_ELEMENTS",
    "heteroskedastic",
    "clustered",
    "adjusted_clustered",
    "serial",
    "common_shocks",
    "automatic_lag",
]

#: Numbers (rows × kept columns) in one block of rows: 512 KiB, well inside a core's L2 cache.
BLOCK_ELEMENTS: int = 1 << 16
_MIN_ROWS = 256


def automatic_lag(n: int) -> int:
    """The Newey–West (1994) rule of thumb ``floor(4 (n/100)^(2/9))`` for the Bartlett kernel.

    Examples
    --------
    >>> automatic_lag(100), automatic_lag(1000)
    (4, 6)
    """
    return int(np.floor(4.0 * (n / 100.0) ** (2.0 / 9.0)))


def _limited(fit: LinearFit, meat: Any) -> tuple[int, bool]:
    """Rows per block, and whether to run on one BLAS thread (a large fit on the main thread
    with threadpoolctl: threads woken for small products cost more than the products on busy
    cores, and limits set by concurrent threads would race)."""
    n, kept = fit.n_obs, max(int(fit.solution.rank), 1)
    step = max(_MIN_ROWS, BLOCK_ELEMENTS // kept)
    on_main = threading.current_thread() is threading.main_thread()
    limited = n >= 2 * step and on_main and can_limit()
    if not (limited and meat.row_blocks):
        return max(n, 1), limited
    return max(step * meat.block_scale, meat.min_block_rows), limited


def _over_rows_partial(
    meat: Any,
    fit: LinearFit,
    labels: tuple[NDArray[Any], ...] = (),
    order: NDArray[np.intp] | None = None,
    step: int | None = None,
) -> Any:
    """The merged partial of ``meat.block`` over blocks of ``step`` of the fit's rows (in
    ``order`` if given; ``meat.finish`` of it is the estimate); by default the blocks and BLAS
    threads of :func:`_limited`."""
    if step is None:
        step, limited = _limited(fit, meat)
        with blas_limit(1) if limited else contextlib.nullcontext():
            return _over_rows_partial(meat, fit, labels, order, step)
    x, y, w = fit_rows(fit)
    rmap = RowMap.of(fit.solution)
    parts = []
    for s in range(0, x.shape[0], step):
        rows: slice | NDArray[np.intp] = (
            slice(s, s + step) if order is None else order[s : s + step]
        )
        xc, resid = rmap.rows(x[rows], y[rows], fortran=meat.fortran)
        weights = None if w is None else w[rows]
        parts.append(meat.block(xc, resid, weights, tuple(lab[rows] for lab in labels)))
    return meat.merge(*parts)


def _over_rows(
    meat: Any,
    fit: LinearFit,
    labels: tuple[NDArray[Any], ...] = (),
    order: NDArray[np.intp] | None = None,
) -> CovarianceEstimate:
    """The estimate ``meat.finish`` of the merged partial over blocks of the fit's rows; the
    finish (a solve with one right-hand side per cluster, a small eigendecomposition) runs on
    the same BLAS threads as the blocks."""
    step, limited = _limited(fit, meat)
    with blas_limit(1) if limited else contextlib.nullcontext():
        estimate: CovarianceEstimate = meat.finish(
            _over_rows_partial(meat, fit, labels, order, step)
        )
    return estimate


def heteroskedastic(fit: LinearFit, kind: str) -> CovarianceEstimate:
    """``HC0`` ... ``HC4`` on an in-memory fit."""
    meat = HeteroskedasticMeat(fit, kind)
    return _over_rows(meat, fit)


def clustered(
    fit: LinearFit,
    by: tuple[Any, ...],
    small_sample: bool,
    df: float | None,
    two_way_factor: str = "per-term",
) -> CovarianceEstimate:
    """One- or two-way cluster-robust covariance on an in-memory fit."""
    codes = []
    names = []
    sizes = []
    for b in by:
        values, name = row_values(fit, b, "cluster labels")
        c, g = cluster_codes(fit, values, name)
        codes.append(c)
        names.append(name)
        sizes.append(g)
    if len(codes) == 2:  # the intersection cells, coded once for all blocks
        cells, uniq = pd.factorize(codes[0].astype(np.int64) * sizes[1] + codes[1], sort=False)
        codes.append(cells.astype(np.intp))
        sizes.append(len(uniq))
    meat = ClusterMeat(fit, tuple(names), small_sample, df, two_way_factor, coded=tuple(sizes))
    return _over_rows(meat, fit, tuple(codes))


def adjusted_clustered(
    fit: LinearFit, by: Any, adjust: str, df: float | None
) -> CovarianceEstimate:
    """The bias-reduced or jackknife cluster-robust covariance on an in-memory fit."""
    values, name = row_values(fit, by, "cluster labels")
    codes, _ = cluster_codes(fit, values, name)
    meat = AdjustedClusterMeat(fit, name, adjust, df)
    return _over_rows(meat, fit, (codes,))


def serial(
    fit: LinearFit,
    lag: int | None,
    order: Any,
    small_sample: bool,
    df: float | None,
    units: Any = None,
) -> CovarianceEstimate:
    """Newey–West covariance on an in-memory fit, rows taken in time order (within units)."""
    if units is not None:
        return _serial_within(fit, lag, order, small_sample, df, units)
    n = fit.n_obs
    lag = automatic_lag(n) if lag is None else lag
    if lag >= n:
        raise CovarianceInputError(
            f"lag {lag} is not smaller than the {n} observations the fit used; a lag must"
            f" be below n (the automatic rule gives {automatic_lag(n)})."
        )
    fit_rows(fit)  # rows first: a fit without rows says so before the order is read
    if order is None:
        perm: NDArray[np.intp] | None = None
        order_name = "row order"
    else:
        values, order_name = row_values(fit, order, "time order")
        perm = time_order(fit, values, order_name)
    meat = SerialMeat(fit, lag, order_name, small_sample, df)
    return _over_rows(meat, fit, order=perm)


def _serial_within(
    fit: LinearFit, lag: int | None, order: Any, small_sample: bool, df: float | None, units: Any
) -> CovarianceEstimate:
    """Newey–West within units: rows sorted by unit, then time; lags stay inside a unit."""
    fit_rows(fit)
    if order is None:
        raise CovarianceInputError(
            "serial(..., units=...) needs the time order of each unit's rows: pass order= (a"
            " column name, a Series or one value per row)."
        )
    uvalues, uname = row_values(fit, units, "units")
    ucodes, g = cluster_codes(fit, uvalues, uname)
    tvalues, tname = row_values(fit, order, "time order")
    refuse_missing(fit, tvalues, f"time order {tname!r} is", "every row used needs a time value.")
    tcodes = pd.factorize(tvalues, sort=True)[0]
    perm = np.lexsort((tcodes, ucodes)).astype(np.intp)
    us, ts = ucodes[perm], tcodes[perm]
    ties = np.flatnonzero((us[1:] == us[:-1]) & (ts[1:] == ts[:-1]))
    if ties.size:
        i = perm[ties[0]]
        raise TiedTimesError(
            f"time order {tname!r} repeats the value {tvalues[i]!r} within unit"
            f" {uvalues[i]!r} of {uname!r} ({ties.size} ties): lags within a unit need one row"
            " per unit and time point. Aggregate those rows, or use lc.common_shocks(time=...)"
            " or lc.clustered(by=...) instead."
        )
    longest = int(np.bincount(ucodes).max())
    lag = automatic_lag(longest) if lag is None else lag
    if lag >= longest:
        raise CovarianceInputError(
            f"lag {lag} is not smaller than the longest unit's {longest} rows; the automatic"
            f" rule gives {automatic_lag(longest)}."
        )
    meat = UnitSerialMeat(fit, lag, (tname, uname), small_sample, df, g)
    return _over_rows(meat, fit, (ucodes,), order=perm)


def common_shocks(
    fit: LinearFit, time: Any, lag: int | None, small_sample: bool, df: float | None
) -> CovarianceEstimate:
    """Newey–West on scores summed per time point, on an in-memory fit."""
    fit_rows(fit)
    values, name = row_values(fit, time, "time")
    refuse_missing(fit, values, f"time {name!r} is", "every row used needs a time value.")
    meat = TimeSumMeat(fit, lag, name, small_sample, df)
    return _over_rows(meat, fit, (values,))
