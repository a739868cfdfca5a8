"""Structured max-|t| families: deterministic quadratures (arrays only).

Families whose correlations have a structure are integrated by a deterministic quadrature in
the variance ``S`` and one more variable, with an error estimate from the half grid (no seed,
no replicates): all pairwise differences of exchangeable means (the studentized range) and
equicorrelated rows.  :func:`detect_structure` reads the structure from the numbers alone.
The general rule and the dispatch are in :mod:`lincomb._core.maxt`.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, special, stats

from lincomb._typing import Array

__all__ = [
    "RANGE_SF_FLOOR",
    "STRUCTURE_TOL",
    "detect_structure",
    "studentized_range_critical",
    "studentized_range_tail",
]


# ---------------------------------------------------------------------------------------------
# structured families: deterministic one-dimensional quadrature inside the integral over S
# ---------------------------------------------------------------------------------------------
#: Two correlations are taken as equal (and a row as a duplicate, |r| = 1) when they differ by
#: at most this much.  A change of 1e-8 in a correlation moves the probabilities by about as
#: much, far below any integration tolerance accepted here.
STRUCTURE_TOL: float = 1e-8
#: The all-pairs check costs about ``m² k`` operations; larger families use the general rule.
_RANGE_MAX_ROWS: int = 2000
#: Largest grid (nodes per dimension) of the deterministic quadratures.
_QUAD_MAX: int = 2**13 + 1
#: Targets of the deterministic quadratures (far below any tolerance asked for; the half-grid
#: error estimate is then at most ``max(_QUAD_TOL, _QUAD_REL · tail) / 100``).
_QUAD_TOL: float = 1e-10
_QUAD_REL: float = 1e-8


def _unique_rows(corr: Array) -> NDArray[np.intp]:
    """Indices of rows that are not duplicates (``|r| = 1``) of an earlier row: ``max|T|`` is
    the same over the family and over these rows."""
    m = corr.shape[0]
    dup = np.abs(corr) >= 1 - STRUCTURE_TOL
    keep = [i for i in range(m) if not dup[i, :i].any()]
    return np.array(keep, dtype=np.intp)


def detect_structure(corr: Array, rank: int) -> tuple[str, float]:
    """The structure of a family's correlation matrix, from the numbers alone.

    Returns ``("range", k)`` when the rows (duplicates and signs aside) have exactly the
    correlations of all ``k(k-1)/2`` pairwise differences of ``k`` exchangeable means (a
    balanced one-way layout with the classical covariance gives them, whatever the coding):
    then ``√2 max|T|`` has the studentized range distribution with ``k`` means.
    ``("equicorrelated", ρ)`` when, after flipping the signs of some rows, every pair of
    distinct rows has the same correlation ``ρ >= 0``.  ``("general", nan)`` otherwise.

    The all-pairs test: unit vectors whose inner products are ``0`` or ``±1/2`` and that are
    closed under ``a - sign(a·b) b`` form a simply-laced root system; an irreducible one of rank
    ``r`` with ``r(r+1)/2`` positive roots is the system of all differences of ``r+1`` points of
    a regular simplex, i.e. of ``r+1`` exchangeable means (common practice in the theory of root
    systems; irreducible means the graph of non-zero inner products is connected).

    Examples
    --------
    >>> import numpy as np
    >>> detect_structure(np.full((3, 3), 0.5) + 0.5 * np.eye(3), 3)
    ('equicorrelated', 0.5)
    """
    u = _unique_rows(corr)
    r = corr[np.ix_(u, u)]
    m = u.size
    tol = STRUCTURE_TOL
    if m < 2:
        return "general", float("nan")
    off = r[~np.eye(m, dtype=bool)]
    a = np.abs(off)
    # equal correlations up to signs: r_ij = s_i s_j rho
    rho = float(a.mean())
    if np.all(np.abs(a - rho) <= tol) and rho < 1 - tol:
        s = np.sign(r[0])
        s[0] = 1.0
        if rho <= tol or np.all(np.abs(r - rho * np.outer(s, s) - (1 - rho) * np.eye(m)) <= tol):
            return "equicorrelated", (0.0 if rho <= tol else rho)
    k = rank + 1
    if k >= 3 and m == k * (k - 1) // 2 and m <= _RANGE_MAX_ROWS:
        half = np.abs(a - 0.5) <= tol
        zero = a <= tol
        if np.all(half | zero):
            nz = (np.abs(r) > tol) & ~np.eye(m, dtype=bool)
            # connected graph of non-zero inner products
            seen = np.zeros(m, dtype=bool)
            seen[0] = True
            frontier = seen.copy()
            while frontier.any():
                new = nz[frontier].any(axis=0) & ~seen
                seen |= new
                frontier = new
            if seen.all():
                ok = True
                for i in range(m):
                    js = np.flatnonzero(nz[i])
                    # inner products of l_i - sign(r_ij) l_j with every row: one must be ±1
                    v = r[i][None, :] - np.sign(r[i, js])[:, None] * r[js]
                    if not np.all(np.abs(np.abs(v).max(axis=1) - 1) <= 4 * tol):
                        ok = False
                        break
                if ok:
                    return "range", float(k)
    return "general", float("nan")


def _chi_grid(df: float, n: int) -> tuple[Array, Array]:
    """Nodes ``s`` and trapezoid weights for ``E[g(S)]``, ``ν S² ~ χ²_ν``, on ``t = log S``.

    The density of ``t`` is smooth and decays like a Gaussian, so the trapezoid rule converges
    geometrically; the range is where it exceeds ``e^-80`` of its peak.  The weights use the
    exact normalizing constant, so truncation and grid error both show in the half-grid check.
    """
    if not np.isfinite(df):
        return np.ones(1), np.ones(1)
    nu = df

    def logf(t: Array | float) -> Any:
        return nu * (np.asarray(t) - np.expm1(2 * np.asarray(t)) / 2)

    cut = -80.0
    lo = optimize.brentq(lambda t: logf(t) - cut, -80.0 / nu - 60.0, 0.0)
    hi = optimize.brentq(lambda t: logf(t) - cut, 0.0, 10.0)
    t = np.linspace(lo, hi, n)
    h = t[1] - t[0]
    log_norm = np.log(2.0) + (nu / 2) * np.log(nu / 2) - special.gammaln(nu / 2) - nu / 2
    w = h * np.exp(log_norm + logf(t))
    w[[0, -1]] /= 2
    return np.exp(t), w


def _range_tail_given(w: Array, k: int, n: int) -> Array:
    """``P(range of k standard normals > w)`` for each ``w`` (any shape), tail-accurate.

    ``P(R > w) = k ∫ φ(z) {Q(z)^{k-1} - (Q(z) - Q(z+w))^{k-1}} dz`` (``Q`` the normal upper
    tail; the first term integrates the density of the minimum to 1), with the difference of
    powers written as ``a^n (-expm1(n log1p(-Q(z+w)/a)))`` so tiny tails keep their digits.
    Trapezoid rule on ``z ∈ [-w/2 - 9, 9]`` with ``n`` nodes.
    """
    x = np.linspace(0.0, 1.0, n)
    lo = -w[..., None] / 2 - 9.0
    z = lo + (9.0 - lo) * x
    h = (9.0 - lo[..., 0]) / (n - 1)
    la = special.log_ndtr(-z)
    ratio = np.exp(special.log_ndtr(-z - w[..., None]) - la)
    km1 = k - 1
    with np.errstate(divide="ignore"):  # ratio = 1 where Q(z + w) = Q(z): log1p(-1) = -inf
        f = np.exp(-0.5 * z * z - 0.5 * np.log(2 * np.pi) + km1 * la) * -np.expm1(
            km1 * np.log1p(-np.minimum(ratio, 1.0))
        )
    f[..., [0, -1]] /= 2
    return np.asarray(k * h * f.sum(axis=-1))


def _equi_tail_given(cs: Array, m: int, rho: float, n: int) -> Array:
    """``P(max_i |X_i| > cs)`` for ``m`` equicorrelated standard normals (correlation
    ``rho >= 0``), each ``cs`` (any shape): given the common factor ``Z0`` the rows are
    independent, ``1 - g^m = -expm1(m log1p(-(Q(a+) + Q(-a-))))`` with
    ``a± = (±cs - √ρ Z0)/√(1-ρ)``; trapezoid rule on ``Z0 ∈ [-L, L]``, ``n`` nodes."""
    a, b = np.sqrt(rho), np.sqrt(1 - rho)
    span = np.minimum(cs / max(a, 1e-300), 40.0) + 9.0 if rho > 0 else np.full_like(cs, 9.0)
    x = np.linspace(-1.0, 1.0, n)
    z = span[..., None] * x
    h = 2 * span / (n - 1)
    c = cs[..., None]
    out = special.ndtr(-(c - a * z) / b) + special.ndtr((-c - a * z) / b)
    with np.errstate(divide="ignore"):
        f = -np.expm1(m * np.log1p(-np.minimum(out, 1.0)))
    f *= np.exp(-0.5 * z * z) / np.sqrt(2 * np.pi)
    f[..., [0, -1]] /= 2
    return np.asarray(h * f.sum(axis=-1))


def _structured_tail(
    kind: str, param: float, m: int, df: float, c: Array, ns: int, nz: int
) -> tuple[Array, Array]:
    """``P(max|T| > c)`` on an ``ns × nz`` grid, and the same on every other node of both."""
    s, ws = _chi_grid(df, ns)
    out = np.empty((2, c.size))
    for lo in range(0, c.size, 64):  # bound the (c, s, z) work array
        cc = c[lo : lo + 64]
        scaled = cc[:, None] * s[None, :]
        if kind == "range":
            given = _range_tail_given(np.sqrt(2.0) * scaled, int(param), nz)
            coarse = _range_tail_given(np.sqrt(2.0) * scaled[:, ::2], int(param), (nz + 1) // 2)
        else:
            given = _equi_tail_given(scaled, m, param, nz)
            coarse = _equi_tail_given(scaled[:, ::2], m, param, (nz + 1) // 2)
        out[0, lo : lo + 64] = given @ ws
        if ws.size == 1:
            out[1, lo : lo + 64] = coarse @ ws
        else:
            _s2, ws2 = _chi_grid(df, (ns + 1) // 2)
            out[1, lo : lo + 64] = coarse @ ws2
    return out[0], out[1]


def _quad_to_tol(
    kind: str, param: float, m: int, df: float, c: Array, tol: float, rel: float
) -> tuple[Array, Array, int]:
    """Tails with an error estimate ``|full grid - half grid|`` at most
    ``max(tol, rel · tail) / 100``, doubling both grids as needed.

    The trapezoid rule on these smooth, rapidly decaying integrands converges geometrically,
    so the half-grid difference bounds the full grid's error with a wide margin; it is what
    the report gives as the error."""
    ns = 1 if not np.isfinite(df) else 65
    nz = 129
    while True:
        full, half = _structured_tail(kind, param, m, df, c, ns, nz)
        # the half-grid difference, and a floor for rounding in sums over many nodes
        err = np.abs(full - half) + 1e-13
        if np.all(err <= np.maximum(tol, rel * np.abs(full)) / 100) or nz >= _QUAD_MAX:
            return np.clip(full, 0.0, 1.0), err, ns * nz
        nz = 2 * nz - 1
        if ns > 1:
            ns = 2 * ns - 1


# ---------------------------------------------------------------------------------------------
# the studentized range of k means (all pairwise differences)
# ---------------------------------------------------------------------------------------------
#: Below this ``scipy.stats.studentized_range.sf`` loses accuracy (see LIBRARY-NOTES); tails are
#: clipped to the Bonferroni bound there, which is then tight.
RANGE_SF_FLOOR: float = 1e-9


def studentized_range_tail(t: ArrayLike, k: int, df: ArrayLike) -> Array:
    """``P(Q_{k,df} ≥ √2 |t|)``: the single-step adjusted p-value of a pairwise difference of
    ``k`` means with t statistic ``t`` (exact for equal group sizes and a common variance;
    approximate otherwise).  ``df`` may be one value or one per ``t`` (inf: normal).

    Below :data:`RANGE_SF_FLOOR` the Bonferroni bound ``k(k−1)/2 · P(|T| ≥ |t|)`` is used
    instead of scipy's value, which is unreliable there.

    Examples
    --------
    >>> round(float(studentized_range_tail(3.5 / 2**0.5, 4, np.inf)[0]), 4)
    0.0639
    """
    t = np.atleast_1d(np.abs(np.asarray(t, dtype=np.float64)))
    df = np.broadcast_to(np.asarray(df, dtype=np.float64), t.shape)
    dfq = np.where(np.isfinite(df), df, 1e7)  # scipy's range with df = 1e7 is the normal limit
    tail = stats.studentized_range.sf(np.sqrt(2.0) * t, k, dfq)
    pairs = k * (k - 1) / 2
    two_sided = np.where(np.isfinite(df), 2 * stats.t.sf(t, dfq), 2 * stats.norm.sf(t))
    bonf = np.minimum(1.0, pairs * two_sided)
    out = np.where(tail < RANGE_SF_FLOOR, bonf, tail)
    return np.clip(out, two_sided, bonf)


def studentized_range_critical(level: float, k: int, df: ArrayLike) -> Array:
    """``q_{k,df}(level) / √2``: the critical value of simultaneous intervals for all pairwise
    differences of ``k`` means (one per df).

    Examples
    --------
    >>> round(float(studentized_range_critical(0.95, 4, 20.0)[0]) * 2**0.5, 3)  # handbook 3.958
    3.958
    """
    df = np.atleast_1d(np.asarray(df, dtype=np.float64))
    dfq = np.where(np.isfinite(df), df, 1e7)
    return stats.studentized_range.ppf(level, k, dfq) / np.sqrt(2.0)  # type: ignore[no-any-return]
