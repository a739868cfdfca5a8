"""One vocabulary for every Wald result: shared attributes, row p-values and tidy frames.

:class:`~lincomb.WaldTest` (one system on one fit), :class:`~lincomb.WaldBatch` (many systems
on one fit) and :class:`~lincomb.ManyWaldTest` (one system on many responses) are all *groups*
of tests: one group for a single test, one per system, one per response.  Each class says what
its groups are (:meth:`WaldResult._groups`); the row p-values, the per-row frame and the
per-test frame are written here once, so the three cannot drift apart.

Columns of ``row_frame(level=0.95)`` (one row per restriction row; a batch adds a leading
``system`` column, a many-response test a leading ``response`` column): :data:`ROW_COLUMNS`.
Columns of ``test_frame()`` (one row per test; the same leading columns): :data:`TEST_COLUMNS`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy import stats

from lincomb._core.checks import check_level
from lincomb._docstrings import FILL_LINES_FIT, fill_doc, fill_lines_doc
from lincomb._results.report import html_table, latex_table, markdown_table, wald_headers
from lincomb._typing import Array

__all__ = [
    "ROW_COLUMNS",
    "TEST_COLUMNS",
    "RESULT_ATTRIBUTES",
    "WaldRows",
    "WaldResult",
    "field_frame",
]

#: The parameters and return of ``as_markdown`` / ``as_latex`` / ``as_html`` (numpydoc sections).
_REPORT_PARAMETERS = """\
Parameters
----------
level : float, default 0.95
    Confidence level of the intervals, in (0, 1).
digits : int, default 4
    Significant digits of every number, 1 to 17.

Returns
-------
str"""
_report_doc = fill_doc(report_parameters=_REPORT_PARAMETERS, fill_lines_fit=FILL_LINES_FIT)

#: Columns of ``row_frame(level)``: one row per restriction row.
ROW_COLUMNS = (
    "row",
    "restriction",
    "estimate",
    "target",
    "se",
    "ratio",
    "p",
    "lower",
    "upper",
    "level",
    "role",
    "status",
    "reference",
    "df_error",
    "covariance",
)
#: Columns of ``test_frame()``: one row per test.
TEST_COLUMNS = (
    "restrictions",
    "rows",
    "rank",
    "stat",
    "reference",
    "df_test",
    "df_error",
    "p",
    "covariance",
    "redundant_rows",
    "status",
)
#: Attributes and methods every Wald result has.
RESULT_ATTRIBUTES = (
    "labels",
    "estimate",
    "target",
    "se",
    "ratio",
    "stat",
    "df_test",
    "df_error",
    "p",
    "reference",
    "covariance",
    "redundant",
    "status",
    "row_p",
    "row_frame",
    "test_frame",
    "as_markdown",
    "as_latex",
    "as_html",
)


def field_frame(result: object, columns: Sequence[str], **renamed: str) -> pd.DataFrame:
    """A tidy frame whose columns are a result's fields of the same names, in ``columns`` order.

    ``renamed`` maps a column to the field it comes from where the names differ
    (``row="rows"``).  A scalar field fills its column.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> res = SimpleNamespace(terms=("a", "b"), p=[0.5, 0.01], reference="F")
    >>> field_frame(res, ("term", "p", "reference"), term="terms").values.tolist()
    [['a', 0.5, 'F'], ['b', 0.01, 'F']]
    """
    return pd.DataFrame({c: getattr(result, renamed.get(c, c)) for c in columns})


def _row_tail(ratio: Array, df_error: Array) -> Array:
    """Two-sided p of each ratio: t with ``df_error``, normal where ``df_error`` is inf."""
    finite = np.isfinite(df_error)
    with np.errstate(invalid="ignore"):
        t_tail = stats.t.sf(np.abs(ratio), np.where(finite, df_error, 1.0))
    out: Array = 2 * np.where(finite, t_tail, stats.norm.sf(np.abs(ratio)))
    return out


def _row_quantile(level: float, df_error: Array) -> Array:
    finite = np.isfinite(df_error)
    with np.errstate(invalid="ignore"):
        q = stats.t.ppf(0.5 + level / 2, np.where(finite, df_error, 1.0))
    out: Array = np.where(finite, q, stats.norm.ppf(0.5 + level / 2))
    return out


@dataclass(frozen=True)
class _Groups:
    """A result seen as ``g`` tests of ``m`` rows each (arrays ``(g, m)`` or ``(g,)``)."""

    key: str | None  # name of the leading column ("system", "response") or None
    keys: list[Any]
    labels: list[tuple[str, ...]]
    estimate: Array
    target: Array
    se: Array
    ratio: Array
    stat: Array
    df_test: NDArray[Any]
    df_error: Array
    p: Array
    role: NDArray[Any]  # (g, m) of str
    status: list[str]
    redundant_rows: NDArray[Any]  # (g,) of int
    row_df: Array | None = None  # (g, m): each row's own df, when the estimator gives one


@dataclass(frozen=True, kw_only=True)
class WaldRows:
    """The per-row numbers of a Wald result, declared once for the classes that hold them.

    ``estimate`` (``Cβ̂``), ``target`` (``d``), ``se`` and ``ratio`` (``(estimate − target) /
    se``): ``(m,)`` arrays for one test, ``(k, m)`` for a batch of ``k`` systems.  The classes
    document them among their attributes.
    """

    estimate: Array
    target: Array
    se: Array
    ratio: Array


class WaldResult:
    """Shared behaviour of the Wald result classes (a mixin over their frozen dataclasses)."""

    ratio: Array
    reference: str
    covariance: str

    def _groups(self) -> _Groups:  # pragma: no cover - each class says what its groups are
        raise NotImplementedError

    def _row_df(self) -> Array:  # pragma: no cover - each class says what its rows' df are
        """The error df of each row, broadcastable against ``ratio``."""
        raise NotImplementedError

    def _row_p(self, ratio: Array, df_error: Array) -> Array:
        return _row_tail(ratio, df_error)

    @property
    @fill_lines_doc
    def row_p(self) -> Array:
        """Two-sided p-value of each row: t with the row's ``df_error``, normal where it is inf.

        Shaped as ``ratio``: ``(m,)`` for a :class:`~lincomb.WaldTest` (with each row's own
        df where the covariance estimator gives them), ``(k, m)`` for a
        :class:`~lincomb.WaldBatch` of ``k`` systems, ``(r, m)`` for a
        :class:`~lincomb.ManyWaldTest` on ``r`` responses (each with its own ``df_error``).

        Examples
        --------
        %(fill_lines_fit)s
        >>> f.wald(lc.term("line") == 0).row_p.shape
        (3,)
        >>> f.wald_batch([lc.coef("line[T.L2]") == 0, lc.coef("line[T.L3]") == 0]).row_p.shape
        (2, 1)
        """
        return self._row_p(self.ratio, self._row_df())

    def _row_frame(self, level: float) -> pd.DataFrame:
        check_level(level)
        g = self._groups()
        k, m = g.estimate.shape
        if g.row_df is not None:
            df = np.asarray(g.row_df, dtype=np.float64).reshape(k, m)
        else:
            df = np.broadcast_to(np.asarray(g.df_error, dtype=np.float64).reshape(-1, 1), (k, m))
        q = _row_quantile(level, df)
        cols: dict[str, Any] = {}
        if g.key is not None:
            cols[g.key] = [key for key in g.keys for _ in range(m)]
        cols.update(
            {
                "row": np.tile(np.arange(m), k),
                "restriction": [lab for labs in g.labels for lab in labs],
                "estimate": g.estimate.ravel(),
                "target": g.target.ravel(),
                "se": g.se.ravel(),
                "ratio": g.ratio.ravel(),
                "p": self._row_p(g.ratio, df).ravel(),
                "lower": (g.estimate - q * g.se).ravel(),
                "upper": (g.estimate + q * g.se).ravel(),
                "level": level,
                "role": g.role.ravel(),
                "status": [s for s in g.status for _ in range(m)],
                "reference": self.reference,
                "df_error": df.ravel(),
                "covariance": self.covariance,
            }
        )
        return pd.DataFrame(cols)

    def _report(self, level: float) -> tuple[pd.DataFrame, dict[str, str]]:
        frame = self._row_frame(level)
        return frame, wald_headers(frame, self.reference)

    @_report_doc
    def as_markdown(self, level: float = 0.95, digits: int = 4) -> str:
        """The rows of the test as a Markdown table, numbers to ``digits`` significant digits.

        Columns (a batch or a many-response test starts with ``system`` or ``response``):
        ``restriction``, ``estimate``, ``target``, ``s.e.``, ``t`` (``z`` under a chi2
        reference), ``p`` and the bounds of the marginal interval at ``level``, the numbers of
        ``row_frame(level)`` rounded.

        %(report_parameters)s

        Examples
        --------
        %(fill_lines_fit)s
        >>> res = f.wald((lc.coef("line[T.L2]") == 0).labelled("L2 vs L1"))
        >>> print(res.as_markdown(level=0.9, digits=3))
        | restriction | estimate | target |  s.e. |     t |        p | lower 90% | upper 90% |
        |:------------|---------:|-------:|------:|------:|---------:|----------:|----------:|
        | L2 vs L1    |    -1.03 |      0 | 0.272 | -3.77 | 0.000199 |     -1.47 |    -0.576 |
        """
        return markdown_table(*self._report(level), digits=digits)

    @_report_doc
    def as_latex(self, level: float = 0.95, digits: int = 4) -> str:
        r"""The rows of the test as a plain LaTeX ``tabular`` (no package needed).

        The columns are those of :meth:`as_markdown`; LaTeX's special characters in labels
        (``\ & % $ # _ { } ~ ^``) are escaped.

        %(report_parameters)s

        Examples
        --------
        %(fill_lines_fit)s
        >>> tex = f.wald((lc.coef("line[T.L2]") == 0).labelled("L2 & L1")).as_latex()
        >>> tex.splitlines()[0], "L2 \\& L1" in tex
        ('\\begin{tabular}{lrrrrrrr}', True)
        """
        return latex_table(*self._report(level), digits=digits)

    @_report_doc
    def as_html(self, level: float = 0.95, digits: int = 4) -> str:
        """The rows of the test as one standalone HTML table with inline style.

        The columns are those of :meth:`as_markdown`; the table needs no stylesheet and
        loads nothing.

        %(report_parameters)s

        Examples
        --------
        %(fill_lines_fit)s
        >>> page = f.wald(lc.levels("line").pairwise()).as_html(digits=3)
        >>> page.startswith("<table style=") and page.count("<tr>") == 1 + 6
        True
        """
        return html_table(*self._report(level), digits=digits)

    def _test_frame(self) -> pd.DataFrame:
        g = self._groups()
        k, m = g.estimate.shape
        cols: dict[str, Any] = {}
        if g.key is not None:
            cols[g.key] = list(g.keys)
        cols.update(
            {
                "restrictions": [" & ".join(labs) for labs in g.labels],
                "rows": np.full(k, m),
                "rank": g.df_test,
                "stat": g.stat,
                "reference": self.reference,
                "df_test": g.df_test,
                "df_error": np.broadcast_to(np.asarray(g.df_error, dtype=np.float64), (k,)),
                "p": g.p,
                "covariance": self.covariance,
                "redundant_rows": g.redundant_rows,
                "status": list(g.status),
            }
        )
        return pd.DataFrame(cols, index=pd.RangeIndex(k))


def roles(m: int, redundant: dict[int, Any]) -> NDArray[Any]:
    """``"redundant"`` or ``"independent"`` for each of ``m`` rows."""
    return np.array(
        ["redundant" if i in redundant else "independent" for i in range(m)], dtype=object
    )
