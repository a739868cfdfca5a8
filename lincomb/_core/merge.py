"""Merging moments of disjoint row blocks: one pairwise merge and one balanced tree.

Every route that combines moments (the blocked in-memory factor, chunked fits, Dask fits and
combined fits) merges through :func:`merge_moments`, in the pairing order of
:func:`merge_tree` (streamed by :class:`MomentMerger`).  A merge is exact up to rounding; the
tree keeps the depth at ``ceil(log2(k))`` merges so that rounding grows with ``log k``, not
``k``, and the same parts in the same order give bit-identical moments on every route.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np

from lincomb._core.triangular import triangular_factor
from lincomb._docstrings import fill_doc
from lincomb.errors import IncompatibleFitError, InputError

if TYPE_CHECKING:
    from lincomb._core.moments import Moments

__all__ = ["MomentMerger", "merge_moments", "merge_tree"]

#: Example set-up: 40 random rows with an intercept and the moments of all of them at once,
#: which merged row blocks must reproduce.
_ROWS = """\
>>> import numpy as np
>>> from lincomb._core import moments_from_arrays
>>> rng = np.random.default_rng(2)
>>> x = np.column_stack([np.ones(40), rng.normal(size=(40, 2))]); y = rng.normal(size=40)
>>> whole = moments_from_arrays(x, y, intercept=0)"""
_rows_doc = fill_doc(rows=_ROWS)


@_rows_doc
def merge_moments(a: Moments, b: Moments) -> Moments:
    """Combine the moments of two disjoint row blocks into those of their union.

    Exact up to rounding: the centred factors are stacked with the between-block correction row
    ``sqrt(W_a W_b / W) (m_a - m_b)`` and refactored by QR (never by normal equations).

    Examples
    --------
    %(rows)s
    >>> parts = merge_moments(moments_from_arrays(x[:20], y[:20], intercept=0),
    ...                       moments_from_arrays(x[20:], y[20:], intercept=0))
    >>> bool(np.allclose(parts.r.T @ parts.r, whole.r.T @ whole.r))
    True
    """
    if a.intercept != b.intercept or a.center.shape != b.center.shape:
        raise IncompatibleFitError(
            "moments describe different designs (intercept or column count differ)"
        )
    wsum = a.weight_sum + b.weight_sum
    blocks = [a.r, b.r]
    center = a.center
    if a.intercept is not None and wsum > 0:
        cols = np.append(a.others, a.p)
        diff = a.center[cols] - b.center[cols]
        blocks.append(np.sqrt(a.weight_sum * b.weight_sum / wsum) * diff[None, :])
        center = (a.weight_sum * a.center + b.weight_sum * b.center) / wsum
    raw_norm = np.hypot(a.raw_norm, b.raw_norm)
    return replace(
        a,
        n=a.n + b.n,
        weight_sum=wsum,
        center=center,
        raw_norm=raw_norm,
        r=triangular_factor(np.vstack(blocks)),
    )


@_rows_doc
class MomentMerger:
    """Merge a stream of moments in a balanced binary tree, holding ``O(log k)`` factors.

    Parts are added in order; a part is merged with the previous one as soon as both cover
    the same number of leaves (a binary counter), and :meth:`result` folds what is left from
    the right.  The pairs are those of :func:`merge_tree`: level by level, neighbours
    ``(0, 1), (2, 3), ...`` are merged and an odd last part moves up unchanged.

    Examples
    --------
    %(rows)s
    >>> merger = MomentMerger()
    >>> for s in range(0, 40, 9):  # four blocks of 9 rows and one of 4
    ...     merger.add(moments_from_arrays(x[s:s + 9], y[s:s + 9], intercept=0))
    >>> m = merger.result()
    >>> m is not None and bool(np.allclose(m.r.T @ m.r, whole.r.T @ whole.r)), merger.count
    (True, 5)
    """

    def __init__(self) -> None:
        self._stack: list[tuple[int, Moments]] = []
        self.count = 0

    def add(self, m: Moments) -> None:
        """Add the moments of the next block of rows (merging completed pairs at once).

        Examples
        --------
        >>> import numpy as np
        >>> from lincomb._core import moments_from_arrays
        >>> merger = MomentMerger()
        >>> x = np.column_stack([np.ones(4), [1.0, 2, 3, 5]]); y = np.array([1.0, 2, 2, 4])
        >>> merger.add(moments_from_arrays(x, y, intercept=0))
        >>> merger.count
        1
        """
        self.count += 1
        level = 0
        while self._stack and self._stack[-1][0] == level:
            _, prev = self._stack.pop()
            m = merge_moments(prev, m)
            level += 1
        self._stack.append((level, m))

    def result(self) -> Moments | None:
        """The moments of all blocks added so far (None if none was added).

        Examples
        --------
        >>> MomentMerger().result() is None
        True
        """
        if not self._stack:
            return None
        acc = self._stack[-1][1]
        for _, m in reversed(self._stack[:-1]):
            acc = merge_moments(m, acc)
        return acc


@_rows_doc
def merge_tree(parts: Iterable[Moments]) -> Moments:
    """Merge moments of disjoint row blocks, in order, in a balanced binary tree.

    Parameters
    ----------
    parts : iterable of Moments
        At least one; all of the same design (same column count and intercept).

    Returns
    -------
    Moments

    Raises
    ------
    ValueError
        No part was given, or the parts describe different designs.

    Notes
    -----
    Level by level, neighbours ``(0, 1), (2, 3), ...`` are merged by :func:`merge_moments` and
    an odd last part moves up unchanged: ``ceil(log2(k))`` levels of small QRs.  Streamed by
    :class:`MomentMerger` (which gives the same pairs), so only ``O(log k)`` factors are held.

    Examples
    --------
    %(rows)s
    >>> parts = [moments_from_arrays(x[i:i + 10], y[i:i + 10], intercept=0)
    ...          for i in range(0, 40, 10)]
    >>> m = merge_tree(parts)
    >>> bool(np.allclose(m.r.T @ m.r, whole.r.T @ whole.r)), m.n
    (True, 40)
    """
    merger = MomentMerger()
    for m in parts:
        merger.add(m)
    out = merger.result()
    if out is None:
        raise InputError("no moments to merge")
    return out
