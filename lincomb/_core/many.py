"""Many responses on one design: factor the design once, project blocks of responses.

:func:`factor_design` keeps the thin ``Q`` of the design, :meth:`DesignFactor.project`
summarizes responses into a :class:`ResponseBlock`, and :func:`solve_responses` and
:func:`wald_quadratic_forms` solve and test them all at once (vectorized over responses).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, fields
from typing import TYPE_CHECKING, Any, Self, cast

import numpy as np
import scipy.linalg as sla
from numpy.typing import NDArray

from lincomb._core.moments import RANDOM_DESIGN, Moments, _centre_in_place
from lincomb._core.solve import Solution
from lincomb._core.triangular import triangular_factor, upper_solve
from lincomb._docstrings import fill_doc
from lincomb._typing import Array
from lincomb.errors import InternalError

if TYPE_CHECKING:  # pragma: no cover
    from _typeshed import DataclassInstance

__all__ = [
    "CHUNK_BYTES",
    "DesignFactor",
    "ResponseBlock",
    "per_chunk",
    "factor_design",
    "rough_mean",
    "solve_responses",
    "wald_quadratic_forms",
]


#: Work memory of a projection read in chunks of rows (:meth:`DesignFactor.project_rows`,
#: :meth:`~lincomb._core.ObservedDesign.project`): the rows of a block are copied at most this
#: many bytes at a time (at least one row), so that a wide block of a matrix stored row by row
#: is read in its storage order.
CHUNK_BYTES: int = 2**21


#: Example set-up shared by the docstrings below: the random design of
#: :data:`~lincomb._core.moments.RANDOM_DESIGN`, factored once.
_FACTORED = RANDOM_DESIGN + "\n>>> f = factor_design(x, intercept=0)"
_factored_doc = fill_doc(factored=_FACTORED)


class PerResponse:
    """Shared behaviour of records whose every field is an array with one entry per response on
    its last axis (:class:`ResponseBlock`, :class:`~lincomb._core.observed.ObservedBlock`).

    A subclass is a frozen dataclass that says what it holds for no response
    (:meth:`empty`); the count, the selection and the joining of responses are written here
    once, over its fields in order.
    """

    @classmethod
    def empty(cls, k: int) -> Self:  # pragma: no cover - each record says what it is empty
        """The record of no responses, for a design of ``k`` working columns."""
        raise NotImplementedError

    def arrays(self) -> list[NDArray[Any]]:
        """The fields' arrays, in field order."""
        return [getattr(self, f.name) for f in fields(cast("DataclassInstance", self))]

    @property
    def count(self) -> int:
        """Number of responses."""
        return int(self.arrays()[0].shape[-1])

    @_factored_doc
    def take(self, cols: NDArray[np.intp]) -> Self:
        """The responses at positions ``cols``.

        Examples
        --------
        %(factored)s
        >>> block = f.project(np.column_stack([y, 2 * y, 3 * y]))
        >>> part = block.take(np.array([2, 0]))
        >>> part.count, bool(np.isclose(part.resid[0], 3 * part.resid[1]))
        (2, True)
        """
        return type(self)(*(a[..., cols] for a in self.arrays()))

    @classmethod
    @_factored_doc
    def concat(cls, blocks: Sequence[Self], k: int) -> Self:
        """Join blocks of responses (in order) into one; :meth:`empty` (``k`` working columns)
        when there are none.

        Examples
        --------
        %(factored)s
        >>> both = ResponseBlock.concat([f.project(y), f.project(2 * y)], k=2)
        >>> both.count, bool(np.allclose(both.resid[1], 2 * both.resid[0]))
        (2, True)
        >>> ResponseBlock.concat([], k=2).qty.shape
        (2, 0)
        """
        if not blocks:
            return cls.empty(k)
        parts = zip(*(b.arrays() for b in blocks), strict=True)
        return cls(*(np.concatenate(list(a), axis=-1) for a in parts))


@_factored_doc
@dataclass(frozen=True)
class ResponseBlock(PerResponse):
    """Sufficient statistics of several responses fitted on one shared design.

    With ``Q R`` the QR factorization of the centred, ``sqrt(w)``-scaled non-intercept design
    columns (see :class:`DesignFactor`), a response ``y`` is summarized by ``Qᵀ y_c`` (its first
    ``q`` entries) and the norm of the rest: exactly the last column of the :class:`Moments`
    factor of ``[X y]``.

    Attributes
    ----------
    qty : (q, r) ndarray
        First ``q`` rows of ``Qᵀ`` times the centred, scaled responses.
    resid : (r,) ndarray
        Norm of the remaining rows (the residual norm against all ``q`` columns).
    center : (r,) ndarray
        Weighted means of the responses (zeros without an intercept).
    raw_norm : (r,) ndarray
        Weighted norms of the uncentred responses.

    Examples
    --------
    %(factored)s
    >>> block = f.project(np.column_stack([y, 2 * y, -y]))
    >>> block.count, block.qty.shape
    (3, (2, 3))
    """

    qty: Array
    resid: Array
    center: Array
    raw_norm: Array

    @classmethod
    def empty(cls, k: int) -> ResponseBlock:
        return cls(np.zeros((k, 0)), np.zeros(0), np.zeros(0), np.zeros(0))

    @_factored_doc
    def finite(self) -> NDArray[np.bool_]:
        """Responses whose summaries are finite (a missing or infinite value propagates).

        Examples
        --------
        %(factored)s
        >>> bad = y.copy()
        >>> bad[3] = np.nan
        >>> f.project(np.column_stack([y, bad])).finite().tolist()
        [True, False]
        """
        return (
            np.isfinite(self.resid)
            & np.isfinite(self.center)
            & np.isfinite(self.raw_norm)
            & np.isfinite(self.qty).all(axis=0)
        )


@_factored_doc
@dataclass(frozen=True)
class DesignFactor:
    """QR factorization of a design, with its thin ``Q`` kept to project responses.

    Build it with :func:`factor_design`.  ``moments`` are the :class:`Moments` of ``[X 0]``
    (a zero response), so :func:`solve` on them gives the design's rank decision and working
    coordinates; :meth:`project` summarizes any number of responses against the same factor.
    The thin ``Q`` (n, q) is the size of the design itself.

    Examples
    --------
    %(factored)s
    >>> from lincomb._core import solve
    >>> solve(f.moments).rank, f.moments.n
    (3, 20)
    """

    moments: Moments
    weights: Array | None
    _q: Array = field(repr=False)
    _q_ext: Array | None = field(default=None, repr=False)  # [sqrt(w)/sqrt(W), Q] (intercept)

    @property
    def thin_q(self) -> Array:
        """The thin ``Q`` (n, min(n, q)) of the centred, scaled non-intercept columns (read only:
        do not modify)."""
        return self._q

    @_factored_doc
    def project(self, y: Array) -> ResponseBlock:
        """Summarize responses ``y`` (n, b) against this design; ``y`` is not modified.

        Notes
        -----
        One copy of ``y`` is centred on its mean, scaled, and rotated by ``Qᵀ`` (one matrix
        product; with an intercept, ``Q`` holds the intercept's direction first, so the product
        also gives the mean left over by rounding: the second centring pass of
        :func:`moments_from_arrays`).  The residual sum of squares is ``‖y_c‖² − ‖Qᵀy_c‖²``
        where the fit takes at most half of ``‖y_c‖²`` (at most one bit lost), and comes from
        the explicit residual ``y_c − Q Qᵀ y_c`` (a second product) where the fit is close
        and the difference would cancel.  The work memory is
        one copy of the block given, so callers bound memory by passing blocks of columns.
        Missing or infinite values propagate into the summaries of their column (non-finite
        ``center``, ``qty`` or ``resid``), which callers use to find them.

        Examples
        --------
        %(factored)s
        >>> block = f.project(y)
        >>> rss = np.sum((y - x @ np.linalg.lstsq(x, y, rcond=None)[0]) ** 2)
        >>> bool(np.isclose(block.resid[0] ** 2, rss))
        True
        """
        with np.errstate(invalid="ignore", over="ignore"):  # NaN/inf propagate on purpose
            return self._project(np.asarray(y, dtype=np.float64))

    @_factored_doc
    def project_finite(self, y: Array) -> tuple[NDArray[np.bool_], ResponseBlock]:
        """Set aside the responses holding a NaN or inf, and :meth:`project` the others.

        Returns ``odd`` (r,), True for the responses set aside (a non-finite sum or mean: a
        missing or infinite value, or one that overflows a sum), and the summaries of the
        others, in order.  With an intercept the test costs nothing: it is the mean that
        centring takes anyway.  Unweighted responses whose mean is small beside their spread
        need no centred copy and are projected as they are (:meth:`_project_small_means`).

        Examples
        --------
        %(factored)s
        >>> y = rng.normal(size=(20, 3)); y[4, 1] = np.nan
        >>> odd, block = f.project_finite(y)
        >>> odd.tolist(), block.count
        ([False, True, False], 2)
        """
        y = np.asarray(y, dtype=np.float64)
        if y.ndim == 1:
            y = y[:, None]
        m = self.moments
        with np.errstate(invalid="ignore", over="ignore"):
            if m.intercept is not None and m.n > 0:
                m1 = _column_means(y, self.weights)
            else:
                m1 = None
            odd = ~np.isfinite(m1 if m1 is not None else y.sum(axis=0))
            if odd.all():
                return odd, ResponseBlock.concat([], m.others.size)
            if odd.any():
                y = y[:, ~odd]
                m1 = None if m1 is None else m1[~odd]
            if m1 is not None and self.weights is None:
                return odd, self._project_small_means(y, m1)
            return odd, self._project(y, m1)

    @_factored_doc
    def project_rows(self, y: Array) -> tuple[NDArray[np.bool_], ResponseBlock]:
        """:meth:`project_finite` reading ``y`` in chunks of rows, for a wide block.

        Returns ``odd`` (r,), True for the responses set aside (a NaN or inf makes their
        products non-finite), and the summaries of the others, in order.  The rows are read
        :data:`CHUNK_BYTES` at a time, so the work memory does not grow with the width of
        ``y`` and a block of a matrix stored row by row (C order) is read along its rows.

        Notes
        -----
        With an intercept, each response is shifted by a rough mean (:func:`rough_mean`, from
        a sample of rows; no shift where that mean is small beside its spread) and its
        products with ``[sqrt(w)/sqrt(W), Q]`` are summed over the chunks: the intercept's
        coefficient is ``sqrt(W)`` times the mean the shift left, so the centred sum of
        squares is ``‖y_s‖² − coef₀²``.  Where the shift left more than a quarter of the
        shifted sum of squares (a shift far from the mean), the response is read again,
        centred on its mean and its products taken again (the two passes of a two-pass
        mean), so a shifted response is never more than ``√(4/3)`` times the centred one in
        norm.  The residual sum of squares is the difference of the sums of squares where the
        fit takes at most half of them and comes from the explicit residual, read again
        chunk by chunk, elsewhere (as in :meth:`project`).

        Examples
        --------
        %(factored)s
        >>> ys = np.column_stack([y, 1e6 + y, 2 * y])
        >>> odd, rows = f.project_rows(ys)
        >>> _, whole = f.project_finite(ys)
        >>> odd.tolist(), bool(np.allclose(rows.resid, whole.resid, rtol=1e-9))
        ([False, False, False], True)
        """
        y = np.asarray(y, dtype=np.float64)
        if y.ndim == 1:
            y = y[:, None]
        with np.errstate(invalid="ignore", over="ignore"):
            return self._project_rows(y)

    def _project_rows(self, y: Array) -> tuple[NDArray[np.bool_], ResponseBlock]:
        m = self.moments
        r = y.shape[1]
        basis = self._q_ext if self._q_ext is not None else self._q
        intercept = self._q_ext is not None
        sqrt_w = None if self.weights is None else np.sqrt(self.weights)
        shift = rough_mean(y) if intercept else np.zeros(r)
        coef, y2 = _row_products(y, None, basis, sqrt_w, shift)
        odd = np.asarray(~np.isfinite(coef).all(axis=0))
        good = np.flatnonzero(~odd)
        if good.size < r:  # the responses set aside leave the arrays (not the block: no copy)
            shift, coef, y2 = shift[good], coef[:, good], y2[good]
        center = np.zeros(good.size)
        if intercept:
            # the mean the shift left, along the intercept's direction (first in the basis)
            left = coef[0] / np.sqrt(m.weight_sum)
            far = np.flatnonzero(~(coef[0] ** 2 <= 0.25 * y2))  # NaN, inf: again as well
            if far.size:  # centred on the mean from the first pass, products taken again
                shift[far] += left[far]
                coef[:, far], y2[far] = _row_products(y, good[far], basis, sqrt_w, shift[far])
                left[far] = coef[0, far] / np.sqrt(m.weight_sum)
            center = shift + left
        fit2 = np.einsum("ij,ij->j", coef, coef)
        resid2 = np.maximum(y2 - fit2, 0.0)
        close = np.flatnonzero(~(fit2 <= 0.5 * y2))  # NaN and inf go this way too
        if close.size:
            resid2[close] = _row_residuals(
                y, good[close], basis, sqrt_w, shift[close], coef[:, close]
            )
        qty = np.zeros((m.others.size, good.size))
        k0 = int(intercept)
        qty[: basis.shape[1] - k0] = coef[k0:]
        raw = np.sqrt(np.einsum("ij,ij->j", qty, qty) + resid2 + m.weight_sum * center**2)
        return odd, ResponseBlock(qty=qty, resid=np.sqrt(resid2), center=center, raw_norm=raw)

    def _project_small_means(self, y: Array, m1: Array) -> ResponseBlock:
        """:meth:`_project` without the centred copy for responses whose mean is small beside
        their spread (unweighted, with an intercept); the others are projected centred.

        Where ``n·mean² ≤ ‖y‖²/4``, ``‖y‖ ≤ √(4/3)·‖y − mean‖``: the products of the uncentred
        ``y`` with ``[1/√n, Q]`` (``Q``'s centred columns are orthogonal to the intercept) carry
        no more rounding than those of the centred copy, the intercept's coefficient gives
        the mean, and the residual is ``‖y‖² − ‖[1/√n, Q]ᵀy‖²`` as in
        :func:`_residual_squares` (the fit takes at most half, or the residual is formed).
        """
        ext = self._q_ext
        assert ext is not None
        y2 = np.einsum("ij,ij->j", y, y)
        small = self.moments.weight_sum * m1**2 <= 0.25 * y2  # NaN, inf: centred
        if small.all():
            return self._project_uncentred(y, y2)
        if not small.any():
            return self._project(y, m1)
        parts = (
            self._project_uncentred(y[:, small], y2[small]),
            self._project(y[:, ~small], m1[~small]),
        )
        order = np.argsort(np.concatenate([np.flatnonzero(small), np.flatnonzero(~small)]))
        return ResponseBlock.concat(list(parts), self.moments.others.size).take(order)

    def _project_uncentred(self, y: Array, y2: Array) -> ResponseBlock:
        """The summaries of uncentred responses ``y`` (sums of squares ``y2``): see
        :meth:`_project_small_means`.  ``y`` is read, not copied or modified."""
        m = self.moments
        ext = self._q_ext
        assert ext is not None
        qk = ext.T @ y
        qty = np.zeros((m.others.size, y.shape[1]))
        qty[: ext.shape[1] - 1] = qk[1:]
        resid2 = _residual_squares(y, ext, qk, y2, overwrite=False)
        return ResponseBlock(
            qty=qty,
            resid=np.sqrt(resid2),
            center=qk[0] / np.sqrt(m.weight_sum),
            raw_norm=np.sqrt(y2),
        )

    def _project(self, y: Array, m1: Array | None = None) -> ResponseBlock:
        m = self.moments
        w = self.weights
        if y.ndim == 1:
            y = y[:, None]
        q = m.others.size
        ext = self._q_ext
        if ext is not None:
            if m1 is None:
                m1 = _column_means(y, w)
            # the one copy of the block, centred in place (faster than a subtraction that
            # reads a strided view of the caller's array)
            yb = np.array(y, dtype=np.float64, order="C")
            yb -= m1
            if w is not None:
                yb *= np.sqrt(w)[:, None]
            # the second centring pass rides on the projection: the intercept's direction is
            # the first column of Q, so its coefficient is sqrt(W) times the mean left over
            basis = ext
            qk = ext.T @ yb
            center = m1 + qk[0] / np.sqrt(m.weight_sum)
            qty = np.zeros((q, yb.shape[1]))
            qty[: ext.shape[1] - 1] = qk[1:]
        else:
            yb = np.array(y, copy=True)
            center = np.zeros(yb.shape[1])
            if w is not None:
                yb *= np.sqrt(w)[:, None]
            basis = self._q
            qk = basis.T @ yb
            qty = np.zeros((q, yb.shape[1]))
            qty[: basis.shape[1]] = qk
        resid2 = _residual_squares(yb, basis, qk)
        # ‖√w·y‖² = ‖Qᵀy_c‖² + ‖residual‖² + W·mean²: a sum of squares, no cancellation
        raw = np.sqrt(np.einsum("ij,ij->j", qty, qty) + resid2 + m.weight_sum * center**2)
        return ResponseBlock(qty=qty, resid=np.sqrt(resid2), center=center, raw_norm=raw)

    @_factored_doc
    def response_moments(self, block: ResponseBlock, j: int) -> Moments:
        """The :class:`Moments` of ``[X y_j]`` for response ``j`` of ``block``.

        Examples
        --------
        %(factored)s
        >>> from lincomb._core import solve
        >>> one = f.response_moments(f.project(np.column_stack([-y, y])), 1)
        >>> bool(np.allclose(solve(one).coefficients(), np.linalg.lstsq(x, y, rcond=None)[0]))
        True
        """
        m = self.moments
        q = m.others.size
        r = m.r.copy()
        r[:q, q] = block.qty[:, j]
        r[q, q] = block.resid[j]
        center = m.center.copy()
        center[m.p] = block.center[j] if m.intercept is not None else 0.0
        raw = m.raw_norm.copy()
        raw[m.p] = block.raw_norm[j]
        return Moments(m.n, m.weight_sum, m.intercept, center, raw, r)


def rough_mean(y: Array) -> Array:
    """Means of a sample of about 64 rows spread over the block (missing values left out; 0
    for a response missing in all of them): a shift close to each response's mean; 0 where the
    sample's mean is small beside its spread (such a response needs no shift).

    Examples
    --------
    >>> import numpy as np
    >>> y = np.column_stack([np.linspace(-1, 1, 200), np.linspace(99, 101, 200)])
    >>> rough_mean(y).round(4).tolist()  # second: rows 0, 3, ..., 198, mean 99 + 2·99/199
    [0.0, 99.995]
    """
    sample = y[:: max(1, y.shape[0] // 64)]
    total = sample.sum(axis=0)
    holes = np.flatnonzero(np.isnan(total))  # a missing value in the sample (or inf - inf)
    if 2 * holes.size > total.size:  # mostly: every response the same way
        holes = np.arange(total.size)
    count = np.full(total.size, float(sample.shape[0]))
    whole = holes.size == total.size
    square = np.empty(total.size) if whole else np.einsum("ij,ij->j", sample, sample)
    if holes.size:  # the values seen only
        part = sample if whole else sample[:, holes]
        seen = ~np.isnan(part)
        values = np.where(seen, part, 0.0)
        count[holes] = np.maximum(seen.sum(axis=0), 1)
        total[holes] = values.sum(axis=0)
        square[holes] = np.einsum("ij,ij->j", values, values)
    mean = total / count
    square = square / count
    out: Array = np.where(4.0 * mean**2 <= square - mean**2, 0.0, mean)
    return out


def per_chunk(length: int) -> int:
    """How many vectors of ``length`` float64 values fit in :data:`CHUNK_BYTES` (at least one):
    the rows of a chunk of a block ``length`` columns wide, or the responses of ``length`` rows
    read again at a time."""
    return max(1, CHUNK_BYTES // (8 * max(length, 1)))


def _shifted_rows(
    y: Array, rows: slice, cols: NDArray[np.intp] | None, sqrt_w: Array | None, shift: Array
) -> Array:
    """``sqrt(w)·(y − shift)`` on ``rows`` (and columns ``cols``) of ``y``: a view of ``y``
    where there is nothing to pick, subtract or scale, else a copy of the chunk."""
    if cols is None and sqrt_w is None and not shift.any():
        return y[rows]
    c = y[rows] if cols is None else y[rows][:, cols]
    c = c - shift
    if sqrt_w is not None:
        c *= sqrt_w[rows, None]
    return c


def _row_products(
    y: Array, cols: NDArray[np.intp] | None, basis: Array, sqrt_w: Array | None, shift: Array
) -> tuple[Array, Array]:
    """``basisᵀ y_s`` and ``‖y_s‖²`` of ``y_s = sqrt(w)·(y − shift)`` (the responses ``cols``
    of ``y``, all when None), summed over chunks of rows."""
    n = y.shape[0]
    width = y.shape[1] if cols is None else cols.size
    coef = np.zeros((basis.shape[1], width))
    y2 = np.zeros(width)
    step = per_chunk(width)
    for i0 in range(0, n, step):
        rows = slice(i0, min(n, i0 + step))
        c = _shifted_rows(y, rows, cols, sqrt_w, shift)
        coef += basis[rows].T @ c
        y2 += np.einsum("ij,ij->j", c, c)
    return coef, y2


def _row_residuals(
    y: Array,
    cols: NDArray[np.intp],
    basis: Array,
    sqrt_w: Array | None,
    shift: Array,
    coef: Array,
) -> Array:
    """``‖y_s − basis·coef‖²`` per response (``y_s`` as in :func:`_row_products`), summed over
    chunks of rows."""
    n = y.shape[0]
    out = np.zeros(cols.size)
    step = per_chunk(cols.size)
    for i0 in range(0, n, step):
        rows = slice(i0, min(n, i0 + step))
        c = _shifted_rows(y, rows, cols, sqrt_w, shift) - basis[rows] @ coef
        out += np.einsum("ij,ij->j", c, c)
    return out


def _column_means(y: Array, w: Array | None) -> Array:
    """(Weighted) column means by one matrix-vector product (a NaN or inf propagates)."""
    ones = np.ones(y.shape[0]) if w is None else w
    out: Array = (ones @ y) / (y.shape[0] if w is None else w.sum())
    return out


def _residual_squares(
    y: Array, basis: Array, coef: Array, y2: Array | None = None, overwrite: bool = True
) -> Array:
    """``‖y − basis·coef‖²`` per column, ``coef = basisᵀ y`` with orthonormal ``basis``.

    Where the fit takes at most half of ``‖y‖²`` (``y2`` when given), ``‖y‖² − ‖coef‖²`` loses
    at most one bit and is used; elsewhere (a close fit, where the difference would cancel)
    the residual is formed explicitly.  ``y`` may be overwritten when ``overwrite``.
    """
    if y2 is None:
        y2 = np.einsum("ij,ij->j", y, y)
    fit2 = np.einsum("ij,ij->j", coef, coef)
    out: Array = np.maximum(y2 - fit2, 0.0)
    close = np.flatnonzero(~(fit2 <= 0.5 * y2))  # NaN and inf go this way too
    if close.size == y.shape[1] and overwrite:
        resid = _subtract_product(y, basis, coef)
        out = np.einsum("ij,ij->j", resid, resid)
    elif close.size:
        resid = y[:, close] - basis @ coef[:, close]
        out[close] = np.einsum("ij,ij->j", resid, resid)
    return out


def _subtract_product(c: Array, a: Array, b: Array) -> Array:
    """``c − a·b``, in place in ``c`` when its layout allows (one BLAS ``gemm``, no temporary)."""
    if c.flags.f_contiguous:
        return sla.blas.dgemm(-1.0, a, b, beta=1.0, c=c, overwrite_c=True)
    if c.flags.c_contiguous:
        ct = sla.blas.dgemm(
            -1.0, b, a, beta=1.0, c=c.T, trans_a=True, trans_b=True, overwrite_c=True
        )
        return ct.T
    return c - a @ b


def factor_design(x: Array, w: Array | None = None, intercept: int | None = None) -> DesignFactor:
    """Factor a design once so that many responses can be fitted against it.

    Parameters
    ----------
    x : (n, p) ndarray
        Design.  Not modified.
    w : (n,) ndarray or None
        Positive weights (validated by the caller).
    intercept : int or None
        Index of the intercept column.

    Returns
    -------
    DesignFactor

    Notes
    -----
    The centring (two passes) and scaling are those of :func:`moments_from_arrays`; the QR is
    LAPACK ``geqrf`` (of the intercept's direction and the centred columns, in that order: the
    columns of ``Q`` are then orthogonal to the intercept's direction even where a column is
    aliased), then ``orgqr`` forms the thin ``Q`` (n, q) once, so that every block of
    responses is projected by matrix products (much faster than applying ``q`` reflectors one
    block at a time when ``q`` is small).

    Examples
    --------
    >>> import numpy as np
    >>> from lincomb._core import moments_from_arrays
    >>> rng = np.random.default_rng(1)
    >>> x = np.column_stack([np.ones(30), rng.normal(size=(30, 2))]); y = rng.normal(size=30)
    >>> f = factor_design(x, intercept=0)
    >>> one = f.response_moments(f.project(y[:, None]), 0)
    >>> ref = moments_from_arrays(x, y, intercept=0)
    >>> bool(np.allclose(one.r.T @ one.r, ref.r.T @ ref.r))
    True
    >>> x2 = np.column_stack([x, 2 * x[:, 1]])  # an aliased column: Q stays orthonormal
    >>> ext = factor_design(x2, intercept=0)._q_ext
    >>> bool(np.allclose(ext.T @ ext, np.eye(4), atol=1e-12))
    True
    """
    n, p = x.shape
    cols = np.arange(p) if intercept is None else np.delete(np.arange(p), intercept)
    a = np.empty((n, cols.size), order="F")
    a[:] = x[:, cols]
    center = np.zeros(p + 1)
    raw_norm = np.zeros(p + 1)
    raw_sq = np.einsum("ij,ij->j", a, a) if w is None else w @ (a * a)
    raw_norm[cols] = np.sqrt(raw_sq)
    wsum = float(n if w is None else w.sum())
    if intercept is not None:
        raw_norm[intercept] = np.sqrt(wsum) * abs(float(x[0, intercept])) if n else 0.0
        if n > 0:
            center[cols] = _centre_in_place(a, w)
    if w is not None:
        a *= np.sqrt(w)[:, None]
    q = cols.size
    r = np.zeros((q + 1, q + 1))
    # with an intercept, its direction u = sqrt(w)/sqrt(W) is factored first, before the
    # centred columns: Q's columns after it are then orthogonal to u by construction, also
    # those Householder completes arbitrarily for aliased columns (which the centring alone
    # would not make orthogonal to u: a response's component along them is part of its
    # residual only if they are); u's row of R is uᵀ of the centred columns, zero to rounding
    first = int(intercept is not None and n > 0)
    if first:
        u = (np.ones(n) if w is None else np.sqrt(w)) / np.sqrt(wsum)
        aug = np.empty((n, q + 1), order="F")
        aug[:, 0] = u
        aug[:, 1:] = a
        a = aug
    if q and n:
        qr, tau, _work, info = sla.lapack.dgeqrf(a, overwrite_a=1)
        if info != 0:  # pragma: no cover - LAPACK argument error
            raise InternalError(f"LAPACK dgeqrf failed with info={info}")
        k = min(n, q + first)
        r[: k - first, :q] = np.triu(qr[:k])[first:, first:]
        full, _work, info = sla.lapack.dorgqr(qr[:, :k], tau[:k], overwrite_a=0)
        if info != 0:  # pragma: no cover - LAPACK argument error
            raise InternalError(f"LAPACK dorgqr failed with info={info}")
        thin = full[:, first:]
    else:
        thin = np.zeros((n, 0))
    moments = Moments(
        n=n, weight_sum=wsum, intercept=intercept, center=center, raw_norm=raw_norm, r=r
    )
    if not first:
        return DesignFactor(moments=moments, weights=w, _q=thin)
    ext = np.empty((n, thin.shape[1] + 1), order="F")
    ext[:, 0] = u  # Q's first column is ±u to rounding
    ext[:, 1:] = thin
    return DesignFactor(moments=moments, weights=w, _q=ext[:, 1:], _q_ext=ext)


@_factored_doc
def solve_responses(m: Moments, sol: Solution, block: ResponseBlock) -> tuple[Array, Array, Array]:
    """Coefficients and residual sums of squares of many responses on one solved design.

    Parameters
    ----------
    m : Moments
        The design's moments (from :class:`DesignFactor`).
    sol : Solution
        ``solve(m, rank_tol)``: the rank decision and working coordinates, shared by every
        response.
    block : ResponseBlock

    Returns
    -------
    theta : (rank, r) ndarray
        Working coefficients of the kept columns (as :attr:`Solution.theta`, per response).
    rss : (r,) ndarray
        Residual sums of squares.
    y_norm : (r,) ndarray
        Norms of the centred, scaled responses (for deciding that an RSS is zero).

    Notes
    -----
    The kept working columns of the small factor are refactored by one QR (complete ``Q``);
    every response then costs a matrix product and one triangular solve, all vectorized.  The
    results equal :func:`solve` on each response's own moments up to rounding.

    Examples
    --------
    %(factored)s
    >>> from lincomb._core import solve
    >>> block = f.project(np.column_stack([y, 3 * y]))
    >>> theta, rss, y_norm = solve_responses(f.moments, solve(f.moments), block)
    >>> bool(np.isclose(rss[1], 9 * rss[0])), theta.shape
    (True, (3, 2))
    """
    others = m.others
    q = others.size
    kept_o = sol.kept if m.intercept is None else sol.kept[1:]
    rank_o = kept_o.size
    r_count = block.count
    qty = block.qty
    if rank_o == q and np.array_equal(kept_o, others):
        # every column kept in order: the working factor is triangular already (its QR would
        # be the identity times itself, exactly: LAPACK leaves zero columns unreflected)
        theta_o = upper_solve(m.r[:q, :q] / sol.scale[kept_o], qty)
        tail = qty[:0]
    elif rank_o:
        pos = np.searchsorted(others, kept_o)
        rs_k = m.r[:q, :q][:, pos] / sol.scale[kept_o]
        qk, rk = np.linalg.qr(rs_k, mode="complete")
        z = qk.T @ qty
        theta_o = upper_solve(rk[:rank_o], z[:rank_o])
        tail = z[rank_o:]
    else:
        theta_o = np.zeros((0, r_count))
        tail = qty
    rss = block.resid**2 + np.einsum("ij,ij->j", tail, tail)
    y_norm = np.hypot(np.linalg.norm(qty, axis=0), block.resid)
    if m.intercept is not None:
        theta = np.vstack([block.center[None, :], theta_o])
    else:
        theta = theta_o
    return theta, rss, y_norm


def wald_quadratic_forms(
    delta: Array, root: Array, independent: NDArray[np.intp]
) -> tuple[Array, Array]:
    """Vectorized :func:`wald_from_root` for many responses that share ``root`` up to a scale.

    Parameters
    ----------
    delta : (m, r) ndarray
        ``Cβ̂ - d`` per response (columns).
    root : (k, m) ndarray
        ``V`` with ``Cov(Cβ̂) = σ² Vᵀ V`` (unscaled, shared by every response).
    independent : (q,) ndarray of int

    Returns
    -------
    quad : (r,) ndarray
        ``δ_Kᵀ (Vᵀ V)⁻¹ δ_K`` per response (divide by ``q σ²`` for the F).
    std_error : (m,) ndarray
        Unscaled standard error of each row (multiply by ``σ``).

    Examples
    --------
    >>> import numpy as np
    >>> quad, se = wald_quadratic_forms(np.array([[2.0, 4.0]]), np.array([[2.0]]), np.array([0]))
    >>> quad.tolist(), se.tolist()
    ([1.0, 4.0], [2.0])
    """
    se = np.linalg.norm(root, axis=0)
    if independent.size == 0:
        return np.zeros(delta.shape[1]), se
    chol = triangular_factor(root[:, independent])
    sol = upper_solve(chol, delta[independent], trans=True)
    return np.einsum("ij,ij->j", sol, sol), se
