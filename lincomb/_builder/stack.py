"""Many restriction systems resolved at once into stacked arrays, for batches of tests.

:func:`stack_systems` gives the ``(C, d)`` of ``k`` systems of ``m`` rows each as ``(k, m, p)``
and ``(k, m)`` arrays, with the values :meth:`RestrictionSystem.resolve
<lincomb._builder.restriction.RestrictionSystem.resolve>` gives each system, but without a row
array or a label per restriction: what costs time per system is touching its Python objects,
so the restrictions' references, weights and targets are gathered by C-level passes
(``itertools.chain``, ``operator.attrgetter``, ``numpy.fromiter``), each distinct reference is
resolved once, and the weights are summed into ``C`` by one ``numpy.bincount``.
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
    _items_of,
    _Ref,
    _target_of,
    _terms_of,
)

__all__ = ["stack_systems"]


def stack_systems(
    systems: Sequence[RestrictionSystem], index: Resolver
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """``(C, d)`` of ``k`` systems of ``m`` rows each, as ``(k, m, p)`` and ``(k, m)`` arrays.

    The values are those of :meth:`RestrictionSystem.resolve` for each system, stacked, but no
    row array or label is made per restriction: the weights of every restriction are gathered
    into one list and summed into ``C`` by one ``numpy.bincount`` (in the order
    :meth:`Expr.row` adds them).  Other items (term targets, explicit matrices, level contrasts)
    give their rows as :meth:`~RestrictionSystem.resolve` does.  Labels are left to
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
    per_system = list(map(_items_of, systems))
    items = list(chain.from_iterable(per_system))
    if set(map(type, items)) == {Restriction}:  # one row per item: C-level passes only
        terms: list[dict[_Ref, float]] = list(map(_terms_of, items))
        return _stacked(
            index,
            p,
            list(map(len, per_system)),
            chain.from_iterable(terms),
            chain.from_iterable(map(dict.values, terms)),
            list(map(len, terms)),
            list(map(_target_of, items)),
            [],
        )
    refs: list[_Ref] = []
    weights: list[float] = []
    counts: list[int] = []  # references per row
    targets: list[float] = []
    dense: list[tuple[int, NDArray[np.float64]]] = []
    sizes: list[int] = []
    row = 0
    for system in systems:
        start = row
        for item in system.items:
            if type(item) is Restriction:
                found = _terms_of(item)
                refs.extend(found)
                weights.extend(found.values())
                counts.append(len(found))
                targets.append(item.target)
                row += 1
            else:
                for values, target, _label in item.rows(index):
                    dense.append((row, values))
                    counts.append(0)
                    targets.append(target)
                    row += 1
        sizes.append(row - start)
    return _stacked(index, p, sizes, refs, weights, counts, targets, dense)


class _Columns(dict[_Ref, int]):
    """Column of each reference, resolved through ``index`` the first time it is looked up."""

    def __init__(self, index: Resolver) -> None:
        super().__init__()
        self.index = index

    def __missing__(self, ref: _Ref) -> int:
        j = self[ref] = ref.resolve(self.index)
        return j


def _stacked(
    index: Resolver,
    p: int,
    sizes: list[int],
    refs: Iterable[_Ref],
    weights: Iterable[float],
    counts: list[int],
    targets: list[float],
    dense: list[tuple[int, NDArray[np.float64]]],
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """``(C, d)`` from the gathered references (``counts`` per row), weights and targets."""
    k = len(sizes)
    m = sizes[0] if sizes else 0
    if m == 0 or sizes.count(m) != k:
        return None
    rows = len(targets)
    cols = _Columns(index)  # each reference resolved once, on its first look-up
    at = np.repeat(np.arange(rows, dtype=np.intp) * p, counts)
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
    return c.reshape(k, m, p), np.array(targets, dtype=np.float64).reshape(k, m)
