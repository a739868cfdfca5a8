"""The coefficient table of a fit (``coef_frame``), one set of columns for every kind of fit.

:meth:`LinearFit.coef_frame <lincomb.LinearFit.coef_frame>` and
:meth:`EstimatesFit.coef_frame <lincomb.EstimatesFit.coef_frame>` each decide their estimates,
standard errors, reference, degrees of freedom and status; the ratios, p-values, intervals and
the columns themselves are written here once.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy import stats

from lincomb._model.design import CoefficientIndex

__all__ = ["coefficient_frame"]


def coefficient_frame(
    index: CoefficientIndex,
    estimate: NDArray[np.float64],
    se: NDArray[np.float64],
    *,
    level: float,
    reference: str,
    df_error: Any,
    status: Sequence[str] | NDArray[np.str_],
    covariance: str,
    testable: NDArray[np.bool_] | None = None,
) -> pd.DataFrame:
    """One row per coefficient of ``index``, with the columns ``coefficient, term, estimate, se,
    ratio, p, lower, upper, level, status, reference, df_error, covariance``.

    ``ratio`` is ``estimate / se``, referred to t with ``df_error`` (a number, or one per
    coefficient) under ``reference="F"`` and to the standard normal under ``"chi2"``; the
    interval is the marginal one at ``level``.  With ``testable``, the other rows get NaN ratio,
    p and interval.  A coefficient's term is the first term of ``index`` that holds it (the
    intercept's is written ``Intercept``).

    Examples
    --------
    >>> import numpy as np
    >>> from lincomb._fit.estimates import _index_from_names
    >>> index = _index_from_names(["Intercept", "g[T.b]"])
    >>> frame = coefficient_frame(
    ...     index, np.array([1.0, 2.0]), np.array([0.5, 1.0]), level=0.95, reference="chi2",
    ...     df_error=np.inf, status=["estimable"] * 2, covariance="supplied",
    ... )
    >>> frame[["term", "ratio"]].values.tolist()
    [['Intercept', 2.0], ['g', 2.0]]
    """
    dist = stats.t(df_error) if reference == "F" else stats.norm()
    q = dist.ppf(0.5 + level / 2)
    if testable is None:
        ratio = estimate / se
        lower, upper = estimate - q * se, estimate + q * se
    else:
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(testable, estimate / se, np.nan)
        lower = np.where(testable, estimate - q * se, np.nan)
        upper = np.where(testable, estimate + q * se, np.nan)
    term_of: dict[int, str] = {}
    for tlabel, cols in index.terms.items():
        for j in cols:
            term_of.setdefault(j, "Intercept" if tlabel == "1" else tlabel)
    names = list(index.names)
    return pd.DataFrame(
        {
            "coefficient": names,
            "term": [term_of.get(j, names[j]) for j in range(len(names))],
            "estimate": estimate,
            "se": se,
            "ratio": ratio,
            "p": 2 * dist.sf(np.abs(ratio)),
            "lower": lower,
            "upper": upper,
            "level": level,
            "status": status,
            "reference": reference,
            "df_error": df_error,
            "covariance": covariance,
        }
    )
