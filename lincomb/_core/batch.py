"""Many Wald tests on one fit at once: vectorized over a stack of restriction systems.

This module is part of the numerical core (like :mod:`lincomb._core`): it works on plain
float64 arrays and knows nothing of names, formulas or pandas.  It answers the same questions as
:func:`lincomb._core.analyze_rows` + :func:`lincomb._core.wald_from_root` for ``k`` systems
``C_s β = d_s`` (``s = 0..k-1``) of ``m`` rows each, without a Python-level pass per system:

* all ``k·m`` rows are mapped to working coordinates and solved against the fit's triangular
  factor by **one** triangular solve (``R⁻ᵀ C_keptᵀ`` for every row at once; a substitution
  over the ``rank`` columns, vectorized over rows, see :func:`root_rows`);
* the rows of every system are checked for redundancy by the same greedy Gram–Schmidt with
  reorthogonalization as :func:`~lincomb._core.rows.analyze_rows`, run for all systems together
  (a loop over the ``m`` rows, vectorized over the ``k`` systems; systems whose rows use
  disjoint sets of columns are exactly orthogonal and skip it), and for estimability by the
  null-space residual of :meth:`~lincomb._core.Solution.estimability_residual`;
* for every system whose rows are all independent and estimable, the Cholesky-type factor of
  ``Cov(C_s β̂)`` comes from a Householder QR of the small root ``W_s`` (``Cov(C_s β̂) =
  W_sᵀW_s``), run one column at a time for all systems together, and the quadratic form from a
  forward substitution vectorized over systems.  ``Cov(C_s β̂)`` is never formed.

The covariance is the classical ``σ² (XᵀX)⁻¹`` unless ``root_of`` is given: a function that
maps rows of ``C`` (working coordinates, kept columns) to a root of their covariance, as a
robust estimator provides (see :mod:`lincomb._covariance.estimators`).

Threads
-------
The classical path calls no BLAS routine: the arrays are small (``k·m`` rows of ``rank``
entries), and OpenBLAS hands even small triangular solves and matrix-vector products to all its
threads, which on busy cores wait milliseconds for one another.  Plain numpy loops
(``einsum``) keep the cost proportional to the flops.

Exactness
---------
A system is sent to the per-system path (the very functions :meth:`LinearFit.wald` uses) when
any of its rows is *near* a decision threshold: a Gram–Schmidt residual at most
``2 · row_tol``, a null-space residual above ``row_tol / 2``, or (when ``cov_rank_tol`` is
given, for robust covariances) a diagonal of the small factor at most ``2 · cov_rank_tol`` times
the row's standard error.  So every decision (redundant, inconsistent, not estimable, singular
covariance) is taken by exactly the code, with exactly the tolerance
(:data:`~lincomb._core.ROW_TOL`), of the single-system test; the vectorized path only handles
systems that are clearly full rank and estimable, where it computes the same quantities by the
same factorizations (agreement to rounding).

Cost
----
``O(k m (p + rank² + m (p + rank)))`` flops, with no dependence on the number of observations
``n``: the fit's sufficient statistics are all that is touched.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from lincomb._core.rows import ROW_TOL, analyze_rows
from lincomb._core.solve import Solution, random_solution_doc
from lincomb._core.triangular import safe_norm, triangular_factor
from lincomb._core.wald import intercept_rotation, wald_from_root
from lincomb._typing import Array

__all__ = ["BatchCore", "root_rows", "wald_systems"]


@random_solution_doc
@dataclass(frozen=True)
class BatchCore:
    """Numbers of ``k`` Wald tests of ``m``-row systems, before names are attached.

    Attributes
    ----------
    estimate : (k, m) ndarray
        ``C_s β̂`` per row (NaN for rows that are not estimable).
    std_error : (k, m) ndarray
        Standard error of each row's estimate (scale included; NaN where not estimable).
    statistic_rows : (k, m) ndarray
        ``(C_s β̂ - d_s) / std_error`` per row.
    quad : (k,) ndarray
        ``δ_Kᵀ Cov(C_K β̂)⁻¹ δ_K`` over each system's independent rows ``K`` (NaN for
        inconsistent or non-estimable systems).
    rank : (k,) ndarray of int
        Number of independent rows of each system.
    dependencies : dict
        ``{system: {row: {independent_row: weight}}}`` for systems with redundant rows.
    inconsistent : dict
        ``{system: [(row, d, implied d), ...]}`` for systems whose redundant rows contradict
        the rows they depend on.
    not_estimable : dict
        ``{system: rows}`` (an int array) for systems with rows that are not estimable.
    singular : dict
        ``{system: (row, rank)}`` for systems whose independent rows have a singular covariance
        (only checked when ``cov_rank_tol`` is given): the first row that adds no variance, and
        the covariance's rank.
    exact : (e,) ndarray of int
        Systems computed by the per-system path (any row near a decision threshold).

    Examples
    --------
    %(random_solution)s
    >>> c = np.zeros((2, 1, 3))
    >>> c[0, 0, 1] = c[1, 0, 2] = 1.0
    >>> out = wald_systems(sol, c, np.zeros((2, 1)), sol.root)
    >>> out.estimate.shape, out.rank.tolist()
    ((2, 1), [1, 1])
    """

    estimate: Array
    std_error: Array
    statistic_rows: Array
    quad: Array
    rank: NDArray[np.intp]
    dependencies: dict[int, dict[int, dict[int, float]]]
    inconsistent: dict[int, list[tuple[int, float, float]]]
    not_estimable: dict[int, NDArray[np.intp]]
    singular: dict[int, tuple[int, int]]
    exact: NDArray[np.intp]


#: Largest ``|m_j|·sqrt(W)/s_j`` for which the vectorized path keeps systems with two or more
#: intercept rows (see :mod:`lincomb._core`).
OFFSET_ROTATE: float = 1e3


def _to_working(sol: Solution, c: Array) -> Array:
    """:meth:`Solution.to_working` for a stack of systems, in two passes over ``c``."""
    j = sol.intercept
    if j is None or not c[..., j].any():  # no row involves the intercept: no shift
        return c / sol.scale
    return np.subtract(c, c[..., j : j + 1] * sol.center, order="C") / sol.scale


def _dot(a: Array, b: Array) -> Array:
    """Row-wise dot products over the last axis (plain loops, no BLAS threads for tiny rows)."""
    out: Array = np.einsum("...i,...i->...", a, b)
    return out


def _rows_any(b: NDArray[np.bool_]) -> NDArray[np.bool_]:
    """``b.any(axis=1)`` for a ``(k, p)`` boolean array, reduced down the columns of its
    contiguous transpose: numpy reduces short rows one row at a time, several times slower."""
    out: NDArray[np.bool_] = np.logical_or.reduce(np.ascontiguousarray(b.T), axis=0)
    return out


def _row_residuals(cu: Array) -> tuple[Array, Array]:
    """Gram–Schmidt residual of each row against the rows before it, for every system.

    ``cu`` is ``(k, m, p)``; returns the residuals ``(k, m)`` (relative to each row's norm, 0
    for a zero row) and the row norms.  Every earlier row is assumed kept, which is what
    :func:`~lincomb._core.rows.analyze_rows` does for a system whose rows are all independent; any
    system with a small residual is re-analysed exactly, so the assumption never decides.
    """
    k, m, p = cu.shape
    norms = safe_norm(cu, axis=-1)
    v = cu / np.where(norms > 0, norms, 1.0)[..., None]
    out = np.empty((k, m))
    out[:, 0] = norms[:, 0] > 0
    for i in range(1, m):
        b = v[:, :i, :]  # rows before i, already orthonormalized in place
        x = v[:, i, :]
        for _ in range(2):  # classical Gram–Schmidt twice, as in analyze_rows
            x = x - np.einsum("kip,ki->kp", b, np.einsum("kip,kp->ki", b, x))
        rn = safe_norm(x, axis=-1)
        out[:, i] = np.where(norms[:, i] > 0, rn, 0.0)
        if i + 1 < m:
            v[:, i, :] = x / np.where(rn > 0, rn, 1.0)[:, None]
    return out, norms


def _clearly_independent(cd: Array, tol: float) -> NDArray[np.bool_]:
    """Per system: is every row more than ``2·tol`` outside the span of the rows before it?

    A system of nonzero, finite rows on disjoint sets of columns (``b1 = b2`` beside
    ``b3 = 0``, the usual form) has exactly orthogonal rows: every product in their dot
    products has a zero factor, so Gram–Schmidt leaves each row whole (residual 1).  Only the
    other systems need :func:`_row_residuals`.
    """
    k, m, _p = cd.shape
    clear = np.zeros(k, dtype=bool)
    nz = cd != 0
    seen = nz[:, 0]
    apart = _rows_any(seen)  # every row nonzero and on columns no row before it uses
    for i in range(1, m):
        row = nz[:, i]
        apart &= _rows_any(row) & ~_rows_any(seen & row)
        if i + 1 < m:
            seen = seen | row
    if np.isfinite(cd).all():  # finite: no inf · 0 in a dot product
        clear[apart] = True
    else:
        apart[:] = False
    rest = np.flatnonzero(~apart)
    if rest.size:
        resid, _ = _row_residuals(cd if rest.size == k else cd[rest])
        clear[rest] = (resid > 2 * tol).all(axis=1)
    return clear


def _stacked_triangle(w: Array) -> Array:
    """Triangular factors ``R_s`` (k, m, m) of ``V_s = Q_s R_s`` where ``V_s = w[s].T``.

    Householder QR (as LAPACK ``geqr2``), one column at a time, vectorized over the ``k``
    systems; ``w`` (k, m, r) holds each system's ``m`` columns as rows.  ``Q`` is not formed.
    """
    a = np.array(w, dtype=np.float64, copy=True)
    k, m, r = a.shape
    out = np.zeros((k, m, m))
    for j in range(m):
        x = a[:, j, j:]
        nx = np.sqrt(_dot(x, x))
        alpha = np.where(x[:, 0] >= 0, -nx, nx)
        out[:, j, j] = alpha
        if j + 1 == m:
            break
        v = x.copy()
        v[:, 0] -= alpha
        vv = _dot(v, v)
        f = np.divide(2.0, vv, out=np.zeros_like(vv), where=vv > 0)
        rest = a[:, j + 1 :, j:]
        rest -= (np.einsum("ki,kci->kc", v, rest) * f[:, None])[:, :, None] * v[:, None, :]
        out[:, j, j + 1 :] = rest[:, :, 0]
    return out


def root_rows(r: Array, rows: Array, sigma: float = 1.0) -> Array:
    """``σ · rows · R⁻¹`` for upper-triangular ``R``: the classical roots of many rows at once.

    Row ``i`` of the result is ``σ (R⁻ᵀ rowsᵢᵀ)ᵀ``, so ``Cov(rowsᵢ θ̂) = ‖resultᵢ‖²``.  Forward
    substitution over the ``rank`` columns, vectorized over the rows (no BLAS call).

    Examples
    --------
    >>> import numpy as np
    >>> r = np.array([[2.0, 1.0], [0.0, 4.0]])
    >>> rows = np.array([[1.0, 0.0], [1.0, 3.0]])
    >>> bool(np.allclose(root_rows(r, rows) @ r, rows))
    True
    """
    n, k = rows.shape
    rt = np.ascontiguousarray(rows.T)  # one row per column of R: each step is a long axpy
    xt = np.empty((k, n))
    for j in range(k):
        acc = rt[j] - np.einsum("i,in->n", r[:j, j], xt[:j]) if j else rt[0]
        np.divide(acc, r[j, j], out=xt[j])
    out = np.ascontiguousarray(xt.T)
    if sigma != 1.0:
        out *= sigma
    return out


def _forward_quad(rv: Array, delta: Array) -> Array:
    """``‖R_V⁻ᵀ δ‖²`` for stacked upper-triangular ``R_V`` (kf, m, m) and ``δ`` (kf, m)."""
    kf, m = delta.shape
    sol = np.empty((kf, m))
    for j in range(m):
        acc = delta[:, j] - _dot(rv[:, :j, j], sol[:, :j])
        sol[:, j] = acc / rv[:, j, j]
    return _dot(sol, sol)


@random_solution_doc
def wald_systems(
    sol: Solution,
    c: Array,
    d: Array,
    root_of: Callable[[Array], Array] | None = None,
    *,
    sigma: float = 1.0,
    tol: float = ROW_TOL,
    cov_rank_tol: float | None = None,
) -> BatchCore:
    """Wald quadratic forms of ``k`` restriction systems ``C_s β = d_s`` on one fit.

    Parameters
    ----------
    sol : Solution
        The fit (from :func:`lincomb._core.solve`).
    c : (k, m, p) ndarray
        The systems, on the user's coefficients ``β``.  Not modified.  Rows must be nonzero
        (validated by the caller).
    d : (k, m) ndarray
        Right-hand sides.
    root_of : callable, optional
        Maps rows ``(N, rank)`` of ``C`` in working coordinates (kept columns) to a root
        ``W`` of shape ``(r, N)`` with ``Cov(Cβ̂) = WᵀW`` (e.g. a robust estimator's
        ``root``).  Called once, with all ``k·m`` rows.  Default: the classical root
        ``σ R⁻ᵀ C_keptᵀ`` (:func:`root_rows`).
    sigma : float, default 1
        Scale of the classical covariance ``σ² (XᵀX)⁻¹`` (ignored with ``root_of``).
    tol : float, default :data:`~lincomb._core.ROW_TOL`
        Relative tolerance for redundant, inconsistent and non-estimable rows.
    cov_rank_tol : float or None
        When given, an independent row whose covariance leaves at most this fraction of its
        standard error outside the rows before it makes the system's covariance singular
        (reported in ``singular``); leave None for the classical covariance, which is
        nonsingular on estimable, independent rows.

    Returns
    -------
    BatchCore

    Notes
    -----
    See the module notes: one triangular solve for all rows, a batched redundancy and
    estimability screen, a stacked QR of the small roots for clearly full-rank systems, and the
    per-system path of :meth:`LinearFit.wald` for every system near a threshold.

    Examples
    --------
    %(random_solution)s
    >>> sigma = float(np.sqrt(sol.rss / sol.df_resid))
    >>> c = np.zeros((3, 2, 3))
    >>> c[:, 0, 1] = 1.0; c[:, 1, 2] = 1.0        # b1 = b2 = 0 ...
    >>> c[2, 1] = c[2, 0]                          # ... but system 2 repeats its first row
    >>> out = wald_systems(sol, c, np.zeros((3, 2)), sigma=sigma)
    >>> out.rank.tolist(), list(out.dependencies), out.exact.tolist()
    ([2, 2, 1], [2], [2])
    >>> bool(np.isclose(out.quad[0], out.quad[1]))
    True
    """
    k, m, p = c.shape
    j0 = sol.intercept
    # no row involves the intercept: working and decision coordinates are both C / scale
    plain = j0 is None or not c[..., j0].any()
    cu = c / sol.scale if plain else _to_working(sol, c)
    flat = cu.reshape(k * m, p)  # a view of cu (a new array), read only below
    if sol.kept.size != p or not np.array_equal(sol.kept, np.arange(p)):
        flat = flat[:, sol.kept]  # aliased columns dropped
    estimate = np.einsum("nr,r->n", flat, sol.theta).reshape(k, m)
    delta = estimate - d
    if root_of is None:  # one triangular solve for all rows
        root = root_rows(sol.r, flat, sigma).reshape(k, m, sol.rank)
    else:
        root_t = np.asarray(root_of(flat))
        root = np.ascontiguousarray(root_t.T).reshape(k, m, root_t.shape[0])
    r = root.shape[2]
    se = safe_norm(root, axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(se > 0, delta / np.where(se > 0, se, 1.0), np.nan)

    # screen: clearly independent rows and clearly estimable rows (margin 2x either way)
    cd = cu if plain else sol.decision_rows(c)  # redundancy in decision coordinates
    clear = _clearly_independent(cd, tol)
    if sol.null_basis.shape[1]:
        clear &= (sol.estimability_residual(cu) <= tol / 2).all(axis=1)
    if m > r:  # more independent rows than the root has rows: singular or not estimable
        clear[:] = False
    if sol.intercept is not None:
        # a column whose mean is large against its spread makes intercept rows cancel in
        # working coordinates (relative error about eps·offset²): such systems with two or
        # more intercept rows take the exact path, which rotates them free of the intercept
        offset = float(np.max(np.abs(sol.center) * np.sqrt(sol.weight_sum) / sol.scale))
        if offset > OFFSET_ROTATE:
            clear &= np.count_nonzero(c[:, :, sol.intercept], axis=1) < 2

    quad = np.full(k, np.nan)
    rank = np.full(k, m, dtype=np.intp)
    fast = np.flatnonzero(clear)
    if fast.size:
        rv = _stacked_triangle(root if fast.size == k else root[fast])
        if cov_rank_tol is not None:
            diag = np.abs(np.diagonal(rv, axis1=1, axis2=2))
            tiny = np.finfo(float).tiny
            ok = (diag > 2 * cov_rank_tol * np.maximum(se[fast], tiny)).all(axis=1)
            clear[fast[~ok]] = False
            fast, rv = fast[ok], rv[ok]
        quad[fast] = _forward_quad(rv, delta[fast])

    deps: dict[int, dict[int, dict[int, float]]] = {}
    bad_d: dict[int, list[tuple[int, float, float]]] = {}
    bad_e: dict[int, NDArray[np.intp]] = {}
    bad_v: dict[int, tuple[int, int]] = {}
    exact = np.flatnonzero(~clear)
    for s in exact.tolist():
        analysis = analyze_rows(cd[s], d[s], tol)
        independent = analysis.independent
        rank[s] = independent.size
        if analysis.dependencies:
            deps[s] = analysis.dependencies
        if analysis.inconsistent:
            bad_d[s] = analysis.inconsistent
        rows = np.flatnonzero(sol.estimability_residual(cu[s]) > tol)
        if rows.size:
            bad_e[s] = rows
            estimate[s, rows] = np.nan
            se[s, rows] = np.nan
            t[s, rows] = np.nan
        if analysis.inconsistent or rows.size:
            continue
        if cov_rank_tol is not None and independent.size:  # checked before any solve
            diag = np.abs(np.diag(triangular_factor(root[s][independent].T)))
            floor = cov_rank_tol * np.maximum(se[s, independent], np.finfo(float).tiny)
            small = np.flatnonzero(diag <= floor)
            if small.size:
                bad_v[s] = (int(independent[small[0]]), int(independent.size - small.size))
                continue
        rotated = intercept_rotation(c[s][independent], d[s][independent], sol.intercept)
        if rotated is None:
            quad[s] = wald_from_root(delta[s], root[s].T, independent).quad
            continue
        # the same F from rows free of the intercept (see lincomb._core.wald.intercept_rotation)
        cr = _to_working(sol, rotated[0])[:, sol.kept]
        root_r = root_rows(sol.r, cr, sigma).T if root_of is None else np.asarray(root_of(cr))
        delta_r = cr @ sol.theta - rotated[1]
        quad[s] = wald_from_root(delta_r, root_r, np.arange(independent.size)).quad
    return BatchCore(
        estimate=estimate,
        std_error=se,
        statistic_rows=t,
        quad=quad,
        rank=rank,
        dependencies=deps,
        inconsistent=bad_d,
        not_estimable=bad_e,
        singular=bad_v,
        exact=exact,
    )
