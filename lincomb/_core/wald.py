"""Wald statistics and restricted least squares from a covariance root.

Both work on a root ``V`` of the covariance of ``Cβ̂`` (``Cov = VᵀV``) and use triangular
solves only: ``VᵀV`` is never formed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from lincomb._core.solve import Solution, random_solution_doc
from lincomb._core.triangular import plain_norm, safe_norm, triangular_factor, upper_solve
from lincomb._typing import Array

__all__ = ["WaldCore", "intercept_rotation", "restricted_step", "wald_from_root"]


@dataclass(frozen=True)
class WaldCore:
    """Numbers of a Wald test, before names are attached.

    Attributes
    ----------
    std_error : (m,) ndarray
        Standard error of every row (redundant ones too).
    statistic_rows : (m,) ndarray
        ``δ / std_error`` per row (NaN where the standard error is zero).
    quad : float
        ``δ_Kᵀ (Vᵀ V)⁻¹ δ_K`` over the independent rows ``K`` (divide by ``rank`` for the F).
    rank : int
        Number of independent rows.
    chol : (q, q) ndarray
        Upper-triangular factor with ``cholᵀ chol = V_Kᵀ V_K``.

    Examples
    --------
    >>> import numpy as np
    >>> core = wald_from_root(np.array([1.0, 2.0]), np.eye(2), np.array([0, 1]))
    >>> core.quad, core.rank, core.std_error.tolist()
    (5.0, 2, [1.0, 1.0])
    """

    std_error: Array
    statistic_rows: Array
    quad: float
    rank: int
    chol: Array


def wald_from_root(
    delta: Array, root: Array, independent: NDArray[np.intp], chol: Array | None = None
) -> WaldCore:
    """Quadratic form ``δ_Kᵀ (Vᵀ V)⁻¹ δ_K`` over the independent rows ``K`` of a system.

    Parameters
    ----------
    delta : (m,) ndarray
        ``Cβ̂ - d``.
    root : (k, m) ndarray
        A matrix ``V`` with ``Cov(Cβ̂) = Vᵀ V`` (scale included).
    independent : (q,) ndarray of int
        Rows to use (from :func:`analyze_rows`).
    chol : (q, q) ndarray, optional
        The triangular factor of ``root[:, independent]`` when the caller has made it already
        (a covariance rank check makes the same one); made here otherwise.

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
    plain = plain_norm(np.asarray(root, dtype=np.float64), 0)
    if plain is not None:  # every row has a positive, finite standard error
        se = plain
        stat = delta / se
    else:
        se = safe_norm(root, axis=0)
        with np.errstate(divide="ignore", invalid="ignore"):
            stat = np.where(se > 0, delta / np.where(se > 0, se, 1.0), np.nan)
    q = independent.size
    # every row independent (``independent`` is then 0 .. m-1): no copy of the root
    vk = root if q == root.shape[1] else root[:, independent]
    if chol is None:
        chol = triangular_factor(vk)
    if q:
        sol = upper_solve(chol, delta if vk is root else delta[independent], trans=True)
        quad = float(sol @ sol)
    else:
        quad = 0.0
    return WaldCore(std_error=se, statistic_rows=stat, quad=quad, rank=q, chol=chol)


@random_solution_doc
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
    %(random_solution)s
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


def intercept_rotation(c: Array, d: Array, intercept: int | None) -> tuple[Array, Array] | None:
    """An equivalent system in which at most one row involves the intercept, or None.

    The F of ``Cβ = d`` does not change when ``(C, d)`` is replaced by ``(H C, H d)`` for an
    invertible ``H``.  With a Householder reflection ``H`` that maps the intercept's column of
    ``C`` to a multiple of the first unit vector, every row but the first is free of the
    intercept (its entry is set to an exact zero), so its working coordinates carry no
    ``-m_j/s_j`` terms: the test of an intercept row beside level rows, with a column of large
    mean, no longer subtracts estimates of that size from one another.  None when at most one
    row involves the intercept already.

    Examples
    --------
    >>> import numpy as np
    >>> c = np.array([[1.0, 0.0, 0.0], [1.0, 0.0, 1.0]])
    >>> c2, d2 = intercept_rotation(c, np.array([5.0, 7.0]), 0)
    >>> float(c2[1, 0]), bool(np.allclose(np.linalg.svd(c2)[1], np.linalg.svd(c)[1]))
    (0.0, True)
    """
    if intercept is None or np.count_nonzero(c[:, intercept]) < 2:
        return None
    v = c[:, intercept].astype(np.float64)
    nv = float(safe_norm(v))
    alpha = -nv if v[0] >= 0 else nv
    u = v.copy()
    u[0] -= alpha
    f = 2.0 / float(u @ u)
    c2 = c - np.outer(u, f * (u @ c))
    d2 = d - u * (f * float(u @ d))
    c2[1:, intercept] = 0.0
    return c2, d2
