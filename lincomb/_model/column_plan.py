"""A formula's columns rebuilt from data columns and per-level tables, without formulaic.

Materializing a model matrix through formulaic has a fixed cost of several milliseconds per
call (it evaluates every factor, checks it and assembles a frame), which a chunked fit pays on
every chunk.  For the common formulas (data columns used as they are, factors of one data
column in any coding, interactions among factors and with at most one numeric column) every
design column is a table lookup by the row's levels, times at most one numeric column.  A
:class:`ColumnPlan` holds those tables, read once from formulaic's own output on a small grid
of levels, and rebuilds the design of further frames from them with a few numpy operations.

It is used only where it gives formulaic's numbers exactly:

* each design value is the product of at most two values that are not constants of the
  coding: a factor's coded value (or the product of several factors' coded values, taken
  from the grid where formulaic multiplied them in the order it uses on data) and one numeric
  column, so the order of multiplication cannot change the rounding;
* :meth:`FormulaEncoder.learn(..., column_plan=True)
  <lincomb._model.encoder.FormulaEncoder.learn>` keeps a plan only if it reproduces
  formulaic's matrix of the learning sample exactly;
* :meth:`ColumnPlan.columns` declines a frame (returns ``None``, and the caller uses formulaic)
  when a column's dtype differs from the learning sample's or a value is not among the
  encoding's levels, so every refusal and message stays formulaic's route's.

Anything else (transforms such as ``np.log(x)``, ``center(x)`` or ``I(...)``, products of two
numeric columns, scaled terms) gets no plan.
"""

from __future__ import annotations

import re
import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

__all__ = ["ColumnPlan"]

#: Largest grid of level combinations probed for one interaction of factors.
MAX_GRID_ROWS = 65_536


@dataclass(frozen=True)
class _TermPlan:
    """Columns of one term: ``table[combined level index] * numeric column``."""

    columns: tuple[int, ...]
    factors: tuple[str, ...]  # data columns of the term's categorical factors, in table order
    strides: tuple[int, ...]  # mixed-radix strides of the factors' level codes
    numeric: str | None  # data column of the term's numeric factor
    table: NDArray[np.float64]  # (combinations, len(columns)), Fortran order
    integer: tuple[bool, ...] = ()  # per column: formulaic multiplies integers (zeros are +0)


@dataclass(frozen=True)
class ColumnPlan:
    """Direct rebuild of a formula's design (and plain response) from a frame's columns.

    Attributes
    ----------
    p : int
        Number of design columns.
    terms : tuple
        One plan per term: its design columns, the data columns of its factors, a table of
        its values per combination of levels, and its numeric data column (if any).
    levels : dict
        ``{data column: levels}`` of the categorical factors.
    response : str or None
        Data column of the response (``None`` for a right-hand side alone).
    dtypes : dict
        ``{data column: dtype}`` of the learning sample; a frame whose dtypes differ is
        declined.

    Examples
    --------
    >>> import numpy as np, pandas as pd, formulaic
    >>> df = pd.DataFrame({"y": [1.0, 2, 3, 4], "g": ["a", "b", "c", "a"],
    ...                    "x": [0.5, 1, 2, 3]})
    >>> mm = formulaic.model_matrix("y ~ g * x", df)
    >>> plan = ColumnPlan.build(mm.model_spec.rhs, mm.model_spec.lhs, df)
    >>> x, y = plan.columns(df)
    >>> bool(np.array_equal(x, mm.rhs.to_numpy(dtype=float))), y.tolist()
    (True, [1.0, 2.0, 3.0, 4.0])
    >>> plan.columns(df.assign(g=["a", "b", "z", "a"])) is None  # a level it lacks
    True
    """

    p: int
    terms: tuple[_TermPlan, ...]
    levels: dict[str, pd.Index]
    response: str | None
    dtypes: dict[str, Any]

    @classmethod
    def build(
        cls,
        rhs_spec: Any,
        lhs_spec: Any,
        sample: pd.DataFrame,
        design: NDArray[np.float64] | None = None,
    ) -> ColumnPlan | None:
        """The plan of formulaic model specs (right side, left side or ``None``), or ``None``
        when the formula is outside what a plan rebuilds exactly.  ``sample`` gives the dtypes
        that later frames must have (it is not checked here: see the module's notes);
        ``design``, formulaic's design of ``sample`` if at hand, gives the tables of factors
        whose every level it holds (other tables come from a probe of formulaic)."""
        try:
            return _build(rhs_spec, lhs_spec, sample, design)
        except Exception:  # noqa: BLE001 - any surprise in formulaic's objects: no plan
            return None

    def columns(
        self, frame: pd.DataFrame
    ) -> tuple[NDArray[np.float64], NDArray[np.float64] | None] | None:
        """``(X, y)`` of ``frame`` (rows without missing values), or ``None`` to decline.

        ``X`` is a new Fortran-ordered float64 array, ``y`` a new float64 array (``None``
        without a response).  Declined: a data column whose dtype differs from the learning
        sample's, or a value outside a factor's levels.
        """
        data = {c: frame[c] for c in self.dtypes}
        if any(data[c].dtype != dt for c, dt in self.dtypes.items()):
            return None
        n = len(frame)
        codes: dict[str, NDArray[np.intp]] = {}
        for c, levels in self.levels.items():
            k = _codes(data[c], levels)
            if k is None or (n and int(k.min()) < 0):
                return None
            codes[c] = k
        values = {t.numeric: data[t.numeric].to_numpy() for t in self.terms if t.numeric}
        x = np.empty((n, self.p), order="F")
        for t in self.terms:
            num = None if t.numeric is None else values[t.numeric]
            if not t.factors:
                for i, j in enumerate(t.columns):
                    if num is None:
                        x[:, j] = t.table[0, i]
                    else:
                        np.multiply(num, t.table[0, i], out=x[:, j])
                continue
            index = codes[t.factors[0]]
            if len(t.factors) > 1:
                index = index * t.strides[0]
                for c, s in zip(t.factors[1:], t.strides[1:], strict=True):
                    index = index + codes[c] * s
            for i, j in enumerate(t.columns):
                out = x[:, j]
                np.take(t.table[:, i], index, out=out, mode="clip")
                if num is not None:
                    np.multiply(out, num, out=out)
                    if t.integer[i]:  # an integer product has no negative zero
                        np.add(out, 0.0, out=out)
        y = None
        if self.response is not None:
            y = np.array(data[self.response].to_numpy(), dtype=np.float64)
        return x, y


_NUMERIC_KINDS = "biuf"


def _codes(col: pd.Series, levels: pd.Index) -> NDArray[np.intp] | None:
    """Level codes of ``col`` (-1 for a value outside ``levels``) as
    ``pandas.Categorical(col, categories=levels)`` gives them, the mapping formulaic's
    contrasts use (``levels`` are the categories of ``CategoricalDtype(levels)``): a recoding
    for a categorical column, else the categories' ``get_indexer_for``, here applied to the
    distinct values of ``pandas.factorize`` (the same hash equality, one lookup per distinct
    value; Arrow text is factorized without Python strings).  ``None`` if pandas refuses."""
    try:
        if isinstance(col.dtype, pd.CategoricalDtype):
            if col.cat.categories.equals(levels):
                return np.asarray(col.cat.codes.to_numpy(), dtype=np.intp)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return np.asarray(pd.Categorical(col, categories=levels).codes, dtype=np.intp)
        codes, distinct = pd.factorize(col)
        if len(codes) and int(codes.min()) < 0:  # a missing value: left to formulaic
            return None
        return np.asarray(levels.get_indexer_for(pd.Index(distinct)), dtype=np.intp)[codes]
    except (TypeError, ValueError):
        return None


def _data_vars(variables: Any) -> set[str]:
    return {str(v) for v in variables if getattr(v, "source", "data") == "data"}


def _factor_column(factor: Any, state: Any, data_vars: set[str]) -> tuple[str, str] | None:
    """``(kind, data column)`` of a factor a plan can rebuild, else ``None``: a numeric data
    column by name, or a factor of one data column, by name or as ``C(column, ...)``."""
    if len(data_vars) != 1:
        return None
    (column,) = data_vars
    expr = str(factor.expr)
    kind = getattr(state[0], "value", state[0])
    method = getattr(factor.eval_method, "value", factor.eval_method)
    if kind == "numerical":
        return ("numerical", column) if method == "lookup" and expr == column else None
    if kind != "categorical":
        return None
    if method == "lookup" and expr == column:
        return "categorical", column
    if re.fullmatch(rf"C\(\s*{re.escape(column)}\s*(,.*)?\)", expr, flags=re.S):
        return "categorical", column
    return None


def _scales_are_one(spec: Any) -> bool:
    return all(st.scale == 1 for s in spec.structure for st in s.scoped_terms)


def _probe(spec: Any, grid: pd.DataFrame) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """formulaic's design of ``grid`` (any warning, e.g. a level it lacks, is an error), and
    per column whether formulaic computed it in integers."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        mm = spec.get_model_matrix(grid, na_action="raise")
    integer = np.array([getattr(dt, "kind", "O") in "biu" for dt in mm.dtypes], dtype=bool)
    return np.asarray(mm.to_numpy(dtype=np.float64)), integer


def _grid(
    n: int, numeric: Mapping[str, Any], levels: Mapping[str, pd.Index], codes: Mapping[str, Any]
) -> pd.DataFrame:
    """``n`` rows: numeric columns 1 (of the dtype ``numeric`` gives), each factor's column at
    the levels ``codes`` give."""
    cols: dict[str, Any] = {c: np.ones(n, dtype=numeric[c]) for c in sorted(numeric)}
    for c, lv in levels.items():
        cols[c] = pd.Categorical.from_codes(codes[c], categories=lv)
    return pd.DataFrame(cols)


@dataclass(frozen=True)
class _Term:
    """A term as a plan sees it: its design columns, factor columns and numeric column."""

    term: Any
    columns: tuple[int, ...]
    factors: tuple[str, ...]
    numeric: str | None


def _layout(rhs_spec: Any) -> tuple[list[_Term], dict[str, pd.Index], set[str]] | None:
    """Each term's factors, the levels of each factor's column and the numeric columns, or
    ``None`` for a formula a plan cannot rebuild exactly."""
    if not _scales_are_one(rhs_spec):
        return None
    state = rhs_spec.encoder_state
    variables = {str(f): _data_vars(v) for f, v in rhs_spec.factor_variables.items()}
    numeric: set[str] = set()
    levels: dict[str, pd.Index] = {}
    terms = []
    for term, idx in rhs_spec.term_indices.items():
        cats: list[str] = []
        nums: list[str] = []
        for factor in term.factors:
            expr = str(factor.expr)
            if expr == "1" and str(term) == "1":
                continue
            found = None
            if expr in state:
                found = _factor_column(factor, state[expr], variables.get(expr, set()))
            if found is None:
                return None
            kind, column = found
            if kind == "numerical":
                nums.append(column)
                numeric.add(column)
                continue
            lv = pd.CategoricalDtype(list(state[expr][1]["categories"])).categories
            if column in levels and not levels[column].equals(lv):
                return None  # one column, two factors with different levels
            levels[column] = lv
            cats.append(column)
        if len(nums) > 1 or (nums and len(cats) > 1) or len(set(cats)) != len(cats):
            return None  # three inexact operands, or a column twice: rounding order matters
        terms.append(
            _Term(term, tuple(int(i) for i in idx), tuple(cats), nums[0] if nums else None)
        )
    if numeric & set(levels) or any(not lv.is_unique or len(lv) == 0 for lv in levels.values()):
        return None
    return terms, levels, numeric


def _sample_tables(
    terms: list[_Term],
    levels: Mapping[str, pd.Index],
    sample: pd.DataFrame,
    design: NDArray[np.float64],
) -> dict[int, tuple[NDArray[np.float64], NDArray[np.bool_]]]:
    """Tables of the terms of one factor and no numeric column whose every level ``sample``
    holds, read from ``design`` (formulaic's design of ``sample``) at a row of each level: such
    a term's value is its factor's coded value, the same on every row of a level."""
    out: dict[int, tuple[NDArray[np.float64], NDArray[np.bool_]]] = {}
    first: dict[str, NDArray[np.intp] | None] = {}
    for i, t in enumerate(terms):
        if len(t.factors) != 1 or t.numeric is not None:
            continue
        c = t.factors[0]
        if c not in first:
            codes = _codes(sample[c], levels[c])
            rows = None
            if codes is not None and len(codes) and int(codes.min()) >= 0:
                at = np.full(len(levels[c]), -1, dtype=np.intp)
                at[codes] = np.arange(len(codes))  # a row of each level (any: the value is the
                rows = at if int(at.min()) >= 0 else None  # level's, whatever the row)
            first[c] = rows
        rows = first[c]
        if rows is not None:
            out[i] = design[rows][:, list(t.columns)], np.zeros(len(t.columns), dtype=bool)
    return out


def _tables(
    rhs_spec: Any,
    terms: list[_Term],
    levels: Mapping[str, pd.Index],
    dtypes: Mapping[str, Any],
    known: Mapping[int, tuple[NDArray[np.float64], NDArray[np.bool_]]],
) -> dict[int, tuple[NDArray[np.float64], NDArray[np.bool_]]] | None:
    """``{term position: (table, integer)}``: formulaic's values of each term per combination
    of its factors' levels, numeric columns at 1 (one probe for all terms of one factor, whose
    row ``i`` holds level ``i`` of every factor; one per interaction of factors), and per
    column whether formulaic multiplied in integers.  Tables in ``known`` are kept."""
    out = dict(known)
    single = [(i, t) for i, t in enumerate(terms) if len(t.factors) == 1 and i not in out]
    if single:
        used = {t.factors[0] for _, t in single}
        rows = max(len(levels[c]) for c in used)
        spec = rhs_spec.subset([t.term for _, t in single])
        grid = _grid(
            rows,
            {t.numeric: dtypes[t.numeric] for _, t in single if t.numeric},
            {c: levels[c] for c in used},
            {c: np.arange(rows) % len(levels[c]) for c in used},
        )
        values, integer = _probe(spec, grid)
        for i, t in single:
            cols = list(spec.term_indices[t.term])
            out[i] = values[: len(levels[t.factors[0]])][:, cols], integer[cols]
    for i, t in enumerate(terms):
        if len(t.factors) < 2:
            continue
        sizes = [len(levels[c]) for c in t.factors]
        combos = int(np.prod(sizes, dtype=np.int64))
        if combos > MAX_GRID_ROWS:
            return None
        spec = rhs_spec.subset([t.term])
        codes = dict(zip(t.factors, np.unravel_index(np.arange(combos), sizes), strict=True))
        grid = _grid(combos, {}, {c: levels[c] for c in t.factors}, codes)
        values, integer = _probe(spec, grid)
        cols = list(spec.term_indices[t.term])
        out[i] = values[:, cols], integer[cols]
    return out


def _build(
    rhs_spec: Any, lhs_spec: Any, sample: pd.DataFrame, design: NDArray[np.float64] | None
) -> ColumnPlan | None:
    found = _layout(rhs_spec)
    if found is None:
        return None
    terms, levels, numeric = found
    response = None
    if lhs_spec is not None:
        response = _plain_response(lhs_spec)
        if response is None:
            return None
    plain = numeric | ({response} if response else set())
    used = sorted(plain | set(levels))
    if any(c not in sample.columns for c in used):
        return None
    dtypes = {c: sample[c].dtype for c in used}
    for c in plain:
        dt = dtypes[c]
        if not isinstance(dt, np.dtype) or dt.kind not in _NUMERIC_KINDS:
            return None
        if dt.kind == "f" and dt.itemsize not in (4, 8):
            return None
    known = {} if design is None else _sample_tables(terms, levels, sample, design)
    tables = _tables(rhs_spec, terms, levels, dtypes, known)
    if tables is None:
        return None
    plans = []
    for i, t in enumerate(terms):
        sizes = [len(levels[c]) for c in t.factors]
        strides = tuple(int(np.prod(sizes[k + 1 :], dtype=np.int64)) for k in range(len(sizes)))
        # no factor: a numeric column alone (scale 1: formulaic's value is the column) or the
        # intercept, a table of ones
        table, integer = tables.get(i, (np.ones((1, len(t.columns))), None))
        if table.shape != (int(np.prod(sizes, dtype=np.int64)), len(t.columns)):
            return None
        flags = tuple(bool(v) for v in integer) if integer is not None and t.factors else ()
        if t.numeric is not None and any(flags):
            # formulaic multiplies integers: equal to the float product only for codes -1, 0, 1
            if not np.isin(table[:, np.asarray(flags)], (-1.0, 0.0, 1.0)).all():
                return None
        else:
            flags = (False,) * len(t.columns)
        table = np.asfortranarray(table)
        plans.append(_TermPlan(t.columns, t.factors, strides, t.numeric, table, flags))
    p = sum(len(t.columns) for t in plans)
    return ColumnPlan(p=p, terms=tuple(plans), levels=levels, response=response, dtypes=dtypes)


def _plain_response(lhs_spec: Any) -> str | None:
    """The data column of a response that is a plain numeric column, else ``None``."""
    if not _scales_are_one(lhs_spec):
        return None
    terms = list(lhs_spec.term_indices.items())
    if len(terms) != 1 or len(terms[0][1]) != 1 or len(terms[0][0].factors) != 1:
        return None
    factor = terms[0][0].factors[0]
    expr = str(factor.expr)
    state = lhs_spec.encoder_state.get(expr)
    variables = {str(f): _data_vars(v) for f, v in lhs_spec.factor_variables.items()}
    found = None if state is None else _factor_column(factor, state, variables.get(expr, set()))
    return found[1] if found is not None and found[0] == "numerical" else None
