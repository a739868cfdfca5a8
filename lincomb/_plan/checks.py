"""Validation of the numbers a power plan is asked about (sigma, alpha, target power, replicates).

Each check returns the value as a plain ``float``/``int`` or raises
:class:`~lincomb.errors.ParameterError` naming the value and the fix.
"""

from __future__ import annotations

import numbers

import numpy as np

from lincomb.errors import ParameterError

__all__ = ["check_sigma", "check_alpha", "check_target", "check_replicates"]


def _real(value: object, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ParameterError(f"{what} must be a real number, got {value!r}.")
    v = float(value)
    if not np.isfinite(v):
        raise ParameterError(f"{what} must be finite, got {value!r}.")
    return v


def check_sigma(sigma: object) -> float:
    s = _real(sigma, "sigma (the residual standard deviation)")
    if s <= 0:
        raise ParameterError(
            f"sigma must be positive, got {sigma!r}: give the residual standard deviation the"
            " study expects, in the response's units (e.g. from a pilot fit's .sigma)."
        )
    return s


def check_alpha(alpha: object) -> float:
    a = _real(alpha, "alpha (the significance level)")
    if not 0 < a < 1:
        raise ParameterError(f"alpha must be in (0, 1), got {alpha!r}; e.g. 0.05.")
    return a


def check_target(target: object, alpha: float) -> float:
    t = _real(target, "the target power")
    if not alpha < t < 1:
        raise ParameterError(
            f"the target power must be in (alpha, 1) = ({alpha:g}, 1), got {target!r}: a test"
            " at level alpha has power alpha at no effect and never reaches 1; e.g. 0.8."
        )
    return t


def check_replicates(value: object, what: str = "replicates") -> int:
    count: int | None = None
    if isinstance(value, bool):
        count = None
    elif isinstance(value, numbers.Integral):
        count = int(value)
    elif isinstance(value, numbers.Real) and float(value).is_integer():
        count = int(float(value))
    if count is None or count < 1:
        raise ParameterError(
            f"{what} must be a whole number of replicates of the planned pattern, at least 1;"
            f" got {value!r}."
        )
    return count
