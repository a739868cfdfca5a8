"""Small invented datasets for examples, tests and notebooks.

Every table here is **invented**: simulated by :mod:`lincomb.datasets._generate` with a fixed
seed from documented true parameters, so an example can say what a correct analysis should
find.  None of them describes real fields, factories, services or samples.

Each loader returns a fresh :class:`pandas.DataFrame` with factor columns already converted to
:class:`pandas.Categorical` in a deliberate level order (the first level is the natural
reference).

Examples
--------
>>> from lincomb import datasets
>>> datasets.names()
('field_trial', 'fill_lines', 'service_sites', 'assay_panel')
>>> datasets.load("fill_lines").shape
(300, 5)
"""

from __future__ import annotations

import difflib
import functools
from collections.abc import Callable
from importlib import resources
from typing import Final

import pandas as pd

from lincomb.errors import InternalError, UnknownDatasetError

__all__ = [
    "UnknownDatasetError",
    "assay_panel",
    "field_trial",
    "fill_lines",
    "load",
    "names",
    "service_sites",
]

_NITROGEN_LEVELS: Final = (0, 40, 80, 160)
_VARIETIES: Final = ("Arlen", "Brenna", "Corrin")
_LINES: Final = ("L1", "L2", "L3", "L4")
_SHIFTS: Final = ("early", "late", "night")
_PROTOCOLS: Final = ("standard", "triage")
_TREATMENTS: Final = ("control", "low", "mid", "high")
_BATCHES: Final = ("B1", "B2", "B3")


def _categorical(
    values: pd.Series, levels: tuple[object, ...] | list[str], *, ordered: bool = False
) -> pd.Categorical:
    cat = pd.Categorical(values, categories=list(levels), ordered=ordered)
    # A value outside the declared levels would silently become NaN; the shipped file is fixed,
    # so this only fires if a CSV and this module disagree.
    if cat.isna().sum() != values.isna().sum():
        raise InternalError(f"column {values.name!r} holds values outside {list(levels)}")
    return cat


def _id_levels(values: pd.Series) -> list[str]:
    return sorted(values.unique().tolist())


def _prepare_field_trial(df: pd.DataFrame) -> pd.DataFrame:
    out = df.copy()
    out["nitrogen_kg"] = out["nitrogen"].astype("int64")
    out["nitrogen"] = _categorical(out["nitrogen"], _NITROGEN_LEVELS, ordered=True)
    out["variety"] = _categorical(out["variety"], _VARIETIES)
    out["farm"] = _categorical(out["farm"], _id_levels(out["farm"]))
    cols = ["yield_t_ha", "nitrogen", "nitrogen_kg", "variety", "farm"]
    return out[cols + ["rainfall_mm", "plot_area_m2"]]


def _prepare_fill_lines(df: pd.DataFrame) -> pd.DataFrame:
    out = df.copy()
    out["line"] = _categorical(out["line"], _LINES)
    out["shift"] = _categorical(out["shift"], _SHIFTS, ordered=True)
    return out


def _prepare_service_sites(df: pd.DataFrame) -> pd.DataFrame:
    out = df.copy()
    out["site"] = _categorical(out["site"], _id_levels(out["site"]))
    out["week"] = out["week"].astype("int64")
    out["staffing"] = out["staffing"].astype("int64")
    out["protocol"] = _categorical(out["protocol"], _PROTOCOLS)
    return out


def _prepare_assay_panel(df: pd.DataFrame) -> pd.DataFrame:
    out = df.copy()
    out["treatment"] = _categorical(out["treatment"], _TREATMENTS, ordered=True)
    out["batch"] = _categorical(out["batch"], _BATCHES)
    return out


_PREPARE: Final[dict[str, Callable[[pd.DataFrame], pd.DataFrame]]] = {
    "field_trial": _prepare_field_trial,
    "fill_lines": _prepare_fill_lines,
    "service_sites": _prepare_service_sites,
    "assay_panel": _prepare_assay_panel,
}


def names() -> tuple[str, ...]:
    """Names of the bundled datasets.

    Returns
    -------
    tuple of str
        Every name that :func:`load` accepts.

    Examples
    --------
    >>> names()
    ('field_trial', 'fill_lines', 'service_sites', 'assay_panel')
    """
    return tuple(_PREPARE)


@functools.cache
def _read(name: str) -> pd.DataFrame:
    source = resources.files(__name__).joinpath(f"{name}.csv")
    with source.open("r", encoding="utf-8") as fh:
        return _PREPARE[name](pd.read_csv(fh))


def _unknown(name: object) -> UnknownDatasetError:
    available = names()
    msg = f"no bundled dataset named {name!r}; available: {', '.join(available)}."
    if isinstance(name, str):
        close = difflib.get_close_matches(name.strip().lower(), available, n=1, cutoff=0.5)
        if close:
            msg += f" Did you mean {close[0]!r}?"
    return UnknownDatasetError(msg)


def load(name: str) -> pd.DataFrame:
    """Load a bundled invented dataset by name.

    Parameters
    ----------
    name : {'field_trial', 'fill_lines', 'service_sites', 'assay_panel'}
        Dataset to load; see the function of the same name for its columns and the truth it
        was simulated from.

    Returns
    -------
    pandas.DataFrame
        A fresh copy on every call: changing it does not affect later loads.

    Raises
    ------
    UnknownDatasetError
        If `name` is not a bundled dataset.  The message lists the available names and
        suggests the closest one.

    Examples
    --------
    >>> df = load("field_trial")
    >>> df.shape
    (220, 7)
    >>> load("feild_trial")
    Traceback (most recent call last):
    ...
    lincomb.errors.UnknownDatasetError: no bundled dataset named 'feild_trial'; ... Did you mean 'field_trial'?
    """  # noqa: E501
    if not isinstance(name, str) or name not in _PREPARE:
        raise _unknown(name)
    return _read(name).copy(deep=True)


def field_trial() -> pd.DataFrame:
    """Invented barley field trial: yield against nitrogen dose, variety and farm.

    The data are **invented**, simulated with ``numpy.random.default_rng(7301)`` by
    :mod:`lincomb.datasets._generate`.  Ten farms each sowed every variety x dose cell twice
    (240 plots); 20 randomly chosen plots were lost, leaving 220 rows in an unbalanced layout.

    Returns
    -------
    pandas.DataFrame
        220 rows, one per plot, with columns

        ``yield_t_ha`` : float
            Grain yield in tonnes per hectare (response).
        ``nitrogen`` : ordered Categorical
            Nitrogen dose in kg/ha, levels ``0 < 40 < 80 < 160``.
        ``nitrogen_kg`` : int64
            The same dose as a number, for dose-response (polynomial) terms.
        ``variety`` : Categorical
            ``'Arlen'`` (reference), ``'Brenna'``, ``'Corrin'``.
        ``farm`` : Categorical
            Farm id ``'F01'`` ... ``'F10'`` (clusters).
        ``rainfall_mm`` : float
            Season rainfall at the plot in mm; **4 values are missing** (NaN).
        ``plot_area_m2`` : float
            Harvested area in m², 20-120; usable as WLS weights.

    Notes
    -----
    Truth used in the simulation::

        yield = m[variety, dose] + 0.004 * (rainfall_mm - 450) + u[farm] + e

    with true cell means ``m`` (t/ha) at 450 mm on an average farm:

    ========  =====  =====  =====  =====
    variety       0     40     80    160
    ========  =====  =====  =====  =====
    Arlen      4.20   5.30   6.00   6.50
    Brenna     4.60   5.75   6.50   7.10
    Corrin     3.90   5.00   5.65   6.05
    ========  =====  =====  =====  =====

    so the dose response is concave (diminishing returns: gains per kg are 0.0275, 0.0175 and
    0.00625 t/ha for Arlen), Brenna is 0.40 t/ha above Arlen at zero dose and responds
    slightly more to nitrogen (interaction +0.05, +0.10, +0.20 at 40, 80, 160), Corrin is 0.30
    below and responds slightly less (0, -0.05, -0.15).  Averaged over varieties the true dose
    means are 4.2333, 5.35, 6.05 and 6.55 t/ha.

    Farm effects ``u`` are drawn once per farm from N(0, 0.35²); farm mean rainfall is
    uniform on 380-560 mm with plot-level noise of sd 12 mm, so errors are correlated within a
    farm and cluster-robust errors matter.  The error ``e`` is normal with standard deviation
    ``0.07 * mu * sqrt(60 / plot_area_m2)``, where ``mu`` is the plot's mean including its
    farm effect: the spread grows with the mean (heteroskedasticity) and shrinks with plot
    area (weights ``plot_area_m2`` remove the area part).  Yields were simulated with the true
    rainfall; the 4 missing values are lost records.

    Examples
    --------
    >>> df = field_trial()
    >>> df.shape
    (220, 7)
    >>> df.columns.tolist()
    ['yield_t_ha', 'nitrogen', 'nitrogen_kg', 'variety', 'farm', 'rainfall_mm', 'plot_area_m2']
    >>> df["nitrogen"].cat.categories.tolist(), df["nitrogen"].cat.ordered
    ([0, 40, 80, 160], True)
    >>> int(df["rainfall_mm"].isna().sum())
    4
    """
    return load("field_trial")


def fill_lines() -> pd.DataFrame:
    """Invented packing data: fill weight of 500 g packs on four filling lines.

    The data are **invented**, simulated with ``numpy.random.default_rng(7302)`` by
    :mod:`lincomb.datasets._generate`: 25 packs for each line x shift cell (300 rows), in
    random order.

    Returns
    -------
    pandas.DataFrame
        300 rows, one per pack, with columns

        ``fill_g`` : float
            Net fill weight in grams (response); the target is 500 g.
        ``line`` : Categorical
            Filling line ``'L1'`` (reference) ... ``'L4'``.
        ``shift`` : ordered Categorical
            ``'early' < 'late' < 'night'``.
        ``temperature_c`` : float
            Hall temperature in °C; near 21 on early, 24 on late and 18 on night shifts
            (sd 1.2), so it is correlated with ``shift``.
        ``nozzle_age_h`` : float
            Hours since the filling nozzle was replaced, uniform on 0-400.

    Notes
    -----
    Truth used in the simulation::

        fill_g = 500 + a[line] + s[shift] + 0.25 * (temperature_c - 21)
                 + 0.006 * (nozzle_age_h - 200) + e

    with line offsets from target ``a = {L1: +1.2, L2: 0.0, L3: +2.0, L4: -0.6}`` g and shift
    effects ``s = {early: 0, late: +0.4, night: -0.8}`` g.  So, at 21 °C and 200 h on an
    early shift, L2 fills exactly on target, L4 underfills and L1, L3 overfill; hypotheses
    such as "line mean = 500 g" need a non-zero right-hand side.  The error ``e`` is normal
    with sd 0.8 g on L1, L2 and L4 but 1.6 g on L3 (unequal variances across lines).

    Examples
    --------
    >>> df = fill_lines()
    >>> df.shape
    (300, 5)
    >>> df["shift"].cat.categories.tolist()
    ['early', 'late', 'night']
    >>> df["line"].value_counts(sort=False).tolist()
    [75, 75, 75, 75]
    """
    return load("fill_lines")


def service_sites() -> pd.DataFrame:
    """Invented multi-site service study: weekly waiting times at 40 sites.

    The data are **invented**, simulated with ``numpy.random.default_rng(7303)`` by
    :mod:`lincomb.datasets._generate`: 40 sites observed for 26 weeks (1040 rows, sorted by
    site and week).

    Returns
    -------
    pandas.DataFrame
        1040 rows, one per site and week, with columns

        ``wait_min`` : float
            Mean waiting time that week in minutes (response).
        ``site`` : Categorical
            Site id ``'S01'`` ... ``'S40'`` (clusters).
        ``week`` : int64
            Week number 1-26 (time order within a site).
        ``staffing`` : int64
            Staff on shift: a site baseline of 4-8 plus a weekly change of -1, 0 or +1.
        ``protocol`` : Categorical
            ``'standard'`` (reference) or ``'triage'``.

    Notes
    -----
    Truth used in the simulation::

        wait_min = 32 + v[site] - 1.5 * (staffing - 6) - 4.0 * [protocol == 'triage'] + e

    Site effects ``v`` are N(0, 4²).  Twenty randomly chosen sites switch from ``'standard'``
    to ``'triage'`` at a site-specific week between 9 and 18 and keep it; the other twenty
    never switch.  Within a site the error follows an AR(1) process,
    ``e[t] = 0.6 * e[t-1] + N(0, 2.5²)``, started from its stationary distribution, so
    errors are serially correlated and clustered by site; sites are independent.

    Examples
    --------
    >>> df = service_sites()
    >>> df.shape
    (1040, 5)
    >>> df["site"].nunique(), int(df["week"].max())
    (40, 26)
    >>> df["protocol"].cat.categories.tolist()
    ['standard', 'triage']
    """
    return load("service_sites")


def assay_panel() -> pd.DataFrame:
    """Invented screening panel: 200 marker intensities measured on one design.

    The data are **invented**, simulated with ``numpy.random.default_rng(7304)`` by
    :mod:`lincomb.datasets._generate`: 96 samples, 8 for each treatment x batch cell, in random
    order; meant for "many responses, one design" analyses.

    Returns
    -------
    pandas.DataFrame
        96 rows, one per sample, with columns

        ``treatment`` : ordered Categorical
            ``'control' < 'low' < 'mid' < 'high'``.
        ``batch`` : Categorical
            Processing batch ``'B1'`` (reference), ``'B2'``, ``'B3'``.
        ``g0001`` ... ``g0200`` : float
            Invented marker intensities (log scale), rounded to 3 decimals.

    Notes
    -----
    Truth used in the simulation, for each marker ``g``::

        value = base[g] + b[batch, g] + f[treatment] * delta[g] + e

    with ``base`` uniform on 6-12, batch offsets ``b`` from N(0, 0.25²) (zero for B1), dose
    fractions ``f = {control: 0, low: 0.25, mid: 0.6, high: 1.0}``, and a normal error with a
    marker-specific sd uniform on 0.3-0.6.  Exactly 20 markers (10 %) have a real treatment
    effect; their true high - control shifts ``delta`` are

    g0004 +1.06, g0012 -1.27, g0039 -1.42, g0047 -1.06, g0069 +1.34, g0075 +0.83,
    g0088 -0.83, g0100 +1.09, g0101 -1.03, g0103 +0.93, g0110 +0.81, g0113 -1.43,
    g0121 +0.91, g0124 +1.55, g0130 +1.08, g0135 +1.28, g0142 -1.29, g0163 -0.91,
    g0181 +1.26, g0186 +0.93.

    For the other 180 markers ``delta = 0``: any treatment effect found there is a false
    positive.

    Examples
    --------
    >>> df = assay_panel()
    >>> df.shape
    (96, 202)
    >>> df.columns[:4].tolist(), df.columns[-1]
    (['treatment', 'batch', 'g0001', 'g0002'], 'g0200')
    >>> df["treatment"].cat.categories.tolist()
    ['control', 'low', 'mid', 'high']
    """
    return load("assay_panel")
