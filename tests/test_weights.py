"""Weighted least squares with weights spread over many orders of magnitude.

One-way layout, closed form (common practice): with weights constant within each cell, the
WLS fit of ``y ~ 1 + dummies`` reproduces the cell means, so ``β_k = ȳ_k - ȳ_0`` (plain cell
means), ``σ̂² = Σ w_i (y_i - ȳ_{g_i})² / (n - 3)`` and
``se(β_k) = σ̂ · sqrt(1/(w_k n_k) + 1/(w_0 n_0))``.  A level weighted 1e-60 relative to the
others is still identified (it has rows), so its coefficient is its cell-mean difference.
"""

from __future__ import annotations

import numpy as np
import pytest

import lincomb as lc


def _layout(light: float, level: int):
    rng = np.random.default_rng(5)
    g = np.repeat([0, 1, 2], 10)
    x = np.column_stack([np.ones(30), g == 1, g == 2]).astype(float)
    y = np.array([1.0, 3.0, 5.0])[g] + rng.normal(size=30)
    w = np.where(g == level, light, 1.0)
    return g, x, y, w


def _closed_form(g, y, w):
    means = np.array([y[g == k].mean() for k in range(3)])
    cell_w = np.array([w[g == k][0] for k in range(3)])
    counts = np.array([np.sum(g == k) for k in range(3)])
    s2 = float(np.sum(w * (y - means[g]) ** 2) / (len(y) - 3))
    beta = means[1:] - means[0]
    se = np.sqrt(s2) * np.sqrt(1 / (cell_w[1:] * counts[1:]) + 1 / (cell_w[0] * counts[0]))
    return beta, se, np.sqrt(s2)


@pytest.mark.parametrize("light", [1e-60, 1e-20, 1e-9, 1e-3])
@pytest.mark.parametrize("level", [1, 2])
def test_one_way_layout_with_extreme_cell_weight(light, level):
    g, x, y, w = _layout(light, level)
    f = lc.fit_arrays(x, y, weights=w, names=["a", "b", "c"])
    beta, se, sigma = _closed_form(g, y, w)
    assert f.aliased == ()
    assert f.coef_frame()["status"].tolist() == ["estimable"] * 3
    np.testing.assert_allclose(f.coefficients.to_numpy()[1:], beta, rtol=1e-10)
    np.testing.assert_allclose(f.std_errors().to_numpy()[1:], se, rtol=1e-10)
    np.testing.assert_allclose(f.sigma, sigma, rtol=1e-10)


def test_light_reference_level_is_ill_conditioned_not_silently_wrong():
    # With the reference cell weighted ρ, the dummies are collinear with the intercept up to
    # about sqrt(ρ) in the weighted metric (condition number κ ≈ 3e4 at ρ = 1e-9): a
    # backward-stable solver is then accurate to about eps·κ² ≈ 1e-7 (least-squares
    # perturbation theory, common practice) ...
    g, x, y, w = _layout(1e-9, 0)
    f = lc.fit_arrays(x, y, weights=w)
    beta, se, sigma = _closed_form(g, y, w)
    np.testing.assert_allclose(f.coefficients.to_numpy()[1:], beta, rtol=1e-6)
    np.testing.assert_allclose(f.std_errors().to_numpy()[1:], se, rtol=1e-6)
    # ... and at ρ = 1e-60 the collinearity is below the rank tolerance: the last dummy is
    # reported aliased and a row that needs it is refused, not answered
    g, x, y, w = _layout(1e-60, 0)
    f = lc.fit_arrays(x, y, weights=w, names=["a", "b", "c"])
    assert f.aliased == ("c",)
    # the refusal names the weight ratio behind the aliasing (1 / 1e-60), not just the column
    with pytest.raises(lc.errors.NotEstimableError, match=r"weights span a ratio of 1e\+60"):
        f.wald(lc.coef("c") == 0)
    with pytest.raises(lc.errors.NotEstimableError, match=r"weights span a ratio of 1e\+60"):
        f.wald_batch([lc.coef("c") == 0, lc.coef("b") == lc.coef("c")])


def test_scaling_all_weights_changes_nothing_but_sigma():
    # WLS is invariant to a common factor of the weights (σ scales by its square root)
    g, x, y, w = _layout(1e-60, 2)
    f = lc.fit_arrays(x, y, weights=w)
    f2 = lc.fit_arrays(x, y, weights=w * 2.0**-700)  # exact: a power of two
    np.testing.assert_allclose(f2.coefficients, f.coefficients, rtol=1e-13)
    np.testing.assert_allclose(f2.sigma, f.sigma * 2.0**-350, rtol=1e-13)
    np.testing.assert_allclose(f2.std_errors(), f.std_errors(), rtol=1e-13)
