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
from textual.binding import Binding
from textual.pilot import Pilot
from textual.widgets import Input, Static

from foldsift.demo.generate import demo_path
from foldsift.stats.formatting import interval_text, ratio_text
from foldsift.stats.load import file_fingerprint
from foldsift.stats.scan import ScanResult
from foldsift.stats.sentence import finding
from foldsift.tui.app import FoldsiftApp
from foldsift.tui.screens.dialogs import ExportScreen
from foldsift.tui.screens.review import ReviewScreen
from foldsift.tui.session import ReviewSession, SessionOptions
from foldsift.tui.store import ReviewStore

from app_support import (
    current,
    export_via_dialog,
    is_open,
    listing,
    ready,
    review,
    running,
    sentence,
    session,
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
    held = review(app).query_one("#filter", Input).value
    assert held == text, f"typed {text!r}, filter holds {held!r}"
    assert f"filter {text}" in status(app)
    assert app.focused is listing(app)


def usable_values(
    data: Path, grouping: str, level: str, outcome: str, within: tuple[str, str] | None = None
) -> np.ndarray:
    """One group's values read straight from the CSV with the default policy applied by
    hand: entries that are not numbers (``<120``, empty) and values <= 0 are left out."""
    frame = pl.read_csv(data, infer_schema_length=0)  # every column as text
    keep = pl.col(grouping) == level
    if within is not None:
        keep &= pl.col(within[0]) == within[1]
    values = frame.filter(keep)[outcome].cast(pl.Float64, strict=False).drop_nulls()
    return values.filter(values > 0).to_numpy()


# -- durability of the app under SIGKILL ----------------------------------------------------

CHILD_NOTE = "killed mid-session: lab sheet 9"

CHILD_CODE = textwrap.dedent(
    """
    import asyncio
    import sys
    import time
    from pathlib import Path

    from foldsift.tui.app import FoldsiftApp
    from foldsift.tui.screens.dialogs import NoteScreen
    from foldsift.tui.screens.review import ReviewScreen
    from foldsift.tui.session import SessionOptions

    data, reviews, note = Path(sys.argv[1]), Path(sys.argv[2]), sys.argv[3]


    async def wait_for(pilot, condition, what):
        deadline = time.monotonic() + 30
        while not condition():
            if time.monotonic() > deadline:
                raise SystemExit(f"child timed out waiting for {what}")
            await pilot.pause(0.02)


    async def main():
        options = SessionOptions(data, reviews_path=reviews)
        app = FoldsiftApp(options, export_dir=data.parent)
        async with app.run_test(size=(120, 36)) as pilot:
            await app.workers.wait_for_complete()
            await pilot.pause()
            await wait_for(pilot, lambda: isinstance(app.screen, ReviewScreen), "the scan")
            screen = app.screen
            lst = screen.query_one("#list")
            await pilot.press("down", "down")
            key = lst.current_key
            await pilot.press("space", "2", "n")
            await wait_for(pilot, lambda: isinstance(app.screen, NoteScreen), "note editor")
            await pilot.press(*note)
            await pilot.press("ctrl+s")
            await wait_for(pilot, lambda: not isinstance(app.screen, NoteScreen), "editor")

            def shown_state():
                row = screen.session.row(key)
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
    # Stamped with its own comparison's stamp on this data (tui.session.comparison_stamps).
    from foldsift.stats.load import load_table
    from foldsift.stats.scan import run_scan
    from foldsift.tui.session import comparison_stamps
    from foldsift.tui.store import stamp_identity

    result = run_scan(load_table(data))
    stamp = comparison_stamps(result.comparisons, result.settings)[key]
    assert stamp_identity(review.fingerprint) == stamp_identity(stamp)
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
        checks = session(app).checks
        assert checks == {}
        await pilot.press("B")
        await app.workers.wait_for_complete()
        await until(pilot, lambda: len(checks) == len(keys), "every shown cross-check")
        await pilot.pause()
        assert set(checks) == keys, "only and all the shown comparisons"
        assert f"cross-checks done for {len(keys)} comparison(s)" in status(app)
        await export_via_dialog(app, pilot, rows="shown", name="copper", columns="full")
        target = tmp_path / "copper.csv"
        await until(pilot, lambda: target.exists(), "export of the shown rows")

    exported = pl.read_csv(target)
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
    a = usable_values(demo_path(), row["grouping"], row["level_a"], row["outcome"])
    b = usable_values(demo_path(), row["grouping"], row["level_b"], row["outcome"])
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
        checks = session(app).checks
        await until(pilot, lambda: key in checks, "cross-check of the highlighted row")
        await until(pilot, lambda: "press b" not in sentence(app), "detail shows the check")
        assert set(checks) == {key}
        check = checks[key]
        text = sentence(app)
        lines = [line for line in text.splitlines() if line.startswith("Hodges-Lehmann")]
        assert len(lines) == 1, text
        assert ratio_text(check.hl_ratio) in lines[0]
        assert "Mann-Whitney" in lines[0]
        assert "cross-checks done for 1 comparison(s)" in status(app)


#: The cross-check columns of an export and the RobustCheck field each one holds.
CHECK_COLUMNS = {
    "boot_median_ratio_low": "median_ratio_ci_low",
    "boot_median_ratio_high": "median_ratio_ci_high",
    "hl_ratio": "hl_ratio",
    "hl_ci_low": "hl_ci_low",
    "hl_ci_high": "hl_ci_high",
    "mann_whitney_p": "mann_whitney_p",
}


async def test_cross_checks_of_the_app_equal_those_of_the_command_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """`b` on a row, then an export of it, gives the very numbers a fresh session computes
    for that row and `foldsift scan --robust` writes: one engine, one seeding rule."""
    from foldsift.tui.cli import main as cli_main

    async with running(tmp_path) as (app, pilot):
        await pilot.press("down", "down", "down", "down")
        key = listing(app).current_key
        await pilot.press("b")
        await until(pilot, lambda: key in session(app).checks, "cross-check of the row")
        await until(pilot, lambda: "press b" not in sentence(app), "detail shows the check")
        detail = sentence(app)
        await pilot.press("space")
        await export_via_dialog(app, pilot, rows="flagged", name="checked", columns="full")
        target = tmp_path / "checked.csv"
        await until(pilot, lambda: target.exists(), "export of the flagged row")
    exported = pl.read_csv(target).row(0, named=True)
    assert exported["key"] == key

    fresh = ReviewSession.open(SessionOptions(demo_path(), reviews_path=tmp_path / "new.sqlite"))
    try:
        assert fresh.cross_check(fresh.rows.filter(pl.col("key") == key)) == 1
        check = fresh.checks[key]
    finally:
        fresh.close()
    scanned = tmp_path / "scan.csv"
    assert cli_main(["scan", str(demo_path()), "--robust", "--out", str(scanned)]) == 0
    capsys.readouterr()
    from_scan = pl.read_csv(scanned).filter(pl.col("key") == key).row(0, named=True)
    for column, field in CHECK_COLUMNS.items():
        value = getattr(check, field)
        assert math.isfinite(value), (column, value)
        assert exported[column] == value, (column, exported[column], value)
        assert from_scan[column] == value, (column, from_scan[column], value)
    # The detail pane shows the same interval, written by the one formatter.
    low, high = check.median_ratio_ci_low, check.median_ratio_ci_high
    assert interval_text(low, high) in detail


async def test_export_of_decided_rows(tmp_path: Path) -> None:
    """The export dialog offers the rows with a decision; unflagged ones count too."""
    async with running(tmp_path) as (app, pilot):
        await pilot.press("1", "down", "down", "3", "down", "space")
        decided = set(session(app).rows.filter(pl.col("decision").is_not_null())["key"])
        assert len(decided) == 2
        await pilot.press("x")
        await until(pilot, lambda: isinstance(app.screen, ExportScreen), "export dialog")
        label = str(app.screen.query_one("#rows-decided").label)
        assert "decided (2)" in label, label
        await pilot.press("escape")
        await until(pilot, lambda: isinstance(app.screen, ReviewScreen), "dialog closed")
        await export_via_dialog(app, pilot, rows="decided", name="decided", columns="full")
        target = tmp_path / "decided.csv"
        await until(pilot, lambda: target.exists(), "export of the decided rows")
        assert "exported 2 row(s)" in status(app)
    exported = pl.read_csv(target)
    assert set(exported["key"]) == decided
    assert sorted(exported["decision"].to_list()) == ["drop", "keep"]


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
        detail = review(app).query_one("#detail").region.height
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
        widget = review(app).query_one("#status")
        painted = [widget.render_line(y).text for y in range(widget.region.height)]
        assert any(reviews.name in line for line in painted), painted


def test_help_lists_every_key_of_the_app():
    """The help page names every key the app binds (issue: a help screen listing every key)."""
    import re

    from foldsift.tui.screens.help import help_text

    # Only the key column counts: the bold part of each "- **keys** — what" line.
    keys = " ".join(
        re.findall(r"^- \*\*(.+?)\*\*", help_text().split("# Filter line")[0], flags=re.MULTILINE)
    )
    shown = {"slash": "/", "question_mark": "?"}
    for binding in [*FoldsiftApp.BINDINGS, *ReviewScreen.BINDINGS]:
        assert isinstance(binding, Binding)
        for key in binding.key.split(","):
            name = shown.get(key, key)
            assert re.search(rf"(?<![\w]){re.escape(name)}(?![\w])", keys), (key, keys)


async def test_review_robust_option_cross_checks_everything_on_open(tmp_path: Path) -> None:
    """`foldsift review --robust` starts the cross-checks for every comparison once open."""
    app = app_from_command_line(tmp_path, "--robust")
    async with app.run_test(size=SIZE) as pilot:
        await until(pilot, lambda: is_open(app), "scan", timeout=30)
        checks, rows = session(app).checks, session(app).rows
        await until(pilot, lambda: len(checks) == rows.height, "cross-checks", 60)
        await pilot.pause()
        assert set(checks) == set(rows["key"])
        assert "cross-checks done" in status(app)


async def test_change_column_sorts_on_the_size_of_the_change(tmp_path: Path) -> None:
    """Sorting on "change" ranks a 0.25× ratio beside a 4× one: |log2 ratio| descending."""
    async with running(tmp_path, size=(200, 50)) as (app, pilot):  # wide: the column shows
        await pilot.click("#list", offset=(_column_x(app, "change"), 0))  # sort on it
        await pilot.pause()
        await pilot.click("#list", offset=(_column_x(app, "change"), 0))  # again: descending
        await pilot.pause()
        sizes = [abs(v) for v in shown(app)["log2_ratio"].drop_nulls().to_list()]
        assert sizes == sorted(sizes, reverse=True)
        top = shown(app)["ratio"].head(10).to_list()
        assert min(top) < 1 < max(top), "decreases and increases rank together"


def app_from_command_line(tmp_path: Path, *options: str) -> FoldsiftApp:
    """The app as ``foldsift review`` builds it from these options (demo data, the review
    file in tmp_path)."""
    from foldsift.tui.cli import build_parser, options_from

    words = ["review", str(demo_path()), "--reviews", str(tmp_path / "r.sqlite"), *options]
    args = build_parser().parse_args(words)
    return FoldsiftApp(options_from(args), args.robust, export_dir=tmp_path)


def _column_x(app, title: str) -> int:
    from foldsift.tui.widgets.comparison_list import SEPARATOR

    x = 0
    for column in app.screen.query_one("#list").columns:
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
        line = review(app).query_one("#filter", Input)
        await until(pilot, lambda: line.value == "copper", "burst typed into the filter")
        await until(pilot, lambda: "filter copper" in status(app), "the filter applied")
        assert app.focused is line
        assert all("copper" in key for key in shown(app)["key"])


async def test_review_within_strata(tmp_path: Path) -> None:
    """`review --within season` lists the comparisons inside each season, draws their
    charts from that season's rows and says so in the sentence and the list."""
    app = app_from_command_line(tmp_path, "--within", "season")
    async with app.run_test(size=SIZE) as pilot:
        await until(pilot, lambda: ready(app), "scan", timeout=30)
        row = current(app)
        assert (row["grouping"], row["within"]) == ("field", "season")
        assert "within season" in sentence(app)
        assert f"field·{row['stratum']}" in listing(app).render_line(1).text
        # The charts' values are that season's rows of the data file.
        a, b = session(app).group_values(row)
        season = ("season", row["stratum"])
        for values, level in ((a, row["level_a"]), (b, row["level_b"])):
            expected = usable_values(demo_path(), "field", level, row["outcome"], season)
            assert sorted(values.tolist()) == sorted(expected.tolist())
        assert (a.size, b.size) == (row["n_a"], row["n_b"])


async def test_huge_values_do_not_crash_the_charts(tmp_path: Path) -> None:
    """A value near the largest float draws as a message on the raw scale, not a crash."""
    data = tmp_path / "huge.csv"
    data.write_text("site,v\na,1e308\na,2\na,3\nb,4\nb,5\nb,6\n")
    async with running(tmp_path, data) as (app, pilot):
        plots = review(app).query_one("#plots", Static)
        await until(pilot, lambda: "too large to draw" in str(plots.render()), "charts drawn")
        assert app.error_text is None
        assert app.is_running


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
        assert session(app).store.get(second).flagged


async def test_summary_table_opens_without_cross_checks_or_charts(tmp_path: Path) -> None:
    """A summary table has no raw values: the list and facts show, `b` and `B` are not
    offered and start nothing, and the charts say there is nothing to draw."""
    data = tmp_path / "summary.csv"
    data.write_text(
        "grouping,level,outcome,n,mean_log,sd_log\n"
        "site,north,lead,12,1.2,0.5\n"
        "site,south,lead,10,1.9,0.6\n"
    )
    options = SessionOptions(data, summary=True, reviews_path=tmp_path / "r.sqlite")
    app = FoldsiftApp(options, export_dir=tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await until(pilot, lambda: ready(app), "summary table open")
        assert shown(app).height == 1
        plots = review(app).query_one("#plots", Static)
        await until(pilot, lambda: "no charts" in str(plots.render()), "charts")
        await pilot.press("b", "B")
        await pilot.pause()
        assert session(app).checks == {}
        assert not app.workers, "no cross-check worker started"
        footer_keys = {binding.action for _, binding, enabled, _ in app.active_bindings.values()}
        assert "robust" in footer_keys
        assert not any(
            enabled
            for _, binding, enabled, _ in app.active_bindings.values()
            if binding.action in ("robust", "robust_shown")
        )


@pytest.mark.parametrize(
    ("done", "total", "elapsed", "expected"),
    [
        (193, 1860, 21.0, " · about 3 min left"),  # the pace so far: 21/193 s per row
        (10, 100, 5.0, " · about 40 s left"),
        (2, 100, 5.0, ""),  # too few done to have a pace
        (10, 100, 1.0, ""),  # too early
        (50, 100, 3.0, ""),  # under 5 seconds left
        (100, 100, 9.0, ""),
    ],
)
def test_cross_checks_say_the_time_left(done, total, elapsed, expected):
    """The progress notice of a long run of cross-checks says about how long is left, from
    the pace so far (plain arithmetic: elapsed / done x the rows left)."""
    from foldsift.tui.screens.review import time_left

    assert time_left(done, total, elapsed) == expected
