"""The distribution of ``max_i |T_i|`` for a multivariate t (or normal) vector: arrays only.

``P(max_i |T_i| <= c)`` for ``T = L Z / S`` (``Z`` standard normal, ``ν S² ~ χ²_ν``, the rows'
correlation matrix ``R = L Lᵀ``, possibly singular), its quantiles (critical values of
simultaneous intervals) and its upper tails (single-step adjusted p-values).  This module knows
nothing of fits, names or frames; :mod:`lincomb._results.multiplicity` puts it on Wald tests.

The max-|t| distribution
------------------------
``P(max_i |T_i| <= c)`` has no closed form in general.  The routes, chosen from the numbers of
the correlation matrix alone:

* *rank one*: exact (the t distribution);
* *all pairwise differences of exchangeable means* (a balanced one-way layout): the
  studentized range, and *equicorrelated rows*: deterministic quadratures with an error
  estimate (see :func:`detect_structure`);
* *every other family* (``engine="auto"`` or ``"sequential"``): the general rule of
  :mod:`lincomb._core.maxt_sequential`, sequential conditioning on the ``r`` coordinates of a
  rank-``r`` family (not its ``m`` rows), with union sampling for far tails, over independent
  random shifts of a Sobol sequence.  When the rows are all pairwise differences of
  independent means with unequal variances (a one-way layout with unequal group sizes), a
  neighbouring family with an exact one-dimensional probability
  (:mod:`lincomb._core.maxt_pairs`) serves as a control variate, which cuts the error by
  one to two orders of magnitude at the same number of points;
* ``engine="scipy"`` (:func:`scipy.stats.multivariate_t`, full rank only) and
  ``engine="spherical-radial"`` (directions by scrambled Sobol points, radius exact) are the
  earlier rules, kept for comparison.

Accuracy.  The randomized rules double their points until the standard error of the
probability is at most ``tol`` (default :data:`DEFAULT_TOL`) or ``max_points`` is reached (then
an :class:`~lincomb.errors.IntegrationAccuracyWarning` is issued).  The general rule decides the
points on one set of :data:`REPLICATES` scrambles and measures the error on a second,
independent set at that number of points: deciding and measuring on the same scrambles stops
on the runs whose error estimate came out small, which under-reports the error.  The reported
error is therefore honest, and may come out a little above or below ``tol``.  A critical value
is the mean of per-scramble roots (each the root of that scramble's estimate near a first
guess), so its standard error comes straight from their spread; ``critical_error`` is the
:data:`COVERAGE` (99%) bound from Student's t with ``REPLICATES − 1`` df, which the tests check
over 200 seeds against exact values.  An adjusted p-value ``p`` is integrated to standard
error ``max(tol, P_REL_TOL·p)``, and one below :data:`SMALL_TAIL` to relative standard error
:data:`SMALL_TAIL_REL_TOL` (union sampling keeps its relative accuracy there; the earlier rules
bound the absolute error only).  Adjusted max-|t| p-values are kept within their exact bounds
``[p, min(1, m·p)]`` (``m`` rows), which removes integration noise and nothing else.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import optimize, special, stats

from lincomb._core.checks import check_level, check_tolerance
from lincomb._core.maxt_pairs import PairsControl, independent_pairs
from lincomb._core.maxt_quadrature import (
    _QUAD_REL,
    _QUAD_TOL,
    _RANGE_MAX_ROWS,
    STRUCTURE_TOL,
    _quad_to_tol,
    _unique_rows,
    detect_structure,
    studentized_range_critical,
    studentized_range_tail,
)
from lincomb._core.maxt_sequential import SequentialRule, widen_bracket
from lincomb._settings import blas_limit, worker_threads
from lincomb._typing import Array
from lincomb.errors import InputError, IntegrationAccuracyWarning, InternalError

__all__ = [
    "COVERAGE",
    "ENGINES",
    "DEFAULT_SEED",
    "DEFAULT_TOL",
    "DEFAULT_MAX_POINTS",
    "REPLICATES",
    "IntegrationReport",
    "IntegrationOptions",
    "max_abs_t_cdf",
    "max_abs_t_quantile",
    "adjusted_tails",
    "detect_structure",
    "studentized_range_critical",
    "studentized_range_tail",
]


#: Seed of the randomized integration rules (any integer; results depend on it only through
#: integration error, see the reported standard error).
DEFAULT_SEED: int = 20_240_917
#: Target standard error of an integrated probability (at the critical value, for intervals).
DEFAULT_TOL: float = 1e-5
#: Largest number of integration points per replicate.
DEFAULT_MAX_POINTS: int = 2**18
#: Independent randomizations of the integration rule (their spread gives the error).
REPLICATES: int = 10
#: Confidence of the error bounds reported beside standard errors (``critical_error``,
#: ``p_value_error``): Student's t quantile with ``REPLICATES − 1`` df times the s.e.
COVERAGE: float = 0.99
#: Integration engines: ``"auto"`` uses a detected structure (deterministic quadratures) and
#: otherwise the sequential rule (with the pairs control family where it applies);
#: ``"sequential"`` the sequential rule alone; ``"scipy"`` and ``"spherical-radial"`` the
#: earlier rules (kept for comparison).
ENGINES: tuple[str, ...] = ("auto", "sequential", "scipy", "spherical-radial")
SEQUENTIAL_ROUTINE: str = "sequential conditioning, scrambled Sobol"
PAIRS_CONTROL_NOTE: str = " (pairs control family)"
#: An adjusted max-|t| p-value ``p`` is integrated to standard error ``max(tol, P_REL_TOL·p)``:
#: three significant digits where the absolute target would be needlessly strict.
P_REL_TOL: float = 1e-3
#: Adjusted max-|t| p-values below this are integrated by the spherical-radial rule even for
#: full-rank families (scipy's absolute-error integrators lose all digits far below it), to a
#: relative standard error of :data:`SMALL_TAIL_REL_TOL`.
SMALL_TAIL: float = 1e-3
SMALL_TAIL_REL_TOL: float = 2e-3
#: The pairs control family is used when every row's limit moves by at most this fraction
#: (group sizes within a factor of about 20 of each other); beyond, it helps little.
_CONTROL_MAX_SHIFT: float = 0.3


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
        Every requested accuracy was reached.  For the sequential rule: on the scrambles that
        decide the number of points; ``std_error`` is measured on independent scrambles at
        that number (so that it is honest) and may come out a little above ``tol``.
    rows : int
        Dimension of the family.
    rank : int
        Rank of its correlation matrix.
    critical_std_error : float or None
        Standard error of a critical value (``std_error`` over the density there; for the
        sequential rule, from the spread of the scrambles' own roots).
    p_value_std_error : float or None
        Largest standard error among the adjusted p-values, when they were integrated.
    small_tails : str or None
        Set when small adjusted p-values were integrated by another rule (see
        :data:`SMALL_TAIL`).
    critical_error : float or None
        Error bound of the critical value at confidence ``coverage``: the t quantile with
        ``replicates − 1`` df times ``critical_std_error`` (a deterministic quadrature's error
        estimate as it is).  Checked over many seeds in the tests.
    p_value_error : float or None
        The same bound for the largest ``p_value_std_error``.
    coverage : float
        Confidence of those bounds (:data:`COVERAGE`).

    Examples
    --------
    >>> import numpy as np
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> sim = f.wald(lc.levels("line").pairwise()).simultaneous("max-t")
    >>> rep = sim.integration
    >>> rep.routine, rep.rows, rep.rank, rep.converged      # balanced: detected structure
    ('studentized range quadrature', 6, 3, True)
    >>> corr = np.array([[1.0, 0.3, 0.1], [0.3, 1.0, 0.2], [0.1, 0.2, 1.0]])
    >>> c, rep = max_abs_t_quantile(0.95, corr, df=20.0)
    >>> rep.routine, rep.replicates, rep.converged
    ('sequential conditioning, scrambled Sobol', 10, True)
    >>> bool(rep.critical_error > rep.critical_std_error)     # 99% bound from 9 df of t
    True
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
    critical_error: float | None = None
    p_value_error: float | None = None
    coverage: float = COVERAGE

    def text(self) -> str:
        """One line describing the integration.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> sim = f.wald(lc.levels("line").pairwise()).simultaneous("max-t")
        >>> sim.integration.text()
        'studentized range quadrature: ... nodes, probability error <= ... at the critical value...'
        """
        if self.routine == "exact":
            return "exact (rank-one family)"
        if self.replicates == 0:  # a deterministic quadrature: an error estimate, no seed
            parts = [f"{self.routine}: {self.points} nodes"]
            if self.critical_std_error is not None:
                parts.append(
                    f"probability error <= {self.std_error:.2g} at the critical value,"
                    f" critical value error <= {self.critical_std_error:.2g}"
                )
            if self.p_value_std_error is not None:
                parts.append(f"adjusted p error <= {self.p_value_std_error:.2g}")
            return ", ".join(parts) + ("" if self.converged else "; NOT converged")
        scrambles = (
            f"{self.replicates}"
            if not self.routine.startswith(SEQUENTIAL_ROUTINE)
            else f"2 x {self.replicates}"
        )
        parts = [f"{self.routine}: {scrambles} x {self.points} points, seed {self.seed}"]
        if self.critical_std_error is not None:
            bound = (
                ""
                if self.critical_error is None
                else f" (error <= {self.critical_error:.2g} at {100 * self.coverage:g}%)"
            )
            parts.append(
                f"probability s.e. {self.std_error:.2g} at the critical value (tol"
                f" {self.tol:.2g}), critical value s.e. {self.critical_std_error:.2g}{bound}"
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


@dataclass(frozen=True)
class IntegrationOptions:
    """How the max-|t| distribution is integrated: built and checked once by the caller and
    passed through to every integration of a family.

    Attributes
    ----------
    tol : float, default :data:`DEFAULT_TOL`
        Target standard error of each probability (for the sequential rule: the points are
        chosen on one set of scrambles to reach it, and the error reported is measured on an
        independent set, see the module notes).
    seed : int, default :data:`DEFAULT_SEED`
    max_points : int, default :data:`DEFAULT_MAX_POINTS`
        Cap on the integration points per replicate (at least 1000).
    engine : {'auto', 'sequential', 'scipy', 'spherical-radial'}
        ``'auto'``: a deterministic quadrature where the correlations have a structure for
        it, else the sequential rule (with the pairs control family where it applies);
        ``'sequential'``: the sequential rule alone; ``'scipy'`` (full rank only) and
        ``'spherical-radial'``: the earlier rules (see the module notes).

    Examples
    --------
    >>> IntegrationOptions(tol=1e-4, engine="sequential").max_points == DEFAULT_MAX_POINTS
    True
    """

    tol: float = DEFAULT_TOL
    seed: int = DEFAULT_SEED
    max_points: int = DEFAULT_MAX_POINTS
    engine: str = "auto"

    def __post_init__(self) -> None:
        check_tolerance("tol", self.tol, 0.5)
        if int(self.max_points) < 1000:
            raise InputError(f"max_points must be at least 1000, got {self.max_points!r}.")
        if self.engine not in ENGINES:
            raise InputError(f"engine must be one of {list(ENGINES)}, got {self.engine!r}.")


class _Integrator:
    """``P(max|T_i| <= c)`` by a fixed rule: deterministic for a given number of points.

    The spherical-radial rule needs the mean of ``S(c; M) = P(F_{r,ν} > c² / (r M²))`` over
    the samples of ``M = max_i |l_i·U|``.  ``S`` depends on the sample only through the scalar
    ``M``, so the samples are binned once (:data:`_BINS` bins, each represented by its mean)
    and, for each ``c``, ``log S`` is evaluated at :data:`_GRID` Chebyshev-spaced values of
    ``M`` and interpolated by a cubic spline at the bin means (``S`` is smooth in ``M`` away
    from 0; the logarithm keeps small tail probabilities accurate in relative terms).
    """

    def __init__(
        self, corr: Array, df: float, rank: int | None, options: IntegrationOptions
    ) -> None:
        engine = options.engine
        m = corr.shape[0]
        evals, evecs = np.linalg.eigh(corr)
        if rank is None:
            rank = int(np.count_nonzero(evals > 1e-9 * max(float(evals[-1]), 1e-300) * m))
        if not 1 <= rank <= m:
            raise InputError(f"rank must be between 1 and {m}, got {rank}.")
        if engine == "scipy" and rank < m:
            raise InputError(
                f"the correlation matrix has rank {rank} < {m}: scipy's integrator is wrong for"
                " singular matrices; use engine='spherical-radial' (or 'auto')."
            )
        self.m, self.rank, self.df, self.corr = m, rank, df, corr
        self.options, self.seed = options, int(options.seed)
        self.param = float("nan")
        structure = "general"
        if rank > 1 and engine == "auto":
            structure, self.param = detect_structure(corr, rank)
        if rank == 1:
            self.kind = "exact"
        elif structure != "general":
            self.kind = structure
            self.m_unique = int(_unique_rows(corr).size)
        elif engine in ("scipy", "spherical-radial"):
            self.kind = engine
        else:
            self.kind = "sequential"
        top = evecs[:, -rank:] * np.sqrt(np.clip(evals[-rank:], 0, None))
        self.loadings = top / np.linalg.norm(top, axis=1, keepdims=True)
        self.control: PairsControl | None = None
        if self.kind == "sequential":
            if engine == "auto":
                self.control = _pairs_control(corr, rank)
            self.rule = SequentialRule(self.loadings, df, self.seed, REPLICATES, self.control)
        # plain integer seeds: a fresh generator per use (scipy's Sobol spawns from the seed
        # sequence of the generator it is given, which would change a shared one)
        self.streams = [
            int(v) for v in np.random.SeedSequence(self.seed).generate_state(REPLICATES)
        ]
        self._engines: list[Any] = []
        self._drawn = 0
        self._snapshots: dict[int, tuple[Array, Array]] = {}

    def spherical_radial(self) -> _Integrator:
        """The same family under the spherical-radial rule (the ``'scipy'`` engine's guide
        for first roots and small tails)."""
        options = replace(self.options, engine="spherical-radial")
        return _Integrator(self.corr, self.df, self.rank, options)

    @property
    def routine(self) -> str:
        if self.kind == "scipy":
            return (
                "scipy.stats.multivariate_t"
                if np.isfinite(self.df)
                else "scipy.stats.multivariate_normal"
            )
        if self.kind == "range":
            return "studentized range quadrature"
        if self.kind == "equicorrelated":
            return "equicorrelated quadrature"
        if self.kind == "sequential":
            return SEQUENTIAL_ROUTINE + (PAIRS_CONTROL_NOTE if self.control is not None else "")
        return "exact" if self.kind == "exact" else "spherical-radial Sobol"

    @property
    def deterministic(self) -> bool:
        """The rule is a deterministic quadrature (exact, studentized range, equicorrelated):
        no seed, no replicates, an error estimate instead of a standard error."""
        return self.kind in ("exact", "range", "equicorrelated")

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
        if self.kind in ("range", "equicorrelated"):
            with blas_limit(worker_threads()):  # many small products: one BLAS thread
                q, err, self._nodes = _quad_to_tol(
                    self.kind, self.param, self.m_unique, self.df, c, _QUAD_TOL, _QUAD_REL
                )
            return q, err
        if self.kind == "sequential":
            raise InternalError("the sequential rule chooses its own points: use tails()")
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
                            df=self.df,  # type: ignore[arg-type]  # stubs say int
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
        self,
        points: int,
        se: float,
        tol: float,
        crit_se: float | None = None,
        converged: bool | None = None,
    ) -> IntegrationReport:
        exact = self.deterministic
        if self.kind == "exact":
            pts = 0
        elif exact:
            pts = int(getattr(self, "_nodes", 0))
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
            converged=bool(se <= tol) if converged is None else bool(converged),
            rows=self.m,
            rank=self.rank,
            critical_std_error=crit_se,
            critical_error=None if crit_se is None else self.half_width(crit_se),
        )

    def half_width(self, se: float) -> float:
        """The error bound reported beside a standard error: the :data:`COVERAGE` quantile of
        Student's t with ``REPLICATES − 1`` df times it (the error is the mean of independent
        scrambles); a deterministic quadrature's error estimate is used as it is."""
        if self.deterministic:
            return float(se)
        return float(stats.t.ppf(0.5 + COVERAGE / 2, REPLICATES - 1) * se)


#: Nodes of the spline in ``M`` used by the spherical-radial rule.
_GRID: int = 129
#: Bins of ``M`` in ``[0, 1]``: the rule averages the radial tail at each bin's mean, which
#: differs from the average over the bin by at most ``max|S''| · (1/_BINS)² / 8``.
_BINS: int = 2**14
#: Sobol points drawn per block.
_CHUNK: int = 2**15


def _warn_unconverged(what: str, se: float, tol: float, max_points: int) -> None:
    warnings.warn(
        f"{what}: the integration reached max_points={max_points} with probability standard"
        f" error {se:.2g} > tol {tol:.2g}. Raise max_points or loosen tol; the reported"
        " standard error says how accurate the value is.",
        IntegrationAccuracyWarning,
        stacklevel=3,
    )


def _checked_integrator(
    corr: ArrayLike, df: float, rank: int | None, options: IntegrationOptions | None
) -> _Integrator:
    """The integrator of a family given by the caller (correlations and df checked; default
    options when none are given)."""
    opts = IntegrationOptions() if options is None else options
    return _Integrator(_check_corr(corr), _check_df(df), rank, opts)


def max_abs_t_cdf(
    c: ArrayLike,
    corr: ArrayLike,
    df: float = np.inf,
    *,
    rank: int | None = None,
    options: IntegrationOptions | None = None,
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
    options : IntegrationOptions, optional
        Target standard error, seed, point cap and engine (default: their defaults).

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
    integ = _checked_integrator(corr, df, rank, options)
    tol, max_points = integ.options.tol, integ.options.max_points
    cs = np.atleast_1d(np.array(c, dtype=np.float64))
    if np.any(~np.isfinite(cs)) or np.any(cs < 0):
        raise InputError(f"thresholds must be finite and non-negative, got {cs.tolist()}.")
    if integ.kind == "sequential":
        uniq, inv = np.unique(cs, return_inverse=True)
        tail, se, points, ok = integ.rule.tails(uniq, tol, max_points)
        tail, se = tail[inv], se[inv]
    else:
        tail, se, points = _tail_to_tol(integ, cs, tol, max_points)
        ok = bool(np.all(se <= tol))
    worst = float(se.max()) if se.size else 0.0
    if not ok:
        _warn_unconverged("max-|t| probability", worst, tol, max_points)
    return np.clip(1.0 - tail, 0.0, 1.0), integ.report(points, worst, tol, converged=ok)


def _tail_to_tol(
    integ: _Integrator, cs: Array, tol: float, max_points: int, rel: float = 0.0
) -> tuple[Array, Array, int]:
    """``P(max|T| > c)`` for each ``c``, doubling the points until each s.e. is at most
    ``max(tol, rel · value)``."""
    uniq, inv = np.unique(cs, return_inverse=True)
    points = min(integ.start_points(), max_points)
    while True:
        q, se = integ.tail(uniq, points)
        ok = bool(np.all(se <= np.maximum(tol, rel * q)))
        if integ.deterministic or ok or points >= max_points:
            return np.clip(q[inv], 0.0, 1.0), se[inv], points
        points = min(2 * points, max_points)


def _targets(tol: float, rel: float, rel_small: float | None = None) -> Callable[[Array], Array]:
    """Standard-error targets as a function of the tail: ``max(tol, rel · tail)``, and
    ``rel_small · tail`` below :data:`SMALL_TAIL` when ``rel_small`` is given."""

    def target(tail: Array) -> Array:
        tail = np.asarray(tail, dtype=np.float64)
        out = np.maximum(tol, rel * tail)
        if rel_small is not None:
            out = np.where(tail < SMALL_TAIL, rel_small * tail, out)
        return np.asarray(out)

    return target


def _pairs_control(corr: Array, rank: int) -> PairsControl | None:
    """The control family of :mod:`lincomb._core.maxt_pairs` when the rows are all pairwise
    differences of independent means (and the neighbour is close enough to help)."""
    unique = _unique_rows(corr)
    if unique.size != rank * (rank + 1) // 2 or unique.size > _RANGE_MAX_ROWS:
        return None
    control = independent_pairs(corr, unique, STRUCTURE_TOL)
    if control is None or np.max(np.abs(control.scale - 1.0)) > _CONTROL_MAX_SHIFT:
        return None
    return control


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

    a, b = widen_bracket(gap, a, b)
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


def _quantile(integ: _Integrator, level: float) -> tuple[float, IntegrationReport]:
    """Critical value: a first root by the cheap spherical-radial rule, the integration
    points grown there until the standard error meets ``tol``, then one refined root."""
    tol, max_points = integ.options.tol, integ.options.max_points
    lo, hi = _bounds(level, integ.m, integ.df)
    alpha = 1.0 - level
    if integ.kind == "exact":
        return lo, integ.report(0, 0.0, tol, 0.0)
    if integ.deterministic:
        crit = _root(integ, alpha, 0, lo, hi, xtol=1e-12 * lo)
        q0, err0 = integ.tail(np.array([crit]), 0)
        density = _density(integ, crit, 0)
        err = float(err0[0]) + abs(float(q0[0]) - alpha)
        crit_err = err / density + 1e-12 * lo
        return crit, integ.report(0, err, tol, crit_err)
    if integ.kind == "sequential":
        crit, crit_se, se, points, reached = integ.rule.quantile(alpha, lo, hi, tol, max_points)
        if not reached:
            _warn_unconverged("max-|t| critical value", se, tol, max_points)
        return crit, integ.report(points, se, tol, crit_se, converged=reached)
    if integ.kind == "scipy":
        guide = integ.spherical_radial()
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
    options: IntegrationOptions | None = None,
) -> tuple[float, IntegrationReport]:
    """Critical value ``c`` with ``P(max_i |T_i| <= c) = level``.

    Parameters are those of :func:`max_abs_t_cdf`.  ``c`` is found by Brent's method between
    the marginal and the Bonferroni critical values, with the integration rule held fixed.
    The report gives the probability's standard error at ``c``, the standard error of ``c``
    (for the sequential rule, the spread of per-scramble roots; otherwise the probability's
    over the density) and ``critical_error``, a bound on the integration error of ``c`` at
    confidence :data:`COVERAGE`.

    Examples
    --------
    >>> import numpy as np
    >>> c, rep = max_abs_t_quantile(0.95, np.eye(3), df=np.inf)
    >>> round(c, 3), rep.routine                         # Šidák is exact for independent rows
    (2.388, 'equicorrelated quadrature')
    """
    check_level(level)
    return _quantile(_checked_integrator(corr, df, rank, options), level)


def adjusted_tails(integ: _Integrator, cs: Array) -> tuple[Array, Array, int, str | None, bool]:
    """Tail probabilities for adjusted p-values; small ones by the spherical-radial rule.

    scipy's integrators control the absolute error, so a tail far below their noise (say
    1e-8) comes out with no correct digit; the spherical-radial rule averages analytic tail
    values and keeps its relative accuracy there.  Tails below :data:`SMALL_TAIL` are
    integrated to relative standard error :data:`SMALL_TAIL_REL_TOL` (the absolute ``tol`` is
    far above them), whatever the family's rank.
    """
    tol, max_points = integ.options.tol, integ.options.max_points
    # the relative targets tighten with ``tol`` (so a strict ``tol`` gives more digits)
    rel = P_REL_TOL * min(1.0, tol / DEFAULT_TOL)
    rel_small = SMALL_TAIL_REL_TOL * min(1.0, tol / DEFAULT_TOL)
    if integ.kind == "sequential":  # union sampling keeps small tails accurate in itself
        uniq, inv = np.unique(cs, return_inverse=True)
        goal = _targets(tol, rel, rel_small)
        tail, se, points, ok = integ.rule.tails(uniq, goal, max_points)
        tail, se = tail[inv], se[inv]
        if not ok:
            _warn_unconverged("max-|t| adjusted p-values", float(se.max()), tol, max_points)
        return tail, se, points, None, ok
    tail, se, points = _tail_to_tol(integ, cs, tol, max_points, rel)
    note = None
    small = tail < SMALL_TAIL
    target = np.maximum(tol, rel * tail)
    if not integ.deterministic and small.any():
        if integ.kind == "scipy":
            sr = integ.spherical_radial()
            note = f"tails below {SMALL_TAIL:g} by spherical-radial Sobol"
        else:
            sr = integ
        tail_s, se_s, _pts = _tail_to_tol(sr, cs[small], 0.0, max_points, rel_small)
        tail, se = tail.copy(), se.copy()
        tail[small], se[small] = tail_s, se_s
        target[small] = rel_small * tail_s
    ok = bool(np.all(se <= target))
    if not ok:
        _warn_unconverged("max-|t| adjusted p-values", float(se.max()), tol, max_points)
    return tail, se, points, note, ok
