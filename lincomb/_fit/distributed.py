"""Fits from Dask collections: the cluster passes over the data, the client holds p×p summaries.

Needs the optional extra ``lincomb[dask]`` (dask with its DataFrame support, and threadpoolctl).

:func:`fit_dask` fits a formula to a Dask DataFrame and :func:`fit_dask_arrays` fits Dask arrays
``X``, ``y``.  Every partition (block of rows) is reduced to :class:`lincomb._core.Moments` by
a task on the workers; the moments are merged by a tree reduction of small QRs
(:func:`lincomb._core.merge_moments`, ``split_every`` at a time).  Only the triangular factors
travel: ``dask.array.linalg.tsqr`` would form every block's ``Q`` as well, which a test needs
nowhere.  The result is the same :class:`~lincomb.fit.LinearFit` as an in-memory fit of the
computed data (equal to rounding).

Encoding
--------
The formula's encoding is fixed before any partition is read, because a model spec built from
a Dask DataFrame's metadata (an empty frame) silently leaves out every factor of string dtype
(it sees no level).  So the levels of every categorical variable (string, categorical or bool
columns, and numeric columns wrapped in ``C()``) are taken, in this order, from ``levels=``,
from a categorical dtype with known categories, or else computed over the rows without missing
values, in one extra pass (all such columns at once; sorted as pandas sorts categories, which is
what an in-memory fit does).  The spec is then built on the metadata with those levels, and a
partition holding another level raises :class:`~lincomb.errors.UnseenLevelError`.  The response
and the design are always encoded together by the two-sided spec, so a row dropped for a missing
value leaves both (a right-hand-side-only spec would drop it from ``X`` alone).

Threads
-------
Each task limits BLAS to one thread (the package's worker setting, see
:func:`lincomb._fit.chunked.worker_threads`) with threadpoolctl: Dask already runs one task per
core, and nested BLAS threads oversubscribe the cores.

Failures on a cluster
---------------------
A call returns the fit of every partition or raises: nothing computed before a failure is
returned.  An error raised inside a task (by lincomb, naming the partition, or by the code that
reads a partition) reaches the caller with its own type and message.  A failure of the
cluster's own (a worker that died on every attempt, a cancelled task) becomes
:class:`~lincomb.errors.ClusterTaskError`, naming the partition (or block) whose task was
given up; a worker that dies once is replaced and its lost work recomputed by the scheduler.
The levels pass reduces per-partition value sets (a shuffle is not needed for a few levels).

Covariances that need the rows
------------------------------
HC0-HC4 and cluster-robust covariances take the data again: :func:`covariance_pass` is a second
distributed pass returning an estimate to give as ``covariance=`` to the fit's tests.
"""

from __future__ import annotations

import asyncio
import concurrent.futures
import functools
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from lincomb import _core as core
from lincomb._covariance.estimate import CovarianceEstimate
from lincomb._fit.chunked import FrameRows, _check_options
from lincomb._fit.linear import LinearFit, fit_from_moments
from lincomb._model.design import CoefficientIndex, Design, design_from_arrays
from lincomb._model.encoder import FormulaEncoder
from lincomb._model.formula_text import require_response
from lincomb._settings import blas_limit, worker_threads
from lincomb.errors import (
    ClusterTaskError,
    IncompatibleFitError,
    InputError,
    LincombError,
    OptionalDependencyError,
)

__all__ = ["fit_dask", "fit_dask_arrays", "covariance_pass", "DEFAULT_SPLIT_EVERY"]

#: How many partition summaries one reduction task merges.
DEFAULT_SPLIT_EVERY: int = 8

_HINT = (
    "For HC0-HC4 or cluster-robust covariances make a second pass over the data with"
    " lincomb.distributed.covariance_pass(fit, data, 'HC3') and give the estimate it returns as"
    " covariance= to the test."
)


def _require_dask() -> Any:
    try:
        import dask
        import dask.array  # noqa: F401
        import dask.dataframe  # noqa: F401
        import threadpoolctl  # noqa: F401
    except ImportError as exc:
        raise OptionalDependencyError(
            f"fits from Dask collections need the optional extra: {exc}. Install it with"
            " pip install 'lincomb[dask]'."
        ) from None
    return dask


_Spec = tuple[int | None, int]  # (BLAS threads per task, the client's process id)


class _Limited:
    """Limit BLAS threads inside a task that runs in another process than the client.

    ``spec`` is ``(threads, client pid)``.  Tasks that run in the client's process (the local
    threaded and synchronous schedulers) are covered by one limit around ``dask.compute``
    instead: concurrent per-task limits in one process could race and leave it limited.
    """

    def __init__(self, spec: _Spec) -> None:
        threads, client = spec
        self.threads = threads if os.getpid() != client else None

    def __enter__(self) -> None:
        self._ctx = blas_limit(self.threads)
        self._ctx.__enter__()

    def __exit__(self, *exc: Any) -> None:
        self._ctx.__exit__(*exc)


@dataclass(frozen=True)
class _Part:
    """A partition's (or a merged group's) contribution."""

    moments: core.Moments | None
    dropped: tuple[pd.Index, ...]
    rows: int
    ones: np.ndarray | None = None  # arrays: which columns were all ones


def _merge_parts(*parts: _Part) -> _Part:
    live = [p.moments for p in parts if p.moments is not None]
    merged = core.merge_tree(live) if live else None
    ones = None
    if parts and parts[0].ones is not None:
        ones = np.logical_and.reduce([p.ones for p in parts if p.ones is not None])
    return _Part(
        moments=merged,
        dropped=tuple(d for p in parts for d in p.dropped),
        rows=sum(p.rows for p in parts),
        ones=ones,
    )


def _tree(dask: Any, leaves: list[Any], merge: Any, split_every: int) -> Any:
    level = leaves
    while len(level) > 1:
        level = [
            dask.delayed(merge, pure=True)(*level[i : i + split_every])
            for i in range(0, len(level), split_every)
        ]
    return level[0]


def _merged_moments(
    dask: Any,
    leaves: list[Any],
    split_every: int,
    scheduler: Any,
    places: Mapping[Any, str],
    threads: int,
) -> _Part:
    """The first pass of a fit: the leaves' moments merged by a tree, computed under the BLAS
    thread limit of the fit."""
    with blas_limit(threads):
        part: _Part = _compute(
            dask, _tree(dask, leaves, _merge_parts, split_every), scheduler, places, "the fit"
        )
    return part


def _cluster_failure(exc: BaseException) -> bool:
    """Whether ``exc`` is the scheduler's own failure (a lost worker, a cancelled task).

    Errors raised by code inside a task (lincomb's, the user's, pandas'...) are not: the
    scheduler re-raises them on the client with their own type, and so do we.
    """
    if isinstance(exc, LincombError):
        return False
    if isinstance(exc, (asyncio.CancelledError, concurrent.futures.CancelledError)):
        return True
    return type(exc).__module__.split(".")[0] == "distributed"


def _compute(dask: Any, graph: Any, scheduler: Any, places: Mapping[Any, str], stage: str) -> Any:
    """``dask.compute`` of one graph; a failure of the cluster's own becomes a lincomb error.

    ``places`` maps task keys to what they read (``"partition 3"``); the key of a task the
    scheduler gave up on is looked up there, else the error names ``stage``.  Nothing computed
    before the failure is returned: the caller gets the whole result or an error.
    """
    try:
        (out,) = dask.compute(graph, scheduler=scheduler)
    except Exception as exc:
        if not _cluster_failure(exc):
            raise
        place = _place_of(graph, getattr(exc, "task", None), places)
        raise ClusterTaskError(
            f"{place or stage}: the cluster failed to run its task ({type(exc).__name__}:"
            f" {exc}), so no fit was made. A worker that dies on every attempt often runs out"
            " of memory or crashes in the code that reads the data: see the workers' logs, then"
            " fit again."
        ) from exc
    return out


def _place_of(graph: Any, task: Any, places: Mapping[Any, str]) -> str | None:
    """The partitions (blocks) whose results need ``task``: found by following its dependents.

    Runs only after a failure, so walking the whole graph once costs nothing in a fit.
    """
    if task is None or not places:
        return None
    try:
        from dask.core import get_deps

        _, dependents = get_deps(dict(graph.__dask_graph__()))
        found: set[str] = set()
        todo, seen = [task], {task}
        while todo:
            key = todo.pop()
            if key in places:
                found.add(places[key])
                continue
            for nxt in dependents.get(key, ()):
                if nxt not in seen:
                    seen.add(nxt)
                    todo.append(nxt)
    except Exception:  # a graph we cannot read: name the stage instead
        return None
    if not found:
        return None
    if len(found) > 1 and len(found) == len(set(places.values())):
        word = next(iter(found)).split()[0]
        return f"a task every {word} needs"
    return ", ".join(sorted(found, key=lambda s: (len(s), s)))


def _places(tasks: Sequence[Sequence[Any]], word: str) -> dict[Any, str]:
    """Task keys of the ``k``-th partition's (or block's) tasks mapped to ``'{word} k'``."""
    out: dict[Any, str] = {}
    for k, group in enumerate(tasks):
        for t in group:
            if t is not None:
                out[t.key] = f"{word} {k}"
    return out


def _check_split(split_every: int) -> None:
    if (
        isinstance(split_every, bool)
        or not isinstance(split_every, (int, np.integer))
        or split_every < 2
    ):
        raise InputError(f"split_every must be a whole number >= 2, got {split_every!r}.")


# -- DataFrames --------------------------------------------------------------------------------


def _frame_part(frame: pd.DataFrame, recipe: FrameRows, k: int, threads: _Spec) -> _Part:
    where = f"partition {k}"
    with _Limited(threads):
        enc = recipe.encode(frame, where)
        m = None
        if enc.x.shape[0]:
            m = core.moments_from_arrays(enc.x, enc.response, enc.weights, recipe.encoder.intercept)
    return _Part(m, (enc.dropped,) if len(enc.dropped) else (), enc.rows_read)


def _part_values(
    frame: pd.DataFrame, used: tuple[str, ...], todo: tuple[str, ...]
) -> tuple[np.ndarray, ...]:
    """The distinct values of each column in ``todo`` over the rows complete in ``used``."""
    clean = frame[list(used)].dropna()
    return tuple(np.asarray(pd.unique(clean[v]), dtype=object) for v in todo)


def _merge_values(*parts: tuple[np.ndarray, ...]) -> tuple[np.ndarray, ...]:
    return tuple(
        np.asarray(pd.unique(np.concatenate(cols)), dtype=object)
        for cols in zip(*parts, strict=True)
    )


def _levels_of(
    data: Any,
    formula: str,
    weights: str | None,
    declared: Mapping[str, Sequence[Any]],
    dask: Any,
    scheduler: Any,
) -> dict[str, list[Any]]:
    from dask.dataframe.utils import make_meta

    meta = make_meta(data)
    cats = FormulaEncoder.categorical_variables(formula, meta, declared)
    out = {k: list(v) for k, v in declared.items()}
    todo = []
    for v in cats:
        if v in out:
            continue
        dtype = meta[v].dtype
        if isinstance(dtype, pd.CategoricalDtype) and data[v].cat.known:
            out[v] = list(dtype.categories)
        else:
            todo.append(v)
    if todo:
        used = FormulaEncoder.columns_read(formula, meta) + ([weights] if weights else [])
        # A reduction of per-partition value sets, not drop_duplicates: with a distributed
        # client as the default, Dask plans that as a P2P shuffle, which is heavy for a few
        # levels and fails when the caller then picks a local scheduler.
        parts = data.to_delayed()
        leaves = [
            dask.delayed(_part_values, pure=True)(part, tuple(used), tuple(todo)) for part in parts
        ]
        found = _compute(
            dask,
            _tree(dask, leaves, _merge_values, DEFAULT_SPLIT_EVERY),
            scheduler,
            _places([(part, leaf) for part, leaf in zip(parts, leaves, strict=True)], "partition"),
            "the pass that finds the levels of " + ", ".join(map(repr, todo)),
        )
        for v, values in zip(todo, found, strict=True):
            cats_sorted = pd.Series(np.asarray(values, dtype=object)).astype("category")
            out[v] = list(cats_sorted.cat.categories)
    return out


def fit_dask(
    formula: str,
    data: Any,
    *,
    weights: str | None = None,
    levels: Mapping[str, Sequence[Any]] | None = None,
    missing: str = "skip",
    rank_tol: float = core.RANK_TOL,
    split_every: int = DEFAULT_SPLIT_EVERY,
    scheduler: Any = None,
) -> LinearFit:
    """Fit a formula to a Dask DataFrame with a tree reduction of per-partition moments.

    Parameters
    ----------
    formula : str
        Two-sided Wilkinson formula, as for :func:`~lincomb.fit`.
    data : dask.dataframe.DataFrame
        Not modified.
    weights : str, optional
        Name of a column of positive weights (WLS).
    levels : mapping, optional
        ``{column: [levels...]}``: complete, ordered levels of categorical variables.  Others
        come from a known categorical dtype or are computed in one extra pass (see the module
        notes).
    missing : {'skip', 'refuse'}, default 'skip'
        Rows with missing values in the formula's variables or the weights are dropped (and
        counted), or raise :class:`~lincomb.errors.MissingValueError`.
    rank_tol : float, default 1e-10
    split_every : int, default 8
        Partition summaries merged per reduction task.
    scheduler : optional
        Passed to ``dask.compute`` (``"threads"``, ``"processes"``, ``"sync"``, a distributed
        client...); default Dask's.

    Returns
    -------
    LinearFit
        Equal to rounding to ``lc.fit(formula, data.compute())``; it keeps no rows (see
        :func:`covariance_pass` for robust covariances).

    Examples
    --------
    >>> import dask.dataframe as dd, lincomb as lc
    >>> sites = lc.datasets.service_sites()
    >>> f = fit_dask("wait_min ~ staffing + protocol", dd.from_pandas(sites, npartitions=4),
    ...              scheduler="sync")
    >>> g = lc.fit("wait_min ~ staffing + protocol", sites)
    >>> bool(abs(f.wald(lc.coef("staffing") == 0).stat
    ...          - g.wald(lc.coef("staffing") == 0).stat) < 1e-8 * 170)
    True
    """
    dask = _require_dask()
    import dask.dataframe as dd

    require_response(formula)
    _check_options(weights, missing)
    _check_split(split_every)
    threads = worker_threads()
    if isinstance(data, pd.DataFrame):
        raise InputError("data is a pandas DataFrame: use lc.fit for data in memory.")
    if not isinstance(data, dd.DataFrame):
        raise InputError(f"data must be a Dask DataFrame, got {type(data).__name__}.")
    from dask.dataframe.utils import make_meta

    meta = make_meta(data)  # the empty frame of the right columns and dtypes
    FormulaEncoder.check_response(formula, meta)  # before the pass that finds levels
    all_levels = _levels_of(data, formula, weights, dict(levels or {}), dask, scheduler)
    encoder = FormulaEncoder.learn(
        formula, meta, levels=all_levels, weights=weights, where="the data's metadata"
    )[0]
    encoder.check_stateless()
    recipe = FrameRows(encoder, weights, missing)
    rec_d = dask.delayed(recipe, pure=True)
    parts = data.to_delayed()
    leaves = [
        dask.delayed(_frame_part, pure=True)(part, rec_d, k, (threads, os.getpid()))
        for k, part in enumerate(parts)
    ]
    places = _places(list(zip(parts, leaves, strict=True)), "partition")
    total = _merged_moments(dask, leaves, split_every, scheduler, places, threads)
    if total.moments is None:
        raise InputError(
            f"no rows to fit: the {data.npartitions} partitions held {total.rows} rows, all with"
            " missing values."
        )
    dropped = (
        pd.Index([]) if not total.dropped else total.dropped[0].append(list(total.dropped[1:]))
    )
    design = Design(
        index=encoder.index,
        intercept=encoder.intercept,
        response=encoder.response,
        dropped=dropped,
        weighted=weights is not None,
        encoder=encoder,
        formula=formula,
        origin=f"{data.npartitions} Dask partitions",
        hint=_HINT,
        second_pass=recipe,
    )
    return fit_from_moments(design, total.moments, rank_tol)


# -- arrays ------------------------------------------------------------------------------------


class _ArraySpec:
    def __init__(self, names: tuple[str, ...], intercept: int | None) -> None:
        self.names = names
        self.intercept = intercept


def _array_moments(
    x: np.ndarray,
    y: np.ndarray,
    w: np.ndarray | None,
    spec: _ArraySpec,
    k: int,
    threads: _Spec,
) -> _Part:
    try:
        d = design_from_arrays(
            x, np.reshape(y, -1), names=spec.names, weights=None if w is None else np.reshape(w, -1)
        )
    except InputError as exc:
        raise type(exc)(f"block {k}: {exc}") from None
    ones = np.all(d.x == 1.0, axis=0) if d.x.shape[0] else np.ones(d.x.shape[1], dtype=bool)
    j = spec.intercept
    if j is not None and not ones[j]:
        return _Part(None, (), d.x.shape[0], ones)  # the intercept guess fails: redo (see below)
    with _Limited(threads):
        m = core.moments_from_arrays(d.x, d.y, d.weights, j) if d.x.shape[0] else None
    return _Part(m, (), d.x.shape[0], ones)


def _first_ones(x0: np.ndarray) -> int | None:
    x0 = np.asarray(x0, dtype=np.float64)
    if x0.shape[0] == 0:
        return None
    hits = np.flatnonzero(np.all(x0 == 1.0, axis=0))
    return int(hits[0]) if hits.size else None


def _blocks(x: Any, y: Any, w: Any) -> tuple[list[Any], list[Any], list[Any] | None, int]:
    import dask.array as da

    for name, a in (("x", x), ("y", y), ("weights", w)):
        if a is None:
            continue
        if not isinstance(a, da.Array):
            raise InputError(
                f"{name} must be a Dask array, got {type(a).__name__}; use lc.fit_arrays for"
                " arrays in memory."
            )
    if x.ndim != 2:
        raise InputError(f"x must be 2-dimensional, got {x.ndim} dimensions.")
    if any(np.isnan(c) for c in x.chunks[0]):
        raise InputError(
            "x has unknown chunk sizes; call x.compute_chunk_sizes() (or build it with known"
            " chunks) first."
        )
    n, p = x.shape
    for name, a in (("y", y), ("weights", w)):
        if a is None:
            continue
        if a.ndim == 2 and a.shape[1] == 1:
            a = a[:, 0]
        if a.ndim != 1 or a.shape[0] != n:
            raise InputError(f"{name} must have shape ({n},), got {a.shape}.")
    x = x.rechunk({1: -1})
    yb = y.reshape(-1).rechunk((x.chunks[0],))
    xs = list(x.to_delayed()[:, 0])
    ys = list(yb.to_delayed())
    ws = None
    if w is not None:
        ws = list(w.reshape(-1).rechunk((x.chunks[0],)).to_delayed())
    return xs, ys, ws, p


def fit_dask_arrays(
    x: Any,
    y: Any,
    *,
    names: Sequence[str] | None = None,
    weights: Any = None,
    rank_tol: float = core.RANK_TOL,
    split_every: int = DEFAULT_SPLIT_EVERY,
    scheduler: Any = None,
) -> LinearFit:
    """Fit ``y`` on ``X`` given as Dask arrays, with a tree reduction of per-block moments.

    Parameters
    ----------
    x : dask.array.Array, shape (n, p)
        Design (chunked by rows; columns are gathered into one chunk).  Must be finite.
    y : dask.array.Array, shape (n,)
    names : sequence of str, optional
    weights : dask.array.Array, shape (n,), optional
    rank_tol, split_every, scheduler
        As for :func:`fit_dask`.

    Returns
    -------
    LinearFit
        Equal to rounding to ``lc.fit_arrays(x.compute(), y.compute())``.  As there, a column
        of ones is the intercept: it is guessed from the first block and confirmed by every
        block (if a later block disproves it, the moments are computed again without it).

    Examples
    --------
    >>> import numpy as np, dask.array as da, lincomb as lc
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(600), rng.normal(size=(600, 2))]); y = rng.normal(size=600)
    >>> f = fit_dask_arrays(da.from_array(x, chunks=(128, 3)), da.from_array(y, chunks=128),
    ...                     scheduler="sync")
    >>> bool(np.allclose(f.coefficients, lc.fit_arrays(x, y).coefficients, rtol=1e-10))
    True
    """
    dask = _require_dask()
    _check_split(split_every)
    threads = worker_threads()
    xs, ys, ws, p = _blocks(x, y, weights)
    if names is None:
        names = [f"x{j}" for j in range(p)]
    names_t = tuple(str(s) for s in names)
    if len(names_t) != p or len(set(names_t)) != p:
        raise InputError(f"names must be {p} unique strings, got {list(names_t)}.")
    places = _places(
        [
            (xk, yk, None if ws is None else ws[k])
            for k, (xk, yk) in enumerate(zip(xs, ys, strict=True))
        ],
        "block",
    )
    guess = _compute(
        dask, dask.delayed(_first_ones)(xs[0]), scheduler, places, "the first block's look"
    )

    def run(intercept: int | None) -> _Part:
        spec_d = dask.delayed(_ArraySpec(names_t, intercept), pure=True)
        leaves = [
            dask.delayed(_array_moments, pure=True)(
                xk, yk, None if ws is None else ws[k], spec_d, k, (threads, os.getpid())
            )
            for k, (xk, yk) in enumerate(zip(xs, ys, strict=True))
        ]
        here = places | _places([[leaf] for leaf in leaves], "block")
        return _merged_moments(dask, leaves, split_every, scheduler, here, threads)

    total = run(guess)
    true_ones = np.flatnonzero(total.ones) if total.ones is not None else np.zeros(0)
    truth = int(true_ones[0]) if true_ones.size else None
    if truth != guess:  # rare: a column of ones in the first block only
        total = run(truth)
    if total.moments is None:
        raise InputError("no rows to fit: the arrays are empty.")
    design = Design(
        index=CoefficientIndex.of_columns(names_t),
        intercept=truth,
        response="y",
        dropped=pd.Index([]),
        weighted=weights is not None,
        origin=f"{len(xs)} Dask array blocks",
        hint=_HINT,
        second_pass=_ArraySpec(names_t, truth),
    )
    return fit_from_moments(design, total.moments, rank_tol)


# -- second pass -------------------------------------------------------------------------------


def _frame_rows(frame: pd.DataFrame, recipe: FrameRows, rp: Any, k: int, threads: _Spec) -> Any:
    where = f"partition {k}"
    with _Limited(threads):
        enc = recipe.encode(frame, where, keep_frame=True)
        if not enc.x.shape[0]:
            return None
        return rp.block(enc.x, enc.response, enc.weights, enc.frame, where)


def _array_rows(
    x: np.ndarray,
    y: np.ndarray,
    w: np.ndarray | None,
    rp: Any,
    k: int,
    threads: _Spec,
) -> Any:
    with _Limited(threads):
        x = np.asarray(x, dtype=np.float64)
        if not x.shape[0]:
            return None
        return rp.block(
            x,
            np.reshape(np.asarray(y, dtype=np.float64), -1),
            None if w is None else np.reshape(np.asarray(w, dtype=np.float64), -1),
            None,
            f"block {k}",
        )


def _merge_rows(rp: Any, *parts: Any) -> Any:
    live = [p for p in parts if p is not None]
    if not live:
        return None
    acc = live[0]
    for p in live[1:]:
        acc = rp.merge(acc, p)
    return acc


def covariance_pass(
    fit: LinearFit,
    data: Any,
    covariance: object,
    *,
    split_every: int = DEFAULT_SPLIT_EVERY,
    scheduler: Any = None,
) -> CovarianceEstimate:
    """Evaluate a row-based covariance estimator on a Dask fit with a second distributed pass.

    Parameters
    ----------
    fit : LinearFit
        Made by :func:`fit_dask` or :func:`fit_dask_arrays`.
    data : dask.dataframe.DataFrame or tuple of dask arrays
        The same data again (``(x, y)`` or ``(x, y, weights)`` for an array fit).
    covariance : str or estimator
        ``"HC0"`` ... ``"HC4"``, or :func:`~lincomb.clustered` with column name(s) of ``data``.
    split_every, scheduler
        As for :func:`fit_dask`.

    Returns
    -------
    lincomb.covariance.CovarianceEstimate
        Give it as ``covariance=`` to the fit's tests, or attach it with
        :meth:`~lincomb.fit.LinearFit.with_covariance`.

    Examples
    --------
    >>> import dask.dataframe as dd, lincomb as lc
    >>> sites = dd.from_pandas(lc.datasets.service_sites(), npartitions=3)
    >>> f = fit_dask("wait_min ~ staffing", sites, scheduler="sync")
    >>> est = covariance_pass(f, sites, "HC3", scheduler="sync")
    >>> f.wald(lc.coef("staffing") == 0, covariance=est).covariance
    'HC3'
    """
    dask = _require_dask()
    from lincomb._covariance.second_pass import RowPass

    _check_split(split_every)
    threads = worker_threads()
    encoder = fit.design.second_pass
    rp = RowPass(fit, covariance)
    rp_d = dask.delayed(rp, pure=True)
    if isinstance(encoder, FrameRows):
        import dask.dataframe as dd

        if not isinstance(data, dd.DataFrame):
            raise InputError("this fit came from a Dask DataFrame: pass that DataFrame again.")
        enc_d = dask.delayed(encoder, pure=True)
        parts = data.to_delayed()
        leaves = [
            dask.delayed(_frame_rows, pure=True)(part, enc_d, rp_d, k, (threads, os.getpid()))
            for k, part in enumerate(parts)
        ]
        places = _places(list(zip(parts, leaves, strict=True)), "partition")
    elif isinstance(encoder, _ArraySpec):
        if not isinstance(data, tuple) or len(data) not in (2, 3):
            raise InputError("this fit came from Dask arrays: pass (x, y) or (x, y, weights).")
        xs, ys, ws, p = _blocks(data[0], data[1], data[2] if len(data) == 3 else None)
        if p != len(fit.names):
            raise IncompatibleFitError(f"x has {p} columns but the fit has {len(fit.names)}.")
        leaves = [
            dask.delayed(_array_rows, pure=True)(
                xk, yk, None if ws is None else ws[k], rp_d, k, (threads, os.getpid())
            )
            for k, (xk, yk) in enumerate(zip(xs, ys, strict=True))
        ]
        places = _places(
            [
                (xk, yk, None if ws is None else ws[k], leaf)
                for k, (xk, yk, leaf) in enumerate(zip(xs, ys, leaves, strict=True))
            ],
            "block",
        )
    else:
        raise InputError(
            "covariance_pass needs a fit made by fit_dask or fit_dask_arrays; for an in-memory"
            " fit pass covariance= to its tests directly."
        )

    merge = functools.partial(_merge_rows, rp)  # pickles by reference, unlike a closure
    with blas_limit(threads):
        total = _compute(
            dask, _tree(dask, leaves, merge, split_every), scheduler, places, "the second pass"
        )
    return rp.finish(total)
