"""Typed errors raised by lincomb.

Every error derives from :class:`LincombError`, so ``except LincombError`` catches anything the
library raises on purpose.  Each subclass also derives from the closest built-in exception
(``ValueError``, ``KeyError``/``LookupError``, ``TypeError``) so that generic handlers keep
working.  Messages name the offending term, row or value and say how to fix it.
"""

from __future__ import annotations

__all__ = [
    "LincombError",
    "InputError",
    "MissingValueError",
    "UnseenLevelError",
    "UnknownCoefficientError",
    "UnknownDatasetError",
    "RestrictionShapeError",
    "EmptyRestrictionError",
    "InconsistentRestrictionError",
    "NotEstimableError",
    "DegenerateFitError",
    "IncompatibleFitError",
]


class LincombError(Exception):
    """Base class of every error lincomb raises on purpose."""


class InputError(LincombError, ValueError):
    """Data given to a fit or a test is unusable (NaN/inf, wrong type, bad weights...)."""


class MissingValueError(InputError):
    """Rows with missing values were found and the caller asked for an error."""


class UnseenLevelError(InputError):
    """New data holds a factor level that the fit never saw.

    Formula encoders silently code such a row like the reference level; lincomb refuses it.
    """


class UnknownCoefficientError(LincombError, KeyError):
    """A restriction refers to a coefficient, term or level that the fit does not have."""

    def __str__(self) -> str:  # KeyError quotes its message; keep it readable
        return str(self.args[0]) if self.args else ""


class UnknownDatasetError(LincombError, KeyError):
    """The bundled dataset asked for does not exist."""

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else ""


class RestrictionShapeError(LincombError, ValueError):
    """An explicit ``C`` or ``d`` has the wrong shape or holds NaN/inf."""


class EmptyRestrictionError(LincombError, ValueError):
    """A restriction system has no rows, or a row has no coefficients."""


class InconsistentRestrictionError(LincombError, ValueError):
    """Rows of ``C·β = d`` contradict each other: no β satisfies them all."""


class NotEstimableError(LincombError, ValueError):
    """A restriction row is not estimable under a rank-deficient design."""


class DegenerateFitError(LincombError, ValueError):
    """The fit leaves nothing to estimate the error variance from (no residual df, RSS = 0)."""


class IncompatibleFitError(LincombError, ValueError):
    """Fits, summaries or designs that must match (columns, encoding, weights) do not."""
