"""Checks on the rows and columns a formula reads, made once for every route.

The :class:`~lincomb._model.encoder.FormulaEncoder` calls these on every frame it learns from
or encodes (a whole frame, a chunk, a Dask partition, new data), so every route accepts and
refuses the same inputs: column names (duplicated, non-text, awkward in a formula), column
dtypes (dates, time differences, complex numbers, mixed value types, nullable strings),
declared levels, weights (a column, a Series aligned by label, an array), missing values and a
non-numeric response.  Each refusal is a typed error that names the column or rows and the fix.
Nothing here reads a formula or imports formulaic.
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb.errors import InputError, MissingValueError, UnseenLevelError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._model.encoder import FormulaEncoder

__all__ = [
    "screened_rows",
    "unused_level_hint",
    "cast_levels",
    "align_series",
    "refuse_non_numeric_responses",
]


def cast_levels(
    frame: pd.DataFrame, levels: Mapping[str, Sequence[Any]], where: str
) -> pd.DataFrame:
    """Give the columns in ``levels`` a categorical dtype with exactly those categories.

    A value outside the declared levels raises :class:`~lincomb.errors.UnseenLevelError`.
    ``frame`` is not modified (a shallow copy is changed when a column needs casting).

    Examples
    --------
    >>> import pandas as pd
    >>> out = cast_levels(pd.DataFrame({"g": ["b", "a"]}), {"g": ["a", "b", "c"]}, "data")
    >>> out["g"].cat.categories.tolist()
    ['a', 'b', 'c']
    """
    if not levels:
        return frame
    out = frame
    for var, lv in levels.items():
        if var not in frame.columns:
            continue
        col = frame[var]
        lv_list = list(lv)
        if isinstance(col.dtype, pd.CategoricalDtype) and list(col.cat.categories) == lv_list:
            continue
        present = col.dropna()
        unseen = pd.Index(present.unique()).difference(pd.Index(lv_list))
        if len(unseen):
            raise UnseenLevelError(
                f"{where}: column {var!r} holds level(s) {list(unseen)[:5]} not among the"
                f" declared levels {lv_list}. Add them to levels[{var!r}]."
            )
        if out is frame:
            out = frame.copy(deep=False)
        if isinstance(col.dtype, pd.CategoricalDtype):  # unused categories may be dropped
            out[var] = col.cat.set_categories(lv_list)
        else:
            out[var] = pd.Categorical(col, categories=lv_list)
    return out


def _string_names(frame: pd.DataFrame, where: str | None) -> pd.DataFrame:
    """``frame`` with non-text column names (integers, ...) turned into text, so that a formula
    can refer to column ``5`` as `` `5` ``; refuses names that would then collide."""
    cols = frame.columns
    if all(isinstance(c, str) for c in cols):
        return frame
    text = [str(c) for c in cols]
    seen: dict[str, int] = {}
    for c in text:
        seen[c] = seen.get(c, 0) + 1
    clash = [c for c, k in seen.items() if k > 1]
    if clash:
        raise InputError(
            f"{where or 'data'} has columns whose names read alike as text: {clash[:5]} (e.g. the"
            " integer 5 and the string '5'); rename them so every column has a distinct name."
        )
    out = frame.copy(deep=False)
    out.columns = pd.Index(text, dtype=object)
    return out


def _kind(value: object) -> str:
    if isinstance(value, bool | np.bool_):
        return "bool"
    if isinstance(value, int | np.integer):
        return "int"
    if isinstance(value, float | np.floating):
        return "float"
    if isinstance(value, str | np.str_):
        return "str"
    return type(value).__name__


def _screen(
    frame: pd.DataFrame, variables: Sequence[str], where: str | None, extra: Sequence[str] = ()
) -> pd.DataFrame:
    """Refuse columns the formula reads that would be encoded wrongly; normalise text dtypes.

    Refused, naming the column: duplicated column names; date-time, time-delta and period
    columns (their storage unit would silently become the unit of the coefficient); complex
    numbers; object columns mixing value types (``True`` would merge with ``1``, and ``1`` and
    ``'1'`` would make two levels that print alike).  Nullable ``string`` columns (Python or
    pyarrow storage, ``ArrowDtype`` strings) become pandas' default text dtype, which the
    formula library encodes as a factor.  ``frame`` is not modified.
    """
    label = where or "data"
    used = [v for v in variables if v in frame.columns] + [e for e in extra if e in frame.columns]
    dup = frame.columns[frame.columns.duplicated()]
    twice = sorted({str(c) for c in dup if c in used})
    if twice:
        raise InputError(
            f"{label} has duplicate column names: {twice} appear(s) more than once, so the"
            " formula cannot tell which to use. Rename or drop the copies (e.g."
            " data.loc[:, ~data.columns.duplicated()])."
        )
    out = frame
    for v in used:
        col = frame[v]
        dt = col.dtype
        kind = getattr(dt, "kind", "O")
        if kind in "mM" or isinstance(dt, pd.PeriodDtype | pd.DatetimeTZDtype):
            what = "time differences" if kind == "m" else "dates/times"
            how = (
                f"data[{v!r}] / pd.Timedelta(1, 'h') for hours"
                if kind == "m"
                else f"(data[{v!r}] - pd.Timestamp('2020-01-01')) / pd.Timedelta(1, 'D') for days"
                " since a date you choose"
            )
            raise InputError(
                f"{label}: column {v!r} holds {what} ({dt}), which have no unit a regression"
                f" coefficient could carry (their storage unit would silently become it). Convert"
                f" it to a number in a unit you choose, e.g. {how}, or to a factor with"
                f" data[{v!r}].astype(str)."
            )
        if kind == "c":
            raise InputError(
                f"{label}: column {v!r} holds complex numbers ({dt}); a linear model here needs"
                " real values: split it into real and imaginary parts (np.real, np.imag)."
            )
        if (
            isinstance(dt, pd.StringDtype)
            and dt.na_value is not np.nan
            or (isinstance(dt, pd.ArrowDtype) and pd.api.types.is_string_dtype(dt))
        ):
            if out is frame:
                out = frame.copy(deep=False)
            out[v] = col.astype(object).where(col.notna(), np.nan).astype("str")
            continue
        if kind == "O":
            inferred = pd.api.types.infer_dtype(col, skipna=True)
            if inferred.startswith("mixed"):
                kinds = sorted({_kind(x) for x in pd.unique(col.dropna().to_numpy())})
                if len(kinds) > 1:
                    raise InputError(
                        f"{label}: column {v!r} mixes value types {kinds}, so levels could merge"
                        " (True with 1) or split while printing alike (1 and '1'). Give it one"
                        f" type: data[{v!r}].astype(str) for a factor, or"
                        f" pd.to_numeric(data[{v!r}]) for a number."
                    )
    return out


def require_frame(obj: object, what: str) -> pd.DataFrame:
    """``obj`` when it is a pandas DataFrame; otherwise an error naming ``what`` and the type.

    Every route that takes a frame (a fit's data, a chunk, new data) refuses other types
    with this one message.

    Examples
    --------
    >>> require_frame({"y": [1.0]}, "chunk 3")
    Traceback (most recent call last):
    ...
    lincomb.errors.InputError: chunk 3 must be a pandas DataFrame, got dict.
    """
    if not isinstance(obj, pd.DataFrame):
        raise InputError(f"{what} must be a pandas DataFrame, got {type(obj).__name__}.")
    return obj


def require_columns(frame: pd.DataFrame, wanted: Sequence[Any], label: str, asker: str) -> None:
    """Refuse a frame that lacks columns in ``wanted``: the error names them, what asked for
    them (``asker``), the frame's near matches and the columns it has (up to 20).

    Examples
    --------
    >>> import pandas as pd
    >>> frame = pd.DataFrame({"dose": [1.0], "site": ["a"]})
    >>> require_columns(frame, ["dose", "sites"], "chunk 2", "the formula uses")
    Traceback (most recent call last):
    ...
    lincomb.errors.InputError: chunk 2 lacks column(s) ['sites'] that the formula uses.
    Did you mean one of: ['site']? It has: ['dose', 'site']
    """
    absent = [v for v in wanted if v not in frame.columns]
    if not absent:
        return
    have = [str(c) for c in frame.columns]
    close = difflib.get_close_matches(str(absent[0]), have, n=4)
    hint = f" Did you mean one of: {close}?" if close else ""
    shown = have if len(have) <= 20 else [*have[:20], f"... {len(have)} in all"]
    raise InputError(f"{label} lacks column(s) {absent[:5]} that {asker}.{hint} It has: {shown}")


def _prefix(where: str | None) -> str:
    return f"{where}: " if where else ""


def align_series(series: pd.Series, index: pd.Index, what: str) -> pd.Series:
    """``series`` aligned to ``index`` by label; a typed error names ``what`` and missing labels.

    A Series given beside a DataFrame is matched to its rows by index, never by position.

    Examples
    --------
    >>> import pandas as pd
    >>> align_series(pd.Series([1.0, 2.0], index=[20, 10]), pd.Index([10, 20]), "w").tolist()
    [2.0, 1.0]
    >>> align_series(pd.Series([1.0, 2.0]), pd.Index([10, 20]), "weights")
    Traceback (most recent call last):
    ...
    lincomb.errors.InputError: weights is a pandas Series whose index lacks 2 of the data's ...
    """
    if series.index.equals(index):
        return series
    if not series.index.is_unique:
        dup = series.index[series.index.duplicated()].unique()[:5].tolist()
        raise InputError(
            f"{what} is a pandas Series with repeated index labels {dup}, so it cannot be aligned"
            " with the data's rows by label; give one value per row label (or an array in row"
            " order)."
        )
    missing = index[~index.isin(series.index)]
    if len(missing):
        raise InputError(
            f"{what} is a pandas Series whose index lacks {len(missing)} of the data's row labels"
            f" (e.g. {missing[:5].tolist()}); a Series is matched to the rows by index, not by"
            f" position. Reindex it like the data ({what}.set_axis(data.index) if it is in row"
            " order), or pass an array (.to_numpy()) to match by position."
        )
    return series.reindex(index)


def _weights_series(frame: pd.DataFrame, weights: object, where: str | None) -> pd.Series | None:
    """Weights as a float Series aligned with ``frame``: a column name, a Series (aligned by
    index) or an array (by position)."""
    if weights is None:
        return None
    if isinstance(weights, str):
        require_columns(frame, [weights], where or "data", "weights= names")
        series = frame[weights]
        if isinstance(series, pd.DataFrame):
            raise InputError(
                f"{where or 'data'} has duplicate column names: weights column {weights!r}"
                " appears more than once; rename or drop the copies."
            )
    elif isinstance(weights, pd.Series):
        series = align_series(weights, frame.index, "weights")
    else:
        wv = np.asarray(weights)
        if wv.ndim != 1 or wv.shape[0] != len(frame):
            raise InputError(
                f"weights has {wv.shape[0] if wv.ndim else 1} entries for {len(frame)} rows."
            )
        series = pd.Series(wv, index=frame.index)
    dt = series.dtype
    if pd.api.types.is_bool_dtype(dt) or not pd.api.types.is_numeric_dtype(dt):
        sample = series.dropna()
        shown = repr(sample.iloc[0]) if len(sample) else "none"
        raise InputError(
            f"{_prefix(where)}weights must be numeric (positive numbers), but they hold"
            f" {dt} values (e.g. {shown}); convert them with pd.to_numeric first."
        )
    values = series.to_numpy(dtype=np.float64, na_value=np.nan)
    return pd.Series(values, index=series.index, name=series.name)


def _na_mask(
    frame: pd.DataFrame, variables: Sequence[str], w: pd.Series | None
) -> NDArray[np.bool_]:
    """Rows with a missing value in ``variables`` (or the weights), column by column: no
    frame of the columns is assembled, and numpy columns that cannot hold one are skipped."""
    na = np.zeros(len(frame), dtype=bool)
    for c in variables:
        if c not in frame.columns:
            continue
        col = frame[c]
        if isinstance(col, pd.DataFrame):  # a name used twice (refused later, with its name)
            na |= col.isna().to_numpy().any(axis=1)
            continue
        dt = col.dtype
        if isinstance(dt, np.dtype) and dt.kind in "biu":
            continue
        if isinstance(dt, np.dtype) and dt.kind == "f":
            na |= np.isnan(col.to_numpy())
        else:
            na |= col.isna().to_numpy(dtype=bool)
    if w is not None:
        na |= w.isna().to_numpy()
    return na


def _missing_counts(
    frame: pd.DataFrame, variables: Sequence[str], w: pd.Series | None
) -> dict[str, int]:
    """Missing values per variable that has any (and ``"<weights>"`` for the weights)."""
    counts = {c: int(frame[c].isna().sum()) for c in variables if frame[c].isna().any()}
    if w is not None and w.isna().any():
        counts["<weights>"] = int(w.isna().sum())
    return counts


def _refuse_missing(
    frame: pd.DataFrame,
    na: NDArray[np.bool_],
    variables: Sequence[str],
    w: pd.Series | None,
    missing: str,
    where: str | None,
) -> None:
    n_na = int(na.sum())
    if not n_na or missing != "refuse":
        return
    counts = _missing_counts(frame, variables, w)
    raise MissingValueError(
        f"{_prefix(where)}{n_na} rows have missing values (per column: {counts}); drop or impute"
        " them, or fit with missing='skip'."
    )


def _check_response(
    frame: pd.DataFrame, response: str, variables: Sequence[str], where: str | None
) -> None:
    """Refuse a response read from a non-numeric column (a one-level text column expands to a
    single indicator column, which would otherwise be fitted under a made-up name)."""
    bad = [v for v in variables if v in frame.columns and not _numeric(frame[v].dtype)]
    if bad:
        raise InputError(
            f"{_prefix(where)}response {response!r} is not numeric: a response must be numeric,"
            f" but {bad} hold {frame[bad[0]].dtype} values; convert them to numbers first."
        )


def refuse_non_numeric_responses(frame: pd.DataFrame, columns: Sequence[str]) -> None:
    """Refuse response columns of ``frame`` whose dtype is not numeric (as every fit does).

    Examples
    --------
    >>> import pandas as pd
    >>> refuse_non_numeric_responses(pd.DataFrame({"a": [1.0], "b": ["x"]}), ["a", "b"])
    Traceback (most recent call last):
    ...
    lincomb.errors.InputError: response 'b' is not numeric: a response must be numeric, ...
    >>> twice = pd.DataFrame([[1.0, 2.0, 3.0]], columns=["a", "a", "b"])
    >>> refuse_non_numeric_responses(twice, ["a", "b"])
    Traceback (most recent call last):
    ...
    lincomb.errors.InputError: response column 'a' appears more than once in the frame; ...
    """
    # the dtypes read once and each distinct dtype judged once: a frame of thousands of
    # responses would otherwise make a Series per column
    dtypes = dict(zip(frame.columns.tolist(), frame.dtypes, strict=True))
    if not frame.columns.is_unique:
        twice = set(frame.columns[frame.columns.duplicated()].tolist())
        repeated = [c for c in columns if c in twice]
        if repeated:
            raise InputError(
                f"response column {repeated[0]!r} appears more than once in the frame; rename"
                " or drop the copies (responses are read by name)."
            )
    seen = [dtypes[c] for c in columns]
    if all(_numeric(d) for d in set(seen)):
        return
    for c, dtype in zip(columns, seen, strict=True):
        if not _numeric(dtype):
            _check_response(frame, str(c), [c], None)


def _numeric(dtype: Any) -> bool:
    return bool(pd.api.types.is_numeric_dtype(dtype)) and not isinstance(dtype, pd.CategoricalDtype)


def _show(value: Any) -> Any:
    return value.item() if isinstance(value, np.generic) else value


def _unused_levels(
    frame: pd.DataFrame, variables: Sequence[str], declared: Mapping[str, Any]
) -> dict[str, tuple[Any, ...]]:
    """Categories no row holds, per categorical column (declared levels are not reported)."""
    unused: dict[str, tuple[Any, ...]] = {}
    for v in variables:
        if v in declared or v not in frame.columns:
            continue
        col = frame[v]
        if not isinstance(col.dtype, pd.CategoricalDtype):
            continue
        held = np.zeros(len(col.cat.categories), dtype=bool)
        codes = col.cat.codes.to_numpy()
        held[codes[codes >= 0]] = True
        if not held.all():
            unused[v] = tuple(_show(c) for c in col.cat.categories[~held])
    return unused


def screened_rows(
    frame: pd.DataFrame,
    variables: Sequence[str],
    weights: object,
    levels: Mapping[str, Sequence[Any]],
    missing: str,
    where: str | None,
) -> tuple[pd.DataFrame, pd.DataFrame, pd.Series | None, NDArray[np.bool_]]:
    """The rows of ``frame`` an encoding may read, checked in one sequence for every route.

    Weights are read (:func:`_weights_series`), the columns the formula reads are screened
    (:func:`_screen`), declared ``levels`` are cast (:func:`cast_levels`), and rows with a
    missing value in ``variables`` or the weights are marked (refused with
    ``missing="refuse"``).  Returns ``(work, sub, w, na)``: the screened frame, its complete
    rows, the weights of every row (``None`` without weights) and the mask of incomplete rows.
    ``frame`` is not modified.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"y": [1.0, None, 3.0], "g": ["a", "b", "a"]})
    >>> work, sub, w, na = screened_rows(df, ["g", "y"], None, {"g": ["a", "b"]}, "skip", None)
    >>> sub.index.tolist(), na.tolist(), str(sub["g"].dtype), w is None
    ([0, 2], [False, True, False], 'category', True)
    """
    w = _weights_series(frame, weights, where)
    work = _screen(frame, variables, where, [weights] if isinstance(weights, str) else [])
    work = cast_levels(work, levels, where or "data")
    na = _na_mask(work, variables, w)
    _refuse_missing(work, na, variables, w, missing, where)
    sub = work.loc[~na] if na.any() else work
    return work, sub, w, na


def _kept(w: pd.Series | None, na: NDArray[np.bool_]) -> pd.Series | None:
    """The weights of the rows kept, by position (row labels may repeat)."""
    return w if w is None or not na.any() else w[~na]


def unused_level_hint(encoder: FormulaEncoder | None) -> str:
    """A sentence naming categories no row held and the fix (``""`` when there are none).

    Examples
    --------
    >>> import pandas as pd
    >>> from lincomb._model.encoder import FormulaEncoder
    >>> df = pd.DataFrame({"y": [1.0, 2, 3], "g": pd.Categorical(["a", "b", "a"], ["a", "b", "c"])})
    >>> enc, _ = FormulaEncoder.learn("y ~ g", df, note_unused=True)
    >>> enc.unused_levels
    {'g': ('c',)}
    >>> unused_level_hint(enc)[:60]
    " Categorical column 'g' keeps level(s) ['c'] that no row use"
    """
    if encoder is None or not encoder.unused_levels:
        return ""
    parts = [
        f" Categorical column {col!r} keeps level(s) {list(lv)} that no row used holds (left"
        f" over from subsetting?), so their columns cannot be estimated: drop them with"
        f" data[{col!r}] = data[{col!r}].cat.remove_unused_categories() and refit."
        for col, lv in encoder.unused_levels.items()
    ]
    return "".join(parts)
