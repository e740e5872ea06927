"""Pilot tests of the review app: open, sort, filter, move, review, export, reopen.

Every test points the review file, the export folder, the working directory and
XDG_DATA_HOME at its own tmp_path, so nothing is written beside the demo data or in the
user's home.
"""

from __future__ import annotations

import hashlib
import json
import math
import shutil
from collections.abc import Callable
from pathlib import Path

import polars as pl
import pytest
from textual.pilot import Pilot
from textual.widgets import Button, Input, Markdown, TextArea

from foldsift.demo.generate import demo_path
from foldsift.stats.scan import ScanResult, ScanSettings
from foldsift.stats.sentence import finding, readable_outcome
from foldsift.tui.app import FoldsiftApp
from foldsift.tui.cli import main as cli_main
from foldsift.tui.export import settings_path
from foldsift.tui.screens.dialogs import (
    ConfirmScreen,
    ExportScreen,
    NoteScreen,
    TextScreen,
    UnsavedNoteScreen,
)
from foldsift.tui.screens.review import ReviewScreen
from foldsift.tui.store import ReviewStore
from foldsift.tui.widgets.comparison_list import COLUMNS, SEPARATOR, SORT_NAMES, ComparisonList

from app_support import (
    current,
    export_via_dialog,
    is_open,
    listing,
    review,
    running,
    sentence,
    session,
    shown,
    status,
    until,
    widget_text,
)

# Every test gets its own review file, cwd and XDG_DATA_HOME (tests/conftest.py).
pytestmark = pytest.mark.usefixtures("sandbox")

NUMBERS = ("ratio", "ci_low", "ci_high", "p_value", "q_bh", "n_a", "n_b")


def facts(app: FoldsiftApp) -> str:
    """All text of the detail's facts panel (sentence, numbers, warnings, review state)."""
    return "\n".join(str(widget.render()) for widget in review(app).query("#facts Static"))


def painted(app: FoldsiftApp, y: int) -> str:
    """Line y of the list as it is painted (0 is the header)."""
    return listing(app).render_line(y).text


def shown_columns(app: FoldsiftApp):
    """The list's columns as laid out now (they follow the terminal's width)."""
    return listing(app).columns


def header_x(app: FoldsiftApp, sort_on: str) -> int:
    """An x offset inside the title of the column that sorts on `sort_on`."""
    x = 0
    for column in shown_columns(app):
        if column.sort_on == sort_on:
            return x + column.width // 2
        x += column.width + len(SEPARATOR)
    raise KeyError(sort_on)


def header_cell(app: FoldsiftApp, sort_on: str) -> str:
    """The painted title of the column that sorts on `sort_on`, without padding."""
    x = 0
    for column in shown_columns(app):
        if column.sort_on == sort_on:
            return painted(app, 0)[x : x + column.width].strip()
        x += column.width + len(SEPARATOR)
    raise KeyError(sort_on)


def sorted_by(app: FoldsiftApp) -> tuple[str, bool]:
    """The column the list is sorted on and whether descending, read from the header's
    arrow (exactly one column carries one)."""
    arrows = [
        (column.sort_on, cell.endswith("↓"))
        for column in shown_columns(app)
        if (cell := header_cell(app, column.sort_on)).endswith(("↑", "↓"))
    ]
    assert len(arrows) == 1, arrows
    return arrows[0]


def filter_line(app: FoldsiftApp) -> str:
    return review(app).query_one("#filter", Input).value


def column_values(frame: pl.DataFrame, name: str) -> list:
    """A column's values in the order sorting uses: a closed vocabulary (an Enum, like the
    decision: keep, doubt, drop) sorts in the order of its words, not alphabetically."""
    column = frame[name]
    return column.to_physical().to_list() if column.dtype == pl.Enum else column.to_list()


def assert_sorted(values: list, descending: bool, what: str) -> None:
    present = [value for value in values if value is not None]
    assert values[len(present) :] == [None] * (len(values) - len(present)), f"{what}: nulls last"
    pairs = list(zip(present, present[1:], strict=False))
    bad = [(a, b) for a, b in pairs if (a < b if descending else a > b)]
    assert not bad, f"{what} not sorted {'descending' if descending else 'ascending'}: {bad[:3]}"


def assert_sentence_follows(app: FoldsiftApp) -> None:
    row = current(app)
    text = sentence(app)
    assert readable_outcome(row["outcome"]) in text
    assert finding(row) in text


async def press_and_settle(pilot: Pilot, *keys: str) -> None:
    await pilot.press(*keys)
    await pilot.pause()


def file_sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


# -- opening --------------------------------------------------------------------------------


async def test_demo_opens_with_every_comparison(tmp_path: Path, demo_scan: ScanResult) -> None:
    total = demo_scan.comparisons.height
    async with running(tmp_path) as (app, _pilot):
        assert is_open(app)
        assert shown(app).height == total
        assert sorted(shown(app)["key"].to_list()) == sorted(demo_scan.comparisons["key"])
        assert f"shown {total}/{total}" in status(app)
        assert "sort q ascending" in status(app)
        assert app.focused is listing(app)
        assert listing(app).cursor_row == 0
        assert_sentence_follows(app)
        # The first painted row is the first row of the frame.
        name = readable_outcome(shown(app)["outcome"][0])
        assert name[:20] in painted(app, 1)
    # The review file went where it was told, nowhere beside the data or in XDG_DATA_HOME.
    assert (tmp_path / "r.sqlite").exists()
    assert not (tmp_path / "xdg-data").exists()


# -- sorting --------------------------------------------------------------------------------


async def test_s_cycles_every_sort_column_and_r_reverses(tmp_path: Path) -> None:
    sortable = [column.sort_on for column in COLUMNS]
    async with running(tmp_path) as (app, pilot):
        # Reviews make the flag, decision and note columns worth sorting.
        await press_and_settle(pilot, "space", "1", "down", "down", "3", "space")
        assert_sorted(shown(app)["q_bh"].to_list(), False, "q_bh at start")
        seen = []
        for _ in sortable:
            await press_and_settle(pilot, "s")
            sort_on, descending = sorted_by(app)
            assert not descending
            seen.append(sort_on)
            column = column_values(shown(app), sort_on)
            assert_sorted(column, False, sort_on)
            await press_and_settle(pilot, "r")
            assert sorted_by(app) == (sort_on, True)
            reversed_column = column_values(shown(app), sort_on)
            assert_sorted(reversed_column, True, sort_on + " reversed")
            name = SORT_NAMES.get(sort_on, sort_on)
            assert f"sort {name} descending" in status(app)
            await press_and_settle(pilot, "r")
            assert sorted_by(app) == (sort_on, False)
        # One full cycle visits every column once and comes back to where it began.
        assert sorted(seen) == sorted(sortable)
        assert sorted_by(app) == ("q_bh", False)


async def test_reverse_keeps_the_cursor_on_its_comparison(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        lst = listing(app)
        await pilot.click(ComparisonList, offset=(header_x(app, "ratio"), 0))
        await press_and_settle(pilot, "home")
        smallest = current(app)
        assert smallest["ratio"] == shown(app)["ratio"].min()
        assert f"{smallest['ratio']:.2f}" in painted(app, 1)

        await press_and_settle(pilot, "r")
        assert shown(app)["key"][-1] == smallest["key"]
        # Wherever the cursor lands, it is in view and the detail shows its row.
        await until(pilot, lambda: finding(current(app)) in sentence(app), "after reverse")
        top = int(lst.scroll_y)
        assert top <= lst.cursor_row < top + lst.size.height - 1
        assert_sentence_follows(app)
        assert header_cell(app, "ratio") == "ratio↓"

        await press_and_settle(pilot, "home")
        largest = current(app)
        assert largest["ratio"] == shown(app)["ratio"].max() > smallest["ratio"]
        assert f"{largest['ratio']:.2f}" in painted(app, 1)
        assert_sentence_follows(app)


@pytest.mark.parametrize("sort_on", ["flagged", "outcome", "grouping", "n_min", "ratio", "p_value"])
async def test_clicking_a_header_sorts_and_clicking_again_reverses(
    tmp_path: Path, sort_on: str
) -> None:
    # The title (shortened if the column is narrow) followed by the direction arrow.
    column = next(column for column in COLUMNS if column.sort_on == sort_on)
    title = column.title[: column.width - 1]
    # 200 columns: every column is on screen to be clicked (narrower terminals show the
    # optional ones only when sorted on, see test_list_layout.py).
    async with running(tmp_path, size=(200, 50)) as (app, pilot):
        await press_and_settle(pilot, "down", "space", "end", "space")
        await pilot.click(ComparisonList, offset=(header_x(app, sort_on), 0))
        await pilot.pause()
        assert sorted_by(app) == (sort_on, False)
        assert_sorted(column_values(shown(app), sort_on), False, sort_on)
        assert header_cell(app, sort_on) == f"{title}↑"
        assert "ascending" in status(app)

        await pilot.click(ComparisonList, offset=(header_x(app, sort_on), 0))
        await pilot.pause()
        assert sorted_by(app) == (sort_on, True)
        assert_sorted(column_values(shown(app), sort_on), True, sort_on)
        assert header_cell(app, sort_on) == f"{title}↓"
        assert "descending" in status(app)
        if sort_on == "flagged":
            assert shown(app)["flagged"].head(2).to_list() == [True, True]
            assert not shown(app)["flagged"][2]


# -- filtering ------------------------------------------------------------------------------


def _expected_keys(scan: ScanResult, keep: Callable[[dict], bool]) -> set[str]:
    return {row["key"] for row in scan.comparisons.iter_rows(named=True) if keep(row)}


def _names(row: dict) -> str:
    return " ".join([row["outcome"], row["grouping"], row["level_a"], row["level_b"]]).lower()


async def test_filter_line_shows_only_matching_rows(tmp_path: Path, demo_scan) -> None:
    total = demo_scan.comparisons.height
    expected = _expected_keys(
        demo_scan,
        lambda r: "copper" in _names(r) and r["q_bh"] is not None and r["q_bh"] < 0.05,
    )
    assert 0 < len(expected) < total
    async with running(tmp_path) as (app, pilot):
        await pilot.press("slash")
        assert isinstance(app.focused, Input)
        await pilot.press(*"copper q<0.05", "enter")
        await pilot.pause()
        assert filter_line(app) == "copper q<0.05"
        assert app.focused is listing(app), "enter returns to the list"
        rows = list(shown(app).iter_rows(named=True))
        assert {row["key"] for row in rows} == expected
        for row in rows:
            assert "copper" in row["outcome"]
            assert row["q_bh"] < 0.05
        assert f"shown {len(expected)}/{total}" in status(app)
        assert "filter copper q<0.05" in status(app)
        assert_sentence_follows(app)
        assert "copper" in painted(app, 1)
        # Keys still reach the list after the filter: they must not type into the filter.
        await press_and_settle(pilot, "down")
        assert listing(app).cursor_row == 1
        assert filter_line(app) == "copper q<0.05"
        assert "filter copper q<0.05" in status(app)


async def test_filter_with_negation_and_letters_that_are_keys(tmp_path: Path, demo_scan) -> None:
    # "nickel" holds i (about) and n (note); "-warned" negates. Typing must not trigger them.
    expected = _expected_keys(demo_scan, lambda r: "nickel" in _names(r) and not r["warnings"])
    assert expected
    async with running(tmp_path) as (app, pilot):
        await pilot.press("slash", *"nickel -warned", "enter")
        await pilot.pause()
        assert isinstance(app.screen, ReviewScreen), "no dialog opened while typing"
        assert filter_line(app) == "nickel -warned"
        assert "filter nickel -warned" in status(app)
        assert set(shown(app)["key"]) == expected
        assert all(len(w) == 0 for w in shown(app)["warnings"])


async def test_filter_with_no_match_and_a_bad_word(tmp_path: Path, demo_scan) -> None:
    total = demo_scan.comparisons.height
    async with running(tmp_path) as (app, pilot):
        # A well-formed condition that no row meets shows no rows and says so.
        await pilot.press("slash", *"q<0")
        await pilot.pause()
        assert shown(app).height == 0
        assert "No comparison matches the filter." in sentence(app)
        assert f"shown 0/{total}" in status(app)
        # A word no name contains is an error, not zero rows in silence.
        filter_input = review(app).query_one("#filter", Input)
        filter_input.value = ""
        await pilot.press(*"no-such-outcome")
        await pilot.pause()
        assert "no outcome, grouping or level name contains" in status(app)
        assert shown(app).height == total
        # The bad word is reported, the list does not crash and shows everything.
        filter_input.value = ""
        await pilot.press(*"q<<0.05")
        await pilot.pause()
        assert "'q<<0.05': write conditions like q<0.05" in status(app)
        assert shown(app).height == total
        # Fixing the word removes the message.
        filter_input.value = ""
        await pilot.press(*"q<0.05", "enter")
        await pilot.pause()
        assert "write conditions like" not in status(app)
        assert 0 < shown(app).height < total
        assert all(q < 0.05 for q in shown(app)["q_bh"])


# -- moving ---------------------------------------------------------------------------------


async def test_detail_follows_the_highlighted_row(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        lst = listing(app)
        last = shown(app).height - 1
        steps = [("down", 1), ("down", 2), ("down", 3), ("up", 2), ("end", last), ("home", 0)]
        steps += [("up", 0), ("pagedown", None), ("end", last), ("down", last)]
        for key, row in steps:
            await press_and_settle(pilot, key)
            if row is not None:
                assert lst.cursor_row == row, key
            await until(pilot, lambda: finding(current(app)) in sentence(app), f"after {key}")
            assert_sentence_follows(app)
            # The cursor row is scrolled into view.
            top = int(lst.scroll_y)
            assert top <= lst.cursor_row < top + lst.size.height - 1, key
        assert lst.cursor_row == last
        assert lst.scroll_y > 0


async def test_clicking_a_row_moves_the_cursor(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await pilot.click(ComparisonList, offset=(30, 4))
        await pilot.pause()
        assert listing(app).cursor_row == 3
        await until(pilot, lambda: finding(current(app)) in sentence(app), "clicked row")
        assert_sentence_follows(app)


# -- reviewing ------------------------------------------------------------------------------


async def test_space_flags_and_unflags(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await press_and_settle(pilot, "down")
        key = listing(app).current_key
        await press_and_settle(pilot, "space")
        assert session(app).store.get(key).flagged
        assert current(app)["flagged"] is True
        assert current(app)["key"] == key, "the cursor stays on the flagged row"
        assert "flagged 1" in status(app)
        assert painted(app, 2).startswith("⚑")
        assert "flagged" in facts(app)

        await press_and_settle(pilot, "space")
        assert session(app).store.get(key) is None, (
            "an unflagged row without review leaves no record"
        )
        assert current(app)["flagged"] is False
        assert "flagged 0" in status(app)
        assert not painted(app, 2).startswith("⚑")


async def test_number_keys_set_and_clear_the_decision(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        key = listing(app).current_key
        for press, decision in [("1", "keep"), ("2", "doubt"), ("3", "drop")]:
            await press_and_settle(pilot, press)
            assert session(app).store.get(key).decision == decision
            assert current(app)["decision"] == decision
            assert decision in painted(app, 1)
            assert f"decision: {decision}" in facts(app)
            assert "decided 1" in status(app)
        await press_and_settle(pilot, "0")
        assert session(app).store.get(key) is None
        assert current(app)["decision"] is None
        assert "drop" not in painted(app, 1)
        assert "decided 0" in status(app)
        # The filter sees the decision at once.
        await press_and_settle(pilot, "down", "2")
        review(app).query_one("#filter", Input).value = "doubt"
        await pilot.pause()
        assert shown(app)["decision"].to_list() == ["doubt"]


async def test_note_editor_types_saves_and_cancels(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        key = listing(app).current_key
        await pilot.press("n")
        await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor")
        assert isinstance(app.focused, TextArea)
        await pilot.press(*"recheck: lab sheet 7")
        await pilot.press("ctrl+s")
        await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")
        assert session(app).store.get(key).note == "recheck: lab sheet 7"
        assert current(app)["note"] == "recheck: lab sheet 7"
        assert "note: recheck: lab sheet 7" in facts(app)
        assert painted(app, 1).rstrip().endswith("✎")

        # Reopening shows the saved note; a longer text set directly replaces it.
        await pilot.press("n")
        await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor again")
        area = app.screen.query_one(TextArea)
        assert area.text == "recheck: lab sheet 7"
        area.text = 'two lines, "quoted", ±2 SD\nsecond line'
        await pilot.press("ctrl+s")
        await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")
        assert session(app).store.get(key).note == 'two lines, "quoted", ±2 SD\nsecond line'

        # Escape asks about the changed text; d throws the edit away.
        await pilot.press("n")
        await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor third")
        app.screen.query_one(TextArea).text = "discard me"
        await pilot.press("escape")
        await until(pilot, lambda: isinstance(app.screen, UnsavedNoteScreen), "asked")
        await pilot.press("d")
        await until(pilot, lambda: isinstance(app.screen, ReviewScreen), "editor cancelled")
        assert session(app).store.get(key).note == 'two lines, "quoted", ±2 SD\nsecond line'

        # Saving an empty note removes it.
        await pilot.press("n")
        await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor fourth")
        app.screen.query_one(TextArea).text = ""
        await pilot.press("ctrl+s")
        await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")
        assert session(app).store.get(key) is None
        assert "✎" not in painted(app, 1)


async def test_reviews_survive_closing_and_reopening(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await press_and_settle(pilot, "down", "down")
        flagged_key = listing(app).current_key
        await press_and_settle(pilot, "space", "2")
        await press_and_settle(pilot, "end")
        noted_key = listing(app).current_key
        await pilot.press("n")
        await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor")
        app.screen.query_one(TextArea).text = "kept across sessions"
        await pilot.press("ctrl+s")
        await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")
        await press_and_settle(pilot, "3")
        fingerprint = session(app).result.source.fingerprint
        await pilot.press("ctrl+q")
    assert app.return_code == 0

    # The review file holds the changes without the app.
    with ReviewStore(tmp_path / "r.sqlite", fingerprint) as store:
        stored = {review.key: review for review in store.all()}
    assert set(stored) == {flagged_key, noted_key}

    async with running(tmp_path) as (again, pilot):
        rows = {row["key"]: row for row in session(again).rows.iter_rows(named=True)}
        assert rows[flagged_key]["flagged"] is True
        assert rows[flagged_key]["decision"] == "doubt"
        assert rows[noted_key]["note"] == "kept across sessions"
        assert rows[noted_key]["decision"] == "drop"
        assert rows[noted_key]["flagged"] is False
        assert not any(row["on_earlier_data"] for row in rows.values())
        assert sum(row["flagged"] for row in rows.values()) == 1
        assert "flagged 1" in status(again)
        assert "decided 2" in status(again)
        assert "earlier version" not in status(again)
        # The detail of the noted row shows the note; the list marks both rows.
        await press_and_settle(pilot, "end")
        assert listing(again).current_key == noted_key
        assert "note: kept across sessions" in facts(again)
        assert listing(again).frame.filter(pl.col("flagged"))["key"].to_list() == [flagged_key]


async def test_reviews_of_an_earlier_version_of_the_data_are_marked(tmp_path: Path) -> None:
    """A review is marked as made on earlier data only when its own comparison changed: one
    sodium value of a brook_end core changes the two sodium comparisons with brook_end that
    were reviewed, not the copper one (each review carries a stamp of its comparison)."""
    data = tmp_path / "soils.csv"
    shutil.copyfile(demo_path(), data)
    async with running(tmp_path, data) as (app, pilot):
        reviewed_key = listing(app).current_key
        await press_and_settle(pilot, "space", "1")
        await press_and_settle(pilot, "down")
        fresh_key = listing(app).current_key
        await press_and_settle(pilot, "2")
        await press_and_settle(pilot, "down")
        other_key = listing(app).current_key
        await press_and_settle(pilot, "space")
        assert "earlier version" not in status(app)
        rows = {row["key"]: row for row in session(app).rows.iter_rows(named=True)}
        assert rows[reviewed_key]["outcome"] == rows[fresh_key]["outcome"] == "sodium_mg_per_kg"
        assert "brook_end" in (rows[reviewed_key]["level_a"], rows[reviewed_key]["level_b"])
        assert "brook_end" in (rows[fresh_key]["level_a"], rows[fresh_key]["level_b"])
        assert rows[other_key]["outcome"] != "sodium_mg_per_kg"
        old_fingerprint = session(app).result.source.fingerprint

    # Change the sodium value of one brook_end core in the copy.
    lines = data.read_text().splitlines(keepends=True)
    header = lines[0].rstrip("\n").split(",")
    column = header.index("sodium_mg_per_kg")
    index = next(i for i, line in enumerate(lines) if ",brook_end," in line)
    cells = lines[index].split(",")
    cells[column] = str(float(cells[column]) + 1.0)
    lines[index] = ",".join(cells)
    data.write_text("".join(lines))

    async with running(tmp_path, data) as (app, pilot):
        assert session(app).result.source.fingerprint != old_fingerprint
        earlier = session(app).rows.filter(pl.col("on_earlier_data"))["key"].to_list()
        assert sorted(earlier) == sorted([reviewed_key, fresh_key])
        assert "2 review(s) were made on an earlier version of the data" in status(app)
        # The reviews themselves are kept.
        rows = {row["key"]: row for row in session(app).rows.iter_rows(named=True)}
        assert rows[reviewed_key]["flagged"] and rows[reviewed_key]["decision"] == "keep"
        assert rows[fresh_key]["decision"] == "doubt"
        assert rows[other_key]["flagged"] and not rows[other_key]["on_earlier_data"]
        # The filter word finds them and the detail says what changed.
        review(app).query_one("#filter", Input).value = "earlier"
        await pilot.pause()
        assert sorted(shown(app)["key"].to_list()) == sorted(earlier)
        await until(pilot, lambda: finding(current(app)) in sentence(app), "earlier row")
        assert "review made on earlier data: ratio" in facts(app)
        # Reviewing the row again on this data clears its mark.
        review(app).query_one("#filter", Input).value = ""
        await pilot.pause()
        row_index = shown(app)["key"].to_list().index(fresh_key)
        listing(app).cursor_row = row_index
        await press_and_settle(pilot, "3")
        assert session(app).store.get(fresh_key).on_earlier_data is False
        assert session(app).store.get(reviewed_key).on_earlier_data is True


# -- export ---------------------------------------------------------------------------------


def _close(a, b) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return a == b or math.isclose(a, b, rel_tol=1e-12, abs_tol=0.0)


async def test_export_round_trip_matches_the_scan(tmp_path: Path, demo_scan) -> None:
    note = 'outlier in core 12, "see lab sheet"\nsecond line'
    async with running(tmp_path) as (app, pilot):
        await press_and_settle(pilot, "down")
        flagged_key = listing(app).current_key
        await press_and_settle(pilot, "space", "1", "end", "3")
        noted_key = listing(app).current_key
        await pilot.press("n")
        await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor")
        app.screen.query_one(TextArea).text = note
        await pilot.press("ctrl+s")
        await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")

        await export_via_dialog(app, pilot, rows="all", name="everything", columns="full")
        target = tmp_path / "everything.csv"
        await until(pilot, lambda: target.exists(), "export written")
        assert isinstance(app.screen, ReviewScreen)
        total = demo_scan.comparisons.height
        assert f"exported {total} row" in status(app)

    exported = pl.read_csv(target, infer_schema_length=None)
    assert exported.height == total
    for column in ("flagged", "decision", "note", "sentence", "key", *NUMBERS):
        assert column in exported.columns, column
    assert "warning_count" not in exported.columns
    by_key = {row["key"]: row for row in exported.iter_rows(named=True)}
    assert set(by_key) == set(demo_scan.comparisons["key"])
    mismatches = []
    for expected in demo_scan.comparisons.iter_rows(named=True):
        got = by_key[expected["key"]]
        for column in NUMBERS:
            if not _close(got[column], expected[column]):
                mismatches.append((expected["key"], column, got[column], expected[column]))
        assert got["sentence"] == finding(expected)
    assert not mismatches, mismatches[:5]
    assert by_key[flagged_key]["flagged"] is True
    assert by_key[flagged_key]["decision"] == "keep"
    assert by_key[noted_key]["note"] == note
    assert by_key[noted_key]["decision"] == "drop"
    assert sum(row["flagged"] for row in by_key.values()) == 1

    meta = json.loads(settings_path(target).read_text())
    fingerprint = hashlib.sha256(demo_path().read_bytes()).hexdigest()
    assert meta["settings"]["data_fingerprint_sha256"] == fingerprint
    assert meta["settings"]["settings"] == json.loads(json.dumps(ScanSettings().as_dict()))
    assert meta["settings"]["rows_chosen"] == "all"
    assert meta["settings"]["reviews"] == str(tmp_path / "r.sqlite")
    assert meta["rows"] == total
    assert meta["columns"] == exported.columns
    assert meta["csv"] == "everything.csv"


async def test_export_of_flagged_and_shown_rows(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await press_and_settle(pilot, "space", "down", "down", "space")
        flagged = set(session(app).rows.filter(pl.col("flagged"))["key"])
        assert len(flagged) == 2
        # Default choice: flagged rows, default file name in the export folder.
        await export_via_dialog(app, pilot, columns="full")
        default = tmp_path / "marrowby_soils-findings.csv"
        await until(pilot, lambda: default.exists(), "default export")
        assert set(pl.read_csv(default)["key"]) == flagged

        review(app).query_one("#filter", Input).value = "cadmium"
        await pilot.pause()
        listing(app).focus()
        visible = set(shown(app)["key"])
        await export_via_dialog(app, pilot, rows="shown", name="cadmium-rows", columns="full")
        target = tmp_path / "cadmium-rows.csv"
        await until(pilot, lambda: target.exists(), "shown export")
        exported = pl.read_csv(target)
        assert set(exported["key"]) == visible
        assert all("cadmium" in outcome for outcome in exported["outcome"])
        meta = json.loads(settings_path(target).read_text())
        assert meta["settings"]["rows_chosen"] == "shown"
        assert meta["settings"]["filter"] == "cadmium"


async def test_export_asks_before_replacing_a_file(tmp_path: Path) -> None:
    target = tmp_path / "marrowby_soils-findings.csv"
    async with running(tmp_path) as (app, pilot):
        await press_and_settle(pilot, "space")
        first_key = listing(app).current_key
        await export_via_dialog(app, pilot, columns="full")
        await until(pilot, lambda: target.exists(), "first export")
        before = (target.read_bytes(), settings_path(target).read_bytes())
        mtime = target.stat().st_mtime_ns

        # A second flag, so a replaced file would differ.
        await press_and_settle(pilot, "down", "space")
        second_key = listing(app).current_key
        await export_via_dialog(app, pilot, columns="full")
        await until(pilot, lambda: isinstance(app.screen, ConfirmScreen), "overwrite question")
        assert "exists" in str(app.screen.query_one(".dialog-title").render())
        await pilot.press("n")
        await until(pilot, lambda: not isinstance(app.screen, ConfirmScreen), "answered no")
        await pilot.pause(0.1)
        assert (target.read_bytes(), settings_path(target).read_bytes()) == before
        assert target.stat().st_mtime_ns == mtime
        assert set(pl.read_csv(target)["key"]) == {first_key}

        await export_via_dialog(app, pilot, columns="full")
        await until(pilot, lambda: isinstance(app.screen, ConfirmScreen), "asked again")
        await pilot.press("y")
        await until(pilot, lambda: set(pl.read_csv(target)["key"]) != {first_key}, "replaced")
        assert set(pl.read_csv(target)["key"]) == {first_key, second_key}
        assert json.loads(settings_path(target).read_text())["rows"] == 2
        assert "exported 2 row" in status(app)
        assert not [p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")]


async def test_export_dialog_refuses_a_missing_folder_and_escape_cancels(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await press_and_settle(pilot, "space")
        await export_via_dialog(app, pilot, name="no-such-folder/out")
        assert isinstance(app.screen, ExportScreen), "the dialog stays open"
        assert "does not exist" in str(app.screen.query_one("#export-error").render())
        await pilot.press("escape")
        await until(pilot, lambda: not isinstance(app.screen, ExportScreen), "cancelled")
    assert not list(tmp_path.glob("*.csv"))


async def test_command_line_export_after_reviewing(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    async with running(tmp_path) as (app, pilot):
        await press_and_settle(pilot, "space", "1", "down", "down", "down", "space")
        flagged = set(session(app).rows.filter(pl.col("flagged"))["key"])
        assert len(flagged) == 2
        fingerprint = session(app).result.source.fingerprint
        total = session(app).rows.height
    reviews = tmp_path / "r.sqlite"
    out = tmp_path / "cli.csv"
    args = ["export", str(demo_path()), "--reviews", str(reviews), "--out", str(out)]
    args += ["--columns", "full"]
    assert cli_main(args) == 0
    assert "wrote 2 rows" in capsys.readouterr().err
    exported = pl.read_csv(out)
    assert set(exported["key"]) == flagged
    assert exported["flagged"].all()
    assert sorted(exported["decision"].drop_nulls().to_list()) == ["keep"]
    assert "sentence" in exported.columns
    meta = json.loads(settings_path(out).read_text())
    assert meta["settings"]["data_fingerprint_sha256"] == fingerprint

    # Without --overwrite the file is kept; --all writes every row.
    before = out.read_bytes()
    assert cli_main([*args, "--all"]) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert out.read_bytes() == before
    assert cli_main([*args, "--all", "--overwrite"]) == 0
    assert pl.read_csv(out).height == total


# -- help, about, bad input, small terminal ---------------------------------------------------


async def test_help_and_about_pages(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await pilot.press("question_mark")
        await until(pilot, lambda: isinstance(app.screen, TextScreen), "help page")
        help_source = app.screen.query_one(Markdown).source
        assert "foldsift keys" in help_source
        assert "outside:0.8,1.25" in help_source  # the filter syntax is explained
        assert "ctrl+s" in help_source
        await pilot.press("escape")
        await until(pilot, lambda: not isinstance(app.screen, TextScreen), "help closed")
        assert app.focused is listing(app)

        await pilot.press("i")
        await until(pilot, lambda: isinstance(app.screen, TextScreen), "about page")
        about = app.screen.query_one(Markdown)
        assert "local regulations" in about.source
        assert "screening aids, not decisions" in about.source
        assert about.region.height > 0
        # Keys of the list do nothing while a page is open.
        await pilot.press("space")
        assert session(app).store.all() == []
        await pilot.press("q")
        await until(pilot, lambda: not isinstance(app.screen, TextScreen), "about closed")


@pytest.mark.parametrize(
    ("content", "message"),
    [
        ("", "is empty"),
        ("site,crew,comment\nnorth,a,dry\nsouth,b,wet\nnorth,b,wet\n", "no numeric outcome"),
    ],
    ids=["empty-file", "no-numeric-columns"],
)
async def test_bad_input_file_shows_the_error(tmp_path: Path, content: str, message: str) -> None:
    data = tmp_path / "bad.csv"
    data.write_text(content)
    async with running(tmp_path, data) as (app, pilot):
        await until(pilot, lambda: "Cannot open the data" in status(app), "error in status")
        assert message in status(app)
        assert str(data) in status(app)
        assert not is_open(app)
        # Review keys, sorting and export do nothing; moving and the filter do not crash.
        await press_and_settle(pilot, "down", "space", "1", "s", "r", "x", "n", "end")
        assert len(app.screen_stack) == 1, "no screen or dialog opened"
        await pilot.press("slash", *"copper", "enter")
        await pilot.pause()
        assert message in status(app)
        assert message in widget_text(app, "#opening")
        assert not app.screen.query(ComparisonList), "no list of comparisons"
        assert app.is_running
        await pilot.press("ctrl+q")
    assert app.return_code == 2, "quitting after a data error exits with status 2"
    assert not (tmp_path / "r.sqlite").exists()


async def test_small_terminal(tmp_path: Path) -> None:
    async with running(tmp_path, size=(80, 24)) as (app, pilot):
        lst = listing(app)
        screen = app.screen.region
        assert lst.size.height >= 5, "header and a few rows"
        facts_region = review(app).query_one("#facts").region
        assert screen.contains_region(facts_region)
        assert facts_region.height >= 6, "room for the sentence and some numbers"
        assert painted(app, 0).startswith("⚑ outcome")
        assert_sentence_follows(app)
        await press_and_settle(pilot, "end")
        top = int(lst.scroll_y)
        assert top <= lst.cursor_row < top + lst.size.height - 1
        assert_sentence_follows(app)
        await press_and_settle(pilot, "space")
        assert "flagged 1" in status(app)

        await pilot.press("n")
        await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor")
        assert screen.contains_region(app.screen.query_one(TextArea).region)
        await pilot.press("escape")
        await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")

        await pilot.press("x")
        await until(pilot, lambda: isinstance(app.screen, ExportScreen), "export dialog")
        for button in app.screen.query(Button):
            assert screen.contains_region(button.region), button.id
        await pilot.click("#export-go")
        target = tmp_path / "marrowby_soils-findings.csv"
        await until(pilot, lambda: target.exists(), "export at 80x24")
        assert pl.read_csv(target).height == 1
