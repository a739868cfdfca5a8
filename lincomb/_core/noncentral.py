"""Power of the F test under a noncentral F alternative, and the searches built on it.

This module is part of the numerical core: it works on plain floats and float64 arrays and knows
nothing of names, formulas or pandas.  The planning layer (:mod:`lincomb._plan`) turns a design,
a restriction system and an alternative into a noncentrality ``λ`` and degrees of freedom and
asks the questions here.

Numerics
--------
* Power is ``P(F > F_crit)`` with ``F_crit`` the ``1 − α`` quantile of the central
  ``F(q, df2)`` and ``F`` noncentral with noncentrality ``λ``: ``scipy.stats.ncf.sf``.
* At ``λ = 0`` the power is ``α`` exactly: scipy's noncentral F is not used there (its
  survival function returned ``α − 1`` at ``nc = 0``).
* For a huge ``λ`` (about ``1e20`` and beyond, or ``λ = inf`` after an overflow) scipy's
  noncentral F returns NaN.  There the power comes from a lower bound that tends to 1: writing
  ``F = (X/q)/(Y/df2)`` with ``X ~ χ²(q, λ)`` and ``Y ~ χ²(df2)`` independent,
  ``X ≥ (Z + √λ)²`` with ``Z`` standard normal, so

      1 − power ≤ Φ(−(1 − 1/√2)·√λ) + P(Y ≥ λ·df2 / (2·q·F_crit)),

  (``X ≤ λ/2`` or ``Y ≥ X·df2/(q·F_crit)`` with ``X > λ/2``).  When the bound is within
  :data:`SATURATION_TOL` of 1 the power is 1 to double precision and is returned as 1;
  otherwise (only with an absurd critical value) :class:`~lincomb.errors.ParameterError` is
  raised rather than a guess.
* The noncentrality that reaches a target power is found by Brent's method on
  ``power(λ) − target`` (absolute tolerance :data:`LAMBDA_XTOL`, relative
  :data:`LAMBDA_RTOL`), after doubling an upper bracket.
* The replicate search (:func:`search_replicates`) finds the smallest integer with power at
  least the target by doubling and integer bisection; it relies on power increasing in the
  replicate count.

>>> import numpy as np
>>> float(power(0.0, 2, 20.0, 0.05)), float(power(np.inf, 2, 20.0, 0.05))
(0.05, 1.0)
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, stats

from lincomb.errors import ParameterError, UnreachablePowerError

__all__ = [
    "LAMBDA_XTOL",
    "LAMBDA_RTOL",
    "SATURATION_TOL",
    "critical_value",
    "power",
    "lambda_for",
    "search_replicates",
]

#: Absolute tolerance on the noncentrality when solving ``power(λ) = target``.
LAMBDA_XTOL: float = 1e-12
#: Relative tolerance on the noncentrality when solving ``power(λ) = target``.
LAMBDA_RTOL: float = 4 * np.finfo(float).eps
#: Where scipy's noncentral F fails (NaN) for a huge noncentrality, power is 1 when the lower
#: bound of the module notes is within this of 1.
SATURATION_TOL: float = 2 * np.finfo(float).eps


def critical_value(q: int, df2: ArrayLike, alpha: float) -> NDArray[np.float64]:
    """The ``1 − alpha`` quantile of the central ``F(q, df2)`` (elementwise in ``df2``).

    Examples
    --------
    >>> round(float(critical_value(1, 10.0, 0.05)), 4)  # F(1, 10) upper 5% point, tables
    4.9646
    """
    df2_a = np.asarray(df2, dtype=np.float64)
    return np.asarray(stats.f.isf(alpha, q, df2_a), dtype=np.float64)


def _saturated(
    lam: NDArray[np.float64], q: int, df2: NDArray[np.float64], crit: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Power where scipy fails at a huge noncentrality: 1, justified by the module's bound."""
    with np.errstate(over="ignore", invalid="ignore"):
        miss = stats.norm.cdf(-(1 - np.sqrt(0.5)) * np.sqrt(lam))
        miss = miss + stats.chi2.sf(lam * df2 / (2.0 * q * crit), df2)
    bad = ~(miss <= SATURATION_TOL)
    if np.any(bad):
        i = int(np.flatnonzero(bad)[0])
        raise ParameterError(
            f"the power at noncentrality {lam[i]:.6g} (F({q}, {df2[i]:g}), critical value"
            f" {crit[i]:.6g}) cannot be computed: scipy's noncentral F fails there and the"
            " bound that shows power 1 does not reach it. Use a larger alpha or a smaller effect."
        )
    return np.ones(lam.shape, dtype=np.float64)


def power(lam: ArrayLike, q: int, df2: ArrayLike, alpha: float) -> NDArray[np.float64]:
    """Power of the level-``alpha`` F test at noncentrality ``lam`` (elementwise).

    Parameters
    ----------
    lam : array_like
        Noncentralities ``λ ≥ 0`` (``inf`` allowed: power 1).
    q : int
        Numerator degrees of freedom.
    df2 : array_like
        Denominator degrees of freedom (broadcast against ``lam``).
    alpha : float
        Level of the test.

    Returns
    -------
    ndarray
        Powers in ``[alpha, 1]``.

    Raises
    ------
    ParameterError
        A huge ``λ`` where scipy fails and the saturation bound (module notes) is not 1.

    Examples
    --------
    >>> import numpy as np
    >>> p = power(np.array([0.0, 5.0, 1e30]), 1, 18.0, 0.05)
    >>> p[0], round(float(p[1]), 4), p[2]
    (np.float64(0.05), 0.562, np.float64(1.0))
    """
    lam_a, df2_a = np.broadcast_arrays(np.asarray(lam, float), np.asarray(df2, float))
    crit = critical_value(q, df2_a, alpha)
    out = np.full(lam_a.shape, alpha, dtype=np.float64)
    pos = lam_a > 0
    if np.any(pos):
        # scipy's ncf.sf is wrong at nc = 0 (it returns alpha - 1), hence the mask
        with np.errstate(over="ignore", invalid="ignore"):
            vals = np.asarray(stats.ncf.sf(crit[pos], q, df2_a[pos], lam_a[pos]), np.float64)
        fail = ~np.isfinite(vals)
        if np.any(fail):
            vals[fail] = _saturated(lam_a[pos][fail], q, df2_a[pos][fail], crit[pos][fail])
        out[pos] = vals
    return np.asarray(np.clip(out, alpha, 1.0), dtype=np.float64)


def lambda_for(target: float, q: int, df2: float, alpha: float) -> float:
    """Noncentrality at which the level-``alpha`` F(q, df2) test has power ``target``.

    Examples
    --------
    >>> lam = lambda_for(0.8, 1, 18.0, 0.05)
    >>> round(float(power(lam, 1, 18.0, 0.05)[()]), 10)
    0.8
    """

    def gap(lam: float) -> float:
        return float(power(lam, q, df2, alpha)) - target

    hi = max(1.0, float(q))
    while gap(hi) < 0:
        hi *= 2.0
        if hi > 1e12:  # pragma: no cover - power reaches any target < 1 long before
            raise UnreachablePowerError(f"no noncentrality below 1e12 gives power {target}.")
    return float(optimize.brentq(gap, 0.0, hi, xtol=LAMBDA_XTOL, rtol=LAMBDA_RTOL))


def search_replicates(
    power_at: Callable[[int], float], target: float, lo: int, cap: int
) -> int | None:
    """Smallest ``r`` in ``[lo, cap]`` with ``power_at(r) >= target`` (power increasing in r).

    Returns None when even ``cap`` falls short.

    Examples
    --------
    >>> search_replicates(lambda r: 1 - 1 / r, 0.9, 2, 1000)
    10
    >>> search_replicates(lambda r: 0.5, 0.9, 2, 1000) is None
    True
    """
    if power_at(lo) >= target:
        return lo
    below, above = lo, lo
    while True:
        if above >= cap:
            return None
        above = min(2 * above, cap)
        if power_at(above) >= target:
            break
        below = above
    while above - below > 1:
        mid = (below + above) // 2
        if power_at(mid) >= target:
            above = mid
        else:
            below = mid
    return above
