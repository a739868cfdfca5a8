"""The restriction builder: every operator, the printed algebra, resolution and its errors.

Expected rows of ``C`` and entries of ``d`` are written out by hand from the algebra of each
case; the column order of the fixture fit is formulaic's (intercept, main effects in formula
order, then the interaction), spelled out in ``NAMES`` below.
"""

from __future__ import annotations

import copy

import numpy as np
import pandas as pd
import pytest

import lincomb as lc
from lincomb import coef, from_matrix, term
from lincomb._builder.restriction import Expr, Restriction, RestrictionSystem, TermRef, as_system
from lincomb.errors import (
    EmptyRestrictionError,
    RestrictionShapeError,
    UnknownCoefficientError,
)

# Columns of "mpg ~ wt + hp + C(cyl) * C(am)" on R's mtcars (cyl in {4, 6, 8}, reference 4;
# am in {0, 1}, reference 0), treatment coding: formulaic names them like this, in this order.
NAMES = (
    "Intercept",
    "wt",
    "hp",
    "C(cyl)[T.6]",
    "C(cyl)[T.8]",
    "C(am)[T.1]",
    "C(cyl)[T.6]:C(am)[T.1]",
    "C(cyl)[T.8]:C(am)[T.1]",
)


@pytest.fixture(scope="module")
def fitted(mtcars: pd.DataFrame) -> lc.LinearFit:
    f = lc.fit("mpg ~ wt + hp + C(cyl) * C(am)", mtcars)
    assert f.names == NAMES
    return f


def row(**w: float) -> list[float]:
    """A row of C over NAMES from keyword weights (keys are positions given as 'c<index>')."""
    out = [0.0] * len(NAMES)
    for k, v in w.items():
        out[int(k[1:])] = v
    return out


A, B = coef("wt"), coef("hp")
G = term("C(cyl)")
GH = term("C(cyl):C(am)")

# id, built object, printed algebra, rows of C (over NAMES), d -- all derived by hand.
CASES = [
    ("add", A + B == 0, "wt + hp = 0", [row(c1=1, c2=1)], [0]),
    ("sub", A - B == 0, "wt - hp = 0", [row(c1=1, c2=-1)], [0]),
    ("mul", A * 3 == 0, "3*wt = 0", [row(c1=3)], [0]),
    ("rmul", 2 * A == 1, "2*wt = 1", [row(c1=2)], [1]),
    ("div", A / 4 == 1, "0.25*wt = 1", [row(c1=0.25)], [1]),
    ("neg", -A == 1, "-wt = 1", [row(c1=-1)], [1]),
    ("pos", +A == 1, "wt = 1", [row(c1=1)], [1]),
    # 1 - wt = 0  <=>  -wt = -1: the constant moves to the right-hand side with its sign flipped
    ("rsub", 1 - A == 0, "-wt = -1", [row(c1=-1)], [-1]),
    ("radd", 1 + A == 0, "wt = -1", [row(c1=1)], [-1]),
    # 0 == wt + hp: int.__eq__ declines, so Python calls the reflected Expr.__eq__
    ("reflected_eq", 0 == A + B, "wt + hp = 0", [row(c1=1, c2=1)], [0]),
    ("eq_number", A == 2.5, "wt = 2.5", [row(c1=1)], [2.5]),
    ("eq_expr", A == B, "wt - hp = 0", [row(c1=1, c2=-1)], [0]),
    # wt + 3 == hp - 1  <=>  wt - hp = -1 - 3 = -4
    ("constants_to_d", A + 3 == B - 1, "wt - hp = -4", [row(c1=1, c2=-1)], [-4]),
    # 2(wt - hp)/2 + hp == 1  <=>  wt = 1 (hp cancels)
    ("partial_cancel", 2 * (A - B) / 2 + B == 1, "wt = 1", [row(c1=1)], [1]),
    ("and_RR", (A == 0) & (B == 1), "wt = 0 & hp = 1", [row(c1=1), row(c2=1)], [0, 1]),
    (
        "and_RS",
        (A == 0) & ((B == 1) & (A + B == 2)),
        "wt = 0 & hp = 1 & wt + hp = 2",
        [row(c1=1), row(c2=1), row(c1=1, c2=1)],
        [0, 1, 2],
    ),
    (
        "and_SR",
        ((A == 0) & (B == 1)) & (A - B == -1),
        "wt = 0 & hp = 1 & wt - hp = -1",
        [row(c1=1), row(c2=1), row(c1=1, c2=-1)],
        [0, 1, -1],
    ),
    (
        "and_SS",
        ((A == 0) & (B == 1)) & ((A == B + 7) & (B == 3)),
        "wt = 0 & hp = 1 & wt - hp = 7 & hp = 3",
        [row(c1=1), row(c2=1), row(c1=1, c2=-1), row(c2=1)],
        [0, 1, 7, 3],
    ),
    # a whole term: one row per column of the term, each = the value
    ("term_eq", G == 0, "C(cyl) = 0", [row(c3=1), row(c4=1)], [0, 0]),
    ("term_eq_value", G == 2, "C(cyl) = 2", [row(c3=1), row(c4=1)], [2, 2]),
    (
        "term_and_R",
        (G == 0) & (A == 1),
        "C(cyl) = 0 & wt = 1",
        [row(c3=1), row(c4=1), row(c1=1)],
        [0, 0, 1],
    ),
    (
        "R_and_term",
        (A == 1) & (G == 0),
        "wt = 1 & C(cyl) = 0",
        [row(c1=1), row(c3=1), row(c4=1)],
        [1, 0, 0],
    ),
    # levels: the "T." prefix of treatment coding may be left out
    ("level", G["6"] == 0, "C(cyl)[6] = 0", [row(c3=1)], [0]),
    ("level_number", G[8] == 0, "C(cyl)[8] = 0", [row(c4=1)], [0]),
    ("level_prefixed", G["T.8"] == 1, "C(cyl)[T.8] = 1", [row(c4=1)], [1]),
    ("level_diff", G["8"] - G["6"] == 0, "C(cyl)[8] - C(cyl)[6] = 0", [row(c3=-1, c4=1)], [0]),
    ("interaction_level", GH["6", "1"] == 0, "C(cyl):C(am)[6, 1] = 0", [row(c6=1)], [0]),
    (
        "interaction_levels_diff",
        GH["8", "1"] == GH["6", "1"],
        "C(cyl):C(am)[8, 1] - C(cyl):C(am)[6, 1] = 0",
        [row(c6=-1, c7=1)],
        [0],
    ),
    # the same interaction named with its factors in the other order: levels follow that order
    (
        "interaction_reversed",
        term("C(am):C(cyl)")["1", "8"] == 0,
        "C(am):C(cyl)[1, 8] = 0",
        [row(c7=1)],
        [0],
    ),
    ("interaction_term_eq", GH == 0, "C(cyl):C(am) = 0", [row(c6=1), row(c7=1)], [0, 0]),
    (
        "by_full_name",
        coef("C(cyl)[T.6]:C(am)[T.1]") == 0,
        "C(cyl)[T.6]:C(am)[T.1] = 0",
        [row(c6=1)],
        [0],
    ),
    ("intercept", coef("Intercept") == 1, "Intercept = 1", [row(c0=1)], [1]),
]


@pytest.mark.parametrize(
    ("built", "text", "c", "d"), [c[1:] for c in CASES], ids=[c[0] for c in CASES]
)
def test_operator_table(fitted, built, text, c, d):
    assert isinstance(built, (Restriction, RestrictionSystem))
    assert built.text() == text
    kind = "Restriction" if isinstance(built, Restriction) else "RestrictionSystem"
    assert repr(built) == f"<{kind}: {text}>"
    cm, dv, labels = fitted.resolve(built)
    np.testing.assert_array_equal(cm, np.array(c, dtype=float))
    np.testing.assert_array_equal(dv, np.array(d, dtype=float))
    assert len(labels) == len(d)


def test_term_rows_are_labelled_by_column(fitted):
    _, _, labels = fitted.resolve((G == 0) & (A == 1))
    assert labels == ["C(cyl)[T.6] = 0", "C(cyl)[T.8] = 0", "wt = 1"]


def test_expression_algebra_prints():
    # hand-written expected strings: weight 1 prints bare, constants go last with their sign
    assert repr(A + B) == "<Expr: wt + hp>"
    assert repr(0.5 * (A + B) - coef("c")) == "<Expr: 0.5*wt + 0.5*hp - c>"
    assert repr(1 - A) == "<Expr: -wt + 1>"
    assert repr(A - 2.5) == "<Expr: wt - 2.5>"
    assert repr(A - A) == "<Expr: 0>"
    assert repr(G["6"]) == "<Expr: C(cyl)[6]>"
    assert repr(G) == "<TermRef: C(cyl)>"


def test_every_operator_returns_a_new_object():
    e = A + B
    before = e.text()
    for new in (e + 1, e - B, -e, 2 * e, e / 2, e == 0):
        assert new is not e
    assert e.text() == before


@pytest.mark.parametrize(
    "obj",
    [A == 0, (A == 0) & (B == 0), G == 0, A + B, G],
    ids=["restriction", "system", "term_system", "expr", "termref"],
)
def test_bool_raises_and_says_use_ampersand(obj):
    with pytest.raises(TypeError, match="combine restrictions with '&'"):
        bool(obj)


def test_python_and_is_refused():
    with pytest.raises(TypeError, match="'&' \\(not 'and'\\)"):
        (A == 0) and (B == 0)  # noqa: B015, B018 - the point is that this raises


@pytest.mark.parametrize(
    "obj",
    [A + B, A == 0, (A == 0) & (B == 0), G],
    ids=["expr", "restriction", "system", "termref"],
)
def test_unhashable(obj):
    with pytest.raises(TypeError, match="unhashable"):
        hash(obj)
    with pytest.raises(TypeError, match="unhashable"):
        {obj}  # noqa: B018


@pytest.mark.parametrize("left", [A, G], ids=["expr", "termref"])
def test_not_equal_raises(left):
    with pytest.raises(TypeError, match="'!=' builds nothing"):
        left != 0  # noqa: B015


def test_nonlinear_and_invalid_arithmetic():
    with pytest.raises(TypeError, match="product of two coefficients is not linear"):
        A * B
    with pytest.raises(TypeError, match="dividing by a coefficient is not linear"):
        A / B
    with pytest.raises(ZeroDivisionError, match="divided by zero"):
        A / 0
    with pytest.raises(RestrictionShapeError, match="multiplier inf is not finite"):
        A * float("inf")
    with pytest.raises(RestrictionShapeError, match="constant nan is not finite"):
        A + float("nan")
    with pytest.raises(TypeError):
        A + "b"


def test_ampersand_needs_restrictions():
    with pytest.raises(TypeError, match="is an expression, not a restriction"):
        (A == 0) & B
    with pytest.raises(TypeError, match="is an expression, not a restriction"):
        (A == 0) & G
    with pytest.raises(TypeError):
        (A == 0) & 1


def test_builder_needs_no_fit_and_touches_no_data(mtcars):
    snapshot = copy.deepcopy(mtcars)
    # names that no fit has are fine while building: they are only checked on resolution
    r = (coef("no_such_column") == 1) & (term("C(nothing)")["x"] == 0)
    assert r.text() == "no_such_column = 1 & C(nothing)[x] = 0"
    pd.testing.assert_frame_equal(mtcars, snapshot)


def test_builder_resolves_through_any_resolver():
    # the builder only needs the Resolver methods; no fit, no linear algebra
    class Names:
        names = ("u", "v", "w")

        def column(self, name):
            return self.names.index(name)

        def term_columns(self, t):
            return {"uv": (0, 1)}[t]

        def level_column(self, t, key):
            raise AssertionError("not used")

    c, d, labels = ((coef("w") == 2 * coef("u") + 1) & (term("uv") == 0)).resolve(Names())
    # w = 2u + 1  <=>  w - 2u = 1 (terms print in the order they were written)
    np.testing.assert_array_equal(c, [[-2, 0, 1], [1, 0, 0], [0, 1, 0]])
    np.testing.assert_array_equal(d, [1, 0, 0])
    assert labels == ["w - 2*u = 1", "u = 0", "v = 0"]


def test_as_system_returns_a_system_unchanged():
    s = (A == 0) & (B == 1)
    assert as_system(s) is s
    one = as_system(A == 0)
    assert isinstance(one, RestrictionSystem) and one.text() == "wt = 0"
    listed = as_system([A == 0, (B == 1) & (A == B)])
    assert listed.text() == "wt = 0 & hp = 1 & wt - hp = 0"
    with pytest.raises(TypeError, match="is an expression, not a restriction"):
        as_system(A)
    with pytest.raises(TypeError, match="expected a restriction built with coef"):
        as_system(3)


def test_types_exported():
    assert isinstance(A, Expr) and isinstance(G, TermRef)


# -- from_matrix ------------------------------------------------------------------------------


def test_from_matrix_array(fitted):
    c = np.zeros((2, len(NAMES)))
    c[0, 1] = 1.0  # wt
    c[1, [1, 2]] = [1.0, -1.0]  # wt - hp
    c_copy = c.copy()
    s = from_matrix(c, d=[0.5, 0])
    cm, dv, labels = fitted.resolve(s)
    np.testing.assert_array_equal(cm, c_copy)
    np.testing.assert_array_equal(dv, [0.5, 0])
    assert labels == ["wt = 0.5", "wt - hp = 0"]
    # the system owns a copy: changing the caller's array afterwards changes nothing
    c[0, 1] = 99.0
    np.testing.assert_array_equal(fitted.resolve(s)[0], c_copy)
    np.testing.assert_array_equal(c[1], c_copy[1])


def test_from_matrix_default_and_scalar_d(fitted):
    c = np.eye(len(NAMES))[[1, 2]]
    np.testing.assert_array_equal(fitted.resolve(from_matrix(c))[1], [0, 0])
    np.testing.assert_array_equal(fitted.resolve(from_matrix(c, d=3))[1], [3, 3])
    # a single row may be given as a 1-d array
    np.testing.assert_array_equal(fitted.resolve(from_matrix(c[0]))[0], c[:1])


def test_from_matrix_dataframe_resolves_names_and_zero_fills(fitted):
    frame = pd.DataFrame(
        {"hp": [1.0, 0.0], "C(cyl)[T.8]": [0.0, 2.0], "wt": [-1.0, 0.0]},
        index=["hp equals wt", "twice 8"],
    )
    cm, dv, labels = fitted.resolve(from_matrix(frame, d=[0, 1]))
    np.testing.assert_array_equal(cm, [row(c1=-1, c2=1), row(c4=2)])
    np.testing.assert_array_equal(dv, [0, 1])
    assert labels == ["hp equals wt", "twice 8"]  # a non-default index labels the rows


def test_from_matrix_dataframe_unknown_name(fitted):
    frame = pd.DataFrame({"C(cyl)[T.66]": [1.0]})
    with pytest.raises(UnknownCoefficientError, match=r"Did you mean one of: \['C\(cyl\)\[T\.6\]'"):
        fitted.resolve(from_matrix(frame))


def test_from_matrix_combines_with_builder(fitted):
    s = from_matrix(np.eye(len(NAMES))[[2]], d=[1]) & (A == 0)
    cm, dv, _ = fitted.resolve(s)
    np.testing.assert_array_equal(cm, [row(c2=1), row(c1=1)])
    np.testing.assert_array_equal(dv, [1, 0])


# -- errors -----------------------------------------------------------------------------------


def test_unknown_coefficient_lists_close_matches(fitted):
    with pytest.raises(
        UnknownCoefficientError,
        match=r"no coefficient named 'hpp'\. Did you mean one of: \['hp'\]\?",
    ):
        fitted.resolve(coef("hpp") == 0)
    # the error is also a KeyError, for generic handlers
    with pytest.raises(KeyError):
        fitted.wald(coef("C(cyl)[T.5]") == 0)


def test_unknown_term_and_level(fitted):
    with pytest.raises(UnknownCoefficientError, match=r"no term 'C\(cyll\)'.*\['C\(cyl\)'"):
        fitted.resolve(term("C(cyll)") == 0)
    # 4 is the reference level: it has no column, and the message says so
    with pytest.raises(UnknownCoefficientError, match=r"no column for level '4'.*reference"):
        fitted.resolve(G["4"] == 0)
    with pytest.raises(UnknownCoefficientError, match=r"no column for level \('6', '0'\)"):
        fitted.resolve(GH["6", "0"] == 0)


def test_empty_restriction_weights_cancel(fitted):
    with pytest.raises(EmptyRestrictionError, match="'0 = 0' has no coefficients left"):
        fitted.wald(A - A == 0)
    # a level and its own column by name cancel too
    with pytest.raises(EmptyRestrictionError, match="weights cancel"):
        fitted.wald(G["6"] - coef("C(cyl)[T.6]") == 1)


def test_empty_matrix_and_zero_row(fitted):
    with pytest.raises(EmptyRestrictionError, match="C has no rows"):
        from_matrix(np.zeros((0, len(NAMES))))
    c = np.zeros((2, len(NAMES)))
    c[0, 1] = 1.0
    with pytest.raises(EmptyRestrictionError, match="row 1 of C .* is all zeros"):
        fitted.wald(from_matrix(c))
    with pytest.raises(EmptyRestrictionError, match="system has no rows"):
        fitted.wald(RestrictionSystem(()))


def test_wrong_column_count(fitted):
    with pytest.raises(
        RestrictionShapeError, match="C has 3 columns but the fit has 8 coefficients"
    ):
        fitted.wald(from_matrix(np.ones((1, 3))))


def test_wrong_d_length():
    with pytest.raises(RestrictionShapeError, match="d has 3 entries but C has 2 rows"):
        from_matrix(np.eye(8)[:2], d=[1, 2, 3])
    with pytest.raises(RestrictionShapeError, match="1 labels for 2 rows"):
        from_matrix(np.eye(8)[:2], labels=["one"])


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_c_or_d(bad):
    c = np.eye(8)[:2].copy()
    c[1, 3] = bad
    with pytest.raises(RestrictionShapeError, match=rf"C holds {bad!r} at row 1, column 3"):
        from_matrix(c)
    with pytest.raises(RestrictionShapeError, match=rf"d holds {bad!r} at row 0"):
        from_matrix(np.eye(8)[:2], d=[bad, 0])
    with pytest.raises(RestrictionShapeError, match="C holds nan at row 0, column 0"):
        from_matrix(pd.DataFrame({"wt": [np.nan]}))


def test_non_numeric_c_or_d():
    with pytest.raises(RestrictionShapeError, match="C must be numeric"):
        from_matrix([["x", "y"]])
    with pytest.raises(RestrictionShapeError, match="d must be numeric"):
        from_matrix(np.eye(2), d=["p", "q"])
    with pytest.raises(RestrictionShapeError, match="C must be 2-dimensional"):
        from_matrix(np.zeros((1, 2, 2)))


def test_coef_and_term_need_names():
    with pytest.raises(TypeError, match="coef\\(\\) needs a non-empty column name"):
        coef("")
    with pytest.raises(TypeError, match="term\\(\\) needs a non-empty term label"):
        term(3)  # type: ignore[arg-type]


# -- misuse of the operators: every case is a typed error that also keeps its built-in type ---
MISUSE = [
    ("and", lambda: (coef("a") == 0) and (coef("b") == 0), "RestrictionSyntaxError", TypeError),
    ("not", lambda: not (coef("a") == 0), "RestrictionSyntaxError", TypeError),
    ("!=", lambda: coef("a") != 0, "RestrictionSyntaxError", TypeError),
    ("<", lambda: coef("a") < 1, "RestrictionSyntaxError", TypeError),
    ("<=", lambda: coef("a") <= coef("b"), "RestrictionSyntaxError", TypeError),
    (">", lambda: term("g") > 0, "RestrictionSyntaxError", TypeError),
    (">=", lambda: 1 >= coef("a"), "RestrictionSyntaxError", TypeError),
    ("a*b", lambda: coef("a") * coef("b"), "RestrictionSyntaxError", TypeError),
    ("a/b", lambda: coef("a") / coef("b"), "RestrictionSyntaxError", TypeError),
    ("/0", lambda: coef("a") / 0, "ZeroDivisorError", ZeroDivisionError),
    ("term !=", lambda: term("g") != 0, "RestrictionSyntaxError", TypeError),
    ("coef(1)", lambda: coef(1), "RestrictionSyntaxError", TypeError),  # type: ignore[arg-type]
    ("as_system(str)", lambda: as_system("a = 0"), "RestrictionSyntaxError", TypeError),
]


@pytest.mark.parametrize(("op", "build", "error", "builtin"), MISUSE, ids=[m[0] for m in MISUSE])
def test_operator_misuse_is_a_typed_error(op, build, error, builtin):
    with pytest.raises(builtin) as info:
        build()
    assert type(info.value).__name__ == error
    assert isinstance(info.value, lc.errors.LincombError)


# -- a vector of targets for a term: one per column ------------------------------------------
def test_term_with_one_target_per_column_equals_the_rows_written_out():
    # the same restriction written coefficient by coefficient is the reference (the builder's
    # own single-row path, checked against statsmodels in test_reference_statsmodels.py)
    data = lc.datasets.field_trial()
    f = lc.fit("yield_t_ha ~ C(nitrogen) + variety", data)
    n = term("C(nitrogen)")
    cols = ["C(nitrogen)[T.40]", "C(nitrogen)[T.80]", "C(nitrogen)[T.160]"]
    targets = [1.0, 1.8, 2.4]
    by_hand = f.wald(
        (coef(cols[0]) == targets[0]) & (coef(cols[1]) == targets[1]) & (coef(cols[2]) == 2.4)
    )
    for written in (
        n == targets,
        n == np.array(targets),
        n == dict(zip(cols, targets, strict=True)),
        n == pd.Series(targets[::-1], index=cols[::-1]),  # matched by name, not position
    ):
        res = f.wald(written)
        np.testing.assert_allclose(res.target, targets)
        assert res.stat == pytest.approx(by_hand.stat, rel=1e-12)
        assert res.p == pytest.approx(by_hand.p, rel=1e-12)


@pytest.mark.parametrize(
    ("targets", "match"),
    [
        ([1.0, 2.0], "has 3 columns .* but 2 targets"),
        ({"C(nitrogen)[T.40]": 1.0}, "without a target"),
        (
            {
                "C(nitrogen)[T.40]": 1.0,
                "C(nitrogen)[T.80]": 1.0,
                "C(nitrogen)[T.999]": 1.0,
                "C(nitrogen)[T.160]": 1.0,
            },
            "unknown",
        ),
        ([1.0, float("nan"), 2.0], "finite numbers"),
        (["a", "b", "c"], "finite numbers"),
    ],
)
def test_term_targets_that_do_not_fit_the_columns_are_refused(targets, match):
    f = lc.fit("yield_t_ha ~ C(nitrogen) + variety", lc.datasets.field_trial())
    with pytest.raises(lc.errors.RestrictionShapeError, match=match):
        f.wald(term("C(nitrogen)") == targets)


def test_a_term_can_be_named_with_or_without_its_factor_wrapper():
    # "nitrogen" for the formula's C(nitrogen) (and the reverse for a text factor): the same
    # columns, so the same test as the formula's own spelling
    data = lc.datasets.field_trial()
    f = lc.fit("yield_t_ha ~ C(nitrogen) * variety", data)
    for bare, written in [("nitrogen", "C(nitrogen)"), ("nitrogen:variety", "C(nitrogen):variety")]:
        a, b = f.wald(term(bare) == 0), f.wald(term(written) == 0)
        assert (a.df_test, a.stat) == (b.df_test, b.stat)
    assert f.wald(term("nitrogen")["80"] == 0).stat == f.wald(term("C(nitrogen)")["80"] == 0).stat
    g = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    assert g.wald(term("C(line)") == 0).stat == g.wald(term("line") == 0).stat
    with pytest.raises(lc.errors.UnknownCoefficientError, match="Did you mean"):
        f.wald(term("nitro") == 0)


def test_asking_for_the_reference_level_points_to_level_means():
    f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    with pytest.raises(lc.errors.UnknownCoefficientError, match=r"lc\.levels\('line'\)"):
        f.wald(term("line")["L1"] == 0)
    # the route it names answers the question: L2 against the reference L1 as a level-mean
    # contrast equals the treatment-coded coefficient (common practice: treatment coding)
    via_means = f.wald(lc.levels("line").weights([[-1, 1, 0, 0]]))
    direct = f.wald(term("line")["L2"] == 0)
    assert via_means.stat == pytest.approx(direct.stat, rel=1e-12)
