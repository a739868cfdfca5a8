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

import itertools
import re
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any, cast

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb._builder.restriction import RestrictionSystem, _fmt_num, _is_number, _Item, as_system
from lincomb.errors import (
    ContrastError,
    ContrastWeightsError,
    LincombError,
    UnknownCoefficientError,
)

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit
    from lincomb._results.contrast_reports import OrthogonalityReport, SumOfSquaresPartition

__all__ = [
    "ZERO_SUM_TOL",
    "levels",
    "LevelMeans",
    "LevelContrasts",
    "register_report",
    "ModelResolver",
    "orthogonal_polynomials",
]

Array = NDArray[np.float64]

#: Weights count as summing to zero when ``|Σ w| <= ZERO_SUM_TOL · Σ |w|``.
ZERO_SUM_TOL: float = 1e-10

_DEGREE_NAMES = {1: "linear", 2: "quadratic", 3: "cubic", 4: "quartic", 5: "quintic"}


# ---------------------------------------------------------------------------------------------
# the resolver a fit hands to restriction items
# ---------------------------------------------------------------------------------------------
class ModelResolver:
    """A fit's coefficient index plus its formula encoder, as seen by restriction items.

    It has the methods of :class:`lincomb.restriction.Resolver` (delegated to the index) and an
    ``encoder`` attribute (the fit's :class:`~lincomb._model.encoder.FormulaEncoder`, ``None``
    for fits made from arrays) that :class:`LevelContrasts` uses to evaluate the model at chosen
    levels.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> r = ModelResolver.of(f)
    >>> r.column("line[T.L3]"), r.encoder is not None
    (2, True)
    """

    def __init__(self, index: Any, encoder: Any = None) -> None:
        self.index = index
        self.names: tuple[str, ...] = tuple(index.names)
        self.encoder = encoder

    @classmethod
    def of(cls, fit: LinearFit) -> ModelResolver:
        """The resolver of a fit (works for fits made from arrays too).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> ModelResolver.of(f).names[:2]
        ('Intercept', 'line[T.L2]')
        """
        design = fit._design
        return cls(design.index, design.encoder)

    def column(self, name: str) -> int:
        """Position of the coefficient called ``name``.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> ModelResolver.of(f).column("shift[T.night]")
        5
        """
        return int(self.index.column(name))

    def term_columns(self, term: str) -> tuple[int, ...]:
        """Positions of every coefficient of a model term.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> ModelResolver.of(f).term_columns("line")
        (1, 2, 3)
        """
        return tuple(self.index.term_columns(term))

    def level_column(self, term: str, key: tuple[str, ...]) -> int:
        """Position of the coefficient of ``term`` at the level(s) ``key``.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> ModelResolver.of(f).level_column("line", ("L3",))
        2
        """
        return int(self.index.level_column(term, key))


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
        raise ValueError(f"unknown contrast report {name!r}; 'orthogonality' or 'partition'.")
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
# orthogonal polynomials
# ---------------------------------------------------------------------------------------------
def orthogonal_polynomials(values: Sequence[float] | Array, degree: int | None = None) -> Array:
    """Orthonormal polynomial contrasts on levels placed at ``values``.

    Parameters
    ----------
    values : sequence of float
        Position of each level (``k`` distinct finite numbers), e.g. doses ``[0, 10, 30, 100]``.
    degree : int, optional
        Highest degree, ``1 <= degree <= k - 1`` (default ``k - 1``).

    Returns
    -------
    q : (degree, k) ndarray
        Row ``j`` holds the weights of the degree ``j + 1`` component: rows are orthonormal,
        each sums to zero, and row ``j`` is a polynomial of degree ``j + 1`` in ``values`` with a
        positive leading coefficient (so the linear row increases with ``values``).

    Notes
    -----
    Householder QR of the Vandermonde matrix of the standardized values; the columns of ``Q``
    after the first are the components.  Equal weight is given to each level (the classical
    orthogonal polynomials of a balanced layout).

    Examples
    --------
    >>> import numpy as np
    >>> q = orthogonal_polynomials([1, 2, 3])
    >>> np.round(q / np.abs(q).max(axis=1, keepdims=True), 12).tolist()
    [[-1.0, 0.0, 1.0], [0.5, -1.0, 0.5]]
    """
    x = np.array(values, dtype=np.float64, copy=True).reshape(-1)
    k = x.size
    if k < 2:
        raise ContrastWeightsError(f"a trend needs at least 2 level values, got {k}.")
    if not np.all(np.isfinite(x)):
        raise ContrastWeightsError(f"trend values must be finite, got {x.tolist()}.")
    if np.unique(x).size != k:
        raise ContrastWeightsError(
            f"trend values must be distinct, got {x.tolist()}: two levels at the same position"
            " cannot be told apart by a polynomial."
        )
    if degree is None:
        degree = k - 1
    if isinstance(degree, bool) or not isinstance(degree, (int, np.integer)):
        raise ContrastWeightsError(f"degree must be an integer, got {degree!r}.")
    if not 1 <= degree <= k - 1:
        raise ContrastWeightsError(
            f"degree {degree} is impossible with {k} levels: use 1 to {k - 1}."
        )
    z = (x - x.mean()) / x.std()
    vander = np.vander(z, degree + 1, increasing=True)
    q, r = np.linalg.qr(vander)
    q = q * np.sign(np.diag(r))
    return np.ascontiguousarray(q[:, 1:].T)


# ---------------------------------------------------------------------------------------------
# finding the factor and evaluating the model at its levels
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Factor:
    name: str
    variable: str
    levels: tuple[Any, ...]
    labels: tuple[str, ...]


def _model_vars(encoder: Any) -> set[str]:
    out: set[str] = set()
    for variables in encoder.term_variables().values():
        out |= variables
    return out


def _squash(s: str) -> str:
    return re.sub(r"\s+", "", s)


def _level_index(value: Any, cats: Sequence[Any]) -> int | None:
    for i, c in enumerate(cats):
        try:
            if value == c and not isinstance(value == c, np.ndarray):
                return i
        except Exception:  # noqa: BLE001 - incomparable types simply do not match
            pass
    sv = str(value)
    for i, c in enumerate(cats):
        if str(c) == sv:
            return i
    if isinstance(value, str):
        try:
            fv = float(value)
        except ValueError:
            return None
        for i, c in enumerate(cats):
            if _is_number(c) and float(c) == fv:
                return i
    return None


def _find_factor(encoder: Any, name: str, order: Sequence[Any] | None) -> _Factor:
    cats = encoder.categoricals()
    wanted = _squash(name)
    hit: tuple[str, tuple[Any, ...]] | None = None
    for var, facs in cats.items():
        for expr, levs in facs:
            if _squash(expr) == wanted:
                hit = (var, levs)
    if hit is None and name in cats:
        hit = (name, cats[name][0][1])
    if hit is None:
        idents = set(re.findall(r"[A-Za-z_][A-Za-z0-9_.]*", name))
        found = sorted(idents & set(cats))
        if len(found) == 1:
            hit = (found[0], cats[found[0]][0][1])
    if hit is None:
        known = sorted({expr for facs in cats.values() for expr, _ in facs})
        if name in _model_vars(encoder):
            raise ContrastError(
                f"{name!r} enters this model as a numeric variable, so it has no level means."
                f" Write C({name}) in the formula to treat it as a factor. Factors: {known}"
            )
        raise UnknownCoefficientError(
            f"no categorical factor {name!r} in this fit. Factors: {known}"
            " (name one by its formula expression or its variable)."
        )
    var, levs = hit
    if order is not None:
        idx = []
        for v in order:
            i = _level_index(v, levs)
            if i is None:
                raise UnknownCoefficientError(
                    f"level {v!r} in order= is not a level of {name!r}; levels: "
                    f"{[str(x) for x in levs]}."
                )
            idx.append(i)
        if sorted(idx) != list(range(len(levs))):
            raise ContrastError(
                f"order= must list every level of {name!r} once; got {[str(v) for v in order]}"
                f" for levels {[str(x) for x in levs]}."
            )
        levs = tuple(levs[i] for i in idx)
    return _Factor(name=name, variable=var, levels=levs, labels=tuple(str(v) for v in levs))


def _level_rows(
    resolver: Any,
    factor: _Factor,
    at: tuple[tuple[str, Any], ...],
    averaging: tuple[str, ...],
    whole_model: bool,
) -> Array:
    """``(k, p)``: the model row of each level mean (only the factor's terms unless whole)."""
    encoder = resolver.encoder
    var = factor.variable
    cats = encoder.categoricals()
    term_vars = encoder.term_variables()
    model_vars = _model_vars(encoder)
    pinned = dict(at)
    for key in list(pinned) + list(averaging):
        if key not in model_vars:
            raise ContrastError(
                f"{key!r} is not a variable of this model; its variables: {sorted(model_vars)}."
            )
        if key == var:
            raise ContrastError(
                f"{key!r} is the variable whose level means are compared; it cannot also be"
                " fixed or averaged over."
            )
    both = sorted(set(pinned) & set(averaging))
    if both:
        raise ContrastError(f"{both} are both fixed with .holding() and averaged over; choose one.")
    for key in averaging:
        if key not in cats:
            raise ContrastError(
                f"cannot average over {key!r}: it is numeric in this model. Fix it with"
                f" .holding({key}=value) instead."
            )
    terms = [t for t, tv in term_vars.items() if whole_model or var in tv]
    needs: dict[str, list[str]] = {}
    for t in terms:
        for v in term_vars[t] - {var}:
            needs.setdefault(v, []).append(t)
    missing = sorted(v for v in needs if v not in pinned and v not in averaging)
    if missing:
        why = "; ".join(f"{v!r} (through {', '.join(needs[v])})" for v in missing)
        what = "weights that do not sum to zero" if whole_model else "this contrast"
        fix = ", ".join(f"{v}=..." for v in missing)
        raise ContrastError(
            f"the level means of {factor.name!r} under {what} depend on {why}."
            f" Give values with .holding({fix})"
            + (
                " or average over categorical ones with .averaging(...)."
                if any(v in cats for v in missing)
                else "."
            )
        )
    columns: dict[str, Any] = {}
    for v in needs:
        if v in pinned and v in cats:
            levs = cats[v][0][1]
            i = _level_index(pinned[v], levs)
            if i is None:
                raise UnknownCoefficientError(
                    f"{v}={pinned[v]!r} is not a level of {v!r}; levels: {[str(x) for x in levs]}."
                )
            columns[v] = levs[i]
        elif v in pinned:
            val = pinned[v]
            if not _is_number(val) or not np.isfinite(float(val)):
                raise ContrastError(
                    f"{v} is numeric in this model; give a finite number, not {val!r}."
                )
            columns[v] = float(val)
    avg = [v for v in averaging if v in needs]
    combos = list(itertools.product(*(cats[v][0][1] for v in avg))) or [()]
    k = len(factor.levels)
    g = len(combos)
    frame = pd.DataFrame({var: [lev for lev in factor.levels for _ in range(g)]})
    for v, val in columns.items():
        frame[v] = [val] * (k * g)
    for j, v in enumerate(avg):
        frame[v] = [c[j] for _ in range(k) for c in combos]
    where = f"at the levels of {factor.name!r}"
    try:
        grid, columns_of = encoder.encode_grid(frame, None if whole_model else terms, where)
    except LincombError as exc:
        raise ContrastError(str(exc)) from None
    x = grid.reshape(k, g, -1).mean(axis=1)
    out = np.zeros((k, len(resolver.names)))
    for j, name in enumerate(columns_of):
        try:
            col = resolver.names.index(str(name))
        except ValueError:
            raise ContrastError(
                f"the model's column {name!r} is not among the fit's coefficients; was the fit"
                " built from this formula?"
            ) from None
        out[:, col] = x[:, j]
    return out


# ---------------------------------------------------------------------------------------------
# recipes: weights on the levels
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Recipe:
    kind: str
    args: tuple[Any, ...] = ()

    def describe(self, name: str) -> str:
        k = self.kind
        if k == "pairwise":
            return f"pairwise differences of {name} means"
        if k == "versus":
            return f"{name} means versus {self.args[0]}"
        if k == "successive":
            return f"successive differences of {name} means"
        if k == "helmert":
            side = "following" if self.args[0] else "preceding"
            return f"each {name} mean versus the mean of the {side} ones"
        if k == "trend":
            degree, values = self.args
            deg = "all degrees" if degree is None else f"up to degree {degree}"
            vals = "" if values is None else f" (values {_values_text(values)})"
            return f"{name} trend {deg}{vals}"
        if k == "equal":
            return f"all {name} means equal"
        if k == "means":
            return f"{name} means"
        rows = self.args[0]
        return f"{len(rows)} weighted combination(s) of {name} means"


def _values_text(values: Any) -> str:
    if isinstance(values, Mapping):
        return ", ".join(f"{k}: {_fmt_num(float(v))}" for k, v in values.items())
    return ", ".join(_fmt_num(float(v)) for v in values)


def _ref(name: str, label: str) -> str:
    return f"{name}[{label}]"


def _combo_text(name: str, labels: Sequence[str], w: Array) -> str:
    parts: list[str] = []
    for lab, v in zip(labels, w, strict=True):
        if v == 0:
            continue
        mag = abs(v)
        body = _ref(name, lab) if mag == 1 else f"{_fmt_num(mag)}*{_ref(name, lab)}"
        if not parts:
            parts.append(body if v > 0 else f"-{body}")
        else:
            parts.append(f"{'+' if v > 0 else '-'} {body}")
    return " ".join(parts)


def _weights_row(row: Any, fac: _Factor, i: int) -> Array:
    k = len(fac.levels)
    if isinstance(row, Mapping):
        w = np.zeros(k)
        for key, val in row.items():
            j = _level_index(key, fac.levels)
            if j is None:
                raise UnknownCoefficientError(
                    f"weight row {i}: {key!r} is not a level of {fac.name!r}; levels: "
                    f"{list(fac.labels)}."
                )
            if not _is_number(val):
                raise ContrastWeightsError(
                    f"weight row {i}: weight {val!r} for {key!r} is not a number."
                )
            w[j] += float(val)
    else:
        try:
            w = np.array(row, dtype=np.float64, copy=True).reshape(-1)
        except (TypeError, ValueError):
            raise ContrastWeightsError(f"weight row {i} is not numeric: {row!r}.") from None
        if w.size != k:
            raise ContrastWeightsError(
                f"weight row {i} has {w.size} entries but {fac.name!r} has {k} levels"
                f" {list(fac.labels)}; give one weight per level or a mapping level -> weight."
            )
    if not np.all(np.isfinite(w)):
        raise ContrastWeightsError(f"weight row {i} holds a non-finite weight: {w.tolist()}.")
    if not w.any():
        raise ContrastWeightsError(f"weight row {i} is all zeros; drop it.")
    return w


def _build(recipe: _Recipe, fac: _Factor) -> tuple[Array, list[str]]:
    """Weights on the levels (m, k) and a label per row."""
    k = len(fac.levels)
    name, labs = fac.name, fac.labels
    if k < 2:
        raise ContrastError(f"{name!r} has a single level in this fit; nothing to compare.")
    eye = np.eye(k)
    kind = recipe.kind
    rows: list[Array] = []
    labels: list[str] = []
    if kind == "pairwise":
        for i, j in itertools.combinations(range(k), 2):
            rows.append(eye[j] - eye[i])
            labels.append(f"{_ref(name, labs[j])} - {_ref(name, labs[i])}")
    elif kind in ("versus", "equal"):
        r = 0
        if kind == "versus":
            found = _level_index(recipe.args[0], fac.levels)
            if found is None:
                raise UnknownCoefficientError(
                    f"reference {recipe.args[0]!r} is not a level of {name!r}; levels:"
                    f" {list(labs)}."
                )
            r = found
        for i in range(k):
            if i != r:
                rows.append(eye[i] - eye[r])
                labels.append(f"{_ref(name, labs[i])} - {_ref(name, labs[r])}")
    elif kind == "successive":
        for i in range(1, k):
            rows.append(eye[i] - eye[i - 1])
            labels.append(f"{_ref(name, labs[i])} - {_ref(name, labs[i - 1])}")
    elif kind == "helmert":
        following = recipe.args[0]
        idx = range(k - 1) if following else range(1, k)
        for i in idx:
            others = list(range(i + 1, k)) if following else list(range(i))
            w = eye[i] - eye[others].mean(axis=0)
            rows.append(w)
            if len(others) == 1:
                labels.append(f"{_ref(name, labs[i])} - {_ref(name, labs[others[0]])}")
            else:
                inner = ", ".join(_ref(name, labs[o]) for o in others)
                labels.append(f"{_ref(name, labs[i])} - mean({inner})")
    elif kind == "trend":
        degree, values = recipe.args
        if values is None:
            pos = np.arange(1.0, k + 1.0)
        elif isinstance(values, Mapping):
            pos = np.full(k, np.nan)
            for key, val in values.items():
                at = _level_index(key, fac.levels)
                if at is None:
                    raise UnknownCoefficientError(
                        f"trend value given for {key!r}, which is not a level of {name!r};"
                        f" levels: {list(labs)}."
                    )
                pos[at] = float(val)
            if np.isnan(pos).any():
                lacking = [labs[j] for j in np.flatnonzero(np.isnan(pos))]
                raise ContrastWeightsError(f"trend values are missing for levels {lacking}.")
        else:
            pos = np.array(values, dtype=np.float64).reshape(-1)
            if pos.size != k:
                raise ContrastWeightsError(
                    f"{pos.size} trend values for the {k} levels {list(labs)} of {name!r};"
                    " give one value per level (in that order) or a mapping level -> value."
                )
        q = orthogonal_polynomials(pos, degree)
        for d in range(q.shape[0]):
            rows.append(q[d])
            labels.append(f"{name} trend: {_DEGREE_NAMES.get(d + 1, f'degree {d + 1}')}")
    elif kind == "means":
        for i in range(k):
            rows.append(eye[i])
            labels.append(f"mean {_ref(name, labs[i])}")
    elif kind == "weights":
        given, given_labels, zero_sum = recipe.args
        for i, row in enumerate(given):
            w = _weights_row(row, fac, i)
            total, size = float(w.sum()), float(np.abs(w).sum())
            if zero_sum and abs(total) > ZERO_SUM_TOL * size:
                raise ContrastWeightsError(
                    f"weight row {i} ({_combo_text(name, labs, w)}) sums to {total:.6g}, not 0,"
                    " so it compares no means: it also moves with the overall level. Fix the"
                    " weights, or pass zero_sum=False to estimate a weighted mean on purpose."
                )
            rows.append(w)
            labels.append(
                str(given_labels[i]) if given_labels is not None else _combo_text(name, labs, w)
            )
    else:  # pragma: no cover - guarded by the constructors
        raise ContrastError(f"unknown contrast kind {kind!r}")
    return np.array(rows), labels


# ---------------------------------------------------------------------------------------------
# the public lazy objects
# ---------------------------------------------------------------------------------------------
def _check_held(values: Mapping[str, Any]) -> tuple[tuple[str, Any], ...]:
    out = []
    for key, val in values.items():
        if not isinstance(key, str) or not key:
            raise TypeError(f"holding() takes variable names as keywords, got {key!r}.")
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
    recipe: _Recipe
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
                raise TypeError(f"averaging() takes variable names, got {v!r}.")
        return replace(self, averaged=tuple(dict.fromkeys(self.averaged + variables)))

    def __eq__(self, other: object) -> LevelContrasts:  # type: ignore[override]
        if not _is_number(other) or not np.isfinite(float(other)):  # type: ignore[arg-type]
            return NotImplemented
        return replace(self, target=float(other))  # type: ignore[arg-type]

    def __ne__(self, other: object) -> bool:
        raise TypeError("'!=' builds nothing: a restriction is written with '=='.")

    def __bool__(self) -> bool:
        raise TypeError(
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
    def _factor(self, resolver: Any) -> _Factor:
        encoder = getattr(resolver, "encoder", None)
        if encoder is None:
            raise ContrastError(
                f"contrasts on the level means of {self.factor!r} need a fit made from a formula"
                " (lc.fit); this fit has no factor information. Write the rows with lc.coef()"
                " instead."
            )
        return _find_factor(encoder, self.factor, self.order)

    def _weights(self, resolver: Any) -> tuple[_Factor, Array, list[str]]:
        fac = self._factor(resolver)
        w, labels = _build(self.recipe, fac)
        suffix = _setting_text(self.held, self.averaged)
        return fac, w, [lab + suffix for lab in labels]

    def _matrix(self, resolver: Any) -> tuple[_Factor, Array, Array, list[str]]:
        fac, w, labels = self._weights(resolver)
        sums = np.abs(w.sum(axis=1)) > ZERO_SUM_TOL * np.abs(w).sum(axis=1)
        x = _level_rows(resolver, fac, self.held, self.averaged, bool(sums.any()))
        return fac, w, w @ x, labels

    def rows(self, index: Any) -> Iterator[tuple[Array, float, str]]:
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
        fac, w, labels = self._weights(ModelResolver.of(fit))
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
            raise TypeError(f"levels() needs a factor name, got {factor!r}.")
        self._factor = factor
        self._order = None if order is None else tuple(order)
        self._held = held
        self._averaging = averaging

    def _make(self, recipe: _Recipe) -> LevelContrasts:
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
                raise TypeError(f"averaging() takes variable names, got {v!r}.")
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
        return self._make(_Recipe("pairwise"))

    def versus(self, reference: Any) -> LevelContrasts:
        """Each other level's mean minus the mean of ``reference``.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> f.wald(lc.levels("line").versus("L2")).labels
        ('line[L1] - line[L2]', 'line[L3] - line[L2]', 'line[L4] - line[L2]')
        """
        return self._make(_Recipe("versus", (reference,)))

    def successive(self) -> LevelContrasts:
        """Differences of neighbouring levels ``μ_{i+1} - μ_i`` in level order.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> f.wald(lc.levels("line").successive()).labels
        ('line[L2] - line[L1]', 'line[L3] - line[L2]', 'line[L4] - line[L3]')
        """
        return self._make(_Recipe("successive"))

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
        return self._make(_Recipe("helmert", (bool(following),)))

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
        return self._make(_Recipe("trend", (degree, vals)))

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
        return self._make(_Recipe("equal"))

    def means(self) -> LevelContrasts:
        """The level means themselves (weights do not sum to zero: fix every other variable).

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line + shift", lc.datasets.fill_lines())
        >>> f.wald(lc.levels("line").averaging("shift").means() == 500).labels[0]
        'mean line[L1] averaged over shift'
        """
        return self._make(_Recipe("means"))

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
        return self._make(_Recipe("weights", (frozen, lab, bool(zero_sum))))

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
