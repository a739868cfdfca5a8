"""Result objects: immutable, with named fields, derived quantities as methods, tidy exports."""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb._builder.resolved import RowLabels
from lincomb._docstrings import fill_lines_doc
from lincomb._results.format import (
    batch_html,
    batch_text,
    restricted_html,
    restricted_text,
    wald_html,
    wald_text,
)
from lincomb._results.frames import ROW_COLUMNS as _ROW_COLUMNS
from lincomb._results.frames import TEST_COLUMNS as _TEST_COLUMNS
from lincomb._results.frames import WaldResult, WaldRows, _Groups, roles
from lincomb._results.multiplicity import DEFAULT_MAX_POINTS, DEFAULT_SEED, DEFAULT_TOL
from lincomb._results.report import ReportTables
from lincomb.plot import intervals as interval_chart

if TYPE_CHECKING:  # pragma: no cover
    from collections.abc import Sequence

    from lincomb._core.wald import WaldCore
    from lincomb._results.multiplicity import MultipleInference

__all__ = [
    "WaldTest",
    "RestrictedFit",
    "WaldBatch",
    "ROW_COLUMNS",
    "TEST_COLUMNS",
    "BATCH_COLUMNS",
    "BATCH_ROW_COLUMNS",
]

#: Columns of :meth:`WaldTest.row_frame` (one row per restriction row).
ROW_COLUMNS = _ROW_COLUMNS
#: Columns of :meth:`WaldTest.test_frame` (one row per test).
TEST_COLUMNS = _TEST_COLUMNS


@dataclass(frozen=True, kw_only=True)
@fill_lines_doc
class WaldTest(WaldRows, WaldResult):
    """Wald test of a restriction system ``C·β = d``.

    Attributes
    ----------
    labels : tuple of str
        Each row written in coefficient names.
    estimate : (m,) ndarray
        ``Cβ̂`` per row.
    target : (m,) ndarray
        Hypothesized ``d``.
    se : (m,) ndarray
        Standard error of each ``Cβ̂`` row.
    ratio : (m,) ndarray
        ``(Cβ̂ - d) / se`` per row: a t ratio under the F reference, a z ratio under chi2.
    stat : float
        The system's F statistic (``reference == "F"``) or Wald chi-square statistic.
    df_test : int
        Rank of ``C`` (redundant rows do not count).
    df_error : float
        Error degrees of freedom, the denominator df of F (``inf`` for a chi2 reference).
    p : float
        p-value of the whole test.
    reference : {'F', 'chi2'}
        Reference distribution of ``stat``.
    covariance : str
        Covariance estimator the test used.
    redundant : dict
        ``{row: {independent row: weight}}`` for each redundant row.
    matrix : pandas.DataFrame
        The resolved ``C`` (rows labelled, columns named by coefficient).
    estimate_covariance : (m, m) ndarray
        Estimated covariance of ``Cβ̂`` under the test's covariance estimator (all rows).

    Examples
    --------
    %(fill_lines_fit)s
    >>> res = f.wald((lc.coef("line[T.L2]") == 0) & (lc.coef("line[T.L3]") == 2))
    >>> res.row_frame().shape, res.test_frame().shape
    ((2, 15), (1, 11))
    >>> bool(abs(res.ratio[0]) ** 2 - f.wald(lc.coef("line[T.L2]") == 0).stat < 1e-9)
    True
    """

    stat: float
    df_test: int
    df_error: float
    p: float
    reference: str
    covariance: str
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)
    row_df: NDArray[np.float64] | None = field(default=None, repr=False)
    # the resolved C, the coefficient names and a root W of the estimates' covariance (WᵀW):
    # ``matrix`` and ``estimate_covariance`` are built from them when first asked for
    _c: NDArray[np.float64] | None = field(default=None, repr=False, compare=False)
    _names: tuple[str, ...] = field(default=(), repr=False, compare=False)
    _root: NDArray[np.float64] | None = field(default=None, repr=False, compare=False)
    # the row labels, or a sequence that writes them when first read (see ``labels``)
    _labels: Sequence[str] = field(default=(), repr=False, compare=False)

    @cached_property
    def labels(self) -> tuple[str, ...]:
        """Each row written in coefficient names (or its label), written when first read.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> f.wald(lc.coef("line[T.L2]") == lc.coef("line[T.L3]")).labels
        ('line[T.L2] - line[T.L3] = 0',)
        """
        return tuple(self._labels)

    @cached_property
    def estimate_covariance(self) -> NDArray[np.float64] | None:
        """Estimated covariance of ``Cβ̂`` (all rows) under the test's covariance estimator.

        ``WᵀW`` from the root ``W`` the test used, formed on first access; entries past the
        float64 range become inf or 0 without a warning.

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> res = f.wald(lc.term("line") == 0)
        >>> bool(np.allclose(np.sqrt(np.diag(res.estimate_covariance)), res.se))
        True
        """
        if self._root is None:
            return None
        with np.errstate(over="ignore", under="ignore"):
            out: NDArray[np.float64] = self._root.T @ self._root
        return out

    @cached_property
    @fill_lines_doc
    def matrix(self) -> pd.DataFrame | None:
        """The resolved ``C``: rows labelled, columns named by coefficient.

        Built on first access (a test in a loop does not pay for a frame it never reads).

        Examples
        --------
        %(fill_lines_fit)s
        >>> f.wald(lc.coef("line[T.L2]") == lc.coef("line[T.L3]")).matrix
                                 Intercept  line[T.L2]  line[T.L3]  line[T.L4]
        line[T.L2] - line[T.L3] = 0        0.0         1.0        -1.0         0.0
        """
        if self._c is None:
            return None
        return pd.DataFrame(self._c, index=list(self.labels), columns=list(self._names))

    def _row_df(self) -> NDArray[np.float64]:
        return np.array(self.df_error if self.row_df is None else self.row_df, dtype=np.float64)

    @property
    @fill_lines_doc
    def status(self) -> str:
        """``"independent"`` (all rows independent) or ``"redundant"`` (some depend on others).

        Examples
        --------
        %(fill_lines_fit)s
        >>> f.wald(lc.levels("line").pairwise()).status
        'redundant'
        """
        return "redundant" if self.redundant else "independent"

    def _groups(self) -> _Groups:
        m = len(self.labels)
        return _Groups(
            key=None,
            keys=[None],
            labels=[tuple(self.labels)],
            estimate=np.asarray(self.estimate, dtype=np.float64).reshape(1, m),
            target=np.asarray(self.target, dtype=np.float64).reshape(1, m),
            se=np.asarray(self.se, dtype=np.float64).reshape(1, m),
            ratio=np.asarray(self.ratio, dtype=np.float64).reshape(1, m),
            stat=np.array([self.stat], dtype=np.float64),
            df_test=np.array([self.df_test]),
            df_error=np.array([self.df_error], dtype=np.float64),
            p=np.array([self.p], dtype=np.float64),
            role=roles(m, self.redundant).reshape(1, m),
            status=[self.status],
            redundant_rows=np.array([len(self.redundant)]),
            row_df=None if self.row_df is None else np.asarray(self.row_df).reshape(1, m),
        )

    @fill_lines_doc
    def intervals(self, level: float = 0.95) -> pd.DataFrame:
        """Marginal confidence intervals for each row's ``Cβ`` at ``level``.

        Examples
        --------
        %(fill_lines_fit)s
        >>> ci = f.wald(lc.coef("line[T.L3]") == 0).intervals(0.9)
        >>> list(ci.columns)
        ['lower', 'upper']
        """
        rows = self.row_frame(level)
        return pd.DataFrame(
            {"lower": rows["lower"].to_numpy(), "upper": rows["upper"].to_numpy()},
            index=pd.Index(self.labels, name="restriction"),
        )

    @fill_lines_doc
    def row_frame(self, level: float = 0.95) -> pd.DataFrame:
        """One row per restriction row; columns :data:`ROW_COLUMNS`.

        ``row`` (position in the system), ``restriction`` (the row as algebra), ``estimate``
        (``Cβ̂``), ``target`` (``d``), ``se``, ``ratio`` (``(estimate - target) / se``),
        ``p`` (two-sided, per row: t with ``df_error``, normal when it is inf), ``lower`` /
        ``upper`` (marginal interval at ``level``), ``level``, ``role`` (``"independent"``
        or ``"redundant"``), ``status`` (of the test), ``reference`` (``"F"`` or
        ``"chi2"``), ``df_error`` and the ``covariance`` estimator.

        Examples
        --------
        %(fill_lines_fit)s
        >>> res = f.wald((lc.coef("Intercept") == 500) & (lc.term("line")["L3"] == 1))
        >>> rows = res.row_frame()
        >>> rows[["restriction", "target", "role"]].values.tolist()
        [['Intercept = 500', 500.0, 'independent'], ['line[L3] = 1', 1.0, 'independent']]
        """
        return self._row_frame(level)

    @fill_lines_doc
    def test_frame(self) -> pd.DataFrame:
        """One row for the whole test; columns :data:`TEST_COLUMNS`.

        ``restrictions`` (the system as algebra), ``rows``, ``rank``, ``stat``,
        ``reference``, ``df_test``, ``df_error``, ``p``, ``covariance``, ``redundant_rows``,
        ``status``.

        Examples
        --------
        %(fill_lines_fit)s
        >>> one = f.wald(lc.levels("line").pairwise()).test_frame()
        >>> one[["rows", "rank", "df_test", "redundant_rows"]].values.tolist()
        [[6, 3, 3, 3]]
        """
        return self._test_frame()

    # the chart's function is the method, so its signature and docstring are written once
    plot = interval_chart

    @fill_lines_doc
    def adjust(
        self,
        method: str = "holm",
        *,
        redundant: str = "keep",
        tol: float = DEFAULT_TOL,
        seed: int = DEFAULT_SEED,
        max_points: int = DEFAULT_MAX_POINTS,
        rate: float = 0.05,
    ) -> MultipleInference:
        """p-values of the rows adjusted for testing them together.

        Parameters
        ----------
        method : str, default 'holm'
            ``'bonferroni'``, ``'holm'``, ``'sidak'``, ``'hochberg'``,
            ``'benjamini-hochberg'``, ``'benjamini-yekutieli'``, ``'holm-sidak'``,
            ``'hommel'``, ``'adaptive-benjamini-hochberg'`` (from the row p-values, see
            :func:`lincomb.adjust_pvalues`), ``'scheffe'`` (every combination in the span of
            ``C``), ``'max-t'`` (single step, joint multivariate t of the rows) or
            ``'studentized-range'`` (all pairwise differences of level means).
        redundant : {'keep', 'drop'}, default 'keep'
            Keep rows that depend on others (e.g. all pairwise differences) in the family, or
            drop them (they get no adjusted p-value; the result lists them).
        tol, seed, max_points
            Integration settings of ``'max-t'`` (see :mod:`lincomb.multiplicity`).
        rate : float, default 0.05
            The false discovery rate targeted by ``'adaptive-benjamini-hochberg'``, whose
            adjusted p-values depend on it (its first stage runs at ``rate / (1 + rate)``).

        Returns
        -------
        MultipleInference
            One row per contrast; ``to_frame()`` holds raw and adjusted p-values.

        Examples
        --------
        %(fill_lines_fit)s
        >>> adj = f.wald(lc.levels("line").pairwise()).adjust("holm")
        >>> adj.family_size, adj.rank, bool((adj.p_adjusted >= adj.p).all())
        (6, 3, True)
        """
        from lincomb._results.multiplicity import adjust_wald

        return adjust_wald(
            self,
            method,
            redundant=redundant,
            tol=tol,
            seed=seed,
            max_points=max_points,
            rate=rate,
        )

    def simultaneous(
        self,
        method: str = "max-t",
        level: float = 0.95,
        *,
        redundant: str = "keep",
        tol: float = DEFAULT_TOL,
        seed: int = DEFAULT_SEED,
        max_points: int = DEFAULT_MAX_POINTS,
    ) -> MultipleInference:
        """Simultaneous confidence intervals for the rows, with matching adjusted p-values.

        Parameters
        ----------
        method : {'max-t', 'bonferroni', 'sidak', 'scheffe', 'none'}, default 'max-t'
            Critical value for the whole family: ``'max-t'`` is the ``level`` quantile of
            ``max |T_i|`` under the rows' joint multivariate t distribution (exact coverage;
            integrated numerically, see :mod:`lincomb.multiplicity`); ``'scheffe'`` covers
            every combination in the span of ``C`` (``c² = q F_{q, df}``); ``'none'`` gives
            marginal intervals.
        level : float, default 0.95
            Simultaneous coverage.
        redundant : {'keep', 'drop'}, default 'keep'
            See :meth:`adjust`.
        tol, seed, max_points
            Integration settings of ``'max-t'``; what was used is reported on the result.

        Returns
        -------
        MultipleInference
            With ``critical_value``, ``lower``/``upper`` and single-step adjusted p-values
            (an interval excludes the target exactly when its adjusted p is below
            ``1 - level``).

        Examples
        --------
        >>> import lincomb as lc
        >>> from scipy import stats
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> res = f.wald(lc.levels("line").versus("L1"))
        >>> sim = res.simultaneous("bonferroni", 0.95)
        >>> bool(abs(sim.critical_value - stats.t.isf(0.05 / 6, res.df_error)) < 1e-12)
        True
        >>> sim.to_frame().shape
        (3, 12)
        """
        from lincomb._results.multiplicity import simultaneous_wald

        return simultaneous_wald(
            self, method, level, redundant=redundant, tol=tol, seed=seed, max_points=max_points
        )

    def __repr__(self) -> str:
        return wald_text(self)

    def _repr_html_(self) -> str:
        return wald_html(self)


def assemble_wald_test(
    labels: Sequence[str],
    estimate: NDArray[np.float64],
    target: NDArray[np.float64],
    numbers: WaldCore,
    referred: tuple[str, float, float, float],
    *,
    covariance: str,
    redundant: dict[int, dict[int, float]],
    c: NDArray[np.float64],
    names: Sequence[str],
    root: NDArray[np.float64],
    row_df: NDArray[np.float64] | None = None,
) -> WaldTest:
    """The :class:`WaldTest` of a system from its core numbers, one assembly for every route.

    ``numbers`` holds the rows' standard errors and ratios and the rank; ``referred`` is
    ``(distribution, statistic, df_error, p)`` under the test's reference; ``target`` is
    copied, so the result never shares it with the caller.  Labels not yet written
    (:class:`~lincomb._builder.resolved.RowLabels`) are written when first read.
    """
    dist, stat, df_error, p_value = referred
    return WaldTest(
        _labels=labels if isinstance(labels, RowLabels) else tuple(labels),
        estimate=estimate,
        target=target.copy(),
        se=numbers.std_error,
        ratio=numbers.statistic_rows,
        stat=stat,
        df_test=numbers.rank,
        df_error=df_error,
        p=p_value,
        reference=dist,
        covariance=covariance,
        redundant=redundant,
        row_df=row_df,
        _c=c,
        _names=tuple(names),
        _root=root,
    )


@dataclass(frozen=True)
class RestrictedFit(ReportTables):
    """Least-squares coefficients under ``C·β = d``.

    Attributes
    ----------
    labels : tuple of str
    coefficients : pandas.Series
        Restricted estimates (NaN for aliased columns).
    rss : float
        Restricted residual sum of squares.
    rss_unrestricted : float
    rank : int
        Number of independent restrictions ``q``.
    df_error : int
        ``n - rank(X) + q``.
    sigma : float
        ``sqrt(rss / df_error)``.
    redundant : dict

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> r = f.restrict(lc.coef("line[T.L2]") == lc.coef("line[T.L4]"))
    >>> bool(abs(r.coefficients["line[T.L2]"] - r.coefficients["line[T.L4]"]) < 1e-12)
    True
    >>> r.rank, r.df_error - f.df_error
    (1, 1)
    """

    labels: tuple[str, ...]
    coefficients: pd.Series
    rss: float
    rss_unrestricted: float
    rank: int
    df_error: int
    sigma: float
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)
    _cov: pd.DataFrame = field(default=None, repr=False)  # type: ignore[assignment]

    def covariance(self) -> pd.DataFrame:
        """Covariance of the restricted coefficients (singular: it lives on ``C·β = d``).

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> cov = f.restrict(lc.coef("line[T.L2]") == lc.coef("line[T.L4]")).covariance()
        >>> c = np.array([0.0, 1, 0, -1, 0])  # the restricted combination has no variance
        >>> bool(abs(c @ cov.to_numpy() @ c) < 1e-12)
        True
        """
        return self._cov.copy()

    def std_errors(self) -> pd.Series:
        """Standard errors of the restricted coefficients (0 for fixed ones).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> float(f.restrict(lc.coef("temperature_c") == 0.25).std_errors()["temperature_c"])
        0.0
        """
        v = np.clip(np.diag(self._cov.to_numpy()), 0, None)
        return pd.Series(np.sqrt(v), index=self._cov.index, name="se")

    def f_statistic(self) -> float:
        """``((RSS_r - RSS) / q) / (RSS / (n - rank))``: equals the Wald F (classical).

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> r = lc.term("line") == 0
        >>> bool(np.isclose(f.restrict(r).f_statistic(), f.wald(r).stat, rtol=1e-10))
        True
        """
        df_u = self.df_error - self.rank
        return ((self.rss - self.rss_unrestricted) / self.rank) / (self.rss_unrestricted / df_u)

    @fill_lines_doc
    def to_frame(self) -> pd.DataFrame:
        """One row per coefficient: ``coefficient, estimate, std_error``.

        Examples
        --------
        %(fill_lines_fit)s
        >>> f.restrict(lc.term("line") == 0).to_frame()["estimate"].round(6).tolist()[1:]
        [0.0, 0.0, 0.0]
        """
        return pd.DataFrame(
            {
                "coefficient": list(self.coefficients.index),
                "estimate": self.coefficients.to_numpy(),
                "se": self.std_errors().to_numpy(),
            }
        )

    def __repr__(self) -> str:
        return restricted_text(self)

    def _repr_html_(self) -> str:
        return restricted_html(self)


#: Columns of :meth:`WaldBatch.test_frame` (one row per system).
BATCH_COLUMNS = ("system", *_TEST_COLUMNS)
#: Columns of :meth:`WaldBatch.row_frame` (one row per system and restriction row).
BATCH_ROW_COLUMNS = ("system", *_ROW_COLUMNS)


@dataclass(frozen=True, kw_only=True)
class WaldBatch(WaldRows, WaldResult):
    """Wald tests of many restriction systems ``C_s·β = d_s`` on one fit, one F per system.

    Made by :meth:`LinearFit.wald_batch <lincomb.fit.LinearFit.wald_batch>`.  Per-system
    numbers are arrays of length ``k``; per-row numbers are ``(k, m)`` arrays.

    Attributes
    ----------
    systems : tuple
        System identifiers: the keys given, or the positions ``0 .. k-1``.
    estimate : (k, m) ndarray
        ``C_s β̂`` per row (NaN for rows that are not estimable).
    target : (k, m) ndarray
        Hypothesized ``d_s``.
    se : (k, m) ndarray
        Standard error of each row's estimate.
    ratio : (k, m) ndarray
        ``(C_s β̂ - d_s) / se`` per row (t under the F reference, z under chi2).
    stat : (k,) ndarray
        Each system's F (or chi-square) statistic; NaN for a system without a test.
    df_test : (k,) ndarray of int
        Rank of each ``C_s`` (redundant rows do not count).
    df_error : float
        Error degrees of freedom, the denominator df of F (``inf`` for a chi2 reference).
    p : (k,) ndarray
        p-value of each system's test.
    status : tuple of str
        Per system: ``"independent"`` (all rows independent), ``"redundant"`` (some rows
        depend on others and agree with them; tested on the rank), or, with
        ``on_invalid="nan"``, ``"inconsistent"``, ``"not estimable"`` or ``"singular
        covariance"`` (no test: ``stat`` and ``p`` are NaN).
    redundant : dict
        ``{system position: {row: {independent row: weight}}}`` for systems with redundant rows.
    names : tuple of str
        Coefficient names (columns of ``matrix``).
    matrix : (k, m, p) ndarray
        The resolved systems.
    labels : tuple of tuple of str, or None
        Row labels when the systems were given as restrictions; otherwise they are written
        from ``matrix`` when a frame asks for them.
    reference : {'F', 'chi2'}
        Reference distribution of the statistics.
    covariance : str
        Covariance estimator the tests used.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> c = np.zeros((2, 2, 5))
    >>> c[0, 0, 1] = c[0, 1, 2] = 1.0                  # L2 = L3 = 0 (vs L1)
    >>> c[1, 0, 2], c[1, 0, 3], c[1, 1, 4] = 1.0, -1.0, 1.0  # L3 = L4, temperature = 0
    >>> b = f.wald_batch(c)
    >>> b.test_frame().shape, b.row_frame().shape
    ((2, 12), (4, 16))
    >>> single = f.wald(lc.from_matrix(c[1]))
    >>> bool(np.isclose(b.stat[1], single.stat, rtol=1e-12))
    True
    """

    systems: tuple[Any, ...]
    stat: NDArray[np.float64]
    df_test: NDArray[np.intp]
    df_error: float
    p: NDArray[np.float64]
    status: tuple[str, ...]
    redundant: dict[int, dict[int, dict[int, float]]] = field(default_factory=dict)
    names: tuple[str, ...] = ()
    matrix: NDArray[np.float64] | None = field(default=None, repr=False)
    reference: str = "F"
    covariance: str = "classical"
    _index: Any = field(default=None, repr=False, compare=False)
    # the restriction systems as given (their labels are written when first asked for)
    _given: tuple[Any, ...] | None = field(default=None, repr=False, compare=False)

    def __len__(self) -> int:
        return len(self.systems)

    @cached_property
    @fill_lines_doc
    def labels(self) -> tuple[tuple[str, ...], ...] | None:
        """Row labels of every system given as restrictions (None for an array ``C``).

        Written on first access, from the systems and the fit's names: a batch whose labels
        nobody reads does not pay for writing them.

        Examples
        --------
        %(fill_lines_fit)s
        >>> f.wald_batch([lc.coef("line[T.L2]") == 0, lc.term("line")["L3"] == 1]).labels
        (('line[T.L2] = 0',), ('line[L3] = 1',))
        """
        if self._given is None:
            return None
        return tuple(tuple(s.row_labels(self._index)) for s in self._given)

    def _row_df(self) -> NDArray[np.float64]:
        return np.array(self.df_error, dtype=np.float64)

    def row_labels(self, system: int) -> tuple[str, ...]:
        """Labels of the rows of the system at position ``system`` (written as algebra).

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> b = f.wald_batch(np.array([[[0.0, 1, -1, 0]], [[0.0, 0, 0, 1]]]), d=[[0.0], [-1.0]])
        >>> b.row_labels(1)
        ('line[T.L4] = -1',)
        """
        if "labels" in self.__dict__ and self.labels is not None:  # written already
            return self.labels[system]
        if self._given is not None:
            return tuple(self._given[system].row_labels(self._index))
        if self.matrix is None or self._index is None:
            return tuple(f"row {i}" for i in range(self.estimate.shape[1]))
        from lincomb._builder.restriction import from_matrix

        c = self.matrix[system]
        return tuple(from_matrix(c, self.target[system]).resolve(self._index)[2])

    def _groups(self) -> _Groups:
        k, m = self.estimate.shape
        role = np.full((k, m), "independent", dtype=object)
        for s, deps in self.redundant.items():
            role[s, list(deps)] = "redundant"
        role[np.isnan(self.estimate)] = "not estimable"
        return _Groups(
            key="system",
            keys=list(self.systems),
            labels=[self.row_labels(s) for s in range(k)],
            estimate=self.estimate,
            target=self.target,
            se=self.se,
            ratio=self.ratio,
            stat=self.stat,
            df_test=self.df_test,
            df_error=np.array([self.df_error], dtype=np.float64),
            p=self.p,
            role=role,
            status=list(self.status),
            redundant_rows=np.array([len(self.redundant.get(s, {})) for s in range(k)]),
        )

    def test_frame(self) -> pd.DataFrame:
        """One row per system; columns :data:`BATCH_COLUMNS`.

        ``system`` (identifier), then as :meth:`WaldTest.test_frame`: ``restrictions``,
        ``rows`` (``m``), ``rank``, ``stat``, ``reference``, ``df_test`` (= rank),
        ``df_error``, ``p``, ``covariance``, ``redundant_rows``, ``status`` (see the class
        notes).

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> b = f.wald_batch(np.array([[[0.0, 1, -1, 0]], [[0.0, 0, 0, 1]]]), ids=["L2-L3", "L4"])
        >>> b.test_frame()[["system", "rank", "status"]].values.tolist()
        [['L2-L3', 1, 'independent'], ['L4', 1, 'independent']]
        """
        return self._test_frame()

    def row_frame(self, level: float = 0.95) -> pd.DataFrame:
        """One row per system and restriction row (``k·m`` rows); columns :data:`BATCH_ROW_COLUMNS`.

        ``system``, then as :meth:`WaldTest.row_frame`: ``row`` (position in the system),
        ``restriction``, ``estimate``, ``target``, ``se``, ``ratio``, ``p`` (two-sided, per
        row), ``lower``/``upper`` (marginal interval at ``level``), ``level``, ``role``
        (``"independent"``, ``"redundant"`` or ``"not estimable"``), ``status`` (of the
        system), ``reference``, ``df_error``, ``covariance``.

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> b = f.wald_batch(np.array([[[0.0, 1, -1, 0]], [[0.0, 0, 0, 1]]]))
        >>> rows = b.row_frame(level=0.9)
        >>> rows[["system", "row"]].values.tolist(), rows["level"].tolist()
        ([[0, 0], [1, 0]], [0.9, 0.9])
        """
        return self._row_frame(level)

    def __repr__(self) -> str:
        return batch_text(self)

    def _repr_html_(self) -> str:
        return batch_html(self)
