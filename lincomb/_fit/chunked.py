"""Fits from data that do not fit in memory: any iterable of chunks, one pass.

:func:`fit_chunks` reads DataFrame chunks (pandas' chunked CSV reader, parquet row groups, a
generator) and :func:`fit_array_chunks` reads ``(X, y)`` or ``(X, y, w)`` array chunks.  Each
chunk is reduced to :class:`lincomb.linalg.Moments` (the triangular factor of its centred
``sqrt(w)·[X y]``, never ``XᵀX``) and merged into the running total by a QR of the stacked
factors (:func:`lincomb.linalg.merge_moments`), in a balanced binary tree of ``log2(chunks)``
levels.  Memory holds one chunk and a few ``(p+1)×(p+1)`` factors, whatever the number of rows.

The result is the same :class:`~lincomb.fit.LinearFit` an in-memory fit gives (equal to
rounding): coefficients, classical covariance, every Wald test, :meth:`~LinearFit.restrict`.

Encoding, fixed once
--------------------
The formula's encoding (columns, factor levels, contrasts) is fixed by formulaic's model spec
built on the first chunk that has rows, after the ``levels`` you declare are applied to it.  A
later chunk with a level the encoding lacks raises :class:`~lincomb.errors.UnseenLevelError`
(formula encoders would otherwise code such rows like the reference level, silently); declare
every level up front to avoid it.  A level declared but absent from every chunk gives an
all-zero, aliased column.  Stateful transforms (``center(x)``, ``scale(x)``, ``poly(x)``,
``bs(x)``...) are refused: their state (a mean, knots) would come from the first chunk alone.

Missing values
--------------
Rows with a missing value in a variable of the formula (or the weights) are dropped chunk by
chunk and counted across chunks (``n_dropped``; their labels, as each chunk labels them, in
``dropped_rows``), or raise :class:`~lincomb.errors.MissingValueError` with ``missing="raise"``.

Covariances that need the rows
------------------------------
HC0-HC4 and cluster-robust covariances need every residual, so they take the chunks again:
:func:`covariance_pass` makes a second pass and returns an estimate to pass as ``covariance=``
to any test of the fit.  Serial (Newey-West) covariances are not available for chunked fits.
"""

from __future__ import annotations

import difflib
import time
import warnings
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb import _core as linalg
from lincomb._fit.linear import LinearFit
from lincomb._fit.pooled import SummaryDesign, fit_from_moments
from lincomb._model.design import (
    CoefficientIndex,
    _check_finite,
    _index_from_spec,
    _validate_weights,
    design_from_arrays,
)
from lincomb._settings import blas_limit, check_threads
from lincomb.errors import InputError, MissingValueError, UnseenLevelError

__all__ = [
    "ChunkProgress",
    "fit_chunks",
    "fit_array_chunks",
    "covariance_pass",
    "FrameEncoder",
]

_SECOND_PASS_HINT = (
    "For HC0-HC4 or cluster-robust covariances pass the chunks again to"
    " lincomb.chunked.covariance_pass(fit, chunks, 'HC3'), and give the estimate it returns as"
    " covariance= to the test."
)


@dataclass(frozen=True)
class ChunkProgress:
    """Progress of a pass over chunks, given to the ``progress`` callback after each chunk.

    Attributes
    ----------
    chunks : int
        Chunks read so far.
    rows_read : int
        Rows read so far.
    rows_used : int
        Rows used so far (read minus dropped).
    rows_dropped : int
        Rows dropped for missing values so far.
    seconds : float
        Time since the pass started.

    Examples
    --------
    >>> import lincomb as lc
    >>> trial = lc.datasets.field_trial()
    >>> seen = []
    >>> f = lc.fit_chunks("yield_t_ha ~ variety", [trial.iloc[:100], trial.iloc[100:]],
    ...                   progress=seen.append)
    >>> [(p.chunks, p.rows_read) for p in seen]
    [(1, 100), (2, 220)]
    """

    chunks: int
    rows_read: int
    rows_used: int
    rows_dropped: int
    seconds: float

    @property
    def rows_per_second(self) -> float:
        return self.rows_read / self.seconds if self.seconds > 0 else float("nan")


# -- encoding fixed once ---------------------------------------------------------------------


@dataclass(frozen=True)
class EncodedChunk:
    """One chunk turned into arrays: the rows used, and the labels of the rows dropped."""

    x: NDArray[np.float64]
    y: NDArray[np.float64]
    w: NDArray[np.float64] | None
    dropped: pd.Index
    rows_read: int
    frame: pd.DataFrame | None


def _cast_levels(
    frame: pd.DataFrame, levels: Mapping[str, Sequence[Any]], where: str
) -> pd.DataFrame:
    """Give the columns in ``levels`` a categorical dtype with exactly those categories."""
    if not levels:
        return frame
    out = frame.copy(deep=False)
    for var, lv in levels.items():
        if var not in out.columns:
            continue
        col = out[var]
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
        out[var] = pd.Categorical(col, categories=lv_list)
    return out


class FrameEncoder:
    """A formula's encoding, fixed once, applied to any number of data frames.

    Build one with :meth:`from_sample`.  Its model spec keeps the factor levels and contrasts;
    :meth:`encode` turns a frame into the arrays of the rows used, refusing factor levels the
    encoding lacks.

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"y": [1.0, 2, 3, 4], "g": ["a", "b", "a", "b"], "x": [0.5, 1, 2, 3]})
    >>> enc = FrameEncoder.from_sample("y ~ g + x", df, levels={"g": ["a", "b", "c"]})
    >>> enc.index.names
    ('Intercept', 'g[T.b]', 'g[T.c]', 'x')
    >>> enc.encode(df.iloc[:2], "chunk 1").x.shape
    (2, 4)
    """

    def __init__(
        self,
        formula: str,
        specs: Any,
        index: CoefficientIndex,
        variables: tuple[str, ...],
        weights: str | None,
        missing: str,
        levels: Mapping[str, Sequence[Any]],
    ) -> None:
        self.formula = formula
        self.specs = specs
        self.index = index
        self.variables = variables
        self.weights = weights
        self.missing = missing
        self.levels = {k: list(v) for k, v in levels.items()}
        self.intercept: int | None = index.terms.get("1", (None,))[0]
        self.response = str(specs.lhs.column_names[0])

    @staticmethod
    def check_options(formula: object, weights: object, missing: object) -> None:
        """Validate the options of a chunked fit before any chunk is read.

        Examples
        --------
        >>> FrameEncoder.check_options("~ x", None, "drop")
        Traceback (most recent call last):
        ...
        lincomb.errors.InputError: formula '~ x' has no response: write it as 'response ~ terms'.
        """
        if not isinstance(formula, str) or "~" not in formula or not formula.split("~")[0].strip():
            raise InputError(
                f"formula {formula!r} has no response: write it as 'response ~ terms'."
            )
        if weights is not None and not isinstance(weights, str):
            raise InputError(
                "weights must name a column of the chunks (an array cannot be aligned with"
                f" chunks); got {type(weights).__name__}."
            )
        if missing not in ("drop", "raise"):
            raise InputError(f"missing must be 'drop' or 'raise', got {missing!r}.")

    @classmethod
    def from_sample(
        cls,
        formula: str,
        sample: pd.DataFrame,
        *,
        levels: Mapping[str, Sequence[Any]] | None = None,
        weights: str | None = None,
        missing: str = "drop",
        where: str = "the first chunk",
    ) -> FrameEncoder:
        """Fix the encoding of ``formula`` on ``sample`` (with ``levels`` applied to it).

        ``sample`` may be an empty frame when every categorical variable has declared levels.

        Examples
        --------
        >>> import pandas as pd
        >>> empty = pd.DataFrame({"y": [], "g": [], "x": []})
        >>> FrameEncoder.from_sample("y ~ g + x", empty, levels={"g": ["a", "b"]}).index.names
        ('Intercept', 'g[T.b]', 'x')
        """
        import formulaic

        cls.check_options(formula, weights, missing)
        levels = dict(levels or {})
        if not isinstance(sample, pd.DataFrame):
            raise InputError(f"{where} is a {type(sample).__name__}, not a pandas DataFrame.")
        unknown = [v for v in levels if v not in sample.columns]
        if unknown:
            raise InputError(
                f"levels were declared for {unknown}, which {where} does not have as columns."
                f" Columns: {[str(c) for c in sample.columns]}"
            )
        if weights is not None and weights not in sample.columns:
            close = difflib.get_close_matches(weights, [str(c) for c in sample.columns])
            raise InputError(f"weights column {weights!r} is not in {where}. Close: {close}")
        work = _cast_levels(sample, levels, where)
        variables = _formula_variables(formula, work)
        na = _na_rows(work, variables, weights)
        if na.any():
            work = work.loc[~na]
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("error", formulaic.errors.DataMismatchWarning)
                mm = formulaic.model_matrix(formula, work, na_action="raise")
        except Exception as exc:  # formulaic raises plain errors for unknown variables
            raise InputError(f"could not build the design for {formula!r}: {exc}") from None
        specs = mm.model_spec
        if mm.lhs.shape[1] != 1:
            raise InputError(
                f"the response of {formula!r} expands to {mm.lhs.shape[1]} columns"
                f" {list(mm.lhs.columns)}: it must be one numeric variable."
            )
        stateful = sorted(
            {str(k) for k in specs.rhs.transform_state}
            | {str(k) for k in specs.lhs.transform_state}
        )
        if stateful:
            raise InputError(
                f"the formula uses stateful transform(s) {stateful}: their state (a mean, a"
                " scale, knots, polynomial coefficients) would come from one chunk, so the fit"
                " would not be the fit of all rows. Compute the transformed column before"
                " chunking, or write the transform with fixed numbers (e.g. 'I(x - 12.5)')."
            )
        for factor, state in specs.rhs.factor_contrasts.items():
            if len(state.levels) == 0:
                raise InputError(
                    f"factor {str(factor)!r} has no levels in {where}: declare them, e.g."
                    " levels={'name': [...]} (an empty sample cannot reveal them)."
                )
        names = [str(c) for c in mm.rhs.columns]
        index = _index_from_spec(names, specs.rhs)
        return cls(formula, specs, index, tuple(variables), weights, missing, levels)

    def encode(self, frame: pd.DataFrame, where: str, keep_frame: bool = False) -> EncodedChunk:
        """Arrays of the rows of ``frame`` used by the fit (``where`` names it in errors).

        Examples
        --------
        >>> import pandas as pd
        >>> df = pd.DataFrame({"y": [1.0, 2, 3, 4], "g": ["a", "b", "a", "b"],
        ...                    "x": [0.5, None, 2, 3]})
        >>> chunk = FrameEncoder.from_sample("y ~ g + x", df).encode(df, "chunk 1")
        >>> chunk.x.shape, list(chunk.dropped)
        ((3, 3), [1])
        """
        import formulaic

        if not isinstance(frame, pd.DataFrame):
            raise InputError(f"{where} is a {type(frame).__name__}, not a pandas DataFrame.")
        need = list(self.variables) + ([self.weights] if self.weights else [])
        absent = [v for v in need if v not in frame.columns]
        if absent:
            raise InputError(
                f"{where} lacks column(s) {absent} that the formula (or weights) uses."
                f" It has: {[str(c) for c in frame.columns]}"
            )
        na = _na_rows(frame, self.variables, self.weights)
        n_na = int(na.sum())
        if n_na and self.missing == "raise":
            counts = {c: int(frame[c].isna().sum()) for c in need if frame[c].isna().any()}
            raise MissingValueError(
                f"{where}: {n_na} rows have missing values (per column: {counts}); drop or"
                " impute them, or fit with missing='drop'."
            )
        sub = frame.loc[~na] if n_na else frame
        dropped = frame.index[na] if n_na else frame.index[:0]
        if len(sub) == 0:
            return EncodedChunk(
                np.zeros((0, self.index.p)), np.zeros(0), None, dropped, len(frame), None
            )
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", formulaic.errors.DataMismatchWarning)
            try:
                mm = self.specs.get_model_matrix(sub, na_action="raise")
            except Exception as exc:
                raise InputError(f"{where}: could not encode the rows: {exc}") from None
        for wrn in caught:
            if issubclass(wrn.category, formulaic.errors.DataMismatchWarning):
                raise UnseenLevelError(
                    f"{where} holds a factor level the encoding lacks ({wrn.message}). Those"
                    " rows would silently be coded like the reference level. Declare every"
                    " level up front, e.g. levels={'column': [...]}, or drop those rows."
                )
        x = mm.rhs.to_numpy(dtype=np.float64)
        y = mm.lhs.to_numpy(dtype=np.float64)[:, 0]
        if x.shape[1] != self.index.p:  # pragma: no cover - the spec fixes the columns
            raise InputError(f"{where}: encoded to {x.shape[1]} columns instead of {self.index.p}.")
        _check_finite(x, f"{where}: design", self.index.names, sub.index)
        _check_finite(y, f"{where}: response {self.response!r}", None, sub.index)
        w = None
        if self.weights is not None:
            try:
                w = sub[self.weights].to_numpy(dtype=np.float64)
            except (TypeError, ValueError):
                raise InputError(f"{where}: weights {self.weights!r} must be numeric.") from None
            _validate_weights(w, sub.index)
        return EncodedChunk(x, y, w, dropped, len(frame), sub if keep_frame else None)


def _formula_variables(formula: str, frame: pd.DataFrame) -> list[str]:
    import formulaic

    try:
        required = formulaic.Formula(formula).required_variables
    except Exception as exc:
        raise InputError(f"could not parse the formula {formula!r}: {exc}") from None
    return sorted(str(v) for v in required if v in frame.columns)


def _na_rows(
    frame: pd.DataFrame, variables: Sequence[str], weights: str | None
) -> NDArray[np.bool_]:
    cols = [c for c in list(variables) + ([weights] if weights else []) if c in frame.columns]
    if not cols:
        return np.zeros(len(frame), dtype=bool)
    return frame[cols].isna().to_numpy().any(axis=1)


class _Pass:
    """Bookkeeping of one pass over chunks: counts, dropped labels, progress reports."""

    def __init__(self, progress: Callable[[ChunkProgress], None] | None) -> None:
        if progress is not None and not callable(progress):
            raise InputError(f"progress must be callable, got {type(progress).__name__}.")
        self.progress = progress
        self.start = time.perf_counter()
        self.chunks = 0
        self.read = 0
        self.used = 0
        self.dropped: list[pd.Index] = []
        self.n_dropped = 0

    def record(self, rows_read: int, rows_used: int, dropped: pd.Index | None) -> None:
        self.chunks += 1
        self.read += rows_read
        self.used += rows_used
        if dropped is not None and len(dropped):
            self.dropped.append(dropped)
            self.n_dropped += len(dropped)
        if self.progress is not None:
            self.progress(
                ChunkProgress(
                    chunks=self.chunks,
                    rows_read=self.read,
                    rows_used=self.used,
                    rows_dropped=self.n_dropped,
                    seconds=time.perf_counter() - self.start,
                )
            )

    def dropped_index(self) -> pd.Index:
        if not self.dropped:
            return pd.Index([])
        return (
            self.dropped[0].append(self.dropped[1:]) if len(self.dropped) > 1 else self.dropped[0]
        )


def _iterate(chunks: Iterable[Any], what: str) -> Iterator[Any]:
    if isinstance(chunks, pd.DataFrame):
        raise InputError(
            f"{what} must be an iterable of chunks, not one DataFrame: wrap it in a list, or"
            " use lc.fit for data in memory."
        )
    try:
        return iter(chunks)
    except TypeError:
        raise InputError(
            f"{what} must be an iterable of chunks, got {type(chunks).__name__}."
        ) from None


def _no_rows(p: _Pass) -> InputError:
    return InputError(
        f"no rows to fit: {p.chunks} chunks held {p.read} rows and {p.n_dropped} of them had"
        " missing values."
    )


# -- public entry points ---------------------------------------------------------------------


def fit_chunks(
    formula: str,
    chunks: Iterable[pd.DataFrame],
    *,
    weights: str | None = None,
    levels: Mapping[str, Sequence[Any]] | None = None,
    missing: str = "drop",
    rank_tol: float = linalg.RANK_TOL,
    progress: Callable[[ChunkProgress], None] | None = None,
    blas_threads: int | None = 1,
) -> LinearFit:
    """Fit a formula to data read chunk by chunk, in one pass and bounded memory.

    Parameters
    ----------
    formula : str
        Two-sided Wilkinson formula, as for :func:`~lincomb.fit`.
    chunks : iterable of pandas.DataFrame
        Read once, in order (a generator, ``pd.read_csv(..., chunksize=...)``, parquet row
        groups...).  Not modified.
    weights : str, optional
        Name of a column of positive weights (WLS).
    levels : mapping, optional
        ``{column: [levels...]}``: the complete, ordered levels of categorical variables (the
        first is the reference under the default coding).  Variables not listed take the levels
        of the first chunk with rows; a later chunk with another level raises
        :class:`~lincomb.errors.UnseenLevelError`.
    missing : {'drop', 'raise'}, default 'drop'
        Rows with missing values in the formula's variables or the weights are dropped and
        counted across chunks, or raise :class:`~lincomb.errors.MissingValueError`.
    rank_tol : float, default 1e-10
        Relative rank tolerance (see :mod:`lincomb.linalg`).
    progress : callable, optional
        Called after each chunk with a :class:`ChunkProgress`.
    blas_threads : int or None, default 1
        BLAS threads while a chunk is factored (threadpoolctl, when installed); ``None`` leaves
        BLAS alone.  Chunk-sized QRs run faster and steadier on one thread; the limit is lifted
        while the next chunk is read.

    Returns
    -------
    LinearFit
        The fit of all rows, equal to rounding to the in-memory fit of the concatenated chunks
        (with the same levels).  It keeps no rows: see :func:`covariance_pass` for robust
        covariances.

    Raises
    ------
    UnseenLevelError
        A chunk holds a factor level the encoding lacks.
    InputError
        A chunk lacks a column, holds non-numeric or non-finite values, bad weights; the
        formula uses a stateful transform; no rows at all.

    Examples
    --------
    >>> import lincomb as lc
    >>> trial = lc.datasets.field_trial()
    >>> chunks = (trial.iloc[i:i + 50] for i in range(0, len(trial), 50))
    >>> f = fit_chunks("yield_t_ha ~ C(nitrogen) + variety + rainfall_mm", chunks,
    ...                levels={"variety": sorted(trial["variety"].unique())})
    >>> g = lc.fit("yield_t_ha ~ C(nitrogen) + variety + rainfall_mm", trial)
    >>> (f.n_obs, f.n_dropped) == (g.n_obs, g.n_dropped)
    True
    >>> bool(abs(f.wald(lc.term("variety") == 0).statistic
    ...          - g.wald(lc.term("variety") == 0).statistic) < 1e-8)
    True
    """
    FrameEncoder.check_options(formula, weights, missing)
    check_threads(blas_threads)
    it = _iterate(chunks, "chunks")
    p = _Pass(progress)
    merger = linalg.MomentMerger()
    encoder: FrameEncoder | None = None
    for k, frame in enumerate(it):
        where = f"chunk {k}"
        if encoder is None:
            if not isinstance(frame, pd.DataFrame):
                raise InputError(f"{where} is a {type(frame).__name__}, not a pandas DataFrame.")
            work = _cast_levels(frame, levels or {}, where)
            variables = _formula_variables(formula, work)
            na = _na_rows(work, variables, weights)
            if bool(na.all()):  # no row to learn the encoding from yet
                if missing == "raise" and len(frame):
                    raise MissingValueError(
                        f"{where}: all {len(frame)} rows have missing values; drop or impute"
                        " them, or fit with missing='drop'."
                    )
                p.record(len(frame), 0, frame.index)
                continue
            encoder = FrameEncoder.from_sample(
                formula, frame, levels=levels, weights=weights, missing=missing, where=where
            )
        with blas_limit(blas_threads):
            enc = encoder.encode(_cast_levels(frame, encoder.levels, where), where)
            if enc.x.shape[0]:
                merger.add(linalg.moments_from_arrays(enc.x, enc.y, enc.w, encoder.intercept))
        p.record(enc.rows_read, enc.x.shape[0], enc.dropped)
    moments = merger.result()
    if moments is None or encoder is None:
        raise _no_rows(p)
    design = SummaryDesign(
        index=encoder.index,
        intercept=encoder.intercept,
        response=encoder.response,
        dropped=p.dropped_index(),
        weighted=weights is not None,
        origin=f"{p.chunks} chunks",
        spec=encoder.specs,
        formula=formula,
        hint=_SECOND_PASS_HINT,
        encoder=encoder,
    )
    return fit_from_moments(design, moments, rank_tol)


class ArrayEncoder:
    """Validation of ``(X, y[, w])`` array chunks against fixed column names and intercept."""

    def __init__(self, names: tuple[str, ...], intercept: int | None) -> None:
        self.names = names
        self.intercept = intercept

    def encode(self, chunk: Any, where: str) -> EncodedChunk:
        if not isinstance(chunk, tuple) or len(chunk) not in (2, 3):
            raise InputError(
                f"{where} must be a tuple (X, y) or (X, y, weights), got {type(chunk).__name__}."
            )
        x, y = chunk[0], chunk[1]
        w = chunk[2] if len(chunk) == 3 else None
        names = self.names
        if isinstance(x, pd.DataFrame) and [str(c) for c in x.columns] != list(names):
            raise InputError(
                f"{where} has columns {[str(c) for c in x.columns]}, but the first chunk had"
                f" {list(names)}; every chunk must have the same columns in the same order."
            )
        try:
            d = design_from_arrays(x, y, names=names, weights=w)
        except InputError as exc:
            raise type(exc)(f"{where}: {exc}") from None
        j = self.intercept
        if j is not None and d.x.shape[0] and not np.all(d.x[:, j] == 1.0):
            i = int(np.flatnonzero(d.x[:, j] != 1.0)[0])
            raise InputError(
                f"{where}: column {names[j]!r} was taken as the intercept (all ones in the"
                f" first chunk) but holds {d.x[i, j]!r} at row {i}. Pass intercept=None, or"
                " the index of the true column of ones."
            )
        return EncodedChunk(d.x, d.y, d.weights, pd.Index([]), d.x.shape[0], None)


def fit_array_chunks(
    chunks: Iterable[tuple[Any, ...]],
    *,
    names: Sequence[str] | None = None,
    intercept: int | None | str = "auto",
    rank_tol: float = linalg.RANK_TOL,
    progress: Callable[[ChunkProgress], None] | None = None,
    blas_threads: int | None = 1,
) -> LinearFit:
    """Fit ``y`` on ``X`` read as array chunks ``(X, y)`` or ``(X, y, weights)``, in one pass.

    Parameters
    ----------
    chunks : iterable of tuple
        Each ``X`` is (n_k, p) (array or DataFrame), ``y`` and ``weights`` are (n_k,).  Either
        every chunk has weights or none has.  Values must be finite (no missing-value dropping
        for arrays).
    names : sequence of str, optional
        Column names (default: a DataFrame's columns, else ``x0, x1, ...``).
    intercept : int, None or 'auto'
        Column of ones that is the intercept.  ``'auto'``: the first column of ones in the first
        chunk, which every later chunk must confirm.
    rank_tol : float, default 1e-10
    progress : callable, optional
        Called after each chunk with a :class:`ChunkProgress`.
    blas_threads : int or None, default 1
        As for :func:`fit_chunks`.

    Returns
    -------
    LinearFit
        Equal to rounding to ``lc.fit_arrays`` on the stacked chunks.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(1000), rng.normal(size=(1000, 3))])
    >>> y = x @ [1.0, 0.5, 0.0, -0.25] + rng.normal(size=1000)
    >>> f = fit_array_chunks((x[i:i + 256], y[i:i + 256]) for i in range(0, 1000, 256))
    >>> bool(np.allclose(f.coefficients, lc.fit_arrays(x, y).coefficients, rtol=1e-10))
    True
    """
    check_threads(blas_threads)
    it = _iterate(chunks, "chunks")
    p = _Pass(progress)
    merger = linalg.MomentMerger()
    encoder: ArrayEncoder | None = None
    weighted: bool | None = None
    for k, chunk in enumerate(it):
        where = f"chunk {k}"
        if encoder is None:
            if not isinstance(chunk, tuple) or len(chunk) not in (2, 3):
                raise InputError(
                    f"{where} must be a tuple (X, y) or (X, y, weights), got"
                    f" {type(chunk).__name__}."
                )
            d = design_from_arrays(
                chunk[0], chunk[1], names=names, weights=chunk[2] if len(chunk) == 3 else None
            )
            if intercept == "auto":
                icol = d.intercept
            elif intercept is None:
                icol = None
            elif isinstance(intercept, (int, np.integer)) and 0 <= intercept < d.x.shape[1]:
                icol = int(intercept)
            else:
                raise InputError(
                    f"intercept must be 'auto', None or a column index below {d.x.shape[1]};"
                    f" got {intercept!r}."
                )
            encoder = ArrayEncoder(d.index.names, icol)
            weighted = len(chunk) == 3
        if isinstance(chunk, tuple) and (len(chunk) == 3) != weighted:
            raise InputError(
                f"{where} {'has' if len(chunk) == 3 else 'lacks'} weights but the first chunk"
                f" {'did not' if weighted is False else 'did'}; give weights with every chunk"
                " or with none."
            )
        with blas_limit(blas_threads):
            enc = encoder.encode(chunk, where)
            if enc.x.shape[0]:
                merger.add(linalg.moments_from_arrays(enc.x, enc.y, enc.w, encoder.intercept))
        p.record(enc.rows_read, enc.x.shape[0], None)
    moments = merger.result()
    if moments is None or encoder is None:
        raise _no_rows(p)
    design = SummaryDesign(
        index=CoefficientIndex(
            names=encoder.names,
            terms={s: (j,) for j, s in enumerate(encoder.names)},
            levels=tuple(() for _ in encoder.names),
            factors={},
        ),
        intercept=encoder.intercept,
        response="y",
        dropped=pd.Index([]),
        weighted=bool(weighted),
        origin=f"{p.chunks} array chunks",
        hint=_SECOND_PASS_HINT,
        encoder=encoder,
    )
    return fit_from_moments(design, moments, rank_tol)


def covariance_pass(
    fit: LinearFit,
    chunks: Iterable[Any],
    covariance: object,
    *,
    progress: Callable[[ChunkProgress], None] | None = None,
    blas_threads: int | None = 1,
) -> Any:
    """Evaluate a row-based covariance estimator on a chunked fit with a second pass.

    Parameters
    ----------
    fit : LinearFit
        Made by :func:`fit_chunks` or :func:`fit_array_chunks`.
    chunks : iterable
        The same chunks again, in any order (DataFrames for a formula fit, array tuples for
        an array fit).  Rows are encoded and dropped exactly as in the fit.
    covariance : str or estimator
        ``"HC0"`` ... ``"HC4"``, or :func:`~lincomb.clustered` with column name(s) of the
        chunks (labels may span chunks).
    progress : callable, optional
    blas_threads : int or None, default 1
        As for :func:`fit_chunks`.

    Returns
    -------
    lincomb.covariance.CovarianceEstimate
        Pass it as ``covariance=`` to :meth:`~lincomb.fit.LinearFit.wald`,
        :meth:`~lincomb.fit.LinearFit.coef_frame`, ... of ``fit``, or attach it with
        :meth:`~lincomb.fit.LinearFit.with_covariance`.

    Raises
    ------
    IncompatibleFitError
        The chunks do not reproduce the fit's rows (row count or residual sum of squares).
    CovarianceInputError
        An estimator that cannot be computed in a pass (serial), or cluster labels that are not
        column names or are missing.

    Notes
    -----
    HC meats are sums over rows of ``g_i g_iᵀ``: each chunk contributes the triangular factor
    of its scores and factors merge by QR.  Cluster meats need the score sums per cluster,
    accumulated across chunks (memory grows with the number of clusters, not rows).

    Examples
    --------
    >>> import lincomb as lc
    >>> sites = lc.datasets.service_sites()
    >>> parts = lambda: (sites.iloc[i:i + 300] for i in range(0, len(sites), 300))
    >>> f = fit_chunks("wait_min ~ staffing + protocol", parts())
    >>> est = covariance_pass(f, parts(), lc.clustered(by="site"))
    >>> g = lc.fit("wait_min ~ staffing + protocol", sites)
    >>> a = f.wald(lc.coef("staffing") == 0, covariance=est)
    >>> b = g.wald(lc.coef("staffing") == 0, covariance=lc.clustered(by="site"))
    >>> bool(abs(a.statistic - b.statistic) < 1e-8 * b.statistic), a.df_den
    (True, 39.0)
    """
    from lincomb._covariance.second_pass import RowPass

    rp = RowPass(fit, covariance)
    encoder = getattr(fit._design, "encoder", None)
    if encoder is None:
        raise InputError(
            "covariance_pass needs a fit made by fit_chunks or fit_array_chunks; for an"
            " in-memory fit pass covariance= to its tests directly."
        )
    it = _iterate(chunks, "chunks")
    p = _Pass(progress)
    acc = None
    check_threads(blas_threads)
    for k, chunk in enumerate(it):
        where = f"chunk {k}"
        with blas_limit(blas_threads):
            if isinstance(encoder, FrameEncoder):
                framed = _cast_levels(chunk, encoder.levels, where)
                enc = encoder.encode(framed, where, keep_frame=True)
            else:
                enc = encoder.encode(chunk, where)
            if enc.x.shape[0]:
                part = rp.block(enc.x, enc.y, enc.w, enc.frame, where)
                acc = part if acc is None else rp.merge(acc, part)
        p.record(enc.rows_read, enc.x.shape[0], enc.dropped)
    return rp.finish(acc)
