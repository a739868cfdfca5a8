"""All pairwise differences of independent means: a control family with an exact probability.

The rows ``T_q = (X_i − X_j) / (S w_ij)``, ``w_ij = √(v_i + v_j)``, over all pairs ``i < j`` of
``k`` independent means ``X_i ~ N(0, v_i σ²)`` (a one-way layout with unequal group sizes, any
coding) have no one-dimensional reduction when the ``v_i`` differ.  A neighbouring family
does: replace each half-width ``c S w_ij`` by ``c S (a_i + a_j)``.  Then every pair of
intervals ``[X_i − h_i, X_i + h_i]`` (``h_i = c S a_i``) meets, which for intervals on a line
means that all of them share a point (Helly's theorem in one dimension, common practice), i.e.
``max_i (X_i − h_i) <= min_j (X_j + h_j)``.  Conditioning on the largest left end ``y``::

    P = E_S[ Σ_i ∫ f_i(y + h_i) ∏_{j≠i} P(y − h_j <= X_j <= y + h_j) dy ]

(for equal ``v_i`` this is the studentized range).  With ``a`` fitted so that ``a_i + a_j``
is close to ``w_ij``, the sequential rule's estimates for the family and for this neighbour
move together point by point, and the difference of the two estimates plus this exact value
estimates the family's probability with a far smaller error (a control variate, common
practice in Monte Carlo integration).  The spread over scrambles of that corrected estimate is
its standard error, as for the plain rule.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray
from scipy import special

from lincomb._typing import Array

__all__ = ["PairsControl", "independent_pairs"]


#: Largest trapezoid grid in ``y`` (nodes) for the neighbour's probability.
_Y_MAX: int = 2**12 + 1
#: Target of the ``y`` quadrature: the half-grid difference at most this (absolute).
_Y_TOL: float = 1e-12
#: The interpolant of the neighbour's normal-case probability is checked between its nodes
#: to this absolute error (nodes double up to :data:`_CURVE_MAX`).
_CURVE_TOL: float = 1e-11
_CURVE_MAX: int = 513


@dataclass(frozen=True)
class PairsControl:
    """The neighbouring family of a family of all pairs of ``k`` independent means.

    Attributes
    ----------
    first, second : (m,) ndarray of int
        The two means each row compares (rows in the family's order, duplicates included).
    var : (k,) ndarray
        Variances of the means (up to a common factor).
    half : (k,) ndarray
        The neighbour's half-widths ``a_i`` (same units as ``√var``).
    scale : (m,) ndarray
        ``(a_i + a_j) / w_ij`` per row: the neighbour is the family with row ``q``'s limit
        multiplied by ``scale[q]``.
    """

    first: NDArray[np.intp]
    second: NDArray[np.intp]
    var: Array
    half: Array
    scale: Array

    def given(self, xs: Array) -> tuple[Array, Array]:
        """``P(max_q |T_q| / scale_q <= x | S = 1)`` for each ``x`` (the normal case, exact up
        to quadrature), and the ``y`` grid's error estimate (all nodes against every other
        node)."""
        xs = np.atleast_1d(np.asarray(xs, dtype=np.float64))
        sd = np.sqrt(self.var)
        full = np.empty(xs.size)
        err = np.empty(xs.size)
        h = xs[:, None] * self.half[None, :]  # (n, k)
        # term i needs every other mean j within 9 of its standard deviations of its
        # interval: |y| <= h_j + 9 sd_j for j != i, so the second smallest bound suffices
        span = np.partition(h + 9.0 * sd[None, :], 1, axis=1)[:, 1]
        todo = np.arange(xs.size)
        ny = 257
        while todo.size:
            fine, coarse = _helly_given(h[todo], sd, span[todo], ny)
            full[todo] = fine
            err[todo] = np.abs(fine - coarse)
            if ny >= _Y_MAX:
                break
            todo = todo[err[todo] > _Y_TOL]
            ny = 2 * ny - 1
        return np.clip(full, 0.0, 1.0), err + 1e-15

    def curve(self, top: float) -> ControlCurve:
        """:meth:`given` on ``[0, top]`` as a Chebyshev interpolant, checked between its nodes
        (the nodes double until every check is within :data:`_CURVE_TOL`)."""
        n = 65
        while True:
            j = np.arange(n)
            nodes = top * (1 - np.cos(np.pi * j / (n - 1))) / 2
            vals, _err = self.given(nodes)
            curve = ControlCurve(nodes, vals)
            # midpoints between the nodes nearest the middle, where the interpolant errs most
            probe = top * (1 - np.cos(np.pi * (np.linspace(0.5, n - 1.5, 12)) / (n - 1))) / 2
            exact, _e = self.given(probe)
            gap = float(np.max(np.abs(curve(probe) - exact)))
            if gap <= _CURVE_TOL or n >= _CURVE_MAX:
                return replace(curve, error=gap)
            n = 2 * n - 1


@dataclass(frozen=True)
class ControlCurve:
    """Barycentric interpolation through values at Chebyshev points (second kind) on
    ``[0, top]``; beyond ``top`` the value is 1 (``top`` is chosen where it is, to double
    precision)."""

    nodes: Array
    values: Array
    error: float = 0.0

    def __call__(self, x: Array) -> Array:
        x = np.asarray(x, dtype=np.float64)
        n = self.nodes.size
        w = np.where(np.arange(n) % 2 == 0, 1.0, -1.0)
        w[[0, -1]] /= 2
        flat = x.ravel()
        out = np.empty(flat.size)
        for lo in range(0, flat.size, 4096):
            xx = flat[lo : lo + 4096]
            diff = xx[:, None] - self.nodes[None, :]
            hit = diff == 0
            with np.errstate(divide="ignore", invalid="ignore"):
                q = w[None, :] / diff
                val = (q @ self.values) / q.sum(axis=1)
            exact = hit.any(axis=1)
            val[exact] = self.values[np.argmax(hit[exact], axis=1)]
            out[lo : lo + 4096] = val
        out = np.where(flat > self.nodes[-1], 1.0, np.clip(out, 0.0, 1.0))
        return out.reshape(x.shape)


def _helly_given(h: Array, sd: Array, span: Array, ny: int) -> tuple[Array, Array]:
    """``Σ_i ∫ f_i(y + h_i) ∏_{j≠i} (Φ((y + h_j)/sd_j) − Φ((y − h_j)/sd_j)) dy`` for each row
    of ``h`` (``S`` fixed): trapezoid rule on ``y ∈ [−span, span]`` with ``ny`` nodes, and on
    every other node."""
    t = np.linspace(-1.0, 1.0, ny)
    ys = span[None, :, None] * t[None, None, :] / sd[:, None, None]  # (k, n, ny)
    hh = (h.T / sd[:, None])[:, :, None]
    up = ys + hh
    inside = special.ndtr(up)
    inside -= special.ndtr(ys - hh)
    np.maximum(inside, 0.0, out=inside)
    everything = np.prod(inside, axis=0)
    # the density of mean i at y + h_i over its own factor (where that factor is 0 the
    # density is below e^-600 and the term vanishes)
    up *= up
    up *= -0.5
    dens = np.exp(up)
    dens /= (np.sqrt(2 * np.pi) * sd)[:, None, None]
    np.divide(dens, inside, out=dens, where=inside > 0)
    dens[inside <= 0] = 0.0
    f = everything * dens.sum(axis=0)  # (n, ny)
    step = 2.0 * span / (ny - 1)
    fine = step * (f.sum(axis=1) - (f[:, 0] + f[:, -1]) / 2)
    g = f[:, ::2]
    coarse = 2 * step * (g.sum(axis=1) - (g[:, 0] + g[:, -1]) / 2)
    return fine, coarse


def independent_pairs(corr: Array, unique: NDArray[np.intp], tol: float) -> PairsControl | None:
    """The pairs structure of a correlation matrix, or None.

    The rows (``unique`` lists those that are not duplicates of an earlier row) must be all
    ``k(k−1)/2`` pairwise differences of ``k >= 5`` independent means, up to the signs of
    rows: two rows are correlated exactly when they share a mean (the line graph of the
    complete graph), and the correlations are those of some variances ``v``.  The means are
    read from the zero pattern (for ``k >= 5`` the rows sharing one mean are found by
    2-colouring the rows a row is *not* correlated with among its neighbours), the variances
    from three rows sharing a mean, and the whole matrix is then rebuilt and compared.
    """
    r = corr[np.ix_(unique, unique)]
    m = r.shape[0]
    k = int(round((1 + np.sqrt(1 + 8 * m)) / 2))
    if k < 5 or k * (k - 1) // 2 != m:
        return None
    adj = np.abs(r) > tol
    np.fill_diagonal(adj, False)
    if np.any(adj.sum(axis=1) != 2 * (k - 2)):
        return None
    # the neighbours of row 0 (pair a-b) are a-x and b-x; among them, rows that are NOT
    # correlated form a bipartite graph (K_{k-2,k-2} less a matching) whose sides are the rows
    # through a and through b
    nb = np.flatnonzero(adj[0])
    apart = ~adj[np.ix_(nb, nb)]
    np.fill_diagonal(apart, False)
    colour = np.full(nb.size, -1)
    colour[0] = 0
    queue = [0]
    while queue:
        i = queue.pop()
        for j in np.flatnonzero(apart[i]):
            if colour[j] < 0:
                colour[j] = 1 - colour[i]
                queue.append(int(j))
            elif colour[j] == colour[i]:
                return None
    if np.any(colour < 0):
        return None
    star = np.concatenate([[0], nb[colour == 0]])  # rows through mean 0; others to 1..k-1
    if star.size != k - 1:
        return None
    first = np.zeros(m, dtype=np.intp)
    second = np.zeros(m, dtype=np.intp)
    second[star] = np.arange(1, k)
    in_star = np.zeros(m, dtype=bool)
    in_star[star] = True
    for q in np.flatnonzero(~in_star):
        ends = np.flatnonzero(adj[q, star])
        if ends.size != 2:
            return None
        first[q], second[q] = int(ends[0]) + 1, int(ends[1]) + 1
    if len(set(zip(first.tolist(), second.tolist(), strict=True))) != m:
        return None
    # variances: |r(0-i, 0-j)| = sqrt(p_i p_j) with p_i = v_0 / (v_0 + v_i); v_0 = 1
    g = np.abs(r[np.ix_(star, star)])
    p = np.empty(k - 1)
    for i in range(k - 1):
        u, v = [x for x in range(k - 1) if x != i][:2]
        p[i] = g[i, u] * g[i, v] / g[u, v]
    if np.any(~(p > 0)) or np.any(p >= 1):
        return None
    var = np.concatenate([[1.0], 1.0 / p - 1.0])
    b = np.zeros((m, k))
    b[np.arange(m), first] = 1.0
    b[np.arange(m), second] = -1.0
    cov = (b * var) @ b.T
    w = np.sqrt(np.diag(cov))
    model = cov / np.outer(w, w)
    # row signs from the correlated neighbours, outward from row 0
    sign = np.zeros(m)
    sign[0] = 1.0
    queue = [0]
    while queue:
        i = queue.pop()
        for j in np.flatnonzero(adj[i]):
            if sign[j] == 0:
                sign[j] = sign[i] * np.sign(r[i, j]) * np.sign(model[i, j])
                queue.append(int(j))
    if np.any(sign == 0) or np.max(np.abs(r - np.outer(sign, sign) * model)) > 10 * tol:
        return None
    half = _fit_half_widths(first, second, var)
    if half is None:
        return None
    # rows of the full family: a duplicate takes the pair of the row it repeats
    full_first, full_second = _expand(corr, unique, first, second)
    width = np.sqrt(var[full_first] + var[full_second])
    scale = (half[full_first] + half[full_second]) / width
    return PairsControl(full_first, full_second, var, half, scale)


def _fit_half_widths(first: NDArray[np.intp], second: NDArray[np.intp], var: Array) -> Array | None:
    """``a`` minimizing ``Σ ((a_i + a_j) / w_ij − 1)²``; None unless every ``a_i > 0``."""
    k = var.size
    w = np.sqrt(var[first] + var[second])
    design = np.zeros((first.size, k))
    design[np.arange(first.size), first] = 1.0 / w
    design[np.arange(first.size), second] = 1.0 / w
    half, *_ = np.linalg.lstsq(design, np.ones(first.size), rcond=None)
    if np.any(~(half > 0)):
        return None
    return np.asarray(half, dtype=np.float64)


def _expand(
    corr: Array, unique: NDArray[np.intp], first: NDArray[np.intp], second: NDArray[np.intp]
) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    m = corr.shape[0]
    full_first = np.empty(m, dtype=np.intp)
    full_second = np.empty(m, dtype=np.intp)
    sub = np.abs(corr[:, unique])
    which = np.argmax(sub, axis=1)  # a duplicate has |r| = 1 with the row it repeats
    full_first[:] = first[which]
    full_second[:] = second[which]
    return full_first, full_second
