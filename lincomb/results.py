"""Result objects: immutable, with named fields, derived quantities as methods, tidy exports."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy import stats

from ._format import restricted_html, restricted_text, wald_html, wald_text

__all__ = ["WaldTest", "RestrictedFit", "ROW_COLUMNS", "TEST_COLUMNS"]

#: Columns of :meth:`WaldTest.to_frame` (one row per restriction row).
ROW_COLUMNS = (
    "restriction",
    "estimate",
    "target",
    "std_error",
    "t",
    "p_value",
    "lower",
    "upper",
    "level",
    "role",
)
#: Columns of :meth:`WaldTest.test_frame` (one row per test).
TEST_COLUMNS = (
    "restrictions",
    "rows",
    "rank",
    "statistic",
    "distribution",
    "df_num",
    "df_den",
    "p_value",
    "covariance",
    "redundant_rows",
)


@dataclass(frozen=True)
class WaldTest:
    """Wald test of a restriction system ``C·β = d``.

    Attributes
    ----------
    labels : tuple of str
        Each row written in coefficient names.
    estimate : (m,) ndarray
        ``Cβ̂`` per row.
    target : (m,) ndarray
        Hypothesized ``d``.
    std_error : (m,) ndarray
        Standard error of each ``Cβ̂`` row.
    t : (m,) ndarray
        ``(Cβ̂ - d) / std_error`` per row.
    statistic : float
        The system's F statistic (``distribution == "F"``) or chi-squared statistic.
    df_num : int
        Rank of ``C`` (redundant rows do not count).
    df_den : float
        Denominator degrees of freedom (``inf`` for a chi-squared reference).
    p_value : float
    distribution : {'F', 'chi2'}
    covariance : str
        Covariance estimator the test used.
    redundant : dict
        ``{row: {independent row: weight}}`` for each redundant row.
    matrix : pandas.DataFrame
        The resolved ``C`` (rows labelled, columns named by coefficient).
    estimate_covariance : (m, m) ndarray
        Estimated covariance of ``Cβ̂`` under the test's covariance estimator (all rows).

    Examples
    --------
    >>> import lincomb as lc
    >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
    >>> res = f.wald((lc.coef("line[T.L2]") == 0) & (lc.coef("line[T.L3]") == 2))
    >>> res.to_frame().shape
    (2, 10)
    >>> bool(abs(res.t[0]) ** 2 - f.wald(lc.coef("line[T.L2]") == 0).statistic < 1e-9)
    True
    """

    labels: tuple[str, ...]
    estimate: NDArray[np.float64]
    target: NDArray[np.float64]
    std_error: NDArray[np.float64]
    t: NDArray[np.float64]
    statistic: float
    df_num: int
    df_den: float
    p_value: float
    distribution: str
    covariance: str
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)
    matrix: pd.DataFrame | None = field(default=None, repr=False)
    estimate_covariance: NDArray[np.float64] | None = field(default=None, repr=False)

    @property
    def row_p_value(self) -> NDArray[np.float64]:
        """Two-sided p-value of each row (t with ``df_den``, normal if ``df_den`` is inf)."""
        return 2 * self._row_dist().sf(np.abs(self.t))

    def _row_dist(self):  # type: ignore[no-untyped-def]
        return stats.norm() if not np.isfinite(self.df_den) else stats.t(self.df_den)

    def intervals(self, level: float = 0.95) -> pd.DataFrame:
        """Marginal confidence intervals for each row's ``Cβ`` at ``level``.

        Examples
        --------
        >>> import lincomb as lc
        >>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
        >>> ci = f.wald(lc.coef("line[T.L3]") == 0).intervals(0.9)
        >>> list(ci.columns)
        ['lower', 'upper']
        """
        if not (0 < level < 1):
            raise ValueError(f"level must be in (0, 1), got {level!r}; e.g. 0.95 for 95%.")
        q = self._row_dist().ppf(0.5 + level / 2)
        return pd.DataFrame(
            {
                "lower": self.estimate - q * self.std_error,
                "upper": self.estimate + q * self.std_error,
            },
            index=pd.Index(self.labels, name="restriction"),
        )

    def to_frame(self, level: float = 0.95) -> pd.DataFrame:
        """One row per restriction row.

        Columns: ``restriction`` (the row as algebra), ``estimate`` (``Cβ̂``), ``target``
        (``d``), ``std_error``, ``t``, ``p_value`` (two-sided, per row), ``lower``/``upper``
        (marginal interval at ``level``), ``level``, ``role`` (``"independent"`` or
        ``"redundant"``).
        """
        ci = self.intervals(level)
        role = [
            "redundant" if i in self.redundant else "independent" for i in range(len(self.labels))
        ]
        return pd.DataFrame(
            {
                "restriction": list(self.labels),
                "estimate": self.estimate,
                "target": self.target,
                "std_error": self.std_error,
                "t": self.t,
                "p_value": self.row_p_value,
                "lower": ci["lower"].to_numpy(),
                "upper": ci["upper"].to_numpy(),
                "level": level,
                "role": role,
            }
        )

    def test_frame(self) -> pd.DataFrame:
        """One row for the whole test.

        Columns: ``restrictions`` (the system as algebra), ``rows``, ``rank``, ``statistic``,
        ``distribution``, ``df_num``, ``df_den``, ``p_value``, ``covariance``,
        ``redundant_rows``.
        """
        return pd.DataFrame(
            [
                {
                    "restrictions": " & ".join(self.labels),
                    "rows": len(self.labels),
                    "rank": self.df_num,
                    "statistic": self.statistic,
                    "distribution": self.distribution,
                    "df_num": self.df_num,
                    "df_den": self.df_den,
                    "p_value": self.p_value,
                    "covariance": self.covariance,
                    "redundant_rows": len(self.redundant),
                }
            ]
        )

    def __repr__(self) -> str:
        return wald_text(self)

    def _repr_html_(self) -> str:
        return wald_html(self)


@dataclass(frozen=True)
class RestrictedFit:
    """Least-squares coefficients under ``C·β = d``.

    Attributes
    ----------
    labels : tuple of str
    coefficients : pandas.Series
        Restricted estimates (NaN for aliased columns).
    rss : float
        Restricted residual sum of squares.
    rss_unrestricted : float
    rank : int
        Number of independent restrictions ``q``.
    df_resid : int
        ``n - rank(X) + q``.
    sigma : float
        ``sqrt(rss / df_resid)``.
    redundant : dict
    """

    labels: tuple[str, ...]
    coefficients: pd.Series
    rss: float
    rss_unrestricted: float
    rank: int
    df_resid: int
    sigma: float
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)
    _cov: pd.DataFrame = field(default=None, repr=False)  # type: ignore[assignment]

    def covariance(self) -> pd.DataFrame:
        """Covariance of the restricted coefficients (singular: it lives on ``C·β = d``)."""
        return self._cov.copy()

    def std_errors(self) -> pd.Series:
        """Standard errors of the restricted coefficients (0 for fixed ones)."""
        v = np.clip(np.diag(self._cov.to_numpy()), 0, None)
        return pd.Series(np.sqrt(v), index=self._cov.index, name="std_error")

    def f_statistic(self) -> float:
        """``((RSS_r - RSS) / q) / (RSS / (n - rank))``: equals the Wald F (classical)."""
        df_u = self.df_resid - self.rank
        return ((self.rss - self.rss_unrestricted) / self.rank) / (self.rss_unrestricted / df_u)

    def to_frame(self) -> pd.DataFrame:
        """One row per coefficient: ``coefficient, estimate, std_error``."""
        return pd.DataFrame(
            {
                "coefficient": list(self.coefficients.index),
                "estimate": self.coefficients.to_numpy(),
                "std_error": self.std_errors().to_numpy(),
            }
        )

    def __repr__(self) -> str:
        return restricted_text(self)

    def _repr_html_(self) -> str:
        return restricted_html(self)
