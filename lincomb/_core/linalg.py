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

1. If column ``k`` is an intercept (all entries equal to one), every other
   column ``j`` is centred on its weighted mean ``m_j``.  The intercept then absorbs the offset:
   ``u_k = β_k + Σ_j m_j β_j``.  A large common offset (values near 1e12 that vary in the
   10th digit) therefore costs no accuracy beyond what the float64 input holds.
2. Every other column is scaled to unit (centred, weighted) norm: ``u_j = s_j β_j``.  This makes
   the rank decision independent of the units of each column.

A row ``c`` of ``C`` maps to ``c_u = c T⁻¹ S⁻¹`` (see :meth:`Solution.to_working`), which keeps
``c·β = c_u·u`` exactly.

Rank
----
Columns of the centred, scaled ``R`` are taken in design order (a greedy Gram-Schmidt with
reorthogonalization on the small factor).  Column ``j`` is *aliased* when the part of it not
explained by the intercept and the kept columns before it has at most ``rank_tol`` (default
:data:`RANK_TOL` = 1e-10) of the column's own (unit) norm.  So of a set of dependent columns the
last one in design order is aliased, and which one does not depend on rounding.  The kept columns,
then the aliased ones, are refactored by QR.  A non-intercept column whose centred norm is at most
:data:`CONSTANT_TOL` (64 machine epsilons, about 1.4e-14) times its raw norm varies only in its
last bits: it is constant to working precision and aliased with the intercept.  This threshold is
tied to float64 itself rather than to ``rank_tol``, so a column near 1e12 that varies by units
(four significant digits of real variation) is kept and fitted to the accuracy its values hold.

Restrictions
------------
Rows of ``C`` are checked in order: a row is *redundant* when its (row-normalized) distance to
the span of the independent rows before it is at most ``row_tol`` (default :data:`ROW_TOL` =
1e-9); redundant rows must carry the ``d`` implied by the rows they depend on (relative
tolerance ``row_tol``) or the system is inconsistent.  A row is *estimable* when its component in
the null space of the design is at most ``row_tol`` times its norm (both in working coordinates).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla
from numpy.typing import NDArray

from lincomb._settings import blas_limit, can_limit

__all__ = [
    "RANK_TOL",
    "CONSTANT_TOL",
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
    "upper_solve",
    "ResponseBlock",
    "DesignFactor",
    "factor_design",
    "solve_responses",
    "wald_quadratic_forms",
]

Array = NDArray[np.float64]

#: Relative tolerance for the rank of the design (see the module notes).
RANK_TOL: float = 1e-10
#: A centred column norm at most this fraction of the raw norm means "constant" (module notes).
CONSTANT_TOL: float = 64 * float(np.finfo(np.float64).eps)
#: Relative tolerance for redundant / inconsistent / non-estimable restriction rows.
ROW_TOL: float = 1e-9


def upper_solve(r: Array, b: Array, *, trans: bool = False) -> Array:
    """``R⁻¹ b`` (``R⁻ᵀ b`` with ``trans``) for a square upper-triangular ``R``.

    Parameters
    ----------
    r : (k, k) ndarray
        Upper triangular (entries below the diagonal are ignored).
    b : (k,) or (k, N) ndarray
    trans : bool, default False

    Raises
    ------
    numpy.linalg.LinAlgError
        A zero on the diagonal of ``R``.

    Notes
    -----
    BLAS ``trsm`` (forward or back substitution), the same arithmetic as
    ``scipy.linalg.solve_triangular`` (LAPACK ``trtrs``).  OpenBLAS runs its ``trtrs`` on all
    its threads whatever the size: with every core busy, one solve with three right-hand sides
    then waits milliseconds for a thread (median 40 ms measured on two shared cores), while
    ``trsm`` keeps small solves on the calling thread (2 µs).

    Examples
    --------
    >>> import numpy as np
    >>> r = np.array([[2.0, 1.0], [0.0, 4.0]])
    >>> x = upper_solve(r, np.array([1.0, 2.0]), trans=True)
    >>> bool(np.allclose(r.T @ x, [1.0, 2.0]))
    True
    """
    if np.any(np.diagonal(r) == 0):
        i = int(np.flatnonzero(np.diagonal(r) == 0)[0])
        raise np.linalg.LinAlgError(f"singular matrix: zero at diagonal {i}")
    vec = b.ndim == 1
    b2 = b[:, None] if vec else b
    if b2.size == 0:
        return np.zeros(b.shape)
    x = sla.blas.dtrsm(1.0, r, b2, trans_a=int(trans))
    return x[:, 0] if vec else x


def triangular_factor(a: Array, *, overwrite_a: bool = False) -> Array:
    """Return the square upper-triangular ``R`` of ``a = Q R`` without forming ``Q``.

    Parameters
    ----------
    a : (M, N) array_like
        Matrix to factor.  It is not modified, unless ``overwrite_a``.
    overwrite_a : bool, default False
        Allow a float64 ndarray ``a`` to be used as LAPACK's work array (its contents are then
        destroyed); saves a copy when ``a`` is already Fortran-ordered.

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
    if not (overwrite_a and isinstance(a, np.ndarray) and a.dtype == np.float64):
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

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
    >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
    >>> m = moments_from_arrays(x, y, intercept=0)
    >>> m.n, m.p, m.others.tolist(), m.r.shape
    (20, 3, [1, 2], (3, 3))
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


#: Rows per block when a row-ordered design is copied into the column-ordered work array.
_COPY_ROWS = 1024
#: Rows per block when a tall design is factored block by block (see moments_from_arrays).
_QR_ROWS = 8192
#: Designs this wide or wider are factored in one block (merging wide blocks costs more).
_QR_MAX_COLS = 128


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

    Called on the main thread with at least ``2 * _QR_ROWS`` rows, fewer than ``_QR_MAX_COLS``
    columns and threadpoolctl installed, blocks of ``_QR_ROWS`` rows are factored one by one on
    one BLAS thread, centred on a common shift and then on their own means, and merged by
    :func:`merge_moments` in a balanced tree: each block is copied, centred and factored while
    it is in cache, and no work array of the whole design is allocated.  The result equals the
    one-block factor up to rounding; at n = 2,000,000, p = 20 it took 0.30 s against 0.63 s
    for one block on two busy cores.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.column_stack([np.ones(4), [1.0, 2, 3, 5]])
    >>> m = moments_from_arrays(x, np.array([1.0, 2, 2, 4]), intercept=0)
    >>> m.n, float(m.center[1])
    (4, 2.75)
    """
    n, p = x.shape
    # only on the main thread: limits set and restored by concurrent threads race (a thread's
    # restore can be lost and leave the process on one BLAS thread)
    on_main = threading.current_thread() is threading.main_thread()
    if not (n >= 2 * _QR_ROWS and p < _QR_MAX_COLS and on_main and can_limit()):
        return _moments_block(x, y, w, intercept)
    # Blocks are centred on a common shift (the means of the first block) before their own
    # two-pass centring, so the block means, and the between-block rows of the merges, are of
    # the spread of the data and not of its offset: large offsets cost no accuracy.
    kept = np.arange(p + 1) if intercept is None else np.delete(np.arange(p + 1), intercept)
    shift = None
    if intercept is not None:
        shift = np.append(x[:_QR_ROWS].mean(axis=0), y[:_QR_ROWS].mean())[kept]
    with blas_limit(1):
        parts = [
            _moments_block(
                x[s : s + _QR_ROWS],
                y[s : s + _QR_ROWS],
                None if w is None else w[s : s + _QR_ROWS],
                intercept,
                shift,
            )
            for s in range(0, n, _QR_ROWS)
        ]
        while len(parts) > 1:
            pairs = range(0, len(parts) - 1, 2)
            merged = [merge_moments(parts[i], parts[i + 1]) for i in pairs]
            parts = merged + parts[len(merged) * 2 :]
    m = parts[0]
    if shift is None:
        return m
    center = m.center.copy()
    center[kept] += shift
    raw_norm = m.raw_norm.copy()
    raw_norm[kept] = np.sqrt(np.einsum("ij,ij->j", m.r, m.r) + m.weight_sum * center[kept] ** 2)
    return Moments(
        n=m.n,
        weight_sum=m.weight_sum,
        intercept=intercept,
        center=center,
        raw_norm=raw_norm,
        r=m.r,
    )


def _moments_block(
    x: Array, y: Array, w: Array | None, intercept: int | None, shift: Array | None = None
) -> Moments:
    """:func:`moments_from_arrays` on one block of rows, with one work array.

    With ``shift`` (one value per centred column and the response), the block is centred on
    ``shift`` first: ``center`` and ``raw_norm`` then describe the shifted data.
    """
    n, p = x.shape
    cols = np.arange(p) if intercept is None else np.delete(np.arange(p), intercept)
    q = cols.size
    # one Fortran-ordered work array, filled from column slices (fancy indexing would make a
    # full temporary), centred and scaled in place, then factored in place.  A row-ordered x is
    # transposed into it in blocks of rows that stay in cache (a third faster than one pass).
    a = np.empty((n, q + 1), order="F")
    step = _COPY_ROWS if x.flags.c_contiguous else max(n, 1)
    for s in range(0, n, step):
        rows = slice(s, s + step)
        if intercept is None:
            a[rows, :q] = x[rows]
        else:
            a[rows, :intercept] = x[rows, :intercept]
            a[rows, intercept:q] = x[rows, intercept + 1 :]
    a[:, q] = y
    center = np.zeros(p + 1)
    wsum = float(n if w is None else w.sum())
    if intercept is not None and n > 0:
        if shift is not None:
            a -= shift
        m1 = _weighted_mean(a, w)
        a -= m1
        m2 = _weighted_mean(a, w)
        a -= m2
        center[np.append(cols, p)] = m1 + m2
    if w is not None:
        a *= np.sqrt(w)[:, None]
    r = triangular_factor(a, overwrite_a=True)
    # raw (uncentred) norms without another pass over the data: the column norms of R are
    # the centred norms, and the weighted centred columns sum to zero, so
    # Σ w x² = Σ w (x - m)² + W m²
    raw_norm = np.zeros(p + 1)
    kept = np.append(cols, p)
    raw_norm[kept] = np.sqrt(np.einsum("ij,ij->j", r, r) + wsum * center[kept] ** 2)
    if intercept is not None:
        raw_norm[intercept] = np.sqrt(wsum) * abs(float(x[0, intercept]))
    return Moments(
        n=n,
        weight_sum=wsum,
        intercept=intercept,
        center=center,
        raw_norm=raw_norm,
        r=r,
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

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
    >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
    >>> sol = solve(moments_from_arrays(x, y, intercept=0))
    >>> reference = np.linalg.lstsq(x, y, rcond=None)[0]
    >>> bool(np.allclose(sol.coefficients(), reference)), sol.rank, sol.df_resid
    (True, 3, 17)
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
        """Map rows of ``C`` (m, p) on ``β`` to working coordinates ``u`` (all p columns).

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(0)
        >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
        >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
        >>> sol = solve(moments_from_arrays(x, y, intercept=0))
        >>> c = np.array([[0.0, 1.0, -1.0], [1.0, 0.5, 0.0]])
        >>> u = np.zeros(3)
        >>> u[sol.kept] = sol.theta
        >>> bool(np.allclose(sol.to_working(c) @ u, c @ sol.coefficients()))
        True
        """
        c = np.asarray(c, dtype=np.float64)
        cu = c.copy()
        if self.intercept is not None:
            cu -= c[..., [self.intercept]] * self.center
        return cu / self.scale

    def coefficients(self) -> Array:
        """Basic solution ``β`` (aliased entries are NaN).

        Examples
        --------
        >>> import numpy as np
        >>> a = np.array([1.0, 1, 0, 0, 0, 0])
        >>> x = np.column_stack([np.ones(6), a, 1 - a, [1.0, 2, 3, 4, 5, 7]])
        >>> sol = solve(moments_from_arrays(x, np.arange(6.0) ** 1.5, intercept=0))
        >>> np.isnan(sol.coefficients()).tolist()
        [False, False, True, False]
        """
        beta = self.from_working(self.theta)
        beta[self.aliased] = np.nan
        return beta

    def from_working(self, theta: Array) -> Array:
        """Map working coefficients of the kept columns back to ``β`` (``A θ``, ``A = T⁻¹ S⁻¹``).

        ``theta`` is ``(rank,)`` or ``(rank, k)`` (one column each); aliased rows of the result
        are zero.  Used for the coefficients, restricted coefficients and their covariance
        factor, and many responses at once.

        Examples
        --------
        >>> import numpy as np
        >>> x = np.column_stack([np.ones(5), [0.0, 1, 2, 3, 5]])
        >>> sol = solve(moments_from_arrays(x, np.array([1.0, 2, 2, 4, 5]), intercept=0))
        >>> bool(np.allclose(sol.from_working(sol.theta), np.linalg.lstsq(x, [1, 2, 2, 4, 5])[0]))
        True
        """
        theta = np.asarray(theta, dtype=np.float64)
        u = np.zeros((self.p, *theta.shape[1:]))
        u[self.kept] = theta
        beta = u / self.scale.reshape(-1, *([1] * (theta.ndim - 1)))
        if self.intercept is not None:
            beta[self.intercept] -= self.center @ beta
        return beta

    def root(self, cu_kept: Array) -> Array:
        """``R⁻ᵀ C_keptᵀ``: the classical covariance of ``Cβ̂`` is ``σ² rootᵀ root``.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(0)
        >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
        >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
        >>> sol = solve(moments_from_arrays(x, y, intercept=0))
        >>> c = np.array([[0.0, 1.0, -1.0]])
        >>> root = sol.root(sol.to_working(c)[:, sol.kept])
        >>> bool(np.allclose(root.T @ root, c @ np.linalg.solve(x.T @ x, c.T)))
        True
        """
        if self.rank == 0:
            return np.zeros((0, cu_kept.shape[0]))
        return upper_solve(self.r, cu_kept.T, trans=True)

    def estimability_residual(self, cu: Array) -> Array:
        """Relative size of each row's component in the null space (0 = estimable).

        Examples
        --------
        >>> import numpy as np
        >>> a = np.array([1.0, 1, 0, 0, 0, 0])
        >>> x = np.column_stack([np.ones(6), a, 1 - a, [1.0, 2, 3, 4, 5, 7]])  # a + b = 1
        >>> sol = solve(moments_from_arrays(x, np.arange(6.0) ** 1.5, intercept=0))
        >>> c = np.array([[0.0, 1, -1, 0], [0.0, 1, 0, 0]])  # a - b is estimable, a is not
        >>> (sol.estimability_residual(sol.to_working(c)) > ROW_TOL).tolist()
        [False, True]
        """
        if self.null_basis.shape[1] == 0:
            return np.zeros(cu.shape[0])
        norms = np.linalg.norm(cu, axis=1)
        res = np.linalg.norm(cu @ self.null_basis, axis=1)
        return np.divide(res, norms, out=np.zeros_like(res), where=norms > 0)

    def aliased_touched(self, cu_row: Array, tol: float) -> list[int]:
        """Aliased columns whose null direction a non-estimable row does not annihilate.

        Examples
        --------
        >>> import numpy as np
        >>> a = np.array([1.0, 1, 0, 0, 0, 0])
        >>> x = np.column_stack([np.ones(6), a, 1 - a, [1.0, 2, 3, 4, 5, 7]])  # a + b = 1
        >>> sol = solve(moments_from_arrays(x, np.arange(6.0) ** 1.5, intercept=0))
        >>> sol.aliased_touched(sol.to_working(np.array([0.0, 1, 0, 0])), ROW_TOL)
        [2]
        """
        nv = self.null_vectors
        proj = cu_row @ nv / (np.linalg.norm(nv, axis=0) * max(np.linalg.norm(cu_row), 1e-300))
        return [int(self.aliased[i]) for i in np.flatnonzero(np.abs(proj) > tol)]


def _ordered_columns(rs: Array, tol: float) -> tuple[NDArray[np.intp], int]:
    """Keep unit-norm columns in order while each adds more than ``tol`` outside the kept span.

    Returns the kept columns followed by the aliased ones (both in design order), and the rank.
    """
    basis = np.zeros(rs.shape)
    kept: list[int] = []
    dropped: list[int] = []
    for j in range(rs.shape[1]):
        b = basis[:, : len(kept)]
        v = rs[:, j]
        for _ in range(2):  # reorthogonalize once: classical Gram-Schmidt twice is enough
            v = v - b @ (b.T @ v)
        nv = float(np.linalg.norm(v))
        if nv > tol:
            basis[:, len(kept)] = v / nv
            kept.append(j)
        else:
            dropped.append(j)
    return np.array(kept + dropped, dtype=np.intp), len(kept)


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
    The small factor ``R`` (not the data) is refactored by QR, kept columns first; the
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
    live = col_norm > CONSTANT_TOL * np.maximum(raw, np.finfo(float).tiny)
    scale_o = np.where(live, col_norm, 1.0)
    rs = rx / scale_o
    rs[:, ~live] = 0.0
    if q:
        piv, rank_o = _ordered_columns(rs, rank_tol)
        q2, r2 = sla.qr(rs[:, piv], check_finite=False)
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
    theta = upper_solve(rfull, zfull) if kept.size else np.zeros(0)
    # null space: u_alias free, u_kept_o = -R11⁻¹ R12 u_alias (intercept rows stay zero)
    n_alias = alias_o.size
    null_vectors = np.zeros((p, n_alias))
    if n_alias:
        coef = -upper_solve(r11, r12) if rank_o else np.zeros((0, n_alias))
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

    Examples
    --------
    >>> import numpy as np
    >>> ra = analyze_rows(np.array([[1.0, 0], [0, 1], [1, 1]]), np.array([0.0, 1, 2]))
    >>> ra.independent.tolist(), ra.dependencies, ra.inconsistent
    ([0, 1], {2: {0: 1.0, 1: 1.0}}, [(2, 2.0, 1.0)])
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

    Examples
    --------
    >>> import numpy as np
    >>> core = wald_from_root(np.array([1.0, 2.0]), np.eye(2), np.array([0, 1]))
    >>> core.quad, core.rank, core.std_error.tolist()
    (5.0, 2, [1.0, 1.0])
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
        sol = upper_solve(chol, delta[independent], trans=True)
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

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
    >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
    >>> sol = solve(moments_from_arrays(x, y, intercept=0))
    >>> cu = sol.to_working(np.array([[0.0, 1.0, -1.0]]))[:, sol.kept]  # β1 - β2 = 3
    >>> step, w = restricted_step(sol, sol.root(cu), cu @ sol.theta - 3.0)
    >>> bool(np.allclose(cu @ (sol.theta + step), 3.0)), w.shape
    (True, (3, 2))
    """
    q = delta_k.size
    qv, rv = np.linalg.qr(root_k, mode="complete")
    rv = rv[:q]
    g = upper_solve(rv, delta_k, trans=True)
    step = -upper_solve(sol.r, qv[:, :q] @ g)
    w = upper_solve(sol.r, qv[:, q:])
    return step, w


# -- many responses sharing one design --------------------------------------------------------


@dataclass(frozen=True)
class ResponseBlock:
    """Sufficient statistics of several responses fitted on one shared design.

    With ``Q R`` the QR factorization of the centred, ``sqrt(w)``-scaled non-intercept design
    columns (see :class:`DesignFactor`), a response ``y`` is summarized by ``Qᵀ y_c`` (its first
    ``q`` entries) and the norm of the rest: exactly the last column of the :class:`Moments`
    factor of ``[X y]``.

    Attributes
    ----------
    qty : (q, r) ndarray
        First ``q`` rows of ``Qᵀ`` times the centred, scaled responses.
    resid : (r,) ndarray
        Norm of the remaining rows (the residual norm against all ``q`` columns).
    center : (r,) ndarray
        Weighted means of the responses (zeros without an intercept).
    raw_norm : (r,) ndarray
        Weighted norms of the uncentred responses.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
    >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
    >>> block = factor_design(x, intercept=0).project(np.column_stack([y, 2 * y, -y]))
    >>> block.count, block.qty.shape
    (3, (2, 3))
    """

    qty: Array
    resid: Array
    center: Array
    raw_norm: Array

    @property
    def count(self) -> int:
        return int(self.resid.shape[0])

    def take(self, cols: NDArray[np.intp]) -> ResponseBlock:
        """The responses at positions ``cols``.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(0)
        >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
        >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
        >>> block = factor_design(x, intercept=0).project(np.column_stack([y, 2 * y, 3 * y]))
        >>> part = block.take(np.array([2, 0]))
        >>> part.count, bool(np.isclose(part.resid[0], 3 * part.resid[1]))
        (2, True)
        """
        return ResponseBlock(
            self.qty[:, cols], self.resid[cols], self.center[cols], self.raw_norm[cols]
        )

    def finite(self) -> NDArray[np.bool_]:
        """Responses whose summaries are finite (a missing or infinite value propagates).

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(0)
        >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
        >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
        >>> bad = y.copy()
        >>> bad[3] = np.nan
        >>> factor_design(x, intercept=0).project(np.column_stack([y, bad])).finite().tolist()
        [True, False]
        """
        return (
            np.isfinite(self.resid)
            & np.isfinite(self.center)
            & np.isfinite(self.raw_norm)
            & np.isfinite(self.qty).all(axis=0)
        )

    @staticmethod
    def concat(blocks: list[ResponseBlock], q: int) -> ResponseBlock:
        """Join blocks of responses (in order) into one.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(0)
        >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
        >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
        >>> f = factor_design(x, intercept=0)
        >>> both = ResponseBlock.concat([f.project(y), f.project(2 * y)], q=2)
        >>> both.count, bool(np.allclose(both.resid[1], 2 * both.resid[0]))
        (2, True)
        """
        if not blocks:
            return ResponseBlock(np.zeros((q, 0)), np.zeros(0), np.zeros(0), np.zeros(0))
        return ResponseBlock(
            qty=np.concatenate([b.qty for b in blocks], axis=1),
            resid=np.concatenate([b.resid for b in blocks]),
            center=np.concatenate([b.center for b in blocks]),
            raw_norm=np.concatenate([b.raw_norm for b in blocks]),
        )


@dataclass(frozen=True)
class DesignFactor:
    """QR factorization of a design, with its thin ``Q`` kept to project responses.

    Build it with :func:`factor_design`.  ``moments`` are the :class:`Moments` of ``[X 0]``
    (a zero response), so :func:`solve` on them gives the design's rank decision and working
    coordinates; :meth:`project` summarizes any number of responses against the same factor.
    The thin ``Q`` (n, q) is the size of the design itself.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
    >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
    >>> f = factor_design(x, intercept=0)
    >>> solve(f.moments).rank, f.moments.n
    (3, 20)
    """

    moments: Moments
    weights: Array | None
    _q: Array = field(repr=False)

    def project(self, y: Array) -> ResponseBlock:
        """Summarize responses ``y`` (n, b) against this design; ``y`` is not modified.

        Notes
        -----
        One copy of ``y`` is centred (two passes, as in :func:`moments_from_arrays`), scaled,
        and rotated by ``Qᵀ`` (one matrix product); the residual norm comes from the explicit
        residual ``y_c − Q Qᵀ y_c`` (a second product, in place), not from
        ``‖y_c‖² − ‖Qᵀy_c‖²``, which would cancel when the fit is close.  The work memory is
        one copy of the block given, so callers bound memory by passing blocks of columns.
        Missing or infinite values propagate into the summaries of their column (non-finite
        ``center``, ``qty`` or ``resid``), which callers use to find them.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(0)
        >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
        >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
        >>> block = factor_design(x, intercept=0).project(y)
        >>> rss = np.sum((y - x @ np.linalg.lstsq(x, y, rcond=None)[0]) ** 2)
        >>> bool(np.isclose(block.resid[0] ** 2, rss))
        True
        """
        with np.errstate(invalid="ignore", over="ignore"):  # NaN/inf propagate on purpose
            return self._project(np.asarray(y, dtype=np.float64))

    def _project(self, y: Array) -> ResponseBlock:
        m = self.moments
        n = m.n
        w = self.weights
        if y.ndim == 1:
            y = y[:, None]
        if m.intercept is not None and n > 0:
            m1 = _weighted_mean(y, w)
            yb = y - m1  # the one copy of the block
            m2 = _weighted_mean(yb, w)
            yb -= m2
            center = m1 + m2
        else:
            yb = np.array(y, copy=True)
            center = np.zeros(yb.shape[1])
        if w is not None:
            yb *= np.sqrt(w)[:, None]
        q = m.others.size
        qd = self._q
        k = qd.shape[1]
        qty = np.zeros((q, yb.shape[1]))
        if k:
            qk = qd.T @ yb
            qty[:k] = qk
            yb = _subtract_product(yb, qd, qk)
        resid2 = np.einsum("ij,ij->j", yb, yb)
        # ‖√w·y‖² = ‖Qᵀy_c‖² + ‖residual‖² + W·mean²: a sum of squares, no cancellation
        raw = np.sqrt(np.einsum("ij,ij->j", qty, qty) + resid2 + m.weight_sum * center**2)
        return ResponseBlock(qty=qty, resid=np.sqrt(resid2), center=center, raw_norm=raw)

    def response_moments(self, block: ResponseBlock, j: int) -> Moments:
        """The :class:`Moments` of ``[X y_j]`` for response ``j`` of ``block``.

        Examples
        --------
        >>> import numpy as np
        >>> rng = np.random.default_rng(0)
        >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
        >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
        >>> f = factor_design(x, intercept=0)
        >>> one = f.response_moments(f.project(np.column_stack([-y, y])), 1)
        >>> bool(np.allclose(solve(one).coefficients(), np.linalg.lstsq(x, y, rcond=None)[0]))
        True
        """
        m = self.moments
        q = m.others.size
        r = m.r.copy()
        r[:q, q] = block.qty[:, j]
        r[q, q] = block.resid[j]
        center = m.center.copy()
        center[m.p] = block.center[j] if m.intercept is not None else 0.0
        raw = m.raw_norm.copy()
        raw[m.p] = block.raw_norm[j]
        return Moments(m.n, m.weight_sum, m.intercept, center, raw, r)


def _subtract_product(c: Array, a: Array, b: Array) -> Array:
    """``c − a·b``, in place in ``c`` when its layout allows (one BLAS ``gemm``, no temporary)."""
    if c.flags.f_contiguous:
        return sla.blas.dgemm(-1.0, a, b, beta=1.0, c=c, overwrite_c=True)
    if c.flags.c_contiguous:
        ct = sla.blas.dgemm(
            -1.0, b, a, beta=1.0, c=c.T, trans_a=True, trans_b=True, overwrite_c=True
        )
        return ct.T
    return c - a @ b


def factor_design(x: Array, w: Array | None = None, intercept: int | None = None) -> DesignFactor:
    """Factor a design once so that many responses can be fitted against it.

    Parameters
    ----------
    x : (n, p) ndarray
        Design.  Not modified.
    w : (n,) ndarray or None
        Positive weights (validated by the caller).
    intercept : int or None
        Index of the intercept column.

    Returns
    -------
    DesignFactor

    Notes
    -----
    The centring (two passes) and scaling are those of :func:`moments_from_arrays`; the QR is
    LAPACK ``geqrf``, then ``orgqr`` forms the thin ``Q`` (n, q) once, so that every block of
    responses is projected by matrix products (much faster than applying ``q`` reflectors one
    block at a time when ``q`` is small).

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> x = np.column_stack([np.ones(30), rng.normal(size=(30, 2))]); y = rng.normal(size=30)
    >>> f = factor_design(x, intercept=0)
    >>> one = f.response_moments(f.project(y[:, None]), 0)
    >>> ref = moments_from_arrays(x, y, intercept=0)
    >>> bool(np.allclose(one.r.T @ one.r, ref.r.T @ ref.r))
    True
    """
    n, p = x.shape
    cols = np.arange(p) if intercept is None else np.delete(np.arange(p), intercept)
    a = np.empty((n, cols.size), order="F")
    a[:] = x[:, cols]
    center = np.zeros(p + 1)
    raw_norm = np.zeros(p + 1)
    raw_sq = np.einsum("ij,ij->j", a, a) if w is None else w @ (a * a)
    raw_norm[cols] = np.sqrt(raw_sq)
    wsum = float(n if w is None else w.sum())
    if intercept is not None:
        raw_norm[intercept] = np.sqrt(wsum) * abs(float(x[0, intercept])) if n else 0.0
        if n > 0:
            m1 = _weighted_mean(a, w)
            a -= m1
            m2 = _weighted_mean(a, w)
            a -= m2
            center[cols] = m1 + m2
    if w is not None:
        a *= np.sqrt(w)[:, None]
    q = cols.size
    r = np.zeros((q + 1, q + 1))
    if q and n:
        qr, tau, _work, info = sla.lapack.dgeqrf(a, overwrite_a=1)
        if info != 0:  # pragma: no cover - LAPACK argument error
            raise RuntimeError(f"LAPACK dgeqrf failed with info={info}")
        k = min(n, q)
        r[:k, :q] = np.triu(qr[:k])
        thin, _work, info = sla.lapack.dorgqr(qr[:, :k], tau[:k], overwrite_a=0)
        if info != 0:  # pragma: no cover - LAPACK argument error
            raise RuntimeError(f"LAPACK dorgqr failed with info={info}")
    else:
        thin = np.zeros((n, 0))
    moments = Moments(
        n=n, weight_sum=wsum, intercept=intercept, center=center, raw_norm=raw_norm, r=r
    )
    return DesignFactor(moments=moments, weights=w, _q=thin)


def solve_responses(m: Moments, sol: Solution, block: ResponseBlock) -> tuple[Array, Array, Array]:
    """Coefficients and residual sums of squares of many responses on one solved design.

    Parameters
    ----------
    m : Moments
        The design's moments (from :class:`DesignFactor`).
    sol : Solution
        ``solve(m, rank_tol)``: the rank decision and working coordinates, shared by every
        response.
    block : ResponseBlock

    Returns
    -------
    theta : (rank, r) ndarray
        Working coefficients of the kept columns (as :attr:`Solution.theta`, per response).
    rss : (r,) ndarray
        Residual sums of squares.
    y_norm : (r,) ndarray
        Norms of the centred, scaled responses (for deciding that an RSS is zero).

    Notes
    -----
    The kept working columns of the small factor are refactored by one QR (complete ``Q``);
    every response then costs a matrix product and one triangular solve, all vectorized.  The
    results equal :func:`solve` on each response's own moments up to rounding.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(20), rng.normal(size=(20, 2))])
    >>> y = x @ [1.0, 2.0, -1.0] + rng.normal(size=20)
    >>> f = factor_design(x, intercept=0)
    >>> block = f.project(np.column_stack([y, 3 * y]))
    >>> theta, rss, y_norm = solve_responses(f.moments, solve(f.moments), block)
    >>> bool(np.isclose(rss[1], 9 * rss[0])), theta.shape
    (True, (3, 2))
    """
    others = m.others
    q = others.size
    kept_o = sol.kept if m.intercept is None else sol.kept[1:]
    rank_o = kept_o.size
    r_count = block.count
    qty = block.qty
    if rank_o:
        pos = np.searchsorted(others, kept_o)
        rs_k = m.r[:q, :q][:, pos] / sol.scale[kept_o]
        qk, rk = np.linalg.qr(rs_k, mode="complete")
        z = qk.T @ qty
        theta_o = upper_solve(rk[:rank_o], z[:rank_o])
        tail = z[rank_o:]
    else:
        theta_o = np.zeros((0, r_count))
        tail = qty
    rss = block.resid**2 + np.einsum("ij,ij->j", tail, tail)
    y_norm = np.hypot(np.linalg.norm(qty, axis=0), block.resid)
    if m.intercept is not None:
        theta = np.vstack([block.center[None, :], theta_o])
    else:
        theta = theta_o
    return theta, rss, y_norm


def wald_quadratic_forms(
    delta: Array, root: Array, independent: NDArray[np.intp]
) -> tuple[Array, Array]:
    """Vectorized :func:`wald_from_root` for many responses that share ``root`` up to a scale.

    Parameters
    ----------
    delta : (m, r) ndarray
        ``Cβ̂ - d`` per response (columns).
    root : (k, m) ndarray
        ``V`` with ``Cov(Cβ̂) = σ² Vᵀ V`` (unscaled, shared by every response).
    independent : (q,) ndarray of int

    Returns
    -------
    quad : (r,) ndarray
        ``δ_Kᵀ (Vᵀ V)⁻¹ δ_K`` per response (divide by ``q σ²`` for the F).
    std_error : (m,) ndarray
        Unscaled standard error of each row (multiply by ``σ``).

    Examples
    --------
    >>> import numpy as np
    >>> quad, se = wald_quadratic_forms(np.array([[2.0, 4.0]]), np.array([[2.0]]), np.array([0]))
    >>> quad.tolist(), se.tolist()
    ([1.0, 4.0], [2.0])
    """
    se = np.linalg.norm(root, axis=0)
    if independent.size == 0:
        return np.zeros(delta.shape[1]), se
    chol = triangular_factor(root[:, independent])
    sol = upper_solve(chol, delta[independent], trans=True)
    return np.einsum("ij,ij->j", sol, sol), se
