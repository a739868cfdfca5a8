"""Typed errors raised by lincomb.

Every error derives from :class:`LincombError`, so ``except LincombError`` catches anything the
library raises on purpose.  Each subclass also derives from the closest built-in exception
(``ValueError``, ``KeyError``/``LookupError``, ``TypeError``) so that generic handlers keep
working.  Messages name the offending term, row or value and say how to fix it.
"""

from __future__ import annotations

from typing import TypeVar

import numpy as np

__all__ = [
    "LincombError",
    "InputError",
    "MissingValueError",
    "UnseenLevelError",
    "UnknownCoefficientError",
    "UnknownDatasetError",
    "RestrictionShapeError",
    "EmptyRestrictionError",
    "RestrictionSyntaxError",
    "ZeroDivisorError",
    "InconsistentRestrictionError",
    "NotEstimableError",
    "DegenerateFitError",
    "IncompatibleFitError",
    "NotNestedError",
    "OptionalDependencyError",
    "ParameterError",
    "UnreachablePowerError",
    "CovarianceInputError",
    "TiedTimesError",
    "SingularCovarianceError",
    "RowsUnavailableError",
    "ClusterTaskError",
    "LincombWarning",
    "FewClustersWarning",
    "ContrastError",
    "ContrastWeightsError",
    "NotOrthogonalError",
    "IntegrationAccuracyWarning",
    "ArgumentTypeError",
    "InternalError",
    "SingularFactorError",
]


_Class = TypeVar("_Class", bound=type)


def _caught_as_builtin(cls: _Class) -> _Class:
    """End the docstring of a class that no short example can raise with an Examples section
    showing the built-in class that catches it too (its last base).

    Under ``python -OO`` (docstrings stripped) the class is returned unchanged.
    """
    if cls.__doc__ is not None:
        base = cls.__bases__[-1].__name__
        cls.__doc__ = (
            cls.__doc__.rstrip(" ")
            + "\n    Examples\n    --------\n    >>> import lincomb as lc\n"
            + f"    >>> issubclass(lc.errors.{cls.__name__}, {base})\n    True\n    "
        )
    return cls


class LincombError(Exception):
    """Base class of every error lincomb raises on purpose.

    Examples
    --------
    >>> import lincomb as lc
    >>> try:
    ...     lc.datasets.load("barley")
    ... except lc.errors.LincombError as err:
    ...     print(type(err).__name__)
    UnknownDatasetError
    """


class InputError(LincombError, ValueError):
    """Data given to a fit or a test is unusable (NaN/inf, wrong type, bad weights...).

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> lc.fit_arrays(np.ones((3, 1)), [1.0, np.inf, 2.0])
    Traceback (most recent call last):
    ...
    lincomb.errors.InputError: y holds inf at row 1 ...
    """


class MissingValueError(InputError):
    """Rows with missing values were found and the caller asked for an error.

    Examples
    --------
    >>> import lincomb as lc
    >>> lc.fit("yield_t_ha ~ rainfall_mm", lc.datasets.field_trial(), missing="refuse")
    Traceback (most recent call last):
    ...
    lincomb.errors.MissingValueError: 4 rows have missing values ...
    """


class UnseenLevelError(InputError):
    """New data holds a factor level that the fit never saw.

    Formula encoders silently code such a row like the reference level; lincomb refuses it.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> f.encode(pd.DataFrame({"line": ["L9"]}))
    Traceback (most recent call last):
    ...
    lincomb.errors.UnseenLevelError: new data hold a factor level the fit never saw ...
    """


class UnknownCoefficientError(LincombError, KeyError):
    """A restriction refers to a coefficient, term or level that the fit does not have.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> f.wald(lc.coef("line[T.L7]") == 0)
    Traceback (most recent call last):
    ...
    lincomb.errors.UnknownCoefficientError: no coefficient named 'line[T.L7]'. Did you mean ...
    """

    def __str__(self) -> str:  # KeyError quotes its message; keep it readable
        return str(self.args[0]) if self.args else ""


class UnknownDatasetError(LincombError, KeyError):
    """The bundled dataset asked for does not exist.

    Examples
    --------
    >>> import lincomb as lc
    >>> lc.datasets.load("fill_line")
    Traceback (most recent call last):
    ...
    lincomb.errors.UnknownDatasetError: no bundled dataset named 'fill_line'; ... 'fill_lines'?
    """

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else ""


class RestrictionShapeError(LincombError, ValueError):
    """An explicit ``C`` or ``d`` has the wrong shape or holds NaN/inf.

    Examples
    --------
    >>> import lincomb as lc
    >>> lc.from_matrix([[1.0, 0.0]], d=[0.0, 1.0])
    Traceback (most recent call last):
    ...
    lincomb.errors.RestrictionShapeError: d has 2 entries but C has 1 rows.
    """


class RestrictionSyntaxError(LincombError, TypeError):
    """A restriction was written with an operator that builds nothing linear or nothing at all.

    Raised for ``and``/``or``/``not`` (truth values), ``!=``, ``<``/``<=``/``>``/``>=``, a product
    or quotient of two coefficients, and objects that are not restrictions where one is needed.

    Examples
    --------
    >>> import lincomb as lc
    >>> lc.coef("a") < 1
    Traceback (most recent call last):
    ...
    lincomb.errors.RestrictionSyntaxError: '<' builds nothing: ...
    """


class ZeroDivisorError(LincombError, ZeroDivisionError):
    """A restriction expression was divided by zero.

    Examples
    --------
    >>> import lincomb as lc
    >>> lc.coef("a") / 0
    Traceback (most recent call last):
    ...
    lincomb.errors.ZeroDivisorError: a divided by zero: ...
    """


class EmptyRestrictionError(LincombError, ValueError):
    """A restriction system has no rows, or a row has no coefficients.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> f.wald(lc.coef("line[T.L2]") - lc.coef("line[T.L2]") == 0)
    Traceback (most recent call last):
    ...
    lincomb.errors.EmptyRestrictionError: restriction '0 = 0' has no coefficients left ...
    """


class InconsistentRestrictionError(LincombError, ValueError):
    """Rows of ``C·β = d`` contradict each other: no β satisfies them all.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> l2 = lc.coef("line[T.L2]")
    >>> f.wald((l2 == 0) & (l2 == 1))
    Traceback (most recent call last):
    ...
    lincomb.errors.InconsistentRestrictionError: the restrictions contradict each other: ...
    """


class NotEstimableError(LincombError, ValueError):
    """A restriction row is not estimable under a rank-deficient design.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> a = np.array([1.0, 1, 0, 0, 0, 0])
    >>> x = np.c_[np.ones(6), a, 1 - a, [1.0, 2, 3, 4, 5, 7]]  # a + b = intercept
    >>> f = lc.fit_arrays(x, [1.0, 2, 3, 4, 5, 6.5], names=["Intercept", "a", "b", "x"])
    >>> f.aliased
    ('b',)
    >>> f.wald(lc.coef("a") == 0)
    Traceback (most recent call last):
    ...
    lincomb.errors.NotEstimableError: restriction not estimable ... aliased coefficients ['b']...
    """


class DegenerateFitError(LincombError, ValueError):
    """The fit leaves nothing to estimate the error variance from (no residual df, RSS = 0).

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> lc.fit_arrays(np.c_[np.ones(2), [1.0, 2.0]], [2.0, 4.0])
    Traceback (most recent call last):
    ...
    lincomb.errors.DegenerateFitError: 2 observations for 2 estimable coefficients leave no ...
    """


class IncompatibleFitError(LincombError, ValueError):
    """Fits, summaries or designs that must match (columns, encoding, weights) do not.

    Examples
    --------
    >>> import lincomb as lc
    >>> data = lc.datasets.fill_lines()
    >>> lc.combine([lc.fit("fill_g ~ line", data), lc.fit("fill_g ~ shift", data)])
    Traceback (most recent call last):
    ...
    lincomb.errors.IncompatibleFitError: fit 1 has other coefficients than fit 0 ...
    """


class NotNestedError(IncompatibleFitError):
    """Fits compared as nested are not: other rows, or a column space not inside the next one.

    Examples
    --------
    >>> import lincomb as lc
    >>> data = lc.datasets.fill_lines()
    >>> lc.compare_nested(lc.fit("fill_g ~ line", data), lc.fit("fill_g ~ shift", data))
    Traceback (most recent call last):
    ...
    lincomb.errors.NotNestedError: fit 0 is not nested in fit 1: ...
    """


@_caught_as_builtin
class OptionalDependencyError(LincombError, ImportError):
    """A capability needs an optional extra that is not installed (e.g. ``lincomb[plot]``).

    The message names the missing package and the ``pip install`` command that adds it.
    """


class ParameterError(InputError):
    """A numeric setting is outside its valid range.

    For example a residual standard deviation ``sigma <= 0``, a significance or confidence
    level outside ``(0, 1)``, a tolerance outside its range (``rank_tol``, ``tol``), a target
    power outside ``(alpha, 1)`` or a replicate count below one.  A kind of
    :class:`InputError`.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> design = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]}))
    >>> lc.power_plan(design, lc.coef("g[T.b]") == 0, sigma=0)
    Traceback (most recent call last):
    ...
    lincomb.errors.ParameterError: sigma must be positive, got 0: ...
    """


class UnreachablePowerError(LincombError, ValueError):
    """A planned test cannot reach the target power within the allowed number of replicates.

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> design = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]}))
    >>> plan = lc.power_plan(design, lc.coef("g[T.b]") == 0, sigma=1.0)
    >>> plan.replicates_for(0.8, effect=0.0)
    Traceback (most recent call last):
    ...
    lincomb.errors.UnreachablePowerError: power 0.8 is not reached within ...
    """


class CovarianceInputError(InputError):
    """Input to a covariance estimator is unusable: cluster labels (missing values, wrong
    length, a single cluster), a time order (missing values, ties), a lag, or a supplied
    covariance matrix (shape, names, symmetry, positive semi-definiteness).

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> f.wald(lc.term("line") == 0, covariance=lc.clustered(by=np.zeros(300)))
    Traceback (most recent call last):
    ...
    lincomb.errors.CovarianceInputError: cluster labels ... hold a single cluster ...
    """


class TiedTimesError(CovarianceInputError):
    """A unit of a panel has two rows at the same time point, so lags within the unit are
    undefined (:func:`~lincomb.serial` with ``units=``).

    Examples
    --------
    >>> import lincomb as lc
    >>> sites = lc.datasets.service_sites()
    >>> f = lc.fit("wait_min ~ staffing", sites)
    >>> f.wald(lc.coef("staffing") == 0,
    ...        covariance=lc.serial(lag=1, order="protocol", units="site"))
    Traceback (most recent call last):
    ...
    lincomb.errors.TiedTimesError: time order 'protocol' repeats ... within unit ...
    """


class SingularCovarianceError(LincombError, ValueError):
    """Under the chosen covariance estimator the independent rows of a test have a singular
    covariance (for example more rows than a cluster-robust covariance has clusters).

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("wait_min ~ protocol + C(site)", lc.datasets.service_sites())
    >>> f.wald(lc.term("C(site)") == 0, covariance=lc.clustered(by="site"))
    Traceback (most recent call last):
    ...
    lincomb.errors.SingularCovarianceError: under the cluster by site (40 groups) covariance ...
    """


class RowsUnavailableError(LincombError, ValueError):
    """A computation needs the fit's rows (e.g. a robust covariance), but the fit holds only
    summary statistics.

    Examples
    --------
    >>> import lincomb as lc
    >>> shared = lc.without_rows(lc.fit("fill_g ~ line", lc.datasets.fill_lines()))
    >>> shared.wald(lc.term("line") == 0, covariance="HC3")
    Traceback (most recent call last):
    ...
    lincomb.errors.RowsUnavailableError: this fit was built from a fit shared without its rows ...
    """


@_caught_as_builtin
class ClusterTaskError(LincombError, RuntimeError):
    """A task of a Dask fit failed on the cluster for a reason of the cluster's own (its worker
    process died every time the scheduler tried it, or the scheduler cancelled it).

    No fit is returned: the message names the partition or block whose task failed and carries
    the scheduler's own message, which is also chained as ``__cause__``.  An error raised by the
    user's code or by lincomb inside a task is not wrapped: it reaches the caller as raised.
    """


class LincombWarning(UserWarning):
    """Base class of the warnings lincomb issues on purpose.

    Examples
    --------
    Turn every lincomb warning into an error:

    >>> import warnings, lincomb as lc
    >>> with warnings.catch_warnings():
    ...     warnings.simplefilter("error", lc.errors.LincombWarning)
    ...     try:
    ...         lc.fit("fill_g ~ line", lc.datasets.fill_lines()).wald(
    ...             lc.term("line") == 0, covariance=lc.clustered(by="shift"))
    ...     except lc.errors.LincombWarning as w:
    ...         print(type(w).__name__)
    FewClustersWarning
    """


class FewClustersWarning(LincombWarning):
    """A cluster-robust covariance rests on few clusters (fewer than 30 by default).

    Examples
    --------
    >>> import warnings, lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> with warnings.catch_warnings(record=True) as caught:
    ...     warnings.simplefilter("always")
    ...     res = f.wald(lc.coef("line[T.L2]") == 0, covariance=lc.clustered(by="shift"))
    >>> [str(w.message)[:27] for w in caught]
    ['few clusters: shift (3). Cl']
    """


class ContrastError(LincombError, ValueError):
    """Contrasts on level means cannot be resolved against a fit: the factor is numeric, a
    variable the contrast depends on has no value, the fit has no formula, ...

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ temperature_c", lc.datasets.fill_lines())
    >>> f.wald(lc.levels("temperature_c").pairwise())
    Traceback (most recent call last):
    ...
    lincomb.errors.ContrastError: 'temperature_c' enters this model as a numeric variable, ...
    """


class ContrastWeightsError(ContrastError):
    """Weights on level means are unusable: wrong length, non-finite, all zero, or not summing
    to zero where a contrast is required (pass ``zero_sum=False`` to allow weighted means).

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> f.wald(lc.levels("line").weights([1, 1, 0, 0]))
    Traceback (most recent call last):
    ...
    lincomb.errors.ContrastWeightsError: weight row 0 (line[L1] + line[L2]) sums to 2, not 0, ...
    """


class NotOrthogonalError(ContrastError):
    """A set of contrasts is not a full orthogonal set, so its sums of squares do not add up.

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> lc.levels("line").successive().partition(f)
    Traceback (most recent call last):
    ...
    lincomb.errors.NotOrthogonalError: the estimates of 'line[L2] - line[L1]' and ...
    """


@_caught_as_builtin
class IntegrationAccuracyWarning(LincombWarning, RuntimeWarning):
    """A numerical integration (the ``max-|t|`` distribution) stopped before reaching the requested
    tolerance; the reported standard error says how far it got.
    """


class ArgumentTypeError(LincombError, TypeError):
    """An argument is of a type the function does not take (the message lists what it takes).

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> lc.plot.intervals(f.wald(lc.term("line") == 0), simultaneous=3)
    Traceback (most recent call last):
    ...
    lincomb.errors.ArgumentTypeError: simultaneous must be a method name such as 'max-t', ...
    """


@_caught_as_builtin
class InternalError(LincombError, RuntimeError):
    """An internal consistency check failed: a bug in lincomb, not in the input.

    Raised where a state the code guarantees does not hold (a LAPACK argument error, a shipped
    dataset that disagrees with its declared levels).  Please report it with the call that
    raised it.
    """


class SingularFactorError(LincombError, np.linalg.LinAlgError):
    """A triangular factor has a zero on its diagonal, so no solve with it exists.

    The factors lincomb keeps have nonzero pivots on their kept columns; the error guards the
    low-level triangular solve against being handed anything else.

    Examples
    --------
    >>> import numpy as np
    >>> from lincomb._core import upper_solve
    >>> upper_solve(np.array([[1.0, 2.0], [0.0, 0.0]]), np.ones(2))
    Traceback (most recent call last):
    ...
    lincomb.errors.SingularFactorError: singular matrix: zero at diagonal 1
    """
