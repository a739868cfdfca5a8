"""Simultaneous inference over the rows of a restriction system.

Two kinds of correction for testing many rows at once:

* **Adjusted p-values** (:func:`adjust_pvalues`, :meth:`WaldTest.adjust
  <lincomb.results.WaldTest.adjust>`): Bonferroni, Holm, Šidák, Hochberg (family-wise error),
  Benjamini–Hochberg and Benjamini–Yekutieli (false discovery rate); on a Wald test also Scheffé
  and the single-step max-|t| method.
* **Simultaneous confidence intervals** (:meth:`WaldTest.simultaneous
  <lincomb.results.WaldTest.simultaneous>`): ``estimate ± c · std_error`` with one critical
  value ``c`` for the whole family: Bonferroni, Šidák, Scheffé (valid for every combination in
  the span of ``C``; ``c² = q F_{q,ν}(level)`` with ``q`` the rank of ``C``), and max-|t|, the
  ``level`` quantile of ``max_i |T_i|`` under the joint multivariate t distribution of the row
  statistics (correlation from the rows' estimated covariance, ``ν`` the test's denominator
  degrees of freedom; normal when ``ν`` is infinite).

The max-|t| distribution
------------------------
``P(max_i |T_i| <= c)`` has no closed form.  Two integrators, both seeded so results are
reproducible, each repeated over independent randomizations (:data:`REPLICATES`) whose spread
gives the standard error reported with the result:

* *full-rank families* go to :func:`scipy.stats.multivariate_t` (or
  :func:`scipy.stats.multivariate_normal` when ``ν`` is infinite), randomized lattice rules;
* *families with redundant rows* (all pairwise differences: ``k(k-1)/2`` rows of rank ``k-1``)
  have a singular correlation matrix, on which that routine returns wrong probabilities.  Such
  a family is kept whole by default and integrated in its rank-``r`` form: with ``T = L Z / S``,
  ``L`` of rank ``r``, write ``Z = R·U`` (``U`` uniform on the unit sphere of ``ℝ^r``); then
  ``P(max|T| <= c) = E_U[F_{r,ν}(c² / (r · max_i (l_i·U)²))]`` exactly, and ``U`` is integrated
  by scrambled Sobol points (spherical-radial rule).  ``redundant="drop"`` instead removes the
  redundant rows from the family (they get no adjusted p-value or interval) and says so.

The sample size per replicate doubles until the standard error of the probability is at most
``tol`` (default :data:`DEFAULT_TOL`) or ``max_points`` is reached (then an
:class:`~lincomb.errors.IntegrationAccuracyWarning` is issued).  A critical value is found
by a root search on the rule held fixed (first with the cheap spherical-radial rule, then
refined with the final one); its standard error is the probability's over the density.  An
adjusted p-value ``p`` is integrated to standard error ``max(tol, P_REL_TOL·p)``, and one below
:data:`SMALL_TAIL` to relative standard error :data:`SMALL_TAIL_REL_TOL` by the
spherical-radial rule (scipy's routines bound the absolute error only, and lose every digit of
a 1e-9 tail).  Adjusted max-|t| p-values are kept within their exact bounds
``[p, min(1, m·p)]`` (``m`` rows), which removes integration noise and nothing else.
"""

from __future__ import annotations

import html
import unicodedata
import warnings
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, special, stats

from lincomb._results.format import _num, _p, _table_html, _table_text
from lincomb.errors import InputError, IntegrationAccuracyWarning

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
]

Array = NDArray[np.float64]

#: p-value adjustments that need only the p-values.
P_METHODS = (
    "bonferroni",
    "holm",
    "sidak",
    "hochberg",
    "benjamini-hochberg",
    "benjamini-yekutieli",
)
#: Adjustments available on a Wald test (they also use the rows' joint distribution).
WALD_P_METHODS = P_METHODS + ("scheffe", "max-t")
#: Methods with simultaneous intervals (``"none"``: marginal intervals, no adjustment).
INTERVAL_METHODS = ("bonferroni", "sidak", "scheffe", "max-t", "none")

#: Seed of the randomized integration rules (any integer; results depend on it only through
#: integration error, see the reported standard error).
DEFAULT_SEED: int = 20_240_917
#: Target standard error of an integrated probability.
DEFAULT_TOL: float = 1e-5
#: Largest number of integration points per replicate.
DEFAULT_MAX_POINTS: int = 2**18
#: Independent randomizations of the integration rule (their spread gives the error).
REPLICATES: int = 10
#: An adjusted max-|t| p-value ``p`` is integrated to standard error ``max(tol, P_REL_TOL·p)``:
#: three significant digits where the absolute target would be needlessly strict.
P_REL_TOL: float = 1e-3
#: Adjusted max-|t| p-values below this are integrated by the spherical-radial rule even for
#: full-rank families (scipy's absolute-error integrators lose all digits far below it), to a
#: relative standard error of :data:`SMALL_TAIL_REL_TOL`.
SMALL_TAIL: float = 1e-3
SMALL_TAIL_REL_TOL: float = 2e-3

_ALIASES = {
    "bh": "benjamini-hochberg",
    "by": "benjamini-yekutieli",
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
def adjust_pvalues(p: ArrayLike, method: str = "holm") -> Array:
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
        and ``"by"`` are accepted.

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
    """
    key = _canonical(method, P_METHODS, "p-value")
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
    return _adjust(pv, key)


def _adjust(p: Array, key: str) -> Array:
    m = p.size
    if m == 0:
        return p.copy()
    if key == "bonferroni":
        return np.minimum(1.0, m * p)
    if key == "sidak":
        with np.errstate(divide="ignore"):  # p = 1 gives log1p(-1) = -inf and 1 - 0 = 1
            return -np.expm1(m * np.log1p(-p))
    order = np.argsort(p, kind="stable")
    ps = p[order]
    rank = np.arange(1, m + 1)
    if key == "holm":
        adj = np.maximum.accumulate((m - rank + 1) * ps)
    elif key == "hochberg":
        adj = np.minimum.accumulate(((m - rank + 1) * ps)[::-1])[::-1]
    else:
        factor = float(np.sum(1.0 / rank)) if key == "benjamini-yekutieli" else 1.0
        adj = np.minimum.accumulate((m * factor * ps / rank)[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.minimum(1.0, adj)
    return out


# ---------------------------------------------------------------------------------------------
# the distribution of max |T_i|
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class IntegrationReport:
    """How a max-|t| probability or critical value was integrated.

    Attributes
    ----------
    routine : str
        ``"scipy.stats.multivariate_t"``, ``"scipy.stats.multivariate_normal"``,
        ``"spherical-radial Sobol"`` (rank-deficient families) or ``"exact"`` (rank one).
    seed : int
    points : int
        Integration points per replicate at the end.
    replicates : int
        Independent randomizations averaged.
    std_error : float
        Standard error of the integrated probability, from the spread of the replicates: at
        the critical value for intervals, the largest over the values asked for otherwise.
    tol : float
        Requested standard error (for adjusted p-values ``max(tol, P_REL_TOL · p)``).
    converged : bool
        Every requested accuracy was reached.
    rows : int
        Dimension of the family.
    rank : int
        Rank of its correlation matrix.
    critical_std_error : float or None
        Standard error of a critical value (``std_error`` over the density there).
    p_value_std_error : float or None
        Largest standard error among the adjusted p-values, when they were integrated.
    small_tails : str or None
        Set when small adjusted p-values were integrated by another rule (see
        :data:`SMALL_TAIL`).

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> sim = f.wald(lc.levels("line").pairwise()).simultaneous("max-t")
    >>> rep = sim.integration
    >>> rep.routine, rep.rows, rep.rank, rep.converged
    ('spherical-radial Sobol', 6, 3, True)
    """

    routine: str
    seed: int
    points: int
    replicates: int
    std_error: float
    tol: float
    converged: bool
    rows: int
    rank: int
    critical_std_error: float | None = None
    p_value_std_error: float | None = None
    small_tails: str | None = None

    def text(self) -> str:
        """One line describing the integration.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> sim = f.wald(lc.levels("line").pairwise()).simultaneous("max-t")
        >>> sim.integration.text()
        'spherical-radial Sobol: ... points, seed 20240917, probability s.e. ...'
        """
        if self.routine == "exact":
            return "exact (rank-one family)"
        parts = [f"{self.routine}: {self.replicates} x {self.points} points, seed {self.seed}"]
        if self.critical_std_error is not None:
            parts.append(
                f"probability s.e. {self.std_error:.2g} at the critical value (tol"
                f" {self.tol:.2g}), critical value s.e. {self.critical_std_error:.2g}"
            )
        elif self.p_value_std_error is None:
            parts.append(f"probability s.e. {self.std_error:.2g} (tol {self.tol:.2g})")
        if self.p_value_std_error is not None:
            parts.append(
                f"adjusted p s.e. <= {self.p_value_std_error:.2g} (target max({self.tol:.2g},"
                f" {P_REL_TOL:g}·p))"
            )
        if self.small_tails:
            parts.append(self.small_tails)
        return ", ".join(parts) + ("" if self.converged else "; NOT converged")


def _row_dist(df: float) -> Any:
    return stats.norm() if not np.isfinite(df) else stats.t(df)


def _check_corr(corr: ArrayLike) -> Array:
    r = np.array(corr, dtype=np.float64, copy=True)
    if r.ndim != 2 or r.shape[0] != r.shape[1] or r.shape[0] == 0:
        raise InputError(f"the correlation matrix must be square and non-empty, got {r.shape}.")
    if not np.all(np.isfinite(r)):
        raise InputError("the correlation matrix holds non-finite values.")
    if not np.allclose(r, r.T, atol=1e-10):
        raise InputError("the correlation matrix is not symmetric.")
    if not np.allclose(np.diag(r), 1.0, atol=1e-8):
        raise InputError(
            f"the correlation matrix must have a unit diagonal, got {np.diag(r).tolist()};"
            " scale a covariance by its standard deviations first."
        )
    return (r + r.T) / 2


def _check_df(df: float) -> float:
    d = float(df)
    if not d > 0:
        raise InputError(f"degrees of freedom must be positive (or inf), got {df!r}.")
    return d


class _Integrator:
    """``P(max|T_i| <= c)`` by a fixed rule: deterministic for a given number of points.

    The spherical-radial rule needs the mean of ``S(c; M) = P(F_{r,ν} > c² / (r M²))`` over
    the samples of ``M = max_i |l_i·U|``.  ``S`` depends on the sample only through the scalar
    ``M``, so the samples are binned once (:data:`_BINS` bins, each represented by its mean)
    and, for each ``c``, ``log S`` is evaluated at :data:`_GRID` Chebyshev-spaced values of
    ``M`` and interpolated by a cubic spline at the bin means (``S`` is smooth in ``M`` away
    from 0; the logarithm keeps small tail probabilities accurate in relative terms).
    """

    def __init__(self, corr: Array, df: float, rank: int | None, seed: int, engine: str) -> None:
        m = corr.shape[0]
        evals, evecs = np.linalg.eigh(corr)
        if rank is None:
            rank = int(np.count_nonzero(evals > 1e-9 * max(float(evals[-1]), 1e-300) * m))
        if not 1 <= rank <= m:
            raise InputError(f"rank must be between 1 and {m}, got {rank}.")
        if engine not in ("auto", "scipy", "spherical-radial"):
            raise InputError(
                f"engine must be 'auto', 'scipy' or 'spherical-radial', got {engine!r}."
            )
        if engine == "scipy" and rank < m:
            raise InputError(
                f"the correlation matrix has rank {rank} < {m}: scipy's integrator is wrong for"
                " singular matrices; use engine='spherical-radial' (or 'auto')."
            )
        self.m, self.rank, self.df, self.seed, self.corr = m, rank, df, int(seed), corr
        if rank == 1:
            self.kind = "exact"
        elif engine == "scipy" or (engine == "auto" and rank == m):
            self.kind = "scipy"
        else:
            self.kind = "spherical-radial"
        top = evecs[:, -rank:] * np.sqrt(np.clip(evals[-rank:], 0, None))
        self.loadings = top / np.linalg.norm(top, axis=1, keepdims=True)
        # plain integer seeds: a fresh generator per use (scipy's Sobol spawns from the seed
        # sequence of the generator it is given, which would change a shared one)
        self.streams = [
            int(v) for v in np.random.SeedSequence(self.seed).generate_state(REPLICATES)
        ]
        self._engines: list[Any] = []
        self._drawn = 0
        self._snapshots: dict[int, tuple[Array, Array]] = {}

    @property
    def routine(self) -> str:
        if self.kind == "scipy":
            return (
                "scipy.stats.multivariate_t"
                if np.isfinite(self.df)
                else "scipy.stats.multivariate_normal"
            )
        return "exact" if self.kind == "exact" else "spherical-radial Sobol"

    def start_points(self) -> int:
        return 1000 * self.m if self.kind == "scipy" else 2**11

    def _binned(self, points: int) -> tuple[Array, Array]:
        """Counts and means of ``M = max_i |l_i·U|`` in :data:`_BINS` bins of ``[0, 1]``.

        Shapes ``(K, B)``, one row per replicate, over the first ``points`` Sobol points
        (rounded up to a power of two).  The Sobol streams are extended, never restarted, so
        doubling the points reuses the earlier ones.
        """
        n_total = 1 << max(int(np.ceil(np.log2(points))), 0)
        if n_total in self._snapshots:
            return self._snapshots[n_total]
        if not self._engines:
            from scipy.stats import qmc

            self._engines = [
                qmc.Sobol(d=self.rank, scramble=True, rng=np.random.default_rng(stream))
                for stream in self.streams
            ]
            self._counts = np.zeros((REPLICATES, _BINS))
            self._sums = np.zeros((REPLICATES, _BINS))
        while self._drawn < n_total:
            n = min(_CHUNK, n_total - self._drawn)
            for k, eng in enumerate(self._engines):
                u = np.clip(eng.random(n), 1e-16, 1 - 1e-16)
                z = special.ndtri(u)
                z /= np.linalg.norm(z, axis=1, keepdims=True)
                mx = np.abs(z @ self.loadings.T).max(axis=1)
                idx = np.minimum((mx * _BINS).astype(np.intp), _BINS - 1)
                self._counts[k] += np.bincount(idx, minlength=_BINS)
                self._sums[k] += np.bincount(idx, weights=mx, minlength=_BINS)
            self._drawn += n
        counts = self._counts.copy()
        with np.errstate(invalid="ignore", divide="ignore"):
            means = np.where(counts > 0, self._sums / np.maximum(counts, 1), np.nan)
        self._snapshots[n_total] = (counts, means)
        return counts, means

    def _radial_tail(self, c: float, mx: Array) -> Array:
        """``P(F_{r,ν} > c² / (r M²))`` at the values ``mx`` of ``M``."""
        x = (c / mx) ** 2
        if np.isfinite(self.df):
            return special.fdtrc(self.rank, self.df, x / self.rank)
        return special.chdtrc(self.rank, x)

    def _spherical_tail(self, c: Array, points: int) -> Array:
        from scipy.interpolate import CubicSpline

        counts, means = self._binned(points)
        live = counts > 0
        mx = means[live]
        n = counts.sum(axis=1)
        lo, hi = float(mx.min()), float(mx.max())
        k = np.arange(_GRID)
        nodes = lo + (hi - lo) * (1 - np.cos(np.pi * k / (_GRID - 1))) / 2
        out = np.empty((REPLICATES, c.size))
        vals = np.zeros_like(counts)
        for j, cj in enumerate(c):
            if hi - lo <= 1e-12 * hi:
                vals[live] = self._radial_tail(cj, mx)
            else:
                at_nodes = self._radial_tail(cj, nodes)
                spline = CubicSpline(nodes, np.log(np.maximum(at_nodes, 1e-300)))
                vals[live] = np.exp(spline(mx))
            out[:, j] = (counts * vals).sum(axis=1) / n
        return out

    def tail(self, c: Array, points: int) -> tuple[Array, Array]:
        """Mean and standard error over replicates of ``P(max|T| > c)`` for each ``c``."""
        c = np.atleast_1d(np.asarray(c, dtype=np.float64))
        if self.kind == "exact":
            return 2.0 * _row_dist(self.df).sf(c), np.zeros_like(c)
        if self.kind == "spherical-radial":
            per = self._spherical_tail(c, points)
        else:
            per = np.empty((REPLICATES, c.size))
            for j, cj in enumerate(c):
                lim = np.full(self.m, cj)
                for k, stream in enumerate(self.streams):
                    rng = np.random.default_rng(stream)
                    if np.isfinite(self.df):
                        val = stats.multivariate_t.cdf(
                            lim,
                            shape=self.corr,
                            df=self.df,
                            lower_limit=-lim,
                            maxpts=points,
                            random_state=rng,
                        )
                    else:
                        val = stats.multivariate_normal.cdf(
                            lim,
                            cov=self.corr,
                            lower_limit=-lim,
                            maxpts=points,
                            abseps=1e-14,
                            releps=0.0,
                            rng=rng,
                        )
                    per[k, j] = 1.0 - float(val)
        mean = per.mean(axis=0)
        se = per.std(axis=0, ddof=1) / np.sqrt(per.shape[0])
        return mean, se

    def report(
        self, points: int, se: float, tol: float, crit_se: float | None = None
    ) -> IntegrationReport:
        exact = self.kind == "exact"
        if exact:
            pts = 0
        elif self.kind == "spherical-radial":
            pts = int(2 ** np.ceil(np.log2(points)))
        else:
            pts = int(points)
        return IntegrationReport(
            routine=self.routine,
            seed=self.seed,
            points=pts,
            replicates=0 if exact else REPLICATES,
            std_error=float(se),
            tol=float(tol),
            converged=bool(se <= tol),
            rows=self.m,
            rank=self.rank,
            critical_std_error=crit_se,
        )


#: Nodes of the spline in ``M`` used by the spherical-radial rule.
_GRID: int = 129
#: Bins of ``M`` in ``[0, 1]``: the rule averages the radial tail at each bin's mean, which
#: differs from the average over the bin by at most ``max|S''| · (1/_BINS)² / 8``.
_BINS: int = 2**14
#: Sobol points drawn per block.
_CHUNK: int = 2**15


def _check_tol(tol: float, max_points: int) -> None:
    if not (0 < float(tol) < 0.5):
        raise InputError(f"tol must be in (0, 0.5), got {tol!r}.")
    if int(max_points) < 1000:
        raise InputError(f"max_points must be at least 1000, got {max_points!r}.")


def _warn_unconverged(what: str, se: float, tol: float, max_points: int) -> None:
    warnings.warn(
        f"{what}: the integration reached max_points={max_points} with probability standard"
        f" error {se:.2g} > tol {tol:.2g}. Raise max_points or loosen tol; the reported"
        " standard error says how accurate the value is.",
        IntegrationAccuracyWarning,
        stacklevel=3,
    )


def max_abs_t_cdf(
    c: ArrayLike,
    corr: ArrayLike,
    df: float = np.inf,
    *,
    rank: int | None = None,
    tol: float = DEFAULT_TOL,
    seed: int = DEFAULT_SEED,
    max_points: int = DEFAULT_MAX_POINTS,
    engine: str = "auto",
) -> tuple[Array, IntegrationReport]:
    """``P(max_i |T_i| <= c)`` for a multivariate t vector with correlation ``corr``.

    Parameters
    ----------
    c : float or (k,) array_like
        Thresholds (non-negative).
    corr : (m, m) array_like
        Correlation matrix of ``T`` (unit diagonal; may be singular).
    df : float, default inf
        Degrees of freedom (``inf``: multivariate normal).
    rank : int, optional
        Rank of ``corr`` (default: eigenvalues above ``1e-9 · m ·`` the largest).
    tol : float, default :data:`DEFAULT_TOL`
        Target standard error of each probability.
    seed : int, default :data:`DEFAULT_SEED`
    max_points : int, default :data:`DEFAULT_MAX_POINTS`
        Cap on the integration points per replicate.
    engine : {'auto', 'scipy', 'spherical-radial'}
        ``'auto'``: scipy's integrator for a full-rank ``corr``, the spherical-radial rule
        otherwise (see the module notes).

    Returns
    -------
    prob : (k,) ndarray
    report : IntegrationReport

    Examples
    --------
    >>> import numpy as np
    >>> p, rep = max_abs_t_cdf(1.959964, np.eye(1))
    >>> round(float(p[0]), 6), rep.routine
    (0.95, 'exact')
    """
    r = _check_corr(corr)
    d = _check_df(df)
    _check_tol(tol, max_points)
    cs = np.atleast_1d(np.array(c, dtype=np.float64))
    if np.any(~np.isfinite(cs)) or np.any(cs < 0):
        raise InputError(f"thresholds must be finite and non-negative, got {cs.tolist()}.")
    integ = _Integrator(r, d, rank, seed, engine)
    tail, se, points = _tail_to_tol(integ, cs, tol, max_points)
    worst = float(se.max()) if se.size else 0.0
    if worst > tol:
        _warn_unconverged("max-|t| probability", worst, tol, max_points)
    return np.clip(1.0 - tail, 0.0, 1.0), integ.report(points, worst, tol)


def _tail_to_tol(
    integ: _Integrator, cs: Array, tol: float, max_points: int, rel: float = 0.0
) -> tuple[Array, Array, int]:
    """``P(max|T| > c)`` for each ``c``, doubling the points until each s.e. is at most
    ``max(tol, rel · value)``."""
    points = min(integ.start_points(), max_points)
    uniq, inv = np.unique(cs, return_inverse=True)
    while True:
        q, se = integ.tail(uniq, points)
        ok = bool(np.all(se <= np.maximum(tol, rel * q)))
        if integ.kind == "exact" or ok or points >= max_points:
            return np.clip(q[inv], 0.0, 1.0), se[inv], points
        points = min(2 * points, max_points)


def _bounds(level: float, m: int, df: float) -> tuple[float, float]:
    dist = _row_dist(df)
    lo = float(dist.isf((1 - level) / 2))
    hi = float(dist.isf((1 - level) / (2 * m)))
    return lo, hi


def _root(
    integ: _Integrator, alpha: float, points: int, a: float, b: float, xtol: float = 1e-10
) -> float:
    """Solve ``P(max|T| > c) = alpha`` in ``[a, b]``, widening the bracket if noise needs it."""

    def gap(c: float) -> float:
        return alpha - float(integ.tail(np.array([c]), points)[0][0])

    width = b - a
    for _ in range(60):
        if gap(a) <= 0:
            break
        a, width = max(a - width, 1e-8), 2 * width
    for _ in range(60):
        if gap(b) >= 0:
            break
        b, width = b + width, 2 * width
    return float(optimize.brentq(gap, a, b, xtol=xtol, rtol=1e-13))


def _density(integ: _Integrator, c: float, points: int) -> float:
    """Density of ``max|T|`` at ``c`` (central difference of the integrated tail)."""
    h = 1e-3 * c
    q, _ = integ.tail(np.array([c - h, c + h]), points)
    return float(q[0] - q[1]) / (2 * h)


def _refine(
    integ: _Integrator,
    alpha: float,
    points: int,
    c0: float,
    q0: float,
    density: float,
    xtol: float,
    trust: float = 0.0,
) -> float:
    """A Newton step from a close first guess, then secant steps (two or three integrations),
    Brent if they misbehave."""

    def tail(c: float) -> float:
        return float(integ.tail(np.array([c]), points)[0][0])

    c_prev, q_prev = c0, q0
    c = c0 + (q0 - alpha) / max(density, 1e-12)
    # a Newton step of at most `trust` is accepted unchecked: the density from the guide
    # rule is accurate to about 1e-3 relative and its error only scales the step
    if abs(c - c0) <= trust:
        return c
    for _ in range(8):
        if abs(c - c_prev) <= xtol:
            return c
        q = tail(c)
        slope = (q - q_prev) / (c - c_prev)
        if not slope < 0:
            break
        c_prev, q_prev, c = c, q, c + (alpha - q) / slope
    width = 8 * abs(c - c0) + 1e-6 * c0
    return _root(integ, alpha, points, c0 - width, c0 + width, xtol)


def _quantile(
    integ: _Integrator, level: float, tol: float, max_points: int
) -> tuple[float, IntegrationReport]:
    """Critical value: a first root by the cheap spherical-radial rule, the integration
    points grown there until the standard error meets ``tol``, then one refined root."""
    lo, hi = _bounds(level, integ.m, integ.df)
    alpha = 1.0 - level
    if integ.kind == "exact":
        return lo, integ.report(0, 0.0, tol, 0.0)
    if integ.kind == "scipy":
        guide = _Integrator(integ.corr, integ.df, integ.rank, integ.seed, "spherical-radial")
    else:
        guide = integ
    c0 = _root(guide, alpha, guide.start_points(), lo, hi)
    density = _density(guide, c0, guide.start_points())
    points = min(integ.start_points(), max_points)
    while True:
        q0, se0 = integ.tail(np.array([c0]), points)
        se = float(se0[0])
        if se <= tol or points >= max_points:
            break
        points = min(2 * points, max_points)
    crit_se = se / density if density > 0 else float("inf")
    xtol = max(1e-10 * c0, 0.01 * crit_se)
    crit = _refine(integ, alpha, points, c0, float(q0[0]), density, xtol, 10 * crit_se)
    if se > tol:
        _warn_unconverged("max-|t| critical value", se, tol, max_points)
    return crit, integ.report(points, se, tol, crit_se)


def max_abs_t_quantile(
    level: float,
    corr: ArrayLike,
    df: float = np.inf,
    *,
    rank: int | None = None,
    tol: float = DEFAULT_TOL,
    seed: int = DEFAULT_SEED,
    max_points: int = DEFAULT_MAX_POINTS,
    engine: str = "auto",
) -> tuple[float, IntegrationReport]:
    """Critical value ``c`` with ``P(max_i |T_i| <= c) = level``.

    Parameters are those of :func:`max_abs_t_cdf`.  ``c`` is found by Brent's method between
    the marginal and the Bonferroni critical values, with the integration rule held fixed;
    the report gives the probability's standard error at ``c`` and the implied standard error
    of ``c`` (divided by the density, from a central difference).

    Examples
    --------
    >>> import numpy as np
    >>> c, rep = max_abs_t_quantile(0.95, np.eye(3), df=np.inf)
    >>> round(c, 3), rep.routine                         # Šidák is exact for independent rows
    (2.388, 'scipy.stats.multivariate_normal')
    """
    if not (0 < level < 1):
        raise InputError(f"level must be in (0, 1), got {level!r}; e.g. 0.95 for 95%.")
    r = _check_corr(corr)
    d = _check_df(df)
    _check_tol(tol, max_points)
    return _quantile(_Integrator(r, d, rank, seed, engine), level, tol, max_points)


# ---------------------------------------------------------------------------------------------
# results on Wald tests
# ---------------------------------------------------------------------------------------------
#: Columns of :meth:`MultipleInference.to_frame`.
MULTIPLE_COLUMNS = (
    "contrast",
    "estimate",
    "target",
    "std_error",
    "t",
    "p_value",
    "p_adjusted",
    "lower",
    "upper",
    "level",
    "critical_value",
    "method",
)


@dataclass(frozen=True)
class MultipleInference:
    """Rows of a Wald test with multiplicity-adjusted p-values and, where defined, intervals.

    Made by :meth:`WaldTest.adjust <lincomb.results.WaldTest.adjust>` (p-values) and
    :meth:`WaldTest.simultaneous <lincomb.results.WaldTest.simultaneous>` (intervals and the
    matching single-step p-values).

    Attributes
    ----------
    labels : tuple of str
        Rows in the family.
    estimate, target, std_error, t, p_value : (m,) ndarray
        As on the Wald test (``p_value`` raw, two-sided).
    p_adjusted : (m,) ndarray
    method : str
    df : float
        Degrees of freedom of the row statistics (``inf``: normal).
    level : float or None
        Simultaneous coverage of the intervals (None for p-value adjustments).
    critical_value : float or None
        The ``c`` of ``estimate ± c · std_error``.
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

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> bonf = f.wald(lc.term("line") == 0).simultaneous("bonferroni", 0.95)
    >>> bonf.method, bonf.family_size, bool(bonf.critical_value > 1.96)
    ('bonferroni', 3, True)
    >>> bool((bonf.p_adjusted >= bonf.p_value).all())
    True
    """

    labels: tuple[str, ...]
    estimate: Array
    target: Array
    std_error: Array
    t: Array
    p_value: Array
    p_adjusted: Array
    method: str
    df: float
    level: float | None
    critical_value: float | None
    lower: Array
    upper: Array
    rank: int
    redundant: tuple[str, ...] = ()
    dropped: tuple[str, ...] = ()
    integration: IntegrationReport | None = None

    @property
    def family_size(self) -> int:
        """Number of rows in the family."""
        return len(self.labels)

    def to_frame(self) -> pd.DataFrame:
        """One row per contrast in the family.

        Columns: ``contrast`` (the row's label), ``estimate``, ``target``, ``std_error``,
        ``t``, ``p_value`` (raw, two-sided), ``p_adjusted``, ``lower``/``upper`` (simultaneous
        interval; NaN for a p-value adjustment), ``level`` (NaN likewise), ``critical_value``
        (NaN likewise), ``method``.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
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
                "std_error": self.std_error,
                "t": self.t,
                "p_value": self.p_value,
                "p_adjusted": self.p_adjusted,
                "lower": self.lower,
                "upper": self.upper,
                "level": nan if self.level is None else self.level,
                "critical_value": nan if self.critical_value is None else self.critical_value,
                "method": self.method,
            }
        )

    def _head(self) -> list[str]:
        m = self.family_size
        if self.level is None:
            first = f"p-values adjusted by {self.method} over {m} row(s) of rank {self.rank}"
        else:
            first = (
                f"Simultaneous {100 * self.level:g}% intervals by {self.method} over {m} row(s)"
                f" of rank {self.rank}; critical value {self.critical_value:.6g}"
            )
        dist = "normal" if not np.isfinite(self.df) else f"t({self.df:g})"
        lines = [f"{first} [{dist}]"]
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
        if self.integration is not None:
            lines.append("integration: " + self.integration.text())
        return lines

    def _rows(self) -> tuple[list[str], list[list[str]]]:
        header = ["contrast", "estimate", "std.error", "t", "p", "p adj."]
        if self.level is not None:
            header.append(f"{100 * self.level:g}% simultaneous")
        rows = []
        for i, lab in enumerate(self.labels):
            r = [
                lab,
                _num(self.estimate[i]),
                _num(self.std_error[i]),
                _num(self.t[i]),
                _p(self.p_value[i]),
                _p(self.p_adjusted[i]),
            ]
            if self.level is not None:
                r.append(f"[{_num(self.lower[i])}, {_num(self.upper[i])}]")
            rows.append(r)
        return header, rows

    def __repr__(self) -> str:
        header, rows = self._rows()
        return "\n".join(self._head()) + "\n" + _table_text(header, rows)

    def _repr_html_(self) -> str:
        header, rows = self._rows()
        head = "<br>".join(html.escape(s) for s in self._head())
        return (
            f"<div class='lincomb-multiple'><p><b>{head}</b></p>{_table_html(header, rows)}</div>"
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
        "rank": int(wald.df_num),
        "df": float(wald.df_den),
    }
    se = np.asarray(wald.std_error, dtype=np.float64)[keep]
    if np.any(~np.isfinite(se)) or np.any(se <= 0):
        i = keep[int(np.flatnonzero(~(se > 0))[0])]
        raise InputError(
            f"row {i} ({wald.labels[i]}) has standard error {wald.std_error[i]!r}; adjusted"
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
    return corr


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
    se = np.asarray(wald.std_error, dtype=np.float64)[k]
    if crit is None:
        lower = upper = np.full(k.size, np.nan)
    else:
        lower, upper = est - crit * se, est + crit * se
    t = np.asarray(wald.t, dtype=np.float64)[k]
    return MultipleInference(
        labels=fam["labels"],
        estimate=est.copy(),
        target=np.asarray(wald.target, dtype=np.float64)[k].copy(),
        std_error=se.copy(),
        t=t.copy(),
        p_value=2 * _row_dist(fam["df"]).sf(np.abs(t)),
        p_adjusted=p_adj,
        method=method,
        df=fam["df"],
        level=level,
        critical_value=crit,
        lower=lower,
        upper=upper,
        rank=fam["rank"],
        redundant=fam["redundant"],
        dropped=fam["dropped"],
        integration=integration,
    )


def _scheffe_p(t: Array, q: int, df: float) -> Array:
    x = t**2
    if np.isfinite(df):
        return stats.f.sf(x / q, q, df)
    return stats.chi2.sf(x, q)


def adjust_wald(
    wald: WaldTest,
    method: str = "holm",
    *,
    redundant: str = "keep",
    tol: float = DEFAULT_TOL,
    seed: int = DEFAULT_SEED,
    max_points: int = DEFAULT_MAX_POINTS,
) -> MultipleInference:
    """Adjusted p-values for the rows of a Wald test (see :meth:`WaldTest.adjust
    <lincomb.results.WaldTest.adjust>`)."""
    key = _canonical(method, WALD_P_METHODS, "p-value")
    fam = _family(wald, redundant)
    k = fam["keep"]
    t = np.asarray(wald.t, dtype=np.float64)[k]
    p = 2 * _row_dist(fam["df"]).sf(np.abs(t))
    integration = None
    if key in P_METHODS:
        p_adj = _adjust(p, key)
    elif key == "scheffe":
        p_adj = _scheffe_p(t, fam["rank"], fam["df"])
    else:
        _check_tol(tol, max_points)
        integ = _Integrator(_corr_of(wald, k), fam["df"], fam["rank"], seed, "auto")
        tail, se, points, note, p_ok = _adjusted_tails(integ, np.abs(t), tol, max_points)
        worst = float(se.max())
        p_adj = np.clip(tail, p, np.minimum(1.0, k.size * p))
        integration = replace(
            integ.report(points, worst, tol),
            p_value_std_error=worst,
            converged=p_ok,
            small_tails=note,
        )
    return _assemble(wald, fam, p_adj, key, None, None, integration)


def _adjusted_tails(
    integ: _Integrator, cs: Array, tol: float, max_points: int
) -> tuple[Array, Array, int, str | None, bool]:
    """Tail probabilities for adjusted p-values; small ones by the spherical-radial rule.

    scipy's integrators control the absolute error, so a tail far below their noise (say
    1e-8) comes out with no correct digit; the spherical-radial rule averages analytic tail
    values and keeps its relative accuracy there.  Tails below :data:`SMALL_TAIL` are
    integrated to relative standard error :data:`SMALL_TAIL_REL_TOL` (the absolute ``tol`` is
    far above them), whatever the family's rank.
    """
    tail, se, points = _tail_to_tol(integ, cs, tol, max_points, P_REL_TOL)
    note = None
    small = tail < SMALL_TAIL
    target = np.maximum(tol, P_REL_TOL * tail)
    if integ.kind != "exact" and small.any():
        if integ.kind == "scipy":
            sr = _Integrator(integ.corr, integ.df, integ.rank, integ.seed, "spherical-radial")
            note = f"tails below {SMALL_TAIL:g} by spherical-radial Sobol"
        else:
            sr = integ
        tail_s, se_s, _pts = _tail_to_tol(sr, cs[small], 0.0, max_points, SMALL_TAIL_REL_TOL)
        tail, se = tail.copy(), se.copy()
        tail[small], se[small] = tail_s, se_s
        target[small] = SMALL_TAIL_REL_TOL * tail_s
    ok = bool(np.all(se <= target))
    if not ok:
        _warn_unconverged("max-|t| adjusted p-values", float(se.max()), tol, max_points)
    return tail, se, points, note, ok


def simultaneous_wald(
    wald: WaldTest,
    method: str = "max-t",
    level: float = 0.95,
    *,
    redundant: str = "keep",
    tol: float = DEFAULT_TOL,
    seed: int = DEFAULT_SEED,
    max_points: int = DEFAULT_MAX_POINTS,
) -> MultipleInference:
    """Simultaneous intervals for the rows of a Wald test (see :meth:`WaldTest.simultaneous
    <lincomb.results.WaldTest.simultaneous>`)."""
    key = _canonical(method, INTERVAL_METHODS, "interval")
    if not (0 < level < 1):
        raise InputError(f"level must be in (0, 1), got {level!r}; e.g. 0.95 for 95%.")
    fam = _family(wald, redundant)
    k = fam["keep"]
    m = k.size
    df = fam["df"]
    dist = _row_dist(df)
    t = np.asarray(wald.t, dtype=np.float64)[k]
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
    else:
        _check_tol(tol, max_points)
        integ = _Integrator(_corr_of(wald, k), df, fam["rank"], seed, "auto")
        crit, integration = _quantile(integ, level, tol, max_points)
        tail, se, _pts, note, p_ok = _adjusted_tails(integ, np.abs(t), tol, max_points)
        p_adj = np.clip(tail, p, np.minimum(1.0, m * p))
        integration = replace(
            integration,
            p_value_std_error=float(se.max()),
            converged=integration.converged and p_ok,
            small_tails=note,
        )
    return _assemble(wald, fam, p_adj, key, float(level), crit, integration)
