"""Checking a restriction system against a design's rank: contradictions and estimability.

Shared by every path that tests or imposes restrictions (fits, batches, planned designs), so the
rules and the wording of their errors are the same everywhere.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from lincomb import _core as core
from lincomb._builder.resolved import RowLayout
from lincomb._model.row_checks import unused_level_hint
from lincomb.errors import InconsistentRestrictionError, NotEstimableError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["aliasing_hint", "check_rows", "refuse_inconsistent"]


def refuse_inconsistent(analysis: core.RowAnalysis, labels: Sequence[str]) -> None:
    """Raise if a redundant row's ``d`` contradicts the rows it depends on (rows named).

    Examples
    --------
    >>> import numpy as np
    >>> from lincomb import _core as core
    >>> a = core.analyze_rows(np.array([[1.0, 0.0], [2.0, 0.0]]), np.array([1.0, 3.0]))
    >>> refuse_inconsistent(a, ["b = 1", "2*b = 3"])
    Traceback (most recent call last):
    ...
    lincomb.errors.InconsistentRestrictionError: the restrictions contradict each other: ...
    """
    if not analysis.inconsistent:
        return
    lines = []
    for row, dval, implied in analysis.inconsistent:
        dep = analysis.dependencies[row]
        combo = " + ".join(f"{w:.6g}·(row {k}: {labels[k]})" for k, w in dep.items()) or "0"
        lines.append(
            f"row {row} ({labels[row]}) equals {combo}, which implies d = {implied:.6g},"
            f" but its d is {dval:.6g}"
        )
    raise InconsistentRestrictionError(
        "the restrictions contradict each other: "
        + "; ".join(lines)
        + ". Remove one of the conflicting rows or correct its value."
    )


def check_rows(
    sol: core.Solution,
    c: NDArray[np.float64],
    d: NDArray[np.float64],
    labels: Sequence[str],
    names: Sequence[str],
    where: str = "this rank-deficient design",
    hint: str | Callable[[], str] = "",
    layout: RowLayout | None = None,
) -> tuple[NDArray[np.float64], core.RowAnalysis]:
    """Map ``C`` to working coordinates and refuse contradictory or non-estimable rows.

    Shared by every path that tests or imposes restrictions (fits, planned designs), so the
    rules and the wording of their errors are the same everywhere.  ``hint`` ends the message
    of a non-estimable row: a string, or a function that gives it (called only then).
    ``layout`` (from :meth:`~lincomb.RestrictionSystem.resolved`, for plain restrictions) says
    which columns the rows use: whether a row involves the intercept is then read from it, and
    rows on disjoint columns whose scaled weights stay finite and nonzero are independent
    without :func:`~lincomb._core.analyze_rows` (whose answer for them is known: all kept).

    Returns
    -------
    cu : (m, p) ndarray
        ``C`` in working coordinates.
    analysis : RowAnalysis
        Independent and redundant rows (see :func:`lincomb._core.analyze_rows`).

    Raises
    ------
    InconsistentRestrictionError
        A redundant row's ``d`` contradicts the rows it depends on (the rows are named).
    NotEstimableError
        A row has a component in the design's null space (the row and the aliased columns it
        touches are named).

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit_arrays(np.c_[np.ones(5), [0.0, 1, 2, 3, 5]], [1.0, 2, 2, 4, 5])
    >>> c = np.array([[0.0, 1.0], [0.0, 2.0]])
    >>> cu, a = check_rows(f.solution, c, np.array([1.0, 2.0]), ["x1 = 1", "2*x1 = 2"], f.names)
    >>> a.independent.tolist(), a.dependencies
    ([0], {1: {0: 2.0}})
    """
    c = np.asarray(c, dtype=np.float64)
    j = sol.intercept
    if j is None or not (j in layout.touched if layout is not None else c[:, j].any()):
        # no row involves the intercept: working and decision rows are both C / scale
        cu = cd = c / sol.scale
        if layout is not None and layout.apart and _stay_apart(cd.take(layout.positions)):
            analysis = core.RowAnalysis(np.arange(c.shape[0], dtype=np.intp), {}, [])
        else:
            analysis = core.analyze_rows(cd, d, core.ROW_TOL)
    else:
        cu, cd = sol.to_working(c), sol.decision_rows(c)
        # redundancy and consistency in decision coordinates (invariant to column shifts/scales)
        analysis = core.analyze_rows(cd, d, core.ROW_TOL)
    refuse_inconsistent(analysis, labels)
    if sol.null_basis.shape[1] == 0:  # a full-rank design: every row is estimable
        return cu, analysis
    resid = sol.estimability_residual(cu)
    bad = np.flatnonzero(resid > core.ROW_TOL)
    if bad.size:
        msgs = []
        for i in bad:
            touched = [names[int(j)] for j in sol.aliased_touched(cu[i], core.ROW_TOL)]
            msgs.append(f"row {int(i)} ({labels[int(i)]}) involves aliased coefficients {touched}")
        aliased = [names[int(j)] for j in sorted(sol.aliased)]
        raise NotEstimableError(
            f"restriction not estimable under {where}: "
            + "; ".join(msgs)
            + f". Aliased columns: {aliased}. Restate the row as a contrast that the data"
            " identify, or change the design so those columns are not aliased."
            + (hint if isinstance(hint, str) else hint())
        )
    return cu, analysis


def _stay_apart(weights: NDArray[np.float64]) -> bool:
    """True when every scaled weight of rows on disjoint columns is finite and nonzero: the
    rows are then exactly orthogonal, and each is nonzero."""
    return all(w != 0 and -math.inf < w < math.inf for w in weights.tolist())


def aliasing_hint(fit: LinearFit) -> str:
    """What may explain an aliased column beyond the design itself, for error messages.

    Categories left unused by subsetting (named, with the fix), and weights so unequal that
    rows weighted lightly barely inform the fit: a column seen only in such rows is aliased at
    working precision (the ratio of the largest weight to the smallest is named).  Empty when
    neither applies or the fit keeps no rows.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> x = np.c_[np.ones(6), [0.0, 0, 0, 1, 1, 1]]
    >>> f = lc.fit_arrays(x, [1.0, 2, 3, 5, 6, 8], weights=[1.0, 1, 1, 1e-60, 1e-60, 1e-60])
    >>> "1e+60" in aliasing_hint(f)
    True
    """
    hint = unused_level_hint(fit.design.encoder)
    if fit.weighted and fit.design.has_rows:
        w = np.asarray(fit.design.weights, dtype=np.float64)
        ratio = float(w.max() / w.min()) if w.size and w.min() > 0 else float("inf")
        if ratio > core.WEIGHT_SPREAD_PIVOT:
            hint += (
                f" The weights span a ratio of {ratio:.3g} (largest over smallest): a column seen"
                " only in rows weighted that lightly is aliased at working precision. Rescale or"
                " drop those rows if that is not intended."
            )
    return hint
