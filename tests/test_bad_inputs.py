"""Catalogue of bad or odd input, one row per class, across the public entry points.

Each row asserts either a correct result, checked against an independent computation named in
its comment (numpy's least squares ``np.linalg.lstsq``, statsmodels as a numerical reference,
or a closed form), or a typed error (a ``LincombError`` subclass) whose message names the
culprit.  For every row: no built-in exception escapes, nothing non-finite is returned
silently, and the inputs are not mutated (compared with a deep copy taken before the call).
Data are a seeded simulation made here (invented).
"""

from __future__ import annotations

import copy
import pickle
import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import lincomb as lc
from lincomb import errors as E

N = 30


def frame() -> pd.DataFrame:
    rng = np.random.default_rng(20261202)
    g = np.array(["a", "b", "c"])[np.arange(N) % 3]
    x = rng.normal(size=N)
    z = rng.uniform(1, 5, size=N)
    y = 1.0 + 2.0 * x - 0.5 * z + (g == "b") * 0.7 + rng.normal(scale=0.3, size=N)
    return pd.DataFrame(
        {"y": y, "x": x, "z": z, "g": g, "w": rng.uniform(0.5, 2, size=N)},
        index=pd.Index(np.arange(100, 100 + N), name="id"),
    )


def lstsq(x: np.ndarray, y: np.ndarray, w: np.ndarray | None = None) -> np.ndarray:
    """Independent reference: numpy's least squares on sqrt(w)-scaled rows."""
    s = np.ones(len(y)) if w is None else np.sqrt(w)
    return np.linalg.lstsq(x * s[:, None], y * s, rcond=None)[0]


def xz(df: pd.DataFrame, *cols: str) -> np.ndarray:
    return np.column_stack([np.ones(len(df))] + [df[c].to_numpy(dtype=float) for c in cols])


def same(a: Any, b: Any, tol: float = 1e-9) -> bool:
    return bool(np.allclose(np.asarray(a, float), np.asarray(b, float), rtol=tol, atol=tol))


@dataclass(frozen=True)
class Err:
    cls: type[E.LincombError]
    match: str


@dataclass(frozen=True)
class Ok:
    check: Callable[[Any, dict[str, Any]], bool]


@dataclass(frozen=True)
class Case:
    name: str
    make: Callable[[], dict[str, Any]]
    run: Callable[..., Any]
    expect: Err | Ok


def d(**extra: Any) -> Callable[[], dict[str, Any]]:
    """Inputs: the base frame (as ``data``) with columns added or replaced, plus ``extra``."""

    def make() -> dict[str, Any]:
        df = frame()
        cols = {k[4:]: v for k, v in extra.items() if k.startswith("col_")}
        other = {k: v for k, v in extra.items() if not k.startswith("col_")}
        for k, v in cols.items():
            df[k] = v(df) if callable(v) else v
        return {"data": df, **{k: (v(df) if callable(v) else v) for k, v in other.items()}}

    return make


def fitted(**extra: Any) -> Callable[[], dict[str, Any]]:
    def make() -> dict[str, Any]:
        out = d(**extra)()
        out["fit"] = lc.fit("y ~ x + z + g", out["data"])
        return out

    return make


def shuffled_w(df: pd.DataFrame) -> pd.Series:
    return df["w"].iloc[::-1]


def dask_frame(df: pd.DataFrame) -> Any:
    import dask.dataframe as dd

    return dd.from_pandas(df, npartitions=2)


def wls_ref(r: lc.LinearFit, inp: dict[str, Any]) -> bool:
    df = inp["data"]  # statsmodels WLS (numerical reference), weights matched by row
    ref = sm.WLS(df["y"], xz(df, "x"), weights=df["w"]).fit().params
    return same(r.coefficients, ref)


def sorted_chunks(df: pd.DataFrame) -> list[pd.DataFrame]:
    return [df.iloc[:10], df.iloc[10:].assign(g="zz")]


CASES: list[Case] = [
    # -- weights ---------------------------------------------------------------------------
    Case(
        "weights Series in another order",
        d(w=shuffled_w),
        lambda data, w: lc.fit("y ~ x", data, weights=w),
        Ok(wls_ref),
    ),
    Case(
        "weights Series with foreign index",
        d(w=lambda df: pd.Series(df["w"].to_numpy())),
        lambda data, w: lc.fit("y ~ x", data, weights=w),
        Err(E.InputError, r"weights.*lacks.*\[100"),
    ),
    Case(
        "weights Series with repeated labels",
        d(w=lambda df: pd.Series(1.0, index=np.r_[df.index[:-1], 100])),
        lambda data, w: lc.fit("y ~ x", data, weights=w),
        Err(E.InputError, "weights.*repeated"),
    ),
    Case(
        "text weights column",
        d(col_w="heavy"),
        lambda data: lc.fit("y ~ x", data, weights="w"),
        Err(E.InputError, "weights must be numeric.*'heavy'"),
    ),
    Case(
        "text weights list",
        d(w=["1"] * N),
        lambda data, w: lc.fit("y ~ x", data, weights=w),
        Err(E.InputError, "weights must be numeric"),
    ),
    Case(
        "bool weights",
        d(col_w=lambda df: df["x"] > 0),
        lambda data: lc.fit("y ~ x", data, weights="w"),
        Err(E.InputError, "weights must be numeric.*bool"),
    ),
    Case(
        "negative weight",
        d(col_w=lambda df: df["w"].where(df.index != 104, -1.0)),
        lambda data: lc.fit("y ~ x", data, weights="w"),
        Err(E.InputError, "positive: row 104"),
    ),
    Case(
        "zero weight",
        d(col_w=lambda df: df["w"].where(df.index != 107, 0.0)),
        lambda data: lc.fit("y ~ x", data, weights="w"),
        Err(E.InputError, "positive: row 107"),
    ),
    Case(
        "infinite weight",
        d(col_w=lambda df: df["w"].where(df.index != 101, np.inf)),
        lambda data: lc.fit("y ~ x", data, weights="w"),
        Err(E.InputError, "weights holds inf at row 101"),
    ),
    Case(
        "missing weight dropped",
        d(col_w=lambda df: df["w"].where(df.index != 101, np.nan)),
        lambda data: lc.fit("y ~ x", data, weights="w"),
        # statsmodels WLS on the 29 rows with a weight (numerical reference)
        Ok(lambda r, i: r.n_dropped == 1 and wls_ref(r, {"data": i["data"].drop(101)})),
    ),
    # -- dtypes of predictors ----------------------------------------------------------------
    Case(
        "timedelta predictor (ns)",
        d(col_t=lambda df: pd.to_timedelta(np.arange(N), "s").astype("m8[ns]")),
        lambda data: lc.fit("y ~ t", data),
        Err(E.InputError, "column 't' holds time differences.*pd.Timedelta"),
    ),
    Case(
        "timedelta predictor (us)",
        d(col_t=lambda df: pd.to_timedelta(np.arange(N), "s").astype("m8[us]")),
        lambda data: lc.fit("y ~ t", data),
        Err(E.InputError, "column 't' holds time differences"),
    ),
    Case(
        "datetime predictor",
        d(col_t=lambda df: pd.date_range("2024-01-01", periods=N)),
        lambda data: lc.fit("y ~ x + t", data),
        Err(E.InputError, "column 't' holds dates/times.*Timestamp"),
    ),
    Case(
        "tz-aware datetime",
        d(col_t=lambda df: pd.date_range("2024-01-01", periods=N, tz="UTC")),
        lambda data: lc.fit("y ~ t", data),
        Err(E.InputError, "column 't' holds dates/times"),
    ),
    Case(
        "period predictor",
        d(col_t=lambda df: pd.period_range("2024-01", periods=N, freq="M")),
        lambda data: lc.fit("y ~ t", data),
        Err(E.InputError, "column 't'"),
    ),
    Case(
        "complex predictor",
        d(col_c=lambda df: df["x"] + 1j),
        lambda data: lc.fit("y ~ c", data),
        Err(E.InputError, "column 'c' holds complex"),
    ),
    Case(
        "object column mixing True and 1",
        d(col_m=lambda df: pd.Series([True, 1, 2] * 10, index=df.index, dtype=object)),
        lambda data: lc.fit("y ~ m", data),
        Err(E.InputError, r"column 'm' mixes value types \['bool', 'int'\]"),
    ),
    Case(
        "object column mixing 1 and '1'",
        d(col_m=lambda df: pd.Series([1, "1", 2] * 10, index=df.index, dtype=object)),
        lambda data: lc.fit("y ~ m", data),
        Err(E.InputError, r"column 'm' mixes value types \['int', 'str'\]"),
    ),
    Case(
        "bool predictor",
        d(col_b=lambda df: df["x"] > 0),
        lambda data: lc.fit("y ~ b", data),
        # np.linalg.lstsq on the 0/1 indicator
        Ok(lambda r, i: same(r.coefficients, lstsq(xz(i["data"], "b"), i["data"]["y"].to_numpy()))),
    ),
    Case(
        "int8 predictor",
        d(col_k=lambda df: (np.arange(N) % 7).astype(np.int8)),
        lambda data: lc.fit("y ~ k", data),
        Ok(lambda r, i: same(r.coefficients, lstsq(xz(i["data"], "k"), i["data"]["y"].to_numpy()))),
    ),
    Case(
        "float16 predictor",
        d(col_h=lambda df: df["x"].astype(np.float16)),
        lambda data: lc.fit("y ~ h", data),
        # lstsq on the same (float16-rounded) values widened to float64
        Ok(lambda r, i: same(r.coefficients, lstsq(xz(i["data"], "h"), i["data"]["y"].to_numpy()))),
    ),
    Case(
        "nullable Int64 with NA",
        d(col_k=lambda df: pd.array([pd.NA] + list(range(1, N)), dtype="Int64")),
        lambda data: lc.fit("y ~ k", data),
        # lstsq on the 29 rows with a value
        Ok(
            lambda r, i: (
                r.n_dropped == 1
                and same(
                    r.coefficients,
                    lstsq(xz(i["data"].iloc[1:], "k"), i["data"]["y"].to_numpy()[1:]),
                )
            )
        ),
    ),
    Case(
        "nullable Float64 with NA",
        d(col_k=lambda df: pd.array([None] + list(df["x"].iloc[1:]), dtype="Float64")),
        lambda data: lc.fit("y ~ k", data),
        Ok(
            lambda r, i: (
                r.n_dropped == 1
                and same(
                    r.coefficients,
                    lstsq(xz(i["data"].iloc[1:], "x"), i["data"]["y"].to_numpy()[1:]),
                )
            )
        ),
    ),
    Case(
        "string[pyarrow] factor",
        d(col_g=lambda df: df["g"].astype("string[pyarrow]")),
        lambda data: lc.fit("y ~ x + g", data),
        # statsmodels OLS with hand-made indicators (numerical reference)
        Ok(
            lambda r, i: same(
                r.coefficients,
                sm.OLS(
                    i["data"]["y"],
                    np.column_stack(
                        [xz(i["data"], "x"), i["data"]["g"] == "b", i["data"]["g"] == "c"]
                    ).astype(float),
                )
                .fit()
                .params,
            )
        ),
    ),
    Case(
        "string (python) factor with NA",
        d(col_g=lambda df: df["g"].astype("string").where(df.index != 100, pd.NA)),
        lambda data: lc.fit("y ~ x + g", data),
        Ok(lambda r, i: r.n_dropped == 1 and r.names == ("Intercept", "x", "g[T.b]", "g[T.c]")),
    ),
    Case(
        "ArrowDtype string factor",
        d(col_g=lambda df: df["g"].astype(pd.ArrowDtype(__import__("pyarrow").string()))),
        lambda data: lc.fit("y ~ g", data),
        # closed form: a one-factor model's coefficients are differences of group means
        Ok(
            lambda r, i: same(
                r.coefficients.iloc[1],
                i["data"].groupby("g")["y"].mean().pipe(lambda m: m["b"] - m["a"]),
            )
        ),
    ),
    Case(
        "categorical factor",
        d(col_g=lambda df: pd.Categorical(df["g"], ["c", "a", "b"])),
        lambda data: lc.fit("y ~ g", data),
        Ok(
            lambda r, i: same(
                r.coefficients.iloc[0], i["data"].groupby("g", observed=True)["y"].mean()["c"]
            )
        ),
    ),
    Case(
        "categorical with unused level: term test",
        fitted(col_g=lambda df: pd.Categorical(df["g"].replace("c", "a"), ["a", "b", "c"])),
        lambda data, fit: fit.wald(lc.term("g") == 0),
        Err(E.NotEstimableError, r"'g' keeps level\(s\) \['c'\].*remove_unused_categories"),
    ),
    Case(
        "one-level factor term",
        d(col_h="only"),
        lambda data: lc.fit("y ~ x + h", data).wald(lc.term("h") == 0),
        Err(E.EmptyRestrictionError, "term 'h' has no columns"),
    ),
    Case(
        "text response",
        d(col_s="a"),
        lambda data: lc.fit("s ~ x", data),
        Err(E.InputError, "response 's' is not numeric"),
    ),
    # -- frames and names --------------------------------------------------------------------
    Case(
        "empty frame",
        d(),
        lambda data: lc.fit("y ~ x", data.iloc[:0]),
        Err(E.InputError, "no rows"),
    ),
    Case(
        "every row missing a value",
        d(col_x=np.nan),
        lambda data: lc.fit("y ~ x", data),
        Err(E.MissingValueError, r"every one of the 30 rows.*'x': 30"),
    ),
    Case(
        "missing='raise' with a missing value",
        d(col_x=lambda df: df["x"].where(df.index != 103)),
        lambda data: lc.fit("y ~ x", data, missing="refuse"),
        Err(E.MissingValueError, "'x': 1"),
    ),
    Case(
        "missing='bogus'",
        d(),
        lambda data: lc.fit("y ~ x", data, missing="bogus"),
        Err(E.InputError, "missing must be"),
    ),
    Case(
        "duplicate column names",
        d(),
        lambda data: lc.fit("y ~ x", pd.concat([data, data[["x"]]], axis=1)),
        Err(E.InputError, r"duplicate column names: \['x'\]"),
    ),
    Case(
        "column named Intercept",
        d(col_Intercept=lambda df: df["z"]),
        lambda data: lc.fit("y ~ Intercept", data),
        Err(E.InputError, "named 'Intercept'"),
    ),
    Case(
        "integer column name in backticks",
        d(),
        lambda data: lc.fit("y ~ `5`", data.rename(columns={"x": 5})),
        Ok(lambda r, i: same(r.coefficients, lstsq(xz(i["data"], "x"), i["data"]["y"].to_numpy()))),
    ),
    Case(
        "integer column name unquoted",
        d(),
        lambda data: lc.fit("y ~ 5", data.rename(columns={"x": 5})),
        Err(E.InputError, "written in backticks: `5`"),
    ),
    Case(
        "column name with a backtick",
        d(),
        lambda data: lc.fit("y ~ a`b", data.rename(columns={"x": "a`b"})),
        Err(E.InputError, r"hold a backtick.*rename"),
    ),
    Case(
        "column name with a space",
        d(),
        lambda data: lc.fit("y ~ `x 1`", data.rename(columns={"x": "x 1"})),
        Ok(lambda r, i: same(r.coefficients, lstsq(xz(i["data"], "x"), i["data"]["y"].to_numpy()))),
    ),
    Case("unknown variable", d(), lambda data: lc.fit("y ~ nope", data), Err(E.InputError, "nope")),
    Case(
        "formula not a string",
        d(),
        lambda data: lc.fit(["y", "x"], data),
        Err(E.InputError, "formula"),
    ),
    Case(
        "formula without response",
        d(),
        lambda data: lc.fit("~ x", data),
        Err(E.InputError, "no response"),
    ),
    Case(
        "data not a DataFrame",
        d(),
        lambda data: lc.fit("y ~ x", data.to_dict("list")),
        Err(E.InputError, "DataFrame"),
    ),
    # -- extreme values ----------------------------------------------------------------------
    Case(
        "infinite predictor",
        d(col_x=lambda df: df["x"].where(df.index != 110, np.inf)),
        lambda data: lc.fit("y ~ x", data),
        Err(E.InputError, "'x' holds inf at row 110"),
    ),
    Case(
        "missing predictor dropped",
        d(col_x=lambda df: df["x"].where(df.index != 110)),
        lambda data: lc.fit("y ~ x", data),
        Ok(
            lambda r, i: (
                list(r.dropped_rows) == [110]
                and same(
                    r.coefficients,
                    lstsq(xz(i["data"].drop(110), "x"), i["data"].drop(110)["y"].to_numpy()),
                )
            )
        ),
    ),
    Case(
        "predictor near 1e150",
        d(col_x=lambda df: df["x"] * 1e150),
        lambda data: lc.fit("y ~ x", data),
        # slope by numpy's polyfit on the unscaled values, scaled back (exact powers of ten aside)
        Ok(
            lambda r, i: same(
                r.coefficients.iloc[1] * 1e150,
                np.polyfit(i["data"]["x"] / 1e150, i["data"]["y"], 1)[0],
                1e-7,
            )
        ),
    ),
    Case(
        "predictor near 1e-150",
        d(col_x=lambda df: df["x"] * 1e-150),
        lambda data: lc.fit("y ~ x", data),
        Ok(
            lambda r, i: same(
                r.coefficients.iloc[1] * 1e-150,
                np.polyfit(i["data"]["x"] * 1e150, i["data"]["y"], 1)[0],
                1e-7,
            )
        ),
    ),
    Case(
        "new data with an unseen level",
        fitted(),
        lambda data, fit: fit.encode(pd.DataFrame({"x": [0.0], "z": [1.0], "g": ["zz"]})),
        Err(E.UnseenLevelError, r"never saw \(column 'g': \['zz'\]\)"),
    ),
    Case(
        "new data with a datetime column",
        fitted(),
        lambda data, fit: fit.encode(data.assign(x=pd.Timestamp("2024-01-01"))),
        Err(E.InputError, "column 'x' holds dates"),
    ),
    # -- arrays --------------------------------------------------------------------------------
    Case(
        "fit_arrays: text in X",
        d(),
        lambda data: lc.fit_arrays(np.array([["1", "a"]] * N), data["y"].to_numpy()),
        Err(E.InputError, "X must be numeric"),
    ),
    Case(
        "fit_arrays: y of wrong length",
        d(),
        lambda data: lc.fit_arrays(xz(data, "x"), data["y"].to_numpy()[:-1]),
        Err(E.InputError, "30 rows but y has 29"),
    ),
    Case(
        "fit_arrays: 3-D X",
        d(),
        lambda data: lc.fit_arrays(np.ones((N, 2, 2)), data["y"].to_numpy()),
        Err(E.InputError, "2-dimensional"),
    ),
    Case(
        "fit_arrays: complex y",
        d(),
        lambda data: lc.fit_arrays(xz(data, "x"), data["y"].to_numpy() + 0j),
        Err(E.InputError, "the response holds complex"),
    ),
    Case(
        "fit_arrays: no rows",
        d(),
        lambda data: lc.fit_arrays(np.zeros((0, 2)), np.zeros(0)),
        Err(E.DegenerateFitError, "0 observations"),
    ),
    Case(
        "fit_arrays: repeated names",
        d(),
        lambda data: lc.fit_arrays(xz(data, "x"), data["y"], names=["a", "a"]),
        Err(E.InputError, r"repeated: \['a'\]"),
    ),
    Case(
        "fit_arrays: y Series beside an X frame, other order",
        d(),
        lambda data: lc.fit_arrays(data[["x", "z"]].assign(one=1.0), data["y"].iloc[::-1]),
        Ok(
            lambda r, i: same(
                r.coefficients,
                lstsq(i["data"][["x", "z"]].assign(one=1.0).to_numpy(), i["data"]["y"].to_numpy()),
            )
        ),
    ),
    Case(
        "fit_arrays: y Series with a foreign index",
        d(),
        lambda data: lc.fit_arrays(
            data[["x", "z"]].assign(one=1.0), data["y"].reset_index(drop=True)
        ),
        Err(E.InputError, r"y is a pandas Series whose index lacks 30"),
    ),
    Case(
        "fit_arrays: weights Series beside an X frame, other order",
        d(),
        lambda data: lc.fit_arrays(
            data[["x"]].assign(one=1.0), data["y"].to_numpy(), weights=data["w"].iloc[::-1]
        ),
        Ok(
            lambda r, i: same(
                r.coefficients,
                lstsq(
                    i["data"][["x"]].assign(one=1.0).to_numpy(),
                    i["data"]["y"].to_numpy(),
                    i["data"]["w"].to_numpy(),
                ),
            )
        ),
    ),
    # -- many responses ----------------------------------------------------------------------
    Case(
        "fit_many: an all-missing response",
        d(col_q=np.nan, col_y2=lambda df: df["y"] * 2),
        lambda data: lc.fit_many("~ x", data, responses=["y", "q", "y2"]),
        # statsmodels OLS on the observed response; the empty one is flagged, not fitted
        Ok(
            lambda r, i: (
                r.n_obs.tolist() == [30, 0, 30]
                and "too few rows" in str(r)
                and same(
                    r.fit_of("y").coefficients,
                    sm.OLS(i["data"]["y"], xz(i["data"], "x")).fit().params,
                )
            )
        ),
    ),
    Case(
        "fit_many: pickled and restored",
        d(col_y2=lambda df: df["y"] * 2),
        lambda data: pickle.loads(pickle.dumps(lc.fit_many("~ x", data, responses=["y", "y2"]))),
        Ok(
            lambda r, i: same(
                r.fit_of("y2").coefficients,
                lstsq(xz(i["data"], "x"), 2 * i["data"]["y"].to_numpy()),
            )
        ),
    ),
    Case(
        "fit_many: response also a design variable",
        d(),
        lambda data: lc.fit_many("~ x", data, responses=["y", "x"]),
        Err(E.InputError, r"\['x'\] are also design"),
    ),
    Case(
        "fit_many: text response",
        d(col_s="a"),
        lambda data: lc.fit_many("~ x", data, responses=["y", "s"]),
        Err(E.InputError, "response 's' is not numeric"),
    ),
    Case(
        "fit_many: datetime design column",
        d(col_t=lambda df: pd.date_range("2024-01-01", periods=N)),
        lambda data: lc.fit_many("~ t", data, responses=["y"]),
        Err(E.InputError, "column 't' holds dates"),
    ),
    Case(
        "fit_many_arrays: responses of wrong length",
        d(),
        lambda data: lc.fit_many_arrays(xz(data, "x"), np.ones((N - 1, 2))),
        Err(E.InputError, "29 rows but the design has 30"),
    ),
    Case(
        "fit_many_arrays: text responses",
        d(),
        lambda data: lc.fit_many_arrays(xz(data, "x"), np.array([["a"]] * N)),
        Err(E.InputError, "numeric"),
    ),
    # -- chunks and Dask -----------------------------------------------------------------------
    Case(
        "fit_chunks: unseen level in a later chunk",
        d(),
        lambda data: lc.fit_chunks("y ~ x + g", sorted_chunks(data)),
        Err(E.UnseenLevelError, r"chunk 1 holds a factor level.*'zz'"),
    ),
    Case(
        "fit_chunks: timedelta column",
        d(col_t=lambda df: pd.to_timedelta(np.arange(N), "s")),
        lambda data: lc.fit_chunks("y ~ t", [data.iloc[:15], data.iloc[15:]]),
        Err(E.InputError, "column 't' holds time differences"),
    ),
    Case(
        "fit_chunks: weights as an array",
        d(),
        lambda data: lc.fit_chunks("y ~ x", [data], weights=data["w"].to_numpy()),
        Err(E.InputError, "weights must name a column"),
    ),
    Case(
        "fit_chunks: pyarrow strings",
        d(col_g=lambda df: df["g"].astype("string[pyarrow]")),
        lambda data: lc.fit_chunks("y ~ x + g", [data.iloc[:15], data.iloc[15:]]),
        # the in-memory fit on object strings (lstsq with indicators)
        Ok(
            lambda r, i: same(
                r.coefficients,
                lstsq(
                    np.column_stack(
                        [xz(i["data"], "x"), i["data"]["g"] == "b", i["data"]["g"] == "c"]
                    ).astype(float),
                    i["data"]["y"].to_numpy(),
                ),
            )
        ),
    ),
    Case(
        "fit_array_chunks: a chunk that is not a tuple",
        d(),
        lambda data: lc.fit_array_chunks([xz(data, "x")]),
        Err(E.InputError, "must be a tuple"),
    ),
    Case(
        "fit_dask: datetime column",
        d(col_t=lambda df: pd.date_range("2024-01-01", periods=N)),
        lambda data: lc.fit_dask("y ~ t", dask_frame(data)),
        Err(E.InputError, "'t'.*dates"),
    ),
    # -- combining, sharing, planning --------------------------------------------------------
    Case(
        "combine: different formulas",
        d(),
        lambda data: lc.combine([lc.fit("y ~ x", data), lc.fit("y ~ z", data)]),
        Err(E.IncompatibleFitError, ""),
    ),
    Case(
        "without_rows: then a row-based covariance",
        d(),
        lambda data: lc.without_rows(lc.fit("y ~ x", data)).wald(
            lc.coef("x") == 0, covariance="HC3"
        ),
        Err(E.RowsUnavailableError, "rows"),
    ),
    Case(
        "planned_design: no cells",
        d(),
        lambda data: lc.planned_design("g + x", data.iloc[:0]),
        Err(E.InputError, "no rows"),
    ),
    Case(
        "planned_design: datetime cells",
        d(col_t=lambda df: pd.date_range("2024-01-01", periods=N)),
        lambda data: lc.planned_design("g + t", data),
        Err(E.InputError, "column 't' holds dates"),
    ),
    Case(
        "power_plan: negative sigma",
        d(),
        lambda data: lc.power_plan(
            lc.planned_design("g", data.drop_duplicates("g")), lc.term("g") == 0, sigma=-1.0
        ),
        Err(E.ParameterError, "sigma"),
    ),
    # -- restrictions --------------------------------------------------------------------------
    Case(
        "coef: unknown name",
        fitted(),
        lambda data, fit: fit.wald(lc.coef("xx") == 0),
        Err(E.UnknownCoefficientError, "'xx'"),
    ),
    Case(
        "term: unknown level",
        fitted(),
        lambda data, fit: fit.wald(lc.term("g")["zz"] == 0),
        Err(E.UnknownCoefficientError, "zz"),
    ),
    Case(
        "from_matrix: frame holding text",
        fitted(),
        lambda data, fit: fit.wald(lc.from_matrix(pd.DataFrame({"x": ["1"]}))),
        Err(E.RestrictionShapeError, r"column\(s\) \['x'\]"),
    ),
    Case(
        "from_matrix: array holding text",
        fitted(),
        lambda data, fit: fit.wald(lc.from_matrix(np.array([["0", "1", "0", "0", "0"]]))),
        Err(E.RestrictionShapeError, "text"),
    ),
    Case(
        "from_matrix: infinite entry",
        fitted(),
        lambda data, fit: fit.wald(lc.from_matrix(np.array([[0, np.inf, 0, 0, 0.0]]))),
        Err(E.RestrictionShapeError, "inf"),
    ),
    Case(
        "levels: unknown factor",
        fitted(),
        lambda data, fit: fit.wald(lc.levels("nope").pairwise()),
        Err(E.LincombError, "nope"),
    ),
    Case(
        "wald: target NaN",
        fitted(),
        lambda data, fit: fit.wald(lc.coef("x") == np.nan),
        Err(E.LincombError, ""),
    ),
    Case(
        "restrict: contradictory rows",
        fitted(),
        lambda data, fit: fit.restrict((lc.coef("x") == 0) & (lc.coef("x") == 1)),
        Err(E.InconsistentRestrictionError, "contradict"),
    ),
    Case(
        "wald_batch: no systems",
        fitted(),
        lambda data, fit: fit.wald_batch([]),
        Err(E.LincombError, ""),
    ),
    Case(
        "with_covariance: unknown estimator",
        fitted(),
        lambda data, fit: fit.with_covariance("HC9"),
        Err(E.LincombError, "HC9"),
    ),
    # -- covariance inputs -------------------------------------------------------------------
    Case(
        "clustered: Series in another order",
        fitted(col_site=lambda df: np.arange(N) % 6),
        lambda data, fit: fit.std_errors(lc.clustered(by=data["site"].iloc[::-1])),
        # the same estimator given the column name (aligned by the library's own rows)
        Ok(lambda r, i: same(r, i["fit"].std_errors(lc.clustered(by="site")))),
    ),
    Case(
        "clustered: Series with a foreign index",
        fitted(col_site=lambda df: np.arange(N) % 6),
        lambda data, fit: fit.std_errors(lc.clustered(by=data["site"].reset_index(drop=True))),
        Err(E.CovarianceInputError, r"lacks 30 of their labels, e\.g\. \[100"),
    ),
    Case(
        "clustered: missing label",
        fitted(
            col_site=lambda df: pd.Series(np.arange(N) % 6, index=df.index).where(df.index != 105)
        ),
        lambda data, fit: fit.std_errors(lc.clustered(by="site")),
        Err(E.CovarianceInputError, "missing at row 105"),
    ),
    Case(
        "serial: time Series in another order",
        fitted(col_t=lambda df: np.arange(N)),
        lambda data, fit: fit.std_errors(lc.serial(2, order=data["t"].iloc[::-1])),
        Ok(lambda r, i: same(r, i["fit"].std_errors(lc.serial(2, order="t")))),
    ),
    Case(
        "given: wrong shape",
        fitted(),
        lambda data, fit: fit.with_covariance(lc.given(np.eye(2))),
        Err(E.LincombError, ""),
    ),
    # -- p-values and levels -----------------------------------------------------------------
    Case(
        "adjust_pvalues: p above 1",
        d(),
        lambda data: lc.adjust_pvalues([0.1, 1.5]),
        Err(E.LincombError, ""),
    ),
    Case(
        "adjust_pvalues: NaN",
        d(),
        lambda data: lc.adjust_pvalues([0.1, np.nan]),
        Err(E.LincombError, ""),
    ),
    Case(
        "adjust_pvalues: unknown method",
        d(),
        lambda data: lc.adjust_pvalues([0.1], "nope"),
        Err(E.LincombError, "nope"),
    ),
    Case(
        "coef_frame: level 1.5",
        fitted(),
        lambda data, fit: fit.coef_frame(level=1.5),
        Err(E.ParameterError, "level"),
    ),
    Case(
        "WaldTest.row_frame: level 0",
        fitted(),
        lambda data, fit: fit.wald(lc.coef("x") == 0).row_frame(level=0.0),
        Err(E.ParameterError, "level"),
    ),
    Case(
        "fit: rank_tol 2",
        d(),
        lambda data: lc.fit("y ~ x", data, rank_tol=2.0),
        Err(E.ParameterError, "rank_tol"),
    ),
]


# A column scaled beyond about 1e154 or below 1e-154 was once declared aliased, because squared
# column norms overflowed or underflowed: the rank decision must not depend on scale.
@pytest.mark.parametrize("scale", [1e300, 1e-300])
def test_extreme_column_scale_is_not_aliased(scale: float) -> None:
    df = frame()
    f = lc.fit("y ~ x", df.assign(x=df["x"] * scale))
    # reference: numpy's polyfit on the unscaled column (a slope rescales by 1/scale)
    assert f.aliased == ()
    assert same(f.coefficients.iloc[1] * scale, np.polyfit(df["x"], df["y"], 1)[0], 1e-7)


def test_response_near_1e300_fits() -> None:
    df = frame()
    f = lc.fit("y ~ x", df.assign(y=df["y"] * 1e300))
    # reference: numpy's lstsq on the unscaled response (coefficients rescale by 1e300)
    assert same(f.coefficients / 1e300, lstsq(xz(df, "x"), df["y"].to_numpy()), 1e-7)


def _finite(obj: Any) -> None:
    """Nothing non-finite returned silently (NaN only where the result says why: aliased)."""
    if isinstance(obj, lc.LinearFit):
        ok = ~obj.coefficients.index.isin(obj.aliased)
        assert np.isfinite(obj.coefficients[ok]).all() and np.isfinite(obj.sigma)
    elif isinstance(obj, lc.ManyFit):
        assert np.isfinite(np.asarray(obj.n_obs, float)).all()
    elif isinstance(obj, pd.Series | np.ndarray):
        assert np.isfinite(np.asarray(obj, float)).all()


def _unchanged(before: Any, after: Any) -> None:
    if isinstance(before, pd.DataFrame):
        pd.testing.assert_frame_equal(before, after)
    elif isinstance(before, pd.Series):
        pd.testing.assert_series_equal(before, after)
    elif isinstance(before, np.ndarray):
        np.testing.assert_array_equal(before, after)
    elif isinstance(before, list):
        assert before == after


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_bad_or_odd_input(case: Case) -> None:
    inputs = case.make()
    before = {k: copy.deepcopy(v) for k, v in inputs.items() if k != "fit"}
    if isinstance(case.expect, Err):
        with pytest.raises(E.LincombError) as info:  # a built-in exception would escape here
            case.run(**inputs)
        assert isinstance(info.value, case.expect.cls), type(info.value)
        assert re.search(case.expect.match, str(info.value), re.S), str(info.value)
        assert "\x1b[" not in str(info.value)  # no terminal colour codes
    else:
        result = case.run(**inputs)
        assert case.expect.check(result, inputs)
        _finite(result)
    for k, v in before.items():
        _unchanged(v, inputs[k])


def test_catalogue_size() -> None:
    assert len(CASES) >= 60
    assert len({c.name for c in CASES}) == len(CASES)
