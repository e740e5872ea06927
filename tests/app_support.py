"""Shared pieces of the app tests: a sandbox per test, the demo scan, and small helpers
to run the app under Pilot and read what it shows."""

from __future__ import annotations

import time
from collections.abc import AsyncIterator, Callable
from contextlib import asynccontextmanager
from pathlib import Path
from typing import Any

import polars as pl
from textual.css.query import NoMatches
from textual.pilot import Pilot
from textual.widget import Widget
from textual.widgets import Input

from foldsift.demo.generate import demo_path
from foldsift.stats.columns import ReviewedRow, reviewed_row
from foldsift.stats.sentence import finding
from foldsift.tui.app import FoldsiftApp
from foldsift.tui.screens.dialogs import ExportScreen
from foldsift.tui.screens.review import ReviewScreen
from foldsift.tui.session import ReviewSession, SessionOptions
from foldsift.tui.widgets.comparison_list import ComparisonList
from foldsift.tui.widgets.plain import visible

SIZE = (120, 36)
#: Seconds a test waits for the scan (generous: a busy machine runs several test files).
SCAN_TIMEOUT = 60.0


async def until(pilot: Pilot, condition: Callable[[], bool], what: str, timeout=10.0) -> None:
    """Let the app run until condition() holds; fail with `what` if it never does."""
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for: {what}")
        await pilot.pause(0.02)


def make_app(tmp_path: Path, data: Path | None = None, **fields: Any) -> FoldsiftApp:
    """The app on `data` (default: the demo) with its review file and exports in tmp_path;
    `fields` are further SessionOptions (groupings, outcomes, ...)."""
    options = SessionOptions(data or demo_path(), reviews_path=tmp_path / "r.sqlite", **fields)
    return FoldsiftApp(options, export_dir=tmp_path)


def is_open(app: FoldsiftApp) -> bool:
    """The data is open: the review screen is there (perhaps under a dialog)."""
    return any(isinstance(screen, ReviewScreen) for screen in app.screen_stack)


@asynccontextmanager
async def running(
    tmp_path: Path,
    data: Path | None = None,
    size: tuple[int, int] = SIZE,
    **fields: Any,
) -> AsyncIterator[tuple[FoldsiftApp, Pilot]]:
    """The app on `data` (default: the demo) with the scan finished and the list shown (or
    the reason the data cannot be opened)."""
    app = make_app(tmp_path, data, **fields)
    async with app.run_test(size=size) as pilot:
        opened = lambda: app.error_text is not None or ready(app)  # noqa: E731
        await until(pilot, opened, "the list and the first sentence", timeout=SCAN_TIMEOUT)
        await pilot.pause()
        yield app, pilot


def ready(app: FoldsiftApp) -> bool:
    """The review screen shows its list and the detail of the first row."""
    try:
        if not is_open(app) or not listing(app).frame.height:
            return False
    except NoMatches:  # the review screen is there but not composed yet
        return False
    # Names from the data show their control characters as symbols.
    return visible(finding(current(app))) in sentence(app)


def review(app: FoldsiftApp) -> ReviewScreen:
    """The review screen, also while a dialog is open over it."""
    return next(screen for screen in app.screen_stack if isinstance(screen, ReviewScreen))


def session(app: FoldsiftApp) -> ReviewSession:
    """What the app saved and computed, read through its screen."""
    return review(app).session


def listing(app: FoldsiftApp) -> ComparisonList:
    return review(app).query_one(ComparisonList)


def shown(app: FoldsiftApp) -> pl.DataFrame:
    return listing(app).frame


def current(app: FoldsiftApp) -> ReviewedRow:
    lst = listing(app)
    return reviewed_row(lst.frame, lst.cursor_row)


def widget_text(app: FoldsiftApp, selector: str) -> str:
    """The text a widget of the current screen shows."""
    widget = app.screen.query_one(selector, Widget)
    return str(widget.render())


def status(app: FoldsiftApp) -> str:
    """The status line of the review screen (of the app's own screen before it opens)."""
    screen = review(app) if is_open(app) else app.screen
    return str(screen.query_one("#status", Widget).render())


def sentence(app: FoldsiftApp) -> str:
    return str(review(app).query_one("#sentence", Widget).render())


async def export_via_dialog(
    app: FoldsiftApp,
    pilot: Pilot,
    rows: str | None = None,
    name: str | None = None,
    columns: str | None = None,
) -> None:
    """Open the export dialog, pick rows, columns (short or full) and (typed) file name,
    press enter."""
    await pilot.press("x")
    await until(pilot, lambda: isinstance(app.screen, ExportScreen), "export dialog")
    for choice in (f"rows-{rows}" if rows else None, f"columns-{columns}" if columns else None):
        if choice is not None:
            await pilot.click(f"#{choice}")
            await pilot.pause()
    path_input = app.screen.query_one("#export-path", Input)
    if name is not None:
        path_input.value = ""
        path_input.focus()
        await pilot.pause()
        await pilot.press(*name)
        assert path_input.value == name
    path_input.focus()
    await pilot.pause()
    await pilot.press("enter")
    await pilot.pause()
