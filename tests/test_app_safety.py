"""Pilot tests of what the review app must never do with what a user feeds it: read data as
markup, lose a note being typed, overwrite another session's review in silence, hide what
it found in the review file, or hang on quit while the data is still being read.

As in test_app.py, every test points the review file, the export folder, the working
directory and XDG_DATA_HOME at its own tmp_path.
"""

from __future__ import annotations

import csv
import os
import random
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from collections.abc import Iterator
from pathlib import Path
from types import FrameType

import pytest
from textual import events
from textual.pilot import Pilot
from textual.widget import Widget
from textual.widgets import Input, TextArea

from foldsift.stats.load import file_fingerprint
from foldsift.stats.sentence import finding, readable_outcome
from foldsift.tui.app import FoldsiftApp
from foldsift.tui.screens.dialogs import (
    ConfirmScreen,
    ExportScreen,
    NoteScreen,
    TextScreen,
    UnsavedNoteScreen,
)
from foldsift.tui.store import ReviewStore

from app_support import current, listing, review, running, sentence, session, status, until

# Every test gets its own review file, cwd and XDG_DATA_HOME (tests/conftest.py).
pytestmark = pytest.mark.usefixtures("sandbox")

SIZE = (120, 36)

# -- data whose names are markup ------------------------------------------------------------

#: Level names that Rich and Textual markup would read as tags: a bare closing tag (a
#: MarkupError when parsed), a style, a link and a click action (Textual's "[@click=...]"
#: runs the action when the text is clicked; Textual guide, "Actions" → "Links").
LEVELS = ("[/]", "[bold]b", "[link=https://x]x[/link]", "[@click=app.quit]quit[/]")
#: A level holding terminal control sequences (an SGR colour and an OSC 8 hyperlink,
#: ECMA-48): shown as visible symbols, never written to the terminal as they are.
CONTROL_LEVEL = "e\x1b[31mred\x1b]8;;https://x\x1b\\l"
GROUPING = "[i]zone"
OUTCOMES = ("[red]lead[/]", "[@click=app.quit]q[/]")
MARKUP_NOTE = "[bold]kept[/] as typed [@click=app.quit]q[/] [/] [link=https://x]x[/link]"


def markup_data(path: Path) -> Path:
    rng = random.Random(8)
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow([GROUPING, *OUTCOMES])
        for index, level in enumerate((*LEVELS, CONTROL_LEVEL)):
            for _ in range(6):
                values = [round(rng.lognormvariate(1 + index / 4, 0.4), 3) for _ in OUTCOMES]
                writer.writerow([level, *values])
    return path


def markup_options() -> dict[str, object]:
    return {"groupings": (GROUPING,), "outcomes": OUTCOMES}


def shown_text(widget: Widget) -> str:
    """The plain text a widget shows (markup that was parsed has lost its tags here)."""
    return str(widget.render())


def painted_lines(widget: Widget) -> list[str]:
    return [widget.render_line(y).text for y in range(widget.size.height)]


async def click_across(pilot: Pilot, widget: Widget, y: int = 0, cells: int = 100) -> None:
    """Click every cell of line y of the widget, as far as its text reaches or `cells` (a
    click on "[@click=...]" text that was read as markup would run the action)."""
    line = widget.render_line(y).text.rstrip()
    for x in range(min(len(line), widget.size.width, cells)):
        await pilot.click(widget, offset=(x, y))


def pictured(text: str) -> str:
    """Control characters as the symbols of Unicode's Control Pictures block (U+2400 +
    the code: ESC is ␛), which is how the app shows them."""
    return "".join(chr(0x2400 + ord(c)) if ord(c) < 0x20 else c for c in text)


async def test_names_and_notes_holding_markup_show_literally(tmp_path: Path) -> None:
    data = markup_data(tmp_path / "markup.csv")
    async with running(tmp_path, data, **markup_options()) as (app, pilot):
        assert app.error_text is None
        rows = listing(app).frame.height
        assert rows == 2 * 10, "5 levels: 10 pairs for each of 2 outcomes"
        list_text = "\n".join(painted_lines(listing(app)))
        assert "[red]lead[/]" in list_text
        assert "[@click=app.quit]" in list_text
        seen = []
        for _ in range(rows):  # the facts and the charts of every row
            row = current(app)
            said = pictured(finding(row))
            await until(pilot, lambda said=said: said in sentence(app), "the sentence")
            assert pictured(f"a: {row['level_a']}")[:12] in sentence(app)
            seen += [*painted_lines(listing(app)), sentence(app)]
            await pilot.press("down")
        everything = "\n".join(seen)
        assert "\x1b" not in everything, "no control sequence reaches the terminal"
        assert "e␛[31mred␛]8;;https://x␛\\l" in everything

        charts = review(app).query_one("#plots", Widget)
        outcome = readable_outcome(current(app)["outcome"])
        await until(pilot, lambda: outcome in shown_text(charts), "the chart's legend")
        await click_across(pilot, listing(app), y=1, cells=40)  # the outcome and the levels
        await click_across(pilot, review(app).query_one("#sentence", Widget))
        assert app.is_running

        # The note editor of every row: its title names the levels as they are (clicked
        # where a click action would sit).
        clicked = 0
        for index in range(rows):
            listing(app).cursor_row = index
            row = current(app)
            await pilot.press("n")
            await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor")
            title = shown_text(app.screen.query_one(".dialog-title", Widget))
            for name in (row["level_a"], row["level_b"], readable_outcome(row["outcome"])):
                assert pictured(name) in title
            if "[@click" in title and clicked < 2:
                clicked += 1
                await click_across(pilot, app.screen.query_one(".dialog-title", Widget))
                assert app.is_running and isinstance(app.screen, NoteScreen)
            await pilot.press("escape")
            await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")
        assert clicked == 2

        # A note holding markup is saved and shown as typed.
        listing(app).cursor_row = 0
        row = current(app)
        await open_editor(app, pilot)
        app.screen.query_one(TextArea).text = MARKUP_NOTE
        await pilot.press("ctrl+s")
        await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")
        assert session(app).store.get(row["key"]).note == MARKUP_NOTE
        assert f"note: {MARKUP_NOTE}" in sentence(app)
        await click_across(pilot, review(app).query_one("#sentence", Widget))

        # Export to a file whose name is markup, twice: the status and the question show
        # the path as it is.
        target = tmp_path / "[bold]found [@click=app.quit]x.csv"
        for attempt in range(2):
            await pilot.press("x")
            await until(pilot, lambda: isinstance(app.screen, ExportScreen), "export dialog")
            await click_across(pilot, app.screen.query_one(".dialog-title", Widget))
            path_input = app.screen.query_one("#export-path", Input)
            path_input.value = str(target)
            path_input.focus()
            await pilot.press("enter")
            if attempt == 0:
                await until(pilot, lambda: target.exists(), "export written")
                assert f"to {target}" in status(app)
        await until(pilot, lambda: isinstance(app.screen, ConfirmScreen), "replace question")
        question = app.screen.query_one(".dialog-title", Widget)
        assert f"{target} exists" in shown_text(question)
        await click_across(pilot, question)
        assert isinstance(app.screen, ConfirmScreen)
        await pilot.press("n")
        await until(pilot, lambda: not isinstance(app.screen, ConfirmScreen), "question closed")

        # The export dialog's error line names a missing folder as typed.
        await pilot.press("x")
        await until(pilot, lambda: isinstance(app.screen, ExportScreen), "export dialog")
        missing = tmp_path / "[/]nowhere" / "out.csv"
        app.screen.query_one("#export-path", Input).value = str(missing)
        app.screen.query_one("#export-path", Input).focus()
        await pilot.press("enter")
        error = app.screen.query_one("#export-error", Widget)
        await until(pilot, lambda: f"folder {missing.parent}" in shown_text(error), "error")
        await pilot.press("escape")
        assert app.is_running


# -- notes being typed ----------------------------------------------------------------------


def drafts_in(path: Path) -> dict[str, str]:
    """The drafts table of a review file, read with the standard library alone."""
    with sqlite3.connect(path) as conn:
        return dict(conn.execute("SELECT key, text FROM drafts").fetchall())


async def open_editor(app: FoldsiftApp, pilot: Pilot) -> NoteScreen:
    await pilot.press("n")
    await until(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor")
    assert isinstance(app.screen, NoteScreen)
    return app.screen


def editor_text(app: FoldsiftApp) -> str:
    return app.screen.query_one(TextArea).text


def editor_lines(app: FoldsiftApp) -> str:
    """Every line the note editor shows around its text."""
    return "\n".join(shown_text(label) for label in app.screen.query(".dialog-line"))


async def test_a_draft_is_kept_while_typing_and_restored_on_reopening(tmp_path: Path) -> None:
    reviews = tmp_path / "r.sqlite"
    async with running(tmp_path) as (app, pilot):
        key = current(app)["key"]
        await open_editor(app, pilot)
        await pilot.press(*"half a thought")
        # Kept after a short pause, while the editor is still open.
        await until(pilot, lambda: drafts_in(reviews).get(key) == "half a thought", "draft")
        assert session(app).store.get(key) is None, "a draft is not the note"
        app.exit()  # the app ends without the editor being closed (a dropped connection)

    async with running(tmp_path) as (app, pilot):
        assert "1 unsaved note draft" in status(app)
        await open_editor(app, pilot)
        assert editor_text(app) == "half a thought"
        assert "unsaved draft restored" in editor_lines(app)
        await pilot.press("escape")  # asks: the draft is not the saved note
        await until(pilot, lambda: isinstance(app.screen, UnsavedNoteScreen), "asked")
        await pilot.press("d")  # keeps the saved note (none) and forgets the draft
        closed = lambda: not isinstance(app.screen, NoteScreen | UnsavedNoteScreen)  # noqa: E731
        await until(pilot, closed, "editor closed")
        assert drafts_in(reviews) == {}
        assert session(app).store.get(key) is None
        await open_editor(app, pilot)
        assert editor_text(app) == ""
        assert "draft" not in editor_lines(app)

        # Saving clears the draft too.
        await pilot.press(*"second try")
        await until(pilot, lambda: drafts_in(reviews).get(key) == "second try", "draft")
        await pilot.press("ctrl+s")
        await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")
        assert session(app).store.get(key).note == "second try"
        assert drafts_in(reviews) == {}


def test_drafts_table_is_made_by_writable_stores_only(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        store.save_draft("k", "typed")
        assert store.draft("k") == "typed"
        store.save_draft("k", "typed more")
        assert store.drafts() == {"k": "typed more"}
        store.clear_draft("k")
        assert store.draft("k") is None
    # A file made before drafts existed: a read-only opening reads it and creates nothing.
    older = tmp_path / "older.sqlite"
    with sqlite3.connect(older) as conn:
        conn.execute(
            "CREATE TABLE reviews (key TEXT PRIMARY KEY, flagged INTEGER NOT NULL"
            " DEFAULT 0, decision TEXT, note TEXT NOT NULL DEFAULT '', fingerprint"
            " TEXT NOT NULL, updated_at TEXT NOT NULL, version INTEGER NOT NULL)"
        )
        conn.execute("CREATE TABLE meta (name TEXT PRIMARY KEY, value TEXT NOT NULL)")
        conn.execute("INSERT INTO meta VALUES ('schema_version', '2'), ('last_version', '0')")
    conn.close()
    with ReviewStore(older, "fp", read_only=True) as store:
        assert store.draft("k") is None and store.drafts() == {}
    with sqlite3.connect(older) as conn:
        tables = {row[0] for row in conn.execute("SELECT name FROM sqlite_master")}
    conn.close()
    assert "drafts" not in tables
    with ReviewStore(older, "fp") as store:
        store.save_draft("k", "now it has one")
    assert drafts_in(older) == {"k": "now it has one"}


@pytest.fixture
def sentinel_handlers() -> Iterator[dict[int, list[int]]]:
    """A handler of the test's own for SIGHUP and SIGTERM while the test runs, so that the
    app's handlers can be seen replacing it and restoring it (and a signal that reaches no
    handler of the app does not end the test run)."""
    received: dict[int, list[int]] = {signal.SIGHUP: [], signal.SIGTERM: []}

    def note(signum: int, frame: FrameType | None) -> None:
        received[signum].append(signum)

    before = {signum: signal.signal(signum, note) for signum in received}
    try:
        yield received
    finally:
        for signum, handler in before.items():
            signal.signal(signum, handler)


@pytest.mark.skipif(os.name != "posix", reason="SIGHUP and SIGTERM are POSIX signals")
@pytest.mark.parametrize("signum", [signal.SIGHUP, signal.SIGTERM], ids=["SIGHUP", "SIGTERM"])
async def test_a_hang_up_or_terminate_keeps_the_typed_note_as_a_draft(
    tmp_path: Path,
    signum: int,
    sentinel_handlers: dict[int, list[int]],
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """The signal is really sent to this process (POSIX kill(); Python runs a handler set
    with signal.signal on the main thread, where the app's event loop runs), while the
    editor holds text that no pause has saved yet."""
    monkeypatch.setattr(NoteScreen, "DRAFT_DELAY", 60.0)  # only the signal can save it
    mine = signal.getsignal(signum)
    async with running(tmp_path) as (app, pilot):
        key = current(app)["key"]
        assert signal.getsignal(signum) is not mine, "the app handles the signal"
        await open_editor(app, pilot)
        await pilot.press(*"cut off mid")
        assert drafts_in(tmp_path / "r.sqlite") == {}
        os.kill(os.getpid(), signum)
        await until(pilot, lambda: not app.is_running, "the app ends", timeout=10)
    # The shells' convention for a process ended by a signal: 128 + its number (POSIX,
    # Shell Command Language, "Exit Status for Commands").
    assert app.return_code == 128 + signum
    assert signal.getsignal(signum) is mine, "the handler in place before is restored"
    assert sentinel_handlers[signum] == [], "the app took the signal"
    assert drafts_in(tmp_path / "r.sqlite") == {key: "cut off mid"}
    with ReviewStore(tmp_path / "r.sqlite", "fp", read_only=True) as store:
        assert store.get(key) is None, "kept as a draft, not as the note"


async def test_ctrl_q_in_one_burst_with_typed_text_keeps_the_text(tmp_path: Path) -> None:
    """Keys that arrive in one read from the terminal (typed fast, or pasted over SSH) are
    queued together; quitting must come after the text before it."""
    async with running(tmp_path) as (app, pilot):
        key = current(app)["key"]
        fingerprint = session(app).store.fingerprint
        await open_editor(app, pilot)
        for name in ("a", "b", "c", "ctrl+q"):
            app.post_message(events.Key(name, name if len(name) == 1 else None))
        await until(pilot, lambda: not app.is_running, "the app ends", timeout=10)
    assert app.return_code == 0
    with ReviewStore(tmp_path / "r.sqlite", fingerprint) as store:
        assert store.get(key).note == "abc"
        assert store.drafts() == {}


async def test_ctrl_q_over_a_note_changed_elsewhere_keeps_both(tmp_path: Path) -> None:
    """Quitting from the editor saves the note, but never over a note that another session
    saved meanwhile: the typed text is then kept as a draft."""
    async with running(tmp_path) as (app, pilot):
        key = current(app)["key"]
        fingerprint = session(app).store.fingerprint
        await open_editor(app, pilot)
        await pilot.press(*"mine")
        with other_session(app, tmp_path) as other:
            other.set_note(key, "theirs")
        await pilot.press("ctrl+q")
        await until(pilot, lambda: not app.is_running, "the app ends", timeout=10)
    with ReviewStore(tmp_path / "r.sqlite", fingerprint) as store:
        assert store.get(key).note == "theirs"
        assert store.drafts() == {key: "mine"}


# -- two sessions on one review file --------------------------------------------------------


def other_session(app: FoldsiftApp, tmp_path: Path) -> ReviewStore:
    return ReviewStore(tmp_path / "r.sqlite", session(app).store.fingerprint)


async def test_a_flag_or_decision_changed_elsewhere_is_shown_then_applied(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        key = current(app)["key"]
        assert not current(app)["flagged"]
        with other_session(app, tmp_path) as other:
            other.set_flag(key, True)
            other.set_note(key, "[b]seen[/b] by the other session")
        await pilot.press("space")
        await pilot.pause()
        text = status(app)
        assert "another session" in text and "flagged" in text
        assert "[b]seen[/b] by the other session" in text, "their note, as they wrote it"
        assert "space again" in text
        assert current(app)["flagged"] and current(app)["key"] == key
        assert "note: [b]seen[/b] by the other session" in sentence(app)
        assert "flagged 1" in status(app)
        await pilot.press("space")  # applies the toggle to what is stored now
        await pilot.pause()
        stored = session(app).store.get(key)
        assert not stored.flagged and stored.note == "[b]seen[/b] by the other session"
        assert "another session" not in status(app)

        with other_session(app, tmp_path) as other:
            other.get(key)
            other.set_decision(key, "keep")
        await pilot.press("2")
        await pilot.pause()
        assert "decision keep" in status(app) and "2 again" in status(app)
        assert current(app)["decision"] == "keep"
        await pilot.press("2")
        await pilot.pause()
        assert session(app).store.get(key).decision == "doubt"

        # A review removed elsewhere.
        with other_session(app, tmp_path) as other:
            other.get(key)
            other.set_decision(key, None)
            other.set_note(key, "")
        await pilot.press("1")
        await pilot.pause()
        assert "removed" in status(app)
        assert current(app)["decision"] is None and current(app)["note"] == ""


async def test_a_note_changed_elsewhere_is_shown_before_it_is_replaced(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        key = current(app)["key"]
        # Changed elsewhere after the row was shown: the editor opens on the note as it is.
        with other_session(app, tmp_path) as other:
            other.set_note(key, "theirs, first")
        await open_editor(app, pilot)
        assert editor_text(app) == "theirs, first"
        assert "another session" in editor_lines(app)
        app.screen.query_one(TextArea).text = "mine"
        # Changed elsewhere while the editor is open: saving shows their text, keeps mine.
        with other_session(app, tmp_path) as other:
            other.get(key)
            other.set_note(key, "theirs, [i]second[/i]")
        await pilot.press("ctrl+s")
        await pilot.pause()
        await until(pilot, lambda: isinstance(app.screen, NoteScreen), "editor again")
        assert editor_text(app) == "mine"
        assert "theirs, [i]second[/i]" in editor_lines(app)
        assert session(app).store.get(key).note == "theirs, [i]second[/i]"
        assert "note: theirs, [i]second[/i]" in sentence(app)
        await pilot.press("ctrl+s")  # saving again replaces it, knowingly
        await until(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor closed")
        assert session(app).store.get(key).note == "mine"


async def test_a_busy_review_file_says_so_and_the_app_stays_responsive(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        key = current(app)["key"]
        holder = sqlite3.connect(tmp_path / "r.sqlite", isolation_level=None)
        holder.execute("BEGIN IMMEDIATE")  # another program holds the write lock
        try:
            started = time.monotonic()
            await pilot.press("space")
            await pilot.pause()
            assert time.monotonic() - started < 2.0
            assert "review file busy — not saved, try again" in status(app)
            assert not current(app)["flagged"]
            await pilot.press("down", "up")  # still moving
            assert current(app)["key"] == key
        finally:
            holder.execute("ROLLBACK")
            holder.close()
        await pilot.press("space")
        await pilot.pause()
        assert session(app).store.get(key).flagged
        assert "busy" not in status(app)


# -- what the app says when it opens --------------------------------------------------------


async def test_a_new_review_file_is_announced(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, _):
        assert f"started a new review file at {tmp_path / 'r.sqlite'}" in status(app)


async def test_reviews_matching_no_comparison_are_counted_and_listed(tmp_path: Path) -> None:
    data = markup_data(tmp_path / "markup.csv")
    gone = "[i]zone|[red]lead[/]|renamed|[@click=app.quit]gone[/]"
    with ReviewStore(tmp_path / "r.sqlite", file_fingerprint(data)) as store:
        store.set_note(gone, "made before a level was renamed")
    async with running(tmp_path, data, **markup_options()) as (app, pilot):
        text = status(app)
        assert "1 review(s) in the file match no comparison of this data (kept" in text
        assert "started a new review file" not in text
        await pilot.press("i")
        await until(pilot, lambda: isinstance(app.screen, TextScreen), "about page")
        page = "\n".join(shown_text(widget) for widget in app.screen.query(".page-lines"))
        assert gone in page
        await click_across(pilot, app.screen.query_one(".page-lines", Widget))
        assert app.is_running
    with ReviewStore(tmp_path / "r.sqlite", file_fingerprint(data)) as store:
        assert store.get(gone) is not None, "kept in the file"


# -- quitting while the data is still being read --------------------------------------------

FIFO_CHILD = textwrap.dedent(
    """
    import asyncio
    import sys
    import time
    from pathlib import Path

    from foldsift.tui.app import FoldsiftApp
    from foldsift.tui.session import SessionOptions

    data, reviews = Path(sys.argv[1]), Path(sys.argv[2])


    async def main():
        app = FoldsiftApp(SessionOptions(data, reviews_path=reviews), export_dir=data.parent)
        async with app.run_test(size=(100, 30)) as pilot:
            await pilot.pause(0.5)
            print("scanning", flush=True)
            await pilot.press("ctrl+q")
            deadline = time.monotonic() + 10
            while app.is_running and time.monotonic() < deadline:
                await pilot.pause(0.05)
        print(f"closed {app.return_code}", flush=True)


    asyncio.run(main())
    """
)


@pytest.mark.skipif(os.name != "posix", reason="named pipes are POSIX")
def test_ctrl_q_while_the_data_is_still_being_read_ends_the_app(tmp_path: Path) -> None:
    """A named pipe that nobody writes to blocks the reading thread in open() (POSIX: an
    open for reading waits for a writer). ctrl+q must still end the app and the process."""
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    child = subprocess.Popen(
        [sys.executable, "-c", FIFO_CHILD, str(fifo), str(tmp_path / "r.sqlite")],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        cwd=tmp_path,
    )
    try:
        out, err = child.communicate(timeout=60)
    except subprocess.TimeoutExpired:
        release(fifo)
        child.kill()
        out, err = child.communicate()
        pytest.fail(f"the app did not end after ctrl+q; it printed {out!r}, {err[-2000:]!r}")
    finally:
        release(fifo)
    assert "scanning" in out, err
    assert "closed 0" in out, err
    assert child.returncode == 0, err


def release(fifo: Path) -> None:
    """Open the pipe's write end and close it, so a reader blocked in open() gets an empty
    file and its thread ends (no reader left: ENXIO, nothing to release)."""
    try:
        descriptor = os.open(fifo, os.O_WRONLY | os.O_NONBLOCK)
    except OSError:
        return
    os.close(descriptor)
