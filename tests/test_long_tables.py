"""Long laboratory exports (one row per sample × analyte) read as the wide tables they encode.

Each check names what it is checked against, beside it:

- **Data-qualifier codes** U, UJ, J and R: the US EPA National Functional Guidelines for data
  review (Superfund inorganic and organic methods). Cited from memory, in paraphrase: U "analysed
  for but not detected above the reported quantitation limit" (the number is the limit); UJ
  "not detected, and the reported limit is approximate"; J "an estimated quantity: the number
  is the approximate concentration"; R "rejected: the result is unusable". Public laboratory
  glossaries give the same four meanings.
- **Detection-condition texts** "Not Detected" and "Below Detection Limit": the result
  detection-condition texts of the Water Quality Exchange (WQX) that public water-quality
  portals export beside each result. Cited from memory, not looked up here.
- **Result codes** ``<0.5``, ``0.5 U``, ``ND``, ``n.d.``, ``BDL``, ``not detected``, ``<LOD``,
  ``<LOQ``, ``<RL`` and ``>1500``: the forms listed in issue 9, item 2, with the meaning the
  docstring of ``foldsift.stats.long`` gives them (the number after ``<`` is the limit; a code
  without a number takes the row's limit; ``>x`` is above the measuring range).
- **Unit factors**: the SI prefixes (BIPM, The International System of Units, 9th edition,
  Table 7): milli = 10^-3, micro = 10^-6, nano = 10^-9, pico = 10^-12; so 1 mg/kg = 1 µg/g.
- **Open data set**: scikit-learn's ``load_wine`` (the UCI wine recognition data, shipped
  inside scikit-learn, read offline).
- **Independent computations**: pandas ``pivot`` to widen, statsmodels ``CompareMeans`` /
  ``ttest_ind`` (``usevar="unequal"``: Welch) on the logs, statsmodels ``multipletests`` for
  Holm and Benjamini-Hochberg, ``scipy.stats.gmean`` for the geometric mean of duplicates.
- **Clinical laboratory columns** USUBJID, ARM, LBTESTCD, LBSTRESN, LBSTRESU: the variable
  names of the laboratory (LB) domain of the CDISC SDTM standard (from memory). The subjects
  and values are invented here.
- **The demo**: the Marrowby Fens survey (invented), written wide and as a laboratory export
  from one seed by ``foldsift.demo.generate``.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import polars as pl
import pytest
from scipy.stats import gmean
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.weightstats import CompareMeans, DescrStatsW, ttest_ind

from foldsift.demo import generate
from foldsift.stats.entries import ABOVE, CENSORED, ESTIMATED, MISSING, NO_LIMIT, NUMBER
from foldsift.stats.load import InputError, Table, load_table
from foldsift.stats.long import LongOptions
from foldsift.stats.policy import ValuePolicy
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.tui.cli import main

from app_support import running, session

LONG_NOTE = "read as a long table"


def long_frame(rows: list[tuple[str | None, ...]], columns: list[str]) -> pl.DataFrame:
    """A long export as the file reader gives it: every column text."""
    return pl.DataFrame(rows, schema=dict.fromkeys(columns, pl.String), orient="row")


def entry(table: Table, outcome: str, site: str) -> tuple[float | None, bool, int]:
    """(value, censored, kind) of the one sample of ``site`` in the loaded table."""
    row = table.frame.filter(pl.col("site") == site)
    assert row.height == 1, row
    names = table.names
    # plain columns (numbers and missing entries only) carry no kind column
    value = row[outcome].item()
    plain = NUMBER if value is not None else MISSING
    kind = row[names.kind(outcome)].item() if names.kind(outcome) in row.columns else plain
    return (value, row[names.censored(outcome)].item(), kind)


def notes_matching(table: Table, pattern: str) -> list[str]:
    return [note for note in table.notes if re.search(pattern, note)]


# -- qualifier codes and limits -------------------------------------------------------------

#: Each case is its own analyte, reported for the one sample of site "x": (result,
#: qualifier, limit) -> (kind, value), with the source of the expected reading.
QUALIFIER_CASES: dict[str, tuple[tuple[str | None, str | None, str | None], int, float | None, str]] = {
    "lt_sign": (("<0.5", None, None), CENSORED, 0.5, "issue 9 item 2: <0.5 is below the limit 0.5"),
    "lt_space": (("< 0.5", None, None), CENSORED, 0.5, "issue 9 item 2: < 0.5"),
    "u_spaced": (("0.5 U", None, None), CENSORED, 0.5, "EPA NFG U: not detected at 0.5"),
    "u_joined": (("0.5U", None, None), CENSORED, 0.5, "EPA NFG U, written without a space"),
    "nd": (("ND", None, "0.4"), CENSORED, 0.4, "issue 9 item 2: ND takes the row's limit"),
    "n_d": (("n.d.", None, "0.4"), CENSORED, 0.4, "issue 9 item 2: n.d. takes the row's limit"),
    "bdl": (("BDL", None, "0.4"), CENSORED, 0.4, "issue 9 item 2: BDL takes the row's limit"),
    "not_detected": (("not detected", None, "0.4"), CENSORED, 0.4, "WQX text in the result"),
    "lod": (("<LOD", None, "0.3"), CENSORED, 0.3, "issue 9 item 2: <LOD, limit from the column"),
    "loq": (("<LOQ", None, "0.3"), CENSORED, 0.3, "issue 9 item 2: <LOQ, limit from the column"),
    "rl": (("<RL", None, "0.3"), CENSORED, 0.3, "issue 9 item 2: <RL, limit from the column"),
    "q_lt": (("0.7", "<", None), CENSORED, 0.7, "qualifier < : below the number given"),
    "q_u": (("0.7", "U", None), CENSORED, 0.7, "EPA NFG U: the number is the limit"),
    "q_u_lower": (("0.7", "u", "0.9"), CENSORED, 0.7, "EPA NFG U; the result's number first"),
    "q_uj": (("0.7", "UJ", None), CENSORED, 0.7, "EPA NFG UJ: not detected, approximate limit"),
    "q_nd": (("0.7", "ND", None), CENSORED, 0.7, "qualifier ND: not detected at the number"),
    "q_wqx_nd": (("0.7", "Not Detected", None), CENSORED, 0.7, "WQX detection condition"),
    "q_wqx_bdl": (("0.7", "Below Detection Limit", None), CENSORED, 0.7, "WQX detection condition"),
    "q_u_no_result": ((None, "U", "0.6"), CENSORED, 0.6, "EPA NFG U with the limit in its column"),
    "q_wqx_no_result": ((None, "Not Detected", "0.6"), CENSORED, 0.6, "WQX: result empty, limit given"),
    "q_j": (("0.7", "J", None), ESTIMATED, 0.7, "EPA NFG J: estimated, the value is used"),
    "q_r": (("0.7", "R", None), MISSING, None, "EPA NFG R: rejected, left out"),
    "above": ((">1500", None, None), ABOVE, 1500.0, "issue 9 item 2: above the measuring range"),
    "nd_no_limit": (("ND", None, None), NO_LIMIT, None, "issue 9 item 2: no limit anywhere"),
    "wqx_no_limit": ((None, "Not Detected", None), NO_LIMIT, None, "WQX text, no number, no limit"),
    "unknown_code": (("0.7", "Q7", None), NUMBER, 0.7, "docstring rule 6: unknown code, value used"),
}  # fmt: skip


@pytest.fixture(scope="module")
def qualifier_table() -> Table:
    """One analyte per case: sample S1 (site x) holds the case, S2 and S3 (site y) plain
    numbers so that every outcome has positive values and two groups."""
    rows: list[tuple[str | None, ...]] = []
    for analyte, ((result, qualifier, limit), *_) in QUALIFIER_CASES.items():
        rows.append(("S1", "x", analyte, result, qualifier, limit))
        rows.append(("S2", "y", analyte, "1.0", None, None))
        rows.append(("S3", "y", analyte, "2.0", None, None))
    raw = long_frame(
        rows, ["sample_id", "site", "analyte", "result", "qualifier", "detection_limit"]
    )
    return load_table(frame=raw)


@pytest.mark.parametrize("case", list(QUALIFIER_CASES))
def test_qualifier_forms(qualifier_table: Table, case: str) -> None:
    """Source: named in QUALIFIER_CASES beside each case (EPA NFG codes, WQX detection
    conditions, the result forms of issue 9 item 2)."""
    _, kind, value, source = QUALIFIER_CASES[case]
    got_value, censored, got_kind = entry(qualifier_table, case, "x")
    assert got_kind == kind, f"{case} read as kind {got_kind} ({source})"
    assert censored is (kind == CENSORED), source
    if value is None:
        assert got_value is None
    else:
        assert got_value == pytest.approx(value, rel=1e-15)


def test_qualifier_counts_and_names(qualifier_table: Table) -> None:
    """EPA NFG: R (rejected) is left out, J (estimated) used; issue 9 item 2: each is
    counted, an unknown code is counted and named, and a censored entry without a limit is
    left out with a count."""
    table = qualifier_table
    assert notes_matching(table, r"\b1\b.*\bR\b.*rejected"), table.notes
    assert notes_matching(table, r"qualifier.*'Q7' \(1\)"), table.notes
    assert table.readings["q_j"].estimated == 1
    assert table.readings["above"].above_range == 1
    assert table.readings["nd_no_limit"].censored_without_limit == 1
    assert table.readings["wqx_no_limit"].censored_without_limit == 1
    assert notes_matching(table, r"^nd_no_limit: 1 entry below detection without a limit")


def test_qualifier_warnings_in_the_scan(qualifier_table: Table) -> None:
    """Issue 9 item 2: a censored entry with no limit is left out with a named warning; an
    above-range entry is counted and warned; J is counted (n_estimated)."""
    comparisons = run_scan(qualifier_table).comparisons
    by_outcome = {row["outcome"]: row for row in comparisons.iter_rows(named=True)}
    assert "no-limit" in by_outcome["nd_no_limit"]["warnings"]
    assert "no-limit" in by_outcome["wqx_no_limit"]["warnings"]
    assert "above-range" in by_outcome["above"]["warnings"]
    estimated = by_outcome["q_j"]
    assert (estimated["n_estimated_a"], estimated["n_estimated_b"]) == (1, 0)
    assert by_outcome["lt_sign"]["n_censored_a"] == 1


def test_each_row_keeps_its_own_limit() -> None:
    """Issue 9 item 2 (several limits per analyte are normal) and the WQX result layout (a
    detection limit per result): two laboratories' ND rows of one analyte are censored at
    their own limits."""
    rows = [
        ("S1", "x", "lead", "ND", "0.5"),
        ("S2", "y", "lead", "ND", "2"),
        ("S3", "x", "lead", "3.1", "0.5"),
        ("S4", "y", "lead", "4.2", "2"),
    ]
    table = load_table(frame=long_frame(rows, ["sample_id", "site", "analyte", "result", "mdl"]))
    frame = table.frame
    censored = frame.filter(pl.col(table.names.censored("lead")))
    assert sorted(censored["lead"].to_list()) == [0.5, 2.0]


# -- units --------------------------------------------------------------------------------


def unit_rows(analyte: str, units: list[str], values: list[str]) -> pl.DataFrame:
    """Samples S1.. alternating between sites x and y, one result each."""
    rows = [
        (f"S{i + 1}", "xy"[i % 2], analyte, value, unit)
        for i, (unit, value) in enumerate(zip(units, values, strict=True))
    ]
    return long_frame(rows, ["sample_id", "site", "analyte", "result", "unit"])


@pytest.mark.parametrize(
    ("main_unit", "other_unit", "factor"),
    [
        ("mg/L", "µg/L", 1e-3),  # SI: micro/milli = 10^-6 / 10^-3
        ("mg/L", "ug/L", 1e-3),  # the same, with the ASCII "u" laboratories write for micro
        ("µg/L", "mg/L", 1e3),
        ("mg/kg", "µg/g", 1.0),  # SI: 10^-3 g / 10^3 g = 10^-6 g / 1 g
        ("ng/L", "pg/L", 1e-3),  # SI: pico/nano = 10^-12 / 10^-9
    ],
)
def test_units_converted_to_the_most_frequent(
    main_unit: str, other_unit: str, factor: float
) -> None:
    """Issue 9 item 3: results of one analyte in another unit are converted to its most
    frequent unit, limits with them. Factors: SI prefixes (BIPM SI Brochure, Table 7)."""
    units = [main_unit] * 4 + [other_unit] * 4
    values = ["2.0", "3.0", "4.0", "5.0", "250", "<40", "600", "800"]
    table = load_table(frame=unit_rows("nitrate", units, values))
    outcome = f"nitrate ({main_unit})"
    assert table.outcomes == (outcome,)
    assert table.units[outcome] == main_unit
    got = table.frame[outcome].to_list()
    expected = [2.0, 3.0, 4.0, 5.0, 250 * factor, 40 * factor, 600 * factor, 800 * factor]
    assert sorted(got) == pytest.approx(sorted(expected), rel=1e-12)
    censored = table.frame.filter(pl.col(table.names.censored(outcome)))[outcome].to_list()
    assert censored == pytest.approx([40 * factor], rel=1e-12)
    if factor != 1.0:
        assert notes_matching(table, r"nitrate: 4 result\(s\) converted")


def test_unconvertible_unit_kept_apart() -> None:
    """Issue 9 item 3: mg/L and µS/cm (a concentration and a conductivity: different SI
    dimensions) under one analyte are never mixed: two outcomes, each named with its unit,
    with the units-apart warning."""
    units = ["µS/cm"] * 6 + ["mg/L"] * 4
    values = ["310", "295", "420", "388", "350", "301", "12.5", "11.0", "14.2", "9.8"]
    table = load_table(frame=unit_rows("salinity", units, values))
    assert set(table.outcomes) == {"salinity (µS/cm)", "salinity (mg/L)"}
    assert sorted(table.frame["salinity (mg/L)"].drop_nulls().to_list()) == [9.8, 11.0, 12.5, 14.2]
    assert set(table.units_apart) == {"salinity (µS/cm)", "salinity (mg/L)"}
    assert notes_matching(table, r"salinity: .*kept apart")
    comparisons = run_scan(table).comparisons
    assert comparisons.height == 2
    assert all("units-apart" in warnings for warnings in comparisons["warnings"].to_list())


def test_unknown_unit_spelling_kept_apart() -> None:
    """Issue 9 item 3: an unknown unit spelling ("mq/L", a typing slip no units library
    defines) is kept apart as its own outcome, its values as written."""
    units = ["mg/L"] * 4 + ["mq/L"] * 4
    values = ["2.0", "3.0", "4.0", "5.0", "2.5", "3.5", "4.5", "5.5"]
    table = load_table(frame=unit_rows("nitrate", units, values))
    assert set(table.outcomes) == {"nitrate (mg/L)", "nitrate (mq/L)"}
    assert sorted(table.frame["nitrate (mq/L)"].drop_nulls().to_list()) == [2.5, 3.5, 4.5, 5.5]
    assert "nitrate (mq/L)" in table.units_apart


# -- duplicates ---------------------------------------------------------------------------


def duplicate_rows() -> pl.DataFrame:
    rows = [
        ("S1", "x", "copper", "2"),
        ("S1", "x", "copper", "8"),
        ("S2", "x", "copper", "3"),
        ("S3", "y", "copper", "5"),
        ("S4", "y", "copper", "6"),
    ]
    return long_frame(rows, ["sample_id", "site", "analyte", "result"])


def copper_of_site_x(table: Table) -> list[float]:
    """The copper values of site x (S1 and S2), in increasing order."""
    return sorted(table.frame.filter(pl.col("site") == "x")["copper"].to_list())


def test_duplicates_mean_log() -> None:
    """Issue 9 item 4: several results of one sample × analyte are combined by their
    geometric mean (scipy.stats.gmean), counted and noted."""
    options = LongOptions(analyte="analyte", result="result", sample="sample_id")
    table = load_table(frame=duplicate_rows(), long=options)
    assert table.frame.height == 4
    assert copper_of_site_x(table) == pytest.approx([3.0, gmean([2.0, 8.0])], rel=1e-14)
    assert notes_matching(table, r"1 sample × analyte pair\(s\) had several results \(2 results\)")


def test_duplicates_first() -> None:
    """Issue 9 item 4: --duplicates first keeps the first result in the file."""
    options = LongOptions(
        analyte="analyte", result="result", sample="sample_id", duplicates="first"
    )
    table = load_table(frame=duplicate_rows(), long=options)
    assert table.frame.height == 4
    assert copper_of_site_x(table) == [2.0, 3.0]


def test_duplicates_refused_naming_sample_and_analyte() -> None:
    """Issue 9 item 4: --duplicates refuse stops with a message naming the sample and the
    analyte."""
    options = LongOptions(
        analyte="analyte", result="result", sample="sample_id", duplicates="refuse"
    )
    with pytest.raises(InputError, match=r"'S1'.*copper"):
        load_table(frame=duplicate_rows(), long=options)


def test_rejected_run_is_no_duplicate() -> None:
    """EPA NFG R: a rejected result is left out before duplicates are looked for, so a
    rejected run and its accepted re-run give the re-run's value."""
    rows = [
        ("S1", "x", "copper", "40", "R"),
        ("S1", "x", "copper", "4", None),
        ("S2", "x", "copper", "3", None),
        ("S3", "y", "copper", "5", None),
    ]
    options = LongOptions(
        analyte="analyte",
        result="result",
        qualifier="flag",
        sample="sample_id",
        duplicates="refuse",
    )
    raw = long_frame(rows, ["sample_id", "site", "analyte", "result", "flag"])
    table = load_table(frame=raw, long=options)
    assert copper_of_site_x(table) == [3.0, 4.0]


def test_a_per_result_column_does_not_split_samples() -> None:
    """Issue 9 item 1 ("rows with the same sample share the grouping values"): a column that
    differs between the results of one sample (the laboratory that measured each analyte) is
    not a property of the sample; six samples stay six rows and that column is no grouping."""
    rows = []
    for i in range(6):
        site = "x" if i < 3 else "y"
        rows.append((f"S{i}", site, "copper", str(1.0 + i), "mg/L", "lab A"))
        rows.append((f"S{i}", site, "zinc", str(2.0 + i), "mg/L", "lab B"))
    raw = long_frame(rows, ["sample_id", "site", "analyte", "result", "unit", "laboratory"])
    table = load_table(frame=raw)
    assert table.frame.height == 6
    assert "laboratory" not in table.groupings


def test_rows_without_an_analyte_are_counted() -> None:
    """Issue 9 item 2 ("nothing is silently read as missing", "no entry is dropped without
    being counted and named"): a result whose analyte cell is empty is counted in a note."""
    rows = [
        ("S1", "x", "copper", "1.2", "mg/L"),
        ("S2", "x", None, "1.5", "mg/L"),
        ("S3", "y", "copper", "2.0", "mg/L"),
        ("S4", "y", "copper", "3.0", "mg/L"),
    ]
    table = load_table(frame=long_frame(rows, ["sample_id", "site", "analyte", "result", "unit"]))
    counted = [n for n in table.notes if not n.startswith(LONG_NOTE) and "analyte" in n]
    assert any(re.search(r"\b1\b", note) for note in counted), table.notes


def test_an_analyte_never_detected_without_a_limit_does_not_refuse_the_table() -> None:
    """Issue 9 item 2 (a censored entry with no limit is left out with a count and a named
    warning) and the issue's rule of what an analyst expects: one analyte reported only as ND
    without a limit (a pesticide never found) does not stop the other analytes."""
    rows = []
    for i in range(6):
        site = "xy"[i % 2]
        rows.append((f"S{i}", site, "copper", str(1.0 + i), "mg/L"))
        rows.append((f"S{i}", site, "dieldrin", "ND", "µg/L"))
    table = load_table(frame=long_frame(rows, ["sample_id", "site", "analyte", "result", "unit"]))
    assert "copper (mg/L)" in table.outcomes
    assert notes_matching(table, "dieldrin"), table.notes


@pytest.mark.parametrize(
    ("separator", "entries"),
    [
        (",", ['"1,234"', '"2,500"', '"3,125"', '"1,750"']),
        (";", ["1.234", "2.500", "3.125", "1.750"]),
    ],
    ids=["comma-file", "semicolon-file"],
)
def test_undecided_decimal_mark_refused_as_in_a_wide_table(
    tmp_path: Path, separator: str, entries: list[str]
) -> None:
    """foldsift.stats.entries (decimal mark, one rule for every column): 1,234 could be 1.234
    or 1234, and 1.234 in a ;-separated file likewise; the wide reader refuses such a column
    naming --decimal, and a long table's result column is refused the same way."""
    header = separator.join(["sample_id", "site", "analyte", "result", "unit"])
    lines = [
        separator.join([f"S{i}", "xy"[i % 2], "copper", text, "mg/L"])
        for i, text in enumerate(entries)
    ]
    path = tmp_path / "lab.csv"
    path.write_text("\n".join([header, *lines]) + "\n")
    with pytest.raises(InputError, match="--decimal"):
        load_table(path)


# -- the demo, wide and long --------------------------------------------------------------


def long_name(wide_column: str) -> str:
    """The demo's wide column name as the laboratory export names the outcome: the analyte
    (underscores as spaces) and its unit, e.g. cadmium_ug_per_kg -> cadmium (µg/kg)."""
    for suffix, unit in (
        ("_mg_per_kg", "mg/kg"),
        ("_ug_per_kg", "µg/kg"),
        ("_g_per_kg", "g/kg"),
        ("_us_per_cm", "µS/cm"),
    ):
        if wide_column.endswith(suffix):
            return f"{wide_column[: -len(suffix)].replace('_', ' ')} ({unit})"
    raise AssertionError(f"no unit in {wide_column!r}")


def assert_same_comparisons(wide: pl.DataFrame, long: pl.DataFrame, rtol: float) -> None:
    """Every column equal (floats to ``rtol``), outcomes matched by ``long_name``; the review
    key holds the outcome's name, so it is left out."""
    keys = ["grouping", "within", "stratum", "outcome", "level_a", "level_b"]
    wide = wide.with_columns(
        pl.col("outcome").replace_strict({o: long_name(o) for o in wide["outcome"].unique()})
    ).drop("key")
    long = long.drop("key")
    assert sorted(wide.columns) == sorted(long.columns)
    wide = wide.sort(keys, nulls_last=True)
    long = long.select(wide.columns).sort(keys, nulls_last=True)
    assert wide.height == long.height
    for column in wide.columns:
        if wide.schema[column] == pl.Float64:
            np.testing.assert_allclose(
                long[column].fill_null(np.nan).to_numpy(),
                wide[column].fill_null(np.nan).to_numpy(),
                rtol=rtol,
                atol=0,
                equal_nan=True,
                err_msg=column,
            )
        else:
            assert long[column].to_list() == wide[column].to_list(), column


@pytest.mark.parametrize("censored", ["exclude", "half-dl"])
def test_demo_wide_and_long_give_the_same_comparisons(censored: str) -> None:
    """Issue 9 item 6: the demo laboratory export (qualifier codes, per-row limits, cadmium
    in µg/kg and mg/kg) gives the comparisons of the wide demo, every number to 1e-12 and
    every warning, count and unit equal. Source of truth: the committed wide demo CSV."""
    settings = ScanSettings(policy=ValuePolicy(censored=censored))
    wide = run_scan(load_table(generate.demo_path()), settings).comparisons
    long = run_scan(load_table(generate.lab_path()), settings).comparisons
    assert long.height == len(generate.ANALYTES) * 11
    assert_same_comparisons(wide, long, rtol=1e-12)


def test_demo_lab_export_is_what_the_generator_writes(tmp_path: Path) -> None:
    """The committed files are the generator's output from its seed (both shapes)."""
    assert generate.write_demo(tmp_path / "wide.csv").read_bytes() == (
        generate.demo_path().read_bytes()
    )
    assert generate.write_lab(tmp_path / "lab.csv").read_bytes() == (
        generate.lab_path().read_bytes()
    )


def test_demo_lab_export_holds_what_issue_9_asks() -> None:
    """Issue 9 item 6: qualifier codes, per-row limits (two for cadmium: 120 µg/kg and 0.12
    mg/kg, two laboratories), cadmium in two units, the three ways of writing an entry below
    detection, rejected runs and laboratory duplicates."""
    lab = pl.read_csv(generate.lab_path(), infer_schema=False)
    cadmium = lab.filter(pl.col("analyte") == "cadmium")
    assert set(cadmium["unit"].to_list()) == {"µg/kg", "mg/kg"}
    assert set(cadmium["detection_limit"].to_list()) == {"120", "0.12"}
    assert lab.filter(pl.col("qualifier") == "U").height > 0
    assert lab.filter(pl.col("result").str.starts_with("<")).height > 0
    assert lab.filter(pl.col("result") == "ND").height > 0
    assert lab.filter(pl.col("qualifier") == "R").height == len(generate.REJECTED_SAMPLES)
    doubled = lab.group_by("sample_id", "analyte").len().filter(pl.col("len") > 1)
    assert doubled.height == len(generate.REJECTED_SAMPLES) + 240 // generate.DUPLICATE_EVERY


def test_demo_lab_export_first_message_names_its_columns(capsys, tmp_path: Path) -> None:
    """Issue 9 item 1: the first message says the table is read as long and names the
    columns it chose."""
    out = tmp_path / "scan.csv"
    assert main(["scan", str(generate.lab_path()), "--out", str(out)]) == 0
    first = capsys.readouterr().err.splitlines()[0]
    assert LONG_NOTE in first, first
    for role, column in (
        ("analyte", "analyte"),
        ("result", "result"),
        ("unit", "unit"),
        ("qualifier", "qualifier"),
        ("limit", "detection_limit"),
        ("sample", "sample_id"),
    ):
        assert f"{role} '{column}'" in first, first


async def test_demo_lab_export_opens_in_review(sandbox: Path) -> None:
    """Issue 9 item 6: `foldsift review` on the demo laboratory export opens with one
    outcome per analyte, cadmium in µg/kg (its most frequent unit)."""
    async with running(sandbox, generate.lab_path()) as (app, _pilot):
        assert app.error_text is None
        rows = session(app).rows
        assert rows.height == len(generate.ANALYTES) * 11
        cadmium = rows.filter(pl.col("outcome") == "cadmium (µg/kg)")
        assert cadmium.height == 11
        assert cadmium["unit"].unique().to_list() == ["µg/kg"]


# -- an open data set: scikit-learn's wine table -------------------------------------------

#: Units given to the wine table's columns in the long file (None: no unit, as for ratios).
WINE_UNITS: dict[str, str | None] = {
    "alcohol": "%",
    "malic_acid": "g/L",
    "ash": "g/L",
    "alcalinity_of_ash": None,
    "magnesium": "mg/L",
    "total_phenols": "g/L",
    "flavanoids": "g/L",
    "nonflavanoid_phenols": "g/L",
    "proanthocyanins": "g/L",
    "color_intensity": None,
    "hue": None,
    "od280_od315": None,
    "proline": "mg/L",
}
#: Below these, the long file writes "<limit" (nonflavanoid phenols) or the limit with the
#: qualifier "<" (flavanoids).
WINE_LIMITS = {"nonflavanoid_phenols": 0.2, "flavanoids": 0.5}


@pytest.fixture(scope="module")
def wine() -> pd.DataFrame:
    """The wine table (scikit-learn), one row per wine, with its cultivar as text."""
    from sklearn.datasets import load_wine

    data = load_wine(as_frame=True)
    frame = data.frame.rename(columns={"od280/od315_of_diluted_wines": "od280_od315"})
    frame.insert(0, "cultivar", [str(data.target_names[t]) for t in data.target])
    frame.insert(0, "sample_id", [f"wine_{i:03d}" for i in range(len(frame))])
    return frame.drop(columns="target")


def wine_long(wine: pd.DataFrame) -> pd.DataFrame:
    """Melted to one row per wine × analyte, with units, "<" entries and proline of every
    third wine in g/L (its mg/L value / 1000)."""
    long = wine.melt(id_vars=["sample_id", "cultivar"], var_name="analyte", value_name="value")
    long["unit"] = long["analyte"].map(WINE_UNITS)
    long["result"] = long["value"].map(repr)
    long["qualifier"] = None
    low = long["analyte"].map(WINE_LIMITS)
    below = long["value"] < low
    plain = below & (long["analyte"] == "nonflavanoid_phenols")
    long.loc[plain, "result"] = "<" + low[plain].map(repr)
    flagged = below & (long["analyte"] == "flavanoids")
    long.loc[flagged, "result"] = low[flagged].map(repr)
    long.loc[flagged, "qualifier"] = "<"
    number = long["sample_id"].str[-3:].astype(int)
    in_grams = (long["analyte"] == "proline") & (number % 3 == 0)
    long.loc[in_grams, "result"] = (long.loc[in_grams, "value"] / 1000).map(repr)
    long.loc[in_grams, "unit"] = "g/L"
    return long.drop(columns="value")


def independent_wide(long: pd.DataFrame) -> pd.DataFrame:
    """The long file widened again with pandas alone: "<" entries (in the result or the
    qualifier) as missing (the scan's default leaves censored entries out), proline in g/L
    times 1000 (SI: 1 g = 1000 mg)."""
    values = pd.to_numeric(long["result"], errors="coerce")
    values[long["qualifier"] == "<"] = np.nan
    in_grams = (long["analyte"] == "proline") & (long["unit"] == "g/L")
    values[in_grams] *= 1000
    frame = long.assign(value=values)
    wide = frame.pivot(index=["sample_id", "cultivar"], columns="analyte", values="value")
    return wide.reset_index()


def test_wine_long_file_gives_the_comparisons_of_the_wide_original(
    wine: pd.DataFrame, tmp_path: Path
) -> None:
    """Issue 9 item 7: scikit-learn's wine table melted to long (units, "<" entries, proline
    in two units) and read by foldsift gives the Welch t on logs of the wide original,
    computed independently: pandas pivot, statsmodels CompareMeans / ttest_ind
    (usevar="unequal") for ratio, CI and p, statsmodels multipletests for Holm and BH; all to
    1e-10."""
    long = wine_long(wine)
    path = tmp_path / "wine_lab.csv"
    long.to_csv(path, index=False)
    table = load_table(path)
    assert notes_matching(table, LONG_NOTE)
    assert table.groupings == ("cultivar",)
    expected_names = {f"{a} ({u})" if u else a: a for a, u in WINE_UNITS.items()}
    assert set(table.outcomes) == set(expected_names)
    # Below-detection entries left out, as in the pandas reference below (censored ML is
    # checked against lifelines in test_censored_scan.py).
    exclude = ScanSettings(policy=ValuePolicy(censored="exclude"))
    comparisons = run_scan(table, exclude).comparisons

    wide = independent_wide(long)
    # The pivot holds the original values wherever nothing was censored.
    original = wine.set_index("sample_id").loc[wide["sample_id"]]
    for analyte in WINE_UNITS:
        kept = wide[analyte].notna().to_numpy()
        np.testing.assert_allclose(
            wide[analyte].to_numpy()[kept], original[analyte].to_numpy()[kept], rtol=1e-15
        )
    assert wide["nonflavanoid_phenols"].isna().sum() == (wine["nonflavanoid_phenols"] < 0.2).sum()

    p_values = []
    for row in comparisons.iter_rows(named=True):
        analyte = expected_names[row["outcome"]]
        logs = {
            level: np.log(wide.loc[wide["cultivar"] == level, analyte].dropna().to_numpy())
            for level in (row["level_a"], row["level_b"])
        }
        b, a = logs[row["level_b"]], logs[row["level_a"]]
        low, high = CompareMeans(DescrStatsW(b), DescrStatsW(a)).tconfint_diff(
            alpha=0.05, usevar="unequal"
        )
        t, p, df = ttest_ind(b, a, usevar="unequal")
        assert (row["n_a"], row["n_b"]) == (len(a), len(b))
        assert row["ratio"] == pytest.approx(math.exp(b.mean() - a.mean()), rel=1e-10)
        assert row["ci_low"] == pytest.approx(math.exp(low), rel=1e-10)
        assert row["ci_high"] == pytest.approx(math.exp(high), rel=1e-10)
        assert row["p_value"] == pytest.approx(p, rel=1e-10)
        assert row["t"] == pytest.approx(t, rel=1e-10)
        assert row["df"] == pytest.approx(df, rel=1e-10)
        p_values.append(p)
    assert comparisons.height == 13 * 3
    holm = multipletests(p_values, method="holm")[1]
    bh = multipletests(p_values, method="fdr_bh")[1]
    np.testing.assert_allclose(comparisons["p_holm"].to_numpy(), holm, rtol=1e-10)
    np.testing.assert_allclose(comparisons["q_bh"].to_numpy(), bh, rtol=1e-10)
    proline = comparisons.filter(pl.col("outcome") == "proline (mg/L)")
    assert proline["unit"].to_list() == ["mg/L"] * 3
    censored = comparisons.filter(pl.col("outcome") == "nonflavanoid_phenols (g/L)")
    assert (
        censored.select(pl.col("n_censored_a") + pl.col("n_censored_b")).to_series().sum() == 2 * 10
    )


# -- a clinical-trial laboratory table -----------------------------------------------------

#: Test code: (unit as the table writes it, median). The ASCII "u" for micro is common in
#: laboratory tables.
CLINICAL_TESTS = {"ALT": ("U/L", 25.0), "CREAT": ("umol/L", 80.0), "GLUC": ("mmol/L", 5.4)}
#: The units as foldsift names them: the SI symbol µ for micro (BIPM SI Brochure, Table 7).
CLINICAL_UNITS = {"ALT": "U/L", "CREAT": "µmol/L", "GLUC": "mmol/L"}
CLINICAL_ARMS = {"Placebo": 1.0, "Active 20 mg": 1.3}


def clinical_table() -> pd.DataFrame:
    """Invented: 12 subjects per arm, three tests each, standardised results and units."""
    rng = np.random.default_rng(9)
    rows = []
    for arm_index, (arm, shift) in enumerate(CLINICAL_ARMS.items()):
        for subject in range(12):
            usubjid = f"STUDY1-{arm_index + 1}{subject:02d}"
            for test, (unit, median) in CLINICAL_TESTS.items():
                value = round(median * shift * math.exp(0.3 * rng.standard_normal()), 2)
                rows.append((usubjid, arm, test, value, unit))
    return pd.DataFrame(rows, columns=["USUBJID", "ARM", "LBTESTCD", "LBSTRESN", "LBSTRESU"])


def test_clinical_lab_table_with_explicit_options(tmp_path: Path, capsys) -> None:
    """Issue 9 items 1 and 7: a CDISC SDTM-style LB table (USUBJID, ARM, LBTESTCD, LBSTRESN,
    LBSTRESU) read with --analyte/--result/--unit/--sample through the command line gives one
    outcome per test code with its unit; ratio, CI and p equal statsmodels' Welch t on the
    logs of the pandas pivot (1e-10)."""
    source = clinical_table()
    path = tmp_path / "lb.csv"
    source.to_csv(path, index=False)
    out = tmp_path / "explicit.csv"
    options = ["--analyte", "LBTESTCD", "--result", "LBSTRESN", "--unit", "LBSTRESU"]
    code = main(["scan", str(path), *options, "--sample", "USUBJID", "--out", str(out)])
    assert code == 0
    first = capsys.readouterr().err.splitlines()[0]
    assert LONG_NOTE in first and "analyte 'LBTESTCD'" in first and "sample 'USUBJID'" in first
    scanned = pl.read_csv(out)
    assert set(scanned["outcome"].to_list()) == {
        f"{test} ({unit})" for test, unit in CLINICAL_UNITS.items()
    }
    wide = source.pivot(
        index=["USUBJID", "ARM"], columns="LBTESTCD", values="LBSTRESN"
    ).reset_index()
    for row in scanned.iter_rows(named=True):
        test = row["outcome"].split(" (")[0]
        assert row["unit"] == CLINICAL_UNITS[test]
        b = np.log(wide.loc[wide["ARM"] == row["level_b"], test].to_numpy())
        a = np.log(wide.loc[wide["ARM"] == row["level_a"], test].to_numpy())
        low, high = CompareMeans(DescrStatsW(b), DescrStatsW(a)).tconfint_diff(usevar="unequal")
        assert row["ratio"] == pytest.approx(math.exp(b.mean() - a.mean()), rel=1e-10)
        assert row["ci_low"] == pytest.approx(math.exp(low), rel=1e-10)
        assert row["ci_high"] == pytest.approx(math.exp(high), rel=1e-10)
        assert row["p_value"] == pytest.approx(ttest_ind(b, a, usevar="unequal")[1], rel=1e-10)

    recognised = tmp_path / "recognised.csv"
    assert main(["scan", str(path), "--out", str(recognised)]) == 0
    first = capsys.readouterr().err.splitlines()[0]
    assert "analyte 'LBTESTCD', result 'LBSTRESN', unit 'LBSTRESU'" in first, first
    assert "sample 'USUBJID'" in first, first
    assert pl.read_csv(recognised).equals(scanned)


# -- what stays wide ----------------------------------------------------------------------


def test_wide_table_with_test_and_value_columns_stays_wide() -> None:
    """Issue 9 item 1 (the docstring of find_long_columns): columns named test and value
    with no unit, qualifier or limit column are an ordinary wide table."""
    rows = [
        (f"P{i}", "AB"[i % 2], str(1.5 + i), str(10.0 + 2 * i), "north" if i < 4 else "south")
        for i in range(8)
    ]
    raw = long_frame(rows, ["plot", "test", "value", "yield", "block"])
    table = load_table(frame=raw)
    assert not notes_matching(table, LONG_NOTE)
    assert set(table.outcomes) == {"value", "yield"}
    assert "test" in table.groupings


def test_wide_option_keeps_a_long_looking_table_wide(tmp_path: Path, capsys) -> None:
    """Issue 9 item 1: --wide never reads the table as long, however its columns are named;
    the result column is then an outcome of its own."""
    rows = [
        (f"S{i}", "xy"[i % 2], analyte, str(1.0 + i), "mg/L", "0.5")
        for i in range(6)
        for analyte in ("copper", "zinc")
    ]
    raw = long_frame(rows, ["sample_id", "site", "analyte", "result", "unit", "detection_limit"])
    assert notes_matching(load_table(frame=raw), LONG_NOTE)
    table = load_table(frame=raw, long=LongOptions(recognise=False))
    assert not notes_matching(table, LONG_NOTE)
    assert "result" in table.outcomes
    path = tmp_path / "lab.csv"
    raw.write_csv(path)
    out = tmp_path / "scan.csv"
    assert main(["scan", str(path), "--wide", "--out", str(out)]) == 0
    assert LONG_NOTE not in capsys.readouterr().err
    assert "result" in pl.read_csv(out)["outcome"].to_list()


def test_the_detail_shows_laboratory_code_counts_per_group(tmp_path: Path) -> None:
    """The detail pane lists, per group, entries below detection without a limit, above the
    range and estimated (J) when a group has any; a plain comparison shows none of them
    (issue 9: counts shown where the data is reviewed)."""
    from foldsift.tui.session import ReviewSession, SessionOptions
    from foldsift.tui.widgets.facts import facts_text

    rows = ["sample_id,site,analyte,result,unit"]
    for i in range(8):
        site = "xy"[i % 2]
        code = {0: "ND", 1: ">900", 2: "4.5 J"}.get(i, f"{3 + i}.5")
        rows.append(f"S{i},{site},zinc,{code},mg/L")
        rows.append(f"S{i},{site},iron,{2 + i}.25,mg/L")
    path = tmp_path / "codes.csv"
    path.write_text("\n".join(rows) + "\n")
    session = ReviewSession.open(SessionOptions(path, reviews_path=tmp_path / "r.sqlite"))
    try:
        by_outcome = {
            row["outcome"]: row
            for row in session.rows.iter_rows(named=True)  # type: ignore[misc]
        }
        zinc = str(facts_text(by_outcome["zinc (mg/L)"], (0.8, 1.25), None, 100))
        iron = str(facts_text(by_outcome["iron (mg/L)"], (0.8, 1.25), None, 100))
    finally:
        session.close()
    for label in ("ND, no limit", "above range", "estimated (J)"):
        assert label in zinc, zinc
        assert label not in iron
