"""Comparing nested fits of the same rows: the F test of the extra columns, in sequence.

:func:`compare_nested` takes fits from the smallest to the largest.  It first checks what the
comparison assumes, and raises :class:`~lincomb.errors.NotNestedError` otherwise:

* the same rows: the same number of rows, the same row labels, the same response and weights
  (exactly: the comparison is meaningless otherwise);
* nesting: every column of a fit lies in the column space of the next.  Checked numerically
  with the core's own rank decision: the columns of the larger design followed by those of
  the smaller are factored together (:func:`~lincomb._core.moments_from_arrays`,
  :func:`~lincomb._core.solve`); nesting holds when every column of the smaller fit is aliased
  (relative tolerance :data:`~lincomb._core.RANK_TOL`, invariant to shifting and rescaling
  columns).  So two codings of one factor count as nested both ways.

Row ``i`` of the table tests fit ``i − 1`` against fit ``i``:
``F = ((RSS_{i−1} − RSS_i) / (df_{i−1} − df_i)) / (RSS_L / df_L)`` with ``L`` the largest fit
(its error variance is the best estimate when the larger fits hold), against F with
``df_{i−1} − df_i`` and ``df_L`` degrees of freedom.  For two fits this is the classical F of
the extra columns; it equals the Wald F of those coefficients being zero in the larger fit.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy import stats

from lincomb import _core as core
from lincomb._results.format import TableRepr, _num, _p
from lincomb._results.frames import field_frame
from lincomb._typing import Array
from lincomb.errors import InputError, NotNestedError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["NestedComparison", "compare_nested", "NESTED_COLUMNS"]


#: Columns of :meth:`NestedComparison.test_frame`.
NESTED_COLUMNS = ("model", "df_error", "rss", "df_test", "ss", "stat", "p")


@dataclass(frozen=True, repr=False)
class NestedComparison(TableRepr):
    """F tests between nested fits of the same rows, smallest first.

    Made by :func:`lincomb.compare_nested`.

    Attributes
    ----------
    models : tuple of str
        The fits' formulas (or ``fit 0``, ``fit 1``, ... for fits from arrays).
    df_error : (k,) ndarray of int
        Residual degrees of freedom of each fit.
    rss : (k,) ndarray
        Residual sums of squares.
    df_test : (k,) ndarray
        Extra dimensions of each fit over the previous one (NaN for the first).
    ss : (k,) ndarray
        Reduction in RSS over the previous fit.
    stat, p : (k,) ndarray
        F and its p-value (NaN for the first fit, and where ``df_test`` is 0).

    Examples
    --------
    >>> import lincomb as lc
    >>> data = lc.datasets.fill_lines()
    >>> cmp = lc.compare_nested(lc.fit("fill_g ~ line", data),
    ...                         lc.fit("fill_g ~ line + shift", data))
    >>> cmp.test_frame()["df_test"].tolist()[1]  # shift has three levels
    2.0
    """

    models: tuple[str, ...]
    df_error: NDArray[np.intp]
    rss: Array
    df_test: Array
    ss: Array
    stat: Array
    p: Array

    def test_frame(self) -> pd.DataFrame:
        """One row per fit; the test on row ``i`` compares fit ``i − 1`` with fit ``i``.

        Returns
        -------
        pandas.DataFrame
            Columns ``model, df_error, rss, df_test, ss, stat, p``.

        Examples
        --------
        >>> import lincomb as lc
        >>> data = lc.datasets.fill_lines()
        >>> fits = [lc.fit(f, data) for f in ("fill_g ~ 1", "fill_g ~ line")]
        >>> list(lc.compare_nested(*fits).test_frame().columns)
        ['model', 'df_error', 'rss', 'df_test', 'ss', 'stat', 'p']
        """
        return field_frame(self, NESTED_COLUMNS, model="models")

    def _parts(self) -> tuple[str, list[str], list[list[str]], str]:
        head = (
            "Nested fits of the same rows, each against the one before"
            f" (F; error variance of the largest fit, {int(self.df_error[-1])} df)"
        )
        header = ["model", "df_error", "rss", "df_test", "extra SS", "F", "p"]
        rows = []
        for i, m in enumerate(self.models):
            if i == 0:
                rows.append([m, str(int(self.df_error[i])), _num(self.rss[i]), "", "", "", ""])
            else:
                rows.append(
                    [
                        m,
                        str(int(self.df_error[i])),
                        _num(self.rss[i]),
                        _num(self.df_test[i]),
                        _num(self.ss[i]),
                        _num(self.stat[i]),
                        _p(self.p[i]),
                    ]
                )
        return head, header, rows, ""


def _check_same_rows(a: LinearFit, b: LinearFit, i: int) -> None:
    da, db = a.design, b.design
    why = ""
    if a.n_obs != b.n_obs:
        why = f"fit {i - 1} used {a.n_obs} rows and fit {i} used {b.n_obs}"
    elif not da.row_index.equals(db.row_index):
        why = f"fits {i - 1} and {i} used rows with other labels"
    elif not np.array_equal(np.asarray(da.y), np.asarray(db.y)):
        why = f"fits {i - 1} and {i} have other responses ({a.response!r}, {b.response!r})"
    else:
        wa, wb = da.weights, db.weights
        if wa is None or wb is None:
            differ = (wa is None) != (wb is None)
        else:
            differ = not np.array_equal(wa, wb)
        if differ:
            why = f"fits {i - 1} and {i} have other weights"
    if why:
        raise NotNestedError(
            f"nested fits must use the same rows, response and weights, but {why}. Fit both on"
            " the same data (drop rows with missing values in any model's variables first)."
        )


def _check_nested(a: LinearFit, b: LinearFit, i: int, tol: float) -> None:
    xa, xb = a.design.x, b.design.x
    x = np.hstack([xb, xa])
    # the larger fit's intercept (if any) leads; the smaller fit's columns come last, so each
    # of them is aliased exactly when it lies in the span of the larger fit's columns
    m = core.moments_from_arrays(x, b.design.y, b.design.weights, b.design.intercept)
    sol = core.solve(m, tol)
    outside = sorted(int(j) - xb.shape[1] for j in sol.kept if j >= xb.shape[1])
    if outside:
        names = [a.names[j] for j in outside]
        raise NotNestedError(
            f"fit {i - 1} is not nested in fit {i}: its columns {names} lie outside the column"
            f" space of fit {i} (relative tolerance {tol:g}). Order the fits from smallest to"
            " largest, and make each model's terms a subset of the next one's."
        )


def compare_nested(*fits: LinearFit) -> NestedComparison:
    """Compare nested fits of the same rows, from the smallest to the largest.

    Parameters
    ----------
    *fits : LinearFit
        Two or more fits made in memory (their rows are needed to check nesting), each
        nested in the next.

    Returns
    -------
    NestedComparison

    Raises
    ------
    NotNestedError
        The fits use other rows, responses or weights, or a fit's columns are not in the
        column space of the next (see :mod:`lincomb._results.nested`).
    RowsUnavailableError
        A fit keeps only summaries.

    Examples
    --------
    >>> import lincomb as lc
    >>> data = lc.datasets.fill_lines()
    >>> small, big = lc.fit("fill_g ~ line", data), lc.fit("fill_g ~ line + shift", data)
    >>> res = lc.compare_nested(small, big)
    >>> import numpy as np
    >>> bool(np.isclose(res.stat[1], big.wald(lc.term("shift") == 0).stat))
    True
    """
    from lincomb._fit.linear import LinearFit

    if len(fits) == 1 and isinstance(fits[0], Sequence):
        fits = tuple(fits[0])
    if len(fits) < 2:
        raise InputError("compare_nested needs at least two fits, smallest first.")
    for i, f in enumerate(fits):
        if not isinstance(f, LinearFit):
            raise InputError(f"argument {i} is a {type(f).__name__}, not a fit (lc.fit(...)).")
    for i in range(1, len(fits)):
        _check_same_rows(fits[i - 1], fits[i], i)
        _check_nested(fits[i - 1], fits[i], i, max(fits[i].rank_tol, fits[i - 1].rank_tol))
    rss = np.array([f.rss for f in fits])
    dfe = np.array([f.df_error for f in fits], dtype=np.intp)
    last = fits[-1]
    scale = last.rss / last.df_error
    k = len(fits)
    df_test = np.full(k, np.nan)
    ss = np.full(k, np.nan)
    stat = np.full(k, np.nan)
    p = np.full(k, np.nan)
    for i in range(1, k):
        df_test[i] = dfe[i - 1] - dfe[i]
        ss[i] = rss[i - 1] - rss[i]
        if df_test[i] > 0 and scale > 0:
            stat[i] = ss[i] / df_test[i] / scale
            p[i] = stats.f.sf(stat[i], df_test[i], last.df_error)
    models = tuple(f.formula or f"fit {i}" for i, f in enumerate(fits))
    return NestedComparison(
        models=models, df_error=dfe, rss=rss, df_test=df_test, ss=ss, stat=stat, p=p
    )
