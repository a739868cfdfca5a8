"""Responses with missing values: each fitted on its own rows, vectorized over responses.

A response observed on the rows ``O`` of a shared design is the least-squares problem of the
design's rows ``O`` alone.  Refactoring the design for every pattern of missing values costs a
QR of ``n`` rows per response; this module reuses the one factorization of all rows instead.

Algebra
-------
With ``Q̂`` the thin ``Q`` of the centred, ``sqrt(w)``-scaled design of all rows
(:class:`~lincomb._core.many.DesignFactor`), with the intercept's own direction
``sqrt(w)/sqrt(W)`` as its first column, the design is ``A = Q̂ R`` (``R`` upper triangular,
columns in working order).  On the rows ``O`` it is ``A_O = Q̂_O R``, and::

    G = Q̂_Oᵀ Q̂_O = I − Q̂_Mᵀ Q̂_M = L Lᵀ          (M: the rows where the response is missing)

so ``A_O = (Q̂_O L⁻ᵀ)(Lᵀ R)``: the columns of ``Q̂_O L⁻ᵀ`` are orthonormal and ``Lᵀ R`` is the
triangular factor of the response's own rows.  ``G`` is ``k × k`` (``k`` = columns of the
design) and is formed from the few missing rows only (``k²`` work per missing value, one sparse
product), so a response costs what its missing values cost plus its share of the matrix products
over all rows, vectorized over responses.  The response is shifted by a rough mean (of a
sample of rows; no shift where that mean is small beside the sample's spread): what the shift
leaves of the mean lies along the intercept, which the fit takes up exactly, and where it is
more than a quarter of the shifted sum of squares the response is centred on its exact mean
before its products are taken again, so the shifted response is never more than ``√(4/3)``
times the centred one in norm and its products lose no digit to a large mean.  The
coefficients are ``c = G⁻¹ Q̂ᵀ y_O`` (a batched solve).  Blocks of responses are projected one
by one (:meth:`ObservedDesign.project`: the passes over the data) and finished together
(:meth:`ObservedDesign.finish`: the small algebra per response).  The residual sum of
squares is ``‖y_O‖² − cᵀ G c`` where the fit takes at most half of ``‖y_O‖²`` (at most one
bit lost to cancellation) and comes from the explicit residual ``y_O − Q̂_O c`` elsewhere
(those responses are read again, a few at a time).  The covariance of ``Cβ̂`` is ``σ² Uᵀ G⁻¹ U`` with
``U = R⁻ᵀ C_workingᵀ`` shared by every response: its root is ``L⁻¹ U`` (``L`` the Cholesky
factor of ``G``, a batched forward substitution).

When the result is exact (certified)
------------------------------------
A response's vectorized fit is *certified* when

1. **the design is full rank with a margin** (:func:`observed_design`, once per design): every
   column's greedy residual on all rows (the quantity :func:`~lincomb._core.solve.solve`
   compares with ``rank_tol``) exceeds ``RANK_MARGIN · max(rank_tol, RANK_FLOOR)`` and every
   centred column norm exceeds ``RANK_MARGIN · CONSTANT_TOL`` times its raw norm;
2. **the response's rows keep a quarter of every direction**: ``λ_min(G) ≥ GRAM_FLOOR`` (1/4),
   i.e. every linear combination of the design's columns keeps at least a quarter of its
   weighted sum of squares on the rows where the response is observed (tested exactly by a
   Cholesky factorization of ``G − GRAM_FLOOR·I``);
3. rows are left for the error (``n_O > p``), every number is finite, and the residual norm is
   not within a factor :data:`ZERO_MARGIN` of the exact-fit threshold ``ZERO_RSS_TOL·‖y‖``.

Under (2) every greedy residual on ``O`` is at least half of its value on all rows and every
column scale and the weight sum change by at most a factor 2 (so the response's rank decision
is the design's, with a margin of ``RANK_MARGIN / 2`` over the rounding of either computation),
``κ(G) ≤ 4`` bounds the extra rounding of the Cholesky route to a factor 4 over the direct one,
and restriction rows in decision coordinates (:meth:`~lincomb._core.solve.Solution.decision_rows`)
change their distances by at most a factor 2 (callers check that every row's distance is at
least a factor :data:`ROW_MARGIN` from ``row_tol``:
:func:`~lincomb._core.observed_wald.row_distances`).  Responses that are
not certified are refitted exactly on their own rows by the caller (one factorization per
pattern of missing values), so no decision ever rests on a downdate that could lose accuracy.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sps
from numpy.typing import NDArray

from lincomb._core.many import DesignFactor, PerResponse, per_chunk, rough_mean
from lincomb._core.solve import CONSTANT_TOL, Solution
from lincomb._core.triangular import upper_solve
from lincomb._docstrings import fill_doc
from lincomb._typing import Array

__all__ = [
    "GRAM_FLOOR",
    "RANK_MARGIN",
    "RANK_FLOOR",
    "ROW_MARGIN",
    "ZERO_MARGIN",
    "ObservedBlock",
    "ObservedDesign",
    "ObservedPart",
    "observed_design",
]


#: Smallest eigenvalue of ``G`` (share of every direction's sum of squares kept on a response's
#: rows) for a certified vectorized fit.
GRAM_FLOOR: float = 0.25
#: Margin of the design's greedy residuals over the rank tolerance (and of its column norms over
#: the constant-column tolerance) for the vectorized route.
RANK_MARGIN: float = 32.0
#: The rank margin is taken over at least this tolerance (about 4,500 machine epsilons), so that
#: rounding of the factor of a response's rows cannot decide.
RANK_FLOOR: float = 2.0**-40
#: A restriction row's distance (decision coordinates) must be this factor away from ``row_tol``.
ROW_MARGIN: float = 4.0
#: A residual norm within this factor of the exact-fit threshold is refitted exactly.
ZERO_MARGIN: float = 4.0


#: Example set-up shared by the docstrings below: 40 rows, an intercept and two columns.
_FORTY_ROWS = """\
>>> import numpy as np
>>> from lincomb._core import factor_design, solve
>>> rng = np.random.default_rng(0)
>>> x = np.column_stack([np.ones(40), rng.normal(size=(40, 2))])
>>> f = factor_design(x, intercept=0)"""
_forty_doc = fill_doc(forty_rows=_FORTY_ROWS)
#: The same, with two responses: the first has a missing value, the second also an infinite one.
_FORTY_ROWS_INFINITE = (
    _FORTY_ROWS + "\n>>> y = rng.normal(size=(40, 2)); y[5] = np.nan; y[6, 1] = np.inf"
)
_forty_infinite_doc = fill_doc(forty_rows_infinite=_FORTY_ROWS_INFINITE)


@_forty_doc
@dataclass(frozen=True)
class ObservedBlock(PerResponse):
    """Responses fitted on their own rows of a shared design (see the module notes).

    Attributes
    ----------
    n : (r,) ndarray of int
        Rows where each response is observed.
    theta : (k, r) ndarray
        Working coefficients of each response, in the coordinates of the design's
        :class:`Solution` on all rows (kept order).
    resid_norm : (r,) ndarray
        Residual norms (weighted), from the explicit residual.
    y_norm : (r,) ndarray
        Norms of the centred, scaled responses on their rows.
    low : (k, k, r) ndarray
        Lower Cholesky factor ``L`` of ``G = Q̂_Oᵀ Q̂_O = L Lᵀ`` per response, responses last
        (the identity where not certified); :attr:`chol` is the same, responses first.
    certified : (r,) ndarray of bool
        Whether the vectorized fit stands (module notes); the others must be refitted.

    Examples
    --------
    %(forty_rows)s
    >>> y = rng.normal(size=(40, 3)); y[[2, 7], 1] = np.nan
    >>> block = observed_design(f, solve(f.moments)).fit(y)
    >>> block.n.tolist(), block.certified.tolist()
    ([40, 38, 40], [True, True, True])
    """

    n: NDArray[np.int64]
    theta: Array
    resid_norm: Array
    y_norm: Array
    low: Array
    certified: NDArray[np.bool_]

    @classmethod
    @_forty_doc
    def empty(cls, k: int) -> ObservedBlock:
        """The record of no responses (``k`` working columns), as :meth:`concat` gives it.

        Examples
        --------
        %(forty_rows)s
        >>> y = rng.normal(size=(40, 2)); y[5, 1] = np.nan
        >>> od = observed_design(f, None)
        >>> ObservedBlock.concat([od.fit(y), od.fit(y[:, ::-1])], 3).n.tolist()
        [40, 39, 39, 40]
        >>> od.fit(y).take(np.array([1, 0])).n.tolist(), ObservedBlock.concat([], 3).low.shape
        ([39, 40], (3, 3, 0))
        """
        return cls(
            np.zeros(0, dtype=np.int64),
            np.zeros((k, 0)),
            np.zeros(0),
            np.zeros(0),
            np.zeros((k, k, 0)),
            np.zeros(0, dtype=bool),
        )

    @property
    def chol(self) -> Array:
        """``L`` per response, (r, k, k) (a view of :attr:`low`)."""
        return np.moveaxis(self.low, -1, 0)

    @property
    def rss(self) -> Array:
        with np.errstate(over="ignore"):
            out: Array = self.resid_norm**2
        return out

    @_forty_infinite_doc
    def finite(self) -> NDArray[np.bool_]:
        """Responses whose fit is finite (an infinite value or an overflow propagates).

        Examples
        --------
        %(forty_rows_infinite)s
        >>> observed_design(f, None).fit(y).finite().tolist()
        [True, False]
        """
        return (
            np.isfinite(self.y_norm)
            & np.isfinite(self.resid_norm)
            & np.isfinite(self.theta).all(axis=0)
        )


@_forty_infinite_doc
@dataclass(frozen=True)
class ObservedPart:
    """A block of responses projected for an own-rows fit (:meth:`ObservedDesign.project`).

    Attributes
    ----------
    n : (b,) ndarray of int
        Rows where each response is observed.
    qty : (k, b) ndarray
        ``Q̂ᵀ`` times the shifted, scaled responses (zero where missing).
    y2 : (b,) ndarray
        Their sums of squares.
    c2 : (b,) ndarray
        The sums of squares of the centred, scaled responses on their rows.
    shift, mean : (b,) ndarray
        What was subtracted: a rough mean, then (where it was far from the mean) the mean it
        left (zero elsewhere).
    half : (b, k(k+1)/2) ndarray
        Upper triangles of ``Q̂_Mᵀ Q̂_M`` (the missing rows' part of the Gram matrix).
    rows, cols : (nnz,) ndarray of int
        The missing values: rows and positions in the block (row by row).

    Examples
    --------
    %(forty_rows_infinite)s
    >>> observed_design(f, None).project(y).finite().tolist()
    [True, False]
    """

    n: NDArray[np.int64]
    qty: Array
    y2: Array
    c2: Array
    shift: Array
    mean: Array
    half: Array
    rows: NDArray[np.intp]
    cols: NDArray[np.intp]

    @property
    def count(self) -> int:
        return int(self.n.shape[0])

    @_forty_doc
    def finite(self) -> NDArray[np.bool_]:
        """Responses whose summaries are finite (an infinite value or an overflow propagates;
        their fit would not be).

        Examples
        --------
        %(forty_rows)s
        >>> y = rng.normal(size=(40, 2)); y[3, 0] = -np.inf
        >>> observed_design(f, None).project(y).finite().tolist()
        [False, True]
        """
        return (
            np.isfinite(self.y2)
            & np.isfinite(self.c2)
            & np.isfinite(self.shift)
            & np.isfinite(self.mean)
            & np.isfinite(self.qty).all(axis=0)
        )

    @staticmethod
    def concat(parts: list[ObservedPart], k: int, h: int) -> ObservedPart:
        """Join parts (in order) into one; ``cols`` become positions in the joined block."""
        if len(parts) == 1:
            return parts[0]
        if not parts:
            none = np.zeros(0)
            index = np.zeros(0, dtype=np.intp)
            return ObservedPart(
                np.zeros(0, dtype=np.int64),
                np.zeros((k, 0)),
                none,
                none,
                none,
                none,
                np.zeros((0, h)),
                index,
                index,
            )
        offsets = np.cumsum([0] + [p.count for p in parts])
        return ObservedPart(
            np.concatenate([p.n for p in parts]),
            np.concatenate([p.qty for p in parts], axis=1),
            np.concatenate([p.y2 for p in parts]),
            np.concatenate([p.c2 for p in parts]),
            np.concatenate([p.shift for p in parts]),
            np.concatenate([p.mean for p in parts]),
            np.concatenate([p.half for p in parts]),
            np.concatenate([p.rows for p in parts]),
            np.concatenate([p.cols + o for p, o in zip(parts, offsets[:-1], strict=True)]),
        )


@dataclass(frozen=True)
class ObservedDesign:
    """A factored design prepared to fit responses on their own rows (:func:`observed_design`).

    Attributes
    ----------
    usable : bool
        Whether the design meets condition 1 of the module notes (else every response with
        missing values must be refitted exactly).
    r_work : (k, k) ndarray
        Triangular factor ``R`` of all rows in working coordinates (``A = Q̂ R``).

    Examples
    --------
    >>> import numpy as np
    >>> from lincomb._core import factor_design, solve
    >>> x = np.column_stack([np.ones(6), [0.0, 1, 2, 3, 4, 5], [0.0, 2, 4, 6, 8, 10]])
    >>> f = factor_design(x, intercept=0)
    >>> observed_design(f, solve(f.moments)).usable  # an aliased column: refit exactly
    False
    """

    usable: bool
    r_work: Array
    _q: Array  # (n, k): Q̂, intercept direction first
    _outer: Array  # (n, k(k+1)/2): the upper triangle of the outer product of each row of Q̂
    _full_from_half: NDArray[np.intp]  # (k*k,): position in the upper triangle of each entry
    _diag_in_half: NDArray[np.intp]  # (k,): positions of the diagonal in the upper triangle
    _w: Array | None
    _sqrt_w: Array | None
    _weight_sum: float
    _intercept: bool
    _zero_tol: float

    @_forty_doc
    def root(self, ck: Array) -> Array:
        """``U = R⁻ᵀ C_keptᵀ`` (k, m): ``Cov(Cβ̂) = σ² Uᵀ G⁻¹ U`` for each response.

        Examples
        --------
        %(forty_rows)s
        >>> sol = solve(f.moments)
        >>> c = np.array([[0.0, 1.0, -1.0]])
        >>> u = observed_design(f, sol).root(sol.to_working(c)[:, sol.kept])
        >>> bool(np.allclose(u.T @ u, c @ np.linalg.solve(x.T @ x, c.T)))
        True
        """
        return upper_solve(self.r_work, np.asarray(ck, dtype=np.float64).T, trans=True)

    @_forty_doc
    def fit(self, y: Array, missing: NDArray[np.bool_] | None = None) -> ObservedBlock:
        """Fit responses ``y`` (n, r) with NaN where missing, each on its own rows.

        ``y`` is not modified.  Responses with no missing value are fitted too (``G = I``).
        ``missing`` is ``isnan(y)`` when the caller has it already.  The same as
        :meth:`finish` of the one :meth:`project` of ``y``.

        Examples
        --------
        %(forty_rows)s
        >>> y = rng.normal(size=40); y[[3, 4]] = np.nan
        >>> sol = solve(f.moments)
        >>> block = observed_design(f, sol).fit(y[:, None])
        >>> keep = ~np.isnan(y)
        >>> ref = np.linalg.lstsq(x[keep], y[keep], rcond=None)[0]
        >>> bool(np.allclose(sol.from_working(block.theta)[:, 0], ref))
        True
        """
        y = np.asarray(y, dtype=np.float64)
        if y.ndim == 1:
            y = y[:, None]
        return self.finish([self.project(y, missing)], lambda cols: y[:, cols])

    @_forty_doc
    def project(self, y: Array, missing: NDArray[np.bool_] | None = None) -> ObservedPart:
        """The summaries of a block of responses ``y`` (n, b) that :meth:`finish` fits.

        One pass over the block: a copy shifted by a rough mean
        (:func:`~lincomb._core.many.rough_mean`), its product with ``Q̂``, its sums of squares
        and the Gram corrections ``Q̂_Mᵀ Q̂_M`` of the missing rows; ``y`` is not modified.  The
        rows are copied in chunks of at most :data:`~lincomb._core.many.CHUNK_BYTES` (the
        products summed over the chunks), so the work memory does not grow with the width of
        ``y`` and a wide block of a matrix stored row by row is read along its rows.  Blocks
        projected one by one (on any thread) are finished together, so the small per-response
        algebra runs once over all of them.

        Examples
        --------
        %(forty_rows)s
        >>> y = rng.normal(size=(40, 3)); y[5, 1] = np.nan
        >>> part = observed_design(f, solve(f.moments)).project(y)
        >>> part.n.tolist(), part.qty.shape
        ([40, 39, 40], (3, 3))
        """
        y = np.asarray(y, dtype=np.float64)
        if y.ndim == 1:
            y = y[:, None]
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            return self._project(y, missing)

    def _project(self, y: Array, missing: NDArray[np.bool_] | None) -> ObservedPart:
        n, r = y.shape
        qh = self._q
        k = qh.shape[1]
        if not self.usable:
            miss = np.isnan(y) if missing is None else missing
            ii, jj = np.nonzero(miss)
            nan = np.full(r, np.nan)
            return ObservedPart(
                (n - np.count_nonzero(miss, axis=0)).astype(np.int64),
                np.full((k, r), np.nan),
                nan,
                nan,
                nan,
                np.zeros(r),
                np.zeros((r, self._outer.shape[1])),
                ii,
                jj,
            )
        # shifted by a rough mean from a sample of rows (no pass over the block for the mean;
        # no shift at all where every mean is small beside its spread); what the shift leaves
        # of the mean lies along the intercept, first in Q̂
        shift = rough_mean(y) if self._intercept else np.zeros(r)
        qty = np.zeros((k, r))
        y2 = np.zeros(r)
        found_rows, found_cols = [], []
        step = per_chunk(r)
        for i0 in range(0, n, step):
            rows = slice(i0, min(n, i0 + step))
            yc, ci, cj = _chunk(y[rows], shift, None if missing is None else missing[rows])
            if self._sqrt_w is not None:
                yc *= self._sqrt_w[rows, None]
            qty += qh[rows].T @ yc  # (k, r)
            y2 += np.einsum("ij,ij->j", yc, yc)
            found_rows.append(ci + i0)
            found_cols.append(cj)
        # the missing values row by row (no transposed copy of the mask): within each response
        # they come in row order, so every sum over them below (and the sparse product, column
        # by column) adds them in the same order as response by response
        ii = np.concatenate(found_rows)
        jj = np.concatenate(found_cols)
        n_obs = n - np.bincount(jj, minlength=r)
        mean = np.zeros(r)
        c2 = self._centre_far(y, qty, y2, shift, mean, ii, jj) if self._intercept else y2
        # Q̂_Mᵀ Q̂_M from the missing rows only (upper triangles summed, by a sparse product)
        indptr = np.zeros(n + 1, dtype=np.int64)
        np.cumsum(np.bincount(ii, minlength=n), out=indptr[1:])
        missing_rows = sps.csc_array((np.ones(ii.size), jj, indptr), shape=(r, n))
        half = np.asarray(missing_rows @ self._outer)
        return ObservedPart(n_obs.astype(np.int64), qty, y2, c2, shift, mean, half, ii, jj)

    def _centre_far(
        self,
        y: Array,
        qty: Array,
        y2: Array,
        shift: Array,
        mean: Array,
        ii: NDArray[np.intp],
        jj: NDArray[np.intp],
    ) -> Array:
        """The centred sums of squares, after centring exactly where a rough shift left much of
        the mean.

        ``y`` (n, r) is the block, ``qty`` and ``y2`` the products with ``Q̂`` and the sums of
        squares of its shifted, scaled copy (zero where missing).  The weighted mean ``c`` left
        by the shift on a response's rows is ``qty[0]·√W / W_O`` and ``W_O c² = qty[0]²·W/W_O``
        is the part of ``y2`` it makes.  Where that part is at most ``y2 / 4`` the centred sum
        of squares ``y2 − W_O c²`` loses less than half a bit; elsewhere (a shift far from the
        mean, a constant response) the response is read again and centred on ``c`` (the second
        pass of a two-pass mean, as a single fit centres), its products are taken again
        (``qty``, ``y2`` updated in place) and ``c`` is recorded in ``mean``.
        """
        n, r = y.shape
        w = self._w
        if w is None:
            wsum = n - np.bincount(jj, minlength=r).astype(np.float64)
        else:
            wsum = self._weight_sum - np.bincount(jj, weights=w[ii], minlength=r)
        wsum = np.where(wsum > 0, wsum, 1.0)
        c2: Array = y2 - qty[0] ** 2 * (self._weight_sum / wsum)
        far = np.flatnonzero(~(y2 - c2 <= 0.25 * y2))  # NaN, inf: centred as well
        if far.size:
            mean[far] = qty[0, far] * (np.sqrt(self._weight_sum) / wsum[far])
            step = per_chunk(n)  # responses of n rows, read again a few at a time
            for k0 in range(0, far.size, step):
                cols = far[k0 : k0 + step]
                part = self._copy_shifted(y[:, cols], cols, shift, mean, ii, jj, r)
                qty[:, cols] = self._q.T @ part
                y2[cols] = c2[cols] = np.einsum("ij,ij->j", part, part)
        return c2

    def _recentred(self, part: Array, mean: Array) -> Array:
        part -= mean if self._sqrt_w is None else self._sqrt_w[:, None] * mean
        return part

    @_forty_doc
    def finish(
        self, parts: list[ObservedPart], read: Callable[[NDArray[np.intp]], Array]
    ) -> ObservedBlock:
        """Fit the responses of projected blocks (:meth:`project`), in order, on their own rows.

        ``read(cols)`` gives the responses (n, c) at positions ``cols`` of the joined blocks
        again: the residuals of responses whose fit is close are formed explicitly from them
        (module notes).

        Examples
        --------
        %(forty_rows)s
        >>> y = rng.normal(size=(40, 4)); y[[3, 9], 1] = np.nan; y[0, 3] = np.nan
        >>> od = observed_design(f, solve(f.moments))
        >>> both = od.finish([od.project(y[:, :2]), od.project(y[:, 2:])], lambda c: y[:, c])
        >>> bool(np.allclose(both.theta, od.fit(y).theta)), both.n.tolist()
        (True, [40, 38, 40, 39])
        """
        with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
            return self._finish(parts, read)

    def _finish(
        self, parts: list[ObservedPart], read: Callable[[NDArray[np.intp]], Array]
    ) -> ObservedBlock:
        qh = self._q
        n, k = qh.shape
        part = ObservedPart.concat(parts, k, self._outer.shape[1])
        r = part.count
        n_obs, qty, y2 = part.n, part.qty, part.y2
        if not self.usable:
            nan = np.full(r, np.nan)
            return ObservedBlock(
                n_obs,
                np.full((k, r), np.nan),
                nan,
                nan.copy(),
                np.broadcast_to(np.eye(k)[:, :, None], (k, k, r)).copy(),
                np.zeros(r, dtype=bool),
            )
        half = part.half
        # G = I − Σ_missing q̂_i q̂_iᵀ, responses last (k, k, r)
        gram = -half.T[self._full_from_half].reshape(k, k, r)
        diag = np.arange(k)
        gram[diag, diag] += 1.0
        # λ_min(G) ≥ GRAM_FLOOR: first by λ_max(S) ≤ trace(S) (the leverages of the missing
        # rows), then exactly by a Cholesky factorization of G − GRAM_FLOOR·I where needed
        wide = half[:, self._diag_in_half].sum(axis=1) <= 1.0 - GRAM_FLOOR
        unsure = np.flatnonzero(~wide)
        if unsure.size:
            shifted = gram[:, :, unsure]
            shifted[diag, diag] -= GRAM_FLOOR
            wide[unsure] = _cholesky(shifted)[1]
        gram[:, :, ~wide] = np.eye(k)[:, :, None]  # left out below; keeps the factors defined
        low = _cholesky(gram)[0]  # positive definite
        coef = np.array(qty)  # (k, r): G⁻¹ Q̂ᵀ y by two triangular solves, responses last
        _lower_solve_last(low, coef)
        _lower_solve_last(low, coef, trans=True)
        # ‖y‖² = ‖residual‖² + cᵀ G c (orthogonal parts on the response's rows).  Where the fit
        # takes at most half of ‖y‖², the difference loses at most one bit and is used; where
        # it takes more, the residual sum of squares comes from the explicit residual
        fit2 = np.einsum("ij,ij->j", coef, qty)
        resid2 = np.maximum(y2 - fit2, 0.0)
        close = np.flatnonzero(~(fit2 <= 0.5 * y2))  # NaN, inf: explicit as well
        step = per_chunk(n)  # read again a few at a time: the work memory stays bounded
        for k0 in range(0, close.size, step):
            cols = close[k0 : k0 + step]
            # the responses as project left them in its copy (the same operations, so the
            # same numbers), less their fit
            again = self._copy_shifted(
                read(cols), cols, part.shift, part.mean, part.rows, part.cols, r
            )
            resid = again - qh @ coef[:, cols]
            _zero_missing(resid, cols, part.rows, part.cols, r)
            resid2[cols] = np.einsum("ij,ij->j", resid, resid)
        y_norm = np.sqrt(part.c2)
        resid_norm = np.sqrt(resid2)
        theta = upper_solve(self.r_work, coef)
        if self._intercept:
            theta[0] += part.shift + part.mean
        edge = self._zero_tol * y_norm
        near_zero = (resid_norm > edge / ZERO_MARGIN) & (resid_norm <= edge * ZERO_MARGIN)
        certified = (
            wide
            & (n_obs > k)
            & ~near_zero
            & np.isfinite(theta).all(axis=0)
            & np.isfinite(resid_norm)
            & np.isfinite(y_norm)
        )
        return ObservedBlock(n_obs, theta, resid_norm, y_norm, low, certified)

    def _copy_shifted(
        self,
        y: Array,
        cols: NDArray[np.intp],
        shift: Array,
        mean: Array,
        ii: NDArray[np.intp],
        jj: NDArray[np.intp],
        r: int,
    ) -> Array:
        """A copy of responses ``y`` (at positions ``cols`` of a block of ``r``) shifted, with
        the missing values (rows ``ii``, positions ``jj``) zero, scaled, and centred on
        ``mean`` where it is not zero: the numbers :meth:`project` works with."""
        yc = np.array(y, dtype=np.float64, order="C")
        if self._intercept:
            yc -= shift[cols]
        _zero_missing(yc, cols, ii, jj, r)
        if self._sqrt_w is not None:
            yc *= self._sqrt_w[:, None]
        far = np.flatnonzero(mean[cols] != 0.0)
        if far.size:
            sub = self._recentred(yc[:, far], mean[cols[far]])
            _zero_missing(sub, cols[far], ii, jj, r)
            yc[:, far] = sub
        return yc


@_forty_doc
def observed_design(
    factor: DesignFactor, sol: Solution | None, rank_tol: float = 1e-10, zero_tol: float = 1e-12
) -> ObservedDesign:
    """Prepare a factored design (all rows) to fit responses on their own rows.

    Parameters
    ----------
    factor : DesignFactor
        The design's factor on all rows (its thin ``Q`` is reused).
    sol : Solution or None
        ``solve(factor.moments, rank_tol)``: the design's rank decision (computed when None).
    rank_tol : float
        The rank tolerance the design was solved with.
    zero_tol : float
        Relative residual norm below which a fit is exact (``ZERO_RSS_TOL`` of a fit).

    Returns
    -------
    ObservedDesign

    Examples
    --------
    %(forty_rows)s
    >>> observed_design(f, None).usable
    True
    """
    from lincomb._core.solve import solve

    m = factor.moments
    if sol is None:
        sol = solve(m, rank_tol)
    n, p = m.n, m.p
    others = m.others
    q = others.size
    qc = factor.thin_q
    intercept = m.intercept is not None
    k = q + int(intercept)
    w = factor.weights
    wsum = float(m.weight_sum)
    sqrt_w = None if w is None else np.sqrt(w)
    qh = np.empty((n, k))
    if intercept:
        qh[:, 0] = (1.0 if sqrt_w is None else sqrt_w) / np.sqrt(wsum) if wsum > 0 else 0.0
    usable = bool(sol.rank == p and qc.shape[1] == q and n > p)
    r_work = np.eye(k)
    if usable:
        qh[:, int(intercept) :] = qc
        col = np.linalg.norm(m.r[:q, :q], axis=0)
        raw = m.raw_norm[others]
        scale = sol.scale[others]
        rs = m.r[:q, :q] / np.where(col > 0, col, 1.0)
        margin = RANK_MARGIN * max(rank_tol, RANK_FLOOR)
        usable = bool(
            np.all(np.abs(np.diag(rs)) > margin)
            and np.all(col > RANK_MARGIN * CONSTANT_TOL * raw)
            and np.array_equal(sol.kept[int(intercept) :], others)
        )
        r_work = np.zeros((k, k))
        if intercept:
            r_work[0, 0] = np.sqrt(wsum)
        r_work[int(intercept) :, int(intercept) :] = m.r[:q, :q] / scale
    else:
        qh[:, int(intercept) :] = 0.0
    iu, ju = np.triu_indices(k)
    # upper triangles of q̂ q̂ᵀ, row by row (the sparse product reads rows), in the order of
    # triu_indices: row i of the triangle is q̂_i times q̂_i..q̂_(k-1)
    # (formed transposed from Q̂ᵀ's contiguous rows, then laid out row by row)
    qt = qh.T.copy()
    outer = np.ascontiguousarray((qt[iu] * qt[ju]).T) if usable else np.empty((n, 0))
    where = np.zeros((k, k), dtype=np.intp)
    where[iu, ju] = np.arange(iu.size)
    where[ju, iu] = np.arange(iu.size)
    return ObservedDesign(
        usable=usable,
        r_work=r_work,
        _q=qh,
        _outer=outer,
        _full_from_half=where.ravel(),
        _diag_in_half=where[np.arange(k), np.arange(k)],
        _w=w,
        _sqrt_w=sqrt_w,
        _weight_sum=wsum,
        _intercept=intercept,
        _zero_tol=zero_tol,
    )


def _chunk(
    y: Array, shift: Array, missing: NDArray[np.bool_] | None
) -> tuple[Array, NDArray[np.intp], NDArray[np.intp]]:
    """A copy of rows ``y`` of a block shifted by ``shift``, with its missing values zero, and
    their rows (in ``y``) and columns, row by row."""
    yc = np.array(y, dtype=np.float64, order="C")
    r = yc.shape[1]
    flat = np.flatnonzero(np.isnan(yc) if missing is None else missing)
    ii = flat // r
    jj = flat - ii * r
    if shift.any():
        yc -= shift
    yc[ii, jj] = 0.0
    return yc, ii, jj


def _zero_missing(
    part: Array, cols: NDArray[np.intp], ii: NDArray[np.intp], jj: NDArray[np.intp], r: int
) -> None:
    """Zero the missing values (rows ``ii``, responses ``jj`` of ``r``) of ``part``, which holds
    the responses ``cols`` (in that order)."""
    pos = np.full(r, -1)
    pos[cols] = np.arange(cols.size)
    hit = pos[jj] >= 0
    part[ii[hit], pos[jj[hit]]] = 0.0


# -- batched small factorizations (loops over the k columns, vectorized over responses) --------


def _cholesky(g: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Lower Cholesky factors of a stack (k, k, r), responses last, and whether each is
    positive definite (a failed factor is left with unit pivots and must not be used)."""
    k, _, r = g.shape
    low = np.zeros_like(g)
    ok = np.ones(r, dtype=bool)
    for j in range(k):
        row = low[j, :j]
        piv = g[j, j] - np.einsum("ir,ir->r", row, row)
        good = piv > 0
        ok &= good
        d = np.sqrt(np.where(good, piv, 1.0))
        low[j, j] = d
        if j + 1 < k:
            below = g[j + 1 :, j] - np.einsum("ikr,kr->ir", low[j + 1 :, :j], row)
            low[j + 1 :, j] = below / d
    return low, ok


def _lower_solve_last(low: Array, x: Array, *, trans: bool = False) -> None:
    """``x ← L⁻¹ x`` (or ``L⁻ᵀ x``) in place, responses last: ``low`` (k, k, r), ``x`` (k, r) or
    (k, m, r)."""
    k = low.shape[0]
    lead = (slice(None),) + (None,) * (x.ndim - 2)  # broadcast L's entries over the m columns
    order = range(k - 1, -1, -1) if trans else range(k)
    for j in order:
        x[j] /= low[j, j]
        if trans:
            if j:
                x[:j] -= low[j, :j][lead] * x[j]
        elif j + 1 < k:
            x[j + 1 :] -= low[j + 1 :, j][lead] * x[j]
