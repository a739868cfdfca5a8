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
    Cluster-robust, one-way or two-way.
:func:`serial`
    Heteroskedasticity-and-autocorrelation consistent (Newey–West, Bartlett kernel).
:func:`given`
    A covariance matrix of the coefficients supplied by the user.

``X̃ = sqrt(w)·X`` and ``ẽ = sqrt(w)·(y − Xβ̂)`` are the weighted design and residuals (the plain
ones without weights).  Each estimator brings the denominator degrees of freedom of its F (and
t) reference; a test can use the large-sample chi-squared (and normal) reference instead with
``reference="chi2"``.

Numerics
--------
The fit keeps the triangular factor ``R`` of its kept working columns (``X̃_wᵀ X̃_w = RᵀR``, see
:mod:`lincomb.linalg`).  A sandwich visits the rows once: one triangular solve with ``n``
right-hand sides gives ``Zᵀ = R⁻ᵀ X̃_wᵀ`` (``Z = X̃_w R⁻¹`` has orthonormal columns).  Then

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
:meth:`lincomb.linalg.Solution.root`) the covariance of ``Cβ̂`` is ``Vᵀ M V = (FV)ᵀ(FV)``, so a
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

References
----------
White (1980), Econometrica 48:817-838 (HC0); MacKinnon and White (1985), J. Econometrics
29:305-325 (HC1-HC3); Cribari-Neto (2004), Comput. Stat. Data Anal. 45:215-233 (HC4);
Cameron, Gelbach and Miller (2011), J. Bus. Econ. Stat. 29:238-249 (two-way clusters and the
eigenvalue fix); Newey and West (1987), Econometrica 55:703-708 (Bartlett weights) and (1994),
Rev. Econ. Stud. 61:631-653 (the automatic lag ``floor(4 (n/100)^(2/9))``).
"""

from __future__ import annotations

import difflib
import math
import os
import sys
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import sparse, stats

from lincomb import _core as linalg
from lincomb.errors import (
    CovarianceInputError,
    FewClustersWarning,
    IncompatibleFitError,
    InputError,
    RowsUnavailableError,
    SingularCovarianceError,
)

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = [
    "HC_KINDS",
    "FEW_CLUSTERS",
    "LEVERAGE_TOL",
    "EIGEN_TOL",
    "MEAT_RANK_TOL",
    "SYMMETRY_TOL",
    "PSD_TOL",
    "COV_RANK_TOL",
    "Estimator",
    "Classical",
    "Heteroskedastic",
    "Clustered",
    "Serial",
    "Given",
    "CovarianceEstimate",
    "clustered",
    "serial",
    "given",
    "as_estimator",
    "evaluate",
    "automatic_lag",
]

Array = NDArray[np.float64]

#: The heteroskedasticity-consistent estimators, by their names in the trade.
HC_KINDS: tuple[str, ...] = ("HC0", "HC1", "HC2", "HC3", "HC4")
#: Fewer clusters than this draw a :class:`~lincomb.errors.FewClustersWarning`.
FEW_CLUSTERS: int = 30
#: Rows with ``1 - h_i`` at most this are fitted exactly and dropped from HC2-HC4 meats.
LEVERAGE_TOL: float = 1e-10
#: Relative size of a negative meat eigenvalue that is reported as clipped.
EIGEN_TOL: float = 1e-10
#: Meat eigenvalues at most this times the largest are rounding and are set to zero.
MEAT_RANK_TOL: float = 1e-12
#: Relative asymmetry allowed in a supplied covariance matrix.
SYMMETRY_TOL: float = 1e-8
#: Relative negative eigenvalue allowed in a supplied covariance matrix.
PSD_TOL: float = 1e-8
#: Relative rank tolerance for the robust covariance of the independent rows of a test.
COV_RANK_TOL: float = 1e-9

_REFERENCES = ("F", "chi2")


# -- estimator specifications (no data; evaluated on a fit) ---------------------------------


class Estimator:
    """Base class of the covariance estimator specifications.

    A specification holds only the user's choices; :meth:`evaluate` turns it into a
    :class:`CovarianceEstimate` for one fit.

    Examples
    --------
    >>> import lincomb as lc
    >>> isinstance(lc.clustered(by="site"), Estimator), isinstance(as_estimator("HC1"), Estimator)
    (True, True)
    """

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:  # pragma: no cover - abstract
        """Evaluate this estimator on ``fit`` (subclasses implement it).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> as_estimator("HC1").evaluate(f)
        <CovarianceEstimate: HC1; reference df 295>
        """
        raise NotImplementedError


@dataclass(frozen=True)
class Classical(Estimator):
    """``σ² (X̃ᵀX̃)⁻¹``: the covariance under constant error variance (the default).

    Written as the string ``"classical"`` (or ``None``) where an estimator is accepted.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> Classical().evaluate(f)
    <CovarianceEstimate: classical; reference df 295>
    """

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        fit._check_variance()
        return CovarianceEstimate(
            method="classical",
            label="classical",
            df_den=float(fit.df_resid),
            _sol=fit._sol,
            _sigma=fit.sigma,
        )


@dataclass(frozen=True)
class Heteroskedastic(Estimator):
    """One of the heteroskedasticity-consistent sandwiches ``HC0`` to ``HC4``.

    Written as the string ``"HC0"`` ... ``"HC4"`` where an estimator is accepted.  The F
    reference uses ``n − rank`` denominator degrees of freedom.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> f.wald(lc.term("line") == 0, covariance=Heteroskedastic("HC2")).covariance
    'HC2'
    """

    kind: str = "HC3"

    def __post_init__(self) -> None:
        if self.kind not in HC_KINDS:
            raise CovarianceInputError(
                f"unknown heteroskedasticity-consistent estimator {self.kind!r}; use one of"
                f" {list(HC_KINDS)}."
            )

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        fit._check_variance()
        zt, resid = _working_rows(fit)
        n, k = resid.size, zt.shape[0]
        omega = resid * resid
        scale = 1.0
        if self.kind == "HC1":
            scale = n / (n - k)
        elif self.kind in ("HC2", "HC3", "HC4"):
            omega = omega * _leverage_weights(self.kind, zt, n, k)
        factor, _ = _psd_factor(scale * ((zt * omega) @ zt.T))
        return CovarianceEstimate(
            method=self.kind,
            label=self.kind,
            df_den=float(fit.df_resid),
            scale=scale,
            _sol=fit._sol,
            _factor=factor,
        )


@dataclass(frozen=True, eq=False)
class Clustered(Estimator):
    """Cluster-robust covariance; build it with :func:`clustered`.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("wait_min ~ staffing + protocol", lc.datasets.service_sites())
    >>> lc.clustered(by="site").evaluate(f)
    <CovarianceEstimate: cluster by site (40 groups); reference df 39>
    """

    by: tuple[Any, ...]
    small_sample: bool = True
    df: float | None = None

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        fit._check_variance()
        labels = [_row_values(fit, b, "cluster labels") for b in self.by]
        codes: list[NDArray[np.intp]] = []
        sizes: list[int] = []
        for (values, name), _b in zip(labels, self.by, strict=True):
            c, g = _cluster_codes(fit, values, name)
            codes.append(c)
            sizes.append(g)
        names = [name for _, name in labels]
        n, k = fit.n_obs, fit.rank
        few = [f"{nm} ({g})" for nm, g in zip(names, sizes, strict=True) if g < FEW_CLUSTERS]
        if few:
            warnings.warn(
                f"few clusters: {', '.join(few)}. Cluster-robust tests lean on many clusters;"
                f" with fewer than {FEW_CLUSTERS} their size can be far from nominal. Read the"
                " p-values with care, or use a coarser model of the dependence.",
                FewClustersWarning,
                stacklevel=_user_stacklevel(),
            )
        # Cluster sums of the scores x̃_i ẽ_i = w_i x_c,i e_i are taken in centred coordinates
        # and only then mapped by (R S)⁻¹: a triangular solve with G right-hand sides, not n.
        xc, resid, rs, w = _centered_rows(fit)
        u = resid if w is None else resid * w
        rows = np.arange(n + 1)

        def meat_of(c: NDArray[np.intp], g: int) -> tuple[Array, float]:
            member = sparse.csc_array((u, c, rows), shape=(g, n))  # column i: u_i at row c_i
            sums = member @ xc  # (g, k)
            sq = linalg.upper_solve(rs, sums.T, trans=True)
            adj = g / (g - 1) * (n - 1) / (n - k) if self.small_sample else 1.0
            return sq @ sq.T, adj

        clipped = 0
        if len(codes) == 1:
            m1, adj = meat_of(codes[0], sizes[0])
            factor, _ = _psd_factor(adj * m1)
            scale: float | tuple[float, ...] = adj
            method = "cluster"
            label = f"cluster by {names[0]} ({sizes[0]} groups)"
        else:
            pair = codes[0].astype(np.int64) * sizes[1] + codes[1]
            both, cells = pd.factorize(pair)
            g12 = len(cells)
            m1, a1 = meat_of(codes[0], sizes[0])
            m2, a2 = meat_of(codes[1], sizes[1])
            if g12 > 1:
                m12, a12 = meat_of(both.astype(np.intp), g12)
            else:  # one intersection cell: its one-way meat is zero (scores sum to zero)
                m12, a12 = np.zeros((k, k)), 0.0
            factor, clipped = _psd_factor(a1 * m1 + a2 * m2 - a12 * m12)
            scale = (a1, a2, a12)
            method = "two-way cluster"
            label = f"two-way cluster by {names[0]} × {names[1]} ({sizes[0]}, {sizes[1]} groups)"
            if clipped:
                label += f"; {clipped} negative eigenvalue(s) set to 0"
        df_den = float(min(sizes) - 1) if self.df is None else float(self.df)
        return CovarianceEstimate(
            method=method,
            label=label,
            df_den=df_den,
            groups=tuple(sizes),
            scale=scale,
            clipped=clipped,
            _sol=fit._sol,
            _factor=factor,
        )


@dataclass(frozen=True, eq=False)
class Serial(Estimator):
    """Newey–West covariance with Bartlett weights; build it with :func:`serial`.

    Examples
    --------
    >>> import lincomb as lc
    >>> sites = lc.datasets.service_sites()
    >>> f = lc.fit("wait_min ~ staffing", sites[sites["site"] == "S01"])
    >>> lc.serial(lag=2, order="week").evaluate(f)
    <CovarianceEstimate: serial (Bartlett, lag 2, week); reference df 24>
    """

    lag: int | None = None
    order: Any = None
    small_sample: bool = False
    df: float | None = None

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        fit._check_variance()
        n, k = fit.n_obs, fit.rank
        lag = automatic_lag(n) if self.lag is None else self.lag
        if lag >= n:
            raise CovarianceInputError(
                f"lag {lag} is not smaller than the {n} observations the fit used; a lag must"
                f" be below n (the automatic rule gives {automatic_lag(n)})."
            )
        zt, resid = _working_rows(fit)
        if self.order is None:
            perm: NDArray[np.intp] | None = None
            order_name = "row order"
        else:
            values, order_name = _row_values(fit, self.order, "time order")
            perm = _time_order(fit, values, order_name)
        scores = zt * resid
        s = np.ascontiguousarray((scores if perm is None else scores[:, perm]).T)  # (n, k)
        meat = s.T @ s
        for ell in range(1, lag + 1):
            w = 1.0 - ell / (lag + 1.0)
            gam = s[ell:].T @ s[:-ell]
            meat += w * (gam + gam.T)
        scale = n / (n - k) if self.small_sample else 1.0
        factor, clipped = _psd_factor(meat * scale)
        label = f"serial (Bartlett, lag {lag}, {order_name})"
        if clipped:
            label += f"; {clipped} negative eigenvalue(s) set to 0"
        return CovarianceEstimate(
            method="serial",
            label=label,
            df_den=float(fit.df_resid) if self.df is None else float(self.df),
            lag=lag,
            scale=scale,
            clipped=clipped,
            _sol=fit._sol,
            _factor=factor,
        )


@dataclass(frozen=True, eq=False)
class Given(Estimator):
    """A covariance matrix of the coefficients supplied by the user; build it with
    :func:`given`.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> lc.given(f.covariance("HC3"), df=100).evaluate(f)
    <CovarianceEstimate: given matrix; reference df 100>
    """

    matrix: Any
    df: float | None = None

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        sol = fit._sol
        v = _given_block(fit, self.matrix)
        factor, _ = _psd_factor(v)
        # the basic solution's kept coefficients map to working coordinates by θ = B β_kept
        kept = sol.kept
        bmap = np.diag(sol.scale[kept])
        if sol.intercept is not None:
            row = int(np.flatnonzero(kept == sol.intercept)[0])
            bmap[row] = sol.center[kept]
            bmap[row, row] = 1.0
        return CovarianceEstimate(
            method="given",
            label="given matrix",
            df_den=float(fit.df_resid) if self.df is None else float(self.df),
            _sol=sol,
            _factor=factor,
            _direct=bmap,
        )


# -- public constructors --------------------------------------------------------------------


def clustered(
    by: str | ArrayLike | pd.Series | Sequence[Any],
    *,
    small_sample: bool = True,
    df: float | None = None,
) -> Clustered:
    """Cluster-robust covariance: errors may correlate within a cluster, not across clusters.

    Parameters
    ----------
    by : str, array_like, pandas.Series, or a list of two of them
        Cluster labels of the rows: the name of a column of the data the fit was made from
        (rows dropped for missing values are dropped here too), a Series aligned by index with
        that data, or an array with one label per row *used* by the fit.  Two of them (a list
        of two names, a two-column DataFrame or array) give two-way clustering.  A list of
        strings always names columns: give the labels themselves as an array or Series.
    small_sample : bool, default True
        Multiply each one-way meat by ``G/(G−1) · (N−1)/(N−K)`` (``G`` clusters, ``N`` rows,
        ``K`` the rank of the design).
    df : float, optional
        Denominator degrees of freedom of the F (and t) reference.  Default ``G − 1``; with two
        clustering variables ``min(G₁, G₂) − 1``.

    Returns
    -------
    Clustered

    Notes
    -----
    One-way: ``M = Σ_g s_g s_gᵀ`` with ``s_g`` the sum of the scores ``x̃_i ẽ_i`` of cluster
    ``g``.  Two-way: ``M₁ + M₂ − M₁₂``, where ``M₁₂`` clusters by the intersection of the two
    labellings and each term carries its own small-sample factor; this difference need not be
    positive semi-definite, so its negative eigenvalues are set to zero (the fix proposed by
    Cameron, Gelbach and Miller, 2011) and their number is reported on the estimate
    (``clipped``) and in its label.  Labels with missing values, a length that does not match
    the rows used, or a single cluster raise :class:`~lincomb.errors.CovarianceInputError`.
    Fewer than :data:`FEW_CLUSTERS` clusters draw a :class:`~lincomb.errors.FewClustersWarning`.
    A cluster-robust covariance has rank at most ``G − 1``: a system with more independent rows
    raises :class:`~lincomb.errors.SingularCovarianceError`.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("wait_min ~ staffing + protocol", lc.datasets.service_sites())
    >>> res = f.wald(lc.coef("staffing") == 0, covariance=lc.clustered(by="site"))
    >>> res.covariance, res.df_den
    ('cluster by site (40 groups)', 39.0)
    """
    if isinstance(by, str):
        parts: tuple[Any, ...] = (by,)
    elif isinstance(by, pd.DataFrame):
        parts = tuple(by[c] for c in by.columns)
    elif isinstance(by, pd.Series):
        parts = (by,)
    elif isinstance(by, (list, tuple)) and by and _all_names_or_vectors(by):
        parts = tuple(by)
    else:
        arr = np.asarray(by)
        if arr.ndim == 2:
            parts = tuple(arr[:, j] for j in range(arr.shape[1]))
        elif arr.ndim == 1:
            parts = (arr,)
        else:
            raise CovarianceInputError(
                f"cluster labels must be one-dimensional (or two columns for two-way"
                f" clustering); got shape {arr.shape}."
            )
    if not 1 <= len(parts) <= 2:
        raise CovarianceInputError(
            f"clustering by {len(parts)} variables is not supported: give one variable, or two"
            " for two-way clustering."
        )
    _check_df(df)
    return Clustered(by=parts, small_sample=bool(small_sample), df=df)


def serial(
    lag: int | None = None,
    *,
    order: str | ArrayLike | pd.Series | None = None,
    small_sample: bool = False,
    df: float | None = None,
) -> Serial:
    """Heteroskedasticity-and-autocorrelation consistent covariance (Newey–West).

    Parameters
    ----------
    lag : int, optional
        Highest lag with a nonzero weight; lag ``ℓ`` gets the Bartlett weight
        ``1 − ℓ/(lag + 1)``.  Default: the rule of thumb ``floor(4 (n/100)^(2/9))`` of Newey and
        West (1994), see :func:`automatic_lag`.  Must be a whole number below ``n``.
    order : str, array_like or pandas.Series, optional
        Time order of the rows: a column of the fit's data, or one value per row used.  Rows
        are sorted by it (ties are refused: one series, one observation per time point).
        Default: the order of the rows in the data.
    small_sample : bool, default False
        Multiply the meat by ``n/(n−k)``.
    df : float, optional
        Denominator degrees of freedom of the F (and t) reference; default ``n − rank``.

    Returns
    -------
    Serial

    Notes
    -----
    ``M = Γ₀ + Σ_{ℓ=1..lag} (1 − ℓ/(lag+1)) (Γ_ℓ + Γ_ℓᵀ)`` with ``Γ_ℓ = Σ_t g_t g_{t−ℓ}ᵀ`` over
    the scores in time order.  Lags count rows in that order, not units of time: gaps in the
    time values are not filled.  The Bartlett weights keep ``M`` positive semi-definite; negative
    rounding is set to zero.

    Examples
    --------
    >>> import lincomb as lc
    >>> sites = lc.datasets.service_sites()
    >>> one = sites[sites["site"] == "S01"]
    >>> f = lc.fit("wait_min ~ staffing", one)
    >>> res = f.wald(lc.coef("staffing") == 0, covariance=lc.serial(lag=2, order="week"))
    >>> res.covariance
    'serial (Bartlett, lag 2, week)'
    """
    if lag is not None:
        if isinstance(lag, bool) or not isinstance(lag, (int, np.integer)):
            raise CovarianceInputError(
                f"lag must be a whole number of rows, got {lag!r}; e.g. serial(lag=4)."
            )
        if lag < 0:
            raise CovarianceInputError(f"lag must be 0 or more, got {lag}.")
        lag = int(lag)
    _check_df(df)
    return Serial(lag=lag, order=order, small_sample=bool(small_sample), df=df)


def given(matrix: ArrayLike | pd.DataFrame, *, df: float | None = None) -> Given:
    """A covariance matrix of the coefficients supplied by the user.

    Parameters
    ----------
    matrix : (p, p) array_like or pandas.DataFrame
        Covariance of ``β̂`` in the fit's coefficient order, or a DataFrame whose index and
        columns are the coefficient names (any order).  It must be finite, symmetric (to
        :data:`SYMMETRY_TOL`) and positive semi-definite (to :data:`PSD_TOL`) on the estimable
        coefficients.  Rows and columns of aliased coefficients are ignored (they may be NaN).
    df : float, optional
        Denominator degrees of freedom of the F (and t) reference; default ``n − rank`` of the
        fit.

    Returns
    -------
    Given

    Notes
    -----
    For a rank-deficient fit the matrix is read as the covariance of the basic solution (the
    aliased coefficients fixed at zero); only estimable rows can be tested.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> r = lc.coef("temperature_c") == 0
    >>> a = f.wald(r, covariance=lc.given(f.covariance()))
    >>> bool(np.isclose(a.statistic, f.wald(r).statistic))
    True
    """
    _check_df(df)
    return Given(matrix=matrix, df=df)


def automatic_lag(n: int) -> int:
    """The Newey–West (1994) rule of thumb ``floor(4 (n/100)^(2/9))`` for the Bartlett kernel.

    Examples
    --------
    >>> automatic_lag(100), automatic_lag(1000)
    (4, 6)
    """
    return int(math.floor(4.0 * (n / 100.0) ** (2.0 / 9.0)))


def as_estimator(obj: object) -> Estimator:
    """Turn ``None``, a name (``"classical"``, ``"HC0"`` ... ``"HC4"``) or an estimator into one.

    Examples
    --------
    >>> as_estimator("HC3")
    Heteroskedastic(kind='HC3')
    >>> as_estimator(None)
    Classical()
    """
    if obj is None:
        return Classical()
    if isinstance(obj, Estimator):
        return obj
    if isinstance(obj, str):
        key = obj.strip()
        if key.lower() == "classical":
            return Classical()
        if key.upper() in HC_KINDS:
            return Heteroskedastic(key.upper())
        names = {"CLASSICAL": "classical", **{k: k for k in HC_KINDS}}
        close = [names[c] for c in difflib.get_close_matches(key.upper(), names, n=3, cutoff=0.6)]
        hint = f" Did you mean one of: {close}?" if close else ""
        raise CovarianceInputError(
            f"unknown covariance estimator {obj!r}.{hint} Use 'classical', one of"
            f" {list(HC_KINDS)}, lc.clustered(...), lc.serial(...) or lc.given(...)."
        )
    raise CovarianceInputError(
        f"covariance must be 'classical', one of {list(HC_KINDS)}, or built with"
        f" lc.clustered(...), lc.serial(...) or lc.given(...); got {type(obj).__name__}."
    )


def evaluate(fit: LinearFit, covariance: object) -> CovarianceEstimate:
    """Evaluate an estimator (or check an already evaluated one) on ``fit``.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> est = evaluate(f, "HC3")
    >>> est, evaluate(f, est) is est
    (<CovarianceEstimate: HC3; reference df 295>, True)
    """
    if isinstance(covariance, CovarianceEstimate):
        if covariance._sol is not fit._sol:
            raise IncompatibleFitError(
                f"this {covariance.label!r} covariance estimate belongs to another fit; pass the"
                " estimator (e.g. 'HC3' or lc.clustered(...)) so it is computed on this fit."
            )
        return covariance
    return as_estimator(covariance).evaluate(fit)


# -- the evaluated estimate -----------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class CovarianceEstimate:
    """A covariance estimator evaluated on one fit, ready for any number of tests.

    Holds a ``k × k`` factor of the meat (``k`` = rank), so each test costs nothing that grows
    with the number of observations.

    Attributes
    ----------
    method : str
        ``'classical'``, ``'HC0'`` ... ``'HC4'``, ``'cluster'``, ``'two-way cluster'``,
        ``'serial'`` or ``'given'``.
    label : str
        Description shown on results (``WaldTest.covariance``).
    df_den : float
        Denominator degrees of freedom of the F reference (and of the rows' t).
    groups : tuple of int
        Number of clusters per clustering variable (empty for other estimators).
    lag : int or None
        Lag of a serial estimator.
    scale : float or tuple of float
        Small-sample factor(s) applied to the meat (1.0 for none; for two-way clustering one
        per term: first, second, intersection).
    clipped : int
        Number of clearly negative meat eigenvalues set to zero (see :data:`EIGEN_TOL`).

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("wait_min ~ staffing + protocol", lc.datasets.service_sites())
    >>> est = evaluate(f, lc.clustered(by="site"))
    >>> est.method, est.groups, est.df_den
    ('cluster', (40,), 39.0)
    """

    method: str
    label: str
    df_den: float
    groups: tuple[int, ...] = ()
    lag: int | None = None
    scale: float | tuple[float, ...] = 1.0
    clipped: int = 0
    _sol: linalg.Solution | None = field(default=None, repr=False)
    _sigma: float | None = field(default=None, repr=False)
    _factor: Array | None = field(default=None, repr=False)
    _direct: Array | None = field(default=None, repr=False)

    def root(self, cu_kept: Array) -> Array:
        """A matrix ``W`` with ``Cov(Cβ̂) = WᵀW`` for rows ``cu_kept`` (working, kept columns).

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
        >>> sol = f._sol
        >>> cu = sol.to_working(np.eye(5))[:, sol.kept]
        >>> w = evaluate(f, "HC3").root(cu)
        >>> bool(np.allclose(w.T @ w, f.covariance("HC3").to_numpy()))
        True
        """
        if self._direct is not None:
            assert self._factor is not None
            return self._factor @ (cu_kept @ self._direct).T
        assert self._sol is not None
        base = self._sol.root(cu_kept)
        if self._factor is None:
            assert self._sigma is not None
            return base * self._sigma
        return self._factor @ base

    def __repr__(self) -> str:
        return f"<CovarianceEstimate: {self.label}; reference df {self.df_den:g}>"


def check_rank(
    root: Array, independent: NDArray[np.intp], labels: Sequence[str], estimate: CovarianceEstimate
) -> None:
    """Raise :class:`~lincomb.errors.SingularCovarianceError` when the covariance of the
    independent rows is singular under ``estimate`` (see :data:`COV_RANK_TOL`).

    The classical covariance of independent, estimable rows is never singular, so it is not
    checked.
    """
    if estimate.method == "classical" or independent.size == 0:
        return
    vk = root[:, independent]
    se = np.linalg.norm(vk, axis=0)
    chol = linalg.triangular_factor(vk)
    diag = np.abs(np.diag(chol))
    bad = np.flatnonzero(diag <= COV_RANK_TOL * np.maximum(se, np.finfo(float).tiny))
    if not bad.size:
        return
    i = int(independent[bad[0]])
    rank = independent.size - bad.size
    why = ""
    if estimate.groups:
        why = (
            f" A cluster-robust covariance has rank at most G − 1 = {min(estimate.groups) - 1}"
            " (the scores of the clusters sum to zero)."
        )
    raise SingularCovarianceError(
        f"under the {estimate.label} covariance the {independent.size} independent restriction"
        f" rows have a covariance of rank {rank}: row {i} ({labels[i]}) adds no variance"
        f" outside the rows before it.{why} Test fewer rows at once, or choose an estimator"
        " with more information (more clusters, another estimator)."
    )


def reference_result(
    quad: float, q: int, df_den: float, reference: str
) -> tuple[str, float, float, float]:
    """``(distribution, statistic, df_den, p_value)`` of a Wald form under the reference."""
    ref = check_reference(reference)
    if q == 0:
        return ref, float("nan"), df_den if ref == "F" else float("inf"), float("nan")
    if ref == "chi2":
        return "chi2", float(quad), float("inf"), float(stats.chi2.sf(quad, q))
    stat = quad / q
    return "F", float(stat), float(df_den), float(stats.f.sf(stat, q, df_den))


def check_reference(reference: object) -> str:
    """Validate a reference distribution name (``'F'`` or ``'chi2'``)."""
    if isinstance(reference, str):
        key = reference.strip()
        if key.upper() == "F":
            return "F"
        if key.lower() in ("chi2", "chi-squared", "chisq"):
            return "chi2"
    raise InputError(
        f"reference must be 'F' (finite-sample: F for the system, t for rows) or 'chi2'"
        f" (large-sample: chi-squared for the system, normal for rows); got {reference!r}."
    )


# -- helpers -------------------------------------------------------------------------------


def _user_stacklevel() -> int:
    """Stack level of the first frame outside this package (for warnings that point at the
    caller's line whichever public method led here)."""
    here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))  # the lincomb package
    frame = sys._getframe(1)
    level = 1
    while frame is not None and os.path.abspath(frame.f_code.co_filename).startswith(here):
        frame = frame.f_back  # type: ignore[assignment]
        level += 1
    return level


def _check_df(df: float | None) -> None:
    if df is None:
        return
    try:
        ok = float(df) > 0 and math.isfinite(float(df))
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise CovarianceInputError(
            f"df must be a positive finite number, got {df!r}; for a large-sample test use"
            " reference='chi2' instead."
        )


def _all_names_or_vectors(items: Sequence[Any]) -> bool:
    if all(isinstance(b, str) for b in items):
        return True  # column names (labels go in an array or Series, not a list of strings)
    return len(items) <= 2 and (
        all(isinstance(b, (pd.Series, np.ndarray, list, tuple)) and np.ndim(b) == 1 for b in items)
        and len({len(b) for b in items}) == 1
        and len(items[0]) > 2
    )


def _centered_rows(fit: LinearFit) -> tuple[Array, Array, Array, Array | None]:
    """The fit's rows in centred (unscaled) coordinates.

    Returns ``X_c`` (n, k): the kept columns centred on the fit's means (a new array; the
    intercept column stays one); the unweighted residuals ``e``; ``R S``, the fit's factor with
    the column scales folded in (so ``X_w R⁻¹ = X_c (R S)⁻¹`` without a pass to scale the rows);
    and the weights (or None).
    """
    design = fit._design
    sol = fit._sol
    x = getattr(design, "x", None)
    if x is None or x.shape[0] != sol.n:
        raise RowsUnavailableError(
            "this robust covariance needs the rows of the fit (residuals and design rows), but"
            " this fit holds only summary statistics. Fit the data in memory (lc.fit or"
            " lc.fit_arrays) to use it, or use covariance='classical'."
        )
    kept = sol.kept
    scale = sol.scale[kept]
    if kept.size == x.shape[1] and np.array_equal(kept, np.arange(kept.size)):
        xc = x - sol.center  # one pass, no gather
    else:
        xc = x[:, kept]  # a copy: fancy indexing
        xc -= sol.center[kept]
    resid = design.y - xc @ (sol.theta / scale)
    return xc, resid, sol.r * scale, design.weights


def _leverage_weights(kind: str, zt: Array, n_obs: int, k: int, *, root: bool = False) -> Array:
    """HC2-HC4 weights ``(1 - h_i)^-a_i`` of the squared residuals (``^-a_i/2``, for the
    absolute residuals, with ``root``), from the working rows ``zt`` (k, n) of some or all of
    the fit's ``n_obs`` rows.  A row with leverage within ``LEVERAGE_TOL`` of 1 gets weight 0:
    its residual is exactly zero.
    """
    h = np.einsum("ij,ij->j", zt, zt)
    free = np.clip(1.0 - h, 0.0, None)
    exact = free <= LEVERAGE_TOL
    if kind == "HC2":
        power = np.ones(h.size)
    elif kind == "HC3":
        power = np.full(h.size, 2.0)
    else:
        power = np.minimum(4.0, n_obs * h / k)
    if root:
        power = power / 2
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(exact, 0.0, np.power(np.where(exact, 1.0, free), -power))


def _working_rows(fit: LinearFit) -> tuple[Array, Array]:
    """``Zᵀ = R⁻ᵀ X̃_wᵀ`` (k, n) and the weighted residuals ``ẽ`` (n,), from the fit's rows."""
    xc, resid, rs, w = _centered_rows(fit)
    if w is not None:
        sw = np.sqrt(w)
        xc *= sw[:, None]
        resid *= sw
    if rs.shape[0] == 0:
        return np.zeros((0, resid.size)), resid
    zt = linalg.upper_solve(rs, xc.T, trans=True)
    return zt, resid


def _psd_factor(meat: Array) -> tuple[Array, int]:
    """``F`` with ``FᵀF`` = the meat with eigenvalues at most :data:`MEAT_RANK_TOL` times the
    largest set to zero, and how many were clearly negative (below ``-EIGEN_TOL`` times the
    largest)."""
    sym = (meat + meat.T) / 2
    if sym.shape[0] == 0:
        return np.zeros((0, 0)), 0
    lam, u = np.linalg.eigh(sym)
    top = max(float(lam.max()), 0.0)
    clipped = int(np.count_nonzero(lam < -EIGEN_TOL * top))
    pos = lam > MEAT_RANK_TOL * top
    return (u[:, pos] * np.sqrt(lam[pos])).T, clipped


def _row_values(fit: LinearFit, source: Any, what: str) -> tuple[NDArray[Any], str]:
    """Values of a per-row variable for the rows the fit used, and a name for it."""
    design = fit._design
    n = fit.n_obs
    rows = design.row_index
    dropped = fit.n_dropped
    if isinstance(source, str):
        data = getattr(design, "source", None)
        if data is None:
            raise CovarianceInputError(
                f"{what} {source!r} names a column, but this fit was made from arrays and keeps"
                f" no data frame; pass the values as an array (one per row used, {n}) or a"
                " pandas Series."
            )
        if source not in data.columns:
            close = difflib.get_close_matches(source, [str(c) for c in data.columns], n=4)
            hint = f" Did you mean one of: {close}?" if close else ""
            raise CovarianceInputError(
                f"{what}: no column {source!r} in the fit's data.{hint}"
                f" Columns: {[str(c) for c in data.columns]}"
            )
        col = data[source]
        if len(col) != n:  # pragma: no cover - the design keeps exactly the rows used
            raise CovarianceInputError(f"{what}: column {source!r} does not match the rows used.")
        return col.to_numpy(), source
    if isinstance(source, pd.Series):
        name = str(source.name) if source.name is not None else "labels"
        if len(source) == n and source.index.equals(rows):
            return source.to_numpy(), name
        if rows.is_unique and source.index.is_unique and rows.isin(source.index).all():
            return source.reindex(rows).to_numpy(), name
        missing = rows[~rows.isin(source.index)]
        raise CovarianceInputError(
            f"{what}: the Series {name!r} cannot be aligned with the {n} rows the fit used"
            + (f" (no entry for row {missing[0]!r})" if len(missing) else " (repeated labels)")
            + "; give a Series indexed like the data, or an array with one value per row used."
        )
    arr = np.asarray(source)
    if arr.ndim != 1:
        raise CovarianceInputError(
            f"{what} must be one-dimensional (one value per row), got shape {arr.shape}."
        )
    if arr.shape[0] != n:
        extra = (
            f" ({dropped} rows were dropped for missing values, so {n + dropped} data rows"
            " became {n} rows used)".replace("{n}", str(n))
            if dropped
            else ""
        )
        raise CovarianceInputError(
            f"{what} have {arr.shape[0]} entries but the fit used {n} rows{extra}. Pass a column"
            " name of the data or a pandas Series aligned by index (dropped rows are then"
            " skipped), or one value per row used."
        )
    return arr, "labels"


def _show(value: Any) -> Any:
    """A numpy scalar as the plain Python value (for readable messages)."""
    return value.item() if isinstance(value, np.generic) else value


def _missing_at(fit: LinearFit, values: NDArray[Any]) -> NDArray[np.intp]:
    return np.flatnonzero(pd.isna(values))


def _cluster_codes(fit: LinearFit, values: NDArray[Any], name: str) -> tuple[NDArray[np.intp], int]:
    bad = _missing_at(fit, values)
    if bad.size:
        row = fit._design.row_index[int(bad[0])]
        raise CovarianceInputError(
            f"cluster labels {name!r} are missing at row {row!r} ({bad.size} missing in all);"
            " give every row used a cluster (for example its own label) or drop those rows"
            " before fitting."
        )
    codes, uniques = pd.factorize(values, sort=False)
    g = len(uniques)
    if g < 2:
        raise CovarianceInputError(
            f"cluster labels {name!r} hold a single cluster ({_show(uniques[0])!r}); a"
            " cluster-robust covariance needs at least two clusters (and preferably many more)."
        )
    return codes.astype(np.intp), g


def _time_order(fit: LinearFit, values: NDArray[Any], name: str) -> NDArray[np.intp]:
    bad = _missing_at(fit, values)
    if bad.size:
        row = fit._design.row_index[int(bad[0])]
        raise CovarianceInputError(
            f"time order {name!r} is missing at row {row!r} ({bad.size} missing in all); every"
            " row used needs a time value."
        )
    perm = np.argsort(values, kind="stable")
    ordered = values[perm]
    ties = np.flatnonzero(ordered[1:] == ordered[:-1])
    if ties.size:
        raise CovarianceInputError(
            f"time order {name!r} repeats the value {_show(ordered[ties[0]])!r} ({ties.size} ties):"
            " a serial covariance needs one observation per time point. For several series"
            " (panels) cluster by series with lc.clustered(...), or aggregate per time point."
        )
    return perm.astype(np.intp)


def _given_block(fit: LinearFit, matrix: Any) -> Array:
    """The supplied matrix on the kept coefficients (working order), validated."""
    names = list(fit.names)
    p = len(names)
    sol = fit._sol
    if isinstance(matrix, pd.DataFrame):
        idx = [str(i) for i in matrix.index]
        cols = [str(c) for c in matrix.columns]
        for axis, labs in (("index", idx), ("columns", cols)):
            dup = sorted({s for s in labs if labs.count(s) > 1})
            missing = [s for s in names if s not in labs]
            extra = [s for s in labs if s not in names]
            if dup or missing or extra:
                raise CovarianceInputError(
                    f"the given covariance's {axis} must hold the coefficient names once each;"
                    + (f" missing {missing}" if missing else "")
                    + (f" unknown {extra}" if extra else "")
                    + (f" repeated {dup}" if dup else "")
                    + f". Coefficients: {names}"
                )
        pos_r = [idx.index(s) for s in names]
        pos_c = [cols.index(s) for s in names]
        try:
            m = matrix.to_numpy(dtype=np.float64)[np.ix_(pos_r, pos_c)]
        except (TypeError, ValueError):
            raise CovarianceInputError("the given covariance must be numeric.") from None
    else:
        try:
            m = np.array(matrix, dtype=np.float64)
        except (TypeError, ValueError):
            raise CovarianceInputError("the given covariance must be numeric.") from None
        if m.shape != (p, p):
            raise CovarianceInputError(
                f"the given covariance has shape {m.shape}, but the fit has {p} coefficients"
                f" {names}: pass a ({p}, {p}) matrix in that order, or a DataFrame labelled by"
                " coefficient name."
            )
    kept = sol.kept
    v = m[np.ix_(kept, kept)]
    bad = np.argwhere(~np.isfinite(v))
    if bad.size:
        i, j = (int(t) for t in bad[0])
        raise CovarianceInputError(
            f"the given covariance holds {float(v[i, j])!r} at ({names[kept[i]]!r},"
            f" {names[kept[j]]!r}); only rows and columns of aliased coefficients may be"
            " non-finite."
        )
    big = float(np.abs(v).max()) if v.size else 0.0
    asym = float(np.abs(v - v.T).max()) if v.size else 0.0
    if asym > SYMMETRY_TOL * big:
        i, j = np.unravel_index(int(np.argmax(np.abs(v - v.T))), v.shape)
        raise CovarianceInputError(
            f"the given covariance is not symmetric: entry ({names[kept[i]]!r},"
            f" {names[kept[j]]!r}) is {v[i, j]:.6g} but ({names[kept[j]]!r}, {names[kept[i]]!r})"
            f" is {v[j, i]:.6g}. Pass (V + V.T) / 2 if the asymmetry is rounding."
        )
    if v.size:
        lam = np.linalg.eigvalsh((v + v.T) / 2)
        if lam[0] < -PSD_TOL * max(float(lam[-1]), 0.0) or lam[-1] < 0:
            raise CovarianceInputError(
                f"the given covariance is not positive semi-definite: its smallest eigenvalue is"
                f" {lam[0]:.6g} (largest {lam[-1]:.6g}). A covariance matrix cannot give a"
                " negative variance to any combination of coefficients."
            )
    return (v + v.T) / 2
