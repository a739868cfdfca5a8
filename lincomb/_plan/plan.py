"""The power plan: a restriction system on a planned design, with σ and α.

Before any data exist, the Wald F test of a restriction system has a known distribution under
a stated alternative.  With a planned design ``X`` (one *replicate* of the covariate pattern the
study will run), a residual standard deviation ``σ`` and the value of ``Cβ`` the study should
detect, the F statistic is noncentral F with ``q = rank(C)`` and ``r·n₀ − rank(X)`` degrees of
freedom (``r`` replicates of ``n₀`` rows) and noncentrality

    λ = r · (Cβ − d)ᵀ [C (XᵀX)⁻¹ Cᵀ]⁻¹ (Cβ − d) / σ²,

where ``XᵀX`` is that of one replicate (``r`` replicates multiply it by ``r``).

A system is resolved through the design's coefficient index (and its formula encoder, for
restrictions on level means), mapped to working coordinates and checked by
:func:`lincomb._core.analyze_rows` (redundant rows count once; contradictory rows raise
:class:`~lincomb.errors.InconsistentRestrictionError`) and for estimability
(:class:`~lincomb.errors.NotEstimableError`).  The quadratic form is the squared norm of a
triangular solve (:func:`lincomb._core.wald_from_root` on ``R⁻ᵀ Cᵀ``); ``XᵀX`` is never formed
nor inverted.  The power and the searches are in :mod:`lincomb._core.noncentral`.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb import _core as core
from lincomb._core import noncentral
from lincomb._docstrings import fill_doc
from lincomb._fit.linear import LinearFit
from lincomb._fit.restriction_rows import check_rows
from lincomb._plan.checks import check_alpha, check_replicates, check_sigma, check_target
from lincomb._plan.design import PlannedDesign, planned_design, three_groups_doc
from lincomb._plan.results import (
    TWO_GROUP_PLAN,
    DetectableEffect,
    PowerCurve,
    PowerResult,
    SampleSize,
)
from lincomb._results.format import _num, _table_html, _table_text
from lincomb.errors import (
    DegenerateFitError,
    InconsistentRestrictionError,
    InputError,
    ParameterError,
    UnreachablePowerError,
)

__all__ = ["PowerPlan", "power_plan", "MAX_REPLICATES"]

#: Default upper bound of the replicate search in :meth:`PowerPlan.replicates_for`.
MAX_REPLICATES: int = 1_000_000


#: The target power of the searches (numpydoc parameter).
_TARGET_POWER = """\
power : float
    Target power, in ``(alpha, 1)``."""
_plan_doc = fill_doc(two_group_plan=TWO_GROUP_PLAN, target_power=_TARGET_POWER)


@dataclass(frozen=True)
class PowerPlan:
    """A restriction system on a planned design, with σ and α: ask it for power and sizes.

    Build it with :func:`power_plan`.  Every method states the alternative in one of two ways:

    * ``effect``: the value of ``Cβ`` under the alternative, one entry per restriction row (a
      number is used for every row).  The shift the test sees is ``effect − d``.
    * ``beta``: a full alternative ``β`` as a mapping (or Series) from coefficient name to value;
      every coefficient the restrictions use must be given, the others are ignored.

    Attributes
    ----------
    design : PlannedDesign
    labels : tuple of str
        Each restriction row written in coefficient names.
    target : (m,) ndarray
        The hypothesized ``d``.
    df_test : int
        Rank of ``C`` (redundant rows do not count).
    sigma : float
        Residual standard deviation assumed.
    alpha : float
        Significance level of the test.
    redundant : dict
        ``{row: {independent row: weight}}`` for each redundant row.
    matrix : pandas.DataFrame
        The resolved ``C``.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> pattern = pd.DataFrame({"dose": ["0", "10", "20", "40"]})
    >>> plan = lc.power_plan(lc.planned_design("C(dose)", pattern),
    ...                      lc.term("C(dose)")["40"] == 0, sigma=2.0)
    >>> round(plan.power(effect=3.0, replicates=10).power, 4)
    0.9038
    """

    design: PlannedDesign
    labels: tuple[str, ...]
    target: NDArray[np.float64]
    df_test: int
    sigma: float
    alpha: float
    matrix: pd.DataFrame = field(repr=False)
    _cu: NDArray[np.float64] = field(repr=False, compare=False)
    _root: NDArray[np.float64] = field(repr=False, compare=False)
    _independent: NDArray[np.intp] = field(repr=False, compare=False)
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)

    def _recorded(self) -> dict[str, Any]:
        """What every result of the plan records from it: the rows, their rank, alpha, sigma."""
        return {
            "labels": self.labels,
            "df_test": self.df_test,
            "alpha": self.alpha,
            "sigma": self.sigma,
        }

    # -- the alternative ------------------------------------------------------------------
    def _consistent(self, values: NDArray[np.float64], what: str) -> None:
        """Values on dependent rows must follow the rows' dependency, as ``Cβ`` does."""
        check = core.analyze_rows(self._cu, values, core.ROW_TOL)
        if check.inconsistent:
            row, val, implied = check.inconsistent[0]
            dep = check.dependencies[row]
            combo = " + ".join(f"{w:.6g}·(row {k}: {self.labels[k]})" for k, w in dep.items())
            raise InconsistentRestrictionError(
                f"the {what} gives row {row} ({self.labels[row]}) the value {val:.6g}, but that"
                f" row equals {combo or '0'}, which implies {implied:.6g}: no β has these"
                " values. Give values that follow the rows' dependency, or drop the redundant row."
            )

    def _beta_vector(self, beta: object, what: str) -> NDArray[np.float64]:
        if isinstance(beta, pd.Series):
            items = list(beta.items())
        elif isinstance(beta, Mapping):
            items = list(beta.items())
        else:
            raise InputError(
                f"{what} must be a mapping or Series from coefficient name to value, got"
                f" {type(beta).__name__}."
            )
        idx = self.design.index
        vec = np.full(len(self.design.names), np.nan)
        for name, value in items:
            j = idx.column(str(name))
            if not np.isnan(vec[j]):
                raise InputError(f"{what} gives coefficient {idx.names[j]!r} twice.")
            try:
                v = float(value)
            except (TypeError, ValueError):
                raise InputError(f"{what}[{name!r}] must be a number, got {value!r}.") from None
            if not np.isfinite(v):
                raise InputError(f"{what}[{name!r}] must be finite, got {value!r}.")
            vec[j] = v
        c = self.matrix.to_numpy()
        used = np.flatnonzero(np.any(c != 0, axis=0))
        missing = [self.design.names[j] for j in used if np.isnan(vec[j])]
        if missing:
            raise InputError(
                f"{what} does not give {missing}, which the restrictions use; give a value for"
                " every coefficient in the restrictions (others may be left out)."
            )
        return np.where(np.isnan(vec), 0.0, vec)

    def _row_values(self, value: object, what: str) -> NDArray[np.float64]:
        m = len(self.labels)
        try:
            arr = np.array(value, dtype=np.float64, copy=True)
        except (TypeError, ValueError):
            raise InputError(f"{what} must be numeric, got {value!r}.") from None
        if arr.ndim == 0:
            arr = np.full(m, float(arr))
        arr = arr.reshape(-1) if arr.ndim > 1 and arr.size == m else arr
        if arr.shape != (m,):
            raise InputError(
                f"{what} has {arr.size} entries but the system has {m} restriction rows"
                f" {list(self.labels)}: give one value per row."
            )
        bad = np.flatnonzero(~np.isfinite(arr))
        if bad.size:
            raise InputError(
                f"{what} holds {float(arr[bad[0]])!r} for row {int(bad[0])}"
                f" ({self.labels[bad[0]]}); values must be finite."
            )
        return arr

    @three_groups_doc
    def shift(self, effect: object = None, *, beta: object = None) -> NDArray[np.float64]:
        """``Cβ − d`` under the alternative, one entry per restriction row.

        Examples
        --------
        %(three_groups)s
        >>> plan = lc.power_plan(d, lc.coef("g[T.b]") - lc.coef("g[T.c]") == 1, sigma=1.0)
        >>> plan.shift(beta={"g[T.b]": 3.0, "g[T.c]": 0.5}).tolist()
        [1.5]
        """
        if (effect is None) == (beta is None):
            raise InputError(
                "state the alternative once: effect= (the value of Cβ per restriction row) or"
                " beta= (a full β by coefficient name)."
            )
        c = self.matrix.to_numpy()
        if beta is not None:
            return c @ self._beta_vector(beta, "beta") - self.target
        values = self._row_values(effect, "effect")
        self._consistent(values, "effect")
        return values - self.target

    def _lambda1(self, delta: NDArray[np.float64]) -> float:
        """Noncentrality of one replicate with σ = 1 (a triangular solve; see module notes)."""
        # scaled by a power of two (exact, so every number is that of the unscaled solve) so a
        # huge effect overflows only in the final product, to inf: power 1
        top = float(np.max(np.abs(delta))) if delta.size else 0.0
        if top == 0.0:
            return 0.0
        if not np.isfinite(top):
            return float("inf")
        exponent = int(np.frexp(top)[1])
        unit = np.ldexp(delta, -exponent)
        quad = core.wald_from_root(unit, self._root, self._independent).quad
        with np.errstate(over="ignore"):
            return float(np.ldexp(np.float64(quad), 2 * exponent))

    def _df_den(self, replicates: int) -> int:
        d = self.design
        df = replicates * d.n_obs - d.rank
        if df < 1:
            raise DegenerateFitError(
                f"replicates={replicates} gives {replicates * d.n_obs} observations for"
                f" {d.rank} estimable coefficients: no residual degrees of freedom, so no F"
                f" test. Use at least {d.min_replicates()} replicates of the"
                f" {d.n_obs}-row pattern."
            )
        return df

    def noncentrality(
        self, effect: object = None, *, beta: object = None, replicates: int = 1
    ) -> float:
        """``λ`` of the test's F statistic under the alternative, for ``replicates`` replicates.

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> d = lc.planned_design(np.c_[np.ones(4), [-1.5, -0.5, 0.5, 1.5]], names=["a", "b"])
        >>> plan = lc.power_plan(d, lc.coef("b") == 0, sigma=1.0)
        >>> plan.noncentrality(effect=1.0, replicates=2)  # 2 · Σ(x - x̄)² · 1² / 1²
        10.0
        """
        r = check_replicates(replicates)
        return r * self._lambda1(self.shift(effect, beta=beta)) / self.sigma**2

    # -- questions ------------------------------------------------------------------------
    @three_groups_doc
    def power(
        self, effect: object = None, *, beta: object = None, replicates: int = 1
    ) -> PowerResult:
        """Power of the level-``alpha`` F test when the study runs ``replicates`` replicates.

        Parameters
        ----------
        effect : float or (m,) array_like, optional
            Value of ``Cβ`` under the alternative, per restriction row.
        beta : mapping or Series, optional
            A full alternative ``β`` by coefficient name (instead of ``effect``).
        replicates : int, default 1
            Copies of the planned pattern; ``n = replicates · n_obs``.

        Returns
        -------
        PowerResult

        Raises
        ------
        DegenerateFitError
            ``replicates`` leaves no residual degrees of freedom.
        InconsistentRestrictionError
            ``effect`` gives dependent rows values no ``β`` can have.

        Examples
        --------
        %(three_groups)s
        >>> res = lc.power_plan(d, lc.term("g") == 0, sigma=1.0).power(
        ...     beta={"g[T.b]": 1.0, "g[T.c]": 1.0}, replicates=8)
        >>> res.df_test, res.df_error, round(res.noncentrality, 4), round(res.power, 4)
        (2, 21, 5.3333, 0.471)
        """
        r = check_replicates(replicates)
        delta = self.shift(effect, beta=beta)
        df2 = self._df_den(r)
        lam = r * self._lambda1(delta) / self.sigma**2
        return PowerResult(
            **self._recorded(),
            target=self.target.copy(),
            alternative=self.target + delta,
            shift=delta,
            df_error=df2,
            noncentrality=float(lam),
            critical_value=float(noncentral.critical_value(self.df_test, df2, self.alpha)),
            power=float(noncentral.power(lam, self.df_test, df2, self.alpha)),
            replicates=r,
            n_obs=r * self.design.n_obs,
            redundant=self.redundant,
        )

    @_plan_doc
    def replicates_for(
        self,
        power: float,
        effect: object = None,
        *,
        beta: object = None,
        max_replicates: int = MAX_REPLICATES,
    ) -> SampleSize:
        """Smallest number of replicates of the pattern whose test reaches ``power``.

        Parameters
        ----------
        %(target_power)s
        effect, beta
            The alternative (see the class notes).
        max_replicates : int, default :data:`MAX_REPLICATES`
            Upper end of the search.

        Returns
        -------
        SampleSize

        Raises
        ------
        ParameterError
            ``power`` outside ``(alpha, 1)``.
        UnreachablePowerError
            Even ``max_replicates`` replicates fall short (e.g. a zero effect).
        DegenerateFitError
            ``max_replicates`` is below the fewest replicates that leave a residual degree of
            freedom.

        Examples
        --------
        %(two_group_plan)s
        >>> need = plan.replicates_for(0.8, effect=0.5)
        >>> need.replicates, round(need.power, 4), round(need.previous_power, 4)
        (64, 0.8015, 0.7952)
        """
        target = check_target(power, self.alpha)
        cap = check_replicates(max_replicates, "max_replicates")
        delta = self.shift(effect, beta=beta)
        lam1 = self._lambda1(delta) / self.sigma**2
        lo_valid = self.design.min_replicates()
        if cap < lo_valid:
            self._df_den(cap)  # raises with the fewest usable replicate count
        r = noncentral.search_replicates(
            lambda k: float(
                noncentral.power(
                    k * lam1, self.df_test, k * self.design.n_obs - self.design.rank, self.alpha
                )
            ),
            target,
            lo_valid,
            cap,
        )
        if r is None:
            reached = self.power(delta + self.target, replicates=cap).power
            raise UnreachablePowerError(
                f"power {target:g} is not reached within max_replicates={cap} (power there is"
                f" {reached:.4g}, n = {cap * self.design.n_obs}). The effect is too small for"
                " this design and sigma: raise max_replicates, or plan a larger effect."
            )
        detail = self.power(delta + self.target, replicates=r)
        previous = (
            float(self.power(delta + self.target, replicates=r - 1).power)
            if r - 1 >= lo_valid
            else float("nan")
        )
        return SampleSize(
            target_power=target,
            replicates=r,
            n_obs=r * self.design.n_obs,
            power=detail.power,
            previous_power=previous,
            result=detail,
        )

    @_plan_doc
    def detectable_effect(
        self,
        power: float,
        direction: object = None,
        *,
        beta_direction: object = None,
        replicates: int = 1,
    ) -> DetectableEffect:
        """Smallest multiple of a direction that the test detects with the given power.

        The alternative is ``Cβ = d + s·h`` with ``h`` the direction; the scale ``s > 0`` is the
        one at which the power equals ``power``.

        Parameters
        ----------
        %(target_power)s
        direction : float or (m,) array_like, optional
            ``h``, in units of ``Cβ``, one entry per row.  Defaults to 1 for a one-row system.
        beta_direction : mapping or Series, optional
            A direction ``b`` in coefficients, by name (``h = C·b``); the result then also
            gives ``s·b`` (:attr:`DetectableEffect.beta_shift`).
        replicates : int, default 1

        Returns
        -------
        DetectableEffect

        Examples
        --------
        %(two_group_plan)s
        >>> mde = plan.detectable_effect(0.8, replicates=64)
        >>> round(mde.scale, 4), round(mde.power, 6)
        (0.4991, 0.8)
        """
        target = check_target(power, self.alpha)
        r = check_replicates(replicates)
        df2 = self._df_den(r)
        c = self.matrix.to_numpy()
        beta_dir: NDArray[np.float64] | None = None
        if direction is not None and beta_direction is not None:
            raise InputError("give direction= or beta_direction=, not both.")
        if beta_direction is not None:
            beta_dir = self._beta_vector(beta_direction, "beta_direction")
            h = c @ beta_dir
        elif direction is not None:
            h = self._row_values(direction, "direction")
            self._consistent(h, "direction")
        elif len(self.labels) == 1:
            h = np.ones(1)
        else:
            raise InputError(
                f"the system has {len(self.labels)} rows: give a direction= (one value per row,"
                " in units of Cβ) or beta_direction= (by coefficient name)."
            )
        lam1 = self._lambda1(h)
        if not lam1 > 0:
            raise InputError(
                f"the direction {h.tolist()} does not move Cβ (it is zero on every restriction"
                " row): give a direction with a nonzero value on some row."
            )
        lam_star = noncentral.lambda_for(target, self.df_test, df2, self.alpha)
        s = float(self.sigma * np.sqrt(lam_star / (r * lam1)))
        delta = s * h
        beta_shift = None
        if beta_dir is not None:
            beta_shift = pd.Series(s * beta_dir, index=list(self.design.names), name="shift")
        return DetectableEffect(
            **self._recorded(),
            target_power=target,
            scale=s,
            direction=h,
            target=self.target.copy(),
            shift=delta,
            alternative=self.target + delta,
            df_error=df2,
            noncentrality=lam_star,
            power=float(
                noncentral.power(r * lam1 * s**2 / self.sigma**2, self.df_test, df2, self.alpha)
            ),
            replicates=r,
            n_obs=r * self.design.n_obs,
            beta_shift=beta_shift,
        )

    @three_groups_doc
    def curve(
        self,
        effect: object = None,
        *,
        beta: object = None,
        replicates: Iterable[int] | None = None,
        target: float | None = None,
    ) -> PowerCurve:
        """Power against the number of replicates (and so of observations).

        Parameters
        ----------
        effect, beta
            The alternative (see the class notes).
        replicates : iterable of int, optional
            Replicate counts to evaluate.  Default: from the fewest usable replicates up to the
            count that reaches power 0.99 (at most 60 counts, spaced geometrically past that).
        target : float, optional
            A target power to mark on the plot (and to record on the curve).

        Returns
        -------
        PowerCurve

        Examples
        --------
        %(three_groups)s
        >>> cv = lc.power_plan(d, lc.term("g") == 0, sigma=1.0).curve(
        ...     beta={"g[T.b]": 1.0, "g[T.c]": 0.0}, replicates=[2, 5, 10])
        >>> cv.to_frame()[["replicates", "n_obs", "df_error"]].values.tolist()
        [[2, 6, 3], [5, 15, 12], [10, 30, 27]]
        """
        if target is not None:
            target = check_target(target, self.alpha)
        delta = self.shift(effect, beta=beta)
        lam1 = self._lambda1(delta) / self.sigma**2
        d = self.design
        if replicates is None:
            reps = self._default_replicates(lam1)
        else:
            if isinstance(replicates, (str, bytes)) or not isinstance(replicates, Iterable):
                raise ParameterError(
                    f"replicates must be an iterable of whole numbers, got {replicates!r}."
                )
            reps = np.array(sorted({check_replicates(k) for k in replicates}), dtype=np.int64)
            if reps.size == 0:
                raise ParameterError("replicates is empty; give at least one replicate count.")
            self._df_den(int(reps[0]))
        df2 = reps * d.n_obs - d.rank
        lam = reps * lam1
        return PowerCurve(
            **self._recorded(),
            shift=delta,
            replicates=reps,
            n_obs=reps * d.n_obs,
            df_error=df2,
            noncentrality=lam.astype(np.float64),
            critical_value=noncentral.critical_value(
                self.df_test, df2.astype(np.float64), self.alpha
            ),
            power=noncentral.power(lam, self.df_test, df2.astype(np.float64), self.alpha),
            target_power=target,
        )

    def _default_replicates(self, lam1: float) -> NDArray[np.int64]:
        d = self.design
        lo = d.min_replicates()
        hi = None
        if lam1 > 0:
            hi = noncentral.search_replicates(
                lambda k: float(
                    noncentral.power(k * lam1, self.df_test, k * d.n_obs - d.rank, self.alpha)
                ),
                0.99,
                lo,
                MAX_REPLICATES,
            )
        hi = lo + 19 if hi is None else max(hi, lo + 4)
        if hi - lo + 1 <= 60:
            return np.arange(lo, hi + 1, dtype=np.int64)
        return np.unique(np.round(np.geomspace(lo, hi, 60)).astype(np.int64))

    # -- presentation ---------------------------------------------------------------------
    def _head(self) -> str:
        red = f"; {len(self.redundant)} redundant row(s)" if self.redundant else ""
        return (
            f"PowerPlan: F test of {len(self.labels)} restriction row(s), rank {self.df_test}{red};"
            f" sigma = {self.sigma:.6g}, alpha = {self.alpha:g}\n{self.design!r}"
        )

    def __repr__(self) -> str:
        rows = [[lab, _num(t)] for lab, t in zip(self.labels, self.target, strict=True)]
        return f"{self._head()}\n{_table_text(['restriction', 'd'], rows)}"

    def _repr_html_(self) -> str:
        import html

        rows = [[lab, _num(t)] for lab, t in zip(self.labels, self.target, strict=True)]
        head = "<br>".join(html.escape(s) for s in self._head().split("\n"))
        table = _table_html(["restriction", "d"], rows)
        return f"<div class='lincomb-plan'><p>{head}</p>{table}</div>"


def power_plan(
    design: PlannedDesign | LinearFit, restrictions: object, *, sigma: float, alpha: float = 0.05
) -> PowerPlan:
    """Set up power calculations for the Wald F test of a restriction system.

    Parameters
    ----------
    design : PlannedDesign or LinearFit
        The planned pattern (:func:`planned_design`); a fit's design is used as one replicate.
    restrictions : Restriction, RestrictionSystem, or list of them
        Built with :func:`~lincomb.coef`, :func:`~lincomb.term`, ``==``, ``&`` or
        :func:`~lincomb.from_matrix`, in the design's coefficient names.
    sigma : float
        Residual standard deviation the study expects (> 0).
    alpha : float, default 0.05
        Significance level, in ``(0, 1)``.

    Returns
    -------
    PowerPlan

    Raises
    ------
    ParameterError
        ``sigma <= 0`` or ``alpha`` outside ``(0, 1)``.
    InconsistentRestrictionError
        Redundant rows whose ``d`` contradicts the rows they depend on.
    NotEstimableError
        A row the planned design cannot estimate (it involves aliased columns).
    UnknownCoefficientError
        A name the design does not have.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> d = lc.planned_design("site", pd.DataFrame({"site": ["north", "south", "east"]}))
    >>> s = lc.coef("site[T.north]")
    >>> plan = lc.power_plan(d, (s == 0) & (lc.coef("site[T.south]") == 0) & (s - lc.coef(
    ...     "site[T.south]") == 0), sigma=2.0)
    >>> plan.df_test, list(plan.redundant)
    (2, [2])
    """
    sig = check_sigma(sigma)
    a = check_alpha(alpha)
    if isinstance(design, LinearFit):
        design = planned_design(design)
    if not isinstance(design, PlannedDesign):
        raise InputError(
            f"design must be a PlannedDesign (see lincomb.planned_design) or a LinearFit, got"
            f" {type(design).__name__}."
        )
    c, d, labels = design.resolve(restrictions)
    sol = design.solution
    cu, analysis = check_rows(sol, c, d, labels, design.names, where="the planned design")
    # one replicate, σ = 1: Cov(Cβ̂) = rootᵀ root with root = R⁻ᵀ C_keptᵀ (C-ordered for BLAS)
    root = np.ascontiguousarray(sol.root(np.asfortranarray(cu[:, sol.kept])))
    return PowerPlan(
        design=design,
        labels=tuple(labels),
        target=d.copy(),
        df_test=int(analysis.independent.size),
        sigma=sig,
        alpha=a,
        redundant=analysis.dependencies,
        matrix=pd.DataFrame(c, index=labels, columns=list(design.names)),
        _cu=sol.decision_rows(c),  # where consistency is decided (invariant to column scales)
        _root=root,
        _independent=analysis.independent,
    )
