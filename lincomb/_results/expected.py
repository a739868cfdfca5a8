"""Expected responses: the mean response at rows of the design, with intervals.

:func:`expected_values` evaluates ``x·β̂`` for the fit's own rows or for new data encoded by the
fit's formula encoder, with a confidence interval for the mean under any covariance estimator
and an interval for one new observation (classical: the mean's variance plus ``σ² / w``).
Each row is a linear combination of the coefficients, so it goes through the same working
coordinates, estimability check and covariance root as a Wald test row, vectorized over all
rows: one triangular solve with the rows as right-hand sides, never an ``n × n`` matrix.

A row of new data that a rank-deficient fit cannot identify (a component in the design's null
space larger than :data:`~lincomb._core.ROW_TOL` of its norm) is not predicted: its estimate is
NaN and its ``estimable`` flag is False.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from lincomb import _core as core
from lincomb._core.checks import check_level
from lincomb._covariance.estimate import CovarianceEstimate
from lincomb._covariance.reference import check_reference, reference_df
from lincomb._docstrings import fill_lines_doc
from lincomb._model.row_checks import require_frame
from lincomb._results.format import TableRepr, _num
from lincomb._typing import Array
from lincomb.errors import InputError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = [
    "ExpectedValues",
    "EXPECTED_COLUMNS",
    "expected_values",
    "row_moments",
    "MeanIntervals",
    "reference_fields",
]


#: Columns of :meth:`ExpectedValues.row_frame`.
EXPECTED_COLUMNS = (
    "row",
    "estimate",
    "se",
    "lower",
    "upper",
    "se_new",
    "new_lower",
    "new_upper",
    "level",
    "estimable",
    "df_error",
    "covariance",
)


def reference_fields(vcov: CovarianceEstimate, ref: str) -> dict[str, Any]:
    """The fields a result records about the reference of its intervals and tests: ``df_error``
    (of the t or F reference, ``inf`` for a large-sample one), ``reference`` and the
    ``covariance`` estimator's label."""
    return {
        "df_error": reference_df(vcov.df_error, ref),
        "reference": ref,
        "covariance": vcov.label,
    }


class MeanIntervals:
    """Intervals of estimated means (a mixin over the dataclasses of :class:`ExpectedValues`
    and :class:`~lincomb._results.level_table.LevelMeanTable`): t with ``df_error``, or the
    standard normal where ``df_error`` is inf."""

    df_error: float

    def _quantile(self, level: float) -> float:
        check_level(level)
        dist = stats.t(self.df_error) if np.isfinite(self.df_error) else stats.norm()
        return float(dist.ppf(0.5 + level / 2))


@dataclass(frozen=True, repr=False)
class ExpectedValues(MeanIntervals, TableRepr):
    """Expected responses at rows of the design, with their standard errors.

    Made by :meth:`LinearFit.expected <lincomb.LinearFit.expected>`.

    Attributes
    ----------
    rows : pandas.Index
        Labels of the rows (the fit's rows used, or the new data's index).
    estimate : (m,) ndarray
        ``x·β̂`` per row (NaN where not estimable).
    se : (m,) ndarray
        Standard error of the mean under the covariance estimator.
    se_new : (m,) ndarray
        Standard error for one new observation at the row: ``sqrt(se² + σ² / w)`` (NaN when
        the weight of a new observation is unknown).
    estimable : (m,) ndarray of bool
        False for a row a rank-deficient fit cannot identify.
    df_error : float
        Degrees of freedom of the t reference (``inf`` for the normal reference).
    reference : {'F', 'chi2'}
        ``'F'``: intervals from t with ``df_error``; ``'chi2'``: from the standard normal.
    covariance : str
        The covariance estimator of the mean's standard error.
    sigma : float
        The fit's residual standard deviation (used for ``se_new``).

    Examples
    --------
    >>> import pandas as pd, lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> new = pd.DataFrame({"line": ["L1", "L3"], "temperature_c": [21.0, 23.5]})
    >>> ev = f.expected(new)
    >>> ev.row_frame().shape, bool(ev.estimable.all())
    ((2, 12), True)
    >>> bool((ev.se_new > ev.se).all())
    True
    """

    rows: pd.Index
    estimate: Array
    se: Array
    se_new: Array
    estimable: NDArray[np.bool_]
    df_error: float
    reference: str
    covariance: str
    sigma: float

    @fill_lines_doc
    def row_frame(self, level: float = 0.95) -> pd.DataFrame:
        """One row per design row: the mean, its interval and the interval for a new observation.

        Parameters
        ----------
        level : float, default 0.95
            Confidence level of both intervals.

        Returns
        -------
        pandas.DataFrame
            Columns ``row, estimate, se, lower, upper, se_new, new_lower, new_upper, level,
            estimable, df_error, covariance``: ``lower``/``upper`` bound the mean response,
            ``new_lower``/``new_upper`` one new observation at the same row.

        Examples
        --------
        %(fill_lines_fit)s
        >>> fr = f.expected().row_frame(0.9)
        >>> bool(((fr.new_lower < fr.lower) & (fr.upper < fr.new_upper)).all())
        True
        """
        q = self._quantile(level)
        return pd.DataFrame(
            {
                "row": self.rows,
                "estimate": self.estimate,
                "se": self.se,
                "lower": self.estimate - q * self.se,
                "upper": self.estimate + q * self.se,
                "se_new": self.se_new,
                "new_lower": self.estimate - q * self.se_new,
                "new_upper": self.estimate + q * self.se_new,
                "level": level,
                "estimable": self.estimable,
                "df_error": self.df_error,
                "covariance": self.covariance,
            }
        )

    def _parts(self, limit: int = 8) -> tuple[str, list[str], list[list[str]], str]:
        fr = self.row_frame()
        n_bad = int((~self.estimable).sum())
        head = (
            f"Expected response at {len(self.rows)} rows ({self.covariance} covariance,"
            f" {'t, ' + format(self.df_error, 'g') + ' df' if self.reference == 'F' else 'normal'}"
            + (f"; {n_bad} not estimable" if n_bad else "")
            + ")"
        )
        header = ["row", "estimate", "s.e.", "95% low", "95% high", "new low", "new high"]
        cols = ["estimate", "se", "lower", "upper", "new_lower", "new_upper"]
        vals = fr[cols].to_numpy(dtype=np.float64)[:limit]
        rows = [
            [str(lab), _num(v[0]) if ok else "not estimable", *(_num(x) for x in v[1:])]
            for lab, v, ok in zip(self.rows[:limit], vals, self.estimable[:limit], strict=True)
        ]
        tail = (
            f"... {len(fr) - limit} more rows (row_frame() has them all)" if len(fr) > limit else ""
        )
        return head, header, rows, tail


def row_moments(
    fit: LinearFit, x: Array, vcov: CovarianceEstimate
) -> tuple[Array, Array, NDArray[np.bool_]]:
    """``(x·β̂, its standard errors, estimable)`` for design rows ``x`` (m, p), vectorized.

    Rows go to working coordinates (:meth:`~lincomb._core.Solution.to_working`); the
    estimability residual, the estimate and the covariance root (one triangular solve with the
    ``m`` rows as right-hand sides) are those of a Wald test row.  Rows not estimable get NaN.
    """
    sol = fit.solution
    cu = sol.to_working(x)
    ok = sol.estimability_residual(cu) <= core.ROW_TOL
    ck = np.ascontiguousarray(cu[:, sol.kept])
    est = ck @ sol.theta
    root = vcov.root(ck)  # (k, m): Cov(x β̂) = rootᵀ root
    se = np.sqrt(np.einsum("ij,ij->j", root, root))
    est[~ok] = np.nan
    se[~ok] = np.nan
    return est, se, ok


def _new_weights(fit: LinearFit, new: pd.DataFrame, weights: Any) -> Array | None:
    m = len(new)
    if weights is None:
        return None if fit.weighted else np.ones(m)
    if isinstance(weights, str):
        if weights not in new.columns:
            raise InputError(
                f"weights={weights!r} names no column of the new data; columns:"
                f" {[str(c) for c in new.columns]}."
            )
        w = new[weights].to_numpy(dtype=np.float64)
    else:
        w = np.asarray(weights, dtype=np.float64).reshape(-1)
        if w.size == 1:
            w = np.full(m, float(w[0]))
    if w.shape[0] != m:
        raise InputError(f"{w.shape[0]} weights for {m} rows of new data; give one per row.")
    if not np.all(np.isfinite(w)) or np.any(w <= 0):
        raise InputError("weights of new observations must be finite and positive.")
    return w


@fill_lines_doc
def expected_values(
    fit: LinearFit,
    new: pd.DataFrame | None,
    *,
    weights: ArrayLike | str | None,
    covariance: object,
    reference: str,
) -> ExpectedValues:
    """The computation behind :meth:`LinearFit.expected <lincomb.LinearFit.expected>`, which
    documents the arguments and holds their defaults.

    Examples
    --------
    %(fill_lines_fit)s
    >>> expected_values(f, None, weights=None, covariance=None, reference="F").rows.size
    300
    """
    ref = check_reference(reference)
    vcov = fit.evaluate_covariance(covariance)
    if new is None:
        design = fit.design
        x = design.x
        labels = design.row_index
        w = design.weights
        if weights is not None:
            raise InputError("weights= is for new data; the fit's own rows use the fit's weights.")
        w_new: Array | None = np.ones(x.shape[0]) if w is None else w
    else:
        new = require_frame(new, "new data")
        x = fit.encode(new).to_numpy(dtype=np.float64)
        labels = new.index
        w_new = _new_weights(fit, new, weights)
    est, se, ok = row_moments(fit, x, vcov)
    if w_new is None:
        se_new = np.full_like(se, np.nan)
    else:
        se_new = np.sqrt(se * se + fit.sigma**2 / w_new)
    return ExpectedValues(
        rows=pd.Index(labels),
        estimate=est,
        se=se,
        se_new=se_new,
        estimable=ok,
        sigma=fit.sigma,
        **reference_fields(vcov, ref),
    )
