"""Reference distributions of a Wald form: F (finite-sample) or chi-squared (large-sample).

Each covariance estimate brings the denominator degrees of freedom of its F (and t) reference
(``n − rank`` for classical, HC and serial estimators, ``G − 1`` for clusters, or the user's
``df``); ``reference="chi2"`` uses the large-sample chi-squared (and normal) reference instead.
"""

from __future__ import annotations

from scipy import stats

from lincomb.errors import InputError

__all__ = ["check_reference", "reference_result"]


def reference_result(
    quad: float, q: int, df_error: float, reference: str
) -> tuple[str, float, float, float]:
    """``(distribution, statistic, df_error, p_value)`` of a Wald form under the reference."""
    ref = check_reference(reference)
    if q == 0:
        return ref, float("nan"), df_error if ref == "F" else float("inf"), float("nan")
    if ref == "chi2":
        return "chi2", float(quad), float("inf"), float(stats.chi2.sf(quad, q))
    stat = quad / q
    return "F", float(stat), float(df_error), float(stats.f.sf(stat, q, df_error))


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
