"""The rows a robust covariance visits: the fit's design rows, residuals and per-row variables.

:class:`RowMap` turns raw design rows (of the fit, a chunk or a partition) into the fit's kept
columns centred on its means, and their residuals; :func:`fit_rows` gives the rows an in-memory
fit keeps.  :func:`row_values` reads a per-row variable (cluster labels, a time order) for the
rows a fit used, from a column name, an aligned Series or an array; :func:`cluster_codes` and
:func:`time_order` validate it.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb import _core as core
from lincomb._typing import Array
from lincomb.errors import CovarianceInputError, RowsUnavailableError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["RowMap", "fit_rows", "row_values", "cluster_codes", "time_order", "refuse_missing"]


@dataclass(frozen=True)
class RowMap:
    """How raw design rows become centred kept columns ``X_c`` and unweighted residuals ``e``.

    ``rs`` is ``R S``, the fit's factor with the column scales folded in, so that the working
    rows are ``X_w R⁻¹ = X_c (R S)⁻¹`` without a pass to scale the rows.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> x = np.column_stack([np.ones(5), np.arange(5.0)])
    >>> y = np.array([1.0, 3, 2, 5, 4])
    >>> f = lc.fit_arrays(x, y)
    >>> xc, e = RowMap.of(f.solution).rows(x, y)
    >>> bool(np.allclose(e, y - x @ f.coefficients.to_numpy()))
    True
    >>> bool(np.allclose(xc[:, 1], np.arange(5.0) - 2))
    True
    """

    kept: NDArray[np.intp]
    center: Array  # centres of the kept columns (the intercept's is 0)
    theta: Array  # coefficients of the centred kept columns
    rs: Array  # R S
    all_kept: bool  # every column kept, in order: centre without a gather

    @classmethod
    def of(cls, sol: core.Solution) -> RowMap:
        """The map of a fit's solution."""
        kept = sol.kept
        scale = sol.scale[kept]
        all_kept = kept.size == sol.center.size and np.array_equal(kept, np.arange(kept.size))
        return cls(kept, sol.center[kept], sol.theta / scale, sol.r * scale, bool(all_kept))

    def rows(self, x: Array, y: Array, *, fortran: bool = False) -> tuple[Array, Array]:
        """``(X_c, e)`` for a block of raw rows ``x`` (b, p) and responses ``y`` (b,);
        ``X_c`` is a new array (column-major with ``fortran``, for a solve from the right)."""
        if self.all_kept and x.shape[1] == self.kept.size:
            src = x  # one pass, no gather
        else:
            src = x[:, self.kept]  # a copy: fancy indexing
        xc = np.empty(src.shape, order="F" if fortran else "C")
        np.subtract(src, self.center, out=xc)
        return xc, y - xc @ self.theta


def fit_rows(fit: LinearFit) -> tuple[Array, Array, Array | None]:
    """The design rows, responses and weights (or None) of an in-memory fit."""
    design = fit.design
    x = getattr(design, "x", None)
    if x is None or x.shape[0] != fit.solution.n:
        raise RowsUnavailableError(
            "this robust covariance needs the rows of the fit (residuals and design rows), but"
            " this fit holds only summary statistics. Fit the data in memory (lc.fit or"
            " lc.fit_arrays) to use it, or use covariance='classical'."
        )
    return x, design.y, design.weights


def row_values(fit: LinearFit, source: Any, what: str) -> tuple[NDArray[Any], str]:
    """Values of a per-row variable for the rows the fit used, and a name for it."""
    design = fit.design
    n = fit.n_obs
    rows = design.row_index
    dropped = fit.n_dropped
    if isinstance(source, str):
        data = getattr(design, "source", None)
        if data is None:
            raise CovarianceInputError(
                f"{what} {source!r} names a column, but this fit was made from arrays and keeps"
                f" no data frame; pass the values as an array (one per row used, {n}) or a"
                " pandas Series."
            )
        if source not in data.columns:
            close = difflib.get_close_matches(source, [str(c) for c in data.columns], n=4)
            hint = f" Did you mean one of: {close}?" if close else ""
            raise CovarianceInputError(
                f"{what}: no column {source!r} in the fit's data.{hint}"
                f" Columns: {[str(c) for c in data.columns]}"
            )
        col = data[source]
        if len(col) != n:  # pragma: no cover - the design keeps exactly the rows used
            raise CovarianceInputError(f"{what}: column {source!r} does not match the rows used.")
        return col.to_numpy(), source
    if isinstance(source, pd.Series):
        name = str(source.name) if source.name is not None else "labels"
        if len(source) == n and source.index.equals(rows):
            return source.to_numpy(), name
        if rows.is_unique and source.index.is_unique and rows.isin(source.index).all():
            return source.reindex(rows).to_numpy(), name
        missing = rows[~rows.isin(source.index)]
        raise CovarianceInputError(
            f"{what}: the Series {name!r} cannot be aligned by index with the {n} rows the fit"
            " used"
            + (
                f" (its index lacks {len(missing)} of their labels, e.g. {missing[:5].tolist()})"
                if len(missing)
                else " (repeated labels)"
            )
            + "; give a Series indexed like the data, or an array with one value per row used."
        )
    arr = np.asarray(source)
    if arr.ndim != 1:
        raise CovarianceInputError(
            f"{what} must be one-dimensional (one value per row), got shape {arr.shape}."
        )
    if arr.shape[0] != n:
        extra = (
            f" ({dropped} rows were dropped for missing values, so {n + dropped} data rows"
            " became {n} rows used)".replace("{n}", str(n))
            if dropped
            else ""
        )
        raise CovarianceInputError(
            f"{what} have {arr.shape[0]} entries but the fit used {n} rows{extra}. Pass a column"
            " name of the data or a pandas Series aligned by index (dropped rows are then"
            " skipped), or one value per row used."
        )
    return arr, "labels"


def _show(value: Any) -> Any:
    """A numpy scalar as the plain Python value (for readable messages)."""
    return value.item() if isinstance(value, np.generic) else value


def _missing_at(values: NDArray[Any]) -> NDArray[np.intp]:
    return np.flatnonzero(pd.isna(values))


def refuse_missing(fit: LinearFit, values: NDArray[Any], what: str, fix: str) -> None:
    """Raise naming the first of the fit's rows where ``values`` are missing (``what`` says
    whose values, with its verb, ``fix`` the remedy)."""
    bad = _missing_at(values)
    if bad.size:
        row = _show(fit.design.row_index[int(bad[0])])
        raise CovarianceInputError(
            f"{what} missing at row {row!r} ({bad.size} missing in all); {fix}"
        )


def cluster_codes(fit: LinearFit, values: NDArray[Any], name: str) -> tuple[NDArray[np.intp], int]:
    refuse_missing(
        fit,
        values,
        f"cluster labels {name!r} are",
        "give every row used a cluster (for example its own label) or drop those rows"
        " before fitting.",
    )
    codes, uniques = pd.factorize(values, sort=False)
    g = len(uniques)
    if g < 2:
        raise CovarianceInputError(
            f"cluster labels {name!r} hold a single cluster ({_show(uniques[0])!r}); a"
            " cluster-robust covariance needs at least two clusters (and preferably many more)."
        )
    return codes.astype(np.intp), g


def time_order(fit: LinearFit, values: NDArray[Any], name: str) -> NDArray[np.intp]:
    refuse_missing(fit, values, f"time order {name!r} is", "every row used needs a time value.")
    perm = np.argsort(values, kind="stable")
    ordered = values[perm]
    ties = np.flatnonzero(ordered[1:] == ordered[:-1])
    if ties.size:
        raise CovarianceInputError(
            f"time order {name!r} repeats the value {_show(ordered[ties[0]])!r} ({ties.size} ties):"
            " a serial covariance needs one observation per time point. For several series"
            " (panels) cluster by series with lc.clustered(...), or aggregate per time point."
        )
    return perm.astype(np.intp)
