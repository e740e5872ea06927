"""The short export (the default CSV of the app's `x` and of `foldsift export`) and the form
options of the command line: its columns, numbers rounded to N significant digits, notes on
one line, the UTF-8 byte-order mark, and the same bytes from the command line and the
session.

References outside the project:
- Rounding: Python's own ``format(x, ".4g")`` (the Python Language Reference, "Format
  Specification Mini-Language": the ``g`` type rounds to the given number of significant
  digits). The short export must give the same number.
- The byte-order mark: UTF-8 encodes U+FEFF as EF BB BF (the Unicode Standard, ch. 23.8;
  from memory), which ``codecs.BOM_UTF8`` holds and the ``utf-8-sig`` codec strips.
- CSV reading: Python's ``csv`` module (RFC 4180-style quoting).

Data are simulated with a fixed seed: two sites (and two seasons as strata), lognormal
outcomes.
"""

from __future__ import annotations

import codecs
import csv
import json
import math
import re
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from foldsift.stats.columns import CROSS_CHECK_SCHEMA, EXPORT_SCHEMA, SENTENCE
from foldsift.stats.formatting import readable_outcome
from foldsift.stats.load import load_table
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.tui.cli import main
from foldsift.tui.export import (
    SHORT_COLUMNS,
    ExportForm,
    csv_rows,
    settings_path,
    significant,
    unescape_note,
)
from foldsift.tui.session import ReviewSession, SessionOptions
from foldsift.tui.store import ReviewStore

#: Notes that need escaping, and a formula-looking one.
NOTES = [
    "line one\nline two",
    "windows\r\nbreak",
    "a path C:\\new\\table and a typed \\n",
    'quotes "as typed", commas, and ±2 SD',
    "trailing backslash \\",
    "",
]


def _simulated(path: Path, seed: int = 20240611) -> Path:
    """Three sites × two seasons × 10 samples; copper and zinc lognormal, site c higher."""
    rng = np.random.default_rng(seed)
    rows = []
    for site, shift in (("a", 0.0), ("b", 0.1), ("c", 0.9)):
        for season in ("spring", "autumn"):
            for _ in range(10):
                rows.append(
                    {
                        "site": site,
                        "season": season,
                        "copper_mg_per_kg": float(np.exp(rng.normal(3.0 + shift, 0.5))),
                        "zinc": float(np.exp(rng.normal(9.5 + shift, 0.7))),  # thousands
                    }
                )
    pl.DataFrame(rows).write_csv(path)
    return path


def _reviewed(
    tmp_path: Path, settings: ScanSettings | None = None, groupings: tuple[str, ...] = ("site",)
) -> tuple[Path, Path]:
    """The simulated data and a review file: flags, decisions and the notes above."""
    data = _simulated(tmp_path / "soil.csv")
    reviews = tmp_path / "r.sqlite"
    result = run_scan(load_table(data, groupings=groupings), settings or ScanSettings())
    keys = result.comparisons["key"].to_list()
    with ReviewStore(reviews, result.source.fingerprint) as store:
        for key, note in zip(keys, NOTES, strict=False):
            store.set_flag(key, True)
            if note:
                store.set_note(key, note)
        store.set_decision(keys[0], "keep")
        store.set_decision(keys[1], "doubt")
    return data, reviews


def _session(data: Path, reviews: Path, **fields: object) -> ReviewSession:
    fields.setdefault("groupings", ("site",))
    return ReviewSession.open(SessionOptions(data, reviews_path=reviews, **fields))  # type: ignore[arg-type]


def _read(path: Path) -> list[dict[str, str]]:
    with path.open(newline="", encoding="utf-8-sig") as handle:
        return list(csv.DictReader(handle))


def test_short_export_has_the_readable_columns(tmp_path: Path) -> None:
    data, reviews = _reviewed(tmp_path)
    session = _session(data, reviews)
    try:
        report = session.export(tmp_path / "short.csv", "all")
        full = session.export_frame("all")
    finally:
        session.close()
    rows = _read(report.path)
    expected = [name for name in SHORT_COLUMNS if name not in ("within", "stratum")]
    assert list(rows[0]) == expected
    assert len(rows) == report.rows == full.height
    # The outcome by its readable name; the same rows in the same order as the full form.
    assert [r["outcome"] for r in rows] == [readable_outcome(o) for o in full["outcome"]]
    assert "copper (mg/kg)" in {r["outcome"] for r in rows}
    assert [r["level_b"] for r in rows] == full["level_b"].to_list()
    assert [int(r["n_a"]) for r in rows] == full["n_a"].to_list()
    assert [r["flag"] for r in rows] == ["yes" if f else "no" for f in full["flagged"]]
    assert {r["decision"] for r in rows} == {"keep", "doubt", ""}
    assert [r["sentence"] for r in rows] == full[SENTENCE].to_list()
    assert [r["class"] for r in rows] == full["band_class"].cast(pl.String).to_list()
    meta = json.loads(settings_path(report.path).read_text())
    assert meta["settings"]["export"]["columns"] == "short"
    assert meta["settings"]["export"]["digits"] == 4
    assert "\\n" in meta["settings"]["export"]["notes"]
    assert meta["columns"] == expected


def test_strata_columns_appear_when_the_scan_uses_them(tmp_path: Path) -> None:
    strata = ScanSettings(within="season")
    both = ("site", "season")
    data, reviews = _reviewed(tmp_path, strata, both)
    session = _session(data, reviews, settings=strata, groupings=both)
    try:
        report = session.export(tmp_path / "strata.csv", "all")
    finally:
        session.close()
    rows = _read(report.path)
    assert list(rows[0]) == list(SHORT_COLUMNS)
    assert {r["within"] for r in rows} == {"season"}
    assert {r["stratum"] for r in rows} == {"spring", "autumn"}


@pytest.mark.parametrize("digits", [2, 4, 6])
def test_numbers_are_rounded_as_python_formats_them(tmp_path: Path, digits: int) -> None:
    """Each rounded cell is the number format(x, '.Ng') gives (Python's own rounding)."""
    data, reviews = _reviewed(tmp_path)
    session = _session(data, reviews)
    try:
        report = session.export(tmp_path / "r.csv", "all", form=ExportForm(digits=digits))
        full = session.export_frame("all")
    finally:
        session.close()
    rows = _read(report.path)
    pairs = {
        "gm_a": "gm_a",
        "gm_b": "gm_b",
        "ratio": "ratio",
        "ci_low": "ci_low",
        "ci_high": "ci_high",
        "p": "p_value",
        "q": "q_bh",
    }
    checked = 0
    for short, name in pairs.items():
        for cell, value in zip([r[short] for r in rows], full[name], strict=True):
            if value is None or math.isnan(value):
                assert cell == ""
                continue
            assert float(cell) == float(format(value, f".{digits}g")), (short, cell, value)
            mantissa = re.sub(r"e.*$", "", cell).replace("-", "").replace(".", "").lstrip("0")
            assert len(mantissa.rstrip("0")) <= digits, cell
            checked += 1
    assert checked == len(pairs) * len(rows), "every number was present and checked"
    # zinc's geometric means are in the thousands: written out, not as 1.3e+04.
    big = [r["gm_a"] for r in rows if r["outcome"] == "zinc"]
    assert big and all("e" not in cell and float(cell) > 1000 for cell in big)


@pytest.mark.parametrize(
    "value",
    [12345.0, 99995.0, 0.00012345, 1.5e-21, 3.14159265, 2.5, 1e15, 6.02e23, -42.4242, 0.1 + 0.2],
)
def test_significant_matches_format_g(value: float) -> None:
    for digits in (1, 3, 4, 17):
        text = significant(value, digits)
        assert text is not None
        assert float(text) == float(format(value, f".{digits}g"))


def test_significant_writes_missing_and_infinite_values() -> None:
    assert significant(None) is None
    assert significant(math.nan) is None
    assert significant(math.inf) == "inf"
    assert significant(12345.0, 4) == "12340"  # no exponent below 10^16
    assert significant(1e-5, 4) == format(1e-5, ".4g")  # small numbers keep it


def test_cross_checks_join_the_short_export_once_computed(tmp_path: Path) -> None:
    data, reviews = _reviewed(tmp_path)
    session = _session(data, reviews, resamples=400)
    try:
        before = session.export(tmp_path / "before.csv", "all")
        session.cross_check(session.selection("flagged"))
        after = session.export(tmp_path / "after.csv", "all")
        full = session.export_frame("all")
    finally:
        session.close()
    assert "hl_ratio" not in _read(before.path)[0]
    rows = _read(after.path)
    names = list(rows[0])
    checks = list(CROSS_CHECK_SCHEMA)
    at = names.index("method") + 1
    assert names[at : at + len(checks)] == checks
    assert names[at + len(checks) :] == ["warnings", "flag", "decision", "note", "sentence"]
    for cell, value in zip([r["hl_ratio"] for r in rows], full["hl_ratio"], strict=True):
        assert cell == "" if value is None else float(cell) == float(format(value, ".4g"))
    assert sum(r["hl_ratio"] != "" for r in rows) == sum(r["flag"] == "yes" for r in rows)


def test_notes_are_on_one_line_and_read_back(tmp_path: Path) -> None:
    data, reviews = _reviewed(tmp_path)
    session = _session(data, reviews)
    try:
        report = session.export(tmp_path / "notes.csv", "flagged")
    finally:
        session.close()
    raw = report.path.read_bytes()
    # One physical line per row: no line break inside any cell.
    assert raw.count(b"\n") == report.rows + 1
    assert b"\r" not in raw
    notes = [row["note"] for row in _read(report.path)]
    assert sorted(unescape_note(note) for note in notes) == sorted(NOTES)
    assert "line one\\nline two" in notes
    assert "a path C:\\\\new\\\\table and a typed \\\\n" in notes


def test_a_formula_note_is_guarded_after_escaping(tmp_path: Path) -> None:
    data, reviews = _reviewed(tmp_path)
    session = _session(data, reviews)
    try:
        key = session.rows["key"][0]
        session.set_note(key, "=1+1\nsecond")
        report = session.export(tmp_path / "guard.csv", "flagged")
    finally:
        session.close()
    notes = [row["note"] for row in _read(report.path)]
    assert "'=1+1\\nsecond" in notes


def test_bom_is_written_once_and_only_when_asked(tmp_path: Path) -> None:
    data, reviews = _reviewed(tmp_path)
    session = _session(data, reviews)
    try:
        plain = session.export(tmp_path / "plain.csv", "all")
        marked = session.export(tmp_path / "bom.csv", "all", form=ExportForm(bom=True))
        full = session.export(tmp_path / "fb.csv", "all", form=ExportForm("full", bom=True))
    finally:
        session.close()
    assert not plain.path.read_bytes().startswith(codecs.BOM_UTF8)
    assert marked.path.read_bytes() == codecs.BOM_UTF8 + plain.path.read_bytes()
    assert full.path.read_bytes().startswith(codecs.BOM_UTF8 + b"grouping,")
    assert full.path.read_bytes().count(codecs.BOM_UTF8) == 1
    assert pl.read_csv(marked.path).columns[0] == "outcome"
    meta = json.loads(settings_path(marked.path).read_text())
    assert meta["settings"]["export"]["byte_order_mark"] is True


def test_full_export_keeps_every_column_at_full_precision(tmp_path: Path) -> None:
    data, reviews = _reviewed(tmp_path)
    session = _session(data, reviews)
    try:
        report = session.export(tmp_path / "full.csv", "all", form=ExportForm("full"))
        frame = session.export_frame("all")
    finally:
        session.close()
    written = pl.read_csv(report.path, infer_schema_length=None)
    assert written.columns == [*EXPORT_SCHEMA, SENTENCE]
    assert written["ratio"].to_list() == frame["ratio"].to_list()  # exact round trip
    assert sorted(n for n in written["note"].fill_null("")) == sorted(NOTES)
    meta = json.loads(settings_path(report.path).read_text())
    assert meta["settings"]["export"]["columns"] == "full"
    assert meta["settings"]["export"]["digits"] is None


@pytest.mark.parametrize(
    ("arguments", "form"),
    [
        ([], ExportForm()),
        (["--digits", "3"], ExportForm(digits=3)),
        (["--bom"], ExportForm(bom=True)),
        (["--columns", "full"], ExportForm("full")),
        (["--columns", "short", "--digits", "17", "--bom"], ExportForm(digits=17, bom=True)),
    ],
)
def test_command_line_and_session_write_the_same_bytes(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], arguments: list[str], form: ExportForm
) -> None:
    data, reviews = _reviewed(tmp_path)
    out = tmp_path / "cli.csv"
    args = ["export", str(data), "--group", "site", "--reviews", str(reviews), "--rows", "all"]
    assert main([*args, "--out", str(out), *arguments]) == 0, capsys.readouterr().err
    session = _session(data, reviews)
    try:
        report = session.export(tmp_path / "session.csv", "all", form=form)
    finally:
        session.close()
    assert out.read_bytes() == report.path.read_bytes()
    meta = json.loads(settings_path(out).read_text())
    assert meta["settings"]["export"] == form.describe()


@pytest.mark.parametrize(
    ("arguments", "says"),
    [
        (["--digits", "0"], "1 to 17"),
        (["--digits", "four"], "not a whole number"),
        (["--columns", "full", "--digits", "3"], "full precision"),
        (["--columns", "wide"], "invalid choice"),
    ],
)
def test_bad_form_options_say_why_and_write_nothing(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], arguments: list[str], says: str
) -> None:
    data, reviews = _reviewed(tmp_path)
    out = tmp_path / "o.csv"
    args = ["export", str(data), "--reviews", str(reviews), "--out", str(out)]
    assert _exit_status([*args, *arguments]) == 2
    assert says in capsys.readouterr().err
    assert not out.exists()


def _exit_status(args: list[str]) -> object:
    """The exit status of the command line: returned, or raised by argparse."""
    try:
        return main(args)
    except SystemExit as stop:
        return stop.code


def test_export_form_refuses_bad_values() -> None:
    with pytest.raises(ValueError, match="1 to 17"):
        ExportForm(digits=0)
    with pytest.raises(ValueError, match="short or full"):
        ExportForm("wide")  # type: ignore[arg-type]


def test_csv_rows_counts_records_not_lines(tmp_path: Path) -> None:
    data, reviews = _reviewed(tmp_path)
    session = _session(data, reviews)
    try:
        full = session.export(tmp_path / "full.csv", "all", form=ExportForm("full", bom=True))
    finally:
        session.close()
    assert full.path.read_bytes().count(b"\n") > full.rows + 1, "notes span lines here"
    assert csv_rows(full.path) == full.rows == len(_read(full.path))
    assert csv_rows(tmp_path / "missing.csv") is None
