"""Triangular factors and solves: the two factorization primitives of the core.

Every factorization in lincomb goes through :func:`triangular_factor` (Householder QR, ``Q``
never formed) or a QR of a small matrix, and every solve through :func:`upper_solve` (BLAS
``trsm``).  No explicit inverse of a cross-product matrix is ever formed.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg as sla
from numpy.typing import NDArray

__all__ = ["pow2_scale", "safe_norm", "triangular_factor", "upper_solve"]

Array = NDArray[np.float64]


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


def pow2_scale(a: Array, axis: int | tuple[int, ...] | None = None) -> Array:
    """Powers of two ``f`` with ``max|a·f|`` in ``[0.5, 1)`` along ``axis`` (1 where all zero).

    Multiplying by ``f`` is exact (no rounding), so data can be brought near unit size before
    it is squared and scaled back exactly afterwards, as careful norm routines do.

    Examples
    --------
    >>> import numpy as np
    >>> f = pow2_scale(np.array([[3e200, 1.0], [0.0, 0.0]]), axis=0)
    >>> bool(0.5 <= 3e200 * f[0, 0] < 1), float(f[0, 1])
    (True, 0.5)
    """
    amax = np.max(np.abs(a), axis=axis, keepdims=True) if np.size(a) else np.zeros((1,) * a.ndim)
    amax = np.where(np.isfinite(amax) & (amax > 0), amax, 1.0)
    _, e = np.frexp(amax)
    f: Array = np.ldexp(1.0, -e)
    return f


def safe_norm(a: Array, axis: int | None = None) -> Array:
    """Euclidean norm along ``axis`` without overflow or underflow of the squares.

    Each slice is scaled by a power of two (:func:`pow2_scale`) before squaring and the norm
    scaled back, so the result is representable whenever the norm is.

    Examples
    --------
    >>> import numpy as np
    >>> float(safe_norm(np.array([3e200, 4e200]))), float(safe_norm(np.array([3e-200, 4e-200])))
    (5e+200, 5e-200)
    """
    a = np.asarray(a, dtype=np.float64)
    if axis is None:
        a = a.reshape(-1)
        axis = 0
    f = pow2_scale(a, axis=axis)
    b = a * f
    out: Array = np.sqrt(np.einsum("...i,...i->...", np.moveaxis(b, axis, -1), np.moveaxis(b, axis, -1)))
    return out / np.squeeze(f, axis=axis)
