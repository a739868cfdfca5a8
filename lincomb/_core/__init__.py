"""Numerical core of lincomb: least squares, rank, restrictions and Wald statistics from R factors.

This layer knows nothing of names, formulas or pandas (numpy and scipy only; it may import
:mod:`lincomb.errors` and :mod:`lincomb._settings`, nothing else of lincomb, which
``tests/test_layers.py`` checks).  It works on plain float64 arrays and is the only place where
factorizations happen.  Other layers import its names from this package, never from its
modules:

* :mod:`~lincomb._core.triangular`: :func:`triangular_factor`, :func:`row_pivoted_factor`,
  :func:`upper_solve`, :func:`safe_norm`, :func:`pow2_scale`;
* :mod:`~lincomb._core.moments`: :class:`Moments`, :func:`moments_from_arrays`;
* :mod:`~lincomb._core.merge`: :func:`merge_moments`, :func:`merge_tree`,
  :class:`MomentMerger` (the one balanced tree every route merges with);
* :mod:`~lincomb._core.solve`: the rank decision, :class:`Solution`, :func:`solve`;
* :mod:`~lincomb._core.refine`: :func:`condition_estimate`, :func:`refine` (rows in memory);
* :mod:`~lincomb._core.rows`: :class:`RowAnalysis`, :func:`analyze_rows`;
* :mod:`~lincomb._core.wald`: :class:`WaldCore`, :func:`wald_from_root`,
  :func:`restricted_step`;
* :mod:`~lincomb._core.many`: many responses on one design (:class:`DesignFactor`,
  :class:`ResponseBlock`, :func:`factor_design`, :func:`solve_responses`,
  :func:`wald_quadratic_forms`);
* :mod:`~lincomb._core.observed`: many responses with missing values, each on its own rows
  from the one factor of all rows (:func:`observed_design`,
  :class:`~lincomb._core.observed.ObservedPart`, :class:`ObservedBlock`, :func:`observed_wald`,
  :func:`row_distances`);
* :mod:`~lincomb._core.batch`: many restriction systems on one fit (:func:`wald_systems`).

Everything the later stages need is derived from a small *moment* object (the sufficient
statistics of a weighted least-squares problem):

* the number of rows ``n`` and the sum of weights ``W``;
* the weighted column means (only when the design holds an intercept column, see below);
* the upper-triangular factor ``R`` of the centred, ``sqrt(w)``-scaled ``[X y]``.

Once those exist, no step costs anything that grows with ``n``.  Moments of two row blocks
merge exactly (:func:`merge_moments`); every route that combines blocks (the blocked
in-memory factor, chunked, Dask and combined fits) does so in the one balanced tree of
:func:`merge_tree`.

Coordinates
-----------
The user's coefficients ``β`` (length ``p``) are mapped to *working* coordinates ``u`` in which
all computations happen:

1. If column ``k`` is an intercept (all entries equal to one), every other
   column ``j`` is centred on its weighted mean ``m_j``.  The intercept then absorbs the offset:
   ``u_k = β_k + Σ_j m_j β_j``.  A large common offset (values near 1e12 that vary in the
   10th digit) therefore costs no accuracy beyond what the float64 input holds.
2. Every other column is scaled to unit (centred, weighted) norm: ``u_j = s_j β_j``.  This makes
   the rank decision independent of the units of each column.

A row ``c`` of ``C`` maps to ``c_u = c T⁻¹ S⁻¹`` (see :meth:`Solution.to_working`), which keeps
``c·β = c_u·u`` exactly.

Rank
----
Columns of the centred, scaled ``R`` are taken in design order (a greedy Gram-Schmidt with
reorthogonalization on the small factor).  Column ``j`` is *aliased* when the part of it not
explained by the intercept and the kept columns before it has at most ``rank_tol`` (default
:data:`RANK_TOL` = 1e-10) of the column's own (unit) norm.  So of a set of dependent columns the
last one in design order is aliased, and which one does not depend on rounding.  The kept columns,
then the aliased ones, are refactored by QR.  A non-intercept column whose centred norm is at most
:data:`CONSTANT_TOL` (64 machine epsilons, about 1.4e-14) times its raw norm varies only in its
last bits: it is constant to working precision and aliased with the intercept.  This threshold is
tied to float64 itself rather than to ``rank_tol``, so a column near 1e12 that varies by units
(four significant digits of real variation) is kept and fitted to the accuracy its values hold.

Restrictions
------------
Rows of ``C`` are checked in order, in *decision coordinates* (:meth:`Solution.decision_rows`):
the intercept's column of ``C`` is projected out of every other column of ``C`` (over the rows
of the system, in two passes, before any scaling), the other columns are divided by their
scales ``s_j`` and the intercept's column by ``sqrt(W)``.  That is ``C`` times an invertible
matrix, so rank, redundancy and the weights of a dependency are those of ``C``; it involves no
column mean, so it is the same matrix whatever shift or scale a column of the design had
(exactly when ``C``'s intercept entries are powers of two and the shifted inputs are exact in
float64; otherwise up to a rounding of about ``eps·|shift|``), and an intercept row is not
swamped by ``-m_j/s_j`` terms of a column with a large mean, as it is in working coordinates.
A row is *redundant* when its (row-normalized) distance to the span of the independent rows
before it is at most ``row_tol`` (default :data:`ROW_TOL` = 1e-9); redundant rows must carry
the ``d`` implied by the rows they depend on (relative tolerance ``row_tol``) or the system is
inconsistent.

A row is *estimable* when its component in the null space of the design (working
coordinates) is at most ``row_tol`` times its part on the *support* of the null space (the
columns that take part in a dependency of the design), or :data:`SUPPORT_FLOOR` (1e-6) times
its whole working norm if that is larger.  A column outside every dependency (a covariate near
1e10, say) then cannot make a non-estimable intercept row look estimable; the floor keeps
rounding noise of size ``eps`` on a dependent column from deciding.  A kept column whose
coefficient in a null vector is at most ``rank_tol`` (unit-norm working columns) is left out of
the support.

The F of a system in which two or more independent rows involve the intercept is computed
on an equivalent system rotated so that only its first row does
(:func:`~lincomb._core.wald.intercept_rotation`, a Householder reflection of the rows; the
others' intercept entries are set to exact zeros): the other rows' working coordinates then
carry no ``-m_j/s_j`` terms, and F does not lose ``eps·(m_j·sqrt(W)/s_j)²`` to cancellation.
The vectorized batch path sends such systems to the exact path when some column has
``|m_j|·sqrt(W)/s_j`` above ``OFFSET_ROTATE`` (1e3, in :mod:`~lincomb._core.batch`); below
that the cancellation costs at most about 1e-10.

Scale
-----
Every norm in the core (column scales, raw norms, residual norm, standard errors, row norms)
is taken after scaling by a power of two (:func:`safe_norm`, :func:`pow2_scale`), so it is
representable whenever the result is: data near 1e±200 fit with coefficients, standard errors,
``sigma`` and F that scale exactly with the data.  :class:`Solution` keeps ``resid_norm``
(``sqrt(rss)``); ``rss`` itself is ``inf`` or ``0`` when it leaves the float64 range.

Weights spread wider than ``WEIGHT_SPREAD_PIVOT`` (1e8, largest over smallest, in
:mod:`~lincomb._core.moments`) are factored by Householder QR with row pivoting
(:func:`row_pivoted_factor`, Powell and Reid), so a cell weighted 1e-60 relative to the others
keeps its digits.  Only the one-block in-memory factor does this: merges of row blocks
(blocked in-memory designs of 16,384 rows or more, chunked, Dask and combined fits) stack the
blocks' factors with plain Householder QR.

Refinement
----------
When the rows are in memory (:func:`lincomb.fit`, :func:`lincomb.fit_arrays`) and the 1-norm
condition estimate of the working factor (:func:`condition_estimate`, LAPACK ``dtrcon``)
exceeds :data:`REFINE_COND` (1e8), the coefficients are refined (:func:`refine`, at most
:data:`REFINE_STEPS` = 4 steps): the residual ``y - Xβ`` and the gradient ``Xᵀ W r`` of the
given float64 data are computed in twice the working precision (error-free transformations),
and the correction is solved with the existing factor.  Routes without rows (chunks, Dask,
combined summaries, planned designs) keep the plain Householder solution, accurate to about
``eps·κ`` (``eps·κ²`` with a large residual) for a working condition number ``κ``.
"""

from lincomb._core.batch import BatchCore, wald_systems
from lincomb._core.many import (
    CHUNK_BYTES,
    DesignFactor,
    ResponseBlock,
    factor_design,
    solve_responses,
    wald_quadratic_forms,
)
from lincomb._core.merge import MomentMerger, merge_moments, merge_tree
from lincomb._core.moments import WEIGHT_SPREAD_PIVOT, Moments, moments_from_arrays
from lincomb._core.observed import (
    ROW_MARGIN,
    ObservedBlock,
    ObservedDesign,
    observed_design,
)
from lincomb._core.observed_wald import observed_wald, row_distances
from lincomb._core.refine import REFINE_COND, REFINE_STEPS, condition_estimate, refine
from lincomb._core.rows import ROW_TOL, RowAnalysis, analyze_rows
from lincomb._core.solve import CONSTANT_TOL, RANK_TOL, SUPPORT_FLOOR, Solution, solve
from lincomb._core.triangular import (
    pow2_scale,
    row_pivoted_factor,
    safe_norm,
    triangular_factor,
    upper_solve,
)
from lincomb._core.wald import WaldCore, intercept_rotation, restricted_step, wald_from_root

__all__ = [
    # tolerances
    "RANK_TOL",
    "CONSTANT_TOL",
    "WEIGHT_SPREAD_PIVOT",
    "ROW_TOL",
    "SUPPORT_FLOOR",
    "REFINE_COND",
    "REFINE_STEPS",
    # factorization primitives
    "triangular_factor",
    "upper_solve",
    "safe_norm",
    "pow2_scale",
    "row_pivoted_factor",
    # moments and merging
    "Moments",
    "moments_from_arrays",
    "merge_moments",
    "merge_tree",
    "MomentMerger",
    # rank decision and solution
    "Solution",
    "solve",
    "condition_estimate",
    "refine",
    # restriction rows and Wald tests
    "RowAnalysis",
    "analyze_rows",
    "WaldCore",
    "wald_from_root",
    "intercept_rotation",
    "restricted_step",
    # many responses on one design
    "CHUNK_BYTES",
    "ResponseBlock",
    "DesignFactor",
    "factor_design",
    "solve_responses",
    "wald_quadratic_forms",
    # many responses, each on its own rows
    "ObservedBlock",
    "ObservedDesign",
    "observed_design",
    "observed_wald",
    "row_distances",
    "ROW_MARGIN",
    # many restriction systems on one fit
    "BatchCore",
    "wald_systems",
]
