"""Planning a study: power, replicates needed and detectable effects for a test of ``C·β = d``.

Before any data exist, the Wald F test of a restriction system has a known distribution under
a stated alternative.  With a planned design ``X`` (one *replicate* of the covariate pattern the
study will run), a residual standard deviation ``σ`` and the value of ``Cβ`` the study should
detect, the F statistic is noncentral F with ``q = rank(C)`` and ``r·n₀ − rank(X)`` degrees of
freedom (``r`` replicates of ``n₀`` rows) and noncentrality

    λ = r · (Cβ − d)ᵀ [C (XᵀX)⁻¹ Cᵀ]⁻¹ (Cβ − d) / σ²,

where ``XᵀX`` is that of one replicate (``r`` replicates multiply it by ``r``).  The power is
``P(F > F_crit)`` with ``F_crit`` the ``1 − α`` quantile of the central F.

Layout
------
* :mod:`lincomb._plan.design`: the planned design (:func:`planned_design`);
* :mod:`lincomb._plan.plan`: the plan and its questions (:func:`power_plan`);
* :mod:`lincomb._plan.results`: the result objects;
* :mod:`lincomb._core.noncentral`: the noncentral-F power and the searches (arrays only);
* :func:`lincomb.plot.power_curve`: the picture of a power curve.

This module gathers their public names.

>>> import pandas as pd, lincomb as lc
>>> pattern = pd.DataFrame({"line": ["L1", "L2", "L3", "L4"] * 2,
...                         "shift": ["early"] * 4 + ["late"] * 4})
>>> plan = lc.power_plan(lc.planned_design("line + shift", pattern), lc.term("line") == 0,
...                      sigma=1.5)
>>> need = plan.replicates_for(0.8, beta={"line[T.L2]": 0.5, "line[T.L3]": 1.0,
...                                       "line[T.L4]": 1.5})
>>> need.replicates, need.n_obs
(11, 88)
"""

from lincomb._core.noncentral import LAMBDA_RTOL, LAMBDA_XTOL
from lincomb._plan.design import PlannedDesign, planned_design
from lincomb._plan.plan import MAX_REPLICATES, PowerPlan, power_plan
from lincomb._plan.results import (
    CURVE_COLUMNS,
    POWER_COLUMNS,
    DetectableEffect,
    PowerCurve,
    PowerResult,
    SampleSize,
)

__all__ = [
    "PlannedDesign",
    "PowerPlan",
    "PowerResult",
    "SampleSize",
    "DetectableEffect",
    "PowerCurve",
    "planned_design",
    "power_plan",
    "POWER_COLUMNS",
    "CURVE_COLUMNS",
    "LAMBDA_XTOL",
    "LAMBDA_RTOL",
    "MAX_REPLICATES",
]
