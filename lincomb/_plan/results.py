"""Result objects of a power plan: power, replicates needed, detectable effects, power curves.

Frozen dataclasses with tidy ``to_frame`` exports and text and HTML reprs; drawing is
:func:`lincomb.plot.power_curve`.
"""

from __future__ import annotations

import html
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb._docstrings import AX_PARAMETER, FIGURE_RETURNS, fill_doc
from lincomb._results.format import TableRepr, _num
from lincomb._results.frames import field_frame

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = [
    "PowerResult",
    "SampleSize",
    "DetectableEffect",
    "PowerCurve",
    "POWER_COLUMNS",
    "CURVE_COLUMNS",
]

#: Columns of :meth:`PowerResult.to_frame` (one row per planned study).
POWER_COLUMNS = (
    "restrictions",
    "rank",
    "replicates",
    "n_obs",
    "df_test",
    "df_error",
    "sigma",
    "alpha",
    "noncentrality",
    "critical_value",
    "power",
)
#: Columns of :meth:`PowerCurve.to_frame` (one row per replicate count).
CURVE_COLUMNS = (
    "replicates",
    "n_obs",
    "df_test",
    "df_error",
    "noncentrality",
    "critical_value",
    "power",
)


#: Example set-up: a plan for testing that two groups differ (``g[T.b] = 0``), sigma 1.
TWO_GROUP_PLAN = """\
>>> import pandas as pd, lincomb as lc
>>> plan = lc.planned_design("g", pd.DataFrame({"g": ["a", "b"]})).plan(
...     lc.coef("g[T.b]") == 0, sigma=1.0)"""
_plan_doc = fill_doc(two_group_plan=TWO_GROUP_PLAN)


def _effect_rows(
    labels: Sequence[str],
    target: NDArray[np.float64],
    alternative: NDArray[np.float64],
    shift: NDArray[np.float64],
    redundant: Mapping[int, Any],
) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "restriction": list(labels),
            "target": target,
            "alternative": alternative,
            "shift": shift,
            "role": ["redundant" if i in redundant else "independent" for i in range(len(labels))],
        }
    )


_ROW_HEADER = ["restriction", "d", "alternative Cβ", "shift"]
_POWER_DIV = "<div class='lincomb-power'>"  # what the HTML of every plan result stands in


def _study_line(res: _PlannedStudy) -> str:
    """The line that describes a planned study: its size, F test and noncentrality."""
    return (
        f"n = {res.n_obs} ({res.replicates} replicate(s)); F({res.df_test}, {res.df_error}) at"
        f" alpha = {res.alpha:g}, sigma = {res.sigma:.6g}; noncentrality = {res.noncentrality:.6g}"
    )


@dataclass(frozen=True, kw_only=True, repr=False)
class _PlannedStudy(TableRepr):
    """What a power result and a detectable effect share: the rows under the alternative and
    the study (its size, its F test's degrees of freedom, noncentrality and power).

    The fields are described in each subclass's docstring.
    """

    _HTML_DIV = _POWER_DIV

    labels: tuple[str, ...]
    target: NDArray[np.float64]
    alternative: NDArray[np.float64]
    shift: NDArray[np.float64]
    df_test: int
    df_error: int
    noncentrality: float
    power: float
    alpha: float
    sigma: float
    replicates: int
    n_obs: int

    def _shift_rows(self, redundant: Mapping[int, Any]) -> list[list[str]]:
        """Rows of the table under the head: ``restriction, d, alternative Cβ, shift``."""
        rows = zip(self.labels, self.target, self.alternative, self.shift, strict=True)
        return [
            [lab + (" (redundant)" if i in redundant else ""), _num(t), _num(a), _num(s)]
            for i, (lab, t, a, s) in enumerate(rows)
        ]


@_plan_doc
@dataclass(frozen=True, kw_only=True, repr=False)
class PowerResult(_PlannedStudy):
    """Power of the F test of ``C·β = d`` under one alternative and study size.

    Attributes
    ----------
    labels : tuple of str
    target : (m,) ndarray
        Hypothesized ``d``.
    alternative : (m,) ndarray
        ``Cβ`` under the alternative.
    shift : (m,) ndarray
        ``Cβ − d``.
    df_test, df_error : int
        Degrees of freedom of the F statistic.
    noncentrality : float
        ``λ`` (see :mod:`lincomb._plan.plan`).
    critical_value : float
        The ``1 − alpha`` quantile of the central ``F(df_test, df_error)``.
    power : float
        ``P(F > critical_value)`` under the alternative.
    alpha, sigma : float
    replicates, n_obs : int
        Replicates of the pattern and the observations they make.
    redundant : dict

    Examples
    --------
    %(two_group_plan)s
    >>> r = plan.power(effect=1.0, replicates=10)
    >>> r.n_obs, r.df_error, round(r.power, 4)
    (20, 18, 0.5620)
    """

    critical_value: float
    redundant: dict[int, dict[int, float]] = field(default_factory=dict)

    @property
    def noncentrality_per_obs(self) -> float:
        """``λ / n``: the effect size ``f²`` of the convention ``λ = f²·N``."""
        return self.noncentrality / self.n_obs

    @_plan_doc
    def to_frame(self) -> pd.DataFrame:
        """One row: the columns of :data:`POWER_COLUMNS`.

        ``restrictions`` (the system as algebra), ``rank`` and ``df_test`` (rank of ``C``),
        ``replicates``, ``n_obs``, ``df_error``, ``sigma``, ``alpha``, ``noncentrality``,
        ``critical_value`` (of the central F) and ``power``.

        Examples
        --------
        %(two_group_plan)s
        >>> plan.power(effect=1.0, replicates=10).to_frame()[["n_obs", "noncentrality"]]
           n_obs  noncentrality
        0     20            5.0
        """
        return pd.DataFrame(
            [
                {
                    "restrictions": " & ".join(self.labels),
                    "rank": self.df_test,
                    **{c: getattr(self, c) for c in POWER_COLUMNS[2:]},  # fields of that name
                }
            ],
            columns=list(POWER_COLUMNS),
        )

    @_plan_doc
    def effect_frame(self) -> pd.DataFrame:
        """One row per restriction row: ``restriction, target, alternative, shift, role``.

        ``target`` is ``d``, ``alternative`` is ``Cβ`` under the alternative, ``shift`` their
        difference; ``role`` is ``"independent"`` or ``"redundant"``.

        Examples
        --------
        %(two_group_plan)s
        >>> plan.power(effect=1.0, replicates=10).effect_frame().values.tolist()
        [['g[T.b] = 0', 0.0, 1.0, 1.0, 'independent']]
        """
        return _effect_rows(self.labels, self.target, self.alternative, self.shift, self.redundant)

    def _head(self) -> str:
        head = (
            f"Power {self.power:.4f} of the F test of {len(self.labels)} restriction row(s),"
            f" rank {self.df_test}\n" + _study_line(self)
        )
        s = np.asarray(self.shift, dtype=np.float64)
        if s.size > 1 and np.all(s == s[0]):
            head += (
                f"\none effect for every row: shift Cβ − d = {_num(float(s[0]))} on each of"
                f" {s.size} rows (give effect=[...] or beta= to set them one by one)"
            )
        return head

    def _parts(self) -> tuple[str, list[str], list[list[str]], str]:
        return self._head(), _ROW_HEADER, self._shift_rows(self.redundant), ""


@_plan_doc
@dataclass(frozen=True, repr=False)
class SampleSize(TableRepr):
    """The fewest replicates of the planned pattern whose test reaches a target power.

    Attributes
    ----------
    target_power : float
    replicates : int
        Smallest replicate count with power ``>= target_power``.
    n_obs : int
        Observations at that count.
    power : float
        Power reached there.
    previous_power : float
        Power with one replicate fewer (NaN if that leaves no residual degrees of freedom).
    result : PowerResult
        The full power calculation at ``replicates``.

    Examples
    --------
    %(two_group_plan)s
    >>> need = plan.replicates_for(0.8, effect=1.0)
    >>> need.replicates, bool(need.power >= 0.8 > need.previous_power)
    (17, True)
    """

    target_power: float
    replicates: int
    n_obs: int
    power: float
    previous_power: float
    result: PowerResult = field(repr=False)

    @_plan_doc
    def to_frame(self) -> pd.DataFrame:
        """One row: ``target_power, replicates, n_obs, df_test, df_error, noncentrality, power,
        previous_power, alpha, sigma``.

        Examples
        --------
        %(two_group_plan)s
        >>> plan.replicates_for(0.8, effect=1.0).to_frame()[["replicates", "n_obs"]]
           replicates  n_obs
        0          17     34
        """
        r = self.result
        return pd.DataFrame(
            [
                {
                    "target_power": self.target_power,
                    "replicates": self.replicates,
                    "n_obs": self.n_obs,
                    "df_test": r.df_test,
                    "df_error": r.df_error,
                    "noncentrality": r.noncentrality,
                    "power": self.power,
                    "previous_power": self.previous_power,
                    "alpha": r.alpha,
                    "sigma": r.sigma,
                }
            ]
        )

    def _head(self) -> str:
        prev = (
            f"; {self.replicates - 1} give {self.previous_power:.4f}"
            if np.isfinite(self.previous_power)
            else ""
        )
        return (
            f"{self.replicates} replicate(s) (n = {self.n_obs}) reach power {self.power:.4f}"
            f" >= {self.target_power:g}{prev}\n" + _study_line(self.result)
        )

    _HTML_DIV = _POWER_DIV

    def _parts(self) -> tuple[str, list[str], list[list[str]], str]:
        return self._head(), [], [], ""  # the head alone


@_plan_doc
@dataclass(frozen=True, kw_only=True, repr=False)
class DetectableEffect(_PlannedStudy):
    """The smallest multiple of a direction detected with a target power.

    Attributes
    ----------
    labels : tuple of str
    target_power : float
    scale : float
        ``s``: the alternative is ``Cβ = d + s·direction``.
    direction : (m,) ndarray
        ``h`` in units of ``Cβ``.
    target : (m,) ndarray
        ``d``.
    shift : (m,) ndarray
        ``s·h``.
    alternative : (m,) ndarray
        ``d + s·h``.
    df_test, df_error : int
    noncentrality : float
        ``λ`` at which the power equals the target.
    power : float
        Power at the detectable effect (the target, to the solver's tolerance).
    alpha, sigma : float
    replicates, n_obs : int
    beta_shift : pandas.Series or None
        ``s·b`` by coefficient, when the direction was given in coefficients.

    Examples
    --------
    %(two_group_plan)s
    >>> round(plan.detectable_effect(0.8, replicates=10).scale, 4)
    1.3249
    """

    target_power: float
    scale: float
    direction: NDArray[np.float64]
    beta_shift: pd.Series | None = field(default=None, repr=False)

    @_plan_doc
    def to_frame(self) -> pd.DataFrame:
        """One row per restriction row: ``restriction, target, direction, shift, alternative``.

        ``target`` is ``d``, ``direction`` is ``h``, ``shift`` is ``scale·h`` and
        ``alternative`` is ``d + scale·h``: the value of ``Cβ`` the study detects.

        Examples
        --------
        %(two_group_plan)s
        >>> plan.detectable_effect(0.8, replicates=10).to_frame().round(4).values.tolist()
        [['g[T.b] = 0', 0.0, 1.0, 1.3249, 1.3249]]
        """
        return pd.DataFrame(
            {
                "restriction": list(self.labels),
                "target": self.target,
                "direction": self.direction,
                "shift": self.shift,
                "alternative": self.alternative,
            }
        )

    def _head(self) -> str:
        return (
            f"Detectable with power {self.target_power:g}: scale {self.scale:.6g} along the"
            f" direction {np.round(self.direction, 6).tolist()}\n" + _study_line(self)
        )

    def _parts(self) -> tuple[str, list[str], list[list[str]], str]:
        return self._head(), _ROW_HEADER, self._shift_rows({}), ""


CURVE_ROWS_SHOWN = 12  # rows a power curve prints; .to_frame() holds every row


@_plan_doc
@dataclass(frozen=True, repr=False)
class PowerCurve(TableRepr):
    """Power of the F test against the number of replicates of the planned pattern.

    Attributes
    ----------
    labels : tuple of str
    shift : (m,) ndarray
        ``Cβ − d`` under the alternative.
    alpha, sigma : float
    df_test : int
    replicates, n_obs, df_error : (k,) ndarray of int
    noncentrality, critical_value, power : (k,) ndarray
    target_power : float or None
        A target power recorded for display.

    Examples
    --------
    %(two_group_plan)s
    >>> cv = plan.curve(effect=1.0, replicates=[5, 10, 20], target=0.8)
    >>> cv.n_obs.tolist(), bool((cv.power[1:] > cv.power[:-1]).all())
    ([10, 20, 40], True)
    """

    labels: tuple[str, ...]
    shift: NDArray[np.float64]
    alpha: float
    sigma: float
    df_test: int
    replicates: NDArray[np.int64]
    n_obs: NDArray[np.int64]
    df_error: NDArray[np.int64]
    noncentrality: NDArray[np.float64]
    critical_value: NDArray[np.float64]
    power: NDArray[np.float64]
    target_power: float | None = None

    @_plan_doc
    def to_frame(self) -> pd.DataFrame:
        """One row per replicate count: the columns of :data:`CURVE_COLUMNS`.

        ``replicates``, ``n_obs`` (observations), ``df_test``, ``df_error``, ``noncentrality``
        (``λ``), ``critical_value`` (of the central F at ``alpha``) and ``power``.

        Examples
        --------
        %(two_group_plan)s
        >>> plan.curve(effect=1.0, replicates=[2, 5]).to_frame()[["n_obs", "df_error"]]
           n_obs  df_error
        0      4       2
        1     10       8
        """
        return field_frame(self, CURVE_COLUMNS)

    @fill_doc(ax=AX_PARAMETER, figure_returns=FIGURE_RETURNS, two_group_plan=TWO_GROUP_PLAN)
    def plot(self, ax: Axes | None = None) -> Figure:
        """Draw power against the number of observations (needs matplotlib).

        Parameters
        ----------
        %(ax)s

        %(figure_returns)s

        Notes
        -----
        Draws :func:`lincomb.plot.power_curve`, which says what is drawn and which ``gid`` each
        artist carries.

        Examples
        --------
        %(two_group_plan)s
        >>> fig = plan.curve(effect=1.0).plot()
        >>> fig.axes[0].get_xlabel()
        'observations (n)'
        """
        from lincomb.plot import power_curve

        return power_curve(self, ax=ax)

    def shift_text(self) -> str:
        """The alternative as ``Cβ − d``: one number when every row shares it, else each row's.

        Examples
        --------
        >>> import pandas as pd, lincomb as lc
        >>> d = lc.planned_design("C(g)", pd.DataFrame({"g": ["a", "b", "c"]}))
        >>> plan = lc.power_plan(d, lc.term("C(g)") == 0, sigma=1.0)
        >>> plan.curve(effect=0.5, replicates=[5, 10]).shift_text()
        'shift Cβ − d = 0.5 on each of 2 rows'
        """
        s = np.asarray(self.shift, dtype=np.float64)
        if s.size > 1 and np.all(s == s[0]):
            return f"shift Cβ − d = {_num(float(s[0]))} on each of {s.size} rows"
        return "shift Cβ − d = " + ", ".join(_num(float(v)) for v in s)

    @_plan_doc
    def reached(self) -> int | None:
        """The fewest observations whose power reaches the target (None: no target, or none does).

        Examples
        --------
        %(two_group_plan)s
        >>> cv = plan.curve(effect=1.0, replicates=[5, 10, 20, 40], target=0.8)
        >>> cv.reached() == int(cv.n_obs[cv.power >= 0.8].min())
        True
        """
        if self.target_power is None:
            return None
        ok = np.flatnonzero(np.asarray(self.power) >= self.target_power)
        return int(self.n_obs[ok[0]]) if ok.size else None

    def _head(self) -> str:
        head = (
            f"Power curve of the F test of {len(self.labels)} restriction row(s), rank"
            f" {self.df_test}; alpha = {self.alpha:g}, sigma = {self.sigma:.6g};"
            f" {self.shift_text()}"
        )
        n = self.reached()
        if self.target_power is not None:
            head += (
                f"\npower {self.target_power:g} reached at n = {n}"
                if n is not None
                else f"\npower {self.target_power:g} not reached on this range"
            )
        shown = self._shown()
        if shown.size < self.power.size:
            head += f"\n{shown.size} of {self.power.size} rows shown; .to_frame() holds them all"
        return head

    def _shown(self) -> NDArray[np.intp]:
        """Rows to print: all up to :data:`CURVE_ROWS_SHOWN`, else spread out, with the first
        row that reaches the target."""
        k = self.power.size
        if k <= CURVE_ROWS_SHOWN:
            return np.arange(k)
        pick = set(np.linspace(0, k - 1, CURVE_ROWS_SHOWN - 1).round().astype(int).tolist())
        n = self.reached()
        if n is not None:
            pick.add(int(np.flatnonzero(self.n_obs == n)[0]))
        return np.array(sorted(pick), dtype=np.intp)

    def _rows(self) -> list[list[str]]:
        return [
            [
                str(self.replicates[i]),
                str(self.n_obs[i]),
                str(self.df_error[i]),
                _num(self.noncentrality[i]),
                f"{self.power[i]:.4f}",
            ]
            for i in self._shown()
        ]

    _HTML_DIV = _POWER_DIV

    def _parts(self) -> tuple[str, list[str], list[list[str]], str]:
        return (
            self._head(),
            ["replicates", "n", "df_error", "noncentrality", "power"],
            self._rows(),
            "",
        )

    def _head_html(self, head: str) -> str:
        first, *rest = head.split("\n")  # the first line in bold, the notes under it plain
        return f"<b>{html.escape(first)}</b>" + "".join(f"<br>{html.escape(r)}" for r in rest)
