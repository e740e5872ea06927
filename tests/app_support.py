"""Shared pieces of the app tests: a sandbox per test, the demo scan, and small helpers
to run the app under Pilot and read what it shows."""

from __future__ import annotations

import time
from collections.abc import AsyncIterator, Callable
from contextlib import asynccontextmanager
from pathlib import Path

import polars as pl
from textual.pilot import Pilot
from textual.widgets import Static

from foldsift.demo.generate import demo_path
from foldsift.stats.sentence import finding
from foldsift.tui.app import FoldsiftApp, make_app
from foldsift.tui.widgets.comparison_list import ComparisonList

SIZE = (120, 36)


async def until(pilot: Pilot, condition: Callable[[], bool], what: str, timeout=10.0) -> None:
    """Let the app run until condition() holds; fail with `what` if it never does."""
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for: {what}")
        await pilot.pause(0.02)


@asynccontextmanager
async def running(
    tmp_path: Path, data: Path | None = None, size: tuple[int, int] = SIZE
) -> AsyncIterator[tuple[FoldsiftApp, Pilot]]:
    """The app on `data` (default: the demo) with the scan finished and the list shown."""
    app = make_app(data or demo_path(), reviews=tmp_path / "r.sqlite", export_dir=tmp_path)
    async with app.run_test(size=size) as pilot:
        await app.workers.wait_for_complete()
        await pilot.pause()
        if app.result is not None:
            await until(pilot, lambda: finding(current(app)) in sentence(app), "first sentence")
        yield app, pilot


def listing(app: FoldsiftApp) -> ComparisonList:
    return app.query_one(ComparisonList)


def shown(app: FoldsiftApp) -> pl.DataFrame:
    return listing(app).frame


def current(app: FoldsiftApp) -> dict:
    lst = listing(app)
    return lst.frame.row(lst.cursor_row, named=True)


def static_text(app: FoldsiftApp, selector: str) -> str:
    return str(app.query_one(selector, Static).render())


def status(app: FoldsiftApp) -> str:
    return static_text(app, "#status")


def sentence(app: FoldsiftApp) -> str:
    return static_text(app, "#sentence")
