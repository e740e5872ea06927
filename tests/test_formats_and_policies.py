"""File formats and the value policies, checked against outside data and definitions.

- Formats: the NIST/SEMATECH e-Handbook 1.3.5.3 AUTO83B data (tests/data) written as CSV,
  TSV, semicolon- and pipe-separated text and Parquet must give the same comparisons, and
  the log-scale pooled result computed with an independent library (shared reference
  README: ratio US/Japan 0.64333, 95% CI 0.59813 to 0.69195).
- Policies: substituting DL/2 (common practice; e.g. US EPA data-quality guidance, from
  memory) or DL/sqrt(2) (Hornung & Reed 1990, Appl. Occup. Environ. Hyg. 5:46-51, from
  memory) for entries below a detection limit, and half the smallest positive value for
  zeros, are checked against their definitions computed by hand with numpy; every left-out
  or substituted value must be counted per group.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from foldsift.stats.load import load_table
from foldsift.stats.policy import ValuePolicy
from foldsift.stats.scan import Reference, ScanSettings, run_scan

DATA = Path(__file__).parent / "data"
NUMBERS = ["n_a", "n_b", "ratio", "ci_low", "ci_high", "p_value", "df"]


def _scan(path: Path, **settings) -> pl.DataFrame:
    table = load_table(path, groupings=["origin"], outcomes=["mpg"])
    return run_scan(table, ScanSettings(**settings)).comparisons


@pytest.mark.parametrize("kind", ["tsv", "semicolon", "pipe", "parquet", "txt-tab"])
def test_every_format_gives_the_same_comparisons(tmp_path, kind):
    source = pl.read_csv(DATA / "nist_auto83b_mpg.csv")
    if kind == "parquet":
        path = tmp_path / "auto.parquet"
        source.write_parquet(path)
    else:
        separator, suffix = {
            "tsv": ("\t", ".tsv"),
            "semicolon": (";", ".csv"),
            "pipe": ("|", ".csv"),
            "txt-tab": ("\t", ".txt"),
        }[kind]
        path = tmp_path / f"auto{suffix}"
        source.write_csv(path, separator=separator)
    expected = _scan(DATA / "nist_auto83b_mpg.csv", test="pooled")
    got = _scan(path, test="pooled")
    assert got.select(NUMBERS).row(0) == pytest.approx(expected.select(NUMBERS).row(0), rel=1e-12)
    # level_a is "japan" (alphabetical), so the frame holds us/japan: the README's ratio.
    row = got.row(0, named=True)
    assert (row["level_a"], row["level_b"]) == ("japan", "us")
    assert row["ratio"] == pytest.approx(0.64333, abs=5e-6)
    assert row["ci_low"] == pytest.approx(0.59813, abs=5e-6)
    assert row["ci_high"] == pytest.approx(0.69195, abs=5e-6)


RAW = {
    "site": ["a"] * 6 + ["b"] * 6,
    "lead": ["<0.5", "0.8", "1.2", "0", "2.0", "1.6", "3.1", "<0.5", "<0.5", "2.4", "-1", "4.0"],
}


def _policy_scan(nonpositive: str, censored: str) -> dict:
    table = load_table(frame=pl.DataFrame(RAW), groupings=["site"], outcomes=["lead"])
    policy = ValuePolicy(nonpositive=nonpositive, censored=censored)
    return run_scan(table, ScanSettings(policy=policy)).comparisons.row(0, named=True)


def _gm(values: list[float]) -> float:
    return math.exp(float(np.mean(np.log(values))))


SMALLEST_POSITIVE = 0.8  # of the plain (not censored) entries of the outcome
CASES = {
    ("exclude", "exclude"): ([0.8, 1.2, 2.0, 1.6], [3.1, 2.4, 4.0], (2, 3), (0, 0)),
    ("exclude", "half-dl"): (
        [0.25, 0.8, 1.2, 2.0, 1.6],
        [3.1, 0.25, 0.25, 2.4, 4.0],
        (1, 1),
        (1, 2),
    ),
    (
        "exclude",
        "dl-root2",
    ): (
        [0.5 / math.sqrt(2), 0.8, 1.2, 2.0, 1.6],
        [3.1, 0.5 / math.sqrt(2), 0.5 / math.sqrt(2), 2.4, 4.0],
        (1, 1),
        (1, 2),
    ),
    ("half-min", "exclude"): (
        [0.8, 1.2, SMALLEST_POSITIVE / 2, 2.0, 1.6],
        [3.1, 2.4, SMALLEST_POSITIVE / 2, 4.0],
        (1, 2),
        (1, 1),
    ),
}


@pytest.mark.parametrize(("nonpositive", "censored"), list(CASES))
def test_policies_follow_their_definitions_and_are_counted(nonpositive, censored):
    values_a, values_b, excluded, substituted = CASES[(nonpositive, censored)]
    row = _policy_scan(nonpositive, censored)
    assert (row["n_a"], row["n_b"]) == (len(values_a), len(values_b))
    assert (row["n_excluded_a"], row["n_excluded_b"]) == excluded
    assert (row["n_substituted_a"], row["n_substituted_b"]) == substituted
    assert (row["n_censored_a"], row["n_censored_b"]) == (1, 2)
    assert row["gm_a"] == pytest.approx(_gm(values_a), rel=1e-12)
    assert row["gm_b"] == pytest.approx(_gm(values_b), rel=1e-12)
    assert row["ratio"] == pytest.approx(_gm(values_b) / _gm(values_a), rel=1e-12)
    # Medians of groups with below-detection entries are Kaplan-Meier medians. With every
    # limit below the detected values that is the ordinary median with the entries left out
    # ranked lowest (Helsel 2012, from memory; common practice).
    left_out_a, left_out_b = (1, 2) if censored == "exclude" else (0, 0)
    assert row["median_a"] == pytest.approx(float(np.median(values_a + [1e-9] * left_out_a)))
    assert row["median_b"] == pytest.approx(float(np.median(values_b + [1e-9] * left_out_b)))


def test_censored_share_warning_names_the_rule_of_thumb():
    """Group b has 2 of 6 entries below detection (33% > 15%, a common rule of thumb for
    simple substitution): the comparison carries censored-share; group a alone (17%) too."""
    row = _policy_scan("exclude", "half-dl")
    assert "censored-share" in row["warnings"]
    assert row["censored_share_b"] == pytest.approx(2 / 6)
    assert row["censored_share_a"] == pytest.approx(1 / 6)


def test_semicolon_file_with_decimal_commas(tmp_path):
    """Bland & Altman (1996) skinfold data written the way many European spreadsheets save
    CSV (; between fields, decimal commas) reads the same as the plain file: pooled ratio
    1.3442, 95% CI 0.8919 to 2.0258 (shared reference README, computed)."""
    source = pl.read_csv(DATA / "bland_altman_1996_skinfold.csv")
    text = "diagnosis;biceps_skinfold_mm\n" + "".join(
        f"{d};{str(v).replace('.', ',')}\n" for d, v in source.rows()
    )
    path = tmp_path / "skinfold.csv"
    path.write_text(text)
    table = load_table(path)
    assert table.outcomes == ("biceps_skinfold_mm",)
    row = run_scan(
        table, ScanSettings(test="pooled", pairs="reference", reference=(Reference.of("coeliac"),))
    ).comparisons.row(0, named=True)
    assert row["ratio"] == pytest.approx(1.3442, abs=5e-5)
    assert (row["ci_low"], row["ci_high"]) == pytest.approx((0.8919, 2.0258), abs=5e-5)


@pytest.mark.parametrize("name", ["id", "sample_no", "run"])
def test_running_sample_numbers_are_neither_groupings_nor_outcomes(name):
    """A whole-number column with one value per row that counts 1, 2, 3, … (or is named like
    an identifier) numbers the samples; comparing it would be meaningless (common practice)."""
    frame = pl.DataFrame(
        {
            name: [str(i) for i in range(1, 9)],
            "site": list("aaaabbbb"),
            "v": [f"{1.5 + i}" for i in range(8)],
        }
    )
    table = load_table(frame=frame)
    assert name not in table.groupings and name not in table.outcomes
    assert table.groupings == ("site",) and table.outcomes == ("v",)
