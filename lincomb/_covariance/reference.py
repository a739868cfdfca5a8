"""Reference distributions of a Wald form: F (finite-sample) or chi-squared (large-sample).

Each covariance estimate brings the denominator degrees of freedom of its F (and t) reference
(``n − rank`` for classical, HC and serial estimators, ``G − 1`` for clusters, or the user's
``df``); ``reference="chi2"`` uses the large-sample chi-squared (and normal) reference instead.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy import special, stats

from lincomb.errors import InputError, SingularCovarianceError

__all__ = [
    "check_reference",
    "chi2_sf",
    "f_sf",
    "reference_df",
    "reference_result",
    "test_reference",
]


def reference_df(df_error: float, reference: str) -> float:
    """The denominator df a result reports: ``df_error`` under F, ``inf`` under chi2.

    ``reference`` is a checked name (:func:`check_reference`).

    Examples
    --------
    >>> reference_df(40, "F"), reference_df(40, "chi2")
    (40.0, inf)
    """
    return float(df_error) if reference == "F" else float("inf")


def reference_result(
    quad: float, q: int, df_error: float, reference: str
) -> tuple[str, float, float, float]:
    """``(distribution, statistic, df_error, p_value)`` of a Wald form under the reference."""
    ref = check_reference(reference)
    if q == 0:
        return ref, float("nan"), reference_df(df_error, ref), float("nan")
    if ref == "chi2":
        return "chi2", float(quad), float("inf"), chi2_sf(quad, q)
    stat = quad / q
    return "F", float(stat), float(df_error), f_sf(stat, q, df_error)


def f_sf(stat: float, q: int, df_error: float) -> float:
    """Upper tail of F(q, df_error) at ``stat``: ``scipy.special.fdtrc``, the function behind
    ``scipy.stats.f.sf``, without the distribution object's fixed cost per call; outside the
    usual domain (a NaN or infinite statistic, an infinite df) ``stats.f.sf`` itself decides.

    Examples
    --------
    >>> from scipy import stats
    >>> f_sf(2.5, 3, 40.0) == float(stats.f.sf(2.5, 3, 40.0))
    True
    """
    if 0.0 <= stat < np.inf and 0.0 < df_error < np.inf:
        return float(special.fdtrc(q, df_error, stat))
    return float(stats.f.sf(stat, q, df_error))


def chi2_sf(stat: float, q: int) -> float:
    """Upper tail of chi-squared(q) at ``stat``: ``scipy.special.chdtrc`` (the function behind
    ``scipy.stats.chi2.sf``) on the usual domain, ``stats.chi2.sf`` outside it.

    Examples
    --------
    >>> from scipy import stats
    >>> chi2_sf(7.5, 3) == float(stats.chi2.sf(7.5, 3))
    True
    """
    if 0.0 <= stat < np.inf:
        return float(special.chdtrc(q, stat))
    return float(stats.chi2.sf(stat, q))


def check_reference(reference: object) -> str:
    """Validate a reference distribution name (``'F'`` or ``'chi2'``)."""
    if isinstance(reference, str):
        key = reference.strip()
        if key.upper() == "F":
            return "F"
        if key.lower() in ("chi2", "chi-squared", "chisq"):
            return "chi2"
    raise InputError(
        f"reference must be 'F' (finite-sample: F for the system, t for rows) or 'chi2'"
        f" (large-sample: chi-squared for the system, normal for rows); got {reference!r}."
    )


def test_reference(
    estimate: Any, quad: float, q: int, cu_kept: NDArray[np.float64], independent: Any, ref: str
) -> tuple[str, float, float, float, NDArray[np.float64] | None]:
    """``(distribution, statistic, df_error, p_value, row_df)`` of a test under ``estimate``.

    An estimate with per-test small-sample df (see
    :attr:`~lincomb._covariance.estimate.CovarianceEstimate.per_test_df`) refers the system to
    the Hotelling-T² approximation ``(η − q + 1)/(η q) · Q ~ F(q, η − q + 1)`` and each row to
    t with its own df; ``row_df`` is None for the others (every row uses ``df_error``).
    """
    ref = check_reference(ref)
    if ref == "chi2" or not getattr(estimate, "per_test_df", False) or q == 0:
        return (*reference_result(quad, q, estimate.df_error, ref), None)
    rows, eta = estimate.test_df(cu_kept, np.asarray(independent))
    df_error = eta - q + 1
    if not df_error > 0:
        raise SingularCovarianceError(
            f"the {q} restriction rows are too many for the {estimate.label} covariance: its"
            f" estimated degrees of freedom ({eta:.3g}) leave none for an F with {q} numerator"
            " df. Test fewer rows at once, or use the wild cluster bootstrap."
        )
    stat = (df_error / eta) * quad / q
    return "F", float(stat), float(df_error), f_sf(stat, q, df_error), rows
