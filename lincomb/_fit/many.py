"""Many responses, one design: factorize once, test every response at once.

Screening studies fit one design to thousands of outcomes (assays, sensors, products).
:func:`fit_many` (formula) and :func:`fit_many_arrays` (arrays) factor the design once (QR with
its thin ``Q`` kept, :func:`lincomb._core.factor_design`) and project every response onto it
by matrix products, in blocks of columns so that the work memory is a small fraction of the
response matrix (:data:`BLOCK_BYTES` per block).  A restriction system is then tested on every
response with one triangular solve (:meth:`ManyFit.wald`); :meth:`ManyFit.screen` runs several
systems and returns one tidy frame with a row per response × test (or per response × test ×
row) and p-values adjusted across responses for the false discovery rate (Benjamini–Hochberg
by default, Benjamini–Yekutieli on request, or any method of
:func:`lincomb.multiplicity.adjust_pvalues`).

Each response's numbers equal those of its own :func:`~lincomb.fit` to rounding, and
:meth:`ManyFit.fit_of` gives that fit.

Missing values in the responses
-------------------------------
Handled exactly, per response: a response with missing values is fitted on the rows where it
is observed, as its own ``lc.fit`` would with ``missing="skip"``; it never shrinks or shifts
the design of the other responses.  Each response is fitted on its own rows from the one
factorization of all rows, vectorized over responses (:mod:`lincomb._core.observed`: from its
missing rows only, without refactoring the design), wherever that is certified exact: the
design has full rank with a margin, the response's rows keep at least a quarter of every
direction of the design, and every rank, redundancy and exact-fit decision is far from its
tolerance.  Any other response is refitted on its rows by a factorization of them (responses
sharing a pattern of missing values share it).  Each response reports its own ``n_obs`` and
``df_error``; the rank of a subset of rows can be lower (aliased columns), a restriction can
then be not estimable for that response: its test is NaN with status ``"not estimable"``.
``missing="refuse"`` refuses any missing response value instead.  Rows with missing values in
the *design* variables (or weights) are dropped for every response and counted in
``n_dropped``, as in a single fit.

Statuses
--------
``"ok"``; ``"too few rows"`` (no residual degrees of freedom left); ``"exact fit"`` (the
residual sum of squares is zero to working precision, e.g. a constant response: no error
variance, no test); ``"not estimable"`` (a test only: see above).  Tests of such responses are
NaN and take no part in the false discovery rate adjustment.

Only the classical covariance is offered here: a robust covariance needs each response's
residuals row by row (use :meth:`ManyFit.fit_of` for one response).
"""

from __future__ import annotations

import difflib
import functools
import html
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from lincomb import _core as core
from lincomb._builder.restriction import as_system
from lincomb._core.checks import check_level
from lincomb._core.observed import ObservedPart
from lincomb._fit.linear import ZERO_RSS_TOL, LinearFit, fit_from_design
from lincomb._fit.response_groups import (
    _Group,
    _ObservedGroup,
    design_fit,
    exact_groups,
    group_wald,
    solve_group,
)
from lincomb._fit.responses import (
    _array_source,
    _BlockFits,
    _fit_block,
    _FrameColumns,
    _projected,
    _refuse_bad_values,
    _Responses,
    _unique_names,
    response_index,
)
from lincomb._model.design import Design, DesignRows, design_from_arrays, design_from_formula
from lincomb._model.encoder import FormulaEncoder, refuse_non_numeric_responses
from lincomb._model.row_checks import require_columns, require_frame
from lincomb._results.many import (
    SCREEN_COLUMNS,
    SCREEN_ROW_COLUMNS,
    STATUSES,
    ManyWaldTest,
    from_codes,
)
from lincomb._results.many import fdr_adjust as _fdr
from lincomb._settings import blas_limit, worker_threads
from lincomb.errors import (
    DegenerateFitError,
    InputError,
    NotEstimableError,
)

__all__ = [
    "ManyFit",
    "ManyWaldTest",
    "fit_many",
    "fit_many_arrays",
    "SCREEN_COLUMNS",
    "SCREEN_ROW_COLUMNS",
    "BLOCK_BYTES",
]

#: Bytes of response values projected at a time (bounds the work memory of a fit; blocks stay
#: cache-sized).  A block holds at least :data:`MIN_BLOCK_COLUMNS` responses.
BLOCK_BYTES: int = 2**21
#: Fewest responses per block, so that very tall designs still use matrix products.
MIN_BLOCK_COLUMNS: int = 16
#: Responses per block when a float64 response matrix in memory is read by rows (stored row
#: by row, C order, with short pieces of its rows in a block of columns; or so tall that a
#: block of columns is far larger than BLOCK_BYTES): the projections copy rows in bounded
#: chunks (``core.CHUNK_BYTES``), each row read in one piece of up to 8 KiB.
ROW_MAJOR_COLUMNS: int = 1024
#: Blocks of columns of a matrix stored row by row whose pieces of each row are shorter than
#: this are read slowly (many short pieces): such a matrix is read in wide blocks instead.
ROW_PIECE_BYTES: int = 4096
#: Most threads projecting blocks by default (the work is bound by memory bandwidth).
MAX_WORKERS: int = 4
#: Fewest blocks per thread: with fewer, starting threads and handing blocks over cost more than
#: they save (measured on two busy cores: 4-5 blocks ran faster, in CPU and wall time, on one).
MIN_BLOCKS_PER_WORKER: int = 4

_OK, _FEW, _EXACT, _NOT_ESTIMABLE = range(4)


def _coefficients(sol: core.Solution, theta: NDArray[np.float64]) -> NDArray[np.float64]:
    beta = sol.from_working(theta)
    beta[sol.aliased] = np.nan
    return beta


@dataclass(frozen=True)
class _PerResponse:
    """The numbers of every response of a :class:`ManyFit`, as arrays (responses last)."""

    coef: NDArray[np.float64]  # (p, r), NaN where aliased
    n_obs: NDArray[np.int64]
    rank: NDArray[np.int64]
    rss: NDArray[np.float64]
    status: NDArray[np.int8]  # positions in STATUSES

    @property
    def df_error(self) -> NDArray[np.int64]:
        return self.n_obs - self.rank


@dataclass(frozen=True)
class ManyFit:
    """Least-squares fits of many responses on one design, kept as sufficient statistics.

    Attributes
    ----------
    names : tuple of str
        Coefficient names.
    responses : tuple of str
        Response names, in input order.
    coefficients : pandas.DataFrame
        Estimates, one column per response (index: coefficient names; NaN where aliased).
    n_obs : pandas.Series
        Rows used per response.
    df_error : pandas.Series
    rss : pandas.Series
    sigma : pandas.Series
    rank : pandas.Series
        Rank of the design on each response's rows.
    status : pandas.Series
        ``"ok"``, ``"too few rows"`` or ``"exact fit"`` (see the module notes).
    aliased : tuple of str
        Columns aliased on the design's full rows.
    n_dropped : int
        Design rows dropped for missing values in the design variables or weights.
    weighted : bool
    formula : str or None
        The right-hand side the design was built from.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> panel = lc.datasets.assay_panel()
    >>> assays = [c for c in panel.columns if c.startswith("g")]
    >>> mf = lc.fit_many("~ treatment + batch", panel, responses=assays)
    >>> len(mf.responses) == len(assays), mf.names[:2]
    (True, ('Intercept', 'treatment[T.low]'))
    """

    names: tuple[str, ...]
    responses: tuple[str, ...]
    aliased: tuple[str, ...]
    n_dropped: int
    weighted: bool
    formula: str | None
    # the per-response numbers as arrays; the pandas attributes are built from them when first
    # read (a fit tested right away never needs them)
    _per: _PerResponse = field(repr=False, compare=False)
    rank_tol: float = field(default=core.RANK_TOL, repr=False)
    _design: Design = field(repr=False, compare=False, default=None)  # type: ignore[assignment]
    _groups: tuple[_Group | _ObservedGroup, ...] = field(repr=False, compare=False, default=())
    _source: _Responses = field(repr=False, compare=False, default=None)  # type: ignore[assignment]
    _frame: pd.DataFrame | None = field(repr=False, compare=False, default=None)
    _positions: NDArray[np.intp] | None = field(repr=False, compare=False, default=None)
    _blas: int | None = field(repr=False, compare=False, default=1)

    # -- per-response attributes (pandas, built once when first read) ---------------------------
    @functools.cached_property
    def _response_index(self) -> pd.Index:
        return response_index(self.responses)

    def _series(self, values: NDArray[Any] | pd.Categorical[str], name: str) -> pd.Series:
        return pd.Series(values, index=self._response_index, name=name)

    @functools.cached_property
    def coefficients(self) -> pd.DataFrame:
        """Estimates, one column per response (index: coefficient names; NaN where aliased)."""
        return pd.DataFrame(self._per.coef, index=list(self.names), columns=self._response_index)

    @functools.cached_property
    def n_obs(self) -> pd.Series:
        """Rows used per response."""
        return self._series(self._per.n_obs, "n_obs")

    @functools.cached_property
    def df_error(self) -> pd.Series:
        """Error degrees of freedom per response."""
        return self._series(self._per.df_error, "df_error")

    @functools.cached_property
    def rss(self) -> pd.Series:
        """Residual sum of squares per response."""
        return self._series(self._per.rss, "rss")

    @functools.cached_property
    def sigma(self) -> pd.Series:
        """Residual standard deviation per response (NaN without error degrees of freedom)."""
        df = self._per.df_error
        with np.errstate(divide="ignore", invalid="ignore"):
            sigma = np.where(df > 0, np.sqrt(self._per.rss / np.where(df > 0, df, 1)), np.nan)
        return self._series(sigma, "sigma")

    @functools.cached_property
    def rank(self) -> pd.Series:
        """Rank of the design on each response's rows."""
        return self._series(self._per.rank, "rank")

    @functools.cached_property
    def status(self) -> pd.Series:
        """``"ok"``, ``"too few rows"`` or ``"exact fit"`` per response (categorical)."""
        return self._series(from_codes(self._per.status, STATUSES), "status")

    # -- single responses ----------------------------------------------------------------------
    def _position(self, response: str | int) -> int:
        if isinstance(response, (int, np.integer)) and not isinstance(response, bool):
            if not 0 <= int(response) < len(self.responses):
                raise InputError(
                    f"response position {response} is out of range (0..{len(self.responses) - 1})."
                )
            return int(response)
        try:
            return self.responses.index(str(response))
        except ValueError:
            close = difflib.get_close_matches(str(response), list(self.responses), n=4)
            hint = f" Did you mean one of: {close}?" if close else ""
            raise InputError(f"no response named {response!r}.{hint}") from None

    def fit_of(self, response: str | int) -> LinearFit:
        """The single :class:`~lincomb.fit.LinearFit` of one response (its own rows).

        Equal to ``lc.fit(f"{response} ~ ...", data)`` (or ``lc.fit_arrays``); robust
        covariances work on it.  The responses are read again from the object given to
        :func:`fit_many`, which is kept by reference, not copied: do not modify it meanwhile.

        Examples
        --------
        >>> import lincomb as lc
        >>> panel = lc.datasets.assay_panel()
        >>> mf = lc.fit_many("~ treatment + batch", panel, responses=["g0001", "g0002"])
        >>> one = mf.fit_of("g0002")
        >>> ref = lc.fit("g0002 ~ treatment + batch", panel)
        >>> bool(abs(one.rss - ref.rss) < 1e-9 * ref.rss), one.n_obs == ref.n_obs
        (True, True)
        """
        j = self._position(response)
        name = self.responses[j]
        d = self._design
        y_all = self._source.column(j)
        if self._positions is not None:
            y_all = y_all[self._positions]
        obs = ~np.isnan(y_all)
        rows = np.flatnonzero(obs)
        y = y_all[rows]
        w = None if d.weights is None else d.weights[rows]
        if d.encoder is None:
            names = list(self.names)
            return fit_from_design(
                design_from_arrays(d.x[rows], y, names=names, weights=w, response=name),
                self.rank_tol,
            )
        row_index = d.row_index[rows]
        source = None
        if self._frame is not None:
            source = self._frame.loc[row_index]
        design = replace(
            d,
            rows=DesignRows(d.x[rows], y, w, row_index, source),
            response=name,
            dropped=d.dropped.append(d.row_index[~obs]),
            formula=f"{name} ~ {self.formula}",
        )
        return fit_from_design(design, self.rank_tol)

    # -- tests ---------------------------------------------------------------------------------
    def wald(self, restrictions: object) -> ManyWaldTest:
        """Wald F test (and a t per row) of ``C·β = d`` on every response.

        Parameters
        ----------
        restrictions : Restriction, RestrictionSystem, or list of them
            As for :meth:`LinearFit.wald <lincomb.fit.LinearFit.wald>`.

        Returns
        -------
        ManyWaldTest

        Raises
        ------
        InconsistentRestrictionError, NotEstimableError, UnknownCoefficientError
            As for a single fit, judged on the design's full rows.

        Notes
        -----
        The restriction is resolved, checked and mapped once per group of responses sharing
        rows; ``V = R⁻ᵀ C_keptᵀ`` is shared by the group, so each response costs a product
        with its coefficients and one triangular solve
        (:func:`lincomb._core.wald_quadratic_forms`), vectorized over responses.

        Examples
        --------
        >>> import lincomb as lc
        >>> panel = lc.datasets.assay_panel()
        >>> mf = lc.fit_many("~ treatment + batch", panel, responses=["g0001", "g0002"])
        >>> res = mf.wald(lc.term("treatment") == 0)
        >>> ref = lc.fit("g0002 ~ treatment + batch", panel).wald(lc.term("treatment") == 0)
        >>> bool(abs(res.stat[1] - ref.stat) < 1e-9 * ref.stat)
        True
        """
        with blas_limit(self._blas):
            return self._wald(as_system(restrictions))

    def _wald(self, system: Any) -> ManyWaldTest:
        r = len(self.responses)
        labels: list[str] | None = None
        target = None
        redundant: dict[int, dict[int, float]] = {}
        df_test = 0
        est_all: NDArray[np.float64] | None = None
        se_all = t_all = None
        stat = np.full(r, np.nan)
        pval = np.full(r, np.nan)
        df_error = self._per.df_error.astype(np.float64)
        status = self._per.status.copy()  # marked below
        main = self._groups[0]
        main_prepared = None
        groups = list(self._groups)
        gi = -1
        while gi + 1 < len(groups):
            gi += 1
            g = groups[gi]
            if g.fit is None:
                continue
            if isinstance(g, _ObservedGroup):
                assert main_prepared is not None  # the first group is the design's own
                c, d, lab, cu, analysis = main_prepared
                if not g.decisions_hold(c, analysis):
                    # a redundancy decision too close to its tolerance: refit these exactly
                    groups.extend(self._exact(g.columns))
                    continue
            else:
                try:
                    c, d, lab, cu, analysis = g.fit.prepare(system)
                except NotEstimableError:
                    if gi == 0:
                        raise
                    status[g.columns] = np.where(
                        status[g.columns] == _OK, _NOT_ESTIMABLE, status[g.columns]
                    )
                    if labels is None:
                        c, d, lab = g.fit.resolve(system)
                        labels, target = lab, d
                    continue
                if gi == 0:
                    main_prepared = (c, d, lab, cu, analysis)
            if labels is None or gi == 0:
                labels, target = lab, d
                redundant = analysis.dependencies
                df_test = int(analysis.independent.size)
            if est_all is None:
                est_all, se_all, t_all = _unfilled(r, len(lab))
            cols = g.columns
            if cols.size == 0:  # the design's own group when every response has missing values
                continue
            ck = cu[:, g.fit.solution.kept]
            res = group_wald(g, ck, d, analysis.independent, status[cols] == _OK)
            est_all[cols] = res.estimate
            se_all[cols] = res.se  # type: ignore[index]
            t_all[cols] = res.ratio  # type: ignore[index]
            stat[cols] = res.stat
            pval[cols] = res.p
        if labels is None or est_all is None:
            # every group lacked rows or estimability: resolve on the design for the labels
            c, d, lab = (main.fit or _first_fit(self._groups)).resolve(system)
            labels, target = lab, d
            est_all, se_all, t_all = _unfilled(r, len(lab))
        assert target is not None and se_all is not None and t_all is not None
        return ManyWaldTest(
            responses=self.responses,
            labels=tuple(labels),
            estimate=est_all,
            target=np.asarray(target, dtype=np.float64).copy(),
            se=se_all,
            ratio=t_all,
            stat=stat,
            df_test=df_test,
            df_error=df_error,
            p=pval,
            status=np.asarray(STATUSES)[status],
            n_obs=self._per.n_obs.copy(),
            redundant=redundant,
            _response_index=self._response_index,
            _status_codes=status,
        )

    def _exact(self, columns: NDArray[np.intp]) -> list[_Group]:
        """Responses ``columns`` refitted exactly on their own rows (one factor per pattern)."""
        return exact_groups(
            self._design,
            self._source,
            self._positions,
            columns,
            self.rank_tol,
            BLOCK_BYTES,
            MIN_BLOCK_COLUMNS,
        )

    def screen(
        self,
        tests: Mapping[str, object] | object,
        *,
        fdr: str | None = "benjamini-hochberg",
        family: str = "test",
        rows: bool = False,
        level: float = 0.95,
    ) -> pd.DataFrame:
        """Run several restriction systems on every response: one tidy frame.

        Parameters
        ----------
        tests : mapping or restriction
            ``{name: restrictions}``; a single system is named by its algebra.
        fdr : str or None, default 'benjamini-hochberg'
            Adjustment across responses: ``"benjamini-hochberg"`` (``"bh"``),
            ``"benjamini-yekutieli"`` (``"by"``), any method of
            :func:`lincomb.multiplicity.adjust_pvalues`, or ``None``.
        family : {'test', 'all'}, default 'test'
            Adjust within each test (and each restriction row, with ``rows=True``) across
            responses, or over every p-value of the frame at once.
        rows : bool, default False
            One row per response × test (columns ``test`` + :data:`SCREEN_COLUMNS`) or per
            response × test × restriction row (``test`` + :data:`SCREEN_ROW_COLUMNS`).
        level : float, default 0.95
            Confidence level of the row intervals (``rows=True``).

        Returns
        -------
        pandas.DataFrame

        Examples
        --------
        >>> import lincomb as lc
        >>> panel = lc.datasets.assay_panel()
        >>> assays = [c for c in panel.columns if c.startswith("g")]
        >>> mf = lc.fit_many("~ treatment + batch", panel, responses=assays)
        >>> tests = {"treatment": lc.term("treatment") == 0, "batch": lc.term("batch") == 0}
        >>> tab = mf.screen(tests)
        >>> tab.shape[0] == 2 * len(assays), list(tab.columns[:3])
        (True, ['response', 'test', 'restrictions'])
        """
        if family not in ("test", "all"):
            raise InputError(f"family must be 'test' or 'all', got {family!r}.")
        check_level(level)
        if isinstance(tests, Mapping):
            items = [(str(k), v) for k, v in tests.items()]
        else:
            system = as_system(tests)
            items = [(system.text(), system)]
        if not items:
            raise InputError("screen needs at least one test.")
        frames = []
        for name, restr in items:
            res = self.wald(restr)
            fr = res.row_frame(level, fdr) if rows else res.test_frame(fdr)
            fr.insert(1, "test", name)
            frames.append(fr)
        out = pd.concat(frames, ignore_index=True)
        if family == "all":
            adj, label = _fdr(out["p"].to_numpy(dtype=np.float64), fdr)
            out["p_adjusted"] = adj
            out["adjustment"] = label
        return out

    # -- presentation --------------------------------------------------------------------------
    def _head(self) -> str:
        kind = "WLS" if self.weighted else "OLS"
        what = self.formula or f"{len(self.names)} columns"
        counts = self.status.value_counts()
        counts = counts[counts > 0]
        extra = ", ".join(f"{int(v)} {k}" for k, v in counts.items() if k != "ok")
        n = self.n_obs.to_numpy()
        return (
            f"ManyFit ({kind}): {len(self.responses)} responses on {what}\n"
            f"n = {int(n.min())}..{int(n.max())} per response; design rank {self._rank_text()} of"
            f" {len(self.names)}; {self.n_dropped} design rows dropped for missing values"
            + (f"; {extra}" if extra else "")
        )

    def _rank_text(self) -> str:
        lo, hi = int(self.rank.min()), int(self.rank.max())
        return str(lo) if lo == hi else f"{lo}..{hi}"

    def __repr__(self) -> str:
        return self._head()

    def _repr_html_(self) -> str:
        body = "<br>".join(html.escape(s) for s in self._head().split("\n"))
        return f"<div class='lincomb'><p>{body}</p></div>"


def _unfilled(
    r: int, m: int
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Estimates, standard errors and t ratios (r, m) of ``m`` rows for ``r`` responses, all
    NaN until a group fills its columns."""
    return np.full((r, m), np.nan), np.full((r, m), np.nan), np.full((r, m), np.nan)


def _first_fit(groups: Sequence[_Group | _ObservedGroup]) -> LinearFit:
    for g in groups:
        if g.fit is not None:
            return g.fit
    raise DegenerateFitError(  # pragma: no cover - the design fit is checked at construction
        "no group of responses has enough rows for a fit."
    )


# -- construction ------------------------------------------------------------------------------


def _build(
    design: Design,
    source: _Responses,
    positions: NDArray[np.intp] | None,
    missing: str,
    rank_tol: float,
    formula: str | None,
    frame: pd.DataFrame | None,
    threads: int | None = 1,
    workers: int = 1,
) -> ManyFit:
    if missing not in ("skip", "refuse"):
        raise InputError(f"missing must be 'skip' or 'refuse', got {missing!r}.")
    n = design.x.shape[0]
    r = source.count
    if r == 0:
        raise InputError("no responses given.")
    factor, lf = design_fit(design, None, rank_tol)
    if lf is None:
        raise DegenerateFitError(
            f"{n} rows for a design of rank {core.solve(factor.moments, rank_tol).rank} leave"
            " no residual degrees of freedom for any response. Add rows or drop terms."
        )
    seen = [0, 0]  # responses seen, and how many of them had missing values

    @functools.cache
    def observed() -> core.ObservedDesign | None:  # built when a response needs it
        if missing != "skip":
            return None
        od = core.observed_design(factor, lf.solution, rank_tol, ZERO_RSS_TOL)
        return od if od.usable else None

    width = _block_width(r, n)
    # a matrix in memory is read in wide blocks whose rows are copied in chunks
    # (core.CHUNK_BYTES) where its blocks of columns would read it slowly: stored row by row,
    # n short pieces of its rows; tall, blocks of MIN_BLOCK_COLUMNS far larger than BLOCK_BYTES
    short_pieces = source.stored_by_row and 8 * width < ROW_PIECE_BYTES
    tall = 8 * n * width > BLOCK_BYTES
    by_rows = positions is None and source.matrix is not None and r > width
    by_rows = by_rows and (short_pieces or tall)
    wide = max(width, min(r, ROW_MAJOR_COLUMNS)) if by_rows else width
    # the route of the first block: guessed from a sample of rows (arrays stored by row)
    share = source.sampled_missing_share() if by_rows and missing == "skip" else 0.0

    def plan() -> tuple[int, bool]:
        own = (2 * seen[1] > seen[0] if seen[0] else 2 * share > 1) and observed() is not None
        return wide, own

    def work(yb: NDArray[np.float64], own: bool) -> _BlockFits:
        return _fit_block(factor, observed, yb, own, by_rows, width)

    main_blocks: list[core.ResponseBlock] = []
    main_cols: list[NDArray[np.intp]] = []
    own_parts: list[ObservedPart] = []
    own_cols: list[NDArray[np.intp]] = []
    refit: list[NDArray[np.intp]] = []
    blocks = -(-r // wide)
    workers = max(1, min(workers, blocks // MIN_BLOCKS_PER_WORKER))
    for cols, yb, fits in _projected(work, source, positions, r, plan, workers):
        odd, block, own = fits  # odd: a NaN, inf or overflow in the column
        seen[0] += odd.size
        seen[1] += int(odd.sum()) if own is None else int(np.count_nonzero(own.n < n))
        good = np.flatnonzero(~odd)
        odd_cols = np.flatnonzero(odd)
        _refuse_bad_values(yb, cols, odd, block, own, source.names, design, missing)
        if odd_cols.size:
            if own is None:
                refit.append(cols[odd_cols])
            else:
                own_parts.append(own)
                own_cols.append(cols[odd_cols])
        main_blocks.append(block)
        main_cols.append(cols[good])
        del yb
    groups: list[_Group | _ObservedGroup] = [
        solve_group(factor, lf, main_blocks, _joined(main_cols), None)
    ]
    del main_blocks
    od = observed() if own_parts else None
    if od is not None:
        # the own-rows fits of every block at once; responses not certified are refitted
        columns = _joined(own_cols)

        def read(at: NDArray[np.intp]) -> NDArray[np.float64]:
            yb = source.block(columns[at])
            return yb if positions is None else yb[positions]

        joined = od.finish(own_parts, read)
        ok = joined.certified
        if ok.any():
            kept = joined if ok.all() else joined.take(np.flatnonzero(ok))
            groups.append(_ObservedGroup(columns[ok], lf, od, kept))
        refit.append(columns[~ok])
    del own_parts
    groups.extend(
        exact_groups(
            design, source, positions, _joined(refit), rank_tol, BLOCK_BYTES, MIN_BLOCK_COLUMNS
        )
    )
    fit = _assemble(design, source, groups, lf, rank_tol, formula, frame, positions)
    return replace(fit, _blas=threads)


def _joined(parts: list[NDArray[np.intp]]) -> NDArray[np.intp]:
    return np.concatenate(parts) if parts else np.zeros(0, dtype=np.intp)


@functools.cache
def _cpu_count() -> int:
    # read once: os.cpu_count() reads the system's CPU list on every call (about 20 µs)
    return os.cpu_count() or 1


def _workers(workers: object) -> int:
    if workers is None:
        return max(1, min(MAX_WORKERS, _cpu_count()))
    if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise InputError(f"workers must be a positive whole number or None, got {workers!r}.")
    return int(workers)


def _block_width(r: int, n: int) -> int:
    return max(1, min(r, max(MIN_BLOCK_COLUMNS, BLOCK_BYTES // (8 * max(n, 1)))))


def _assemble(
    design: Design,
    source: _Responses,
    groups: list[_Group | _ObservedGroup],
    lf: LinearFit,
    rank_tol: float,
    formula: str | None,
    frame: pd.DataFrame | None,
    positions: NDArray[np.intp] | None,
) -> ManyFit:
    r = source.count
    p = len(design.index.names)
    coef = np.full((p, r), np.nan)
    n_obs = np.zeros(r, dtype=np.int64)
    rank = np.zeros(r, dtype=np.int64)
    rss = np.full(r, np.nan)
    status = np.full(r, _OK, dtype=np.int8)
    for g in groups:
        cols = g.columns
        n_obs[cols] = g.n
        if isinstance(g, _ObservedGroup):
            rank[cols] = g.fit.solution.rank
            coef[:, cols] = _coefficients(g.fit.solution, g.block.theta)
            rss[cols] = g.block.rss
            exact = g.block.resid_norm <= ZERO_RSS_TOL * g.block.y_norm
            status[cols[exact]] = _EXACT
            continue
        if g.fit is None:
            status[cols] = _FEW
            rank[cols] = min(g.n, p)
            continue
        sol = g.fit.solution
        rank[cols] = sol.rank
        coef[:, cols] = _coefficients(sol, g.theta)
        rss[cols] = g.rss
        exact = g.rss <= (ZERO_RSS_TOL * g.y_norm) ** 2
        status[cols[exact]] = _EXACT
    return ManyFit(
        names=design.index.names,
        responses=source.names,
        _per=_PerResponse(coef, n_obs, rank, rss, status),
        aliased=lf.aliased,
        n_dropped=len(design.dropped),
        weighted=design.weights is not None,
        formula=formula,
        rank_tol=rank_tol,
        _design=design,
        _groups=tuple(groups),
        _source=source,
        _frame=frame,
        _positions=positions,
    )


def fit_many(
    design: str,
    data: pd.DataFrame,
    responses: Sequence[str] | pd.DataFrame | ArrayLike,
    *,
    weights: str | ArrayLike | None = None,
    missing: str = "skip",
    rank_tol: float = core.RANK_TOL,
    response_names: Sequence[str] | None = None,
    workers: int | None = None,
) -> ManyFit:
    """Fit many responses on one design given by a formula's right-hand side.

    Parameters
    ----------
    design : str
        The terms, ``"~ treatment + batch"`` (or without ``~``), as formulaic parses them.
    data : pandas.DataFrame
        Holds the design's variables (and the responses, when named).  Not modified.
    responses : list of str, DataFrame or (n, r) array_like
        Column names of ``data``; a DataFrame with ``data``'s index; or an array with one row
        per row of ``data``.
    weights : str or array_like, optional
        Positive weights (a column of ``data`` or an array aligned with it): WLS.
    missing : {'skip', 'refuse'}, default 'skip'
        ``'skip'``: rows with missing design values are dropped for all responses; a response's
        own missing values drop rows for that response only (exactly, see the module notes).
        ``'refuse'``: any missing value raises :class:`~lincomb.errors.MissingValueError`.
    rank_tol : float, default 1e-10
    response_names : sequence of str, optional
        Names for array responses (default ``y0, y1, ...``).
    workers : int, optional
        Threads projecting blocks of responses in parallel (numpy and BLAS release the GIL).
        Default: the number of CPUs, at most :data:`MAX_WORKERS`; 1 projects in this thread.
        Fewer are used when there are fewer than :data:`MIN_BLOCKS_PER_WORKER` blocks of
        responses per thread.

    Returns
    -------
    ManyFit

    Examples
    --------
    >>> import lincomb as lc
    >>> panel = lc.datasets.assay_panel()
    >>> mf = lc.fit_many("~ treatment + batch", panel, responses=["g0001", "g0002"])
    >>> mf.status.tolist()
    ['ok', 'ok']
    """
    data = require_frame(data, "data")
    if not isinstance(design, str):
        raise InputError(f"design must be a formula string like '~ a + b', got {design!r}.")
    rhs = design.strip()
    if "~" in rhs:
        lhs, rhs = rhs.split("~", 1)
        if lhs.strip():
            raise InputError(
                f"give the design without a response ('~ {rhs.strip()}') and the responses"
                f" with responses=; got {design!r}."
            )
    rhs = rhs.strip()
    if not rhs:
        raise InputError("the design formula has no terms; write e.g. '~ 1' or '~ x + g'.")
    as_names = isinstance(responses, (list, tuple)) and all(isinstance(s, str) for s in responses)
    if as_names:
        names = _unique_names(responses, "response names")  # type: ignore[arg-type]
        require_columns(data, names, "data", "responses= names")
        if response_names is not None:
            raise InputError("response_names is for array responses; columns keep their names.")
    design_vars = FormulaEncoder.columns_read(f"~ {rhs}", data)
    if as_names:
        overlap = [s for s in names if s in design_vars]
        if overlap:
            raise InputError(
                f"response(s) {overlap} are also design variables; leave them out of one side."
            )
        refuse_non_numeric_responses(data, names)
    elif isinstance(responses, pd.DataFrame):
        refuse_non_numeric_responses(responses, responses.columns.tolist())
    small = data[design_vars].copy(deep=False)
    if isinstance(weights, str):
        require_columns(data, [weights], "data", "weights= names")
        small[weights] = data[weights]
    dsg = design_from_formula(f"~ {rhs}", small, weights=weights, missing=missing)
    positions = None
    if len(dsg.dropped):
        positions = data.index.get_indexer_for(dsg.row_index)
        if (positions < 0).any() or not data.index.is_unique:
            positions = np.flatnonzero(~data.index.isin(dsg.dropped))
    if as_names:
        # one position per name: the responses' names are unique in data (checked), even
        # where other columns have copies
        cols = data.columns.get_indexer_for(pd.Index(list(names)))
        src = _Responses(names, _FrameColumns(data, cols), len(data))
        frame = data.drop(columns=list(names))
    else:
        src = _array_source(responses, len(data), response_names, data.index)
        frame = data
    threads = worker_threads()
    nw = _workers(workers)
    with blas_limit(threads):
        return _build(dsg, src, positions, missing, rank_tol, rhs, frame, threads, nw)


def fit_many_arrays(
    x: ArrayLike,
    responses: ArrayLike | pd.DataFrame,
    *,
    names: Sequence[str] | None = None,
    response_names: Sequence[str] | None = None,
    weights: ArrayLike | None = None,
    missing: str = "skip",
    rank_tol: float = core.RANK_TOL,
    workers: int | None = None,
) -> ManyFit:
    """Fit many responses (columns of an (n, r) array or DataFrame) on one design ``X``.

    Parameters
    ----------
    x : (n, p) array_like or DataFrame
        Design, as for :func:`~lincomb.fit_arrays` (a column of ones is the intercept).  Must be
        finite.
    responses : (n, r) array_like or DataFrame
        One column per response; NaN marks a missing value (see ``missing``).
    names : sequence of str, optional
        Coefficient names.
    response_names : sequence of str, optional
        Default: a DataFrame's columns, else ``y0, y1, ...``.
    weights : (n,) array_like, optional
    missing : {'skip', 'refuse'}, default 'skip'
        Per-response exact handling of missing response values, or refuse them.
    rank_tol : float, default 1e-10
    workers : int, optional
        As for :func:`fit_many`.

    Returns
    -------
    ManyFit

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> rng = np.random.default_rng(0)
    >>> x = np.column_stack([np.ones(50), rng.normal(size=(50, 2))])
    >>> ys = rng.normal(size=(50, 3)); ys[5, 1] = np.nan
    >>> mf = lc.fit_many_arrays(x, ys)
    >>> mf.n_obs.tolist()
    [50, 49, 50]
    """
    dsg = design_from_arrays(x, None, names=names, weights=weights)
    if isinstance(responses, pd.DataFrame):
        refuse_non_numeric_responses(responses, responses.columns.tolist())
    src = _array_source(responses, dsg.x.shape[0], response_names, None)
    threads = worker_threads()
    nw = _workers(workers)
    with blas_limit(threads):
        return _build(dsg, src, None, missing, rank_tol, None, None, threads, nw)
