"""Range checks shared by every layer: confidence levels and tolerances.

Every public entry point that takes a confidence level or a tolerance checks it here, so an
out-of-range value raises the same :class:`~lincomb.errors.ParameterError` with the same wording
wherever it is given.
"""

from __future__ import annotations

import math

from lincomb.errors import ParameterError

__all__ = ["check_level", "check_tolerance"]


def check_level(level: float, what: str = "level", example: str = "0.95 for 95%") -> float:
    """Return ``level`` as a float if it lies in (0, 1), else raise.

    Raises
    ------
    ParameterError
        ``level`` is not a number strictly between 0 and 1.

    Examples
    --------
    >>> check_level(0.9)
    0.9
    >>> check_level(95)
    Traceback (most recent call last):
    ...
    lincomb.errors.ParameterError: level must be in (0, 1), got 95; e.g. 0.95 for 95%.
    """
    try:
        value = float(level)
    except (TypeError, ValueError):
        value = math.nan
    if not (0 < value < 1):
        raise ParameterError(f"{what} must be in (0, 1), got {level!r}; e.g. {example}.")
    return value


def check_tolerance(name: str, tol: float, upper: float = 1.0) -> float:
    """Return a relative tolerance as a float if it lies in (0, ``upper``), else raise.

    Raises
    ------
    ParameterError
        ``tol`` is not a number strictly between 0 and ``upper``.

    Examples
    --------
    >>> check_tolerance("rank_tol", 1e-8)
    1e-08
    >>> check_tolerance("rank_tol", 0)
    Traceback (most recent call last):
    ...
    lincomb.errors.ParameterError: rank_tol must be in (0, 1), got 0.
    """
    try:
        value = float(tol)
    except (TypeError, ValueError):
        value = math.nan
    if not (0 < value < upper):
        raise ParameterError(f"{name} must be in (0, {upper:g}), got {tol!r}.")
    return value
