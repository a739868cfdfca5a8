"""Restriction rows: which are independent, redundant or contradictory.

:func:`analyze_rows` splits the rows of ``C`` (in working coordinates) into independent and
redundant ones with tolerance :data:`ROW_TOL` (see the package notes in :mod:`lincomb._core`);
estimability of a row is judged by :meth:`lincomb._core.solve.Solution.estimability_residual`
against the same tolerance.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as sla
from numpy.typing import NDArray

from lincomb._core.triangular import safe_norm
from lincomb._typing import Array

__all__ = ["ROW_TOL", "RowAnalysis", "analyze_rows"]


#: Relative tolerance for redundant / inconsistent / non-estimable restriction rows.
ROW_TOL: float = 1e-9


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
    weights on the kept rows come from a least-squares solve.  Cost is O(m² p).  A system whose
    rows use disjoint sets of columns (exactly orthogonal), or are all clearly independent
    (each at least ``2·tol`` outside the span of the rows before it, by one QR of the
    normalized rows), skips the greedy pass, whose answer it then knows.

    Examples
    --------
    >>> import numpy as np
    >>> c = np.array([[1.0, 0, 0], [0, 1, 0], [1, 1, 0]])
    >>> a = analyze_rows(c, np.array([1.0, 2, 3]))
    >>> a.independent.tolist(), a.dependencies, a.inconsistent
    ([0, 1], {2: {0: 1.0, 1: 1.0}}, [])
    """
    m = cu.shape[0]
    if _apart(cu):
        return RowAnalysis(np.arange(m, dtype=np.intp), {}, [])
    norms = safe_norm(cu, axis=1)
    if _clearly_independent(cu, norms, tol):
        return RowAnalysis(np.arange(m, dtype=np.intp), {}, [])
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
        rn = float(safe_norm(resid))
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


def _apart(cu: Array) -> bool:
    """True when the rows are nonzero, finite and use disjoint sets of columns.

    Such rows are exactly orthogonal (every product in their dot products has a zero factor),
    so the greedy pass of :func:`analyze_rows` leaves each whole and keeps them all.
    """
    if not cu.shape[0]:
        return False
    nz = cu != 0
    # ufunc reductions called directly: the array methods' Python wrappers cost more than the
    # work on a few rows
    return bool(
        _max(_add(nz, axis=0, dtype=np.intp)) <= 1
        and _all(_any(nz, axis=1))
        and _all(np.isfinite(cu), axis=None)
    )


_max, _add, _any, _all = (
    np.maximum.reduce,
    np.add.reduce,
    np.logical_or.reduce,
    np.logical_and.reduce,
)


def _clearly_independent(cu: Array, norms: Array, tol: float) -> bool:
    """True when every row is at least ``2·tol`` (relative) outside the span of the rows before
    it, so that the greedy pass of :func:`analyze_rows` would keep them all.

    One Householder QR of the row-normalized ``Cᵀ``: ``|R_ii|`` is the distance of row ``i`` to
    the span of the rows before it, the quantity the greedy pass compares with ``tol``, up to
    rounding (about ``eps``); the margin of two makes the screen decide nothing near the
    threshold, where the greedy pass decides instead.
    """
    m, p = cu.shape
    if m == 0 or m > p or not (0 < norms.min() and norms.max() < np.inf):
        return False
    # LAPACK geqrf in place on the normalized copy: only R's diagonal is read
    qr, _tau, _work, info = sla.lapack.dgeqrf((cu / norms[:, None]).T, overwrite_a=1)
    return bool(info == 0 and np.abs(qr.diagonal()).min() > 2 * tol)
