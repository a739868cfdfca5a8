"""The wild cluster bootstrap against brute-force refit loops and a seeded size simulation.

References
----------
* Brute force: for each weight vector, the response ``Xβ̃ + w_g ẽ_r`` is built from the
  restricted fit, refitted with ``lc.fit`` and tested with ``fit.wald(r,
  covariance=lc.clustered(by=...))``; the vectorized statistics must agree to 1e-10 relative
  (the same weights: every Rademacher vector, and random Webb vectors).
* Size: a seeded simulation under the null with 10 clusters (Monte-Carlo error stated in the
  test); the full table for 6, 10 and 30 clusters is printed by
  ``benchmarks/size_few_clusters.py``.
* Webb's six points (±√(3/2), ±1, ±√(1/2)): Webb (2014), Queen's Economics Department Working
  Paper 1315 (from memory).
"""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pandas as pd
import pytest

import lincomb as lc
from lincomb._covariance.wild import bootstrap_weights, draw_statistics
from lincomb.errors import InputError, SingularCovarianceError

RTOL = 1e-10


def _data(seed: int, groups: int = 6) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    sizes = rng.integers(4, 9, groups)
    g = np.repeat(np.arange(groups), sizes)
    n = g.size
    df = pd.DataFrame(
        {"x1": rng.normal(size=n), "x2": rng.normal(size=n), "g": g, "w": rng.uniform(0.5, 2, n)}
    )
    df["y"] = 1 + df.x1 + rng.normal(size=n) + rng.normal(size=groups)[g]
    return df


def _brute(df, weights, r, w):
    x = np.column_stack([np.ones(len(df)), df.x1, df.x2])
    wt = None if weights is None else df[weights].to_numpy()
    names = ["Intercept", "x1", "x2"]
    f = lc.fit_arrays(x, df.y.to_numpy(), weights=wt, names=names)
    beta = f.restrict(r).coefficients.to_numpy()
    er = df.y.to_numpy() - x @ beta
    g = df.g.to_numpy()
    out = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for wv in w:
            f2 = lc.fit_arrays(x, x @ beta + wv[g] * er, weights=wt, names=names)
            out.append(f2.wald(r, covariance=lc.clustered(by=g)).stat)
    return np.array(out)


@pytest.mark.parametrize("weights", [None, "w"])
@pytest.mark.parametrize("system", ["one row", "two rows"])
def test_draws_equal_brute_force_refits(weights, system):
    df = _data(2)
    r = lc.coef("x1") == 1
    if system == "two rows":
        r = r & (lc.coef("x2") == 0.2)
    f = lc.fit("y ~ x1 + x2", df, weights=weights)
    rademacher = np.array(list(itertools.product([-1.0, 1.0], repeat=6)))[::3]  # 22 of 64
    webb, _ = bootstrap_weights("webb", 6, 20, 5, False)
    for w in (rademacher, webb):
        obs, fast = draw_statistics(f, r, "g", w)
        np.testing.assert_allclose(fast, _brute(df, weights, r, w), rtol=RTOL)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            plain = f.wald(r, covariance=lc.clustered(by="g")).stat
        assert obs == pytest.approx(plain, rel=RTOL)


def test_enumeration_and_p_value():
    df = _data(3)
    f = lc.fit("y ~ x1 + x2", df)
    r = lc.coef("x1") == 1
    res = lc.wild_bootstrap(f, r, by="g")
    assert res.enumerated and res.draws == 64 and res.mc_error == 0.0
    # the p-value is the share of all 64 sign vectors with an F at least the observed one
    w = np.array(list(itertools.product([-1.0, 1.0], repeat=6)))
    brute = _brute(df, None, r, w)
    assert res.p == pytest.approx(np.mean(brute >= res.stat * (1 - 1e-10)))
    # random draws when the vectors outnumber them; Monte-Carlo error from the binomial
    rnd = lc.wild_bootstrap(f, r, by="g", draws=50, seed=1)
    assert not rnd.enumerated and rnd.draws == 50
    assert rnd.mc_error == pytest.approx(np.sqrt(rnd.p * (1 - rnd.p) / 50))
    again = lc.wild_bootstrap(f, r, by="g", draws=50, seed=1)
    assert again.p == rnd.p  # seeded


def test_interval_ends_are_where_the_p_value_crosses():
    df = _data(4, groups=8)
    f = lc.fit("y ~ x1 + x2", df)
    res = lc.wild_bootstrap(f, lc.coef("x1") == 1, by="g", draws=399, seed=2)
    ci = res.interval(0, 0.9).iloc[0]
    width = ci["upper"] - ci["lower"]
    eps = 1e-4 * width
    for end, inside in ((ci["lower"], ci["lower"] + eps), (ci["upper"], ci["upper"] - eps)):
        outside = 2 * end - inside
        p_in = lc.wild_bootstrap(f, lc.coef("x1") == inside, by="g", draws=399, seed=2).p
        p_out = lc.wild_bootstrap(f, lc.coef("x1") == outside, by="g", draws=399, seed=2).p
        assert p_in > 0.1 >= p_out  # the ends separate p above and at most 1 - level


def test_size_with_ten_clusters_is_near_nominal():
    # seeded simulation under the null, 10 clusters of 8 rows, cluster-level regressor and
    # errors with a cluster effect: 300 replications of a 5% test.  The Monte-Carlo standard
    # error of a 5% rejection rate is sqrt(.05 · .95 / 300) = 0.0126; the bootstrap must lie
    # within 3.5 of them of 0.05.  (Full table: benchmarks/size_few_clusters.py.)
    rng = np.random.default_rng(20261202)
    g = np.repeat(np.arange(10), 8)
    rejections = 0
    reps = 300
    for _ in range(reps):
        xg = rng.lognormal(size=10)  # skewed cluster-level regressor: leverage on few clusters
        x = np.column_stack([np.ones(80), xg[g] + 0.2 * rng.normal(size=80)])
        y = rng.normal(size=10)[g] + rng.normal(size=80)
        f = lc.fit_arrays(x, y, names=["Intercept", "x"])
        res = lc.wild_bootstrap(f, lc.coef("x") == 0, by=g, draws=199, seed=1)
        rejections += res.p <= 0.05
    rate = rejections / reps
    assert abs(rate - 0.05) < 3.5 * np.sqrt(0.05 * 0.95 / reps)


def test_errors():
    df = _data(5)
    f = lc.fit("y ~ x1 + x2", df)
    with pytest.raises(InputError, match="unknown bootstrap weights"):
        lc.wild_bootstrap(f, lc.coef("x1") == 0, by="g", weights="normal")
    with pytest.raises(InputError, match="draws must be"):
        lc.wild_bootstrap(f, lc.coef("x1") == 0, by="g", draws=0)
    with pytest.raises(InputError, match="enumerating"):
        bootstrap_weights("webb", 12, 10, 0, True)
    g2 = np.repeat([0, 1], [len(df) // 2, len(df) - len(df) // 2])
    with pytest.raises(SingularCovarianceError, match="G − 1 = 1"):
        lc.wild_bootstrap(f, (lc.coef("x1") == 0) & (lc.coef("x2") == 0), by=g2)


def test_reprs_and_frame():
    df = _data(6)
    f = lc.fit("y ~ x1 + x2", df)
    res = lc.wild_bootstrap(f, lc.coef("x1") == 0, by="g", weights="webb", draws=99, seed=4)
    text = repr(res)
    assert "Wild cluster bootstrap" in text and "webb" in text and "seed 4" in text
    assert "<table>" in res._repr_html_()
    frame = res.to_frame()
    assert frame["p"].iloc[0] == res.p and frame["weights"].iloc[0] == "webb"
