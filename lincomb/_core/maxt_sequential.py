"""The general max-|t| rule: sequential conditioning and union sampling (arrays only).

``P(max_i |T_i| > c)`` for ``T = L Z / S`` (``Z`` standard normal in ``ℝ^r``, ``ν S² ~ χ²_ν``,
``m`` rows of rank ``r``) when the family has no structure a deterministic quadrature can use.
Two unbiased randomized estimators, each averaged over independent scrambles of a Sobol
sequence (:mod:`scipy.stats.qmc`); the spread of the scrambles' estimates gives the standard
error, so the error reported is an estimate of the error actually made.

Sequential conditioning (separation of variables)
    The correlation matrix is factored as ``L Lᵀ`` (``L`` of ``m × r``) with pivoting, so that
    coordinate ``j`` of ``Z`` *finishes* the rows whose last non-zero entry is in column ``j``.
    Given the earlier coordinates, the finished rows bound ``Z_j`` to an interval ``[a_j,
    b_j]`` (the intersection of one interval per row); with ``Z_j`` drawn from the normal
    restricted to it, ``P(max|T| <= c) = E[∏_j (Φ(b_j) − Φ(a_j))]``.  The last coordinate is
    integrated exactly, and ``S`` enters as one more coordinate (first, through the nodes of a
    trapezoid rule for its density), so an ``m``-row family of rank ``r`` is an
    ``r``-dimensional integral whatever ``m``.  Pivots are chosen so that each new coordinate
    finishes as many rows as possible (for all pairwise differences: each new mean finishes its
    pairs with the earlier ones), then by the widest interval for the new coordinate (see
    :func:`_factor`).  The integrand is continuous, and scrambled Sobol
    points integrate it far faster than independent draws.

Union sampling (small tails)
    ``P(∪_i A_i) = Σ_i P(A_i) · E[1/N | A_i]`` for the events ``A_i = {|T_i| > c}`` and ``N``
    the number of them that occur.  Every ``P(A_i)`` is the same two-sided t tail, so the row
    ``i`` is drawn uniformly, then ``S`` from its density weighted by ``P(A_i | S)`` (trapezoid
    nodes), ``l_i·Z`` from the normal tail beyond ``c·S`` and the rest of ``Z`` freely.  Since
    ``1/m <= 1/N <= 1``, the relative error stays bounded however small the tail (the
    sequential rule, which integrates ``1 − P``, controls only the absolute error).

For each threshold the rule with the smaller standard error on a short pilot run is kept, and
its points are doubled until the standard error reaches the target.  Critical values are found
on a pilot run, then corrected once per scramble by a Newton step from the final estimate, so
the spread of the corrected values gives the critical value's standard error directly.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Iterator

import numpy as np
from numpy.typing import NDArray
from scipy import optimize, special

from lincomb._core.maxt_pairs import ControlCurve, PairsControl
from lincomb._settings import blas_limit, worker_threads
from lincomb._typing import Array

__all__ = ["SequentialRule", "chi_nodes", "widen_bracket"]

#: A standard-error target: one value, one per threshold, or a function of the tails.
Target = float | Array | Callable[[Array], Array]

#: Residual variance (of a unit-variance row) below which a row counts as finished by the
#: coordinates taken so far.  Exactly dependent rows (pairwise differences) leave about 1e-16;
#: a neglected residual of 1e-12 moves a row by at most 1e-6 of its standard deviation.
FINISH_TOL: float = 1e-12
#: Smallest remaining variance of a pivot (rows of unit variance).
PIVOT_TOL: float = 1e-8
#: Families up to this many rows choose pivots by the rows they finish (``O(m² r)`` work);
#: larger ones by the remaining variance alone.
GREEDY_MAX_ROWS: int = 2000
#: Points per scramble of the first run of each threshold, and of the first root.
PILOT_POINTS: int = 64
ROOT_POINTS: int = 256
#: Thresholds whose Bonferroni sum ``m · P(|T_i| > c)`` is below :data:`UNION_FAR` go to union
#: sampling; below :data:`UNION_BELOW` too when there is no control family (measured: the
#: two rules' errors cross near a Bonferroni sum of 0.03 for 66 pairwise rows, and union
#: sampling keeps its relative accuracy below).
UNION_FAR: float = 1e-3
UNION_BELOW: float = 0.03
#: Largest number of (threshold, point) pairs evaluated in one vectorized block.
_BLOCK: int = 2**12
#: Unscrambled Sobol points kept (shared by the scrambles of a rule).
_CACHE_POINTS: int = 2**14
#: Scrambled points kept (the first ones are reread by root searches and pilots).
_KEPT_POINTS: int = 2**11
#: Bits of the Sobol coordinates.
_BITS: int = 30
#: Largest spacing of the trapezoid rule on ``log S``: its error is then below about 1e-13 (the
#: integrands are analytic in a strip of half-width π/4 around the real axis).
_LOG_S_STEP: float = 0.08


def chi_nodes(df: float, c: float = 0.0, cut: float = 80.0) -> tuple[Array, Array]:
    """Nodes ``s`` and probabilities for ``S`` (``ν S² ~ χ²_ν``), optionally tilted by
    ``P(|N(0,1)| > c s)``: a trapezoid rule on ``t = log S`` over the range where the
    (tilted) density is within ``e^-cut`` of its peak.

    The spacing is at most a quarter of the standard deviation of ``log S`` and at most
    :data:`_LOG_S_STEP`: for these smooth, fast-decaying integrands the rule's error is then
    far below 1e-13 (the trapezoid rule on a Gaussian of standard deviation ``σ`` with spacing
    ``h`` errs by about ``exp(−2π² σ²/h²)``).  The tilt, used for the distribution of ``S``
    given that one row's ``|T|`` exceeds ``c``, moves the peak but does not widen it.

    Examples
    --------
    >>> s, p = chi_nodes(10.0)
    >>> bool(abs(p.sum() - 1) < 1e-14), bool(abs(p @ s**2 - 1) < 1e-12)   # E[S²] = 1
    (True, True)
    """
    if not np.isfinite(df):
        return np.ones(1), np.ones(1)
    nu = float(df)

    def logf(t: Array | float) -> Array:
        t = np.asarray(t, dtype=np.float64)
        out = nu * (t - np.expm1(2 * t) / 2)
        if c > 0:
            out = out + special.log_ndtr(-c * np.exp(t))
        return np.asarray(out)

    # the peak: log f is concave in t (the tilt's logarithm is concave too)
    peak = optimize.minimize_scalar(
        lambda t: -float(logf(t)), bounds=(-60.0 - 80.0 / nu, 10.0), method="bounded"
    )
    t0 = float(peak.x)
    top = float(logf(t0))
    lo = optimize.brentq(lambda t: float(logf(t)) - top + cut, t0 - cut / nu - 60.0, t0)
    hi = optimize.brentq(lambda t: float(logf(t)) - top + cut, t0, t0 + 10.0)
    sd_log = float(np.sqrt(special.polygamma(1, nu / 2))) / 2  # s.d. of log S
    step = min(_LOG_S_STEP, sd_log / 4)
    n = max(33, int(np.ceil((hi - lo) / step)) + 1)
    t = np.linspace(lo, hi, n)
    w = np.exp(logf(t) - top)
    w[[0, -1]] /= 2
    return np.exp(t), w / w.sum()


def _factor(rho: Array, rank: int) -> tuple[Array, NDArray[np.intp]]:
    """``L`` (``m × rank``) with ``L Lᵀ = rho`` and the coordinate that finishes each row.

    Pivoted Cholesky: the next pivot finishes the most rows, then leaves the widest interval
    for its coordinate (the smallest largest coefficient among the rows it finishes; for a
    pivot finishing only itself, the smallest remaining variance).  Measured on all pairs of 12
    unequal groups, on pairs of correlated means and on unstructured full-rank correlations,
    this order gave 1.5 to 2 times smaller errors than the widest-variance-first order at the
    same number of points.  Entries of a row after its finishing column are set to zero (they
    are rounding).
    """
    m = rho.shape[0]
    res = rho.copy()
    L = np.zeros((m, rank))
    taken = 0
    done = np.zeros(m, dtype=bool)
    finish = np.full(m, rank - 1, dtype=np.intp)
    for j in range(rank):
        d = np.diag(res).copy()
        # a pivot needs a remaining variance well above rounding (it is divided by its root)
        live = np.flatnonzero(~done & (d > PIVOT_TOL))
        if live.size == 0:
            break
        dd = d[live]
        if m <= GREEDY_MAX_ROWS:
            sub = res[np.ix_(live, live)]
            scale = np.outer(dd, dd)
            finishes = (sub * sub >= (1 - 1e-6) * scale) & (scale > 0)
            # the finished rows' coefficients on the new coordinate: the largest sets the
            # width of its interval at zero partial sums
            lead = np.max(np.abs(sub) * finishes, axis=0) / np.sqrt(np.maximum(dd, 1e-300))
            key = np.lexsort((lead, -finishes.sum(axis=0)))
        else:
            key = np.argsort(dd, kind="stable")
        p = int(live[key[0]])
        col = res[:, p] / np.sqrt(d[p])
        col[done] = 0.0
        L[:, j] = col
        res -= np.outer(col, col)
        newly = ~done & (np.diag(res) <= FINISH_TOL)
        newly[p] = True
        finish[newly] = j
        done |= newly
        taken = j + 1
    L = L[:, :taken]
    # rows left over (a remaining variance between FINISH_TOL and PIVOT_TOL, when the family
    # is numerically of lower rank than asked) end at their last clearly non-zero entry
    for left in np.flatnonzero(~done).tolist():
        big = np.flatnonzero(np.abs(L[left]) > np.sqrt(FINISH_TOL))
        finish[left] = int(big[-1]) if big.size else 0
    for row in range(m):
        L[row, finish[row] + 1 :] = 0.0
    return L, finish


class _Scrambles:
    """Independent scrambles of one Sobol sequence: a random linear matrix scrambling with a
    digital shift per scramble (Matoušek's affine scrambling, as :class:`scipy.stats.qmc.Sobol`
    does with ``scramble=True``), applied here to the unscrambled 30-bit coordinates.

    Output bit ``i`` of a coordinate is the XOR of input bits ``j <= i`` selected by a random
    unit lower-triangular binary matrix, then XORed with a random shift; the coordinate is the
    middle of its ``2^-30`` cell.  The matrix acts through four 256-entry tables per dimension
    (one per byte), so a scramble costs a few table look-ups per coordinate, and the
    unscrambled points are shared by all scrambles.  (One scipy generator per scramble gave the
    same errors at several times the set-up cost; a digital shift alone gave errors twice as
    large on all pairs of four means, and far enough from normal that the t bound covered 97%
    instead of 99%.)  The first :data:`_CACHE_POINTS` unscrambled points are kept.
    """

    def __init__(self, d: int, seeds: list[int]) -> None:
        self.d = d
        self.base = np.empty((0, d), dtype=np.int64)
        tables = []
        shifts = []
        for v in seeds:
            rng = np.random.default_rng(v)
            lower = np.tril(rng.integers(0, 2, size=(d, _BITS, _BITS)), -1)
            lower[:, np.arange(_BITS), np.arange(_BITS)] = 1
            # column j of the matrix as an integer: bit (BITS-1-i) set when row i has a 1
            weights = 1 << (_BITS - 1 - np.arange(_BITS, dtype=np.int64))
            cols = (lower * weights[None, :, None]).sum(axis=1)  # (d, BITS)
            tables.append(_byte_tables(cols))
            shifts.append(rng.integers(0, 2**_BITS, size=d))
        # flat look-up: entry ((k·d + dim)·bytes + byte)·256 + value
        self.tables = np.stack(tables).ravel()
        n_bytes = (_BITS + 7) // 8
        k = len(seeds)
        self.offsets = [
            (((np.arange(k)[:, None] * d + np.arange(d)[None, :]) * n_bytes + byte) * 256)[
                :, None, :
            ]
            for byte in range(n_bytes)
        ]
        self.shifts = np.asarray(shifts, dtype=np.int64)[:, None, :]  # (K, 1, d)
        self.kept = np.empty((k, 0, d))  # the first scrambled points

    def _sobol(self, start: int, stop: int) -> NDArray[np.int64]:
        from scipy.stats import qmc

        engine = qmc.Sobol(d=self.d, scramble=False, bits=_BITS)
        with warnings.catch_warnings():  # balance needs powers of two; any count is unbiased
            warnings.filterwarnings("ignore", message=".*balance properties.*")
            if start:
                engine.fast_forward(start)
            u = engine.random(stop - start)
        return np.asarray(np.rint(u * 2.0**_BITS), dtype=np.int64)

    def _scramble(self, base: NDArray[np.int64]) -> Array:
        out = np.zeros((self.shifts.shape[0],) + base.shape, dtype=np.int64)
        for byte, offset in enumerate(self.offsets):
            out ^= np.take(self.tables, offset + ((base >> (8 * byte)) & 0xFF)[None, :, :])
        out ^= self.shifts
        return np.asarray((out + 0.5) / 2.0**_BITS, dtype=np.float64)

    def points(self, start: int, stop: int) -> Array:
        """Points ``start .. stop-1`` of every scramble, shape ``(K, n, d)``."""
        if stop <= self.kept.shape[1]:
            return self.kept[:, start:stop]
        have = self.base.shape[0]
        want = min(max(stop, 2 * have), _CACHE_POINTS)
        if want > have:
            self.base = np.vstack([self.base, self._sobol(have, want)])
        if stop <= _KEPT_POINTS:
            self.kept = self._scramble(self.base[:want])
            return self.kept[:, start:stop]
        if stop <= self.base.shape[0]:
            return self._scramble(self.base[start:stop])
        return self._scramble(self._sobol(start, stop))


def _byte_tables(cols: NDArray[np.int64]) -> NDArray[np.int64]:
    """For columns ``cols`` (d, BITS) of a binary matrix acting on a coordinate's bits (input
    bit ``j`` counted from the most significant), the XOR of the selected columns for every
    value of each byte of the input: shape ``(d, bytes, 256)``."""
    d = cols.shape[0]
    n_bytes = (_BITS + 7) // 8
    out = np.zeros((d, n_bytes, 256), dtype=np.int64)
    for byte in range(n_bytes):
        table = np.zeros((d, 1), dtype=np.int64)
        for bit in range(8):  # value bit `bit` of this byte is input bit BITS-1-(8·byte+bit)
            j = _BITS - 1 - (8 * byte + bit)
            col = cols[:, j][:, None] if j >= 0 else np.zeros((d, 1), dtype=np.int64)
            table = np.concatenate([table, table ^ col], axis=1)
        out[:, byte, :] = table
    return out


class SequentialRule:
    """``P(max|T_i| > c)`` for a family of ``m`` rows of rank ``r``: the rules of the module
    notes, each over ``replicates`` independent scrambles.

    Parameters
    ----------
    loadings : (m, r) ndarray
        Unit rows ``l_i`` with ``T_i = l_i·Z / S``.
    df : float
        ``ν`` (``inf``: normal).
    seed : int
    replicates : int
    control : PairsControl, optional
        A neighbouring family with an exact probability (:mod:`lincomb._core.maxt_pairs`):
        the sequential rule then integrates the difference between the two families.
    """

    def __init__(
        self,
        loadings: Array,
        df: float,
        seed: int,
        replicates: int,
        control: PairsControl | None = None,
    ) -> None:
        lo = np.asarray(loadings, dtype=np.float64)
        self.m, self.r = lo.shape
        self.df = float(df)
        self.replicates = int(replicates)
        self.loadings = lo
        self.rho = lo @ lo.T
        np.fill_diagonal(self.rho, 1.0)
        L, finish = _factor(self.rho, self.r)
        self.coords = L.shape[1]  # coordinates of the sequential rule (r, or fewer if the
        # family is numerically of lower rank)
        self.steps: list[tuple[Array, Array]] = []
        self.control_inv: list[Array] = []
        self.control = control
        for j in range(self.coords):
            rows = np.flatnonzero(finish == j)
            lead = L[rows, j]
            sign = np.where(lead < 0, -1.0, 1.0)
            inv = 1.0 / np.abs(lead)
            coef = L[rows, :j] * (sign * inv)[:, None]
            self.steps.append((np.ascontiguousarray(coef), inv[:, None]))
            if control is not None:
                self.control_inv.append((inv * control.scale[rows])[:, None])
        # plain integer seeds: a fresh generator per stream (see DEVELOPERS, traps); four
        # sets of scrambles: (sequential, union) x (points decided, error measured)
        seeds = np.random.SeedSequence(int(seed)).generate_state(4 * self.replicates)
        self._seeds = [
            [int(v) for v in seeds[i * self.replicates : (i + 1) * self.replicates]]
            for i in range(4)
        ]
        self._streams: dict[tuple[str, int], _Scrambles] = {}
        # (at least one dimension: a family of one coordinate needs no uniforms but the
        # generator needs a dimension)
        self.seq_dim = max(1, self.coords - 1 + (1 if np.isfinite(self.df) else 0))
        self.s_nodes, self.s_prob = chi_nodes(self.df)
        self.s_cum = np.cumsum(self.s_prob)
        self.s_cum[-1] = 1.0
        self._curve: ControlCurve | None = None
        self._tilts: dict[float, tuple[Array, Array]] = {}
        # the control's S integral needs only double precision: a shorter range suffices
        self._control_s = chi_nodes(self.df, cut=36.0)

    # -----------------------------------------------------------------------------------------
    # single-row tails and the control's exact probability
    # -----------------------------------------------------------------------------------------
    def row_tail(self, c: Array) -> Array:
        """``P(|T_i| > c)`` for one row (exact)."""
        c = np.asarray(c, dtype=np.float64)
        if np.isfinite(self.df):
            return np.asarray(2.0 * special.stdtr(self.df, -c))
        return np.asarray(2.0 * special.ndtr(-c))

    def control_inside(self, cs: Array) -> Array:
        """The neighbouring family's ``P(max <= c)`` (exact up to quadrature and the checked
        interpolation in ``c·S``); 0 without one."""
        cs = np.atleast_1d(np.asarray(cs, dtype=np.float64))
        if self.control is None:
            return np.zeros(cs.size)
        s_nodes, s_prob = self._control_s
        if self._curve is None:
            # beyond X with m·P(|N(0,1)| > X·min scale) = 1e-17 the normal-case probability
            # is 1 to double precision: the curve covers [0, X]
            low = float(self.control.scale.min())
            top = float(-special.ndtri(0.5e-17 / self.m)) / low
            self._curve = self.control.curve(top)
        return np.asarray(self._curve(cs[:, None] * s_nodes[None, :]) @ s_prob)

    def streams(self, kind: str, part: int) -> _Scrambles:
        """The scrambles of a rule (``"seq"`` or ``"union"``) for one part: 0 decides the
        points, 1 measures the error (created when first used)."""
        key = (kind, part)
        if key not in self._streams:
            dim = self.seq_dim if kind == "seq" else self.r + 3
            self._streams[key] = _Scrambles(dim, self._seeds[(0 if kind == "seq" else 2) + part])
        return self._streams[key]

    def use_union(self, cs: Array) -> NDArray[np.bool_]:
        """Which thresholds go to union sampling: far tails always (the sequential rule has no
        relative accuracy there), moderate ones too when there is no control family."""
        bonf = self.m * self.row_tail(cs)
        switch = UNION_BELOW if self.control is None else UNION_FAR
        return np.asarray(bonf < switch)

    # -----------------------------------------------------------------------------------------
    # sequential conditioning
    # -----------------------------------------------------------------------------------------
    def _inside(self, x: Array, u: Array, invs: list[Array]) -> Array:
        """``∏_j (Φ(b_j) − Φ(a_j))`` at thresholds ``x`` (n,) and uniforms ``u`` (r−1, n)."""
        n = x.size
        z = np.empty((self.coords, n))
        w = np.ones(n)
        last = self.coords - 1
        for j, ((coef, _inv), inv) in enumerate(zip(self.steps, invs, strict=True)):
            if j == 0:
                b = x * float(inv.min())
                a = -b
            else:
                part = coef @ z[:j]
                xs = inv * x
                a = np.max(-xs - part, axis=0)
                b = np.min(xs - part, axis=0)
            pa = special.ndtr(a)
            e = special.ndtr(b)
            e -= pa
            np.maximum(e, 0.0, out=e)
            w *= e
            if j == last:
                break
            e *= u[j]
            e += pa
            np.clip(e, 1e-300, 1.0 - 2.0**-53, out=e)
            z[j] = special.ndtri(e)
        return w

    def _blocks(self, kind: str, part: int, start: int, stop: int) -> Iterator[Array]:
        """Points ``start .. stop-1`` of every scramble, as blocks of shape ``(K, n, d)``."""
        streams = self.streams(kind, part)
        step = max(1, _BLOCK // self.replicates)
        for at in range(start, stop, step):
            yield streams.points(at, min(stop, at + step))

    def seq_sums(self, cs: Array, start: int, stop: int, part: int = 0) -> Array:
        """Sums over points ``start .. stop-1`` of ``P(max|T| <= c | point)`` (less the control
        family's, when there is one), shape ``(K, len(cs))``."""
        cs = np.atleast_1d(np.asarray(cs, dtype=np.float64))
        out = np.zeros((self.replicates, cs.size))
        if stop <= start or cs.size == 0:
            return out
        finite = np.isfinite(self.df)
        own = [inv for _coef, inv in self.steps]
        for u in self._blocks("seq", part, start, stop):
            k, n, _d = u.shape
            flat = u.reshape(k * n, -1)
            if finite:
                s = self.s_nodes[np.searchsorted(self.s_cum, flat[:, 0])]
                zu = flat[:, 1:].T
            else:
                s = np.ones(k * n)
                zu = flat.T
            per = max(1, _BLOCK // (k * n))
            for lo in range(0, cs.size, per):
                cc = cs[lo : lo + per]
                x = (cc[:, None] * s[None, :]).ravel()
                zz = np.tile(zu, (1, cc.size))
                w = self._inside(x, zz, own)
                if self.control is not None:
                    w -= self._inside(x, zz, self.control_inv)
                out[:, lo : lo + per] += w.reshape(cc.size, k, n).sum(axis=2).T
        return out

    # -----------------------------------------------------------------------------------------
    # union sampling
    # -----------------------------------------------------------------------------------------
    def _tilted(self, c: float) -> tuple[Array, Array]:
        """Nodes of ``S`` given one row beyond ``c`` and their cumulative probabilities."""
        if c not in self._tilts:
            s, p = chi_nodes(self.df, c)
            cum = np.cumsum(p)
            cum[-1] = 1.0
            self._tilts[c] = (s, cum)
        return self._tilts[c]

    def union_sums(self, cs: Array, start: int, stop: int, part: int = 0) -> Array:
        """Sums over points of ``1/N`` given one row beyond ``c``, shape ``(K, len(cs))``."""
        cs = np.atleast_1d(np.asarray(cs, dtype=np.float64))
        out = np.zeros((self.replicates, cs.size))
        if stop <= start or cs.size == 0:
            return out
        tilted = [self._tilted(float(c)) for c in cs]
        for u in self._blocks("union", part, start, stop):
            k, n, _d = u.shape
            flat = u.reshape(k * n, -1)
            row = np.minimum((flat[:, 0] * self.m).astype(np.intp), self.m - 1)
            lw = self.loadings @ special.ndtri(flat[:, 3:]).T  # (m, kn): l_j · W
            rho = self.rho[:, row]  # (m, kn)
            own = lw[row, np.arange(k * n)]
            logu = np.log(flat[:, 2])
            for j, (s_nodes, cum) in enumerate(tilted):
                x = cs[j] * s_nodes[np.searchsorted(cum, flat[:, 1])]
                g = -special.ndtri_exp(logu + special.log_ndtr(-x))  # beyond x
                zz = rho * (g - own)
                zz += lw
                np.abs(zz, out=zz)
                cnt = np.count_nonzero(zz > x, axis=0)
                out[:, j] += (1.0 / np.maximum(cnt, 1)).reshape(k, n).sum(axis=1)
        return out

    # -----------------------------------------------------------------------------------------
    # drivers
    # -----------------------------------------------------------------------------------------
    def _estimates(self, cs: Array, union: NDArray[np.bool_], sums: Array, n: Array) -> Array:
        """Per-scramble tail estimates, shape ``(K, len(cs))``."""
        seq = 1.0 - self.control_inside(cs)[None, :] - sums / n
        uni = self.m * self.row_tail(cs)[None, :] * sums / n
        return np.asarray(np.where(union[None, :], uni, seq))

    def _sums(self, cs: Array, union: NDArray[np.bool_], start: int, stop: int, part: int) -> Array:
        out = np.zeros((self.replicates, cs.size))
        if union.any():
            out[:, union] = self.union_sums(cs[union], start, stop, part)
        if (~union).any():
            out[:, ~union] = self.seq_sums(cs[~union], start, stop, part)
        return out

    def per_scramble(
        self, cs: Array, target: Target, max_points: int
    ) -> tuple[Array, Array, Array, NDArray[np.bool_], NDArray[np.bool_]]:
        """Per-scramble tail estimates of both parts ``(K, len(cs))`` each, the points used
        per threshold, which thresholds used union sampling and which reached the target.

        Part 0 doubles its points (from :data:`PILOT_POINTS`) until its own standard error of
        the two parts' mean, ``s.d. / √(2K)``, is at most ``target`` (a function of the tails:
        evaluated at part 0's current estimates); part 1, independent
        scrambles, then uses the same number of points.  Part 1's spread is independent of
        that choice, so it measures the error honestly: stopping on an estimate of the error
        selects the runs whose estimate came out small, which would make part 0's own spread
        too small on average.  So the reported error may come out a little above or below
        ``target``; *reaching the target* means part 0 met it before ``max_points``.
        """
        cs = np.atleast_1d(np.asarray(cs, dtype=np.float64))
        union = self.use_union(cs)
        trivial = self.row_tail(cs) <= 0.0  # below the smallest double: the tail is 0
        live = ~trivial
        n = min(PILOT_POINTS, max_points)
        sums = np.zeros((self.replicates, cs.size))
        sums[:, live] = self._sums(cs[live], union[live], 0, n, 0)
        counts = np.full(cs.size, n, dtype=np.float64)
        while True:
            first = self._estimates(cs, union, sums, counts)
            first[:, trivial] = 0.0
            goal = target(first.mean(axis=0)) if callable(target) else target
            goal = np.broadcast_to(np.asarray(goal, dtype=np.float64), cs.shape)
            own = self.std_error(first, cs, union, counts)
            todo = (own > goal) & live & (counts < max_points)
            if not todo.any():
                break
            new = min(2 * n, max_points)
            sums[:, todo] += self._sums(cs[todo], union[todo], n, new, 0)
            counts[todo] = new
            n = new
        second = np.zeros_like(first)
        for count in np.unique(counts[live]):
            sel = live & (counts == count)
            part = self._sums(cs[sel], union[sel], 0, int(count), 1)
            second[:, sel] = self._estimates(cs[sel], union[sel], part, counts[sel])
        reached = ~live | (self.std_error(first, cs, union, counts) <= goal)
        return first, second, counts, union, reached

    def std_error(self, est: Array, cs: Array, union: NDArray[np.bool_], counts: Array) -> Array:
        """Standard error of the mean of both parts from one part's per-scramble estimates.

        For union sampling it is at least ``m · P(|T_i| > c) / n`` over the ``n`` points of
        both parts: when no point had two rows beyond ``c`` (the scrambles then agree
        exactly), the estimate is the Bonferroni sum, above the tail by at most the share of
        such points, which ``n`` points resolve only to about ``1/n``.
        """
        scale = np.sqrt(2.0 * self.replicates)
        se = est.std(axis=0, ddof=1) / scale
        floor = self.m * self.row_tail(cs) / (2.0 * self.replicates * counts)
        return np.asarray(np.where(union, np.maximum(se, floor), se))

    def tails(self, cs: Array, target: Target, max_points: int) -> tuple[Array, Array, int, bool]:
        """``P(max|T| > c)`` for each ``c``: the mean of both parts, its standard error from
        the second part's spread (target ``target``, see :meth:`per_scramble`), the largest
        number of points per scramble used and whether every target was reached."""
        with blas_limit(worker_threads()):  # many small products: one BLAS thread
            first, second, counts, union, reached = self.per_scramble(cs, target, max_points)
        se = self.std_error(second, cs, union, counts)
        tail = (first.mean(axis=0) + second.mean(axis=0)) / 2
        return np.clip(tail, 0.0, 1.0), se, int(counts.max()), bool(reached.all())

    def quantile(
        self, alpha: float, lo: float, hi: float, tol: float, max_points: int
    ) -> tuple[float, float, float, int, bool]:
        """The ``c`` with ``P(max|T| > c) = alpha`` (see :meth:`_quantile`)."""
        with blas_limit(worker_threads()):  # many small products: one BLAS thread
            return self._quantile(alpha, lo, hi, tol, max_points)

    def _quantile(
        self, alpha: float, lo: float, hi: float, tol: float, max_points: int
    ) -> tuple[float, float, float, int, bool]:
        """The ``c`` with ``P(max|T| > c) = alpha``.

        A first root ``c0``: of the control family's exact probability when there is one,
        else of the sequential rule on the first :data:`ROOT_POINTS` points of part 0 (the
        estimate is continuous in ``c`` for fixed points).  Then, per scramble of each part,
        the parabola through the sequential rule's estimates at ``c0 − h, c0, c0 + h`` on its
        first points, moved to pass through that scramble's final estimate at ``c0`` (points
        chosen as in :meth:`per_scramble`), gives a root.  The critical value is the mean of
        the roots and its standard error comes from the spread of part 1's roots.  Returns
        ``c``, that standard error, the tail's standard error at ``c0``, the points per
        scramble and whether the target was reached.
        """
        n0 = min(ROOT_POINTS, max_points)

        def gap(cs: Array) -> Array:
            """``alpha`` less the first guess of the tail at each ``c`` (decreasing in c)."""
            if self.control is not None:
                return np.asarray(alpha - (1.0 - self.control_inside(cs)))
            return np.asarray(alpha - np.mean(1.0 - self.seq_sums(cs, 0, n0) / n0, axis=0))

        c0 = _first_root(gap, lo, hi)
        h = 5e-3 * c0
        cs = np.array([c0 - h, c0, c0 + h])
        first, second, counts, union, reached = self.per_scramble(cs[1:2], tol, max_points)
        exact = self.control_inside(cs)[None, :]
        roots = []
        for part, final in ((0, first[:, 0]), (1, second[:, 0])):
            # the shape near c0 from the sequential rule on the part's first points
            # (continuous in c), its level at c0 from the part's final estimate
            shape = 1.0 - exact - self.seq_sums(cs, 0, n0, part) / n0
            tails = shape + (final - shape[:, 1])[:, None]
            roots.append(np.array([_parabola_root(cs, row, alpha) for row in tails]))
        scale = np.sqrt(2.0 * self.replicates)
        crit = float((roots[0].mean() + roots[1].mean()) / 2)
        se_tail = float(self.std_error(second, cs[1:2], union, counts)[0])
        # the roots' spread, and for union sampling no less than its floor over the density
        slope = float(np.mean((shape[:, 0] - shape[:, 2]) / (cs[2] - cs[0])))
        floor = se_tail / slope if union[0] and slope > 0 else 0.0
        crit_se = float(max(roots[1].std(ddof=1) / scale, floor))
        return crit, crit_se, se_tail, int(counts[0]), bool(reached[0])


def widen_bracket(f: Callable[[float], float], lo: float, hi: float) -> tuple[float, float]:
    """``[lo, hi]`` widened until the increasing ``f`` changes sign over it (for Brent's
    method): an end that does not bracket moves out by the current width, which doubles each
    time (at most 60 times each way; ``lo`` stays at 1e-8 or above, thresholds are positive).

    Examples
    --------
    >>> widen_bracket(lambda c: c - 10.0, 1.0, 2.0)
    (1.0, 17.0)
    """
    width = hi - lo
    for _ in range(60):
        if f(lo) <= 0:
            break
        lo, width = max(lo - width, 1e-8), 2 * width
    for _ in range(60):
        if f(hi) >= 0:
            break
        hi, width = hi + width, 2 * width
    return lo, hi


def _first_root(gap: Callable[[Array], Array], lo: float, hi: float) -> float:
    """A root of an increasing function: the bracket widened if needed, then Brent's method
    to a relative 1e-3 (the per-scramble parabolas, 5e-3 wide, correct the rest)."""

    def one(c: float) -> float:
        return float(gap(np.array([c]))[0])

    lo, hi = widen_bracket(one, lo, hi)
    return float(optimize.brentq(one, lo, hi, xtol=1e-3 * lo, rtol=1e-10))


def _parabola_root(cs: Array, tails: Array, alpha: float) -> float:
    """The root of the parabola through three (c, tail) points nearest the middle one."""
    c0 = cs[1]
    x = cs - c0
    coef = np.polyfit(x, tails - alpha, 2)
    a, b, c = (float(v) for v in coef)
    if abs(a) < 1e-300 or b * b - 4 * a * c < 0:
        return float(c0 - c / b)
    # the root of a x² + b x + c nearest 0, in a form without cancellation
    q = -0.5 * (b + np.copysign(np.sqrt(b * b - 4 * a * c), b))
    return float(c0 + c / q)
