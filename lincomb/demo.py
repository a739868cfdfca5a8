"""Run lincomb's main job on the bundled (invented) barley field trial.

``python -m lincomb.demo`` fits yield on nitrogen dose, variety and rainfall, then asks the
questions a coefficient table does not answer directly: are the dose levels jointly null, do
the doses show diminishing returns, is the best variety's advantage at least a target value,
and what do the restricted estimates look like under a linear dose trend.
"""

from __future__ import annotations

import warnings

import pandas as pd

from lincomb import clustered, coef, datasets, fit, term


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
    for note in caught:
        print(f"note: {note.message}")
    print(
        "\nThese are invented data. A small p-value is not proof of an effect, and with only 10"
        " farms the cluster-robust test rests on few clusters."
    )


if __name__ == "__main__":
    main()
