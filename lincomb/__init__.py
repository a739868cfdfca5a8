"""lincomb: test general linear hypotheses ``C·β = d`` on linear-regression coefficients.

Fit a model with :func:`fit` (formula + DataFrame) or :func:`fit_arrays`, write restrictions
in coefficient names with :func:`coef`, :func:`term`, ``==`` and ``&``, and test them with
:meth:`LinearFit.wald` or impose them with :meth:`LinearFit.restrict`.

>>> import lincomb as lc
>>> f = lc.fit("yield_t_ha ~ C(nitrogen) + variety", lc.datasets.field_trial())
>>> n = lc.term("C(nitrogen)")
>>> res = f.wald(n["80"] - n["40"] == n["160"] - n["80"])
>>> res.df_num
1
"""

from . import datasets, errors, linalg
from .fit import LinearFit, fit, fit_arrays
from .restriction import Expr, Restriction, RestrictionSystem, TermRef, coef, from_matrix, term
from .results import RestrictedFit, WaldTest

__all__ = [
    "fit",
    "fit_arrays",
    "coef",
    "term",
    "from_matrix",
    "LinearFit",
    "WaldTest",
    "RestrictedFit",
    "Expr",
    "Restriction",
    "RestrictionSystem",
    "TermRef",
    "datasets",
    "errors",
    "linalg",
]

__version__ = "0.1.0"
