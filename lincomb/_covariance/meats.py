"""Robust meats written once, as block / merge / finish.

Every row-based estimator is a sum over rows (HC), over clusters of row sums (cluster-robust) or
over lagged pairs of rows (serial), so it is computed from blocks of rows:

``block(xc, resid, w, labels)``
    One block of rows (centred kept columns ``X_c`` and unweighted residuals ``e`` from
    :class:`~lincomb._covariance.rows.RowMap`, the weights, the cluster labels) gives a small
    :class:`Partial`: the block's row count, weighted residual sum of squares and meat pieces.
``merge(a, b, ...)``
    Partials of disjoint blocks combine exactly (in time order for the serial meat).
``finish(partial)``
    The merged partial becomes the :class:`~lincomb._covariance.estimate.CovarianceEstimate`:
    the small-sample factor, the two-way inclusion-exclusion, the factor of the meat, the label
    and the reference df.

An in-memory fit runs these over blocks of its rows (:mod:`lincomb._covariance.in_memory`); the
second passes over chunks and Dask partitions (:mod:`lincomb._covariance.second_pass`) run the
same code over theirs, so all give the same numbers up to the order of summation.

Meat pieces, in the working coordinates ``Z = X̃_w R⁻¹`` (orthonormal columns):

* HC: ``Σ ω_i z_i z_iᵀ`` with ``z_i`` from one triangular solve per block and the leverage
  ``h_i = ‖z_i‖²`` (a ``k × k`` matrix per block, merged by adding);
* cluster: the score sums ``Σ_{i∈g} w_i e_i x_c,i`` per cluster, in centred coordinates (labels
  and a ``G × k`` array, merged by adding per label), mapped by ``(R S)⁻ᵀ`` once at the end: a
  triangular solve with ``G`` right-hand sides, not ``n``;
* serial: the Bartlett-weighted lag sums within the block, and its first and last ``lag``
  scores, so that merging two adjacent blocks adds the lagged pairs across their boundary.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
import scipy.linalg as sla
from numpy.typing import NDArray
from scipy import sparse

from lincomb import _core as core
from lincomb._covariance.estimate import CovarianceEstimate, psd_factor
from lincomb._covariance.few_clusters import warn_few_clusters
from lincomb._typing import Array
from lincomb.errors import CovarianceInputError, SingularFactorError

__all__ = [
    "LEVERAGE_TOL",
    "Partial",
    "Groups",
    "HeteroskedasticMeat",
    "ClusterMeat",
    "SerialMeat",
    "bartlett_meat",
    "leverage_weights",
    "scores",
]


#: Rows with ``1 - h_i`` at most this are fitted exactly and dropped from HC2-HC4 meats.
LEVERAGE_TOL: float = 1e-10


@dataclass(frozen=True)
class Groups:
    """Score sums per cluster: ``keys`` (one label array, or two for intersection cells) and
    ``sums`` (clusters × k), rows in the order of the keys."""

    keys: tuple[NDArray[Any], ...]
    sums: Array

    def __len__(self) -> int:
        return int(self.sums.shape[0])


@dataclass(frozen=True)
class Partial:
    """What a block of rows contributes to a meat.

    ``gram`` is the HC or serial meat of the block; ``groups`` the cluster score sums (one per
    clustering, and the intersection cells for two-way); ``head``/``tail`` the first and last
    ``lag`` scores of a serial block.
    """

    n: int
    rss: float
    gram: Array | None = None
    groups: tuple[Groups, ...] = ()
    head: Array | None = field(default=None, repr=False)
    tail: Array | None = field(default=None, repr=False)
    extra: Any = field(default=None, repr=False)


def leverage_weights(kind: str, zt: Array, n_obs: int, k: int) -> Array:
    """HC2-HC4 weights ``(1 - h_i)^-a_i`` of the squared residuals, from the working rows ``zt``
    (k, b) of some or all of the fit's ``n_obs`` rows.  A row with leverage within
    :data:`LEVERAGE_TOL` of 1 gets weight 0: its residual is exactly zero.

    Examples
    --------
    >>> import numpy as np
    >>> zt = np.array([[0.6, 0.8, 0.0]])  # leverages 0.36, 0.64, 0
    >>> leverage_weights("HC2", zt, 3, 1).round(4).tolist()
    [1.5625, 2.7778, 1.0]
    """
    h = np.einsum("ij,ij->j", zt, zt)
    free = np.clip(1.0 - h, 0.0, None)
    exact = free <= LEVERAGE_TOL
    if kind == "HC2":
        power = np.ones(h.size)
    elif kind == "HC3":
        power = np.full(h.size, 2.0)
    else:
        power = np.minimum(4.0, n_obs * h / k)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(exact, 0.0, np.power(np.where(exact, 1.0, free), -power))


def _root_weights(kind: str, zt: Array, n_obs: int, k: int) -> Array:
    """Square roots of :func:`leverage_weights` (the same rule, without ``pow`` where the
    power is fixed): each working row is scaled by it before its outer product is summed."""
    if kind == "HC4":
        return np.sqrt(leverage_weights(kind, zt, n_obs, k))
    h = np.einsum("ij,ij->j", zt, zt)
    free = 1.0 - h
    exact = free <= LEVERAGE_TOL
    free[exact] = 1.0
    out: Array = np.reciprocal(free if kind == "HC3" else np.sqrt(free, out=free))
    out[exact] = 0.0
    return out


def _scaled_gram(zt: Array, scale: Array) -> Array:
    """``Σ_i scale_i² z_i z_iᵀ`` for working rows ``zt`` (k, b), scaled in place (``zt`` is the
    block's own array): one symmetric rank-b update (BLAS ``syrk``), half the arithmetic of a
    general product and no ``k × b`` temporary."""
    if zt.shape[0] == 0:
        return np.zeros((0, 0))
    zt *= scale
    z = zt.T  # (b, k), column-major when zt is row-major: syrk reads it without a copy
    upper = np.asarray(sla.blas.dsyrk(1.0, z, trans=1))
    return np.triu(upper) + np.triu(upper, 1).T


def _weighted(xc: Array, resid: Array, w: Array | None) -> tuple[Array, Array]:
    """``sqrt(w)·X_c`` (in place: ``xc`` is the block's own copy) and ``sqrt(w)·e``."""
    if w is None:
        return xc, resid
    sw = np.sqrt(w)
    xc *= sw[:, None]
    return xc, resid * sw


def _working(rs: Array, xc: Array) -> Array:
    """``Zᵀ`` (k, b) with ``Z = X̃_c (R S)⁻¹`` for a block of weighted centred rows.

    A triangular solve from the right (BLAS ``trsm``) on the column-major block, overwriting
    it: on one thread it took half the time of the same solve from the left on ``X̃_cᵀ``
    (k = 20, 3,276 rows: 0.33 ms against 0.75 ms).
    """
    if rs.shape[0] == 0:
        return np.zeros((0, xc.shape[0]))
    if np.any(np.diagonal(rs) == 0):  # pragma: no cover - kept columns have a nonzero pivot
        raise SingularFactorError("singular factor: a zero on the diagonal")
    xf = np.asfortranarray(xc)
    return np.asarray(sla.blas.dtrsm(1.0, rs, xf, side=1, overwrite_b=1)).T


def scores(zt: Array, resid: Array) -> Array:
    """The scores ``g_i = z_i ẽ_i`` (b, k), row-major, of a block's working rows ``zt`` (k, b).

    Examples
    --------
    >>> import numpy as np
    >>> scores(np.array([[1.0, 2.0], [3.0, 4.0]]), np.array([10.0, -1.0])).tolist()
    [[10.0, 30.0], [-2.0, -4.0]]
    """
    return np.ascontiguousarray((zt * resid).T)


def _bartlett_weight(ell: int, lag: int) -> float:
    """The Bartlett weight ``1 − ℓ/(lag+1)`` of the lag-``ℓ`` products."""
    return 1.0 - ell / (lag + 1.0)


def bartlett_meat(s: Array, lag: int, same: Sequence[NDArray[np.bool_]] | None = None) -> Array:
    """``Σ_t s_t s_tᵀ + Σ_{ℓ≤lag} (1 − ℓ/(lag+1)) (Γ_ℓ + Γ_ℓᵀ)`` for scores ``s`` (T, k) in
    time order; with ``same`` (a function of the lag giving which pairs count) only pairs
    of rows of one unit count.

    Examples
    --------
    >>> import numpy as np
    >>> s = np.array([[1.0], [2.0], [3.0]])
    >>> float(bartlett_meat(s, 1)[0, 0])  # 14 + 0.5 * 2 * (2 + 6)
    22.0
    """
    meat = s.T @ s
    for ell in range(1, min(lag, s.shape[0] - 1) + 1):
        a, b = s[ell:], s[:-ell]
        if same is not None:
            keep = same[ell - 1]
            a, b = a[keep], b[keep]
        gam = a.T @ b
        meat += _bartlett_weight(ell, lag) * (gam + gam.T)
    return meat


def _clipped_note(label: str, clipped: int) -> str:
    """``label`` with a note of how many negative eigenvalues the factor set to 0."""
    return label + f"; {clipped} negative eigenvalue(s) set to 0" if clipped else label


def _merge_groups(parts: tuple[Partial, ...]) -> Partial:
    """Partials of cluster (or time) score sums merged by adding the sums of equal labels."""
    groups = []
    for j in range(len(parts[0].groups)):
        pieces = [p.groups[j] for p in parts]
        if len(pieces) == 1:
            groups.append(pieces[0])
            continue
        keys = tuple(
            np.concatenate([pc.keys[c] for pc in pieces]) for c in range(len(pieces[0].keys))
        )
        sums = np.concatenate([pc.sums for pc in pieces])
        codes, uniq = _codes(keys)
        groups.append(Groups(uniq, _group_sum(codes, len(uniq[0]), np.ones(codes.size), sums)))
    return Partial(sum(p.n for p in parts), math.fsum(p.rss for p in parts), groups=tuple(groups))


class _Meat:
    """What every meat shares: the fit's solution, its row count and rank.

    ``fortran``: the block's rows are wanted column-major (for a solve from the right);
    ``row_blocks``: an in-memory fit gains from visiting its rows in blocks of ``block_scale``
    cache-sized blocks, and of at least ``min_block_rows`` rows.
    """

    fortran = True
    row_blocks = True
    block_scale = 1
    min_block_rows = 0

    def __init__(self, fit: Any) -> None:
        self.sol: core.Solution = fit.solution
        self.n_obs: int = int(fit.n_obs)
        self.k: int = int(self.sol.rank)
        self.df_error = float(fit.df_error)
        self.rs: Array = self.sol.r * self.sol.scale[self.sol.kept]

    def block(
        self,
        xc: Array,
        resid: Array,
        w: Array | None,
        labels: tuple[NDArray[Any], ...] = (),  # noqa: ARG002 - for the meats that override this
    ) -> Partial:
        """The partial of one block of rows: by default :meth:`_from_working` of its rows in
        working coordinates (meats that need the labels or centred scores have their own)."""
        return self._from_working(*self._working_rows(xc, resid, w))

    def _working_rows(self, xc: Array, resid: Array, w: Array | None) -> tuple[Array, Array]:
        """The block's weighted rows in working coordinates, ``Zᵀ`` (k, b), and its weighted
        residuals ``ẽ``."""
        xc, resid = _weighted(xc, resid, w)
        return _working(self.rs, xc), resid

    def _from_working(self, zt: Array, resid: Array) -> Partial:
        """The partial of a block from ``Zᵀ`` (k, b, the block's own array) and ``ẽ``."""
        raise NotImplementedError  # pragma: no cover - a meat has this or its own block

    def merge(self, *parts: Partial) -> Partial:
        """Combine the partials of disjoint blocks of rows."""
        raise NotImplementedError  # pragma: no cover - each meat has its own


class _LaggedMeat(_Meat):
    """What the Newey–West meats share: the lag, the small-sample factor ``n/(n − k)`` and
    the reference df, and an estimate from the finished meat."""

    def __init__(self, fit: Any, lag: Any, small_sample: bool, df: float | None) -> None:
        super().__init__(fit)
        self.lag = lag
        self.small_sample = small_sample
        self.df = df

    def _scale(self) -> float:
        n, k = self.n_obs, self.k
        return n / (n - k) if self.small_sample else 1.0

    def _estimate(
        self, method: str, label: str, meat: Array, lag: int, df_error: float
    ) -> CovarianceEstimate:
        """The estimate from the unscaled meat; ``df_error`` is used unless ``df`` was given."""
        scale = self._scale()
        factor, clipped = psd_factor(meat * scale)
        return CovarianceEstimate(
            method=method,
            label=_clipped_note(label, clipped),
            df_error=df_error if self.df is None else float(self.df),
            lag=lag,
            scale=scale,
            clipped=clipped,
            _sol=self.sol,
            _factor=factor,
        )


class HeteroskedasticMeat(_Meat):
    """``HC0`` ... ``HC4`` as block / merge / finish."""

    def __init__(self, fit: Any, kind: str) -> None:
        super().__init__(fit)
        self.kind = kind

    def _from_working(self, zt: Array, resid: Array) -> Partial:
        """The block's ``Σ ω_i z_i z_iᵀ`` (HC1's factor is applied at the end)."""
        scale = np.abs(resid)  # ω_i = scale_i²
        if self.kind in ("HC2", "HC3", "HC4"):
            scale *= _root_weights(self.kind, zt, self.n_obs, self.k)
        return Partial(resid.size, float(resid @ resid), _scaled_gram(zt, scale))

    def merge(self, *parts: Partial) -> Partial:
        gram = parts[0].gram
        assert gram is not None
        for p in parts[1:]:
            assert p.gram is not None
            gram = gram + p.gram
        return Partial(sum(p.n for p in parts), math.fsum(p.rss for p in parts), gram)

    def finish(self, part: Partial) -> CovarianceEstimate:
        """The estimate from the merged partial of all the fit's rows."""
        assert part.gram is not None
        n, k = self.n_obs, self.k
        scale = n / (n - k) if self.kind == "HC1" else 1.0
        factor, _ = psd_factor(scale * part.gram)
        return CovarianceEstimate(
            method=self.kind,
            label=self.kind,
            df_error=self.df_error,
            scale=scale,
            _sol=self.sol,
            _factor=factor,
        )


def _codes(keys: tuple[NDArray[Any], ...]) -> tuple[NDArray[np.intp], tuple[NDArray[Any], ...]]:
    """Cluster codes of rows given by one label array (or two, for intersection cells), and
    the keys of the clusters in order of first appearance."""
    if len(keys) == 1:
        codes, uniq = pd.factorize(keys[0], sort=False)
        return codes.astype(np.intp), (np.asarray(uniq),)
    c0, u0 = pd.factorize(keys[0], sort=False)
    c1, u1 = pd.factorize(keys[1], sort=False)
    g1 = len(u1)
    codes, cells = pd.factorize(c0.astype(np.int64) * g1 + c1, sort=False)
    return codes.astype(np.intp), (np.asarray(u0)[cells // g1], np.asarray(u1)[cells % g1])


def _group_sum(codes: NDArray[np.intp], g: int, weights: Array, values: Array) -> Array:
    """``Σ_{i: code_i = j} weights_i values_i`` for each group ``j`` (g, k): one sparse product."""
    member = sparse.csc_array((weights, codes, np.arange(codes.size + 1)), shape=(g, codes.size))
    return np.asarray(member @ values)


class ClusterMeat(_Meat):
    """One- and two-way cluster-robust meats as block / merge / finish.

    ``names`` are the clustering variables' names (for labels and messages).  Blocks of rows
    from chunks or partitions carry raw labels, coded per block (a hash table each).  An
    in-memory fit codes its labels once and passes ``coded``, the number of clusters of each
    way (two-way: first, second and intersection cells); its blocks then carry those codes,
    each block's score sums form a dense ``G × k`` array (one sparse indicator product), and
    merging adds them.  Blocks hold at least ``4 · max(coded)`` rows, so that no block's sums
    outgrow a quarter of its rows.
    """

    fortran = False
    row_blocks = False

    def __init__(
        self,
        fit: Any,
        names: tuple[str, ...],
        small_sample: bool,
        df: float | None,
        two_way_factor: str = "per-term",
        coded: tuple[int, ...] = (),
    ) -> None:
        super().__init__(fit)
        self.names = names
        self.small_sample = small_sample
        self.df = df
        self.two_way_factor = two_way_factor
        self.coded = coded
        if coded:
            # no solve per row to keep in cache: larger blocks (4 cache-sized ones, and 4 rows
            # per cluster) spread the sparse product's fixed cost and its G × k output; at
            # n = 1e5, k = 20, G = 1,000 the pass took 0.30 of the fit's time against 0.38 with
            # cache-sized blocks (one thread, busy cores), as fast as one block of all rows
            self.row_blocks = True
            self.block_scale = 4
            self.min_block_rows = 4 * max(coded)
            self._keys = tuple((np.arange(g),) for g in coded)

    def block(
        self, xc: Array, resid: Array, w: Array | None, labels: tuple[NDArray[Any], ...] = ()
    ) -> Partial:
        """Score sums per cluster of the block, in centred coordinates (and per intersection
        cell of the two labellings)."""
        u = resid if w is None else resid * w  # w_i e_i: the score is u_i x_c,i
        rss = float(resid @ u)
        if self.coded:
            groups = tuple(
                Groups(keys, _group_sum(codes, g, u, xc))
                for keys, codes, g in zip(self._keys, labels, self.coded, strict=True)
            )
            return Partial(resid.size, rss, groups=groups)
        ways: list[tuple[NDArray[Any], ...]] = [(lab,) for lab in labels]
        if len(labels) == 2:
            ways.append((labels[0], labels[1]))
        groups_: list[Groups] = []
        for keys_ in ways:
            codes_, uniq = _codes(keys_)
            groups_.append(Groups(uniq, _group_sum(codes_, len(uniq[0]), u, xc)))
        return Partial(resid.size, rss, groups=tuple(groups_))

    def merge(self, *parts: Partial) -> Partial:
        if not self.coded or len(parts) == 1:
            return _merge_groups(parts)
        groups = []
        for j, keys in enumerate(self._keys):
            sums = parts[0].groups[j].sums.copy()
            for p in parts[1:]:
                sums += p.groups[j].sums
            groups.append(Groups(keys, sums))
        rss = math.fsum(p.rss for p in parts)
        return Partial(sum(p.n for p in parts), rss, groups=tuple(groups))

    def _meat(self, groups: Groups) -> tuple[Array, float]:
        n, k, g = self.n_obs, self.k, len(groups)
        sq = core.upper_solve(self.rs, groups.sums.T, trans=True) if k else np.zeros((0, g))
        adj = g / (g - 1) * (n - 1) / (n - k) if self.small_sample else 1.0
        return sq @ sq.T, adj

    def finish(self, part: Partial) -> CovarianceEstimate:
        """The estimate from the merged partial of all the fit's rows."""
        names = self.names
        sizes = [len(gr) for gr in part.groups[: len(names)]]
        for name, g in zip(names, sizes, strict=True):
            if g < 2:
                raise CovarianceInputError(
                    f"cluster labels {name!r} hold a single cluster; a cluster-robust covariance"
                    " needs at least two clusters (and preferably many more)."
                )
        warn_few_clusters(names, sizes)
        clipped = 0
        if len(names) == 1:
            m1, adj = self._meat(part.groups[0])
            factor, _ = psd_factor(adj * m1)
            scale: float | tuple[float, ...] = adj
            method = "cluster"
            label = f"cluster by {names[0]} ({sizes[0]} groups)"
        else:
            m1, a1 = self._meat(part.groups[0])
            m2, a2 = self._meat(part.groups[1])
            if len(part.groups[2]) > 1:
                m12, a12 = self._meat(part.groups[2])
            else:  # one intersection cell: its one-way meat is zero (scores sum to zero)
                m12, a12 = np.zeros((self.k, self.k)), 0.0
            if self.two_way_factor == "smaller":
                # one factor, from the clustering with fewer clusters, for all three terms
                a1 = a2 = a12 = a1 if sizes[0] <= sizes[1] else a2
            factor, clipped = psd_factor(a1 * m1 + a2 * m2 - a12 * m12)
            scale = (a1, a2, a12)
            method = "two-way cluster"
            label = f"two-way cluster by {names[0]} × {names[1]} ({sizes[0]}, {sizes[1]} groups)"
            if self.two_way_factor == "smaller":
                label += "; one small-sample factor, from the smaller clustering"
        return CovarianceEstimate(
            method=method,
            label=_clipped_note(label, clipped),
            df_error=float(min(sizes) - 1) if self.df is None else float(self.df),
            groups=tuple(sizes),
            scale=scale,
            clipped=clipped,
            _sol=self.sol,
            _factor=factor,
        )


class SerialMeat(_LaggedMeat):
    """The Newey–West meat (Bartlett weights) as block / merge / finish; blocks are runs of
    consecutive rows in time order, merged in that order."""

    def __init__(
        self, fit: Any, lag: int, order_name: str, small_sample: bool, df: float | None
    ) -> None:
        super().__init__(fit, lag, small_sample, df)
        self.order_name = order_name

    def _from_working(self, zt: Array, resid: Array) -> Partial:
        """``Γ₀ + Σ_ℓ w_ℓ (Γ_ℓ + Γ_ℓᵀ)`` over the pairs of rows inside the block."""
        s = scores(zt, resid)
        meat = bartlett_meat(s, self.lag)
        lag = self.lag
        return Partial(resid.size, float(resid @ resid), meat, head=s[:lag], tail=s[-lag:][:lag])

    def merge(self, *parts: Partial) -> Partial:
        acc = parts[0]
        for b in parts[1:]:
            acc = self._merge2(acc, b)
        return acc

    def _merge2(self, a: Partial, b: Partial) -> Partial:
        assert a.gram is not None and b.gram is not None
        assert a.tail is not None and a.head is not None
        assert b.tail is not None and b.head is not None
        lag, ta, hb = self.lag, a.tail, b.head
        meat = a.gram + b.gram
        for ell in range(1, lag + 1):
            # pairs (row j of b, row ℓ - j before it, at the end of a)
            lo, hi = max(0, ell - ta.shape[0]), min(ell, hb.shape[0])
            if hi > lo:
                end = ta.shape[0] - ell
                gam = hb[lo:hi].T @ ta[end + lo : end + hi]
                meat += _bartlett_weight(ell, lag) * (gam + gam.T)
        head = np.concatenate([a.head, b.head])[:lag]
        tail = np.concatenate([a.tail, b.tail])[-lag:] if lag else b.tail
        return replace(b, n=a.n + b.n, rss=a.rss + b.rss, gram=meat, head=head, tail=tail)

    def finish(self, part: Partial) -> CovarianceEstimate:
        """The estimate from the merged partial of all the fit's rows, in time order."""
        assert part.gram is not None
        label = f"serial (Bartlett, lag {self.lag}, {self.order_name})"
        return self._estimate("serial", label, part.gram, self.lag, self.df_error)
