"""Guessed outcomes that would mislead: identifiers, years and quantities on an interval
scale are left out of the family of comparisons, each with a note; naming one keeps it.

Sources (open data nobody here wrote):

- ACTG 175 (Hammer et al. 1996; shipped with lifelines as ``datasets/ACTG175.csv``):
  ``pidnum`` is the patient number, one per row; cd40, cd420, cd80, cd820, wtkg are
  measurements.
- NCCTG lung cancer data (Loprinzi et al. 1994; lifelines ``datasets/lung.csv``):
  ``wt.loss`` is the weight lost in the last six months, negative for a gain.
- US macroeconomic data 1959-2009 (statsmodels ``datasets/macrodata``): ``year``, and
  ``infl`` and ``realint`` (inflation and the real interest rate, negative in some
  quarters).
- Longley (1967) and the county cancer data (statsmodels ``datasets/longley`` and
  ``datasets/cancer``): whole-number measurements, every one different, that must stay
  outcomes.
- vega-datasets ``seattle-weather.csv`` (daily weather in Seattle 2012-2015, °C): skipped
  when vega_datasets is not installed (it is not in the test extra).

The year case reads the project's demo file. The thresholds (an identifier: fewer pairs of
equal values than measurements would give at p < 0.001; an interval scale: at least 3 and
1% of the values negative, reaching a quarter of the median positive value below zero) are
our rules; the small tables written below show where they fall.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import polars as pl
import pytest

from foldsift.stats import load
from foldsift.stats.load import infer_roles, load_table, read_raw
from foldsift.tui.cli import main

DEMO = Path(__file__).resolve().parent.parent / "demo" / "marrowby_plots.csv"
MEASUREMENTS = ("cd40", "cd420", "cd80", "cd820", "wtkg")


def _lifelines_file(name: str) -> Path:
    datasets = pytest.importorskip("lifelines.datasets")
    return Path(datasets.__file__).parent / name


def _statsmodels_file(dataset: str) -> Path:
    module = pytest.importorskip(f"statsmodels.datasets.{dataset}")
    return Path(module.__file__).parent / f"{dataset}.csv"


def _notes_on(table: load.Table, name: str) -> list[str]:
    return [note for note in table.notes if note.startswith(f"{name}: left out")]


# -- identifiers ----------------------------------------------------------------------------


def test_actg175_patient_number_is_an_identifier_not_an_outcome():
    """ACTG 175: pidnum holds a different whole number on each of the 2,139 rows (checked
    on the file); it is neither an outcome nor a grouping, and a note says why."""
    path = _lifelines_file("ACTG175.csv")
    raw = pl.read_csv(path)
    assert raw.height == 2139 and raw["pidnum"].n_unique() == 2139  # the published layout
    table = load_table(path)
    assert "pidnum" not in table.outcomes and "pidnum" not in table.groupings
    assert set(MEASUREMENTS) <= set(table.outcomes), "the measurements stay"
    (note,) = _notes_on(table, "pidnum")
    assert "identifier" in note and "2,139 different in 2,139 rows" in note


def test_actg175_patient_number_named_as_outcome_is_kept():
    path = _lifelines_file("ACTG175.csv")
    table = load_table(path, outcomes=["pidnum", "cd40"])
    assert table.outcomes == ("pidnum", "cd40")
    assert not _notes_on(table, "pidnum")


def test_actg175_identifier_with_one_repeated_row_typed_in_memory():
    """One patient entered twice (2,140 rows, 2,139 numbers): still an identifier, also
    when the table arrives typed (an in-memory frame)."""
    raw = pl.read_csv(_lifelines_file("ACTG175.csv")).drop("")
    twice = pl.concat([raw, raw.head(1)])
    assert twice.height - twice["pidnum"].n_unique() == 1
    table = load_table(frame=twice)
    assert "pidnum" not in table.outcomes and "pidnum" not in table.groupings
    assert set(MEASUREMENTS) <= set(table.outcomes)
    assert _notes_on(table, "pidnum")


def test_an_identifier_named_in_camel_case_in_a_few_rows():
    """Twelve rows are too few for the spacing rule (a run of 12 different numbers is
    plausible for measurements); a name ending in ID says it."""
    raw = pl.read_csv(_lifelines_file("ACTG175.csv")).head(12)
    frame = raw.select(pl.col("pidnum").alias("PatientID"), "treat", "cd40")
    table = load_table(frame=frame)
    assert table.outcomes == ("cd40",) and table.groupings == ("treat",)
    assert _notes_on(table, "PatientID")


def test_whole_number_measurements_all_different_stay_outcomes():
    """Longley (16 rows): employment, GNP, unemployment, armed forces and population are
    whole numbers, all different; the county cancer data: 301 populations, 300 different.
    Measurements spread this widely seldom repeat a value, so they stay outcomes (the
    row number Obs and the consecutive YEAR do not)."""
    longley = read_raw(_statsmodels_file("longley"))
    _, outcomes = infer_roles(longley)
    assert {"TOTEMP", "GNP", "UNEMP", "ARMED", "POP"} <= set(outcomes)
    assert "Obs" not in outcomes and "YEAR" not in outcomes
    cancer = read_raw(_statsmodels_file("cancer"))
    assert cancer["population"].n_unique() == cancer.height - 1  # one value repeats
    assert infer_roles(cancer)[1] == ["cancer", "population"]


def test_scan_of_actg175_leaves_pidnum_out_and_says_so(tmp_path, capsys):
    out = tmp_path / "actg.csv"
    assert main(["scan", str(_lifelines_file("ACTG175.csv")), "--out", str(out)]) == 0
    err = capsys.readouterr().err
    assert "foldsift: note: pidnum: left out as an identifier" in err
    rows = pl.read_csv(out, infer_schema_length=None)
    assert "pidnum" not in set(rows["outcome"])
    assert set(MEASUREMENTS) <= set(rows["outcome"])


# -- years ----------------------------------------------------------------------------------


def test_demo_year_is_not_an_outcome_when_groupings_are_named(tmp_path, capsys):
    """The demo's plots are measured in 2025 and 2026. With --group field the other few-level
    integer columns become outcomes, but the year is left out with a note: 5 fields give
    10 pairs for each of the 3 measurements."""
    out = tmp_path / "plots.csv"
    code = main(["scan", str(DEMO), "--group", "field", "--pair-by", "plot", "--out", str(out)])
    assert code == 0
    err = capsys.readouterr().err
    assert "foldsift: note: year: left out of the outcomes: years (2025 to 2026)" in err
    rows = pl.read_csv(out, infer_schema_length=None)
    assert set(rows["outcome"]) == {
        "nitrate_mg_per_kg",
        "phosphorus_olsen_mg_per_kg",
        "potassium_mg_per_kg",
    }
    assert rows.height == 10 * 3


def test_demo_year_named_as_outcome_or_guessed_as_grouping():
    named = load_table(DEMO, groupings=["field"], outcomes=["year", "nitrate_mg_per_kg"])
    assert named.outcomes == ("year", "nitrate_mg_per_kg")
    guessed = load_table(DEMO)
    assert "year" in guessed.groupings and "year" not in guessed.outcomes
    assert not _notes_on(guessed, "year"), "a grouping is used: nothing to say"


def test_years_by_their_range_whatever_the_name(tmp_path):
    """The demo's year under another name: whole numbers all within 1800-2200 with few
    levels are years all the same."""
    frame = pl.read_csv(DEMO).rename({"year": "harvest"})
    path = tmp_path / "renamed.csv"
    frame.write_csv(path)
    table = load_table(path, groupings=["field"])
    assert "harvest" not in table.outcomes
    assert _notes_on(table, "harvest")


def test_macrodata_years_and_rates_below_zero():
    """statsmodels macrodata: 203 quarters of 1959-2009. The year is no outcome; inflation
    and the real interest rate go below zero (an interval scale), so they are left out of
    the guessed outcomes; real GDP and the population stay."""
    path = _statsmodels_file("macrodata")
    raw = pl.read_csv(path)
    table = load_table(path)
    assert table.groupings == ("quarter",)
    assert {"realgdp", "pop", "cpi"} <= set(table.outcomes)
    for name in ("year", "infl", "realint"):
        assert name not in table.outcomes
        assert _notes_on(table, name), name
    negative = int((raw["realint"] < 0).sum())
    (note,) = _notes_on(table, "realint")
    assert f"{negative:,} of {raw.height:,} values are negative" in note


# -- interval scale (negative values) --------------------------------------------------------


def test_lung_weight_loss_below_zero_is_an_interval_scale():
    """NCCTG lung: a weight gain is a negative weight loss. Far too many and too large
    negatives for noise around zero: left out, the count named; kept when named."""
    path = _lifelines_file("lung.csv")
    loss = pl.read_csv(path)["wt.loss"].drop_nulls()
    negative = int((loss < 0).sum())
    assert negative >= 3
    table = load_table(path)
    assert "wt.loss" not in table.outcomes
    (note,) = _notes_on(table, "wt.loss")
    assert f"{negative:,} of {loss.len():,} values are negative" in note
    named = load_table(path, groupings=["sex"], outcomes=["wt.loss"])
    assert named.outcomes == ("wt.loss",)


def test_seattle_minimum_temperature(tmp_path, capsys):
    """Seattle weather: temp_min (°C) is below zero on 72 of 1,461 days (counted on the
    file); it is left out with a note, the other three measurements stay."""
    vega = pytest.importorskip("vega_datasets")
    path = Path(vega.__file__).parent / "_data" / "seattle-weather.csv"
    raw = pl.read_csv(path)
    negative = int((raw["temp_min"] < 0).sum())
    out = tmp_path / "weather.csv"
    assert main(["scan", str(path), "--out", str(out)]) == 0
    err = capsys.readouterr().err
    assert f"note: temp_min: left out of the outcomes: {negative} of {raw.height:,}" in err
    rows = pl.read_csv(out, infer_schema_length=None)
    assert set(rows["outcome"]) == {"precipitation", "temp_max", "wind"}


# Forty positive concentrations spread like a lognormal sample with median 5 (quantiles of
# a lognormal, not random draws), for the boundary cases of our rule below.
POSITIVE = [float(5 * np.exp(0.6 * z)) for z in np.linspace(-1.8, 1.8, 40)]


def _with(extra: list[float]) -> pl.DataFrame:
    """Two sites; ``x`` holds POSITIVE and then ``extra``, ``y`` only positive values."""
    values = POSITIVE + extra
    return pl.DataFrame(
        {
            "site": ["a", "b"] * (len(values) // 2) + ["a"] * (len(values) % 2),
            "x": values,
            "y": [POSITIVE[i % len(POSITIVE)] for i in range(len(values))],
        }
    )


def test_our_rule_keeps_a_few_small_blank_corrected_negatives():
    """Our rule: blank-corrected results near zero (-0.02 to -0.1 among values around 5)
    are noise around zero: the column stays an outcome; they are left out per group."""
    table = load_table(frame=_with([-0.05, -0.1, -0.02, -0.08]))
    assert table.outcomes == ("x", "y") and not _notes_on(table, "x")


def test_our_rule_zeros_alone_never_make_an_interval_scale():
    table = load_table(frame=_with([0.0] * 20))
    assert table.outcomes == ("x", "y")


def test_our_rule_needs_three_negatives():
    """Two large negatives may be slips: left out per group; three make the pattern."""
    assert load_table(frame=_with([-3.0, -4.0])).outcomes == ("x", "y")
    three = _with([-3.0, -4.0, -2.5])
    table = load_table(frame=three)
    assert table.outcomes == ("y",)
    (note,) = _notes_on(table, "x")
    assert "x: left out of the outcomes: 3 of 43 values are negative (down to -4)" in note
    named = load_table(frame=three, outcomes=["x"])
    assert named.outcomes == ("x",), "named: kept, its negatives left out per group"


def test_our_rule_negatives_must_reach_a_quarter_of_the_median():
    """Median of POSITIVE is 5: negatives down to -1.2 stay noise, down to -1.3 do not."""
    assert load_table(frame=_with([-1.0, -1.1, -1.2])).outcomes == ("x", "y")
    assert load_table(frame=_with([-1.0, -1.1, -1.3])).outcomes == ("y",)


def test_our_rule_codes_below_zero_stay_out_when_groupings_are_named():
    """A few-level integer column is compared as a measurement when --group names the
    groupings; codes -1/0/1 are not one."""
    frame = _with([]).with_columns(
        pl.Series("direction", [-1, 0, 1, 1] * 10), pl.Series("dose", [1, 2, 4, 8] * 10)
    )
    table = load_table(frame=frame, groupings=["site"])
    assert table.outcomes == ("x", "y", "dose")
    assert _notes_on(table, "direction")


def test_when_guessing_leaves_no_outcome_the_message_names_what_it_left_out(tmp_path, capsys):
    """NCCTG lung, sex and weight loss only: nothing is left to compare, and the one-line
    refusal names the column that guessing passed over."""
    lung = pl.read_csv(_lifelines_file("lung.csv")).select("sex", "wt.loss")
    path = tmp_path / "lung_two.csv"
    lung.write_csv(path)
    assert main(["scan", str(path), "--out", str(tmp_path / "out.csv")]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "no numeric outcome columns found (guessing left out wt.loss" in err


# -- constants --------------------------------------------------------------------------------


def test_actg175_constant_column_is_not_an_outcome():
    """ACTG 175's zprior is 1 on every row (checked on the file): no comparison of it has
    any spread, so guessing leaves it out with a note; naming it keeps it."""
    path = _lifelines_file("ACTG175.csv")
    assert pl.read_csv(path)["zprior"].unique().to_list() == [1]  # the published layout
    table = load_table(path)
    assert "zprior" not in table.outcomes
    (note,) = _notes_on(table, "zprior")
    assert "every value is 1" in note
    named = load_table(path, groupings=["treat"], outcomes=["zprior", "cd40"])
    assert named.outcomes == ("zprior", "cd40")


def test_a_constant_measurement_among_varying_ones():
    """A fixed setting written as a number (the same 2.5 on every row, a few missing) is
    left out; a column with two values stays (our rule: constant means one finite value)."""
    rng = np.random.default_rng(3)
    frame = pl.DataFrame(
        {
            "site": ["a", "b"] * 20,
            "dilution": [2.5] * 38 + [None, None],
            "lead": np.exp(rng.normal(size=40)),
            "two": [1.5] * 39 + [3.0],
        }
    )
    table = load_table(frame=frame)
    assert table.outcomes == ("lead", "two")
    assert _notes_on(table, "dilution")


# -- names of the units measured --------------------------------------------------------------


def test_plot_names_are_units_not_a_grouping(tmp_path, capsys):
    """The demo's plot column names 40 plots, each sampled in two years: guessed as a
    grouping it gave 780 pairs of plots per outcome, each of two values (our rule: 10 or more
    labels with at most 2 rows for most of them name units). It is left out with a note
    pointing to --pair-by; naming it with --group still compares its labels."""
    path = Path(__file__).resolve().parents[1] / "demo" / "marrowby_plots.csv"
    sizes = pl.read_csv(path)["plot"].value_counts()["count"]
    assert sizes.len() == 40 and sizes.median() == 2  # the demo's layout
    table = load_table(path)
    assert "plot" not in table.groupings
    (note,) = [n for n in table.notes if n.startswith("plot: not taken as a grouping")]
    assert "--pair-by" in note
    named = load_table(path, groupings=["plot"])
    assert named.groupings == ("plot",)


def test_few_labels_or_larger_groups_stay_groupings():
    """Nine sites of two rows each, or twelve sites of three rows each, are groups."""
    rng = np.random.default_rng(5)
    for labels, rows in ((9, 2), (12, 3)):
        frame = pl.DataFrame(
            {
                "site": [f"s{i:02d}" for i in range(labels) for _ in range(rows)],
                "lead": np.exp(rng.normal(size=labels * rows)),
            }
        )
        assert load_table(frame=frame).groupings == ("site",), (labels, rows)
