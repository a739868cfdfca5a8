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

from . import (
    batch,
    chunked,
    contrasts,
    covariance,
    datasets,
    distributed,
    errors,
    linalg,
    many,
    multiplicity,
    plot,
    pooled,
    power,
)
from .chunked import fit_array_chunks, fit_chunks
from .contrasts import LevelContrasts, LevelMeans, levels
from .covariance import clustered, given, serial
from .distributed import fit_dask, fit_dask_arrays
from .fit import LinearFit, fit, fit_arrays
from .many import ManyFit, ManyWaldTest, fit_many, fit_many_arrays
from .multiplicity import MultipleInference, adjust_pvalues
from .pooled import combine, without_rows
from .power import PlannedDesign, PowerPlan, planned_design, power_plan
from .restriction import Expr, Restriction, RestrictionSystem, TermRef, coef, from_matrix, term
from .results import RestrictedFit, WaldBatch, WaldTest

__all__ = [
    "fit",
    "fit_arrays",
    "coef",
    "term",
    "from_matrix",
    "levels",
    "LevelMeans",
    "LevelContrasts",
    "adjust_pvalues",
    "MultipleInference",
    "contrasts",
    "multiplicity",
    "clustered",
    "serial",
    "given",
    "covariance",
    "LinearFit",
    "WaldTest",
    "WaldBatch",
    "RestrictedFit",
    "Expr",
    "Restriction",
    "RestrictionSystem",
    "TermRef",
    "datasets",
    "errors",
    "linalg",
    "batch",
    "plot",
    "power",
    "planned_design",
    "power_plan",
    "PlannedDesign",
    "PowerPlan",
    "fit_many",
    "fit_many_arrays",
    "ManyFit",
    "ManyWaldTest",
    "fit_chunks",
    "fit_array_chunks",
    "fit_dask",
    "fit_dask_arrays",
    "combine",
    "without_rows",
    "chunked",
    "distributed",
    "many",
    "pooled",
]

__version__ = "0.1.0"
