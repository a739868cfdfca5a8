"""Responses of a many-response fit: read in blocks, checked, and projected on worker threads."""

from __future__ import annotations

import functools
from collections import deque
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any, TypeVar

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb import _core as core
from lincomb._core.observed import ObservedPart
from lincomb._model.design import Design
from lincomb.errors import InputError, MissingValueError

T = TypeVar("T")


class _FrameColumns:
    """Picklable reader of a frame's columns by position (``cols`` maps response -> column)."""

    def __init__(self, frame: pd.DataFrame, cols: NDArray[np.intp] | None = None) -> None:
        self.frame = frame
        self.cols = cols

    def __call__(self, c: Any) -> Any:
        return self.frame.iloc[:, c if self.cols is None else self.cols[c]]


class _ArrayColumns:
    """Picklable reader of a 2-D array's columns."""

    def __init__(self, arr: NDArray[Any]) -> None:
        self.arr = arr

    def __call__(self, c: Any) -> Any:
        return self.arr[:, c]


class _Responses:
    """Columns of responses read in blocks, without copying the whole matrix."""

    def __init__(self, names: tuple[str, ...], get: Callable[[Any], Any], n: int) -> None:
        self.names = names
        self._get = get
        self.n = n

    @property
    def count(self) -> int:
        return len(self.names)

    def block(self, cols: slice | NDArray[np.intp]) -> NDArray[np.float64]:
        raw = self._get(cols)
        try:
            if isinstance(raw, pd.DataFrame):
                return raw.to_numpy(dtype=np.float64, na_value=np.nan)
            return np.asarray(raw, dtype=np.float64)
        except (TypeError, ValueError):
            names = np.asarray(self.names, dtype=object)[cols]
            for j, nm in enumerate(names):
                try:
                    frame_col = raw.iloc[:, j] if isinstance(raw, pd.DataFrame) else raw[:, j]
                    np.asarray(frame_col, dtype=np.float64)
                except (TypeError, ValueError):
                    raise InputError(
                        f"response {nm!r} is not numeric; recode it or leave it out."
                    ) from None
            raise  # pragma: no cover

    def column(self, j: int) -> NDArray[np.float64]:
        return self.block(np.array([j]))[:, 0]

    @property
    def matrix(self) -> NDArray[np.float64] | None:
        """The float64 matrix whose blocks are views of it (no copy), or None (a frame, another
        dtype)."""
        get = self._get
        if isinstance(get, _ArrayColumns) and get.arr.ndim == 2 and get.arr.dtype == np.float64:
            return get.arr
        return None

    @property
    def stored_by_row(self) -> bool:
        """Whether blocks are views of a float64 matrix stored row by row (C order): a narrow
        block then reads a short piece of every row, a wide one reads along the rows."""
        arr = self.matrix
        return arr is not None and arr.strides[1] == 8

    def sampled_missing_share(self, rows: int = 64) -> float:
        """Share of the responses with a missing value in a sample of about ``rows`` rows
        spread over the :attr:`matrix` (0 without one): a cheap first guess of the route most
        responses take."""
        arr = self.matrix
        if arr is None or self.count == 0:
            return 0.0
        sample = arr[:: max(1, arr.shape[0] // rows)]
        return float(np.count_nonzero(np.isnan(sample).any(axis=0))) / self.count


@functools.lru_cache(maxsize=4)
def default_names(r: int) -> tuple[str, ...]:
    """Names of ``r`` unnamed responses, ``y0, y1, ...`` (one tuple per count, kept for the
    next fit of as many responses: see :func:`response_index`)."""
    return tuple([f"y{j}" for j in range(r)])  # a list first: faster for many


@functools.lru_cache(maxsize=4)
def _default_index(r: int) -> pd.Index:
    return pd.Index(default_names(r))


def response_index(names: tuple[str, ...]) -> pd.Index:
    """The pandas index of response ``names``, named ``response``.

    The index of the default names (:func:`default_names`) is converted once per count and
    shared as a new index object (``copy``: the values are immutable, the name is its own), so
    fits in a loop do not convert thousands of strings each time.
    """
    r = len(names)
    if r and names[0] == "y0" and names[-1] == f"y{r - 1}" and names == default_names(r):
        return _default_index(r).copy(name="response")
    return pd.Index(names, name="response")


def _unique_names(names: Sequence[Any], what: str) -> tuple[str, ...]:
    out = tuple(map(str, names))
    if len(set(out)) != len(out):
        dup = sorted({s for s in out if out.count(s) > 1})[:5]
        raise InputError(f"{what} must be unique; repeated: {dup}.")
    return out


def _array_source(
    y: Any, n: int, response_names: Sequence[str] | None, index: pd.Index | None
) -> _Responses:
    if isinstance(y, pd.DataFrame):
        if len(y) != n:
            raise InputError(f"the responses have {len(y)} rows but the design has {n}.")
        if index is not None and not y.index.equals(index):
            raise InputError(
                "the responses' index differs from the data's; align them (e.g."
                " responses.reindex(data.index)) or pass the responses as column names of data."
            )
        names = _unique_names(
            y.columns.tolist() if response_names is None else response_names, "response names"
        )
        if len(names) != y.shape[1]:
            raise InputError(f"{len(names)} response names for {y.shape[1]} responses.")
        return _Responses(names, _FrameColumns(y), n)
    if isinstance(y, pd.Series):
        name = str(y.name) if y.name is not None else "y"
        return _array_source(y.to_frame(name), n, response_names, index)
    arr = np.asarray(y)
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2:
        raise InputError(f"responses must be 2-dimensional (n, r), got shape {arr.shape}.")
    if arr.shape[0] != n:
        raise InputError(
            f"the responses have {arr.shape[0]} rows but the design has {n}; responses are"
            " columns, one row per observation."
        )
    if arr.dtype.kind not in "fiub":
        raise InputError(f"responses must be numeric, got dtype {arr.dtype}.")
    r = arr.shape[1]
    if response_names is None:
        names = default_names(r)
    else:
        names = _unique_names(response_names, "response names")
        if len(names) != r:
            raise InputError(f"{len(names)} response names for {r} responses.")
    return _Responses(names, _ArrayColumns(arr), n)


def _projected(
    work: Callable[[NDArray[np.float64], bool], T],
    source: _Responses,
    positions: NDArray[np.intp] | None,
    r: int,
    plan: Callable[[], tuple[int, bool]],
    workers: int,
) -> Iterator[tuple[NDArray[np.intp], NDArray[np.float64], T]]:
    """Blocks of responses with what ``work`` makes of them (their projections), in order.

    ``plan()`` gives the width of the next block and the route it takes (``own``: fitted on
    their own rows), decided when the block is read; ``work(yb, own)`` projects it.  Blocks are
    read in this thread (pandas is not asked to serve several threads) and handed to ``work``
    on ``workers`` threads (numpy and BLAS release the GIL); at most ``workers`` blocks wait.
    """

    def read(j0: int) -> tuple[NDArray[np.intp], NDArray[np.float64], bool]:
        width, own = plan()
        cols = np.arange(j0, min(r, j0 + width))
        yb = source.block(slice(j0, j0 + cols.size))
        return cols, (yb if positions is None else yb[positions]), own

    if workers <= 1:
        j0 = 0
        while j0 < r:
            cols, yb, own = read(j0)
            yield cols, yb, work(yb, own)
            j0 += cols.size
        return
    with ThreadPoolExecutor(max_workers=workers) as pool:
        pending: deque[tuple[NDArray[np.intp], NDArray[np.float64], Future[T]]] = deque()
        j0 = 0
        while j0 < r:
            cols, yb, own = read(j0)
            pending.append((cols, yb, pool.submit(work, yb, own)))
            j0 += cols.size
            if len(pending) > workers:
                kc, ky, fut = pending.popleft()
                yield kc, ky, fut.result()
        while pending:
            kc, ky, fut = pending.popleft()
            yield kc, ky, fut.result()


def _check_no_inf(
    yb: NDArray[np.float64], names: tuple[str, ...], cols: NDArray[np.intp], design: Design
) -> None:
    bad = np.isinf(yb)
    if bad.any():
        i, j = (int(v) for v in np.argwhere(bad)[0])
        raise InputError(
            f"response {names[cols[j]]!r} holds {float(yb[i, j])!r} at row"
            f" {design.row_index[i]!r};"
            " remove or replace infinite values (missing values are fine: NaN)."
        )


_BlockFits = tuple[NDArray[np.bool_], core.ResponseBlock, "ObservedPart | None"]


def _fit_block(
    factor: core.DesignFactor,
    observed: Callable[[], core.ObservedDesign | None],
    yb: NDArray[np.float64],
    mostly_missing: bool,
    by_rows: bool = False,
    width: int = 1,
) -> _BlockFits:
    """Summaries of one block of responses: finite ones projected on the design of all rows,
    the others (missing values; or an inf, refused later) projected for a fit on their own rows
    when ``observed()`` gives the design for it (:meth:`~lincomb._core.ObservedDesign.project`;
    the caller finishes the fits of all blocks at once).

    Returns ``odd`` (the responses not projected), the projections of the others, and the
    own-rows projections of the odd ones (None without ``observed()``).  Which responses are odd is
    found from the means that centring takes anyway
    (:meth:`~lincomb._core.DesignFactor.project_finite`; with ``by_rows``, a wide block of a
    matrix stored row by row, from the products summed over chunks of rows:
    :meth:`~lincomb._core.DesignFactor.project_rows`, the odd ones then projected ``width`` at a
    time); when most responses have missing values (``mostly_missing``, learnt from the blocks
    before), every response of the block is fitted on its own rows (those without missing
    values on all rows, exactly as well).
    """
    if mostly_missing and (od := observed()) is not None:
        # every response of the block is fitted on its own rows (all rows when it has no
        # missing value): no pass over the block to sort them first
        odd = np.ones(yb.shape[1], dtype=bool)
        return odd, core.ResponseBlock.concat([], factor.moments.others.size), od.project(yb)
    odd, block = factor.project_rows(yb) if by_rows else factor.project_finite(yb)
    if not odd.any() or (od := observed()) is None:
        return odd, block, None
    if odd.all():
        return odd, block, od.project(yb)
    cols = np.flatnonzero(odd)  # copied ``width`` at a time: the work memory stays bounded
    parts = [od.project(yb[:, cols[k : k + width]]) for k in range(0, cols.size, max(1, width))]
    return odd, block, ObservedPart.concat(parts, parts[0].qty.shape[0], parts[0].half.shape[1])


def _refuse_bad_values(
    yb: NDArray[np.float64],
    cols: NDArray[np.intp],
    odd: NDArray[np.bool_],
    block: core.ResponseBlock,
    own: ObservedPart | None,
    names: tuple[str, ...],
    design: Design,
    missing: str,
) -> None:
    """Refuse infinite values, values too large to square, and (``missing='refuse'``) missing
    values in one block of responses, naming the first culprit (from :func:`_fit_block`)."""
    finite = block.finite()  # values too large to square make the summaries non-finite
    if not odd.any() and finite.all():
        return
    own_finite = None if own is None else own.finite()
    if own_finite is not None and own_finite.all() and finite.all() and missing != "refuse":
        return  # missing values only, each response fitted on its rows (no inf, no overflow)
    good = np.flatnonzero(~odd)
    odd_cols = np.flatnonzero(odd)
    n = yb.shape[0]
    # an inf makes a column's fit non-finite too: look for infs only there
    unfit = odd_cols if own_finite is None else odd_cols[~own_finite]
    suspect = np.sort(np.concatenate([unfit, good[~finite]]))
    if suspect.size:
        _check_no_inf(yb[:, suspect], names, cols[suspect], design)
    if own is None:  # each odd column has a NaN, an inf or a sum that overflows
        has_nan = np.isnan(yb[:, odd_cols]).any(axis=0)
        unfit_own = np.ones(odd_cols.size, dtype=bool)
    else:  # or none of them, in a block handed whole to the own-rows fit
        assert own_finite is not None
        has_nan = own.n < n
        unfit_own = ~own_finite
    big = np.sort(np.concatenate([odd_cols[~has_nan & unfit_own], good[~finite]]))
    if big.size:
        raise InputError(
            f"response {names[cols[big[0]]]!r} holds values too large to square in float64;"
            " rescale it."
        )
    if missing == "refuse" and odd_cols.size:
        first = odd_cols[0]
        raise MissingValueError(
            f"response {names[cols[first]]!r} has {int(np.isnan(yb[:, first]).sum())} missing"
            f" values ({odd_cols.size} responses in this block have some); fit with"
            " missing='skip' to fit each response on its observed rows."
        )
