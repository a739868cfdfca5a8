"""Fitting a linear model and testing restrictions on it.

:func:`fit` (formula + DataFrame) and :func:`fit_arrays` (``X``, ``y``) return a
:class:`LinearFit`: the fit's sufficient statistics (a small triangular factor, the rotated
response, the residual sum of squares, the rank decision and the coefficient names).  Tests and
restricted fits are computed from those alone, so their cost does not grow with the number of
observations.

The fit joins the two halves of the library: it resolves a restriction built by
:mod:`lincomb.restriction` through its coefficient index (:mod:`lincomb.design`), maps it to
working coordinates and hands plain arrays to :mod:`lincomb._core`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from lincomb import _core as core
from lincomb._builder.resolver import ModelResolver
from lincomb._core.checks import check_level, check_tolerance
from lincomb._covariance.estimate import CovarianceEstimate, check_rank
from lincomb._covariance.estimators import coefficient_df, evaluate
from lincomb._covariance.reference import check_reference, reference_df, test_reference
from lincomb._docstrings import FILL_LINES_FIT, RANK_TOL_PARAMETER, fill_doc
from lincomb._fit import batch
from lincomb._fit.coef_table import coefficient_frame
from lincomb._fit.resolving import ResolvesRestrictions
from lincomb._fit.restriction_rows import aliasing_hint, check_rows
from lincomb._model.design import (
    CoefficientIndex,
    Design,
    design_from_arrays,
    design_from_formula,
    encode_new,
)
from lincomb._model.formula_text import require_response
from lincomb._results.format import fit_html, fit_text
from lincomb._results.report import ReportTables
from lincomb._results.wald import RestrictedFit, WaldTest, assemble_wald_test
from lincomb.errors import (
    DegenerateFitError,
)

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._results.expected import ExpectedValues
    from lincomb._results.level_table import LevelMeanTable
    from lincomb._results.overview import FitOverview
    from lincomb._results.row_diagnostics import RowDiagnostics
    from lincomb._results.term_tests import TermTests

__all__ = ["LinearFit", "fit", "fit_arrays"]

#: The start of an Examples section on ``f``, a fit of the filling-line data on the line alone
#: (coefficients ``Intercept, line[T.L2], line[T.L3], line[T.L4]``).
_LINE_FIT_EXAMPLES = "Examples\n--------\n" + FILL_LINES_FIT

_line_fit_doc = fill_doc(line_fit_examples=_LINE_FIT_EXAMPLES)

#: A residual sum of squares at most this fraction of the centred response's squared norm
#: (squared) counts as zero: the model reproduces the data and no error variance is left.
ZERO_RSS_TOL: float = 1e-12


@dataclass(frozen=True)
class LinearFit(ResolvesRestrictions, ReportTables):
    """A least-squares fit, kept as its sufficient statistics.

    Attributes
    ----------
    names : tuple of str
        Coefficient names in design order.
    coefficients : pandas.Series
        Estimates; ``NaN`` for aliased (not estimable) columns.  With aliased columns, the
        others are those of the fit without the aliased columns.
    aliased : tuple of str
        Columns found linearly dependent on earlier ones (see :mod:`lincomb._core`).
    rank : int
        Numerical rank of the design.
    n_obs : int
        Observations used.
    n_dropped : int
        Rows dropped for missing values.
    df_error : int
        ``n_obs - rank``.
    rss : float
        (Weighted) residual sum of squares.
    sigma : float
        Residual standard deviation ``sqrt(rss / df_error)``.
    weighted : bool
    response : str
    formula : str or None

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("yield_t_ha ~ C(nitrogen) + variety + rainfall_mm", lc.datasets.field_trial())
    >>> f.n_obs, f.n_dropped, f.rank
    (216, 4, 7)
    >>> res = f.wald(lc.term("C(nitrogen)")["40"] == lc.term("C(nitrogen)")["80"])
    >>> bool(res.p < 0.05)
    True
    """

    names: tuple[str, ...]
    aliased: tuple[str, ...]
    rank: int
    n_obs: int
    n_dropped: int
    df_error: int
    rss: float
    sigma: float
    weighted: bool
    response: str
    formula: str | None
    rank_tol: float = field(default=core.RANK_TOL, repr=False)
    _design: Design = field(repr=False, compare=False, default=None)  # type: ignore[assignment]
    _moments: core.Moments = field(repr=False, compare=False, default=None)  # type: ignore[assignment]
    _sol: core.Solution = field(repr=False, compare=False, default=None)  # type: ignore[assignment]
    _vcov: CovarianceEstimate | None = field(repr=False, compare=False, default=None)
    _beta: NDArray[np.float64] = field(repr=False, compare=False, default=None)  # type: ignore[arg-type]

    @cached_property
    def coefficients(self) -> pd.Series:
        """Estimates; ``NaN`` for aliased (not estimable) columns (built when first read)."""
        return pd.Series(self._beta, index=list(self.names), name="estimate")

    # -- the fit's internals, read-only, for the other layers ------------------------------
    @property
    @_line_fit_doc
    def design(self) -> Design:
        """The validated design the fit was made from (names, encoder, rows when kept).

        %(line_fit_examples)s
        >>> f.design.index.names == f.names, f.design.has_rows
        (True, True)
        """
        return self._design

    @property
    @_line_fit_doc
    def moments(self) -> core.Moments:
        """The fit's moments: the R factor of ``sqrt(w)·[X y]`` and the column shifts.

        %(line_fit_examples)s
        >>> f.moments.n == f.n_obs
        True
        """
        return self._moments

    @property
    @_line_fit_doc
    def solution(self) -> core.Solution:
        """The rank decision and the kept-column triangle in working coordinates.

        %(line_fit_examples)s
        >>> f.solution.rank == f.rank, f.solution.df_resid == f.df_error
        (True, True)
        """
        return self._sol

    @property
    @_line_fit_doc
    def covariance_estimate(self) -> CovarianceEstimate | None:
        """The covariance estimate set with :meth:`with_covariance` (``None``: classical).

        %(line_fit_examples)s
        >>> f.covariance_estimate is None
        True
        >>> f.with_covariance("HC3").covariance_estimate.label
        'HC3'
        """
        return self._vcov

    @cached_property
    @_line_fit_doc
    def resolver(self) -> ModelResolver:
        """The resolver of restriction names on this fit, built once and reused by every test.

        Pairs the coefficient index with the formula encoder (see
        :class:`~lincomb._builder.resolver.ModelResolver`) and remembers each name, term and
        level it has looked up, so tests in a loop resolve names at the cost of a dictionary
        look-up.

        %(line_fit_examples)s
        >>> f.resolver is f.resolver, f.resolver.column("line[T.L3]")
        (True, 2)
        """
        return ModelResolver.of(self)

    @cached_property
    def _classical(self) -> CovarianceEstimate:
        # the classical estimate, evaluated once: tests without covariance= reuse it
        return evaluate(self, None)

    @cached_property
    def _kept_in_order(self) -> bool:
        # every column kept, in design order: rows of C need no reordering to working order
        return bool(np.array_equal(self._sol.kept, np.arange(self._sol.p)))

    # -- basic quantities ---------------------------------------------------------------
    @property
    def index(self) -> CoefficientIndex:
        """The coefficient index (names, terms, levels) used to resolve restrictions."""
        return self._design.index

    @property
    def terms(self) -> dict[str, tuple[str, ...]]:
        """``{term label: column names}`` in formula order."""
        idx = self._design.index
        return {t: tuple(idx.names[j] for j in cols) for t, cols in idx.terms.items()}

    @property
    def dropped_rows(self) -> pd.Index:
        """Labels of the rows dropped for missing values."""
        return self._design.dropped

    def check_variance(self) -> None:
        """Raise if the residual sum of squares is zero to working precision.

        Every test needs an error variance; a fit that reproduces its response exactly has
        none.

        Raises
        ------
        DegenerateFitError
            ``rss <= (ZERO_RSS_TOL · ‖y − ȳ‖)²``.

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> x = np.c_[np.ones(4), [0.0, 1, 2, 3]]
        >>> lc.fit_arrays(x, [1.0, 3.1, 4.9, 7.0]).check_variance()
        >>> lc.fit_arrays(x, [1.0, 3.0, 5.0, 7.0]).check_variance()
        Traceback (most recent call last):
        ...
        lincomb.errors.DegenerateFitError: the residual sum of squares is zero ...
        """
        if self._sol.resid_norm <= ZERO_RSS_TOL * self._sol.y_norm:
            raise DegenerateFitError(
                f"the residual sum of squares is zero to working precision ({self._sol.rss:.3g}):"
                " the model reproduces the response exactly, so there is no error variance and no"
                " F or t test. Check for a response that is a function of the regressors."
            )

    @property
    def covariance_estimator(self) -> str:
        """Label of the covariance estimator tests use by default (see :meth:`with_covariance`)."""
        return "classical" if self._vcov is None else self._vcov.label

    @_line_fit_doc
    def evaluate_covariance(self, covariance: object = None) -> CovarianceEstimate:
        """The covariance estimate a test with ``covariance=`` uses on this fit.

        Parameters
        ----------
        covariance : str or estimator, optional
            As in :meth:`wald`; ``None`` gives the fit's own (see :meth:`with_covariance`).

        %(line_fit_examples)s
        >>> f.evaluate_covariance().label, f.evaluate_covariance("HC1").label
        ('classical', 'HC1')
        """
        if covariance is None:
            return self._classical if self._vcov is None else self._vcov
        return evaluate(self, covariance)

    def with_covariance(self, covariance: object) -> LinearFit:
        """This fit with another default covariance estimator, evaluated once for every test.

        Parameters
        ----------
        covariance : str or estimator
            ``"classical"``, ``"HC0"`` ... ``"HC4"``, or built with :func:`~lincomb.clustered`,
            :func:`~lincomb.serial` or :func:`~lincomb.given` (see :mod:`lincomb.covariance`).

        Returns
        -------
        LinearFit
            A new fit (this one is unchanged) whose :meth:`wald`, :meth:`coef_frame`,
            :meth:`covariance`, :meth:`std_errors` and printout use ``covariance`` unless told
            otherwise.  The estimator is evaluated here, once: the new fit keeps the small
            factor of its meat, so each later test costs nothing that grows with the number
            of observations.  :meth:`restrict` stays classical.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("wait_min ~ staffing + protocol", lc.datasets.service_sites())
        >>> robust = f.with_covariance(lc.clustered(by="site"))
        >>> robust.covariance_estimator, f.covariance_estimator
        ('cluster by site (40 groups)', 'classical')
        >>> robust.wald(lc.coef("staffing") == 0).df_error
        39.0
        """
        return replace(self, _vcov=evaluate(self, covariance))

    def covariance(self, covariance: object = None) -> pd.DataFrame:
        """Covariance matrix of the coefficients (NaN rows/columns for aliased ones).

        Parameters
        ----------
        covariance : str or estimator, optional
            ``"classical"``, ``"HC0"`` ... ``"HC4"``, or built with :func:`~lincomb.clustered`,
            :func:`~lincomb.serial` or :func:`~lincomb.given`.  Default: the fit's own
            (classical unless set with :meth:`with_covariance`).

        Notes
        -----
        Computed from the triangular factor (``σ² A R⁻¹ R⁻ᵀ Aᵀ`` when classical, with the factor
        of the meat in between for a sandwich; see :mod:`lincomb.covariance`), never by
        inverting ``XᵀX``.

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit_arrays(np.c_[np.ones(5), [1.0, 2, 3, 4, 6]], [1.0, 2.5, 2.9, 4.2, 6.1])
        >>> cov = f.covariance()
        >>> bool(np.allclose(cov, cov.T))
        True
        >>> hc3 = f.covariance("HC3")
        >>> bool(np.allclose(hc3, hc3.T))
        True
        """
        vcov = self.evaluate_covariance(covariance)
        sol = self._sol
        p = sol.p
        est = np.setdiff1d(np.arange(p), sol.aliased)
        eye = np.eye(p)[est]
        root = vcov.root(sol.to_working(eye)[:, sol.kept])
        cov = np.full((p, p), np.nan)
        cov[np.ix_(est, est)] = root.T @ root
        return pd.DataFrame(cov, index=list(self.names), columns=list(self.names))

    @_line_fit_doc
    def std_errors(self, covariance: object = None) -> pd.Series:
        """Standard errors (NaN for aliased coefficients) under ``covariance`` (see
        :meth:`covariance`).

        %(line_fit_examples)s
        >>> se = f.std_errors().to_frame("classical").assign(HC3=f.std_errors("HC3"))
        >>> se.shape, se.index[0]
        ((4, 2), 'Intercept')
        """
        # column norms of the covariance root (not the square root of its diagonal): the
        # variance of a coefficient of data near 1e±200 is not representable, its s.e. is
        vcov = self.evaluate_covariance(covariance)
        sol = self._sol
        est = np.setdiff1d(np.arange(sol.p), sol.aliased)
        root = vcov.root(sol.to_working(np.eye(sol.p)[est])[:, sol.kept])
        se = np.full(sol.p, np.nan)
        se[est] = core.safe_norm(root, axis=0)
        return pd.Series(se, index=list(self.names), name="se")

    def coef_frame(
        self, level: float = 0.95, *, covariance: object = None, reference: str = "F"
    ) -> pd.DataFrame:
        """One row per coefficient: estimate, standard error, t, p-value, interval, status.

        Parameters
        ----------
        level : float, default 0.95
            Confidence level of the intervals.
        covariance : str or estimator, optional
            Covariance estimator (see :meth:`covariance`); default the fit's own.
        reference : {'F', 'chi2'}, default 'F'
            ``'F'``: t with the estimator's denominator degrees of freedom; ``'chi2'``: the
            standard normal (large-sample).

        Columns: ``coefficient, term, estimate, se, ratio, p, lower, upper, level, status,
        reference, df_error, covariance`` where status is ``"estimable"``, ``"aliased"``
        (its column depends on earlier ones; no estimate) or ``"not estimable"`` (estimated only
        with the aliased columns fixed at zero: its value depends on that choice and it cannot
        be tested alone); ``ratio`` is ``estimate / se``, a t ratio with ``df_error`` degrees
        of freedom under ``reference="F"`` and a z ratio under ``"chi2"`` (``df_error`` is
        then ``inf``); ``covariance`` is the estimator's label.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> list(f.coef_frame().columns)[:4]
        ['coefficient', 'term', 'estimate', 'se']
        >>> f.coef_frame(covariance="HC3", reference="chi2")["reference"].iloc[0]
        'chi2'
        """
        check_level(level)
        ref = check_reference(reference)
        vcov = self.evaluate_covariance(covariance)
        dfree: Any = reference_df(vcov.df_error, ref)
        if ref == "F" and vcov.per_test_df:  # each coefficient's own small-sample df
            dfree = coefficient_df(self._sol, vcov)
        return coefficient_frame(
            self._design.index,
            self._beta,
            self.std_errors(vcov).to_numpy(),
            level=level,
            reference=ref,
            df_error=dfree,
            status=self._status(),
            covariance=vcov.label,
        )

    def _status(self) -> list[str]:
        """Per coefficient: ``estimable``, ``aliased``, or ``not estimable`` (a kept column whose
        coefficient is only identified once the aliased columns are fixed at zero)."""
        sol = self._sol
        resid = sol.estimability_residual(sol.to_working(np.eye(sol.p)))
        out = []
        for j, name in enumerate(self.names):
            if name in self.aliased:
                out.append("aliased")
            else:
                out.append("estimable" if resid[j] <= core.ROW_TOL else "not estimable")
        return out

    # -- restrictions -------------------------------------------------------------------
    @_line_fit_doc
    def prepare(
        self, restrictions: object
    ) -> tuple[
        NDArray[np.float64], NDArray[np.float64], list[str], NDArray[np.float64], core.RowAnalysis
    ]:
        """Resolve restrictions and check them against the design's rank.

        Returns
        -------
        c, d, labels
            As :meth:`resolve` gives them.
        cu : (m, p) ndarray
            ``C`` in working coordinates.
        analysis : RowAnalysis
            Independent and redundant rows.

        Raises
        ------
        InconsistentRestrictionError, NotEstimableError
            As in :meth:`wald`.

        %(line_fit_examples)s
        >>> two = (lc.coef("line[T.L2]") == 0) & (2 * lc.coef("line[T.L2]") == 0)
        >>> c, d, labels, cu, analysis = f.prepare(two)
        >>> analysis.independent.tolist(), list(analysis.dependencies)
        ([0], [1])
        """
        c, d, labels, cu, analysis = self._prepared(restrictions)
        return c, d, list(labels), cu, analysis

    def _prepared(
        self, restrictions: object
    ) -> tuple[
        NDArray[np.float64],
        NDArray[np.float64],
        Sequence[str],
        NDArray[np.float64],
        core.RowAnalysis,
    ]:
        """:meth:`prepare` with the labels left to be written when first read."""
        c, d, labels, layout = self._resolved(restrictions)
        cu, analysis = check_rows(
            self._sol, c, d, labels, self.names, hint=lambda: aliasing_hint(self), layout=layout
        )
        return c, d, labels, cu, analysis

    def wald(
        self, restrictions: object, *, covariance: object = None, reference: str = "F"
    ) -> WaldTest:
        """Wald test of ``C·β = d``: an F for the system and a t for each row.

        Parameters
        ----------
        restrictions : Restriction, RestrictionSystem, or list of them
            Built with :func:`~lincomb.coef`, :func:`~lincomb.term`, ``==`` and ``&``, or
            :func:`~lincomb.from_matrix`.
        covariance : str or estimator, optional
            Covariance of ``β̂`` the test uses: ``"classical"``, ``"HC0"`` ... ``"HC4"``, or
            built with :func:`~lincomb.clustered`, :func:`~lincomb.serial` or
            :func:`~lincomb.given` (see :mod:`lincomb.covariance`).  Default: the fit's own
            (classical unless set with :meth:`with_covariance`).
        reference : {'F', 'chi2'}, default 'F'
            ``'F'``: statistic / rank against F with the estimator's denominator degrees of
            freedom (``n − rank``; ``G − 1`` for clusters), rows against t with the same df.
            ``'chi2'``: the Wald form against chi-squared with rank degrees of freedom, rows
            against the standard normal (``df_error`` is then ``inf``).

        Returns
        -------
        WaldTest

        Raises
        ------
        InconsistentRestrictionError
            A redundant row carries a ``d`` that contradicts the rows it depends on.
        NotEstimableError
            A row is not estimable under a rank-deficient design.
        DegenerateFitError
            The residual sum of squares is zero.
        SingularCovarianceError
            Under a robust estimator the independent rows have a singular covariance (e.g. more
            rows than clusters).

        Notes
        -----
        The numerator degrees of freedom are the rank of ``C``; redundant rows are reported on
        the result (``redundant``) and do not count.  With ``V = R⁻ᵀ C_Kᵀ`` over the independent
        rows ``K``, ``F = ‖R_V⁻ᵀ (C_K β̂ - d_K)‖² / (q σ²)`` where ``V = Q_V R_V``.  A robust
        estimator replaces ``σ V`` by ``F_M V`` with ``F_M`` a factor of its meat.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> res = f.wald(lc.term("line") == 0)
        >>> res.df_test, res.df_error
        (3, 294.0)
        >>> hc = f.wald(lc.term("line") == 0, covariance="HC3", reference="chi2")
        >>> hc.reference, hc.df_error, hc.covariance
        ('chi2', inf, 'HC3')
        """
        vcov = self.evaluate_covariance(covariance)
        ref = check_reference(reference)
        c, d, labels, cu, analysis = self._prepared(restrictions)
        sol = self._sol
        cu_kept = cu if self._kept_in_order else cu[:, sol.kept]
        root = vcov.root(cu_kept)
        est = cu_kept @ sol.theta
        chol = check_rank(root, analysis.independent, labels, vcov)
        wc = core.wald_from_root(est - d, root, analysis.independent, chol)
        k = analysis.independent
        dist, stat, df_error, p_value, row_df = test_reference(
            vcov, wc.quad, wc.rank, cu_kept, k, ref
        )
        every = k.size == d.size  # every row independent: k is 0 .. m-1
        rotated = core.intercept_rotation(c if every else c[k], d if every else d[k], sol.intercept)
        if rotated is not None:  # same F, rows free of the intercept (see lincomb._core)
            cr = sol.to_working(rotated[0])[:, sol.kept]
            rot = core.wald_from_root(cr @ sol.theta - rotated[1], vcov.root(cr), np.arange(k.size))
            dist, stat, df_error, p_value, row_df = test_reference(
                vcov, rot.quad, wc.rank, cu_kept, k, ref
            )
        return assemble_wald_test(
            labels,
            est,
            d,
            wc,
            (dist, stat, df_error, p_value),
            covariance=vcov.label,
            redundant=analysis.dependencies,
            c=c,
            names=self.names,
            root=root,
            row_df=row_df,
        )

    # the batch route is written with its arithmetic in lincomb._fit.batch
    wald_batch = batch.wald_batch

    def restrict(self, restrictions: object) -> RestrictedFit:
        """Least squares subject to ``C·β = d``.

        Returns the restricted coefficients, their covariance (``σ_r² W Wᵀ`` with
        ``σ_r² = RSS_r / (n - rank + q)``) and the restricted residual sum of squares, computed
        from the unrestricted factor as ``RSS_r = RSS + ‖R (θ_r - θ̂)‖²``.  A row that names a
        single coefficient fixes it exactly (value ``d / c``, variance 0).

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> r = f.restrict(lc.coef("line[T.L2]") == 0)
        >>> float(r.coefficients["line[T.L2]"])
        0.0
        >>> w = f.wald(lc.coef("line[T.L2]") == 0)
        >>> bool(np.isclose((r.rss - f.rss) / f.rss * f.df_error, w.stat))
        True
        """
        self.check_variance()
        c, d, labels, cu, analysis = self._prepared(restrictions)
        sol = self._sol
        k = analysis.independent
        root_k = sol.root(cu[k][:, sol.kept])
        delta_k = cu[k][:, sol.kept] @ sol.theta - d[k]
        step, w = core.restricted_step(sol, root_k, delta_k)
        beta = sol.from_working(sol.theta + step)
        beta[sol.aliased] = np.nan
        # norms, not squares, until the end (see _core): data near 1e±200 stay representable
        resid_r = float(np.hypot(sol.resid_norm, core.safe_norm(sol.r @ step)))
        q = int(k.size)
        df_r = sol.df_resid + q
        sigma_r = resid_r / float(np.sqrt(df_r))
        with np.errstate(over="ignore", under="ignore"):
            rss_r = float(np.float64(resid_r) ** 2)
        # covariance: map W (working, kept) back to β through A = T⁻¹ S⁻¹ on kept columns
        aw = sol.from_working(w)
        cov = _gram((sigma_r * aw).T)
        # a row naming one coefficient fixes it: write the exact value, not one off by rounding
        for i in k:
            nz = np.flatnonzero(c[i])
            if nz.size == 1:
                beta[nz[0]] = d[i] / c[i, nz[0]]
                cov[nz[0], :] = 0.0
                cov[:, nz[0]] = 0.0
        cov[sol.aliased, :] = np.nan
        cov[:, sol.aliased] = np.nan
        names = list(self.names)
        return RestrictedFit(
            labels=tuple(labels),
            coefficients=pd.Series(beta, index=names, name="restricted"),
            rss=rss_r,
            rss_unrestricted=sol.rss,
            rank=q,
            df_error=df_r,
            sigma=sigma_r,
            redundant=analysis.dependencies,
            _cov=pd.DataFrame(cov, index=names, columns=names),
        )

    def encode(self, data: pd.DataFrame) -> pd.DataFrame:
        """Design matrix of new data with this fit's encoding; unseen factor levels raise.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> f.encode(pd.DataFrame({"line": ["L2", "L4"]})).shape
        (2, 4)
        """
        return encode_new(self._design, data)

    # -- presentation -------------------------------------------------------------------
    def __repr__(self) -> str:
        return fit_text(self)

    def _repr_html_(self) -> str:
        return fit_html(self)

    # -- questions around a test (each capability lives in its own module) ---------------
    def expected(
        self,
        new: pd.DataFrame | None = None,
        *,
        weights: ArrayLike | str | None = None,
        covariance: object = None,
        reference: str = "F",
    ) -> ExpectedValues:
        """Expected (mean) response at the fit's rows or at new data, with intervals.

        Parameters
        ----------
        new : pandas.DataFrame, optional
            New data, encoded with the fit's formula encoder (:meth:`encode`; unseen levels
            raise).  Default: the rows the fit used.
        weights : array_like, float or str, optional
            Weight of one new observation per row of ``new`` (a column name or values), for the
            interval of a new observation under a weighted fit; default 1 for an unweighted
            fit (for a weighted fit without it those columns are NaN).
        covariance : str or estimator, optional
            Covariance of the mean's standard error (see :meth:`wald`); default the fit's own.
        reference : {'F', 'chi2'}, default 'F'
            t with the estimator's denominator df, or the standard normal.

        Returns
        -------
        ExpectedValues
            ``row_frame(level)`` gives the mean's interval and a new observation's interval;
            rows not estimable under a rank-deficient fit are flagged, not predicted.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> new = pd.DataFrame({"line": ["L2"], "temperature_c": [22.0]})
        >>> ev = f.expected(new, covariance="HC3")
        >>> ev.covariance, ev.row_frame().loc[0, "estimable"]
        ('HC3', np.True_)
        """
        from lincomb._results.expected import expected_values

        return expected_values(
            self, new, weights=weights, covariance=covariance, reference=reference
        )

    def row_diagnostics(self) -> RowDiagnostics:
        """Fitted values, residuals (raw, standardized, studentized) and leverages per row.

        Computed from the R factor (leverages are squared row norms of ``X̃ R⁻¹``), never from
        an ``n × n`` matrix; see :mod:`lincomb._results.row_diagnostics`.

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> bool(np.isclose(f.row_diagnostics().leverage.sum(), f.rank))
        True
        """
        from lincomb._results.row_diagnostics import row_diagnostics

        return row_diagnostics(self)

    def term_tests(
        self,
        adjusted_for: str = "preceding",
        *,
        covariance: object = None,
        reference: str = "F",
    ) -> TermTests:
        """Joint test of every term's columns, one row per term of the formula.

        Parameters
        ----------
        adjusted_for : {'preceding', 'non-containing', 'all-others'}, default 'preceding'
            What each term is adjusted for: the terms before it in formula order
            (sequential), every term that does not contain it (marginality), or every other
            term (see :mod:`lincomb._results.term_tests`).
        covariance : str or estimator, optional
            As in :meth:`wald`; default the fit's own.
        reference : {'F', 'chi2'}, default 'F'
            As in :meth:`wald`.

        Returns
        -------
        TermTests
            ``df_test`` counts each term's kept (non-aliased) columns.

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> last = f.term_tests("all-others").stat[1]
        >>> bool(np.isclose(last, f.wald(lc.term("shift") == 0).stat))
        True
        """
        from lincomb._results.term_tests import term_tests

        return term_tests(self, adjusted_for, covariance=covariance, reference=reference)

    def overview(self, *, reference: str = "F") -> FitOverview:
        """R², adjusted R², the overall test, sigma, log-likelihood, AIC and BIC.

        The overall test (every non-intercept coefficient zero) uses the fit's covariance
        estimator (:meth:`with_covariance`) and reports the denominator df its tests use.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("wait_min ~ staffing + protocol", lc.datasets.service_sites())
        >>> f.with_covariance(lc.clustered(by="site")).overview().df_error
        39.0
        """
        from lincomb._results.overview import overview

        return overview(self, reference=reference)

    def level_means(
        self,
        factors: str | Sequence[str],
        *,
        holding: Mapping[str, Any] | None = None,
        covariates: str = "mean",
        weighting: str = "equal",
        covariance: object = None,
        reference: str = "F",
    ) -> LevelMeanTable:
        """Mean response at each level (or level combination) of factors, with intervals.

        Parameters
        ----------
        factors : str or sequence of str
            Factors as written in the formula (``"C(dose)"``) or their variables.
        holding : mapping, optional
            ``{variable: value}``: other variables fixed at a level or a number.
        covariates : {'mean', 'rows'}, default 'mean'
            Numeric covariates not held sit at their mean over the fit's rows, or the means
            are averaged over the fit's rows (every other variable at each row's own value).
        weighting : {'equal', 'observed'}, default 'equal'
            Other factors averaged with equal weights over their level combinations, or with
            the combinations' frequencies among the fit's rows.
        covariance : str or estimator, optional
            As in :meth:`wald`; default the fit's own.
        reference : {'F', 'chi2'}, default 'F'

        Returns
        -------
        LevelMeanTable
            Intervals, no test; ``.differences(...)`` and ``.trend(...)`` give Wald tests
            (see :mod:`lincomb._results.level_table`).

        Examples
        --------
        >>> import lincomb as lc
        >>> data = lc.datasets.field_trial()
        >>> f = lc.fit("yield_t_ha ~ C(nitrogen) * variety + rainfall_mm", data)
        >>> tab = f.level_means(["C(nitrogen)", "variety"], holding={"rainfall_mm": 300})
        >>> len(tab.labels), tab.setting
        (12, 'rainfall_mm=300')
        """
        from lincomb._results.level_table import level_mean_table

        return level_mean_table(
            self,
            factors,
            holding=holding,
            covariates=covariates,
            weighting=weighting,
            covariance=covariance,
            reference=reference,
        )


def _gram(root: NDArray[np.float64]) -> NDArray[np.float64]:
    """``rootᵀ root``; entries past the float64 range become inf or 0 without a warning."""
    with np.errstate(over="ignore", under="ignore"):
        out: NDArray[np.float64] = root.T @ root
    return out


@_line_fit_doc
def fit_from_design(design: Design, rank_tol: float) -> LinearFit:
    """Factor a design's rows and fit (the in-memory route of every entry point).

    %(line_fit_examples)s
    >>> fit_from_design(f.design, f.rank_tol).rss == f.rss
    True
    """
    moments = core.moments_from_arrays(design.x, design.y, design.weights, design.intercept)
    return fit_from_moments(design, moments, rank_tol, rows=True)


@_line_fit_doc
def fit_from_moments(
    design: Design, moments: core.Moments, rank_tol: float, rows: bool = False
) -> LinearFit:
    """The fit of a design whose moments are already accumulated (chunks, partitions, sites).

    With ``rows`` (the design's rows are in memory), an ill-conditioned solution is refined
    against the rows (see :mod:`lincomb._core`); rowless routes get the plain solution.

    Raises
    ------
    ParameterError
        ``rank_tol`` is not in (0, 1).
    DegenerateFitError
        No residual degrees of freedom.

    %(line_fit_examples)s
    >>> again = fit_from_moments(f.design, f.moments, f.rank_tol)
    >>> bool((again.coefficients == f.coefficients).all())
    True
    """
    check_tolerance("rank_tol", rank_tol)
    sol = core.solve(moments, rank_tol)
    names = design.index.names
    if sol.n <= sol.rank:
        raise DegenerateFitError(
            f"{sol.n} observations for {sol.rank} estimable coefficients leave no residual"
            " degrees of freedom, so no error variance and no test. Add observations or drop"
            " terms."
        )
    beta = sol.coefficients()
    if rows and core.condition_estimate(sol) > core.REFINE_COND:
        # rows in memory: refine an ill-conditioned solution (see lincomb._core.refine)
        sol, beta = core.refine(sol, design.x, design.y, design.weights)
    sigma = sol.resid_norm / float(np.sqrt(sol.df_resid))  # no squares: see _core
    return LinearFit(
        names=names,
        aliased=tuple(names[j] for j in sorted(sol.aliased)),
        rank=sol.rank,
        n_obs=sol.n,
        n_dropped=len(design.dropped),
        df_error=sol.df_resid,
        rss=sol.rss,
        sigma=sigma,
        weighted=design.weighted,
        response=design.response or "",
        formula=design.formula,
        rank_tol=rank_tol,
        _design=design,
        _moments=moments,
        _sol=sol,
        _beta=beta,
    )


@fill_doc(rank_tol=RANK_TOL_PARAMETER)
def fit(
    formula: str,
    data: pd.DataFrame,
    *,
    weights: str | ArrayLike | None = None,
    missing: str = "skip",
    rank_tol: float = core.RANK_TOL,
) -> LinearFit:
    """Fit a linear model by (weighted) least squares from a formula.

    Parameters
    ----------
    formula : str
        Two-sided Wilkinson formula as formulaic parses it, e.g.
        ``"yield_t_ha ~ C(nitrogen) * variety + rainfall_mm"``; ``0 +`` or ``- 1`` removes the
        intercept.
    data : pandas.DataFrame
        Not modified.
    weights : str or array_like, optional
        Positive weights (a column name or an array aligned with ``data``): WLS.
    missing : {'skip', 'refuse'}, default 'skip'
        Rows with missing values in the formula's variables are dropped and counted
        (``n_dropped``, ``dropped_rows``), or raise :class:`~lincomb.errors.MissingValueError`.
    %(rank_tol)s

    Returns
    -------
    LinearFit

    Raises
    ------
    InputError
        Non-numeric or non-finite data, bad weights, a formula without response.
    DegenerateFitError
        No residual degrees of freedom.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line + shift + temperature_c", lc.datasets.fill_lines())
    >>> f.df_error
    293
    """
    require_response(formula)
    design = design_from_formula(formula, data, weights=weights, missing=missing)
    return fit_from_design(design, rank_tol)


def fit_arrays(
    x: ArrayLike,
    y: ArrayLike,
    *,
    names: Sequence[str] | None = None,
    weights: ArrayLike | None = None,
    rank_tol: float = core.RANK_TOL,
) -> LinearFit:
    """Fit a linear model by (weighted) least squares from arrays.

    Parameters
    ----------
    x : (n, p) array_like or DataFrame
        Design.  A column whose entries all equal one is the intercept; without
        one the model has none.  Column names come from ``names`` or a DataFrame's columns
        (default ``x0, x1, ...``).
    y : (n,) array_like
    names : sequence of str, optional
    weights : (n,) array_like, optional
    rank_tol : float, default 1e-10

    Returns
    -------
    LinearFit

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> x = np.c_[np.ones(4), [0.0, 1, 2, 3]]
    >>> f = lc.fit_arrays(x, [1.0, 3.1, 4.9, 7.0], names=["const", "slope"])
    >>> round(float(f.coefficients["slope"]), 2)
    1.98
    """
    design = design_from_arrays(x, y, names=names, weights=weights)
    return fit_from_design(design, rank_tol)
