"""Orthonormal polynomial contrasts on levels placed at given values."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from lincomb._typing import Array
from lincomb.errors import (
    ContrastWeightsError,
)

__all__ = ["orthogonal_polynomials"]


# ---------------------------------------------------------------------------------------------
# orthogonal polynomials
# ---------------------------------------------------------------------------------------------
def orthogonal_polynomials(values: Sequence[float] | Array, degree: int | None = None) -> Array:
    """Orthonormal polynomial contrasts on levels placed at ``values``.

    Parameters
    ----------
    values : sequence of float
        Position of each level (``k`` distinct finite numbers), e.g. doses ``[0, 10, 30, 100]``.
    degree : int, optional
        Highest degree, ``1 <= degree <= k - 1`` (default ``k - 1``).

    Returns
    -------
    q : (degree, k) ndarray
        Row ``j`` holds the weights of the degree ``j + 1`` component: rows are orthonormal,
        each sums to zero, and row ``j`` is a polynomial of degree ``j + 1`` in ``values`` with a
        positive leading coefficient (so the linear row increases with ``values``).

    Notes
    -----
    Householder QR of the Vandermonde matrix of the standardized values; the columns of ``Q``
    after the first are the components.  Equal weight is given to each level (the classical
    orthogonal polynomials of a balanced layout).

    Examples
    --------
    >>> import numpy as np
    >>> q = orthogonal_polynomials([1, 2, 3])
    >>> np.round(q / np.abs(q).max(axis=1, keepdims=True), 12).tolist()
    [[-1.0, 0.0, 1.0], [0.5, -1.0, 0.5]]
    """
    x = np.array(values, dtype=np.float64, copy=True).reshape(-1)
    k = x.size
    if k < 2:
        raise ContrastWeightsError(f"a trend needs at least 2 level values, got {k}.")
    if not np.all(np.isfinite(x)):
        raise ContrastWeightsError(f"trend values must be finite, got {x.tolist()}.")
    if np.unique(x).size != k:
        raise ContrastWeightsError(
            f"trend values must be distinct, got {x.tolist()}: two levels at the same position"
            " cannot be told apart by a polynomial."
        )
    if degree is None:
        degree = k - 1
    if isinstance(degree, bool) or not isinstance(degree, (int, np.integer)):
        raise ContrastWeightsError(f"degree must be an integer, got {degree!r}.")
    if not 1 <= degree <= k - 1:
        raise ContrastWeightsError(
            f"degree {degree} is impossible with {k} levels: use 1 to {k - 1}."
        )
    z = (x - x.mean()) / x.std()
    vander = np.vander(z, degree + 1, increasing=True)
    q, r = np.linalg.qr(vander)
    q = q * np.sign(np.diag(r))
    return np.ascontiguousarray(q[:, 1:].T)
