"""Column roles that do not mislead: dates, years and unit numbers are neither measurements
nor guessed groupings, and a wide table that looks long says so.

Sources: the Grunfeld investment data (Grunfeld 1958; shipped with statsmodels as
``statsmodels.datasets.grunfeld``, columns invest, value, capital, firm, year) is open data
nobody here wrote; the rule that a year or a subject number is an identifier, not a
measurement, is common practice. The small tables below are written by each test.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import polars as pl
import pytest

from foldsift.stats.load import load_table


def _write(path: Path, frame: pl.DataFrame) -> Path:
    frame.write_csv(path)
    return path


def test_grunfeld_year_is_not_an_outcome(tmp_path):
    """statsmodels' Grunfeld data: 11 firms × 20 years (1935-1954). The years are when, not
    what was measured: only invest, value and capital are outcomes, firm the grouping."""
    grunfeld = pytest.importorskip("statsmodels.datasets.grunfeld")
    data = grunfeld.load_pandas().data
    frame = pl.DataFrame({name: data[name].to_list() for name in data.columns})
    assert frame["year"].n_unique() == 20  # the published layout
    table = load_table(_write(tmp_path / "grunfeld.csv", frame))
    assert table.outcomes == ("invest", "value", "capital")
    assert table.groupings == ("firm",)
    in_memory = load_table(frame=frame)
    assert in_memory.outcomes == ("invest", "value", "capital")


def test_a_year_column_with_few_levels_is_a_grouping(tmp_path):
    rng = np.random.default_rng(1)
    frame = pl.DataFrame(
        {"year": np.repeat([2021, 2022, 2023], 10), "lead": rng.lognormal(0, 0.5, 30)}
    )
    table = load_table(_write(tmp_path / "y.csv", frame))
    assert table.groupings == ("year",) and table.outcomes == ("lead",)


def test_dates_with_many_levels_are_not_guessed_as_a_grouping(tmp_path):
    rng = np.random.default_rng(2)
    days = [f"2024-05-{day:02d}" for day in range(1, 21)]
    frame = pl.DataFrame(
        {
            "sampled_on": np.repeat(days, 3),
            "site": np.tile(["a", "b", "c"], 20),
            "lead": rng.lognormal(0, 0.5, 60),
        }
    )
    table = load_table(_write(tmp_path / "d.csv", frame))
    assert table.groupings == ("site",)
    named = load_table(tmp_path / "d.csv", groupings=["sampled_on", "site"])
    assert named.groupings == ("sampled_on", "site"), "still a grouping when named"


def test_time_stamps_are_not_guessed_either(tmp_path):
    rng = np.random.default_rng(3)
    stamps = [f"01/06/2024 {hour:02d}:30" for hour in range(10)]
    frame = pl.DataFrame(
        {
            "taken": np.repeat(stamps, 4),
            "arm": np.tile(["x", "y"], 20),
            "crp": rng.lognormal(0, 0.5, 40),
        }
    )
    assert load_table(_write(tmp_path / "t.csv", frame)).groupings == ("arm",)


def test_a_repeated_subject_number_is_neither_outcome_nor_grouping(tmp_path):
    rng = np.random.default_rng(4)
    frame = pl.DataFrame(
        {
            "subject": np.repeat(np.arange(1, 11), 3),
            "visit": np.tile(["week0", "week4", "week8"], 10),
            "crp": rng.lognormal(0, 0.5, 30),
        }
    )
    table = load_table(_write(tmp_path / "s.csv", frame))
    assert table.groupings == ("visit",) and table.outcomes == ("crp",)
    typed = load_table(frame=frame)
    assert typed.groupings == ("visit",) and typed.outcomes == ("crp",)


def test_a_wide_table_that_looks_long_says_so(tmp_path):
    rng = np.random.default_rng(5)
    frame = pl.DataFrame(
        {
            "analyte": np.repeat(["copper", "zinc"], 10),
            "amount": rng.lognormal(0, 0.5, 20),
        }
    )
    table = load_table(_write(tmp_path / "l.csv", frame))
    assert table.groupings == ("analyte",)
    assert any("looks like the analyte column of a long table" in n for n in table.notes)
