"""The house rules of the code: one written schema, one path for each job, no name
collisions, small functions.

These check the project's own design (DEVELOPERS.md), so most have no outside source; where a
number is compared, the reference is another path through foldsift that must agree byte for
byte, or the data set named beside the check.
"""

from __future__ import annotations

import ast
import json
import math
from pathlib import Path

import numpy as np
import polars as pl
import pytest

import foldsift.stats
import foldsift.tui
from foldsift.demo.generate import demo_path
from foldsift.stats import columns as col
from foldsift.stats.columns import (
    COMPARISON_SCHEMA,
    CROSS_CHECK_SCHEMA,
    EXPORT_SCHEMA,
    REVIEW_SCHEMA,
    ComparisonRow,
    schema_of,
    side,
)
from foldsift.stats.load import DerivedNames, InputError, load_table
from foldsift.stats.robust import robust_all
from foldsift.stats.scan import Reference, ScanSettings, run_scan
from foldsift.stats.summary_input import scan_summary_table
from foldsift.stats.vocabulary import WARNING_NAMES
from foldsift.tui.cli import main
from foldsift.tui.export import SHORT_COLUMNS, ExportForm
from foldsift.tui.session import ReviewSession, SessionOptions
from foldsift.tui.store import ReviewStore

DATA = Path(__file__).parent / "data"
MAX_COMPLEXITY = 15
MAX_FUNCTION_LINES = 60


# -- one written schema -------------------------------------------------------------------


def _summary_csv(path: Path) -> Path:
    """A per-group summary of the NIST auto83b mpg data (NIST/SEMATECH e-Handbook 1.3.5.3)."""
    mpg = pl.read_csv(DATA / "nist_auto83b_mpg.csv")
    summary = mpg.group_by("origin").agg(
        pl.lit("origin").alias("grouping"),
        pl.col("origin").first().alias("level"),
        pl.lit("mpg").alias("outcome"),
        pl.len().alias("n"),
        pl.col("mpg").log().mean().alias("mean_log"),
        pl.col("mpg").log().std().alias("sd_log"),
    )
    summary.drop("origin").write_csv(path)
    return path


SETTINGS = {
    "default": ScanSettings(),
    "pooled reference": ScanSettings(test="pooled", pairs="reference"),
    "target ratio": ScanSettings(target_ratio=1.5, family="outcome"),
    "within strata": ScanSettings(within="season"),
}


@pytest.mark.parametrize("name", list(SETTINGS))
def test_a_scan_returns_exactly_the_written_schema(name, demo_scan):
    result = run_scan(load_table(demo_path()), SETTINGS[name])
    assert result.comparisons.schema == COMPARISON_SCHEMA
    assert result.comparisons.height > 0


def test_a_summary_scan_returns_the_same_schema_and_result_type(tmp_path):
    result = scan_summary_table(_summary_csv(tmp_path / "s.csv"))
    assert result.comparisons.schema == COMPARISON_SCHEMA
    assert result.values is None and result.source.kind == "summary table"
    assert result.metadata()["data_fingerprint_sha256"] == result.source.fingerprint


def test_schema_is_derived_from_the_typed_row_in_csv_order():
    assert list(COMPARISON_SCHEMA) == list(ComparisonRow.__annotations__)
    assert schema_of(ComparisonRow) == COMPARISON_SCHEMA
    assert list(EXPORT_SCHEMA) == [*COMPARISON_SCHEMA, *CROSS_CHECK_SCHEMA, *REVIEW_SCHEMA]
    assert COMPARISON_SCHEMA[col.WARNINGS] == pl.List(pl.Enum(list(WARNING_NAMES)))
    constants = [
        value for name, value in vars(col).items() if name.isupper() and isinstance(value, str)
    ]
    known = {*EXPORT_SCHEMA, *col.LIST_SCHEMA, col.SENTENCE}
    separators = {col.WITHIN_WORD, col.KEY_SEPARATOR, col.KEY_ESCAPE}
    assert {c for c in constants if c not in separators} <= known
    assert side("n", "a") == "n_a" and side("sd_log", "b") == "sd_log_b"


# -- no suffix a user column can collide with ---------------------------------------------


def test_user_columns_named_like_working_columns_change_nothing():
    """A user column named like a working column (``lead__used``, ``lead__censored``, even
    one holding the marker) is an ordinary outcome: each outcome's numbers equal those of a
    scan of that outcome alone (by definition of the comparison)."""
    rng = np.random.default_rng(11)
    site = np.repeat(["north", "south", "west"], 20)
    frame = pl.DataFrame(
        {
            "site": site,
            "lead": rng.lognormal(1, 0.4, 60),
            "lead__used": rng.lognormal(3, 0.4, 60),
            "lead__censored": rng.lognormal(-1, 0.4, 60),
            "lead\x1fused": rng.lognormal(5, 0.4, 60),
        }
    )
    outcomes = ["lead", "lead__used", "lead__censored", "lead\x1fused"]
    table = load_table(frame=frame, groupings=["site"], outcomes=outcomes)
    assert table.names.marker == "\x1f\x1f"
    together = run_scan(table).comparisons
    for outcome in outcomes:
        alone = run_scan(
            load_table(frame=frame.select("site", outcome), groupings=["site"], outcomes=[outcome])
        ).comparisons
        got = together.filter(pl.col("outcome") == outcome)
        for name in ("n_a", "n_b", "gm_a", "gm_b", "median_a", "ratio", "ci_low", "p_value"):
            assert got[name].to_list() == alone[name].to_list(), (outcome, name)


def test_derived_names_never_equal_a_user_name():
    users = ["a", "a\x1f", "b\x1f\x1fc", "censored"]
    names = DerivedNames.beside(users)
    derived = {names.derived(u, role) for u in users for role in ("used", "censored", "log")}
    assert not derived & set(users)
    assert len(derived) == len(users) * 3


# -- typed vocabularies -------------------------------------------------------------------


def test_reference_is_parsed_once_into_a_value():
    assert Reference.parse("japan") == Reference.of("japan")
    assert Reference.parse("origin=japan") == Reference.of("japan", "origin")
    assert Reference.of("L2", "dose=mg").readings() == [
        (None, "dose=mg=L2"),
        ("dose", "mg=L2"),
        ("dose=mg", "L2"),
    ]
    with pytest.raises(ValueError, match="GROUPING=LEVEL"):
        Reference.parse("origin=")


def _dose_frame() -> pl.DataFrame:
    rng = np.random.default_rng(8)
    return pl.DataFrame(
        {
            "dose=mg": np.repeat(["L1", "L2", "L3"], 10),
            "site": np.tile(["L2", "x"], 15),
            "lead": rng.lognormal(0, 0.4, 30),
        }
    )


def test_a_reference_with_equals_signs_in_the_grouping_name_is_read_right():
    """``--reference dose=mg=L2`` on a grouping named ``dose=mg``: level L2 of that
    grouping is the denominator; the other grouping keeps its first level."""
    table = load_table(frame=_dose_frame(), groupings=["dose=mg", "site"], outcomes=["lead"])
    settings = ScanSettings(pairs="reference", reference=(Reference.parse("dose=mg=L2"),))
    got = run_scan(table, settings).comparisons
    dose = got.filter(pl.col("grouping") == "dose=mg")
    assert dose.select("level_a", "level_b").rows() == [("L2", "L1"), ("L2", "L3")]
    site = got.filter(pl.col("grouping") == "site")
    assert site.select("level_a", "level_b").rows() == [("L2", "x")]


def test_an_ambiguous_reference_is_refused_clearly():
    """``L2`` names a level of both groupings here, which is fine (both use it); but
    ``site=L2`` read as grouping 'site' fits, and so would a level literally named so."""
    frame = _dose_frame().with_columns(
        pl.when(pl.col("site") == "x")
        .then(pl.lit("site=L2"))
        .otherwise(pl.col("site"))
        .alias("site")
    )
    table = load_table(frame=frame, groupings=["dose=mg", "site"], outcomes=["lead"])
    with pytest.raises(InputError, match="ambiguous"):
        run_scan(table, ScanSettings(pairs="reference", reference=(Reference.parse("site=L2"),)))
    with pytest.raises(ValueError, match="choose one of"):
        ScanSettings(test="student")  # type: ignore[arg-type]


# -- one path for each job ----------------------------------------------------------------


def _reviewed_demo(tmp_path: Path) -> tuple[Path, Path]:
    data = tmp_path / "demo.csv"
    data.write_bytes(demo_path().read_bytes())
    reviews = tmp_path / "r.sqlite"
    result = run_scan(load_table(data))
    keys = result.comparisons.sort("p_value")["key"].to_list()
    with ReviewStore(reviews, result.source.fingerprint) as store:
        for key in keys[:5]:
            store.set_flag(key, True)
        store.set_decision(keys[2], "keep")
        store.set_decision(keys[40], "doubt")
        store.set_note(keys[3], 'two lines, "quoted"\nsecond')
    return data, reviews


@pytest.mark.parametrize(
    ("arguments", "which", "words"),
    [
        ([], "flagged", ""),
        (["--rows", "decided"], "decided", ""),
        (["--all"], "all", ""),
        (["--filter", "copper q<0.5 -warn:small-n"], "shown", "copper q<0.5 -warn:small-n"),
    ],
)
@pytest.mark.parametrize("columns", ["full", "short"])
def test_command_line_export_equals_the_session_export_byte_for_byte(
    tmp_path, capsys, arguments, which, words, columns
):
    """`foldsift export` and the session (which the app's export goes through) write the
    same bytes for the same selection, in the app's default order (smallest q first)."""
    data, reviews = _reviewed_demo(tmp_path)
    out = tmp_path / "cli.csv"
    arguments = [*arguments, "--columns", columns]
    code = main(["export", str(data), "--reviews", str(reviews), "--out", str(out), *arguments])
    assert code == 0, capsys.readouterr().err
    session = ReviewSession.open(SessionOptions(data, reviews_path=reviews))
    try:
        assert session.set_filter(words) is None
        report = session.export(tmp_path / "session.csv", which, form=ExportForm(columns))
    finally:
        session.close()
    assert out.read_bytes() == report.path.read_bytes()
    written = pl.read_csv(out)
    assert written.height == report.rows > 0
    q = written["q_bh" if columns == "full" else "q"].to_list()
    assert q == sorted(q, key=lambda v: math.inf if v is None else v)
    meta = json.loads((tmp_path / "cli.csv.settings.json").read_text())
    assert meta["settings"]["rows_chosen"] == which
    assert meta["settings"]["filter"] == words
    if columns == "full":
        assert list(written.columns) == [*EXPORT_SCHEMA, col.SENTENCE]
    else:
        assert list(written.columns) == [
            c for c in SHORT_COLUMNS if c not in (col.WITHIN, col.STRATUM)
        ]


def test_export_refuses_a_bad_filter_word(tmp_path, capsys):
    data, reviews = _reviewed_demo(tmp_path)
    args = ["export", str(data), "--reviews", str(reviews), "--out", str(tmp_path / "o.csv")]
    assert main([*args, "--filter", "q<<1"]) == 2
    assert "--filter" in capsys.readouterr().err
    assert not (tmp_path / "o.csv").exists()


def test_scan_out_is_atomic_and_has_the_settings_sidecar(tmp_path, monkeypatch, capsys):
    data = tmp_path / "demo.csv"
    data.write_bytes(demo_path().read_bytes())
    out = tmp_path / "scan.csv"
    assert main(["scan", str(data), "--out", str(out)]) == 0
    meta = json.loads((tmp_path / "scan.csv.settings.json").read_text())
    assert meta["settings"]["data_fingerprint_sha256"] == load_table(data).fingerprint
    assert meta["rows"] == pl.read_csv(out).height == 330
    before = out.read_bytes()

    def broken_replace(*_args: object) -> None:
        raise OSError(28, "No space left on device")

    import foldsift.tui.export as export_module

    monkeypatch.setattr(export_module.os, "replace", broken_replace)
    assert main(["scan", str(data), "--out", str(out), "--test", "pooled", "--overwrite"]) == 2
    assert "cannot be written" in capsys.readouterr().err
    assert out.read_bytes() == before, "a failed write leaves the old file whole"
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "demo.csv",
        "scan.csv",
        "scan.csv.settings.json",
    ]


def test_cross_checks_agree_between_scan_export_and_session(tmp_path, capsys):
    """One engine, one seeding rule: `scan --robust`, `export --robust` and the session's
    cross-check give identical numbers for the same row, whatever else was checked."""
    data, reviews = _reviewed_demo(tmp_path)
    scan_out = tmp_path / "scan.csv"
    assert main(["scan", str(data), "--robust", "--resamples", "400", "--out", str(scan_out)]) == 0
    export_out = tmp_path / "export.csv"
    code = main(
        ["export", str(data), "--reviews", str(reviews), "--robust", "--resamples", "400"]
        + ["--out", str(export_out), "--columns", "full"]
    )
    assert code == 0
    # Every row read before the column types are chosen: a column empty in its first rows
    # (the Peto-Prentice p of censored rows only) would otherwise be read as text.
    scanned = pl.read_csv(scan_out, infer_schema_length=None)
    exported = pl.read_csv(export_out, infer_schema_length=None)
    session = ReviewSession.open(SessionOptions(data, reviews_path=reviews, resamples=400))
    try:
        last = session.view().tail(1)  # checked alone, not after the others
        session.cross_check(last)
        key = last["key"][0]
        check = session.checks[key]
    finally:
        session.close()
    row = scanned.filter(pl.col("key") == key).row(0, named=True)
    assert row["boot_median_ratio_low"] == check.median_ratio_ci_low
    assert row["boot_median_ratio_high"] == check.median_ratio_ci_high
    assert row["hl_ratio"] == check.hl_ratio
    joined = exported.join(scanned, on="key", suffix="_scan")
    assert joined.height == exported.height > 0
    for name in CROSS_CHECK_SCHEMA:
        assert joined[name].to_list() == joined[name + "_scan"].to_list(), name


def test_robust_all_matches_the_session_on_strata():
    frame = pl.DataFrame(
        {
            "zone": np.tile(["n", "s"], 30),
            "season": np.repeat(["dry", "wet"], 30),
            "iron": np.random.default_rng(2).lognormal(0, 0.5, 60),
        }
    )
    result = run_scan(
        load_table(frame=frame, groupings=["zone", "season"], outcomes=["iron"]),
        ScanSettings(within="season"),
    )
    checked = robust_all(result, resamples=300)
    assert checked["hl_ratio"].null_count() == 0
    assert set(checked["stratum"]) == {"dry", "wet"}


# -- small functions ----------------------------------------------------------------------


def _sources() -> list[Path]:
    folders = [Path(foldsift.stats.__file__).parent, Path(foldsift.tui.__file__).parent]
    return sorted(p for folder in folders for p in folder.rglob("*.py"))


def test_no_function_is_too_branchy():
    """Cyclomatic complexity (McCabe 1976, as radon counts it) of every function in stats/
    and tui/ is at most 15."""
    from radon.complexity import cc_visit

    branchy = [
        f"{path.name}:{block.name} {block.complexity}"
        for path in _sources()
        for block in cc_visit(path.read_text())
        if block.complexity > MAX_COMPLEXITY
    ]
    assert branchy == []


def test_no_function_is_too_long():
    long = []
    for path in _sources():
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
                lines = (node.end_lineno or node.lineno) - node.lineno + 1
                if lines > MAX_FUNCTION_LINES:
                    long.append(f"{path.name}:{node.name} {lines} lines")
    assert long == []
