"""Tests for lincomb.power: power, replicates needed, detectable effects and power curves.

Outside references used here:

* a seeded Monte Carlo simulation that fits and tests many datasets with lincomb itself
  (rejection rate vs the predicted power, within 4 Monte Carlo standard errors);
* Cohen, J. (1992). A power primer. Psychological Bulletin 112(1), 155-159, Table 2 (the
  sample sizes for power .80 at alpha = .05 of the one-way ANOVA F test and of the multiple
  correlation F test), quoted FROM MEMORY;
* statsmodels (``FTestAnovaPower``, ``TTestIndPower``) as an independent numerical reference;
* identities of the noncentral F distribution, checked against scipy's noncentral t and
  chi-squared and against an mpmath evaluation of the Poisson mixture of incomplete beta
  functions;
* the definition of the noncentrality, evaluated in the tests with an explicit linear solve.

Invented data only for the simulation patterns and the property-based tests.
"""

from __future__ import annotations

import math
import sys

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from threadpoolctl import threadpool_limits

import lincomb as lc
from lincomb._builder.restriction import as_system
from lincomb._model.design import design_from_formula
from lincomb._plan.results import CURVE_COLUMNS, POWER_COLUMNS
from lincomb.errors import (
    DegenerateFitError,
    InconsistentRestrictionError,
    InputError,
    LincombError,
    MissingValueError,
    NotEstimableError,
    OptionalDependencyError,
    ParameterError,
    UnknownCoefficientError,
    UnreachablePowerError,
)

ALPHA = 0.05


# ---------------------------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------------------------
def one_way(k: int) -> lc.PlannedDesign:
    """One row per group: replicates are the per-group sample size."""
    return lc.planned_design("C(g)", pd.DataFrame({"g": [f"g{i}" for i in range(k)]}))


def group_beta(k: int, f: float, sigma: float = 1.0) -> dict[str, float]:
    """Treatment-coded β whose group means have population SD ``f·σ`` (Cohen's f)."""
    z = np.linspace(-1.0, 1.0, k)
    means = f * sigma * (z - z.mean()) / z.std()
    return {f"C(g)[T.g{i}]": float(means[i] - means[0]) for i in range(1, k)}


def regression_pattern(n: int, u: int, seed: int = 0) -> pd.DataFrame:
    """``n`` rows of ``u`` covariates, centred, with cross-products exactly ``n·I``."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, u))
    z -= z.mean(axis=0)
    q, _ = np.linalg.qr(z)
    return pd.DataFrame(q * np.sqrt(n), columns=[f"x{j}" for j in range(u)])


def all_slopes_zero(u: int) -> lc.RestrictionSystem:
    system = lc.coef("x0") == 0
    for j in range(1, u):
        system = system & (lc.coef(f"x{j}") == 0)
    return as_system(system)


def direct_lambda(x, w, c, shift, sigma):
    """Reference: (Cβ − d)ᵀ [C (XᵀWX)⁻¹ Cᵀ]⁻¹ (Cβ − d) / σ² by explicit solves (tests only)."""
    xtx = x.T @ (x * (w[:, None] if w is not None else 1.0))
    v = c @ np.linalg.solve(xtx, c.T)
    return float(shift @ np.linalg.solve(v, shift)) / sigma**2


# ---------------------------------------------------------------------------------------------
# Monte Carlo: fit and test many simulated datasets with lincomb
# ---------------------------------------------------------------------------------------------
def _rejection_rate(x, names, beta, system, sigma, n_sim, seed, weights=None):
    rng = np.random.default_rng(seed)
    mean = x @ beta
    scale = sigma if weights is None else sigma / np.sqrt(weights)
    hits = 0
    # many tiny factorizations: one BLAS thread avoids thread start-up costs (5x faster here)
    with threadpool_limits(limits=1):
        for _ in range(n_sim):
            y = mean + scale * rng.standard_normal(x.shape[0])
            res = lc.fit_arrays(x, y, names=names, weights=weights).wald(system)
            hits += res.p < ALPHA
    return hits / n_sim


def _assert_within_4_se(rate: float, power: float, n_sim: int) -> None:
    se = math.sqrt(power * (1 - power) / n_sim)  # Monte Carlo SE of a proportion
    assert abs(rate - power) <= 4 * se, (rate, power, se)


def test_simulation_factorial_pattern_term_test():
    # invented field-trial pattern: 4 nitrogen rates x 3 varieties, rainfall varying by cell;
    # 2 replicates -> n = 24, rank 7, F(3, 17).  1000 datasets: MC SE = sqrt(p(1-p)/1000)
    # <= 0.0158, so the 4-SE band is at most ±0.063.
    pattern = pd.DataFrame(
        {
            "nitrogen": np.repeat(["0", "40", "80", "160"], 3),
            "variety": ["Arlen", "Brenna", "Corrin"] * 4,
            "rain": [410.0, 455, 520, 480, 390, 505, 440, 470, 430, 515, 460, 400],
        }
    )
    design = lc.planned_design("C(nitrogen) + variety + rain", pattern)
    beta = {"C(nitrogen)[T.40]": 0.4, "C(nitrogen)[T.80]": 0.9, "C(nitrogen)[T.160]": 1.1}
    system = lc.term("C(nitrogen)") == 0
    sigma = 0.8
    res = lc.power_plan(design, system, sigma=sigma).power(beta=beta, replicates=2)
    assert (res.df_test, res.df_error, res.n_obs) == (3, 17, 24)
    assert 0.3 < res.power < 0.8  # a case where the Monte Carlo check has teeth

    # the same encoding as the plan, one replicate
    x1 = design_from_formula("y ~ C(nitrogen) + variety + rain", pattern.assign(y=0.0)).x
    x = np.vstack([x1, x1])
    full_beta = np.zeros(len(design.names))
    for name, value in beta.items():
        full_beta[design.names.index(name)] = value
    full_beta[design.names.index("Intercept")] = 6.0
    full_beta[design.names.index("rain")] = 0.004
    # the array fit has no terms: the same rows written coefficient by coefficient
    by_name = as_system([lc.coef(name) == 0 for name in beta])
    same = lc.power_plan(design, by_name, sigma=sigma).power(beta=beta, replicates=2)
    assert same.noncentrality == pytest.approx(res.noncentrality, rel=1e-12)
    rate = _rejection_rate(x, list(design.names), full_beta, by_name, sigma, 1000, seed=20240611)
    _assert_within_4_se(rate, res.power, 1000)


def test_simulation_redundant_rows_nonzero_target_weights():
    # invented covariate pattern (12 rows) with planned precision weights; system of three rows
    # of which the third is the sum of the first two, with d != 0.  The alternative is stated as
    # Cβ values.  800 datasets: MC SE <= 0.0177.
    rng = np.random.default_rng(7)
    n0 = 12
    x1 = np.column_stack([np.ones(n0), rng.uniform(0, 4, size=(n0, 3))])
    w1 = np.tile([1.0, 2.0, 0.5, 1.5], 3)
    names = ["one", "a", "b", "c"]
    system = (
        (lc.coef("a") - lc.coef("b") == 1.0)
        & (lc.coef("b") - lc.coef("c") == 0.5)
        & (lc.coef("a") - lc.coef("c") == 1.5)
    )
    design = lc.planned_design(x1, names=names, weights=w1)
    plan = lc.power_plan(design, system, sigma=1.0)
    assert plan.df_test == 2 and list(plan.redundant) == [2]
    beta = np.array([2.0, 1.6, 0.1, 0.0])  # Cβ = (1.5, 0.1, 1.6): shift (0.5, -0.4, 0.1)
    res = plan.power(effect=[1.5, 0.1, 1.6], replicates=3)
    by_beta = plan.power(beta=dict(zip(names, beta, strict=True)), replicates=3)
    assert res.noncentrality == pytest.approx(by_beta.noncentrality, rel=1e-12)
    assert 0.3 < res.power < 0.8
    x = np.vstack([x1] * 3)
    w = np.tile(w1, 3)
    rate = _rejection_rate(x, names, beta, system, 1.0, 800, seed=99, weights=w)
    _assert_within_4_se(rate, res.power, 800)


def test_simulation_rank_deficient_pattern_estimable_contrast():
    # the pattern has an aliased column (c = a + b); a - b is still estimable.  800 datasets.
    rng = np.random.default_rng(3)
    n0 = 10
    ab = rng.normal(size=(n0, 2))
    x1 = np.column_stack([np.ones(n0), ab, ab.sum(axis=1)])
    names = ["one", "a", "b", "c"]
    design = lc.planned_design(x1, names=names)
    assert design.aliased == ("c",) and design.rank == 3
    system = lc.coef("a") - lc.coef("b") == 0
    plan = lc.power_plan(design, system, sigma=1.0)
    res = plan.power(effect=0.45, replicates=3)
    assert (res.df_test, res.df_error) == (1, 27)
    # reference λ from the full-rank reparametrization (columns one, a, b)
    lam = 3 * direct_lambda(x1[:, :3], None, np.array([[0.0, 1, -1]]), np.array([0.45]), 1.0)
    assert res.noncentrality == pytest.approx(lam, rel=1e-10)
    x = np.vstack([x1] * 3)
    beta = np.array([1.0, 0.45, 0.0, 0.0])
    rate = _rejection_rate(x, names, beta, system, 1.0, 800, seed=5)
    _assert_within_4_se(rate, res.power, 800)


# ---------------------------------------------------------------------------------------------
# handbook values: Cohen (1992), A power primer, Table 2 (alpha = .05, power = .80), FROM MEMORY
# ---------------------------------------------------------------------------------------------
# Cohen's tables were computed with approximations to the noncentral F and rounded, so the exact
# power at the tabled n lies within about 0.02 of .80.  The mapping onto λ = f²·N is exact for
# both tests: one-way ANOVA with k equal groups of n (f = SD of the group means / σ, N = k·n)
# and the F test of u predictors (f² = R²/(1 − R²) of the population, N total).
ANOVA_N_PER_GROUP = {  # k groups: n per group for f = .10 (small), .25 (medium), .40 (large)
    2: (393, 64, 26),
    3: (322, 52, 21),
    4: (274, 45, 18),
    5: (240, 39, 16),
    6: (215, 35, 14),
    7: (195, 32, 13),
}
REGRESSION_N = {  # u predictors: total N for f² = .02, .15, .35
    2: (481, 67, 30),
    3: (547, 76, 34),
    4: (599, 84, 38),
    5: (645, 91, 42),
    6: (686, 97, 45),
    7: (726, 102, 48),
    8: (757, 107, 50),
}
TABLE_TOL = 0.025


@pytest.mark.parametrize("k", sorted(ANOVA_N_PER_GROUP))
def test_cohen_table_one_way_anova(k):
    plan = lc.power_plan(one_way(k), lc.term("C(g)") == 0, sigma=1.0, alpha=ALPHA)
    for f, n in zip((0.10, 0.25, 0.40), ANOVA_N_PER_GROUP[k], strict=True):
        res = plan.power(beta=group_beta(k, f), replicates=n)
        assert res.noncentrality == pytest.approx(f * f * k * n, rel=1e-10)
        assert (res.df_test, res.df_error) == (k - 1, k * n - k)
        assert abs(res.power - 0.80) < TABLE_TOL, (k, f, n, res.power)
        # the exact replicate count is within a few of the tabled one
        need = plan.replicates_for(0.80, beta=group_beta(k, f))
        assert abs(need.replicates - n) <= max(2, round(0.01 * n)), (k, f, n, need.replicates)


@pytest.mark.parametrize("u", sorted(REGRESSION_N))
def test_cohen_table_multiple_regression(u):
    rhs = " + ".join(f"x{j}" for j in range(u))
    for f2, n in zip((0.02, 0.15, 0.35), REGRESSION_N[u], strict=True):
        design = lc.planned_design(rhs, regression_pattern(n, u, seed=u))
        plan = lc.power_plan(design, all_slopes_zero(u), sigma=2.0)
        b = 2.0 * math.sqrt(f2 / u)  # βᵀ Σ_x β / σ² = f² with Σ_x = I
        res = plan.power(beta={f"x{j}": b for j in range(u)})
        assert res.noncentrality == pytest.approx(f2 * n, rel=1e-9)
        assert res.noncentrality_per_obs == pytest.approx(f2, rel=1e-9)
        assert (res.df_test, res.df_error) == (u, n - u - 1)
        assert abs(res.power - 0.80) < TABLE_TOL, (u, f2, n, res.power)


# ---------------------------------------------------------------------------------------------
# statsmodels as a numerical reference (same λ = f²·N convention)
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize(("k", "f", "n"), [(3, 0.25, 20), (4, 0.1, 100), (5, 0.4, 7), (2, 0.3, 9)])
def test_anova_power_matches_statsmodels(k, f, n):
    from statsmodels.stats.power import FTestAnovaPower

    plan = lc.power_plan(one_way(k), lc.term("C(g)") == 0, sigma=3.0)
    res = plan.power(beta=group_beta(k, f, sigma=3.0), replicates=n)
    ref = FTestAnovaPower().power(effect_size=f, nobs=k * n, alpha=ALPHA, k_groups=k)
    assert res.power == pytest.approx(ref, abs=1e-9)
    nobs = FTestAnovaPower().solve_power(effect_size=f, alpha=ALPHA, power=0.9, k_groups=k)
    need = plan.replicates_for(0.9, beta=group_beta(k, f, sigma=3.0))
    assert need.replicates == math.ceil(nobs / k - 1e-9)


def test_two_group_contrast_matches_two_sample_t_power():
    from statsmodels.stats.power import TTestIndPower

    # d = 0.5, 64 per group: the classic two-sample case (two-sided t equals the F with q = 1)
    plan = lc.power_plan(one_way(2), lc.coef("C(g)[T.g1]") == 0, sigma=2.0)
    res = plan.power(effect=1.0, replicates=64)
    ref = TTestIndPower().power(effect_size=0.5, nobs1=64, alpha=ALPHA, ratio=1.0)
    assert res.power == pytest.approx(ref, abs=1e-8)
    mde = plan.detectable_effect(0.8, replicates=64)
    d_ref = TTestIndPower().solve_power(nobs1=64, alpha=ALPHA, power=0.8, ratio=1.0)
    assert mde.scale == pytest.approx(2.0 * d_ref, rel=1e-6)


# ---------------------------------------------------------------------------------------------
# noncentrality: definition, replicates, weights, fits
# ---------------------------------------------------------------------------------------------
def test_noncentrality_matches_definition_with_weights_and_replicates():
    rng = np.random.default_rng(11)
    x = np.column_stack([np.ones(9), rng.normal(size=(9, 3)) * [1.0, 50.0, 1e-3]])
    w = rng.uniform(0.5, 2.0, 9)
    c = np.array([[0.0, 1.0, 0.0, 0.0], [0.0, 0.0, 1.0, -2.0]])
    d = np.array([0.5, -1.0])
    plan = lc.power_plan(
        lc.planned_design(x, names=["k", "p", "q", "s"], weights=w),
        lc.from_matrix(c, d),
        sigma=0.7,
    )
    alt = np.array([1.0, 2.0])
    for r in (1, 2, 5):
        lam = r * direct_lambda(x, w, c, alt - d, 0.7)
        res = plan.power(effect=alt, replicates=r)
        assert res.noncentrality == pytest.approx(lam, rel=1e-9)
        assert res.df_error == 9 * r - 4
        expected = stats.ncf.sf(stats.f.isf(ALPHA, 2, 9 * r - 4), 2, 9 * r - 4, lam)
        assert res.power == pytest.approx(expected, rel=1e-12)


def test_replicates_equal_stacked_pattern():
    pattern = pd.DataFrame({"g": ["a", "b", "c", "a"], "t": [0.0, 1.0, 2.0, 3.0]})
    system = (lc.coef("g[T.b]") == 0) & (lc.coef("t") == 0)
    alt = {"g[T.b]": 0.8, "t": 0.3}
    once = lc.power_plan(lc.planned_design("g + t", pattern), system, sigma=1.0)
    stacked = lc.power_plan(
        lc.planned_design("g + t", pd.concat([pattern] * 4, ignore_index=True)), system, sigma=1.0
    )
    a = once.power(beta=alt, replicates=4)
    b = stacked.power(beta=alt, replicates=1)
    assert (a.df_error, a.n_obs) == (b.df_error, b.n_obs)
    assert a.noncentrality == pytest.approx(b.noncentrality, rel=1e-12)


def test_fit_design_is_used_as_one_replicate():
    data = lc.datasets.fill_lines()
    f = lc.fit("fill_g ~ line + temperature_c", data)
    system = lc.term("line") == 0
    from_fit = lc.power_plan(f, system, sigma=f.sigma)
    rows = data.loc[f._design.row_index]
    from_formula = lc.power_plan(
        lc.planned_design("line + temperature_c", rows), system, sigma=f.sigma
    )
    alt = {"line[T.L2]": 0.2, "line[T.L3]": -0.1, "line[T.L4]": 0.15}
    a, b = from_fit.power(beta=alt), from_formula.power(beta=alt)
    assert a.noncentrality == pytest.approx(b.noncentrality, rel=1e-10)
    # and equals the Wald statistic's quadratic form evaluated at the alternative:
    # q·F = (Cβ − d)ᵀ[C (XᵀX)⁻¹ Cᵀ]⁻¹(Cβ − d)/σ² with σ the fit's estimate
    x = f._design.x
    c = f.wald(system).matrix.to_numpy()
    assert a.noncentrality == pytest.approx(
        direct_lambda(x, None, c, np.array([0.2, -0.1, 0.15]), f.sigma), rel=1e-9
    )


def test_redundant_row_does_not_change_power():
    design = one_way(4)
    g = lc.term("C(g)")
    base = (g["g1"] == 0) & (g["g2"] == 0)
    extra = base & (g["g1"] - g["g2"] == 0)
    a = lc.power_plan(design, base, sigma=1.0).power(effect=[0.5, 0.2], replicates=6)
    plan = lc.power_plan(design, extra, sigma=1.0)
    b = plan.power(effect=[0.5, 0.2, 0.3], replicates=6)
    assert plan.df_test == 2 and plan.redundant == {
        2: {0: pytest.approx(1.0), 1: pytest.approx(-1.0)}
    }
    assert b.power == pytest.approx(a.power, rel=1e-12)
    assert list(b.effect_frame()["role"]) == ["independent", "independent", "redundant"]


# ---------------------------------------------------------------------------------------------
# noncentral F identities
# ---------------------------------------------------------------------------------------------
def test_zero_effect_gives_alpha_exactly():
    plan = lc.power_plan(one_way(3), lc.term("C(g)") == 0, sigma=1.0, alpha=0.1)
    res = plan.power(effect=0.0, replicates=5)
    assert res.noncentrality == 0.0
    assert res.power == 0.1  # the level of the test, by definition of the critical value


def test_single_row_power_equals_noncentral_t_two_sided():
    # for q = 1, F = T², so P(F > t²) = P(|T'| > t) with T' noncentral t, δ = sqrt(λ)
    plan = lc.power_plan(one_way(3), lc.coef("C(g)[T.g2]") == 0, sigma=1.5)
    res = plan.power(effect=0.9, replicates=7)
    t = stats.t.isf(ALPHA / 2, res.df_error)
    delta = math.sqrt(res.noncentrality)
    ref = stats.nct.sf(t, res.df_error, delta) + stats.nct.cdf(-t, res.df_error, delta)
    assert res.power == pytest.approx(ref, abs=1e-9)
    assert res.critical_value == pytest.approx(t * t, rel=1e-12)


def test_large_df_limit_is_noncentral_chi_squared():
    plan = lc.power_plan(one_way(4), lc.term("C(g)") == 0, sigma=1.0)
    r = 5_000_000
    b = group_beta(4, math.sqrt(12.0 / (4 * r)))  # λ = 12 at r replicates
    res = plan.power(beta=b, replicates=r)
    assert res.noncentrality == pytest.approx(12.0, rel=1e-9)
    ref = stats.ncx2.sf(stats.chi2.isf(ALPHA, 3), 3, 12.0)
    assert res.power == pytest.approx(ref, abs=2e-5)


@pytest.mark.parametrize(("q", "df2", "lam"), [(2, 12, 4.0), (3, 24, 11.25), (1, 6, 0.3)])
def test_power_matches_poisson_mixture_of_incomplete_beta(q, df2, lam):
    import mpmath

    # P(F ≤ x) = Σ_j e^{-λ/2} (λ/2)^j / j! · I_{qx/(qx+df2)}(q/2 + j, df2/2)   (mpmath, 30 digits)
    mpmath.mp.dps = 30
    crit = stats.f.isf(ALPHA, q, df2)
    z = mpmath.mpf(q) * crit / (q * crit + df2)
    half = mpmath.mpf(lam) / 2
    cdf = mpmath.nsum(
        lambda j: (
            mpmath.exp(-half)
            * half**j
            / mpmath.factorial(j)
            * mpmath.betainc(mpmath.mpf(q) / 2 + j, mpmath.mpf(df2) / 2, 0, z, regularized=True)
        ),
        [0, mpmath.inf],
    )
    ref = float(1 - cdf)
    # a design with exactly these df: one-way with q + 1 groups, df2 = (q + 1)(r − 1)
    k = q + 1
    assert df2 % k == 0  # the parametrization picks reachable df
    r = df2 // k + 1
    f = math.sqrt(lam / (k * r))
    res = lc.power_plan(one_way(k), lc.term("C(g)") == 0, sigma=1.0).power(
        beta=group_beta(k, f), replicates=r
    )
    assert res.df_error == df2
    assert res.power == pytest.approx(ref, abs=1e-10)


# ---------------------------------------------------------------------------------------------
# sample size, detectable effect, curve
# ---------------------------------------------------------------------------------------------
def test_replicates_for_is_the_smallest_count():
    plan = lc.power_plan(one_way(3), lc.term("C(g)") == 0, sigma=1.0)
    b = group_beta(3, 0.25)
    need = plan.replicates_for(0.9, beta=b)
    at = plan.power(beta=b, replicates=need.replicates).power
    before = plan.power(beta=b, replicates=need.replicates - 1).power
    assert at >= 0.9 > before
    assert need.power == at and need.previous_power == before
    assert need.n_obs == 3 * need.replicates
    frame = need.to_frame()
    assert frame.loc[0, "replicates"] == need.replicates


def test_replicates_for_starts_where_residual_df_exist():
    # saturated pattern (4 rows, rank 4): one replicate leaves no df, so the answer is >= 2
    plan = lc.power_plan(one_way(4), lc.term("C(g)") == 0, sigma=0.01)
    need = plan.replicates_for(0.8, beta=group_beta(4, 5.0, sigma=0.01))
    assert need.replicates == 2 and math.isnan(need.previous_power)


def test_detectable_effect_round_trip_and_beta_direction():
    pattern = regression_pattern(30, 2, seed=1)
    plan = lc.power_plan(lc.planned_design("x0 + x1", pattern), all_slopes_zero(2), sigma=1.3)
    mde = plan.detectable_effect(0.85, beta_direction={"x0": 1.0, "x1": -2.0}, replicates=2)
    assert mde.beta_shift["x1"] == pytest.approx(-2 * mde.beta_shift["x0"])
    check = plan.power(beta=mde.beta_shift.to_dict(), replicates=2)
    assert check.power == pytest.approx(0.85, abs=1e-9)
    assert check.noncentrality == pytest.approx(mde.noncentrality, rel=1e-9)
    # λ = 2·30·(s² (1 + 4))/σ² for orthonormal covariates scaled to n
    assert mde.noncentrality == pytest.approx(60 * 5 * mde.scale**2 / 1.3**2, rel=1e-9)
    assert list(mde.to_frame().columns) == [
        "restriction",
        "target",
        "direction",
        "shift",
        "alternative",
    ]


def test_curve_frame_and_default_range():
    plan = lc.power_plan(one_way(3), lc.term("C(g)") == 0, sigma=1.0)
    b = group_beta(3, 0.4)
    cv = plan.curve(beta=b)
    frame = cv.to_frame()
    assert tuple(frame.columns) == CURVE_COLUMNS
    assert frame["replicates"].iloc[0] == 2  # the fewest replicates with residual df
    assert frame["power"].iloc[-1] >= 0.99 and frame["power"].iloc[-2] < 0.99
    lam = 3 * 0.4**2 * frame["replicates"].to_numpy()  # λ = f²·N
    df2 = frame["df_error"].to_numpy()
    ref = stats.ncf.sf(stats.f.isf(ALPHA, 2, df2), 2, df2, lam)
    np.testing.assert_allclose(frame["power"], ref, rtol=1e-12)
    np.testing.assert_array_equal(frame["n_obs"], 3 * frame["replicates"])


def test_curve_long_range_is_thinned():
    plan = lc.power_plan(one_way(2), lc.term("C(g)") == 0, sigma=1.0)
    cv = plan.curve(beta=group_beta(2, 0.05))  # tiny effect: thousands of replicates needed
    reps = cv.to_frame()["replicates"]
    assert len(reps) <= 60 and reps.is_monotonic_increasing and cv.power[-1] >= 0.99


def test_power_result_frames_and_reprs():
    plan = lc.power_plan(one_way(3), lc.term("C(g)") == 0, sigma=1.0)
    res = plan.power(beta=group_beta(3, 0.25), replicates=20)
    frame = res.to_frame()
    assert tuple(frame.columns) == POWER_COLUMNS and len(frame) == 1
    assert frame.loc[0, "power"] == res.power
    assert f"{res.power:.4f}" in repr(res) and "F(2, 57)" in repr(res)
    assert "<table" in res._repr_html_() and "C(g)[T.g1] = 0" in res._repr_html_()
    assert "rank 2" in repr(plan) and "3 rows per replicate" in repr(plan.design)
    cv = plan.curve(beta=group_beta(3, 0.25), replicates=[5, 10])
    assert "0." in repr(cv) and "<table" in cv._repr_html_()
    mde = plan.detectable_effect(0.8, direction=[1.0, 1.0], replicates=10)
    assert f"{mde.scale:.6g}" in repr(mde)
    need = plan.replicates_for(0.8, beta=group_beta(3, 0.25))
    assert f"{need.replicates} replicate(s)" in repr(need)


# ---------------------------------------------------------------------------------------------
# plot
# ---------------------------------------------------------------------------------------------
def test_curve_plot_draws_the_frame():
    import matplotlib

    matplotlib.use("Agg")
    plan = lc.power_plan(one_way(3), lc.term("C(g)") == 0, sigma=1.0)
    cv = plan.curve(beta=group_beta(3, 0.3), target=0.8)
    fig = cv.plot()
    ax = fig.axes[0]
    by_gid = {line.get_gid(): line for line in ax.get_lines()}
    frame = cv.to_frame()
    np.testing.assert_array_equal(by_gid["power"].get_xdata(), frame["n_obs"])
    np.testing.assert_allclose(by_gid["power"].get_ydata(), frame["power"])
    assert list(by_gid["alpha"].get_ydata()) == [ALPHA, ALPHA]
    assert list(by_gid["target"].get_ydata()) == [0.8, 0.8]
    # the fewest observations that reach the target are marked (a line added with the target)
    assert by_gid["reached"].get_xdata()[0] == frame.loc[frame["power"] >= 0.8, "n_obs"].min()
    assert ax.get_xlabel() == "observations (n)"
    from matplotlib.figure import Figure

    own = Figure()
    ax2 = own.add_subplot()
    assert cv.plot(ax=ax2) is own and len(ax2.get_lines()) == 4  # power, alpha, target, reached


def test_curve_plot_without_matplotlib(monkeypatch):
    plan = lc.power_plan(one_way(2), lc.term("C(g)") == 0, sigma=1.0)
    cv = plan.curve(effect=1.0, replicates=[3, 4])
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    monkeypatch.setitem(sys.modules, "matplotlib.figure", None)
    with pytest.raises(OptionalDependencyError, match=r"pip install 'lincomb\[plot\]'"):
        cv.plot()


# ---------------------------------------------------------------------------------------------
# rank handling and bad input
# ---------------------------------------------------------------------------------------------
def test_inconsistent_system_raises():
    g = lc.term("C(g)")
    system = (g["g1"] == 0) & (g["g2"] == 0) & (g["g1"] - g["g2"] == 1)
    with pytest.raises(InconsistentRestrictionError, match=r"row 2 .* implies d = 0"):
        lc.power_plan(one_way(3), system, sigma=1.0)


def test_inconsistent_alternative_raises():
    g = lc.term("C(g)")
    system = (g["g1"] == 0) & (g["g2"] == 0) & (g["g1"] - g["g2"] == 0)
    plan = lc.power_plan(one_way(3), system, sigma=1.0)
    with pytest.raises(InconsistentRestrictionError, match=r"effect gives row 2 .* implies 0\.3"):
        plan.power(effect=[0.5, 0.2, 0.0], replicates=4)
    with pytest.raises(InconsistentRestrictionError, match=r"direction gives row 2"):
        plan.detectable_effect(0.8, direction=[1.0, 0.0, 0.0], replicates=4)


def test_not_estimable_raises_naming_aliased_column():
    x = np.column_stack([np.ones(5), [0.0, 1, 2, 3, 4], [0.0, 2, 4, 6, 8]])
    design = lc.planned_design(x, names=["one", "dose", "dose2x"])
    assert design.aliased == ("dose2x",)
    with pytest.raises(NotEstimableError, match=r"row 0 \(dose = 0\).*'dose2x'"):
        lc.power_plan(design, lc.coef("dose") == 0, sigma=1.0)


@pytest.mark.parametrize("sigma", [0.0, -1.0, float("nan"), float("inf")])
def test_bad_sigma(sigma):
    with pytest.raises(ParameterError, match=r"sigma.* must be (positive|finite), got"):
        lc.power_plan(one_way(2), lc.term("C(g)") == 0, sigma=sigma)


@pytest.mark.parametrize("alpha", [0.0, 1.0, 1.5, -0.1])
def test_bad_alpha(alpha):
    with pytest.raises(ParameterError, match=rf"alpha must be in \(0, 1\), got {alpha!r}"):
        lc.power_plan(one_way(2), lc.term("C(g)") == 0, sigma=1.0, alpha=alpha)


@pytest.mark.parametrize("target", [0.05, 0.01, 1.0, 1.2])
def test_bad_target_power(target):
    plan = lc.power_plan(one_way(2), lc.term("C(g)") == 0, sigma=1.0, alpha=0.05)
    match = rf"target power must be in \(alpha, 1\) = \(0.05, 1\), got {target!r}"
    with pytest.raises(ParameterError, match=match):
        plan.replicates_for(target, effect=1.0)
    with pytest.raises(ParameterError, match=match):
        plan.detectable_effect(target, replicates=5)


def test_design_too_small():
    plan = lc.power_plan(one_way(4), lc.term("C(g)") == 0, sigma=1.0)
    with pytest.raises(
        DegenerateFitError,
        match=r"replicates=1 gives 4 observations for 4 .*"
        r"at least 2 replicates",
    ):
        plan.power(effect=[1.0, 0.0, 0.0], replicates=1)
    with pytest.raises(DegenerateFitError, match=r"replicates=1 gives 4 observations"):
        plan.replicates_for(0.8, effect=[1.0, 0.0, 0.0], max_replicates=1)
    with pytest.raises(DegenerateFitError, match=r"replicates=1"):
        plan.curve(effect=[1.0, 0.0, 0.0], replicates=[1, 2, 3])
    with pytest.raises(DegenerateFitError, match=r"replicates=1"):
        plan.detectable_effect(0.8, direction=[1.0, 0.0, 0.0], replicates=1)


def test_unreachable_power():
    plan = lc.power_plan(one_way(2), lc.term("C(g)") == 0, sigma=1.0)
    with pytest.raises(UnreachablePowerError, match=r"max_replicates=50 \(power there is 0\.05"):
        plan.replicates_for(0.8, effect=0.0, max_replicates=50)


@pytest.mark.parametrize("bad", [0, -3, 2.5, "4", True])
def test_bad_replicates(bad):
    plan = lc.power_plan(one_way(2), lc.term("C(g)") == 0, sigma=1.0)
    with pytest.raises(ParameterError, match=rf"whole number of replicates.*got {bad!r}"):
        plan.power(effect=1.0, replicates=bad)


def test_bad_alternatives():
    plan = lc.power_plan(one_way(3), lc.term("C(g)") == 0, sigma=1.0)
    with pytest.raises(InputError, match=r"effect has 3 entries but the system has 2"):
        plan.power(effect=[1.0, 2.0, 3.0], replicates=3)
    with pytest.raises(InputError, match=r"effect holds nan for row 1 \(C\(g\)\[T.g2\] = 0\)"):
        plan.power(effect=[1.0, float("nan")], replicates=3)
    with pytest.raises(InputError, match=r"state the alternative once"):
        plan.power(replicates=3)
    with pytest.raises(InputError, match=r"state the alternative once"):
        plan.power(effect=1.0, beta={"C(g)[T.g1]": 1.0}, replicates=3)
    with pytest.raises(InputError, match=r"does not give \['C\(g\)\[T.g2\]'\]"):
        plan.power(beta={"C(g)[T.g1]": 1.0}, replicates=3)
    with pytest.raises(UnknownCoefficientError, match=r"no coefficient named 'C\(g\)\[T.g9\]'"):
        plan.power(beta={"C(g)[T.g9]": 1.0, "C(g)[T.g1]": 1.0}, replicates=3)
    with pytest.raises(InputError, match=r"beta must be a mapping or Series"):
        plan.power(beta=[1.0, 2.0], replicates=3)
    with pytest.raises(InputError, match=r"give a direction= .* or beta_direction="):
        plan.detectable_effect(0.8, replicates=3)
    with pytest.raises(InputError, match=r"direction \[0.0, 0.0\] does not move"):
        plan.detectable_effect(0.8, direction=[0.0, 0.0], replicates=3)


def test_bad_planned_designs():
    with pytest.raises(InputError, match=r"needs the planned pattern as a DataFrame"):
        lc.planned_design("g + t")
    with pytest.raises(MissingValueError, match=r"missing values in rows \[1\]"):
        lc.planned_design("t", pd.DataFrame({"t": [1.0, None, 3.0]}))
    with pytest.raises(InputError, match=r"has no rows"):
        lc.planned_design("t", pd.DataFrame({"t": []}, dtype=float))
    with pytest.raises(InputError, match=r"design must be a PlannedDesign"):
        lc.power_plan("t", lc.coef("t") == 0, sigma=1.0)
    d = one_way(2)
    assert lc.planned_design(d) is d  # an instance passes through unchanged
    with pytest.raises(UnknownCoefficientError, match=r"no coefficient named 'g1'"):
        lc.power_plan(d, lc.coef("g1") == 0, sigma=1.0)
    assert issubclass(ParameterError, LincombError) and issubclass(ParameterError, ValueError)


def test_inputs_not_mutated():
    pattern = pd.DataFrame({"g": ["a", "b", "c", "a"], "t": [1.0, 2.0, 4.0, 3.0]})
    before = pattern.copy()
    plan = lc.power_plan(lc.planned_design("g + t", pattern), lc.term("g") == 0, sigma=1.0)
    alt = np.array([0.3, 0.6])
    plan.power(effect=alt, replicates=3)
    pd.testing.assert_frame_equal(pattern, before)
    assert alt.tolist() == [0.3, 0.6]


# ---------------------------------------------------------------------------------------------
# properties (hypothesis): limits and monotonicity
# ---------------------------------------------------------------------------------------------
@st.composite
def scenarios(draw):
    """A random pattern (intercept + 1-3 covariates), a random 1-2 row system and direction."""
    seed = draw(st.integers(0, 2**31 - 1))
    u = draw(st.integers(1, 3))
    n0 = draw(st.integers(u + 1, 12))
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n0), rng.normal(size=(n0, u)) * rng.uniform(0.1, 10, u)])
    names = ["one"] + [f"x{j}" for j in range(u)]
    m = draw(st.integers(1, u))
    c = np.zeros((m, u + 1))
    c[:, 1:] = rng.normal(size=(m, u))
    d = rng.normal(size=m)
    h = rng.normal(size=m)
    sigma = draw(st.floats(0.1, 10.0))
    alpha = draw(st.sampled_from([0.01, 0.05, 0.1]))
    design = lc.planned_design(x, names=names)
    plan = lc.power_plan(design, lc.from_matrix(c, d), sigma=sigma, alpha=alpha)
    return plan, d, h, x, c


PROPS = settings(max_examples=30, deadline=None)


@PROPS
@given(scenarios(), st.floats(1e-3, 1.0), st.floats(1.01, 5.0), st.integers(1, 20))
def test_power_monotone_in_effect(sc, s1, ratio, extra):
    plan, d, h, *_ = sc
    r = plan.design.min_replicates() + extra
    p1 = plan.power(effect=d + s1 * h, replicates=r).power
    p2 = plan.power(effect=d + s1 * ratio * h, replicates=r).power
    assert plan.alpha <= p1 <= p2 + 1e-12 and p2 <= 1.0


@PROPS
@given(scenarios(), st.floats(0.01, 3.0), st.integers(0, 30), st.integers(1, 30))
def test_power_monotone_in_replicates(sc, s, r0, dr):
    plan, d, h, *_ = sc
    r = plan.design.min_replicates() + r0
    p1 = plan.power(effect=d + s * h, replicates=r).power
    p2 = plan.power(effect=d + s * h, replicates=r + dr).power
    assert p1 <= p2 + 1e-12


@PROPS
@given(scenarios(), st.integers(0, 10))
def test_power_tends_to_alpha_as_effect_vanishes(sc, extra):
    plan, d, h, *_ = sc
    r = plan.design.min_replicates() + extra
    lam1 = plan.noncentrality(effect=d + h, replicates=r)
    tiny = 1e-4 / math.sqrt(lam1)  # λ = 1e-8
    p = plan.power(effect=d + tiny * h, replicates=r).power
    assert plan.alpha <= p <= plan.alpha + 1e-6
    assert plan.power(effect=d, replicates=r).power == plan.alpha


@PROPS
@given(scenarios(), st.floats(0.05, 2.0))
def test_power_tends_to_one_as_n_grows(sc, s):
    plan, d, h, *_ = sc
    lam1 = plan.noncentrality(effect=d + s * h, replicates=1)
    # λ >= 400 and at least 50 residual df
    r = max(math.ceil(400.0 / lam1), math.ceil((50 + plan.design.rank) / plan.design.n_obs))
    assert plan.power(effect=d + s * h, replicates=r).power > 1 - 1e-6


@PROPS
@given(scenarios(), st.floats(0.5, 0.95))
def test_noncentrality_and_replicate_search_properties(sc, target):
    plan, d, h, x, c = sc
    # λ against its definition, λ linear in replicates
    r = plan.design.min_replicates() + 2
    lam = plan.noncentrality(effect=d + h, replicates=r)
    assert lam == pytest.approx(r * direct_lambda(x, None, c, h, plan.sigma), rel=1e-7)
    # detectable effect round trip
    mde = plan.detectable_effect(target, direction=h, replicates=r)
    assert plan.power(effect=mde.alternative, replicates=r).power == pytest.approx(target, abs=1e-9)
    # at the detectable effect for r replicates, (just under) the target needs r or fewer
    goal = target - 1e-6  # the solver meets the target to ~1e-12, either side
    need = plan.replicates_for(goal, effect=mde.alternative)
    assert need.replicates <= r
    assert need.power >= goal
    if need.replicates > plan.design.min_replicates():
        assert need.previous_power < goal


@PROPS
@given(scenarios(), st.floats(0.1, 100.0))
def test_noncentrality_invariant_to_column_units(sc, factor):
    plan, d, h, x, c = sc
    # X' = X·D with D = diag(1, factor, 1, ...) gives β' = D⁻¹β, so C' = C·D keeps C'β' = Cβ
    x2 = x.copy()
    x2[:, 1] *= factor
    c2 = c.copy()
    c2[:, 1] *= factor
    names = ["one"] + [f"x{j}" for j in range(x.shape[1] - 1)]
    plan2 = lc.power_plan(
        lc.planned_design(x2, names=names), lc.from_matrix(c2, d), sigma=plan.sigma
    )
    r = plan.design.min_replicates()
    a = plan.noncentrality(effect=d + h, replicates=r)
    b = plan2.noncentrality(effect=d + h, replicates=r)
    assert b == pytest.approx(a, rel=1e-8)


# ---------------------------------------------------------------------------------------------
# contrasts on level means in a plan
# ---------------------------------------------------------------------------------------------
LEVEL_RECIPES = {
    "pairwise": lambda m: m.pairwise(),
    "versus": lambda m: m.versus("g2"),
    "successive": lambda m: m.successive(),
    "helmert": lambda m: m.helmert(),
    "helmert_following": lambda m: m.helmert(following=True),
    "trend": lambda m: m.trend(2, values=[0.0, 1.0, 3.0]),
    "equal": lambda m: m.equal(),
}


@pytest.mark.parametrize("recipe", sorted(LEVEL_RECIPES))
def test_every_full_set_of_level_contrasts_has_the_anova_power(recipe):
    # every recipe above spans all contrasts among 3 level means, so its F test is the one-way
    # ANOVA F test: λ = n·Σ(μ_a − μ̄)²/σ² (closed form, common practice), and statsmodels'
    # FTestAnovaPower (effect size f = sd(μ)/σ with divisor k) is the numerical reference.
    k, n, sigma = 3, 12, 2.0
    mu = np.array([0.0, 0.8, 1.9])
    plan = lc.power_plan(one_way(k), LEVEL_RECIPES[recipe](lc.levels("C(g)")), sigma=sigma)
    beta = {"C(g)[T.g1]": mu[1] - mu[0], "C(g)[T.g2]": mu[2] - mu[0]}
    res = plan.power(beta=beta, replicates=n)
    assert res.df_test == k - 1
    assert res.noncentrality == pytest.approx(n * np.sum((mu - mu.mean()) ** 2) / sigma**2)
    from statsmodels.stats.power import FTestAnovaPower

    f = np.sqrt(np.mean((mu - mu.mean()) ** 2)) / sigma
    ref = FTestAnovaPower().power(effect_size=f, nobs=k * n, alpha=ALPHA, k_groups=k)
    assert res.power == pytest.approx(ref, abs=1e-9)


def test_level_contrasts_in_a_plan_equal_the_rows_written_by_hand():
    # C(g) with treatment coding: μ_a = Intercept + C(g)[T.a] (μ_g0 = Intercept), so each
    # recipe's rows can be written with coef(); the two plans must agree to rounding.
    b1, b2 = lc.coef("C(g)[T.g1]"), lc.coef("C(g)[T.g2]")
    by_hand = {
        "successive": (b1 == 0) & (b2 - b1 == 0),
        "versus": (-b2 == 0) & (b1 - b2 == 0),
    }
    design = one_way(3)
    beta = {"Intercept": 1.0, "C(g)[T.g1]": 0.4, "C(g)[T.g2]": -0.7}
    for name, rows in by_hand.items():
        ours = lc.power_plan(design, LEVEL_RECIPES[name](lc.levels("C(g)")), sigma=1.5)
        hand = lc.power_plan(design, rows, sigma=1.5)
        np.testing.assert_allclose(ours.matrix.to_numpy(), hand.matrix.to_numpy(), atol=1e-14)
        a, b = ours.power(beta=beta, replicates=7), hand.power(beta=beta, replicates=7)
        assert a.noncentrality == pytest.approx(b.noncentrality, rel=1e-12)
        assert a.power == pytest.approx(b.power, rel=1e-12)


def test_one_weighted_contrast_matches_the_noncentral_t():
    # a single contrast Σ w_a μ_a: two-sided t test with k·n − k df and noncentrality
    # δ = Σ w_a μ_a / (σ·sqrt(Σ w_a² / n)) (closed form); power from scipy's noncentral t,
    # a different distribution function from the noncentral F the plan uses.
    k, n, sigma = 4, 9, 1.3
    w = np.array([1.0, 1.0, -1.0, -1.0]) / 2
    mu = np.array([0.0, 0.5, -0.4, 0.3])
    pattern = pd.DataFrame({"g": [f"g{i}" for i in range(k)]})
    design = lc.planned_design("C(g)", pattern)
    plan = lc.power_plan(design, lc.levels("C(g)").weights(w.tolist()), sigma=sigma)
    res = plan.power(effect=float(w @ mu), replicates=n)
    df = k * n - k
    delta = float(w @ mu) / (sigma * np.sqrt(np.sum(w**2) / n))
    tc = stats.t.isf(ALPHA / 2, df)
    ref = stats.nct.sf(tc, df, delta) + stats.nct.cdf(-tc, df, delta)
    assert res.noncentrality == pytest.approx(delta**2, rel=1e-12)
    assert res.power == pytest.approx(ref, abs=1e-9)


def test_level_contrasts_at_a_covariate_value_in_a_plan():
    # with an interaction the level difference at x = x0 is C(g)[T.b] + x0·C(g)[T.b]:x
    # (treatment coding), written by hand with coef()
    pattern = pd.DataFrame({"g": ["a", "b"] * 3, "x": [0.0, 0.0, 1.0, 1.0, 2.0, 2.0]})
    design = lc.planned_design("C(g) * x", pattern)
    ours = lc.power_plan(design, lc.levels("C(g)").pairwise().holding(x=1.5), sigma=1.0)
    hand = lc.power_plan(
        design, lc.coef("C(g)[T.b]") + 1.5 * lc.coef("C(g)[T.b]:x") == 0, sigma=1.0
    )
    a, b = ours.power(effect=0.8, replicates=5), hand.power(effect=0.8, replicates=5)
    assert a.noncentrality == pytest.approx(b.noncentrality, rel=1e-12)


def test_level_contrasts_on_an_array_design_name_the_fix():
    design = lc.planned_design(np.eye(3), names=["a", "b", "c"])
    with pytest.raises(LincombError, match="made from a formula"):
        lc.power_plan(design, lc.levels("g").pairwise(), sigma=1.0)


# ---------------------------------------------------------------------------------------------
# huge effects: power saturates at 1
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("effect", [1e10, 1e12, 1e100, 1e200, 1e300])
def test_huge_effect_has_power_one_and_needs_the_smallest_design(effect):
    # closed form: with X ~ χ²(q, λ) and Y ~ χ²(df2), P(F ≤ c) ≤ Φ(−(1 − 1/√2)√λ) +
    # P(Y ≥ λ·df2/(2qc)) → 0 as λ → ∞, so power → 1 (scipy's ncf returns NaN for λ ≳ 1e20,
    # and λ itself overflows to inf for the largest effects).
    import warnings

    plan = lc.power_plan(one_way(3), lc.term("C(g)") == 0, sigma=1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = plan.power(effect=effect, replicates=2)
        need = plan.replicates_for(0.99, effect=effect)
        curve = plan.curve(effect=effect, replicates=[2, 3])
    assert res.power == 1.0
    assert res.noncentrality > 1e19
    assert need.replicates == plan.design.min_replicates()
    assert need.power == 1.0
    assert curve.power.tolist() == [1.0, 1.0]


def test_power_is_monotone_across_the_saturation_switch():
    # powers on a grid of λ through the range where scipy's ncf fails stay in [alpha, 1],
    # never decrease, and are 1 past it (the limit, closed form above)
    from lincomb._core import noncentral

    lam = np.logspace(0, 40, 81)
    p = noncentral.power(lam, 3, 5.0, ALPHA)
    assert np.all(np.isfinite(p))
    assert np.all(np.diff(p) >= -1e-15)
    assert np.all(p[lam >= 1e20] == 1.0)


def test_one_effect_for_several_rows_is_said_in_the_printout():
    plan = lc.power_plan(one_way(3), lc.term("C(g)") == 0, sigma=1.0)
    shared = plan.power(effect=0.5, replicates=6)
    np.testing.assert_array_equal(shared.shift, [0.5, 0.5])
    assert "one effect for every row: shift Cβ − d = 0.5 on each of 2 rows" in repr(shared)
    own = plan.power(effect=[0.5, 0.2], replicates=6)
    assert "one effect for every row" not in repr(own)
