"""Contrasts on the level means of a factor, whatever coding the fit used.

Users think in group means; a fit stores coefficients of whatever coding its formula chose
(treatment with any reference, sum, Helmert, polynomial, a custom matrix).  This module lets a
restriction be written on the *level means* of a factor and translates it into rows of ``C`` on
the fitted coefficients when a fit resolves it.

>>> import lincomb as lc
>>> n = lc.levels("C(nitrogen)")
>>> n.pairwise()
<LevelContrasts: pairwise differences of C(nitrogen) means = 0>
>>> n.trend(2, values=[0, 40, 80, 160]) & (lc.coef("rainfall_mm") == 0)
<RestrictionSystem: C(nitrogen) trend up to degree 2 (values 0, 40, 80, 160) = 0 & rainfall_mm = 0>

How level means are defined
---------------------------
The mean of level ``a`` is the model's prediction with the factor's variable set to ``a`` and the
other variables at stated values: ``μ_a = x(a, others)·β``, where the row ``x`` is produced by
the fit's own formula encoder (:class:`lincomb._model.encoder.FormulaEncoder`).  A weight
vector ``w`` on the levels then becomes the restriction row ``c = Σ_a w_a x(a, others)``.
Because every coding of a factor spans the same columns space, ``c·β̂`` and its standard
error do not depend on the coding.

* When the weights sum to zero (a *contrast*), terms that do not involve the factor's variable
  cancel exactly and are left out; only variables that interact with the factor need values.
  Give them with :meth:`LevelMeans.holding` (``.holding(shift="late", temperature_c=22)``) or
  average the means with equal weight over the levels of categorical ones with
  :meth:`LevelMeans.averaging`.  A variable the contrast depends on but that has neither raises
  :class:`~lincomb.errors.ContrastError` naming the term.
* Weights that do not sum to zero (within :data:`ZERO_SUM_TOL` of their absolute sum) raise
  :class:`~lincomb.errors.ContrastWeightsError` unless ``zero_sum=False`` is passed to
  :meth:`LevelMeans.weights` (or :meth:`LevelMeans.means` is used).  Such rows depend on every
  variable of the model, so all of them need a value.

Every object here is immutable and lazy: nothing is checked against data until a fit resolves
it (:meth:`~lincomb.LinearFit.wald`, :meth:`~lincomb.LinearFit.restrict`).  The whole term
jointly zero (a coding-dependent statement once the term interacts with others) is
``lc.term("C(dose)") == 0`` from the builder.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any, cast

import numpy as np
import pandas as pd

from lincomb._builder.level_rows import Factor, find_factor, level_rows
from lincomb._builder.recipes import ZERO_SUM_TOL, Recipe, build_weights
from lincomb._builder.resolver import ModelResolver
from lincomb._builder.restriction import (
    Resolver,
    RestrictionSystem,
    _fmt_num,
    _is_number,
    _Item,
    as_system,
)
from lincomb._typing import Array
from lincomb.errors import (
    ContrastError,
    ContrastWeightsError,
    InternalError,
    RestrictionSyntaxError,
)

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit
    from lincomb._results.contrast_reports import OrthogonalityReport, SumOfSquaresPartition

__all__ = [
    "ZERO_SUM_TOL",
    "levels",
    "LevelMeans",
    "LevelContrasts",
    "level_weights",
    "register_report",
]


# ---------------------------------------------------------------------------------------------
# reports that need a fit
# ---------------------------------------------------------------------------------------------
#: The contrast reports (orthogonality, partition) compute on a fit, so they live beside the
#: results (:mod:`lincomb._results.contrast_reports`) and register themselves here when
#: ``lincomb`` is imported; this builder module imports nothing that computes on a fit.
_REPORTS: dict[str, Callable[..., object]] = {}


def register_report(name: str, func: Callable[..., object]) -> None:
    """Register the function behind :meth:`LevelContrasts.orthogonality` or ``.partition``.

    Examples
    --------
    >>> import lincomb as lc
    >>> from lincomb._results import contrast_reports
    >>> register_report("partition", contrast_reports.partition)  # what importing lincomb does
    """
    if name not in ("orthogonality", "partition"):
        raise InternalError(f"unknown contrast report {name!r}; 'orthogonality' or 'partition'.")
    _REPORTS[name] = func


def _report(name: str) -> Callable[..., object]:
    func = _REPORTS.get(name)
    if func is None:  # pragma: no cover - importing lincomb registers both
        raise ContrastError(
            f"the contrast report {name!r} is not available: import lincomb (which loads"
            " lincomb._results.contrast_reports) before asking for it."
        )
    return func


# ---------------------------------------------------------------------------------------------
# the public lazy objects
# ---------------------------------------------------------------------------------------------
def _check_held(values: Mapping[str, Any]) -> tuple[tuple[str, Any], ...]:
    out = []
    for key, val in values.items():
        if not isinstance(key, str) or not key:
            raise RestrictionSyntaxError(
                f"holding() takes variable names as keywords, got {key!r}."
            )
        if isinstance(val, (list, tuple, set, np.ndarray, pd.Series)):
            raise ContrastError(
                f"holding({key}=...) takes one value, got {val!r}. To average over the levels of a"
                f" factor use .averaging({key!r}); for several values build one contrast each."
            )
        out.append((key, val))
    return tuple(out)


def _readable(value: Any) -> str:
    """A held value as written in a label: numbers to 6 significant digits (``55.4``)."""
    if isinstance(value, (float, np.floating)):
        return f"{float(value):.6g}"
    return str(value)


def _setting_text(held: tuple[tuple[str, Any], ...], averaging: tuple[str, ...]) -> str:
    parts = []
    if held:
        parts.append("holding " + ", ".join(f"{k}={_readable(v)}" for k, v in held))
    if averaging:
        parts.append("averaged over " + ", ".join(averaging))
    return " " + "; ".join(parts) if parts else ""


@dataclass(frozen=True, eq=False)
class LevelContrasts(_Item):
    """Rows of weights on a factor's level means: a restriction system resolved by a fit.

    Made by the methods of :class:`LevelMeans`; use it wherever a restriction is accepted
    (``fit.wald(...)``, ``fit.restrict(...)``, combined with ``&``).  Each row says
    ``Σ w_a μ_a = target`` (target 0 unless set with ``== value``).

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
    >>> res = f.wald(lc.levels("line").successive())
    >>> res.labels[0], res.df_test
    ('line[L2] - line[L1]', 3)
    """

    factor: str
    recipe: Recipe
    order: tuple[Any, ...] | None = None
    held: tuple[tuple[str, Any], ...] = ()
    averaged: tuple[str, ...] = ()
    target: float = 0.0

    __hash__ = None  # type: ignore[assignment]

    # -- building ----------------------------------------------------------------------
    def holding(self, **values: Any) -> LevelContrasts:
        """Fix other variables (a level of a factor or a number) where the means are taken.

        Examples
        --------
        >>> import lincomb as lc
        >>> lc.levels("line").pairwise().holding(temperature_c=22.5)
        <LevelContrasts: pairwise differences of line means holding temperature_c=22.5 = 0>
        """
        merged = dict(self.held)
        merged.update(dict(_check_held(values)))
        return replace(self, held=tuple(merged.items()))

    def averaging(self, *variables: str) -> LevelContrasts:
        """Average the means with equal weight over all levels of these categorical factors.

        Examples
        --------
        >>> import lincomb as lc
        >>> lc.levels("line").equal().averaging("shift")
        <LevelContrasts: all line means equal averaged over shift = 0>
        """
        for v in variables:
            if not isinstance(v, str) or not v:
                raise RestrictionSyntaxError(f"averaging() takes variable names, got {v!r}.")
        return replace(self, averaged=tuple(dict.fromkeys(self.averaged + variables)))

    def __eq__(self, other: object) -> LevelContrasts:  # type: ignore[override]
        if not _is_number(other) or not np.isfinite(float(other)):
            return NotImplemented
        return replace(self, target=float(other))

    def __ne__(self, other: object) -> bool:
        raise RestrictionSyntaxError("'!=' builds nothing: a restriction is written with '=='.")

    def __bool__(self) -> bool:
        raise RestrictionSyntaxError(
            "level contrasts have no truth value: combine them with '&' and test them with a"
            " fit, e.g. fit.wald(lc.levels('g').pairwise())."
        )

    def __and__(self, other: object) -> RestrictionSystem:
        return as_system(self) & other

    def __rand__(self, other: object) -> RestrictionSystem:
        return as_system(other) & self

    # -- presentation --------------------------------------------------------------------
    def text(self) -> str:
        """The contrasts in words, with their settings and target.

        Examples
        --------
        >>> import lincomb as lc
        >>> (lc.levels("line").pairwise().holding(shift="late") == 0.5).text()
        'pairwise differences of line means holding shift=late = 0.5'
        """
        tail = f" = {_fmt_num(self.target)}"
        base = self.recipe.describe(self.factor)
        return f"{base}{_setting_text(self.held, self.averaged)}{tail}"

    def __repr__(self) -> str:
        return f"<LevelContrasts: {self.text()}>"

    # -- resolution ----------------------------------------------------------------------
    def _matrix(self, resolver: Any) -> tuple[Factor, Array, Array, list[str]]:
        fac, w, labels = level_weights(self, resolver)
        sums = np.abs(w.sum(axis=1)) > ZERO_SUM_TOL * np.abs(w).sum(axis=1)
        x = level_rows(resolver, fac, self.held, self.averaged, bool(sums.any()))
        return fac, w, w @ x, labels

    def rows(self, index: Resolver) -> Iterator[tuple[Array, float, str]]:
        """Yield ``(row of C, d, label)`` per contrast, resolved through a fit's resolver.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> rows = list(lc.levels("line").versus("L1").rows(ModelResolver.of(f)))
        >>> rows[0][0].tolist(), rows[0][2]
        ([0.0, 1.0, 0.0, 0.0, 0.0, 0.0], 'line[L2] - line[L1]')
        """
        _fac, _w, c, labels = self._matrix(index)
        for i in range(c.shape[0]):
            yield c[i].copy(), self.target, labels[i]

    def weight_matrix(self, fit: LinearFit) -> pd.DataFrame:
        """The weights on the level means: one row per contrast, one column per level.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> lc.levels("line").helmert().weight_matrix(f).round(3).iloc[2].tolist()
        [-0.333, -0.333, -0.333, 1.0]
        """
        fac, w, labels = level_weights(self, ModelResolver.of(fit))
        return pd.DataFrame(w, index=pd.Index(labels, name="contrast"), columns=list(fac.labels))

    def orthogonality(
        self, fit: LinearFit, sizes: Mapping[Any, float] | Sequence[float] | None = None
    ) -> OrthogonalityReport:
        """Check whether the rows are mutually orthogonal, and whether they are a full set.

        Parameters
        ----------
        fit : LinearFit
            Supplies the levels, the group sizes and the estimates' covariance.
        sizes : mapping or sequence, optional
            Group sizes ``n_a`` for the classical check ``Σ_a w_a v_a / n_a = 0``.  Default:
            the fit's own (rows, or sums of weights for a weighted fit, at each level), when
            the fit kept its data rows.

        Returns
        -------
        OrthogonalityReport
            Three checks: with equal group sizes (``Σ_a w_a v_a = 0``), with the group sizes
            (``Σ_a w_a v_a / n_a = 0``), and under the fit (the estimates are uncorrelated:
            the same as the previous check in a one-way layout, and the one that matters
            once other terms enter the model).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> rep = lc.levels("line").helmert().orthogonality(f)
        >>> rep.equal_n, rep.complete
        (True, True)
        """
        return cast("OrthogonalityReport", _report("orthogonality")(self, fit, sizes))

    def partition(self, fit: LinearFit) -> SumOfSquaresPartition:
        """Split the sum of squares of "all means equal" into one component per contrast.

        Valid when the rows are a full set (``k - 1`` zero-sum rows) whose estimates are
        uncorrelated under the fit; then the single-df sums of squares ``σ² t_i²`` add up to
        the sum of squares of the hypothesis that all level means are equal (at the same
        ``holding``/``averaging`` setting), which in a one-way or balanced layout is the factor's
        sum of squares in the analysis of variance.

        Raises
        ------
        NotOrthogonalError
            The set is not full, or two estimates are correlated (the largest pair is named).

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> part = lc.levels("line").helmert().partition(f)
        >>> bool(np.isclose(part.ss.sum(), part.term_ss))
        True
        """
        return cast("SumOfSquaresPartition", _report("partition")(self, fit))


def level_weights(contrasts: LevelContrasts, resolver: Any) -> tuple[Factor, Array, list[str]]:
    """The factor, the weights on its level means and the row labels of ``contrasts``.

    ``resolver`` is a fit's :class:`~lincomb._builder.resolver.ModelResolver`; its formula
    encoder finds the factor and its levels.

    Raises
    ------
    ContrastError
        The fit was made from arrays (no encoder), or the factor is not in its formula.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> fac, w, labels = level_weights(lc.levels("line").versus("L1"), ModelResolver.of(f))
    >>> fac.labels, w[0].tolist(), labels[0]
    (('L1', 'L2', 'L3', 'L4'), [-1.0, 1.0, 0.0, 0.0], 'line[L2] - line[L1]')
    """
    encoder = getattr(resolver, "encoder", None)
    if encoder is None:
        raise ContrastError(
            f"contrasts on the level means of {contrasts.factor!r} need a fit made from a"
            " formula (lc.fit); this fit has no factor information. Write the rows with"
            " lc.coef() instead."
        )
    fac = find_factor(encoder, contrasts.factor, contrasts.order)
    w, labels = build_weights(contrasts.recipe, fac)
    suffix = _setting_text(contrasts.held, contrasts.averaged)
    return fac, w, [lab + suffix for lab in labels]


class LevelMeans:
    """The level means of one factor of a fit, to be compared by contrasts.

    Create with :func:`levels`.  Each method returns a :class:`LevelContrasts` (rows of weights
    on the means, resolved by a fit when tested).  :meth:`holding` and :meth:`averaging` set where
    the means are taken when the factor interacts with other variables.

    Examples
    --------
    >>> import lincomb as lc
    >>> dose = lc.levels("C(dose)").holding(site="north")
    >>> dose.versus("0")
    <LevelContrasts: C(dose) means versus 0 holding site=north = 0>
    """

    __slots__ = ("_factor", "_order", "_held", "_averaging")
    __hash__ = None  # type: ignore[assignment]

    def __init__(
        self,
        factor: str,
        order: Sequence[Any] | None = None,
        held: tuple[tuple[str, Any], ...] = (),
        averaging: tuple[str, ...] = (),
    ) -> None:
        if not isinstance(factor, str) or not factor:
            raise RestrictionSyntaxError(f"levels() needs a factor name, got {factor!r}.")
        self._factor = factor
        self._order = None if order is None else tuple(order)
        self._held = held
        self._averaging = averaging

    def _make(self, recipe: Recipe) -> LevelContrasts:
        return LevelContrasts(
            factor=self._factor,
            recipe=recipe,
            order=self._order,
            held=self._held,
            averaged=self._averaging,
        )

    def holding(self, **values: Any) -> LevelMeans:
        """Fix other variables (a level or a number) at which the means are taken.

        Needed for each variable that interacts with the factor (or, for weights that do not
        sum to zero, for every other variable of the model).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> f.wald(lc.levels("line").holding(shift="late").means()).labels[0]
        'mean line[L1] holding shift=late'
        """
        merged = dict(self._held)
        merged.update(dict(_check_held(values)))
        return LevelMeans(self._factor, self._order, tuple(merged.items()), self._averaging)

    def averaging(self, *variables: str) -> LevelMeans:
        """Average the means with equal weight over all levels of these categorical factors.

        Examples
        --------
        >>> import lincomb as lc
        >>> lc.levels("line").averaging("shift")
        <LevelMeans: line averaged over shift>
        """
        for v in variables:
            if not isinstance(v, str) or not v:
                raise RestrictionSyntaxError(f"averaging() takes variable names, got {v!r}.")
        merged = tuple(dict.fromkeys(self._averaging + variables))
        return LevelMeans(self._factor, self._order, self._held, merged)

    def pairwise(self) -> LevelContrasts:
        """All ``k(k-1)/2`` differences ``μ_j - μ_i`` for ``i < j`` (rank ``k - 1``).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> res = f.wald(lc.levels("line").pairwise())
        >>> len(res.labels), res.df_test
        (6, 3)
        """
        return self._make(Recipe("pairwise"))

    def versus(self, reference: object) -> LevelContrasts:
        """Each other level's mean minus the mean of ``reference``.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> f.wald(lc.levels("line").versus("L2")).labels
        ('line[L1] - line[L2]', 'line[L3] - line[L2]', 'line[L4] - line[L2]')
        """
        return self._make(Recipe("versus", (reference,)))

    def successive(self) -> LevelContrasts:
        """Differences of neighbouring levels ``μ_{i+1} - μ_i`` in level order.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> f.wald(lc.levels("line").successive()).labels
        ('line[L2] - line[L1]', 'line[L3] - line[L2]', 'line[L4] - line[L3]')
        """
        return self._make(Recipe("successive"))

    def helmert(self, following: bool = False) -> LevelContrasts:
        """Each level against the mean of the preceding levels (or of the following ones).

        The ``k - 1`` rows are mutually orthogonal when the groups have equal sizes.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> f.wald(lc.levels("line").helmert()).labels[1]
        'line[L3] - mean(line[L1], line[L2])'
        """
        return self._make(Recipe("helmert", (bool(following),)))

    def trend(
        self,
        degree: int | None = None,
        values: Sequence[float] | Mapping[Any, float] | None = None,
    ) -> LevelContrasts:
        """Orthogonal polynomial components of the means, degree 1 up to ``degree``.

        Parameters
        ----------
        degree : int, optional
            Highest degree (default ``k - 1``, the full set).
        values : sequence or mapping, optional
            Position of each level (default equally spaced), e.g. doses ``[0, 10, 30, 100]``
            in level order, or ``{"0": 0, "10": 10, ...}``.

        Notes
        -----
        Rows are the orthonormal weights of :func:`orthogonal_polynomials` (unit norm, each
        sums to zero, positive leading coefficient), so estimates are on that scale; ``t`` and
        p-values do not depend on the scale.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("yield_t_ha ~ C(nitrogen) + variety", lc.datasets.field_trial())
        >>> dose = lc.levels("C(nitrogen)").trend(2, values=[0, 40, 80, 160])
        >>> f.wald(dose).labels
        ('C(nitrogen) trend: linear', 'C(nitrogen) trend: quadratic')
        """
        vals: Any = values
        if values is not None and not isinstance(values, Mapping):
            vals = tuple(float(v) for v in values)
        elif isinstance(values, Mapping):
            vals = dict(values)
        return self._make(Recipe("trend", (degree, vals)))

    def equal(self) -> LevelContrasts:
        """All level means equal: ``k - 1`` rows ``μ_i - μ_1`` (a joint test of the factor).

        Examples
        --------
        >>> import numpy as np, lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> same = f.wald(lc.levels("line").equal())
        >>> bool(np.isclose(same.stat, f.wald(lc.term("line") == 0).stat))
        True
        """
        return self._make(Recipe("equal"))

    def means(self) -> LevelContrasts:
        """The level means themselves (weights do not sum to zero: fix every other variable).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> f.wald(lc.levels("line").averaging("shift").means() == 500).labels[0]
        'mean line[L1] averaged over shift'
        """
        return self._make(Recipe("means"))

    def weights(
        self,
        *rows: Mapping[Any, float] | Sequence[float],
        labels: Sequence[str] | None = None,
        zero_sum: bool = True,
    ) -> LevelContrasts:
        """Custom weights on the level means, one row per argument.

        Parameters
        ----------
        *rows : mapping or sequence
            ``{level: weight}`` (levels not named get 0) or one weight per level in level order.
        labels : sequence of str, optional
            A label per row (default: the row as algebra on the means).
        zero_sum : bool, default True
            Require each row to sum to zero (a contrast), raising
            :class:`~lincomb.errors.ContrastWeightsError` otherwise.  ``False`` allows
            weighted means, which then need every other variable fixed or averaged.

        Examples
        --------
        >>> import lincomb as lc
        >>> lc.levels("line").weights({"L1": 0.5, "L2": 0.5, "L3": -1})
        <LevelContrasts: 1 weighted combination(s) of line means = 0>
        """
        if not rows:
            raise ContrastWeightsError("weights() needs at least one row of weights.")
        if labels is not None and len(labels) != len(rows):
            raise ContrastWeightsError(f"{len(labels)} labels for {len(rows)} weight rows.")
        frozen = tuple(dict(r) if isinstance(r, Mapping) else tuple(r) for r in rows)
        lab = None if labels is None else tuple(str(s) for s in labels)
        return self._make(Recipe("weights", (frozen, lab, bool(zero_sum))))

    def __repr__(self) -> str:
        return f"<LevelMeans: {self._factor}{_setting_text(self._held, self._averaging)}>"


def levels(factor: str, order: Sequence[Any] | None = None) -> LevelMeans:
    """Refer to the level means of a factor of the model.

    Parameters
    ----------
    factor : str
        The factor as written in the formula (``"C(dose)"``; whitespace and the coding argument
        do not matter, so ``"C(dose)"`` finds ``C(dose, contr.sum)``) or its variable
        (``"dose"``).  Checked when a fit resolves it.
    order : sequence, optional
        Level order for successive, Helmert and trend contrasts (default: the fit's order).

    Returns
    -------
    LevelMeans

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("yield_t_ha ~ C(nitrogen) + variety", lc.datasets.field_trial())
    >>> res = f.wald(lc.levels("C(nitrogen)").trend(values=[0, 40, 80, 160]))
    >>> res.labels[:2]
    ('C(nitrogen) trend: linear', 'C(nitrogen) trend: quadratic')
    """
    return LevelMeans(factor, order)
