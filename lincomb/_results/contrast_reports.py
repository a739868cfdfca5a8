"""Reports on contrasts that need a fit: orthogonality, and the partition of a sum of squares.

A set of contrasts on level means (:func:`lincomb.levels`) is a builder item; these reports
evaluate it on a fit: whether its rows are orthogonal (with equal group sizes, with the group
sizes, and under the fit's covariance) and, for an orthogonal full set, the single-df sums of
squares that add up to that of "all level means equal".  The public entry points are
:meth:`LevelContrasts.orthogonality <lincomb.LevelContrasts.orthogonality>` and
:meth:`LevelContrasts.partition <lincomb.LevelContrasts.partition>`, which call
:func:`orthogonality` and :func:`partition` here.

Every route of fitting works, with or without the rows (in memory, chunked, Dask, combined, or
shared without rows): the tests use only the fit's classical covariance.  The group sizes of the
check ``Σ_a w_a v_a / n_a = 0`` are counted in the rows when the fit kept them; a fit without rows
recovers them from its column means (:func:`_moment_sizes`).

>>> import lincomb as lc
>>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
>>> orthogonality(lc.levels("line").helmert(), f).in_fit
True
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from lincomb._builder.contrasts import LevelContrasts, level_weights, register_report
from lincomb._builder.level_rows import Factor, level_index, require_level
from lincomb._builder.recipes import ZERO_SUM_TOL, Recipe
from lincomb._builder.resolver import ModelResolver
from lincomb._docstrings import fill_lines_doc
from lincomb._results.format import _num, _p, _table_html, _table_text
from lincomb._results.report import ReportTables
from lincomb._typing import Array
from lincomb.errors import (
    ContrastWeightsError,
    NotOrthogonalError,
    RowsUnavailableError,
)

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = [
    "ORTHOGONAL_TOL",
    "PARTITION_COLUMNS",
    "SIZE_ROUND_TOL",
    "OrthogonalityReport",
    "SumOfSquaresPartition",
    "orthogonality",
    "partition",
]


#: Two contrasts count as orthogonal when the cosine of their angle (in the metric of the check)
#: is at most this in absolute value.
ORTHOGONAL_TOL: float = 1e-8
#: An unweighted fit without rows rounds the group sizes it recovers from its column means to
#: whole counts when they are within this (relative) of one.
SIZE_ROUND_TOL: float = 1e-8


def orthogonality(
    contrasts: LevelContrasts,
    fit: LinearFit,
    sizes: Mapping[Any, float] | Sequence[float] | None = None,
) -> OrthogonalityReport:
    """Check whether the rows of ``contrasts`` are mutually orthogonal, and a full set.

    See :meth:`lincomb.LevelContrasts.orthogonality`.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.without_rows(lc.fit("fill_g ~ line", lc.datasets.fill_lines()))
    >>> rep = orthogonality(lc.levels("line").helmert(), f)
    >>> rep.equal_n, rep.complete, rep.sizes is not None
    (True, True, True)
    """
    fac, w, labels = level_weights(contrasts, ModelResolver.of(fit))
    zero_sum = np.abs(w.sum(axis=1)) <= ZERO_SUM_TOL * np.abs(w).sum(axis=1)
    k = len(fac.levels)
    complete = bool(zero_sum.all() and w.shape[0] == k - 1 and np.linalg.matrix_rank(w) == k - 1)
    cos_eq = _cosines(w @ w.T)
    n = _given_sizes(sizes, fac) if sizes is not None else _fit_sizes(fit, fac)
    sized = None if n is None else _cosines((w / n) @ w.T)
    classical = fit.wald(replace(contrasts, target=0.0), covariance="classical")
    cov = classical.estimate_covariance
    if cov is None:  # pragma: no cover - a classical test always has the rows' covariance
        raise NotOrthogonalError("the test of these contrasts gave no covariance of the rows.")
    corr = _cosines(cov)
    frame = _label_index(labels)
    return OrthogonalityReport(
        labels=tuple(labels),
        weights=pd.DataFrame(w, index=frame, columns=list(fac.labels)),
        cosine_equal_n=pd.DataFrame(cos_eq, index=frame, columns=labels),
        cosine_sized=None if sized is None else pd.DataFrame(sized, index=frame, columns=labels),
        correlation_fit=pd.DataFrame(corr, index=frame, columns=labels),
        equal_n=_offdiag_ok(cos_eq),
        sized=None if sized is None else _offdiag_ok(sized),
        in_fit=_offdiag_ok(corr),
        complete=complete,
        sizes=None if n is None else pd.Series(n, index=list(fac.labels), name="size"),
        tol=ORTHOGONAL_TOL,
    )


def partition(contrasts: LevelContrasts, fit: LinearFit) -> SumOfSquaresPartition:
    """Split the sum of squares of "all means equal" into one component per contrast.

    See :meth:`lincomb.LevelContrasts.partition`.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> part = partition(lc.levels("line").helmert(), f)
    >>> bool(np.isclose(part.ss.sum(), part.term_ss))
    True
    """
    rep = orthogonality(contrasts, fit)
    if contrasts.target != 0:
        raise NotOrthogonalError(
            f"a partition of sums of squares needs target 0, not {contrasts.target:g}."
        )
    if not rep.complete:
        k = rep.weights.shape[1]
        raise NotOrthogonalError(
            f"{rep.weights.shape[0]} rows do not form a full set of {k - 1} contrasts among"
            f" the {k} levels of {contrasts.factor!r}; use .helmert(), .trend() or weights of"
            f" rank {k - 1} that sum to zero."
        )
    if not rep.in_fit:
        corr = rep.correlation_fit.to_numpy().copy()
        np.fill_diagonal(corr, 0.0)
        i, j = np.unravel_index(int(np.argmax(np.abs(corr))), corr.shape)
        raise NotOrthogonalError(
            f"the estimates of {rep.labels[i]!r} and {rep.labels[j]!r} are correlated"
            f" ({corr[i, j]:.3g}) under this fit's group sizes, so their sums of squares do"
            " not add up. Use weights orthogonal for these sizes, or report the joint test."
        )
    res = fit.wald(contrasts, covariance="classical")
    joint = fit.wald(replace(contrasts, recipe=Recipe("equal")), covariance="classical")
    sigma2 = fit.sigma**2
    ss = sigma2 * res.ratio**2
    return SumOfSquaresPartition(
        labels=res.labels,
        estimate=res.estimate.copy(),
        ss=ss,
        stat=res.ratio**2,
        p=res.row_p,
        term_ss=float(joint.stat * joint.df_test * sigma2),
        term_df=joint.df_test,
        df_error=float(res.df_error),
        sigma2=float(sigma2),
    )


def _given_sizes(sizes: Mapping[Any, float] | Sequence[float], fac: Factor) -> Array:
    k = len(fac.levels)
    if isinstance(sizes, Mapping):
        n = np.full(k, np.nan)
        for key, val in sizes.items():
            n[require_level(key, fac, "sizes")] = float(val)
    else:
        n = np.array(sizes, dtype=np.float64).reshape(-1)
    if n.size != k or not np.all(np.isfinite(n)) or np.any(n <= 0):
        raise ContrastWeightsError(
            f"sizes must give a positive size for each of the {k} levels {list(fac.labels)};"
            f" got {n.tolist()}."
        )
    return n


def _fit_sizes(fit: LinearFit, fac: Factor) -> Array | None:
    """Rows (or sums of weights) at each level in the fit's data; None if unknown.

    Counted in the rows when the fit kept them, else recovered from the column means
    (:func:`_moment_sizes`).
    """
    design = fit.design
    try:
        source = getattr(design, "source", None)
    except RowsUnavailableError:
        return _moment_sizes(fit, fac)
    if source is None or fac.variable not in getattr(source, "columns", ()):
        return None
    col = source[fac.variable].to_numpy()
    w = design.weights if design.weights is not None else np.ones(col.shape[0])
    n = np.zeros(len(fac.levels))
    for value in pd.unique(col):
        j = level_index(value, fac.levels)
        if j is not None:
            n[j] += float(w[col == value].sum())
    return n if np.all(n > 0) else None


def _moment_sizes(fit: LinearFit, fac: Factor) -> Array | None:
    """Group sizes of a fit without rows, from its weighted column means.

    With an intercept, the fit keeps the weighted mean ``m`` of each column and the weight sum
    ``W``.  The columns of the factor's own main-effect term are, row by row, the model row
    ``x_a`` of the row's level, so ``[1, m_term] = Σ_a (n_a / W)·[1, x_a]``: ``k`` equations in
    the ``k`` sizes, solved by a pivoted LU of the ``k × k`` matrix of the level rows (a full-rank
    coding makes it invertible).  Sizes of an unweighted fit are rounded to whole counts when
    within :data:`SIZE_ROUND_TOL`.  None when the fit has no intercept, the factor has no
    main-effect term of ``k − 1`` columns, or a size comes out not positive.
    """
    moments = fit.moments
    resolver = ModelResolver.of(fit)
    encoder = resolver.encoder
    if moments is None or moments.intercept is None or encoder is None:
        return None
    k = len(fac.levels)
    own = [t for t, v in encoder.term_variables().items() if v == {fac.variable}]
    for term in own:
        frame = pd.DataFrame({fac.variable: list(fac.levels)})
        rows, names = encoder.encode_grid(frame, [term], f"at the levels of {fac.name!r}")
        if len(names) != k - 1 or not all(c in resolver.names for c in names):
            continue
        cols = [resolver.names.index(c) for c in names]
        system = np.column_stack([np.ones(k), rows])
        means = np.concatenate([[1.0], moments.center[cols]])
        try:
            share = np.linalg.solve(system.T, means)
        except np.linalg.LinAlgError:
            continue
        n = moments.weight_sum * share
        if not fit.weighted:
            whole = np.round(n)
            close = np.abs(n - whole) <= SIZE_ROUND_TOL * np.maximum(whole, 1.0)
            n = np.where(close, whole, n)
        return n if np.all(n > 0) else None
    return None


def _label_index(labels: Sequence[str]) -> pd.Index:
    return pd.Index(list(labels), name="contrast")


def _cosines(g: Array) -> Array:
    d = np.sqrt(np.clip(np.diag(g), 0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        out: Array = g / np.outer(d, d)
    return out


def _offdiag_ok(cos: Array) -> bool:
    off = cos - np.diag(np.diag(cos))
    return bool(np.all(np.abs(off) <= ORTHOGONAL_TOL))


@dataclass(frozen=True)
@fill_lines_doc
class OrthogonalityReport:
    """Whether a set of contrasts is orthogonal, under three metrics, and whether it is full.

    Attributes
    ----------
    labels : tuple of str
    weights : pandas.DataFrame
        Weights on the level means (rows: contrasts, columns: levels).
    cosine_equal_n : pandas.DataFrame
        Cosines ``Σ w v / (‖w‖‖v‖)`` (orthogonality with equal group sizes).
    cosine_sized : pandas.DataFrame or None
        Cosines in the metric ``Σ w v / n`` for the group sizes ``sizes``.
    correlation_fit : pandas.DataFrame
        Correlations of the estimates under the fit.
    equal_n, in_fit : bool
        All off-diagonal entries within :data:`ORTHOGONAL_TOL` of zero.
    sized : bool or None
    complete : bool
        ``k - 1`` zero-sum rows of rank ``k - 1``: a full set of contrasts.
    sizes : pandas.Series or None
        Group sizes used for ``sized`` (given, or counted in the fit's data).
    tol : float

    Examples
    --------
    %(fill_lines_fit)s
    >>> rep = lc.levels("line").successive().orthogonality(f)
    >>> rep.equal_n, rep.complete
    (False, True)
    """

    labels: tuple[str, ...]
    weights: pd.DataFrame
    cosine_equal_n: pd.DataFrame
    cosine_sized: pd.DataFrame | None
    correlation_fit: pd.DataFrame
    equal_n: bool
    sized: bool | None
    in_fit: bool
    complete: bool
    sizes: pd.Series | None = None
    tol: float = ORTHOGONAL_TOL

    def _text(self) -> str:
        sized = "not checked" if self.sized is None else str(self.sized)
        return (
            f"Orthogonality of {len(self.labels)} contrasts (tolerance {self.tol:g}): equal sizes"
            f" {self.equal_n}; group sizes {sized}; under the fit {self.in_fit};"
            f" full set {self.complete}"
        )

    def __repr__(self) -> str:
        return self._text()

    def _repr_html_(self) -> str:
        import html

        return f"<p class='lincomb-orthogonality'>{html.escape(self._text())}</p>"


#: Columns of :meth:`SumOfSquaresPartition.to_frame`.
PARTITION_COLUMNS = ("contrast", "estimate", "ss", "df", "share", "f", "p")


@dataclass(frozen=True)
class SumOfSquaresPartition(ReportTables):
    """Single-df sums of squares of an orthogonal full set of contrasts.

    Attributes
    ----------
    labels : tuple of str
    estimate : (k-1,) ndarray
    ss : (k-1,) ndarray
        ``σ² t_i²``, the sum of squares of each contrast.
    stat : (k-1,) ndarray
        ``F = t²`` with 1 and ``df_error`` degrees of freedom.
    p : (k-1,) ndarray
    term_ss : float
        Sum of squares of "all level means equal" (equals ``ss.sum()`` up to rounding).
    term_df : int
    df_error : float
    sigma2 : float
        Residual mean square of the fit.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> part = lc.levels("line").helmert().partition(f)
    >>> part.term_df, bool(np.isclose(part.ss.sum(), part.term_ss))
    (3, True)
    """

    labels: tuple[str, ...]
    estimate: Array
    ss: Array
    stat: Array
    p: Array
    term_ss: float
    term_df: int
    df_error: float
    sigma2: float

    @fill_lines_doc
    def to_frame(self) -> pd.DataFrame:
        """One row per contrast.

        Columns: ``contrast``, ``estimate``, ``ss`` (single-df sum of squares), ``df`` (1),
        ``share`` (``ss / term_ss``), ``f`` (``ss / σ²``), ``p``.

        Examples
        --------
        %(fill_lines_fit)s
        >>> frame = lc.levels("line").helmert().partition(f).to_frame()
        >>> float(frame["share"].sum().round(10))
        1.0
        """
        return pd.DataFrame(
            {
                "contrast": list(self.labels),
                "estimate": self.estimate,
                "ss": self.ss,
                "df": 1,
                "share": self.ss / self.term_ss,
                "f": self.stat,
                "p": self.p,
            }
        )

    def _parts(self) -> tuple[str, list[list[str]]]:
        head = (
            f"Partition of the sum of squares of 'all means equal' ({self.term_ss:.6g} on"
            f" {self.term_df} df; components add to {float(self.ss.sum()):.6g});"
            f" residual mean square {self.sigma2:.6g} on {self.df_error:g} df"
        )
        rows = [
            [lab, _num(e), _num(s), f"{s / self.term_ss:.3f}", _num(f), _p(p)]
            for lab, e, s, f, p in zip(
                self.labels, self.estimate, self.ss, self.stat, self.p, strict=True
            )
        ]
        return head, rows

    _HEADER = ("contrast", "estimate", "SS", "share", "F", "p")

    def __repr__(self) -> str:
        head, rows = self._parts()
        return f"{head}\n{_table_text(list(self._HEADER), rows)}"

    def _repr_html_(self) -> str:
        import html

        head, rows = self._parts()
        return (
            f"<div class='lincomb-partition'><p><b>{html.escape(head)}</b></p>"
            f"{_table_html(list(self._HEADER), rows)}</div>"
        )


register_report("orthogonality", orthogonality)
register_report("partition", partition)
