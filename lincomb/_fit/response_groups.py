"""Groups of responses of a many-response fit, by the rows each response is fitted on.

* :class:`_Group`: responses sharing their rows (all rows, or one pattern of missing values):
  one factorization of those rows, solutions vectorized over the group's responses.
* :class:`_ObservedGroup`: responses each with its own missing values, fitted on their own rows
  from the one factorization of all rows (:mod:`lincomb._core.observed`), vectorized over
  responses; only responses whose vectorized fit is certified exact join it.  The others are
  refitted by :func:`exact_groups`, one factorization per pattern of missing values.

Each group tests a restriction system on its responses with :func:`group_wald`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import special

from lincomb import _core as core
from lincomb._fit.linear import LinearFit, fit_from_moments
from lincomb._fit.responses import _Responses
from lincomb._model.design import Design
from lincomb._typing import Array
from lincomb.errors import DegenerateFitError, InputError


@dataclass(frozen=True)
class _Group:
    """Responses fitted on the same rows: one factorization, vectorized solutions."""

    columns: NDArray[np.intp]
    rows: NDArray[np.intp] | None  # positions in the design's rows; None = all
    n: int
    fit: LinearFit | None  # the design's own fit (zero response): rank, names, restrictions
    theta: Array
    rss: Array
    y_norm: Array

    @property
    def sol(self) -> core.Solution | None:
        return None if self.fit is None else self.fit.solution


@dataclass(frozen=True)
class _ObservedGroup:
    """Responses each fitted on its own rows from the factorization of all rows."""

    columns: NDArray[np.intp]
    fit: LinearFit  # the design's fit on all rows: names, restrictions, working coordinates
    design: core.ObservedDesign
    block: core.ObservedBlock

    @property
    def n(self) -> NDArray[np.int64]:
        return self.block.n

    def decisions_hold(self, c: Array, analysis: core.RowAnalysis) -> bool:
        """Whether the system's redundancy decisions on all rows hold on every response's rows.

        Each response's rows change a row's distance in decision coordinates by at most a
        factor 2 (:mod:`lincomb._core.observed`); a distance within :data:`ROW_MARGIN` of the
        tolerance is decided again on the response's own rows (by the caller).
        """
        dist = core.row_distances(self.fit.solution.decision_rows(c), analysis.independent)
        tol = core.ROW_TOL
        near = (dist > tol / core.ROW_MARGIN) & (dist <= tol * core.ROW_MARGIN)
        return not bool(near.any())


def design_fit(
    design: Design, rows: NDArray[np.intp] | None, rank_tol: float
) -> tuple[core.DesignFactor, LinearFit | None]:
    """Factor the design on ``rows`` (all when None) and solve it (None: no error df)."""
    x = design.x if rows is None else design.x[rows]
    w = design.weights if rows is None or design.weights is None else design.weights[rows]
    factor = core.factor_design(x, w, design.intercept)
    if x.shape[0] == 0:  # a response missing in every row: flagged like too few rows
        return factor, None
    try:
        lf = fit_from_moments(design, factor.moments, rank_tol)
    except DegenerateFitError:
        lf = None
    return factor, lf


def solve_group(
    factor: core.DesignFactor,
    lf: LinearFit | None,
    blocks: list[core.ResponseBlock],
    columns: NDArray[np.intp],
    rows: NDArray[np.intp] | None,
) -> _Group:
    """The group of ``columns`` whose summaries against ``factor`` are ``blocks``."""
    q = factor.moments.others.size
    r = columns.size
    if r == 0 and lf is not None:  # nothing to solve (every response went another way)
        empty = np.zeros(0)
        return _Group(
            columns, rows, factor.moments.n, lf, np.zeros((lf.solution.rank, 0)), empty, empty
        )
    block = core.ResponseBlock.concat(blocks, q)
    if lf is None:
        nan = np.full(r, np.nan)
        return _Group(columns, rows, factor.moments.n, None, np.zeros((0, r)), nan, nan)
    theta, rss, y_norm = core.solve_responses(factor.moments, lf.solution, block)
    return _Group(columns, rows, factor.moments.n, lf, theta, rss, y_norm)


def _block_width(r: int, n: int, block_bytes: int, min_columns: int) -> int:
    return max(1, min(r, max(min_columns, block_bytes // (8 * max(n, 1)))))


def exact_groups(
    design: Design,
    source: _Responses,
    positions: NDArray[np.intp] | None,
    columns: NDArray[np.intp],
    rank_tol: float,
    block_bytes: int,
    min_columns: int,
) -> list[_Group]:
    """Fit responses ``columns`` exactly on their own rows: one factorization per pattern.

    The responses are read again from ``source`` in blocks of columns.
    """
    n = design.x.shape[0]
    patterns: dict[bytes, list[int]] = {}
    masks: dict[bytes, NDArray[np.bool_]] = {}
    width = _block_width(columns.size, n, block_bytes, min_columns)
    for k0 in range(0, columns.size, width):
        part = columns[k0 : k0 + width]
        yb = source.block(part)
        if positions is not None:
            yb = yb[positions]
        nan = np.isnan(yb)
        keys = np.ascontiguousarray(np.packbits(nan, axis=0).T)
        for t, j in enumerate(part):
            key = keys[t].tobytes()
            patterns.setdefault(key, []).append(int(j))
            masks.setdefault(key, ~nan[:, t])
    groups = []
    for key, members in patterns.items():
        rows = np.flatnonzero(masks[key])
        cols = np.asarray(members, dtype=np.intp)
        gfactor, glf = design_fit(design, rows, rank_tol)
        blocks = []
        if glf is not None:
            sub_width = _block_width(cols.size, rows.size, block_bytes, min_columns)
            for k0 in range(0, cols.size, sub_width):
                yb = source.block(cols[k0 : k0 + sub_width])
                if positions is not None:
                    yb = yb[positions]
                block = gfactor.project(yb[rows])
                big = np.flatnonzero(~block.finite())
                if big.size:  # finite values whose squares overflow
                    name = source.names[cols[k0 + big[0]]]
                    raise InputError(
                        f"response {name!r} holds values too large to square in float64;"
                        " rescale it."
                    )
                blocks.append(block)
        groups.append(solve_group(gfactor, glf, blocks, cols, rows))
    return groups


@dataclass(frozen=True)
class GroupTest:
    """One system tested on the responses of one group (arrays over the group's responses)."""

    estimate: Array  # (r_g, m)
    se: Array  # (r_g, m)
    ratio: Array  # (r_g, m)
    stat: Array  # (r_g,)
    p: Array  # (r_g,)


def group_wald(
    g: _Group | _ObservedGroup,
    ck: Array,
    d: Array,
    independent: NDArray[np.intp],
    ok: NDArray[np.bool_],
) -> GroupTest:
    """Test ``C·β = d`` on a group's responses; ``ck`` are the kept working columns of ``C``
    in the coordinates of the group's solution; NaN where ``ok`` is False."""
    qn = independent.size
    if isinstance(g, _ObservedGroup):
        block = g.block
        est = ck @ block.theta
        delta = est - d[:, None]
        quad, se0 = core.observed_wald(block, g.design.root(ck), delta, independent)
        dfg = block.n - g.fit.solution.rank
        with np.errstate(divide="ignore", invalid="ignore"):
            sigma = block.resid_norm / np.sqrt(dfg)
        se0 = se0.T
    else:
        assert g.fit is not None
        sol = g.fit.solution
        est = ck @ g.theta
        delta = est - d[:, None]
        quad, se_rows = core.wald_quadratic_forms(delta, sol.root(ck), independent)
        se0 = se_rows[:, None]
        dfg = np.full(g.columns.size, g.n - sol.rank)
        with np.errstate(divide="ignore", invalid="ignore"):
            sigma = np.sqrt(g.rss / dfg)
    with np.errstate(divide="ignore", invalid="ignore"):
        se = se0 * sigma[None, :]
        tt = delta / se
        f = quad / (qn * sigma**2)
        pval = special.fdtrc(qn, dfg, f)
    nan = np.nan
    return GroupTest(
        estimate=est.T,
        se=np.where(ok[:, None], se.T, nan),
        ratio=np.where(ok[:, None], tt.T, nan),
        stat=np.where(ok, f, nan),
        p=np.where(ok, pval, nan),
    )
