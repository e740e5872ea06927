"""Files and keys: what foldsift writes never harms what it reads, and a review attaches to
exactly one comparison whatever the names hold.

Sources: the CSV-injection rule (cells beginning with =, +, -, @, tab or carriage return are
prefixed with an apostrophe) is the common practice recommended by web-security guidance
for CSV exports (OWASP, "CSV Injection"; from memory). The rest checks the project's own
promises in README.md (atomic writes, no file replaced without --overwrite, reviews never
misattached); the data is small and written by each test.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from foldsift.stats.load import load_table
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.tui.cli import main
from foldsift.tui.export import guard_formulas
from foldsift.tui.session import ReviewSession, SessionOptions
from foldsift.tui.store import ReviewStore


def _write_table(path: Path, levels: list[str], seed: int = 4) -> Path:
    rng = np.random.default_rng(seed)
    rows = [f"{level},{rng.lognormal(1, 0.4):.4f}" for level in levels for _ in range(8)]
    path.write_text("site,lead\n" + "\n".join(rows) + "\n")
    return path


def _quoted(level: str) -> str:
    return '"' + level.replace('"', '""') + '"'


# -- keys ---------------------------------------------------------------------------------


def test_levels_holding_the_key_separator_get_distinct_keys(tmp_path):
    """Two comparisons whose parts joined by '|' read the same ('x|y' vs 'z', and 'x' vs
    'y|z') must not share a review."""
    path = tmp_path / "pipes.csv"
    rng = np.random.default_rng(1)
    rows = [
        f"{_quoted(level)},{rng.lognormal(1, 0.3):.4f}"
        for level in ("x|y", "z", "x", "y|z")
        for _ in range(6)
    ]
    path.write_text("site,lead\n" + "\n".join(rows) + "\n")
    session = ReviewSession.open(SessionOptions(path, reviews_path=tmp_path / "r.sqlite"))
    try:
        rows_frame = session.rows
        assert rows_frame["key"].n_unique() == rows_frame.height == 6
        first = rows_frame.filter((pl.col("level_a") == "x|y") & (pl.col("level_b") == "z")).row(
            0, named=True
        )
        second = rows_frame.filter((pl.col("level_a") == "x") & (pl.col("level_b") == "y|z")).row(
            0, named=True
        )
        session.toggle_flag(first["key"])
        session.set_note(first["key"], "only this one")
        flagged = session.rows.filter(pl.col("flagged"))
        assert flagged["key"].to_list() == [first["key"]]
        assert session.row(second["key"])["note"] == ""
    finally:
        session.close()


def test_reviews_under_earlier_keys_are_carried_over(tmp_path):
    """A review file written before keys were escaped names a stratum inside the grouping
    ('zone within season=dry|lead|n|s'); opening the data moves it to the new key, keeps
    the note, and leaves nothing unmatched."""
    rng = np.random.default_rng(3)
    frame = pl.DataFrame(
        {
            "zone": np.tile(["n", "s"], 20),
            "season": np.repeat(["dry", "wet"], 20),
            "lead": rng.lognormal(0, 0.5, 40),
        }
    )
    data = tmp_path / "strata.csv"
    frame.write_csv(data)
    fingerprint = load_table(data).fingerprint
    reviews = tmp_path / "r.sqlite"
    with ReviewStore(reviews, fingerprint) as store:
        store.set_note("zone within season=dry|lead|n|s", "kept from before")
        store.set_flag("nosuch|lead|a|b", True)  # a comparison that no longer exists
    options = SessionOptions(
        data, settings=ScanSettings(within="season"), groupings=("zone", "season"),
        reviews_path=reviews,
    )  # fmt: skip
    session = ReviewSession.open(options)
    try:
        noted = session.rows.filter(pl.col("note") != "")
        assert noted.select("stratum", "level_a", "level_b", "note").rows() == [
            ("dry", "n", "s", "kept from before")
        ]
        assert session.unmatched_reviews == ["nosuch|lead|a|b"]
    finally:
        session.close()
    with ReviewStore(reviews, fingerprint) as store:
        keys = sorted(review.key for review in store.all())
    assert keys == ["nosuch|lead|a|b", "zone|lead|n|s|season|dry"], "moved in the file too"


# -- files --------------------------------------------------------------------------------


def test_scan_never_replaces_its_input(tmp_path, capsys):
    data = _write_table(tmp_path / "data.csv", ["a", "b"])
    before = data.read_bytes()
    assert main(["scan", str(data), "--out", str(data), "--overwrite"]) == 2
    assert "input data" in capsys.readouterr().err
    assert data.read_bytes() == before
    link = tmp_path / "link.csv"
    link.symlink_to(data)
    assert main(["scan", str(data), "--out", str(link), "--overwrite"]) == 2
    assert data.read_bytes() == before


def test_scan_asks_for_overwrite_before_replacing_a_file(tmp_path, capsys):
    data = _write_table(tmp_path / "data.csv", ["a", "b"])
    out = tmp_path / "out.csv"
    out.write_text("someone's work\n")
    assert main(["scan", str(data), "--out", str(out)]) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert out.read_text() == "someone's work\n"
    assert main(["scan", str(data), "--out", str(out), "--overwrite"]) == 0
    assert pl.read_csv(out).height == 1


def test_a_symlinked_output_is_written_through_and_stays_a_link(tmp_path):
    data = _write_table(tmp_path / "data.csv", ["a", "b"])
    real = tmp_path / "real.csv"
    real.write_text("old\n")
    link = tmp_path / "link.csv"
    link.symlink_to(real)
    assert main(["scan", str(data), "--out", str(link), "--overwrite"]) == 0
    assert link.is_symlink()
    assert pl.read_csv(real).height == 1


def test_outputs_that_are_not_regular_files_are_refused(tmp_path, capsys):
    data = _write_table(tmp_path / "data.csv", ["a", "b"])
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    assert main(["scan", str(data), "--out", str(fifo), "--overwrite"]) == 2
    assert "not a regular file" in capsys.readouterr().err
    assert fifo.exists() and not fifo.is_file()


def test_stale_temporary_files_of_ended_writers_are_removed(tmp_path):
    data = _write_table(tmp_path / "data.csv", ["a", "b"])
    dead = 2**22 + 12345  # above Linux's default pid_max: no such process
    stale = tmp_path / f".out.csv.{dead}-abcdef.tmp"
    stale.write_text("half an export")
    ours = tmp_path / f".out.csv.{os.getpid()}-fedcba.tmp"
    ours.write_text("a write of this process in progress")
    other = tmp_path / ".other.csv.1-aaaaaa.tmp"  # another file's temporary: not touched
    other.write_text("x")
    assert main(["scan", str(data), "--out", str(tmp_path / "out.csv")]) == 0
    assert not stale.exists()
    assert ours.exists() and other.exists()


# -- formulas in CSV cells ----------------------------------------------------------------


def test_cells_a_spreadsheet_would_run_are_neutralised(tmp_path):
    data = _write_table(tmp_path / "data.csv", ["=1+1", "@cmd", "-5", "plain"])
    out = tmp_path / "out.csv"
    assert main(["scan", str(data), "--out", str(out)]) == 0
    written = pl.read_csv(out, infer_schema=False)
    levels = set(written["level_a"]) | set(written["level_b"])
    assert levels == {"'=1+1", "'@cmd", "-5", "plain"}
    assert all(not s.startswith(("=", "+", "@")) for s in written["sentence"])
    assert written["ratio"].cast(pl.Float64).null_count() == 0, "numbers stay numbers"
    meta = json.loads((tmp_path / "out.csv.settings.json").read_text())
    assert meta["formulas_guarded"] is True
    raw = tmp_path / "raw.csv"
    assert main(["scan", str(data), "--out", str(raw), "--allow-formulas"]) == 0
    levels = set(pl.read_csv(raw, infer_schema=False)["level_a"])
    assert "=1+1" in levels


def test_guard_covers_every_risky_first_character():
    frame = pl.DataFrame(
        {
            "text": ["=A1", "+1+2", "-cmd", "@x", "\tx", "\rx", "ok", "-1.5", "+2e3", None],
            "number": [-1.0, 2, 3, 4, 5, 6, 7, 8, 9, 10],
        }
    )
    guarded = guard_formulas(frame)
    assert guarded["text"].to_list() == [
        "'=A1", "'+1+2", "'-cmd", "'@x", "'\tx", "'\rx", "ok", "-1.5", "+2e3", None,
    ]  # fmt: skip
    assert guarded["number"].to_list() == frame["number"].to_list()


# -- exporting needs no review file for all rows, and never writes one --------------------


def test_export_of_all_rows_needs_no_review_file(tmp_path, capsys):
    data = _write_table(tmp_path / "data.csv", ["a", "b", "c"])
    out = tmp_path / "all.csv"
    reviews = tmp_path / "none.sqlite"
    code = main(
        ["export", str(data), "--rows", "all", "--reviews", str(reviews), "--out", str(out)]
    )
    assert code == 0, capsys.readouterr().err
    written = pl.read_csv(out)
    assert written.height == 3
    assert written["flag"].to_list() == ["no"] * 3
    assert not reviews.exists(), "reading reviews creates no review file"
    flagged = tmp_path / "flagged.csv"
    assert main(["export", str(data), "--reviews", str(reviews), "--out", str(flagged)]) == 2
    assert "nothing is flagged" in capsys.readouterr().err
    assert not flagged.exists()


def test_export_says_how_many_reviews_match_nothing(tmp_path, capsys):
    data = _write_table(tmp_path / "data.csv", ["a", "b"])
    reviews = tmp_path / "r.sqlite"
    with ReviewStore(reviews, load_table(data).fingerprint) as store:
        store.set_flag("site|lead|a|b", True)
        store.set_flag("site|lead|a|renamed", True)
    out = tmp_path / "f.csv"
    assert main(["export", str(data), "--reviews", str(reviews), "--out", str(out)]) == 0
    err = capsys.readouterr().err
    assert "1 review(s)" in err and "site|lead|a|renamed" in err
    assert pl.read_csv(out).height == 1
    with ReviewStore(reviews, "x") as store:
        assert len(store.all()) == 2, "unmatched reviews stay in the file"


@pytest.mark.parametrize("which", ["shown", "all"])
def test_export_through_a_read_only_review_file(tmp_path, which):
    data = _write_table(tmp_path / "data.csv", ["a", "b"])
    reviews = tmp_path / "r.sqlite"
    with ReviewStore(reviews, load_table(data).fingerprint) as store:
        store.set_note("site|lead|a|b", "read me")
    reviews.chmod(0o444)
    before = reviews.read_bytes()
    out = tmp_path / "ro.csv"
    assert (
        main(["export", str(data), "--rows", which, "--reviews", str(reviews), "--out", str(out)])
        == 0
    )
    assert pl.read_csv(out)["note"].to_list() == ["read me"]
    assert reviews.read_bytes() == before
    result = run_scan(load_table(data))
    assert result.comparisons["key"].to_list() == ["site|lead|a|b"]


# -- long work says it is still going -----------------------------------------------------


def test_a_slow_read_reports_progress_on_stderr(tmp_path, capsys, monkeypatch):
    """Data arriving slowly (a named pipe fed over about a second) makes the scan report
    that it is still reading; a quick run stays silent (README: long work reports
    progress on stderr)."""
    import threading
    import time

    import foldsift.tui.cli as cli

    monkeypatch.setattr(cli, "PROGRESS_AFTER", 0.2)
    data = _write_table(tmp_path / "quick.csv", ["a", "b"])
    assert main(["scan", str(data), "--out", str(tmp_path / "q.csv")]) == 0
    assert "still" not in capsys.readouterr().err
    fifo = tmp_path / "slow.csv"
    os.mkfifo(fifo)
    text = data.read_text()

    def feed() -> None:
        with fifo.open("w") as pipe:
            for line in text.splitlines(keepends=True):
                pipe.write(line)
                pipe.flush()
                time.sleep(0.06)

    writer = threading.Thread(target=feed, daemon=True)
    writer.start()
    assert main(["scan", str(fifo), "--out", str(tmp_path / "s.csv")]) == 0
    writer.join(timeout=20)
    err = capsys.readouterr().err
    # The line says the stage the scan is in: here still reading the file.
    assert "foldsift: still reading slow.csv" in err
    assert pl.read_csv(tmp_path / "s.csv").height == 1
    # --quiet: the same slow read says nothing while it runs.
    writer = threading.Thread(target=feed, daemon=True)
    writer.start()
    assert main(["scan", str(fifo), "--quiet", "--out", str(tmp_path / "t.csv")]) == 0
    writer.join(timeout=20)
    assert "still" not in capsys.readouterr().err
    assert pl.read_csv(tmp_path / "t.csv").height == 1
