"""The covariance estimators a user writes: specifications without data, evaluated on a fit.

``"classical"`` (or None), ``"HC0"`` ... ``"HC4"``, :func:`clustered`, :func:`serial` and
:func:`given` name an estimator; :func:`as_estimator` turns any of them into an
:class:`Estimator`, whose :meth:`~Estimator.evaluate` gives the
:class:`~lincomb._covariance.estimate.CovarianceEstimate` of one fit (the row-based ones through
:mod:`lincomb._covariance.in_memory`).  See :mod:`lincomb._covariance.estimators` for the
formulas.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from lincomb._covariance import in_memory
from lincomb._covariance.bias_reduced import ADJUSTMENTS
from lincomb._covariance.estimate import CovarianceEstimate
from lincomb._covariance.examples import lines_doc, sites_doc
from lincomb._covariance.given import given_estimate
from lincomb.errors import CovarianceInputError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = [
    "HC_KINDS",
    "Estimator",
    "Classical",
    "Heteroskedastic",
    "Clustered",
    "Serial",
    "Given",
    "CommonShocks",
    "clustered",
    "common_shocks",
    "serial",
    "given",
    "as_estimator",
]

#: The heteroskedasticity-consistent estimators, by their names in the trade.
HC_KINDS: tuple[str, ...] = ("HC0", "HC1", "HC2", "HC3", "HC4")

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

    #: The fields that hold per-row data (cluster labels, time order, units); every other
    #: field is an option.  None for an estimator that reads no rows: its estimate costs
    #: nothing that grows with ``n`` and is not remembered (see :mod:`~lincomb._covariance.cache`).
    ROW_FIELDS: ClassVar[tuple[str, ...] | None] = None

    def row_sources(self) -> tuple[Any, ...]:
        """The per-row sources this estimator reads: the values of its :attr:`ROW_FIELDS`.

        Examples
        --------
        >>> import lincomb as lc
        >>> lc.serial(lag=2, order="week").row_sources()
        ('week', None)
        >>> lc.clustered(by=["site", "week"]).row_sources()  # one per clustering variable
        ('site', 'week')
        """
        return tuple(getattr(self, name) for name in self.ROW_FIELDS or ())

    @lines_doc
    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:  # pragma: no cover - abstract
        """Evaluate this estimator on ``fit`` (subclasses implement it).

        Examples
        --------
        %(lines_fit)s
        >>> as_estimator("HC1").evaluate(f)
        <CovarianceEstimate: HC1; reference df 295>
        """
        raise NotImplementedError


@lines_doc
@dataclass(frozen=True)
class Classical(Estimator):
    """``σ² (X̃ᵀX̃)⁻¹``: the covariance under constant error variance (the default).

    Written as the string ``"classical"`` (or ``None``) where an estimator is accepted.

    Examples
    --------
    %(lines_fit)s
    >>> Classical().evaluate(f)
    <CovarianceEstimate: classical; reference df 295>
    """

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        fit.check_variance()
        return CovarianceEstimate(
            method="classical",
            label="classical",
            df_error=float(fit.df_error),
            _sol=fit.solution,
            _sigma=fit.sigma,
        )


@lines_doc
@dataclass(frozen=True)
class Heteroskedastic(Estimator):
    """One of the heteroskedasticity-consistent sandwiches ``HC0`` to ``HC4``.

    Written as the string ``"HC0"`` ... ``"HC4"`` where an estimator is accepted.  The F
    reference uses ``n − rank`` denominator degrees of freedom.

    Examples
    --------
    %(lines_fit)s
    >>> f.wald(lc.term("line") == 0, covariance=Heteroskedastic("HC2")).covariance
    'HC2'
    """

    kind: str = "HC3"
    ROW_FIELDS = ()

    def __post_init__(self) -> None:
        if self.kind not in HC_KINDS:
            raise CovarianceInputError(
                f"unknown heteroskedasticity-consistent estimator {self.kind!r}; use one of"
                f" {list(HC_KINDS)}."
            )

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        fit.check_variance()
        return in_memory.heteroskedastic(fit, self.kind)


@sites_doc
@dataclass(frozen=True, eq=False)
class Clustered(Estimator):
    """Cluster-robust covariance; build it with :func:`clustered`.

    Examples
    --------
    %(sites_fit)s
    >>> lc.clustered(by="site").evaluate(f)
    <CovarianceEstimate: cluster by site (40 groups); reference df 39>
    """

    by: tuple[Any, ...]
    small_sample: bool = True
    df: float | None = None
    adjust: str = "none"
    two_way_factor: str = "per-term"
    ROW_FIELDS = ("by",)

    def row_sources(self) -> tuple[Any, ...]:
        return self.by  # one source per clustering variable

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        fit.check_variance()
        if self.adjust != "none":
            return in_memory.adjusted_clustered(fit, self.by[0], self.adjust, self.df)
        return in_memory.clustered(fit, self.by, self.small_sample, self.df, self.two_way_factor)


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
    units: Any = None
    ROW_FIELDS = ("order", "units")

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        fit.check_variance()
        return in_memory.serial(fit, self.lag, self.order, self.small_sample, self.df, self.units)


@sites_doc
@dataclass(frozen=True, eq=False)
class CommonShocks(Estimator):
    """Newey–West on scores summed per time point; build it with :func:`common_shocks`.

    Examples
    --------
    %(sites_fit)s
    >>> lc.common_shocks(time="week", lag=2).evaluate(f)
    <CovarianceEstimate: common shocks by week (26 time points; Bartlett, lag 2); reference df 25>
    """

    time: Any
    lag: int | None = None
    small_sample: bool = False
    df: float | None = None
    ROW_FIELDS = ("time",)

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        fit.check_variance()
        return in_memory.common_shocks(fit, self.time, self.lag, self.small_sample, self.df)


@lines_doc
@dataclass(frozen=True, eq=False)
class Given(Estimator):
    """A covariance matrix of the coefficients supplied by the user; build it with
    :func:`given`.

    Examples
    --------
    %(lines_fit)s
    >>> lc.given(f.covariance("HC3"), df=100).evaluate(f)
    <CovarianceEstimate: given matrix; reference df 100>
    """

    matrix: Any
    df: float | None = None

    def evaluate(self, fit: LinearFit) -> CovarianceEstimate:
        return given_estimate(fit, self.matrix, self.df)


# -- public constructors --------------------------------------------------------------------


@sites_doc
def clustered(
    by: str | ArrayLike | pd.Series | Sequence[Any],
    *,
    small_sample: bool = True,
    df: float | None = None,
    adjust: str = "none",
    two_way_factor: str = "per-term",
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
        clustering variables ``min(G₁, G₂) − 1``; with an ``adjust`` other than ``"none"``,
        small-sample df computed for each test (see below).
    adjust : {'none', 'bias-reduced', 'jackknife'}, default 'none'
        Adjust each cluster's residuals for the leverage of its rows before summing the scores
        (one-way clustering only; ``small_sample`` is then not used).  ``"bias-reduced"``
        multiplies them by ``(I − H_gg)^{-1/2}`` (the block of ``I − H`` for cluster ``g``),
        which makes the meat unbiased under independent, homoskedastic errors;
        ``"jackknife"`` by ``(I − H_gg)^{-1}`` with the factor ``(G − 1)/G``, which equals the
        delete-one-cluster jackknife.  Each row of a test then gets Satterthwaite-type df, and
        a system the Hotelling-T² approximation ``(η − q + 1)/(η q)·Q ~ F(q, η − q + 1)``
        with ``η`` estimated (see :mod:`lincomb._covariance.bias_reduced`).  These are the
        estimators to use with few clusters; they never draw the few-clusters warning.
        Multiplicity adjustments of such a test use each row's own p-value (step-wise
        methods) and the smallest row df of the family for joint critical values
        (conservative); :meth:`~lincomb.LinearFit.wald_batch` refuses them under the F
        reference (it has one df for all systems).  They keep one ``k × k`` block per cluster
        (``G·k²`` numbers): meant for few clusters, not for thousands.
    two_way_factor : {'per-term', 'smaller'}, default 'per-term'
        Small-sample factors of a two-way clustering: ``"per-term"`` gives each of the three
        terms its own ``G/(G−1)·(N−1)/(N−K)``; ``"smaller"`` applies the one factor of the
        clustering with fewer clusters to all three.

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
    %(sites_fit)s
    >>> res = f.wald(lc.coef("staffing") == 0, covariance=lc.clustered(by="site"))
    >>> res.covariance, res.df_error
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
    if adjust not in ADJUSTMENTS:
        raise CovarianceInputError(
            f"unknown residual adjustment {adjust!r}; use one of {list(ADJUSTMENTS)}."
        )
    if adjust != "none" and len(parts) != 1:
        raise CovarianceInputError(
            f"adjust={adjust!r} is for one clustering variable; got {len(parts)}. Use"
            " adjust='none' for two-way clustering."
        )
    if two_way_factor not in ("per-term", "smaller"):
        raise CovarianceInputError(
            f"two_way_factor must be 'per-term' or 'smaller', got {two_way_factor!r}."
        )
    return Clustered(
        by=parts,
        small_sample=bool(small_sample),
        df=df,
        adjust=adjust,
        two_way_factor=two_way_factor,
    )


def serial(
    lag: int | None = None,
    *,
    order: str | ArrayLike | pd.Series | None = None,
    small_sample: bool = False,
    df: float | None = None,
    units: str | ArrayLike | pd.Series | None = None,
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
    units : str, array_like or pandas.Series, optional
        Units of a panel (a column name, a Series or one label per row): lags are then taken
        only inside each unit (rows of a unit in ``order``, which is required), errors of
        different units are independent, and ``lag`` defaults to the rule of thumb for the
        longest unit.  Two rows of one unit at the same time raise
        :class:`~lincomb.errors.TiedTimesError`.  See also :func:`common_shocks`.

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
    lag = _check_lag(lag)
    _check_df(df)
    return Serial(lag=lag, order=order, small_sample=bool(small_sample), df=df, units=units)


@sites_doc
def common_shocks(
    time: str | ArrayLike | pd.Series,
    *,
    lag: int | None = None,
    small_sample: bool = False,
    df: float | None = None,
) -> CommonShocks:
    """Covariance robust to common shocks across units and serial dependence (panels).

    The scores of all rows at one time point are summed, and the Newey–West meat (Bartlett
    weights) of that series in time order is the meat (the construction of Driscoll and
    Kraay, 1998).

    Parameters
    ----------
    time : str, array_like or pandas.Series
        Time point of each row (a column name, a Series aligned with the data, or one value
        per row used); rows sharing a value are summed.  Values must sort.
    lag : int, optional
        Highest lag, in time points present in the data.  Default: the rule of thumb
        ``floor(4 (T/100)^(2/9))`` for ``T`` time points.
    small_sample : bool, default False
        Multiply the meat by ``n/(n−k)``.
    df : float, optional
        Denominator df of the F (and t) reference; default ``T − 1``.

    Returns
    -------
    CommonShocks

    Notes
    -----
    ``M = Σ_t S_t S_tᵀ + Σ_{ℓ≤L} (1 − ℓ/(L+1)) (Γ_ℓ + Γ_ℓᵀ)`` with ``S_t = Σ_{i: time t} g_i``
    and ``Γ_ℓ = Σ_t S_t S_{t−ℓ}ᵀ``.  It needs many time points; the units may be few.  Per
    time point sums merge over blocks of rows, so chunked and Dask second passes give it.

    Examples
    --------
    %(sites_fit)s
    >>> res = f.wald(lc.coef("staffing") == 0, covariance=lc.common_shocks(time="week"))
    >>> res.covariance, res.df_error
    ('common shocks by week (26 time points; Bartlett, lag 2)', 25.0)
    """
    lag = _check_lag(lag)
    _check_df(df)
    return CommonShocks(time=time, lag=lag, small_sample=bool(small_sample), df=df)


def _check_lag(lag: Any) -> int | None:
    if lag is None:
        return None
    if isinstance(lag, bool) or not isinstance(lag, (int, np.integer)):
        raise CovarianceInputError(
            f"lag must be a whole number of rows, got {lag!r}; e.g. serial(lag=4)."
        )
    if lag < 0:
        raise CovarianceInputError(f"lag must be 0 or more, got {lag}.")
    return int(lag)


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
    >>> bool(np.isclose(a.stat, f.wald(r).stat))
    True
    """
    _check_df(df)
    return Given(matrix=matrix, df=df)


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


# -- helpers ----------------------------------------------------------------------------


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
