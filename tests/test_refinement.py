"""Accuracy beyond plain float64 QR on an ill-conditioned polynomial design.

Reference: the exact rational least-squares solution of the same float64 data, from the normal
equations solved in :mod:`fractions` (exact arithmetic, so the normal equations' squaring of
the condition number costs nothing there).  Raw powers of x on [-8.8, -3.1], degree 10, 82
equally spaced rows: condition number about 1.5e15 (numpy.linalg.cond).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

import lincomb as lc


def _exact_ls(x: np.ndarray, y: np.ndarray, w: np.ndarray | None = None) -> np.ndarray:
    xf = [[Fraction(float(v)) for v in row] for row in x]
    yf = [Fraction(float(v)) for v in y]
    wf = [Fraction(1)] * len(yf) if w is None else [Fraction(float(v)) for v in w]
    p = x.shape[1]
    a = [
        [sum(wi * r[i] * r[j] for r, wi in zip(xf, wf, strict=True)) for j in range(p)]
        + [sum(wi * r[i] * yi for r, yi, wi in zip(xf, yf, wf, strict=True))]
        for i in range(p)
    ]
    for c in range(p):
        piv = a[c][c]
        a[c] = [v / piv for v in a[c]]
        for i in range(p):
            if i != c and a[i][c] != 0:
                f = a[i][c]
                a[i] = [u - f * v for u, v in zip(a[i], a[c], strict=True)]
    return np.array([float(a[i][p]) for i in range(p)])


def _poly(seed: int):
    t = np.linspace(-8.8, -3.1, 82)
    x = np.vander(t, 11, increasing=True)
    y = np.random.default_rng(seed).normal(size=82) + np.cos(t)
    return x, y


@pytest.mark.parametrize("seed", [0, 1])
def test_polynomial_degree_10_agrees_with_exact_rational_solution(seed):
    x, y = _poly(seed)
    exact = _exact_ls(x, y)
    f = lc.fit_arrays(x, y)
    assert f.aliased == ()
    rel = np.max(np.abs(f.coefficients.to_numpy() - exact) / np.abs(exact))
    # measured about 1e-14 here; plain QR in working coordinates gave about 1e-7
    assert rel < 1e-10


def test_weighted_polynomial_agrees_with_exact_rational_solution():
    x, y = _poly(2)
    w = np.linspace(0.5, 2.0, 82)
    exact = _exact_ls(x, y, w)
    f = lc.fit_arrays(x, y, weights=w)
    rel = np.max(np.abs(f.coefficients.to_numpy() - exact) / np.abs(exact))
    assert rel < 1e-10


def test_well_conditioned_fit_is_not_refined():
    from lincomb import _core

    rng = np.random.default_rng(0)
    x = np.column_stack([np.ones(50), rng.normal(size=(50, 3))])
    sol = _core.solve(_core.moments_from_arrays(x, rng.normal(size=50), intercept=0))
    assert _core.condition_estimate(sol) < _core.REFINE_COND
