"""Wald tests of responses fitted on their own rows (:mod:`lincomb._core.observed`).

:func:`observed_wald` gives each response's quadratic form and row standard errors from its
own Cholesky factor ``L`` (responses last, vectorized); :func:`row_distances` gives the numbers
a system's redundancy decisions compared with ``row_tol``, so that callers can check that each
decision holds on every response's rows (module notes of :mod:`lincomb._core.observed`).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from lincomb._core.observed import ObservedBlock, _forty_doc, _lower_solve_last
from lincomb._core.triangular import safe_norm
from lincomb._typing import Array

__all__ = ["observed_wald", "row_distances"]


@_forty_doc
def observed_wald(
    block: ObservedBlock, root: Array, delta: Array, independent: NDArray[np.intp]
) -> tuple[Array, Array]:
    """Quadratic forms and row standard errors of one system on responses fitted on own rows.

    Parameters
    ----------
    block : ObservedBlock
    root : (k, m) ndarray
        ``U`` of :meth:`ObservedDesign.root`.
    delta : (m, r) ndarray
        ``Cβ̂ − d`` per response.
    independent : (q,) ndarray of int
        The independent rows of the system.

    Returns
    -------
    quad : (r,) ndarray
        ``δ_Kᵀ (V_KK)⁻¹ δ_K`` with ``V = Uᵀ G⁻¹ U`` per response (divide by ``q σ²`` for F).
    std_error : (r, m) ndarray
        Unscaled standard error of each row (multiply by ``σ``).

    Notes
    -----
    Each response's root ``L⁻¹ U`` comes from a batched forward substitution; ``V_KK`` is never
    formed: its triangular factor comes from a batched Gram–Schmidt (twice) of the root's
    independent columns, as :func:`~lincomb._core.triangular.triangular_factor` does by QR.

    Examples
    --------
    %(forty_rows)s
    >>> from lincomb._core.observed import observed_design
    >>> y = rng.normal(size=40); y[[1, 8]] = np.nan
    >>> sol = solve(f.moments)
    >>> od = observed_design(f, sol)
    >>> block = od.fit(y[:, None])
    >>> c = np.array([[0.0, 1.0, 0.0]])
    >>> ck = sol.to_working(c)[:, sol.kept]
    >>> quad, se = observed_wald(block, od.root(ck), ck @ block.theta, np.array([0]))
    >>> keep = ~np.isnan(y)
    >>> xtx = x[keep].T @ x[keep]
    >>> bool(np.isclose(se[0, 0] ** 2, np.linalg.solve(xtx, c[0])[1]))
    True
    """
    k, m = root.shape
    roots = np.empty((k, m, block.count))  # L⁻¹ U per response, responses last
    roots[...] = root[:, :, None]
    _lower_solve_last(block.low, roots)
    se = np.sqrt(np.einsum("kmr,kmr->rm", roots, roots))
    if independent.size == 0:
        return np.zeros(block.count), se
    tri = _r_factor(roots[:, independent, :])
    z = np.array(delta[independent], dtype=np.float64)  # (q, r)
    _lower_solve_last(np.ascontiguousarray(np.swapaxes(tri, 0, 1)), z)
    return np.einsum("qr,qr->r", z, z), se


def row_distances(cd: Array, independent: NDArray[np.intp]) -> Array:
    """Distance of each row (normalized) to the span of the independent rows before it.

    ``cd`` are the rows of a system in decision coordinates and ``independent`` the rows that
    :func:`~lincomb._core.rows.analyze_rows` kept: the numbers it compared with ``row_tol``
    (used to check that a decision is far from its tolerance).

    Examples
    --------
    >>> import numpy as np
    >>> d = row_distances(np.array([[1.0, 0.0], [1.0, 1e-12], [0.0, 1.0]]), np.array([0, 2]))
    >>> [f"{v:.0e}" for v in d]
    ['1e+00', '1e-12', '1e+00']
    """
    m = cd.shape[0]
    out = np.zeros(m)
    norms = safe_norm(cd, axis=1)  # scaled: no overflow; the unit rows below cannot overflow
    unit = cd / np.where(norms > 0, norms, 1.0)[:, None]
    basis = np.zeros((0, cd.shape[1]))
    kept = set(int(i) for i in independent)
    for i in range(m):
        v = unit[i]
        for _ in range(2):
            v = v - basis.T @ (basis @ v)
        out[i] = float(np.sqrt(v @ v))
        if i in kept and out[i] > 0:
            basis = np.vstack([basis, v / out[i]])
    return out


def _r_factor(a: Array) -> Array:
    """Upper triangular ``T`` (q, q, r) with ``Tᵀ T = aᵀ a`` for a stack ``a`` (k, q, r), responses
    last: classical Gram–Schmidt twice (accurate as Householder QR for the small ``q`` here)."""
    k, q, r = a.shape
    basis = np.zeros((k, q, r))
    tri = np.zeros((q, q, r))
    for j in range(q):
        v = a[:, j, :].copy()
        b = basis[:, :j, :]
        for _ in range(2):
            h = np.einsum("kjr,kr->jr", b, v)
            tri[:j, j] += h
            v -= np.einsum("kjr,jr->kr", b, h)
        nv = np.sqrt(np.einsum("kr,kr->r", v, v))
        tri[j, j] = nv
        basis[:, j, :] = v / np.where(nv > 0, nv, 1.0)
    return tri
