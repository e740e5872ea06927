"""The overviews: every shown row's interval on one ratio axis, and the evidence map.

Unit tests check the axis against positions computed here with numpy's natural log (a log
scale maps a ratio r to a fraction (ln r - ln lo) / (ln hi - ln lo) of the axis whatever
the base), the rows against their own numbers, and the map's cells against
numpy.histogram2d. Pilot tests check what the app draws. Data is simulated with fixed
seeds; the app tests open the demo CSV as the other app tests do.
"""

from __future__ import annotations

import math
import re

import numpy as np
import polars as pl
import pytest
from textual.app import App, ComposeResult
from textual.geometry import Size

from foldsift.stats.sentence import finding
from foldsift.tui.app import FoldsiftApp
from foldsift.tui.widgets.overview import (
    BAND,
    BEYOND_LEFT,
    BEYOND_RIGHT,
    DENSITY,
    HIGH_END,
    LOW_END,
    NO_RATIO,
    NOT_PASS,
    ONE,
    PASS,
    Q_LINE,
    SELECTED,
    Axis,
    EvidenceMap,
    IntervalView,
    ShownRows,
    bin_points,
    density_glyphs,
    draw_interval,
    fold_ticks,
    interval_background,
    map_layout,
    nearest,
    short_label,
    strength_axis,
)
from foldsift.tui.widgets.plain import visible

from app_support import current, listing, review, running, sentence, until

pytestmark = pytest.mark.usefixtures("sandbox")

BAND_DEFAULT = (0.8, 1.25)
THRESHOLD = 0.05


def expected_column(ratio: float, low_ratio: float, high_ratio: float, cells: int) -> float:
    """Where a ratio falls on a log axis from low_ratio to high_ratio over ``cells``
    columns, computed with the natural log (independent of the widget's log2)."""
    fraction = (np.log(ratio) - np.log(low_ratio)) / (np.log(high_ratio) - np.log(low_ratio))
    return float(fraction * (cells - 1))


def axis_between(low_ratio: float, high_ratio: float, cells: int) -> Axis:
    return Axis(math.log2(low_ratio), math.log2(high_ratio), cells)


# -- the axis ---------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("low_ratio", "high_ratio", "cells"),
    [(0.2, 5.0, 60), (0.2, 5.0, 12), (0.01, 100.0, 30), (0.001, 1000.0, 80), (0.6, 1.7, 20)],
)
def test_fold_ticks_are_plain_folds_at_their_places(low_ratio, high_ratio, cells) -> None:
    axis = axis_between(low_ratio, high_ratio, cells)
    ticks = fold_ticks(axis)
    assert any(tick.label == "1" for tick in ticks)
    end = -2
    for tick in ticks:
        assert re.fullmatch(r"\d+(\.\d+)?", tick.label), tick.label  # never 1e3
        fold = float(tick.label)
        assert low_ratio <= fold <= high_ratio
        # The tick sits on the cell nearest its fold.
        assert abs(tick.column - expected_column(fold, low_ratio, high_ratio, cells)) <= 0.5
        # Labels stay apart and within one cell beyond either end of the axis.
        assert tick.start > end
        assert tick.start >= -1 and tick.start + len(tick.label) <= cells + 1
        end = tick.start + len(tick.label)


def test_fold_ticks_step_through_powers_of_two_then_of_ten() -> None:
    wide_enough = [tick.label for tick in fold_ticks(axis_between(0.2, 5.0, 60))]
    assert wide_enough == ["0.25", "0.5", "1", "2", "4"]
    decades = [tick.label for tick in fold_ticks(axis_between(0.0009, 1100.0, 40))]
    assert decades == ["0.001", "0.01", "0.1", "1", "10", "100", "1000"]


@pytest.mark.parametrize("cells", [9, 30, 101])
def test_background_puts_ratio_one_and_the_band_where_numpy_log_says(cells: int) -> None:
    axis = axis_between(0.25, 4.0, cells)
    back = interval_background(axis, BAND_DEFAULT)
    one = back.text.index(ONE)
    assert abs(one - expected_column(1.0, 0.25, 4.0, cells)) <= 0.5
    shaded = [i for i, glyph in enumerate(back.text) if glyph in (BAND, ONE)]
    low_edge = expected_column(BAND_DEFAULT[0], 0.25, 4.0, cells)
    high_edge = expected_column(BAND_DEFAULT[1], 0.25, 4.0, cells)
    assert abs(shaded[0] - low_edge) <= 0.5 and abs(shaded[-1] - high_edge) <= 0.5
    assert shaded == list(range(shaded[0], shaded[-1] + 1))


# -- one row ----------------------------------------------------------------------------
def test_rows_draw_the_point_inside_its_interval_and_mark_passing_q() -> None:
    rng = np.random.default_rng(11)
    axis = axis_between(0.1, 10.0, 50)
    back = interval_background(axis, BAND_DEFAULT)
    for _ in range(300):
        log_ratio = rng.normal(0, 0.8)
        half = rng.uniform(0.01, 0.5)
        ratio, low, high = (
            math.exp(log_ratio),
            math.exp(log_ratio - half),
            math.exp(log_ratio + half),
        )
        q = float(rng.uniform(0, 0.1))
        passes = q < THRESHOLD
        row = draw_interval(axis, back, math.log2(ratio), math.log2(low), math.log2(high), passes)
        glyphs = [i for i, glyph in enumerate(row.text) if glyph in (PASS, NOT_PASS)]
        assert len(glyphs) == 1
        assert row.text[glyphs[0]] == (PASS if passes else NOT_PASS)
        # Row cells: one beyond each end, then the axis; the ends of the CI, if they are
        # not under the point, and the point between them.
        start = row.text.find(LOW_END)
        end = row.text.find(HIGH_END)
        start = glyphs[0] if start < 0 else start
        end = glyphs[0] if end < 0 else end
        assert start <= glyphs[0] <= end
        expected = expected_column(ratio, 0.1, 10.0, 50) + 1
        assert abs(glyphs[0] - expected) <= 0.5


def test_q_passing_glyph_follows_the_threshold_exactly() -> None:
    q = np.array([0.0, 0.01, 0.0499999, 0.05, 0.0500001, 0.5, np.nan])
    frame = synthetic_frame(len(q), q=q)
    rows = ShownRows.of(frame)
    assert rows.passes(THRESHOLD).tolist() == [True, True, True, False, False, False, False]


@pytest.mark.parametrize(
    ("low", "high", "left", "right"),
    [
        (-math.inf, 2.0, BEYOND_LEFT, HIGH_END),  # a bound at 0: infinite on the log scale
        (math.nan, 2.0, BEYOND_LEFT, HIGH_END),  # a missing bound
        (-12.0, 2.0, BEYOND_LEFT, HIGH_END),  # beyond the axis
        (0.5, math.inf, LOW_END, BEYOND_RIGHT),
        (0.5, math.nan, LOW_END, BEYOND_RIGHT),
        (math.nan, math.nan, BEYOND_LEFT, BEYOND_RIGHT),
    ],
)
def test_bounds_past_the_axis_run_to_the_edge_with_an_arrow(low, high, left, right) -> None:
    axis = Axis(-3.0, 3.0, 40)
    row = draw_interval(axis, interval_background(axis, BAND_DEFAULT), 1.0, low, high, True)
    drawn = row.text
    if left == BEYOND_LEFT:
        assert drawn[0] == BEYOND_LEFT and LOW_END not in drawn
        assert set(drawn[1 : drawn.index(PASS)]) <= {"─", "┼"}  # runs to the edge
    else:
        assert drawn[0] == " " and LOW_END in drawn
    if right == BEYOND_RIGHT:
        assert drawn[-1] == BEYOND_RIGHT and HIGH_END not in drawn
    else:
        assert drawn[-1] == " " and HIGH_END in drawn


def test_a_point_past_the_axis_shows_in_the_cell_beyond_and_no_ratio_says_so() -> None:
    axis = Axis(-3.0, 3.0, 40)
    back = interval_background(axis, BAND_DEFAULT)
    beyond = draw_interval(axis, back, 20.0, 19.0, 21.0, False)
    assert beyond.text[-1] == NOT_PASS and PASS not in beyond.text
    below = draw_interval(axis, back, -math.inf, -math.inf, -5.0, True)
    assert below.text[0] == PASS
    missing = draw_interval(axis, back, math.nan, math.nan, math.nan, False)
    assert NO_RATIO in missing.text and PASS not in missing.text and NOT_PASS not in missing.text


def test_labels_fit_their_width_and_keep_both_levels() -> None:
    label = short_label("sodium", ["north_meadow", "brook_end"], 21)
    assert len(label) <= 21 and "÷" in label and label.startswith("sodium ")
    assert short_label("sodium", ["north", "south"], 40) == "sodium north÷south"
    assert short_label("", ["north", "south", "spring"], 40) == "north÷south ·spring"


def test_grouping_by_outcome_keeps_list_order_within_each_outcome() -> None:
    frame = synthetic_frame(6).with_columns(
        pl.Series("outcome", ["zinc", "iron", "zinc", "lead", "iron", "zinc"])
    )
    order, starts = ShownRows.of(frame).outcome_order()
    assert order.tolist() == [0, 2, 5, 1, 4, 3]  # zinc first: its first row leads the list
    assert starts.tolist() == [True, False, False, True, False, True]


# -- the map ----------------------------------------------------------------------------
def test_scatter_cells_match_numpy_histogram2d() -> None:
    rng = np.random.default_rng(5)
    x = rng.normal(0, 1.2, 5000)
    y = rng.exponential(3, 5000)
    x_edges = np.linspace(-4, 4, 73)
    y_edges = strength_axis(20.0, 15, THRESHOLD).edges()  # uneven: two parts at the q line
    x = np.concatenate([x, x_edges, [np.nan, 0.0]])  # points on every edge, and missing ones
    y = np.concatenate([y, np.full(x_edges.size, 2.0), [1.0, np.nan]])
    inside = (x >= x_edges[0]) & (x <= x_edges[-1]) & (y >= y_edges[0]) & (y <= y_edges[-1])
    column, row, counts = bin_points(x[inside], y[inside], x_edges, y_edges)
    reference, _, _ = np.histogram2d(x[inside], y[inside], bins=[x_edges, y_edges])
    assert np.array_equal(counts, reference.T.astype(int))
    # Points beyond the edges count in the edge cells; missing ones nowhere.
    _, _, all_counts = bin_points(x, y, x_edges, y_edges)
    finite = ~(np.isnan(x) | np.isnan(y))
    clipped_x = np.clip(x[finite], x_edges[0], x_edges[-1])
    clipped_y = np.clip(y[finite], y_edges[0], y_edges[-1])
    clipped, _, _ = np.histogram2d(clipped_x, clipped_y, bins=[x_edges, y_edges])
    assert np.array_equal(all_counts, clipped.T.astype(int))


def test_denser_cells_show_denser_glyphs() -> None:
    counts = np.array([0, 1, 2, 4, 5, 19, 20, 99, 100, 5000])
    glyphs = density_glyphs(counts).tolist()
    order = ["", *(glyph for _, glyph in DENSITY)]
    ranks = [order.index(glyph) for glyph in glyphs]
    assert ranks == sorted(ranks) and ranks[0] == 0 and ranks[-1] == len(DENSITY)
    assert glyphs[1] == DENSITY[0][1]


def test_the_map_puts_exactly_the_passing_points_above_the_q_line() -> None:
    q = np.array([1e-9, 0.001, 0.04, 0.0499, 0.05, 0.051, 0.3, 1.0, np.nan])
    rows = ShownRows.of(synthetic_frame(len(q), q=q))
    layout = map_layout(rows, Size(60, 20), BAND_DEFAULT, THRESHOLD)
    line = layout.y_axis.above
    assert set(layout.grid[line].text[layout.margin :]) <= {Q_LINE, "┊", ONE}
    drawn = layout.row >= 0
    assert drawn.tolist() == [True] * 8 + [False]  # no q: not drawn
    above = (layout.row < line)[drawn]
    assert above.tolist() == (q[drawn] < THRESHOLD).tolist()
    assert layout.counts.sum() == 8


def test_nearest_point_in_each_direction() -> None:
    #            0  1  2  3  4
    column = np.array([5, 9, 1, 5, 5, -1])
    row = np.array([5, 5, 5, 1, 8, -1])  # from the top; the last point is not drawn
    assert nearest(column, row, 0, "right") == 1
    assert nearest(column, row, 0, "left") == 2
    assert nearest(column, row, 0, "up") == 3
    assert nearest(column, row, 0, "down") == 4
    assert nearest(column, row, 1, "right") is None
    assert nearest(column, row, 5, "right") == 0  # from a point not drawn: the first drawn
    # Ties go to the first in list order.
    assert nearest(np.array([0, 3, 3]), np.array([0, 0, 0]), 0, "right") == 1


# -- the widgets on their own (0, 1 and 50,000 rows) --------------------------------------
def synthetic_frame(count: int, seed: int = 3, q: np.ndarray | None = None) -> pl.DataFrame:
    """A list frame with the columns the overviews read: lognormal ratios with CIs, q
    from a seeded uniform, a few rows without a ratio and with unbounded intervals."""
    rng = np.random.default_rng(seed)
    log_ratio = rng.normal(0, 0.8, count)
    half = rng.uniform(0.05, 0.6, count)
    ratio, low, high = np.exp(log_ratio), np.exp(log_ratio - half), np.exp(log_ratio + half)
    if count >= 10:
        ratio[3], low[3], high[3] = np.nan, np.nan, np.nan
        low[5], high[7] = 0.0, np.inf
    return pl.DataFrame(
        {
            "key": [f"k{i}" for i in range(count)],
            "ratio": ratio,
            "ci_low": low,
            "ci_high": high,
            "q_bh": rng.uniform(0, 0.2, count) if q is None else q,
            "outcome": [f"analyte_{i % 40}" for i in range(count)],
            "outcome_label": [f"analyte {i % 40} (mg/kg)" for i in range(count)],
            "level_b": [f"site_{i % 7}" for i in range(count)],
            "level_a": [f"site_{i % 5 + 7}" for i in range(count)],
            "stratum": pl.Series([None] * count, dtype=pl.String),
        }
    )


class Views(App[None]):
    """Both overviews on a frame, sharing one cursor as the review screen does."""

    def __init__(self, frame: pl.DataFrame, view: str) -> None:
        super().__init__()
        self.frame, self.view, self.cursor = frame, view, 0

    def compose(self) -> ComposeResult:
        if self.view == "intervals":
            yield IntervalView(BAND_DEFAULT, 0.95, self.moved, id="view")
        else:
            yield EvidenceMap(BAND_DEFAULT, self.moved, id="view")

    def moved(self, index: int) -> None:
        self.cursor = index
        self.query_one("#view", IntervalView | EvidenceMap).follow(self.frame, index)

    def on_mount(self) -> None:
        self.query_one("#view", IntervalView | EvidenceMap).follow(self.frame, 0)


def drawn(app: App, selector: str = "#view") -> list[str]:
    widget = app.screen.query_one(selector)
    return [widget.render_line(y).text for y in range(widget.size.height)]


@pytest.mark.parametrize("count", [0, 1, 50_000])
async def test_interval_view_draws_any_number_of_rows(count: int) -> None:
    frame = synthetic_frame(count)
    app = Views(frame, "intervals")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        lines = drawn(app)
        assert lines[0].startswith(f"{count:,} rows, 95% CI")
        assert re.search(r"(?<![\d.])1(?![\d.])", lines[-1])  # the axis labels ratio 1
        if count == 0:
            assert "No comparison matches the filter." in lines[1]
            return
        assert lines[1].startswith("▸")
        await pilot.press("end")
        await pilot.pause()
        assert app.cursor == count - 1
        lines = drawn(app)
        marked = [line for line in lines if line.startswith("▸")]
        assert len(marked) == 1 and "site" in marked[0]
    if count == 50_000:
        # Row 3 has no ratio, rows 5 and 7 bounds at 0 and infinity.
        app = Views(frame, "intervals")
        async with app.run_test(size=(80, 24)) as pilot:
            await pilot.pause()
            lines = drawn(app)
            assert NO_RATIO in lines[1 + 3]
            assert BEYOND_LEFT in lines[1 + 5] and BEYOND_RIGHT in lines[1 + 7]


@pytest.mark.parametrize("count", [0, 1, 50_000])
async def test_evidence_map_draws_any_number_of_points(count: int) -> None:
    frame = synthetic_frame(count)
    app = Views(frame, "map")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        lines = drawn(app)
        assert lines[0].startswith("evidence map")
        assert any(f"q{THRESHOLD:g}" in line and Q_LINE in line for line in lines)
        if count == 0:
            assert "No comparison matches the filter." in lines[-1]
            return
        assert sum(line.count(SELECTED) for line in lines[:-1]) == 1
        await pilot.press("j")
        await pilot.pause()
        assert app.cursor == min(1, count - 1)
        if count == 50_000:
            assert re.search(r"\d+ in its cell|not drawn", drawn(app)[-1])


# -- in the app -------------------------------------------------------------------------
def interval_lines(app: FoldsiftApp) -> list[str]:
    return drawn(app, "#intervals")


def map_lines(app: FoldsiftApp) -> list[str]:
    return drawn(app, "#evidence-map")


async def test_v_steps_through_the_list_the_intervals_and_the_map(tmp_path) -> None:
    async with running(tmp_path) as (app, pilot):
        screen = review(app)
        shown = lambda: {  # noqa: E731
            name
            for name in ("#list", "#intervals", "#evidence-map")
            if screen.query_one(name).display and screen.query_one(name).size.height
        }
        assert shown() == {"#list"}
        await pilot.press("v")
        await until(pilot, lambda: shown() == {"#intervals"}, "the interval view")
        assert app.focused is screen.query_one("#intervals")
        assert "95% CI" in interval_lines(app)[0]
        await pilot.press("v")
        await until(pilot, lambda: shown() == {"#evidence-map"}, "the evidence map")
        assert map_lines(app)[0].startswith("evidence map")
        await pilot.press("v")
        await until(pilot, lambda: shown() == {"#list"}, "the list again")
        assert app.focused is listing(app)


@pytest.mark.parametrize("size", [(80, 24), (120, 36), (200, 50)])
async def test_interval_view_shows_the_intervals_and_the_axis(tmp_path, size) -> None:
    async with running(tmp_path, size=size) as (app, pilot):
        await pilot.press("v")
        await pilot.pause()
        widget = review(app).query_one("#intervals")
        assert widget.size.height >= 8
        lines = interval_lines(app)
        assert "q<0.05" in lines[0] and "band 0.80–1.25" in lines[0]
        rows = lines[1:-2]
        frame = listing(app).frame
        for position, line in enumerate(rows[: frame.height]):
            q = frame["q_bh"][position]
            assert (PASS in line) == (q < THRESHOLD), (line, q)
            assert (NOT_PASS in line) == (not q < THRESHOLD), (line, q)
            assert ONE in line or "┼" in line or PASS in line or NOT_PASS in line
        labels = lines[-1].split()
        assert "1" in labels and {"0.5", "2"} <= set(labels)
        assert "┴" in lines[-2]


async def test_moving_in_the_interval_view_moves_the_list_and_the_detail(tmp_path) -> None:
    async with running(tmp_path, size=(80, 24)) as (app, pilot):
        await pilot.press("v")
        await pilot.pause()
        await pilot.press("down", "down", "j")
        await pilot.pause()
        assert listing(app).cursor_row == 3
        row = current(app)
        await until(pilot, lambda: visible(finding(row)) in sentence(app), "the detail")
        marked = [line for line in interval_lines(app) if line.startswith("▸")]
        assert len(marked) == 1 and visible(row["level_b"])[:3] in marked[0]
        await pilot.press("up")
        await pilot.pause()
        assert listing(app).cursor_row == 2
        # Far down: the marked row stays in sight.
        await pilot.press("end")
        await pilot.pause()
        assert listing(app).cursor_row == listing(app).frame.height - 1
        assert sum(line.startswith("▸") for line in interval_lines(app)) == 1
        # Back in the list, the cursor is where the view left it.
        await pilot.press("v", "v")
        await pilot.pause()
        assert listing(app).cursor_row == listing(app).frame.height - 1


async def test_g_groups_the_intervals_by_outcome(tmp_path) -> None:
    async with running(tmp_path, size=(120, 36)) as (app, pilot):
        await pilot.press("v", "g")
        await pilot.pause()
        assert "order: by outcome" in interval_lines(app)[0]
        frame = listing(app).frame
        view = review(app).query_one("#intervals", IntervalView)
        await pilot.press("down")
        await pilot.pause()
        # The second row of the view is the first row's outcome again (grouped), not the
        # list's second row.
        first_outcome = frame["outcome"][0]
        assert frame["outcome"][view.cursor] == first_outcome
        assert listing(app).cursor_row == view.cursor
        await pilot.press("g")
        await pilot.pause()
        assert "order: list" in interval_lines(app)[0]


async def test_evidence_map_selected_point_follows_the_cursor(tmp_path) -> None:
    async with running(tmp_path, size=(120, 36)) as (app, pilot):
        await pilot.press("down", "down", "down", "down", "down")  # in the list
        await pilot.press("v", "v")
        await pilot.pause()
        the_map = review(app).query_one("#evidence-map", EvidenceMap)
        layout = the_map.layout_now()

        def selected_at() -> tuple[int, int]:
            lines = map_lines(app)
            found = [
                (line.index(SELECTED), y) for y, line in enumerate(lines[:-1]) if SELECTED in line
            ]
            assert len(found) == 1
            return found[0]

        index = listing(app).cursor_row
        assert index == 5
        x, y = selected_at()
        assert (x - layout.margin, y - 1) == (layout.column[index], layout.row[index])
        label = ShownRows.of(listing(app).frame).label(index)
        assert label in map_lines(app)[-1]
        # An arrow moves to the nearest point that way; the list's cursor and the detail
        # follow.
        expected = nearest(layout.column, layout.row, index, "right")
        await pilot.press("right")
        await pilot.pause()
        if expected is not None:
            assert listing(app).cursor_row == expected
            x, y = selected_at()
            assert (x - layout.margin, y - 1) == (layout.column[expected], layout.row[expected])
            row = current(app)
            await until(pilot, lambda: visible(finding(row)) in sentence(app), "the detail")


async def test_overviews_with_no_shown_rows(tmp_path) -> None:
    async with running(tmp_path, size=(80, 24)) as (app, pilot):
        await pilot.press("slash", *"q<0", "enter")  # no q is below 0
        await until(pilot, lambda: listing(app).frame.height == 0, "an empty list")
        await pilot.press("v")
        await pilot.pause()
        assert app.focused is review(app).query_one("#intervals")
        assert "No comparison matches the filter." in interval_lines(app)[1]
        await pilot.press("down", "v", "right")
        await pilot.pause()
        assert "No comparison matches the filter." in map_lines(app)[-1]
