"""Designs rebuilt without formulaic (``lincomb._model.column_plan.ColumnPlan``).

Reference: formulaic itself.  Every design a plan builds is compared, value for value
(``assert_array_equal``, no tolerance), with the model matrix formulaic's own spec gives for the
same rows (``spec.get_model_matrix(chunk)``), over seeded data and many codings; formulas a plan
cannot rebuild exactly must get none, and still encode as formulaic does.
"""

from __future__ import annotations

import pickle

import numpy as np
import pandas as pd
import pytest

import lincomb as lc
from lincomb._model import column_plan
from lincomb._model.encoder import FormulaEncoder
from lincomb.errors import InputError, UnseenLevelError

N, CHUNK = 600, 100


def _data(seed: int = 7) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    g = np.array(["a", "b", "c", "d"])[rng.integers(0, 4, N)]
    h = np.array(["u", "v", "w"])[rng.integers(0, 3, N)]
    df = pd.DataFrame(
        {
            "x1": rng.normal(size=N) * 1e3 + 1e4,  # many significant digits in every product
            "x2": rng.normal(size=N) / 7,
            "xi": rng.integers(-50, 50, N),
            "b": rng.integers(0, 2, N).astype(bool),
            "g": pd.Series(g, dtype="str"),
            "h": pd.Series(h, dtype=object),
            "k": rng.integers(1, 4, N),
            "pos": rng.uniform(1, 2, N),
        }
    )
    df["y"] = df["x1"] / 1e3 + df["x2"] + (df["g"] == "b") + rng.normal(size=N)
    df.loc[::17, "x2"] = -0.0  # signed zeros must come out as formulaic makes them
    df.loc[::19, "x2"] = 0.0
    return df


def _same_bits(got: np.ndarray, ref: np.ndarray) -> None:
    """Equal to the last bit, the sign of a zero included."""
    assert got.shape == ref.shape
    np.testing.assert_array_equal(got.view(np.uint64), ref.view(np.uint64))


def _formulaic(enc: FormulaEncoder, chunk: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """formulaic's design and response of ``chunk`` under the encoder's spec (the reference)."""
    mm = enc._spec.get_model_matrix(chunk, na_action="raise")
    return mm.rhs.to_numpy(dtype=np.float64), mm.lhs.to_numpy(dtype=np.float64)[:, 0]


WITH_PLAN = [
    "y ~ x1 + x2 + g",
    "y ~ g * x1",
    "y ~ C(g, contr.sum) + C(h, contr.helmert) + x2",
    "y ~ C(g, contr.poly):x1 + x2",
    "y ~ C(g, contr.diff) + h:x2",
    "y ~ g * h",
    "y ~ g:h + x1",
    "y ~ C(g):C(k):h",  # three factors, no numeric column
    "y ~ C(k) + b + xi + C(k):xi",
    "y ~ 0 + g + x1",
    "y ~ C(g, contr.treatment('c')) + x1",
    "y ~ C(g, levels=['d', 'c', 'b', 'a']) + x1",
    "y ~ C(g, contr.custom([[1, 0], [0, 1], [-1, -1], [0.5, 0.25]])) + x1",
    "y ~ C(g, spans_intercept=False) + x1",
    "y ~ g + C(g, contr.sum)",
    "xi ~ g + x1",
    "~ g * x1",
]


@pytest.mark.parametrize("formula", WITH_PLAN)
def test_a_plan_gives_formulaics_numbers_exactly(formula: str) -> None:
    df = _data()
    enc, _ = FormulaEncoder.learn(formula, df.iloc[:CHUNK], column_plan=True)
    assert enc._columns is not None
    for start in range(CHUNK, N, CHUNK):
        chunk = df.iloc[start : start + CHUNK]
        got = enc.encode(chunk)
        mm = enc._spec.get_model_matrix(chunk, na_action="raise")
        two = enc.response is not None
        x_ref = (mm.rhs if two else mm).to_numpy(dtype=np.float64)
        _same_bits(got.x, x_ref)  # formulaic's values, no tolerance
        if two:
            _same_bits(got.y, mm.lhs.to_numpy(dtype=np.float64)[:, 0])
        assert got.x.flags.f_contiguous and got.x.flags.writeable


def test_a_chunk_missing_levels_and_declared_levels() -> None:
    df = _data()
    levels = {"g": ["a", "b", "c", "d", "e"]}  # 'e' in no row: an all-zero column
    enc, _ = FormulaEncoder.learn(
        "y ~ g * x1 + h", df.iloc[:CHUNK], levels=levels, column_plan=True
    )
    assert enc._columns is not None
    only_a = df[df["g"] == "a"].iloc[:40]
    got = enc.encode(only_a)
    ref_x, ref_y = _formulaic(enc, only_a.assign(g=pd.Categorical(only_a["g"], levels["g"])))
    _same_bits(got.x, ref_x)
    _same_bits(got.y, ref_y)


PLAN_OR_NOT = [
    ("y ~ np.log(pos) + g", "a transform"),
    ("y ~ x1:x2 + g", "a product of two numeric columns"),
    ("y ~ g:h:x1", "two factors and a numeric column"),
    ("y ~ center(x1) + g", "a stateful transform"),
    ("np.log(pos) ~ g + x1", "a transformed response"),
    ("y ~ I(2 * x1) + g", "an expression"),
]


@pytest.mark.parametrize(("formula", "why"), PLAN_OR_NOT, ids=[w for _, w in PLAN_OR_NOT])
def test_formulas_a_plan_cannot_rebuild_exactly_get_none(formula: str, why: str) -> None:
    df = _data()
    enc, _ = FormulaEncoder.learn(formula, df.iloc[:CHUNK], column_plan=True)
    assert enc._columns is None, why
    chunk = df.iloc[CHUNK : 2 * CHUNK]
    ref_x, ref_y = _formulaic(enc, chunk)
    _same_bits(enc.encode(chunk).x, ref_x)


def test_unseen_level_refused_with_the_same_error_as_without_a_plan() -> None:
    df = _data()
    late = df.iloc[CHUNK : 2 * CHUNK].assign(g=lambda d: d["g"].where(d.index != 150, "zz"))
    messages = []
    for plan in (True, False):
        enc, _ = FormulaEncoder.learn("y ~ g + x1", df.iloc[:CHUNK], column_plan=plan)
        assert (enc._columns is not None) is plan
        with pytest.raises(UnseenLevelError, match="zz") as err:
            enc.encode(late, where="chunk 1")
        messages.append(str(err.value))
    assert messages[0] == messages[1]


def test_a_chunk_with_other_dtypes_is_encoded_by_formulaic() -> None:
    df = _data()
    enc, _ = FormulaEncoder.learn("y ~ g * x2 + xi", df.iloc[:CHUNK], column_plan=True)
    assert enc._columns is not None
    chunk = df.iloc[CHUNK : 2 * CHUNK]
    for changed in (
        chunk.assign(xi=chunk["xi"].astype(float)),
        chunk.assign(g=chunk["g"].astype("category")),
        chunk.assign(g=chunk["g"].astype(object)),
    ):
        assert enc._columns.columns(changed) is None  # declined: formulaic encodes it
        ref_x, ref_y = _formulaic(enc, changed)
        _same_bits(enc.encode(changed).x, ref_x)


def test_no_plan_is_kept_unless_it_reproduces_the_sample(monkeypatch) -> None:
    df = _data()
    real = column_plan.ColumnPlan.columns

    def off_by_one_ulp(self, frame):
        x, y = real(self, frame)
        x[0, -1] = np.nextafter(x[0, -1], np.inf)
        return x, y

    monkeypatch.setattr(column_plan.ColumnPlan, "columns", off_by_one_ulp)
    enc, _ = FormulaEncoder.learn("y ~ g + x1", df.iloc[:CHUNK], column_plan=True)
    assert enc._columns is None


def test_bad_values_are_still_refused_with_a_plan() -> None:
    df = _data()
    enc, _ = FormulaEncoder.learn("y ~ g + x1", df.iloc[:CHUNK], column_plan=True, weights="pos")
    assert enc._columns is not None
    bad = df.iloc[CHUNK : 2 * CHUNK].copy()
    bad.loc[130, "x1"] = np.inf
    with pytest.raises(InputError, match=r"chunk 1: design column 'x1' holds inf at row 130"):
        enc.encode(bad, weights="pos", where="chunk 1")
    bad = df.iloc[CHUNK : 2 * CHUNK].copy()
    bad.loc[140, "pos"] = -1.0
    with pytest.raises(InputError, match="weights must be positive: row 140"):
        enc.encode(bad, weights="pos", where="chunk 1")


def test_missing_rows_are_dropped_before_the_plan() -> None:
    df = _data()
    enc, _ = FormulaEncoder.learn("y ~ g * x1", df.iloc[:CHUNK], column_plan=True)
    holed = df.iloc[CHUNK : 2 * CHUNK].copy()
    holed.loc[[105, 170], "x1"] = np.nan
    holed.loc[[120], "g"] = None
    got = enc.encode(holed)
    assert sorted(got.dropped) == [105, 120, 170]
    ref_x, ref_y = _formulaic(enc, holed.drop(index=[105, 120, 170]))
    _same_bits(got.x, ref_x)
    _same_bits(got.y, ref_y)


def test_a_pickled_encoder_keeps_its_plan() -> None:
    df = _data()
    enc, _ = FormulaEncoder.learn("y ~ C(g, contr.sum) * x1", df.iloc[:CHUNK], column_plan=True)
    again = pickle.loads(pickle.dumps(enc))
    assert again._columns is not None and again == enc
    chunk = df.iloc[CHUNK:]
    np.testing.assert_array_equal(again.encode(chunk).x, enc.encode(chunk).x)


def test_fit_chunks_equals_the_chunked_fit_through_formulaic(monkeypatch) -> None:
    df = _data()
    formula = "y ~ C(g, contr.sum) * x1 + h + xi"
    parts = [df.iloc[s : s + CHUNK] for s in range(0, N, CHUNK)]
    before = [p.copy(deep=True) for p in parts]
    with_plan = lc.fit_chunks(formula, parts)
    for part, kept in zip(parts, before, strict=True):
        pd.testing.assert_frame_equal(part, kept)  # inputs are never mutated
    assert with_plan.design.encoder._columns is not None
    monkeypatch.setattr(column_plan.ColumnPlan, "build", classmethod(lambda *a: None))
    without = lc.fit_chunks(formula, parts)
    assert without.design.encoder._columns is None
    # the same design rows, so the same numbers to the last bit
    np.testing.assert_array_equal(with_plan.moments.r, without.moments.r)
    np.testing.assert_array_equal(with_plan.coefficients, without.coefficients)
    assert with_plan.rss == without.rss


@pytest.mark.parametrize("formula", ["y ~ g + C(h, contr.poly) + x1", "y ~ C(k, contr.sum) * x2"])
def test_tables_read_from_the_sample_equal_formulaics_probe(formula: str) -> None:
    df = _data()
    sample = df.iloc[:CHUNK]
    enc, rows = FormulaEncoder.learn(formula, sample)
    spec = enc._spec
    read = column_plan.ColumnPlan.build(spec.rhs, spec.lhs, sample, rows.x)
    probed = column_plan.ColumnPlan.build(spec.rhs, spec.lhs, sample)
    assert read is not None and probed is not None
    for a, b in zip(read.terms, probed.terms, strict=True):
        assert a.columns == b.columns and a.integer == b.integer
        _same_bits(np.ascontiguousarray(a.table), np.ascontiguousarray(b.table))
