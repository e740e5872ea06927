"""The charts of the detail pane: both groups' distributions on a log and a raw axis.

Unit tests read the renderer's text cell by cell, with expected bins and columns computed
here from the axis's reported extent (numpy's histogram and percentiles, scipy's geometric
mean), not from the renderer's own mapping. Pilot tests open the demo at three terminal
sizes and read what the screen shows.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest
from rich.cells import cell_len
from scipy.stats import gmean
from textual.strip import Strip

from foldsift.tui.app import FoldsiftApp
from foldsift.tui.widgets.detail import Charts
from foldsift.tui.widgets.histograms import (
    GM,
    GM_AT_MEDIAN,
    LIMIT,
    MARKS,
    MEDIAN,
    MIDDLE_HALF,
    RANGE,
    STYLE_A,
    STYLE_B,
    Axis,
    Drawing,
    Group,
    draw_groups,
)

from app_support import current, review, running, until

pytestmark = pytest.mark.usefixtures("sandbox")

SEED = 20261203
BARS = set("▁▂▃▄▅▆▇█")
MARK_GLYPHS = {mark.glyph for mark in MARKS}
#: The chart pane's content size at 80x24, 120x36 and 200x50 (the balanced layout), and
#: smaller or odd sizes the pane can take (a large list, a narrow window).
APP_PANES = [(40, 9), (60, 15), (100, 22)]
OTHER_PANES = [(34, 7), (40, 7), (41, 8), (60, 11), (100, 36), (160, 60), (34, 3), (34, 1)]


def lines(drawing: Drawing) -> list[str]:
    return drawing.text.plain.split("\n")


def line(drawing: Drawing, scale: str, key: str, kind: str, index: int = 0) -> str:
    """One line of the drawing, padded to the plot's right end."""
    axis = drawing.axes[scale]
    return lines(drawing)[drawing.rows[(scale, key, kind)][index]].ljust(axis.left + axis.columns)


def plot_cells(drawing: Drawing, scale: str, key: str, kind: str, index: int = 0) -> str:
    axis = drawing.axes[scale]
    return line(drawing, scale, key, kind, index)[axis.left : axis.left + axis.columns]


def to_units(axis: Axis, values: np.ndarray) -> np.ndarray:
    values = np.asarray(values, dtype=float)
    return np.log(values[values > 0]) if axis.log else values


def expected_column(axis: Axis, value: float) -> int:
    """The drawing's column of ``value``: the plot's columns split [low, high] evenly."""
    unit = float(to_units(axis, np.array([value]))[0])
    share = (unit - axis.low) / (axis.high - axis.low)
    return axis.left + min(int(np.floor(share * axis.columns)), axis.columns - 1)


def bin_counts(axis: Axis, values: np.ndarray) -> np.ndarray:
    """numpy's histogram of ``values`` over the axis's bins (equal widths, low to high)."""
    return np.histogram(to_units(axis, values), axis.bins, (axis.low, axis.high))[0]


def assert_bins_drawn(drawing: Drawing, scale: str, key: str, counts: np.ndarray) -> None:
    """Every non-empty bin shows a bar glyph in each of its cells of the group's bottom bar
    row, and every empty bin none."""
    axis = drawing.axes[scale]
    bottom = plot_cells(drawing, scale, key, "bars", -1)
    for index, count in enumerate(counts):
        cells = bottom[index * axis.cells : (index + 1) * axis.cells]
        if count:
            assert set(cells) <= BARS, (scale, key, index, count, cells)
        else:
            assert set(cells) == {" "}, (scale, key, index, cells)


def two_groups(limits_b: np.ndarray | None = None) -> tuple[Group, Group]:
    """Two lognormal groups of different location and spread."""
    rng = np.random.default_rng(SEED)
    a = Group("a reference", np.exp(rng.normal(3.0, 0.5, 200)), STYLE_A)
    limits = np.empty(0) if limits_b is None else limits_b
    b = Group("b treated", np.exp(rng.normal(3.8, 0.8, 150)), STYLE_B, limits)
    return a, b


# The renderer.


@pytest.mark.parametrize(("width", "height"), APP_PANES)
def test_a_flat_group_stays_visible_beside_a_peaked_one(width, height):
    """The case where one group vanished: group a spread thinly, group b in one or two
    bins. Each group has rows of its own and is scaled to its own tallest bin."""
    rng = np.random.default_rng(SEED)
    a = Group("a spread", np.exp(rng.normal(2.0, 1.5, 300)), STYLE_A)
    b = Group("b peaked", np.exp(rng.normal(2.0, 0.02, 3000)), STYLE_B)
    drawing = draw_groups(a, b, width=width, height=height)
    axis = drawing.axes["log"]
    counts = {key: bin_counts(axis, g.values) for key, g in (("a", a), ("b", b))}
    # On one scale for both, a's tallest bin would be under an eighth of b's.
    assert counts["a"].max() < counts["b"].max() / 8
    for key in ("a", "b"):
        bars = drawing.rows[("log", key, "bars")]
        other = {"a": "b", "b": "a"}[key]
        assert bars and not set(bars) & set(drawing.rows[("log", other, "bars")])
        assert_bins_drawn(drawing, "log", key, counts[key])
        top = plot_cells(drawing, "log", key, "bars", 0)
        assert "█" in top, "the tallest bin fills the group's rows"


@pytest.mark.parametrize(("width", "height"), [*APP_PANES, (100, 36)])
@pytest.mark.parametrize("shape", ["lognormal", "far outlier", "two modes"])
def test_every_non_empty_bin_draws_a_cell_and_no_empty_one_does(width, height, shape):
    rng = np.random.default_rng(SEED)
    a = np.exp(rng.normal(1.0, 0.6, 500))
    if shape == "lognormal":
        b = np.exp(rng.normal(1.4, 0.4, 80))
    elif shape == "far outlier":  # one value in 5,001 far above the rest
        b = np.append(np.exp(rng.normal(1.0, 0.05, 5000)), 60.0)
    else:  # a big mode and a small one
        b = np.exp(np.concatenate([rng.normal(0.5, 0.1, 900), rng.normal(2.5, 0.1, 12)]))
    groups = {"a": Group("a", a, STYLE_A), "b": Group("b", b, STYLE_B)}
    drawing = draw_groups(groups["a"], groups["b"], width=width, height=height)
    checked = 0
    for scale, axis in drawing.axes.items():
        for key, group in groups.items():
            if (scale, key, "bars") not in drawing.rows:
                continue  # a panel drawn as strips only
            assert_bins_drawn(drawing, scale, key, bin_counts(axis, group.values))
            checked += 1
    assert checked >= 2, "the log panel at least has bars for both groups"


def test_marks_sit_at_the_columns_of_their_figures():
    """Geometric mean (scipy's gmean), median and quartiles (numpy), detection limits: each
    at the column its value falls in on each axis, computed from the axis's extent."""
    rng = np.random.default_rng(SEED)
    # Logs skewed to the right, so the geometric mean sits clearly above the median.
    a = np.exp(rng.gamma(2.0, 0.5, 400))
    b = np.exp(1.5 + rng.gamma(2.0, 0.5, 400))
    limits = np.array([2.0])
    drawing = draw_groups(
        Group("a x", a, STYLE_A), Group("b y", b, STYLE_B, limits), width=100, height=22
    )
    for scale in ("log", "raw"):
        axis = drawing.axes[scale]
        reach = to_units(axis, np.concatenate([a, b, limits]))
        assert (axis.low, axis.high) == pytest.approx((reach.min(), reach.max()))
        for key, values in (("a", a), ("b", b)):
            strip = line(drawing, scale, key, "strip")
            gm, median = (
                expected_column(axis, gmean(values)),
                expected_column(axis, np.median(values)),
            )
            if scale == "log":
                assert gm > median, "the data put them in different columns"
            if gm == median:
                assert strip[gm] == GM_AT_MEDIAN.glyph
            else:
                assert (strip[gm], strip[median]) == (GM.glyph, MEDIAN.glyph)
            low, first, third, high = (
                expected_column(axis, q) for q in np.percentile(values, [0, 25, 75, 100])
            )
            inside = {MIDDLE_HALF.glyph, GM.glyph, MEDIAN.glyph, GM_AT_MEDIAN.glyph}
            assert set(strip[first : third + 1]) <= inside
            outside = {RANGE.glyph, LIMIT.glyph}  # the range beyond the quartiles
            assert set(strip[low:first]) <= outside and set(strip[third + 1 : high + 1]) <= outside
            assert strip[low] != " " and strip[high] != " "
            assert set(strip[axis.left : low]) <= {" ", LIMIT.glyph}
            assert set(strip[high + 1 :]) <= {" "}
            assert set(strip[: axis.left - 1]).isdisjoint(MARK_GLYPHS)
        assert line(drawing, scale, "b", "strip")[expected_column(axis, 2.0)] == LIMIT.glyph
        assert LIMIT.glyph not in line(drawing, scale, "a", "strip")


def test_marks_use_the_figures_given():
    """A group's fitted geometric mean and median (as the facts give them) are marked where
    those figures fall, and a figure given as NaN is not marked."""
    a, b = two_groups()
    fitted = Group(a.label, a.values, STYLE_A, gm=12.0, median=15.0)
    unmarked = Group(b.label, b.values, STYLE_B, gm=float("nan"), median=float("nan"))
    drawing = draw_groups(fitted, unmarked, width=100, height=22)
    axis = drawing.axes["log"]
    strip = line(drawing, "log", "a", "strip")
    assert strip[expected_column(axis, 12.0)] == GM.glyph
    assert strip[expected_column(axis, 15.0)] == MEDIAN.glyph
    assert not {GM.glyph, MEDIAN.glyph, GM_AT_MEDIAN.glyph} & set(
        line(drawing, "log", "b", "strip")
    )


def test_tick_labels_are_centred_on_their_values():
    a, b = two_groups()
    drawing = draw_groups(a, b, width=100, height=22)
    for scale, axis in drawing.axes.items():
        ticks = lines(drawing)[drawing.rows[(scale, "", "ticks")][0]]
        assert ticks.startswith(scale)
        labels = list(re.finditer(r"\S+", ticks))[1:]
        assert len(labels) >= 3, ticks
        for label in labels:
            centre = expected_column(axis, float(label.group()))
            assert label.start() == centre - (len(label.group()) - 1) // 2, (scale, label)


@pytest.mark.parametrize(("width", "height"), APP_PANES + OTHER_PANES)
@pytest.mark.parametrize("limits", [None, np.array([4.0, 6.0])])
def test_the_drawing_fits_its_pane(width, height, limits):
    a, b = two_groups(limits)
    drawing = draw_groups(a, b, width=width, height=height, title="outcome: b treated ÷ a ref")
    drawn = lines(drawing)
    assert len(drawn) <= height
    assert max(cell_len(text) for text in drawn) <= width
    if height >= 3:
        assert ("log", "", "ticks") in drawing.rows, "the log axis is labelled"


@pytest.mark.parametrize(("width", "height"), APP_PANES)
def test_both_scales_show_at_the_apps_sizes_and_grow_with_the_pane(width, height):
    a, b = two_groups()
    drawing = draw_groups(a, b, width=width, height=height, title="t")
    assert {("log", "", "ticks"), ("raw", "", "ticks")} <= set(drawing.rows)
    assert len(lines(drawing)) >= height - 1, "the pane's rows are used"
    assert drawing.axes["log"].left + drawing.axes["log"].columns >= width - 6


def test_bars_get_taller_as_the_pane_grows():
    a, b = two_groups()
    rows = [
        len(draw_groups(a, b, width=w, height=h).rows.get(("log", "b", "bars"), []))
        for w, h in APP_PANES
    ]
    assert rows == sorted(rows) and rows[0] < rows[-1], rows


@pytest.mark.parametrize(("width", "height"), APP_PANES + [(34, 7), (160, 60)])
@pytest.mark.parametrize("limits", [None, np.array([4.0, 6.0])])
def test_the_legend_lists_exactly_the_marks_drawn(width, height, limits):
    a, b = two_groups(limits)
    drawing = draw_groups(a, b, width=width, height=height)
    legend_rows = set(drawing.rows[("", "", "legend")])
    drawn = lines(drawing)
    in_plots = {c for i, text in enumerate(drawn) if i not in legend_rows for c in text}
    in_legend = "".join(drawn[i] for i in sorted(legend_rows))
    listed = {mark.glyph for mark in drawing.legend}
    assert listed == in_plots & MARK_GLYPHS
    assert listed == set(in_legend) & MARK_GLYPHS
    assert (LIMIT in drawing.legend) == (limits is not None)
    assert max(legend_rows) == len(drawn) - 1, "the legend is the last line"


def test_median_and_geometric_mean_in_one_cell_have_their_own_mark():
    """Symmetric logs in a narrow pane: GM and median share a cell, shown as one mark that
    the legend names."""
    values = np.exp(np.linspace(-1.0, 1.0, 101))  # GM = median = 1 exactly
    drawing = draw_groups(
        Group("a", values, STYLE_A), Group("b", values * 3, STYLE_B), width=40, height=9
    )
    axis = drawing.axes["log"]
    assert line(drawing, "log", "a", "strip")[expected_column(axis, 1.0)] == GM_AT_MEDIAN.glyph
    assert GM_AT_MEDIAN in drawing.legend


def test_names_from_the_data_are_shown_as_symbols():
    a = Group("a \x1b[31mred", np.array([1.0, 2.0, 3.0]), STYLE_A)
    b = Group("b [bold]x[/]", np.array([2.0, 3.0, 4.0]), STYLE_B)
    drawing = draw_groups(a, b, width=100, height=22, title="lead \x1b]8;;x\x1b\\: b ÷ a")
    assert "\x1b" not in drawing.text.plain
    assert "a ␛[31mred" in drawing.text.plain
    assert "b [bold]x[/]" in drawing.text.plain  # a Text: no markup is read


def test_nothing_to_draw_and_values_too_large_say_so():
    empty = draw_groups(
        Group("a", np.empty(0), STYLE_A), Group("b", np.empty(0), STYLE_B), width=60, height=15
    )
    assert empty.text.plain == "no usable values to draw"
    huge = draw_groups(
        Group("a", np.array([1e308, 2.0, 3.0]), STYLE_A),
        Group("b", np.array([4.0, 5.0, 6.0]), STYLE_B),
        width=60,
        height=15,
    )
    assert "values too large to draw on this scale" in huge.text.plain
    assert set(huge.axes) == {"log"}, "the log axis still draws"
    one_side = draw_groups(
        Group("a", np.empty(0), STYLE_A),
        Group("b", np.array([4.0, 5.0, 9.0]), STYLE_B),
        width=60,
        height=15,
    )
    assert "no values on this scale" in one_side.text.plain
    assert set(plot_cells(one_side, "log", "b", "bars", -1)) & BARS


# The app.


def screen_lines(app: FoldsiftApp, charts: Charts) -> list[Strip]:
    """The screen's lines across the charts' region, as the terminal shows them."""
    region = charts.region
    strips = app.screen._compositor.render_strips()
    return [strips[y].crop(region.x, region.right) for y in range(region.y, region.bottom)]


def group_colours(strip: Strip) -> set[str]:
    return {
        str(segment.style.color)
        for segment in strip
        if segment.style is not None and set(segment.text) & (BARS | MARK_GLYPHS)
    }


@pytest.mark.parametrize("size", [(80, 24), (120, 36), (200, 50)])
async def test_the_app_shows_both_groups_and_the_tick_labels(tmp_path: Path, size) -> None:
    async with running(tmp_path, size=size) as (app, pilot):
        charts = review(app).query_one(Charts)
        row = current(app)
        labels = {"b": f"b {row['level_b']}"[:6], "a": f"a {row['level_a']}"[:6]}
        await until(pilot, lambda: labels["b"] in str(charts.render()), "the charts drawn")
        await pilot.pause()
        drawn = str(charts.render()).split("\n")
        region = charts.region
        assert len(drawn) <= region.height and max(map(cell_len, drawn)) <= region.width
        shown = screen_lines(app, charts)
        assert [strip.text.rstrip() for strip in shown[: len(drawn)]] == [
            text.rstrip() for text in drawn
        ], "every line drawn is on the screen, none cut or covered"
        colours = {}
        for key, label in labels.items():
            rows = [strip for strip in shown if strip.text.startswith(label)]
            assert len(rows) >= 2, f"group {key} is drawn on both axes"
            assert all(set(strip.text[len(label) :]) & (BARS | MARK_GLYPHS) for strip in rows)
            colours[key] = set().union(*map(group_colours, rows))
        assert colours["a"] and colours["b"] and not colours["a"] & colours["b"]
        for scale in ("log", "raw"):
            index = next(i for i, strip in enumerate(shown) if strip.text.startswith(scale))
            ticks = re.findall(r"\S+", shown[index].text)[1:]
            assert len(ticks) >= 2 and all(float(tick) >= 0 for tick in ticks), ticks
            end = len(shown[index].text.rstrip())
            assert app.get_widget_at(region.x + end - 1, region.y + index)[0] is charts


async def test_the_charts_refit_when_the_panes_change(tmp_path: Path) -> None:
    """z cycles the pane sizes: the charts are drawn again to each new height, their last
    line (the legend) on screen."""
    async with running(tmp_path, size=(80, 24)) as (app, pilot):
        charts = review(app).query_one(Charts)
        heights = set()
        for _ in range(3):
            await pilot.press("z")
            await pilot.pause()
            height = charts.region.height
            heights.add(height)

            def refitted(height: int = height) -> bool:
                drawn = str(charts.render()).split("\n")
                return height - 1 <= len(drawn) <= height  # the pane's rows, used

            await until(pilot, refitted, "the charts redrawn to the pane")
            await pilot.pause()
            drawn = str(charts.render()).split("\n")
            shown = screen_lines(app, charts)
            assert shown[len(drawn) - 1].text.rstrip() == drawn[-1].rstrip()
            assert any(text.startswith("log") for text in drawn)
        assert len(heights) == 3, heights
