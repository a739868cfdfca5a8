"""Simultaneous inference over the rows of a restriction system.

Two kinds of correction for testing many rows at once:

* **Adjusted p-values** (:func:`adjust_pvalues`, :meth:`WaldTest.adjust
  <lincomb.results.WaldTest.adjust>`): Bonferroni, Holm, Šidák, Hochberg (family-wise error),
  Benjamini–Hochberg and Benjamini–Yekutieli (false discovery rate); on a Wald test also Scheffé
  and the single-step max-|t| method.
* **Simultaneous confidence intervals** (:meth:`WaldTest.simultaneous
  <lincomb.results.WaldTest.simultaneous>`): ``estimate ± c · se`` with one critical
  value ``c`` for the whole family: Bonferroni, Šidák, Scheffé (valid for every combination in
  the span of ``C``; ``c² = q F_{q,ν}(level)`` with ``q`` the rank of ``C``), and max-|t|, the
  ``level`` quantile of ``max_i |T_i|`` under the joint multivariate t distribution of the row
  statistics (correlation from the rows' estimated covariance, ``ν`` the test's denominator
  degrees of freedom; normal when ``ν`` is infinite).

The max-|t| distribution is integrated in :mod:`lincomb._core.maxt` (routes, accuracy,
seeds are described there).
"""

from __future__ import annotations

import html
import unicodedata
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from lincomb._core.checks import check_level
from lincomb._core.maxt import (
    DEFAULT_MAX_POINTS,
    DEFAULT_SEED,
    DEFAULT_TOL,
    REPLICATES,
    IntegrationOptions,
    IntegrationReport,
    _Integrator,
    _quantile,
    _row_dist,
    adjusted_tails,
    max_abs_t_cdf,
    max_abs_t_quantile,
    studentized_range_critical,
    studentized_range_tail,
)
from lincomb._docstrings import fill_lines_doc
from lincomb._results.format import _num, _p, _table_html, _table_text
from lincomb._results.report import ReportTables
from lincomb._typing import Array
from lincomb.errors import InputError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._results.wald import WaldTest

__all__ = [
    "P_METHODS",
    "WALD_P_METHODS",
    "INTERVAL_METHODS",
    "DEFAULT_SEED",
    "DEFAULT_TOL",
    "DEFAULT_MAX_POINTS",
    "REPLICATES",
    "MULTIPLE_COLUMNS",
    "adjust_pvalues",
    "max_abs_t_cdf",
    "max_abs_t_quantile",
    "IntegrationReport",
    "MultipleInference",
    "METHOD_NOTES",
    "pairs_unequal_variances",
]


#: p-value adjustments that need only the p-values.
P_METHODS = (
    "bonferroni",
    "holm",
    "sidak",
    "hochberg",
    "benjamini-hochberg",
    "benjamini-yekutieli",
    "holm-sidak",
    "hommel",
    "adaptive-benjamini-hochberg",
)
#: Adjustments available on a Wald test (they also use the rows' joint distribution).
WALD_P_METHODS = P_METHODS + ("scheffe", "max-t", "studentized-range")
#: Methods with simultaneous intervals (``"none"``: marginal intervals, no adjustment).
INTERVAL_METHODS = ("bonferroni", "sidak", "scheffe", "max-t", "none", "studentized-range")
#: What each joint method is, shown on its results (exact or approximate).
METHOD_NOTES = {
    "max-t": "exact: max-|t| under the rows' joint t distribution",
    "studentized-range": (
        "studentized range of all pairwise differences (Tukey–Kramer type): exact for equal"
        " group sizes, an approximation otherwise"
    ),
    "separate-variances": (
        "per-pair variances, Welch df, studentized range at each pair's df (Games–Howell"
        " type): an approximation"
    ),
}


_ALIASES = {
    "bh": "benjamini-hochberg",
    "by": "benjamini-yekutieli",
    "adaptive-bh": "adaptive-benjamini-hochberg",
    "two-stage-bh": "adaptive-benjamini-hochberg",
    "maxt": "max-t",
    "max-|t|": "max-t",
    "max|t|": "max-t",
}


def _canonical(method: object, allowed: tuple[str, ...], what: str) -> str:
    if not isinstance(method, str):
        raise InputError(f"{what} method must be a string, one of {list(allowed)}; got {method!r}.")
    plain = unicodedata.normalize("NFKD", method).encode("ascii", "ignore").decode()
    key = plain.strip().lower().replace("_", "-").replace(" ", "-")
    key = _ALIASES.get(key, key)
    if key not in allowed:
        hint = ""
        if what == "interval" and key in WALD_P_METHODS:
            hint = (
                f" {method!r} adjusts p-values step by step and has no simultaneous interval;"
                f" use .adjust({key!r}) for p-values."
            )
        raise InputError(f"unknown {what} method {method!r}; choose one of {list(allowed)}.{hint}")
    return key


# ---------------------------------------------------------------------------------------------
# p-value adjustments
# ---------------------------------------------------------------------------------------------
def adjust_pvalues(p: ArrayLike, method: str = "holm", *, rate: float = 0.05) -> Array:
    """Adjust p-values of a family of hypotheses for multiplicity.

    Parameters
    ----------
    p : (m,) array_like
        Raw p-values in ``[0, 1]``.
    method : {'bonferroni', 'holm', 'sidak', 'hochberg', 'benjamini-hochberg', \
'benjamini-yekutieli'}
        Family-wise error control: Bonferroni ``min(1, m p)``; Holm's step-down Bonferroni;
        Šidák ``1 - (1 - p)^m`` (exact for independent tests); Hochberg's step-up (valid
        under independence or positive dependence).  False discovery rate:
        Benjamini–Hochberg (independence or positive dependence) and Benjamini–Yekutieli
        (any dependence; BH times ``Σ_{i<=m} 1/i``).  Accents and case are ignored; ``"bh"``
        and ``"by"`` are accepted.  Also Holm–Šidák (``'holm-sidak'``: step-down with
        ``1 - (1 - p_(j))^{m-j+1}``, valid under independence or positive dependence),
        Hommel's method (``'hommel'``: closed testing of Simes tests, valid under positive
        dependence) and the adaptive two-stage Benjamini–Hochberg method
        (``'adaptive-benjamini-hochberg'``, also ``'adaptive-bh'``: a first BH pass at
        ``rate/(1+rate)`` estimates the number ``m0`` of true hypotheses; the adjusted
        p-values are BH's times ``(1 + rate) m0 / m``, ``m0 = m`` when the first pass rejects
        none or all).
    rate : float, default 0.05
        The false discovery rate aimed at; used only by the adaptive method, whose adjusted
        p-values depend on it (compare them with this same rate).

    Returns
    -------
    (m,) ndarray
        Adjusted p-values in the input order, capped at 1.  Reject where they are at most the
        chosen error rate.

    Examples
    --------
    >>> adjust_pvalues([0.01, 0.04, 0.03], "holm").tolist()
    [0.03, 0.06, 0.06]
    >>> adjust_pvalues([0.01, 0.04, 0.03], "benjamini-hochberg").round(6).tolist()
    [0.03, 0.04, 0.04]
    >>> adjust_pvalues([0.01, 0.04, 0.03], "hommel").round(6).tolist()
    [0.03, 0.04, 0.04]
    """
    key = _canonical(method, P_METHODS, "p-value")
    check_level(rate, "rate", "0.05")
    try:
        pv = np.array(p, dtype=np.float64, copy=True)
    except (TypeError, ValueError):
        raise InputError("p-values must be numbers.") from None
    if pv.ndim != 1:
        raise InputError(f"p-values must be one-dimensional, got shape {pv.shape}.")
    bad = np.flatnonzero(~np.isfinite(pv) | (pv < 0) | (pv > 1))
    if bad.size:
        raise InputError(
            f"p-value at position {int(bad[0])} is {float(pv[bad[0]])!r}; every p-value must"
            " lie in [0, 1]."
        )
    return _adjust(pv, key, float(rate))


def _hommel_sorted(ps: Array) -> Array:
    """Hommel's adjusted p-values for ascending ``ps``: for each subset size ``j`` from ``m``
    down to 2, the largest Simes p-value over the subsets of size ``j`` holding a hypothesis
    (Wright's algorithm, common practice)."""
    m = ps.size
    pa = np.full(m, float(np.min(m * ps / np.arange(1, m + 1))))
    for j in range(m - 1, 1, -1):
        head = np.arange(m - j + 1)  # the m-j+1 smallest
        tail = np.arange(m - j + 1, m)
        q1 = float(np.min(j * ps[tail] / np.arange(2, j + 1)))
        q = np.empty(m)
        q[head] = np.minimum(j * ps[head], q1)
        q[tail] = q[m - j]
        pa = np.maximum(pa, q)
    return np.asarray(np.maximum(pa, ps), dtype=np.float64)


def _adjust(p: Array, key: str, rate: float = 0.05) -> Array:
    m = p.size
    if m == 0:
        return p.copy()
    if key == "bonferroni":
        return np.minimum(1.0, m * p)
    if key == "sidak":
        with np.errstate(divide="ignore"):  # p = 1 gives log1p(-1) = -inf and 1 - 0 = 1
            return np.asarray(-np.expm1(m * np.log1p(-p)), dtype=np.float64)
    order = np.argsort(p, kind="stable")
    ps = p[order]
    rank = np.arange(1, m + 1)
    if key == "holm":
        adj = np.maximum.accumulate((m - rank + 1) * ps)
    elif key == "holm-sidak":
        with np.errstate(divide="ignore"):
            adj = np.maximum.accumulate(-np.expm1((m - rank + 1) * np.log1p(-ps)))
    elif key == "hommel":
        adj = _hommel_sorted(ps)
    elif key == "adaptive-benjamini-hochberg":
        bh = np.minimum(1.0, np.minimum.accumulate((m * ps / rank)[::-1])[::-1])
        first = int(np.count_nonzero(bh <= rate / (1 + rate)))
        m0 = m if first in (0, m) else m - first
        adj = bh * (1 + rate) * m0 / m
    elif key == "hochberg":
        adj = np.minimum.accumulate(((m - rank + 1) * ps)[::-1])[::-1]
    else:
        factor = float(np.sum(1.0 / rank)) if key == "benjamini-yekutieli" else 1.0
        adj = np.minimum.accumulate((m * factor * ps / rank)[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.minimum(1.0, adj)
    return out


# ---------------------------------------------------------------------------------------------
# results on Wald tests
# ---------------------------------------------------------------------------------------------
#: Columns of :meth:`MultipleInference.to_frame`.
MULTIPLE_COLUMNS = (
    "contrast",
    "estimate",
    "target",
    "se",
    "ratio",
    "p",
    "p_adjusted",
    "lower",
    "upper",
    "level",
    "critical_value",
    "method",
)


@dataclass(frozen=True)
@fill_lines_doc
class MultipleInference(ReportTables):
    """Rows of a Wald test with multiplicity-adjusted p-values and, where defined, intervals.

    Made by :meth:`WaldTest.adjust <lincomb.results.WaldTest.adjust>` (p-values) and
    :meth:`WaldTest.simultaneous <lincomb.results.WaldTest.simultaneous>` (intervals and the
    matching single-step p-values).

    Attributes
    ----------
    labels : tuple of str
        Rows in the family.
    estimate, target, se, ratio, p : (m,) ndarray
        As on the Wald test (``p`` raw, two-sided).
    p_adjusted : (m,) ndarray
    method : str
    df_error : float
        Degrees of freedom of the row ratios (``inf``: normal, the ratios are z).
    level : float or None
        Simultaneous coverage of the intervals (None for p-value adjustments).
    critical_value : float or None
        The ``c`` of ``estimate ± c · se``.
    lower, upper : (m,) ndarray
        Simultaneous intervals (NaN when ``level`` is None).
    rank : int
        Rank of the family's ``C``.
    redundant : tuple of str
        Rows that depend on others and were kept in the family.
    dropped : tuple of str
        Rows removed from the family (``redundant="drop"``).
    integration : IntegrationReport or None
        For the ``max-|t|`` method.
    row_df : (m,) ndarray or None
        Degrees of freedom of each row when they differ (``separate-variances``).
    critical_values : (m,) ndarray or None
        Each row's critical value when they differ (then ``critical_value`` is None).

    Examples
    --------
    %(fill_lines_fit)s
    >>> bonf = f.wald(lc.term("line") == 0).simultaneous("bonferroni", 0.95)
    >>> bonf.method, bonf.family_size, bool(bonf.critical_value > 1.96)
    ('bonferroni', 3, True)
    >>> bool((bonf.p_adjusted >= bonf.p).all())
    True
    """

    labels: tuple[str, ...]
    estimate: Array
    target: Array
    se: Array
    ratio: Array
    p: Array
    p_adjusted: Array
    method: str
    df_error: float
    level: float | None
    critical_value: float | None
    lower: Array
    upper: Array
    rank: int
    redundant: tuple[str, ...] = ()
    dropped: tuple[str, ...] = ()
    integration: IntegrationReport | None = None
    row_df: Array | None = None
    critical_values: Array | None = None

    @property
    def family_size(self) -> int:
        """Number of rows in the family."""
        return len(self.labels)

    @fill_lines_doc
    def to_frame(self) -> pd.DataFrame:
        """One row per contrast in the family.

        Columns: ``contrast`` (the row's label), ``estimate``, ``target``, ``se``,
        ``ratio``, ``p`` (raw, two-sided), ``p_adjusted``, ``lower``/``upper`` (simultaneous
        interval; NaN for a p-value adjustment), ``level`` (NaN likewise), ``critical_value``
        (NaN likewise), ``method``.

        Examples
        --------
        %(fill_lines_fit)s
        >>> holm = f.wald(lc.term("line") == 0).adjust("holm").to_frame()
        >>> holm["method"].unique().tolist(), bool(holm["lower"].isna().all())
        (['holm'], True)
        """
        nan = float("nan")
        return pd.DataFrame(
            {
                "contrast": list(self.labels),
                "estimate": self.estimate,
                "target": self.target,
                "se": self.se,
                "ratio": self.ratio,
                "p": self.p,
                "p_adjusted": self.p_adjusted,
                "lower": self.lower,
                "upper": self.upper,
                "level": nan if self.level is None else self.level,
                "critical_value": (
                    self.critical_values
                    if self.critical_values is not None
                    else nan
                    if self.critical_value is None
                    else self.critical_value
                ),
                "method": self.method,
            }
        )

    def _head(self) -> list[str]:
        m = self.family_size
        if self.level is None:
            first = f"p-values adjusted by {self.method} over {m} row(s) of rank {self.rank}"
        elif self.critical_value is None:
            first = (
                f"Simultaneous {100 * self.level:g}% intervals by {self.method} over {m} row(s)"
                f" of rank {self.rank}; a critical value per row"
            )
        else:
            first = (
                f"Simultaneous {100 * self.level:g}% intervals by {self.method} over {m} row(s)"
                f" of rank {self.rank}; critical value {self.critical_value:.6g}"
            )
        if self.row_df is not None:
            dist = "t, df per row (Welch)"
        else:
            dist = "normal" if not np.isfinite(self.df_error) else f"t({self.df_error:g})"
        lines = [f"{first} [{dist}]"]
        if self.method in METHOD_NOTES:
            lines.append(f"method: {METHOD_NOTES[self.method]}")
        if self.redundant:
            lines.append(
                f"{len(self.redundant)} redundant row(s) kept in the family: "
                + "; ".join(self.redundant)
            )
        if self.dropped:
            lines.append(
                f"{len(self.dropped)} redundant row(s) dropped from the family: "
                + "; ".join(self.dropped)
            )
        return lines

    def _foot(self) -> str:
        """The integration's diagnostics: on the result (``.integration``), not in the headline."""
        if self.integration is None:
            return ""
        return "integration (.integration): " + self.integration.text()

    def _rows(self) -> tuple[list[str], list[list[str]]]:
        ratio = "t" if np.isfinite(self.df_error) else "z"
        header = ["contrast", "estimate", "s.e.", ratio, "p", "adjusted p"]
        if self.level is not None:
            header.append(f"{100 * self.level:g}% simultaneous")
        rows = []
        for i, lab in enumerate(self.labels):
            r = [
                lab,
                _num(self.estimate[i]),
                _num(self.se[i]),
                _num(self.ratio[i]),
                _p(self.p[i]),
                _p(self.p_adjusted[i]),
            ]
            if self.level is not None:
                r.append(f"[{_num(self.lower[i])}, {_num(self.upper[i])}]")
            rows.append(r)
        return header, rows

    def __repr__(self) -> str:
        header, rows = self._rows()
        foot = self._foot()
        text = "\n".join(self._head()) + "\n" + _table_text(header, rows)
        return text + ("\n" + foot if foot else "")

    def _repr_html_(self) -> str:
        header, rows = self._rows()
        first, *rest = self._head()
        head = f"<b>{html.escape(first)}</b>" + "".join("<br>" + html.escape(line) for line in rest)
        foot = self._foot()
        small = f"<p style='font-size:0.85em'>{html.escape(foot)}</p>" if foot else ""
        return (
            f"<div class='lincomb-multiple'><p>{head}</p>{_table_html(header, rows)}{small}</div>"
        )


def _family(wald: WaldTest, redundant: str) -> dict[str, Any]:
    if redundant not in ("keep", "drop"):
        raise InputError(f"redundant must be 'keep' or 'drop', got {redundant!r}.")
    m_all = len(wald.labels)
    deps = wald.redundant or {}
    keep = [i for i in range(m_all) if redundant == "keep" or i not in deps]
    fam = {
        "keep": np.array(keep, dtype=np.intp),
        "labels": tuple(wald.labels[i] for i in keep),
        "redundant": tuple(wald.labels[i] for i in keep if i in deps),
        "dropped": tuple(wald.labels[i] for i in range(m_all) if i not in keep),
        "rank": int(wald.df_test),
        "df": float(wald.df_error),
        "row_df": None,
    }
    row_df = getattr(wald, "row_df", None)
    if row_df is not None and np.isfinite(wald.df_error):
        # each row has its own small-sample df: p-value adjustments use each row's own p;
        # joint critical values use the smallest df of the family (conservative)
        own_df = np.asarray(row_df, dtype=np.float64)[keep]
        fam["row_df"] = own_df
        fam["df"] = float(np.min(own_df))
    se = np.asarray(wald.se, dtype=np.float64)[keep]
    if np.any(~np.isfinite(se)) or np.any(se <= 0):
        i = keep[int(np.flatnonzero(~(se > 0))[0])]
        raise InputError(
            f"row {i} ({wald.labels[i]}) has standard error {wald.se[i]!r}; adjusted"
            " inference needs a positive standard error for every row."
        )
    return fam


def _corr_of(wald: WaldTest, keep: NDArray[np.intp]) -> Array:
    cov = getattr(wald, "estimate_covariance", None)
    if cov is None:
        raise InputError(
            "this test does not carry the covariance of its rows, which the joint (max-|t|)"
            " method needs; recompute it with fit.wald(...)."
        )
    c = np.asarray(cov, dtype=np.float64)[np.ix_(keep, keep)]
    d = np.sqrt(np.diag(c))
    corr = c / np.outer(d, d)
    corr = (corr + corr.T) / 2
    np.fill_diagonal(corr, 1.0)
    return np.asarray(corr, dtype=np.float64)


def _assemble(
    wald: WaldTest,
    fam: dict[str, Any],
    p_adj: Array,
    method: str,
    level: float | None,
    crit: float | None,
    integration: IntegrationReport | None,
) -> MultipleInference:
    k = fam["keep"]
    est = np.asarray(wald.estimate, dtype=np.float64)[k]
    se = np.asarray(wald.se, dtype=np.float64)[k]
    if crit is None:
        lower = upper = np.full(k.size, np.nan)
    else:
        lower, upper = est - crit * se, est + crit * se
    t = np.asarray(wald.ratio, dtype=np.float64)[k]
    return MultipleInference(
        labels=fam["labels"],
        estimate=est.copy(),
        target=np.asarray(wald.target, dtype=np.float64)[k].copy(),
        se=se.copy(),
        ratio=t.copy(),
        p=_raw_p(t, fam),
        p_adjusted=p_adj,
        method=method,
        df_error=fam["df"],
        level=level,
        critical_value=crit,
        lower=lower,
        upper=upper,
        rank=fam["rank"],
        redundant=fam["redundant"],
        dropped=fam["dropped"],
        integration=integration,
    )


def _raw_p(t: Array, fam: dict[str, Any]) -> Array:
    """Two-sided p-values of the rows: each row's own df when it has one."""
    df = fam["df"] if fam.get("row_df") is None else fam["row_df"]
    if np.ndim(df) == 0 and not np.isfinite(df):
        return np.asarray(2 * stats.norm.sf(np.abs(t)), dtype=np.float64)
    return np.asarray(2 * stats.t.sf(np.abs(t), df), dtype=np.float64)


def _pairwise_means(fam: dict[str, Any]) -> int:
    """The number of means ``k`` of a family of all ``k(k−1)/2`` pairwise differences."""
    q, m = fam["rank"], fam["keep"].size
    if m != q * (q + 1) // 2:
        raise InputError(
            f"the studentized-range method is for the family of all pairwise differences of"
            f" k means (k(k−1)/2 rows of rank k − 1); this family has {m} rows of rank {q}."
            " Use it on fit.wald(lc.levels(...).pairwise()) with redundant='keep', or use"
            " method='max-t' (exact for any family)."
        )
    return int(q) + 1


def _scheffe_p(t: Array, q: int, df: float) -> Array:
    x = t**2
    if np.isfinite(df):
        return stats.f.sf(x / q, q, df)
    return stats.chi2.sf(x, q)


def adjust_wald(
    wald: WaldTest,
    method: str,
    *,
    redundant: str,
    tol: float,
    seed: int,
    max_points: int,
    rate: float,
) -> MultipleInference:
    """Adjusted p-values for the rows of a Wald test: the computation behind
    :meth:`WaldTest.adjust <lincomb.results.WaldTest.adjust>`, which documents the arguments
    and holds their defaults; ``rate`` is the false discovery rate of the adaptive
    Benjamini–Hochberg method (see :func:`adjust_pvalues`)."""
    key = _canonical(method, WALD_P_METHODS, "p-value")
    fam = _family(wald, redundant)
    k = fam["keep"]
    t = np.asarray(wald.ratio, dtype=np.float64)[k]
    p = _raw_p(t, fam)
    integration = None
    if key in P_METHODS:
        p_adj = _adjust(p, key, float(rate))
    elif key == "scheffe":
        p_adj = _scheffe_p(t, fam["rank"], fam["df"])
    elif key == "studentized-range":
        p_adj = studentized_range_tail(t, _pairwise_means(fam), fam["df"])
    else:
        options = IntegrationOptions(tol, seed, max_points)
        integ = _Integrator(_corr_of(wald, k), fam["df"], fam["rank"], options)
        tail, se, points, note, p_ok = adjusted_tails(integ, np.abs(t))
        worst = float(se.max())
        p_adj = np.clip(tail, p, np.minimum(1.0, k.size * p))
        integration = replace(
            integ.report(points, worst, tol),
            p_value_std_error=worst,
            p_value_error=integ.half_width(worst),
            converged=p_ok,
            small_tails=note,
        )
    return _assemble(wald, fam, p_adj, key, None, None, integration)


def simultaneous_wald(
    wald: WaldTest,
    method: str,
    level: float,
    *,
    redundant: str,
    tol: float,
    seed: int,
    max_points: int,
) -> MultipleInference:
    """Simultaneous intervals for the rows of a Wald test: the computation behind
    :meth:`WaldTest.simultaneous <lincomb.results.WaldTest.simultaneous>`, which documents the
    arguments and holds their defaults."""
    key = _canonical(method, INTERVAL_METHODS, "interval")
    check_level(level)
    fam = _family(wald, redundant)
    k = fam["keep"]
    m = k.size
    df = fam["df"]
    dist = _row_dist(df)
    t = np.asarray(wald.ratio, dtype=np.float64)[k]
    p = 2 * dist.sf(np.abs(t))
    integration = None
    if key == "none":
        crit = float(dist.isf((1 - level) / 2))
        p_adj = p
    elif key == "bonferroni":
        crit = float(dist.isf((1 - level) / (2 * m)))
        p_adj = _adjust(p, "bonferroni")
    elif key == "sidak":
        alpha_each = -np.expm1(np.log(level) / m)
        crit = float(dist.isf(alpha_each / 2))
        p_adj = _adjust(p, "sidak")
    elif key == "scheffe":
        q = fam["rank"]
        quant = (
            stats.f.isf(1 - level, q, df) * q if np.isfinite(df) else stats.chi2.isf(1 - level, q)
        )
        crit = float(np.sqrt(quant))
        p_adj = _scheffe_p(t, q, df)
    elif key == "studentized-range":
        means = _pairwise_means(fam)
        crit = float(studentized_range_critical(level, means, df)[0])
        p_adj = studentized_range_tail(t, means, df)
    else:
        options = IntegrationOptions(tol, seed, max_points)
        integ = _Integrator(_corr_of(wald, k), df, fam["rank"], options)
        crit, integration = _quantile(integ, level)
        tail, se, _pts, note, p_ok = adjusted_tails(integ, np.abs(t))
        p_adj = np.clip(tail, p, np.minimum(1.0, m * p))
        integration = replace(
            integration,
            p_value_std_error=float(se.max()),
            p_value_error=integ.half_width(float(se.max())),
            converged=integration.converged and p_ok,
            small_tails=note,
        )
    return _assemble(wald, fam, p_adj, key, float(level), crit, integration)


def pairs_unequal_variances(
    data: pd.DataFrame, response: str, by: str, level: float = 0.95
) -> MultipleInference:
    """All pairwise differences of group means, each with its own variance and Welch df.

    For groups ``a < b`` (in category order, else sorted): ``ȳ_b − ȳ_a`` with standard error
    ``√(s_a²/n_a + s_b²/n_b)``, Welch–Satterthwaite df
    ``ν = (s_a²/n_a + s_b²/n_b)² / ((s_a²/n_a)²/(n_a−1) + (s_b²/n_b)²/(n_b−1))``, simultaneous
    intervals ``± q_{k,ν}(level)/√2 · se`` and adjusted p-values ``P(Q_{k,ν} ≥ √2 |t|)`` with the
    studentized range of ``k`` groups at each pair's own df (the construction of Games and
    Howell, 1976).  No common variance is assumed; the family-wise level is approximate.

    Parameters
    ----------
    data : pandas.DataFrame
    response : str
        Column of the response.
    by : str
        Column of the groups (at least two rows each, with some spread).
    level : float, default 0.95

    Returns
    -------
    MultipleInference
        ``method`` is ``'separate-variances'``; ``row_df`` holds each pair's df and
        ``critical_values`` each pair's critical value.

    Raises
    ------
    InputError
        A missing column, fewer than two groups, a group with fewer than two rows or no
        spread, or missing values.

    Examples
    --------
    >>> import lincomb as lc
    >>> res = lc.pairs_unequal_variances(lc.datasets.fill_lines(), "fill_g", "line")
    >>> res.method, res.family_size, res.row_df is not None
    ('separate-variances', 6, True)
    """
    if not (0 < level < 1):
        raise InputError(f"level must be in (0, 1), got {level!r}; e.g. 0.95 for 95%.")
    for col in (response, by):
        if col not in data.columns:
            raise InputError(
                f"no column {col!r} in the data; columns: {list(map(str, data.columns))}"
            )
    frame = data[[response, by]]
    if frame.isna().any().any():
        raise InputError(
            f"columns {response!r} and {by!r} hold missing values; drop those rows first."
        )
    y = frame[response].to_numpy(dtype=np.float64)
    groups = frame[by]
    if isinstance(groups.dtype, pd.CategoricalDtype):
        names = [c for c in groups.cat.categories if (groups == c).any()]
    else:
        names = sorted(pd.unique(groups))
    k = len(names)
    if k < 2:
        raise InputError(f"{by!r} holds {k} group(s); pairwise comparisons need at least two.")
    n = np.empty(k)
    mean = np.empty(k)
    var = np.empty(k)
    for i, g in enumerate(names):
        yi = y[(groups == g).to_numpy()]
        n[i] = yi.size
        if yi.size < 2:
            raise InputError(f"group {g!r} of {by!r} has {yi.size} row(s); each needs two or more.")
        mean[i] = yi.mean()
        var[i] = yi.var(ddof=1)
        if not var[i] > 0:
            raise InputError(f"group {g!r} of {by!r} has no spread; its variance is zero.")
    a_idx, b_idx = np.triu_indices(k, 1)
    va, vb = var[a_idx] / n[a_idx], var[b_idx] / n[b_idx]
    se = np.sqrt(va + vb)
    df = (va + vb) ** 2 / (va**2 / (n[a_idx] - 1) + vb**2 / (n[b_idx] - 1))
    est = mean[b_idx] - mean[a_idx]
    t = est / se
    crit = studentized_range_critical(level, k, df)
    return MultipleInference(
        labels=tuple(
            f"{by}[{names[b]}] - {by}[{names[a]}]" for a, b in zip(a_idx, b_idx, strict=True)
        ),
        estimate=est,
        target=np.zeros(est.size),
        se=se,
        ratio=t,
        p=np.asarray(2 * stats.t.sf(np.abs(t), df), dtype=np.float64),
        p_adjusted=studentized_range_tail(t, k, df),
        method="separate-variances",
        df_error=float("nan"),
        level=float(level),
        critical_value=None,
        lower=est - crit * se,
        upper=est + crit * se,
        rank=k - 1,
        row_df=df,
        critical_values=crit,
    )
