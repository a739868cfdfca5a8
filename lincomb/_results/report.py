"""Report-ready tables of a tidy frame: Markdown, plain LaTeX ``tabular`` and standalone HTML.

The renderers take a tidy :class:`~pandas.DataFrame`, a mapping from its columns to the
headers to print (in the project's words: ``estimate``, ``target``, ``s.e.``, ``t`` or ``z``,
``p``, interval bounds) and a number of significant ``digits``.  Text columns are written as
they are (escaped for the target format); numeric columns are rounded to ``digits``
significant digits, a p-value below ``1e-16`` is written ``< 1e-16`` (below that the
floating-point tail is noise) and a missing number is written as a dash.

Nothing here computes a statistic: :class:`~lincomb._results.frames.WaldResult` picks the
columns of its ``row_frame`` (:func:`wald_report`) and hands them over.

* Markdown: a pipe table, text left-aligned and numbers right-aligned; ``|`` in a label is
  escaped.
* LaTeX: a bare ``tabular`` with ``\\hline`` rules, needing no package; the ten special
  characters of LaTeX (``\\ & % $ # _ { } ~ ^``) are escaped in labels and headers.
* HTML: one ``<table>`` whose style is written inline on each element, so it looks the same in
  a browser, a notebook or an e-mail, with no stylesheet and no external reference.
"""

from __future__ import annotations

import html
import math
import numbers
from collections.abc import Mapping
from typing import Any

import pandas as pd

from lincomb._docstrings import fill_doc, fill_lines_doc
from lincomb.errors import InternalError, ParameterError

__all__ = [
    "TABLE_STYLE",
    "HEAD_STYLE",
    "CELL_STYLE",
    "markdown_table",
    "latex_table",
    "html_table",
    "wald_headers",
    "check_digits",
    "latex_escape",
]

#: Inline styles of every HTML table lincomb writes (reports and ``_repr_html_``).
TABLE_STYLE = "border-collapse:collapse;font-family:sans-serif;font-size:0.9em;margin:0.5em 0"
HEAD_STYLE = "border-bottom:1px solid #444;padding:0.25em 0.6em;font-weight:bold"
CELL_STYLE = "border-bottom:1px solid #ddd;padding:0.25em 0.6em"

_TINY_P = 1e-16
_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}",
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
}


#: The parameters every table renderer takes (numpydoc section).
_TABLE_PARAMETERS = """\
Parameters
----------
frame : DataFrame
    A tidy frame, one row per table row.
headers : mapping of str to str
    Columns of ``frame`` to show, in order, each with the header to print.
digits : int, default 4
    Significant digits of every number."""
#: What every table renderer refuses (numpydoc section).
_TABLE_RAISES = """\
Raises
------
ParameterError
    ``digits`` is not in 1..17, or ``headers`` names a column the frame lacks."""
_table_doc = fill_doc(table_parameters=_TABLE_PARAMETERS, table_raises=_TABLE_RAISES)


def check_digits(digits: int) -> int:
    """Return ``digits`` if it is a whole number of significant digits from 1 to 17, else raise.

    Raises
    ------
    ParameterError
        ``digits`` is not an integer in 1..17 (float64 holds at most 17 significant digits).

    Examples
    --------
    >>> check_digits(4)
    4
    >>> check_digits(0)
    Traceback (most recent call last):
    ...
    lincomb.errors.ParameterError: digits must be a whole number from 1 to 17, got 0; e.g. 4.
    """
    if (
        isinstance(digits, bool)
        or not isinstance(digits, numbers.Integral)
        or not 1 <= digits <= 17
    ):
        raise ParameterError(f"digits must be a whole number from 1 to 17, got {digits!r}; e.g. 4.")
    return int(digits)


def _cell(value: Any, column: str, digits: int, dash: str) -> tuple[str, bool]:
    """``(text, is_number)`` of one cell."""
    if isinstance(value, numbers.Integral) and not isinstance(value, bool):
        return str(int(value)), True
    if isinstance(value, numbers.Real) and not isinstance(value, bool):
        v = float(value)
        if not math.isfinite(v):
            return dash, True
        if column == "p" and v < _TINY_P:
            return "< 1e-16", True
        return f"{v:.{digits}g}", True
    return str(value), False


def _cells(
    frame: pd.DataFrame, headers: Mapping[str, str], digits: int, dash: str
) -> tuple[list[str], list[list[tuple[str, bool]]]]:
    digits = check_digits(digits)
    missing = [c for c in headers if c not in frame.columns]
    if missing:
        raise ParameterError(
            f"column(s) {missing} are not in the frame (columns {list(frame.columns)});"
            " map only columns the frame has."
        )
    cols = list(headers)
    rows = [
        [_cell(value, col, digits, dash) for col, value in zip(cols, rec, strict=True)]
        for rec in frame[cols].itertuples(index=False, name=None)
    ]
    return [headers[c] for c in cols], rows


def _numeric_columns(frame: pd.DataFrame, headers: Mapping[str, str]) -> list[bool]:
    return [pd.api.types.is_numeric_dtype(frame[c]) for c in headers]


@_table_doc
def markdown_table(frame: pd.DataFrame, headers: Mapping[str, str], digits: int = 4) -> str:
    """Render the columns of ``frame`` named in ``headers`` as a Markdown pipe table.

    %(table_parameters)s

    Returns
    -------
    str
        The table, one line per row, text left-aligned and numbers right-aligned.

    %(table_raises)s

    Examples
    --------
    >>> import pandas as pd
    >>> frame = pd.DataFrame({"restriction": ["a | b"], "estimate": [1.23456]})
    >>> print(markdown_table(frame, {"restriction": "restriction", "estimate": "estimate"}, 3))
    | restriction | estimate |
    |:------------|---------:|
    | a \\| b      |     1.23 |
    """
    head, rows = _cells(frame, headers, digits, "—")
    numeric = _numeric_columns(frame, headers)

    def esc(s: str) -> str:
        return s.replace("|", "\\|")

    text = [[esc(h) for h in head]] + [[esc(c) for c, _ in r] for r in rows]
    widths = [max(3, *(len(r[i]) for r in text)) for i in range(len(head))]

    def line(cells: list[str]) -> str:
        parts = [
            c.rjust(w) if num else c.ljust(w)
            for c, w, num in zip(cells, widths, numeric, strict=True)
        ]
        return "| " + " | ".join(parts) + " |"

    rule = (
        "|"
        + "|".join(
            ("-" * (w + 1) + ":") if num else (":" + "-" * (w + 1))
            for w, num in zip(widths, numeric, strict=True)
        )
        + "|"
    )
    return "\n".join([line(text[0]), rule, *(line(r) for r in text[1:])])


def latex_escape(text: str) -> str:
    r"""Escape LaTeX's special characters (``\ & % $ # _ { } ~ ^``) in ``text``.

    Examples
    --------
    >>> print(latex_escape("a_1 = 50% & b^2 ~ {c} #3 $4 \\ d"))
    a\_1 = 50\% \& b\textasciicircum{}2 \textasciitilde{} \{c\} \#3 \$4 \textbackslash{} d
    """
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in text)


@_table_doc
def latex_table(frame: pd.DataFrame, headers: Mapping[str, str], digits: int = 4) -> str:
    r"""Render the columns of ``frame`` named in ``headers`` as a plain LaTeX ``tabular``.

    The table needs no package: rules are ``\hline``, text columns ``l`` and numeric columns
    ``r``; special characters in labels and headers are escaped (:func:`latex_escape`) and a
    missing number is written ``--``.  Wrap it in a ``table`` environment for a caption.

    %(table_parameters)s

    Returns
    -------
    str
        ``\begin{tabular}...\end{tabular}``.

    %(table_raises)s

    Examples
    --------
    >>> import pandas as pd
    >>> frame = pd.DataFrame({"restriction": ["x_1 = 0"], "p": [0.012345]})
    >>> print(latex_table(frame, {"restriction": "restriction", "p": "p"}, digits=2))
    \begin{tabular}{lr}
    \hline
    restriction & p \\
    \hline
    x\_1 = 0 & 0.012 \\
    \hline
    \end{tabular}
    """
    head, rows = _cells(frame, headers, digits, "--")
    spec = "".join("r" if num else "l" for num in _numeric_columns(frame, headers))

    def line(cells: list[str]) -> str:
        return " & ".join(cells) + r" \\"

    body = [line([latex_escape(c) for c, _ in r]) for r in rows]
    return "\n".join(
        [
            rf"\begin{{tabular}}{{{spec}}}",
            r"\hline",
            line([latex_escape(h) for h in head]),
            r"\hline",
            *body,
            r"\hline",
            r"\end{tabular}",
        ]
    )


@_table_doc
def html_table(
    frame: pd.DataFrame,
    headers: Mapping[str, str],
    digits: int = 4,
    caption: str | None = None,
) -> str:
    """Render the columns of ``frame`` named in ``headers`` as a self-styled HTML table.

    Every style is written inline (:data:`TABLE_STYLE`, :data:`HEAD_STYLE`,
    :data:`CELL_STYLE`); the table loads nothing and needs no stylesheet.

    %(table_parameters)s
    caption : str, optional
        A caption above the table (escaped).

    Returns
    -------
    str
        One ``<table>`` element.

    %(table_raises)s

    Examples
    --------
    >>> import pandas as pd
    >>> frame = pd.DataFrame({"restriction": ["a < b"], "se": [0.5]})
    >>> out = html_table(frame, {"restriction": "restriction", "se": "s.e."})
    >>> out.startswith("<table style=") and "a &lt; b" in out and "<th" in out
    True
    """
    head, rows = _cells(frame, headers, digits, "—")
    numeric = _numeric_columns(frame, headers)

    def align(num: bool) -> str:
        return "text-align:right" if num else "text-align:left"

    th = "".join(
        f"<th style='{HEAD_STYLE};{align(num)}'>{html.escape(h)}</th>"
        for h, num in zip(head, numeric, strict=True)
    )
    body = "".join(
        "<tr>"
        + "".join(
            f"<td style='{CELL_STYLE};{align(num)}'>{html.escape(c)}</td>"
            for (c, _), num in zip(r, numeric, strict=True)
        )
        + "</tr>"
        for r in rows
    )
    cap = (
        f"<caption style='text-align:left;padding:0.25em 0'>{html.escape(caption)}</caption>"
        if caption
        else ""
    )
    return (
        f"<table style='{TABLE_STYLE}'>{cap}<thead><tr>{th}</tr></thead>"
        f"<tbody>{body}</tbody></table>"
    )


@fill_lines_doc
def wald_headers(frame: pd.DataFrame, reference: str) -> dict[str, str]:
    """The columns of a Wald result's ``row_frame(level)`` that a report shows, with headers.

    A batch keeps its leading ``system`` column and a many-response test its ``response``
    column; then ``restriction``, ``estimate``, ``target``, ``s.e.``, ``t`` (F reference) or
    ``z`` (chi2 reference), ``p`` and the interval bounds headed with the level.

    Examples
    --------
    %(fill_lines_fit)s
    >>> res = f.wald(lc.coef("line[T.L2]") == 0)
    >>> list(wald_headers(res.row_frame(0.9), res.reference).values())
    ['restriction', 'estimate', 'target', 's.e.', 't', 'p', 'lower 90%', 'upper 90%']
    """
    headers: dict[str, str] = {}
    for key in ("system", "response"):
        if key in frame.columns:
            headers[key] = key
    pct = f"{100 * float(frame['level'].iloc[0]):g}%" if len(frame) else ""
    headers.update(
        {
            "restriction": "restriction",
            "estimate": "estimate",
            "target": "target",
            "se": "s.e.",
            "ratio": "t" if reference == "F" else "z",
            "p": "p",
            "lower": f"lower {pct}",
            "upper": f"upper {pct}",
        }
    )
    return headers


#: The opening of the Examples of :class:`ReportTables`: the result they render.
_RESTRICTED_FIT_EXAMPLES = """\
Examples
--------
>>> import lincomb as lc
>>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
>>> res = f.restrict(lc.coef("line[T.L2]") == 0)"""
_report_doc = fill_doc(restricted_fit_examples=_RESTRICTED_FIT_EXAMPLES)


class ReportTables:
    """Markdown, LaTeX and standalone HTML tables of a result's tidy frame.

    The frame is the result's own export: ``row_frame()``, else ``test_frame()``, else
    ``to_frame()``, else ``coef_frame()`` (the first it has), with its column names as headers.
    Wald results have their own versions with a ``level``.
    """

    def _report_frame(self) -> pd.DataFrame:
        for name in ("row_frame", "test_frame", "to_frame", "coef_frame"):
            method = getattr(self, name, None)
            if callable(method):
                frame: pd.DataFrame = method()
                return frame
        raise InternalError(f"{type(self).__name__} has no tidy frame to render")

    def _report(self) -> tuple[pd.DataFrame, dict[str, str]]:
        frame = self._report_frame()
        return frame, {str(c): str(c) for c in frame.columns}

    @_report_doc
    def as_markdown(self, digits: int = 4) -> str:
        """The result's tidy frame as a Markdown table, numbers to ``digits`` significant digits.

        %(restricted_fit_examples)s
        >>> print(res.as_markdown(digits=3).splitlines()[0])
        | coefficient | estimate |    se |
        """
        return markdown_table(*self._report(), digits=digits)

    @_report_doc
    def as_latex(self, digits: int = 4) -> str:
        """The result's tidy frame as a plain LaTeX ``tabular`` (labels escaped).

        %(restricted_fit_examples)s
        >>> res.as_latex().splitlines()[0]
        '\\\\begin{tabular}{lrr}'
        """
        return latex_table(*self._report(), digits=digits)

    @_report_doc
    def as_html(self, digits: int = 4) -> str:
        """The result's tidy frame as a standalone HTML table (inline styles only).

        %(restricted_fit_examples)s
        >>> res.as_html().startswith("<table")
        True
        """
        return html_table(*self._report(), digits=digits)
