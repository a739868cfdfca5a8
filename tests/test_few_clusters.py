"""Few-cluster covariances: bias-reduced and jackknife cluster-robust estimators and their
small-sample degrees of freedom, against direct formulas written here with explicit ``n × n``
matrices (fine at test sizes) and brute-force delete-one-cluster refits.

References
----------
* Bias-reduced meat: Bell and McCaffrey (2002), Survey Methodology 28:169-181, the adjustment
  ``(I − H_gg)^{-1/2}`` of each cluster's residuals; written below with ``numpy.linalg.eigh`` of
  each ``n_g × n_g`` block of ``I − H``.
* Jackknife: ``(G−1)/G Σ_g (β̂₍g₎ − β̂)(β̂₍g₎ − β̂)ᵀ`` from ``G`` refits without cluster ``g``
  (brute force, ``numpy.linalg.lstsq``).
* Row df: Satterthwaite's ``(tr Ω)² / tr(Ω²)`` with ``Ω = QᵀQ``, ``Q = [(I − H) P_g]_g`` built
  explicitly (Bell and McCaffrey 2002, sec. 3).
* System df: the Hotelling-T² approximation's ``η = q(q+1) / Σ_{s,t} Var(V̂*_st)`` with the
  Gaussian fourth moments written term by term over pairs of clusters (Pustejovsky and Tipton
  2018, J. Bus. Econ. Stat. 36:672-683, describe the approximation; the formula here is
  derived from ``Var(εᵀAε) = 2σ⁴ tr(A²)`` for symmetric ``A``, common practice).
* A seeded simulation (Monte-Carlo error stated) of the variance estimate's mean.

Tolerance: 1e-10 relative (both sides are double-precision computations of the same algebra).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import lincomb as lc
from lincomb.errors import CovarianceInputError, FewClustersWarning

RTOL = 1e-10


def _data(seed: int, groups: int = 8, weights: bool = False) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    sizes = rng.integers(3, 9, groups)
    g = np.repeat(np.arange(groups), sizes)
    n = g.size
    df = pd.DataFrame({"x1": rng.normal(size=n) + 0.3 * g, "x2": rng.normal(size=n), "g": g})
    df["w"] = rng.uniform(0.5, 2.0, n) if weights else 1.0
    df["y"] = 1 + df.x1 - 0.5 * df.x2 + rng.normal(size=n) + rng.normal(size=groups)[g]
    return df


def _direct(df: pd.DataFrame, power: float):
    """Tilde design, hat matrix, residuals and the adjustment matrices per cluster."""
    x = np.column_stack([np.ones(len(df)), df.x1, df.x2])
    sw = np.sqrt(df.w.to_numpy())
    xt, yt = x * sw[:, None], df.y.to_numpy() * sw
    xtx_inv = np.linalg.inv(xt.T @ xt)  # explicit inverse: fine in a reference computation
    b = xtx_inv @ xt.T @ yt
    e = yt - xt @ b
    h = xt @ xtx_inv @ xt.T
    g = df.g.to_numpy()
    adj = {}
    for j in np.unique(g):
        idx = g == j
        lam, u = np.linalg.eigh(np.eye(idx.sum()) - h[np.ix_(idx, idx)])
        adj[j] = (u * lam**-power) @ u.T
    return xt, yt, b, e, h, g, xtx_inv, adj


def _q_matrix(df, power, c):
    xt, _, _, _, h, g, xtx_inv, adj = _direct(df, power)
    n = len(df)
    cols = []
    for j, a in adj.items():
        idx = g == j
        p = np.zeros(n)
        p[idx] = a @ xt[idx] @ xtx_inv @ c
        cols.append((np.eye(n) - h) @ p)
    return np.array(cols).T


@pytest.mark.parametrize("weights", [False, True])
@pytest.mark.parametrize("adjust,power", [("bias-reduced", 0.5), ("jackknife", 1.0)])
def test_adjusted_covariance_against_direct_formula(weights, adjust, power):
    df = _data(1, weights=weights)
    f = lc.fit("y ~ x1 + x2", df, weights="w" if weights else None)
    xt, yt, b, e, _, g, xtx_inv, adj = _direct(df, power)
    meat = np.zeros((3, 3))
    for j, a in adj.items():
        idx = g == j
        s = xt[idx].T @ a @ e[idx]
        meat += np.outer(s, s)
    groups = len(adj)
    scale = 1.0 if adjust == "bias-reduced" else (groups - 1) / groups
    expected = scale * xtx_inv @ meat @ xtx_inv
    got = f.covariance(lc.clustered(by="g", adjust=adjust)).to_numpy()
    np.testing.assert_allclose(got, expected, rtol=RTOL, atol=1e-14)
    if adjust == "jackknife":
        # brute force: G refits without one cluster each
        loo = np.array([np.linalg.lstsq(xt[g != j], yt[g != j], rcond=None)[0] for j in adj])
        jack = (groups - 1) / groups * (loo - b).T @ (loo - b)
        np.testing.assert_allclose(got, jack, rtol=RTOL, atol=1e-14)


@pytest.mark.parametrize("weights", [False, True])
@pytest.mark.parametrize("adjust,power", [("bias-reduced", 0.5), ("jackknife", 1.0)])
def test_row_df_and_system_df_against_direct(weights, adjust, power):
    df = _data(2, groups=9, weights=weights)
    f = lc.fit("y ~ x1 + x2", df, weights="w" if weights else None)
    spec = lc.clustered(by="g", adjust=adjust)
    rows = np.array([[0.0, 1.0, 0.0], [0.0, 1.0, -1.0]])
    res = f.wald(lc.from_matrix(rows, [1.0, 0.5]), covariance=spec)
    qs = [_q_matrix(df, power, c) for c in rows]
    for i, q in enumerate(qs):
        om = q.T @ q
        nu = np.trace(om) ** 2 / np.trace(om @ om)
        assert res.row_df[i] == pytest.approx(nu, rel=RTOL)
    # system: standardize so the working-model mean is I, then η = q(q+1)/Σ Var
    mean = np.array([[np.sum(qa * qb) for qb in qs] for qa in qs])
    linv = np.linalg.inv(np.linalg.cholesky(mean))
    qstar = [sum(linv[s, t] * qs[t] for t in range(2)) for s in range(2)]
    total = 0.0
    for s in range(2):
        for t in range(2):
            oss, ott = qstar[s].T @ qstar[s], qstar[t].T @ qstar[t]
            ost, ots = qstar[s].T @ qstar[t], qstar[t].T @ qstar[s]
            total += np.sum(oss * ott) + np.sum(ost * ots)
    eta = 2 * 3 / total
    assert res.df_error == pytest.approx(eta - 2 + 1, rel=RTOL)
    plain_quad = res.df_test * res.stat * eta / (eta - 1)  # undo the Hotelling scaling
    cov = res.estimate_covariance
    delta = res.estimate - res.target
    assert plain_quad == pytest.approx(delta @ np.linalg.solve(cov, delta), rel=RTOL)
    assert res.p == pytest.approx(stats.f.sf(res.stat, 2, eta - 1), rel=1e-9)
    # a single row: the system's F is the row's t², on the row's df
    one = f.wald(lc.coef("x1") == 1, covariance=spec)
    assert one.stat == pytest.approx(one.ratio[0] ** 2, rel=RTOL)
    assert one.df_error == pytest.approx(one.row_df[0], rel=RTOL)
    assert one.row_frame()["df_error"].iloc[0] == pytest.approx(one.row_df[0])


def test_bias_reduced_is_unbiased_under_the_working_model():
    # seeded simulation: independent homoskedastic errors, fixed design; the mean of the
    # bias-reduced variance of the x1 coefficient over 600 draws must match the true
    # variance σ² [(XᵀX)⁻¹]₁₁ within 4 Monte-Carlo standard errors.
    df = _data(5, groups=6)
    x = np.column_stack([np.ones(len(df)), df.x1, df.x2])
    true = np.linalg.inv(x.T @ x)[1, 1]
    rng = np.random.default_rng(11)
    g = df.g.to_numpy()
    spec = lc.clustered(by=g, adjust="bias-reduced")
    draws = []
    for _ in range(600):
        f = lc.fit_arrays(x, x @ [1.0, 1.0, -0.5] + rng.normal(size=len(df)))
        draws.append(f.covariance(spec).iloc[1, 1])
    draws = np.array(draws)
    mc = draws.std(ddof=1) / np.sqrt(draws.size)
    assert abs(draws.mean() - true) < 4 * mc


def test_coef_frame_uses_each_coefficients_df():
    df = _data(3)
    f = lc.fit("y ~ x1 + x2", df)
    spec = lc.clustered(by="g", adjust="bias-reduced")
    frame = f.coef_frame(covariance=spec)
    for name in f.names:
        row = f.wald(lc.coef(name) == 0, covariance=spec).row_frame().iloc[0]
        got = frame.set_index("coefficient").loc[name]
        assert got["df_error"] == pytest.approx(row["df_error"], rel=RTOL)
        assert got["p"] == pytest.approx(row["p"], rel=1e-9)


def test_adjusted_estimators_need_no_warning_and_the_plain_one_names_them():
    df = _data(4)
    f = lc.fit("y ~ x1 + x2", df)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        f.wald(lc.coef("x1") == 0, covariance=lc.clustered(by="g", adjust="bias-reduced"))
        f.wald(lc.coef("x1") == 0, covariance=lc.clustered(by="g", adjust="jackknife"))
    with pytest.warns(FewClustersWarning, match="adjust='bias-reduced'.*wild_bootstrap"):
        f.wald(lc.coef("x1") == 0, covariance=lc.clustered(by="g"))


def test_cluster_fixed_effects_use_the_pseudo_inverse():
    # with cluster dummies each I − H_gg is singular in the dummy direction; that direction
    # carries a zero residual sum and is dropped (documented), the rest is the direct formula.
    df = _data(6, groups=6)
    f = lc.fit("y ~ x1 + x2 + C(g)", df)
    x = f.design.x
    e = f.design.y - x @ np.nan_to_num(f.coefficients.to_numpy())
    xtx_inv = np.linalg.pinv(x.T @ x)
    h = x @ xtx_inv @ x.T
    g = df.g.to_numpy()
    meat = np.zeros((x.shape[1], x.shape[1]))
    for j in np.unique(g):
        idx = g == j
        lam, u = np.linalg.eigh(np.eye(idx.sum()) - h[np.ix_(idx, idx)])
        inv_sqrt = np.where(lam > 1e-10, np.abs(lam) ** -0.5, 0.0)
        s = x[idx].T @ ((u * inv_sqrt) @ u.T) @ e[idx]
        meat += np.outer(s, s)
    expected = (xtx_inv @ meat @ xtx_inv)[1:3, 1:3]
    got = f.covariance(lc.clustered(by="g", adjust="bias-reduced")).to_numpy()[1:3, 1:3]
    np.testing.assert_allclose(got, expected, rtol=1e-8)


def test_chunked_second_pass_gives_the_same_estimate_and_df():
    sites = lc.datasets.service_sites()

    def parts():
        return (sites.iloc[i : i + 300] for i in range(0, len(sites), 300))

    f = lc.fit_chunks("wait_min ~ staffing + protocol", parts())
    g = lc.fit("wait_min ~ staffing + protocol", sites)
    r = (lc.coef("staffing") == 0) & (lc.coef("protocol[T.triage]") == 0)
    for adjust in ("bias-reduced", "jackknife"):
        spec = lc.clustered(by="site", adjust=adjust)
        a = f.wald(r, covariance=lc.chunk_covariance_pass(f, parts(), spec))
        b = g.wald(r, covariance=spec)
        assert a.stat == pytest.approx(b.stat, rel=1e-9)
        assert a.df_error == pytest.approx(b.df_error, rel=1e-9)
        np.testing.assert_allclose(a.row_df, b.row_df, rtol=1e-9)


def test_bad_adjust_options_are_refused():
    with pytest.raises(CovarianceInputError, match="unknown residual adjustment 'CR2'"):
        lc.clustered(by="g", adjust="CR2")
    with pytest.raises(CovarianceInputError, match="one clustering variable"):
        lc.clustered(by=["a", "b"], adjust="bias-reduced")
    with pytest.raises(CovarianceInputError, match="two_way_factor"):
        lc.clustered(by=["a", "b"], two_way_factor="min")


def test_user_df_overrides_the_small_sample_df():
    df = _data(7)
    f = lc.fit("y ~ x1 + x2", df)
    res = f.wald(lc.coef("x1") == 0, covariance=lc.clustered(by="g", adjust="bias-reduced", df=5))
    assert res.df_error == 5 and res.row_df is None


def test_batch_and_multiplicity_routes_do_not_use_a_wrong_df():
    df = _data(8)
    f = lc.fit("y ~ x1 + x2", df)
    spec = lc.clustered(by="g", adjust="bias-reduced")
    with pytest.raises(CovarianceInputError, match="its own small-sample df"):
        f.wald_batch([lc.coef("x1") == 0, lc.coef("x2") == 0], covariance=spec)
    chi = f.wald_batch([lc.coef("x1") == 0], covariance=spec, reference="chi2")
    one = f.wald(lc.coef("x1") == 0, covariance=spec, reference="chi2")
    assert chi.stat[0] == pytest.approx(one.stat, rel=1e-10)


def test_multiplicity_uses_row_df():
    df = _data(9)
    f = lc.fit("y ~ x1 + x2", df)
    res = f.wald(
        (lc.coef("x1") == 0) & (lc.coef("x2") == 0),
        covariance=lc.clustered(by="g", adjust="bias-reduced"),
    )
    holm = res.adjust("holm")
    np.testing.assert_allclose(holm.p, res.row_p, rtol=1e-12)
    # Holm by hand on the rows' own p-values (common practice)
    p = np.sort(res.row_p)
    expected = np.maximum.accumulate(np.minimum(1, p * np.array([2, 1])))
    np.testing.assert_allclose(np.sort(holm.p_adjusted), expected, rtol=1e-12)
    bonf = res.simultaneous("bonferroni", 0.95)
    assert bonf.critical_value == pytest.approx(
        stats.t.isf(0.05 / 4, np.min(res.row_df)), rel=1e-12
    )
