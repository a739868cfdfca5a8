"""Few-cluster covariances: bias-reduced and jackknife cluster-robust sandwiches, and their
small-sample degrees of freedom.

Both adjust each cluster's residuals by a power of its block of ``I − H`` before the scores are
summed (``H`` the hat matrix of the weighted design):

``adjust="bias-reduced"``
    ``ẽ_g ↦ (I − H_gg)^{-1/2} ẽ_g``: the meat is unbiased when the errors are independent
    with constant variance (Bell and McCaffrey, 2002), and much less biased otherwise than the
    plain sandwich, whose residuals are too small when a few clusters carry much leverage.
``adjust="jackknife"``
    ``ẽ_g ↦ (I − H_gg)^{-1} ẽ_g`` and the factor ``(G − 1)/G``: exactly the delete-one-cluster
    jackknife ``(G−1)/G Σ_g (β̂₍g₎ − β̂)(β̂₍g₎ − β̂)ᵀ`` around the full-sample estimate.

Through ``Z_gᵀ φ(Z_g Z_gᵀ) = φ(B_g) Z_gᵀ`` (see :mod:`~lincomb._covariance.cluster_blocks`) the
adjusted score is ``A_g u_g`` with ``A_g = (I − B_g)^{-1/2}`` or ``(I − B_g)^{-1}``, ``k × k``.

Degrees of freedom
------------------
The estimate ``V̂ = c Σ_g (vᵀ A_g u_g)²`` of the variance of a row ``vᵀφ̂`` is a quadratic form
in the errors.  Under the working model (independent errors, constant variance) it is
``εᵀ Q Qᵀ ε`` with ``Q = [(I − H) P_g]_g`` and ``P_g`` the adjusted weights of cluster ``g``;
``Ω = QᵀQ`` (G × G) has entries ``δ_gh vᵀ B_g A_g² v − (B_g A_g v)ᵀ (B_h A_h v)``, all ``k``-
dimensional.  Matching the first two moments to a scaled chi-squared gives each row's df
``ν = (tr Ω)² / tr(Ω²)`` (Satterthwaite, as proposed for this estimator by Bell and McCaffrey,
2002); the row's t uses it.

For a system of ``q`` independent rows the Wald form ``Q_W`` is referred to a Hotelling-T²
approximation: ``V̂`` (standardized so that its working-model mean is ``I``) is matched to a
Wishart with ``η`` degrees of freedom by its total variance, ``η = q(q+1) / Σ_{s,t} Var(V̂_st)``,
and ``(η − q + 1)/(η q) · Q_W`` is referred to ``F(q, η − q + 1)`` (Pustejovsky and Tipton,
2018, J. Bus. Econ. Stat. 36:672-683, describe this approximation).  With one row it is the t
test with ``ν`` df.  The variances are Gaussian fourth moments, computed with ``k × k`` sums
(no ``G × G`` tensor per pair of rows).

All of this needs only ``B_g`` and ``u_g``, which merge over blocks of rows: chunked and Dask
second passes give these estimates (and their df) as an in-memory fit does.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from lincomb._covariance.cluster_blocks import ClusterBlockMeat, ClusterPieces, adjustment
from lincomb._covariance.estimate import CovarianceEstimate, psd_factor
from lincomb._typing import Array
from lincomb.errors import CovarianceInputError, SingularCovarianceError

__all__ = ["ADJUSTMENTS", "SmallSampleDf", "AdjustedClusterMeat", "estimate_from_pieces"]


#: The residual adjustments of :func:`~lincomb.clustered` (``"none"`` is the plain sandwich).
ADJUSTMENTS: tuple[str, ...] = ("none", "bias-reduced", "jackknife")


@dataclass(frozen=True)
class SmallSampleDf:
    """What the small-sample df of a test need: ``P2_g = B_g A_g²`` and ``E_g = B_g A_g``.

    Examples
    --------
    >>> import numpy as np
    >>> b = np.array([[[0.5]], [[0.5]]])  # two clusters, one column
    >>> from lincomb._covariance.cluster_blocks import adjustment
    >>> a = adjustment(b, 0.5)
    >>> df = SmallSampleDf(b @ a @ a, b @ a)
    >>> float(df.row_df(np.array([[1.0]]))[0])  # Ω = [[.5, -.5], [-.5, .5]]: ν = 1² / 1
    1.0
    """

    p2: Array
    e: Array

    def _parts(self, v: Array) -> tuple[Array, Array]:
        d = np.einsum("ks,gkl,lt->gst", v, self.p2, v)
        m = np.einsum("gkl,ls->gks", self.e, v)
        return d, m

    def row_df(self, v: Array) -> Array:
        """Satterthwaite df of each row (columns of ``v``, working roots)."""
        d, m = self._parts(v)
        dd = np.einsum("gss->gs", d)
        mm = np.einsum("gks,gks->gs", m, m)
        k = np.einsum("gis,gjs->sij", m, m)
        mean = dd.sum(axis=0) - mm.sum(axis=0)
        w = (dd**2).sum(axis=0) - 2 * (dd * mm).sum(axis=0) + np.einsum("sij,sij->s", k, k)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(w > 0, mean**2 / np.where(w > 0, w, 1.0), np.inf)

    def mean(self, v: Array) -> Array:
        """Working-model mean of ``V̂`` (q × q, in units of σ², before the factor ``c``)."""
        d, m = self._parts(v)
        return d.sum(axis=0) - np.einsum("gks,gkt->st", m, m)  # type: ignore[no-any-return]

    def system_df(self, v: Array) -> float:
        """``η`` of the Hotelling-T² approximation for independent rows ``v`` (k, q)."""
        q = v.shape[1]
        mean = self.mean(v)
        try:
            chol = np.linalg.cholesky((mean + mean.T) / 2)
        except np.linalg.LinAlgError as exc:
            raise SingularCovarianceError(
                "the working-model covariance of the restriction rows is singular under the"
                " adjusted cluster-robust estimator: test fewer rows at once."
            ) from exc
        # V* = V L⁻ᵀ so that the working-model mean of V̂* is the identity
        vs = np.linalg.solve(chol, v.T).T
        d, m = self._parts(vs)
        mm = np.einsum("gks,gkt->gst", m, m)
        tr_d = np.einsum("gss->g", d)
        tr_mm = np.einsum("gss->g", mm)
        k = np.einsum("gis,gjt->stij", m, m)
        total = (
            float(np.sum(tr_d**2) + np.sum(d * d))
            - 2.0 * float(np.sum(tr_d * tr_mm) + np.sum(d * mm))
            + float(np.einsum("stij,stij->", k, k) + np.einsum("stij,stji->", k, k))
        )
        return float(q * (q + 1) / total) if total > 0 else float("inf")


class AdjustedClusterMeat(ClusterBlockMeat):
    """The bias-reduced or jackknife cluster-robust covariance as block / merge / finish."""

    def __init__(self, fit: Any, name: str, adjust: str, df: float | None) -> None:
        super().__init__(fit)
        self.name = name
        self.adjust = adjust
        self.df = df

    def finish(self, part: Any) -> CovarianceEstimate:
        """The estimate from the merged per-cluster blocks of all the fit's rows."""
        return estimate_from_pieces(self.pieces(part), self, self.name, self.adjust, self.df)


def estimate_from_pieces(
    pc: ClusterPieces, meat: Any, name: str, adjust: str, df: float | None
) -> CovarianceEstimate:
    """The adjusted cluster-robust estimate from the working pieces ``B_g`` and ``u_g``."""
    g = pc.clusters
    if g < 2:
        raise CovarianceInputError(
            f"cluster labels {name!r} hold a single cluster; a cluster-robust covariance needs"
            " at least two clusters."
        )
    power = 0.5 if adjust == "bias-reduced" else 1.0
    scale = 1.0 if adjust == "bias-reduced" else (g - 1) / g
    a = adjustment(pc.hat, power)
    s = np.einsum("gij,gj->gi", a, pc.scores)
    factor, _ = psd_factor(scale * (s.T @ s))
    ba = pc.hat @ a
    small = SmallSampleDf(ba @ a, ba) if df is None else None
    what = "bias-reduced" if adjust == "bias-reduced" else "jackknife"
    df_note = "small-sample df per test" if df is None else f"df {df:g}"
    return CovarianceEstimate(
        method=f"cluster ({what})",
        label=f"cluster by {name} ({g} groups, {what}; {df_note})",
        df_error=float(g - 1) if df is None else float(df),
        groups=(g,),
        scale=scale,
        _sol=meat.sol,
        _factor=factor,
        _small_sample=small,
    )
