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

from foldsift.stats import columns as col
from foldsift.stats.columns import ReviewedRow, reviewed_row
from foldsift.stats.formatting import any_fold, interval_text, p_text, percent_text, ratio_text

from .plain import visible


@dataclass(frozen=True)
class Column:
    """One list column: title, width, the frame column it sorts on, and its formatter."""

    title: str
    width: int
    sort_on: str
    render: Callable[[ReviewedRow], str]
    right: bool = False


def _grouping(row: ReviewedRow) -> str:
    """A grouping compared inside strata reads ``field·spring``."""
    stratum = row["stratum"]
    return row["grouping"] if stratum is None else f"{row['grouping']}·{stratum}"


def _warnings(row: ReviewedRow) -> str:
    return f"!{row['warning_count']}" if row["warning_count"] else ""


INTERVAL = "1 on axis"
#: The half-width of the picture's log axis: the 95th percentile of the rows' farthest CI
#: bound from 1, within these limits (2-fold to 10,000-fold).
SPAN_LIMITS = (math.log(2.0), math.log(1e4))


def axis_span(frame: pl.DataFrame) -> float:
    """How far from ratio 1, on the log scale, the pictures of these rows reach."""
    if not frame.height or col.CI_LOW not in frame.columns:
        return SPAN_LIMITS[0]
    reach = frame.select(
        pl.max_horizontal(pl.col(col.CI_LOW).log().abs(), pl.col(col.CI_HIGH).log().abs())
        .fill_nan(None)
        .quantile(0.95)
    ).item()
    if reach is None or not math.isfinite(reach):
        return SPAN_LIMITS[0]
    return min(max(float(reach), SPAN_LIMITS[0]), SPAN_LIMITS[1])


def interval_cells(row: ReviewedRow, width: int, span: float) -> str:
    """The row's CI as a bar on a log axis from exp(-span) to exp(span): ``│`` at 1, ``─``
    for the interval, ``●`` at the ratio, ``◀``/``▶`` where it runs past the edge."""
    cells = [" "] * width
    middle = width // 2
    cells[middle] = "│"
    ratio, low, high = row["ratio"], row["ci_low"], row["ci_high"]
    if ratio is None or ratio <= 0:
        return "".join(cells)

    def at(value: float | None, default: int) -> int:
        if value is None or value <= 0 or not math.isfinite(value):
            return default
        return round(middle + math.log(value) / span * middle)

    first, last = at(low, -1), at(high, width)
    for i in range(max(first, 0), min(last, width - 1) + 1):
        cells[i] = "─"
    if cells[middle] == "─":
        cells[middle] = "┼"  # the interval reaches ratio 1
    if first < 0:
        cells[0] = "◀"
    if last > width - 1:
        cells[-1] = "▶"
    point = at(ratio, middle)
    if 0 <= point < width:
        cells[point] = "●"
    return "".join(cells)


def _ratio(row: ReviewedRow) -> str:
    """The ratio, as a fold when its CI is written as folds (one rule in one row)."""
    return ratio_text(row["ratio"], any_fold(row["ratio"], row["ci_low"], row["ci_high"]))


def _levels(row: ReviewedRow) -> str:
    """``b ÷ a``; ``b ⇄ a`` when the levels were compared within the same units (paired)."""
    between = "⇄" if row["pair_by"] is not None else "÷"
    return f"{row['level_b']} {between} {row['level_a']}"


def _class(row: ReviewedRow) -> str:
    return str(row["band_class"] or "")


# Every column the list can show, in display order. The list shows the REQUIRED ones at any
# width (so flag, decision and note are on screen at 80 columns), lets the outcome and level
# names take the width their longest names need, and adds the others, in OPTIONAL order,
# while they fit (``layout``).
COLUMNS: tuple[Column, ...] = (
    Column("⚑", 1, col.FLAGGED, lambda r: "⚑" if r["flagged"] else " "),
    Column("outcome", 12, col.OUTCOME, lambda r: r["outcome_label"]),
    Column("level b ÷ level a", 14, col.LEVEL_B, _levels),
    Column("ratio", 7, col.RATIO, _ratio, right=True),
    Column("CI", 12, col.CI_LOW, lambda r: interval_text(r["ci_low"], r["ci_high"])),
    # A picture of the CI on one log axis shared by every row (``interval_cells``).
    Column(INTERVAL, 11, col.CI_FOLD, lambda r: ""),
    Column("q", 7, col.Q_BH, lambda r: p_text(r["q_bh"]), right=True),
    Column("p", 7, col.P_VALUE, lambda r: p_text(r["p_value"]), right=True),
    Column("warn", 4, col.WARNING_COUNT, _warnings, right=True),
    Column("n b/a", 11, col.N_MIN, lambda r: f"{r['n_b']}/{r['n_a']}", right=True),
    Column("grouping", 12, col.GROUPING, _grouping),
    # Sorted on the size of the change either way (|log ratio|), so 0.25× ranks beside 4×.
    Column("change", 6, col.CHANGE_SIZE, lambda r: percent_text(r["percent_change"]), right=True),
    Column("class", 16, col.BAND_CLASS, _class),
    Column("method", 14, "method", lambda r: str(r["method"])),
    Column("decision", 8, col.DECISION, lambda r: r["decision"] or ""),
    Column("✎", 1, col.NOTE, lambda r: "✎" if r["note"] else " "),
)
REQUIRED = ("⚑", "outcome", "level b ÷ level a", "ratio", "CI", "q", "warn", "decision", "✎")
#: The other columns, most useful first: added while the terminal has room for them.
OPTIONAL = (INTERVAL, "n b/a", "p", "grouping", "change", "class", "method")
#: The widest the name columns grow (longer names are cut with "…").
NAME_LIMIT = 40


def layout(width: int, natural: dict[str, int], sort_on: str = "") -> tuple[Column, ...]:
    """The columns to show in ``width`` cells: the required ones and the one sorted on, the
    name columns grown toward their ``natural`` widths (the longest name, at most
    NAME_LIMIT: names are cut only when the terminal has no room for them), then optional
    columns while they fit."""
    required = (*REQUIRED, "grouping") if natural.get("grouping") else REQUIRED
    sizes = {c.title: c.width for c in COLUMNS if c.title in required}
    widths = {c.title: c.width for c in COLUMNS}
    names = ("outcome", "level b ÷ level a")

    def used() -> int:
        return sum(sizes.values()) + len(SEPARATOR) * (len(sizes) - 1)

    def grow(limit: dict[str, int]) -> None:
        """Share the room left between the two name columns, in proportion to what each
        still lacks of ``limit``."""
        room = width - used()
        lacking = {n: max(limit[n] - sizes[n], 0) for n in names}
        total = sum(lacking.values())
        if room <= 0 or total == 0:
            return
        share = {n: lacking[n] * min(room, total) // total for n in names}
        share[names[0]] += min(room, total) - sum(share.values())
        for name in names:
            sizes[name] += min(share[name], lacking[name])

    for column in COLUMNS:
        if column.sort_on == sort_on and column.title not in sizes:
            sizes[column.title] = column.width
    wanted = {n: min(max(natural.get(n, 0), widths[n]), NAME_LIMIT) for n in names}
    grow(wanted)
    for title in OPTIONAL:
        if used() + len(SEPARATOR) + widths[title] <= width:
            sizes[title] = widths[title]
    return tuple(
        Column(c.title, sizes[c.title], c.sort_on, c.render, c.right)
        for c in COLUMNS
        if c.title in sizes
    )


#: Every column the list sorts on, in the order ``s`` steps through them.
SORTABLE: tuple[str, ...] = tuple(column.sort_on for column in COLUMNS)
#: How the status line names each sort column.
SORT_NAMES: dict[str, str] = {column.sort_on: column.title for column in COLUMNS} | {
    col.FLAGGED: "flag",
    col.NOTE: "note",
    col.WARNING_COUNT: "warnings",
    col.LEVEL_B: "levels",
    col.N_MIN: "smaller n",
    col.CI_LOW: "CI",
    col.CHANGE_SIZE: "size of change",
}
SEPARATOR = " "


def _clip(text: str, width: int) -> str:
    """``text`` cut to ``width`` cells with "…" when it is longer."""
    if cell_len(text) <= width:
        return text
    return set_cell_size(text, max(width - 1, 0)) + "…" if width > 0 else ""


def _level_pair(text: str, width: int) -> str:
    """A level pair ``b ÷ a`` too wide for its column: both names are cut, each to its share
    of the width (the longer one gives up more), so the reference level stays on screen."""
    for between in (" ÷ ", " ⇄ "):
        b, found, a = text.partition(between)
        if found:
            room = width - cell_len(between)
            short = min(cell_len(b), cell_len(a), room // 2)
            b_room = room - min(cell_len(a), room - short)
            return f"{_clip(b, b_room)}{between}{_clip(a, room - b_room)}"
    return _clip(text, width)


def _cell(text: str, column: Column) -> str:
    """Fit text to the column by terminal cells (wide characters take two). Names come
    from the data: control characters show as symbols (rows are painted as plain
    segments, so nothing in them is read as markup). A level pair is cut in both names."""
    text = visible(text)
    if cell_len(text) > column.width and column.sort_on == col.LEVEL_B and text != column.title:
        text = _level_pair(text, column.width)
    if cell_len(text) > column.width:
        text = set_cell_size(text, column.width - 1) + "…"
    padding = " " * (column.width - cell_len(text))
    return padding + text if column.right else text + padding


def _picture(width: int, span: float) -> Callable[[ReviewedRow], str]:
    def render(row: ReviewedRow) -> str:
        return interval_cells(row, width, span)

    return render


def _natural_widths(frame: pl.DataFrame) -> dict[str, int]:
    """The cells the longest outcome label and level pair of the frame take."""
    if not frame.height or col.OUTCOME_LABEL not in frame.columns:
        return {}
    # Comparisons within strata need the grouping·stratum column to be read.
    several = frame[col.STRATUM].null_count() < frame.height
    widths = frame.select(
        pl.col(col.OUTCOME_LABEL).str.len_chars().max().alias("outcome"),
        (pl.col(col.LEVEL_B).str.len_chars() + pl.col(col.LEVEL_A).str.len_chars() + 3)
        .max()
        .alias("level b ÷ level a"),
    ).row(0, named=True)
    named = {name: int(value or 0) for name, value in widths.items()}
    return named | ({"grouping": 1} if several else {})


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
    #: The column the frame is sorted on and its direction, shown by an arrow in the header.
    sort_on: reactive[str] = reactive("")
    descending: reactive[bool] = reactive(False)

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
        self._natural: dict[str, int] = {}
        self._columns: tuple[Column, ...] = layout(80, {})

    @property
    def columns(self) -> tuple[Column, ...]:
        """The columns shown now, with their widths (they follow the widget's width)."""
        return self._columns

    @property
    def _total_width(self) -> int:
        return sum(c.width for c in self._columns) + len(SEPARATOR) * (len(self._columns) - 1)

    def _lay_out(self) -> None:
        # The content's width: the vertical scroll bar takes its cells from the widget's.
        width = self.size.width - self.styles.scrollbar_size_vertical
        span = axis_span(self._frame)
        self._columns = tuple(
            Column(c.title, c.width, c.sort_on, _picture(c.width, span), c.right)
            if c.title == INTERVAL
            else c
            for c in layout(max(width, 40), self._natural, self.sort_on)
        )
        self._line_cache.clear()
        self.virtual_size = Size(self._total_width, self._frame.height + 1)

    # -- data -------------------------------------------------------------------------------
    @property
    def frame(self) -> pl.DataFrame:
        return self._frame

    def show(self, frame: pl.DataFrame, *, keep_key: str | None = None) -> None:
        """Show this (already sorted and filtered) frame; keep the cursor on keep_key."""
        self._frame = frame
        self._natural = _natural_widths(frame)
        self._lay_out()
        index = 0
        if keep_key is not None and frame.height:
            found = frame.select(pl.arg_where(pl.col(col.KEY) == keep_key)).to_series()
            if found.len():
                index = int(found[0])
        self.cursor_row = min(index, max(frame.height - 1, 0))
        self.refresh()

    def update_rows(self, frame: pl.DataFrame) -> None:
        """Same rows in the same order, new review values (a flag, decision or note changed):
        the cursor stays where it is."""
        self._frame = frame
        self._line_cache.clear()
        self.refresh()

    @property
    def current_key(self) -> str | None:
        if not self._frame.height:
            return None
        key: str = self._frame[col.KEY][self.cursor_row]
        return key

    @property
    def current_row(self) -> ReviewedRow | None:
        if not self._frame.height:
            return None
        return reviewed_row(self._frame, self.cursor_row)

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
        self._lay_out()

    def watch_sort_on(self) -> None:
        self._lay_out()
        self.refresh()

    async def on_click(self, event: events.Click) -> None:
        x = event.x + int(self.scroll_x)
        if event.y == 0:
            position = 0
            for column in self._columns:
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
        for index, column in enumerate(self._columns):
            title = column.title
            is_sorted = column.sort_on == self.sort_on
            if is_sorted:
                # Shorten the title, not the arrow, when the column is narrow.
                title = title[: column.width - 1] + ("↓" if self.descending else "↑")
            segments.append(Segment(_cell(title, column), sorted_style if is_sorted else base))
            if index < len(self._columns) - 1:
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
        row = reviewed_row(self._frame, index)
        style = self.rich_style
        if row["flagged"]:
            style += self.get_component_rich_style("comparison-list--flagged")
        elif row["warning_count"]:
            style += self.get_component_rich_style("comparison-list--warned")
        if row["on_earlier_data"]:
            style += self.get_component_rich_style("comparison-list--earlier")
        if selected:
            style += self.get_component_rich_style("comparison-list--cursor")
        text = SEPARATOR.join(_cell(column.render(row), column) for column in self._columns)
        strip = Strip([Segment(text, style)]).extend_cell_length(scroll_x + width, style)
        strip = strip.crop(scroll_x, scroll_x + width)
        if len(self._line_cache) > 500:
            self._line_cache.clear()
        self._line_cache[cache_key] = strip
        return strip
