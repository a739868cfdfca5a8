"""Simulate the bundled demo datasets and write them as CSV files.

Every dataset shipped in :mod:`lincomb.datasets` is **invented**: it is simulated here from
documented "true" parameters with a fixed seed of :func:`numpy.random.default_rng`, so a test or
a notebook can state what a correct analysis should find.  Nothing here describes real fields,
factories, services or samples.

Run ``python -m lincomb.datasets._generate`` to rewrite the CSV files next to this module.  The
test suite rebuilds each table in memory with :func:`build` and compares it byte for byte with
the shipped file, so a CSV cannot drift from this script.

The truths below are module constants; the public docstrings in :mod:`lincomb.datasets` repeat
them in words.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from pathlib import Path
from types import MappingProxyType
from typing import Final

import numpy as np
import pandas as pd

from lincomb.errors import InternalError

__all__ = [
    "ASSAY_AFFECTED",
    "ASSAY_DOSE_FRACTION",
    "FIELD_CELL_MEANS",
    "FILL_LINE_OFFSET",
    "FILL_SHIFT_EFFECT",
    "SEEDS",
    "build",
    "build_all",
    "main",
    "to_csv_text",
]

#: Seed of ``numpy.random.default_rng`` for each dataset.
SEEDS: Final = MappingProxyType(
    {"field_trial": 7301, "fill_lines": 7302, "service_sites": 7303, "assay_panel": 7304}
)

# --- field_trial truths --------------------------------------------------------------------
FIELD_DOSES: Final = (0, 40, 80, 160)
FIELD_VARIETIES: Final = ("Arlen", "Brenna", "Corrin")
#: True mean yield (t/ha) per (variety, nitrogen kg/ha) at 450 mm rainfall on an average farm.
#: Each row is concave in dose; Brenna responds a little more to nitrogen, Corrin a little less.
FIELD_CELL_MEANS: Final = MappingProxyType(
    {
        "Arlen": (4.20, 5.30, 6.00, 6.50),
        "Brenna": (4.60, 5.75, 6.50, 7.10),
        "Corrin": (3.90, 5.00, 5.65, 6.05),
    }
)
FIELD_RAIN_SLOPE: Final = 0.004  # t/ha per mm, centred at FIELD_RAIN_CENTRE
FIELD_RAIN_CENTRE: Final = 450.0
FIELD_FARM_SD: Final = 0.35  # sd of the farm random effect, t/ha
FIELD_CV: Final = 0.07  # error sd = FIELD_CV * mean * sqrt(FIELD_AREA_REF / plot_area_m2)
FIELD_AREA_REF: Final = 60.0
FIELD_N_FARMS: Final = 10
FIELD_REPS: Final = 2
FIELD_N_DROPPED: Final = 20
FIELD_N_MISSING_RAIN: Final = 4

# --- fill_lines truths ---------------------------------------------------------------------
FILL_TARGET: Final = 500.0
#: True offset (g) of each line from the 500 g target, for an early shift at 21 °C and 200 h.
FILL_LINE_OFFSET: Final = MappingProxyType({"L1": 1.2, "L2": 0.0, "L3": 2.0, "L4": -0.6})
#: True shift effect (g) relative to the early shift, at equal temperature and nozzle age.
FILL_SHIFT_EFFECT: Final = MappingProxyType({"early": 0.0, "late": 0.4, "night": -0.8})
FILL_SHIFT_TEMP: Final = MappingProxyType({"early": 21.0, "late": 24.0, "night": 18.0})
FILL_TEMP_SLOPE: Final = 0.25  # g per °C, centred at FILL_TEMP_CENTRE
FILL_TEMP_CENTRE: Final = 21.0
FILL_AGE_SLOPE: Final = 0.006  # g per hour of nozzle age, centred at FILL_AGE_CENTRE
FILL_AGE_CENTRE: Final = 200.0
FILL_LINE_SD: Final = MappingProxyType({"L1": 0.8, "L2": 0.8, "L3": 1.6, "L4": 0.8})
FILL_PER_CELL: Final = 25

# --- service_sites truths ------------------------------------------------------------------
SERVICE_N_SITES: Final = 40
SERVICE_N_WEEKS: Final = 26
SERVICE_BASE: Final = 32.0  # mean wait (min) at 6 staff under the standard protocol
SERVICE_STAFF_SLOPE: Final = -1.5  # min per extra member of staff, centred at 6
SERVICE_STAFF_CENTRE: Final = 6
SERVICE_TRIAGE_EFFECT: Final = -4.0  # min
SERVICE_SITE_SD: Final = 4.0
SERVICE_AR_RHO: Final = 0.6
SERVICE_INNOVATION_SD: Final = 2.5

# --- assay_panel truths --------------------------------------------------------------------
ASSAY_N_MARKERS: Final = 200
ASSAY_TREATMENTS: Final = ("control", "low", "mid", "high")
ASSAY_BATCHES: Final = ("B1", "B2", "B3")
ASSAY_PER_CELL: Final = 8  # samples per treatment x batch cell
#: Fraction of the full (high vs control) shift reached at each treatment level.
ASSAY_DOSE_FRACTION: Final = MappingProxyType(
    {"control": 0.0, "low": 0.25, "mid": 0.6, "high": 1.0}
)
#: The 20 markers (10 %) with a real treatment effect, and their true high - control shift.
#: Every other marker has no treatment effect at all.
ASSAY_AFFECTED: Final = MappingProxyType(
    {
        "g0004": 1.06,
        "g0012": -1.27,
        "g0039": -1.42,
        "g0047": -1.06,
        "g0069": 1.34,
        "g0075": 0.83,
        "g0088": -0.83,
        "g0100": 1.09,
        "g0101": -1.03,
        "g0103": 0.93,
        "g0110": 0.81,
        "g0113": -1.43,
        "g0121": 0.91,
        "g0124": 1.55,
        "g0130": 1.08,
        "g0135": 1.28,
        "g0142": -1.29,
        "g0163": -0.91,
        "g0181": 1.26,
        "g0186": 0.93,
    }
)
ASSAY_BATCH_SD: Final = 0.25


def _field_trial(rng: np.random.Generator) -> pd.DataFrame:
    farms = [f"F{i:02d}" for i in range(1, FIELD_N_FARMS + 1)]
    farm_effect = rng.normal(0.0, FIELD_FARM_SD, FIELD_N_FARMS)
    farm_rain = rng.uniform(380.0, 560.0, FIELD_N_FARMS)

    cells = [(v, j) for v in FIELD_VARIETIES for j in range(len(FIELD_DOSES))]
    rows_farm, rows_var, rows_dose = [], [], []
    for f in range(FIELD_N_FARMS):
        # Each farm holds every variety x dose cell FIELD_REPS times, in random plot order.
        order = rng.permutation(len(cells) * FIELD_REPS)
        for k in order:
            v, j = cells[k % len(cells)]
            rows_farm.append(f)
            rows_var.append(v)
            rows_dose.append(j)
    farm_idx = np.array(rows_farm)
    dose_idx = np.array(rows_dose)
    n = farm_idx.size

    rain = np.round(farm_rain[farm_idx] + rng.normal(0.0, 12.0, n), 1)
    area = np.round(rng.uniform(20.0, 120.0, n), 1)
    cell_mean = np.array([FIELD_CELL_MEANS[v][j] for v, j in zip(rows_var, rows_dose, strict=True)])
    mu = cell_mean + FIELD_RAIN_SLOPE * (rain - FIELD_RAIN_CENTRE) + farm_effect[farm_idx]
    sd = FIELD_CV * mu * np.sqrt(FIELD_AREA_REF / area)
    yield_t_ha = np.round(mu + sd * rng.standard_normal(n), 2)

    df = pd.DataFrame(
        {
            "yield_t_ha": yield_t_ha,
            "nitrogen": np.asarray(FIELD_DOSES, dtype=np.int64)[dose_idx],
            "variety": rows_var,
            "farm": [farms[f] for f in rows_farm],
            "rainfall_mm": rain,
        }
    )
    df["plot_area_m2"] = area
    # Unbalance the trial: some plots were lost before harvest.
    keep = np.sort(rng.choice(n, n - FIELD_N_DROPPED, replace=False))
    df = df.iloc[keep].reset_index(drop=True)
    # Rain gauge failures: the yield above used the true rainfall, the record is lost.
    lost = rng.choice(len(df), FIELD_N_MISSING_RAIN, replace=False)
    df.loc[lost, "rainfall_mm"] = np.nan
    return df


def _fill_lines(rng: np.random.Generator) -> pd.DataFrame:
    lines = list(FILL_LINE_OFFSET)
    shifts = list(FILL_SHIFT_EFFECT)
    line = np.repeat(lines, len(shifts) * FILL_PER_CELL)
    shift = np.tile(np.repeat(shifts, FILL_PER_CELL), len(lines))
    order = rng.permutation(line.size)
    line, shift = line[order], shift[order]
    n = line.size

    temp = np.round(np.array([FILL_SHIFT_TEMP[s] for s in shift]) + rng.normal(0.0, 1.2, n), 1)
    age = np.round(rng.uniform(0.0, 400.0, n), 1)
    mu = (
        FILL_TARGET
        + np.array([FILL_LINE_OFFSET[x] for x in line])
        + np.array([FILL_SHIFT_EFFECT[s] for s in shift])
        + FILL_TEMP_SLOPE * (temp - FILL_TEMP_CENTRE)
        + FILL_AGE_SLOPE * (age - FILL_AGE_CENTRE)
    )
    sd = np.array([FILL_LINE_SD[x] for x in line])
    fill = np.round(mu + sd * rng.standard_normal(n), 2)
    return pd.DataFrame(
        {"fill_g": fill, "line": line, "shift": shift, "temperature_c": temp, "nozzle_age_h": age}
    )


def _service_sites(rng: np.random.Generator) -> pd.DataFrame:
    n_s, n_w = SERVICE_N_SITES, SERVICE_N_WEEKS
    site_effect = rng.normal(0.0, SERVICE_SITE_SD, n_s)
    base_staff = rng.integers(4, 9, n_s)  # 4..8 staff
    # Half the sites adopt triage at a site-specific week; the others never do.
    adopters = rng.permutation(n_s)[: n_s // 2]
    switch_week = np.full(n_s, n_w + 1)
    switch_week[adopters] = rng.integers(9, 19, adopters.size)

    week = np.tile(np.arange(1, n_w + 1), n_s)
    site = np.repeat(np.arange(n_s), n_w)
    staffing = np.clip(base_staff[site] + rng.integers(-1, 2, site.size), 2, 10)
    triage = week >= switch_week[site]

    # AR(1) errors within each site, started from the stationary distribution.
    innov = rng.normal(0.0, SERVICE_INNOVATION_SD, (n_s, n_w))
    err = np.empty((n_s, n_w))
    err[:, 0] = innov[:, 0] / np.sqrt(1.0 - SERVICE_AR_RHO**2)
    for t in range(1, n_w):
        err[:, t] = SERVICE_AR_RHO * err[:, t - 1] + innov[:, t]

    mu = (
        SERVICE_BASE
        + site_effect[site]
        + SERVICE_STAFF_SLOPE * (staffing - SERVICE_STAFF_CENTRE)
        + SERVICE_TRIAGE_EFFECT * triage
    )
    wait = np.round(mu + err.ravel(), 1)
    if np.any(wait <= 0):  # the truth above must not need clipping
        raise InternalError("simulated a non-positive wait; change the service_sites truths")
    return pd.DataFrame(
        {
            "wait_min": wait,
            "site": [f"S{s + 1:02d}" for s in site],
            "week": week.astype(np.int64),
            "staffing": staffing.astype(np.int64),
            "protocol": np.where(triage, "triage", "standard"),
        }
    )


def _assay_panel(rng: np.random.Generator) -> pd.DataFrame:
    n_t, n_b = len(ASSAY_TREATMENTS), len(ASSAY_BATCHES)
    treat_idx = np.repeat(np.arange(n_t), n_b * ASSAY_PER_CELL)
    batch_idx = np.tile(np.repeat(np.arange(n_b), ASSAY_PER_CELL), n_t)
    order = rng.permutation(treat_idx.size)
    treat_idx, batch_idx = treat_idx[order], batch_idx[order]
    n = treat_idx.size

    names = [f"g{j:04d}" for j in range(1, ASSAY_N_MARKERS + 1)]
    baseline = rng.uniform(6.0, 12.0, ASSAY_N_MARKERS)
    noise_sd = rng.uniform(0.3, 0.6, ASSAY_N_MARKERS)
    batch_offset = rng.normal(0.0, ASSAY_BATCH_SD, (n_b, ASSAY_N_MARKERS))
    batch_offset[0] = 0.0  # B1 is the reference batch
    shift = np.array([ASSAY_AFFECTED.get(g, 0.0) for g in names])
    fraction = np.array([ASSAY_DOSE_FRACTION[t] for t in ASSAY_TREATMENTS])

    mu = baseline + batch_offset[batch_idx] + np.outer(fraction[treat_idx], shift)
    values = np.round(mu + noise_sd * rng.standard_normal((n, ASSAY_N_MARKERS)), 3)
    design = pd.DataFrame(
        {
            "treatment": np.asarray(ASSAY_TREATMENTS)[treat_idx],
            "batch": np.asarray(ASSAY_BATCHES)[batch_idx],
        }
    )
    return pd.concat([design, pd.DataFrame(values, columns=names)], axis=1)


_BUILDERS: Final[dict[str, Callable[[np.random.Generator], pd.DataFrame]]] = {
    "field_trial": _field_trial,
    "fill_lines": _fill_lines,
    "service_sites": _service_sites,
    "assay_panel": _assay_panel,
}


def build(name: str) -> pd.DataFrame:
    """Simulate one bundled dataset in memory, exactly as it is shipped.

    Parameters
    ----------
    name : {'field_trial', 'fill_lines', 'service_sites', 'assay_panel'}
        Dataset to simulate.

    Returns
    -------
    pandas.DataFrame
        The raw table (plain strings and numbers, no categoricals), as written to the CSV.
        The data are invented, simulated with the fixed seed ``SEEDS[name]``.

    Raises
    ------
    KeyError
        If `name` is not one of the bundled datasets.

    Examples
    --------
    >>> df = build("fill_lines")
    >>> df.shape
    (300, 5)
    >>> build("fill_lines").equals(df)  # fixed seed: same table every time
    True
    """
    builder = _BUILDERS[name]
    return builder(np.random.default_rng(SEEDS[name]))


def build_all() -> dict[str, pd.DataFrame]:
    """Simulate every bundled dataset.

    Returns
    -------
    dict of str to pandas.DataFrame
        Raw tables keyed by dataset name (invented, simulated with fixed seeds).

    Examples
    --------
    >>> sorted(build_all())
    ['assay_panel', 'field_trial', 'fill_lines', 'service_sites']
    """
    return {name: build(name) for name in _BUILDERS}


def to_csv_text(df: pd.DataFrame) -> str:
    """Render a raw table as the CSV text that is shipped.

    Parameters
    ----------
    df : pandas.DataFrame
        A table from :func:`build`.

    Returns
    -------
    str
        CSV with a header row, no index, ``\\n`` line ends and empty fields for missing values.

    Examples
    --------
    >>> print(to_csv_text(pd.DataFrame({"a": [1.5, None], "b": ["x", "y"]})), end="")
    a,b
    1.5,x
    ,y
    """
    return df.to_csv(index=False, lineterminator="\n")


def main(directory: str | Path | None = None) -> list[Path]:
    """Write every bundled dataset as ``<name>.csv``.

    Parameters
    ----------
    directory : str or pathlib.Path, optional
        Where to write; defaults to the directory of this module (the package data).

    Returns
    -------
    list of pathlib.Path
        The files written.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     [p.name for p in main(tmp)]
    ['field_trial.csv', 'fill_lines.csv', 'service_sites.csv', 'assay_panel.csv']
    """
    out = Path(directory) if directory is not None else Path(__file__).parent
    out.mkdir(parents=True, exist_ok=True)
    written = []
    for name, df in build_all().items():
        path = out / f"{name}.csv"
        # newline="" keeps the "\n" line ends on every platform.
        with path.open("w", encoding="utf-8", newline="") as fh:
            fh.write(to_csv_text(df))
        written.append(path)
    return written


if __name__ == "__main__":
    for p in main(sys.argv[1] if len(sys.argv) > 1 else None):
        print(f"wrote {p} ({p.stat().st_size / 1024:.1f} KiB)")
