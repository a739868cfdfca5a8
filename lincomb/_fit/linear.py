"""Fitting a linear model and testing restrictions on it.

:func:`fit` (formula + DataFrame) and :func:`fit_arrays` (``X``, ``y``) return a
:class:`LinearFit`: the fit's sufficient statistics (a small triangular factor, the rotated
response, the residual sum of squares, the rank decision and the coefficient names).  Tests and
restricted fits are computed from those alone, so their cost does not grow with the number of
observations.

The fit joins the two halves of the library: it resolves a restriction built by
:mod:`lincomb.restriction` through its coefficient index (:mod:`lincomb.design`), maps it to
working coordinates and hands plain arrays to :mod:`lincomb.linalg`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from lincomb import _core as core
from lincomb._builder.contrasts import ModelResolver
from lincomb._builder.restriction import RestrictionSystem, as_system
from lincomb._covariance import estimators as covmod
from lincomb._model.design import Design, design_from_arrays, design_from_formula, encode_new
from lincomb._model.encoder import require_response
from lincomb._results.format import fit_html, fit_text
from lincomb._results.wald import RestrictedFit, WaldBatch, WaldTest
from lincomb.errors import (
    DegenerateFitError,
    InconsistentRestrictionError,
    NotEstimableError,
)

__all__ = ["LinearFit", "fit", "fit_arrays"]

#: A residual sum of squares at most this fraction of the centred response's squared norm
#: (squared) counts as zero: the model reproduces the data and no error variance is left.
ZERO_RSS_TOL: float = 1e-12


@dataclass(frozen=True)
class LinearFit:
    """A least-squares fit, kept as its sufficient statistics.

    Attributes
    ----------
    names : tuple of str
        Coefficient names in design order.
    coefficients : pandas.Series
        Estimates; ``NaN`` for aliased (not estimable) columns.  With aliased columns, the
        others are those of the fit without the aliased columns.
    aliased : tuple of str
        Columns found linearly dependent on earlier ones (see :mod:`lincomb.linalg`).
    rank : int
        Numerical rank of the design.
    n_obs : int
        Observations used.
    n_dropped : int
        Rows dropped for missing values.
    df_resid : int
        ``n_obs - rank``.
    rss : float
        (Weighted) residual sum of squares.
    sigma : float
        Residual standard deviation ``sqrt(rss / df_resid)``.
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
    >>> bool(res.p_value < 0.05)
    True
    """

    names: tuple[str, ...]
    coefficients: pd.Series
    aliased: tuple[str, ...]
    rank: int
    n_obs: int
    n_dropped: int
    df_resid: int
    rss: float
    sigma: float
    weighted: bool
    response: str
    formula: str | None
    rank_tol: float = field(default=core.RANK_TOL, repr=False)
    _design: Design = field(repr=False, compare=False, default=None)  # type: ignore[assignment]
    _moments: core.Moments = field(repr=False, compare=False, default=None)  # type: ignore[assignment]
    _sol: core.Solution = field(repr=False, compare=False, default=None)  # type: ignore[assignment]
    _vcov: covmod.CovarianceEstimate | None = field(repr=False, compare=False, default=None)

    # -- construction -------------------------------------------------------------------
    @classmethod
    def _from_design(cls, design: Design, rank_tol: float) -> LinearFit:
        moments = core.moments_from_arrays(design.x, design.y, design.weights, design.intercept)
        return cls._from_moments(design, moments, rank_tol)

    @classmethod
    def _from_moments(cls, design: Design, moments: core.Moments, rank_tol: float) -> LinearFit:
        if not (0 < rank_tol < 1):
            raise ValueError(f"rank_tol must be in (0, 1), got {rank_tol!r}.")
        sol = core.solve(moments, rank_tol)
        names = design.index.names
        if sol.n <= sol.rank:
            raise DegenerateFitError(
                f"{sol.n} observations for {sol.rank} estimable coefficients leave no residual"
                " degrees of freedom, so no error variance and no test. Add observations or drop"
                " terms."
            )
        beta = sol.coefficients()
        sigma = float(np.sqrt(sol.rss / sol.df_resid))
        return cls(
            names=names,
            coefficients=pd.Series(beta, index=list(names), name="estimate"),
            aliased=tuple(names[j] for j in sorted(sol.aliased)),
            rank=sol.rank,
            n_obs=sol.n,
            n_dropped=len(design.dropped),
            df_resid=sol.df_resid,
            rss=sol.rss,
            sigma=sigma,
            weighted=design.weighted,
            response=design.response or "",
            formula=design.formula,
            rank_tol=rank_tol,
            _design=design,
            _moments=moments,
            _sol=sol,
        )

    # -- basic quantities ---------------------------------------------------------------
    @property
    def index(self) -> Any:
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

    def _check_variance(self) -> None:
        if self._sol.rss <= (ZERO_RSS_TOL * self._sol.y_norm) ** 2:
            raise DegenerateFitError(
                f"the residual sum of squares is zero to working precision ({self._sol.rss:.3g}):"
                " the model reproduces the response exactly, so there is no error variance and no"
                " F or t test. Check for a response that is a function of the regressors."
            )

    @property
    def covariance_estimator(self) -> str:
        """Label of the covariance estimator tests use by default (see :meth:`with_covariance`)."""
        return "classical" if self._vcov is None else self._vcov.label

    def _covariance_estimate(self, covariance: object) -> covmod.CovarianceEstimate:
        if covariance is None and self._vcov is not None:
            return self._vcov
        return covmod.evaluate(self, covariance)

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
        >>> robust.wald(lc.coef("staffing") == 0).df_den
        39.0
        """
        return replace(self, _vcov=covmod.evaluate(self, covariance))

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
        vcov = self._covariance_estimate(covariance)
        sol = self._sol
        p = sol.p
        est = np.setdiff1d(np.arange(p), sol.aliased)
        eye = np.eye(p)[est]
        root = vcov.root(sol.to_working(eye)[:, sol.kept])
        cov = np.full((p, p), np.nan)
        cov[np.ix_(est, est)] = root.T @ root
        return pd.DataFrame(cov, index=list(self.names), columns=list(self.names))

    def std_errors(self, covariance: object = None) -> pd.Series:
        """Standard errors (NaN for aliased coefficients) under ``covariance`` (see
        :meth:`covariance`).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> se = f.std_errors().to_frame("classical").assign(HC3=f.std_errors("HC3"))
        >>> se.shape, se.index[0]
        ((4, 2), 'Intercept')
        """
        return pd.Series(
            np.sqrt(np.diag(self.covariance(covariance).to_numpy())),
            index=list(self.names),
            name="std_error",
        )

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

        Columns: ``coefficient, term, estimate, std_error, t, p_value, lower, upper, level,
        status, distribution, df, covariance`` where status is ``"estimable"``, ``"aliased"``
        (its column depends on earlier ones; no estimate) or ``"not estimable"`` (estimated only
        with the aliased columns fixed at zero: its value depends on that choice and it cannot
        be tested alone); ``distribution`` is ``"t"`` or ``"normal"``, ``df`` its degrees of
        freedom (``inf`` for normal) and ``covariance`` the estimator's label.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> list(f.coef_frame().columns)[:4]
        ['coefficient', 'term', 'estimate', 'std_error']
        >>> f.coef_frame(covariance="HC3", reference="chi2")["distribution"].iloc[0]
        'normal'
        """
        _check_level(level)
        ref = covmod.check_reference(reference)
        vcov = self._covariance_estimate(covariance)
        dfree: Any = vcov.df_den if ref == "F" else np.inf
        if ref == "F" and vcov.per_test_df:  # each coefficient's own small-sample df
            dfree = covmod.coefficient_df(self._sol, vcov)
        dist = stats.t(dfree) if ref == "F" else stats.norm()
        est = self.coefficients.to_numpy()
        se = self.std_errors(vcov).to_numpy()
        t = est / se
        p = 2 * dist.sf(np.abs(t))
        q = dist.ppf(0.5 + level / 2)
        term_of = {}
        for tlabel, cols in self._design.index.terms.items():
            for j in cols:
                term_of[j] = "Intercept" if tlabel == "1" else tlabel
        return pd.DataFrame(
            {
                "coefficient": list(self.names),
                "term": [term_of.get(j, self.names[j]) for j in range(len(self.names))],
                "estimate": est,
                "std_error": se,
                "t": t,
                "p_value": p,
                "lower": est - q * se,
                "upper": est + q * se,
                "level": level,
                "status": self._status(),
                "distribution": "t" if ref == "F" else "normal",
                "df": dfree,
                "covariance": vcov.label,
            }
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
    def resolve(
        self, restrictions: object
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], list[str]]:
        """Turn restrictions into ``(C, d, labels)`` on this fit's coefficients.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> c, d, labels = f.resolve(lc.coef("line[T.L2]") == lc.coef("line[T.L3]"))
        >>> c.tolist(), d.tolist()
        ([[0.0, 1.0, -1.0, 0.0]], [0.0])
        """
        system: RestrictionSystem = as_system(restrictions)
        # the resolver also carries the formula encoder, for contrasts on level means
        return system.resolve(ModelResolver.of(self))

    def _prepare(
        self, restrictions: object
    ) -> tuple[
        NDArray[np.float64], NDArray[np.float64], list[str], NDArray[np.float64], core.RowAnalysis
    ]:
        c, d, labels = self.resolve(restrictions)
        cu, analysis = check_rows(self._sol, c, d, labels, self.names)
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
            against the standard normal (``df_den`` is then ``inf``).

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
        >>> res.df_num, res.df_den
        (3, 294.0)
        >>> hc = f.wald(lc.term("line") == 0, covariance="HC3", reference="chi2")
        >>> hc.distribution, hc.df_den, hc.covariance
        ('chi2', inf, 'HC3')
        """
        vcov = self._covariance_estimate(covariance)
        ref = covmod.check_reference(reference)
        c, d, labels, cu, analysis = self._prepare(restrictions)
        sol = self._sol
        root = vcov.root(cu[:, sol.kept])
        est = cu[:, sol.kept] @ sol.theta
        covmod.check_rank(root, analysis.independent, labels, vcov)
        wc = core.wald_from_root(est - d, root, analysis.independent)
        dist, stat, df_den, p_value, row_df = covmod.test_reference(
            vcov, wc.quad, wc.rank, cu[:, sol.kept], analysis.independent, ref
        )
        return WaldTest(
            labels=tuple(labels),
            estimate=est,
            target=d.copy(),
            std_error=wc.std_error,
            t=wc.statistic_rows,
            statistic=stat,
            df_num=wc.rank,
            df_den=df_den,
            p_value=p_value,
            distribution=dist,
            covariance=vcov.label,
            redundant=analysis.dependencies,
            matrix=pd.DataFrame(c, index=labels, columns=list(self.names)),
            estimate_covariance=root.T @ root,
            row_df=row_df,
        )

    def wald_batch(
        self,
        c: ArrayLike | Sequence[object],
        d: ArrayLike | None = None,
        *,
        ids: Sequence[Any] | None = None,
        covariance: object = None,
        reference: str = "F",
        on_invalid: str = "raise",
    ) -> WaldBatch:
        """Wald tests of many restriction systems at once, vectorized over the systems.

        Gives, for each system ``C_s·β = d_s``, the numbers :meth:`wald` gives (F, rank, p,
        and per row the estimate, standard error and t), at a cost per system that depends
        on neither ``n`` nor a Python-level pass through the single-system path.

        Parameters
        ----------
        c : (k, m, p) array_like, or sequence of restrictions
            ``k`` systems of ``m`` rows on the fit's coefficients (in fit order), or ``k``
            restriction systems (each anything :meth:`wald` accepts) with ``m`` rows each;
            those are resolved first, which costs a Python pass per system.
        d : scalar, (m,) or (k, m) array_like, optional
            Right-hand sides for an array ``c`` (default 0).  Restrictions carry their own.
        ids : sequence, optional
            One identifier per system for the results (default ``0 .. k-1``).
        covariance : str or estimator, optional
            As in :meth:`wald` (default: the fit's own).
        reference : {'F', 'chi2'}, default 'F'
            As in :meth:`wald`.
        on_invalid : {'raise', 'nan'}, default 'raise'
            A system with contradictory rows, non-estimable rows or (under a robust estimator)
            a singular covariance raises the error :meth:`wald` would raise, naming the
            system and row; with ``'nan'`` it gets a NaN statistic and its ``status`` says why.

        Returns
        -------
        WaldBatch

        Raises
        ------
        RestrictionShapeError, EmptyRestrictionError
            ``c`` or ``d`` has the wrong shape, holds NaN/inf or an all-zero row, or the
            restriction systems differ in their number of rows.
        InconsistentRestrictionError, NotEstimableError, SingularCovarianceError
            As in :meth:`wald` (with ``on_invalid='raise'``).
        DegenerateFitError
            The residual sum of squares is zero.

        Notes
        -----
        Redundant rows are found and handled as in :meth:`wald` (the F uses the rank).  The
        arithmetic is in :mod:`lincomb.batch`: one triangular solve for all ``k·m`` rows, a
        stacked QR of the small ``m``-column roots, and the single-system path for any
        system with a row near a rank or estimability threshold, so the decisions are the
        same as :meth:`wald`'s.

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> pairs = [("line[T.L2]", "line[T.L3]"), ("line[T.L3]", "line[T.L4]")]
        >>> systems = [(lc.coef(a) == lc.coef(b)) & (lc.coef("temperature_c") == 0)
        ...            for a, b in pairs]
        >>> b = f.wald_batch(systems, ids=["L2 vs L3", "L3 vs L4"])
        >>> b.to_frame()[["system", "rank", "df_den"]]
             system  rank  df_den
        0  L2 vs L3     2   295.0
        1  L3 vs L4     2   295.0
        >>> bool(np.isclose(b.p_value[1], f.wald(systems[1]).p_value, rtol=1e-10))
        True
        """
        from lincomb._fit.batch import wald_batch

        return wald_batch(
            self,
            c,
            d,
            ids=ids,
            covariance=covariance,
            reference=reference,
            on_invalid=on_invalid,
        )

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
        >>> bool(np.isclose((r.rss - f.rss) / f.rss * f.df_resid, w.statistic))
        True
        """
        self._check_variance()
        c, d, labels, cu, analysis = self._prepare(restrictions)
        sol = self._sol
        k = analysis.independent
        root_k = sol.root(cu[k][:, sol.kept])
        delta_k = cu[k][:, sol.kept] @ sol.theta - d[k]
        step, w = core.restricted_step(sol, root_k, delta_k)
        beta = sol.from_working(sol.theta + step)
        beta[sol.aliased] = np.nan
        rss_r = sol.rss + float(np.sum((sol.r @ step) ** 2))
        q = int(k.size)
        df_r = sol.df_resid + q
        sigma_r2 = rss_r / df_r
        # covariance: map W (working, kept) back to β through A = T⁻¹ S⁻¹ on kept columns
        aw = sol.from_working(w)
        cov = sigma_r2 * (aw @ aw.T)
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
            df_resid=df_r,
            sigma=float(np.sqrt(sigma_r2)),
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


def check_rows(
    sol: core.Solution,
    c: NDArray[np.float64],
    d: NDArray[np.float64],
    labels: Sequence[str],
    names: Sequence[str],
    where: str = "this rank-deficient design",
) -> tuple[NDArray[np.float64], core.RowAnalysis]:
    """Map ``C`` to working coordinates and refuse contradictory or non-estimable rows.

    Shared by every path that tests or imposes restrictions (fits, planned designs), so the
    rules and the wording of their errors are the same everywhere.

    Returns
    -------
    cu : (m, p) ndarray
        ``C`` in working coordinates.
    analysis : RowAnalysis
        Independent and redundant rows (see :func:`lincomb.linalg.analyze_rows`).

    Raises
    ------
    InconsistentRestrictionError
        A redundant row's ``d`` contradicts the rows it depends on (the rows are named).
    NotEstimableError
        A row has a component in the design's null space (the row and the aliased columns it
        touches are named).

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit_arrays(np.c_[np.ones(5), [0.0, 1, 2, 3, 5]], [1.0, 2, 2, 4, 5])
    >>> c = np.array([[0.0, 1.0], [0.0, 2.0]])
    >>> cu, a = check_rows(f._sol, c, np.array([1.0, 2.0]), ["x1 = 1", "2*x1 = 2"], f.names)
    >>> a.independent.tolist(), a.dependencies
    ([0], {1: {0: 2.0}})
    """
    cu = sol.to_working(c)
    analysis = core.analyze_rows(cu, d, core.ROW_TOL)
    if analysis.inconsistent:
        lines = []
        for row, dval, implied in analysis.inconsistent:
            dep = analysis.dependencies[row]
            combo = " + ".join(f"{w:.6g}·(row {k}: {labels[k]})" for k, w in dep.items()) or "0"
            lines.append(
                f"row {row} ({labels[row]}) equals {combo}, which implies d = {implied:.6g},"
                f" but its d is {dval:.6g}"
            )
        raise InconsistentRestrictionError(
            "the restrictions contradict each other: "
            + "; ".join(lines)
            + ". Remove one of the conflicting rows or correct its value."
        )
    resid = sol.estimability_residual(cu)
    bad = np.flatnonzero(resid > core.ROW_TOL)
    if bad.size:
        msgs = []
        for i in bad:
            touched = [names[j] for j in sol.aliased_touched(cu[i], core.ROW_TOL)]
            msgs.append(f"row {int(i)} ({labels[int(i)]}) involves aliased coefficients {touched}")
        aliased = [names[j] for j in sorted(sol.aliased)]
        raise NotEstimableError(
            f"restriction not estimable under {where}: "
            + "; ".join(msgs)
            + f". Aliased columns: {aliased}. Restate the row as a contrast that the data"
            " identify, or change the design so those columns are not aliased."
        )
    return cu, analysis


def _check_level(level: float) -> None:
    if not (0 < level < 1):
        raise ValueError(f"level must be in (0, 1), got {level!r}; e.g. 0.95 for 95%.")


def fit(
    formula: str,
    data: pd.DataFrame,
    *,
    weights: str | ArrayLike | None = None,
    missing: str = "drop",
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
    missing : {'drop', 'raise'}, default 'drop'
        Rows with missing values in the formula's variables are dropped and counted
        (``n_dropped``, ``dropped_rows``), or raise :class:`~lincomb.errors.MissingValueError`.
    rank_tol : float, default 1e-10
        Relative rank tolerance (see :mod:`lincomb.linalg`).

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
    >>> f.df_resid
    293
    """
    require_response(formula)
    design = design_from_formula(formula, data, weights=weights, missing=missing)
    return LinearFit._from_design(design, rank_tol)


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
    return LinearFit._from_design(design, rank_tol)
