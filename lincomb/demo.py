"""Run lincomb's main job on the bundled (invented) barley field trial.

``python -m lincomb.demo`` fits yield on nitrogen dose, variety and rainfall, then asks the
questions a coefficient table does not answer directly: are the dose levels jointly null, do
the doses show diminishing returns, is the best variety's advantage at least a target value,
and what do the restricted estimates look like under a linear dose trend.
"""

from __future__ import annotations

import warnings

import pandas as pd

from lincomb import clustered, coef, datasets, fit, term, wild_bootstrap


def main() -> None:
    """Print the demo analysis.

    Examples
    --------
    >>> main()  # doctest: +ELLIPSIS
    Barley field trial (invented data, ...
    """
    data = datasets.field_trial()
    print(
        "Barley field trial (invented data, simulated with a fixed seed):"
        f" {len(data)} plots, {data['farm'].nunique()} farms\n"
    )
    f = fit("yield_t_ha ~ C(nitrogen) + variety + rainfall_mm", data)
    print(f, "\n")
    n = term("C(nitrogen)")
    print("1. Does nitrogen matter at all? (all dose effects jointly zero)")
    print(f.wald(n == 0), "\n")
    print("2. Diminishing returns: is the 40->80 gain equal to the 80->160 gain?")
    print(f.wald(n["80"] - n["40"] == n["160"] - n["80"]), "\n")
    print("3. Is Brenna's advantage over Arlen 0.4 t/ha (a non-zero target)?")
    print(f.wald(coef("variety[T.Brenna]") == 0.4), "\n")
    print("4. A linear dose trend (gains proportional to dose) imposed by restricted LS:")
    trend = (n["80"] == 2 * n["40"]) & (n["160"] == 4 * n["40"])
    w = f.wald(trend)
    r = f.restrict(trend)
    print(w.test_frame().to_string(index=False))
    print(r, "\n")
    with pd.option_context("display.width", 120, "display.max_columns", 20):
        print("Tidy rows of test 2:")
        print(f.wald(n["80"] - n["40"] == n["160"] - n["80"]).row_frame().to_string(index=False))
    print("\n5. Plots within a farm share soil and weather: the same dose test, clustered by farm")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        print(f.wald(n == 0, covariance=clustered(by="farm")))
    for warned in caught:
        print(f"note: {warned.message}")
    print("\n6. Tests to trust with 10 farms: leverage-adjusted residuals with small-sample df,")
    print("   and a wild cluster bootstrap with the null imposed (all 2^10 sign vectors)")
    print(f.wald(n == 0, covariance=clustered(by="farm", adjust="bias-reduced")), "\n")
    boot = wild_bootstrap(f, n["80"] - n["40"] == n["160"] - n["80"], by="farm")
    print(boot)
    with pd.option_context("display.width", 120):
        print(boot.interval(0, 0.95).to_string())
    print(
        "\nThese are invented data. A small p-value is not proof of an effect. With only 10"
        " farms the plain cluster-robust test (5) rests on few clusters; the tests in 6 are"
        " built for that case."
    )


if __name__ == "__main__":
    main()
