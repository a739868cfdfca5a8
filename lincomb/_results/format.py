"""Plain-text and HTML presentation of fits and results (no computation here)."""

from __future__ import annotations

import html
from typing import TYPE_CHECKING, ClassVar

import numpy as np

from lincomb._results.report import CELL_STYLE, HEAD_STYLE, TABLE_STYLE, ReportTables

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit
    from lincomb._results.wald import RestrictedFit, WaldBatch, WaldTest


def _p_clause(p: float) -> str:
    """``p = 0.031`` or ``p < 1e-16`` (never ``p = < 1e-16``)."""
    text = _p(p)
    return f"p {text}" if text.startswith("<") else f"p = {text}"


def _p(p: float) -> str:
    if not np.isfinite(p):
        return "nan"
    return "< 1e-16" if p < 1e-16 else f"{p:.4g}"


def _num(v: float) -> str:
    return "—" if not np.isfinite(v) else f"{v:.6g}"


def _html_lines(text: str) -> str:
    """``text`` escaped for HTML, its lines joined by ``<br>``."""
    return "<br>".join(html.escape(s) for s in text.split("\n"))


class TableRepr(ReportTables):
    """Text and HTML reprs of a result shown as a head, a table and an optional tail line.

    A subclass gives ``_parts()``: ``(head, header, rows, tail)``, ``tail`` empty for none and
    ``header`` empty for a result shown by its head alone.  In HTML the parts stand in
    ``_HTML_DIV`` and the head is bold (``_head_html`` says how).  (A dataclass using it is
    declared with ``repr=False`` so that it keeps these reprs.)
    """

    _HTML_DIV: ClassVar[str] = "<div>"

    def _parts(self) -> tuple[str, list[str], list[list[str]], str]:
        raise NotImplementedError  # pragma: no cover - each result has its own

    def _head_html(self, head: str) -> str:
        return f"<b>{_html_lines(head)}</b>"

    def __repr__(self) -> str:
        head, header, rows, tail = self._parts()
        table = _table_text(header, rows) if header else ""
        return "\n".join(s for s in (head, table, tail) if s)

    def _repr_html_(self) -> str:
        head, header, rows, tail = self._parts()
        table = _table_html(header, rows) if header else ""
        foot = f"<p>{html.escape(tail)}</p>" if tail else ""
        return f"{self._HTML_DIV}<p>{self._head_html(head)}</p>{table}{foot}</div>"


def _table_text(header: list[str], rows: list[list[str]]) -> str:
    widths = [
        max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(header)
    ]

    def fmt(cells: list[str]) -> str:
        pairs = enumerate(zip(cells, widths, strict=True))
        return "  ".join(c.ljust(w) if i == 0 else c.rjust(w) for i, (c, w) in pairs)

    line = fmt(header)
    out = [line, "  ".join("-" * w for w in widths)]
    for r in rows:
        out.append(fmt(r))
    return "\n".join(out)


def _table_html(header: list[str], rows: list[list[str]]) -> str:
    # styled inline, so the table reads the same without a notebook's stylesheet
    def style(base: str, i: int) -> str:
        return f"{base};text-align:{'left' if i == 0 else 'right'}"

    th = "".join(
        f"<th style='{style(HEAD_STYLE, i)}'>{html.escape(h)}</th>" for i, h in enumerate(header)
    )
    body = "".join(
        "<tr>"
        + "".join(
            f"<td style='{style(CELL_STYLE, i)}'>{html.escape(c)}</td>" for i, c in enumerate(r)
        )
        + "</tr>"
        for r in rows
    )
    return (
        f"<table class='lincomb' style='{TABLE_STYLE}'><thead><tr>{th}</tr></thead>"
        f"<tbody>{body}</tbody></table>"
    )


def _fit_rows(f: LinearFit) -> list[list[str]]:
    try:
        frame = f.coef_frame()
    except Exception:  # noqa: BLE001 - a degenerate fit still prints its estimates
        return [[n, _num(v), "", "", ""] for n, v in zip(f.names, f.coefficients, strict=True)]
    rows = []
    for r in frame.to_dict("records"):
        if r["status"] == "aliased":
            rows.append([str(r["coefficient"]), "aliased", "", "", ""])
        else:
            # identified only with the aliased columns fixed at 0: say so beside the numbers
            note = " (not estimable)" if r["status"] == "not estimable" else ""
            rows.append(
                [
                    str(r["coefficient"]) + note,
                    _num(float(r["estimate"])),
                    _num(float(r["se"])),
                    _num(float(r["ratio"])),
                    _p(float(r["p"])),
                ]
            )
    return rows


def _fit_head(f: LinearFit) -> str:
    kind = "WLS" if f.weighted else "OLS"
    what = f.formula or f"{f.response} on {len(f.names)} columns"
    extra = f", {f.n_dropped} dropped for missing values" if f.n_dropped else ""
    cov = f.covariance_estimator
    cov_txt = ""
    if cov != "classical":
        # the tests' reference df can differ from the residual df (G - 1 for clusters)
        df_tests = f.evaluate_covariance(None).df_error
        cov_txt = (
            f"\nstandard errors: {cov} covariance; its t and F tests use {df_tests:g}"
            " denominator df"
        )
    return (
        f"LinearFit ({kind}): {what}\n"
        f"n = {f.n_obs}{extra}; rank = {f.rank} of {len(f.names)}; residual df = "
        f"{f.df_error}; sigma = {f.sigma:.6g}{cov_txt}"
    )


def fit_text(f: LinearFit) -> str:
    head = _fit_head(f)
    table = _table_text(["coefficient", "estimate", "s.e.", "t", "p"], _fit_rows(f))
    tail = f"\naliased (not estimable): {', '.join(f.aliased)}" if f.aliased else ""
    return f"{head}\n{table}{tail}"


def fit_html(f: LinearFit) -> str:
    head = _html_lines(_fit_head(f))
    table = _table_html(["coefficient", "estimate", "s.e.", "t", "p"], _fit_rows(f))
    tail = (
        f"<p>aliased (not estimable): {html.escape(', '.join(f.aliased))}</p>" if f.aliased else ""
    )
    return f"<div class='lincomb-fit'><p><b>{head}</b></p>{table}{tail}</div>"


def _wald_head(w: WaldTest) -> str:
    dist = f"F({w.df_test}, {w.df_error:g})" if w.reference == "F" else f"chi2({w.df_test})"
    red = f"; {len(w.redundant)} redundant row(s) ignored" if w.redundant else ""
    return (
        f"Wald test of {len(w.labels)} restriction row(s), rank {w.df_test}{red}\n"
        f"{dist} = {w.stat:.6g}, {_p_clause(w.p)}  [{w.covariance} covariance]"
    )


def _wald_rows(w: WaldTest) -> list[list[str]]:
    ci = w.intervals(0.95)
    rows = []
    for i, lab in enumerate(w.labels):
        mark = " (redundant)" if i in w.redundant else ""
        rows.append(
            [
                lab + mark,
                _num(w.estimate[i]),
                _num(w.se[i]),
                _num(w.ratio[i]),
                _p(w.row_p[i]),
                f"[{_num(ci['lower'].iloc[i])}, {_num(ci['upper'].iloc[i])}]",
            ]
        )
    return rows


def _wald_header(w: WaldTest) -> list[str]:
    # the row ratio is a t under the F reference and a z under chi2
    ratio = "t" if w.reference == "F" else "z"
    return ["restriction", "estimate", "s.e.", ratio, "p", "95% interval"]


def wald_text(w: WaldTest) -> str:
    return f"{_wald_head(w)}\n{_table_text(_wald_header(w), _wald_rows(w))}"


def wald_html(w: WaldTest) -> str:
    head = _html_lines(_wald_head(w))
    table = _table_html(_wald_header(w), _wald_rows(w))
    return f"<div class='lincomb-wald'><p><b>{head}</b></p>{table}</div>"


def _restricted_parts(r: RestrictedFit) -> tuple[str, list[list[str]]]:
    head = (
        f"Restricted least squares under {r.rank} independent restriction(s): "
        f"{' & '.join(r.labels)}\nRSS = {r.rss:.6g} (unrestricted {r.rss_unrestricted:.6g});"
        f" residual df = {r.df_error}; sigma = {r.sigma:.6g}"
    )
    se = r.std_errors()
    names = [str(n) for n in r.coefficients.index]
    rows = [
        [n, _num(float(v)), _num(float(s))]
        for n, v, s in zip(names, r.coefficients, se.loc[names], strict=True)
    ]
    return head, rows


def restricted_text(r: RestrictedFit) -> str:
    head, rows = _restricted_parts(r)
    return f"{head}\n{_table_text(['coefficient', 'estimate', 's.e.'], rows)}"


def restricted_html(r: RestrictedFit) -> str:
    head, rows = _restricted_parts(r)
    h = _html_lines(head)
    return (
        f"<div class='lincomb-restricted'><p><b>{h}</b></p>"
        f"{_table_html(['coefficient', 'estimate', 's.e.'], rows)}</div>"
    )


def _batch_parts(b: WaldBatch, limit: int = 10) -> tuple[str, list[list[str]], str]:
    k, m = b.estimate.shape
    kinds = {
        "redundant": "with redundant rows",
        "inconsistent": "inconsistent (no test)",
        "not estimable": "not estimable (no test)",
    }
    flags = ", ".join(f"{b.status.count(s)} {say}" for s, say in kinds.items() if s in b.status)
    head = (
        f"Wald tests of {k} system(s) of {m} restriction row(s) each  [{b.covariance} covariance]"
        f"\n{b.reference} tests with denominator df {b.df_error:g}"
        + (f"; systems: {flags}" if flags else "")
    )
    rows = [
        [
            str(b.systems[s]),
            str(int(b.df_test[s])),
            _num(float(b.stat[s])),
            _p(float(b.p[s])),
            b.status[s],
        ]
        for s in range(min(k, limit))
    ]
    tail = f"... {k - limit} more system(s); see test_frame()" if k > limit else ""
    return head, rows, tail


def _batch_header(b: WaldBatch) -> list[str]:
    return ["system", "rank", "F" if b.reference == "F" else "chi2", "p", "status"]


def batch_text(b: WaldBatch) -> str:
    head, rows, tail = _batch_parts(b)
    out = f"{head}\n{_table_text(_batch_header(b), rows)}"
    return f"{out}\n{tail}" if tail else out


def batch_html(b: WaldBatch) -> str:
    head, rows, tail = _batch_parts(b)
    h = _html_lines(head)
    more = f"<p>{html.escape(tail)}</p>" if tail else ""
    return (
        f"<div class='lincomb-wald-batch'><p><b>{h}</b></p>"
        f"{_table_html(_batch_header(b), rows)}{more}</div>"
    )
