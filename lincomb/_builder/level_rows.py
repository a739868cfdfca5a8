"""Finding a factor in a fit's formula encoder and evaluating the model at its levels.

A weight vector on the levels of a factor becomes a row of ``C`` as ``Σ_a w_a x(a, others)``,
where ``x`` is the encoder's row at level ``a`` (see :mod:`lincomb._builder.contrasts`).
"""

from __future__ import annotations

import itertools
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from lincomb._builder.restriction import _is_number
from lincomb._typing import Array
from lincomb.errors import (
    ContrastError,
    LincombError,
    UnknownCoefficientError,
)

__all__ = ["Factor", "find_factor", "level_index", "level_rows", "require_level"]


# ---------------------------------------------------------------------------------------------
# finding the factor and evaluating the model at its levels
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Factor:
    name: str
    variable: str
    levels: tuple[Any, ...]
    labels: tuple[str, ...]


def model_variables(encoder: Any) -> set[str]:
    out: set[str] = set()
    for variables in encoder.term_variables().values():
        out |= variables
    return out


def _squash(s: str) -> str:
    return re.sub(r"\s+", "", s)


def level_index(value: Any, cats: Sequence[Any]) -> int | None:
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


def find_factor(encoder: Any, name: str, order: Sequence[Any] | None) -> Factor:
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
        if name in model_variables(encoder):
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
            i = level_index(v, levs)
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
    return Factor(name=name, variable=var, levels=levs, labels=tuple(str(v) for v in levs))


_WRAPPED = re.compile(r"^C\(\s*([^,()]+?)\s*(?:,.*)?\)$")


def _variable_of(name: str, model_vars: set[str]) -> str:
    """``name`` itself if the model reads it, else the variable inside a ``C(...)`` wrapper."""
    if name in model_vars:
        return name
    m = _WRAPPED.match(name.strip())
    return m.group(1) if m and m.group(1) in model_vars else name


def level_rows(
    resolver: Any,
    factor: Factor,
    at: tuple[tuple[str, Any], ...],
    averaging: tuple[str, ...],
    whole_model: bool,
) -> Array:
    """``(k, p)``: the model row of each level mean (only the factor's terms unless whole)."""
    encoder = resolver.encoder
    var = factor.variable
    cats = encoder.categoricals()
    term_vars = encoder.term_variables()
    model_vars = model_variables(encoder)
    # a factor may be named as the formula wraps it ("C(shift)") or by its variable ("shift")
    pinned = {_variable_of(k, model_vars): v for k, v in at}
    averaging = tuple(_variable_of(k, model_vars) for k in averaging)
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
            i = level_index(pinned[v], levs)
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


def require_level(key: object, fac: Factor, what: str) -> int:
    """Position of level ``key`` of ``fac``; an unknown level raises, naming ``what`` gave it.

    Raises
    ------
    UnknownCoefficientError
        ``key`` is not one of the factor's levels (the levels are listed).
    """
    j = level_index(key, fac.levels)
    if j is None:
        raise UnknownCoefficientError(
            f"{what}: {key!r} is not a level of {fac.name!r}; levels: {list(fac.labels)}."
        )
    return j
