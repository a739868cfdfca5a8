"""Pictures of test results (needs the optional extra ``lincomb[plot]``, i.e. matplotlib).

matplotlib is imported only when a picture is drawn, so ``import lincomb`` never needs it.
Without it, drawing raises :class:`~lincomb.errors.OptionalDependencyError` with the install
command.

Every function returns a :class:`matplotlib.figure.Figure` that pyplot does not track: in a
notebook, leave it as the last expression of a cell to show it; elsewhere save it with
``fig.savefig("intervals.png")``.  Pass ``ax=`` to draw into an axes of your own figure
instead.

>>> import lincomb as lc
>>> f = lc.fit("fill_g ~ line", lc.datasets.fill_lines())
>>> fig = lc.plot.intervals(f.wald(lc.term("line") == 0))
>>> fig.axes[0].get_xlabel()
'value of the restricted combination'
"""

from __future__ import annotations

import importlib
import textwrap
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from lincomb._docstrings import AX_PARAMETER, FIGURE_RETURNS, fill_doc
from lincomb._plan.results import TWO_GROUP_PLAN
from lincomb._results.format import _p
from lincomb._results.multiplicity import MultipleInference
from lincomb.errors import ArgumentTypeError, InputError, OptionalDependencyError

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from lincomb._plan.results import PowerCurve
    from lincomb._results.wald import WaldTest

__all__ = ["intervals", "power_curve", "INTERVAL_ARTISTS", "POWER_CURVE_ARTISTS"]

#: Artist ``gid`` values set by :func:`intervals`, so a picture can be inspected or restyled:
#: the marginal interval bars, the simultaneous interval bars, the estimates and the
#: hypothesized values ``d``.
INTERVAL_ARTISTS = ("marginal", "simultaneous", "estimate", "target")

#: Artist ``gid`` values set by :func:`power_curve`: the curve, the level ``alpha`` (the power
#: at no effect) and the target power (when the curve records one).
POWER_CURVE_ARTISTS = ("power", "alpha", "target", "reached")

# our own palette: marginal intervals in slate blue, simultaneous in burnt orange, targets in
# near-black; redundant rows are drawn in grey.
_MARGINAL = "#3d5a80"
_SIMULTANEOUS = "#d1603d"
_TARGET = "#202020"
_MUTED = "#9a9a9a"
_LABEL_WIDTH = 46

_drawing_doc = fill_doc(ax=AX_PARAMETER, figure_returns=FIGURE_RETURNS)


def _pyplot() -> Any:
    """Import matplotlib's pyplot, or explain how to install it."""
    try:
        importlib.import_module("matplotlib")
        plt = importlib.import_module("matplotlib.pyplot")
    except ImportError as exc:
        raise OptionalDependencyError(
            "drawing needs matplotlib, which is not installed. Install the plotting extra with"
            " `python -m pip install 'lincomb[plot]'` (or `python -m pip install matplotlib`)."
        ) from exc
    return plt


_FIGURE_CLASS: list[type] = []


def _figure_class() -> type:
    """A Figure that a notebook shows once, whether it is assigned, ended with ``;`` or last.

    pyplot keeps the figure, so the notebook's inline backend shows it at the end of the cell
    (the convention of plotting libraries).  A plain pyplot figure left as the cell's value is
    then shown twice (once as the value, once by pyplot); this class, whenever it is shown,
    first lets go of pyplot's hold on it, so whichever display comes first is the only one.
    """
    if not _FIGURE_CLASS:
        from matplotlib.figure import Figure as _Figure

        class ShownOnceFigure(_Figure):
            def _ipython_display_(self) -> None:
                plt = _pyplot()
                if plt.fignum_exists(getattr(self, "number", -1)):
                    plt.close(self)  # shown here; pyplot must not show it again
                import io

                from IPython.display import Image, display

                buf = io.BytesIO()
                self.savefig(buf, format="png")
                display(Image(buf.getvalue()))

        _FIGURE_CLASS.append(ShownOnceFigure)
    return _FIGURE_CLASS[0]


def _new_figure(figsize: tuple[float, float]) -> Figure:
    """A new figure made through pyplot, as plotting libraries do.

    pyplot keeps it, so a notebook shows it once at the end of the cell whether the call's
    result is assigned, ended with ``;`` or left as the cell's value, and ``plt.show()`` shows
    it in a script; close it with ``plt.close(fig)`` when many are made in a loop.
    """
    plt = _pyplot()
    fig: Figure = plt.figure(figsize=figsize, layout="constrained", FigureClass=_figure_class())
    return fig


def _root_figure(ax: Axes) -> Figure:
    """The figure an axes belongs to (the whole figure when the axes sit in a subfigure)."""
    fig = ax.get_figure(root=True)
    if fig is None:  # pragma: no cover - an axes is always made on a figure
        raise InputError("these axes belong to no figure; make them with fig.add_subplot().")
    return fig


def _short(label: str) -> str:
    return textwrap.shorten(label, width=_LABEL_WIDTH, placeholder=" …")


def _family_bounds(fam: Any, labels: Sequence[str]) -> tuple[NDArray[np.float64], ...]:
    """Place a family's intervals on the rows of the test they came from (by label, in order)."""
    if fam.level is None:
        raise InputError(
            f"the {fam.method!r} result holds adjusted p-values but no intervals; make"
            " simultaneous intervals with result.simultaneous(method, level) instead."
        )
    m = len(labels)
    lo, hi = np.full(m, np.nan), np.full(m, np.nan)
    used: set[int] = set()
    for k, label in enumerate(fam.labels):
        rows = [i for i in range(m) if labels[i] == label and i not in used]
        if not rows:
            raise InputError(
                f"simultaneous interval {k} ({label!r}) is not a row of this test; draw a"
                " family made from the same test."
            )
        used.add(rows[0])
        lo[rows[0]], hi[rows[0]] = fam.lower[k], fam.upper[k]
    return lo, hi


def _simultaneous(
    result: WaldTest, spec: object, level: float, label: str | None
) -> tuple[NDArray[np.float64], NDArray[np.float64], str] | None:
    """Lower and upper simultaneous bounds per row (NaN: none) and their legend text."""
    if spec is None:
        return None
    m = len(result.labels)
    if isinstance(spec, str):
        spec = result.simultaneous(spec, level)
    if isinstance(spec, MultipleInference):
        lo, hi = _family_bounds(spec, result.labels)
        return lo, hi, label or f"{spec.level:.0%} simultaneous ({spec.method})"
    if isinstance(spec, pd.DataFrame) and {"lower", "upper"} <= set(spec.columns):
        if len(spec) != m:
            raise InputError(
                f"simultaneous has {len(spec)} rows but the test has {m} restriction rows"
                f" ({list(result.labels)}); give one interval per row, in the test's order."
            )
        lo = spec["lower"].to_numpy(dtype=np.float64)
        hi = spec["upper"].to_numpy(dtype=np.float64)
        return lo, hi, label or "simultaneous"
    raise ArgumentTypeError(
        "simultaneous must be a method name such as 'max-t', 'bonferroni' or 'scheffe', a"
        " result of WaldTest.simultaneous(), or a DataFrame with columns 'lower' and 'upper'"
        f" (one row per restriction row); got {type(spec).__name__}."
    )


@_drawing_doc
def intervals(
    result: WaldTest,
    level: float = 0.95,
    *,
    simultaneous: str | MultipleInference | pd.DataFrame | None = None,
    simultaneous_label: str | None = None,
    ax: Axes | None = None,
    title: str | None = None,
) -> Figure:
    """Interval chart of the rows of a restriction system.

    One line per row of ``C·β = d``, first row at the top: the estimate ``Cβ̂`` as an open
    circle on a thick bar for its marginal interval, the hypothesized value ``d`` as a black
    vertical dash.  When simultaneous intervals are given, each row gets a second, thinner bar
    just below the marginal one, so the two can be compared side by side.  Redundant rows are
    drawn in grey and marked in their label.  The title states the joint test.  The same
    function is the method :meth:`WaldTest.plot <lincomb.WaldTest.plot>` (``res.plot(...)``).

    Parameters
    ----------
    result : WaldTest
        The test whose rows to draw (from :meth:`~lincomb.LinearFit.wald`); the test itself
        when called as its method ``plot``.
    level : float, default 0.95
        Confidence level of the marginal intervals (:meth:`~lincomb.WaldTest.intervals`).
    simultaneous : str, MultipleInference or DataFrame, optional
        Intervals that hold jointly over the rows, drawn beside the marginal ones at the same
        ``level``: a method of :meth:`~lincomb.WaldTest.simultaneous` (``"max-t"``,
        ``"bonferroni"``, ``"sidak"``, ``"scheffe"``), the result of that method (rows it
        dropped get no bar), or a DataFrame with columns ``lower`` and ``upper``, one row per
        restriction row in the test's order.
    simultaneous_label : str, optional
        Legend text for the simultaneous bars; default names the level and the method.
    %(ax)s
    title : str, optional
        Replaces the default title (the joint test).

    %(figure_returns)s
    ParameterError
        ``level`` is not in (0, 1).
    InputError
        ``simultaneous`` does not match the test's rows.
    ArgumentTypeError
        ``simultaneous`` is none of the accepted kinds.
    TypeError
        ``simultaneous`` is of another kind.

    Notes
    -----
    The artists carry ``gid`` values from :data:`INTERVAL_ARTISTS` (``"marginal"``,
    ``"simultaneous"``, ``"estimate"``, ``"target"``), and row ``i`` is drawn at ``y = i``
    (marginal bar, estimate and target; the simultaneous bar at ``y = i + 0.22``) with the
    y-axis inverted, so its data can be read back.

    Examples
    --------
    >>> import numpy as np, lincomb as lc
    >>> f = lc.fit("yield_t_ha ~ C(nitrogen) + variety", lc.datasets.field_trial())
    >>> n = lc.term("C(nitrogen)")
    >>> res = f.wald((n["80"] - n["40"] == 0.5) & (n["160"] - n["80"] == 0.5))
    >>> fig = lc.plot.intervals(res, level=0.90)
    >>> ax = fig.axes[0]
    >>> est = next(a for a in ax.lines if a.get_gid() == "estimate")
    >>> bool(np.allclose(est.get_xdata(), res.estimate))
    True

    Bonferroni intervals beside the marginal ones (they are wider):

    >>> ax = res.plot(simultaneous="bonferroni").axes[0]
    >>> marginal, joint = (
    ...     next(a for a in ax.collections if a.get_gid() == gid).get_segments()
    ...     for gid in ("marginal", "simultaneous"))
    >>> [bool(np.ptp(j[:, 0]) > np.ptp(m[:, 0])) for m, j in zip(marginal, joint)]
    [True, True]
    """
    _pyplot()
    m = len(result.labels)
    marg = result.intervals(level)
    lo, hi = marg["lower"].to_numpy(), marg["upper"].to_numpy()
    sim = _simultaneous(result, simultaneous, level, simultaneous_label)

    own_figure = ax is None
    if ax is None:
        fig = _new_figure((7.5, 1.6 + 0.5 * m))
        ax = fig.add_subplot()
    else:
        fig = _root_figure(ax)
    y = np.arange(m, dtype=float)
    redundant = np.array([i in result.redundant for i in range(m)])
    colors = np.where(redundant, _MUTED, _MARGINAL)

    ax.hlines(
        y,
        lo,
        hi,
        colors=list(colors),
        linewidth=7,
        alpha=0.45,
        capstyle="butt",
        gid="marginal",
        label=f"{level:.0%} marginal interval",
    )
    if sim is not None:
        s_lo, s_hi, s_label = sim
        has = np.isfinite(s_lo) & np.isfinite(s_hi)
        ax.hlines(
            y[has] + 0.22,
            s_lo[has],
            s_hi[has],
            colors=list(np.where(redundant, _MUTED, _SIMULTANEOUS)[has]),
            linewidth=2.2,
            gid="simultaneous",
            label=s_label,
        )
    ax.plot(
        result.estimate,
        y,
        linestyle="none",
        marker="o",
        markersize=7,
        markerfacecolor="white",
        markeredgecolor=_TARGET,
        markeredgewidth=1.4,
        gid="estimate",
        label="estimate",
        zorder=3,
    )
    ax.plot(
        result.target,
        y,
        linestyle="none",
        marker="|",
        markersize=17,
        markeredgewidth=2.2,
        color=_TARGET,
        gid="target",
        label="hypothesized value d",
        zorder=4,
    )
    if m and np.all(result.target == result.target[0]):
        ax.axvline(result.target[0], color=_TARGET, linewidth=0.6, linestyle=":", zorder=0)

    labels = [
        _short(lab) + (" (redundant)" if red else "")
        for lab, red in zip(result.labels, redundant, strict=True)
    ]
    ax.set_yticks(y, labels)
    for tick, red in zip(ax.get_yticklabels(), redundant, strict=True):
        if red:
            tick.set_color(_MUTED)
    ax.set_ylim(m - 0.4, -0.6)
    ax.set_xlabel("value of the restricted combination")
    ax.grid(axis="x", color="#e4e4e4", linewidth=0.8)
    ax.set_axisbelow(True)
    for side in ("top", "right", "left"):
        ax.spines[side].set_visible(False)
    ax.tick_params(axis="y", length=0)
    if title is None:
        dist = (
            f"F({result.df_test}, {result.df_error:g})"
            if result.reference == "F"
            else f"chi2({result.df_test})"
        )
        p = _p(result.p)
        title = f"Joint test: {dist} = {result.stat:.4g}, p {'' if '<' in p else '= '}{p}"
    ax.set_title(title, loc="left", fontsize="medium")
    legend = {"frameon": False, "fontsize": "small", "handlelength": 1.6}
    if own_figure:
        fig.legend(loc="outside lower center", ncols=4 if sim is not None else 3, **legend)
    else:
        ax.legend(loc="best", **legend)
    return fig


@fill_doc(ax=AX_PARAMETER, figure_returns=FIGURE_RETURNS, two_group_plan=TWO_GROUP_PLAN)
def power_curve(curve: PowerCurve, *, ax: Axes | None = None) -> Figure:
    """Power of a planned F test against the number of observations.

    The power at each replicate count of the curve is drawn against the observations it makes,
    with the level ``alpha`` (the power at no effect) as a dotted line and the curve's target
    power, if it records one, as a dashed line with the fewest observations that reach it marked
    by a vertical line.  The title is the restriction system, the shift ``Cβ − d`` it assumes,
    sigma and alpha.

    Parameters
    ----------
    curve : PowerCurve
        From :meth:`~lincomb.PowerPlan.curve`.
    %(ax)s

    %(figure_returns)s

    Notes
    -----
    The artists carry ``gid`` values from :data:`POWER_CURVE_ARTISTS`: ``"power"`` (the curve,
    x = ``curve.n_obs``, y = ``curve.power``), ``"alpha"`` and ``"target"``.

    Examples
    --------
    %(two_group_plan)s
    >>> import numpy as np
    >>> cv = plan.curve(effect=1.0, target=0.8)
    >>> ax = lc.plot.power_curve(cv).axes[0]
    >>> line = next(a for a in ax.lines if a.get_gid() == "power")
    >>> bool(np.allclose(line.get_ydata(), cv.power))
    True
    """
    _pyplot()
    if ax is None:
        fig = _new_figure((6.0, 4.0))
        ax = fig.add_subplot()
    else:
        fig = _root_figure(ax)
    ax.plot(
        curve.n_obs,
        curve.power,
        marker="o",
        markersize=3,
        color=_MARGINAL,
        gid="power",
        label="power",
    )
    ax.axhline(
        curve.alpha, color=_MUTED, linestyle=":", gid="alpha", label=f"alpha = {curve.alpha:g}"
    )
    if curve.target_power is not None:
        ax.axhline(
            curve.target_power,
            color=_SIMULTANEOUS,
            linestyle="--",
            gid="target",
            label=f"target {curve.target_power:g}",
        )
        reached = curve.reached()
        if reached is not None:
            ax.axvline(
                reached,
                color=_SIMULTANEOUS,
                linestyle="-.",
                gid="reached",
                label=f"n = {reached} reaches {curve.target_power:g}",
            )
    ax.set_ylim(0.0, 1.02)
    ax.set_xlabel("observations (n)")
    ax.set_ylabel("power")
    title = " & ".join(curve.labels)
    title = title if len(title) <= 60 else title[:57] + "..."
    setting = f"{curve.shift_text()}; sigma = {curve.sigma:.6g}, alpha = {curve.alpha:g}"
    ax.set_title(f"{title}\n{setting}", fontsize="medium")
    ax.legend(loc="lower right", fontsize="small")
    return fig
