"""Benchmark (a script, not a test): how fast the review app answers with ~10,000 comparisons.

Builds a synthetic table (15 levels -> 105 pairs, times 96 outcomes = 10,080 comparisons),
opens the app headless through Textual's Pilot, and times cursor moves, page moves,
re-sorts, filter changes and a flag, each measured from the key press until the app has
processed it and repainted (``pilot.pause()``). Then the same list shows 10,000 and 50,000
rows (the scan's rows, repeated under new keys) for the overviews: switching to them, moving
in them, and their own work per repaint (a new frame, a step, grouping; the map's binning and
its nearest-point move). Prints median and worst times.

    python tests/bench_list.py [--outcomes 96] [--levels 15] [--repeats 30]
        [--overview-rows 10000,50000] [--size 120x36]
"""

from __future__ import annotations

import argparse
import asyncio
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import polars as pl
from textual.geometry import Region
from textual.pilot import Pilot
from textual.widgets import Input

from foldsift.tui.app import FoldsiftApp
from foldsift.tui.screens.review import ReviewScreen
from foldsift.tui.session import SessionOptions
from foldsift.tui.widgets.comparison_list import ComparisonList
from foldsift.tui.widgets.detail import Charts, Facts
from foldsift.tui.widgets.overview import EvidenceMap, IntervalView

Timings = dict[str, list[float]]


def synthetic_csv(folder: Path, outcomes: int, levels: int, per_level: int = 12) -> Path:
    rng = np.random.default_rng(7)
    rows = levels * per_level
    data = {"site": np.repeat([f"site_{i:02d}" for i in range(levels)], per_level)}
    for j in range(outcomes):
        data[f"analyte_{j:03d}_mg_per_kg"] = rng.lognormal(rng.normal(0, 0.3, rows), 0.6)
    path = folder / "bench_wide.csv"
    pl.DataFrame(data).write_csv(path)
    return path


def rows_of(frame: pl.DataFrame, rows: int) -> pl.DataFrame:
    """``rows`` rows: the frame's, repeated under new keys as often as needed."""
    copies = -(-rows // frame.height)
    repeated = [frame.with_columns(pl.col("key") + f"#{copy}") for copy in range(copies)]
    return pl.concat(repeated).head(rows).rechunk()  # as a sorted view is


def paint_all(widget: IntervalView | EvidenceMap) -> None:
    """Every line of the widget, as a repaint asks for them."""
    for y in range(widget.size.height):
        widget.render_line(y)


async def measure_overviews(
    pilot: Pilot, screen: ReviewScreen, rows: int, repeats: int, timings: Timings
) -> None:
    """The overviews with ``rows`` rows in the list: key round trips, then their own work."""
    listing = screen.query_one(ComparisonList)
    frame = rows_of(screen.session.view(), rows)
    other = frame.reverse()  # the same rows in another order: a new frame to draw
    listing.show(frame)
    await pilot.pause()

    async def timed(name: str, key: str) -> None:
        start = time.perf_counter()
        await pilot.press(key)
        await pilot.pause()
        timings.setdefault(f"{name} @{rows:,}", []).append(time.perf_counter() - start)

    intervals, the_map = screen.query_one(IntervalView), screen.query_one(EvidenceMap)
    frames = iter([frame, other] * repeats)
    directions = iter(["right", "left", "up", "down"] * repeats)
    direct = {
        "intervals: new frame": lambda: (intervals.follow(next(frames), 0), paint_all(intervals)),
        "intervals: step": lambda: (intervals.action_step(1), paint_all(intervals)),
        "intervals: grouping": lambda: (intervals.action_toggle_grouping(), paint_all(intervals)),
        "map: new frame (bin)": lambda: (the_map.follow(next(frames), 0), paint_all(the_map)),
        "map: nearest point": lambda: (the_map.action_toward(next(directions)), paint_all(the_map)),
    }
    for _ in range(max(repeats // 3, 5)):
        await timed("key v: to intervals", "v")
        await timed("key down in intervals", "down")
        await timed("key v: to map", "v")
        await timed("key right in map", "right")
        await timed("key v: to the list", "v")
    for name, work in direct.items():
        screen.view = "map" if name.startswith("map") else "intervals"
        await pilot.pause()
        frames = iter([frame, other] * repeats)
        for _ in range(repeats):
            start = time.perf_counter()
            work()
            timings.setdefault(f"direct: {name} + paint @{rows:,}", []).append(
                time.perf_counter() - start
            )
    screen.view = "list"
    await pilot.pause()


async def measure(
    path: Path, repeats: int, overview_rows: list[int], size: tuple[int, int]
) -> Timings:
    options = SessionOptions(path, reviews_path=path.with_suffix(".sqlite"))
    app = FoldsiftApp(options, export_dir=path.parent)
    timings: Timings = {}
    async with app.run_test(size=size) as pilot:
        start = time.perf_counter()
        await app.workers.wait_for_complete()
        while not isinstance(app.screen, ReviewScreen):
            await pilot.pause(0.01)
        await pilot.pause()
        timings["open and scan (once)"] = [time.perf_counter() - start]
        screen = app.screen
        assert isinstance(screen, ReviewScreen)
        print(f"comparisons in the list: {screen.session.rows.height}")

        async def timed(name: str, *keys: str) -> None:
            start = time.perf_counter()
            await pilot.press(*keys)
            await pilot.pause()
            timings.setdefault(name, []).append(time.perf_counter() - start)

        for _ in range(repeats):
            await timed("unbound key (harness only)", "f12")
        for _ in range(repeats):
            await timed("cursor down", "down")
        for _ in range(repeats):
            await timed("page down", "pagedown")
        for _ in range(max(repeats // 3, 5)):
            await timed("re-sort (next column)", "s")
            await timed("reverse order", "r")
        for _ in range(max(repeats // 3, 5)):
            await timed("flag", "space")
        await pilot.press("slash")
        for text in ("q", "<", "0", ".", "0", "5"):
            await timed("filter keystroke", text)
        await pilot.press("enter")
        screen.query_one("#filter", Input).value = ""  # every row again, for direct timings
        await pilot.pause()
        # The app's own work per step, without the harness: handler + painting every
        # visible list line + the detail text; the charts are drawn 60 ms after the cursor
        # rests, so they are timed on their own.
        listing = screen.query_one(ComparisonList)
        facts, charts = screen.query_one(Facts), screen.query_one(Charts)
        height = listing.size.height

        def paint_list() -> None:
            listing._line_cache.clear()
            for y in range(height):
                listing.render_line(y)

        def paint(selector: str) -> None:
            widget = screen.query_one(selector)
            widget._styles_cache.clear()  # force a real paint, not a cached one
            widget.render_lines(Region(0, 0, widget.size.width, widget.size.height))

        for name, work in (
            ("direct: move + paint list", lambda: (listing.action_cursor_down(), paint_list())),
            ("direct: detail text + paint", lambda: (facts.paint(), paint("#sentence"))),
            ("direct: both charts + paint", lambda: (charts.draw(), paint("#plots"))),
            ("direct: re-sort + paint", lambda: (screen.action_next_sort(), paint_list())),
        ):
            for _ in range(repeats):
                start = time.perf_counter()
                work()
                timings.setdefault(name, []).append(time.perf_counter() - start)
        for rows in overview_rows:
            await measure_overviews(pilot, screen, rows, repeats, timings)
    return timings


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--outcomes", type=int, default=96)
    parser.add_argument("--levels", type=int, default=15)
    parser.add_argument("--repeats", type=int, default=30)
    parser.add_argument("--overview-rows", default="10000,50000")
    parser.add_argument("--size", default="120x36", help="terminal columns x lines")
    args = parser.parse_args()
    overview_rows = [int(rows) for rows in args.overview_rows.split(",") if rows]
    columns, lines = (int(part) for part in args.size.split("x"))
    with tempfile.TemporaryDirectory() as folder:
        path = synthetic_csv(Path(folder), args.outcomes, args.levels)
        timings = asyncio.run(measure(path, args.repeats, overview_rows, (columns, lines)))
    width = max(28, *(len(name) for name in timings))
    print(f"{'action':{width}s} {'n':>4s} {'median ms':>10s} {'worst ms':>9s}")
    for name, values in timings.items():
        print(
            f"{name:{width}s} {len(values):4d} {1000 * statistics.median(values):10.1f} "
            f"{1000 * max(values):9.1f}"
        )
    print("target: each repaint after a move or re-sort well under 100 ms")
    print("(Pilot round trips include the harness's own wait for an idle screen: compare")
    print(" them with the unbound key; the 'direct' rows are the app's own work.)")


if __name__ == "__main__":
    main()
