"""Least squares is scale-equivariant, also where the squares of the data leave float64.

Scaling column ``j`` of ``X`` by ``s`` divides ``β_j`` and its standard error by ``s``;
scaling ``y`` by ``s`` multiplies every coefficient, standard error and ``σ`` by ``s``; F and
p do not change (algebra of least squares, common practice).  With ``s`` a power of two every
scaled input is exact, so the results must scale to within a few ulps; with ``s = 1e±200`` to
within the rounding of the scaled inputs.  The unscaled fit is checked against statsmodels
(numerical reference) so that "scales like the reference" means "right".
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

import lincomb as lc

ULPS = 16 * np.finfo(float).eps


def _data():
    rng = np.random.default_rng(3)
    n = 40
    x = np.column_stack([np.ones(n), rng.normal(size=n), rng.normal(size=n)])
    y = x @ [1.0, 2.0, -1.0] + rng.normal(size=n)
    return x, y


def _summary(f):
    w = f.wald((lc.coef("x1") == 0) & (lc.coef("x2") == 0))
    return f.coefficients.to_numpy(), f.std_errors().to_numpy(), f.sigma, w.stat, w.p


def test_unscaled_fit_matches_statsmodels():
    x, y = _data()
    beta, se, sigma, *_ = _summary(lc.fit_arrays(x, y))
    ref = sm.OLS(y, x).fit()  # statsmodels as numerical reference
    np.testing.assert_allclose(beta, ref.params, rtol=1e-12)
    np.testing.assert_allclose(se, ref.bse, rtol=1e-12)
    np.testing.assert_allclose(sigma, np.sqrt(ref.scale), rtol=1e-12)


SCALES = [2.0**1000, 2.0**-1000, 2.0**600, 2.0**-600, 1e200, 1e-200]


@pytest.mark.parametrize("s", SCALES)
@pytest.mark.parametrize("col", [1, 2])
def test_predictor_scaled(s, col):
    x, y = _data()
    beta, se, sigma, fstat, p = _summary(lc.fit_arrays(x, y))
    xs = x.copy()
    xs[:, col] *= s
    f = lc.fit_arrays(xs, y)
    assert f.aliased == ()
    b2, se2, sigma2, f2, p2 = _summary(f)
    rtol = ULPS if np.log2(s).is_integer() else 1e-13
    want = np.ones(3)
    want[col] = 1 / s
    np.testing.assert_allclose(b2 / beta, want, rtol=rtol)
    np.testing.assert_allclose(se2 / se, want, rtol=rtol)
    np.testing.assert_allclose([sigma2, f2, p2], [sigma, fstat, p], rtol=rtol)


@pytest.mark.parametrize("s", SCALES)
def test_response_scaled(s):
    x, y = _data()
    beta, se, sigma, fstat, p = _summary(lc.fit_arrays(x, y))
    f = lc.fit_arrays(x, y * s)  # no OverflowError, no "reproduces the response exactly"
    b2, se2, sigma2, f2, p2 = _summary(f)
    rtol = ULPS if np.log2(s).is_integer() else 1e-13
    np.testing.assert_allclose(b2 / beta, s, rtol=rtol)
    np.testing.assert_allclose(se2 / se, s, rtol=rtol)
    np.testing.assert_allclose(sigma2 / sigma, s, rtol=rtol)
    np.testing.assert_allclose([f2, p2], [fstat, p], rtol=rtol)


def test_response_and_predictor_scaled_together_in_restrict():
    x, y = _data()
    r0 = lc.fit_arrays(x, y).restrict(lc.coef("x1") == 2 * lc.coef("x2"))
    xs = x.copy()
    xs[:, 1] *= 2.0**-400
    xs[:, 2] *= 2.0**-400
    r = lc.fit_arrays(xs, y * 2.0**500).restrict(lc.coef("x1") == 2 * lc.coef("x2"))
    np.testing.assert_allclose(
        r.coefficients.to_numpy() / r0.coefficients.to_numpy(),
        [2.0**500, 2.0**900, 2.0**900],
        rtol=ULPS,
    )
    np.testing.assert_allclose(r.sigma / r0.sigma, 2.0**500, rtol=ULPS)
