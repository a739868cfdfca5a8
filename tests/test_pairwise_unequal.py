"""Pairwise differences of group means: the studentized-range method (Tukey–Kramer type) and
per-pair variances with Welch df (Games–Howell type).

References
----------
* statsmodels (numerical reference only):
  ``statsmodels.stats.multicomp.pairwise_tukeyhsd(y, groups, alpha=0.05)`` gives the
  Tukey–Kramer intervals (``confint``) and adjusted p-values (``pvalues``) for unequal group
  sizes with the pooled variance.
* Games–Howell: the direct formula written in the test (per-pair Welch t and df, and the
  studentized range at those df via ``scipy.stats.studentized_range``).
* Studentized range critical value q(0.95; 4, 20) = 3.958: handbook table (from memory), common
  practice; checked in :func:`lincomb._core.maxt.studentized_range_critical`'s doctest.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.multicomp import pairwise_tukeyhsd

import lincomb as lc
from lincomb.errors import InputError


@pytest.fixture(scope="module")
def unequal() -> pd.DataFrame:
    rng = np.random.default_rng(3)
    sizes = [5, 8, 12, 7]
    g = np.repeat(list("abcd"), sizes)
    y = rng.normal(size=g.size) * np.repeat([1, 2, 0.5, 3], sizes) + np.repeat(
        [0, 1, 1.5, 0.2], sizes
    )
    return pd.DataFrame({"y": y, "g": g})


def test_studentized_range_matches_pairwise_tukeyhsd(unequal):
    f = lc.fit("y ~ g", unequal)
    res = f.wald(lc.levels("g").pairwise())
    sim = res.simultaneous("studentized-range", 0.95)
    ref = pairwise_tukeyhsd(unequal["y"], unequal["g"], alpha=0.05)
    # statsmodels' pairs (a,b), (a,c), ... are in the same order; meandiff = later − earlier
    np.testing.assert_allclose(sim.estimate, ref.meandiffs, rtol=1e-12)
    np.testing.assert_allclose(sim.lower, ref.confint[:, 0], rtol=1e-9)
    np.testing.assert_allclose(sim.upper, ref.confint[:, 1], rtol=1e-9)
    np.testing.assert_allclose(sim.p_adjusted, ref.pvalues, rtol=1e-6)
    adj = res.adjust("studentized-range")
    np.testing.assert_allclose(adj.p_adjusted, sim.p_adjusted, rtol=1e-12)
    text = repr(sim)
    assert "Tukey–Kramer type" in text and "approximation" in text
    assert "exact" in repr(res.simultaneous("max-t", 0.95))  # the exact method says so


def test_studentized_range_refuses_a_family_that_is_not_all_pairs(unequal):
    f = lc.fit("y ~ g", unequal)
    with pytest.raises(InputError, match="all pairwise differences"):
        f.wald(lc.levels("g").versus("a")).simultaneous("studentized-range")


def test_separate_variances_against_direct_formula(unequal):
    res = lc.pairs_unequal_variances(unequal, "y", "g", level=0.9)
    stats_ = unequal.groupby("g")["y"].agg(["mean", "var", "size"])
    names = list(stats_.index)
    k = len(names)
    i = 0
    for a in range(k):
        for b in range(a + 1, k):
            ma, va, na = stats_.iloc[a]
            mb, vb, nb = stats_.iloc[b]
            se = np.sqrt(va / na + vb / nb)
            df = (va / na + vb / nb) ** 2 / ((va / na) ** 2 / (na - 1) + (vb / nb) ** 2 / (nb - 1))
            t = (mb - ma) / se
            q = stats.studentized_range.ppf(0.9, k, df) / np.sqrt(2)
            assert res.labels[i] == f"g[{names[b]}] - g[{names[a]}]"
            assert res.estimate[i] == pytest.approx(mb - ma, rel=1e-12)
            assert res.se[i] == pytest.approx(se, rel=1e-12)
            assert res.row_df[i] == pytest.approx(df, rel=1e-12)
            assert res.p[i] == pytest.approx(2 * stats.t.sf(abs(t), df), rel=1e-10)
            p_adj = stats.studentized_range.sf(np.sqrt(2) * abs(t), k, df)
            assert res.p_adjusted[i] == pytest.approx(p_adj, rel=1e-8)
            assert res.lower[i] == pytest.approx(mb - ma - q * se, rel=1e-9)
            assert res.upper[i] == pytest.approx(mb - ma + q * se, rel=1e-9)
            i += 1
    frame = res.to_frame()
    assert (frame["method"] == "separate-variances").all()
    np.testing.assert_allclose(frame["critical_value"], res.critical_values)
    assert "Games–Howell type" in repr(res) and "Welch" in repr(res)


def test_separate_variances_errors(unequal):
    with pytest.raises(InputError, match="no column 'z'"):
        lc.pairs_unequal_variances(unequal, "z", "g")
    one = unequal[unequal["g"].isin(["a"])]
    with pytest.raises(InputError, match="at least two"):
        lc.pairs_unequal_variances(one, "y", "g")
    single = pd.concat([unequal, pd.DataFrame({"y": [1.0], "g": ["e"]})])
    with pytest.raises(InputError, match="group 'e' of 'g' has 1 row"):
        lc.pairs_unequal_variances(single, "y", "g")
