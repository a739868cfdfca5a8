"""Planning a study: power, replicates needed and detectable effects for a test of ``C·β = d``.

Before any data exist, the Wald F test of a restriction system has a known distribution under
a stated alternative.  With a planned design ``X`` (one *replicate* of the covariate pattern the
study will run), a residual standard deviation ``σ`` and the value of ``Cβ`` the study should
detect, the F statistic is noncentral F with ``q = rank(C)`` and ``r·n₀ − rank(X)`` degrees of
freedom (``r`` replicates of ``n₀`` rows) and noncentrality

    λ = r · (Cβ − d)ᵀ [C (XᵀX)⁻¹ Cᵀ]⁻¹ (Cβ − d) / σ²,

where ``XᵀX`` is that of one replicate (``r`` replicates multiply it by ``r``).  The power is
``P(F > F_crit)`` with ``F_crit`` the ``1 − α`` quantile of the central F.

Computation
-----------
The planned design is factored by the core exactly like a fit, with a zero response
(:func:`lincomb.linalg.moments_from_arrays`, :func:`lincomb.linalg.solve`), so rank, aliasing
and working coordinates are decided by the same rules (:data:`lincomb.linalg.RANK_TOL`).  A
system is resolved through the design's coefficient index, mapped to working coordinates and
checked by :func:`lincomb.linalg.analyze_rows` (redundant rows count once; contradictory rows
raise :class:`~lincomb.errors.InconsistentRestrictionError`) and for estimability
(:class:`~lincomb.errors.NotEstimableError`).  The quadratic form is the squared norm of a
triangular solve (:func:`lincomb.linalg.wald_from_root` on ``R⁻ᵀ Cᵀ``); ``XᵀX`` is never formed
nor inverted.  Everything after the plan is built costs nothing that grows with ``n₀``.

Numerics
--------
* Power is ``scipy.stats.ncf.sf`` at the central-F critical value; at ``λ = 0`` it is ``α``
  exactly (scipy's noncentral F is not used there).
* The noncentrality that reaches a target power is found by Brent's method on
  ``power(λ) − target`` (absolute tolerance :data:`LAMBDA_XTOL`, relative :data:`LAMBDA_RTOL`),
  after doubling an upper bracket.  The detectable scale along a direction ``h`` then follows in
  closed form, ``s = σ·sqrt(λ* / (r·λ₁(h)))``, since ``λ`` is quadratic in ``s``.
* The replicate count is the smallest integer with power at least the target, found by doubling
  and integer bisection; it relies on power increasing in ``r`` (both ``λ`` and the residual
  degrees of freedom grow with ``r``).

>>> import pandas as pd, lincomb as lc
>>> pattern = pd.DataFrame({"line": ["L1", "L2", "L3", "L4"] * 2,
...                         "shift": ["early"] * 4 + ["late"] * 4})
>>> plan = lc.power_plan(lc.planned_design("line + shift", pattern), lc.term("line") == 0,
...                      sigma=1.5)
>>> need = plan.replicates_for(0.8, beta={"line[T.L2]": 0.5, "line[T.L3]": 1.0,
...                                       "line[T.L4]": 1.5})
>>> need.replicates, need.n_obs
(11, 88)
"""

from __future__ import annotations

import numbers
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, stats

from lincomb import _core as linalg
from lincomb._builder.restriction import RestrictionSystem, as_system
from lincomb._fit.linear import LinearFit, check_rows
from lincomb._model.design import CoefficientIndex, design_from_arrays, design_from_formula
from lincomb._results.format import _num, _table_html, _table_text
from lincomb.errors import (
    DegenerateFitError,
    InconsistentRestrictionError,
    InputError,
    OptionalDependencyError,
    ParameterError,
    UnreachablePowerError,
)

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = [
    "PlannedDesign",
    "PowerPlan",
    "PowerResult",
    "SampleSize",
    "DetectableEffect",
    "PowerCurve",
    "planned_design",
    "power_plan",
    "POWER_COLUMNS",
    "CURVE_COLUMNS",
    "LAMBDA_XTOL",
    "LAMBDA_RTOL",
    "MAX_REPLICATES",
]

#: Absolute tolerance on the noncentrality when solving ``power(λ) = target``.
LAMBDA_XTOL: float = 1e-12
#: Relative tolerance on the noncentrality when solving ``power(λ) = target``.
LAMBDA_RTOL: float = 4 * np.finfo(float).eps
#: Default upper bound of the replicate search in :meth:`PowerPlan.replicates_for`.
MAX_REPLICATES: int = 1_000_000

#: Columns of :meth:`PowerResult.to_frame` (one row per planned study).
POWER_COLUMNS = (
    "restrictions",
    "rank",
    "replicates",
    "n_obs",
    "df_num",
    "df_den",
    "sigma",
    "alpha",
    "noncentrality",
    "critical_value",
    "power",
)
#: Columns of :meth:`PowerCurve.to_frame` (one row per replicate count).
CURVE_COLUMNS = (
    "replicates",
    "n_obs",
    "df_num",
    "df_den",
    "noncentrality",
    "critical_value",
    "power",
)

# a placeholder response for formula designs; the plan needs only the right-hand side
_RESPONSE = "lincomb_planned_response"


# ---------------------------------------------------------------------------------------------
# validation helpers
# ---------------------------------------------------------------------------------------------
def _real(value: object, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ParameterError(f"{what} must be a real number, got {value!r}.")
    v = float(value)
    if not np.isfinite(v):
        raise ParameterError(f"{what} must be finite, got {value!r}.")
    return v


def _check_sigma(sigma: object) -> float:
    s = _real(sigma, "sigma (the residual standard deviation)")
    if s <= 0:
        raise ParameterError(
            f"sigma must be positive, got {sigma!r}: give the residual standard deviation the"
            " study expects, in the response's units (e.g. from a pilot fit's .sigma)."
        )
    return s


def _check_alpha(alpha: object) -> float:
    a = _real(alpha, "alpha (the significance level)")
    if not 0 < a < 1:
        raise ParameterError(f"alpha must be in (0, 1), got {alpha!r}; e.g. 0.05.")
    return a


def _check_target(target: object, alpha: float) -> float:
    t = _real(target, "the target power")
    if not alpha < t < 1:
        raise ParameterError(
            f"the target power must be in (alpha, 1) = ({alpha:g}, 1), got {target!r}: a test"
            " at level alpha has power alpha at no effect and never reaches 1; e.g. 0.8."
        )
    return t


def _check_replicates(value: object, what: str = "replicates") -> int:
    ok = isinstance(value, numbers.Integral) and not isinstance(value, bool)
    if not ok and isinstance(value, numbers.Real) and float(value).is_integer():
        ok = not isinstance(value, bool)
    if not ok or int(value) < 1:  # type: ignore[call-overload]
        raise ParameterError(
            f"{what} must be a whole number of replicates of the planned pattern, at least 1;"
            f" got {value!r}."
        )
    return int(value)  # type: ignore[call-overload]


# ---------------------------------------------------------------------------------------------
# the planned design
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class PlannedDesign:
    """One replicate of a planned covariate pattern, factored for planning.

    Build it with :func:`planned_design`.  A study runs the pattern ``r`` times: its design is
    the pattern stacked ``r`` times, with ``r·n_obs`` rows and ``XᵀX`` multiplied by ``r``.

    Attributes
    ----------
    names : tuple of str
        Coefficient names in design order.
    n_obs : int
        Rows in one replicate (``n₀``).
    rank : int
        Numerical rank of the design (the same for any number of replicates).
    aliased : tuple of str
        Columns linearly dependent on earlier ones (see :mod:`lincomb.linalg`).
    weighted : bool
        Whether planned precision weights were given.
    formula : str or None
        Right-hand side of the formula the pattern was encoded with.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> d = lc.planned_design("C(dose) + rain", pd.DataFrame({"dose": [0, 10, 20, 40],
    ...                                                     "rain": [1.0, 3.0, 2.0, 4.0]}))
    >>> d.names
    ('Intercept', 'C(dose)[T.10]', 'C(dose)[T.20]', 'C(dose)[T.40]', 'rain')
    >>> d.n_obs, d.rank, d.min_replicates()
    (4, 4, 2)
    """

    names: tuple[str, ...]
    n_obs: int
    rank: int
    aliased: tuple[str, ...]
    weighted: bool
    formula: str | None
    rank_tol: float = field(default=linalg.RANK_TOL, repr=False)
    _index: CoefficientIndex = field(default=None, repr=False, compare=False)  # type: ignore[assignment]
    _sol: linalg.Solution = field(default=None, repr=False, compare=False)  # type: ignore[assignment]

    @property
    def index(self) -> CoefficientIndex:
        """The coefficient index (names, terms, levels) that resolves restrictions."""
        return self._index

    def min_replicates(self) -> int:
        """Smallest number of replicates that leaves at least one residual degree of freedom.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]})).min_replicates()
        2
        """
        return self.rank // self.n_obs + 1

    def df_resid(self, replicates: int = 1) -> int:
        """Residual degrees of freedom ``replicates·n_obs − rank`` (may be ≤ 0).

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]})).df_resid(4)
        9
        """
        return _check_replicates(replicates) * self.n_obs - self.rank

    def resolve(
        self, restrictions: object
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], list[str]]:
        """Turn restrictions into ``(C, d, labels)`` on this design's coefficients.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]}))
        >>> c, target, labels = d.resolve(lc.term("g") == 0)
        >>> c.tolist(), labels
        ([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0]], ['g[T.b] = 0', 'g[T.c] = 0'])
        """
        system: RestrictionSystem = as_system(restrictions)
        return system.resolve(self._index)

    def plan(self, restrictions: object, *, sigma: float, alpha: float = 0.05) -> PowerPlan:
        """Shorthand for :func:`power_plan` on this design.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]}))
        >>> d.plan(lc.coef("g[T.b]") == 0, sigma=2.0).sigma
        2.0
        """
        return power_plan(self, restrictions, sigma=sigma, alpha=alpha)

    def _head(self) -> str:
        what = f"~ {self.formula}" if self.formula else f"{len(self.names)} columns"
        alias = f"; aliased: {', '.join(self.aliased)}" if self.aliased else ""
        return (
            f"PlannedDesign {what}: {self.n_obs} rows per replicate, rank {self.rank} of"
            f" {len(self.names)}{alias}; at least {self.min_replicates()} replicate(s) for a"
            " residual degree of freedom"
        )

    def __repr__(self) -> str:
        return self._head()

    def _repr_html_(self) -> str:
        import html

        return f"<div class='lincomb-plan'><p>{html.escape(self._head())}</p></div>"


def planned_design(
    source: Any,
    data: pd.DataFrame | None = None,
    *,
    weights: str | ArrayLike | None = None,
    names: Sequence[str] | None = None,
    rank_tol: float = linalg.RANK_TOL,
) -> PlannedDesign:
    """Factor one replicate of a planned covariate pattern for power calculations.

    Parameters
    ----------
    source : str, LinearFit, PlannedDesign, array_like or DataFrame
        * a formula right-hand side such as ``"C(dose) * variety + rain"`` (a left-hand side,
          if written, is ignored), encoded from ``data`` with formulaic;
        * a :class:`~lincomb.LinearFit`: its design (rows and weights) is the pattern;
        * a :class:`PlannedDesign`: returned unchanged;
        * a numeric ``(n₀, p)`` array or DataFrame: the design matrix itself (a column of one
          nonzero constant is the intercept; names from ``names`` or the DataFrame's columns).
    data : pandas.DataFrame, optional
        With a formula: one row per planned observation of one replicate.  Not modified.  Every
        factor level the restrictions name must appear in it.
    weights : str or array_like, optional
        Planned precision weights (a column of ``data`` or an array): ``XᵀWX`` replaces ``XᵀX``.
    names : sequence of str, optional
        Column names for an array design.
    rank_tol : float, default 1e-10
        Relative rank tolerance (see :mod:`lincomb.linalg`).

    Returns
    -------
    PlannedDesign

    Raises
    ------
    InputError
        No rows, a formula without data, non-numeric or non-finite entries, bad weights.
    MissingValueError
        The pattern has missing values in the formula's variables.

    Examples
    --------
    >>> import numpy as np, pandas as pd, lincomb as lc
    >>> pattern = pd.DataFrame({"variety": ["Arlen", "Brenna", "Corrin"] * 2,
    ...                         "rain": [400.0, 400, 400, 600, 600, 600]})
    >>> lc.planned_design("variety + rain", pattern).names
    ('Intercept', 'variety[T.Brenna]', 'variety[T.Corrin]', 'rain')
    >>> lc.planned_design(np.c_[np.ones(3), [0.0, 1, 2]], names=["one", "dose"]).rank
    2
    """
    if isinstance(source, PlannedDesign):
        if data is not None or weights is not None or names is not None:
            raise InputError(
                "a PlannedDesign is already built: pass it without data, weights or names."
            )
        return source
    if not (0 < rank_tol < 1):
        raise ParameterError(f"rank_tol must be in (0, 1), got {rank_tol!r}.")
    formula: str | None
    if isinstance(source, LinearFit):
        if data is not None or weights is not None or names is not None:
            raise InputError(
                "a fit's design is used as it is: pass the fit without data, weights or names."
            )
        design = source._design
        formula = source.formula.split("~", 1)[1].strip() if source.formula else None
        rank_tol = source.rank_tol
    elif isinstance(source, str):
        if not isinstance(data, pd.DataFrame):
            raise InputError(
                f"a formula design needs the planned pattern as a DataFrame (data=...), got"
                f" {type(data).__name__}: give one row per planned observation of one replicate."
            )
        formula = source.split("~", 1)[1].strip() if "~" in source else source.strip()
        if not formula:
            raise InputError(f"formula {source!r} has no right-hand side terms.")
        if len(data) == 0:
            raise InputError("the planned pattern has no rows; give one row per observation.")
        response = _RESPONSE
        while response in data.columns:
            response += "_"
        frame = data.assign(**{response: 0.0})
        design = design_from_formula(f"{response} ~ {formula}", frame, weights=weights)
        if len(design.dropped):
            from lincomb.errors import MissingValueError

            raise MissingValueError(
                f"the planned pattern has missing values in rows {list(design.dropped)[:10]}"
                f" ({len(design.dropped)} rows): a plan must state every covariate value; fill"
                " them in or remove those rows."
            )
    else:
        if data is not None:
            raise InputError(
                "data= goes with a formula; for an array design pass the matrix alone."
            )
        n_rows = np.shape(source)[0] if np.ndim(source) >= 1 else 0
        design = design_from_arrays(source, np.zeros(n_rows), names=names, weights=weights)
        formula = None
    if design.x.shape[0] == 0:
        raise InputError("the planned pattern has no rows; give one row per observation.")
    zero = np.zeros(design.x.shape[0])
    moments = linalg.moments_from_arrays(design.x, zero, design.weights, design.intercept)
    sol = linalg.solve(moments, rank_tol)
    idx = design.index
    return PlannedDesign(
        names=idx.names,
        n_obs=int(design.x.shape[0]),
        rank=sol.rank,
        aliased=tuple(idx.names[j] for j in sorted(sol.aliased)),
        weighted=design.weights is not None,
        formula=formula,
        rank_tol=rank_tol,
        _index=idx,
        _sol=sol,
    )


# ---------------------------------------------------------------------------------------------
# noncentral F helpers (vectorized; no names)
# ---------------------------------------------------------------------------------------------
def _critical(q: int, df2: NDArray[np.float64] | float, alpha: float) -> NDArray[np.float64]:
    return np.asarray(stats.f.isf(alpha, q, df2), dtype=np.float64)


def _power_from(
    lam: NDArray[np.float64] | float, q: int, df2: NDArray[np.float64] | float, alpha: float
) -> NDArray[np.float64]:
    """Power of the level-``alpha`` F test at noncentrality ``lam`` (elementwise)."""
    lam_a, df2_a = np.broadcast_arrays(np.asarray(lam, float), np.asarray(df2, float))
    crit = _critical(q, df2_a, alpha)
    out = np.full(lam_a.shape, alpha, dtype=np.float64)
    pos = lam_a > 0
    if np.any(pos):
        # scipy's ncf.sf is wrong at nc = 0 (it returns alpha - 1), hence the mask
        out[pos] = stats.ncf.sf(crit[pos], q, df2_a[pos], lam_a[pos])
    return np.clip(out, alpha, 1.0)


def _lambda_for(target: float, q: int, df2: float, alpha: float) -> float:
    """Noncentrality at which the level-``alpha`` F(q, df2) test has power ``target``."""

    def gap(lam: float) -> float:
        return float(_power_from(lam, q, df2, alpha)) - target

    hi = max(1.0, float(q))
    while gap(hi) < 0:
        hi *= 2.0
        if hi > 1e12:  # pragma: no cover - power reaches any target < 1 long before
            raise UnreachablePowerError(f"no noncentrality below 1e12 gives power {target}.")
    return float(optimize.brentq(gap, 0.0, hi, xtol=LAMBDA_XTOL, rtol=LAMBDA_RTOL))


# ---------------------------------------------------------------------------------------------
# the plan
# ---------------------------------------------------------------------------------------------
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
    df_num : int
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
    df_num: int
    sigma: float
    alpha: float
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)
    matrix: pd.DataFrame | None = field(default=None, repr=False)
    _cu: NDArray[np.float64] = field(default=None, repr=False, compare=False)  # type: ignore[assignment]
    _root: NDArray[np.float64] = field(default=None, repr=False, compare=False)  # type: ignore[assignment]
    _independent: NDArray[np.intp] = field(default=None, repr=False, compare=False)  # type: ignore[assignment]

    # -- the alternative ------------------------------------------------------------------
    def _consistent(self, values: NDArray[np.float64], what: str) -> None:
        """Values on dependent rows must follow the rows' dependency, as ``Cβ`` does."""
        check = linalg.analyze_rows(self._cu, values, linalg.ROW_TOL)
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
        c = self.matrix.to_numpy()  # type: ignore[union-attr]
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

    def shift(self, effect: object = None, *, beta: object = None) -> NDArray[np.float64]:
        """``Cβ − d`` under the alternative, one entry per restriction row.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]}))
        >>> plan = lc.power_plan(d, lc.coef("g[T.b]") - lc.coef("g[T.c]") == 1, sigma=1.0)
        >>> plan.shift(beta={"g[T.b]": 3.0, "g[T.c]": 0.5}).tolist()
        [1.5]
        """
        if (effect is None) == (beta is None):
            raise InputError(
                "state the alternative once: effect= (the value of Cβ per restriction row) or"
                " beta= (a full β by coefficient name)."
            )
        c = self.matrix.to_numpy()  # type: ignore[union-attr]
        if beta is not None:
            return c @ self._beta_vector(beta, "beta") - self.target
        values = self._row_values(effect, "effect")
        self._consistent(values, "effect")
        return values - self.target

    def _lambda1(self, delta: NDArray[np.float64]) -> float:
        """Noncentrality of one replicate with σ = 1 (a triangular solve; see module notes)."""
        return linalg.wald_from_root(delta, self._root, self._independent).quad

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
        r = _check_replicates(replicates)
        return r * self._lambda1(self.shift(effect, beta=beta)) / self.sigma**2

    # -- questions ------------------------------------------------------------------------
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
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]}))
        >>> res = lc.power_plan(d, lc.term("g") == 0, sigma=1.0).power(
        ...     beta={"g[T.b]": 1.0, "g[T.c]": 1.0}, replicates=8)
        >>> res.df_num, res.df_den, round(res.noncentrality, 4), round(res.power, 4)
        (2, 21, 5.3333, 0.471)
        """
        r = _check_replicates(replicates)
        delta = self.shift(effect, beta=beta)
        df2 = self._df_den(r)
        lam = r * self._lambda1(delta) / self.sigma**2
        return PowerResult(
            labels=self.labels,
            target=self.target.copy(),
            alternative=self.target + delta,
            shift=delta,
            df_num=self.df_num,
            df_den=df2,
            noncentrality=float(lam),
            critical_value=float(_critical(self.df_num, df2, self.alpha)),
            power=float(_power_from(lam, self.df_num, df2, self.alpha)),
            alpha=self.alpha,
            sigma=self.sigma,
            replicates=r,
            n_obs=r * self.design.n_obs,
            redundant=self.redundant,
        )

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
        power : float
            Target power, in ``(alpha, 1)``.
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
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]}))
        >>> need = lc.power_plan(d, lc.coef("g[T.b]") == 0, sigma=1.0).replicates_for(
        ...     0.8, effect=0.5)
        >>> need.replicates, round(need.power, 4), round(need.previous_power, 4)
        (64, 0.8015, 0.7952)
        """
        target = _check_target(power, self.alpha)
        cap = _check_replicates(max_replicates, "max_replicates")
        delta = self.shift(effect, beta=beta)
        lam1 = self._lambda1(delta) / self.sigma**2
        lo_valid = self.design.min_replicates()
        if cap < lo_valid:
            self._df_den(cap)  # raises with the fewest usable replicate count
        r = _search_replicates(
            lambda k: float(
                _power_from(
                    k * lam1, self.df_num, k * self.design.n_obs - self.design.rank, self.alpha
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
        power : float
            Target power, in ``(alpha, 1)``.
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
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]}))
        >>> mde = lc.power_plan(d, lc.coef("g[T.b]") == 0, sigma=1.0).detectable_effect(
        ...     0.8, replicates=64)
        >>> round(mde.scale, 4), round(mde.power, 6)
        (0.4991, 0.8)
        """
        target = _check_target(power, self.alpha)
        r = _check_replicates(replicates)
        df2 = self._df_den(r)
        c = self.matrix.to_numpy()  # type: ignore[union-attr]
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
        lam_star = _lambda_for(target, self.df_num, df2, self.alpha)
        s = float(self.sigma * np.sqrt(lam_star / (r * lam1)))
        delta = s * h
        beta_shift = None
        if beta_dir is not None:
            beta_shift = pd.Series(s * beta_dir, index=list(self.design.names), name="shift")
        return DetectableEffect(
            labels=self.labels,
            target_power=target,
            scale=s,
            direction=h,
            target=self.target.copy(),
            shift=delta,
            alternative=self.target + delta,
            df_num=self.df_num,
            df_den=df2,
            noncentrality=lam_star,
            power=float(_power_from(r * lam1 * s**2 / self.sigma**2, self.df_num, df2, self.alpha)),
            alpha=self.alpha,
            sigma=self.sigma,
            replicates=r,
            n_obs=r * self.design.n_obs,
            beta_shift=beta_shift,
        )

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
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]}))
        >>> cv = lc.power_plan(d, lc.term("g") == 0, sigma=1.0).curve(
        ...     beta={"g[T.b]": 1.0, "g[T.c]": 0.0}, replicates=[2, 5, 10])
        >>> cv.to_frame()[["replicates", "n_obs", "df_den"]].values.tolist()
        [[2, 6, 3], [5, 15, 12], [10, 30, 27]]
        """
        if target is not None:
            target = _check_target(target, self.alpha)
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
            reps = np.array(sorted({_check_replicates(k) for k in replicates}), dtype=np.int64)
            if reps.size == 0:
                raise ParameterError("replicates is empty; give at least one replicate count.")
            self._df_den(int(reps[0]))
        df2 = reps * d.n_obs - d.rank
        lam = reps * lam1
        return PowerCurve(
            labels=self.labels,
            shift=delta,
            alpha=self.alpha,
            sigma=self.sigma,
            df_num=self.df_num,
            replicates=reps,
            n_obs=reps * d.n_obs,
            df_den=df2,
            noncentrality=lam.astype(np.float64),
            critical_value=_critical(self.df_num, df2.astype(np.float64), self.alpha),
            power=_power_from(lam, self.df_num, df2.astype(np.float64), self.alpha),
            target_power=target,
        )

    def _default_replicates(self, lam1: float) -> NDArray[np.int64]:
        d = self.design
        lo = d.min_replicates()
        hi = None
        if lam1 > 0:
            hi = _search_replicates(
                lambda k: float(
                    _power_from(k * lam1, self.df_num, k * d.n_obs - d.rank, self.alpha)
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
            f"PowerPlan: F test of {len(self.labels)} restriction row(s), rank {self.df_num}{red};"
            f" sigma = {self.sigma:.6g}, alpha = {self.alpha:g}\n{self.design._head()}"
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


def _search_replicates(
    power_at: Callable[[int], float], target: float, lo: int, cap: int
) -> int | None:
    """Smallest ``r`` in ``[lo, cap]`` with ``power_at(r) >= target`` (power increasing in r)."""
    if power_at(lo) >= target:
        return lo
    below, above = lo, lo
    while True:
        if above >= cap:
            return None
        above = min(2 * above, cap)
        if power_at(above) >= target:
            break
        below = above
    while above - below > 1:
        mid = (below + above) // 2
        if power_at(mid) >= target:
            above = mid
        else:
            below = mid
    return above


def power_plan(
    design: Any, restrictions: object, *, sigma: float, alpha: float = 0.05
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
    >>> plan.df_num, list(plan.redundant)
    (2, [2])
    """
    sig = _check_sigma(sigma)
    a = _check_alpha(alpha)
    if isinstance(design, LinearFit):
        design = planned_design(design)
    if not isinstance(design, PlannedDesign):
        raise InputError(
            f"design must be a PlannedDesign (see lincomb.planned_design) or a LinearFit, got"
            f" {type(design).__name__}."
        )
    c, d, labels = design.resolve(restrictions)
    sol = design._sol
    cu, analysis = check_rows(sol, c, d, labels, design.names, where="the planned design")
    # one replicate, σ = 1: Cov(Cβ̂) = rootᵀ root with root = R⁻ᵀ C_keptᵀ (C-ordered for BLAS)
    root = np.ascontiguousarray(sol.root(np.asfortranarray(cu[:, sol.kept])))
    return PowerPlan(
        design=design,
        labels=tuple(labels),
        target=d.copy(),
        df_num=int(analysis.independent.size),
        sigma=sig,
        alpha=a,
        redundant=analysis.dependencies,
        matrix=pd.DataFrame(c, index=labels, columns=list(design.names)),
        _cu=cu,
        _root=root,
        _independent=analysis.independent,
    )


# ---------------------------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------------------------
def _effect_rows(
    labels: Sequence[str],
    target: NDArray[np.float64],
    alternative: NDArray[np.float64],
    shift: NDArray[np.float64],
    redundant: Mapping[int, Any],
) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "restriction": list(labels),
            "target": target,
            "alternative": alternative,
            "shift": shift,
            "role": ["redundant" if i in redundant else "independent" for i in range(len(labels))],
        }
    )


def _study_line(res: Any) -> str:
    """The study line of a result with ``replicates, n_obs, df_num, df_den, noncentrality,
    alpha, sigma`` (a :class:`PowerResult` or :class:`DetectableEffect`)."""
    return (
        f"n = {res.n_obs} ({res.replicates} replicate(s)); F({res.df_num}, {res.df_den}) at"
        f" alpha = {res.alpha:g}, sigma = {res.sigma:.6g}; noncentrality = {res.noncentrality:.6g}"
    )


_ROW_HEADER = ["restriction", "d", "alternative Cβ", "shift"]


def _rows_table(frame: pd.DataFrame) -> list[list[str]]:
    out = []
    for t in frame.itertuples():
        mark = " (redundant)" if t.role == "redundant" else ""
        out.append([t.restriction + mark, _num(t.target), _num(t.alternative), _num(t.shift)])
    return out


@dataclass(frozen=True)
class PowerResult:
    """Power of the F test of ``C·β = d`` under one alternative and study size.

    Attributes
    ----------
    labels : tuple of str
    target : (m,) ndarray
        Hypothesized ``d``.
    alternative : (m,) ndarray
        ``Cβ`` under the alternative.
    shift : (m,) ndarray
        ``Cβ − d``.
    df_num, df_den : int
        Degrees of freedom of the F statistic.
    noncentrality : float
        ``λ`` (see :mod:`lincomb.power`).
    critical_value : float
        The ``1 − alpha`` quantile of the central ``F(df_num, df_den)``.
    power : float
        ``P(F > critical_value)`` under the alternative.
    alpha, sigma : float
    replicates, n_obs : int
        Replicates of the pattern and the observations they make.
    redundant : dict

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
    ...     lc.coef("g[T.b]") == 0, sigma=1.0)
    >>> r = plan.power(effect=1.0, replicates=10)
    >>> r.n_obs, r.df_den, round(r.power, 4)
    (20, 18, 0.5620)
    """

    labels: tuple[str, ...]
    target: NDArray[np.float64]
    alternative: NDArray[np.float64]
    shift: NDArray[np.float64]
    df_num: int
    df_den: int
    noncentrality: float
    critical_value: float
    power: float
    alpha: float
    sigma: float
    replicates: int
    n_obs: int
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)

    @property
    def noncentrality_per_obs(self) -> float:
        """``λ / n``: the effect size ``f²`` of the convention ``λ = f²·N``."""
        return self.noncentrality / self.n_obs

    def to_frame(self) -> pd.DataFrame:
        """One row: the columns of :data:`POWER_COLUMNS`.

        ``restrictions`` (the system as algebra), ``rank`` and ``df_num`` (rank of ``C``),
        ``replicates``, ``n_obs``, ``df_den``, ``sigma``, ``alpha``, ``noncentrality``,
        ``critical_value`` (of the central F) and ``power``.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
        ...     lc.coef("g[T.b]") == 0, sigma=1.0)
        >>> plan.power(effect=1.0, replicates=10).to_frame()[["n_obs", "noncentrality"]]
           n_obs  noncentrality
        0     20            5.0
        """
        return pd.DataFrame(
            [
                {
                    "restrictions": " & ".join(self.labels),
                    "rank": self.df_num,
                    "replicates": self.replicates,
                    "n_obs": self.n_obs,
                    "df_num": self.df_num,
                    "df_den": self.df_den,
                    "sigma": self.sigma,
                    "alpha": self.alpha,
                    "noncentrality": self.noncentrality,
                    "critical_value": self.critical_value,
                    "power": self.power,
                }
            ],
            columns=list(POWER_COLUMNS),
        )

    def effect_frame(self) -> pd.DataFrame:
        """One row per restriction row: ``restriction, target, alternative, shift, role``.

        ``target`` is ``d``, ``alternative`` is ``Cβ`` under the alternative, ``shift`` their
        difference; ``role`` is ``"independent"`` or ``"redundant"``.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
        ...     lc.coef("g[T.b]") == 0, sigma=1.0)
        >>> plan.power(effect=1.0, replicates=10).effect_frame().values.tolist()
        [['g[T.b] = 0', 0.0, 1.0, 1.0, 'independent']]
        """
        return _effect_rows(self.labels, self.target, self.alternative, self.shift, self.redundant)

    def _head(self) -> str:
        return (
            f"Power {self.power:.4f} of the F test of {len(self.labels)} restriction row(s),"
            f" rank {self.df_num}\n" + _study_line(self)
        )

    def __repr__(self) -> str:
        return f"{self._head()}\n{_table_text(_ROW_HEADER, _rows_table(self.effect_frame()))}"

    def _repr_html_(self) -> str:
        import html

        head = "<br>".join(html.escape(s) for s in self._head().split("\n"))
        table = _table_html(_ROW_HEADER, _rows_table(self.effect_frame()))
        return f"<div class='lincomb-power'><p><b>{head}</b></p>{table}</div>"


@dataclass(frozen=True)
class SampleSize:
    """The fewest replicates of the planned pattern whose test reaches a target power.

    Attributes
    ----------
    target_power : float
    replicates : int
        Smallest replicate count with power ``>= target_power``.
    n_obs : int
        Observations at that count.
    power : float
        Power reached there.
    previous_power : float
        Power with one replicate fewer (NaN if that leaves no residual degrees of freedom).
    result : PowerResult
        The full power calculation at ``replicates``.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
    ...     lc.coef("g[T.b]") == 0, sigma=1.0)
    >>> need = plan.replicates_for(0.8, effect=1.0)
    >>> need.replicates, bool(need.power >= 0.8 > need.previous_power)
    (17, True)
    """

    target_power: float
    replicates: int
    n_obs: int
    power: float
    previous_power: float
    result: PowerResult = field(repr=False)

    def to_frame(self) -> pd.DataFrame:
        """One row: ``target_power, replicates, n_obs, df_num, df_den, noncentrality, power,
        previous_power, alpha, sigma``.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
        ...     lc.coef("g[T.b]") == 0, sigma=1.0)
        >>> plan.replicates_for(0.8, effect=1.0).to_frame()[["replicates", "n_obs"]]
           replicates  n_obs
        0          17     34
        """
        r = self.result
        return pd.DataFrame(
            [
                {
                    "target_power": self.target_power,
                    "replicates": self.replicates,
                    "n_obs": self.n_obs,
                    "df_num": r.df_num,
                    "df_den": r.df_den,
                    "noncentrality": r.noncentrality,
                    "power": self.power,
                    "previous_power": self.previous_power,
                    "alpha": r.alpha,
                    "sigma": r.sigma,
                }
            ]
        )

    def _head(self) -> str:
        prev = (
            f"; {self.replicates - 1} give {self.previous_power:.4f}"
            if np.isfinite(self.previous_power)
            else ""
        )
        return (
            f"{self.replicates} replicate(s) (n = {self.n_obs}) reach power {self.power:.4f}"
            f" >= {self.target_power:g}{prev}\n" + _study_line(self.result)
        )

    def __repr__(self) -> str:
        return self._head()

    def _repr_html_(self) -> str:
        import html

        head = "<br>".join(html.escape(s) for s in self._head().split("\n"))
        return f"<div class='lincomb-power'><p><b>{head}</b></p></div>"


@dataclass(frozen=True)
class DetectableEffect:
    """The smallest multiple of a direction detected with a target power.

    Attributes
    ----------
    labels : tuple of str
    target_power : float
    scale : float
        ``s``: the alternative is ``Cβ = d + s·direction``.
    direction : (m,) ndarray
        ``h`` in units of ``Cβ``.
    target : (m,) ndarray
        ``d``.
    shift : (m,) ndarray
        ``s·h``.
    alternative : (m,) ndarray
        ``d + s·h``.
    df_num, df_den : int
    noncentrality : float
        ``λ`` at which the power equals the target.
    power : float
        Power at the detectable effect (the target, to the solver's tolerance).
    alpha, sigma : float
    replicates, n_obs : int
    beta_shift : pandas.Series or None
        ``s·b`` by coefficient, when the direction was given in coefficients.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
    ...     lc.coef("g[T.b]") == 0, sigma=1.0)
    >>> round(plan.detectable_effect(0.8, replicates=10).scale, 4)
    1.3249
    """

    labels: tuple[str, ...]
    target_power: float
    scale: float
    direction: NDArray[np.float64]
    target: NDArray[np.float64]
    shift: NDArray[np.float64]
    alternative: NDArray[np.float64]
    df_num: int
    df_den: int
    noncentrality: float
    power: float
    alpha: float
    sigma: float
    replicates: int
    n_obs: int
    beta_shift: pd.Series | None = field(default=None, repr=False)

    def to_frame(self) -> pd.DataFrame:
        """One row per restriction row: ``restriction, target, direction, shift, alternative``.

        ``target`` is ``d``, ``direction`` is ``h``, ``shift`` is ``scale·h`` and
        ``alternative`` is ``d + scale·h``: the value of ``Cβ`` the study detects.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
        ...     lc.coef("g[T.b]") == 0, sigma=1.0)
        >>> plan.detectable_effect(0.8, replicates=10).to_frame().round(4).values.tolist()
        [['g[T.b] = 0', 0.0, 1.0, 1.3249, 1.3249]]
        """
        return pd.DataFrame(
            {
                "restriction": list(self.labels),
                "target": self.target,
                "direction": self.direction,
                "shift": self.shift,
                "alternative": self.alternative,
            }
        )

    def _head(self) -> str:
        return (
            f"Detectable with power {self.target_power:g}: scale {self.scale:.6g} along the"
            f" direction {np.round(self.direction, 6).tolist()}\n" + _study_line(self)
        )

    def __repr__(self) -> str:
        rows = [
            [lab, _num(t), _num(a), _num(s)]
            for lab, t, a, s in zip(
                self.labels, self.target, self.alternative, self.shift, strict=True
            )
        ]
        return f"{self._head()}\n{_table_text(_ROW_HEADER, rows)}"

    def _repr_html_(self) -> str:
        import html

        rows = [
            [lab, _num(t), _num(a), _num(s)]
            for lab, t, a, s in zip(
                self.labels, self.target, self.alternative, self.shift, strict=True
            )
        ]
        head = "<br>".join(html.escape(s) for s in self._head().split("\n"))
        return (
            f"<div class='lincomb-power'><p><b>{head}</b></p>{_table_html(_ROW_HEADER, rows)}</div>"
        )


@dataclass(frozen=True)
class PowerCurve:
    """Power of the F test against the number of replicates of the planned pattern.

    Attributes
    ----------
    labels : tuple of str
    shift : (m,) ndarray
        ``Cβ − d`` under the alternative.
    alpha, sigma : float
    df_num : int
    replicates, n_obs, df_den : (k,) ndarray of int
    noncentrality, critical_value, power : (k,) ndarray
    target_power : float or None
        A target power recorded for display.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
    ...     lc.coef("g[T.b]") == 0, sigma=1.0)
    >>> cv = plan.curve(effect=1.0, replicates=[5, 10, 20], target=0.8)
    >>> cv.n_obs.tolist(), bool((cv.power[1:] > cv.power[:-1]).all())
    ([10, 20, 40], True)
    """

    labels: tuple[str, ...]
    shift: NDArray[np.float64]
    alpha: float
    sigma: float
    df_num: int
    replicates: NDArray[np.int64]
    n_obs: NDArray[np.int64]
    df_den: NDArray[np.int64]
    noncentrality: NDArray[np.float64]
    critical_value: NDArray[np.float64]
    power: NDArray[np.float64]
    target_power: float | None = None

    def to_frame(self) -> pd.DataFrame:
        """One row per replicate count: the columns of :data:`CURVE_COLUMNS`.

        ``replicates``, ``n_obs`` (observations), ``df_num``, ``df_den``, ``noncentrality``
        (``λ``), ``critical_value`` (of the central F at ``alpha``) and ``power``.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
        ...     lc.coef("g[T.b]") == 0, sigma=1.0)
        >>> plan.curve(effect=1.0, replicates=[2, 5]).to_frame()[["n_obs", "df_den"]]
           n_obs  df_den
        0      4       2
        1     10       8
        """
        return pd.DataFrame(
            {
                "replicates": self.replicates,
                "n_obs": self.n_obs,
                "df_num": self.df_num,
                "df_den": self.df_den,
                "noncentrality": self.noncentrality,
                "critical_value": self.critical_value,
                "power": self.power,
            },
            columns=list(CURVE_COLUMNS),
        )

    def plot(self, ax: Axes | None = None) -> Figure:
        """Draw power against the number of observations (needs matplotlib).

        Parameters
        ----------
        ax : matplotlib.axes.Axes, optional
            Axes to draw into; by default a new figure (not tracked by pyplot) is made.

        Returns
        -------
        matplotlib.figure.Figure

        Raises
        ------
        OptionalDependencyError
            matplotlib is not installed.

        Notes
        -----
        Artists carry a ``gid`` for inspection: ``"power"`` (the curve), ``"alpha"`` (the
        level, which is the power at no effect) and ``"target"`` (when a target was given).

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]}))
        >>> cv = lc.power_plan(d, lc.coef("g[T.b]") == 0, sigma=1.0).curve(effect=1.0)
        >>> fig = cv.plot()
        >>> fig.axes[0].get_xlabel()
        'observations (n)'
        """
        try:
            import matplotlib  # noqa: F401
            import matplotlib.figure  # noqa: F401
        except ImportError as exc:
            raise OptionalDependencyError(
                "drawing a power curve needs matplotlib, which is not installed. Install the"
                " plotting extra with `python -m pip install 'lincomb[plot]'` (or"
                " `python -m pip install matplotlib`)."
            ) from exc
        if ax is None:
            # made on pyplot's backend (then released by pyplot) so a notebook shows it inline
            from lincomb.plot import _new_figure

            fig = _new_figure((6.0, 4.0))
            ax = fig.add_subplot()
        else:
            fig = ax.figure  # type: ignore[assignment]
        ax.plot(
            self.n_obs,
            self.power,
            marker="o",
            markersize=3,
            color="#3d5a80",
            gid="power",
            label="power",
        )
        ax.axhline(
            self.alpha, color="#9a9a9a", linestyle=":", gid="alpha", label=f"alpha = {self.alpha:g}"
        )
        if self.target_power is not None:
            ax.axhline(
                self.target_power,
                color="#d1603d",
                linestyle="--",
                gid="target",
                label=f"target {self.target_power:g}",
            )
        ax.set_ylim(0.0, 1.02)
        ax.set_xlabel("observations (n)")
        ax.set_ylabel("power")
        title = " & ".join(self.labels)
        ax.set_title(title if len(title) <= 60 else title[:57] + "...", fontsize="medium")
        ax.legend(loc="lower right", fontsize="small")
        return fig  # type: ignore[return-value]

    def _head(self) -> str:
        return (
            f"Power curve of the F test of {len(self.labels)} restriction row(s), rank"
            f" {self.df_num}; alpha = {self.alpha:g}, sigma = {self.sigma:.6g}"
        )

    def _rows(self) -> list[list[str]]:
        return [
            [str(r), str(n), str(d), _num(lam), f"{p:.4f}"]
            for r, n, d, lam, p in zip(
                self.replicates,
                self.n_obs,
                self.df_den,
                self.noncentrality,
                self.power,
                strict=True,
            )
        ]

    def __repr__(self) -> str:
        header = ["replicates", "n", "df_den", "noncentrality", "power"]
        return f"{self._head()}\n{_table_text(header, self._rows())}"

    def _repr_html_(self) -> str:
        import html

        header = ["replicates", "n", "df_den", "noncentrality", "power"]
        return (
            f"<div class='lincomb-power'><p><b>{html.escape(self._head())}</b></p>"
            f"{_table_html(header, self._rows())}</div>"
        )
