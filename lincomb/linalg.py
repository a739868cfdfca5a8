"""Linear-algebra core: least squares, rank, restrictions and Wald statistics from R factors.

This module knows nothing of names, formulas or pandas.  It works on plain float64 arrays and
is the only place where factorizations happen.  Everything the later stages need is derived
from a small *moment* object (the sufficient statistics of a weighted least-squares problem):

* the number of rows ``n`` and the sum of weights ``W``;
* the weighted column means (only when the design holds an intercept column, see below);
* the upper-triangular factor ``R`` of the centred, ``sqrt(w)``-scaled ``[X y]``.

Once those exist, no step costs anything that grows with ``n``.  Moments of two row blocks
merge exactly (:func:`merge_moments`), which is what chunked and distributed fits use.

Coordinates
-----------
The user's coefficients ``β`` (length ``p``) are mapped to *working* coordinates ``u`` in which
all computations happen:

1. If column ``k`` is an intercept (all entries equal to one nonzero constant), every other
   column ``j`` is centred on its weighted mean ``m_j``.  The intercept then absorbs the offset:
   ``u_k = β_k + Σ_j m_j β_j``.  A large common offset (values near 1e12 that vary in the
   10th digit) therefore costs no accuracy beyond what the float64 input holds.
2. Every other column is scaled to unit (centred, weighted) norm: ``u_j = s_j β_j``.  This makes
   the rank decision independent of the units of each column.

A row ``c`` of ``C`` maps to ``c_u = c T⁻¹ S⁻¹`` (see :meth:`Solution.to_working`), which keeps
``c·β = c_u·u`` exactly.

Rank
----
The centred, scaled ``R`` is refactored by a column-pivoted QR (LAPACK ``geqp3``).  Column ``j``
is *aliased* when the diagonal entry it receives is at most ``rank_tol`` (default
:data:`RANK_TOL` = 1e-10) times the largest one; since each column has unit norm, this says that
the part of the column not explained by the intercept and the columns chosen before it has at
most ``rank_tol`` of the column's own norm.  A non-intercept column whose centred norm is at most
``rank_tol`` times its raw norm is constant to working precision and aliased with the intercept.

Restrictions
------------
Rows of ``C`` are checked in order: a row is *redundant* when its (row-normalized) distance to
the span of the independent rows before it is at most ``row_tol`` (default :data:`ROW_TOL` =
1e-9); redundant rows must carry the ``d`` implied by the rows they depend on (relative
tolerance ``row_tol``) or the system is inconsistent.  A row is *estimable* when its component in
the null space of the design is at most ``row_tol`` times its norm (both in working coordinates).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla
from numpy.typing import NDArray

__all__ = [
    "RANK_TOL",
    "ROW_TOL",
    "Moments",
    "Solution",
    "RowAnalysis",
    "WaldCore",
    "moments_from_arrays",
    "merge_moments",
    "solve",
    "analyze_rows",
    "wald_from_root",
    "restricted_step",
    "triangular_factor",
]

Array = NDArray[np.float64]

#: Relative tolerance for the rank of the design (see the module notes).
RANK_TOL: float = 1e-10
#: Relative tolerance for redundant / inconsistent / non-estimable restriction rows.
ROW_TOL: float = 1e-9


def triangular_factor(a: Array) -> Array:
    """Return the square upper-triangular ``R`` of ``a = Q R`` without forming ``Q``.

    Parameters
    ----------
    a : (M, N) array_like
        Matrix to factor.  It is not modified.

    Returns
    -------
    r : (N, N) ndarray
        Upper triangular; rows past ``M`` are zero when ``M < N``.

    Notes
    -----
    Householder QR (LAPACK ``geqrf``); ``Q`` is never accumulated.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.arange(12.0).reshape(4, 3) + np.eye(4, 3)
    >>> r = triangular_factor(a)
    >>> bool(np.allclose(r.T @ r, a.T @ a))
    True
    """
    a = np.array(a, dtype=np.float64, order="F", copy=True)
    m, n = a.shape
    if m == 0:
        return np.zeros((n, n))
    qr, _tau, _work, info = sla.lapack.dgeqrf(a, overwrite_a=1)
    if info != 0:  # pragma: no cover - LAPACK argument error
        raise RuntimeError(f"LAPACK dgeqrf failed with info={info}")
    r = np.zeros((n, n))
    k = min(m, n)
    r[:k] = np.triu(qr[:k])
    return r


@dataclass(frozen=True)
class Moments:
    """Sufficient statistics of a weighted least-squares problem (see the module notes).

    Attributes
    ----------
    n : int
        Number of rows.
    weight_sum : float
        Sum of the weights (``n`` when unweighted).
    intercept : int or None
        Index of the intercept column of ``X``, or None.
    center : (p + 1,) ndarray
        Weighted means of the columns of ``[X y]`` when there is an intercept (0 at the
        intercept's own position), zeros otherwise.
    raw_norm : (p + 1,) ndarray
        Weighted norms of the uncentred columns of ``[X y]``.
    r : (q + 1, q + 1) ndarray
        Triangular factor of the centred, ``sqrt(w)``-scaled non-intercept columns and ``y``
        (``q = p - 1`` with an intercept, ``p`` without).
    """

    n: int
    weight_sum: float
    intercept: int | None
    center: Array
    raw_norm: Array
    r: Array

    @property
    def p(self) -> int:
        return self.center.shape[0] - 1

    @property
    def others(self) -> NDArray[np.intp]:
        """Indices of the non-intercept columns of ``X`` (the order used in ``r``)."""
        idx = np.arange(self.p)
        return idx if self.intercept is None else np.delete(idx, self.intercept)


def _weighted_mean(a: Array, w: Array | None) -> Array:
    if w is None:
        return a.mean(axis=0)
    return (w @ a) / w.sum()


def moments_from_arrays(
    x: Array, y: Array, w: Array | None = None, intercept: int | None = None
) -> Moments:
    """Factor one block of rows into :class:`Moments`.

    Parameters
    ----------
    x : (n, p) ndarray
        Design.  Not modified.
    y : (n,) ndarray
        Response.  Not modified.
    w : (n,) ndarray or None
        Positive weights (validated by the caller).
    intercept : int or None
        Index of the intercept column; others are centred on their weighted means.

    Returns
    -------
    Moments

    Notes
    -----
    Centring is done in two passes (the mean of the once-centred data is removed again), so the
    centred columns are orthogonal to the intercept to working precision even when the offset is
    huge.  The factor is computed by :func:`triangular_factor`.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.column_stack([np.ones(4), [1.0, 2, 3, 5]])
    >>> m = moments_from_arrays(x, np.array([1.0, 2, 2, 4]), intercept=0)
    >>> m.n, float(m.center[1])
    (4, 2.75)
    """
    n, p = x.shape
    cols = np.arange(p) if intercept is None else np.delete(np.arange(p), intercept)
    a = np.empty((n, cols.size + 1), order="F")
    a[:, :-1] = x[:, cols]
    a[:, -1] = y
    center = np.zeros(p + 1)
    raw_sq = np.einsum("ij,ij->j", a, a) if w is None else w @ (a * a)
    raw_norm = np.zeros(p + 1)
    raw_norm[np.append(cols, p)] = np.sqrt(raw_sq)
    wsum = float(n if w is None else w.sum())
    if intercept is not None:
        raw_norm[intercept] = np.sqrt(wsum) * abs(float(x[0, intercept]))
        if n > 0:
            m1 = _weighted_mean(a, w)
            a -= m1
            m2 = _weighted_mean(a, w)
            a -= m2
            center[np.append(cols, p)] = m1 + m2
    if w is not None:
        a *= np.sqrt(w)[:, None]
    return Moments(
        n=n,
        weight_sum=wsum,
        intercept=intercept,
        center=center,
        raw_norm=raw_norm,
        r=triangular_factor(a),
    )


def merge_moments(a: Moments, b: Moments) -> Moments:
    """Combine the moments of two disjoint row blocks into those of their union.

    Exact up to rounding: the centred factors are stacked with the between-block correction row
    ``sqrt(W_a W_b / W) (m_a - m_b)`` and refactored by QR (never by normal equations).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(50), rng.normal(size=(50, 2))]); y = rng.normal(size=50)
    >>> whole = moments_from_arrays(x, y, intercept=0)
    >>> parts = merge_moments(moments_from_arrays(x[:20], y[:20], intercept=0),
    ...                       moments_from_arrays(x[20:], y[20:], intercept=0))
    >>> bool(np.allclose(parts.r.T @ parts.r, whole.r.T @ whole.r))
    True
    """
    if a.intercept != b.intercept or a.center.shape != b.center.shape:
        raise ValueError("moments describe different designs (intercept or column count differ)")
    wsum = a.weight_sum + b.weight_sum
    blocks = [a.r, b.r]
    center = a.center
    if a.intercept is not None and wsum > 0:
        cols = np.append(a.others, a.p)
        diff = a.center[cols] - b.center[cols]
        blocks.append(np.sqrt(a.weight_sum * b.weight_sum / wsum) * diff[None, :])
        center = (a.weight_sum * a.center + b.weight_sum * b.center) / wsum
    raw_norm = np.sqrt(a.raw_norm**2 + b.raw_norm**2)
    return Moments(
        n=a.n + b.n,
        weight_sum=wsum,
        intercept=a.intercept,
        center=center,
        raw_norm=raw_norm,
        r=triangular_factor(np.vstack(blocks)),
    )


@dataclass(frozen=True)
class Solution:
    """A least-squares solution with its rank decision, in working coordinates.

    Attributes
    ----------
    p : int
        Number of columns of the design.
    n : int
        Number of rows.
    rank : int
        Numerical rank of the design (intercept included).
    kept : (rank,) ndarray of int
        Original column indices of the working coordinates, in working order.
    aliased : (p - rank,) ndarray of int
        Original column indices of the aliased columns.
    r : (rank, rank) ndarray
        Upper-triangular factor of the kept working columns.
    theta : (rank,) ndarray
        Working coefficients of the kept columns.
    rss : float
        Weighted residual sum of squares.
    scale : (p,) ndarray
        Column scales ``s_j`` (1 at the intercept).
    center : (p,) ndarray
        Column means used for centring (0 at the intercept, all 0 without one).
    intercept : int or None
        Index of the intercept column.
    null_basis : (p, p - rank) ndarray
        Orthonormal basis of the design's null space, in working coordinates.
    null_vectors : (p, p - rank) ndarray
        One null vector per aliased column (its own entry is one), in working coordinates.
    y_norm : float
        Weighted norm of the centred response (for deciding that an RSS is zero).
    """

    p: int
    n: int
    rank: int
    kept: NDArray[np.intp]
    aliased: NDArray[np.intp]
    r: Array
    theta: Array
    rss: float
    scale: Array
    center: Array
    intercept: int | None
    null_basis: Array
    null_vectors: Array
    y_norm: float
    weight_sum: float = field(default=0.0)

    @property
    def df_resid(self) -> int:
        return self.n - self.rank

    def to_working(self, c: Array) -> Array:
        """Map rows of ``C`` (m, p) on ``β`` to working coordinates ``u`` (all p columns)."""
        c = np.asarray(c, dtype=np.float64)
        cu = c.copy()
        if self.intercept is not None:
            cu -= c[..., [self.intercept]] * self.center
        return cu / self.scale

    def coefficients(self) -> Array:
        """Basic solution ``β`` (aliased entries are NaN)."""
        u = np.zeros(self.p)
        u[self.kept] = self.theta
        beta = u / self.scale
        if self.intercept is not None:
            beta[self.intercept] -= self.center @ beta
        beta[self.aliased] = np.nan
        return beta

    def root(self, cu_kept: Array) -> Array:
        """``R⁻ᵀ C_keptᵀ``: the classical covariance of ``Cβ̂`` is ``σ² rootᵀ root``."""
        if self.rank == 0:
            return np.zeros((0, cu_kept.shape[0]))
        return sla.solve_triangular(self.r, cu_kept.T, trans="T", check_finite=False)

    def estimability_residual(self, cu: Array) -> Array:
        """Relative size of each row's component in the null space (0 = estimable)."""
        if self.null_basis.shape[1] == 0:
            return np.zeros(cu.shape[0])
        norms = np.linalg.norm(cu, axis=1)
        res = np.linalg.norm(cu @ self.null_basis, axis=1)
        return np.divide(res, norms, out=np.zeros_like(res), where=norms > 0)

    def aliased_touched(self, cu_row: Array, tol: float) -> list[int]:
        """Aliased columns whose null direction a non-estimable row does not annihilate."""
        nv = self.null_vectors
        proj = cu_row @ nv / (np.linalg.norm(nv, axis=0) * max(np.linalg.norm(cu_row), 1e-300))
        return [int(self.aliased[i]) for i in np.flatnonzero(np.abs(proj) > tol)]


def solve(m: Moments, rank_tol: float = RANK_TOL) -> Solution:
    """Decide the rank and solve the least-squares problem held in ``m``.

    Parameters
    ----------
    m : Moments
    rank_tol : float, default :data:`RANK_TOL`
        Relative rank tolerance (see the module notes).

    Returns
    -------
    Solution

    Notes
    -----
    The small factor ``R`` (not the data) is refactored by column-pivoted QR (``geqp3``); the
    rotated response gives the coefficients by one triangular solve and the residual sum of
    squares is the squared norm of what is left, including the response's components along
    numerically null directions.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.column_stack([np.ones(6), [0.0, 1, 2, 3, 4, 5], [0.0, 2, 4, 6, 8, 10]])
    >>> sol = solve(moments_from_arrays(x, np.array([1.0, 3, 2, 5, 4, 6]), intercept=0))
    >>> sol.rank, sol.aliased.tolist()
    (2, [2])
    """
    p = m.p
    others = m.others
    q = others.size
    rx = m.r[:q, :q]
    qty = m.r[:q, q]
    ryy = float(m.r[q, q])
    y_norm = float(np.hypot(np.linalg.norm(qty), ryy))
    col_norm = np.linalg.norm(rx, axis=0)
    raw = m.raw_norm[others]
    # constant-to-working-precision columns are aliased with the intercept (module notes)
    live = col_norm > rank_tol * np.maximum(raw, np.finfo(float).tiny)
    scale_o = np.where(live, col_norm, 1.0)
    rs = rx / scale_o
    rs[:, ~live] = 0.0
    if q:
        q2, r2, piv = sla.qr(rs, pivoting=True, check_finite=False)
        diag = np.abs(np.diag(r2))
        top = diag[0] if diag.size else 0.0
        rank_o = int(np.count_nonzero(diag > rank_tol * top)) if top > 0 else 0
        z = q2.T @ qty
    else:
        r2 = np.zeros((0, 0))
        piv = np.zeros(0, dtype=np.intp)
        rank_o = 0
        z = np.zeros(0)
    rss = ryy**2 + float(z[rank_o:] @ z[rank_o:])
    r11 = r2[:rank_o, :rank_o]
    r12 = r2[:rank_o, rank_o:]
    z1 = z[:rank_o]

    scale = np.ones(p)
    scale[others] = scale_o
    center = np.zeros(p)
    if m.intercept is not None:
        center[others] = m.center[others]
    kept_o = others[piv[:rank_o]]
    alias_o = others[piv[rank_o:]]
    if m.intercept is not None:
        rw = np.sqrt(m.weight_sum)
        rfull = np.zeros((rank_o + 1, rank_o + 1))
        rfull[0, 0] = rw
        rfull[1:, 1:] = r11
        zfull = np.concatenate([[rw * m.center[p]], z1])
        kept = np.concatenate([[m.intercept], kept_o]).astype(np.intp)
    else:
        rfull, zfull, kept = r11, z1, kept_o.astype(np.intp)
    theta = sla.solve_triangular(rfull, zfull, check_finite=False) if kept.size else np.zeros(0)
    # null space: u_alias free, u_kept_o = -R11⁻¹ R12 u_alias (intercept rows stay zero)
    n_alias = alias_o.size
    null_vectors = np.zeros((p, n_alias))
    if n_alias:
        coef = (
            -sla.solve_triangular(r11, r12, check_finite=False)
            if rank_o
            else np.zeros((0, n_alias))
        )
        null_vectors[kept_o, :] = coef
        null_vectors[alias_o, np.arange(n_alias)] = 1.0
        null_basis = np.linalg.qr(null_vectors)[0]
    else:
        null_basis = null_vectors
    return Solution(
        p=p,
        n=m.n,
        rank=int(kept.size),
        kept=kept,
        aliased=alias_o.astype(np.intp),
        r=rfull,
        theta=theta,
        rss=float(rss),
        scale=scale,
        center=center,
        intercept=m.intercept,
        null_basis=null_basis,
        null_vectors=null_vectors,
        y_norm=y_norm,
        weight_sum=m.weight_sum,
    )


@dataclass(frozen=True)
class RowAnalysis:
    """Which rows of a restriction system are independent, and how the others depend on them.

    Attributes
    ----------
    independent : (q,) ndarray of int
        Rows kept, in order; ``q`` is the rank of ``C``.
    dependencies : dict
        ``{row: {independent_row: weight}}`` for each redundant row:
        ``C[row] = Σ weight · C[independent_row]``.
    inconsistent : list of tuple
        ``(row, d[row], implied)`` for redundant rows whose ``d`` differs from the implied value.
    """

    independent: NDArray[np.intp]
    dependencies: dict[int, dict[int, float]]
    inconsistent: list[tuple[int, float, float]]


def analyze_rows(cu: Array, d: Array, tol: float = ROW_TOL) -> RowAnalysis:
    """Split the rows of ``C`` into independent and redundant ones, in the order given.

    Parameters
    ----------
    cu : (m, p) ndarray
        Rows of ``C`` (working coordinates are best: they are unit free).
    d : (m,) ndarray
    tol : float, default :data:`ROW_TOL`

    Notes
    -----
    Greedy Gram–Schmidt with reorthogonalization on the row-normalized ``C``: a row is redundant
    when what is left after projecting it on the kept rows is at most ``tol`` of its norm.  Its
    weights on the kept rows come from a least-squares solve.  Cost is O(m² p).

    Examples
    --------
    >>> import numpy as np
    >>> c = np.array([[1.0, 0, 0], [0, 1, 0], [1, 1, 0]])
    >>> a = analyze_rows(c, np.array([1.0, 2, 3]))
    >>> a.independent.tolist(), a.dependencies, a.inconsistent
    ([0, 1], {2: {0: 1.0, 1: 1.0}}, [])
    """
    m = cu.shape[0]
    norms = np.linalg.norm(cu, axis=1)
    basis: list[Array] = []
    kept: list[int] = []
    deps: dict[int, dict[int, float]] = {}
    bad: list[tuple[int, float, float]] = []
    for i in range(m):
        v = cu[i] / norms[i] if norms[i] > 0 else cu[i]
        resid = v
        if basis:
            qb = np.array(basis)
            resid = v - qb.T @ (qb @ v)
            resid = resid - qb.T @ (qb @ resid)
        rn = float(np.linalg.norm(resid))
        if norms[i] > 0 and rn > tol:
            basis.append(resid / rn)
            kept.append(i)
            continue
        if kept:
            w, *_ = np.linalg.lstsq(cu[kept].T, cu[i], rcond=None)
        else:
            w = np.zeros(0)
        deps[i] = {k: float(wk) for k, wk in zip(kept, w, strict=True)}
        implied = float(w @ d[kept]) if kept else 0.0
        size = max(abs(float(d[i])), float(np.abs(w) @ np.abs(d[kept])) if kept else 0.0)
        if abs(float(d[i]) - implied) > tol * size:
            bad.append((i, float(d[i]), implied))
    return RowAnalysis(np.array(kept, dtype=np.intp), deps, bad)


@dataclass(frozen=True)
class WaldCore:
    """Numbers of a Wald test, before names are attached.

    ``estimate``, ``std_error`` and ``statistic_rows`` cover every row (redundant ones too);
    ``statistic`` is the F (or chi-squared, if ``scale`` is fixed) over the independent rows.
    """

    estimate: Array
    std_error: Array
    statistic_rows: Array
    quad: float
    rank: int
    chol: Array
    independent: NDArray[np.intp]


def wald_from_root(delta: Array, root: Array, independent: NDArray[np.intp]) -> WaldCore:
    """Quadratic form ``δ_Kᵀ (Vᵀ V)⁻¹ δ_K`` over the independent rows ``K`` of a system.

    Parameters
    ----------
    delta : (m,) ndarray
        ``Cβ̂ - d``.
    root : (k, m) ndarray
        A matrix ``V`` with ``Cov(Cβ̂) = Vᵀ V`` (scale included).
    independent : (q,) ndarray of int
        Rows to use (from :func:`analyze_rows`).

    Notes
    -----
    ``Vᵀ V`` is never formed: the QR of ``V_K`` gives its Cholesky factor, and the form is the
    squared norm of one triangular solve.

    Examples
    --------
    >>> import numpy as np
    >>> w = wald_from_root(np.array([2.0]), np.array([[2.0]]), np.array([0]))
    >>> w.quad, w.std_error.tolist()
    (1.0, [2.0])
    """
    se = np.linalg.norm(root, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        stat = np.where(se > 0, delta / np.where(se > 0, se, 1.0), np.nan)
    vk = root[:, independent]
    chol = triangular_factor(vk)
    q = independent.size
    if q:
        sol = sla.solve_triangular(chol, delta[independent], trans="T", check_finite=False)
        quad = float(sol @ sol)
    else:
        quad = 0.0
    return WaldCore(
        estimate=delta,
        std_error=se,
        statistic_rows=stat,
        quad=quad,
        rank=q,
        chol=chol,
        independent=independent,
    )


def restricted_step(sol: Solution, root_k: Array, delta_k: Array) -> tuple[Array, Array]:
    """Change of working coefficients imposed by ``C_K u = d_K``, and the residual projector.

    Parameters
    ----------
    sol : Solution
    root_k : (rank, q) ndarray
        ``R⁻ᵀ C_Kᵀ`` (classical, unscaled) for the independent rows.
    delta_k : (q,) ndarray
        ``C_K β̂ - d_K``.

    Returns
    -------
    step : (rank,) ndarray
        ``θ_r - θ̂ = -R⁻¹ Q_V R_V⁻ᵀ δ``.
    w : (rank, rank - q) ndarray
        ``R⁻¹ Q_⊥`` so that the restricted covariance is ``σ² W Wᵀ``.

    Notes
    -----
    With ``V = Q_V R_V`` (full QR), ``V (VᵀV)⁻¹ δ = Q_V R_V⁻ᵀ δ`` and the restricted
    covariance is ``R⁻¹ (I - Q_V Q_Vᵀ) R⁻ᵀ``; only triangular solves are used.
    """
    q = delta_k.size
    qv, rv = np.linalg.qr(root_k, mode="complete")
    rv = rv[:q]
    g = sla.solve_triangular(rv, delta_k, trans="T", check_finite=False)
    step = -sla.solve_triangular(sol.r, qv[:, :q] @ g, check_finite=False)
    w = sla.solve_triangular(sol.r, qv[:, q:], check_finite=False)
    return step, w
