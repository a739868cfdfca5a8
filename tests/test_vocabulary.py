"""One vocabulary for every Wald result: the three result classes share names and frames.

No numbers are checked here (the numerical checks live in the other test files); these tests
pin the public names written down in DEVELOPERS.md's vocabulary table.
"""

from __future__ import annotations

import numpy as np
import pytest

import lincomb as lc
from lincomb._results.frames import RESULT_ATTRIBUTES, ROW_COLUMNS, TEST_COLUMNS
from lincomb._results.many import MANY_EXTRA_COLUMNS

OLD_NAMES = (
    "statistic",
    "df_num",
    "df_den",
    "df_resid",
    "distribution",
    "p_value",
    "std_error",
    "t",
    "row_p_value",
    "row_p_values",
    "to_frame",
    "rows_frame",
)


def _single() -> lc.WaldTest:
    f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    return f.wald(lc.levels("line").pairwise())


def _batch() -> lc.WaldBatch:
    f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    pairs = lc.levels("line").pairwise()  # 6 rows, 3 of them redundant
    trend = lc.levels("line").successive() & (lc.levels("line").versus("L1"))  # 6 rows, rank 3
    return f.wald_batch([pairs, trend])


def _many() -> lc.ManyWaldTest:
    panel = lc.datasets.assay_panel()
    mf = lc.fit_many("~ treatment + batch", panel, responses=["g0001", "g0002", "g0003"])
    return mf.wald(lc.term("treatment") == 0)


# (maker, leading key column or None, extra trailing columns)
KINDS = {
    "WaldTest": (_single, None, ()),
    "WaldBatch": (_batch, "system", ()),
    "ManyWaldTest": (_many, "response", MANY_EXTRA_COLUMNS),
}


@pytest.fixture(params=list(KINDS), scope="module")
def kind(request):
    maker, key, extra = KINDS[request.param]
    return request.param, maker(), key, extra


def test_class_is_the_public_one(kind) -> None:
    name, res, _, _ = kind
    assert type(res) is getattr(lc, name)


def test_same_attribute_names(kind) -> None:
    _, res, _, _ = kind
    missing = [a for a in RESULT_ATTRIBUTES if not hasattr(res, a)]
    assert missing == []
    old = [a for a in OLD_NAMES if hasattr(res, a)]
    assert old == []


def test_same_row_frame_columns(kind) -> None:
    _, res, key, extra = kind
    frame = res.row_frame(level=0.9)
    lead = () if key is None else (key,)
    assert tuple(frame.columns) == (*lead, *ROW_COLUMNS, *extra)
    assert set(frame["level"]) == {0.9}
    # one row per restriction row (per system / response)
    assert len(frame) == np.size(res.estimate)


def test_same_test_frame_columns(kind) -> None:
    _, res, key, extra = kind
    frame = res.test_frame()
    lead = () if key is None else (key,)
    assert tuple(frame.columns) == (*lead, *TEST_COLUMNS, *extra)
    # one row per test: per system, per response
    assert len(frame) == np.size(res.stat)


def test_row_p_has_the_shape_of_ratio(kind) -> None:
    _, res, _, _ = kind
    assert np.shape(res.row_p) == np.shape(res.ratio)
    np.testing.assert_array_equal(
        res.row_frame()["p"].to_numpy(), np.asarray(res.row_p, dtype=float).ravel()
    )


def test_reference_names_the_distribution(kind) -> None:
    _, res, _, _ = kind
    assert res.reference in ("F", "chi2")
    assert set(res.test_frame()["reference"].astype(str)) == {res.reference}
