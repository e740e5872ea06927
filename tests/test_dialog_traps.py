"""Pilot tests of the dialogs' traps: the export dialog starts on the row choice, moves it
with the arrow keys, never replaces the file name on a stray key, says how many rows each
choice writes, remembers the last choice and name, drops an error as soon as the name
changes, and says both row counts before replacing a file; escape in the note editor asks
before throwing typed text away.

The checks are against what the dialogs draw (labels, the radio dots, the error line) and
what reaches the disk; the project's own behaviour, so no outside source is needed. The
demo CSV is opened as the other app tests open it.
"""

from __future__ import annotations

from pathlib import Path

import polars as pl
import pytest
from textual.pilot import Pilot
from textual.widget import Widget
from textual.widgets import Button, Input, RadioButton, TextArea

from foldsift.tui.app import FoldsiftApp
from foldsift.tui.screens.dialogs import (
    ChoiceSet,
    ConfirmScreen,
    ExportScreen,
    NoteScreen,
    UnsavedNoteScreen,
)
from foldsift.tui.screens.review import ReviewScreen

from app_support import listing, running, session, shown, status, until

pytestmark = pytest.mark.usefixtures("sandbox")


async def open_export(app: FoldsiftApp, pilot: Pilot) -> ExportScreen:
    await pilot.press("x")
    await until(pilot, lambda: isinstance(app.screen, ExportScreen), "export dialog")
    await pilot.pause()
    screen = app.screen
    assert isinstance(screen, ExportScreen)
    return screen


def drawn(widget: Widget) -> str:
    """The text a widget draws on its lines."""
    return "\n".join(widget.render_line(y).text for y in range(widget.size.height))


def drawn_on(choices: ChoiceSet) -> list[str]:
    """The buttons whose dot is drawn unlike the others' (the chosen one), by id: the chosen
    one is both a filled dot (●, the others ○) and in its own colour."""
    styles, filled = {}, set()
    for button in choices.query(RadioButton):
        dot = next(s for s in button.render_line(0) if "●" in s.text or "○" in s.text)
        styles[button.id] = dot.style
        if "●" in dot.text:
            filled.add(button.id)
    odd = [key for key, style in styles.items() if list(styles.values()).count(style) == 1]
    assert set(odd) == filled, "the chosen button's shape and colour agree"
    return odd


def path_input(app: FoldsiftApp) -> Input:
    return app.screen.query_one("#export-path", Input)


def error_line(app: FoldsiftApp) -> Widget:
    return app.screen.query_one("#export-error", Widget)


async def type_name(app: FoldsiftApp, pilot: Pilot, name: Path) -> None:
    """Give the file name field the keys and set it to ``name``: its folder set, its last
    part typed."""
    field = path_input(app)
    field.focus()
    field.value = f"{name.parent}/"
    await pilot.pause()
    await pilot.press(*name.name)
    assert field.value == str(name)


async def test_export_dialog_starts_on_the_row_choice_with_counts(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await pilot.press("space", "down", "space", "1")
        listing(app).focus()
        review = next(s for s in app.screen_stack if isinstance(s, ReviewScreen))
        review.query_one("#filter", Input).value = "copper"
        await pilot.pause()
        listing(app).focus()
        counts = session(app).counts()
        visible = shown(app).height
        assert (counts["flagged"], counts["decided"]) == (2, 1)
        assert 0 < visible < counts["all"]

        screen = await open_export(app, pilot)
        rows = screen.query_one("#export-rows", ChoiceSet)
        assert app.focused is rows, "the keys start on the row choice"
        labels = "\n".join(drawn(button) for button in rows.query(RadioButton))
        for text in (
            "flagged (2)",
            "decided (1)",
            f"shown ({visible})",
            f"all ({counts['all']})",
        ):
            assert text in labels, (text, labels)
        assert drawn_on(rows) == ["rows-flagged"]
        name = path_input(app).value

        # Down moves the choice itself (no enter needed); it stops at the last one.
        await pilot.press("down")
        assert drawn_on(rows) == ["rows-decided"]
        await pilot.press("down", "down", "down", "down")
        assert drawn_on(rows) == ["rows-all"]
        await pilot.press("up")
        assert drawn_on(rows) == ["rows-shown"]
        # Space keeps the choice and never touches the file name.
        await pilot.press("space")
        assert drawn_on(rows) == ["rows-shown"]
        assert path_input(app).value == name

        # Tab moves on to the columns (short first), then the name: typing adds to it.
        await pilot.press("tab")
        assert app.focused is screen.query_one("#export-columns", ChoiceSet)
        await pilot.press("down")
        assert screen.query_one("#columns-full", RadioButton).value
        await pilot.press("tab")
        assert app.focused is path_input(app)
        await pilot.press("2")
        assert path_input(app).value == name + "2", "the name is not selected and replaced"

        # Enter exports what was chosen.
        await pilot.press("enter")
        target = Path(name + "2.csv")
        await until(pilot, lambda: target.exists(), "export written")
    written = pl.read_csv(target)
    assert written.height == visible
    assert "key" in written.columns, "the full column set"


async def test_the_last_choice_and_name_are_remembered(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await pilot.press("space")
        screen = await open_export(app, pilot)
        default_name = path_input(app).value
        rows = screen.query_one("#export-rows", ChoiceSet)
        assert drawn_on(rows) == ["rows-flagged"]
        await pilot.press("down", "down", "down", "tab", "down")
        await type_name(app, pilot, tmp_path / "kept")
        await pilot.press("enter")
        target = tmp_path / "kept.csv"
        await until(pilot, lambda: target.exists(), "export written")
        assert f"exported {session(app).counts()['all']} row" in status(app)

        # Reopened: the same rows, columns and name; the keys on the rows again.
        screen = await open_export(app, pilot)
        rows = screen.query_one("#export-rows", ChoiceSet)
        assert drawn_on(rows) == ["rows-all"]
        assert screen.query_one("#columns-full", RadioButton).value
        assert path_input(app).value == str(target)
        assert path_input(app).value != default_name
        assert app.focused is rows
        # Cancelling forgets nothing.
        await pilot.press("escape")
        await until(pilot, lambda: isinstance(app.screen, ReviewScreen), "cancelled")
        screen = await open_export(app, pilot)
        assert drawn_on(screen.query_one("#export-rows", ChoiceSet)) == ["rows-all"]
        assert path_input(app).value == str(target)


async def test_an_error_goes_as_soon_as_the_name_changes(tmp_path: Path) -> None:
    async with running(tmp_path, size=(80, 24)) as (app, pilot):
        await pilot.press("space")
        screen = await open_export(app, pilot)
        await type_name(app, pilot, tmp_path / "missing" / "out")
        await pilot.press("enter")
        await pilot.pause()
        assert isinstance(app.screen, ExportScreen), "the dialog stays open"
        assert error_line(app).display
        assert f"folder {tmp_path / 'missing'} does not exist" in drawn(error_line(app))
        # Buttons stay on an 80x24 screen while the error shows.
        whole = app.screen.region
        for button in screen.query(Button):
            assert whole.contains_region(button.region), button.id

        # One key typed: the error no longer holds, so it is gone; the hint is back.
        await pilot.press("backspace")
        await pilot.pause()
        assert not error_line(app).display
        assert "does not exist" not in drawn(error_line(app))
        assert "enter exports" in drawn(screen.query_one("#export-hint", Widget))

        await type_name(app, pilot, tmp_path / "fine")
        await pilot.press("enter")
        await until(pilot, lambda: (tmp_path / "fine.csv").exists(), "export written")


async def test_replacing_a_file_says_both_row_counts(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await pilot.press("space", "down", "space")
        total = session(app).counts()["all"]
        await open_export(app, pilot)
        await pilot.press("down", "down", "down")  # all rows
        await type_name(app, pilot, tmp_path / "both")
        await pilot.press("enter")
        target = tmp_path / "both.csv"
        await until(pilot, lambda: target.exists(), "first export")
        assert pl.read_csv(target).height == total

        # The same name (remembered), the two flagged rows: asked with both counts.
        await open_export(app, pilot)
        await pilot.press("up", "up", "up", "enter")  # flagged rows
        await until(pilot, lambda: isinstance(app.screen, ConfirmScreen), "replace question")
        question = drawn(app.screen.query_one(".dialog-title", Widget))
        detail = drawn(app.screen.query_one("#confirm-detail", Widget))
        assert f"{target} exists" in question
        assert f"Replace both.csv ({total} rows) with 2 rows?" in detail
        await pilot.press("n")
        await until(pilot, lambda: isinstance(app.screen, ReviewScreen), "kept")
        assert pl.read_csv(target).height == total

        await open_export(app, pilot)
        assert drawn_on(app.screen.query_one("#export-rows", ChoiceSet)) == ["rows-flagged"]
        await pilot.press("enter")
        await until(pilot, lambda: isinstance(app.screen, ConfirmScreen), "asked again")
        await pilot.press("y")
        await until(pilot, lambda: pl.read_csv(target).height == 2, "replaced")
        assert "exported 2 row(s)" in status(app)


def note_of(app: FoldsiftApp, key: str) -> str | None:
    review = session(app).store.get(key)
    return None if review is None else review.note


async def test_escape_in_the_note_editor_asks_only_about_changes(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        key = listing(app).current_key
        assert key is not None

        async def open_editor() -> NoteScreen:
            await pilot.press("n")
            await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor")
            screen = app.screen
            assert isinstance(screen, NoteScreen)
            return screen

        async def closed() -> None:
            await until(pilot, lambda: isinstance(app.screen, ReviewScreen), "editor closed")

        # Nothing typed: escape closes at once.
        await open_editor()
        await pilot.press("escape")
        await closed()

        # Typed: escape asks; escape again keeps editing with the text as typed.
        editor = await open_editor()
        await pilot.press(*"check sheet 4")
        await pilot.press("escape")
        await until(pilot, lambda: isinstance(app.screen, UnsavedNoteScreen), "asked")
        asked = app.screen
        assert "not saved" in drawn(asked.query_one(".dialog-title", Widget))
        labels = [str(button.label) for button in asked.query(Button)]
        assert labels == ["Save (s)", "Discard (d)", "Keep editing (esc)"]
        assert app.focused is asked.query_one("#unsaved-keep", Button)
        await pilot.press("escape")
        await until(pilot, lambda: app.screen is editor, "back in the editor")
        assert editor.query_one(TextArea).text == "check sheet 4"
        assert isinstance(app.focused, TextArea)

        # Enter on the first focused button keeps editing too; s saves.
        await pilot.press("escape")
        await until(pilot, lambda: isinstance(app.screen, UnsavedNoteScreen), "asked again")
        await pilot.press("enter")
        await until(pilot, lambda: app.screen is editor, "still editing")
        await pilot.press("escape")
        await until(pilot, lambda: isinstance(app.screen, UnsavedNoteScreen), "asked a third time")
        await pilot.press("s")
        await closed()
        assert note_of(app, key) == "check sheet 4"

        # The saved note unchanged: escape closes at once.
        await open_editor()
        await pilot.press("escape")
        await closed()

        # Changed, then discarded: the saved note stays.
        await open_editor()
        await pilot.press(*" and 5")
        await pilot.press("escape")
        await until(pilot, lambda: isinstance(app.screen, UnsavedNoteScreen), "asked")
        await pilot.press("d")
        await closed()
        assert note_of(app, key) == "check sheet 4"
        assert session(app).draft(key) is None, "the discarded text is no draft"

        # Typed back to the saved text: nothing to ask about.
        editor = await open_editor()
        await pilot.press("x", "backspace")
        await pilot.press("escape")
        await closed()


async def test_tab_never_lands_in_the_filter_line(tmp_path: Path) -> None:
    """Tab moves between the panes only: the filter line takes keys after "/" (or a click),
    so command keys typed after a stray tab act on the list instead of filling the filter.
    After enter the filter is left out of the tab order again."""
    async with running(tmp_path) as (app, pilot):
        line = app.screen.query_one("#filter", Input)

        async def tabs_pass_it_by() -> None:
            for _ in range(6):
                await pilot.press("tab")
                await pilot.pause()
                assert app.focused is not line

        await tabs_pass_it_by()
        await pilot.press("slash")
        await pilot.pause()
        assert app.focused is line
        await pilot.press("c", "o", "p", "enter")
        await pilot.pause()
        assert app.focused is not line and line.value == "cop"
        await tabs_pass_it_by()
        await pilot.click("#filter")
        await pilot.pause()
        assert app.focused is line
