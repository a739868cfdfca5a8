"""One balanced tree of merges, shared by every route that combines moments.

References: the pairing order is checked against a brute-force level-by-level pairing written
here (neighbours (0, 1), (2, 3), ... merged, an odd last part carried up); the merged factor
against ``RᵀR = AᵀA`` of the centred stacked data computed with numpy (textbook identity).
Routes are checked against each other bit for bit: the same parts merged in the same tree must
give the same floating-point numbers.
"""

from __future__ import annotations

import numpy as np
import pytest

import lincomb as lc
from lincomb import _core as core
from lincomb._core import merge as merge_module


def _level_pairs(parts: list[object]) -> object:
    """Brute-force reference: merge neighbours level by level, carrying an odd last part."""
    level = list(parts)
    while len(level) > 1:
        nxt: list[object] = [(level[i], level[i + 1]) for i in range(0, len(level) - 1, 2)]
        if len(level) % 2:
            nxt.append(level[-1])
        level = nxt
    return level[0]


@pytest.mark.parametrize("k", [*range(1, 34), 63, 64, 65, 100])
def test_stream_and_tree_pair_like_the_level_by_level_reference(monkeypatch, k):
    monkeypatch.setattr(merge_module, "merge_moments", lambda a, b: (a, b))
    merger = core.MomentMerger()
    for i in range(k):
        merger.add(i)  # type: ignore[arg-type]
    assert merger.result() == _level_pairs(list(range(k)))
    assert core.merge_tree(range(k)) == _level_pairs(list(range(k)))  # type: ignore[arg-type]
    assert merger.count == k


def test_tree_equals_centred_gram_of_all_rows():
    # reference: the weighted, centred cross-product of [X y] over all rows (numpy)
    rng = np.random.default_rng(11)
    x = np.column_stack([np.ones(90), rng.normal(size=(90, 3)) * [1.0, 1e3, 1e-3] + 50.0])
    y = rng.normal(size=90)
    w = rng.uniform(0.5, 2.0, size=90)
    cuts = [0, 7, 8, 30, 31, 55, 90]
    parts = [
        core.moments_from_arrays(x[a:b], y[a:b], w[a:b], intercept=0)
        for a, b in zip(cuts[:-1], cuts[1:], strict=True)
    ]
    m = core.merge_tree(parts)
    a = np.column_stack([x[:, 1:], y])
    ac = (a - w @ a / w.sum()) * np.sqrt(w)[:, None]
    gram = ac.T @ ac
    np.testing.assert_allclose(m.r.T @ m.r, gram, rtol=1e-11, atol=1e-9 * np.abs(gram).max())
    assert m.n == 90


def test_merge_tree_refuses_nothing_and_mixed_designs():
    with pytest.raises(ValueError, match="no moments to merge"):
        core.merge_tree([])
    x = np.column_stack([np.ones(5), np.arange(5.0)])
    y = np.arange(5.0) ** 2
    a = core.moments_from_arrays(x, y, intercept=0)
    b = core.moments_from_arrays(x, y, intercept=None)
    with pytest.raises(ValueError, match="different designs"):
        core.merge_tree([a, b])


def _chunks(seed: int = 5, n: int = 700, size: int = 64):
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n), rng.normal(size=(n, 3)) + 1e4])
    y = x @ [1.0, 0.5, 0.0, -0.25] + rng.normal(size=n)
    return x, y, [(x[i : i + size], y[i : i + size]) for i in range(0, n, size)]


def test_chunked_and_combined_fits_merge_in_the_same_tree():
    # the same chunks merged by the streaming route (chunked) and the list route (combine)
    # must give bit-identical moments: one tree, one pairing order
    x, y, chunks = _chunks()
    chunked = lc.fit_array_chunks(iter(chunks), intercept=0)
    with lc.blas_threads(1):
        parts = [core.moments_from_arrays(cx, cy, None, 0) for cx, cy in chunks]
    tree = core.merge_tree(parts)
    assert np.array_equal(chunked._moments.r, tree.r)
    assert np.array_equal(chunked._moments.center, tree.center)
    combined = lc.combine([lc.fit_arrays(cx, cy) for cx, cy in chunks])
    assert np.array_equal(combined._moments.r, tree.r)


@pytest.mark.parametrize("split_every", [2, 8])
def test_dask_tree_pairs_like_the_core_tree(split_every):
    # with split_every a power of two, merging each task's parts by merge_tree makes the Dask
    # graph's pairs those of the core tree, so the numbers are bit-identical to a chunked fit
    da = pytest.importorskip("dask.array")
    x, y, chunks = _chunks()
    xd = da.from_array(x, chunks=(64, x.shape[1]))
    yd = da.from_array(y, chunks=64)
    f = lc.fit_dask_arrays(xd, yd, split_every=split_every, scheduler="sync")
    tree = core.merge_tree(core.moments_from_arrays(cx, cy, None, 0) for cx, cy in chunks)
    assert np.array_equal(f._moments.r, tree.r)
    assert np.array_equal(f._moments.center, tree.center)
