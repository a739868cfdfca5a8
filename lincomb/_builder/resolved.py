"""A restriction system resolved on a fit's coefficients, in the form the test routes read.

:meth:`~lincomb.RestrictionSystem.resolved` gives ``C`` and ``d`` with the row labels written
only when first read (:class:`RowLabels`), and, for plain restrictions, the columns each row
touches (:class:`RowLayout`): a single test then checks its rows without scanning ``C`` for
the intercept or running the greedy row analysis on rows that share no column.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import TYPE_CHECKING, NamedTuple, overload

import numpy as np
from numpy.typing import NDArray

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._builder.restriction import Restriction

__all__ = ["Resolved", "RowLabels", "RowLayout"]


class RowLayout(NamedTuple):
    """Which columns the rows of a resolved system of plain restrictions use.

    Attributes
    ----------
    touched : frozenset of int
        Columns with a nonzero weight in some row.
    apart : bool
        The rows use disjoint sets of columns and every weight is finite, so that rows in
        any coordinates that scale columns by finite nonzero factors are exactly orthogonal
        (when no entry over- or underflows; see :func:`lincomb._fit.restriction_rows.check_rows`).
    positions : tuple of int
        Flat positions in ``C`` of the nonzero weights, row by row (in a row, in the order of
        its terms).
    """

    touched: frozenset[int]
    apart: bool
    positions: tuple[int, ...]


class Resolved(NamedTuple):
    """A system resolved on a fit's coefficients (see :meth:`RestrictionSystem.resolved`).

    Attributes
    ----------
    c, d : ndarray
        As :meth:`RestrictionSystem.resolve` gives them.
    labels : sequence of str
        The row labels; for plain restrictions written when first read.
    layout : RowLayout or None
        The columns the rows use, for a system of plain restrictions; None otherwise.
    """

    c: NDArray[np.float64]
    d: NDArray[np.float64]
    labels: Sequence[str]
    layout: RowLayout | None


class RowLabels(Sequence[str]):
    """The labels of plain restrictions, written when first read (a test whose labels nobody
    reads, as in a loop that keeps only p-values, does not pay for writing them).

    Examples
    --------
    >>> from lincomb import coef
    >>> labels = RowLabels(((coef("a") == 1), (coef("b") == 2).labelled("b at two")))
    >>> len(labels), labels[1], list(labels)
    (2, 'b at two', ['a = 1', 'b at two'])
    """

    __slots__ = ("_items", "_written")

    def __init__(self, items: Sequence[Restriction]) -> None:
        self._items = items
        self._written: tuple[str, ...] | None = None

    def _all(self) -> tuple[str, ...]:
        if self._written is None:
            self._written = tuple(
                item.text() if item.label is None else item.label for item in self._items
            )
        return self._written

    @overload
    def __getitem__(self, i: int) -> str: ...
    @overload
    def __getitem__(self, i: slice) -> tuple[str, ...]: ...
    def __getitem__(self, i: int | slice) -> str | tuple[str, ...]:
        return self._all()[i]

    def __len__(self) -> int:
        return len(self._items)

    def __iter__(self) -> Iterator[str]:
        return iter(self._all())

    def __repr__(self) -> str:
        return repr(list(self._all()))
