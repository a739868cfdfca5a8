"""Write the worked notebooks in this directory from the cell sources below.

The notebooks are saved without outputs or execution counts; ``tests/test_notebooks.py``
executes each one and checks that the saved files equal what this script writes.  Edit the
cells here, then run::

    python notebooks/generate.py

All data are invented (``lincomb.datasets``).
"""

from __future__ import annotations

import sys
from pathlib import Path

import nbformat

HERE = Path(__file__).resolve().parent

Cell = tuple[str, str]  # ("md" | "code", source)


def md(text: str) -> Cell:
    return ("md", text.strip("\n"))


def code(text: str) -> Cell:
    return ("code", text.strip("\n"))


# --------------------------------------------------------------------------------------------
FIELD_TRIAL: list[Cell] = [
    md("""
# Barley and nitrogen: testing an ordered dose response

A (simulated) barley trial on ten farms applied four nitrogen doses, 0, 40, 80 and 160 kg/ha,
to three varieties. Four questions a coefficient table does not answer directly:

1. Does nitrogen raise yield at all?
2. Do the measured gains agree with the planning values an advisory service uses
   (+1.0, +1.8 and +2.4 t/ha over no nitrogen at 40, 80 and 160 kg/ha)?
3. Do returns diminish? The doses are **not** equally spaced, so the fair comparison is the
   gain *per kilogram*: from 40 to 80 kg/ha against from 80 to 160 kg/ha.
4. Do the varieties respond to nitrogen alike, and was the trial large enough to tell?

The data are invented and ship with lincomb (`lincomb.datasets.field_trial`); the docstring
lists the truth they were simulated from, so you can check what a correct analysis finds.
"""),
    code("""
import lincomb as lc

data = lc.datasets.field_trial()
data.head()
"""),
    code("""
data.groupby("nitrogen", observed=True)["yield_t_ha"].agg(["count", "mean"]).round(3)
"""),
    md("""
## Fit

`C(nitrogen)` treats the dose as a factor with 0 kg/ha as the reference, so each dose
coefficient is the gain over no nitrogen for the same variety and rainfall, with no shape
imposed on the dose response. Four plots have no rainfall record; the fit drops them and says
so.
"""),
    code("""
f = lc.fit("yield_t_ha ~ C(nitrogen) + variety + rainfall_mm", data)
f
"""),
    md("""
## 1. Does nitrogen matter at all?

`lc.term("C(nitrogen)") == 0` restricts every coefficient of the term at once: three rows,
tested jointly with an F on 3 numerator degrees of freedom. Indexing the term by a level,
`n["80"]`, names one dose coefficient.
"""),
    code("""
n = lc.term("C(nitrogen)")
f.wald(n == 0)
"""),
    md("""
## 2. Do the gains agree with the planning values?

Three rows with non-zero targets `d`, joined with `&`. The joint F asks whether all three
planning values are compatible with the data at once; each row has its own t and interval.
"""),
    code("""
planning = (n["40"] == 1.0) & (n["80"] == 1.8) & (n["160"] == 2.4)
plan = f.wald(planning)
plan.row_frame().round(4)
"""),
    md("""
In the chart each estimated gain is an open circle on its 95% marginal interval (thick bar);
the thin bar below it is the 95% *simultaneous* interval (max-|t| method): all three thin bars
cover their true values together with probability 95%, which the marginal bars do not. The
black dash is the planning value.
"""),
    code("""
plan.plot(simultaneous="max-t")
"""),
    md("""
## 3. Diminishing returns

The gain per kilogram from 40 to 80 kg/ha is `(β80 − β40) / 40`, from 80 to 160 kg/ha it is
`(β160 − β80) / 80`. Equal per-kilogram gains are one restriction, written with ordinary
arithmetic on coefficients. A positive estimate of the difference means the second 80 kg
earn less per kilogram than the 40 kg before them.
"""),
    code("""
per_kg = f.wald((n["80"] - n["40"]) / 40 == (n["160"] - n["80"]) / 80)
per_kg.row_frame().round(5)
"""),
    md("""
A straight-line response through the zero dose says that the gains are proportional to the
dose: `β80 = 2·β40` and `β160 = 4·β40`, two rows. `test_frame()` gives the joint test as one
tidy row; `restrict` refits under the restriction. Its F from the change in residual sum of
squares equals the Wald F (classical covariance).
"""),
    code("""
linear = (n["80"] == 2 * n["40"]) & (n["160"] == 4 * n["40"])
lin = f.wald(linear)
lin.test_frame()
"""),
    code("""
r = f.restrict(linear)
print(r.coefficients.filter(like="nitrogen").round(4))
print(f"F from RSS: {r.f_statistic():.6g};  Wald F: {lin.stat:.6g}")
"""),
    md("""
## 4. Do the varieties respond alike?

Add the dose × variety interaction and test all six interaction coefficients at once.
"""),
    code("""
fi = lc.fit("yield_t_ha ~ C(nitrogen) * variety + rainfall_mm", data)
fi.wald(lc.term("C(nitrogen):variety") == 0).test_frame()
"""),
    md("""
A large p-value is **not** evidence that the responses are equal. The simulation behind these
data has a small interaction: Brenna gains 0.05, 0.10 and 0.20 t/ha more than Arlen at 40, 80
and 160 kg/ha, Corrin 0, 0.05 and 0.15 less. How likely was a trial of this size to detect
that? One replicate of the plan is the twelve dose × variety cells; the trial had about 18
plots per cell.
"""),
    code("""
cells = data[["nitrogen", "variety"]].drop_duplicates()
design = lc.planned_design("C(nitrogen) * variety", cells)
interaction = lc.term("C(nitrogen):variety") == 0
planned = lc.power_plan(design, interaction, sigma=fi.sigma)

truth = {"Brenna": (0.05, 0.10, 0.20), "Corrin": (0.0, -0.05, -0.15)}
beta = {
    f"C(nitrogen)[T.{dose}]:variety[T.{variety}]": gain
    for variety, gains in truth.items()
    for dose, gain in zip((40, 80, 160), gains, strict=True)
}
planned.power(beta=beta, replicates=18)
"""),
    code("""
planned.curve(beta=beta, target=0.8).plot()
"""),
    code("""
planned.replicates_for(0.8, beta=beta)
"""),
    md("""
## Caution

**Plots on the same farm are not independent.** They share soil, management and weather (the
simulation adds a farm effect), and the spread of yield grows with its level. The classical
covariance used above assumes independent errors of equal variance. A covariance robust to
correlation within farms changes the standard errors; with only ten farms it is itself
fragile, and lincomb warns about that.
"""),
    code("""
plan_by_farm = f.wald(planning, covariance=lc.clustered(by="farm"))
plan_by_farm.row_frame().round(4)[["restriction", "se", "ratio", "p", "df_error"]]
"""),
    md("""
**A test to trust with ten farms.** Two remedies are built for few clusters. The bias-reduced
covariance adjusts each farm's residuals for the leverage of its plots and gives every row its
own small-sample degrees of freedom (far fewer than 9 here), and the joint test an F with
estimated degrees of freedom. The wild cluster bootstrap imposes the null by restricted least
squares and flips the sign of each farm's residuals: with ten farms all 2¹⁰ sign patterns are
used, so its p-value has no simulation error.
"""),
    code("""
fair = f.wald(planning, covariance=lc.clustered(by="farm", adjust="bias-reduced"))
print(fair.test_frame()[["stat", "df_test", "df_error", "p"]].round(4))
fair.row_frame().round(4)[["restriction", "se", "ratio", "df_error", "p"]]
"""),
    code("""
boot = lc.wild_bootstrap(f, planning, by="farm")
print(boot)
boot.interval(0, 0.95)
"""),
    md("""
**Several questions, several tests.** Each row p-value above is unadjusted. Adjusting the
three planning rows for being tested together (Holm's method) raises them:
"""),
    code("""
plan.adjust("holm").to_frame()[["contrast", "p", "p_adjusted"]].round(4)
"""),
    md("""
**For the report.** A restriction can carry a label of its own, shown instead of its algebra
in every table, frame and picture; a result renders as Markdown (here), LaTeX or standalone
HTML with the digits asked for.
"""),
    code("""
gains = (n["80"] - n["40"] == n["160"] - n["80"]).labelled("equal gains 40→80 and 80→160")
fair_gains = f.wald(gains, covariance=lc.clustered(by="farm", adjust="bias-reduced"))
print(fair_gains.as_markdown(digits=3))
"""),
    md("""
**Estimates from elsewhere.** Any model's estimates and their covariance can be tested the same
way (a generalized linear or mixed model fitted by another package, say). Here the fit's own
estimates with the bias-reduced farm covariance, tested against a large-sample reference:
"""),
    code("""
robust_cov = f.covariance(lc.clustered(by="farm", adjust="bias-reduced"))
elsewhere = lc.from_estimates(f.coefficients, robust_cov)
elsewhere.wald(planning)
"""),
    md("""
* With the farm-robust covariance the answer to question 2 moves. Ten clusters are too few
  for the plain farm-robust test; the bias-reduced test with small-sample degrees of freedom
  and the wild cluster bootstrap are the ones to report, and a design with more farms is
  better still.
* A rejected linear response says the data contradict linearity under this model, not which
  curve is right; a non-significant test is not proof of no effect (see the power above).
* The data are invented for demonstration.
"""),
]

# --------------------------------------------------------------------------------------------
FILL_LINES: list[Cell] = [
    md("""
# Filling lines: are the packs on the 500 g target?

A (simulated) packing hall runs four filling lines on three shifts. The nominal fill is
500 g. Quality engineering asks:

1. At standard conditions (early shift, 21 °C in the hall, a nozzle 200 hours old) does every
   line fill 500 g on average? The hypothesis has a **non-zero right-hand side**.
2. Which lines are off target, and by how much?
3. Which lines differ from each other?

The data ship with lincomb (`lincomb.datasets.fill_lines`, invented); its docstring states the
true line offsets used to simulate them.
"""),
    code("""
import lincomb as lc

data = lc.datasets.fill_lines()
data.describe().round(2)
"""),
    md("""
## Fit at standard conditions

Centring temperature at 21 °C and nozzle age at 200 h, and fitting without an intercept
(`0 + line`), makes each `line[...]` coefficient the mean fill of that line on an early
shift at standard conditions: exactly the quantity the target is about.
"""),
    code("""
data = data.assign(
    temp_dev=data["temperature_c"] - 21.0,
    nozzle_dev=data["nozzle_age_h"] - 200.0,
)
f = lc.fit("fill_g ~ 0 + line + shift + temp_dev + nozzle_dev", data)
f
"""),
    md("""
## Is the error spread the same on every line?

The classical covariance assumes so. The residual spread per line says otherwise: one line is
about twice as noisy as the others.
"""),
    code("""
rows = f.row_diagnostics().row_frame().set_index("row")  # fitted values, residuals, leverages
rows["residual"].groupby(data.loc[rows.index, "line"], observed=True).std().round(2)
"""),
    md("""
## The fit at a glance, term by term, and level by level

`overview()` gives R², the overall F, sigma, log-likelihood, AIC and BIC; `term_tests`
tests every term's columns jointly (here each adjusted for the terms that do not contain it);
`level_means` gives the mean fill of each line with the shift averaged over and the covariates
at their means, and its differences take the usual multiplicity adjustments.  `expected`
gives the mean fill and an interval for a single new pack at chosen conditions, and
`compare_nested` asks whether the shift and the covariates add anything to the lines alone.
"""),
    code("""
f.overview()
"""),
    code("""
f.term_tests("non-containing")
"""),
    code("""
means = f.level_means("line")
means
"""),
    code("""
means.differences().adjust("holm").to_frame().round(4)
"""),
    code("""
import pandas as pd

at = pd.DataFrame(
    {
        "line": ["L1", "L2"],
        "shift": ["early", "early"],
        "temp_dev": [0.0, 2.0],
        "nozzle_dev": [0.0, 0.0],
    }
)
f.expected(at).row_frame(level=0.95).round(3)
"""),
    code("""
lc.compare_nested(lc.fit("fill_g ~ 0 + line", data), f)
"""),
    md("""
With unequal variances the pooled standard error is too small for the noisy line and too large
for the others. A heteroskedasticity-robust covariance (`"HC3"`) does not assume equal spread;
`with_covariance` makes it the default of every test on this fit.
"""),
    code("""
fr = f.with_covariance("HC3")
se = f.std_errors().to_frame("classical").assign(HC3=fr.std_errors())
se.filter(like="line", axis=0).round(3)
"""),
    md("""
## 1. Every line on target

`lc.term("line") == 500` restricts every coefficient of the `line` term to 500 at once. The
same four rows can be written one by one with the builder; both give the same test.
"""),
    code("""
line = lc.term("line")
on_target = fr.wald(line == 500)
on_target
"""),
    code("""
one_by_one = (line["L1"] == 500) & (line["L2"] == 500) & (line["L3"] == 500) & (line["L4"] == 500)
print(f"{fr.wald(one_by_one).stat:.10g}  {on_target.stat:.10g}")
"""),
    md("""
## 2. Which lines are off target?

Four lines are four questions. The chart marks the 500 g target on every row and puts the
Šidák simultaneous intervals (thin bars) beside the marginal ones: a line whose thin bar
misses 500 g is off target even after allowing for having looked at all four.
"""),
    code("""
on_target.plot(
    simultaneous="sidak",
    title="Mean fill at standard conditions against the 500 g target (HC3)",
)
"""),
    code("""
on_target.simultaneous("sidak").to_frame().round(3)
"""),
    md("""
## 3. Which lines differ from each other?

`lc.levels("line").pairwise()` writes all six differences of line means. They have rank 3
(the last three follow from the first three), so the joint F has 3 numerator degrees of
freedom, and the max-|t| simultaneous intervals account for the dependence exactly.
"""),
    code("""
pairs = fr.wald(lc.levels("line").pairwise())
pairs.simultaneous("max-t").to_frame().round(3)
"""),
    md("""
## Caution

* A mean on target is not a pack on target: legal and customer rules are about individual
  packs, so the noisy line can fail them with a perfect mean.
* A non-significant deviation does not show a line *is* on target; only an interval that lies
  inside an agreed tolerance shows that.
* The robust covariance fixes the standard errors, not the model: the fit still assumes the
  temperature and nozzle-age effects are linear and the same on every line.
* The data are invented for demonstration.
"""),
]

# --------------------------------------------------------------------------------------------
SERVICE_SITES: list[Cell] = [
    md("""
# Service sites: did triage shorten the wait?

A (simulated) service network recorded the mean waiting time at 40 sites every week for 26
weeks. Half of the sites switched from the standard protocol to a triage protocol part-way
through; staffing varies from week to week. Questions:

1. Holding staffing fixed, did triage change the waiting time?
2. The programme promised a 4-minute reduction: is the estimate compatible with that target?
3. Is switching to triage worth as much as two extra staff on shift?

The observations are **clustered**: 26 weeks from each site, and consecutive weeks at a site
resemble each other. The data are invented (`lincomb.datasets.service_sites`).
"""),
    code("""
import numpy as np

import lincomb as lc

data = lc.datasets.service_sites()
data.head()
"""),
    md("""
## Two fits

A pooled fit compares sites with each other; adding `C(site)` compares each site with
itself before and after its switch, so stable differences between sites cannot masquerade as
a protocol effect.
"""),
    code("""
pooled = lc.fit("wait_min ~ protocol + staffing", data)
within = lc.fit("wait_min ~ protocol + staffing + C(site)", data)
keep = ["protocol[T.triage]", "staffing"]
for name, fit in [("pooled", pooled), ("within sites", within)]:
    table = fit.coef_frame().set_index("coefficient").loc[keep, ["estimate", "se"]]
    print(name, table.round(3), sep="\\n", end="\\n\\n")
"""),
    md("""
## The observations are clustered

Every test so far would treat the 1040 rows as independent. Residuals of consecutive weeks at
the same site are strongly correlated:
"""),
    code("""
resid = within.row_diagnostics().residual  # the rows in data order (none were dropped)
same_site = data["site"].to_numpy()[1:] == data["site"].to_numpy()[:-1]
lag1 = np.corrcoef(resid[1:][same_site], resid[:-1][same_site])[0, 1]
print(f"correlation of residuals in consecutive weeks at a site: {lag1:.2f}")
"""),
    md("""
The site effects remove stable differences between sites, not this week-to-week dependence.
A covariance robust to clustering by site lets errors correlate in any way within a site (40
clusters here; sites are independent of each other). `with_covariance` makes it the default of
every test on the fit; the reference distribution then has G − 1 = 39 denominator degrees of
freedom.
"""),
    code("""
robust = within.with_covariance(lc.clustered(by="site"))
se = within.std_errors().to_frame("classical").assign(by_site=robust.std_errors())
se.loc[keep].round(3)
"""),
    md("""
## 1 and 2. A protocol effect, and the promised 4 minutes

The same coefficient against two targets: 0 (no effect) and −4 (the promise). The classical
test of the promise is shown next to the site-robust one: they disagree.
"""),
    code("""
triage = lc.coef("protocol[T.triage]")
robust.wald(triage == 0)
"""),
    code("""
promise = triage == -4
for name, fit in [("classical", within), ("by site", robust)]:
    row = fit.wald(promise).row_frame().iloc[0]
    print(f"{name:>9}: estimate {row.estimate:.3f}, SE {row.se:.3f}, p {row.p:.4f}")
"""),
    md("""
## 3. Triage against two extra staff

The staffing coefficient is the change per extra person, so "triage is worth two staff" is
`β_triage = 2·β_staffing`, one row with coefficients on both sides. The chart puts it beside
the 4-minute promise, each row's hypothesized value marked, with Bonferroni simultaneous
intervals beside the marginal ones.
"""),
    code("""
staff = lc.coef("staffing")
worth = robust.wald(promise & (triage == 2 * staff))
worth.row_frame().round(4)
"""),
    code("""
worth.plot(simultaneous="bonferroni")
"""),
    md("""
Rows that contradict each other are refused with a message that names them, not quietly
tested: a triage effect of −4, a staffing effect of −1.5 and "triage equals two staff" cannot
all hold, since 2 × (−1.5) = −3.
"""),
    code("""
try:
    robust.wald(promise & (staff == -1.5) & (triage == 2 * staff))
except lc.errors.InconsistentRestrictionError as err:
    print(err)
"""),
    md("""
## Caution

* With positively correlated errors within sites, classical standard errors are too small and
  the p-values too optimistic: above, the classical test rejects the 4-minute promise and the
  site-robust one does not. Choose the covariance before looking at the answers.
* Sites were not randomized to switch, and a switch may coincide with other changes at the
  site; the estimate is an association under this model, not proof that triage caused it.
* Several questions mean several tests: adjust for multiplicity, or name the primary one in
  advance.
* Waiting times describe people. Decisions based on such an analysis affect them: have the
  analysis plan and its interpretation reviewed by a qualified statistician and follow the
  reporting guidelines of your field.
* The data are invented for demonstration.
"""),
]

NOTEBOOKS: dict[str, list[Cell]] = {
    "01_field_trial_nitrogen.ipynb": FIELD_TRIAL,
    "02_fill_lines_target.ipynb": FILL_LINES,
    "03_service_sites_clustered.ipynb": SERVICE_SITES,
}


def build(cells: list[Cell]) -> nbformat.NotebookNode:
    """A notebook with no outputs, no execution counts and stable cell ids."""
    nb = nbformat.v4.new_notebook()
    nb.metadata = {
        "kernelspec": {"name": "python3", "display_name": "Python 3", "language": "python"},
        "language_info": {"name": "python"},
    }
    for i, (kind, source) in enumerate(cells):
        make = nbformat.v4.new_markdown_cell if kind == "md" else nbformat.v4.new_code_cell
        cell = make(source)
        cell.id = f"cell-{i:02d}"
        nb.cells.append(cell)
    nbformat.validate(nb)
    return nb


def render(cells: list[Cell]) -> str:
    """The notebook file's text exactly as :func:`main` writes it."""
    return nbformat.writes(build(cells)) + "\n"


def main(argv: list[str] | None = None) -> int:
    """Write every notebook next to this script; print the names written."""
    del argv
    for name, cells in NOTEBOOKS.items():
        (HERE / name).write_text(render(cells), encoding="utf-8")
        print(f"wrote notebooks/{name}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
