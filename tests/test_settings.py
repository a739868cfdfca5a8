"""The one global BLAS-thread setting: validation, scoping, and that the core reads it."""

from __future__ import annotations

import contextlib

import numpy as np
import pytest

import lincomb as lc
from lincomb._core import moments as core_moments
from lincomb._settings import worker_threads
from lincomb.errors import InputError


@pytest.mark.parametrize("bad", [0, -1, 1.5, "2", True])
def test_setting_refuses_what_is_not_a_positive_whole_number(bad):
    with pytest.raises(InputError, match="positive whole number or None"):
        lc.set_blas_threads(bad)
    with pytest.raises(InputError, match="positive whole number or None"), lc.blas_threads(bad):
        pass
    assert worker_threads() == 1


def test_context_restores_the_previous_setting_even_on_error():
    lc.set_blas_threads(3)
    try:
        with pytest.raises(RuntimeError), lc.blas_threads(2):
            assert worker_threads() == 2
            raise RuntimeError("boom")
        assert worker_threads() == 3
        with lc.blas_threads(None):
            assert worker_threads() == 1  # None is the library default, one thread
    finally:
        lc.set_blas_threads(None)
    assert worker_threads() == 1


def test_blocked_core_factor_runs_on_the_set_threads(monkeypatch):
    pytest.importorskip("threadpoolctl")
    seen: list[int | None] = []

    def record(n: int | None) -> contextlib.AbstractContextManager[None]:
        seen.append(n)
        return contextlib.nullcontext()

    monkeypatch.setattr(core_moments, "_QR_ROWS", 64)
    monkeypatch.setattr(core_moments, "blas_limit", record)
    rng = np.random.default_rng(1)
    x = np.column_stack([np.ones(300), rng.normal(size=(300, 2))])
    y = rng.normal(size=300)
    core_moments.moments_from_arrays(x, y, None, 0)
    with lc.blas_threads(2):
        core_moments.moments_from_arrays(x, y, None, 0)
    assert seen == [1, 2]


def test_blas_limit_sets_and_restores_every_blas_library_even_on_error():
    threadpoolctl = pytest.importorskip("threadpoolctl")
    from lincomb._settings import blas_limit

    def counts() -> list[int]:
        return [
            i["num_threads"] for i in threadpoolctl.threadpool_info() if i["user_api"] == "blas"
        ]

    with threadpoolctl.threadpool_limits(2, user_api="blas"):
        assert set(counts()) == {2}
        with pytest.raises(RuntimeError), blas_limit(1):
            assert set(counts()) == {1}
            raise RuntimeError("boom")
        assert set(counts()) == {2}
        with blas_limit(2):  # already there: nothing to set or restore
            assert set(counts()) == {2}
        assert set(counts()) == {2}
