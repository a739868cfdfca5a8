"""Restriction decisions are invariant to shifting and rescaling design columns.

A shift ``x_j → s·(x_j + a)`` of a column (with an intercept in the model) is the
reparametrization ``β = M β'`` with ``β_0 = β_0' + a·s·β_j'`` and ``β_j = s·β_j'``, so the same
hypothesis on the new fit is ``C' = C·M`` (column ``j`` of ``C`` becomes ``s·(C_j + a·C_0)``)
with the same ``d``.  Since ``M`` is invertible, the rank of ``C``, which rows are redundant,
whether ``d`` is consistent, whether each row is estimable and the F statistic are all the same
(linear algebra, common practice).  The expected decisions of the unshifted problem are derived
independently with exact rational arithmetic (:mod:`fractions`): rank by Gaussian elimination,
estimability as ``rank([X; c]) == rank(X)``, and F from the exact normal equations.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import lincomb as lc
from lincomb import from_matrix
from lincomb.errors import InconsistentRestrictionError, NotEstimableError

N = 64  # a power of two: the column means of integer data are exact in float64
NAMES = ["a", "x", "b", "c", "e"]


def _design(empty_reference: bool) -> tuple[np.ndarray, np.ndarray]:
    """Intercept, an integer covariate, three dummies of a four-level factor; exact data."""
    rng = np.random.default_rng(7)
    i = np.arange(N)
    x = (i % 8).astype(float)
    g = 1 + i % 3 if empty_reference else i % 4  # with empty_reference, level 0 has no rows
    dummies = np.column_stack([g == k for k in (1, 2, 3)]).astype(float)
    xm = np.column_stack([np.ones(N), x, dummies])
    y = 1.0 + 0.25 * x + dummies @ [2.0, -1.0, 0.5] + rng.normal(size=N)
    return xm, y


def _rank(rows: list[list[Fraction]]) -> int:
    """Exact rank by Gaussian elimination over the rationals."""
    a = [r[:] for r in rows]
    rank, col, ncol = 0, 0, len(a[0]) if a else 0
    while rank < len(a) and col < ncol:
        piv = next((i for i in range(rank, len(a)) if a[i][col] != 0), None)
        if piv is None:
            col += 1
            continue
        a[rank], a[piv] = a[piv], a[rank]
        for i in range(len(a)):
            if i != rank and a[i][col] != 0:
                f = a[i][col] / a[rank][col]
                a[i] = [u - f * v for u, v in zip(a[i], a[rank], strict=True)]
        rank += 1
        col += 1
    return rank


def _frac(m: np.ndarray) -> list[list[Fraction]]:
    return [[Fraction(float(v)) for v in row] for row in np.atleast_2d(m)]


def _exact_decisions(xm: np.ndarray, c: np.ndarray, d: np.ndarray) -> dict[str, object]:
    """Rank, redundant rows, consistency and estimability of ``Cβ = d``, exactly."""
    xf, cf, df = _frac(xm), _frac(c), [Fraction(float(v)) for v in d]
    rx = _rank(xf)
    estimable = [_rank(xf + [row]) == rx for row in cf]
    redundant, kept = [], []
    for i in range(len(cf)):
        if _rank([cf[k] for k in kept] + [cf[i]]) == len(kept) + 1:
            kept.append(i)
        else:
            redundant.append(i)
    aug = [row + [dv] for row, dv in zip(cf, df, strict=True)]
    consistent = _rank(aug) == _rank(cf)
    return {
        "rank": len(kept),
        "redundant": redundant,
        "consistent": consistent,
        "estimable": all(estimable),
    }


def _exact_f(xm: np.ndarray, y: np.ndarray, c: np.ndarray, d: np.ndarray) -> float:
    """F from the exact normal equations of the float64 data (full-rank X, full-row-rank C)."""
    xf = _frac(xm)
    yf = [Fraction(float(v)) for v in y]
    p = len(xf[0])
    xtx = [[sum(r[i] * r[j] for r in xf) for j in range(p)] for i in range(p)]
    xty = [sum(r[i] * yv for r, yv in zip(xf, yf, strict=True)) for i in range(p)]
    inv = _solve(xtx, [[Fraction(int(i == j)) for j in range(p)] for i in range(p)])
    beta = [sum(inv[i][j] * xty[j] for j in range(p)) for i in range(p)]
    resid = [yv - sum(r[j] * beta[j] for j in range(p)) for r, yv in zip(xf, yf, strict=True)]
    s2 = sum(e * e for e in resid) / (len(xf) - p)
    cf = _frac(c)
    delta = [
        sum(row[j] * beta[j] for j in range(p)) - Fraction(float(dv))
        for row, dv in zip(cf, d, strict=True)
    ]
    v = [
        [
            sum(cf[a][i] * inv[i][j] * cf[b][j] for i in range(p) for j in range(p))
            for b in range(len(cf))
        ]
        for a in range(len(cf))
    ]
    w = _solve(v, [[dv] for dv in delta])
    quad = sum(delta[i] * w[i][0] for i in range(len(cf)))
    return float(quad / len(cf) / s2)


def _solve(a: list[list[Fraction]], b: list[list[Fraction]]) -> list[list[Fraction]]:
    """Exact Gauss-Jordan solve ``a·x = b``."""
    n = len(a)
    m = [a[i][:] + b[i][:] for i in range(n)]
    for col in range(n):
        piv = next(i for i in range(col, n) if m[i][col] != 0)
        m[col], m[piv] = m[piv], m[col]
        pv = m[col][col]
        m[col] = [v / pv for v in m[col]]
        for i in range(n):
            if i != col and m[i][col] != 0:
                f = m[i][col]
                m[i] = [u - f * v for u, v in zip(m[i], m[col], strict=True)]
    return [row[n:] for row in m]


#: systems on (a, x, b, c, e): intercept and a level; the same combined; a redundant
#: consistent third row; the same with a contradictory d; a level contrast.
SYSTEMS = {
    "intercept and level": ([[1, 0, 0, 0, 0], [1, 0, 1, 0, 0]], [5.0, 7.0]),
    "combined rows": ([[2, 0, 1, 0, 0], [0, 0, 1, 0, 0]], [17.0, 2.0]),
    "redundant row": ([[1, 0, 0, 0, 0], [1, 0, 1, 0, 0], [2, 0, 1, 0, 0]], [5.0, 7.0, 12.0]),
    "contradictory": ([[1, 0, 0, 0, 0], [1, 0, 1, 0, 0], [2, 0, 1, 0, 0]], [5.0, 7.0, 13.0]),
    "slope and level": ([[1, 3, 0, 1, 0], [0, 1, 0, 0, 0]], [4.0, 0.0]),
    "level contrast": ([[0, 0, 1, -1, 0]], [0.0]),
}


def _observed(xm: np.ndarray, y: np.ndarray, c: np.ndarray, d: np.ndarray) -> dict[str, object]:
    f = lc.fit_arrays(xm, y, names=NAMES)
    try:
        w = f.wald(from_matrix(c, d))
    except InconsistentRestrictionError:
        return {"consistent": False}
    except NotEstimableError:
        return {"consistent": True, "estimable": False}
    return {
        "consistent": True,
        "estimable": True,
        "rank": w.df_test,
        "redundant": sorted(w.redundant),
        "F": w.stat,
        "p": w.p,
    }


def _expected(exact: dict[str, object]) -> dict[str, object]:
    if not exact["consistent"]:
        return {"consistent": False}
    if not exact["estimable"]:
        return {"consistent": True, "estimable": False}
    return {
        "consistent": True,
        "estimable": True,
        "rank": exact["rank"],
        "redundant": exact["redundant"],
    }


def _transform(xm, c, col, shift, scale):
    xt = xm.copy()
    xt[:, col] = scale * (xm[:, col] + shift)
    ct = np.array(c, dtype=float)
    ct[:, col] = scale * (ct[:, col] + shift * ct[:, 0])
    return xt, ct


shifts = st.one_of(
    st.integers(-(10**12), 10**12),
    st.integers(8, 12).map(lambda e: 10**e),
    st.integers(8, 12).map(lambda e: -(10**e) + 3),
    st.just(0),
)
scales = st.one_of(
    st.integers(-60, 60).map(lambda k: 2.0**k),
    st.floats(-8, 8).map(lambda e: float(10.0**e)),
)


@settings(max_examples=60, deadline=None, derandomize=True)
@given(
    st.sampled_from(sorted(SYSTEMS)),
    st.booleans(),
    st.integers(1, 4),
    shifts,
    scales,
)
def test_decisions_and_f_invariant_to_shift_and_scale(name, empty, col, shift, scale):
    xm, y = _design(empty)
    c, d = (np.array(v, dtype=float) for v in SYSTEMS[name])
    want = _expected(_exact_decisions(xm, c, d))
    base = _observed(xm, y, c, d)
    xt, ct = _transform(xm, c, col, float(shift), scale)
    moved = _observed(xt, y, ct, d)
    # the exact rational derivation decides the unshifted problem ...
    assert {k: base[k] for k in want} == want
    # ... and the shifted, rescaled problem takes the same decisions
    assert {k: moved[k] for k in want} == want
    if "F" in base:
        if not empty:  # F of the unshifted problem against the exact normal equations
            rows = base_rows(base, c)
            np.testing.assert_allclose(base["F"], _exact_f(xm, y, c[rows], d[rows]), rtol=1e-9)
        # the shifted problem: the estimates of intercept rows cancel terms of size
        # |shift|·|β_j|, so F agrees to about eps·|shift|·scale-free spread (here < 1e-3)
        rtol = 1e-9 + 1e-15 * abs(shift)
        np.testing.assert_allclose(moved["F"], base["F"], rtol=rtol)


def base_rows(obs: dict[str, object], c: np.ndarray) -> list[int]:
    red = set(obs["redundant"])  # type: ignore[arg-type]
    return [i for i in range(len(c)) if i not in red]


def test_large_mean_column_keeps_intercept_rows_apart():
    """The documented case: a column near 1e10 varying in its tenth digit (seeded data)."""
    rng = np.random.default_rng(1)
    n = 60
    g = np.repeat([0, 1, 2], 20)
    x = 1e10 + 0.01 * rng.normal(size=n)
    xm = np.column_stack([np.ones(n), x, g == 1, g == 2]).astype(float)
    y = 1 + 50 * (x - 1e10) + 2 * (g == 1) + rng.normal(size=n)
    f = lc.fit_arrays(xm, y, names=["a", "x", "b", "c"])
    # intercept and intercept + level: independent rows (exact rank 2), consistent
    w = f.wald((lc.coef("a") == 5) & (lc.coef("a") + lc.coef("b") == 7))
    assert w.df_test == 2 and not w.redundant
    # the same hypothesis with its rows combined: F is invariant to row operations
    w2 = f.wald((2 * lc.coef("a") + lc.coef("b") == 17) & (lc.coef("b") == 2))
    assert w2.df_test == 2
    np.testing.assert_allclose(w2.stat, w.stat, rtol=1e-4)


def test_empty_reference_cell_intercept_not_estimable_beside_large_mean():
    """Level 0 has no rows, so b + c + e = 1: the intercept alone is not estimable (exact
    algebra), however large another column's mean is."""
    rng = np.random.default_rng(2)
    n = 60
    g = np.repeat([1, 2], 30)
    x = 1e10 + 0.01 * rng.normal(size=n)
    xm = np.column_stack([np.ones(n), x, g == 1, g == 2]).astype(float)
    y = 1 + 50 * (x - 1e10) + rng.normal(size=n)
    f = lc.fit_arrays(xm, y, names=["a", "x", "b", "c"])
    assert f.aliased == ("c",)
    with pytest.raises(NotEstimableError, match="row 0"):
        f.wald(lc.coef("a") == 0)
    assert f.coef_frame()["status"].tolist()[:2] == ["not estimable", "estimable"]


def test_batch_takes_the_same_decisions_as_wald_beside_a_large_mean():
    rng = np.random.default_rng(1)
    n = 60
    g = np.repeat([0, 1, 2], 20)
    x = 1e10 + 0.01 * rng.normal(size=n)
    xm = np.column_stack([np.ones(n), x, g == 1, g == 2]).astype(float)
    y = 1 + 50 * (x - 1e10) + 2 * (g == 1) + rng.normal(size=n)
    f = lc.fit_arrays(xm, y, names=["a", "x", "b", "c"])
    c = np.array([[[1.0, 0, 0, 0], [1, 0, 1, 0]], [[1.0, 0, 0, 0], [2, 0, 0, 0]]])
    d = np.array([[5.0, 7.0], [5.0, 10.0]])
    b = f.wald_batch(c, d)
    # exact algebra: system 0 has rank 2; system 1 repeats its first row (rank 1, consistent)
    assert b.test_frame()["rank"].tolist() == [2, 1]
    single = f.wald(from_matrix(c[0], d[0]))
    np.testing.assert_allclose(b.p[0], single.p, rtol=1e-8)
