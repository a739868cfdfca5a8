"""The general max-|t| rule: sequential conditioning, union sampling, the pairs control family.

Sources: ``scipy.stats.studentized_range`` (scipy's own implementation of the studentized range
distribution) for all pairwise differences of equal groups forced through the general rule;
mpmath integrals at 20 digits for equicorrelated rows (the one-dimensional reduction given the
common factor, common practice); closed forms for the moments of the chi distribution and for
Student's t tails; seeded Monte Carlo written here, with its binomial error stated.
"""

from __future__ import annotations

import warnings

import mpmath as mp
import numpy as np
import pandas as pd
import pytest
from scipy import integrate, special, stats

import lincomb as lc
from lincomb._core.maxt import (
    COVERAGE,
    PAIRS_CONTROL_NOTE,
    SEQUENTIAL_ROUTINE,
    IntegrationOptions,
    _Integrator,
    _unique_rows,
    adjusted_tails,
    max_abs_t_cdf,
    max_abs_t_quantile,
)
from lincomb._core.maxt_pairs import independent_pairs
from lincomb._core.maxt_sequential import chi_nodes
from lincomb.errors import IntegrationAccuracyWarning


def _pairs(k: int, sizes: np.ndarray | None = None) -> tuple[np.ndarray, list[tuple[int, int]]]:
    """Correlations of all pairwise differences of k independent means (variances 1/size)."""
    n = np.ones(k) if sizes is None else np.asarray(sizes, dtype=float)
    pairs = [(i, j) for i in range(k) for j in range(i + 1, k)]
    b = np.array([np.eye(k)[i] - np.eye(k)[j] for i, j in pairs])
    cov = b @ np.diag(1 / n) @ b.T
    d = np.sqrt(np.diag(cov))
    return cov / np.outer(d, d), pairs


def _equicorrelated(m: int, rho: float) -> np.ndarray:
    return np.full((m, m), rho) + (1 - rho) * np.eye(m)


def _equi_inside_mp(c: float, m: int, rho: float) -> mp.mpf:
    """P(max_i |X_i| <= c) for m equicorrelated standard normals (correlation rho >= 0):
    given the common factor Z0 the rows are independent (common practice), so
    P = ∫ φ(z) [Φ((c − √ρ z)/√(1−ρ)) − Φ((−c − √ρ z)/√(1−ρ))]^m dz; mpmath at 20 digits."""
    mp.mp.dps = 20
    a, b = mp.sqrt(rho), mp.sqrt(1 - rho)

    def f(z: mp.mpf) -> mp.mpf:
        return mp.npdf(z) * (mp.ncdf((c - a * z) / b) - mp.ncdf((-c - a * z) / b)) ** m

    return mp.quad(f, mp.linspace(-12, 12, 7))


def _equi_tail_mp(c: float, m: int, rho: float) -> float:
    """P(max_i |X_i| > c), the same reduction written as 1 − g^m without cancellation."""
    mp.mp.dps = 30
    a, b = mp.sqrt(rho), mp.sqrt(1 - rho)

    def f(z: mp.mpf) -> mp.mpf:
        out = mp.ncdf(-(c - a * z) / b) + mp.ncdf((-c - a * z) / b)
        return mp.npdf(z) * -mp.expm1(m * mp.log1p(-out))

    return float(mp.quad(f, mp.linspace(-12, 12, 7)))


# ---------------------------------------------------------------------------------------------
# the variance part: trapezoid nodes for S
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("nu", [1.0, 3.0, 12.0, 228.0])
def test_chi_nodes_reproduce_moments_and_t_tails(nu: float) -> None:
    s, p = chi_nodes(nu)
    assert abs(p.sum() - 1) < 1e-13
    # nu S² ~ chi²_nu: E[S²] = 1 and E[S⁴] = 1 + 2/nu (closed forms)
    assert abs(p @ s**2 - 1) < 1e-12
    assert abs(p @ s**4 - (1 + 2 / nu)) < 1e-12
    for c in (1.0, 3.0, 8.0):
        # E[P(|Z| > c S)] = P(|T_nu| > c): Student's t tail (scipy.stats.t)
        tail = p @ (2 * special.ndtr(-c * s))
        assert abs(tail / (2 * stats.t.sf(c, nu)) - 1) < 1e-12
    for c in (1.0, 3.0, 8.0, 20.0):
        # nodes given one row beyond c: E[S² 1{|Z| > cS}] = P(|T_{nu+2}| > c √((nu+2)/nu))
        # (s² times the chi² density is the chi² density with nu + 2 df, rescaled)
        sc, pc = chi_nodes(nu, c)
        ref = stats.t.sf(c * np.sqrt((nu + 2) / nu), nu + 2) / stats.t.sf(c, nu)
        assert abs(pc @ sc**2 / ref - 1) < 1e-12


# ---------------------------------------------------------------------------------------------
# honesty of the reported error: coverage over many seeds
# ---------------------------------------------------------------------------------------------
# mpmath (20 digits) root of P(max|X| <= c) = 0.95 for 6 equicorrelated normal rows, rho = 0.3,
# computed with _equi_inside_mp above and
#   mp.findroot(lambda c: _equi_inside_mp(c, 6, 0.3) - 0.95, (2.55, 2.65), solver="secant")
# (checked again, to 1e-15 in probability, by the test itself)
EQUI_CRITICAL = 2.6103837887623134


def _coverage_case(name: str) -> tuple[np.ndarray, float, float]:
    if name == "all pairs of 4 equal groups, df 12":
        # scipy.stats.studentized_range: max|t| over all pairs is the range over √2
        return _pairs(4)[0], 12.0, float(stats.studentized_range.ppf(0.95, 4, 12.0) / np.sqrt(2))
    return _equicorrelated(6, 0.3), np.inf, EQUI_CRITICAL


@pytest.mark.parametrize(
    "name", ["all pairs of 4 equal groups, df 12", "6 equicorrelated rows, rho 0.3, normal"]
)
def test_reported_critical_value_error_covers_the_exact_value_over_200_seeds(name: str) -> None:
    corr, df, exact = _coverage_case(name)
    if not np.isfinite(df):
        assert abs(float(_equi_inside_mp(exact, 6, 0.3)) - 0.95) < 1e-15
    seeds = 200
    within_bound = within_se = 0
    for seed in range(seeds):
        # forced through the general rule (the structured routes would be exact here)
        c, rep = max_abs_t_quantile(
            0.95, corr, df, options=IntegrationOptions(tol=2e-4, seed=seed, engine="sequential")
        )
        assert rep.routine == SEQUENTIAL_ROUTINE and rep.coverage == COVERAGE == 0.99
        within_bound += abs(c - exact) <= rep.critical_error
        within_se += abs(c - exact) <= rep.critical_std_error
    # critical_error is a 99% bound: the share of runs inside it is binomial(200, 0.99), with
    # standard deviation sqrt(.99 · .01 / 200) = 0.0070; three of those below 0.99 is 0.969.
    assert within_bound / seeds >= 0.969, within_bound
    # and the bound is not needlessly wide: inside one standard error with probability
    # P(|t_9| <= 1) = 0.657 (the error is a mean over scrambles, its s.e. from 10 of them);
    # binomial s.d. sqrt(.657 · .343 / 200) = 0.034, three of them either side
    assert 0.555 <= within_se / seeds <= 0.759, within_se


# ---------------------------------------------------------------------------------------------
# tails: sequential conditioning near the middle, union sampling far out
# ---------------------------------------------------------------------------------------------
def test_general_rule_tails_match_the_studentized_range_and_keep_small_tails_relative() -> None:
    k, df = 6, 20.0
    corr = _pairs(k)[0]
    integ = _Integrator(corr, df, k - 1, IntegrationOptions(1e-5, 3, 2**16, "sequential"))
    cs = np.array([1.0, 2.2, 3.0, 3.8, 5.0, 6.5, 9.0])
    tail, se, _points, _note, ok = adjusted_tails(integ, cs)
    ref = stats.studentized_range.sf(np.sqrt(2) * cs, k, df)  # scipy, above 1e-9 here
    assert ok
    # within 4.5 reported standard errors (a t with 9 df exceeds 4.5 with probability 0.0015)
    assert np.all(np.abs(tail - ref) <= 4.5 * se), (tail - ref) / se
    small = ref < 1e-3  # relative standard error 2e-3 targeted there
    assert np.all(se[small] / ref[small] < 4e-3), se / ref
    assert ref[-1] < 1e-6  # 2.5e-7


def test_union_sampling_keeps_tiny_equicorrelated_tails_to_relative_accuracy() -> None:
    m, rho = 6, 0.3
    cs = np.array([4.5, 6.0])
    prob, rep = max_abs_t_cdf(
        cs, _equicorrelated(m, rho), np.inf, options=IntegrationOptions(engine="sequential")
    )
    ref = np.array([_equi_tail_mp(c, m, rho) for c in cs])  # mpmath, 30 digits
    assert ref[-1] < 1e-7
    tail = 1 - prob  # the tails themselves are returned through 1 - P: absolute 1e-16
    assert np.all(np.abs(tail - ref) <= 4.5 * rep.std_error + 1e-15)
    options = IntegrationOptions(1e-5, 0, 2**16, "sequential")
    integ = _Integrator(_equicorrelated(m, rho), np.inf, m, options)
    t_direct, se, _p, _n, _ok = adjusted_tails(integ, cs)
    assert np.all(np.abs(t_direct / ref - 1) <= 4.5 * se / ref), (t_direct / ref - 1, se / ref)
    assert np.all(se / ref < 4e-3)


# ---------------------------------------------------------------------------------------------
# all pairs of independent means: structure, control family, end to end
# ---------------------------------------------------------------------------------------------
SIZES = np.array([26, 16, 13, 17, 19, 25, 19, 13, 17, 22, 25, 24])


def test_independent_pairs_are_read_from_the_correlations() -> None:
    corr, pairs = _pairs(12, SIZES)
    rng = np.random.default_rng(4)
    order = rng.permutation(len(pairs))
    sign = np.where(rng.random(len(pairs)) < 0.5, -1.0, 1.0)
    shuffled = (corr * np.outer(sign, sign))[np.ix_(order, order)]
    with_dup = np.vstack([shuffled, -shuffled[3:4]])  # a duplicated row, sign flipped
    with_dup = np.hstack([with_dup, with_dup[:, 3:4]])
    with_dup[-1, -1] = 1.0
    ctl = independent_pairs(with_dup, _unique_rows(with_dup), 1e-8)
    assert ctl is not None
    true = [pairs[i] for i in order] + [pairs[order[3]]]
    # the means are found up to their labels: the row widths are those of the true pairs
    # (variance of a mean is sigma²/n), up to one common factor
    w_found = ctl.var[ctl.first] + ctl.var[ctl.second]
    w_true = np.array([1 / SIZES[i] + 1 / SIZES[j] for i, j in true])
    assert np.allclose(w_found / w_true, w_found[0] / w_true[0], rtol=1e-10)
    assert ctl.first[-1] == ctl.first[3] and ctl.second[-1] == ctl.second[3]
    assert np.all(np.abs(ctl.scale - 1) < 0.02)
    # not this structure: correlated means (a covariate), fewer than 5 means, a subset of pairs
    v = np.diag(1 / SIZES[:6]) + 0.01 * np.outer(np.arange(6.0), np.arange(6.0))
    b = np.array([np.eye(6)[i] - np.eye(6)[j] for i in range(6) for j in range(i + 1, 6)])
    cov = b @ v @ b.T
    d = np.sqrt(np.diag(cov))
    for other in (cov / np.outer(d, d), _pairs(4, SIZES[:4])[0], corr[:50, :50]):
        assert independent_pairs(other, _unique_rows(other), 1e-8) is None


def _range_cdf_normal(w: float, k: int) -> float:
    """P(range of k standard normals <= w) = k ∫ φ(z) (Φ(z + w) − Φ(z))^(k−1) dz (common
    practice), by scipy.integrate.quad."""

    def f(z: float) -> float:
        return float(k * stats.norm.pdf(z) * (stats.norm.cdf(z + w) - stats.norm.cdf(z)) ** (k - 1))

    return float(integrate.quad(f, -12, 12, epsabs=1e-14, epsrel=1e-13, limit=200)[0])


def test_pairs_control_probability_is_exact() -> None:
    # equal variances: the neighbouring family is the family itself, i.e. the range
    corr, _ = _pairs(6)
    ctl = independent_pairs(corr, _unique_rows(corr), 1e-8)
    assert ctl is not None and np.allclose(ctl.scale, 1.0, atol=1e-12)
    xs = np.array([1.5, 2.5, 3.5])
    got, err = ctl.given(xs)
    ref = [_range_cdf_normal(np.sqrt(2) * x, 6) for x in xs]
    assert np.allclose(got, ref, atol=1e-11) and np.all(err < 1e-11)
    # unequal variances: the neighbour's probability against a seeded Monte Carlo that checks
    # every pair directly (no use of the one-dimensional formula); binomial s.e. stated
    sizes = np.array([4.0, 9.0, 5.0, 15.0, 7.0])
    corr, pairs = _pairs(5, sizes)
    ctl = independent_pairs(corr, _unique_rows(corr), 1e-8)
    assert ctl is not None
    x = 2.3
    prob, _err = ctl.given(np.array([x]))
    draws = 1_000_000
    mc = np.random.default_rng(17)
    means = mc.standard_normal((draws, 5)) * np.sqrt(ctl.var)
    ok = np.ones(draws, dtype=bool)
    for i in range(5):
        for j in range(i + 1, 5):
            ok &= np.abs(means[:, i] - means[:, j]) <= x * (ctl.half[i] + ctl.half[j])
    hit = ok.mean()
    se = np.sqrt(hit * (1 - hit) / draws)  # about 4e-4
    assert abs(prob[0] - hit) < 4 * se, (prob, hit, se)


def _one_way(sizes: np.ndarray, seed: int) -> lc.LinearFit:
    rng = np.random.default_rng(seed)
    g = np.repeat([f"g{i:02d}" for i in range(sizes.size)], sizes)
    y = rng.normal(size=g.size) + 0.3 * np.repeat(np.arange(sizes.size), sizes)
    return lc.fit("y ~ g", pd.DataFrame({"g": g, "y": y}))


def test_unbalanced_all_pairs_reach_the_default_tolerance_and_match_monte_carlo() -> None:
    f = _one_way(SIZES, 3)
    res = f.wald(lc.levels("g").pairwise())
    with warnings.catch_warnings():
        warnings.simplefilter("error", IntegrationAccuracyWarning)  # the target
        sim = res.simultaneous("max-t")
    rep = sim.integration
    assert rep.converged and rep.routine == SEQUENTIAL_ROUTINE + PAIRS_CONTROL_NOTE
    assert rep.rows == 66 and rep.rank == 11
    # the same family without the control family, at a looser tolerance: the two agree within
    # their combined 99% bounds (independent integrations of the same quantity)
    cov = res.estimate_covariance
    d = np.sqrt(np.diag(cov))
    corr = cov / np.outer(d, d)
    plain, prep = max_abs_t_quantile(
        0.95, corr, f.df_error, options=IntegrationOptions(tol=1e-4, engine="sequential")
    )
    assert abs(plain - sim.critical_value) <= np.hypot(prep.critical_error, rep.critical_error)
    # seeded Monte Carlo of the family (400,000 draws): the coverage of the critical value is
    # 0.95 within 4 binomial standard errors (3.4e-4)
    draws = 400_000
    vals, vecs = np.linalg.eigh(corr)
    root = vecs[:, -11:] * np.sqrt(vals[-11:])  # rank 11: corr = root rootᵀ
    mc = np.random.default_rng(2026)
    hits = 0
    for _ in range(8):
        z = mc.standard_normal((draws // 8, 11)) @ root.T
        s = np.sqrt(mc.chisquare(f.df_error, draws // 8) / f.df_error)
        hits += int(np.sum(np.abs(z).max(axis=1) / s <= sim.critical_value))
    assert np.allclose(root @ root.T, corr, atol=1e-10)
    hit = hits / draws
    assert abs(hit - 0.95) < 4 * np.sqrt(0.95 * 0.05 / draws), hit
