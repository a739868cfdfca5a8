"""A covariance matrix of the coefficients supplied by the user: validation and mapping.

The matrix is read on the kept coefficients (working order), checked to be finite, symmetric
(to :data:`SYMMETRY_TOL`) and positive semi-definite (to :data:`PSD_TOL`), and kept as a factor
with the map from the basic solution's kept coefficients to working coordinates.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from lincomb._covariance.estimate import CovarianceEstimate, psd_factor
from lincomb._typing import Array
from lincomb.errors import CovarianceInputError

if TYPE_CHECKING:  # pragma: no cover
    from lincomb._fit.linear import LinearFit

__all__ = ["SYMMETRY_TOL", "PSD_TOL", "given_estimate", "refuse_nonfinite"]


#: Relative asymmetry allowed in a supplied covariance matrix.
SYMMETRY_TOL: float = 1e-8
#: Relative negative eigenvalue allowed in a supplied covariance matrix.
PSD_TOL: float = 1e-8


def given_estimate(fit: LinearFit, matrix: Any, df: float | None) -> CovarianceEstimate:
    """The estimate of a supplied matrix on ``fit``."""
    sol = fit.solution
    v = _given_block(fit, matrix)
    factor, _ = psd_factor(v)
    # the basic solution's kept coefficients map to working coordinates by θ = B β_kept
    kept = sol.kept
    bmap = np.diag(sol.scale[kept])
    if sol.intercept is not None:
        row = int(np.flatnonzero(kept == sol.intercept)[0])
        bmap[row] = sol.center[kept]
        bmap[row, row] = 1.0
    return CovarianceEstimate(
        method="given",
        label="given matrix",
        df_error=float(fit.df_error) if df is None else float(df),
        _sol=sol,
        _factor=factor,
        _direct=bmap,
    )


def refuse_nonfinite(v: Array, labels: Sequence[str], what: str, allowed: str) -> None:
    """Raise :class:`~lincomb.errors.CovarianceInputError` naming the first non-finite entry
    of a supplied covariance ``v`` (rows and columns shown as ``labels``), how many others
    there are, and what is ``allowed``.

    Examples
    --------
    >>> import numpy as np
    >>> refuse_nonfinite(np.eye(2), ["a", "b"], "V", "all must be finite.")  # finite: passes
    >>> refuse_nonfinite(np.array([[1.0, np.inf], [np.inf, 1.0]]), ["a", "b"], "V", "no.")
    Traceback (most recent call last):
    ...
    lincomb.errors.CovarianceInputError: V holds inf at (a, b) and 1 other non-finite entries; no.
    """
    bad = np.argwhere(~np.isfinite(v))
    if bad.size:
        i, j = (int(t) for t in bad[0])
        raise CovarianceInputError(
            f"{what} holds {float(v[i, j])!r} at ({labels[i]}, {labels[j]}) and"
            f" {len(bad) - 1} other non-finite entries; {allowed}"
        )


def _given_block(fit: LinearFit, matrix: Any) -> Array:
    """The supplied matrix on the kept coefficients (working order), validated."""
    names = list(fit.names)
    p = len(names)
    sol = fit.solution
    if isinstance(matrix, pd.DataFrame):
        idx = [str(i) for i in matrix.index]
        cols = [str(c) for c in matrix.columns]
        for axis, labs in (("index", idx), ("columns", cols)):
            dup = sorted({s for s in labs if labs.count(s) > 1})
            missing = [s for s in names if s not in labs]
            extra = [s for s in labs if s not in names]
            if dup or missing or extra:
                raise CovarianceInputError(
                    f"the given covariance's {axis} must hold the coefficient names once each;"
                    + (f" missing {missing}" if missing else "")
                    + (f" unknown {extra}" if extra else "")
                    + (f" repeated {dup}" if dup else "")
                    + f". Coefficients: {names}"
                )
        pos_r = [idx.index(s) for s in names]
        pos_c = [cols.index(s) for s in names]
        try:
            m = matrix.to_numpy(dtype=np.float64)[np.ix_(pos_r, pos_c)]
        except (TypeError, ValueError):
            raise CovarianceInputError("the given covariance must be numeric.") from None
    else:
        try:
            m = np.array(matrix, dtype=np.float64)
        except (TypeError, ValueError):
            raise CovarianceInputError("the given covariance must be numeric.") from None
        if m.shape != (p, p):
            raise CovarianceInputError(
                f"the given covariance has shape {m.shape}, but the fit has {p} coefficients"
                f" {names}: pass a ({p}, {p}) matrix in that order, or a DataFrame labelled by"
                " coefficient name."
            )
    kept = sol.kept
    v = m[np.ix_(kept, kept)]
    refuse_nonfinite(
        v,
        [repr(names[c]) for c in kept],
        "the given covariance",
        "only rows and columns of aliased coefficients may be non-finite.",
    )
    big = float(np.abs(v).max()) if v.size else 0.0
    asym = float(np.abs(v - v.T).max()) if v.size else 0.0
    if asym > SYMMETRY_TOL * big:
        i, j = (int(t) for t in np.unravel_index(int(np.argmax(np.abs(v - v.T))), v.shape))
        raise CovarianceInputError(
            f"the given covariance is not symmetric: entry ({names[kept[i]]!r},"
            f" {names[kept[j]]!r}) is {v[i, j]:.6g} but ({names[kept[j]]!r}, {names[kept[i]]!r})"
            f" is {v[j, i]:.6g}. Pass (V + V.T) / 2 if the asymmetry is rounding."
        )
    if v.size:
        lam = np.linalg.eigvalsh((v + v.T) / 2)
        if lam[0] < -PSD_TOL * max(float(lam[-1]), 0.0) or lam[-1] < 0:
            raise CovarianceInputError(
                f"the given covariance is not positive semi-definite: its smallest eigenvalue is"
                f" {lam[0]:.6g} (largest {lam[-1]:.6g}). A covariance matrix cannot give a"
                " negative variance to any combination of coefficients."
            )
    sym: Array = (v + v.T) / 2
    return sym
