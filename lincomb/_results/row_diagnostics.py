"""Fitted values, residuals and leverages of the rows a fit used, from its R factor.

The leverage of row ``i`` is ``h_i = ‖z_i‖²`` with ``Z = X̃_w R⁻¹`` (the rows in the fit's
orthonormal working coordinates, see :mod:`lincomb._covariance.estimators`): one triangular
solve with the rows as right-hand sides, never the ``n × n`` hat matrix.  With weights, the
residuals are scaled by ``sqrt(w_i)`` before they are standardized.

* ``standardized``: ``sqrt(w) e / σ``;
* ``studentized_internal``: ``sqrt(w) e / (σ sqrt(1 − h))``;
* ``studentized_external``: ``sqrt(w) e / (σ_(i) sqrt(1 − h))`` with the leave-one-out
  ``σ_(i)² = (RSS − w e² / (1 − h)) / (n − rank − 1)``.

A row with ``1 − h`` at most :data:`~lincomb._covariance.estimators.LEVERAGE_TOL` is fitted
exactly by the other rows' directions; its studentized residuals are NaN rather than ``0/0``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from lincomb import _core as core
from lincomb._covariance.meats import LEVERAGE_TOL
from lincomb._covariance.rows import RowMap, fit_rows
from lincomb._docstrings import fill_lines_doc
from lincomb._results.format import TableRepr, _num
from lincomb._results.frames import field_frame
from lincomb._typing import Array

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["RowDiagnostics", "row_diagnostics", "DIAGNOSTIC_COLUMNS"]


#: Columns of :meth:`RowDiagnostics.row_frame`.
DIAGNOSTIC_COLUMNS = (
    "row",
    "response",
    "fitted",
    "residual",
    "leverage",
    "standardized",
    "studentized_internal",
    "studentized_external",
)


@dataclass(frozen=True, repr=False)
class RowDiagnostics(TableRepr):
    """Per-row fitted values, residuals and leverages of a fit.

    Made by :meth:`LinearFit.row_diagnostics <lincomb.LinearFit.row_diagnostics>`; the
    definitions are in :mod:`lincomb._results.row_diagnostics`.

    Attributes
    ----------
    rows : pandas.Index
        Labels of the rows used.
    response, fitted, residual, leverage : (n,) ndarray
    standardized, studentized_internal, studentized_external : (n,) ndarray

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit("fill_g ~ line + temperature_c", lc.datasets.fill_lines())
    >>> d = f.row_diagnostics()
    >>> bool(np.isclose(d.leverage.sum(), f.rank))
    True
    >>> bool(np.allclose(d.fitted + d.residual, d.response))
    True
    """

    rows: pd.Index
    response: Array
    fitted: Array
    residual: Array
    leverage: Array
    standardized: Array
    studentized_internal: Array
    studentized_external: Array

    @fill_lines_doc
    def row_frame(self) -> pd.DataFrame:
        """One row per row of the fit.

        Returns
        -------
        pandas.DataFrame
            Columns ``row, response, fitted, residual, leverage, standardized,
            studentized_internal, studentized_external``.

        Examples
        --------
        %(fill_lines_fit)s
        >>> list(f.row_diagnostics().row_frame().columns)[:4]
        ['row', 'response', 'fitted', 'residual']
        """
        return field_frame(self, DIAGNOSTIC_COLUMNS, row="rows")

    def _parts(self) -> tuple[str, list[str], list[list[str]], str]:
        n = len(self.rows)
        ext = np.abs(self.studentized_external)
        order = np.argsort(-np.where(np.isfinite(ext), ext, -1.0), kind="stable")[:5]
        head = (
            f"Row diagnostics of {n} rows; largest leverage {_num(float(np.max(self.leverage)))},"
            " largest |externally studentized residuals|:"
        )
        header = ["row", "response", "fitted", "residual", "leverage", "studentized (ext.)"]
        rows = [
            [
                str(self.rows[i]),
                _num(self.response[i]),
                _num(self.fitted[i]),
                _num(self.residual[i]),
                _num(self.leverage[i]),
                _num(self.studentized_external[i]),
            ]
            for i in order
        ]
        return head, header, rows, ""


def row_diagnostics(fit: LinearFit) -> RowDiagnostics:
    """The computation behind :meth:`LinearFit.row_diagnostics`.

    Examples
    --------
    >>> import lincomb as lc
    >>> row_diagnostics(lc.fit("fill_g ~ line", lc.datasets.fill_lines())).leverage.shape
    (300,)
    """
    x, y, w = fit_rows(fit)
    sol = fit.solution
    rmap = RowMap.of(sol)
    xc, e = rmap.rows(x, y)
    sw = np.ones(x.shape[0]) if w is None else np.sqrt(w)
    zt = core.upper_solve(rmap.rs, (xc * sw[:, None]).T, trans=True)  # (k, n) = R⁻ᵀ X̃ᵀ
    h = np.einsum("ij,ij->j", zt, zt)
    ew = sw * e
    sigma = fit.sigma
    one_minus = 1.0 - h
    live = one_minus > LEVERAGE_TOL
    safe = np.where(live, one_minus, 1.0)
    internal = np.where(live, ew / (sigma * np.sqrt(safe)), np.nan)
    df_loo = sol.df_resid - 1
    if df_loo > 0:
        s2_loo = (sol.rss - ew * ew / safe) / df_loo
        s_loo = np.sqrt(np.maximum(s2_loo, 0.0))
        with np.errstate(divide="ignore", invalid="ignore"):
            external = np.where(live & (s_loo > 0), ew / (s_loo * np.sqrt(safe)), np.nan)
    else:
        external = np.full_like(ew, np.nan)
    return RowDiagnostics(
        rows=pd.Index(fit.design.row_index),
        response=np.array(y, dtype=np.float64, copy=True),
        fitted=y - e,
        residual=e,
        leverage=h,
        standardized=ew / sigma,
        studentized_internal=internal,
        studentized_external=external,
    )
