"""The comparison list: a line-API widget that paints only the visible rows of a polars frame.

Sorting and filtering happen in polars outside this widget; it receives the resulting frame
and draws rows on demand, so 50,000 rows cost no more to show than 50.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import polars as pl
from rich.cells import cell_len, set_cell_size
from rich.segment import Segment
from textual import events
from textual.binding import Binding
from textual.geometry import Size
from textual.message import Message
from textual.reactive import reactive
from textual.scroll_view import ScrollView
from textual.strip import Strip

from foldsift.stats.sentence import readable_outcome


def _ratio(value: float | None) -> str:
    if value is None or not math.isfinite(value):
        return "–"
    if 0.01 <= value < 100:
        return f"{value:.2f}"
    return f"{value:.1e}"


def _p(value: float | None) -> str:
    if value is None or not math.isfinite(value):
        return "–"
    if value < 0.0001:
        return "<.0001"
    return f"{value:.4f}" if value < 0.01 else f"{value:.3f}"


def _percent(value: float | None) -> str:
    if value is None or not math.isfinite(value):
        return "–"
    return f"{value:+.0f}%" if abs(value) < 10000 else f"{value:+.0e}%"


@dataclass(frozen=True)
class Column:
    """One list column: title, width, the frame column it sorts on, and its formatter."""

    title: str
    width: int
    sort_on: str
    render: Callable[[dict], str]
    right: bool = False


def _grouping(name: str) -> str:
    """``field within season=spring`` (a stratified grouping) is shown as ``field·spring``."""
    base, _, stratum = name.partition(" within ")
    return f"{base}·{stratum.partition('=')[2]}" if stratum else base


def _decision(row: dict) -> str:
    return row.get("decision") or ""


# Most-read columns first, so an 80-column terminal shows the finding without scrolling.
COLUMNS: tuple[Column, ...] = (
    Column("⚑", 1, "flagged", lambda r: "⚑" if r.get("flagged") else " "),
    Column("outcome", 19, "outcome", lambda r: readable_outcome(r["outcome"])),
    Column("level b ÷ level a", 20, "level_b", lambda r: f"{r['level_b']} ÷ {r['level_a']}"),
    Column("ratio", 6, "ratio", lambda r: _ratio(r["ratio"]), right=True),
    Column("CI", 11, "ci_low", lambda r: f"{_ratio(r['ci_low'])}–{_ratio(r['ci_high'])}"),
    Column("q", 6, "q_bh", lambda r: _p(r["q_bh"]), right=True),
    Column("p", 6, "p_value", lambda r: _p(r["p_value"]), right=True),
    Column(
        "warn",
        4,
        "warning_count",
        lambda r: f"!{r['warning_count']}" if r.get("warning_count") else "",
        right=True,
    ),
    Column("n b/a", 7, "n_min", lambda r: f"{r['n_b']}/{r['n_a']}", right=True),
    Column("grouping", 12, "grouping", lambda r: _grouping(r["grouping"])),
    # Sorted on the size of the change either way (|log ratio|), so 0.25× ranks beside 4×.
    Column("change", 7, "change_size", lambda r: _percent(r["percent_change"]), right=True),
    Column("decision", 6, "decision", _decision),
    Column("✎", 1, "note", lambda r: "✎" if r.get("note") else " "),
)
SEPARATOR = " "


def _cell(text: str, column: Column) -> str:
    """Fit text to the column by terminal cells (wide characters take two)."""
    if cell_len(text) > column.width:
        text = set_cell_size(text, column.width - 1) + "…"
    padding = " " * (column.width - cell_len(text))
    return padding + text if column.right else text + padding


class ComparisonList(ScrollView, can_focus=True):
    """Scrollable list of comparisons with a fixed header row and a row cursor."""

    BINDINGS = [
        Binding("up,k", "cursor_up", "Up", show=False, id="list.up"),
        Binding("down,j", "cursor_down", "Down", show=False, id="list.down"),
        Binding("pageup", "page_up", "Page up", show=False, id="list.page_up"),
        Binding("pagedown", "page_down", "Page down", show=False, id="list.page_down"),
        Binding("home", "first", "First", show=False, id="list.first"),
        Binding("end", "last", "Last", show=False, id="list.last"),
    ]
    COMPONENT_CLASSES = {
        "comparison-list--header",
        "comparison-list--sorted",
        "comparison-list--cursor",
        "comparison-list--flagged",
        "comparison-list--warned",
        "comparison-list--earlier",
    }
    DEFAULT_CSS = """
    ComparisonList { background: $surface; }
    ComparisonList > .comparison-list--header { background: $panel; text-style: bold; }
    ComparisonList > .comparison-list--sorted { background: $panel; text-style: bold underline; }
    ComparisonList > .comparison-list--cursor { background: $accent 40%; }
    ComparisonList:focus > .comparison-list--cursor { background: $accent; color: $text; }
    ComparisonList > .comparison-list--flagged { color: $warning; }
    ComparisonList > .comparison-list--warned { color: $text-muted; }
    ComparisonList > .comparison-list--earlier { text-style: italic; }
    """

    cursor_row: reactive[int] = reactive(0, always_update=True)

    @dataclass
    class Highlighted(Message):
        """The cursor moved to another comparison (key is None when the list is empty)."""

        key: str | None
        index: int

    @dataclass
    class HeaderClicked(Message):
        """A click on a column title: sort on that column."""

        sort_on: str

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self._frame: pl.DataFrame = pl.DataFrame()
        self._line_cache: dict[tuple[int, bool, int], Strip] = {}
        self.sort_on: str = ""
        self.descending: bool = False
        self._total_width = sum(c.width for c in COLUMNS) + len(SEPARATOR) * (len(COLUMNS) - 1)

    # -- data -------------------------------------------------------------------------------
    @property
    def frame(self) -> pl.DataFrame:
        return self._frame

    def show(self, frame: pl.DataFrame, *, keep_key: str | None = None) -> None:
        """Show this (already sorted and filtered) frame; keep the cursor on keep_key."""
        self._frame = frame
        self._line_cache.clear()
        self.virtual_size = Size(self._total_width, frame.height + 1)
        index = 0
        if keep_key is not None and frame.height:
            found = frame.select(pl.arg_where(pl.col("key") == keep_key)).to_series()
            if found.len():
                index = int(found[0])
        self.cursor_row = min(index, max(frame.height - 1, 0))
        self.refresh()

    def update_row(self, frame: pl.DataFrame) -> None:
        """Same rows, new review values (a flag, decision or note changed)."""
        self._frame = frame
        self._line_cache.clear()
        self.refresh()

    @property
    def current_key(self) -> str | None:
        if not self._frame.height:
            return None
        return self._frame["key"][self.cursor_row]

    # -- cursor -----------------------------------------------------------------------------
    def validate_cursor_row(self, value: int) -> int:
        return max(0, min(value, max(self._frame.height - 1, 0)))

    def watch_cursor_row(self, old: int, new: int) -> None:
        self._line_cache = {k: v for k, v in self._line_cache.items() if k[0] not in (old, new)}
        self._scroll_cursor_into_view()
        self.refresh()
        self.post_message(self.Highlighted(self.current_key, new))

    def _scroll_cursor_into_view(self) -> None:
        visible = max(self.size.height - 1, 1)
        top = int(self.scroll_y)
        if self.cursor_row < top:
            self.scroll_to(y=self.cursor_row, animate=False, immediate=True)
        elif self.cursor_row >= top + visible:
            self.scroll_to(y=self.cursor_row - visible + 1, animate=False, immediate=True)

    def action_cursor_up(self) -> None:
        self.cursor_row -= 1

    def action_cursor_down(self) -> None:
        self.cursor_row += 1

    def action_page_up(self) -> None:
        self.cursor_row -= max(self.size.height - 2, 1)

    def action_page_down(self) -> None:
        self.cursor_row += max(self.size.height - 2, 1)

    def action_first(self) -> None:
        self.cursor_row = 0

    def action_last(self) -> None:
        self.cursor_row = self._frame.height - 1

    def on_resize(self) -> None:
        self._line_cache.clear()

    async def on_click(self, event: events.Click) -> None:
        x = event.x + int(self.scroll_x)
        if event.y == 0:
            position = 0
            for column in COLUMNS:
                if position <= x < position + column.width + len(SEPARATOR):
                    self.post_message(self.HeaderClicked(column.sort_on))
                    return
                position += column.width + len(SEPARATOR)
            return
        row = event.y - 1 + int(self.scroll_y)
        if 0 <= row < self._frame.height:
            self.cursor_row = row
        self.focus()

    # -- painting ---------------------------------------------------------------------------
    def _header(self) -> Strip:
        base = self.get_component_rich_style("comparison-list--header")
        sorted_style = self.get_component_rich_style("comparison-list--sorted")
        segments = []
        for index, column in enumerate(COLUMNS):
            title = column.title
            is_sorted = column.sort_on == self.sort_on
            if is_sorted:
                # Shorten the title, not the arrow, when the column is narrow.
                title = title[: column.width - 1] + ("↓" if self.descending else "↑")
            segments.append(Segment(_cell(title, column), sorted_style if is_sorted else base))
            if index < len(COLUMNS) - 1:
                segments.append(Segment(SEPARATOR, base))
        return Strip(segments)

    def render_line(self, y: int) -> Strip:
        scroll_x, scroll_y = self.scroll_offset
        width = self.size.width
        if y == 0:
            header_style = self.get_component_rich_style("comparison-list--header")
            strip = self._header().extend_cell_length(scroll_x + width, header_style)
            return strip.crop(scroll_x, scroll_x + width)
        index = y - 1 + scroll_y
        if index >= self._frame.height:
            return Strip.blank(width, self.rich_style)
        selected = index == self.cursor_row
        cache_key = (index, selected, width + 10000 * scroll_x)
        cached = self._line_cache.get(cache_key)
        if cached is not None:
            return cached
        row = self._frame.row(index, named=True)
        style = self.rich_style
        if row.get("flagged"):
            style += self.get_component_rich_style("comparison-list--flagged")
        elif row.get("warning_count"):
            style += self.get_component_rich_style("comparison-list--warned")
        if row.get("on_earlier_data"):
            style += self.get_component_rich_style("comparison-list--earlier")
        if selected:
            style += self.get_component_rich_style("comparison-list--cursor")
        text = SEPARATOR.join(_cell(column.render(row), column) for column in COLUMNS)
        strip = Strip([Segment(text, style)]).extend_cell_length(scroll_x + width, style)
        strip = strip.crop(scroll_x, scroll_x + width)
        if len(self._line_cache) > 500:
            self._line_cache.clear()
        self._line_cache[cache_key] = strip
        return strip
