"""lincomb: test general linear hypotheses ``C·β = d`` on linear-regression coefficients.

Fit a model with :func:`fit` (formula + DataFrame) or :func:`fit_arrays`, write restrictions
in coefficient names with :func:`coef`, :func:`term`, ``==`` and ``&``, and test them with
:meth:`LinearFit.wald` or impose them with :meth:`LinearFit.restrict`.

>>> import lincomb as lc
>>> f = lc.fit("yield_t_ha ~ C(nitrogen) + variety", lc.datasets.field_trial())
>>> n = lc.term("C(nitrogen)")
>>> res = f.wald(n["80"] - n["40"] == n["160"] - n["80"])
>>> res.df_test
1
"""

from lincomb import datasets, errors
from lincomb._builder.contrasts import LevelContrasts, LevelMeans, levels
from lincomb._builder.restriction import (
    Expr,
    Restriction,
    RestrictionSystem,
    TermRef,
    coef,
    from_matrix,
    term,
)
from lincomb._covariance.specs import clustered, common_shocks, given, serial
from lincomb._covariance.wild import WildBootstrapTest, wild_bootstrap
from lincomb._fit.chunked import covariance_pass as chunk_covariance_pass
from lincomb._fit.chunked import fit_array_chunks, fit_chunks
from lincomb._fit.distributed import covariance_pass as dask_covariance_pass
from lincomb._fit.distributed import fit_dask, fit_dask_arrays
from lincomb._fit.estimates import EstimatesFit, from_estimates
from lincomb._fit.linear import LinearFit, fit, fit_arrays
from lincomb._fit.many import ManyFit, fit_many, fit_many_arrays
from lincomb._fit.pooled import combine, without_rows
from lincomb._plan.design import PlannedDesign, planned_design
from lincomb._plan.plan import PowerPlan, power_plan
from lincomb._results import contrast_reports as _contrast_reports  # noqa: F401
from lincomb._results.expected import ExpectedValues
from lincomb._results.level_table import LevelMeanTable
from lincomb._results.many import ManyWaldTest
from lincomb._results.multiplicity import (
    MultipleInference,
    adjust_pvalues,
    pairs_unequal_variances,
)
from lincomb._results.nested import NestedComparison, compare_nested
from lincomb._results.overview import FitOverview
from lincomb._results.row_diagnostics import RowDiagnostics
from lincomb._results.term_tests import TermTests
from lincomb._results.wald import RestrictedFit, WaldBatch, WaldTest
from lincomb._settings import blas_threads, set_blas_threads

__all__ = [
    # fitting
    "fit",
    "fit_arrays",
    "fit_many",
    "fit_many_arrays",
    "fit_chunks",
    "fit_array_chunks",
    "fit_dask",
    "fit_dask_arrays",
    "combine",
    "without_rows",
    "chunk_covariance_pass",
    "dask_covariance_pass",
    "from_estimates",
    "LinearFit",
    "ManyFit",
    "EstimatesFit",
    # restrictions
    "coef",
    "term",
    "from_matrix",
    "levels",
    "Expr",
    "Restriction",
    "RestrictionSystem",
    "TermRef",
    "LevelMeans",
    "LevelContrasts",
    # covariance estimators
    "clustered",
    "serial",
    "common_shocks",
    "wild_bootstrap",
    "WildBootstrapTest",
    "given",
    # results
    "WaldTest",
    "WaldBatch",
    "ManyWaldTest",
    "RestrictedFit",
    "MultipleInference",
    "ExpectedValues",
    "RowDiagnostics",
    "LevelMeanTable",
    "TermTests",
    "FitOverview",
    "NestedComparison",
    "pairs_unequal_variances",
    "adjust_pvalues",
    "compare_nested",
    # planning
    "planned_design",
    "power_plan",
    "PlannedDesign",
    "PowerPlan",
    # settings
    "blas_threads",
    "set_blas_threads",
    # modules
    "datasets",
    "errors",
]

__version__ = "0.1.0"
