"""Fits from data that do not fit in memory: any iterable of chunks, one pass.

:func:`fit_chunks` reads DataFrame chunks (pandas' chunked CSV reader, parquet row groups, a
generator) and :func:`fit_array_chunks` reads ``(X, y)`` or ``(X, y, w)`` array chunks.  Each
chunk is reduced to :class:`lincomb._core.Moments` (the triangular factor of its centred
``sqrt(w)·[X y]``, never ``XᵀX``) and merged into the running total by a QR of the stacked
factors (:func:`lincomb._core.merge_moments`), in a balanced binary tree of ``log2(chunks)``
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
Where the formula allows it, later chunks are encoded from a column plan
(:class:`lincomb._model.column_plan.ColumnPlan`: formulaic's values per level, checked against
the first chunk's design to the last bit) instead of a formulaic call per chunk.

Missing values
--------------
Rows with a missing value in a variable of the formula (or the weights) are dropped chunk by
chunk and counted across chunks (``n_dropped``; their labels, as each chunk labels them, in
``dropped_rows``), or raise :class:`~lincomb.errors.MissingValueError` with ``missing="refuse"``.

Covariances that need the rows
------------------------------
HC0-HC4 and cluster-robust covariances need every residual, so they take the chunks again:
:func:`covariance_pass` makes a second pass and returns an estimate to pass as ``covariance=``
to any test of the fit.  Serial (Newey-West) covariances are not available for chunked fits.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from lincomb import _core as core
from lincomb._covariance.estimate import CovarianceEstimate
from lincomb._docstrings import RANK_TOL_PARAMETER, fill_doc
from lincomb._fit.linear import LinearFit, fit_from_moments
from lincomb._model.design import CoefficientIndex, Design, design_from_arrays
from lincomb._model.encoder import EncodedRows, FormulaEncoder
from lincomb._model.formula_text import require_response
from lincomb._model.row_checks import require_frame
from lincomb._settings import blas_limit, worker_threads
from lincomb.errors import InputError, MissingValueError

__all__ = [
    "ChunkProgress",
    "fit_chunks",
    "fit_array_chunks",
    "covariance_pass",
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


# -- encoding fixed once ---------------------------------------------------------------------


def _check_options(weights: object, missing: object) -> None:
    """Validate the options of a chunked or Dask fit before any chunk is read."""
    if weights is not None and not isinstance(weights, str):
        raise InputError(
            "weights must name a column of the chunks (an array cannot be aligned with"
            f" chunks); got {type(weights).__name__}."
        )
    if missing not in ("skip", "refuse"):
        raise InputError(f"missing must be 'skip' or 'refuse', got {missing!r}.")


@dataclass(frozen=True)
class FrameRows:
    """How a chunked or Dask fit turns each frame into rows: the encoder, weights, missing.

    Kept on the fit's design so that a second pass encodes the data exactly as the fit did.

    Examples
    --------
    >>> import pandas as pd
    >>> from lincomb._model.encoder import FormulaEncoder
    >>> df = pd.DataFrame({"y": [1.0, 2, 3], "x": [0.5, None, 2]})
    >>> FrameRows(FormulaEncoder.learn("y ~ x", df)[0]).encode(df, "chunk 0").x.shape
    (2, 2)
    """

    encoder: FormulaEncoder
    weights: str | None = None
    missing: str = "skip"

    def encode(self, frame: pd.DataFrame, where: str, keep_frame: bool = False) -> EncodedRows:
        return self.encoder.encode(
            frame, weights=self.weights, missing=self.missing, where=where, keep_frame=keep_frame
        )


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


@fill_doc(rank_tol=RANK_TOL_PARAMETER)
def fit_chunks(
    formula: str,
    chunks: Iterable[pd.DataFrame],
    *,
    weights: str | None = None,
    levels: Mapping[str, Sequence[Any]] | None = None,
    missing: str = "skip",
    rank_tol: float = core.RANK_TOL,
    progress: Callable[[ChunkProgress], None] | None = None,
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
    missing : {'skip', 'refuse'}, default 'skip'
        Rows with missing values in the formula's variables or the weights are dropped and
        counted across chunks, or raise :class:`~lincomb.errors.MissingValueError`.
    %(rank_tol)s
    progress : callable, optional
        Called after each chunk with a :class:`ChunkProgress`.

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
    >>> bool(abs(f.wald(lc.term("variety") == 0).stat
    ...          - g.wald(lc.term("variety") == 0).stat) < 1e-8)
    True
    """
    require_response(formula)
    _check_options(weights, missing)
    threads = worker_threads()
    it = _iterate(chunks, "chunks")
    p = _Pass(progress)
    merger = core.MomentMerger()
    recipe: FrameRows | None = None
    for k, frame in enumerate(it):
        where = f"chunk {k}"
        with blas_limit(threads):
            if recipe is None:
                frame = require_frame(frame, where)
                if FormulaEncoder.complete_rows(formula, frame, weights) == 0:
                    # no row to learn the encoding from yet
                    if missing == "refuse" and len(frame):
                        raise MissingValueError(
                            f"{where}: all {len(frame)} rows have missing values; drop or"
                            " impute them, or fit with missing='skip'."
                        )
                    p.record(len(frame), 0, frame.index)
                    continue
                encoder, enc = FormulaEncoder.learn(
                    formula,
                    frame,
                    levels=levels,
                    weights=weights,
                    missing=missing,
                    where=where,
                    column_plan=True,
                )
                encoder.check_stateless()
                recipe = FrameRows(encoder, weights, missing)
            else:
                enc = recipe.encode(frame, where)
            if enc.x.shape[0]:
                merger.add(
                    core.moments_from_arrays(
                        enc.x, enc.response, enc.weights, recipe.encoder.intercept
                    )
                )
        p.record(enc.rows_read, enc.x.shape[0], enc.dropped)
    moments = merger.result()
    if moments is None or recipe is None:
        raise _no_rows(p)
    design = Design(
        index=recipe.encoder.index,
        intercept=recipe.encoder.intercept,
        response=recipe.encoder.response,
        dropped=p.dropped_index(),
        weighted=weights is not None,
        encoder=recipe.encoder,
        formula=formula,
        origin=f"{p.chunks} chunks",
        hint=_SECOND_PASS_HINT,
        second_pass=recipe,
    )
    return fit_from_moments(design, moments, rank_tol)


class ArrayEncoder:
    """Validation of ``(X, y[, w])`` array chunks against fixed column names and intercept."""

    def __init__(self, names: tuple[str, ...], intercept: int | None) -> None:
        self.names = names
        self.intercept = intercept

    def encode(
        self,
        chunk: Any,
        where: str,
        keep_frame: bool = False,  # noqa: ARG002 - the frame encoders' call; arrays have no frame
    ) -> EncodedRows:
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
        return EncodedRows(d.x, d.y, d.weights, d.row_index, pd.Index([]), d.x.shape[0])


def fit_array_chunks(
    chunks: Iterable[tuple[Any, ...]],
    *,
    names: Sequence[str] | None = None,
    intercept: int | None | str = "auto",
    rank_tol: float = core.RANK_TOL,
    progress: Callable[[ChunkProgress], None] | None = None,
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
    threads = worker_threads()
    it = _iterate(chunks, "chunks")
    p = _Pass(progress)
    merger = core.MomentMerger()
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
        with blas_limit(threads):
            enc = encoder.encode(chunk, where)
            if enc.x.shape[0]:
                merger.add(
                    core.moments_from_arrays(enc.x, enc.response, enc.weights, encoder.intercept)
                )
        p.record(enc.rows_read, enc.x.shape[0], None)
    moments = merger.result()
    if moments is None or encoder is None:
        raise _no_rows(p)
    design = Design(
        index=CoefficientIndex.of_columns(encoder.names),
        intercept=encoder.intercept,
        response="y",
        dropped=pd.Index([]),
        weighted=bool(weighted),
        origin=f"{p.chunks} array chunks",
        hint=_SECOND_PASS_HINT,
        second_pass=encoder,
    )
    return fit_from_moments(design, moments, rank_tol)


def covariance_pass(
    fit: LinearFit,
    chunks: Iterable[Any],
    covariance: object,
    *,
    progress: Callable[[ChunkProgress], None] | None = None,
) -> CovarianceEstimate:
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
    >>> bool(abs(a.stat - b.stat) < 1e-8 * b.stat), a.df_error
    (True, 39.0)
    """
    from lincomb._covariance.second_pass import RowPass

    rp = RowPass(fit, covariance)
    encoder = fit.design.second_pass
    if not isinstance(encoder, (FrameRows, ArrayEncoder)):
        raise InputError(
            "covariance_pass needs a fit made by fit_chunks or fit_array_chunks; for an"
            " in-memory fit pass covariance= to its tests directly."
        )
    it = _iterate(chunks, "chunks")
    p = _Pass(progress)
    acc = None
    threads = worker_threads()
    for k, chunk in enumerate(it):
        where = f"chunk {k}"
        with blas_limit(threads):
            enc = encoder.encode(chunk, where, keep_frame=True)
            if enc.x.shape[0]:
                part = rp.block(enc.x, enc.response, enc.weights, enc.frame, where)
                acc = part if acc is None else rp.merge(acc, part)
        p.record(enc.rows_read, enc.x.shape[0], enc.dropped)
    return rp.finish(acc)
