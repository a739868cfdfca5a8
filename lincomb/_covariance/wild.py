"""The wild cluster bootstrap of a restriction system ``C·β = d``, vectorized over the draws.

The null is imposed with the fit's restricted least squares (``θ̃``, residuals ``ẽ_r``), and
each draw multiplies every cluster's restricted residuals by one random weight ``w_g``:
``ỹ* = X̃θ̃ + w_g ẽ_r``.  The draw's cluster-robust Wald F is compared with the observed one.

No draw refits.  The fit is linear in ``y``, so in the orthonormal working coordinates
``Z = X̃_w R⁻¹`` of :mod:`~lincomb._covariance.estimators`, with the per-cluster pieces
``B_g = Z_gᵀ Z_g`` and ``u_g = Z_gᵀ ẽ_r,g`` (see :mod:`~lincomb._covariance.cluster_blocks`):

* the draw's coefficients are ``φ* = φ̃ + Σ_g w_g u_g``, so ``C β̂* − d = Vᵀ U w`` with
  ``V = R⁻ᵀ C_Kᵀ`` (the restriction rows' root) and ``U = [u_g]``;
* the draw's score sum of cluster ``g`` is ``w_g u_g − B_g U w``, so the rows' cluster
  scores are ``w_g a_g − Γ_g w`` with ``a_g = Vᵀ u_g`` (q) and ``Γ_g = Vᵀ B_g U`` (q × G).

After one pass over the rows (the pieces) each draw costs ``O(G² q)``: products of ``G × G``
and ``q × q`` matrices, batched over the draws.  With ``w = 1`` the formulas give the observed
statistic exactly (``ỹ* = ỹ``).

Weights: Rademacher (``±1``, equal chances) or Webb's six points (``±√(1/2), ±1, ±√(3/2)``,
equal chances; Webb, 2014, Queen's Economics Department Working Paper 1315, proposed them for
very few clusters).  When all weight vectors number at most ``draws`` (``2^G`` for Rademacher,
``6^G`` for Webb; so with 9,999 draws up to 13 and 5 clusters) every vector is used once
(enumeration) and the p-value has no Monte-Carlo error.

An interval for one row inverts the test: the set of ``d₀`` whose bootstrap p-value exceeds
``1 − level``, with the same weights for every ``d₀`` (the pieces are affine in ``d₀``).

References: Cameron, Gelbach and Miller (2008), Rev. Econ. Stat. 90:414-427 (the wild cluster
bootstrap with restricted residuals); MacKinnon and Webb (2017), J. Appl. Econometrics
32:233-254.
"""

from __future__ import annotations

import contextlib
import itertools
import math
import threading
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from lincomb import _core as core
from lincomb._core.checks import check_level
from lincomb._covariance.cluster_blocks import pieces_of
from lincomb._covariance.examples import sites_doc
from lincomb._settings import blas_limit, can_limit
from lincomb._typing import Array
from lincomb.errors import CovarianceInputError, InputError, SingularCovarianceError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = [
    "WEIGHT_KINDS",
    "ENUMERATION_MAX",
    "WildBootstrapTest",
    "wild_bootstrap",
    "bootstrap_weights",
]

ArrayLike2D = Any

#: The weight distributions, by name.
WEIGHT_KINDS: tuple[str, ...] = ("rademacher", "webb")
#: Largest number of weight vectors enumerated on request (``enumerate=True``).
ENUMERATION_MAX: int = 1 << 20
#: Statistics within this relative distance of the observed one count as at least as large
#: (so that a draw equal to the observed one up to rounding is counted).
TIE_RTOL: float = 1e-10
_WEBB = np.sqrt(np.array([1.5, 1.0, 0.5, 0.5, 1.0, 1.5])) * np.array([-1, -1, -1, 1, 1, 1])
_CHUNK_ELEMENTS = 1 << 21


def bootstrap_weights(
    kind: str, clusters: int, draws: int, seed: int | None, enumerate: bool | None
) -> tuple[Array, bool]:
    """The weight vectors (draws × G) and whether they enumerate every vector.

    Examples
    --------
    >>> w, full = bootstrap_weights("rademacher", 3, 999, 0, None)
    >>> w.shape, full
    ((8, 3), True)
    >>> w, full = bootstrap_weights("webb", 10, 99, 1, None)
    >>> w.shape, full, sorted(set(abs(w).round(3).ravel().tolist()))
    ((99, 10), False, [0.707, 1.0, 1.225])
    """
    points = np.array([-1.0, 1.0]) if kind == "rademacher" else _WEBB
    total = len(points) ** clusters if clusters * math.log2(len(points)) < 62 else None
    if enumerate is None:
        enumerate = total is not None and total <= draws
    if enumerate:
        if total is None or total > ENUMERATION_MAX:
            raise InputError(
                f"enumerating every {kind} weight vector for {clusters} clusters needs"
                f" {len(points)}^{clusters} vectors, more than {ENUMERATION_MAX}; draw them at"
                " random instead (enumerate=None or False)."
            )
        grid = np.array(list(itertools.product(range(len(points)), repeat=clusters)))
        return points[grid].reshape(-1, clusters), True
    rng = np.random.default_rng(seed)
    return points[rng.integers(0, len(points), size=(draws, clusters))], False


@dataclass(frozen=True)
class _Prepared:
    """What the draws need: ``a`` (G, q), ``gamma`` (G, q, G), the small-sample factor."""

    a: Array
    gamma: Array
    scale: float


def _stats(prep: _Prepared, w: Array) -> Array:
    """Wald F of each weight vector (rows of ``w``), batched in chunks of draws, on one BLAS
    thread on the main thread (the products are small: waking threads cost more than they
    saved, 6 ms against 68 ms for 9,999 draws and 20 clusters on two busy cores)."""
    limited = w.shape[0] > 1 and threading.current_thread() is threading.main_thread()
    with blas_limit(1) if limited and can_limit() else contextlib.nullcontext():
        return _stats_impl(prep, w)


def _stats_impl(prep: _Prepared, w: Array) -> Array:
    g, q = prep.a.shape
    out = np.empty(w.shape[0])
    step = max(1, _CHUNK_ELEMENTS // max(g * max(g, q), 1))
    gam = prep.gamma.reshape(g * q, g)
    for s in range(0, w.shape[0], step):
        wb = w[s : s + step]
        num = wb @ prep.a  # (b, q)
        scores = wb[:, :, None] * prep.a[None] - (wb @ gam.T).reshape(-1, g, q)
        cov = prep.scale * np.einsum("bgi,bgj->bij", scores, scores)
        if q == 1:
            with np.errstate(divide="ignore", invalid="ignore"):
                out[s : s + step] = num[:, 0] ** 2 / cov[:, 0, 0]
        else:
            out[s : s + step] = _quad(cov, num) / q
    return out


def _quad(cov: Array, num: Array) -> Array:
    """``numᵀ cov⁻¹ num`` per draw by a Cholesky factorization (inf where singular)."""
    res = np.full(num.shape[0], np.inf)
    try:
        chol = np.linalg.cholesky(cov)
        z = np.linalg.solve(chol, num[:, :, None])[:, :, 0]
        return np.einsum("bi,bi->b", z, z)  # type: ignore[no-any-return]
    except np.linalg.LinAlgError:
        for b in range(num.shape[0]):  # a singular draw: its statistic is unbounded
            try:
                c = np.linalg.cholesky(cov[b])
            except np.linalg.LinAlgError:
                continue
            z = np.linalg.solve(c, num[b])
            res[b] = z @ z
        return res


@dataclass(frozen=True)
class _Setup:
    labels: tuple[str, ...]
    estimate: Array
    target: Array
    v: Array  # (k, q) roots of the independent rows
    cu_kept: Array  # (m, k) all rows in working coordinates
    independent: NDArray[np.intp]
    redundant: dict[int, dict[int, float]]
    hat: Array  # (G, k, k)
    scores: Array  # (G, k) unrestricted
    scale: float
    clusters: int
    name: str


def _setup(fit: Any, restrictions: object, by: Any) -> _Setup:
    from lincomb._covariance.rows import row_values

    fit.check_variance()
    c, d, labels, cu, analysis = fit.prepare(restrictions)
    sol = fit.solution
    k = analysis.independent
    if k.size == 0:
        raise InputError("the restriction system has no independent row to test.")
    pc = pieces_of(fit, by)
    _, name = row_values(fit, by, "cluster labels")
    g = pc.clusters
    if k.size > g - 1:
        raise SingularCovarianceError(
            f"{k.size} independent restriction rows cannot be tested with {g} clusters: a"
            f" cluster-robust covariance has rank at most G − 1 = {g - 1}. Test fewer rows."
        )
    n, rank = sol.n, sol.rank
    scale = g / (g - 1) * (n - 1) / (n - rank)
    cu_kept = cu[:, sol.kept]
    return _Setup(
        labels=tuple(labels),
        estimate=cu_kept @ sol.theta,
        target=np.asarray(d, dtype=np.float64).copy(),
        v=sol.root(cu_kept[k]),
        cu_kept=cu_kept,
        independent=k,
        redundant=analysis.dependencies,
        hat=pc.hat,
        scores=pc.scores,
        scale=scale,
        clusters=g,
        name=name,
    )


def _prepare_null(fit: Any, st: _Setup, d: Array) -> _Prepared:
    """Impose ``C_K β = d_K`` by the fit's restricted least squares and form the pieces."""
    sol = fit.solution
    k = st.independent
    step, _ = core.restricted_step(sol, st.v, st.estimate[k] - d[k])
    shift = sol.r @ step  # φ̃ − φ̂ in orthonormal coordinates
    u_r = st.scores - st.hat @ shift  # Z_gᵀ ẽ_r = u_g − B_g (φ̃ − φ̂)
    a = u_r @ st.v  # (G, q)
    gamma = np.einsum("ks,gkl,hl->gsh", st.v, st.hat, u_r)
    return _Prepared(a, gamma, st.scale)


def _observed(fit: Any, restrictions: object, by: Any) -> tuple[_Setup, _Prepared, float]:
    """The test's set-up, its pieces under the null, and the observed F (all weights 1)."""
    st = _setup(fit, restrictions, by)
    prep = _prepare_null(fit, st, st.target)
    return st, prep, float(_stats(prep, np.ones((1, st.clusters)))[0])


def draw_statistics(
    fit: Any, restrictions: object, by: Any, weights: ArrayLike2D
) -> tuple[float, Array]:
    """The observed Wald F and the F of each weight vector (rows of ``weights``, G columns in
    order of first appearance of the cluster labels), without refitting.

    Examples
    --------
    >>> import numpy as np, lincomb as lc, warnings
    >>> sites = lc.datasets.service_sites()
    >>> f = lc.fit("wait_min ~ staffing + protocol", sites)
    >>> obs, draws = draw_statistics(f, lc.coef("staffing") == 0, "site", np.ones((1, 40)))
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("ignore")
    ...     plain = f.wald(lc.coef("staffing") == 0, covariance=lc.clustered(by="site"))
    >>> bool(np.isclose(obs, plain.stat, rtol=1e-10)), bool(np.isclose(draws[0], obs))
    (True, True)
    """
    _st, prep, obs = _observed(fit, restrictions, by)
    return obs, _stats(prep, np.asarray(weights, dtype=np.float64))


@sites_doc
@dataclass(frozen=True)
class WildBootstrapTest:
    """A wild cluster bootstrap test of ``C·β = d`` (see :func:`wild_bootstrap`).

    Attributes
    ----------
    labels : tuple of str
        Each row written in coefficient names.
    estimate, target : (m,) ndarray
        ``Cβ̂`` and ``d`` per row.
    stat : float
        The observed cluster-robust Wald F (small-sample factor ``G/(G−1)·(N−1)/(N−K)``).
    df_test : int
        Number of independent rows.
    p : float
        Share of the draws whose F is at least the observed one.
    mc_error : float
        Monte-Carlo standard error of ``p``, ``sqrt(p (1−p) / draws)`` (0 when every
        weight vector was enumerated).
    draws : int
        Number of weight vectors used.
    weights : {'rademacher', 'webb'}
    enumerated : bool
        Whether the draws are every weight vector, once each.
    seed : int or None
    clusters : int
    cluster_by : str
    redundant : dict
        ``{row: {independent row: weight}}`` for each redundant row.
    draw_statistics : (draws,) ndarray
        The F of each draw.

    Examples
    --------
    %(sites_fit)s
    >>> res = lc.wild_bootstrap(f, lc.coef("staffing") == 0, by="site", draws=999, seed=1)
    >>> res.draws, res.weights, res.enumerated
    (999, 'rademacher', False)
    """

    labels: tuple[str, ...]
    estimate: Array
    target: Array
    stat: float
    df_test: int
    p: float
    mc_error: float
    draws: int
    weights: str
    enumerated: bool
    seed: int | None
    clusters: int
    cluster_by: str
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)
    draw_statistics: Array = field(default_factory=lambda: np.zeros(0), repr=False)
    _fit: Any = field(default=None, repr=False)
    _setup: Any = field(default=None, repr=False)
    _w: Any = field(default=None, repr=False)

    @sites_doc
    def interval(self, row: int = 0, level: float = 0.95) -> pd.DataFrame:
        """Confidence interval for one row's ``Cβ`` by inverting the bootstrap test.

        The interval holds every ``d₀`` whose bootstrap p-value for the single row
        ``c·β = d₀`` (same weight vectors) is above ``1 − level``; its ends are found by
        bisection to ``1e-6`` standard errors.  An end is infinite when even far values keep
        the p-value above ``1 − level`` (with very few clusters the smallest attainable
        p-value can exceed it).

        Examples
        --------
        %(sites_fit)s
        >>> res = lc.wild_bootstrap(f, lc.coef("staffing") == 0, by="site", draws=999, seed=1)
        >>> ci = res.interval(0, 0.9)
        >>> bool(ci["lower"].iloc[0] < res.estimate[0] < ci["upper"].iloc[0])
        True
        """
        check_level(level)
        m = len(self.labels)
        if not (isinstance(row, (int, np.integer)) and 0 <= row < m):
            raise InputError(f"row must be an index in 0..{m - 1}, got {row!r}.")
        st: _Setup = self._setup
        sol = self._fit.solution
        v = sol.root(st.cu_kept[row : row + 1])[:, 0]
        vv = float(v @ v)
        if vv == 0.0:
            raise InputError(f"row {row} ({self.labels[row]}) has zero variance.")
        est = float(self.estimate[row])
        a0 = st.scores @ v
        bv = st.hat @ v  # (G, k)
        a1 = bv @ v / vv
        g0 = np.einsum("gl,hl->gh", bv, st.scores)
        g1 = np.einsum("gl,hl->gh", bv, bv) / vv
        meat_obs = st.scale * float(a0 @ a0)
        w = self._w
        alpha = 1.0 - level

        def pval(d0: float) -> float:
            delta = est - d0
            prep = _Prepared((a0 + delta * a1)[:, None], (g0 + delta * g1)[:, None, :], st.scale)
            obs = delta * delta / meat_obs
            draws = _stats(prep, w)
            return float(np.mean(draws >= obs * (1 - TIE_RTOL)))

        se = math.sqrt(meat_obs)
        ends = []
        for sign in (-1.0, 1.0):
            inner, outer = 0.0, 2.0
            while pval(est + sign * outer * se) > alpha:
                inner, outer = outer, 2 * outer
                if outer > 2.0**20:
                    ends.append(sign * np.inf)
                    break
            else:
                while outer - inner > 1e-6:
                    mid = (inner + outer) / 2
                    if pval(est + sign * mid * se) > alpha:
                        inner = mid
                    else:
                        outer = mid
                ends.append(est + sign * (inner + outer) / 2 * se)
        return pd.DataFrame(
            {"lower": [ends[0]], "upper": [ends[1]], "level": [level]},
            index=pd.Index([self.labels[row]], name="restriction"),
        )

    @sites_doc
    def to_frame(self) -> pd.DataFrame:
        """One row for the test.

        Columns: ``restrictions``, ``rank``, ``stat`` (observed F), ``p``
        (bootstrap), ``mc_error``, ``draws``, ``weights``, ``enumerated``, ``clusters``,
        ``cluster_by``, ``method`` (always ``'wild cluster bootstrap (restricted)'``).

        Examples
        --------
        %(sites_fit)s
        >>> res = lc.wild_bootstrap(f, lc.coef("staffing") == 0, by="site", draws=99, seed=1)
        >>> list(res.to_frame().columns)[:4]
        ['restrictions', 'rank', 'stat', 'p']
        """
        return pd.DataFrame(
            {
                "restrictions": [" & ".join(self.labels)],
                "rank": [self.df_test],
                "stat": [self.stat],
                "p": [self.p],
                "mc_error": [self.mc_error],
                "draws": [self.draws],
                "weights": [self.weights],
                "enumerated": [self.enumerated],
                "clusters": [self.clusters],
                "cluster_by": [self.cluster_by],
                "method": ["wild cluster bootstrap (restricted)"],
            }
        )

    def _lines(self) -> list[tuple[str, str]]:
        how = "all weight vectors" if self.enumerated else f"seed {self.seed}"
        err = "exact over the vectors" if self.enumerated else f"± {self.mc_error:.2g} (MC s.e.)"
        return [
            ("Restrictions", "; ".join(self.labels)),
            ("Statistic", f"F = {self.stat:.4g} on {self.df_test} row(s), cluster-robust"),
            ("Bootstrap p", f"{self.p:.4g} {err}"),
            ("Draws", f"{self.draws} {self.weights} ({how})"),
            ("Clusters", f"{self.clusters} by {self.cluster_by}; null imposed (restricted fit)"),
        ]

    def __repr__(self) -> str:
        lines = ["Wild cluster bootstrap test"]
        lines += [f"  {k:<13}{v}" for k, v in self._lines()]
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        import html

        rows = "".join(
            f"<tr><th style='text-align:left'>{html.escape(k)}</th><td>{html.escape(v)}</td></tr>"
            for k, v in self._lines()
        )
        return f"<table><caption>Wild cluster bootstrap test</caption>{rows}</table>"


@sites_doc
def wild_bootstrap(
    fit: LinearFit,
    restrictions: object,
    *,
    by: str | ArrayLike | pd.Series | Sequence[Any],
    draws: int = 9999,
    weights: str = "rademacher",
    seed: int | None = 0,
    enumerate: bool | None = None,
) -> WildBootstrapTest:
    """Wild cluster bootstrap test of ``C·β = d`` with the null imposed.

    Parameters
    ----------
    fit : LinearFit
        An in-memory fit (it needs the rows once, for the per-cluster pieces).
    restrictions : Restriction, RestrictionSystem, or list of them
        As for :meth:`~lincomb.LinearFit.wald`; redundant rows are found and dropped as there.
    by : str, array_like or pandas.Series
        Cluster labels of the rows (one clustering variable), as for :func:`~lincomb.clustered`.
    draws : int, default 9999
        Number of random weight vectors.
    weights : {'rademacher', 'webb'}, default 'rademacher'
        ``±1`` with equal chances, or Webb's six points (better with fewer than about ten
        clusters, where Rademacher vectors are few).
    seed : int or None, default 0
        Seed of the weight draws (``numpy.random.default_rng``).
    enumerate : bool, optional
        Use every weight vector once instead of random draws.  Default: when there are at most
        ``draws`` of them (``2^G`` Rademacher, ``6^G`` Webb).  ``True`` forces it up to
        :data:`ENUMERATION_MAX` vectors.

    Returns
    -------
    WildBootstrapTest

    Raises
    ------
    SingularCovarianceError
        More independent rows than ``G − 1``.
    InputError
        Bad ``draws``, ``weights`` or an enumeration too large.

    Notes
    -----
    The statistic is the cluster-robust Wald F of :func:`~lincomb.clustered` (one-way,
    small-sample factor on), the same as ``fit.wald(r, covariance=lc.clustered(by=...))``;
    its bootstrap p-value is the share of draws with an F at least as large (within a
    relative :data:`TIE_RTOL`).  Each draw is a few small matrix products (see
    :mod:`lincomb._covariance.wild`), so 9,999 draws cost little more than the pass over the
    rows.  Draws are not refits: the estimator is linear in ``y``.

    Examples
    --------
    %(sites_fit)s
    >>> res = lc.wild_bootstrap(f, lc.coef("staffing") == 0, by="site", draws=999, seed=3)
    >>> 0 <= res.p <= 1 and res.mc_error < 0.02
    True
    """
    if isinstance(draws, bool) or not isinstance(draws, (int, np.integer)) or draws < 1:
        raise InputError(f"draws must be a positive whole number, got {draws!r}; e.g. 9999.")
    key = str(weights).strip().lower()
    if key not in WEIGHT_KINDS:
        raise InputError(f"unknown bootstrap weights {weights!r}; use one of {list(WEIGHT_KINDS)}.")
    if isinstance(by, (list, tuple)) and len(by) != 1 or isinstance(by, pd.DataFrame):
        raise CovarianceInputError(
            "the wild cluster bootstrap takes one clustering variable (a column name, a Series"
            " or one label per row)."
        )
    st, prep, obs = _observed(fit, restrictions, by)
    w, full = bootstrap_weights(key, st.clusters, int(draws), seed, enumerate)
    drawn = _stats(prep, w)
    p = float(np.mean(drawn >= obs * (1 - TIE_RTOL)))
    b = drawn.size
    return WildBootstrapTest(
        labels=st.labels,
        estimate=st.estimate,
        target=st.target,
        stat=obs,
        df_test=int(st.independent.size),
        p=p,
        mc_error=0.0 if full else math.sqrt(p * (1 - p) / b),
        draws=b,
        weights=key,
        enumerated=full,
        seed=None if full else seed,
        clusters=st.clusters,
        cluster_by=st.name,
        redundant=st.redundant,
        draw_statistics=drawn,
        _fit=fit,
        _setup=st,
        _w=w,
    )
