"""Many restriction systems resolved at once into stacked arrays, for batches of tests.

:func:`stack_systems` gives the ``(C, d)`` of ``k`` systems of ``m`` rows each as ``(k, m, p)``
and ``(k, m)`` arrays, with the values :meth:`RestrictionSystem.resolve
<lincomb._builder.restriction.RestrictionSystem.resolve>` gives each system, but without a row
array or a label per restriction.  What costs time per system is touching its Python objects,
so a system of plain restrictions carries its rows in a flat form made when it was built (a
tuple of references; weights, and per row the number of references and the target, as float64
bytes): the stack joins the systems' bytes into arrays (``numpy.frombuffer``), chains their
references through one C-level pass (``numpy.fromiter``), resolves each distinct reference
once per call, and sums the weights into ``C`` by one ``numpy.bincount``.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from itertools import chain

import numpy as np
from numpy.typing import NDArray

from lincomb._builder.restriction import (
    _ROW_BYTES,
    Resolver,
    Restriction,
    RestrictionSystem,
    _flat_of,
    _pack_row,
    _Ref,
    _ref_column,
)

__all__ = ["stack_systems"]


def stack_systems(
    systems: Sequence[RestrictionSystem], index: Resolver
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """``(C, d)`` of ``k`` systems of ``m`` rows each, as ``(k, m, p)`` and ``(k, m)`` arrays.

    The values are those of :meth:`RestrictionSystem.resolve` for each system, stacked, but no
    row array or label is made per restriction: the references, weights and targets of every
    restriction are joined from the flat form each system was built with and the weights summed
    into ``C`` by one ``numpy.bincount`` (in the order :meth:`Expr.row` adds them).  Other
    items (term targets, explicit matrices, level contrasts) give their rows as
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
    flats = list(map(_flat_of, systems))
    if flats and None not in flats:  # plain restrictions only: no pass per restriction
        refs, weights, rows = zip(*flats, strict=True)
        sizes = list(map(len, rows))  # bytes: _ROW_BYTES per row
        return _stacked(
            index, sizes[0] // _ROW_BYTES, sizes, chain.from_iterable(refs), weights, rows, []
        )
    refs_: list[_Ref] = []
    weights_: list[bytes] = []
    rows_: list[bytes] = []
    dense: list[tuple[int, NDArray[np.float64]]] = []
    sizes_: list[int] = []
    row = 0
    for system in systems:
        start = row
        for item in system.items:
            if type(item) is Restriction:
                found, w, info = _flat_of(item)
                refs_.extend(found)
                weights_.append(w)
                rows_.append(info)
                row += 1
            else:
                for values, target, _label in item.rows(index):
                    dense.append((row, values))
                    rows_.append(_pack_row(0, target))
                    row += 1
        sizes_.append(row - start)
    return _stacked(index, sizes_[0] if sizes_ else 0, sizes_, refs_, weights_, rows_, dense)


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
    m: int,
    sizes: list[int],
    refs: Iterable[_Ref],
    weights: Iterable[bytes],
    rows: Iterable[bytes],
    dense: list[tuple[int, NDArray[np.float64]]],
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """``(C, d)`` of ``len(sizes)`` systems of ``m`` rows from their references, weights and
    rows (references per row and target, as bytes), unless the ``sizes`` are not all alike."""
    k = len(sizes)
    if m == 0 or sizes.count(sizes[0]) != k:
        return None
    p = len(index.names)
    info = np.frombuffer(b"".join(rows), dtype=np.float64).reshape(k * m, 2)
    w = np.frombuffer(b"".join(weights), dtype=np.float64)
    at = np.repeat(np.arange(0, k * m * p, p, dtype=np.intp), info[:, 0].astype(np.intp))
    n = at.size
    cols = _Columns(index)  # each reference resolved once, on its first look-up
    at += np.fromiter(map(cols.__getitem__, refs), dtype=np.intp, count=n)
    flat = np.bincount(at, w, minlength=k * m * p)
    c: NDArray[np.float64] = flat.astype(np.float64, copy=False).reshape(k * m, p)
    for i, values in dense:
        c[i] = values
    # a row whose weights cancel: resolve() names it.  Reduced down the columns of the
    # transposed copy: numpy reduces short rows (p entries) one row at a time, several times
    # slower for a tall C
    if not np.logical_or.reduce(np.ascontiguousarray((c != 0).T), axis=0).all():
        return None
    return c.reshape(k, m, p), info[:, 1].reshape(k, m).copy()
