"""Estimates remembered per fit: a row-based estimator visits a fit's rows once, whatever the
number of tests, intervals and tables that use it.

A heteroskedasticity-consistent, cluster-robust, serial or common-shocks estimate costs a pass
over every row of the fit; the estimate itself is a ``k × k`` factor.  :func:`evaluate_once`
keeps each estimate beside the fit's :class:`~lincomb._model.design.Design` (weakly: the entry
goes when the design does, and nothing here keeps a fit alive), and gives it back when the same
estimator is asked for on the same fit again.  The fit object is not touched.

"The same estimator" is decided by value, never by identity alone:

* it is of the same type and its options (kind, small-sample factor, df, adjustment, lag,
  ...: every field but those its ``ROW_FIELDS`` name) are equal;
* each per-row source (cluster labels, time order, units) is the same column name (the fit's
  data are its own), or an array or Series equal, element by element and in dtype, index and
  name, to a copy taken when the estimate was made.  An array changed in place after an
  estimate is therefore seen as a new estimator, never given a stale answer.  Comparing costs
  one pass over the labels (measured at 100,000 rows: 0.08 ms for integer labels, 3 ms for
  string labels in an object array; the pass over the rows it saves took 10-60 ms); a column
  name or :meth:`~lincomb.LinearFit.with_covariance` costs nothing per test.

The few-clusters warning an estimate drew is drawn again each time the estimate is reused, so a
call warns exactly as it would without the cache.  Classical and supplied (:func:`~lincomb.given`)
covariances cost nothing that grows with ``n`` and are not kept.  At most
:data:`KEPT_PER_FIT` estimates are kept per fit (the oldest goes first).
"""

from __future__ import annotations

import numbers
import threading
import weakref
from dataclasses import dataclass, fields
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from lincomb._covariance.estimate import CovarianceEstimate
from lincomb._covariance.examples import LINES_FIT
from lincomb._covariance.few_clusters import recorded_warnings, warn_few_clusters
from lincomb._covariance.specs import Estimator
from lincomb._docstrings import fill_doc

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["KEPT_PER_FIT", "evaluate_once", "forget"]

#: Estimates kept per fit (per design object); the oldest is dropped first.
KEPT_PER_FIT: int = 8

#: The set-up of this module's examples: a fit and its HC3 estimate, asked for once.
_HC3_ONCE = f"""\
{LINES_FIT}
>>> from lincomb._covariance.specs import as_estimator
>>> first = evaluate_once(f, as_estimator("HC3"))"""
_once_doc = fill_doc(hc3_once=_HC3_ONCE)


@dataclass(frozen=True)
class _Kept:
    """One remembered estimate: the estimator's options, copies of its per-row sources, the
    estimate and the arguments of the few-clusters warnings it drew."""

    options: tuple[Any, ...]
    sources: tuple[Any, ...]
    estimate: CovarianceEstimate
    warnings: tuple[tuple[Any, ...], ...]


class _Entry:
    """The estimates of one design (held weakly)."""

    __slots__ = ("design", "kept", "finalizer")

    def __init__(self, design: object, key: int) -> None:
        self.design = weakref.ref(design)
        self.kept: list[_Kept] = []
        self.finalizer = weakref.finalize(design, _drop, key)


_ENTRIES: dict[int, _Entry] = {}
_LOCK = threading.RLock()  # reentrant: a collected design may drop its entry while it is held


def _drop(key: int) -> None:
    with _LOCK:
        _ENTRIES.pop(key, None)


@_once_doc
def forget(fit: LinearFit | None = None) -> None:
    """Drop the remembered estimates of ``fit`` (of every fit when None); benchmarks use it
    to time the pass over the rows itself.

    Examples
    --------
    %(hc3_once)s
    >>> forget(f)
    >>> evaluate_once(f, as_estimator("HC3")) is first
    False
    """
    with _LOCK:
        if fit is None:
            entries = list(_ENTRIES.values())
            _ENTRIES.clear()
        else:
            entry = _ENTRIES.get(id(fit.design))
            entries = [] if entry is None or entry.design() is not fit.design else [entry]
            if entries:
                del _ENTRIES[id(fit.design)]
    for entry in entries:
        entry.finalizer.detach()


def _signature(est: Estimator) -> tuple[tuple[Any, ...], tuple[Any, ...]] | None:
    """The options and per-row sources of a row-based estimator; None for one not kept.

    The options are the estimator's type and the values of all its fields but its
    :attr:`~lincomb._covariance.specs.Estimator.ROW_FIELDS`, so a field added to an estimator
    is part of the key by itself.  An option that is not a plain value (a number, string or
    None: say an array a new field holds without being declared a row field) could change in
    place unseen, so such an estimator is not kept.
    """
    row_fields = est.ROW_FIELDS
    if row_fields is None:
        return None
    every = fields(est)  # type: ignore[arg-type]  # the specifications are dataclasses
    options = tuple(getattr(est, f.name) for f in every if f.name not in row_fields)
    if not all(o is None or isinstance(o, (str, numbers.Number)) for o in options):
        return None
    return (type(est), *options), est.row_sources()


#: The snapshot of a source that cannot be compared by value (its estimate is not kept).
_UNKNOWN = object()


def _snapshot(source: Any) -> Any:
    """A copy of a per-row source that later calls are compared with (None: not comparable,
    the estimate is not kept)."""
    if source is None or isinstance(source, str):
        return source
    if isinstance(source, pd.Series):
        return source.copy(deep=True)
    if isinstance(source, (np.ndarray, list, tuple)):
        return np.array(source, copy=True)
    return _UNKNOWN


def _same(kept: Any, source: Any) -> bool:
    """Whether ``source`` is, in value, the source ``kept`` was copied from."""
    try:
        if kept is None or isinstance(kept, str):
            return isinstance(source, type(kept)) and source == kept
        if isinstance(kept, pd.Series):
            return (
                isinstance(source, pd.Series)
                and source.dtype == kept.dtype
                and str(source.name) == str(kept.name)
                and (source.name is None) == (kept.name is None)
                and source.index.equals(kept.index)
                and bool(source.equals(kept))
            )
        if isinstance(kept, np.ndarray) and isinstance(source, (np.ndarray, list, tuple)):
            arr = np.asarray(source)
            return (
                arr.dtype == kept.dtype
                and arr.shape == kept.shape
                and bool(np.array_equal(arr, kept))
            )
    except (TypeError, ValueError):  # pragma: no cover - labels that do not compare
        return False
    return False


def _find(fit: LinearFit, options: tuple[Any, ...], sources: tuple[Any, ...]) -> _Kept | None:
    design, sol = fit.design, fit.solution
    with _LOCK:
        entry = _ENTRIES.get(id(design))
        if entry is None or entry.design() is not design:
            return None
        candidates = list(entry.kept)
    for item in candidates:
        if (
            item.estimate.solution is sol
            and item.options == options
            and len(item.sources) == len(sources)
            and all(_same(k, s) for k, s in zip(item.sources, sources, strict=True))
        ):
            return item
    return None


def _keep(fit: LinearFit, item: _Kept) -> None:
    design = fit.design
    key = id(design)
    with _LOCK:
        entry = _ENTRIES.get(key)
        if entry is None or entry.design() is not design:
            entry = _Entry(design, key)
            _ENTRIES[key] = entry
        entry.kept.append(item)
        del entry.kept[:-KEPT_PER_FIT]


@_once_doc
def evaluate_once(fit: LinearFit, estimator: Estimator) -> CovarianceEstimate:
    """``estimator.evaluate(fit)``, computed once per fit and estimator (see the module).

    Examples
    --------
    %(hc3_once)s
    >>> evaluate_once(f, as_estimator("HC3")) is first
    True
    """
    signature = _signature(estimator)
    if signature is None:
        return estimator.evaluate(fit)
    options, sources = signature
    item = _find(fit, options, sources)
    if item is not None:
        for args in item.warnings:
            warn_few_clusters(*args)
        return item.estimate
    snaps = tuple(_snapshot(s) for s in sources)
    with recorded_warnings() as drawn:
        estimate = estimator.evaluate(fit)
    if all(s is not _UNKNOWN for s in snaps):
        _keep(fit, _Kept(options, snaps, estimate, tuple(drawn)))
    return estimate
