"""The rank decision and the least-squares solution in working coordinates.

:func:`solve` reduces :class:`~lincomb._core.moments.Moments` to a :class:`Solution`: which
columns are kept and which are aliased (tolerance :data:`RANK_TOL`, see the package notes in
:mod:`lincomb._core`), the kept-column triangle, the working coefficients and the residual sum
of squares.  The :class:`Solution` maps rows of ``C`` to working coordinates and back.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import cast

import numpy as np
import scipy.linalg as sla
from numpy.typing import NDArray

from lincomb._core.moments import RANDOM_DESIGN, Moments
from lincomb._core.triangular import safe_norm, upper_solve
from lincomb._docstrings import fill_doc
from lincomb._typing import Array

__all__ = ["CONSTANT_TOL", "RANK_TOL", "SUPPORT_FLOOR", "Solution", "solve", "safe_norm"]


#: Relative tolerance for the rank of the design (see the notes in :mod:`lincomb._core`).
RANK_TOL: float = 1e-10
#: A centred column norm at most this fraction of the raw norm means "constant" (see
#: :mod:`lincomb._core`).
CONSTANT_TOL: float = 64 * float(np.finfo(np.float64).eps)
#: Estimability is judged relative to the part of a row on the columns of the design's
#: dependencies, but never relative to less than this fraction of the whole working row (see
#: :mod:`lincomb._core`).
SUPPORT_FLOOR: float = 1e-6


#: Example set-up shared by docstrings of the core: the solution of the random design of
#: :data:`~lincomb._core.moments.RANDOM_DESIGN`.
RANDOM_SOLUTION = (
    RANDOM_DESIGN
    + """
>>> from lincomb._core import moments_from_arrays, solve
>>> sol = solve(moments_from_arrays(x, y, intercept=0))"""
)
#: Example set-up: a solution with an aliased column (two indicators that sum to the intercept).
_ALIASED_SOLUTION = """\
>>> import numpy as np
>>> from lincomb._core import ROW_TOL, moments_from_arrays
>>> a = np.array([1.0, 1, 0, 0, 0, 0])
>>> x = np.column_stack([np.ones(6), a, 1 - a, [1.0, 2, 3, 4, 5, 7]])  # a + b = 1
>>> sol = solve(moments_from_arrays(x, np.arange(6.0) ** 1.5, intercept=0))"""
#: Fills ``%(random_solution)s`` lines (with :data:`RANDOM_SOLUTION`) in the core's docstrings.
random_solution_doc = fill_doc(random_solution=RANDOM_SOLUTION)
_aliased_doc = fill_doc(aliased_solution=_ALIASED_SOLUTION)


@random_solution_doc
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
    weight_sum : float
        Sum of the weights.
    resid_norm : float
        ``sqrt(rss)``, computed without squaring (``rss`` over- or underflows for data near
        1e±155 and beyond; this does not).

    Examples
    --------
    %(random_solution)s
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
    resid_norm: float = field(default=0.0)

    @property
    def df_resid(self) -> int:
        return self.n - self.rank

    @random_solution_doc
    def to_working(self, c: Array) -> Array:
        """Map rows of ``C`` (m, p) on ``β`` to working coordinates ``u`` (all p columns).

        Examples
        --------
        %(random_solution)s
        >>> c = np.array([[0.0, 1.0, -1.0], [1.0, 0.5, 0.0]])
        >>> u = np.zeros(3)
        >>> u[sol.kept] = sol.theta
        >>> bool(np.allclose(sol.to_working(c) @ u, c @ sol.coefficients()))
        True
        """
        c = np.asarray(c, dtype=np.float64)
        j = self.intercept
        if j is None or not c[..., j].any():  # no row involves the intercept: no shift
            return c / self.scale
        cu = c.copy()
        cu -= c[..., [j]] * self.center
        return cu / self.scale

    def decision_rows(self, c: Array) -> Array:
        """Rows of a system ``C`` (..., m, p) in *decision* coordinates (see :mod:`lincomb._core`).

        The intercept's column of ``C`` is projected out of every other column (over the rows of
        the system, twice), the other columns are divided by the column scales ``s_j`` and the
        intercept's own column by ``sqrt(W)``.  This is a right multiplication of ``C`` by an
        invertible matrix, so the rank of ``C``, which rows are redundant and the weights of
        their dependencies are those of ``C``; and it is the same matrix whichever shift or
        scale a column of the design had, with no column mean in it, so an intercept row is not
        swamped by ``-m_j/s_j`` terms when a column has a large mean.

        Examples
        --------
        >>> import numpy as np
        >>> from lincomb._core import moments_from_arrays
        >>> rng = np.random.default_rng(0)
        >>> x = np.column_stack([np.ones(20), 1e9 + rng.normal(size=20)])
        >>> sol = solve(moments_from_arrays(x, rng.normal(size=20), intercept=0))
        >>> cd = sol.decision_rows(np.array([[1.0, 0.0], [1.0, 1.0]]))
        >>> bool(abs(np.linalg.det(cd / np.linalg.norm(cd, axis=1)[:, None])) > 0.5)
        True
        """
        c = np.asarray(c, dtype=np.float64)
        j = self.intercept
        if j is None or not c[..., j].any():  # no row involves the intercept: nothing to project
            return c / self.scale
        c0 = c[..., :, j : j + 1]
        c00 = np.sum(c0 * c0, axis=-2, keepdims=True)
        safe = np.where(c00 > 0, c00, 1.0)
        # project before scaling: on the given entries of C (often small integers) the first
        # pass is exact up to the rounding of its coefficient, an error parallel to the
        # intercept's column that the second pass removes
        cd = c
        for _ in range(2):
            coef = np.sum(c0 * cd, axis=-2, keepdims=True) / safe
            cd = cd - c0 * np.where(c00 > 0, coef, 0.0)
        cd = cd / self.scale
        cd[..., j] = c[..., j] / np.sqrt(max(self.weight_sum, np.finfo(float).tiny))
        return cd

    @_aliased_doc
    def coefficients(self) -> Array:
        """Basic solution ``β`` (aliased entries are NaN).

        Examples
        --------
        %(aliased_solution)s
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
        >>> from lincomb._core import moments_from_arrays
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

    @random_solution_doc
    def root(self, cu_kept: Array) -> Array:
        """``R⁻ᵀ C_keptᵀ``: the classical covariance of ``Cβ̂`` is ``σ² rootᵀ root``.

        Examples
        --------
        %(random_solution)s
        >>> c = np.array([[0.0, 1.0, -1.0]])
        >>> root = sol.root(sol.to_working(c)[:, sol.kept])
        >>> bool(np.allclose(root.T @ root, c @ np.linalg.solve(x.T @ x, c.T)))
        True
        """
        if self.rank == 0:
            return np.zeros((0, cu_kept.shape[0]))
        return upper_solve(self.r, cu_kept.T, trans=True)

    @_aliased_doc
    def estimability_residual(self, cu: Array) -> Array:
        """Relative size of each row's component in the null space (0 = estimable).

        ``cu`` is ``(..., p)`` in working coordinates.  The component is measured relative to
        the row's part on the columns that take part in a dependency of the design (the rows of
        ``null_basis`` that are not zero), but to no less than :data:`SUPPORT_FLOOR` of the
        whole row: a column outside every dependency (a large-mean covariate, say) cannot make
        a non-estimable intercept row look estimable.

        Examples
        --------
        %(aliased_solution)s
        >>> c = np.array([[0.0, 1, -1, 0], [0.0, 1, 0, 0]])  # a - b is estimable, a is not
        >>> (sol.estimability_residual(sol.to_working(c)) > ROW_TOL).tolist()
        [False, True]
        """
        cu = np.asarray(cu, dtype=np.float64)
        if self.null_basis.shape[1] == 0:
            return np.zeros(cu.shape[:-1])
        support = np.flatnonzero(np.any(self.null_basis != 0, axis=1))
        res = safe_norm(cu[..., support] @ self.null_basis[support], axis=-1)
        den = np.maximum(
            safe_norm(cu[..., support], axis=-1), SUPPORT_FLOOR * safe_norm(cu, axis=-1)
        )
        rel: Array = np.divide(res, den, out=np.zeros_like(res), where=den > 0)
        return rel

    @_aliased_doc
    def aliased_touched(self, cu_row: Array, tol: float) -> list[int]:
        """Aliased columns whose null direction a non-estimable row does not annihilate.

        Examples
        --------
        %(aliased_solution)s
        >>> sol.aliased_touched(sol.to_working(np.array([0.0, 1, 0, 0])), ROW_TOL)
        [2]
        """
        nv = self.null_vectors
        proj = cu_row @ nv / (safe_norm(nv, axis=0) * max(float(safe_norm(cu_row)), 1e-300))
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


def _full_rank_factor(rs: Array, qty: Array, tol: float) -> tuple[Array, Array] | None:
    """``R`` and ``Qᵀ qty`` of the unit-norm columns ``rs`` (q × q) in order, when every column is
    at least ``2·tol`` outside the span of the columns before it; None otherwise.

    One Householder QR of ``[rs qty]``: ``|R_jj|`` is the distance of column ``j`` to the span
    of the columns before it, the quantity :func:`_ordered_columns` compares with ``tol``, up to
    rounding (about ``eps``); the margin of two leaves every decision near the threshold to the
    greedy pass, so the rank decided is the same.  The last column of the factor is ``Qᵀ qty``.
    """
    q = rs.shape[1]
    a = np.empty((rs.shape[0], q + 1), order="F")
    a[:, :q] = rs
    a[:, q] = qty
    qr, _tau, _work, info = sla.lapack.dgeqrf(a, overwrite_a=1)
    if info != 0:  # pragma: no cover - LAPACK argument error
        return None
    if not np.abs(qr.diagonal()[:q]).min() > 2 * tol:  # NaN fails too
        return None
    return np.triu(qr[:, :q]), qr[:q, q].copy()


def solve(m: Moments, rank_tol: float = RANK_TOL) -> Solution:
    """Decide the rank and solve the least-squares problem held in ``m``.

    Parameters
    ----------
    m : Moments
    rank_tol : float, default :data:`RANK_TOL`
        Relative rank tolerance (see the notes in :mod:`lincomb._core`).

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
    >>> from lincomb._core import moments_from_arrays
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
    y_norm = float(np.hypot(safe_norm(qty), ryy))
    col_norm = safe_norm(rx, axis=0)
    raw = m.raw_norm[others]
    # constant-to-working-precision columns are aliased with the intercept (package notes)
    live = col_norm > CONSTANT_TOL * np.maximum(raw, np.finfo(float).tiny)
    scale_o = np.where(live, col_norm, 1.0)
    rs = rx / scale_o
    rs[:, ~live] = 0.0
    full = _full_rank_factor(rs, qty, rank_tol) if q else None
    if full is not None:  # every column clearly kept: the greedy pass would keep them all
        r2, z = full
        piv = np.arange(q, dtype=np.intp)
        rank_o = q
    elif q:
        piv, rank_o = _ordered_columns(rs, rank_tol)
        q2, r2 = cast("tuple[Array, Array]", sla.qr(rs[:, piv], check_finite=False))
        z = q2.T @ qty
    else:
        r2 = np.zeros((0, 0))
        piv = np.zeros(0, dtype=np.intp)
        rank_o = 0
        z = np.zeros(0)
    # the residual norm, not its square, is kept: the RSS of data near 1e±200 is not
    # representable, but sigma, the coefficients and their standard errors are
    resid_norm = float(np.hypot(ryy, safe_norm(z[rank_o:])))
    with np.errstate(over="ignore", under="ignore"):
        rss = float(np.float64(resid_norm) ** 2)
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
    rfull: Array
    zfull: Array
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
        # a kept column whose share in a dependency is below the rank tolerance (unit-norm
        # columns) takes no part in it: exact zeros keep it out of the estimability measure
        coef[np.abs(coef) <= rank_tol] = 0.0
        null_vectors[kept_o, :] = coef
        null_vectors[alias_o, np.arange(n_alias)] = 1.0
        support = np.flatnonzero(np.any(null_vectors != 0, axis=1))
        null_basis = np.zeros((p, n_alias))
        null_basis[support] = np.linalg.qr(null_vectors[support])[0]
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
        resid_norm=resid_norm,
        scale=scale,
        center=center,
        intercept=m.intercept,
        null_basis=null_basis,
        null_vectors=null_vectors,
        y_norm=y_norm,
        weight_sum=m.weight_sum,
    )
