"""The planned design: one replicate of a covariate pattern, factored for power calculations.

A planned pattern is encoded like a fit's design (a formula through formulaic, or arrays) and
factored by the core with a zero response (:func:`lincomb._core.moments_from_arrays`,
:func:`lincomb._core.solve`), so rank, aliasing and working coordinates follow the same rules
(:data:`lincomb._core.RANK_TOL`).  A design built from a formula keeps its formula encoder, so
restrictions on level means (:func:`lincomb.levels`) resolve on it as on a fit.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from lincomb import _core as core
from lincomb._builder.resolver import ModelResolver
from lincomb._core.checks import check_tolerance
from lincomb._docstrings import RANK_TOL_PARAMETER, fill_doc
from lincomb._fit.linear import LinearFit
from lincomb._fit.resolving import ResolvesRestrictions
from lincomb._model.design import CoefficientIndex, design_from_arrays, design_from_formula
from lincomb._plan.checks import check_replicates
from lincomb.errors import InputError, MissingValueError

if TYPE_CHECKING:  # pragma: no cover
    from collections.abc import Sequence

    from lincomb._plan.plan import PowerPlan

__all__ = ["PlannedDesign", "planned_design", "THREE_GROUPS", "three_groups_doc"]

#: Example set-up: ``d``, a planned design of one three-level factor ``g`` (one row a level).
THREE_GROUPS = """\
>>> import pandas as pd, lincomb as lc
>>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]}))"""
three_groups_doc = fill_doc(three_groups=THREE_GROUPS)

# a placeholder response for formula designs; the plan needs only the right-hand side


@dataclass(frozen=True)
class PlannedDesign(ResolvesRestrictions):
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
        Columns linearly dependent on earlier ones (see :mod:`lincomb._core`).
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
    _index: CoefficientIndex = field(repr=False, compare=False)
    _sol: core.Solution = field(repr=False, compare=False)
    rank_tol: float = field(default=core.RANK_TOL, repr=False)
    _encoder: Any = field(default=None, repr=False, compare=False)

    @property
    def index(self) -> CoefficientIndex:
        """The coefficient index (names, terms, levels) that resolves restrictions."""
        return self._index

    @property
    @three_groups_doc
    def solution(self) -> core.Solution:
        """The rank decision and triangular factor of one replicate of the pattern.

        Examples
        --------
        %(three_groups)s
        >>> d.solution.rank == d.rank
        True
        """
        return self._sol

    def min_replicates(self) -> int:
        """Smallest number of replicates that leaves at least one residual degree of freedom.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]})).min_replicates()
        2
        """
        return self.rank // self.n_obs + 1

    def df_error(self, replicates: int = 1) -> int:
        """Residual degrees of freedom ``replicates·n_obs − rank`` (may be ≤ 0).

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> lc.planned_design("g", pd.DataFrame({"g": ["a", "b", "c"]})).df_error(4)
        9
        """
        return check_replicates(replicates) * self.n_obs - self.rank

    @cached_property
    def resolver(self) -> ModelResolver:
        """The resolver of restriction names on this design (built once, used by ``resolve``)."""
        return ModelResolver(self._index, self._encoder)

    def plan(self, restrictions: object, *, sigma: float, alpha: float = 0.05) -> PowerPlan:
        """Shorthand for :func:`power_plan` on this design.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]}))
        >>> d.plan(lc.coef("g[T.b]") == 0, sigma=2.0).sigma
        2.0
        """
        from lincomb._plan.plan import power_plan

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


@fill_doc(rank_tol=RANK_TOL_PARAMETER)
def planned_design(
    source: PlannedDesign | LinearFit | str | ArrayLike | pd.DataFrame,
    data: pd.DataFrame | None = None,
    *,
    weights: str | ArrayLike | None = None,
    names: Sequence[str] | None = None,
    rank_tol: float = core.RANK_TOL,
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
    %(rank_tol)s

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
    check_tolerance("rank_tol", rank_tol)
    formula: str | None
    if isinstance(source, LinearFit):
        if data is not None or weights is not None or names is not None:
            raise InputError(
                "a fit's design is used as it is: pass the fit without data, weights or names."
            )
        design = source.design
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
        design = design_from_formula(f"~ {formula}", data, weights=weights)
        if len(design.dropped):
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
    moments = core.moments_from_arrays(design.x, zero, design.weights, design.intercept)
    sol = core.solve(moments, rank_tol)
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
        _encoder=design.encoder,
    )
