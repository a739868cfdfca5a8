"""Numerical accuracy against certified values and high-precision references.

1. NIST StRD, linear regression, "Longley" (higher difficulty): certified coefficients,
   standard deviations, residual SD and ANOVA against lincomb's fit of R's ``longley`` data
   rescaled to NIST's units.  The certified values are cross-checked against an mpmath solve of
   the same decimal data.
2. An ill-conditioned design with a large common offset (regressors near 1e12 that vary in the
   10th digit, a response near 1e9, a nearly collinear pair), unweighted and weighted: lincomb
   against the exact least-squares solution of the float64 inputs computed with mpmath, and a
   naive float64 normal-equations solve shown to fail the same bound.

Relative error bounds are derived from the condition number of the problem (stated at each
check); ``EPS`` is the float64 unit roundoff spacing.
"""

from __future__ import annotations

import mpmath as mp
import numpy as np
import pandas as pd
import pytest

import lincomb as lc

EPS = float(np.finfo(float).eps)


# -- high-precision reference ---------------------------------------------------------------
def mp_least_squares(x, y, w=None, c=None, d=None, dps: int = 100) -> dict[str, list]:
    """Exact (to ``dps`` digits) weighted least squares of the given float64 (or decimal) data.

    Every float64 input converts to mpmath exactly; strings are read as decimals.  The normal
    equations are solved by LU in ``dps``-digit arithmetic: fine here because ``dps`` digits
    exceed the digits the squared condition number (at most ~1e45 for these problems) takes away;
    callers check this by comparing two precisions.
    """
    with mp.workdps(dps):
        xm = [[mp.mpf(v) for v in row] for row in x]
        ym = [mp.mpf(v) for v in y]
        wm = [mp.mpf(1)] * len(ym) if w is None else [mp.mpf(v) for v in w]
        n, p = len(xm), len(xm[0])
        a = mp.matrix(p, p)
        b = mp.matrix(p, 1)
        for i in range(n):
            for j in range(p):
                b[j] += wm[i] * xm[i][j] * ym[i]
                for k in range(p):
                    a[j, k] += wm[i] * xm[i][j] * xm[i][k]
        beta = mp.lu_solve(a, b)
        resid = [ym[i] - mp.fsum(xm[i][j] * beta[j] for j in range(p)) for i in range(n)]
        rss = mp.fsum(wm[i] * resid[i] ** 2 for i in range(n))
        s2 = rss / (n - p)
        # diagonal of (X'WX)^-1 column by column (LU solves, in dps-digit arithmetic)
        se = []
        for j in range(p):
            e = mp.matrix(p, 1)
            e[j] = 1
            se.append(mp.sqrt(s2 * mp.lu_solve(a, e)[j]))
        out = {"beta": [beta[j] for j in range(p)], "se": se, "rss": [rss], "sigma": [mp.sqrt(s2)]}
        if c is not None:
            cm = mp.matrix([[mp.mpf(v) for v in row] for row in c])
            delta = cm * beta - mp.matrix([mp.mpf(v) for v in d])
            # C (X'WX)^-1 C', one LU solve per row of C
            sol = mp.matrix(p, cm.rows)
            for i in range(cm.rows):
                col = mp.lu_solve(a, cm[i, :].T)
                for j in range(p):
                    sol[j, i] = col[j]
            m = cm * sol
            quad = (delta.T * mp.lu_solve(m, delta))[0]
            out["F"] = [quad / (cm.rows * s2)]
        return out


def as_float(values) -> np.ndarray:
    return np.array([float(v) for v in values])


def assert_converged(lo: dict, hi: dict, rtol: float = 1e-30) -> None:
    """The reference at two precisions agrees far beyond any tolerance used below."""
    for key in hi:
        for a, b in zip(lo[key], hi[key], strict=True):
            assert abs(a - b) <= rtol * abs(b), key


def rel_err(actual, desired) -> np.ndarray:
    actual, desired = np.asarray(actual, float), np.asarray(desired, float)
    return np.abs(actual - desired) / np.abs(desired)


# -- NIST StRD Longley -----------------------------------------------------------------------
# Certified values quoted from memory of the NIST StRD "Longley" certified results page
# (Statistical Reference Datasets, linear regression, higher level of difficulty), 15
# significant digits.  Order: intercept, GNP deflator, GNP, unemployed, armed forces,
# population, year.  They are cross-checked below against an mpmath solve of the data.
NIST_BETA = np.array(
    [
        -3482258.63459582,
        15.0618722713733,
        -0.358191792925910e-01,
        -2.02022980381683,
        -1.03322686717359,
        -0.511041056535807e-01,
        1829.15146461355,
    ]
)
NIST_SD = np.array(
    [
        890420.383607373,
        84.9149257747669,
        0.334910077722432e-01,
        0.488399681651699,
        0.214274163161675,
        0.226073200069370,
        455.478499142212,
    ]
)
NIST_RESIDUAL_SD = 304.854073561965
NIST_RESIDUAL_SS = 836424.055505915  # ANOVA table, residual sum of squares (9 df)
NIST_F = 330.285339234588  # ANOVA table, regression F (6 and 9 df)
# 15 significant digits: a rounding error of at most 5e-15 relative
NIST_QUOTED_RTOL = 5e-15

# NIST's units relative to R's longley: GNP and population in thousands there, unemployed and
# armed forces in hundreds, employed in thousands (the R help page gives the R units).
NIST_SCALE = {
    "GNP_deflator": 1,
    "GNP": 1000,
    "Unemployed": 10,
    "Armed_Forces": 10,
    "Population": 1000,
    "Year": 1,
    "Employed": 1000,
}
REGRESSORS = ["GNP_deflator", "GNP", "Unemployed", "Armed_Forces", "Population", "Year"]
LONGLEY_FORMULA = "Employed ~ " + " + ".join(REGRESSORS)

# Worst error seen: 8e-14 relative (the deflator and population coefficients, both smaller than
# their standard errors, so their relative error is inflated).  The centred, unit-norm design
# has condition number ~110, so a backward-stable solve gives errors ~κ·ε·‖β‖/|β_j| ≲ 1e-13;
# 1e-12 keeps a margin for other BLAS builds.  A normal-equations solve on the raw data loses
# about 8 digits here (checked below).
LONGLEY_RTOL = 1e-12


@pytest.fixture(scope="module")
def longley_nist(longley) -> pd.DataFrame:
    """R's longley rescaled to NIST's units: integers, and the deflator with one decimal."""
    out = longley[[*REGRESSORS, "Employed"]].copy()
    for col, s in NIST_SCALE.items():
        scaled = out[col].to_numpy(dtype=float) * s
        digits = 1 if col == "GNP_deflator" else 0
        # the rescaled R values must land on NIST's grid of decimals, or the scales are wrong
        grid = np.round(scaled, digits)
        np.testing.assert_allclose(scaled, grid, rtol=0, atol=1e-6)
        out[col] = grid
    return out


def test_longley_rescaling_gives_nist_data(longley_nist):
    # NIST Longley data, first and last rows (1947 and 1962), quoted from memory of the NIST
    # data file: y, x1..x6
    first = [60323, 83, 234289, 2356, 1590, 107608, 1947]
    last = [70551, 116.9, 554894, 4007, 2827, 130081, 1962]
    cols = ["Employed", *REGRESSORS]
    assert longley_nist[cols].iloc[0].tolist() == first
    assert longley_nist[cols].iloc[-1].tolist() == last
    assert longley_nist.shape == (16, 7)


def test_longley_certified_values(longley_nist, longley):
    f = lc.fit(LONGLEY_FORMULA, longley_nist)
    assert f.names == ("Intercept", *REGRESSORS)
    assert f.rank == 7 and f.df_error == 9
    np.testing.assert_allclose(f.coefficients.to_numpy(), NIST_BETA, rtol=LONGLEY_RTOL)
    np.testing.assert_allclose(f.std_errors().to_numpy(), NIST_SD, rtol=LONGLEY_RTOL)
    np.testing.assert_allclose(f.sigma, NIST_RESIDUAL_SD, rtol=LONGLEY_RTOL)
    np.testing.assert_allclose(f.rss, NIST_RESIDUAL_SS, rtol=LONGLEY_RTOL)
    w = f.wald(lc.from_matrix(np.eye(7)[1:]))  # all six slopes are zero: the regression F
    assert (w.df_test, w.df_error) == (6, 9)
    np.testing.assert_allclose(w.stat, NIST_F, rtol=LONGLEY_RTOL)

    # The same fit on R's longley as loaded: coefficients scale by (x unit) / (y unit).
    f_r = lc.fit(LONGLEY_FORMULA, longley)
    factor = np.array([1000.0] + [1000.0 / NIST_SCALE[c] for c in REGRESSORS])
    # R's decimals (234.289) are not exactly NIST's integers / 1000 in binary: the inputs differ
    # by ~1e-16 relative, which the conditioning above turns into at most ~1e-13.
    np.testing.assert_allclose(f_r.coefficients.to_numpy() * factor, NIST_BETA, rtol=LONGLEY_RTOL)
    np.testing.assert_allclose(f_r.std_errors().to_numpy() * factor, NIST_SD, rtol=LONGLEY_RTOL)


def test_longley_certified_values_agree_with_mpmath(longley_nist):
    """The remembered certified values against a 60/100-digit solve of the decimal data."""
    cols = ["GNP_deflator", "GNP", "Unemployed", "Armed_Forces", "Population", "Year"]
    # decimal strings, so the reference solves NIST's exact decimal problem
    x = [["1"] + [repr(float(v)) for v in row] for row in longley_nist[cols].to_numpy()]
    y = [repr(float(v)) for v in longley_nist["Employed"]]
    slopes = np.eye(7)[1:]
    hi = mp_least_squares(x, y, c=slopes, d=np.zeros(6), dps=100)
    assert_converged(mp_least_squares(x, y, c=slopes, d=np.zeros(6), dps=60), hi)
    np.testing.assert_allclose(NIST_BETA, as_float(hi["beta"]), rtol=NIST_QUOTED_RTOL)
    np.testing.assert_allclose(NIST_SD, as_float(hi["se"]), rtol=NIST_QUOTED_RTOL)
    np.testing.assert_allclose(NIST_RESIDUAL_SD, float(hi["sigma"][0]), rtol=NIST_QUOTED_RTOL)
    np.testing.assert_allclose(NIST_RESIDUAL_SS, float(hi["rss"][0]), rtol=NIST_QUOTED_RTOL)
    np.testing.assert_allclose(NIST_F, float(hi["F"][0]), rtol=NIST_QUOTED_RTOL)

    # lincomb against the same reference, and a naive normal-equations solve that fails
    f = lc.fit(LONGLEY_FORMULA, longley_nist)
    ref = as_float(hi["beta"])
    assert rel_err(f.coefficients, ref).max() < LONGLEY_RTOL
    xa = np.column_stack([np.ones(16), longley_nist[cols].to_numpy()])
    ya = longley_nist["Employed"].to_numpy()
    naive = np.linalg.solve(xa.T @ xa, xa.T @ ya)
    assert rel_err(naive, ref).max() > 1e3 * LONGLEY_RTOL


# -- large common offset, nearly collinear pair ------------------------------------------------
def offset_problem(stackloss: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Built from R's stackloss so that the values are not invented.

    x1 = 1e12 + 125·air flow     (varies in the 10th significant digit)
    x2 = x1 + water temp / 16    (nearly collinear with x1: correlation ≈ 1 - 1e-8)
    x3 = acid concentration      (no offset: mixed scales)
    y  = 1e9 + 100·stack loss
    Every value is exactly representable in float64 (integers, sixteenths below 2^53).
    """
    air = stackloss["air_flow"].to_numpy(dtype=float)
    water = stackloss["water_temp"].to_numpy(dtype=float)
    x1 = 1e12 + 125 * air
    x2 = x1 + water / 16
    x3 = stackloss["acid_conc"].to_numpy(dtype=float)
    y = 1e9 + 100 * stackloss["stack_loss"].to_numpy(dtype=float)
    assert np.array_equal(x1 - 1e12, 125 * air) and np.array_equal(x2 - x1, water / 16)
    x = np.column_stack([np.ones_like(x1), x1, x2, x3])
    # hypothesis: x1 + x2 (the well-determined sum of the collinear pair) = d0, and x3 = 0
    c = np.array([[0, 1, 1, 0.0], [0, 0, 0, 1.0]])
    return x, y, c


def centred_condition(x: np.ndarray, w: np.ndarray | None) -> float:
    """Condition number of the weighted, centred, unit-norm columns (what the fit factors)."""
    w = np.ones(x.shape[0]) if w is None else w
    # the offset is removed exactly first (x - 1e12 is exact here), then centred
    z = x[:, 1:] - np.where(x[:, 1:] > 1e11, 1e12, 0.0)
    z = z - (w @ z) / w.sum()
    z = z * np.sqrt(w)[:, None]
    return float(np.linalg.cond(z / np.linalg.norm(z, axis=0)))


@pytest.mark.parametrize("weighted", [False, True], ids=["ols", "wls"])
def test_large_offset_against_mpmath(stackloss, weighted):
    x, y, c = offset_problem(stackloss)
    # weights: inverse water temperature (variance growing with it; illustrative)
    w = 1.0 / stackloss["water_temp"].to_numpy(dtype=float) if weighted else None
    d = np.array([0.008, 0.0])

    hi = mp_least_squares(x, y, w, c, d, dps=100)
    assert_converged(mp_least_squares(x, y, w, c, d, dps=70), hi)
    ref_beta, ref_se = as_float(hi["beta"]), as_float(hi["se"])
    ref_f = float(hi["F"][0])

    # Bound: the fit centres exactly (x - mean is exact for x near the mean, Sterbenz) and then
    # solves a least-squares problem of condition κ ≈ 2e4 by QR, so coefficients, SEs and F carry
    # errors ~κ·ε ≈ 4e-12; 100·κ·ε ≈ 4e-10 leaves margin.  The raw design has condition ~1e21,
    # beyond 1/ε: any method that does not remove the offset exactly loses every digit.
    kappa = centred_condition(x, w)
    assert 1e4 < kappa < 1e5
    tol = 100 * kappa * EPS
    assert tol < 1e-9

    f = lc.fit_arrays(x, y, names=["one", "x1", "x2", "x3"], weights=w)
    assert f.rank == 4 and f.aliased == ()
    assert rel_err(f.coefficients, ref_beta).max() < tol
    assert rel_err(f.std_errors(), ref_se).max() < tol
    assert rel_err(f.rss, float(hi["rss"][0])) < tol
    wt = f.wald(lc.from_matrix(c, d))
    assert rel_err(wt.stat, ref_f) < tol

    # The test can fail: float64 normal equations on the raw data lose everything, and even on
    # exactly centred data they lose ~κ²·ε ≈ 5e-8 on the slopes.
    sw = np.ones_like(y) if w is None else np.sqrt(w)
    xw, yw = x * sw[:, None], y * sw
    naive = np.linalg.lstsq(xw.T @ xw, xw.T @ yw, rcond=None)[0]
    assert rel_err(naive, ref_beta).max() > 1e-2
    z = x[:, 1:] - np.where(x[:, 1:] > 1e11, 1e12, 0.0)
    wv = np.ones_like(y) if w is None else w
    zc = (z - (wv @ z) / wv.sum()) * sw[:, None]
    yc = (y - (wv @ y) / wv.sum()) * sw
    centred_naive = np.linalg.solve(zc.T @ zc, zc.T @ yc)
    assert rel_err(centred_naive[:2], ref_beta[1:3]).max() > 10 * tol


def test_column_near_1e12_varying_by_units_is_kept_and_exact():
    """A column 1e12 + u with integer u in 0..9 holds about one significant digit of variation
    relative to 1e-12 of its size; float64 stores every value exactly (integers below 2**53),
    so the fit must equal the fit on u itself (x - 1e12 = u exactly, the intercept absorbs the
    offset). Identity of the trade; no outside number needed."""
    rng = np.random.default_rng(20261201)
    u = rng.integers(0, 10, size=60).astype(float)
    z = rng.normal(size=60)
    y = 2.0 + 3.0 * u - 0.5 * z + rng.normal(scale=0.3, size=60)
    big = lc.fit_arrays(np.c_[np.ones(60), 1e12 + u, z], y, names=["one", "x", "z"])
    small = lc.fit_arrays(np.c_[np.ones(60), u, z], y, names=["one", "x", "z"])
    assert big.aliased == ()
    np.testing.assert_allclose(
        big.coefficients[["x", "z"]], small.coefficients[["x", "z"]], rtol=1e-12
    )
    np.testing.assert_allclose(
        big.std_errors()[["x", "z"]], small.std_errors()[["x", "z"]], rtol=1e-10
    )
    f_big = big.wald(lc.coef("x") == 3).stat
    f_small = small.wald(lc.coef("x") == 3).stat
    np.testing.assert_allclose(f_big, f_small, rtol=1e-9)
