"""Per-cluster blocks of the hat matrix, for few-cluster inference, as block / merge / finish.

The bias-reduced and jackknife cluster-robust covariances and the wild cluster bootstrap need,
for each cluster ``g``, two small pieces in the fit's orthonormal working coordinates
``Z = X̃_w R⁻¹`` (see :mod:`lincomb._covariance.estimators`):

* ``B_g = Z_gᵀ Z_g`` (k × k): the cluster's block of the hat matrix seen from the coefficient
  side (the ``n_g × n_g`` block ``H_gg = Z_g Z_gᵀ`` has the same nonzero eigenvalues);
* ``u_g = Z_gᵀ ẽ_g`` (k): the cluster's score sum.

Every ``n_g × n_g`` computation these methods describe reduces to ``k × k`` ones through the
identity ``Z_gᵀ φ(Z_g Z_gᵀ) = φ(Z_gᵀ Z_g) Z_gᵀ`` (for any function ``φ`` of a symmetric
matrix applied to its eigenvalues): the adjusted score ``Z_gᵀ (I − H_gg)^{-1/2} ẽ_g`` is
``(I − B_g)^{-1/2} u_g``.  So no block of ``I − H`` is ever formed, whatever the cluster sizes,
and the pieces of disjoint blocks of rows merge by adding per cluster label: chunked and Dask
second passes get these estimators too.

``block`` gives the per-cluster centred Gram matrices ``Σ w_i x_c,i x_c,iᵀ`` and score sums
``Σ w_i e_i x_c,i`` of a block of rows; ``merge`` adds them per label; :func:`pieces` maps them
to working coordinates with one triangular solve per side.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb import _core as core
from lincomb._covariance.examples import sites_doc
from lincomb._covariance.meats import LEVERAGE_TOL, Partial, _group_sum, _Meat
from lincomb._typing import Array

__all__ = ["ClusterBlocks", "ClusterPieces", "ClusterBlockMeat", "adjustment"]


@dataclass(frozen=True)
class ClusterBlocks:
    """Per-cluster centred Gram matrices ``grams`` (G, k, k) and score sums ``sums`` (G, k),
    in the order of ``keys`` (the cluster labels)."""

    keys: NDArray[Any]
    grams: Array
    sums: Array


@dataclass(frozen=True)
class ClusterPieces:
    """``B_g`` (G, k, k) and ``u_g`` (G, k) in the fit's orthonormal working coordinates.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit("wait_min ~ staffing + protocol", lc.datasets.service_sites())
    >>> from lincomb._covariance.cluster_blocks import pieces_of
    >>> pc = pieces_of(f, "site")
    >>> bool(np.allclose(pc.hat.sum(axis=0), np.eye(pc.hat.shape[1])))  # Σ B_g = ZᵀZ = I
    True
    """

    hat: Array
    scores: Array

    @property
    def clusters(self) -> int:
        return int(self.scores.shape[0])


def adjustment(hat: Array, power: float) -> Array:
    """``(I − B_g)^(-power)`` for each cluster (G, k, k), with eigenvalues of ``I − B_g`` at
    most :data:`~lincomb._covariance.meats.LEVERAGE_TOL` mapped to 0 (a pseudo-inverse: a
    direction the cluster fits exactly carries a zero residual, as with cluster fixed effects).

    Examples
    --------
    >>> import numpy as np
    >>> b = np.array([[[0.75, 0.0], [0.0, 0.0]]])
    >>> adjustment(b, 0.5).round(6).tolist()
    [[[2.0, 0.0], [0.0, 1.0]]]
    """
    k = hat.shape[-1]
    lam, vec = np.linalg.eigh(np.eye(k) - (hat + np.swapaxes(hat, 1, 2)) / 2)
    ok = lam > LEVERAGE_TOL
    f = np.where(ok, np.power(np.where(ok, lam, 1.0), -power), 0.0)
    return np.asarray(np.einsum("gij,gj,gkj->gik", vec, f, vec), dtype=np.float64)


class ClusterBlockMeat(_Meat):
    """Per-cluster blocks of a one-way clustering as block / merge (the estimators finish them).

    An in-memory fit gives its rows as one block (sorted by cluster once).
    """

    fortran = False
    row_blocks = False

    def block(
        self, xc: Array, resid: Array, w: Array | None, labels: tuple[NDArray[Any], ...] = ()
    ) -> Partial:
        """The block's per-cluster centred Gram matrices and score sums."""
        u = resid if w is None else resid * w
        rss = float(resid @ u)
        codes, uniq = pd.factorize(labels[0], sort=False)
        g, k = len(uniq), xc.shape[1]
        order = np.argsort(codes, kind="stable")
        starts = np.searchsorted(codes[order], np.arange(g + 1))
        xs = xc[order]
        xw = xs if w is None else xs * w[order][:, None]
        grams = np.empty((g, k, k))
        for j in range(g):  # one Gram per cluster: a BLAS product on its rows
            a, b = starts[j], starts[j + 1]
            grams[j] = xs[a:b].T @ xw[a:b]
        sums = np.add.reduceat(xs * u[order][:, None], starts[:-1], axis=0) if g else grams[:, 0]
        blocks = ClusterBlocks(np.asarray(uniq), grams, sums)
        return Partial(resid.size, rss, extra=blocks)

    def merge(self, *parts: Partial) -> Partial:
        """Add the blocks of disjoint row blocks per cluster label."""
        if len(parts) == 1:
            return parts[0]
        blocks = [p.extra for p in parts]
        keys = np.concatenate([b.keys for b in blocks])
        codes, uniq = pd.factorize(keys, sort=False)
        g, k = len(uniq), blocks[0].grams.shape[1]
        codes = codes.astype(np.intp)
        ones = np.ones(codes.size)
        stacked = np.concatenate([b.grams for b in blocks]).reshape(codes.size, k * k)
        grams = _group_sum(codes, g, ones, stacked).reshape(g, k, k)
        sums = _group_sum(codes, g, ones, np.concatenate([b.sums for b in blocks]))
        return Partial(
            sum(p.n for p in parts),
            math.fsum(p.rss for p in parts),
            extra=ClusterBlocks(np.asarray(uniq), grams, sums),
        )

    def pieces(self, part: Partial) -> ClusterPieces:
        """Map the merged blocks to working coordinates: ``B_g`` and ``u_g``."""
        blocks: ClusterBlocks = part.extra
        g, k = blocks.sums.shape
        if k == 0:
            return ClusterPieces(np.zeros((g, 0, 0)), np.zeros((g, 0)))
        # B_g = (RS)⁻ᵀ G_g (RS)⁻¹: solve from the left for all clusters, then from the right
        m = np.moveaxis(blocks.grams, 0, 1).reshape(k, g * k)
        left = np.moveaxis(core.upper_solve(self.rs, m, trans=True).reshape(k, g, k), 1, 0)
        # left_g = (RS)⁻ᵀ G_g; row j of B_g = (RS)⁻ᵀ applied to row j of left_g
        rows = core.upper_solve(self.rs, left.reshape(g * k, k).T, trans=True)
        hat = rows.T.reshape(g, k, k)
        hat = (hat + np.swapaxes(hat, 1, 2)) / 2
        scores = core.upper_solve(self.rs, blocks.sums.T, trans=True).T
        return ClusterPieces(hat, np.ascontiguousarray(scores))


@sites_doc
def pieces_of(fit: Any, by: Any) -> ClusterPieces:
    """The per-cluster pieces of an in-memory fit clustered by ``by`` (a column name, a Series
    aligned with the data, or one label per row used).

    Examples
    --------
    %(sites_fit)s
    >>> pieces_of(f, "site").clusters
    40
    """
    from lincomb._covariance.in_memory import _over_rows_partial
    from lincomb._covariance.rows import cluster_codes, row_values

    values, name = row_values(fit, by, "cluster labels")
    codes, _ = cluster_codes(fit, values, name)
    meat = ClusterBlockMeat(fit)
    return meat.pieces(_over_rows_partial(meat, fit, (codes,)))
