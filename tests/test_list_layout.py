"""The list and the detail use the room the terminal gives: required columns (flag,
decision, note) at 80 columns, names unabbreviated when they fit, the footer whole at 80
columns, the detail's group names never cut when the pane has room, a focus cue on the list.

These are checks of the project's own layout rules on what is drawn (Textual's Pilot on the
demo data), not of statistics.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from rich.cells import cell_len

from foldsift.tui.widgets.comparison_list import COLUMNS, OPTIONAL, REQUIRED, SEPARATOR, layout

from app_support import listing, running, shown

NAMES = ("outcome", "level b ÷ level a")


def _width(columns) -> int:
    return sum(c.width for c in columns) + len(SEPARATOR) * (len(columns) - 1)


@pytest.mark.parametrize("width", [40, 60, 78, 100, 118, 160, 198, 300])
def test_layout_keeps_the_required_columns_and_fits(width):
    natural = {"outcome": 26, "level b ÷ level a": 27}
    columns = layout(width, natural)
    titles = [c.title for c in columns]
    assert set(REQUIRED) <= set(titles)
    # In the catalogue's order, so decision and note stay at the end of the row.
    assert titles == [c.title for c in COLUMNS if c.title in titles]
    assert titles[-2:] == ["decision", "✎"]
    minimum = _width([c for c in COLUMNS if c.title in REQUIRED])
    assert _width(columns) <= max(width, minimum)


def test_names_take_their_full_width_before_optional_columns():
    natural = {"outcome": 26, "level b ÷ level a": 27}
    needed = _width([c for c in COLUMNS if c.title in REQUIRED]) + (26 - 12) + (27 - 14)
    columns = {c.title: c.width for c in layout(needed, natural)}
    assert columns["outcome"] == 26 and columns["level b ÷ level a"] == 27
    assert not set(OPTIONAL) & set(columns)
    wide = {c.title: c.width for c in layout(needed + 60, natural)}
    assert set(OPTIONAL[:3]) <= set(wide)


def test_the_sorted_column_is_shown_even_when_narrow():
    narrow = layout(80, {}, sort_on="p_value")
    assert "p" in [c.title for c in narrow]
    assert set(REQUIRED) <= {c.title for c in narrow}


def _screen_lines(app) -> list[str]:
    return [strip.text for strip in app.screen._compositor.render_strips()]


@pytest.mark.parametrize("size", [(80, 24), (120, 36), (200, 50)])
async def test_what_the_screen_shows_at_each_size(tmp_path: Path, size):
    async with running(tmp_path, size=size) as (app, pilot):
        await pilot.pause()
        lines = _screen_lines(app)
        header = next(line for line in lines if line.startswith("⚑"))
        assert "decision" in header and "✎" in header
        # The footer is whole: its last key is on screen.
        assert "? Help" in lines[-1] or "?  Help" in lines[-1]
        columns = {c.title: c.width for c in listing(app).columns}
        frame = shown(app)
        longest = max(
            cell_len(f"{b} ÷ {a}") for a, b in frame.select("level_a", "level_b").iter_rows()
        )
        if size[0] >= 120:  # room for the demo's names: none is cut
            assert columns["level b ÷ level a"] >= longest
            assert not any("…" in line for line in lines if line.startswith("  "))
        row = frame.row(listing(app).cursor_row, named=True)
        # The detail names both groups in full (on their own line when the columns are narrow).
        body = "\n".join(lines)
        assert f"a: {row['level_a']}" in body and f"b: {row['level_b']}" in body


async def test_the_list_shows_that_it_has_the_keys(tmp_path: Path):
    async with running(tmp_path) as (app, pilot):
        lst = listing(app)
        lst.focus()
        await pilot.pause()
        focused = list(lst.render_line(0))[0].style
        await pilot.press("slash")  # the filter line takes the focus (it is out of tab order)
        await pilot.pause()
        unfocused = list(lst.render_line(0))[0].style
        assert focused != unfocused


def test_the_inline_interval_is_drawn_on_one_log_axis():
    """The picture's cells against an independent mapping: column = middle + ln(x) / span
    × middle (numpy's log), 1 at the middle, the point inside its interval, bounds past the
    axis marked."""
    import math

    import numpy as np

    from foldsift.tui.widgets.comparison_list import interval_cells

    span, width = math.log(4.0), 11
    middle = width // 2
    for ratio, low, high in [(0.5, 0.3, 0.9), (2.0, 1.2, 3.5), (1.1, 0.8, 1.6), (50, 2, 900)]:
        cells = interval_cells({"ratio": ratio, "ci_low": low, "ci_high": high}, width, span)
        assert len(cells) == width

        def column(x: float) -> int:
            return round(middle + float(np.log(x)) / span * middle)

        if 0 <= column(ratio) < width:
            assert cells[column(ratio)] == "●"
        else:
            assert "●" not in cells and cells[-1] == "▶"
        assert cells[middle] in "│┼●"
        if low < 1 < high:
            assert cells[middle] in "┼●"
        drawn = [i for i, c in enumerate(cells) if c in "─┼●◀▶"]
        assert min(drawn) == max(column(low), 0) and max(drawn) == min(column(high), width - 1)
    blank = interval_cells({"ratio": None, "ci_low": None, "ci_high": None}, width, span)
    assert blank.strip() == "│"


@pytest.mark.parametrize(
    ("pair", "width"),
    [
        ("north_meadow ÷ brook_end", 17),
        ("long_acre ÷ brook_end", 14),
        ("a ÷ brook_end_long_name", 17),
        ("willow_carr ⇄ ash", 12),
        ("b ÷ a", 5),
    ],
)
def test_a_level_pair_too_wide_keeps_both_names_on_screen(pair, width):
    """Cut at the end, a long level b hid the reference level; each name now gets its share
    (the shorter kept whole up to half the room), with "…" where cut."""
    from foldsift.tui.widgets.comparison_list import _level_pair

    between = " ÷ " if " ÷ " in pair else " ⇄ "
    b, a = pair.split(between)
    text = _level_pair(pair, width)
    assert cell_len(text) <= width
    got_b, got_a = text.split(between)
    for got, name in ((got_b, b), (got_a, a)):
        assert got and (got == name or (got.endswith("…") and name.startswith(got[:-1])))
    if cell_len(min(a, b, key=cell_len)) <= (width - 3) // 2:
        assert min(a, b, key=cell_len) in (got_a, got_b)
