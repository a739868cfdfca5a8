"""Tests for the bundled invented datasets and their loader.

Expected shapes, levels and missing-value counts come from the simulation design documented
in ``lincomb/datasets/_generate.py`` (e.g. 10 farms x 12 cells x 2 reps - 20 lost plots = 220).
"""

from __future__ import annotations

from importlib import resources

import numpy as np
import pandas as pd
import pytest

from lincomb import datasets
from lincomb.datasets import _generate
from lincomb.errors import LincombError, UnknownDatasetError

NAMES = ("field_trial", "fill_lines", "service_sites", "assay_panel")

# name -> (rows, {column: dtype kind or "category"}, {factor column: (levels, ordered)}, n missing)
SPEC = {
    "field_trial": (
        220,
        {
            "yield_t_ha": "f",
            "nitrogen": "category",
            "nitrogen_kg": "i",
            "variety": "category",
            "farm": "category",
            "rainfall_mm": "f",
            "plot_area_m2": "f",
        },
        {
            "nitrogen": ([0, 40, 80, 160], True),
            "variety": (["Arlen", "Brenna", "Corrin"], False),
            "farm": ([f"F{i:02d}" for i in range(1, 11)], False),
        },
        4,
    ),
    "fill_lines": (
        300,
        {
            "fill_g": "f",
            "line": "category",
            "shift": "category",
            "temperature_c": "f",
            "nozzle_age_h": "f",
        },
        {
            "line": (["L1", "L2", "L3", "L4"], False),
            "shift": (["early", "late", "night"], True),
        },
        0,
    ),
    "service_sites": (
        1040,
        {
            "wait_min": "f",
            "site": "category",
            "week": "i",
            "staffing": "i",
            "protocol": "category",
        },
        {
            "site": ([f"S{i:02d}" for i in range(1, 41)], False),
            "protocol": (["standard", "triage"], False),
        },
        0,
    ),
    "assay_panel": (
        96,
        {
            "treatment": "category",
            "batch": "category",
            **{f"g{j:04d}": "f" for j in range(1, 201)},
        },
        {
            "treatment": (["control", "low", "mid", "high"], True),
            "batch": (["B1", "B2", "B3"], False),
        },
        0,
    ),
}


def _kind(series: pd.Series) -> str:
    return "category" if isinstance(series.dtype, pd.CategoricalDtype) else series.dtype.kind


def test_names() -> None:
    assert datasets.names() == NAMES


@pytest.mark.parametrize("name", NAMES)
def test_columns_dtypes_levels_missing(name: str) -> None:
    rows, columns, levels, n_missing = SPEC[name]
    df = datasets.load(name)
    assert df.shape == (rows, len(columns))
    assert {c: _kind(df[c]) for c in df.columns} == columns
    assert list(df.columns) == list(columns)
    for col, (expected, ordered) in levels.items():
        assert df[col].cat.categories.tolist() == expected, col
        assert df[col].cat.ordered is ordered, col
        assert df[col].notna().all(), col
        # every declared level actually occurs
        assert set(df[col].unique().tolist()) == set(expected), col
    assert int(df.isna().sum().sum()) == n_missing


@pytest.mark.parametrize("name", NAMES)
def test_thin_function_matches_load(name: str) -> None:
    pd.testing.assert_frame_equal(getattr(datasets, name)(), datasets.load(name))


def test_field_trial_details() -> None:
    df = datasets.field_trial()
    assert df["rainfall_mm"].isna().sum() == 4
    assert np.array_equal(df["nitrogen_kg"].to_numpy(), df["nitrogen"].astype("int64").to_numpy())
    assert (df["plot_area_m2"] > 0).all()
    assert df["farm"].nunique() == 10


def test_service_sites_is_panel_in_time_order() -> None:
    df = datasets.service_sites()
    weeks = df["week"].to_numpy().reshape(40, 26)
    assert (weeks == np.arange(1, 27)).all()
    assert (df["site"].cat.codes.to_numpy().reshape(40, 26) == np.arange(40)[:, None]).all()
    # protocol switches at most once per site, from standard to triage, and never back
    codes = df["protocol"].cat.codes.to_numpy().reshape(40, 26)
    assert (np.diff(codes, axis=1) >= 0).all()
    assert (df["wait_min"] > 0).all()


def test_assay_panel_truth_has_ten_percent_affected() -> None:
    assert len(_generate.ASSAY_AFFECTED) == 20
    doc = datasets.assay_panel.__doc__
    assert doc is not None
    for marker, delta in _generate.ASSAY_AFFECTED.items():
        assert f"{marker} {delta:+.2f}" in doc


@pytest.mark.parametrize("name", NAMES)
def test_load_returns_fresh_copy(name: str) -> None:
    first = datasets.load(name)
    expected = first.copy(deep=True)
    assert first is not datasets.load(name)
    first.iloc[:, 0] = first.iloc[0, 0]
    first.iloc[:3, 1] = first.iloc[5, 1]
    first["extra"] = 1
    pd.testing.assert_frame_equal(datasets.load(name), expected)


@pytest.mark.parametrize(
    ("bad", "suggestion"),
    [("feild_trial", "field_trial"), ("Fill_Lines", "fill_lines"), ("assay", "assay_panel")],
)
def test_unknown_name_suggests_closest(bad: str, suggestion: str) -> None:
    with pytest.raises(UnknownDatasetError, match=f"Did you mean '{suggestion}'") as info:
        datasets.load(bad)
    message = str(info.value)
    assert repr(bad) in message
    for name in NAMES:
        assert name in message


@pytest.mark.parametrize("bad", ["zzz", "", 3])
def test_unknown_name_without_suggestion(bad: object) -> None:
    with pytest.raises(UnknownDatasetError, match="available: field_trial, fill_lines") as info:
        datasets.load(bad)  # type: ignore[arg-type]
    assert "Did you mean" not in str(info.value)
    assert isinstance(info.value, LincombError)
    assert isinstance(info.value, LookupError)


@pytest.mark.parametrize("name", NAMES)
def test_shipped_csv_matches_generator(name: str) -> None:
    shipped = resources.files("lincomb.datasets").joinpath(f"{name}.csv")
    assert _generate.to_csv_text(_generate.build(name)) == shipped.read_text(encoding="utf-8")


@pytest.mark.parametrize("name", NAMES)
def test_shipped_csv_is_small(name: str) -> None:
    shipped = resources.files("lincomb.datasets").joinpath(f"{name}.csv")
    assert len(shipped.read_bytes()) < 300 * 1024
