"""The pass over a fit's rows behind a robust covariance: row blocks and remembered estimates.

References
----------
* statsmodels (numerical reference only): ``wls(...).fit(cov_type="cluster", cov_kwds={"groups":
  g}, use_t=True).cov_params()`` for one-way clustering (its default small-sample factor
  ``G/(G−1)·(N−1)/(N−K)`` is our default ``small_sample=True``), and with a two-column
  ``groups`` for two-way clustering (each of the three terms with its own factor, no clipping:
  the tests check that nothing is clipped); ``cov_type="HC3"`` for HC3.
* Data: seeded simulations (made here), large enough that an in-memory fit visits its rows in
  several blocks on one BLAS thread.  No Monte-Carlo quantity is estimated: the simulations only
  supply designs, so the checks are exact up to rounding.

Tolerance: ``rtol = 1e-8`` against statsmodels, as in ``tests/test_covariance.py`` (both sides
solve well-conditioned problems in double precision; observed differences are near 1e-12).
"""

from __future__ import annotations

import gc
import warnings
from dataclasses import dataclass, fields
from typing import Any

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf

import lincomb as lc
from lincomb._covariance import cache
from lincomb._covariance.in_memory import BLOCK_ELEMENTS, _limited
from lincomb._covariance.meats import ClusterMeat
from lincomb._covariance.specs import Clustered, CommonShocks, Heteroskedastic, Serial
from lincomb._fit.linear import fit_from_design
from lincomb.errors import FewClustersWarning

RTOL = 1e-8


def close(actual, desired, rtol: float = RTOL) -> None:
    np.testing.assert_allclose(np.asarray(actual, float), np.asarray(desired, float), rtol)


@pytest.fixture(scope="module")
def big() -> pd.DataFrame:
    # seeded simulation: 60,000 rows; 300 firms, 40 years; about 14,000 small cells
    rng = np.random.default_rng(20261203)
    n = 60_000
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    firm = rng.integers(0, 300, size=n)
    year = rng.integers(0, 40, size=n)
    cell = rng.integers(0, 14_000, size=n)
    e = (
        rng.normal(size=n) * (1 + 0.5 * np.abs(x1))
        + rng.normal(size=300)[firm] * 0.4
        + rng.normal(size=40)[year] * 0.3
    )
    w = rng.uniform(0.5, 2.0, size=n)
    return pd.DataFrame(
        {
            "y": 1 + 0.2 * x1 - 0.1 * x2 + e,
            "x1": x1,
            "x2": x2,
            "firm": firm,
            "year": year,
            "cell": cell,
            "w": w,
        }
    )


def _blocked(f: lc.LinearFit, clusters: int | None = None) -> None:
    assert f.n_obs > 2 * BLOCK_ELEMENTS // f.rank  # the blocked path runs
    if clusters is not None:  # ... and the cluster pass visits several blocks
        meat = ClusterMeat(f, ("g",), True, None, coded=(clusters,))
        step, limited = _limited(f, meat)
        assert limited and step < f.n_obs


def _sm_cluster(big: pd.DataFrame, form: str, groups, weighted: bool):
    if weighted:
        model = smf.wls(form, big, weights=big["w"])
    else:
        model = smf.ols(form, big)
    return model.fit(cov_type="cluster", cov_kwds={"groups": groups}, use_t=True)


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("by", ["firm", "cell"])
def test_blocked_one_way_cluster_against_statsmodels(big, by, weighted):
    # statsmodels cov_type="cluster" (use_correction=True) <-> clustered(by=...); "cell" has
    # about 14,000 clusters: blocks grow to 4 rows per cluster (56,000 rows, two blocks)
    form = "y ~ x1 + x2 + C(year % 3)"
    f = lc.fit(form, big, weights="w" if weighted else None)
    _blocked(f, big[by].nunique())
    sm = _sm_cluster(big, form, big[by].to_numpy(), weighted)
    cov = f.covariance(lc.clustered(by=by))
    names = list(sm.model.exog_names)
    close(cov.loc[names, names].to_numpy(), sm.cov_params().to_numpy())
    res = f.wald((lc.coef("x1") == 0) & (lc.coef("x2") == 0), covariance=lc.clustered(by=by))
    assert res.df_error == big[by].nunique() - 1


def test_blocked_two_way_cluster_against_statsmodels(big):
    # statsmodels cov_type="cluster" with groups (firm, year): V₁ + V₂ − V₁₂, unclipped; the
    # meat is positive definite here, so nothing is clipped on our side either
    form = "y ~ x1 + x2 + C(firm % 3)"
    f = lc.fit(form, big, weights="w")
    _blocked(f, big.groupby(["firm", "year"]).ngroups)  # the intersection cells
    sm = _sm_cluster(big, form, big[["firm", "year"]].to_numpy(), weighted=True)
    est = f.evaluate_covariance(lc.clustered(by=["firm", "year"]))
    assert est.clipped == 0 and est.groups == (300, 40)
    cov = f.covariance(est)
    names = list(sm.model.exog_names)
    close(cov.loc[names, names].to_numpy(), sm.cov_params().to_numpy())


# -- estimates remembered per fit ---------------------------------------------------------------
def test_an_estimate_is_computed_once_per_fit_and_estimator(big):
    f = lc.fit("y ~ x1 + x2", big)
    hc3 = f.evaluate_covariance("HC3")
    assert f.evaluate_covariance("HC3") is hc3
    assert f.evaluate_covariance("hc3 ") is hc3  # the same estimator, written otherwise
    assert f.evaluate_covariance("HC1") is not hc3
    by_name = f.evaluate_covariance(lc.clustered(by="firm"))
    assert f.evaluate_covariance(lc.clustered(by="firm")) is by_name
    assert f.evaluate_covariance(lc.clustered(by="firm", small_sample=False)) is not by_name
    labels = big["firm"].to_numpy()
    by_array = f.evaluate_covariance(lc.clustered(by=labels))
    assert f.evaluate_covariance(lc.clustered(by=labels.copy())) is by_array  # equal values
    assert f.with_covariance("HC3").covariance_estimate is hc3  # the copy shares the design
    # statsmodels cov_type="HC3" and "cluster": the remembered estimates are the right ones
    sm = smf.ols("y ~ x1 + x2", big)
    close(f.covariance("HC3").to_numpy(), sm.fit(cov_type="HC3").cov_params().to_numpy())
    sm_cl = sm.fit(cov_type="cluster", cov_kwds={"groups": labels}).cov_params().to_numpy()
    close(f.covariance(lc.clustered(by=labels)).to_numpy(), sm_cl)
    close(f.covariance(lc.clustered(by="firm")).to_numpy(), sm_cl)


def test_labels_changed_in_place_give_a_new_estimate(big):
    # the user's array is edited after a first test: the next test must use the new labels
    # (statsmodels cov_type="cluster" on the edited labels is the reference)
    f = lc.fit("y ~ x1 + x2", big)
    labels = big["firm"].to_numpy().copy()
    spec = lc.clustered(by=labels)
    first = f.evaluate_covariance(spec)
    labels[: len(labels) // 2] = 0  # half the rows join firm 0
    second = f.evaluate_covariance(spec)
    assert second is not first
    sm = smf.ols("y ~ x1 + x2", big).fit(cov_type="cluster", cov_kwds={"groups": labels})
    close(f.covariance(spec).to_numpy(), sm.cov_params().to_numpy())
    renamed = big["firm"].rename("plant")  # same values, another name: another label
    assert f.evaluate_covariance(lc.clustered(by=renamed)).label.startswith("cluster by plant")
    assert f.evaluate_covariance(lc.clustered(by=big["firm"])).label.startswith("cluster by firm")


def test_a_refit_of_the_same_design_gets_its_own_estimate(big):
    f = lc.fit("y ~ x1 + x2", big)
    est = f.evaluate_covariance("HC3")
    g = fit_from_design(f.design, f.rank_tol)  # same design object, a new solution
    other = g.evaluate_covariance("HC3")
    assert other is not est and other.solution is g.solution
    close(g.covariance("HC3").to_numpy(), f.covariance("HC3").to_numpy(), rtol=1e-12)


def test_a_remembered_estimate_warns_as_a_new_one(big):
    # 12 clusters, fewer than the 30 below which every cluster-robust test warns
    f = lc.fit("y ~ x1 + x2", big)
    spec = lc.clustered(by=(big["year"] % 12).to_numpy())
    for _ in range(2):
        with pytest.warns(FewClustersWarning, match=r"labels \(12\)") as record:
            f.wald(lc.coef("x1") == 0, covariance=spec)
        assert record[0].filename == __file__  # pointed at the caller's line both times


def test_remembered_estimates_go_with_the_fit(big):
    f = lc.fit("y ~ x1 + x2", big)
    f.evaluate_covariance("HC3")
    key = id(f.design)
    assert key in cache._ENTRIES
    del f
    gc.collect()
    assert key not in cache._ENTRIES


def test_at_most_a_few_estimates_are_kept_per_fit(big):
    f = lc.fit("y ~ x1 + x2", big)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FewClustersWarning)
        for g in range(2, 2 + cache.KEPT_PER_FIT + 3):
            f.evaluate_covariance(lc.clustered(by=(big["firm"] % g).to_numpy()))
    assert len(cache._ENTRIES[id(f.design)].kept) == cache.KEPT_PER_FIT


@dataclass(frozen=True, eq=False)
class _WithNewOption(Heteroskedastic):
    """An estimator given one more field, as a later change might (its evaluation ignores it)."""

    extra: float = 1.0
    extra_rows: Any = None


def test_a_new_field_of_an_estimator_is_part_of_what_is_remembered(big):
    # the key is derived from the fields: a new option separates estimates without being listed
    f = lc.fit("y ~ x1 + x2", big)
    one = f.evaluate_covariance(_WithNewOption("HC1", extra=1.0))
    assert f.evaluate_covariance(_WithNewOption("HC1", extra=1.0)) is one
    assert f.evaluate_covariance(_WithNewOption("HC1", extra=0.5)) is not one
    assert f.evaluate_covariance(Heteroskedastic("HC1")) is not one  # another type
    # a new field holding per-row data but not declared a row field: never kept, never stale
    rows = np.zeros(f.n_obs)
    spec = _WithNewOption("HC1", extra_rows=rows)
    assert f.evaluate_covariance(spec) is not f.evaluate_covariance(spec)


@pytest.mark.parametrize("kind", [Heteroskedastic, Clustered, Serial, CommonShocks])
def test_row_fields_are_fields(kind):
    # a misspelt row field would turn per-row data into an option
    assert kind.ROW_FIELDS is not None
    assert set(kind.ROW_FIELDS) <= {f.name for f in fields(kind)}


def test_estimators_that_read_no_rows_are_not_kept(big):
    f = lc.fit("y ~ x1 + x2", big)
    assert f.evaluate_covariance("classical") is not f.evaluate_covariance("classical")
    given = lc.given(f.covariance("HC3"))
    assert f.evaluate_covariance(given) is not f.evaluate_covariance(given)
