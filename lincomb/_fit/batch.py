"""The fit-level side of :meth:`LinearFit.wald_batch`: inputs, names, errors, references.

:mod:`lincomb.batch` does the arithmetic on arrays; this module turns what the user gives
(a ``(k, m, p)`` array, or a sequence of restriction systems) into those arrays, names the
offending system and row when something is wrong, and attaches the reference distribution.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any, cast

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special

from lincomb._builder.restriction import Expr, RestrictionSystem, TermRef, _Item, as_system
from lincomb._builder.stack import stack_systems
from lincomb._core import ROW_TOL, BatchCore, wald_systems
from lincomb._covariance.estimate import COV_RANK_TOL, CovarianceEstimate
from lincomb._covariance.reference import check_reference
from lincomb._fit.restriction_rows import aliasing_hint
from lincomb._results.wald import WaldBatch
from lincomb.errors import (
    CovarianceInputError,
    EmptyRestrictionError,
    InconsistentRestrictionError,
    InputError,
    LincombError,
    NotEstimableError,
    RestrictionShapeError,
    SingularCovarianceError,
)

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

#: How many offending systems an error message lists before it says "and N more".
_SHOWN = 3

_ON_INVALID = ("raise", "nan")


def _is_restriction(obj: object) -> bool:
    if isinstance(obj, (list, tuple)):
        return bool(obj) and _is_restriction(obj[0])
    return isinstance(obj, (RestrictionSystem, _Item, Expr, TermRef))


def _from_restrictions(
    fit: LinearFit, items: Sequence[object]
) -> tuple[NDArray[np.float64], NDArray[np.float64], tuple[RestrictionSystem, ...]]:
    """The systems stacked into ``(C, d)``, and the systems themselves (for their labels).

    All systems at once through the fit's resolver (:func:`stack_systems`); when that finds
    anything wrong, system by system, which raises the error naming the system."""
    try:
        systems: tuple[RestrictionSystem, ...]
        if set(map(type, items)) == {RestrictionSystem}:  # as_system would return each as is
            systems = cast("tuple[RestrictionSystem, ...]", tuple(items))
        else:
            systems = tuple(as_system(obj) for obj in items)
        stacked = stack_systems(systems, fit.resolver)
    except LincombError:
        stacked = None
    if stacked is None:
        c, d, _labels = _one_by_one(fit, items)  # raises the error that names the system
        return c, d, tuple(as_system(obj) for obj in items)
    return stacked[0], stacked[1], systems


def _one_by_one(
    fit: LinearFit, items: Sequence[object]
) -> tuple[NDArray[np.float64], NDArray[np.float64], tuple[tuple[str, ...], ...]]:
    cs: list[NDArray[np.float64]] = []
    ds: list[NDArray[np.float64]] = []
    labels: list[tuple[str, ...]] = []
    for i, obj in enumerate(items):
        try:
            c, d, lab = fit.resolve(obj)
        except LincombError as exc:
            raise type(exc)(f"system {i}: {exc}") from exc
        if cs and c.shape[0] != cs[0].shape[0]:
            raise RestrictionShapeError(
                f"system {i} has {c.shape[0]} rows but system 0 has {cs[0].shape[0]}: a batch"
                " holds systems of one size. Group the systems by their number of rows and"
                " call wald_batch once per group."
            )
        cs.append(c)
        ds.append(d)
        labels.append(tuple(lab))
    return np.stack(cs), np.stack(ds), tuple(labels)


def _from_arrays(
    names: Sequence[str], c: object, d: ArrayLike | None
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    p = len(names)
    try:
        arr = np.array(c, dtype=np.float64, copy=True)
    except (TypeError, ValueError):
        raise RestrictionShapeError(
            "C must be a numeric (systems, rows, coefficients) array or a sequence of"
            " restriction systems."
        ) from None
    if arr.ndim != 3:
        raise RestrictionShapeError(
            f"C must have shape (systems, rows, {p}), got {arr.shape}; for one system use"
            " wald(), or add a leading axis (C[None])."
        )
    k, m, pc = arr.shape
    if k == 0 or m == 0:
        raise EmptyRestrictionError(f"C of shape {arr.shape} holds no restriction rows.")
    if pc != p:
        raise RestrictionShapeError(
            f"C has {pc} columns but the fit has {p} coefficients {list(names)}; give one column"
            " per coefficient, in fit order."
        )
    if not np.isfinite(arr).all():
        s, i, j = (int(v) for v in np.argwhere(~np.isfinite(arr))[0])
        raise RestrictionShapeError(
            f"C holds {float(arr[s, i, j])!r} at system {s}, row {i}, column {j} ({names[j]});"
            " C must be finite."
        )
    # down the columns of the contiguous transpose: numpy reduces short rows one at a time
    nonzero = np.logical_or.reduce(
        np.ascontiguousarray((arr != 0).reshape(k * m, p).T), axis=0
    ).reshape(k, m)
    if not nonzero.all():
        zero = np.argwhere(~nonzero)
        s, i = (int(v) for v in zero[0])
        raise EmptyRestrictionError(
            f"row {i} of system {s} is all zeros ({zero.shape[0]} such rows in all); every row"
            " must involve a coefficient, so drop it."
        )
    if d is None:
        dv = np.zeros((k, m))
    else:
        try:
            dv = np.array(np.broadcast_to(np.asarray(d, dtype=np.float64), (k, m)))
        except (TypeError, ValueError):
            raise RestrictionShapeError(
                f"d has shape {np.shape(d)}; give a scalar, one value per row ({m},) or one per"
                f" system and row ({k}, {m})."
            ) from None
        if not np.isfinite(dv).all():
            s, i = (int(v) for v in np.argwhere(~np.isfinite(dv))[0])
            raise RestrictionShapeError(
                f"d holds {float(dv[s, i])!r} at system {s}, row {i}; d must be finite."
            )
    return arr, dv


def _listed(
    found: dict[int, Any], res: WaldBatch, describe: Callable[[int, list[str], Any], list[str]]
) -> str:
    """The first :data:`_SHOWN` invalid systems of ``found`` (system → what is wrong), each
    described from its row labels, and how many more there are."""
    parts = []
    for s, what in list(found.items())[:_SHOWN]:
        parts.extend(describe(s, list(res.row_labels(s)), what))
    n = len(found)
    return "; ".join(parts) + (f" (and {n - _SHOWN} more system(s))" if n > _SHOWN else "")


def _raise_invalid(
    fit: LinearFit, core: BatchCore, res: WaldBatch, estimate: CovarianceEstimate
) -> None:
    """Raise the single-system test's typed error, naming the system(s) and row(s)."""
    fix = " Or pass on_invalid='nan' to get the other systems' tests with these marked."
    if core.inconsistent:

        def contradiction(s: int, labels: list[str], bad: Any) -> list[str]:
            parts = []
            for row, dval, implied in bad:
                dep = core.dependencies[s][row]
                combo = " + ".join(f"{w:.6g}·(row {j}: {labels[j]})" for j, w in dep.items())
                parts.append(
                    f"system {res.systems[s]!r}, row {row} ({labels[row]}) equals {combo or '0'},"
                    f" which implies d = {implied:.6g}, but its d is {dval:.6g}"
                )
            return parts

        raise InconsistentRestrictionError(
            "the restrictions contradict each other: "
            + _listed(core.inconsistent, res, contradiction)
            + ". Remove one of the conflicting rows or correct its value."
            + fix
        )
    if core.not_estimable:
        sol = fit.solution
        assert res.matrix is not None  # a batch always keeps its stacked matrix
        cu = sol.to_working(res.matrix)

        def aliased(s: int, labels: list[str], rows: Any) -> list[str]:
            return [
                f"system {res.systems[s]!r}, row {i} ({labels[i]}) involves aliased"
                f" coefficients {[fit.names[j] for j in sol.aliased_touched(cu[s, i], ROW_TOL)]}"
                for i in rows.tolist()
            ]

        raise NotEstimableError(
            "restriction not estimable under this rank-deficient design: "
            + _listed(core.not_estimable, res, aliased)
            + f". Aliased columns: {list(fit.aliased)}. Restate the row as a contrast that the"
            " data identify, or remove the aliasing from the design." + fix + aliasing_hint(fit)
        )
    if core.singular:

        def no_variance(s: int, labels: list[str], found: tuple[int, int]) -> list[str]:
            row, rank = found
            return [
                f"system {res.systems[s]!r}: row {row} ({labels[row]}) adds no variance outside"
                f" the rows before it (covariance rank {rank} of {int(core.rank[s])})"
            ]

        why = ""
        if estimate.groups:
            why = (
                ". A cluster-robust covariance has rank at most G − 1 ="
                f" {min(estimate.groups) - 1} (the scores of the clusters sum to zero)"
            )
        raise SingularCovarianceError(
            f"under the {estimate.label} covariance the independent rows have a singular"
            " covariance: "
            + _listed(core.singular, res, no_variance)
            + why
            + ". Test fewer rows at once, or choose an estimator with more information"
            " (more clusters, another estimator)." + fix
        )


def wald_batch(
    self: LinearFit,
    c: ArrayLike | Sequence[object],
    d: ArrayLike | None = None,
    *,
    ids: Sequence[Any] | None = None,
    covariance: object = None,
    reference: str = "F",
    on_invalid: str = "raise",
) -> WaldBatch:
    """Wald tests of many restriction systems at once, vectorized over the systems.

    Gives, for each system ``C_s·β = d_s``, the numbers :meth:`wald` gives (F, rank, p,
    and per row the estimate, standard error and t), at a cost per system that depends
    on neither ``n`` nor a Python-level pass through the single-system path.

    Parameters
    ----------
    c : (k, m, p) array_like, or sequence of restrictions
        ``k`` systems of ``m`` rows on the fit's coefficients (in fit order), or ``k``
        restriction systems (each anything :meth:`wald` accepts) with ``m`` rows each;
        those are resolved first, which costs a Python pass per system.
    d : scalar, (m,) or (k, m) array_like, optional
        Right-hand sides for an array ``c`` (default 0).  Restrictions carry their own.
    ids : sequence, optional
        One identifier per system for the results (default ``0 .. k-1``).
    covariance : str or estimator, optional
        As in :meth:`wald` (default: the fit's own).
    reference : {'F', 'chi2'}, default 'F'
        As in :meth:`wald`.
    on_invalid : {'raise', 'nan'}, default 'raise'
        A system with contradictory rows, non-estimable rows or (under a robust estimator)
        a singular covariance raises the error :meth:`wald` would raise, naming the
        system and row; with ``'nan'`` it gets a NaN statistic and its ``status`` says why.

    Returns
    -------
    WaldBatch

    Raises
    ------
    RestrictionShapeError, EmptyRestrictionError
        ``c`` or ``d`` has the wrong shape, holds NaN/inf or an all-zero row, or the
        restriction systems differ in their number of rows.
    InconsistentRestrictionError, NotEstimableError, SingularCovarianceError
        As in :meth:`wald` (with ``on_invalid='raise'``).
    DegenerateFitError
        The residual sum of squares is zero.

    Notes
    -----
    Redundant rows are found and handled as in :meth:`wald` (the F uses the rank).  The
    arithmetic is in :mod:`lincomb.batch`: one triangular solve for all ``k·m`` rows, a
    stacked QR of the small ``m``-column roots, and the single-system path for any
    system with a row near a rank or estimability threshold, so the decisions are the
    same as :meth:`wald`'s.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> pairs = [("line[T.L2]", "line[T.L3]"), ("line[T.L3]", "line[T.L4]")]
    >>> systems = [(lc.coef(a) == lc.coef(b)) & (lc.coef("temperature_c") == 0)
    ...            for a, b in pairs]
    >>> b = f.wald_batch(systems, ids=["L2 vs L3", "L3 vs L4"])
    >>> b.test_frame()[["system", "rank", "df_error"]]
         system  rank  df_error
    0  L2 vs L3     2   295.0
    1  L3 vs L4     2   295.0
    >>> bool(np.isclose(b.p[1], f.wald(systems[1]).p, rtol=1e-10))
    True
    """
    if on_invalid not in _ON_INVALID:
        raise InputError(
            f"on_invalid must be 'raise' (stop at an invalid system) or 'nan' (mark it and test"
            f" the others), got {on_invalid!r}."
        )
    vcov = self.evaluate_covariance(covariance)
    ref = check_reference(reference)
    if vcov.per_test_df and ref == "F":
        raise CovarianceInputError(
            f"the {vcov.label} covariance gives each system its own small-sample df, which the"
            " vectorized batch does not compute: test the systems one by one with fit.wald,"
            " or pass df= to lc.clustered(...) for one df, or use reference='chi2'."
        )
    given = None
    if not isinstance(c, np.ndarray) and not isinstance(c, (str, bytes)):
        items = list(c)  # type: ignore[arg-type]
        if items and _is_restriction(items[0]):
            if d is not None:
                raise RestrictionShapeError(
                    "d comes with the restrictions themselves (the right-hand side of '=='):"
                    " pass d only with an array C."
                )
            cs, ds, given = _from_restrictions(self, items)
        else:
            cs, ds = _from_arrays(self.names, items, d)
    else:
        cs, ds = _from_arrays(self.names, c, d)
    k, m, _ = cs.shape
    systems = tuple(range(k)) if ids is None else tuple(ids)
    if len(systems) != k:
        raise InputError(f"{len(systems)} ids given for {k} systems; give one id per system.")

    if vcov.method == "classical":  # the core's own BLAS-free root, σ R⁻ᵀ Cᵀ
        core = wald_systems(self.solution, cs, ds, sigma=self.sigma, tol=ROW_TOL)
    else:
        core = wald_systems(
            self.solution, cs, ds, vcov.root, tol=ROW_TOL, cov_rank_tol=COV_RANK_TOL
        )
    status = ["independent"] * k
    for s in core.exact.tolist():  # only these can be anything else
        if s in core.inconsistent:
            status[s] = "inconsistent"
        elif s in core.not_estimable:
            status[s] = "not estimable"
        elif s in core.singular:
            status[s] = "singular covariance"
        elif core.rank[s] < m:
            status[s] = "redundant"
    q = core.rank
    with np.errstate(divide="ignore", invalid="ignore"):
        if ref == "F":
            stat = np.where(q > 0, core.quad / np.maximum(q, 1), np.nan)
            df_error = float(vcov.df_error)
            p_value = special.fdtrc(q, df_error, stat)  # the function behind stats.f.sf
        else:
            stat = np.where(q > 0, core.quad, np.nan)
            df_error = float("inf")
            p_value = special.chdtrc(q, stat)  # the function behind stats.chi2.sf
    res = WaldBatch(
        systems=systems,
        estimate=core.estimate,
        target=ds,
        se=core.std_error,
        ratio=core.statistic_rows,
        stat=stat,
        df_test=q,
        df_error=df_error,
        p=np.asarray(p_value, dtype=np.float64),
        status=tuple(status),
        redundant=core.dependencies,
        names=tuple(self.names),
        matrix=cs,
        reference=ref,
        covariance=vcov.label,
        _index=self.resolver,
        _given=given,
    )
    if on_invalid == "raise":
        _raise_invalid(self, core, res, vcov)
    return res
