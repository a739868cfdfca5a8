"""Triangular factors and solves: the two factorization primitives of the core.

Every factorization in lincomb goes through :func:`triangular_factor` (Householder QR, ``Q``
never formed) or a QR of a small matrix, and every solve through :func:`upper_solve` (BLAS
``trsm``).  No explicit inverse of a cross-product matrix is ever formed.
"""

from __future__ import annotations

import functools

import numpy as np
import scipy.linalg as sla
from numpy.typing import NDArray

from lincomb._typing import Array
from lincomb.errors import InternalError, SingularFactorError

__all__ = [
    "plain_norm",
    "pow2_scale",
    "row_pivoted_factor",
    "safe_norm",
    "triangular_factor",
    "upper_solve",
]


#: A sum of squares at least this large (2**-900) lost nothing that matters to underflow: a
#: square that underflowed is below 2**-1022, under 2**-120 of the sum (see :func:`safe_norm`).
_SQUARES_LOW: float = 2.0**-900


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
    SingularFactorError
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
    diag = r.diagonal()
    # a short diagonal is searched as a list: the array method's fixed cost is larger
    if (0.0 in diag.tolist()) if diag.size <= 64 else not diag.all():
        i = int(np.flatnonzero(diag == 0)[0])
        raise SingularFactorError(f"singular matrix: zero at diagonal {i}")
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
        raise InternalError(f"LAPACK dgeqrf failed with info={info}")
    k = min(m, n)
    upper = np.where(_upper_mask(k, n), qr[:k], 0.0)  # np.triu, without its fixed cost
    if k == n:
        return upper
    r = np.zeros((n, n))
    r[:k] = upper
    return r


@functools.lru_cache(maxsize=64)
def _upper_mask(k: int, n: int) -> NDArray[np.bool_]:
    """The (read-only) mask of the upper triangle of a ``k × n`` matrix, diagonal included."""
    mask = np.triu(np.ones((k, n), dtype=bool))
    mask.flags.writeable = False
    return mask


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
    plain = plain_norm(a, axis)
    if plain is not None:
        return plain
    f = pow2_scale(a, axis=axis)
    b = a * f
    out: Array = np.sqrt(
        np.einsum("...i,...i->...", np.moveaxis(b, axis, -1), np.moveaxis(b, axis, -1))
    )
    return out / np.squeeze(f, axis=axis)


def plain_norm(a: Array, axis: int) -> Array | None:
    """Euclidean norms of a float64 array along ``axis`` from the plain sum of squares, or None.

    Scaling by a power of two is exact, so where no square over- or underflows the plain sum
    of squares is the scaled one of :func:`safe_norm`: the norms are returned (all positive and
    finite) when every sum of squares lies in ``[2**-900, inf)``, and (all exactly 0) when every
    entry is zero; else None (then only :func:`safe_norm`'s scaling gives them).  It spares a
    call's fixed cost of scaling.

    Examples
    --------
    >>> import numpy as np
    >>> plain_norm(np.array([[3.0, 0.0], [4.0, 1.0]]), 0).tolist(), plain_norm(np.zeros(2), 0)
    ([5.0, 1.0], np.float64(0.0))
    >>> plain_norm(np.array([1e-300, 0.0]), 0) is None  # the square underflows: scale first
    True
    """
    if axis in (-1, a.ndim - 1):
        last = a
    else:  # a transpose where it is one: moveaxis has a fixed cost of its own
        last = a.T if a.ndim == 2 else np.moveaxis(a, axis, -1)
    ss = np.einsum("...i,...i->...", last, last)
    if not ss.size:
        return None
    if ss.size <= 8:  # a few norms: compared in Python, without two reductions' fixed cost
        ok = all(_SQUARES_LOW <= v < np.inf for v in ss.reshape(-1).tolist())  # NaN fails
    else:
        ok = _SQUARES_LOW <= ss.min() and ss.max() < np.inf
    if ok or not a.any():  # every entry zero: the sums of squares are exactly 0 too
        out: Array = np.sqrt(ss)
        return out
    return None


def row_pivoted_factor(a: Array) -> Array:
    """``R`` of ``a = Q R`` by Householder QR with row pivoting (Powell and Reid).

    Before column ``k`` is reduced, the remaining row with the largest entry in that column is
    swapped into position ``k``.  Plain Householder QR (:func:`triangular_factor`) can lose the
    rows of a weighted problem whose weights are many orders of magnitude below the others:
    a heavy row that becomes the pivot of a column carried by light rows brings its own large
    entries into that row of ``R``, where they must cancel to far below their rounding.  With
    row pivoting the pivot of such a column is a light row.  ``a`` is not modified.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.array([[1.0, 0, 2], [1, 0, 3], [0, 1e-30, 4e-30], [0, 1e-30, 5e-30]])
    >>> r = row_pivoted_factor(a)
    >>> float(r[1, 2] / r[1, 1])  # the light rows' own regression of y on column 1: 4.5
    4.5
    """
    a = np.array(a, dtype=np.float64, copy=True)
    m, n = a.shape
    r = np.zeros((n, n))
    for k in range(min(m, n)):
        col = a[k:, k]
        i = k + int(np.argmax(np.abs(col)))
        if i != k:
            a[[k, i]] = a[[i, k]]
        x = a[k:, k]
        f = float(pow2_scale(x)[0])
        xs = x * f
        nx = float(np.sqrt(xs @ xs))
        if nx == 0.0:
            r[k, k:] = a[k, k:]
            continue
        alpha = -nx if xs[0] >= 0 else nx
        v = xs.copy()
        v[0] -= alpha
        coef = (v @ (a[k:, k:] * f)) * (2.0 / float(v @ v))
        a[k:, k:] -= np.outer(v, coef) / f
        a[k + 1 :, k] = 0.0
        r[k, k:] = a[k, k:]
    return r
