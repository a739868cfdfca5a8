"""Many restriction systems resolved at once into stacked arrays, for batches of tests.

:func:`stack_systems` gives the ``(C, d)`` of ``k`` systems of ``m`` rows each as ``(k, m, p)``
and ``(k, m)`` arrays, with the values :meth:`RestrictionSystem.resolve
<lincomb._builder.restriction.RestrictionSystem.resolve>` gives each system, but without a row
array or a label per restriction.  What costs time per system is touching its Python objects,
so a system of plain restrictions carries its rows as four flat tuples made when it was built
(references, weights, references per row, targets); the stack chains the systems' tuples into
arrays by C-level passes (``itertools.chain``, ``numpy.fromiter``), resolves each distinct
reference once per call, and sums the weights into ``C`` by one ``numpy.bincount``.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from itertools import chain

import numpy as np
from numpy.typing import NDArray

from lincomb._builder.restriction import (
    Resolver,
    Restriction,
    RestrictionSystem,
    _flat_of,
    _Ref,
    _ref_column,
)

__all__ = ["stack_systems"]


def stack_systems(
    systems: Sequence[RestrictionSystem], index: Resolver
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """``(C, d)`` of ``k`` systems of ``m`` rows each, as ``(k, m, p)`` and ``(k, m)`` arrays.

    The values are those of :meth:`RestrictionSystem.resolve` for each system, stacked, but no
    row array or label is made per restriction: the references and weights of every
    restriction are chained from the flat tuples each system was built with and summed into
    ``C`` by one ``numpy.bincount`` (in the order :meth:`Expr.row` adds them).  Other items
    (term targets, explicit matrices, level contrasts) give their rows as
    :meth:`~RestrictionSystem.resolve` does.  Labels are left to
    :meth:`RestrictionSystem.row_labels`.

    Returns None when the systems differ in their number of rows or hold none, or when a row
    has no coefficient left: resolving them one by one then raises the error that names the
    system and row.  A name the resolver does not know raises its error here.

    Examples
    --------
    >>> import lincomb as lc
    >>> index = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index
    >>> systems = [lc.coef("line[T.L2]") == lc.coef(b) for b in ("line[T.L3]", "line[T.L4]")]
    >>> from lincomb._builder.restriction import as_system
    >>> c, d = stack_systems([as_system(s) for s in systems], index)
    >>> c.shape, c[1, 0].tolist()
    ((2, 1, 4), [0.0, 1.0, 0.0, -1.0])
    """
    p = len(index.names)
    flats = list(map(_flat_of, systems))
    if flats and None not in flats:  # plain restrictions only: C-level passes
        refs, weights, counts, targets = zip(*flats, strict=True)
        return _stacked(
            index,
            p,
            list(map(len, targets)),
            chain.from_iterable(refs),
            chain.from_iterable(weights),
            chain.from_iterable(counts),
            chain.from_iterable(targets),
            [],
        )
    refs_: list[_Ref] = []
    weights_: list[float] = []
    counts_: list[int] = []  # references per row
    targets_: list[float] = []
    dense: list[tuple[int, NDArray[np.float64]]] = []
    sizes: list[int] = []
    row = 0
    for system in systems:
        start = row
        for item in system.items:
            if type(item) is Restriction:
                found, w, n, d = _flat_of(item)
                refs_.extend(found)
                weights_.extend(w)
                counts_.extend(n)
                targets_.extend(d)
                row += 1
            else:
                for values, target, _label in item.rows(index):
                    dense.append((row, values))
                    counts_.append(0)
                    targets_.append(target)
                    row += 1
        sizes.append(row - start)
    return _stacked(index, p, sizes, refs_, weights_, counts_, targets_, dense)


class _Columns(dict[_Ref, int]):
    """Column of each reference, resolved through ``index`` the first time it is looked up."""

    def __init__(self, index: Resolver) -> None:
        super().__init__()
        self.index = index

    def __missing__(self, ref: _Ref) -> int:
        j = self[ref] = _ref_column(ref, self.index)
        return j


def _stacked(
    index: Resolver,
    p: int,
    sizes: list[int],
    refs: Iterable[_Ref],
    weights: Iterable[float],
    counts: Iterable[int],
    targets: Iterable[float],
    dense: list[tuple[int, NDArray[np.float64]]],
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """``(C, d)`` from the gathered references (``counts`` per row), weights and targets."""
    k = len(sizes)
    m = sizes[0] if sizes else 0
    if m == 0 or sizes.count(m) != k:
        return None
    rows = k * m
    cols = _Columns(index)  # each reference resolved once, on its first look-up
    at = np.repeat(
        np.arange(0, rows * p, p, dtype=np.intp),
        np.fromiter(counts, dtype=np.intp, count=rows),
    )
    n = at.size
    at += np.fromiter(map(cols.__getitem__, refs), dtype=np.intp, count=n)
    w = np.fromiter(weights, dtype=np.float64, count=n)
    flat = np.bincount(at, w, minlength=rows * p)
    c: NDArray[np.float64] = flat.astype(np.float64, copy=False).reshape(rows, p)
    for i, values in dense:
        c[i] = values
    # a row whose weights cancel: resolve() names it.  Reduced down the columns of the
    # transposed copy: numpy reduces short rows (p entries) one row at a time, several times
    # slower for a tall C
    if not np.logical_or.reduce(np.ascontiguousarray((c != 0).T), axis=0).all():
        return None
    d = np.fromiter(targets, dtype=np.float64, count=rows)
    return c.reshape(k, m, p), d.reshape(k, m)
