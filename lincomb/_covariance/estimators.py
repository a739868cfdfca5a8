"""Covariance estimators for Wald tests and intervals, chosen per test without refitting.

Every test and interval of a :class:`~lincomb.fit.LinearFit` can use one of these estimators of
the covariance of ``β̂`` (pass it as ``covariance=`` to :meth:`~lincomb.fit.LinearFit.wald`,
:meth:`~lincomb.fit.LinearFit.coef_frame`, :meth:`~lincomb.fit.LinearFit.covariance`, or attach
it once with :meth:`~lincomb.fit.LinearFit.with_covariance`):

``"classical"`` (the default)
    ``σ² (X̃ᵀX̃)⁻¹``: constant error variance.
``"HC0"``, ``"HC1"``, ``"HC2"``, ``"HC3"``, ``"HC4"``
    Heteroskedasticity-consistent sandwiches ``(X̃ᵀX̃)⁻¹ (Σ ω_i x̃_i x̃_iᵀ) (X̃ᵀX̃)⁻¹`` with
    ``ω_i`` equal to ``ẽ_i²`` (HC0), ``n/(n−k) ẽ_i²`` (HC1), ``ẽ_i²/(1−h_i)`` (HC2),
    ``ẽ_i²/(1−h_i)²`` (HC3) and ``ẽ_i²/(1−h_i)^δ_i`` with ``δ_i = min(4, n h_i / k)`` (HC4),
    where ``k`` is the rank of the design and ``h_i`` the leverage of row ``i``.
:func:`clustered`
    Cluster-robust, one-way or two-way; with ``adjust="bias-reduced"`` or ``"jackknife"`` the
    residuals are adjusted for leverage per cluster and each test gets small-sample df
    (:mod:`~lincomb._covariance.bias_reduced`).
:func:`serial`
    Heteroskedasticity-and-autocorrelation consistent (Newey–West, Bartlett kernel); with
    ``units=`` lags stay inside each unit of a panel.
:func:`common_shocks`
    Newey–West on scores summed per time point (panels with dependence across units).

A test that needs no covariance estimate at all: :func:`~lincomb.wild_bootstrap`, the wild
cluster bootstrap with the null imposed (:mod:`~lincomb._covariance.wild`).
:func:`given`
    A covariance matrix of the coefficients supplied by the user.

``X̃ = sqrt(w)·X`` and ``ẽ = sqrt(w)·(y − Xβ̂)`` are the weighted design and residuals (the plain
ones without weights).  Each estimator brings the denominator degrees of freedom of its F (and
t) reference; a test can use the large-sample chi-squared (and normal) reference instead with
``reference="chi2"``.

Numerics
--------
The fit keeps the triangular factor ``R`` of its kept working columns (``X̃_wᵀ X̃_w = RᵀR``, see
:mod:`lincomb._core`).  A sandwich visits the rows once, in blocks (see
:mod:`~lincomb._covariance.meats`): a triangular solve per block gives ``Zᵀ = R⁻ᵀ X̃_wᵀ`` for
its rows (``Z = X̃_w R⁻¹`` has orthonormal columns).  Then

* the leverages are ``h_i = ‖z_i‖²``: no ``n × n`` hat matrix is ever formed;
* the score of row ``i`` in these coordinates is ``g_i = z_i ẽ_i``, and every meat is a small
  ``k × k`` matrix ``M`` built from the scores (summed within clusters, or lagged in time);
* ``M`` is formed as a small Gram matrix (one matrix product over the rows) and kept as a
  factor ``F`` with ``M = FᵀF`` from its symmetric eigendecomposition.  Forming it is safe
  because these coordinates are orthonormal: collinearity of the regressors has been absorbed
  by ``R`` and does not reach ``M``.  Eigenvalues at most :data:`MEAT_RANK_TOL` (1e-12) times
  the largest are rounding and are set to zero, so that a meat singular by construction (fewer
  clusters than restriction rows, a row fitted exactly) is recognised as such; negative ones
  (two-way clusters) are set to zero too.  Because the eigenvalues are clipped in orthonormal
  coordinates of the design's column space, the result does not depend on the units or the
  parametrization of the regressors (clipping the coefficients' covariance itself would).

With ``V = R⁻ᵀ C_uᵀ`` (the classical root of a restriction system in working coordinates, see
:meth:`lincomb._core.Solution.root`) the covariance of ``Cβ̂`` is ``Vᵀ M V = (FV)ᵀ(FV)``, so a
test uses the root ``F V`` and costs nothing that grows with ``n``.  The inverse of ``XᵀX`` is
never formed.

Tolerances
----------
* :data:`LEVERAGE_TOL`: a row with ``1 − h_i ≤ 1e-10`` is fitted exactly (its residual is zero);
  it contributes nothing to HC2, HC3 or HC4 (instead of ``0/0``).
* :data:`EIGEN_TOL`: an eigenvalue of a meat below ``−1e-10`` times the largest one counts as
  *clipped* (reported on the estimate); smaller negative ones are rounding and are set to zero
  silently, as are positive ones up to :data:`MEAT_RANK_TOL` = 1e-12 times the largest.
* :data:`SYMMETRY_TOL` and :data:`PSD_TOL` (both 1e-8, relative to the largest entry and the
  largest eigenvalue) judge a supplied matrix.
* :data:`COV_RANK_TOL`: in a test, an independent row whose robust covariance leaves at most
  ``1e-9`` of its standard error outside the span of the rows before it makes the covariance of
  the system singular (for example more rows than clusters); the test raises
  :class:`~lincomb.errors.SingularCovarianceError`.

Layout
------
This module is the layer's entry point, :func:`evaluate`; the names above live in the modules
below, and other layers import them from there.

* :mod:`~lincomb._covariance.specs`: what the user writes (strings, :func:`clustered`,
  :func:`serial`, :func:`given`) and :func:`as_estimator`;
* :mod:`~lincomb._covariance.meats`: every row-based estimator once, as block / merge /
  finish; :mod:`~lincomb._covariance.in_memory` runs it over an in-memory fit's rows,
  :mod:`~lincomb._covariance.second_pass` over chunks or Dask partitions;
* :mod:`~lincomb._covariance.rows`: the fit's rows and per-row variables (labels, times);
* :mod:`~lincomb._covariance.cluster_blocks`: per-cluster ``k × k`` blocks of the hat matrix
  (block / merge), which :mod:`~lincomb._covariance.bias_reduced` (few-cluster estimators and
  their df) and :mod:`~lincomb._covariance.wild` (the bootstrap) use;
  :mod:`~lincomb._covariance.panel`: Newey–West within units and on per-time score sums;
* :mod:`~lincomb._covariance.estimate`: :class:`CovarianceEstimate`, the meat's factor and
  the rank check; :mod:`~lincomb._covariance.reference`: the reference distribution and df;
  :mod:`~lincomb._covariance.few_clusters`: the few-clusters warning;
  :mod:`~lincomb._covariance.given`: a supplied matrix;
* :mod:`~lincomb._covariance.cache`: each row-based estimate computed once per fit and
  estimator, so repeated tests, intervals and tables do not visit the rows again;
  :mod:`~lincomb._covariance.examples`: the two fits the layer's examples start from.

References
----------
White (1980), Econometrica 48:817-838 (HC0); MacKinnon and White (1985), J. Econometrics
29:305-325 (HC1-HC3); Cribari-Neto (2004), Comput. Stat. Data Anal. 45:215-233 (HC4);
Cameron, Gelbach and Miller (2011), J. Bus. Econ. Stat. 29:238-249 (two-way clusters and the
eigenvalue fix); Newey and West (1987), Econometrica 55:703-708 (Bartlett weights) and (1994),
Rev. Econ. Stud. 61:631-653 (the automatic lag ``floor(4 (n/100)^(2/9))``); Bell and McCaffrey
(2002), Survey Methodology 28:169-181 (bias-reduced cluster covariance and its df); Driscoll
and Kraay (1998), Rev. Econ. Stat. 80:549-560 (scores summed per time point).

Where second passes (chunks, Dask partitions) get each estimator: HC, one- and two-way
clusters, the bias-reduced and jackknife clusters (per-cluster blocks merge by label) and
:func:`common_shocks` (per-time sums merge by label) -- yes; :func:`serial` with or without
``units`` -- no (lagged products would cross block boundaries); the wild bootstrap needs an
in-memory fit (its per-cluster pieces come from the same blocks, but it is offered on
in-memory fits only).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from lincomb._covariance.cache import evaluate_once
from lincomb._covariance.estimate import CovarianceEstimate
from lincomb._covariance.examples import lines_doc, sites_doc
from lincomb._covariance.specs import as_estimator
from lincomb.errors import IncompatibleFitError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["evaluate"]


@sites_doc
def coefficient_df(sol: Any, estimate: CovarianceEstimate) -> NDArray[np.float64]:
    """Small-sample df of each coefficient under an estimate with per-test df (NaN where the
    coefficient is aliased).

    Examples
    --------
    %(sites_fit)s
    >>> est = evaluate(f, lc.clustered(by="site", adjust="bias-reduced"))
    >>> coefficient_df(f.solution, est).shape
    (3,)
    """
    cu = sol.to_working(np.eye(sol.p))[:, sol.kept]
    rows, _ = estimate.test_df(cu, np.zeros(0, dtype=np.intp))
    out = np.asarray(rows, dtype=np.float64).copy()
    out[sol.aliased] = np.nan
    return out


@lines_doc
def evaluate(fit: LinearFit, covariance: object) -> CovarianceEstimate:
    """Evaluate an estimator (or check an already evaluated one) on ``fit``.

    Examples
    --------
    %(lines_fit)s
    >>> est = evaluate(f, "HC3")
    >>> est, evaluate(f, est) is est
    (<CovarianceEstimate: HC3; reference df 295>, True)
    """
    if isinstance(covariance, CovarianceEstimate):
        if covariance.solution is not fit.solution:
            raise IncompatibleFitError(
                f"this {covariance.label!r} covariance estimate belongs to another fit; pass the"
                " estimator (e.g. 'HC3' or lc.clustered(...)) so it is computed on this fit."
            )
        return covariance
    return evaluate_once(fit, as_estimator(covariance))
