"""Many responses with fewer passes over the data: the digits they keep and the routes they take.

* Complete responses whose mean is small beside their spread are projected without a centred
  copy (:meth:`lincomb._core.DesignFactor.project_finite`); the others are centred first.
* Responses with missing values are fitted on their own rows (:mod:`lincomb._core.observed`):
  each is shifted by a rough mean taken from a sample of rows (not at all where that sample's
  mean is small beside its spread), and centred exactly only where the shift was far from
  its mean; blocks are projected
  one by one and finished together, the residuals of close fits formed again from the
  responses.

The tests check the digits of responses with large means, the far-shift path, mixed routes
within a block and the finish over several blocks against statsmodels (a numerical reference
only: OLS/WLS per response on that response's rows).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

import lincomb as lc
from lincomb import _core as core
from lincomb._fit import many, response_groups


def _routed(mf: lc.ManyFit) -> list[int]:
    """The responses that went the vectorized own-rows route (certified, not refitted)."""
    groups = [g for g in mf._groups if isinstance(g, response_groups._ObservedGroup)]
    return sorted(int(j) for g in groups for j in g.columns)


def _design(n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return np.column_stack([np.ones(n), rng.normal(size=(n, 3))])


def _blocks_read_by_rows(monkeypatch: pytest.MonkeyPatch) -> list[tuple[int, ...]]:
    """The shapes of the blocks :meth:`DesignFactor.project_rows` is given, as they come."""
    calls: list[tuple[int, ...]] = []
    project_rows = core.DesignFactor.project_rows

    def spy(self: core.DesignFactor, y: np.ndarray) -> object:
        calls.append(y.shape)
        return project_rows(self, y)

    monkeypatch.setattr(core.DesignFactor, "project_rows", spy)
    return calls


def _reference(x, y, w=None):
    obs = ~np.isnan(y)
    model = sm.WLS(y[obs], x[obs], weights=1.0 if w is None else w[obs])
    return model.fit()


@pytest.mark.parametrize("weighted", [False, True])
def test_large_means_keep_their_digits(weighted: bool) -> None:
    # Responses with mean 1e9 and spread 1e-3 (a ratio of 1e12) and scattered missing values.
    # A fit that did not centre each response first would lose about 12 of its 16 digits in
    # the slopes and the residual sum of squares.  Reference: statsmodels on the deviations
    # y - 1e9, which are exact in float64 (Sterbenz: y and 1e9 are within a factor 2), so the
    # reference sees the same numbers without the large mean; the intercept is shifted back.
    n, r = 400, 12
    x = _design(n, 1)
    rng = np.random.default_rng(2)
    dev = rng.normal(size=(n, r)) * 1e-3 + 5e-4 * x[:, [1]]
    ys = dev + 1e9
    ys[rng.uniform(size=ys.shape) < 0.03] = np.nan
    w = rng.uniform(0.5, 2.0, size=n) if weighted else None
    mf = lc.fit_many_arrays(x, ys, names=["one", "a", "b", "c"], weights=w)
    assert _routed(mf) == list(range(r))  # every response on the shifted one-pass route
    res = mf.wald((lc.coef("a") == 0) & (lc.coef("b") == lc.coef("c")))
    c = np.array([[0.0, 1, 0, 0], [0.0, 0, 1, -1]])
    for j in range(r):
        ref = _reference(x, ys[:, j] - 1e9, w)
        beta = mf.coefficients.iloc[:, j].to_numpy()
        # slopes to 1e-9 of their size (an uncentred fit would be off by about 1e-4)
        np.testing.assert_allclose(beta[1:], ref.params[1:], rtol=1e-9, atol=1e-9 * 5e-4)
        np.testing.assert_allclose(beta[0], ref.params[0] + 1e9, rtol=1e-15)
        np.testing.assert_allclose(mf.rss.iloc[j], ref.ssr, rtol=1e-10)
        ft = ref.f_test(c)
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=1e-9)


def test_a_shift_far_from_the_mean_is_replaced_by_the_mean() -> None:
    # The rough shift is the mean of every (n // 64)-th row.  A response that is large on
    # exactly those rows gets a shift far from its mean: it is centred exactly (the recorded
    # mean is non-zero) and its fit must not change.  Reference: statsmodels OLS per response.
    n = 640
    x = _design(n, 3)
    rng = np.random.default_rng(4)
    ys = rng.normal(size=(n, 4)) + 3.0
    sampled = np.arange(0, n, n // 64)
    ys[sampled, 0] += 1e4  # far shift
    ys[sampled, 1] = np.nan  # every sampled value missing: the shift is 0, the mean is 3
    ys[rng.uniform(size=ys.shape) < 0.02] = np.nan
    f = core.factor_design(x, None, 0)
    od = core.observed_design(f, core.solve(f.moments))
    part = od.project(ys)
    assert part.mean[0] != 0.0 and part.mean[1] != 0.0  # centred exactly
    assert part.mean[2] == 0.0 and part.mean[3] == 0.0  # the rough shift stood
    mf = lc.fit_many_arrays(x, ys)
    assert _routed(mf) == [0, 1, 2, 3]
    for j in range(4):
        ref = _reference(x, ys[:, j])
        np.testing.assert_allclose(mf.coefficients.iloc[:, j], ref.params, rtol=1e-10)
        np.testing.assert_allclose(mf.rss.iloc[j], ref.ssr, rtol=1e-10)


def test_blocks_finished_together_and_close_fits_read_again(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # Small blocks (several per fit) projected one by one and finished at once; half of the
    # responses fit closely (R² near 1), so their residuals are formed again from the
    # responses (module notes of lincomb._core.observed).  Weighted, with scattered missing
    # values.  Reference: statsmodels WLS per response, F test of two restrictions.
    monkeypatch.setattr(many, "BLOCK_BYTES", 8 * 300 * 5)  # 5 responses per block
    monkeypatch.setattr(many, "MIN_BLOCK_COLUMNS", 1)
    n, r = 300, 23
    x = _design(n, 5)
    rng = np.random.default_rng(6)
    w = rng.uniform(0.3, 3.0, size=n)
    signal = x @ np.array([2.0, 1.0, -3.0, 0.5])
    ys = rng.normal(size=(n, r)) * np.where(np.arange(r) % 2 == 0, 1e-3, 1.0) + signal[:, None]
    ys[rng.uniform(size=ys.shape) < 0.04] = np.nan
    mf = lc.fit_many_arrays(x, ys, names=["one", "a", "b", "c"], weights=w, workers=2)
    assert _routed(mf) == list(range(r))
    res = mf.wald((lc.coef("a") == 1) & (lc.coef("c") == 0.5))
    c = np.array([[0.0, 1, 0, 0], [0.0, 0, 0, 1]])
    for j in range(r):
        ref = _reference(x, ys[:, j], w)
        assert mf.n_obs.iloc[j] == ref.nobs
        np.testing.assert_allclose(mf.coefficients.iloc[:, j], ref.params, rtol=1e-10)
        np.testing.assert_allclose(mf.rss.iloc[j], ref.ssr, rtol=1e-9)
        ft = ref.f_test((c, np.array([1.0, 0.5])))
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=1e-8)


def test_small_and_large_means_in_one_block_and_close_fits() -> None:
    # Complete responses: some with mean 0 (projected without a centred copy), some with mean
    # 1e8 and spread 1 (centred first), some fitting closely (R² near 1: explicit residuals
    # from the caller's array, which must stay untouched), in one block.  Reference:
    # statsmodels OLS per response on y - 1e8 where the mean is large (exact deviations, as
    # above), so the reference itself keeps every digit.
    n, r = 200, 9
    x = _design(n, 7)
    rng = np.random.default_rng(8)
    ys = rng.normal(size=(n, r))
    ys[:, 3:6] += 1e8
    ys[:, 6:] = 1e-3 * ys[:, 6:] + x @ np.array([0.0, 1.0, -2.0, 0.5])[:, None]
    ys0 = ys.copy()
    f = core.factor_design(x, None, 0)
    odd, block = f.project_finite(ys)
    np.testing.assert_array_equal(ys, ys0)  # the input is not modified
    assert not odd.any() and block.count == r
    mf = lc.fit_many_arrays(x, ys, names=["one", "a", "b", "c"])
    res = mf.wald(lc.coef("a") == 0.999)  # well away from every estimate: a stable F
    for j in range(r):
        shift = 1e8 if 3 <= j < 6 else 0.0
        ref = _reference(x, ys[:, j] - shift)
        beta = mf.coefficients.iloc[:, j].to_numpy()
        np.testing.assert_allclose(beta[1:], ref.params[1:], rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(beta[0], ref.params[0] + shift, rtol=1e-14, atol=1e-12)
        np.testing.assert_allclose(mf.rss.iloc[j], ref.ssr, rtol=1e-9)
        ft = ref.f_test((np.array([[0.0, 1, 0, 0]]), np.array([0.999])))
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=1e-9)


@pytest.mark.parametrize("weighted", [False, True])
def test_rows_copied_in_chunks_from_a_matrix_stored_by_row(
    monkeypatch: pytest.MonkeyPatch, weighted: bool
) -> None:
    # A C-ordered response matrix whose responses mostly have missing values is read in wide
    # blocks (the route is guessed from a sample of rows) whose rows are copied in small
    # chunks; far shifts (responses large on the sampled rows), large means and close fits
    # are among them, so every path of the chunked projection runs.  The F-ordered copy of the
    # same matrix takes narrow blocks, copied whole.  Reference: statsmodels OLS/WLS per
    # response on its own rows.
    from lincomb._core import many as core_many
    from lincomb._core import observed

    monkeypatch.setattr(core_many, "CHUNK_BYTES", 8 * 37 * 7)  # chunks of 7 rows (37 responses)
    monkeypatch.setattr(many, "BLOCK_BYTES", 8 * 640 * 6)  # 6 responses per narrow block
    monkeypatch.setattr(many, "MIN_BLOCK_COLUMNS", 1)
    chunks = []
    chunk = observed._chunk
    monkeypatch.setattr(observed, "_chunk", lambda y, *a: chunks.append(y.shape) or chunk(y, *a))
    n, r = 640, 37
    x = _design(n, 9)
    rng = np.random.default_rng(10)
    ys = rng.normal(size=(n, r)) + 0.3 * x[:, [2]]
    ys[:, 5:10] += 1e7  # large means
    ys[np.arange(0, n, n // 64), 10:13] += 1e4  # far shifts
    ys[:, 13:18] = x @ np.array([1.0, -2.0, 0.5, 3.0])[:, None] + 1e-4 * ys[:, 13:18]
    ys[rng.uniform(size=ys.shape) < 0.03] = np.nan
    ys[:, 20] = rng.normal(size=n)  # one complete response among them
    w = rng.uniform(0.5, 2.0, size=n) if weighted else None
    names = ["one", "a", "b", "c"]
    by_row = lc.fit_many_arrays(x, ys, names=names, weights=w)
    assert len(chunks) == -(-n // 7) and {s[1] for s in chunks} == {r}  # one wide block
    chunks.clear()
    by_column = lc.fit_many_arrays(x, np.asfortranarray(ys), names=names, weights=w)
    assert chunks and max(s[1] for s in chunks) == 6  # narrow blocks, each one chunk
    system = (lc.coef("a") == 0) & (lc.coef("b") == lc.coef("c"))
    c = np.array([[0.0, 1, 0, 0], [0.0, 0, 1, -1]])
    for mf in (by_row, by_column):
        res = mf.wald(system)
        for j in range(r):
            shift = 1e7 if 5 <= j < 10 else 0.0
            ref = _reference(x, ys[:, j] - shift, w)
            assert mf.n_obs.iloc[j] == ref.nobs
            beta = mf.coefficients.iloc[:, j].to_numpy()
            np.testing.assert_allclose(beta[1:], ref.params[1:], rtol=1e-9, atol=1e-11)
            np.testing.assert_allclose(beta[0], ref.params[0] + shift, rtol=1e-13, atol=1e-10)
            np.testing.assert_allclose(mf.rss.iloc[j], ref.ssr, rtol=1e-9)
            ft = ref.f_test(c)
            np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=1e-9)


@pytest.mark.parametrize(("weighted", "intercept"), [(False, True), (True, True), (False, False)])
def test_complete_responses_read_by_rows(
    monkeypatch: pytest.MonkeyPatch, weighted: bool, intercept: bool
) -> None:
    # A tall C-ordered matrix whose narrow blocks of columns would read short pieces of every
    # row is read in wide blocks, its rows in chunks (DesignFactor.project_rows): responses
    # with large means, far shifts (large on the sampled rows), close fits and a few with
    # missing values (a minority, fitted on their own rows a few columns at a time) in one
    # block.  The F-ordered copy takes the blocks of columns.  Reference: statsmodels OLS/WLS
    # per response on its own rows.
    from lincomb._core import many as core_many

    n, r = 640, 29
    monkeypatch.setattr(core_many, "CHUNK_BYTES", 8 * r * 9)  # chunks of 9 rows
    monkeypatch.setattr(many, "BLOCK_BYTES", 8 * n * 4)  # narrow blocks: 4 responses
    monkeypatch.setattr(many, "MIN_BLOCK_COLUMNS", 1)
    calls = _blocks_read_by_rows(monkeypatch)
    again: list[list[int]] = []  # responses whose products were taken again (far shifts)
    products = core_many._row_products

    def spy(y, cols, *args):
        if cols is not None:
            again.append(cols.tolist())
        return products(y, cols, *args)

    monkeypatch.setattr(core_many, "_row_products", spy)
    x = _design(n, 13) if intercept else _design(n, 13)[:, 1:]
    rng = np.random.default_rng(14)
    ys = rng.normal(size=(n, r)) + 0.3 * x[:, [1]]
    ys[:, 3:8] += 1e7  # large means
    ys[np.arange(0, n, n // 64), 8:11] += 1e4  # far shifts
    ys[:, 11:15] = x @ rng.normal(size=(x.shape[1], 4)) + 1e-4 * ys[:, 11:15]  # close fits
    few = ys[:, 20:24]  # a few with missing values
    few[rng.uniform(size=few.shape) < 0.05] = np.nan
    w = rng.uniform(0.5, 2.0, size=n) if weighted else None
    names = ["one", "a", "b", "c"][-x.shape[1] :]
    by_row = lc.fit_many_arrays(x, ys, names=names, weights=w)
    assert calls == [(n, r)]  # one wide block
    assert again == ([[8, 9, 10]] if intercept else [])  # far shifts centred exactly
    calls.clear()
    by_column = lc.fit_many_arrays(x, np.asfortranarray(ys), names=names, weights=w)
    assert not calls
    for mf in (by_row, by_column):
        res = mf.wald(lc.coef("a") == lc.coef("b"))
        for j in range(r):
            shift = 1e7 if intercept and 3 <= j < 8 else 0.0  # exact deviations, as above
            obs = ~np.isnan(ys[:, j])
            ref = _reference(x, ys[:, j] - shift, w)
            assert mf.n_obs.iloc[j] == obs.sum()
            beta = mf.coefficients.iloc[:, j].to_numpy()
            np.testing.assert_allclose(
                beta,
                ref.params + shift * (np.arange(beta.size) == 0) * intercept,
                rtol=1e-9,
                atol=1e-9,
            )
            np.testing.assert_allclose(mf.rss.iloc[j], ref.ssr, rtol=1e-9)
            c = np.zeros((1, x.shape[1]))
            c[0, names.index("a")], c[0, names.index("b")] = 1.0, -1.0
            ft = ref.f_test(c)
            np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=1e-9)


def test_tall_matrix_in_either_order_read_by_rows(monkeypatch: pytest.MonkeyPatch) -> None:
    # A matrix so tall that a block of the fewest columns is far larger than BLOCK_BYTES is read
    # in wide blocks by rows whatever its storage order.  Reference: statsmodels OLS per
    # response; the C- and F-ordered copies give the same numbers to rounding.
    from lincomb._core import many as core_many

    n, r = 900, 23
    monkeypatch.setattr(core_many, "CHUNK_BYTES", 8 * r * 50)  # chunks of 50 rows
    monkeypatch.setattr(many, "BLOCK_BYTES", 8 * n * 2)
    monkeypatch.setattr(many, "MIN_BLOCK_COLUMNS", 8)  # blocks of 8: 4 times BLOCK_BYTES
    calls = _blocks_read_by_rows(monkeypatch)
    x = _design(n, 15)
    rng = np.random.default_rng(16)
    ys = rng.normal(size=(n, r)) * 2.0 + 40.0 + 0.5 * x[:, [2]]
    fits = []
    for order in ("C", "F"):
        calls.clear()
        fits.append(lc.fit_many_arrays(x, np.asarray(ys, order=order)))
        assert calls == [(n, r)]
    c = np.array([[0.0, 0, 1, 0]])
    for mf in fits:
        res = mf.wald(lc.coef("x2") == 0)
        for j in range(r):
            ref = _reference(x, ys[:, j])
            np.testing.assert_allclose(mf.coefficients.iloc[:, j], ref.params, rtol=1e-10)
            np.testing.assert_allclose(mf.rss.iloc[j], ref.ssr, rtol=1e-10)
            ft = ref.f_test(c)
            np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=1e-9)
