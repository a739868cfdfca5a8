"""Iterative refinement of an ill-conditioned least-squares solution, where the rows exist.

The moments keep only the triangular factor of the centred, scaled design, so a fit's
coefficients carry the forward error of Householder QR, about ``eps·κ`` (and ``eps·κ²`` with
a large residual) for a working condition number ``κ``.  When the rows are in memory and
:func:`condition_estimate` exceeds :data:`REFINE_COND`, :func:`refine` corrects the
coefficients with the residual of the *given* float64 data computed in twice the working precision
(every product split exactly as in Dekker's algorithm and summed with error-free
transformations, Ogita-Rump-Oishi ``Dot2``: no dependence on ``numpy.longdouble``), and the
correction solved with the existing factor (two triangular solves, corrected semi-normal
equations).  Routes without rows (chunks, Dask, combined summaries) keep the plain solution.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import scipy.linalg.lapack as lapack

from lincomb._core.solve import Solution
from lincomb._core.triangular import upper_solve
from lincomb._typing import Array

__all__ = ["REFINE_COND", "REFINE_STEPS", "condition_estimate", "refine"]


#: Refine when the working factor's 1-norm condition estimate exceeds this.
REFINE_COND: float = 1e8
#: At most this many refinement steps (each costs two passes over the rows).
REFINE_STEPS: int = 4


def condition_estimate(sol: Solution) -> float:
    """1-norm condition estimate of the working factor (LAPACK ``dtrcon``, O(p²)).

    Examples
    --------
    >>> import numpy as np
    >>> from lincomb._core import moments_from_arrays, solve
    >>> x = np.column_stack([np.ones(5), [0.0, 1, 2, 3, 5]])
    >>> 1 <= condition_estimate(solve(moments_from_arrays(x, np.arange(5.0), intercept=0))) < 10
    True
    """
    if sol.rank == 0:
        return 1.0
    rcond, _ = lapack.dtrcon(np.asarray(sol.r, order="F"), norm="1")
    return float(np.inf) if rcond == 0 else float(1.0 / rcond)


_SPLIT = 134217729.0  # 2**27 + 1: Dekker's splitting constant for float64


def _two_prod(a: Array, b: Array) -> tuple[Array, Array]:
    """``a·b = p + e`` exactly (Dekker and Veltkamp; no fused multiply-add needed)."""
    p = a * b
    ca = _SPLIT * a
    ah = ca - (ca - a)
    al = a - ah
    cb = _SPLIT * b
    bh = cb - (cb - b)
    bl = b - bh
    e = al * bl - (((p - ah * bh) - al * bh) - ah * bl)
    return p, e


def _two_sum(a: Array, b: Array) -> tuple[Array, Array]:
    """``a + b = s + e`` exactly (Knuth)."""
    s = a + b
    z = s - a
    e = (a - (s - z)) + (b - z)
    return s, e


def _residual(x: Array, y: Array, beta: Array) -> tuple[Array, Array]:
    """``y - X β`` as if in twice the working precision (Ogita, Rump and Oishi's Dot2), as an
    unevaluated sum ``hi + lo``."""
    s = y.copy()
    c = np.zeros_like(y)
    for j in np.flatnonzero(beta):
        p, e = _two_prod(x[:, j], np.full_like(y, -beta[j]))
        s, e2 = _two_sum(s, p)
        c += e + e2
    hi = s + c
    lo = c - (hi - s)
    return hi, lo


def _cross(x: Array, hi: Array, lo: Array) -> Array:
    """``Xᵀ (hi + lo)`` with each product split exactly and each column summed by
    :func:`math.fsum` (correctly rounded): at the solution this gradient cancels to far below
    the size of its terms."""
    out = np.empty(x.shape[1])
    for j in range(x.shape[1]):
        p, e = _two_prod(x[:, j], hi)
        out[j] = math.fsum(np.concatenate([p, e, x[:, j] * lo]).tolist())
    return out


def refine(
    sol: Solution, x: Array, y: Array, w: Array | None = None, steps: int = REFINE_STEPS
) -> tuple[Solution, Array]:
    """Refine the coefficients of ``sol`` against the rows ``x``, ``y`` (weights ``w``).

    Returns the solution with refined working coefficients and the refined ``β`` (aliased
    entries NaN).  Each step: ``r = y - Xβ`` in twice the working precision, ``g = Xᵀ W r``,
    the working correction ``δθ = R⁻¹ R⁻ᵀ (Aᵀ g)_kept`` and ``β ← β + A δθ``; it stops when
    the correction is below a few unit roundoffs of ``β`` or stops shrinking.

    Examples
    --------
    >>> import numpy as np
    >>> from lincomb._core import moments_from_arrays, solve
    >>> t = np.linspace(-8.8, -3.1, 82)
    >>> x = np.vander(t, 8, increasing=True)
    >>> y = np.sin(t)
    >>> sol = solve(moments_from_arrays(x, y, intercept=0))
    >>> sol2, beta = refine(sol, x, y)
    >>> bool(np.all(np.isfinite(beta))), sol2.rank
    (True, 8)
    """
    beta = sol.coefficients()
    keep = np.isfinite(beta)
    b = np.where(keep, beta, 0.0)
    theta = sol.theta.copy()
    prev = np.inf
    for _ in range(steps):
        hi, lo = _residual(x, y, b)
        if w is not None:  # w·(hi + lo), the product of hi split exactly
            hi, e = _two_prod(w, hi)
            lo = e + w * lo
        g = _cross(x, hi, lo)
        gk = sol.to_working(g)[sol.kept]
        dtheta = upper_solve(sol.r, upper_solve(sol.r, gk, trans=True))
        db = sol.from_working(dtheta)
        size = float(np.max(np.abs(db) / np.maximum(np.abs(b), np.finfo(float).tiny)))
        b = b + db
        theta = theta + dtheta
        if size <= 4 * np.finfo(float).eps or size >= prev:
            break
        prev = size
    out = b.copy()
    out[~keep] = np.nan
    return replace(sol, theta=theta), out
