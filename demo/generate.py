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
  e.g. ``<0.02``. The arsenic of one field was measured by a less sensitive method
  (``FIELD_DETECTION_LIMITS``: north_meadow at 12 mg/kg, the others at 5), so a comparison
  that substitutes DL/2 is biased there while the censored fit is not.
* Values above the detection limit are rounded to ``SIG_DIGITS`` significant digits.
* A few exact zeros (``ZERO_COUNTS``) and about ``BLANK_FRACTION`` empty cells.

The same survey as a laboratory export
--------------------------------------
``generate_lab`` writes the same cores as the laboratories reported them: one row per core x
analyte (``sample_id``, ``field``, ``season``, ``analyte``, ``result``, ``unit``,
``qualifier``, ``detection_limit``), derived from ``generate`` entry by entry, so both files
hold the same measurements:

* Analytes are named as in the wide column without its unit (``phosphorus olsen``); the unit
  is in its own column (``mg/kg``, ``µg/kg``, ``g/kg``, ``µS/cm``), and every row of an
  analyte with a detection limit carries that limit in ``detection_limit``.
* Cadmium of the autumn cores of ``LAB_B_FIELDS`` was sent to a second laboratory, which
  reports in mg/kg (the first one in µg/kg): its results and limits are the wide µg/kg
  entries shifted three decimal places (``243`` -> ``0.243``, limit ``0.12``).
* Entries below the detection limit are written in three ways, in turn (``CENSORED_FORMS``):
  qualifier ``U`` with the limit as the result, ``<limit`` as the result, and ``ND`` as the
  result with the limit in ``detection_limit``; the second laboratory always writes
  ``<limit``.
* Laboratory duplicates (``DUPLICATE_EVERY``): two results ``1.25 x`` and ``0.8 x`` for the
  wide entry ``x``, whose geometric mean is ``x``.
* Rejected runs (``REJECTED_SAMPLES``): a result with qualifier ``R`` (``REJECTED_FACTOR``
  times the accepted result) before the accepted re-run.
* The wide file's empty cells are, in turn, a row left out and a row with an empty result.

The same plots in two years
---------------------------
``generate_plots`` writes ``marrowby_plots.csv``: fixed monitoring plots (``PLOTS_PER_FIELD``
in each field), sampled in 2025 and again in 2026, after the farm moved from a granular
fertiliser to a slow-release one on every field. Each plot has its own level (a plot effect
with log-SD ``PLOT_SD``, shared by its two years) and each sampling its own noise
(``SAMPLING_SD``); the planted year effects are ``YEAR_EFFECTS`` (nitrate 0.7×, the others
1.0×). A few plots were not sampled in one of the years (``MISSED_PLOTS``) and one plot was
sampled twice in 2026 (``REPEATED_PLOT``), so a paired scan (``--pair-by plot``) counts
unpaired plots and combines the repeat. Comparing the years as independent groups ignores
the plot effect and gives a much wider interval.

Run ``python -m foldsift.demo.generate`` to rewrite ``marrowby_soils.csv``,
``marrowby_soils_lab.csv`` and ``marrowby_plots.csv`` beside this file.
"""

from __future__ import annotations

import math
from decimal import Decimal
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

FIELD_DETECTION_LIMITS: dict[str, dict[str, float]] = {
    # analyte: {field: detection limit of that field's cores}, overriding DETECTION_LIMITS.
    "arsenic_mg_per_kg": {"north_meadow": 12.0},
}


def detection_limit(analyte: str, field: str) -> float | None:
    """The detection limit of one analyte in one field's cores (None: no limit)."""
    return FIELD_DETECTION_LIMITS.get(analyte, {}).get(field, DETECTION_LIMITS.get(analyte))


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
PLOTS_CSV = Path(__file__).with_name("marrowby_plots.csv")
PLOTS_PER_FIELD = 8
YEARS: tuple[str, ...] = ("2025", "2026")
PLOT_ANALYTES: dict[str, float] = {
    # name: baseline median (mg/kg)
    "nitrate_mg_per_kg": 18.0,
    "phosphorus_olsen_mg_per_kg": 22.0,
    "potassium_mg_per_kg": 180.0,
}
YEAR_EFFECTS: dict[str, float] = {"nitrate_mg_per_kg": 0.7}
PLOT_SD = 0.6
SAMPLING_SD = 0.15
MISSED_PLOTS: dict[str, str] = {"P07": "2026", "P19": "2025", "P33": "2026"}
REPEATED_PLOT = ("P12", "2026")
LAB_CSV = Path(__file__).with_name("marrowby_soils_lab.csv")

NAME_UNITS: dict[str, str] = {
    # unit part of a wide column name: unit as the laboratory export writes it.
    "_ug_per_kg": "µg/kg",
    "_mg_per_kg": "mg/kg",
    "_g_per_kg": "g/kg",
    "_us_per_cm": "µS/cm",
}

LAB_B_ANALYTE = "cadmium_ug_per_kg"
"""The analyte that the second laboratory reported for some cores, in ``LAB_B_UNIT``."""
LAB_B_UNIT = "mg/kg"
LAB_B_SHIFT = -3
"""Powers of ten from the wide unit (µg/kg) to the second laboratory's unit (mg/kg)."""
LAB_B_FIELDS: tuple[str, ...] = ("brook_end", "long_acre", "north_meadow")
"""Fields whose autumn cores had cadmium measured by the second laboratory."""

CENSORED_FORMS: tuple[str, ...] = ("U", "<", "ND")
"""How the first laboratory writes below-detection entries, in turn (see the module doc)."""

DUPLICATE_ANALYTE = "potassium_mg_per_kg"
DUPLICATE_EVERY = 40
"""Every 40th core has a laboratory duplicate of ``DUPLICATE_ANALYTE``."""
DUPLICATE_FACTORS: tuple[str, str] = ("1.25", "0.8")
"""The duplicate pair's multipliers of the wide entry; their product is 1."""

REJECTED_ANALYTE = "mercury_mg_per_kg"
REJECTED_SAMPLES: tuple[int, ...] = (13, 113, 213)
"""Cores (1-based rows) with a rejected first run of ``REJECTED_ANALYTE``."""
REJECTED_FACTOR = "5"

Row = tuple[str | None, str, str | None, str | None]
"""One reported result: (result, unit, qualifier, detection limit)."""

LAB_COLUMNS: tuple[str, ...] = (
    "sample_id",
    "field",
    "season",
    "analyte",
    "result",
    "unit",
    "qualifier",
    "detection_limit",
)


def demo_path() -> Path:
    """Return the path of the committed demo CSV."""
    return DEMO_CSV


def lab_path() -> Path:
    """Return the path of the committed demo laboratory export (long table)."""
    return LAB_CSV


def analyte_and_unit(column: str) -> tuple[str, str]:
    """The analyte name and unit of a wide column as the laboratory export writes them.

    >>> analyte_and_unit("phosphorus_olsen_mg_per_kg"), analyte_and_unit("cadmium_ug_per_kg")
    (('phosphorus olsen', 'mg/kg'), ('cadmium', 'µg/kg'))
    """
    for suffix, unit in NAME_UNITS.items():
        if column.endswith(suffix):
            return column[: -len(suffix)].replace("_", " "), unit
    raise ValueError(f"no unit in the column name {column!r}")


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
        cells: list[str | None] = []
        for i in range(n_rows):
            limit = detection_limit(analyte, fields[i])
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


def _shifted(text: str, places: int) -> str:
    """A decimal written ``text`` times ten to ``places``, exactly (``243`` -> ``0.243``)."""
    return f"{Decimal(text).scaleb(places):f}"


def _times(text: str, factor: str) -> str:
    """A decimal written ``text`` times ``factor``, exactly and without trailing zeros."""
    return f"{(Decimal(text) * Decimal(factor)).normalize():f}"


def _censored_row(limit: str, form: str) -> tuple[str, str]:
    """(result, qualifier) of an entry below ``limit`` in one of ``CENSORED_FORMS``."""
    if form == "U":
        return limit, "U"
    if form == "<":
        return f"<{limit}", ""
    return "ND", ""


def _lab_rows(
    column: str, entry: str | None, lab_b: bool, form: str, blank_kept: bool, field: str
) -> list[Row]:
    """(result, unit, qualifier, detection limit) rows of one wide entry; none for an empty
    entry that is left out."""
    _, unit = analyte_and_unit(column)
    limit = detection_limit(column, field)
    limit_text = None if limit is None else f"{limit:g}"
    if lab_b:
        unit = LAB_B_UNIT
        limit_text = None if limit_text is None else _times(limit_text, f"1e{LAB_B_SHIFT}")
    if entry is None:
        return [(None, unit, None, limit_text)] if blank_kept else []
    if entry.startswith("<"):
        assert limit_text is not None
        result, qualifier = _censored_row(limit_text, "<" if lab_b else form)
        return [(result, unit, qualifier or None, limit_text)]
    value = _shifted(entry, LAB_B_SHIFT) if lab_b else entry
    return [(value, unit, None, limit_text)]


def _with_reruns(column: str, entry: str, core_number: int, reported: list[Row]) -> list[Row]:
    """The rows of a measured entry with a laboratory duplicate pair in place of the one
    result, or a rejected run before it, where the demo has them."""
    _, unit, _, limit_text = reported[0]
    if column == DUPLICATE_ANALYTE and core_number % DUPLICATE_EVERY == 0:
        return [(_times(entry, factor), unit, None, limit_text) for factor in DUPLICATE_FACTORS]
    if column == REJECTED_ANALYTE and core_number in REJECTED_SAMPLES:
        return [(_times(entry, REJECTED_FACTOR), unit, "R", limit_text), *reported]
    return reported


def generate_lab(seed: int = SEED) -> pl.DataFrame:
    """The survey of ``generate(seed)`` as a laboratory export: one row per core x analyte
    (``LAB_COLUMNS``, all strings; see the module doc for what is written how)."""
    rows: list[tuple[str | None, ...]] = []
    censored_seen = 0
    blanks_seen = 0
    for number, core in enumerate(generate(seed).iter_rows(named=True), start=1):
        lab_b = core["season"] == "autumn" and core["field"] in LAB_B_FIELDS
        ident = (core["sample_id"], core["field"], core["season"])
        for column in ANALYTES:
            entry = core[column]
            censored = entry is not None and entry.startswith("<")
            form = CENSORED_FORMS[censored_seen % len(CENSORED_FORMS)]
            censored_seen += censored
            blanks_seen += entry is None
            reported = _lab_rows(
                column,
                entry,
                lab_b and column == LAB_B_ANALYTE,
                form,
                blanks_seen % 2 == 0,
                core["field"],
            )
            if entry is not None and not censored:
                reported = _with_reruns(column, entry, number, reported)
            analyte, _ = analyte_and_unit(column)
            rows.extend((*ident, analyte, *row) for row in reported)
    return pl.DataFrame(rows, schema=dict.fromkeys(LAB_COLUMNS, pl.String), orient="row")


def write_lab(path: str | Path | None = None) -> Path:
    """Generate the demo laboratory export with ``SEED`` and write it as CSV; return the path
    written (default ``LAB_CSV``, ``marrowby_soils_lab.csv`` beside this module)."""
    target = LAB_CSV if path is None else Path(path)
    generate_lab().write_csv(target)
    return target


def write_demo(path: str | Path | None = None) -> Path:
    """Generate the demo data with ``SEED`` and write it as CSV; return the path written.

    The default path is ``DEMO_CSV`` (``marrowby_soils.csv`` beside this module).
    """
    target = DEMO_CSV if path is None else Path(path)
    generate().write_csv(target)
    return target


def generate_plots(seed: int = SEED) -> pl.DataFrame:
    """The monitoring plots sampled in two years (see the module doc): ``plot``, ``field``,
    ``year`` and one column per analyte in ``PLOT_ANALYTES``, rounded to ``SIG_DIGITS``."""
    rng = np.random.default_rng(seed + 1)
    plots = [
        (f"P{number:02d}", field)
        for number, field in enumerate((f for f in FIELDS for _ in range(PLOTS_PER_FIELD)), start=1)
    ]
    levels = {a: rng.normal(0.0, PLOT_SD, len(plots)) for a in PLOT_ANALYTES}
    rows: list[dict[str, str]] = []
    for index, (plot, field) in enumerate(plots):
        for year in YEARS:
            if MISSED_PLOTS.get(plot) == year:
                continue
            repeats = 2 if (plot, year) == REPEATED_PLOT else 1
            for _ in range(repeats):
                row = {"plot": plot, "field": field, "year": year}
                for analyte, median in PLOT_ANALYTES.items():
                    effect = YEAR_EFFECTS.get(analyte, 1.0) if year == YEARS[1] else 1.0
                    log_value = math.log(median * effect) + levels[analyte][index]
                    row[analyte] = format_value(math.exp(log_value + rng.normal(0, SAMPLING_SD)))
                rows.append(row)
    return pl.DataFrame(rows)


def write_plots(path: str | Path | None = None) -> Path:
    """Write the two-year plot survey (default ``PLOTS_CSV``); return the path written."""
    target = PLOTS_CSV if path is None else Path(path)
    generate_plots().write_csv(target)
    return target


def plots_path() -> Path:
    """The two-year plot survey beside this module."""
    return PLOTS_CSV


if __name__ == "__main__":
    print(f"wrote {write_demo()}")
    print(f"wrote {write_lab()}")
    print(f"wrote {write_plots()}")
