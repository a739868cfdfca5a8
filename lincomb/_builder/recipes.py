"""Recipes of contrasts on level means (pairwise, versus, trend, ...) and their weights."""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from lincomb._builder.level_rows import Factor, level_index, require_level
from lincomb._builder.polynomials import orthogonal_polynomials
from lincomb._builder.restriction import _fmt_num, _is_number
from lincomb._typing import Array
from lincomb.errors import (
    ContrastError,
    ContrastWeightsError,
    UnknownCoefficientError,
)

__all__ = ["ZERO_SUM_TOL", "Recipe", "build_weights"]


#: Weights count as summing to zero when ``|Σ w| <= ZERO_SUM_TOL · Σ |w|``.
ZERO_SUM_TOL: float = 1e-10

DEGREE_NAMES = {1: "linear", 2: "quadratic", 3: "cubic", 4: "quartic", 5: "quintic"}


# ---------------------------------------------------------------------------------------------
# recipes: weights on the levels
# ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Recipe:
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


def _weights_row(row: Any, fac: Factor, i: int) -> Array:
    k = len(fac.levels)
    if isinstance(row, Mapping):
        w = np.zeros(k)
        for key, val in row.items():
            j = require_level(key, fac, f"weight row {i}")
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


def build_weights(recipe: Recipe, fac: Factor) -> tuple[Array, list[str]]:
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
            found = level_index(recipe.args[0], fac.levels)
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
                pos[require_level(key, fac, "trend values")] = float(val)
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
            labels.append(f"{name} trend: {DEGREE_NAMES.get(d + 1, f'degree {d + 1}')}")
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
