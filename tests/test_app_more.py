"""More Pilot tests of the review app: durability under SIGKILL, the cross-check keys, text
search on readable outcome names, pane sizes and the review file shown in the status bar.

As in test_app.py, every test points the review file, the export folder, the working
directory and XDG_DATA_HOME at its own tmp_path.
"""

from __future__ import annotations

import math
import os
import queue
import shutil
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import numpy as np
import polars as pl
import pytest
from scipy import stats as sps
from textual.pilot import Pilot
from textual.widgets import Input, Static

from foldsift.demo.generate import demo_path
from foldsift.stats.load import file_fingerprint
from foldsift.stats.policy import USED
from foldsift.tui.store import ReviewStore
from foldsift.stats.scan import ScanResult
from foldsift.stats.sentence import finding, ratio_text
from foldsift.tui.app import FoldsiftApp

from app_support import (
    current,
    listing,
    running,
    sentence,
    shown,
    status,
    until,
)

# Every test gets its own review file, cwd and XDG_DATA_HOME (tests/conftest.py).
pytestmark = pytest.mark.usefixtures("sandbox")

SIZE = (120, 36)
CHILD_TIMEOUT = 60.0


async def filter_by_typing(app: FoldsiftApp, pilot: Pilot, text: str) -> None:
    """Type `text` into the filter line the way a user does, then return to the list."""
    await pilot.press("slash")
    assert isinstance(app.focused, Input)
    await pilot.press(*text, "enter")
    await pilot.pause()
    assert app.filter_text == text, f"typed {text!r}, filter holds {app.filter_text!r}"
    assert app.focused is listing(app)


def usable_values(result: ScanResult, grouping: str, level: str, outcome: str) -> np.ndarray:
    """The policy-applied values of one group, read straight from the scan's frame."""
    column = outcome + USED
    part = result.used.filter(pl.col(grouping).cast(pl.Utf8) == level)
    return part[column].drop_nulls().to_numpy()


# -- durability of the app under SIGKILL ----------------------------------------------------

CHILD_NOTE = "killed mid-session: lab sheet 9"

CHILD_CODE = textwrap.dedent(
    """
    import asyncio
    import sys
    import time
    from pathlib import Path

    from foldsift.tui.app import make_app
    from foldsift.tui.screens.dialogs import NoteScreen

    data, reviews, note = Path(sys.argv[1]), Path(sys.argv[2]), sys.argv[3]


    async def wait_for(pilot, condition, what):
        deadline = time.monotonic() + 30
        while not condition():
            if time.monotonic() > deadline:
                raise SystemExit(f"child timed out waiting for {what}")
            await pilot.pause(0.02)


    async def main():
        app = make_app(data, reviews=reviews, export_dir=data.parent)
        async with app.run_test(size=(120, 36)) as pilot:
            await app.workers.wait_for_complete()
            await pilot.pause()
            await wait_for(pilot, lambda: app.store is not None, "the scan")
            lst = app.query_one("#list")
            await pilot.press("down", "down")
            key = lst.current_key
            await pilot.press("space", "2", "n")
            await wait_for(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor")
            await pilot.press(*note)
            await pilot.press("ctrl+s")
            await wait_for(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor")

            def shown_state():
                row = app.base.filter(app.base["key"] == key).row(0, named=True)
                return row["flagged"], row["decision"], row["note"]

            await wait_for(pilot, lambda: shown_state() == (True, "doubt", note), "state")
            out = sys.__stdout__
            out.write(key + "\\n")
            out.write("done\\n")
            out.flush()
            while True:  # killed here, inside run_test, with the app and store open
                await asyncio.sleep(3600)


    asyncio.run(main())
    """
)


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL is POSIX")
def test_reviews_made_in_the_app_survive_sigkill(tmp_path: Path) -> None:
    data = tmp_path / "soils.csv"
    shutil.copyfile(demo_path(), data)
    reviews = tmp_path / "killed.sqlite"
    env = dict(os.environ, XDG_DATA_HOME=str(tmp_path))
    stderr_path = tmp_path / "child-stderr.txt"
    with stderr_path.open("wb") as stderr:
        child = subprocess.Popen(
            [sys.executable, "-c", CHILD_CODE, str(data), str(reviews), CHILD_NOTE],
            stdout=subprocess.PIPE,
            stderr=stderr,
            stdin=subprocess.DEVNULL,
            cwd=tmp_path,
            env=env,
            text=True,
        )
        lines: queue.Queue[str | None] = queue.Queue()

        def read() -> None:
            assert child.stdout is not None
            for line in child.stdout:
                lines.put(line.rstrip("\n"))
            lines.put(None)

        threading.Thread(target=read, daemon=True).start()
        received: list[str] = []
        try:
            deadline = time.monotonic() + CHILD_TIMEOUT
            while "done" not in received:
                left = deadline - time.monotonic()
                try:
                    line = lines.get(timeout=max(left, 0.01))
                except queue.Empty:
                    line = None
                if line is None:
                    err = stderr_path.read_text(errors="replace")[-3000:]
                    pytest.fail(f"child gave {received!r} then stopped or timed out:\n{err}")
                received.append(line)
            assert child.poll() is None, "the child is still running when it is killed"
        finally:
            child.send_signal(signal.SIGKILL)
            child.wait(timeout=10)
    assert child.returncode == -signal.SIGKILL
    key = received[received.index("done") - 1]
    assert key.count("|") >= 3, f"not a comparison key: {key!r}"

    with ReviewStore(reviews, file_fingerprint(data)) as store:
        review = store.get(key)
        everything = store.all()
    assert review is not None, f"nothing stored for {key}"
    assert review.flagged is True
    assert review.decision == "doubt"
    assert review.note == CHILD_NOTE
    assert review.on_earlier_data is False, "stamped with the fingerprint of this file"
    assert [r.key for r in everything] == [key]
    # The explicit review path was used: nothing beside the data or under XDG_DATA_HOME.
    assert not (tmp_path / "soils.csv.reviews.sqlite").exists()
    assert not (tmp_path / "foldsift").exists()


# -- cross-checks ---------------------------------------------------------------------------


async def test_key_capital_b_cross_checks_every_shown_comparison(
    tmp_path: Path, demo_scan: ScanResult
) -> None:
    expected = {
        row["key"]
        for row in demo_scan.comparisons.iter_rows(named=True)
        if "copper" in row["outcome"]
    }
    assert 2 <= len(expected) < demo_scan.comparisons.height
    async with running(tmp_path) as (app, pilot):
        await filter_by_typing(app, pilot, "copper")
        keys = set(shown(app)["key"])
        assert keys == expected
        assert app.robust == {}
        await pilot.press("B")
        await app.workers.wait_for_complete()
        await until(pilot, lambda: len(app.robust) == len(keys), "every shown cross-check")
        await pilot.pause()
        assert set(app.robust) == keys, "only and all the shown comparisons"
        assert f"cross-checks done for {len(keys)} comparison(s)" in status(app)
        exported = app.export_frame("shown")
        result = app.result

    assert set(exported["key"]) == keys
    columns = ("boot_median_ratio_low", "boot_median_ratio_high", "hl_ratio", "mann_whitney_p")
    for column in columns:
        assert exported[column].null_count() == 0, column
    low, high = exported["boot_median_ratio_low"], exported["boot_median_ratio_high"]
    assert (low <= high).all()
    # The bootstrap interval of the median ratio holds the sample-median ratio for nearly
    # every row (percentile-type intervals, Efron & Tibshirani 1993, ch. 14).
    inside = (low <= exported["median_ratio"]) & (exported["median_ratio"] <= high)
    assert inside.sum() >= math.ceil(0.9 * exported.height), exported.filter(~inside)
    assert ((exported["mann_whitney_p"] > 0) & (exported["mann_whitney_p"] <= 1)).all()

    # Independent reference for one row: scipy on the two groups' usable values.
    row = exported.sort("key").row(0, named=True)
    a = usable_values(result, row["grouping"], row["level_a"], row["outcome"])
    b = usable_values(result, row["grouping"], row["level_b"], row["outcome"])
    assert (a.size, b.size) == (row["n_a"], row["n_b"])
    reference = sps.mannwhitneyu(b, a, alternative="two-sided").pvalue
    assert math.isclose(row["mann_whitney_p"], reference, rel_tol=1e-12), (row, reference)
    assert math.isclose(row["median_ratio"], np.median(b) / np.median(a), rel_tol=1e-12)


async def test_key_b_cross_checks_the_highlighted_comparison_only(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        await pilot.press("down", "down", "down")
        await pilot.pause()
        key = listing(app).current_key
        assert key == shown(app)["key"][3]
        await until(pilot, lambda: finding(current(app)) in sentence(app), "moved sentence")
        assert "press b" in sentence(app), "no cross-checks before the key"
        await pilot.press("b")
        await app.workers.wait_for_complete()
        await until(pilot, lambda: key in app.robust, "cross-check of the highlighted row")
        await until(pilot, lambda: "press b" not in sentence(app), "detail shows the check")
        assert set(app.robust) == {key}
        check = app.robust[key]
        text = sentence(app)
        lines = [line for line in text.splitlines() if line.startswith("Hodges-Lehmann")]
        assert len(lines) == 1, text
        assert ratio_text(check.hl_ratio) in lines[0]
        assert "Mann-Whitney" in lines[0]
        assert "cross-checks done for 1 comparison(s)" in status(app)


# -- text search on readable outcome names --------------------------------------------------


@pytest.mark.parametrize(
    ("typed", "suffix"),
    [("mg/kg", "_mg_per_kg"), ("µg", "_ug_per_kg")],
    ids=["mg-per-kg", "micrograms"],
)
async def test_filter_matches_readable_outcome_names(
    tmp_path: Path, demo_scan: ScanResult, typed: str, suffix: str
) -> None:
    expected = set(demo_scan.comparisons.filter(pl.col("outcome").str.ends_with(suffix))["key"])
    assert 0 < len(expected) < demo_scan.comparisons.height
    # The raw column names do not hold what is typed: only the readable names do.
    assert not any(typed in name for name in demo_scan.comparisons["outcome"])
    async with running(tmp_path) as (app, pilot):
        await filter_by_typing(app, pilot, typed)
        outcomes = shown(app)["outcome"].to_list()
        assert outcomes, f"{typed!r} shows no row"
        assert all(name.endswith(suffix) for name in outcomes), set(outcomes)
        assert set(shown(app)["key"]) == expected
        assert f"shown {len(expected)}/{demo_scan.comparisons.height}" in status(app)


# -- pane sizes -----------------------------------------------------------------------------


async def test_key_z_cycles_the_pane_sizes(tmp_path: Path) -> None:
    classes = ("detail-large", "list-large")

    def layout(app: FoldsiftApp) -> tuple[str | None, int, int]:
        on = [name for name in classes if app.screen.has_class(name)]
        assert len(on) <= 1, on
        detail = app.query_one("#detail").region.height
        return (on[0] if on else None), listing(app).region.height, detail

    async with running(tmp_path) as (app, pilot):
        seen = [layout(app)]
        for _ in range(3):
            await pilot.press("z")
            await pilot.pause()
            await pilot.pause()
            seen.append(layout(app))
    names = [name for name, _, _ in seen]
    assert names == [None, "detail-large", "list-large", None]
    (_, balanced, _), (_, small, big_detail), (_, large, small_detail), back = seen
    assert small < balanced < large, seen
    assert big_detail > small_detail, seen
    assert back == seen[0], "a full cycle restores the balanced layout"


# -- status bar -----------------------------------------------------------------------------


async def test_status_bar_names_the_review_file(tmp_path: Path) -> None:
    reviews = tmp_path / "r.sqlite"
    async with running(tmp_path) as (app, pilot):
        text = status(app)
        assert reviews.name in text
        assert str(reviews) in text
        # It is painted, not only held by the widget: some line of the bar shows it.
        widget = app.query_one("#status", Static)
        painted = [widget.render_line(y).text for y in range(widget.region.height)]
        assert any(reviews.name in line for line in painted), painted


def test_help_lists_every_key_of_the_app():
    """The help page names every key the app binds (issue: a help screen listing every key)."""
    import re

    from foldsift.tui.app import FoldsiftApp, help_text

    # Only the key column counts: the bold part of each "- **keys** — what" line.
    keys = " ".join(
        re.findall(r"^- \*\*(.+?)\*\*", help_text().split("# Filter line")[0], flags=re.MULTILINE)
    )
    shown = {"slash": "/", "question_mark": "?"}
    for binding in FoldsiftApp.BINDINGS:
        for key in binding.key.split(","):
            name = shown.get(key, key)
            assert re.search(rf"(?<![\w]){re.escape(name)}(?![\w])", keys), (key, keys)


async def test_review_robust_option_cross_checks_everything_on_open(tmp_path: Path) -> None:
    """`foldsift review --robust` starts the cross-checks for every comparison once open."""
    from foldsift.tui.app import make_app
    from foldsift.tui.cli import build_parser

    args = build_parser().parse_args(["review", str(demo_path()), "--robust"])
    app = make_app(demo_path(), args, reviews=tmp_path / "r.sqlite", export_dir=tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await until(pilot, lambda: app.result is not None, "scan", timeout=30)
        await until(pilot, lambda: len(app.robust) == app.base.height, "cross-checks", 60)
        await pilot.pause()
        assert set(app.robust) == set(app.base["key"])
        assert "cross-checks done" in status(app)


async def test_change_column_sorts_on_the_size_of_the_change(tmp_path: Path) -> None:
    """Sorting on "change" ranks a 0.25× ratio beside a 4× one: |log2 ratio| descending."""
    async with running(tmp_path) as (app, pilot):
        await pilot.click("#list", offset=(_column_x("change"), 0))  # sort on it
        await pilot.pause()
        await pilot.click("#list", offset=(_column_x("change"), 0))  # again: descending
        await pilot.pause()
        sizes = [abs(v) for v in shown(app)["log2_ratio"].drop_nulls().to_list()]
        assert sizes == sorted(sizes, reverse=True)
        top = shown(app)["ratio"].head(10).to_list()
        assert min(top) < 1 < max(top), "decreases and increases rank together"


def _column_x(title: str) -> int:
    from foldsift.tui.widgets.comparison_list import COLUMNS, SEPARATOR

    x = 0
    for column in COLUMNS:
        if column.title == title:
            return x + 1
        x += column.width + len(SEPARATOR)
    raise AssertionError(title)


async def test_keys_typed_right_after_slash_land_in_the_filter(tmp_path: Path) -> None:
    """A burst like "/copper" (fast typing, a paste over SSH) reaches the list before focus
    has moved; every character must still end up in the filter line (project contract:
    nothing typed is lost)."""
    from textual import events

    async with running(tmp_path) as (app, pilot):
        burst = [("slash", "/")] + [(ch, ch) for ch in "copper"]
        for key, character in burst:  # all queued at once, as a terminal delivers them
            app.post_message(events.Key(key, character))
        await until(pilot, lambda: app.filter_text == "copper", "burst typed into the filter")
        assert isinstance(app.focused, Input)
        assert all("copper" in key for key in shown(app)["key"])


async def test_review_within_strata(tmp_path: Path) -> None:
    """`review --within season` lists the comparisons inside each season, draws their
    charts from that season's rows and says so in the sentence and the list."""
    from foldsift.tui.app import make_app
    from foldsift.tui.cli import build_parser

    args = build_parser().parse_args(["review", str(demo_path()), "--within", "season"])
    app = make_app(demo_path(), args, reviews=tmp_path / "r.sqlite", export_dir=tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await until(pilot, lambda: app.result is not None, "scan", timeout=30)
        await pilot.pause(0.2)
        row = current(app)
        assert " within season=" in row["grouping"]
        assert "within season" in sentence(app)
        assert "field·" in listing(app).render_line(1).text
        season = row["grouping"].rpartition("=")[2]
        used = app.result.used
        expected = used.filter((pl.col("season") == season) & (pl.col("field") == row["level_a"]))[
            row["outcome"] + USED
        ].drop_nulls()
        values = app._values.values(row["grouping"], row["level_a"], row["outcome"])
        assert sorted(values.tolist()) == sorted(expected.to_list())


async def test_huge_values_do_not_crash_the_charts(tmp_path: Path) -> None:
    """A value near the largest float draws as a message on the raw scale, not a crash."""
    data = tmp_path / "huge.csv"
    data.write_text("site,v\na,1e308\na,2\na,3\nb,4\nb,5\nb,6\n")
    async with running(tmp_path, data) as (app, pilot):
        app._show_plots()
        await pilot.pause()
        text = str(app.query_one("#plots", Static).render())
        assert "too large to draw" in text
        assert app.error_text is None


async def test_ctrl_q_in_the_note_editor_keeps_the_note(tmp_path: Path) -> None:
    async with running(tmp_path) as (app, pilot):
        key = current(app)["key"]
        await pilot.press("n")
        await until(pilot, lambda: type(app.screen).__name__ == "NoteScreen", "note editor")
        await pilot.press(*"kept on quit")
        await pilot.press("ctrl+q")
        await until(pilot, lambda: not app.is_running, "app closed", timeout=10)
    with ReviewStore(tmp_path / "r.sqlite", file_fingerprint(demo_path())) as store:
        review = store.get(key)
    assert review is not None and review.note == "kept on quit"


async def test_unflagging_under_the_flagged_filter_keeps_the_row(tmp_path: Path) -> None:
    """The row stays under the cursor after a change even when it no longer matches the
    filter, so a second space toggles the same row back instead of its neighbour."""
    async with running(tmp_path) as (app, pilot):
        for _ in range(2):
            await pilot.press("space", "down")
        await filter_by_typing(app, pilot, "flagged")
        first, second = shown(app)["key"].to_list()[:2]
        await pilot.press("home", "space")
        await pilot.pause()
        assert current(app)["key"] == first and not current(app)["flagged"]
        await pilot.press("space")
        await pilot.pause()
        assert current(app)["key"] == first and current(app)["flagged"]
        assert app.store.get(second).flagged
