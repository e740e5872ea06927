"""Generator for the foldsift demo data set: the Marrowby Fens soil survey.

The Marrowby Fens soil survey is an invented scenario. Marrowby Fens, its fields and every
number in the data set are fictional; they are simulated here so that foldsift has a demo whose
true answers are known exactly.

Scenario
--------
Topsoil cores were taken from five fields of a fenland farm, once in spring (before sowing) and
once in autumn (after harvest). Each field x season cell holds the same number of cores
(``SAMPLES_PER_CELL``), so the design is fully balanced. Every core was analysed for 30 strictly
positive, right-skewed quantities (concentrations, plus one conductivity), each column named with
its unit, e.g. ``copper_mg_per_kg``.

Simulation model
----------------
For analyte ``j`` in field ``f`` and season ``s`` a value is drawn as::

    log(value) = log(BASELINE_MEDIAN_j * m_j(field=f) * m_j(season=s)) + LOG_SD_j * z,  z ~ N(0, 1)

where the multipliers ``m`` come from ``PLANTED_EFFECTS`` (1.0 for any level not listed). The
effects are therefore purely multiplicative on the median, i.e. location shifts on the log
scale, and the true ratio of medians (equal to the ratio of geometric means for a lognormal) of
level b over level a is ``m(b) / m(a)``; see ``planted_ratio``. Because every cell is balanced,
season effects cancel in field comparisons and field effects cancel in season comparisons.

One analyte (``SPREAD_ONLY``) has fields that differ only in log-scale spread, not in median.

Data quirks written into the CSV
--------------------------------
* Values below a per-analyte detection limit (``DETECTION_LIMITS``) are written as ``<DL``,
  e.g. ``<0.02``.
* Values above the detection limit are rounded to ``SIG_DIGITS`` significant digits.
* A few exact zeros (``ZERO_COUNTS``) and about ``BLANK_FRACTION`` empty cells.

Run ``python -m foldsift.demo.generate`` to rewrite ``marrowby_soils.csv`` beside this file.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl

SEED = 20240917
"""Fixed seed for ``numpy.random.default_rng``; the committed CSV was written with it."""

SAMPLES_PER_CELL = 24
"""Cores per field x season cell (balanced design)."""

FIELDS: tuple[str, ...] = ("ashgrove", "brook_end", "long_acre", "north_meadow", "willow_carr")
SEASONS: tuple[str, ...] = ("autumn", "spring")
LEVELS: dict[str, tuple[str, ...]] = {"field": FIELDS, "season": SEASONS}
REFERENCE_LEVELS: dict[str, str] = {"field": "ashgrove", "season": "autumn"}
"""Reference level of each grouping: the first level in alphabetical order."""

SAMPLING_ORDER: tuple[str, ...] = ("spring", "autumn")
"""Order in which the seasons were sampled; rows are written in this order."""

ANALYTES: dict[str, tuple[float, float]] = {
    # name: (baseline median, log-scale SD); the baseline median is the median in any cell
    # whose multipliers are all 1.0.
    "nitrate_mg_per_kg": (18.0, 0.7),
    "ammonium_mg_per_kg": (4.0, 0.6),
    "phosphorus_olsen_mg_per_kg": (22.0, 0.5),
    "potassium_mg_per_kg": (160.0, 0.4),
    "magnesium_mg_per_kg": (110.0, 0.4),
    "calcium_mg_per_kg": (2400.0, 0.5),
    "sodium_mg_per_kg": (35.0, 0.6),
    "chloride_mg_per_kg": (28.0, 0.7),
    "sulphate_mg_per_kg": (45.0, 0.6),
    "iron_mg_per_kg": (9000.0, 0.5),
    "manganese_mg_per_kg": (350.0, 0.5),
    "copper_mg_per_kg": (14.0, 0.5),
    "zinc_mg_per_kg": (60.0, 0.5),
    "boron_mg_per_kg": (1.1, 0.5),
    "molybdenum_ug_per_kg": (400.0, 0.6),
    "cobalt_mg_per_kg": (6.5, 0.4),
    "nickel_mg_per_kg": (18.0, 0.4),
    "chromium_mg_per_kg": (30.0, 0.3),
    "lead_mg_per_kg": (24.0, 0.6),
    "cadmium_ug_per_kg": (180.0, 0.6),
    "arsenic_mg_per_kg": (8.0, 0.5),
    "mercury_mg_per_kg": (0.05, 0.7),
    "selenium_ug_per_kg": (300.0, 0.5),
    "aluminium_mg_per_kg": (12000.0, 0.3),
    "barium_mg_per_kg": (85.0, 0.4),
    "vanadium_mg_per_kg": (40.0, 0.3),
    "organic_carbon_g_per_kg": (32.0, 0.5),
    "total_nitrogen_g_per_kg": (2.8, 0.4),
    "microbial_biomass_c_mg_per_kg": (420.0, 0.6),
    "electrical_conductivity_us_per_cm": (310.0, 0.9),
}

PLANTED_EFFECTS: dict[str, dict[str, dict[str, float]]] = {
    # analyte: {grouping: {level: multiplier on the median}}; unlisted levels have 1.0.
    # Field effects
    "copper_mg_per_kg": {"field": {"north_meadow": 2.5}},
    "lead_mg_per_kg": {"field": {"willow_carr": 1.8}},
    "cadmium_ug_per_kg": {"field": {"long_acre": 3.0}},
    "phosphorus_olsen_mg_per_kg": {"field": {"brook_end": 1.6, "long_acre": 1.6}},
    "iron_mg_per_kg": {"field": {"willow_carr": 2.0}},
    "manganese_mg_per_kg": {"field": {"willow_carr": 1.5}},
    "sodium_mg_per_kg": {"field": {"brook_end": 4.0}},
    "chloride_mg_per_kg": {"field": {"brook_end": 3.0}},
    "molybdenum_ug_per_kg": {"field": {"long_acre": 1.3}},
    "arsenic_mg_per_kg": {"field": {"ashgrove": 1.5}},
    # Field and season effects
    "microbial_biomass_c_mg_per_kg": {"field": {"north_meadow": 0.5}, "season": {"spring": 1.3}},
    # Season effects
    "nitrate_mg_per_kg": {"season": {"spring": 2.2}},
    "ammonium_mg_per_kg": {"season": {"spring": 1.5}},
    "sulphate_mg_per_kg": {"season": {"spring": 0.625}},
}

SPREAD_ONLY: dict[str, dict[str, Any]] = {
    # analyte: the grouping whose levels differ in log-scale SD only (median unchanged);
    # levels not listed keep the analyte's baseline log-SD from ANALYTES.
    "zinc_mg_per_kg": {"grouping": "field", "log_sd": {"long_acre": 0.3, "willow_carr": 1.0}},
}

DETECTION_LIMITS: dict[str, float] = {
    # analyte: detection limit in the column's unit; values below are written as "<DL".
    "cadmium_ug_per_kg": 120.0,
    "mercury_mg_per_kg": 0.02,
    "selenium_ug_per_kg": 200.0,
    "molybdenum_ug_per_kg": 200.0,
    "arsenic_mg_per_kg": 5.0,
}

ZERO_COUNTS: dict[str, int] = {
    # analyte: number of values recorded as an exact zero.
    "ammonium_mg_per_kg": 3,
    "boron_mg_per_kg": 1,
}

BLANK_FRACTION = 0.01
"""Fraction of all analyte cells left empty (placed at random, never on a zero)."""

SIG_DIGITS = 3
"""Significant digits for values written above the detection limit."""

DEMO_CSV = Path(__file__).with_name("marrowby_soils.csv")


def demo_path() -> Path:
    """Return the path of the committed demo CSV."""
    return DEMO_CSV


def planted_ratio(analyte: str, grouping: str, level_a: str, level_b: str) -> float:
    """Return the true ratio of medians (= geometric means) of ``level_b`` over ``level_a``.

    ``grouping`` is ``"field"`` or ``"season"``. The result is 1.0 when the analyte has no planted
    effect for that grouping (including the spread-only analyte).

    Raises:
        KeyError: if the analyte or grouping is unknown.
        ValueError: if a level does not belong to the grouping.
    """
    if analyte not in ANALYTES:
        raise KeyError(f"unknown analyte: {analyte!r}")
    if grouping not in LEVELS:
        raise KeyError(f"unknown grouping: {grouping!r} (expected one of {sorted(LEVELS)})")
    for level in (level_a, level_b):
        if level not in LEVELS[grouping]:
            raise ValueError(f"{level!r} is not a level of {grouping!r}: {LEVELS[grouping]}")
    multipliers = PLANTED_EFFECTS.get(analyte, {}).get(grouping, {})
    return multipliers.get(level_b, 1.0) / multipliers.get(level_a, 1.0)


def _cell_median(analyte: str, field: str, season: str) -> float:
    """True median of ``analyte`` in one field x season cell."""
    baseline, _ = ANALYTES[analyte]
    effects = PLANTED_EFFECTS.get(analyte, {})
    return (
        baseline
        * effects.get("field", {}).get(field, 1.0)
        * effects.get("season", {}).get(season, 1.0)
    )


def _cell_log_sd(analyte: str, field: str, season: str) -> float:
    """True log-scale SD of ``analyte`` in one field x season cell."""
    _, log_sd = ANALYTES[analyte]
    spread = SPREAD_ONLY.get(analyte)
    if spread is None:
        return log_sd
    level = field if spread["grouping"] == "field" else season
    return spread["log_sd"].get(level, log_sd)


def format_value(value: float, digits: int = SIG_DIGITS) -> str:
    """Format a non-negative value with ``digits`` significant digits, without exponents.

    >>> format_value(0.052349), format_value(9.996), format_value(14820.0), format_value(0.0)
    ('0.0523', '10.0', '14800', '0')
    """
    if value == 0:
        return "0"
    exponent = math.floor(math.log10(abs(value)))
    decimals = digits - 1 - exponent
    rounded = round(value, decimals)
    if math.floor(math.log10(abs(rounded))) > exponent:  # e.g. 9.996 -> 10.0
        decimals -= 1
        rounded = round(value, decimals)
    if decimals <= 0:
        return str(int(rounded))
    return f"{rounded:.{decimals}f}"


def _format_limit(limit: float) -> str:
    """Write a detection limit compactly, e.g. 0.02 -> '<0.02', 120.0 -> '<120'."""
    return f"<{limit:g}"


def generate(seed: int = SEED) -> pl.DataFrame:
    """Simulate the Marrowby Fens soil survey.

    Returns a DataFrame with ``sample_id``, ``field``, ``season`` and one column per analyte in
    ``ANALYTES``. All columns are strings: analyte cells hold a rounded number, ``"<DL"`` for a
    value below the detection limit, ``"0"`` for a recorded zero, or null (an empty CSV cell).
    """
    rng = np.random.default_rng(seed)

    fields: list[str] = []
    seasons: list[str] = []
    for season in SAMPLING_ORDER:
        for field in FIELDS:
            fields.extend([field] * SAMPLES_PER_CELL)
            seasons.extend([season] * SAMPLES_PER_CELL)
    n_rows = len(fields)
    sample_ids = [f"MF-{i:04d}" for i in range(1, n_rows + 1)]

    columns: dict[str, list[str | None]] = {}
    for analyte in ANALYTES:
        z = rng.standard_normal(n_rows)
        limit = DETECTION_LIMITS.get(analyte)
        cells: list[str | None] = []
        for i in range(n_rows):
            median = _cell_median(analyte, fields[i], seasons[i])
            log_sd = _cell_log_sd(analyte, fields[i], seasons[i])
            value = math.exp(math.log(median) + log_sd * z[i])
            if limit is not None and value < limit:
                cells.append(_format_limit(limit))
            else:
                cells.append(format_value(value))
        columns[analyte] = cells

    analyte_names = list(ANALYTES)
    zero_cells: set[tuple[int, int]] = set()
    for analyte, count in ZERO_COUNTS.items():
        rows = rng.choice(n_rows, size=count, replace=False)
        for row in rows:
            columns[analyte][int(row)] = "0"
            zero_cells.add((int(row), analyte_names.index(analyte)))

    n_cells = n_rows * len(analyte_names)
    n_blank = round(BLANK_FRACTION * n_cells)
    candidates = [
        flat for flat in range(n_cells) if divmod(flat, len(analyte_names)) not in zero_cells
    ]
    for flat in rng.choice(candidates, size=n_blank, replace=False):
        row, col = divmod(int(flat), len(analyte_names))
        columns[analyte_names[col]][row] = None

    return pl.DataFrame(
        {"sample_id": sample_ids, "field": fields, "season": seasons, **columns},
        schema={
            "sample_id": pl.String,
            "field": pl.String,
            "season": pl.String,
            **dict.fromkeys(analyte_names, pl.String),
        },
    )


def write_demo(path: str | Path | None = None) -> Path:
    """Generate the demo data with ``SEED`` and write it as CSV; return the path written.

    The default path is ``DEMO_CSV`` (``marrowby_soils.csv`` beside this module).
    """
    target = DEMO_CSV if path is None else Path(path)
    generate().write_csv(target)
    return target


if __name__ == "__main__":
    print(f"wrote {write_demo()}")
