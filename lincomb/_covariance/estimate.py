"""The evaluated covariance estimate: a small factor of the meat, ready for any number of tests.

:class:`CovarianceEstimate` holds a ``k × k`` factor ``F`` of the meat (``M = FᵀF``) in the
fit's orthonormal working coordinates; a test's root is ``F · Solution.root(C_kept)``, so a test
costs nothing that grows with ``n``.  :func:`psd_factor` turns a merged meat into that factor
(eigenvalues at most :data:`MEAT_RANK_TOL` times the largest set to zero) and :func:`check_rank`
refuses a test whose independent rows have a singular robust covariance.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from lincomb import _core as core
from lincomb._covariance.examples import lines_doc, sites_doc
from lincomb._typing import Array
from lincomb.errors import SingularCovarianceError

__all__ = [
    "EIGEN_TOL",
    "MEAT_RANK_TOL",
    "COV_RANK_TOL",
    "CovarianceEstimate",
    "check_rank",
    "psd_factor",
]


#: Relative size of a negative meat eigenvalue that is reported as clipped.
EIGEN_TOL: float = 1e-10
#: Meat eigenvalues at most this times the largest are rounding and are set to zero.
MEAT_RANK_TOL: float = 1e-12
#: Relative rank tolerance for the robust covariance of the independent rows of a test.
COV_RANK_TOL: float = 1e-9


@sites_doc
@dataclass(frozen=True, eq=False)
class CovarianceEstimate:
    """A covariance estimator evaluated on one fit, ready for any number of tests.

    Holds a ``k × k`` factor of the meat (``k`` = rank), so each test costs nothing that grows
    with the number of observations.

    Attributes
    ----------
    method : str
        ``'classical'``, ``'HC0'`` ... ``'HC4'``, ``'cluster'``, ``'two-way cluster'``,
        ``'serial'`` or ``'given'``.
    label : str
        Description shown on results (``WaldTest.covariance``).
    df_error : float
        Denominator degrees of freedom of the F reference (and of the rows' t).
    groups : tuple of int
        Number of clusters per clustering variable (empty for other estimators).
    lag : int or None
        Lag of a serial estimator.
    scale : float or tuple of float
        Small-sample factor(s) applied to the meat (1.0 for none; for two-way clustering one
        per term: first, second, intersection).
    clipped : int
        Number of clearly negative meat eigenvalues set to zero (see :data:`EIGEN_TOL`).
    per_test_df : bool
        True when each test gets its own small-sample degrees of freedom (the bias-reduced
        and jackknife cluster-robust estimators); ``df_error`` is then only the fallback
        ``G − 1`` of routes that use one df for all tests.

    Examples
    --------
    %(sites_fit)s
    >>> from lincomb._covariance.estimators import evaluate
    >>> est = evaluate(f, lc.clustered(by="site"))
    >>> est.method, est.groups, est.df_error
    ('cluster', (40,), 39.0)
    """

    method: str
    label: str
    df_error: float
    groups: tuple[int, ...] = ()
    lag: int | None = None
    scale: float | tuple[float, ...] = 1.0
    clipped: int = 0
    _sol: core.Solution | None = field(default=None, repr=False)
    _sigma: float | None = field(default=None, repr=False)
    _factor: Array | None = field(default=None, repr=False)
    _direct: Array | None = field(default=None, repr=False)
    _small_sample: Any = field(default=None, repr=False)

    @property
    @lines_doc
    def per_test_df(self) -> bool:
        """Whether each test gets its own small-sample df (see the class docstring).

        Examples
        --------
        %(lines_fit)s
        >>> from lincomb._covariance.estimators import evaluate
        >>> evaluate(f, "HC3").per_test_df
        False
        """
        return self._small_sample is not None

    @sites_doc
    def test_df(self, cu_kept: Array, independent: NDArray[np.intp]) -> tuple[Array, float]:
        """Small-sample df of each row and the Hotelling ``η`` of the independent rows.

        Examples
        --------
        >>> import numpy as np
        %(sites_fit)s
        >>> from lincomb._covariance.estimators import evaluate
        >>> est = evaluate(f, lc.clustered(by="site", adjust="bias-reduced"))
        >>> sol = f.solution
        >>> cu = sol.to_working(np.eye(3))[1:2][:, sol.kept]
        >>> rows, eta = est.test_df(cu, np.array([0]))
        >>> bool(np.isclose(rows[0], eta)) and 1 < eta < 39
        True
        """
        assert self._sol is not None and self._small_sample is not None
        v = self._sol.root(cu_kept)
        rows = self._small_sample.row_df(v)
        eta = self._small_sample.system_df(v[:, independent]) if independent.size else np.inf
        return rows, float(eta)

    @property
    @lines_doc
    def solution(self) -> core.Solution | None:
        """The solution of the fit this estimate was evaluated on (it applies to no other).

        Examples
        --------
        %(lines_fit)s
        >>> from lincomb._covariance.estimators import evaluate
        >>> evaluate(f, "HC3").solution is f.solution
        True
        """
        return self._sol

    @lines_doc
    def root(self, cu_kept: Array) -> Array:
        """A matrix ``W`` with ``Cov(Cβ̂) = WᵀW`` for rows ``cu_kept`` (working, kept columns).

        Examples
        --------
        >>> import numpy as np
        %(lines_fit)s
        >>> sol = f.solution
        >>> cu = sol.to_working(np.eye(5))[:, sol.kept]
        >>> from lincomb._covariance.estimators import evaluate
        >>> w = evaluate(f, "HC3").root(cu)
        >>> bool(np.allclose(w.T @ w, f.covariance("HC3").to_numpy()))
        True
        """
        if self._direct is not None:
            assert self._factor is not None
            return self._factor @ (cu_kept @ self._direct).T
        assert self._sol is not None
        base = self._sol.root(cu_kept)
        if self._factor is None:
            assert self._sigma is not None
            return base * self._sigma
        return self._factor @ base

    def __repr__(self) -> str:
        return f"<CovarianceEstimate: {self.label}; reference df {self.df_error:g}>"


def check_rank(
    root: Array, independent: NDArray[np.intp], labels: Sequence[str], estimate: CovarianceEstimate
) -> Array | None:
    """Raise :class:`~lincomb.errors.SingularCovarianceError` when the covariance of the
    independent rows is singular under ``estimate`` (see :data:`COV_RANK_TOL`).

    The classical covariance of independent, estimable rows is never singular, so it is not
    checked (None is returned).  Otherwise the triangular factor of the independent columns of
    ``root`` that the check made is returned, for :func:`lincomb._core.wald_from_root` to reuse.
    """
    if estimate.method == "classical" or independent.size == 0:
        return None
    vk = root[:, independent]
    se = np.linalg.norm(vk, axis=0)
    chol = core.triangular_factor(vk)
    diag = np.abs(np.diag(chol))
    bad = np.flatnonzero(diag <= COV_RANK_TOL * np.maximum(se, np.finfo(float).tiny))
    if not bad.size:
        return chol
    i = int(independent[bad[0]])
    rank = independent.size - bad.size
    why = ""
    if estimate.groups:
        why = (
            f" A cluster-robust covariance has rank at most G − 1 = {min(estimate.groups) - 1}"
            " (the scores of the clusters sum to zero)."
        )
    raise SingularCovarianceError(
        f"under the {estimate.label} covariance the {independent.size} independent restriction"
        f" rows have a covariance of rank {rank}: row {i} ({labels[i]}) adds no variance"
        f" outside the rows before it.{why} Test fewer rows at once, or choose an estimator"
        " with more information (more clusters, another estimator)."
    )


def psd_factor(meat: Array) -> tuple[Array, int]:
    """``F`` with ``FᵀF`` = the meat with eigenvalues at most :data:`MEAT_RANK_TOL` times the
    largest set to zero, and how many were clearly negative (below ``-EIGEN_TOL`` times the
    largest)."""
    sym = (meat + meat.T) / 2
    if sym.shape[0] == 0:
        return np.zeros((0, 0)), 0
    lam, u = np.linalg.eigh(sym)
    top = max(float(lam.max()), 0.0)
    clipped = int(np.count_nonzero(lam < -EIGEN_TOL * top))
    pos = lam > MEAT_RANK_TOL * top
    return (u[:, pos] * np.sqrt(lam[pos])).T, clipped
