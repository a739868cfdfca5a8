"""One formula encoder for every route: in memory, chunks, Dask partitions, new data, contrasts.

A :class:`FormulaEncoder` is a formula's encoding fixed once (columns, factor levels, contrast
codings, the response), learned from a data sample or from declared levels.  It is frozen and
picklable, so the same object encodes a whole frame, each chunk of a chunked fit, each partition
of a Dask fit (on the workers), new data given to :meth:`lincomb.LinearFit.encode`, and the grid
of level combinations that contrasts on level means evaluate.  Every check on the rows (missing
values, unseen levels, a non-numeric response, non-finite values, bad weights) is made through
this class, in one place, so every route accepts and refuses the same inputs; the checks on
columns, dtypes, weights and missing values themselves are in :mod:`lincomb._model.row_checks`.

This is the only module of lincomb that imports formulaic (with :mod:`lincomb._model.design`,
which builds on it); other layers see formulaic's model spec only through this class.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb._model.column_plan import ColumnPlan
from lincomb._model.design import (
    CoefficientIndex,
    _check_finite,
    _index_from_spec,
    _validate_weights,
)
from lincomb._model.formula_text import (
    _name_hint,
    _required,
    _split,
    plain,
)
from lincomb._model.row_checks import (
    _check_response,
    _kept,
    _missing_counts,
    _na_mask,
    _prefix,
    _screen,
    _show,
    _string_names,
    _unused_levels,
    cast_levels,
    refuse_non_numeric_responses,
    require_columns,
    require_frame,
    screened_rows,
)
from lincomb.errors import InputError, MissingValueError, UnseenLevelError

# refuse_non_numeric_responses lives in row_checks; it stays importable from here for the
# many-response route, which imports it with the encoder
__all__ = [
    "FormulaEncoder",
    "EncodedRows",
    "refuse_non_numeric_responses",
]


@dataclass(frozen=True)
class EncodedRows:
    """Rows of a frame turned into arrays by a :class:`FormulaEncoder`.

    Attributes
    ----------
    x : (n, p) ndarray
        Design rows (a float64 array of its own).
    y : (n,) ndarray or None
        Response (``None`` for a right-hand-side-only formula).
    weights : (n,) ndarray or None
    rows : pandas.Index
        Labels of the rows used, in the order of ``x``.
    dropped : pandas.Index
        Labels of the rows dropped for missing values.
    rows_read : int
        Rows in the frame given.
    frame : pandas.DataFrame or None
        The rows used (a shallow view of the frame given), when asked for.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"y": [1.0, 2, 3], "x": [0.5, None, 2]})
    >>> rows = FormulaEncoder.learn("y ~ x", df)[0].encode(df)
    >>> rows.x.shape, list(rows.dropped)
    ((2, 2), [1])
    """

    x: NDArray[np.float64]
    y: NDArray[np.float64] | None
    weights: NDArray[np.float64] | None
    rows: pd.Index
    dropped: pd.Index
    rows_read: int
    frame: pd.DataFrame | None = field(default=None, repr=False)

    @property
    def response(self) -> NDArray[np.float64]:
        """``y``, for callers whose formula has a response (raises otherwise).

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2], "x": [0.5, 1]})
        >>> FormulaEncoder.learn("y ~ x", df)[0].encode(df).response.tolist()
        [1.0, 2.0]
        """
        if self.y is None:
            raise InputError("these rows have no response (the formula has no left-hand side).")
        return self.y


def _data_vars(variables: Any) -> set[str]:
    return {str(v) for v in variables if getattr(v, "source", "data") == "data"}


@dataclass(frozen=True)
class FormulaEncoder:
    """A formula's encoding, fixed once, applied to any frame.

    Build one with :meth:`learn` (a sample of the data, possibly empty when the levels are
    declared) or :meth:`from_levels`; :meth:`learn` builds it and encodes the sample's rows in
    the same pass.

    Attributes
    ----------
    formula : str
        The formula as given: two-sided (``"y ~ a + b"``) or right-hand side only
        (``"~ a + b"`` or ``"a + b"``).
    response : str or None
        Name of the response column of the design (``None`` without a left-hand side).
    index : CoefficientIndex
        Coefficient names, terms and levels.
    intercept : int or None
        Column of the intercept.
    variables : tuple of str
        Data columns the formula reads (both sides).
    levels : dict
        Declared ``{column: levels}``, applied to every frame before encoding.
    unused_levels : dict
        ``{column: levels}`` of categories of a categorical column that no row used holds
        (noted by :meth:`learn` for in-memory fits; their columns are aliased); else empty.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"y": [1.0, 2, 3, 4], "g": ["a", "b", "a", "b"], "x": [0.5, 1, 2, 3]})
    >>> enc = FormulaEncoder.learn("y ~ g + x", df, levels={"g": ["a", "b", "c"]})[0]
    >>> enc.index.names, enc.response
    (('Intercept', 'g[T.b]', 'g[T.c]', 'x'), 'y')
    >>> enc.encode(df.iloc[:2], where="chunk 1").x.shape
    (2, 4)
    >>> FormulaEncoder.learn("~ g", df)[0].response is None
    True
    """

    formula: str
    response: str | None
    index: CoefficientIndex
    intercept: int | None
    variables: tuple[str, ...]
    levels: dict[str, tuple[Any, ...]] = field(default_factory=dict)
    unused_levels: dict[str, tuple[Any, ...]] = field(default_factory=dict)
    _response_variables: tuple[str, ...] = field(default=(), repr=False, compare=False)
    _spec: Any = field(default=None, repr=False, compare=False)
    _columns: ColumnPlan | None = field(default=None, repr=False, compare=False)

    # -- construction ------------------------------------------------------------------------
    @classmethod
    def learn(
        cls,
        formula: str,
        data: pd.DataFrame,
        *,
        levels: Mapping[str, Sequence[Any]] | None = None,
        weights: object = None,
        missing: str = "skip",
        where: str | None = None,
        keep_frame: bool = False,
        note_unused: bool = False,
        require_rows: bool = False,
        column_plan: bool = False,
    ) -> tuple[FormulaEncoder, EncodedRows]:
        """Fix the encoding on ``data`` and encode its rows, in one formulaic pass.

        Rows with a missing value in a variable of the formula (or in the weights) do not
        inform the encoding; they are dropped and listed, or raise with ``missing="refuse"``.
        With ``require_rows``, no row left to fit raises (an empty frame:
        :class:`~lincomb.errors.InputError`; every row missing a value:
        :class:`~lincomb.errors.MissingValueError`).
        With ``note_unused`` (used when ``data`` are all the data, as in :func:`lincomb.fit`),
        categories of a categorical column that no row used holds (left over from subsetting)
        are recorded in :attr:`unused_levels`: their columns stay (so fits of parts of the data
        code alike and combine) but are aliased, and a test touching them names them.
        With ``column_plan`` (for encoders that will encode many frames, e.g. the chunks of a
        chunked fit), the encoder keeps a :class:`~lincomb._model.column_plan.ColumnPlan` if
        the formula allows one and it reproduces formulaic's design of ``data`` exactly;
        :meth:`encode` then builds the design without formulaic's fixed cost per call.
        ``data`` may be an empty frame (a Dask DataFrame's metadata) when every categorical
        variable has declared levels: the encoder alone is then what is wanted.

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2, 3], "g": ["a", "b", None]})
        >>> enc, rows = FormulaEncoder.learn("y ~ g", df)
        >>> enc.index.names, rows.x.tolist(), list(rows.dropped)
        (('Intercept', 'g[T.b]'), [[1.0, 0.0], [1.0, 1.0]], [2])
        >>> empty = pd.DataFrame({"y": [], "g": [], "x": []})
        >>> FormulaEncoder.learn("y ~ g + x", empty, levels={"g": ["a", "b"]})[0].index.names
        ('Intercept', 'g[T.b]', 'x')
        """
        import formulaic

        lhs, rhs = _split(formula)
        if not rhs:
            raise InputError(f"formula {formula!r} has no right-hand side terms.")
        label = where or "data"
        data = require_frame(data, label)
        if missing not in ("skip", "refuse"):
            raise InputError(f"missing must be 'skip' or 'refuse', got {missing!r}.")
        data = _string_names(data, where)
        declared = {k: tuple(v) for k, v in (levels or {}).items()}
        require_columns(data, list(declared), label, "levels= declares")
        variables = _required(formula, data)
        if "Intercept" in variables:
            raise InputError(
                f"{label} has a column named 'Intercept' that {formula!r} uses: that is the name"
                " of the intercept's coefficient, so the two would be confused. Rename the column"
                " (e.g. data.rename(columns={'Intercept': 'intercept_col'}))."
            )
        work, sub, w, na = screened_rows(data, variables, weights, declared, missing, where)
        if require_rows and len(sub) == 0:
            if len(data) == 0:
                raise InputError(f"{label} has no rows: there is nothing to fit.")
            counts = _missing_counts(work, variables, w)
            raise MissingValueError(
                f"every one of the {len(data)} rows of {label} has a missing value in a variable"
                f" of {formula!r} (missing per column: {counts}), so no row is left to fit."
                " Impute them, or leave the emptiest variables out of the formula."
            )
        unused = _unused_levels(sub, variables, declared) if note_unused else {}
        target = f"{lhs} ~ {rhs}" if lhs else rhs
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("error", formulaic.errors.DataMismatchWarning)
                mm = formulaic.model_matrix(target, sub, na_action="raise")
        except Exception as exc:  # formulaic raises plain errors for unknown variables
            raise InputError(
                f"could not build the design for {formula!r}: {plain(exc)}" + _name_hint(data)
            ) from None
        spec = mm.model_spec
        rhs_mm = mm.rhs if lhs else mm
        rhs_spec = spec.rhs if lhs else spec
        response: str | None = None
        response_vars: tuple[str, ...] = ()
        if lhs:
            if mm.lhs.shape[1] != 1:
                raise InputError(
                    f"the response of {formula!r} expands to {mm.lhs.shape[1]} columns"
                    f" {list(mm.lhs.columns)}: it must be one numeric variable (recode a"
                    " categorical outcome first)."
                )
            response = str(mm.lhs.columns[0])
            response_vars = tuple(
                sorted(_data_vars(spec.lhs.variables) & set(map(str, sub.columns)))
            )
            _check_response(sub, lhs, response_vars, where)
        for factor, state in rhs_spec.factor_contrasts.items():
            if len(state.levels) == 0:
                raise InputError(
                    f"factor {str(factor)!r} has no levels in {label}: declare them, e.g."
                    " levels={'name': [...]} (an empty sample cannot reveal them)."
                )
        names = [str(c) for c in rhs_mm.columns]
        twice = sorted({c for c in names if names.count(c) > 1})
        if twice:
            raise InputError(
                f"the design of {formula!r} has repeated column names {twice}: a data column"
                " is named like a coded column of another term. Rename that data column."
            )
        index = _index_from_spec(names, rhs_spec)
        encoder = cls(
            formula=formula,
            response=response,
            index=index,
            intercept=index.terms.get("1", (None,))[0],
            variables=tuple(variables),
            levels=declared,
            unused_levels=unused,
            _response_variables=response_vars,
            _spec=spec,
        )
        x, y = encoder._arrays(rhs_mm, mm.lhs if lhs else None, where)
        rows = encoder._checked(
            x, y, sub, _kept(w, na), data.index[na], len(data), where, keep_frame
        )
        if column_plan and len(sub):
            plan = ColumnPlan.build(rhs_spec, spec.lhs if lhs else None, sub, rows.x)
            got = None if plan is None else plan.columns(sub)
            if (
                got is not None
                and _same_bits(got[0], rows.x)
                and (rows.y is None or (got[1] is not None and _same_bits(got[1], rows.y)))
            ):
                encoder = replace(encoder, _columns=plan)
        return encoder, rows

    @classmethod
    def from_levels(cls, formula: str, levels: Mapping[str, Sequence[Any]]) -> FormulaEncoder:
        """The encoding of ``formula`` from declared levels alone (other variables numeric).

        Examples
        --------
        >>> FormulaEncoder.from_levels("~ g * x", {"g": ["lo", "hi"]}).index.names
        ('Intercept', 'g[T.hi]', 'x', 'g[T.hi]:x')
        """
        import formulaic

        try:
            required = sorted(
                str(v) for v in formulaic.Formula(_split(formula)[1] or "1").required_variables
            )
            if _split(formula)[0]:
                required += [
                    str(v) for v in formulaic.Formula(_split(formula)[0]).required_variables
                ]
        except Exception as exc:
            raise InputError(f"could not parse the formula {formula!r}: {plain(exc)}") from None
        cols = {v: pd.Series([], dtype=np.float64) for v in required}
        for v, lv in levels.items():
            cols[v] = pd.Series(pd.Categorical([], categories=list(lv)))
        return cls.learn(formula, pd.DataFrame(cols), levels=levels, where="the declared levels")[0]

    @staticmethod
    def categorical_variables(
        formula: str, sample: pd.DataFrame, levels: Mapping[str, Sequence[Any]] | None = None
    ) -> list[str]:
        """Data columns of ``sample`` that feed a categorical factor of the formula.

        Text, categorical and bool columns, and columns wrapped in ``C()``; ``sample`` may be
        empty (it is only read for dtypes).

        Examples
        --------
        >>> import pandas as pd
        >>> meta = pd.DataFrame({"y": [1.0], "g": ["a"], "k": [1], "x": [0.5]})
        >>> FormulaEncoder.categorical_variables("y ~ g + C(k) + x", meta)
        ['g', 'k']
        """
        import formulaic

        lhs, _ = _split(formula)
        variables = _required(formula, sample)
        sample = _screen(sample, variables, "the data")
        answer = set(_required(lhs, sample)) if lhs else set()
        found = {
            v
            for v in variables
            if v not in answer
            and (
                isinstance(sample[v].dtype, pd.CategoricalDtype)
                or pd.api.types.is_string_dtype(sample[v].dtype)
                or pd.api.types.is_object_dtype(sample[v].dtype)
                or pd.api.types.is_bool_dtype(sample[v].dtype)
            )
        }
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                spec = formulaic.model_matrix(
                    _split(formula)[1], cast_levels(sample, levels or {}, "metadata")
                ).model_spec
            for factor in spec.factor_contrasts:
                found |= {
                    str(v) for v in spec.factor_variables.get(factor, ()) if v in sample.columns
                }
        except Exception as exc:  # noqa: BLE001 - reported with the formula below
            raise InputError(f"could not build the design for {formula!r}: {plain(exc)}") from None
        return sorted(found)

    @staticmethod
    def columns_read(formula: str, frame: pd.DataFrame) -> list[str]:
        """Columns of ``frame`` that ``formula`` reads (both sides), sorted.

        Examples
        --------
        >>> import pandas as pd
        >>> frame = pd.DataFrame(columns=["x", "g", "y", "z"])
        >>> FormulaEncoder.columns_read("y ~ C(g) + np.log(x)", frame)
        ['g', 'x', 'y']
        """
        return _required(formula, frame)

    @staticmethod
    def complete_rows(formula: str, frame: pd.DataFrame, weights: object = None) -> int:
        """Rows of ``frame`` without a missing value in the formula's variables (or weights).

        Examples
        --------
        >>> import pandas as pd
        >>> FormulaEncoder.complete_rows("y ~ x", pd.DataFrame({"y": [1.0, None], "x": [1.0, 2]}))
        1
        """
        cols = _required(formula, frame)
        if isinstance(weights, str) and weights in frame.columns:
            cols.append(weights)
        if not cols:
            return len(frame)
        return len(frame) - int(_na_mask(frame, cols, None).sum())

    @staticmethod
    def check_response(formula: str, sample: pd.DataFrame, where: str | None = None) -> None:
        """Refuse a formula whose response reads a non-numeric column of ``sample``.

        :meth:`learn` and :meth:`encode` make this check themselves; call it to refuse early,
        before a costly pass (``sample`` may be empty: only dtypes are read).

        Examples
        --------
        >>> import pandas as pd
        >>> FormulaEncoder.check_response("s ~ x", pd.DataFrame({"s": ["a"], "x": [1.0]}))
        Traceback (most recent call last):
        ...
        lincomb.errors.InputError: response 's' is not numeric: a response must be numeric, ...
        """
        lhs, _ = _split(formula)
        if lhs:
            _check_response(sample, lhs, _required(lhs, sample), where)

    # -- facts about the encoding --------------------------------------------------------------
    @property
    def rhs_spec(self) -> Any:
        """formulaic's model spec of the right-hand side (for introspection only)."""
        return self._spec.rhs if self.response is not None else self._spec

    @property
    def stateful(self) -> tuple[str, ...]:
        """Stateful transforms of the formula (``center(x)``, ``poly(x)``...), whose state
        (a mean, knots) came from the sample the encoding was learned on."""
        specs = [self.rhs_spec] + ([self._spec.lhs] if self.response is not None else [])
        return tuple(sorted({str(k) for s in specs for k in s.transform_state}))

    def check_stateless(self) -> None:
        """Refuse stateful transforms (for fits whose sample is one chunk of the data).

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2, 3], "x": [0.5, 1, 2]})
        >>> FormulaEncoder.learn("y ~ center(x)", df)[0].check_stateless()
        Traceback (most recent call last):
        ...
        lincomb.errors.InputError: the formula uses stateful transform(s) ['center(x)']: ...
        """
        if self.stateful:
            raise InputError(
                f"the formula uses stateful transform(s) {list(self.stateful)}: their state (a"
                " mean, a scale, knots, polynomial coefficients) would come from one chunk, so"
                " the fit would not be the fit of all rows. Compute the transformed column"
                " before chunking, or write the transform with fixed numbers (e.g."
                " 'I(x - 12.5)')."
            )

    def codings(self) -> dict[str, tuple[tuple[Any, ...], str]]:
        """``{factor expression: (levels, contrast coding)}`` for each categorical factor.

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2, 3], "g": ["a", "b", "c"]})
        >>> FormulaEncoder.learn("y ~ g", df)[0].codings()["g"][0]
        ('a', 'b', 'c')
        """
        return {
            str(factor): (tuple(state.levels), repr(state.contrasts))
            for factor, state in self.rhs_spec.factor_contrasts.items()
        }

    def categoricals(self) -> dict[str, list[tuple[str, tuple[Any, ...]]]]:
        """``{data column: [(factor expression, levels), ...]}`` for categorical factors.

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2, 3], "g": ["a", "b", "c"]})
        >>> FormulaEncoder.learn("y ~ C(g)", df)[0].categoricals()
        {'g': [('C(g)', ('a', 'b', 'c'))]}
        """
        spec = self.rhs_spec
        out: dict[str, list[tuple[str, tuple[Any, ...]]]] = {}
        for fac, variables in spec.factor_variables.items():
            state = spec.encoder_state.get(str(fac))
            if state is None or getattr(state[0], "value", state[0]) != "categorical":
                continue
            dv = _data_vars(variables)
            if len(dv) != 1:
                continue
            info = state[1] if isinstance(state[1], Mapping) else {}
            cats = info.get("categories")
            if cats is None and "contrasts" in info:
                cats = info["contrasts"].levels
            if cats is None:
                continue
            out.setdefault(next(iter(dv)), []).append((str(fac), tuple(cats)))
        return out

    def term_variables(self) -> dict[str, frozenset[str]]:
        """``{term label: data columns it reads}`` in formula order.

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2, 3], "g": ["a", "b", "c"], "x": [1.0, 0, 2]})
        >>> tv = FormulaEncoder.learn("y ~ g:x", df)[0].term_variables()
        >>> {t: sorted(v) for t, v in tv.items()}
        {'1': [], 'g:x': ['g', 'x']}
        """
        spec = self.rhs_spec
        return {str(t): frozenset(_data_vars(spec.term_variables[t])) for t in spec.terms}

    # -- encoding ------------------------------------------------------------------------------
    def encode(
        self,
        frame: pd.DataFrame,
        *,
        weights: object = None,
        missing: str = "skip",
        where: str | None = None,
        keep_frame: bool = False,
    ) -> EncodedRows:
        """Arrays of the rows of ``frame`` (a whole frame, a chunk, a Dask partition).

        Rows with a missing value in the formula's variables (or the weights) are dropped and
        listed (``missing="refuse"``: refused); a factor level the encoding lacks raises
        :class:`~lincomb.errors.UnseenLevelError`; ``where`` names the frame in errors.

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2, 3, 4], "g": ["a", "b", "a", "b"],
        ...                    "x": [0.5, None, 2, 3]})
        >>> rows = FormulaEncoder.learn("y ~ g + x", df)[0].encode(df, where="chunk 1")
        >>> rows.x.shape, list(rows.dropped)
        ((3, 3), [1])
        """
        import formulaic

        frame = require_frame(frame, where or "data")
        need = list(self.variables) + ([weights] if isinstance(weights, str) else [])
        require_columns(frame, need, where or "data", "the formula (or weights) uses")
        frame = _string_names(frame, where)
        _, sub, w, na = screened_rows(frame, self.variables, weights, self.levels, missing, where)
        dropped = frame.index[na]
        if self.response is not None:
            _check_response(sub, _split(self.formula)[0], self._response_variables, where)
        if len(sub) == 0:
            p = self.index.p
            y = None if self.response is None else np.zeros(0)
            wz = None if w is None else np.zeros(0)
            return EncodedRows(np.zeros((0, p)), y, wz, sub.index, dropped, len(frame), None)
        # the column plan gives the same numbers as formulaic's (see ColumnPlan), faster
        direct = None if self._columns is None else self._columns.columns(sub)
        if direct is None:
            mm = self._model_matrix(
                self._spec,
                sub,
                formulaic.errors.DataMismatchWarning,
                f"{_prefix(where)}could not encode the rows: ",
                lambda levels: (
                    f"{where or 'the data'} holds a factor level the encoding lacks"
                    f" {levels} Declare every level up front (levels={{'column': [...]}}) so that"
                    " each chunk is encoded alike, or drop those rows."
                ),
            )
            two = self.response is not None
            direct = self._arrays(mm.rhs if two else mm, mm.lhs if two else None, where)
        return self._checked(*direct, sub, _kept(w, na), dropped, len(frame), where, keep_frame)

    def _arrays(
        self, rhs: Any, lhs: Any, where: str | None
    ) -> tuple[NDArray[np.float64], NDArray[np.float64] | None]:
        """Formulaic's design and response matrices as float arrays."""
        x = _float_columns(rhs)
        if x.shape[1] != self.index.p:  # pragma: no cover - the spec fixes the columns
            raise InputError(
                f"{_prefix(where)}encoded to {x.shape[1]} columns instead of {self.index.p}."
            )
        y = None if lhs is None else np.array(lhs.to_numpy(dtype=np.float64)[:, 0], copy=True)
        return x, y

    def _checked(
        self,
        x: NDArray[np.float64],
        y: NDArray[np.float64] | None,
        sub: pd.DataFrame,
        w: pd.Series | None,
        dropped: pd.Index,
        rows_read: int,
        where: str | None,
        keep_frame: bool,
    ) -> EncodedRows:
        """Check new design and response arrays of the rows ``sub`` (finite values, weights
        ``w``, one per row of ``sub``): the one place encoded rows are checked."""
        rows = sub.index
        _check_finite(x, f"{_prefix(where)}design", self.index.names, rows)
        if y is not None:
            _check_finite(y, f"{_prefix(where)}response {self.response!r}", None, rows)
        wa = None
        if w is not None:
            wa = w.to_numpy(dtype=np.float64, copy=True)
            _validate_weights(wa, rows)
        return EncodedRows(x, y, wa, rows, dropped, rows_read, sub if keep_frame else None)

    def _model_matrix(
        self,
        spec: Any,
        frame: pd.DataFrame,
        watch: type[Warning],
        failed: str,
        unseen: Callable[[str], str],
    ) -> Any:
        """``spec``'s model matrix of ``frame``, refusing missing values.  A formulaic error
        becomes an :class:`~lincomb.errors.InputError` (``failed`` then formulaic's text) and a
        level the encoding lacks an :class:`~lincomb.errors.UnseenLevelError` (``unseen`` of the
        text naming the levels); warnings of the category ``watch`` are all caught."""
        import formulaic

        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", watch)
            try:
                mm = spec.get_model_matrix(frame, na_action="raise")
            except Exception as exc:  # noqa: BLE001 - formulaic raises plain errors
                raise InputError(f"{failed}{plain(exc)}") from None
        for w in caught:
            if issubclass(w.category, formulaic.errors.DataMismatchWarning):
                raise UnseenLevelError(unseen(self._unseen_text(frame, w.message)))
        return mm

    def _unseen_text(self, frame: pd.DataFrame, fallback: object) -> str:
        """ "column 'g': ['z']. ..." naming the unseen levels (read from the data, not from
        formulaic's text, which promises outcomes that do not happen here)."""
        found = []
        for column, facs in self.categoricals().items():
            if column not in frame.columns:
                continue
            known: set[Any] = set()
            for _, lv in facs:
                known |= set(lv)
            present = pd.unique(frame[column].dropna().to_numpy())
            new = [v for v in present if v not in known]
            if new:
                found.append(f"column {column!r}: {[_show(v) for v in new[:5]]}")
        if not found:
            text = plain(fallback).split(":", 1)[-1].split(". They are", 1)[0].strip()
            found.append(text)
        return (
            f"({'; '.join(found)}). The fit has no coefficient for such a level, so those rows"
            " cannot be encoded."
        )

    def encode_new(self, data: pd.DataFrame) -> pd.DataFrame:
        """Design matrix of new data (right-hand side), refusing levels the encoding lacks.

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2, 3], "g": ["a", "b", "a"]})
        >>> enc = FormulaEncoder.learn("y ~ g", df)[0]
        >>> enc.encode_new(pd.DataFrame({"g": ["b"]})).to_numpy().tolist()
        [[1.0, 1.0]]
        >>> enc.encode_new(pd.DataFrame({"g": ["z"]}))
        Traceback (most recent call last):
        ...
        lincomb.errors.UnseenLevelError: new data hold a factor level the fit never saw ...
        """
        import formulaic

        if not isinstance(data, pd.DataFrame):
            raise InputError(f"new data must be a pandas DataFrame, got {type(data).__name__}.")
        data = _string_names(data, "new data")
        spec = self.rhs_spec
        used = [v for v in sorted(str(v) for v in spec.variables) if v in data.columns]
        data = _screen(data, used, "new data")
        na = data[used].isna()
        if na.to_numpy().any():
            counts = {c: int(na[c].sum()) for c in used if na[c].any()}
            raise MissingValueError(
                f"new data have missing values (per column: {counts}); drop or impute those rows"
                " before encoding."
            )
        out: pd.DataFrame = self._model_matrix(
            spec,
            data,
            formulaic.errors.DataMismatchWarning,
            "could not encode the new data: ",  # e.g. an absent variable
            lambda levels: (
                f"new data hold a factor level the fit never saw {levels} Remove"
                " those rows, or refit on data that contain those levels."
            ),
        )
        return out

    def encode_grid(
        self, frame: pd.DataFrame, terms: Sequence[str] | None = None, where: str = ""
    ) -> tuple[NDArray[np.float64], tuple[str, ...]]:
        """Model rows of a grid of level combinations (``frame``), for the given terms.

        Returns the rows (one per row of ``frame``) and their column names; ``terms`` (labels
        as in :meth:`term_variables`) limits the columns to those terms, default all.  A level
        the encoding lacks raises :class:`~lincomb.errors.UnseenLevelError`.

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2, 3], "g": ["a", "b", "c"], "x": [1.0, 0, 2]})
        >>> enc = FormulaEncoder.learn("y ~ g + x", df)[0]
        >>> rows, names = enc.encode_grid(pd.DataFrame({"g": ["a", "b", "c"]}), ["g"])
        >>> names, rows.tolist()
        (('g[T.b]', 'g[T.c]'), [[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
        """

        spec = self.rhs_spec
        if terms is not None:
            wanted = set(terms)
            spec = spec.subset([t for t in spec.terms if str(t) in wanted])
        mm = self._model_matrix(
            spec,
            frame,
            Warning,
            f"could not evaluate the model {where}: ",
            lambda levels: (
                f"could not evaluate the model {where}: a level the fit never saw {levels}"
            ),
        )
        x = np.asarray(mm.to_numpy(dtype=np.float64))
        return x, tuple(str(c) for c in spec.column_names)


# -- helpers -----------------------------------------------------------------------------------


def _same_bits(a: NDArray[np.float64], b: NDArray[np.float64]) -> bool:
    """Equal float64 arrays to the last bit (the sign of a zero included)."""
    return a.shape == b.shape and bool(np.array_equal(a.view(np.uint64), b.view(np.uint64)))


def _float_columns(frame: pd.DataFrame) -> NDArray[np.float64]:
    """A new Fortran-ordered float64 array of ``frame``'s values, filled column by column: one
    copy, and never a view of the caller's data (a frame's ``to_numpy`` may return one)."""
    x = np.empty(frame.shape, order="F")
    for j, (_, col) in enumerate(frame.items()):
        v = col.to_numpy()
        x[:, j] = v if v.dtype.kind in "biuf" else col.to_numpy(dtype=np.float64)
    return x
