"""Invariances of the Wald F, checked with hypothesis on random designs drawn from seeds.

Each property is an identity of least squares, derived in its test:

* F does not change when rows of ``C`` (with ``d``) are scaled, reordered, or joined by rows
  that are combinations of the others (with the matching ``d``);
* F does not change under a reparametrization ``X → X·A`` with ``C → C·A``;
* for one row, ``F = t²``;
* ``F = ((RSS_r - RSS) / q) / (RSS / (n - p))`` with ``RSS_r`` from an independent restricted
  fit (the null space of ``C``, via numpy);
* a large offset added to ``y`` and to a column changes no slope and no slope test.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg as sla
from hypothesis import given, settings
from hypothesis import strategies as st

import lincomb as lc
from lincomb import from_matrix

SETTINGS = settings(max_examples=30, deadline=None, derandomize=True)
seeds = st.integers(min_value=0, max_value=2**32 - 1)
REL = 1e-8


def problem(seed: int):
    """A random full-rank design with intercept, a response, and a random 1- to 3-row C."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(12, 60))
    p = int(rng.integers(3, 7))
    scales = 10.0 ** rng.uniform(-3, 3, size=p - 1)
    x = np.column_stack([np.ones(n), rng.normal(size=(n, p - 1)) * scales])
    y = x @ rng.normal(size=p) + rng.normal(size=n) * rng.uniform(0.1, 5)
    m = int(rng.integers(1, min(3, p) + 1))
    c = rng.normal(size=(m, p))
    d = rng.normal(size=m)
    return rng, x, y, c, d


def f_stat(x, y, c, d, **kw) -> lc.WaldTest:
    return lc.fit_arrays(x, y, **kw).wald(from_matrix(c, d))


@SETTINGS
@given(seeds)
def test_scaling_rows_of_c_and_d(seed):
    rng, x, y, c, d = problem(seed)
    # row i of Cβ = d times s_i ≠ 0 is the same hypothesis
    s = rng.choice([-1.0, 1.0], size=len(d)) * 10.0 ** rng.uniform(-4, 4, size=len(d))
    a, b = f_stat(x, y, c, d), f_stat(x, y, c * s[:, None], d * s)
    np.testing.assert_allclose(b.stat, a.stat, rtol=REL)
    np.testing.assert_allclose(np.abs(b.ratio), np.abs(a.ratio), rtol=REL)
    assert a.df_test == b.df_test == len(d)


@SETTINGS
@given(seeds)
def test_reordering_rows(seed):
    rng, x, y, c, d = problem(seed)
    order = rng.permutation(len(d))
    a, b = f_stat(x, y, c, d), f_stat(x, y, c[order], d[order])
    np.testing.assert_allclose(b.stat, a.stat, rtol=REL)
    np.testing.assert_allclose(b.estimate, a.estimate[order], rtol=REL, atol=1e-12)


@SETTINGS
@given(seeds)
def test_adding_redundant_rows(seed):
    rng, x, y, c, d = problem(seed)
    # new rows L·C with d = L·d say nothing the old rows do not
    k = int(rng.integers(1, 3))
    lmat = rng.normal(size=(k, len(d)))
    a = f_stat(x, y, c, d)
    b = f_stat(x, y, np.vstack([c, lmat @ c]), np.r_[d, lmat @ d])
    assert b.df_test == a.df_test == len(d)
    assert sorted(b.redundant) == list(range(len(d), len(d) + k))
    np.testing.assert_allclose(b.stat, a.stat, rtol=REL)
    # the reported weights rebuild the redundant rows
    for row, weights in b.redundant.items():
        rebuilt = sum(w * c[j] for j, w in weights.items())
        np.testing.assert_allclose(rebuilt, lmat[row - len(d)] @ c, rtol=1e-7, atol=1e-9)


@SETTINGS
@given(seeds)
def test_reparametrization(seed):
    rng, x, y, c, d = problem(seed)
    p = x.shape[1]
    # With Z = X·A (A invertible), Zγ = Xβ for β = A·γ, so the fits agree and
    # Cβ = d  <=>  C·A·γ = d: testing C·A on the Z fit is the same hypothesis.
    # A is kept well conditioned (orthogonal times positive diagonal); it mixes the intercept
    # into the other columns, so Z usually has no constant column at all.
    q = np.linalg.qr(rng.normal(size=(p, p)))[0]
    amat = q * 10.0 ** rng.uniform(-1, 1, size=p)
    a = f_stat(x, y, c, d)
    b = f_stat(x @ amat, y, c @ amat, d)
    np.testing.assert_allclose(b.stat, a.stat, rtol=1e-7)
    np.testing.assert_allclose(b.estimate, a.estimate, rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(b.se, a.se, rtol=1e-7)


@SETTINGS
@given(seeds)
def test_t_squared_is_f_for_one_row(seed):
    _, x, y, c, d = problem(seed)
    w = f_stat(x, y, c[:1], d[:1])
    assert w.df_test == 1
    np.testing.assert_allclose(w.ratio[0] ** 2, w.stat, rtol=1e-10)
    np.testing.assert_allclose(w.row_p[0], w.p, rtol=1e-8)


@SETTINGS
@given(seeds, st.booleans())
def test_restricted_ssr_identity(seed, weighted):
    rng, x, y, c, d = problem(seed)
    n, p = x.shape
    w = rng.uniform(0.1, 4.0, size=n) if weighted else None
    f = lc.fit_arrays(x, y, weights=w)
    test = f.wald(from_matrix(c, d))
    # independent restricted fit: β = β0 + N·γ with C·β0 = d and C·N = 0
    sw = np.ones(n) if w is None else np.sqrt(w)
    beta0 = np.linalg.lstsq(c, d, rcond=None)[0]
    null = sla.null_space(c)
    gamma = np.linalg.lstsq((x @ null) * sw[:, None], (y - x @ beta0) * sw, rcond=None)[0]
    resid = (y - x @ (beta0 + null @ gamma)) * sw
    rss_r = float(resid @ resid)
    q = len(d)
    f_ref = ((rss_r - f.rss) / q) / (f.rss / (n - p))
    np.testing.assert_allclose(test.stat, f_ref, rtol=1e-7)
    r = f.restrict(from_matrix(c, d))
    np.testing.assert_allclose(r.rss, rss_r, rtol=1e-9)
    np.testing.assert_allclose(r.f_statistic(), test.stat, rtol=1e-7)
    np.testing.assert_allclose(
        r.coefficients.to_numpy(), beta0 + null @ gamma, rtol=1e-6, atol=1e-9
    )


@SETTINGS
@given(seeds, st.integers(min_value=0, max_value=40), st.integers(min_value=0, max_value=26))
def test_huge_offset(seed, y_exp, x_exp):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(15, 50))
    # values on a 2^-10 grid so that adding 2^y_exp (≤ 2^40) to y and 2^x_exp (≤ 2^26) to a
    # column is exact in double precision (at most 50 and 36 significant bits): the shifted data
    # hold exactly the same information, and with an intercept only the intercept may change.
    # (2^26 keeps the column's spread above RANK_TOL times its size, see lincomb.linalg.)
    x = np.column_stack([np.ones(n), rng.integers(-1024, 1024, size=(n, 2)) / 1024.0])
    y = np.round((x @ [1.0, 2.0, -1.0] + rng.normal(size=n)) * 1024) / 1024
    xs, ys = x.copy(), y + 2.0**y_exp
    xs[:, 1] += 2.0**x_exp
    assert np.array_equal(xs[:, 1] - 2.0**x_exp, x[:, 1])  # exact shift
    assert np.array_equal(ys - 2.0**y_exp, y)
    fa, fb = lc.fit_arrays(x, y), lc.fit_arrays(xs, ys)
    assert fb.aliased == ()
    np.testing.assert_allclose(fb.coefficients[1:], fa.coefficients[1:], rtol=REL)
    assert abs(fb.rss - fa.rss) <= REL * fa.rss
    slopes = (lc.coef("x1") == 1) & (lc.coef("x2") == 0)
    np.testing.assert_allclose(fb.wald(slopes).stat, fa.wald(slopes).stat, rtol=REL)


@SETTINGS
@given(seeds, st.floats(min_value=1e-6, max_value=1e6))
def test_weights_scale_free(seed, k):
    rng, x, y, c, d = problem(seed)
    w = rng.uniform(0.1, 4.0, size=len(y))
    # multiplying every weight by k multiplies RSS and XᵀWX by k: F is unchanged
    a = f_stat(x, y, c, d, weights=w)
    b = f_stat(x, y, c, d, weights=w * k)
    np.testing.assert_allclose(b.stat, a.stat, rtol=REL)
