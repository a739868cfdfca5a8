"""Fits kept as summaries: combining fits across sites, and fits without their rows.

A :class:`~lincomb.fit.LinearFit` is its sufficient statistics (:class:`lincomb._core.Moments`):
row counts, weighted column means and the triangular factor of the centred ``sqrt(w)·[X y]``.
Moments of disjoint row sets merge exactly (:func:`lincomb._core.merge_moments`: a QR of the
stacked factors plus one between-block mean-correction row, never normal equations).  So fits of
the same formula on separate data (sites, months, shards) combine into the fit of the pooled
rows without any row being shared:

>>> import lincomb as lc
>>> data = lc.datasets.fill_lines()
>>> one, two = data.iloc[:150], data.iloc[150:]
>>> pooled = lc.combine([lc.fit("fill_g ~ line + temperature_c", one),
...                      lc.fit("fill_g ~ line + temperature_c", two)])
>>> whole = lc.fit("fill_g ~ line + temperature_c", data)
>>> bool(abs(pooled.wald(lc.term("line") == 0).stat
...          - whole.wald(lc.term("line") == 0).stat) < 1e-8)
True

What works without the rows
---------------------------
Everything computed from the moments: coefficients, classical covariance and standard errors,
every classical Wald F and t test, :meth:`~lincomb.fit.LinearFit.restrict`, intervals, new-data
encoding.  Covariances that need residuals row by row (HC0-HC4, cluster-robust, serial) cannot
be computed from moments: a fit kept as a summary raises
:class:`~lincomb.errors.RowsUnavailableError` for them.  Chunked and Dask fits can compute HC
and cluster-robust covariances with a second pass over the data
(:func:`lincomb.chunked.covariance_pass`, :func:`lincomb.distributed.covariance_pass`).
"""

from __future__ import annotations

from collections.abc import Iterable

import pandas as pd

from lincomb import _core as core
from lincomb._fit.linear import LinearFit, fit_from_moments
from lincomb._model.design import Design
from lincomb._model.encoder import FormulaEncoder
from lincomb.errors import IncompatibleFitError, InputError

__all__ = ["combine", "without_rows"]


_DEFAULT_HINT = (
    "Fit the pooled rows in memory (lc.fit), or for chunked and Dask fits compute it with a"
    " second pass: lincomb.chunked.covariance_pass or lincomb.distributed.covariance_pass."
)


def without_rows(fit: LinearFit) -> LinearFit:
    """The same fit keeping only its summary statistics: safe to share with another site.

    The result holds no data row, response value, weight or row label (dropped-row labels are
    replaced by their count's worth of positions), so it can be pickled and sent to whoever
    combines the fits.  Classical tests give the same numbers as on ``fit``.

    Examples
    --------
    >>> import pickle, lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> shared = pickle.loads(pickle.dumps(without_rows(f)))
    >>> shared.wald(lc.term("line") == 0).stat == f.wald(lc.term("line") == 0).stat
    True
    """
    if not isinstance(fit, LinearFit):
        raise InputError(f"without_rows needs a LinearFit, got {type(fit).__name__}.")
    d = fit.design
    positions = pd.RangeIndex(len(d.dropped))
    if d.has_rows:
        summary = d.without_rows(
            "a fit shared without its rows",
            "Robust covariances must be computed where the rows are.",
            dropped=positions,
        )
    else:
        summary = d.without_rows(d.origin, d.hint, dropped=positions)
    return fit_from_moments(summary, fit.moments, fit.rank_tol)


def _encoding(encoder: FormulaEncoder | None) -> dict[str, tuple[tuple[object, ...], str]] | None:
    """Per categorical factor of the right-hand side: its levels and contrast coding."""
    return None if encoder is None else encoder.codings()


def _check_same(first: LinearFit, other: LinearFit, k: int) -> None:
    """Raise IncompatibleFitError unless ``other`` (fit number ``k``) matches ``first``."""
    a, b = first.design, other.design
    if first.names != other.names:
        mine, theirs = list(first.names), list(other.names)
        diff = [s for s in mine if s not in theirs] + [s for s in theirs if s not in mine]
        where = (
            f"columns only in one of them: {diff}"
            if diff
            else f"same columns in another order: {theirs}"
        )
        raise IncompatibleFitError(
            f"fit {k} has other coefficients than fit 0 ({where}). Combine fits of the same"
            " formula with the same factor levels: declare the levels (pd.Categorical with"
            " the full list of categories) at every site."
        )
    ea, eb = _encoding(a.encoder), _encoding(b.encoder)
    if (ea is None) != (eb is None):
        raise IncompatibleFitError(
            f"fit {k} was built {'from arrays' if eb is None else 'from a formula'} but fit 0"
            f" {'from arrays' if ea is None else 'from a formula'}; combine fits built the same"
            " way so the encodings can be compared."
        )
    if first.response != other.response:
        raise IncompatibleFitError(
            f"fit {k} models response {other.response!r} but fit 0 models {first.response!r};"
            " only fits of the same response combine."
        )
    if first.weighted != other.weighted:
        which = "weighted" if other.weighted else "unweighted"
        raise IncompatibleFitError(
            f"fit {k} is {which} but fit 0 is not: combine weighted fits only with weighted"
            " fits whose weights mean the same thing (for example inverse variances in the same"
            " units)."
        )
    if a.intercept != b.intercept:
        raise IncompatibleFitError(
            f"fit {k} has its intercept at column {b.intercept} but fit 0 at {a.intercept};"
            " the designs differ."
        )
    if ea is not None and eb is not None and ea != eb:
        for name in sorted(set(ea) | set(eb)):
            if ea.get(name) != eb.get(name):
                raise IncompatibleFitError(
                    f"factor {name!r} is encoded differently in fit {k} ({eb.get(name)}) and fit"
                    f" 0 ({ea.get(name)}). Declare the same levels, in the same order, and the"
                    " same contrasts at every site."
                )
    if first.moments.p != other.moments.p:  # pragma: no cover - names already differ
        raise IncompatibleFitError(f"fit {k} has {other.moments.p} columns, fit 0 has another.")


def combine(fits: Iterable[LinearFit], *, rank_tol: float | None = None) -> LinearFit:
    """The fit of the pooled rows of several fits of the same model, from their summaries.

    Parameters
    ----------
    fits : iterable of LinearFit
        Fits of the same formula (or the same named array columns) on disjoint rows: in-memory,
        chunked, Dask, combined fits, or fits stripped by :func:`without_rows`.
    rank_tol : float, optional
        Rank tolerance of the pooled fit; default that of the first fit.

    Returns
    -------
    LinearFit
        Equal, to rounding, to the fit of the concatenated data.  It keeps no rows (see the
        module notes for what that allows); ``n_dropped`` adds up the inputs' and
        ``dropped_rows`` is a two-level index ``(fit number, row label)``.

    Raises
    ------
    IncompatibleFitError
        The fits differ in coefficient names or order, response, weighting (weighted with
        unweighted), intercept, or in the levels or contrasts of a factor.

    Notes
    -----
    Weights must mean the same thing at every site: the pooled fit is the weighted fit of all
    rows with the weights as given, so weights scaled differently per site (each normalized to
    mean one, say) give a different model than intended.  This cannot be checked from the
    summaries.  Each site's factor levels must be declared in full (a level absent at one site
    changes its column names); a level absent at one site but declared there is fine.

    Examples
    --------
    >>> import lincomb as lc
    >>> trial = lc.datasets.field_trial()
    >>> parts = [lc.fit("yield_t_ha ~ variety + rainfall_mm", g) for _, g in
    ...          trial.groupby(trial.index % 3)]
    >>> pooled = lc.combine(parts)
    >>> pooled.n_obs == lc.fit("yield_t_ha ~ variety + rainfall_mm", trial).n_obs
    True
    """
    fits = list(fits)
    if not fits:
        raise InputError("combine needs at least one fit.")
    for k, f in enumerate(fits):
        if not isinstance(f, LinearFit):
            raise InputError(f"item {k} is a {type(f).__name__}, not a LinearFit.")
    first = fits[0]
    for k, f in enumerate(fits[1:], start=1):
        _check_same(first, f, k)
    moments = core.merge_tree([f.moments for f in fits])
    d0 = first.design
    dropped_parts = [(k, lab) for k, f in enumerate(fits) for lab in f.design.dropped]
    dropped = (
        pd.MultiIndex.from_tuples(dropped_parts, names=["fit", "row"])
        if dropped_parts
        else pd.MultiIndex.from_arrays([[], []], names=["fit", "row"])
    )
    design = Design(
        index=d0.index,
        intercept=d0.intercept,
        response=d0.response,
        dropped=dropped,
        weighted=first.weighted,
        encoder=d0.encoder,
        formula=d0.formula,
        origin=f"{len(fits)} combined fits",
        hint="Robust covariances need the rows: compute them where the data are.",
    )
    tol = first.rank_tol if rank_tol is None else rank_tol
    return fit_from_moments(design, moments, tol)
