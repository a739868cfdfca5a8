"""From user data to a numeric design: formulas, arrays, missing values, coefficient names.

This module turns a Wilkinson formula and a DataFrame (through formulaic) or plain arrays into
validated float64 arrays, and records how coefficients are named: by column, by term, and by
the factor levels each column codes.  It knows nothing of linear algebra.

Its :class:`CoefficientIndex` answers the builder's questions ("which column is
``C(dose)[T.40]``?", "which columns make up the term ``C(dose):rain``?") and raises
:class:`~lincomb.errors.UnknownCoefficientError` with close matches when a name is wrong.
"""

from __future__ import annotations

import difflib
import re
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from lincomb._model.row_checks import align_series
from lincomb.errors import InputError, RowsUnavailableError, UnknownCoefficientError

if TYPE_CHECKING:
    from lincomb._model.encoder import FormulaEncoder

__all__ = [
    "Design",
    "DesignRows",
    "CoefficientIndex",
    "design_from_formula",
    "design_from_arrays",
]

# prefixes formulaic puts in front of level names in reduced-rank codings
_LEVEL_PREFIXES = ("T.", "S.", "H.", "D.")


@dataclass(frozen=True)
class CoefficientIndex:
    """Names of a design's coefficients, grouped by term and labelled by factor level.

    Attributes
    ----------
    names : tuple of str
        Column names, in design order.
    terms : dict
        ``{term label: (column indices)}`` in formula order.
    levels : tuple
        Per column, a tuple with the level label each categorical factor of its term codes
        (``None`` for a numeric factor), or ``()`` for columns outside a formula.
    factors : dict
        ``{term label: (factor expressions)}``.

    Examples
    --------
    >>> import lincomb as lc
    >>> index = lc.fit("yield_t_ha ~ C(nitrogen) * variety", lc.datasets.field_trial()).index
    >>> list(index.terms)
    ['1', 'C(nitrogen)', 'variety', 'C(nitrogen):variety']
    >>> index.names[index.level_column("C(nitrogen):variety", ("80", "Corrin"))]
    'C(nitrogen)[T.80]:variety[T.Corrin]'
    """

    names: tuple[str, ...]
    terms: dict[str, tuple[int, ...]]
    levels: tuple[tuple[str | None, ...], ...]
    factors: dict[str, tuple[str, ...]] = field(default_factory=dict)

    @classmethod
    def of_columns(cls, names: Sequence[str]) -> CoefficientIndex:
        """The index of plain named columns (no formula): one term per column, no factors.

        Examples
        --------
        >>> from lincomb._model.design import CoefficientIndex
        >>> CoefficientIndex.of_columns(["one", "x"]).terms
        {'one': (0,), 'x': (1,)}
        """
        return cls(
            names=tuple(names),
            terms={s: (j,) for j, s in enumerate(names)},
            levels=tuple(() for _ in names),
            factors={},
        )

    @property
    def p(self) -> int:
        return len(self.names)

    def _suggest(self, wrong: str, pool: Sequence[str]) -> str:
        pool = list(dict.fromkeys(pool))  # a one-column term shares its column's name
        close = difflib.get_close_matches(wrong, pool, n=4, cutoff=0.5)
        if not close:
            close = [s for s in pool if wrong.lower() in s.lower()][:4]
        hint = f" Did you mean one of: {close}?" if close else ""
        return hint

    def column(self, name: str) -> int:
        """Index of the column called ``name``.

        Examples
        --------
        >>> import lincomb as lc
        >>> index = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines()).index
        >>> index.column("temperature_c")
        4
        """
        try:
            return self.names.index(name)
        except ValueError:
            pass
        if name in self.terms and len(self.terms[name]) == 1:
            return self.terms[name][0]
        raise UnknownCoefficientError(
            f"no coefficient named {name!r}.{self._suggest(name, self.names + tuple(self.terms))}"
            f" Known coefficients: {list(self.names)}"
        )

    def _term_key(self, term: str) -> str:
        if term in self.terms:
            return term
        if term in ("1", "Intercept") and "1" in self.terms:
            return "1"
        wanted = _factor_set(term)
        for label, facs in self.factors.items():
            if wanted is not None and frozenset(facs) == wanted:
                return label
        # the same term with or without C(...) around its variables: "x" for "C(x)" and back
        bare = _bare_factors(term)
        hits = [label for label in self.terms if bare and _bare_factors(label) == bare]
        if len(hits) == 1:
            return hits[0]
        if len(hits) > 1:
            raise UnknownCoefficientError(
                f"term {term!r} could mean any of {hits}; write the term as the formula does."
            )
        raise UnknownCoefficientError(
            f"no term {term!r} in this fit.{self._suggest(term, tuple(self.terms))}"
            f" Terms: {list(self.terms)}"
        )

    def term_columns(self, term: str) -> tuple[int, ...]:
        """Column indices of a term (a factor, an interaction, a numeric variable).

        Examples
        --------
        >>> import lincomb as lc
        >>> index = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines()).index
        >>> index.term_columns("line"), index.term_columns("temperature_c")
        ((1, 2, 3), (4,))
        """
        return self.terms[self._term_key(term)]

    def term_levels(self, term: str) -> list[tuple[str | None, ...]]:
        """Level labels of each column of a term, in column order.

        Examples
        --------
        >>> import lincomb as lc
        >>> index = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index
        >>> index.term_levels("line")
        [('T.L2',), ('T.L3',), ('T.L4',)]
        """
        return [self.levels[j] for j in self.term_columns(term)]

    def level_column(self, term: str, key: tuple[str, ...]) -> int:
        """Index of the column of ``term`` that codes the level(s) ``key``.

        Examples
        --------
        >>> import lincomb as lc
        >>> index = lc.fit("fill_g ~ line", lc.datasets.fill_lines()).index
        >>> index.level_column("line", ("L3",))
        2
        """
        label = self._term_key(term)
        cols = self.terms[label]
        ordered: tuple[object, ...] = key
        if cols:
            ordered = _reorder_key(term, self.factors.get(label, ()), self.levels[cols[0]], key)
        key = tuple(str(k) for k in ordered)

        def match(strip: bool) -> list[int]:
            found = []
            for j in cols:
                labs = tuple(lv for lv in self.levels[j] if lv is not None)
                if strip:
                    labs = tuple(_strip_prefix(lv) for lv in labs)
                if labs == key:
                    found.append(j)
            return found

        hits = match(False) or match(True)
        if len(hits) == 1:
            return hits[0]
        shown = [tuple(_strip_prefix(lv) for lv in self.levels[j] if lv is not None) for j in cols]
        shown_txt = [s[0] if len(s) == 1 else s for s in shown]
        raise UnknownCoefficientError(
            f"term {label!r} has no column for level {key[0] if len(key) == 1 else key!r}."
            f" Its columns code: {shown_txt}. A reference (baseline) level has no column of its"
            " own: test differences from it, write the question on level means, which name"
            f" every level whatever the coding (e.g. lc.levels({label!r}).versus(...) or"
            " .weights(...)), or refit with another reference."
        )


def _strip_prefix(label: str) -> str:
    for pre in _LEVEL_PREFIXES:
        if label.startswith(pre):
            return label[len(pre) :]
    return label


def _reorder_key(
    term: str, stored: Sequence[str], levels: tuple[str | None, ...], key: tuple[object, ...]
) -> tuple[object, ...]:
    """Put level labels given in the user's factor order (``"b:a"``) into the fit's (``"a:b"``)."""
    given = _factor_list(term)
    if given is None or len(levels) != len(stored) or sorted(given) != sorted(stored):
        return key
    cats = [f for f, lv in zip(stored, levels, strict=True) if lv is not None]
    cats_given = [f for f in given if f in cats]
    if len(cats) != len(key) or cats_given == cats:
        return key
    return tuple(key[cats_given.index(f)] for f in cats)


_WRAPPED = re.compile(r"^C\(\s*([^,()]+?)\s*(?:,.*)?\)$")


def _bare_factors(term: str) -> frozenset[str]:
    """The variables of a term label with any ``C(...)`` wrapper removed (``C(a):b`` -> a, b)."""
    out = []
    for part in term.split(":"):
        part = part.strip()
        m = _WRAPPED.match(part)
        out.append(m.group(1) if m else part)
    return frozenset(out)


def _factor_set(term: str) -> frozenset[str] | None:
    facs = _factor_list(term)
    return None if facs is None else frozenset(facs)


def _factor_list(term: str) -> tuple[str, ...] | None:
    try:
        from formulaic import Formula

        terms = list(Formula(term).rhs) if hasattr(Formula(term), "rhs") else list(Formula(term))
    except Exception:  # noqa: BLE001 - any parse failure just means "no match"
        return None
    terms = [t for t in terms if str(t) != "1"]
    if len(terms) != 1:
        return None
    return tuple(str(f.expr) for f in terms[0].factors)


def _parse_levels(column: str, exprs: Sequence[str]) -> tuple[str | None, ...]:
    """Split ``C(a)[T.x]:z:C(b)[y]`` into per-factor level labels (None for numeric)."""
    out: list[str | None] = []
    rest = column
    for i, expr in enumerate(exprs):
        if not rest.startswith(expr):
            return ()
        rest = rest[len(expr) :]
        if rest.startswith("["):
            last = i == len(exprs) - 1
            if last:
                end = len(rest) - 1 if rest.endswith("]") else -1
            else:
                end = rest.find("]:" + exprs[i + 1])
            if end < 0:
                return ()
            out.append(rest[1:end])
            rest = rest[end + 1 :]
        else:
            out.append(None)
        if i < len(exprs) - 1:
            if not rest.startswith(":"):
                return ()
            rest = rest[1:]
    return tuple(out)


@dataclass(frozen=True)
class DesignRows:
    """The rows of a design: what a fit keeps when it keeps its data.

    Attributes
    ----------
    x : (n, p) ndarray
        Design matrix (a private float64 copy).
    y : (n,) ndarray or None
        Response (``None`` for a design without one, e.g. a right-hand-side-only formula).
    weights : (n,) ndarray or None
    row_index : pandas.Index
        Labels of the rows used (after dropping missing values).
    source : pandas.DataFrame or None
        The data rows used (a shallow copy, same order as ``x``), so that per-row variables
        outside the formula (cluster labels, a time order) can be looked up by column name.

    Examples
    --------
    >>> import numpy as np
    >>> design_from_arrays(np.c_[np.ones(3), [1.0, 2, 4]], [1.0, 2, 3]).rows.x.shape
    (3, 2)
    """

    x: NDArray[np.float64]
    y: NDArray[np.float64] | None
    weights: NDArray[np.float64] | None
    row_index: pd.Index
    source: pd.DataFrame | None = None


@dataclass(frozen=True)
class Design:
    """A validated numeric design with its naming; with its rows, or kept as a summary.

    Attributes
    ----------
    index : CoefficientIndex
    intercept : int or None
        Index of the intercept column.
    response : str or None
        ``None`` for a design without a response.
    dropped : pandas.Index
        Labels of rows dropped for missing values (for chunked and Dask fits as the chunks or
        partitions labelled them, so labels may repeat).
    weighted : bool
    rows : DesignRows or None
        The rows (``x``, ``y``, weights, row labels, source frame), or ``None`` when the design
        keeps only its naming: a fit of chunks, of Dask partitions, of combined fits, or a fit
        shared without its rows.  ``x``, ``y``, ``weights``, ``row_index`` and ``source`` read
        the rows and raise :class:`~lincomb.errors.RowsUnavailableError` without them.
    encoder : FormulaEncoder or None
        The formula's encoding (``None`` for designs made from arrays).
    formula : str or None
    origin : str
        Where a design without rows came from, e.g. ``"12 chunks"`` (used in messages).
    hint : str
        How to compute a row-based covariance when the rows are not kept.
    second_pass : object or None
        What a second pass over the data needs to encode it again (chunked and Dask fits).

    Examples
    --------
    >>> import lincomb as lc
    >>> d = design_from_formula("fill_g ~ line", lc.datasets.fill_lines())
    >>> d.x.shape, d.response, d.intercept, d.weighted, d.has_rows
    ((300, 4), 'fill_g', 0, False, True)
    >>> shared = lc.without_rows(lc.fit("fill_g ~ line", lc.datasets.fill_lines())).design
    >>> shared.has_rows, shared.index.names[1]
    (False, 'line[T.L2]')
    >>> shared.x
    Traceback (most recent call last):
    ...
    lincomb.errors.RowsUnavailableError: this fit was built from ... not the rows (design matrix)...
    """

    index: CoefficientIndex
    intercept: int | None
    response: str | None
    dropped: pd.Index
    weighted: bool
    rows: DesignRows | None = field(default=None, repr=False)
    encoder: FormulaEncoder | None = field(default=None, repr=False)
    formula: str | None = None
    origin: str = "data in memory"
    hint: str = ""
    second_pass: Any = field(default=None, repr=False, compare=False)

    @property
    def has_rows(self) -> bool:
        """Whether the design keeps its rows."""
        return self.rows is not None

    def _rows(self, what: str) -> DesignRows:
        if self.rows is None:
            raise RowsUnavailableError(
                f"this fit was built from {self.origin} and holds only summary statistics, not"
                f" the rows ({what}). Classical tests, covariances and restricted fits work from"
                " the summaries; a covariance that needs residuals row by row does not."
                f" {self.hint}".rstrip()
            )
        return self.rows

    @property
    def x(self) -> NDArray[np.float64]:
        """Design matrix (raises without rows)."""
        return self._rows("design matrix").x

    @property
    def y(self) -> NDArray[np.float64]:
        """Response values (raises without rows or without a response)."""
        y = self._rows("response values").y
        if y is None:
            raise InputError("this design has no response (its formula has no left-hand side).")
        return y

    @property
    def weights(self) -> NDArray[np.float64] | None:
        """Weights, or None (raises without rows)."""
        return self._rows("weights").weights

    @property
    def row_index(self) -> pd.Index:
        """Labels of the rows used (raises without rows)."""
        return self._rows("row labels").row_index

    @property
    def source(self) -> pd.DataFrame | None:
        """The data rows used, or None (raises without rows)."""
        return self._rows("data frame").source

    def without_rows(self, origin: str, hint: str, dropped: pd.Index | None = None) -> Design:
        """The same naming and encoding without the rows.

        Examples
        --------
        >>> import numpy as np
        >>> d = design_from_arrays(np.c_[np.ones(3), [1.0, 2, 4]], [1.0, 2, 3])
        >>> d.without_rows("a test", "").has_rows
        False
        """
        return replace(
            self,
            rows=None,
            origin=origin,
            hint=hint,
            dropped=self.dropped if dropped is None else dropped,
            second_pass=None,
        )


def _plain_label(label: Any) -> Any:
    """A row label as a plain Python value (``104``, not ``np.int64(104)``) for messages."""
    return label.item() if isinstance(label, np.generic) else label


def _check_finite(
    a: NDArray[np.float64], what: str, names: Sequence[str] | None, rows: pd.Index | None
) -> None:
    with np.errstate(over="ignore", invalid="ignore"):
        total = np.add.reduce(a, axis=None) if a.size else 0.0
    if np.isfinite(total):
        return  # one pass, no temporary: a NaN or inf anywhere makes the sum non-finite
    bad = ~np.isfinite(a)
    if not bad.any():
        return
    if a.ndim == 1:
        i = int(np.flatnonzero(bad)[0])
        lab = _plain_label(rows[i]) if rows is not None else i
        raise InputError(
            f"{what} holds {float(a[i])!r} at row {lab!r} ({int(bad.sum())} non-finite values in"
            " all); remove or replace them before fitting."
        )
    i, j = (int(v) for v in np.argwhere(bad)[0])
    col = names[j] if names is not None else j
    lab = _plain_label(rows[i]) if rows is not None else i
    raise InputError(
        f"{what} column {col!r} holds {float(a[i, j])!r} at row {lab!r} ({int(bad[:, j].sum())}"
        " non-finite values in that column); remove or replace them before fitting."
    )


def _validate_weights(w: NDArray[np.float64], rows: pd.Index | None) -> None:
    _check_finite(w, "weights", None, rows)
    bad = np.flatnonzero(w <= 0)
    if bad.size:
        i = int(bad[0])
        lab = _plain_label(rows[i]) if rows is not None else i
        raise InputError(
            f"weights must be positive: row {lab!r} has weight {float(w[i])!r} ({bad.size} rows"
            " with weight <= 0). Drop those rows, or give them a small positive weight on purpose."
        )


def _find_intercept(x: NDArray[np.float64]) -> int | None:
    if x.shape[0] == 0:
        return None
    for j in np.flatnonzero(x[0] == 1.0).tolist():  # scan only columns that start with 1
        col = x[:, j]
        # only a column of ones: the working coordinates give the intercept column weight one
        if np.all(col == 1.0):
            return j
    return None


def design_from_arrays(
    x: ArrayLike,
    y: ArrayLike | None,
    names: Sequence[str] | None = None,
    weights: ArrayLike | None = None,
    response: str = "y",
) -> Design:
    """Validate arrays ``X``, ``y`` (and weights) into a :class:`Design`.

    A column whose entries all equal one is treated as the intercept.  ``y=None`` gives a
    design without a response.

    Examples
    --------
    >>> import numpy as np
    >>> d = design_from_arrays(np.c_[np.ones(3), [1.0, 2, 4]], [1.0, 2, 3], names=["one", "x"])
    >>> d.index.names, d.intercept
    (('one', 'x'), 0)
    """
    if isinstance(x, pd.DataFrame):
        if names is None:
            names = [str(c) for c in x.columns]
        rows = x.index
        text = [str(k) for k, t in x.dtypes.items() if not pd.api.types.is_numeric_dtype(t)]
        if text:
            raise InputError(
                f"X must be numeric, but column(s) {text[:5]} are not; encode categories first"
                " (or use a formula)."
            )
        if isinstance(y, pd.Series):  # a Series beside a DataFrame is matched by index
            y = align_series(y, rows, "y")
        if isinstance(weights, pd.Series):
            weights = align_series(weights, rows, "weights")
    else:
        rows = None
    for what, v in (("X", x), ("the response", y), ("weights", weights)):
        if v is not None and not isinstance(v, pd.DataFrame):
            raw = np.asarray(v)
            if raw.dtype.kind in "USO" and any(isinstance(e, str | bytes) for e in raw.flat):
                raise InputError(f"{what} must be numeric, but it holds text.")
            if raw.dtype.kind == "c":
                raise InputError(f"{what} holds complex numbers; give real values.")
    try:
        xa = np.array(x, dtype=np.float64, copy=True)
    except (TypeError, ValueError) as exc:
        msg = f"X must be numeric: {exc}. Encode categories first (or use a formula)."
        raise InputError(msg) from None
    ya = None
    if y is not None:
        try:
            ya = np.array(y, dtype=np.float64, copy=True)
        except (TypeError, ValueError) as exc:
            raise InputError(f"the response must be numeric: {exc}.") from None
    if xa.ndim == 1:
        xa = xa[:, None]
    if xa.ndim != 2:
        raise InputError(f"X must be 2-dimensional, got shape {xa.shape}.")
    if ya is not None and ya.ndim != 1:
        raise InputError(f"y must be 1-dimensional, got shape {ya.shape}.")
    n, p = xa.shape
    if ya is not None and ya.shape[0] != n:
        raise InputError(f"X has {n} rows but y has {ya.shape[0]}; they must match.")
    if names is None:
        names = [f"x{j}" for j in range(p)]
    names = [str(s) for s in names]
    if len(names) != p:
        raise InputError(f"{len(names)} names given for {p} columns of X.")
    if len(set(names)) != p:
        dup = sorted({s for s in names if names.count(s) > 1})
        raise InputError(f"column names must be unique; repeated: {dup}.")
    _check_finite(xa, "X", names, rows)
    if ya is not None:
        _check_finite(ya, "y", None, rows)
    wa = None
    if weights is not None:
        try:
            wa = np.array(weights, dtype=np.float64, copy=True).reshape(-1)
        except (TypeError, ValueError):
            raise InputError("weights must be numeric (positive numbers).") from None
        if wa.shape[0] != n:
            raise InputError(f"weights has {wa.shape[0]} entries for {n} rows.")
        _validate_weights(wa, rows)
    index = CoefficientIndex.of_columns(names)
    row_index = rows if rows is not None else pd.RangeIndex(n)
    return Design(
        index=index,
        intercept=_find_intercept(xa),
        response=response if ya is not None else None,
        dropped=row_index[:0],
        weighted=wa is not None,
        rows=DesignRows(xa, ya, wa, row_index),
    )


def _term_label(term: Any) -> str:
    s = str(term)
    return s


def _index_from_spec(columns: Sequence[str], spec: Any) -> CoefficientIndex:
    terms: dict[str, tuple[int, ...]] = {}
    factors: dict[str, tuple[str, ...]] = {}
    levels: list[tuple[str | None, ...]] = [() for _ in columns]
    for term, idx in spec.term_indices.items():
        label = _term_label(term)
        terms[label] = tuple(int(i) for i in idx)
        exprs = tuple(str(f.expr) for f in term.factors)
        factors[label] = exprs if label != "1" else ()
        for j in idx:
            levels[j] = _parse_levels(columns[j], exprs) if label != "1" else ()
    return CoefficientIndex(
        names=tuple(columns), terms=terms, levels=tuple(levels), factors=factors
    )


def design_from_formula(
    formula: str,
    data: pd.DataFrame,
    weights: str | ArrayLike | None = None,
    missing: str = "skip",
) -> Design:
    """Build a :class:`Design` from a Wilkinson formula via the formula encoder.

    Parameters
    ----------
    formula : str
        ``"response ~ terms"`` as formulaic parses it, or the right-hand side alone
        (``"~ terms"`` or ``"terms"``): a design without a response (``y`` is then absent).
    data : pandas.DataFrame
        Not modified.
    weights : str, array_like or None
        Name of a column of ``data``, a pandas Series (matched to the rows by index; a missing
        label raises), or an array in row order.
    missing : {'skip', 'refuse'}
        Drop rows with missing values in the formula's variables (or the weights) and count them
        on the fit, or raise :class:`~lincomb.errors.MissingValueError`.

    Notes
    -----
    Odd input is refused with :class:`~lincomb.errors.InputError` naming the column and the
    fix: no rows, or a missing value in every row; duplicate column names; a column named
    ``Intercept``; date-time, time-delta, period or complex columns; object columns mixing
    value types.  Nullable and pyarrow-backed text columns are factors like any text column;
    integer column names are written in backticks (`` `5` ``).  Categories of a categorical
    column that no row used holds (left over from subsetting) keep their (aliased) columns and
    are listed in ``encoder.unused_levels``; a test that touches them names them and the fix.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"y": [1.0, 2, 3, 5], "g": ["a", "b", "a", "b"], "x": [0.0, 1, 3, None]})
    >>> d = design_from_formula("y ~ g + x", df)
    >>> d.index.names, len(d.dropped)
    (('Intercept', 'g[T.b]', 'x'), 1)
    >>> design_from_formula("~ g + x", df).response is None
    True
    """
    from lincomb._model.encoder import FormulaEncoder

    encoder, rows = FormulaEncoder.learn(
        formula,
        data,
        weights=weights,
        missing=missing,
        keep_frame=True,
        note_unused=True,
        require_rows=True,
    )
    source = rows.frame.copy(deep=False) if rows.frame is not None else None
    return Design(
        index=encoder.index,
        intercept=encoder.intercept,
        response=encoder.response,
        dropped=rows.dropped,
        weighted=rows.weights is not None,
        rows=DesignRows(rows.x, rows.y, rows.weights, rows.rows, source),
        encoder=encoder,
        formula=formula,
    )


def encode_new(design: Design, data: pd.DataFrame) -> pd.DataFrame:
    """Encode new data with the fit's formula encoder, refusing levels the fit never saw."""
    if design.encoder is None:
        raise InputError("this fit was made from arrays; it has no formula to encode new data.")
    return design.encoder.encode_new(data)
