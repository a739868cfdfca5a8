"""A fit at a glance: goodness of fit, the overall test, likelihood-based criteria.

* ``r_squared = 1 − RSS / TSS`` with ``TSS`` the (weighted) sum of squares of the response
  about its (weighted) mean when the model has an intercept, about zero otherwise;
  ``r_squared_adjusted = 1 − (1 − R²)(n − c) / (n − rank)`` with ``c`` 1 with an intercept,
  else 0.
* The overall test: every non-intercept coefficient zero (all coefficients without an
  intercept), as a Wald test under the fit's covariance estimator, on the kept columns (its
  ``df_test`` is the rank less the intercept).
* The Gaussian log-likelihood at the maximum-likelihood variance ``RSS / n``:
  ``−n/2 (log 2π + log(RSS/n) + 1) + ½ Σ log w``; ``AIC = −2 loglik + 2 rank`` and
  ``BIC = −2 loglik + rank · log n`` (the error variance is not counted, as is common
  practice in regression software).  A weighted fit kept without its rows has no
  ``Σ log w``: its log-likelihood, AIC and BIC are NaN.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from lincomb import _core as core
from lincomb._covariance.estimate import check_rank
from lincomb._covariance.reference import check_reference, reference_df, reference_result
from lincomb._results.format import _num, _p, _table_html, _table_text
from lincomb._results.report import ReportTables
from lincomb.errors import RowsUnavailableError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["FitOverview", "overview"]


@dataclass(frozen=True)
class FitOverview(ReportTables):
    """Summary numbers of a fit (see :mod:`lincomb._results.overview` for definitions).

    Made by :meth:`LinearFit.overview <lincomb.LinearFit.overview>`.

    Attributes
    ----------
    n_obs, rank, fit_df_error : int
    r_squared, r_squared_adjusted, sigma, rss : float
    stat : float
        Statistic of the overall test (F, or chi-squared with ``reference='chi2'``).
    df_test : int
        Its numerator degrees of freedom.
    df_error : float
        Its denominator degrees of freedom: the covariance estimator's (``G − 1`` for
        clusters), ``inf`` for chi-squared.
    p : float
    loglik, aic, bic : float
    covariance : str
        The fit's covariance estimator, which the overall test and every default test use.
    reference : {'F', 'chi2'}

    Examples
    --------
    >>> import lincomb as lc
    >>> ov = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines()).overview()
    >>> ov.df_test, ov.df_error, bool(0 < ov.r_squared < 1)
    (4, 295.0, True)
    """

    n_obs: int
    rank: int
    fit_df_error: int
    r_squared: float
    r_squared_adjusted: float
    sigma: float
    rss: float
    stat: float
    df_test: int
    df_error: float
    p: float
    loglik: float
    aic: float
    bic: float
    covariance: str
    reference: str

    def test_frame(self) -> pd.DataFrame:
        """The overview as one row.

        Returns
        -------
        pandas.DataFrame
            Columns ``n_obs, rank, fit_df_error, r_squared, r_squared_adjusted, sigma, rss, stat,
            df_test, df_error, p, loglik, aic, bic, covariance, reference``.

        Examples
        --------
        >>> import lincomb as lc
        >>> ov = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).overview()
        >>> ov.test_frame().shape
        (1, 16)
        """
        return pd.DataFrame([{k: getattr(self, k) for k in self.__dataclass_fields__}])

    def _rows(self) -> tuple[str, list[list[str]]]:
        name = "F" if self.reference == "F" else "chi2"
        dfs = (
            f"{self.df_test} and {self.df_error:g} df"
            if self.reference == "F"
            else f"{self.df_test} df"
        )
        head = f"Fit overview: n = {self.n_obs}, rank = {self.rank}"
        rows = [
            ["R²", _num(self.r_squared)],
            ["adjusted R²", _num(self.r_squared_adjusted)],
            ["sigma", _num(self.sigma)],
            ["residual df", str(self.fit_df_error)],
            [f"all non-intercept coefficients zero: {name} on {dfs}", _num(self.stat)],
            ["  p", _p(self.p)],
            ["covariance of tests", self.covariance],
            ["log-likelihood", _num(self.loglik)],
            ["AIC", _num(self.aic)],
            ["BIC", _num(self.bic)],
        ]
        return head, rows

    def __repr__(self) -> str:
        head, rows = self._rows()
        return f"{head}\n{_table_text(['quantity', 'value'], rows)}"

    def _repr_html_(self) -> str:
        import html

        head, rows = self._rows()
        table = _table_html(["quantity", "value"], rows)
        return f"<div><p><b>{html.escape(head)}</b></p>{table}</div>"


def overview(fit: LinearFit, *, reference: str = "F") -> FitOverview:
    """The computation behind :meth:`LinearFit.overview`.

    Examples
    --------
    >>> import lincomb as lc
    >>> overview(lc.fit("fill_g ~ line", lc.datasets.fill_lines())).df_test
    3
    """
    ref = check_reference(reference)
    sol = fit.solution
    vcov = fit.evaluate_covariance(None)
    n = sol.n
    tss = sol.y_norm**2
    r2 = 1.0 - sol.rss / tss if tss > 0 else float("nan")
    c = 1 if sol.intercept is not None else 0
    r2_adj = 1.0 - (1.0 - r2) * (n - c) / sol.df_resid
    tested = np.arange(c, sol.rank)
    if tested.size:
        fit.check_variance()
        ck = np.eye(sol.rank)[tested]
        est = ck @ sol.theta
        root = vcov.root(ck)
        chol = check_rank(root, np.arange(tested.size), ["overall"] * tested.size, vcov)
        wc = core.wald_from_root(est, root, np.arange(tested.size), chol)
        _d, stat, df_err, p = reference_result(wc.quad, wc.rank, vcov.df_error, ref)
    else:
        stat, p = float("nan"), float("nan")
        df_err = reference_df(vcov.df_error, ref)
    log_w = 0.0
    if fit.weighted:
        try:
            w = fit.design.weights
            log_w = float(np.sum(np.log(w))) if w is not None else float("nan")
        except RowsUnavailableError:
            log_w = float("nan")
    llf = -0.5 * n * (np.log(2 * np.pi) + np.log(sol.rss / n) + 1.0) + 0.5 * log_w
    k = sol.rank
    return FitOverview(
        n_obs=n,
        rank=k,
        fit_df_error=sol.df_resid,
        r_squared=float(r2),
        r_squared_adjusted=float(r2_adj),
        sigma=fit.sigma,
        rss=sol.rss,
        stat=float(stat),
        df_test=int(tested.size),
        df_error=float(df_err),
        p=float(p),
        loglik=float(llf),
        aic=float(-2 * llf + 2 * k),
        bic=float(-2 * llf + k * np.log(n)),
        covariance=vcov.label,
        reference=ref,
    )
