"""Panel covariances against statsmodels (numerical reference only) and direct formulas.

References
----------
* Newey–West within units: statsmodels
  ``OLS(y, X).fit(cov_type="hac-panel", cov_kwds={"groups": unit_codes, "maxlags": L,
  "use_correction": False | "hac"})`` on rows sorted by unit and time (it needs that order);
  ``use_correction="hac"`` is our ``small_sample=True`` (``n/(n−k)``).
* Scores summed per time point (Driscoll–Kraay type): statsmodels
  ``OLS(y, X).fit(cov_type="hac-groupsum", cov_kwds={"time": week, "maxlags": L,
  "use_correction": False | "hac"})``.
* LIBRARY-NOTES: statsmodels' Newey–West agrees with a 40-digit recomputation only to about
  1e-10 relative, so the tolerance is rtol 1e-8 (observed here: about 1e-14).
* Two-way clustering with one small-sample factor from the smaller dimension: the direct
  inclusion–exclusion formula written below (Cameron, Gelbach and Miller 2011, eq. 2.13) with
  the factor ``G_min/(G_min−1)·(N−1)/(N−K)`` on all three terms.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import lincomb as lc
from lincomb.errors import CovarianceInputError, FewClustersWarning, TiedTimesError

RTOL = 1e-8


@pytest.fixture(scope="module")
def shuffled() -> pd.DataFrame:
    # the bundled service-sites panel (40 sites × 26 weeks), rows shuffled so that order must
    # come from the time column, not the row order
    return lc.datasets.service_sites().sample(frac=1.0, random_state=1)


@pytest.mark.parametrize("lag", [0, 1, 3])
@pytest.mark.parametrize("small", [False, True])
def test_within_units_against_statsmodels(shuffled, lag, small):
    f = lc.fit("wait_min ~ staffing + protocol", shuffled)
    x = f.encode(shuffled).to_numpy()
    y = shuffled["wait_min"].to_numpy()
    order = np.lexsort((shuffled["week"].to_numpy(), shuffled["site"].cat.codes.to_numpy()))
    ref = sm.OLS(y[order], x[order]).fit(
        cov_type="hac-panel",
        cov_kwds={
            "groups": shuffled["site"].cat.codes.to_numpy()[order],
            "maxlags": lag,
            "use_correction": "hac" if small else False,
        },
    )
    spec = lc.serial(lag=lag, order="week", units="site", small_sample=small)
    np.testing.assert_allclose(f.covariance(spec).to_numpy(), ref.cov_params(), rtol=RTOL)


@pytest.mark.parametrize("lag", [0, 2, 4])
@pytest.mark.parametrize("small", [False, True])
def test_common_shocks_against_statsmodels(shuffled, lag, small):
    f = lc.fit("wait_min ~ staffing + protocol", shuffled)
    x = f.encode(shuffled).to_numpy()
    ref = sm.OLS(shuffled["wait_min"].to_numpy(), x).fit(
        cov_type="hac-groupsum",
        cov_kwds={
            "time": shuffled["week"].to_numpy(),
            "maxlags": lag,
            "use_correction": "hac" if small else False,
        },
    )
    spec = lc.common_shocks(time="week", lag=lag, small_sample=small)
    np.testing.assert_allclose(f.covariance(spec).to_numpy(), ref.cov_params(), rtol=RTOL)
    res = f.wald(lc.coef("staffing") == 0, covariance=spec)
    assert res.df_error == 25  # T − 1 time points


def test_common_shocks_direct_formula_with_weights():
    # direct: scores x̃_i ẽ_i summed per week, Bartlett-weighted lag sums, sandwich
    rng = np.random.default_rng(0)
    d = lc.datasets.service_sites().assign(w=rng.uniform(0.5, 2.0, 1040))
    f = lc.fit("wait_min ~ staffing", d, weights="w")
    x = f.encode(d).to_numpy()
    sw = np.sqrt(d["w"].to_numpy())
    xt, yt = x * sw[:, None], d["wait_min"].to_numpy() * sw
    b = np.linalg.lstsq(xt, yt, rcond=None)[0]
    sc = xt * (yt - xt @ b)[:, None]
    weeks = np.sort(d["week"].unique())
    s = np.array([sc[d["week"].to_numpy() == t].sum(axis=0) for t in weeks])
    lag = 3
    meat = s.T @ s
    for ell in range(1, lag + 1):
        gam = s[ell:].T @ s[:-ell]
        meat += (1 - ell / (lag + 1)) * (gam + gam.T)
    bread = np.linalg.inv(xt.T @ xt)
    expected = bread @ meat @ bread
    got = f.covariance(lc.common_shocks(time="week", lag=lag)).to_numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-10)


def test_common_shocks_in_a_chunked_second_pass():
    sites = lc.datasets.service_sites()

    def parts():
        return (sites.iloc[i : i + 250] for i in range(0, len(sites), 250))

    f = lc.fit_chunks("wait_min ~ staffing + protocol", parts())
    g = lc.fit("wait_min ~ staffing + protocol", sites)
    spec = lc.common_shocks(time="week", lag=2)
    est = lc.chunk_covariance_pass(f, parts(), spec)
    np.testing.assert_allclose(
        f.covariance(est).to_numpy(), g.covariance(spec).to_numpy(), rtol=1e-10
    )


def test_within_units_refuses_ties_and_second_passes():
    d = lc.datasets.service_sites()
    f = lc.fit("wait_min ~ staffing", d)
    with pytest.raises(TiedTimesError, match=r"repeats the value .* within unit 'S01'"):
        f.covariance(lc.serial(lag=1, order="protocol", units="site"))
    assert issubclass(TiedTimesError, CovarianceInputError)
    with pytest.raises(CovarianceInputError, match="needs the time order"):
        f.covariance(lc.serial(lag=1, units="site"))
    with pytest.raises(CovarianceInputError, match="not smaller than the longest unit"):
        f.covariance(lc.serial(lag=26, order="week", units="site"))

    def parts():
        return (d.iloc[i : i + 500] for i in range(0, len(d), 500))

    fc = lc.fit_chunks("wait_min ~ staffing", parts())
    with pytest.raises(CovarianceInputError, match="not available for fits built from chunks"):
        lc.chunk_covariance_pass(fc, parts(), lc.serial(lag=1, order="week", units="site"))


def test_automatic_lags():
    d = lc.datasets.service_sites()
    f = lc.fit("wait_min ~ staffing", d)
    # floor(4 (26/100)^(2/9)) = 2 for 26 weeks (Newey and West 1994 rule of thumb)
    assert int(np.floor(4 * (26 / 100) ** (2 / 9))) == 2
    assert lc.common_shocks(time="week").evaluate(f).lag == 2
    assert lc.serial(order="week", units="site").evaluate(f).lag == 2


def _one_way(q, e, g):
    codes = pd.factorize(pd.Series(g))[0]
    s = np.zeros((codes.max() + 1, q.shape[1]))
    np.add.at(s, codes, q * e[:, None])
    return s.T @ s


def test_two_way_smaller_factor_against_direct():
    rng = np.random.default_rng(7)
    n = 400
    a = rng.integers(0, 40, n)
    b = rng.integers(0, 6, n)
    x = np.column_stack([np.ones(n), rng.normal(size=n), rng.normal(size=n)])
    y = x @ [1.0, 0.5, -0.2] + rng.normal(size=n) + rng.normal(size=6)[b]
    d = pd.DataFrame({"y": y, "x1": x[:, 1], "x2": x[:, 2], "a": a, "b": b})
    f = lc.fit("y ~ x1 + x2", d)
    e = y - x @ np.linalg.lstsq(x, y, rcond=None)[0]
    qm, r = np.linalg.qr(x)
    inter = [f"{i}-{j}" for i, j in zip(a, b, strict=True)]
    gmin = 6
    factor = gmin / (gmin - 1) * (n - 1) / (n - 3)
    meat = factor * (_one_way(qm, e, a) + _one_way(qm, e, b) - _one_way(qm, e, inter))
    lam, u = np.linalg.eigh(meat)
    meat = (u * np.clip(lam, 0, None)) @ u.T
    rinv = np.linalg.solve(r, np.eye(3))
    expected = rinv @ meat @ rinv.T
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FewClustersWarning)
        spec = lc.clustered(by=["a", "b"], two_way_factor="smaller")
        got = f.covariance(spec).to_numpy()
        label = f.wald(lc.coef("x1") == 0, covariance=spec).covariance
        per_term = f.covariance(lc.clustered(by=["a", "b"])).to_numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-10)
    assert "one small-sample factor" in label
    assert not np.allclose(got, per_term)  # the option changes the numbers
