"""Overviews of every shown comparison: their intervals on one ratio axis, and the evidence
map (the size of each change against the strength of its evidence).

Both draw the frame the list shows (filtered and sorted) and share the list's cursor. The
screen says where the cursor is (``follow``); moving in an overview moves the list's cursor
through ``move``, a call the screen hands down. It is a call rather than a message so that
the list's cursor has moved before the next key is read: keys typed fast each start from
the row the one before them reached.

Both paint with the line API: the interval view paints only the rows in sight; the map bins
its points into the cell grid with numpy once per frame and size.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Literal, get_args

import numpy as np
import polars as pl
from rich.cells import cell_len, set_cell_size
from rich.segment import Segment
from rich.style import Style
from textual import events
from textual.binding import Binding
from textual.geometry import Size
from textual.scroll_view import ScrollView
from textual.strip import Strip
from textual.widget import Widget

from foldsift.stats import columns as col
from foldsift.stats.formatting import interval_text, level_text, p_text, ratio_text

from .plain import visible

#: What the review screen's body shows: the list (with the detail), every shown row's
#: interval, or the evidence map. ``v`` steps through them.
ViewName = Literal["list", "intervals", "map"]
VIEW_NAMES: tuple[ViewName, ...] = get_args(ViewName)

#: A finding passes when its q is below this.
Q_THRESHOLD = 0.05
#: The widest fold either axis shows (10,000 either way, in log2); beyond it, marks at the edge.
FOLD_CAP = math.log2(10_000)
#: The top of the map's strength axis (-log10 q); stronger evidence is drawn in the top row.
STRENGTH_CAP = 50.0

# Glyphs of the interval view.
PASS, NOT_PASS = "●", "○"
LOW_END, HIGH_END, SPAN, CROSS = "├", "┤", "─", "┼"
ONE, BAND = "│", "░"
BEYOND_LEFT, BEYOND_RIGHT = "◀", "▶"
NO_RATIO = "no ratio"
CURSOR = "▸"
# Glyphs of the map: points by how many share a cell, the selected point, the lines.
DENSITY: tuple[tuple[int, str], ...] = ((1, "·"), (2, "•"), (5, "▪"), (20, "■"), (100, "█"))
SELECTED = "◆"
Q_LINE, TWO_FOLD = "╌", "┊"

#: One character per cell says how the cell is styled: its component class.
CODE_CLASSES: dict[str, str] = {
    "b": "overview--band",
    "o": "overview--one",
    "i": "overview--interval",
    "p": "overview--pass",
    "n": "overview--point",
    "c": "overview--clip",
    "a": "overview--axis",
    "m": "overview--muted",
    "s": "overview--selected",
    "h": "overview--header",
}
COMPONENTS = {*CODE_CLASSES.values(), "overview--cursor"}

#: Tick ladders on a fold axis, finest first: (base, every how many powers).
LADDERS: tuple[tuple[float, int], ...] = ((2.0, 1), (2.0, 2), (10.0, 1), (10.0, 2), (10.0, 4))
#: Powers of two whose plain decimals are longer than this are not used as ticks.
LONGEST_TICK = 6


# -- axes --------------------------------------------------------------------------------
def fold_label(fold: float) -> str:
    """A fold in plain digits: ``0.25``, ``1``, ``10000`` (never ``1e4``)."""
    if fold >= 1:
        return f"{fold:.0f}"
    return f"{fold:.12f}".rstrip("0").rstrip(".")


@dataclass(frozen=True)
class Axis:
    """The log2 range ``low``..``high`` across ``cells`` columns. Interval columns round to
    the nearest cell (``low`` at 0, ``high`` at cells - 1); a ``binned`` axis splits the
    range into ``cells`` equal bins, as the map does."""

    low: float
    high: float
    cells: int
    binned: bool = False

    def edges(self) -> np.ndarray:
        return np.linspace(self.low, self.high, self.cells + 1)

    def place(self, log2_values: np.ndarray) -> np.ndarray:
        """The column of each value: nearest cell (beyond the range: outside 0..cells-1;
        nan stays nan), or for a binned axis the bin (beyond: the edge bins)."""
        values = np.asarray(log2_values, dtype=float)
        if self.binned:
            return _bins(values, self.edges()).astype(float)
        scale = (self.cells - 1) / (self.high - self.low)
        return np.rint((values - self.low) * scale)

    def column(self, log2_value: float) -> int | None:
        """The column of one value, or None when it falls outside the axis."""
        if not self.low <= log2_value <= self.high:
            return None
        return int(self.place(np.array([log2_value]))[0])


@dataclass(frozen=True)
class Tick:
    """A tick: its column on the axis, its label and where the label starts (one cell
    beyond either end of the axis is allowed)."""

    column: int
    label: str
    start: int


def _ladder(axis: Axis, base: float, every: int) -> list[Tick] | None:
    """Ticks at every ``every``-th power of ``base``, or None when their labels would be too
    long or would not fit apart."""
    unit = every * math.log2(base)
    first, last = math.ceil(axis.low / unit), math.floor(axis.high / unit)
    folds = [base ** (power * every) for power in range(first, last + 1)]
    labels = [fold_label(fold) for fold in folds]
    if base == 2 and any(len(label) > LONGEST_TICK for label in labels):
        return None
    columns = axis.place(np.log2(np.array(folds, dtype=float)))
    ticks, end = [], -2
    for column, label in zip(columns.astype(int), labels, strict=True):
        start = min(max(int(column) - (len(label) - 1) // 2, -1), axis.cells + 1 - len(label))
        if start <= end:  # touches the label before it
            return None
        ticks.append(Tick(int(column), label, start))
        end = start + len(label)
    return ticks


def fold_ticks(axis: Axis) -> list[Tick]:
    """Ticks at plain folds (0.25, 0.5, 1, 2, 4 …; 0.01, 0.1, 1, 10 … on wider ranges), the
    finest ladder whose labels fit apart; none when not even 1 fits."""
    for base, every in LADDERS:
        ticks = _ladder(axis, base, every)
        if ticks is not None:
            return ticks
    return []


def _padded(low: float, high: float) -> tuple[float, float]:
    low, high = max(low, -FOLD_CAP), min(high, FOLD_CAP)
    room = 0.03 * (high - low)
    return low - room, high + room


def _reach(values: np.ndarray, share: float) -> tuple[float, float] | None:
    """The ``share`` and ``1 - share`` quantiles of the finite values (None if none)."""
    finite = values[np.isfinite(values)]
    if not finite.size:
        return None
    if not share:
        return float(finite.min()), float(finite.max())
    low, high = np.quantile(finite, [share, 1 - share])
    return float(low), float(high)


def _bounds_span(
    core: tuple[float, float], low: np.ndarray, high: np.ndarray, share: float
) -> tuple[float, float]:
    lows, highs = _reach(low, share), _reach(high, share)
    return (
        min(core[0], lows[0]) if lows else core[0],
        max(core[1], highs[1]) if highs else core[1],
    )


def interval_span(
    point: np.ndarray, low: np.ndarray, high: np.ndarray, band: tuple[float, float]
) -> tuple[float, float]:
    """The log2 range of the interval axis: every point, ratio 1, the band, at least 0.5 to
    2, and every finite bound, unless the widest bounds would squeeze the rest (the span
    grows by more than half over that of the 1st to 99th percentiles): then the bounds
    beyond those percentiles run past the edges. Never beyond 1/10,000 to 10,000."""
    left, right = [-1.0, math.log2(band[0])], [1.0, math.log2(band[1])]
    points = _reach(point, 0.0)
    if points is not None:
        left.append(points[0])
        right.append(points[1])
    core = (min(left), max(right))
    full, robust = _bounds_span(core, low, high, 0.0), _bounds_span(core, low, high, 0.01)
    chosen = full if full[1] - full[0] <= 1.5 * (robust[1] - robust[0]) else robust
    return _padded(*chosen)


def map_span(point: np.ndarray, band: tuple[float, float]) -> tuple[float, float]:
    """The log2 range of the map: every point, the band and 0.5 to 2, within the cap."""
    finite = point[np.isfinite(point)]
    low = min(-1.0, math.log2(band[0]), float(finite.min()) if finite.size else 0.0)
    high = max(1.0, math.log2(band[1]), float(finite.max()) if finite.size else 0.0)
    return _padded(low, high)


def strength_top(strength: np.ndarray) -> float:
    """The top of the strength axis: a little above the strongest finite evidence, at
    least 2 (q = 0.01) and at most ``STRENGTH_CAP``."""
    finite = strength[np.isfinite(strength)]
    strongest = float(finite.max()) if finite.size else 0.0
    return min(max(strongest * 1.05, 2.0), STRENGTH_CAP)


# -- the shown rows ----------------------------------------------------------------------
def _log2(frame: pl.DataFrame, name: str) -> np.ndarray:
    values = frame[name].cast(pl.Float64).to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log2(values)


#: The unit at the end of a readable outcome name (the axes show ratios, which have none).
UNIT_SUFFIX = re.compile(r" \([^()]*\)$")
#: A name shortened to fit keeps at least this many cells.
SHORTEST = 4


def _shortened(text: str, cells: int) -> str:
    if cell_len(text) <= cells:
        return text
    return set_cell_size(text, max(cells - 1, 1)) + "…"


def short_label(outcome: str, levels: list[str], width: int) -> str:
    """``outcome b÷a ·stratum`` in at most ``width`` cells: the longest level is shortened
    a cell at a time (each keeps ``SHORTEST`` cells), then the outcome, then the whole."""
    sizes = [cell_len(level) for level in levels]
    fixed = cell_len(outcome) + bool(outcome) + 1 + 2 * (len(levels) > 2)
    excess = fixed + sum(sizes) - width
    while excess > 0 and max(sizes) > SHORTEST:
        sizes[sizes.index(max(sizes))] -= 1
        excess -= 1
    short = [_shortened(level, size) for level, size in zip(levels, sizes, strict=True)]
    pair = f"{short[0]}÷{short[1]}" + (f" ·{short[2]}" if len(short) > 2 else "")
    if excess > 0 and outcome:
        outcome = _shortened(outcome, max(cell_len(outcome) - excess, SHORTEST))
    return _shortened(f"{outcome} {pair}" if outcome else pair, width)


NAME_COLUMNS = (col.OUTCOME, col.OUTCOME_LABEL, col.LEVEL_B, col.LEVEL_A, col.STRATUM)


@dataclass(frozen=True)
class ShownRows:
    """What the overviews draw of the list's frame: log2 ratio and bounds (nan where
    missing, ±inf at 0 and infinity), q, and the names for the labels."""

    frame: pl.DataFrame
    ratio: np.ndarray
    point: np.ndarray
    low: np.ndarray
    high: np.ndarray
    q: np.ndarray
    names: tuple[pl.Series, ...] = field(repr=False)

    @classmethod
    def of(cls, frame: pl.DataFrame) -> ShownRows:
        if not frame.height or col.RATIO not in frame.columns:
            empty = np.empty(0)
            names = tuple(pl.Series(name, [], dtype=pl.String) for name in NAME_COLUMNS)
            return cls(frame, empty, empty, empty, empty, empty, names)
        return cls(
            frame,
            frame[col.RATIO].cast(pl.Float64).to_numpy(),
            _log2(frame, col.RATIO),
            _log2(frame, col.CI_LOW),
            _log2(frame, col.CI_HIGH),
            frame[col.Q_BH].cast(pl.Float64).to_numpy(),
            # Columns, not a frame: selecting from a frame of many chunks costs more.
            tuple(frame[name] for name in NAME_COLUMNS),
        )

    @property
    def count(self) -> int:
        return int(self.point.size)

    def passes(self, threshold: float) -> np.ndarray:
        """Rows whose q is below the threshold (a missing q never passes)."""
        with np.errstate(invalid="ignore"):
            return np.asarray(self.q < threshold)

    def strength(self) -> np.ndarray:
        """-log10 q (inf at q = 0, nan where q is missing)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.asarray(-np.log10(self.q))

    def same_rows(self, frame: pl.DataFrame) -> bool:
        """The same comparisons in the same order (reviews may differ: the overviews do not
        show them)."""
        mine = self.frame
        if mine.height != frame.height or col.KEY not in frame.columns:
            return False
        return col.KEY in mine.columns and mine[col.KEY].equals(frame[col.KEY])

    def label(self, index: int, width: int = 200, *, outcome: bool = True) -> str:
        """``copper north÷south`` (``·spring`` inside a stratum) in at most ``width``
        cells; the levels alone without ``outcome``. Control characters show as symbols."""
        _, label, level_b, level_a, stratum = (names[index] for names in self.names)
        parts = [visible(level_b), visible(level_a)] + ([visible(stratum)] if stratum else [])
        name = visible(UNIT_SUFFIX.sub("", label)) if outcome else ""
        return short_label(name, parts, width)

    def outcome_order(self) -> tuple[np.ndarray, np.ndarray]:
        """Rows grouped by outcome, the outcomes in the order of their first row and the
        rows of each in list order: (list index per position, True where a group starts)."""
        codes = (
            self.names[0]
            .to_frame()
            .with_row_index("index")
            .with_columns(pl.col("index").min().over(col.OUTCOME).alias("first"))
            .sort("first", "index")
        )
        order = codes["index"].to_numpy()
        first = codes["first"].to_numpy()
        starts = np.ones(order.size, dtype=bool)
        starts[1:] = first[1:] != first[:-1]
        return order, starts


# -- drawing one interval ----------------------------------------------------------------
@dataclass(frozen=True)
class Cells:
    """A line of cells: its text and, cell for cell, its style codes (``CODE_CLASSES``)."""

    text: str
    codes: str


def interval_background(axis: Axis, band: tuple[float, float]) -> Cells:
    """The cells behind every interval: the band shaded, a line at ratio 1."""
    text, codes = [" "] * axis.cells, [" "] * axis.cells
    first, last = axis.place(np.log2(np.array(band, dtype=float)))
    for cell in range(max(int(first), 0), min(int(last), axis.cells - 1) + 1):
        text[cell], codes[cell] = BAND, "b"
    one = axis.column(0.0)
    if one is not None:
        text[one], codes[one] = ONE, "o"
    return Cells("".join(text), "".join(codes))


def _interval(text: list[str], codes: list[str], start: float, end: float) -> None:
    """The CI from column ``start`` to ``end`` on a row with one cell more on each side; a
    bound that is missing (nan) or beyond the axis runs to the edge, with an arrow in the
    cell beyond it."""
    last = len(text) - 3
    open_left, open_right = not start >= 0, not end <= last
    first, final = (0 if open_left else int(start)), (last if open_right else int(end))
    for cell in range(first + 1, final + 2):  # empty when the CI lies beyond one edge
        text[cell] = CROSS if codes[cell] == "o" else SPAN
        codes[cell] = "i"
    if first <= final and not open_left:
        text[first + 1] = LOW_END
    if first <= final and not open_right:
        text[final + 1] = HIGH_END
    if open_left:
        text[0], codes[0] = BEYOND_LEFT, "c"
    if open_right:
        text[-1], codes[-1] = BEYOND_RIGHT, "c"


def draw_interval(
    axis: Axis, back: Cells, point: float, low: float, high: float, passes: bool
) -> Cells:
    """One row's interval, one cell beyond each end of the axis: the point (● when q passes,
    ○ when not) and its CI (├──┤). A bound beyond the axis, infinite or missing runs to the
    edge and shows ◀ or ▶ in the cell beyond it; a point beyond the axis shows in that
    cell. No ratio reads "no ratio"."""
    text, codes = [" ", *back.text, " "], [" ", *back.codes, " "]
    if math.isnan(point):
        shown = NO_RATIO[: axis.cells]
        text[1 : 1 + len(shown)], codes[1 : 1 + len(shown)] = list(shown), ["m"] * len(shown)
        return Cells("".join(text), "".join(codes))
    start, end, where = (float(c) for c in axis.place(np.array([low, high, point])))
    _interval(text, codes, start, end)
    last = axis.cells - 1
    cell = 0 if where < 0 else last + 2 if where > last else int(where) + 1
    text[cell], codes[cell] = (PASS, "p") if passes else (NOT_PASS, "n")
    return Cells("".join(text), "".join(codes))


def tick_lines(axis: Axis, back: Cells | None = None) -> tuple[Cells, Cells]:
    """The axis under the plot (one cell beyond each end, as the rows): a rule with ┴ at
    each tick (the band shaded when ``back`` is given), and the fold labels."""
    rule, codes = [" ", *(SPAN * axis.cells), " "], [" ", *("a" * axis.cells), " "]
    if back is not None:
        codes[1:-1] = ["b" if code == "b" else "a" for code in back.codes]
    labels = [" "] * (axis.cells + 2)
    for tick in fold_ticks(axis):
        rule[tick.column + 1] = "┴"
        labels[tick.start + 1 : tick.start + 1 + len(tick.label)] = list(tick.label)
    return Cells("".join(rule), "".join(codes)), Cells("".join(labels), "a" * len(labels))


# -- the map's grid ----------------------------------------------------------------------
def _bins(values: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """``searchsorted(edges, values, "right") - 1`` within the bins (values beyond the edges
    in the edge bins; nan anywhere). Equally spaced edges are found by arithmetic, checked
    against the edges, which is four times faster at 50,000 points."""
    count = edges.size - 1
    steps = np.diff(edges)
    if not np.allclose(steps, steps[0]):
        return np.clip(np.searchsorted(edges, values, side="right") - 1, 0, count - 1)
    inside = np.nan_to_num(np.clip(values, edges[0], edges[-1]), nan=edges[0])
    found = np.floor((inside - edges[0]) / steps[0]).astype(np.intp)
    np.clip(found, 0, count - 1, out=found)
    found -= inside < edges[found]
    found += inside >= edges[found + 1]
    return np.clip(found, 0, count - 1)


def bin_points(
    x: np.ndarray, y: np.ndarray, x_edges: np.ndarray, y_edges: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each point's cell (column, row from the bottom; -1 where x or y is missing) and the
    count per cell as ``counts[row, column]``: the cells numpy.histogram2d gives for points
    within the edges; points beyond them are counted in the edge cells."""
    plotted = ~(np.isnan(x) | np.isnan(y))
    columns, rows = len(x_edges) - 1, len(y_edges) - 1
    column, row = _bins(x, x_edges), _bins(y, y_edges)
    column, row = np.where(plotted, column, -1), np.where(plotted, row, -1)
    cells = row[plotted] * columns + column[plotted]
    counts = np.bincount(cells, minlength=columns * rows).reshape(rows, columns)
    return column, row, counts


def density_glyphs(counts: np.ndarray) -> np.ndarray:
    """A glyph per cell by how many points share it ('' where none)."""
    floors = np.array([floor for floor, _ in DENSITY])
    glyphs = np.array(["", *(glyph for _, glyph in DENSITY)])
    return glyphs[np.searchsorted(floors, counts, side="right")]


Direction = Literal["left", "right", "up", "down"]


def nearest(column: np.ndarray, row: np.ndarray, current: int, direction: Direction) -> int | None:
    """The point nearest to point ``current`` in ``direction`` (rows count from the top),
    in another column (left, right) or row (up, down); cells are about twice as tall as
    wide, and a point off to the side counts twice its offset. Ties go to the first in list
    order. None when there is none that way; the first plotted point when ``current`` is
    not plotted."""
    plotted = column >= 0
    if not 0 <= current < column.size or not plotted[current]:
        found = np.flatnonzero(plotted)
        return int(found[0]) if found.size else None
    across = column - column[current]
    down = 2 * (row - row[current])
    ahead, side = {
        "right": (across, down),
        "left": (-across, down),
        "down": (down, across),
        "up": (-down, across),
    }[direction]
    score = np.where(plotted & (ahead > 0), ahead + 2 * np.abs(side), np.inf)
    best = int(np.argmin(score))
    return best if math.isfinite(score[best]) else None


@dataclass(frozen=True)
class StrengthAxis:
    """The map's rows, up the strength of evidence (-log10 q). With three rows or more, a
    row of its own holds the q line: the rows above it hold exactly the points whose q
    passes (``threshold``..``top``), those below the others (0..``threshold``)."""

    top: float
    threshold: float  # as -log10 q
    above: int
    below: int
    line: bool

    @property
    def rows(self) -> int:
        return self.above + int(self.line) + self.below

    def edges(self) -> np.ndarray:
        """Bin edges, ascending: the rows below the line, then those above it."""
        if not self.line:
            return np.linspace(0.0, self.top, self.above + 1)
        under = np.linspace(0.0, self.threshold, self.below + 1)
        return np.concatenate([under, np.linspace(self.threshold, self.top, self.above + 1)[1:]])

    def screen_rows(self, bins: np.ndarray) -> np.ndarray:
        """The row from the top of each bin (-1 stays -1)."""
        over = bins >= self.below
        rows = np.where(over, self.above - 1 - (bins - self.below), self.rows - 1 - bins)
        return np.where(bins >= 0, rows, -1)

    def ticks(self) -> list[tuple[int, str]]:
        """Labels by row from the top: the q line's, 0 at the bottom, and whole numbers
        above the line at the finest step (1, 2, 5, 10 …) that leaves a row between them."""
        labels = [(self.rows - 1, "0")] if self.below or not self.line else []
        if self.line:
            labels.append((self.above, f"q{self.threshold_q:g}"))
        low = self.threshold if self.line else 0.0
        per_unit = self.above / max(self.top - low, 1e-9)
        step = next((s for s in (1, 2, 5, 10, 20, 50) if s * per_unit >= 2), 100)
        edges = self.edges()
        taken = {row for row, _ in labels}
        for value in range(step, int(self.top) + 1, step):
            if value <= low:
                continue
            found = np.searchsorted(edges, float(value), side="right") - 1
            row = int(self.screen_rows(np.array([min(found, edges.size - 2)]))[0])
            if row not in taken and row - 1 not in taken and row + 1 not in taken:
                labels.append((row, str(value)))
                taken.add(row)
        return labels

    @property
    def threshold_q(self) -> float:
        return float(10**-self.threshold)


def strength_axis(top: float, rows: int, q_threshold: float) -> StrengthAxis:
    """Rows for strengths 0..``top``: the line's row, then the others shared above and
    below it by the strength each side covers (at least one each)."""
    threshold = -math.log10(q_threshold)
    if rows < 3 or not 0 < threshold < top:
        return StrengthAxis(top, threshold, max(rows, 1), 0, False)
    usable = rows - 1
    below = min(max(round(usable * threshold / top), 1), usable - 1)
    return StrengthAxis(top, threshold, usable - below, below, True)


# -- painting ----------------------------------------------------------------------------
def _fit(text: str, width: int) -> str:
    """``text`` in exactly ``width`` cells: cut with … or padded."""
    if width <= 0:
        return ""
    if cell_len(text) > width:
        text = set_cell_size(text, width - 1) + "…"
    return text + " " * (width - cell_len(text))


def _joined(parts: list[str], width: int, separator: str = " · ") -> str:
    """As many of ``parts`` as fit in ``width`` cells (the first always, cut if need be)."""
    text = parts[0]
    for part in parts[1:]:
        if cell_len(text + separator + part) <= width:
            text += separator + part
    return _fit(text, width)


_RUN = re.compile(r"(.)\1*", re.DOTALL)


def _runs(codes: str) -> Iterator[tuple[int, int, str]]:
    """(start, end, code) of each run of equal codes."""
    for run in _RUN.finditer(codes):
        yield run.start(), run.end(), run.group(1)


class Painter:
    """Turns cells into strips with a widget's component styles (the cursor row on top).
    The styles are kept until the widget's styles change (``forget``): working them out
    costs more than painting a line."""

    def __init__(self, widget: Widget) -> None:
        self._widget = widget
        self._styles: dict[tuple[str, bool], Style] = {}

    def forget(self) -> None:
        self._styles.clear()

    def style(self, code: str, cursor: bool) -> Style:
        style = self._styles.get((code, cursor))
        if style is None:
            widget = self._widget
            style = widget.rich_style
            if code != " ":
                style += widget.get_component_rich_style(CODE_CLASSES[code])
            if cursor:
                style += widget.get_component_rich_style("overview--cursor")
            self._styles[code, cursor] = style
        return style

    def strip(self, cells: Cells, width: int, *, cursor: bool = False) -> Strip:
        segments = [
            Segment(cells.text[start:end], self.style(code, cursor))
            for start, end, code in _runs(cells.codes)
        ]
        strip = Strip(segments).extend_cell_length(width, self.style(" ", cursor))
        return strip.crop(0, width)


Move = Callable[[int], None]


def _legend_band(band: tuple[float, float]) -> str:
    return f"{BAND} band {interval_text(*band)}"


# -- the interval view -------------------------------------------------------------------
@dataclass(frozen=True)
class RowLayout:
    """Where things go across the interval view at one width."""

    width: int
    label_width: int
    number_width: int
    axis: Axis
    back: Cells
    rule: Cells
    labels: Cells

    @property
    def plot_start(self) -> int:
        return 1 + self.label_width + 1


def row_layout(width: int, span: tuple[float, float], band: tuple[float, float]) -> RowLayout:
    """Cursor mark, label, the plot with a cell beyond each end, and the ratio at the right
    (left out below 50 columns)."""
    label_width = min(max(width // 4 + 2, 12), 36)
    number_width = 7 if width >= 50 else 0
    cells = max(width - 1 - label_width - 1 - 2 - number_width, 8)
    axis = Axis(span[0], span[1], cells)
    back = interval_background(axis, band)
    rule, labels = tick_lines(axis, back)
    return RowLayout(width, label_width, number_width, axis, back, rule, labels)


class IntervalView(ScrollView, can_focus=True):
    """Every shown comparison's ratio and CI on one log axis, a row each, in list order or
    grouped by outcome; the row under the list's cursor is marked and kept in sight."""

    BINDINGS = [
        Binding("up,k", "step(-1)", "Up", show=False, id="intervals.up"),
        Binding("down,j", "step(1)", "Down", show=False, id="intervals.down"),
        Binding("pageup", "page(-1)", "Page up", show=False, id="intervals.page_up"),
        Binding("pagedown", "page(1)", "Page down", show=False, id="intervals.page_down"),
        Binding("home", "end_of_list(0)", "First", show=False, id="intervals.first"),
        Binding("end", "end_of_list(1)", "Last", show=False, id="intervals.last"),
        Binding("g", "toggle_grouping", "Group", show=False, id="intervals.group"),
    ]
    COMPONENT_CLASSES = COMPONENTS
    #: Lines above the rows (the legend) and below them (the axis).
    ABOVE, BELOW = 1, 2

    def __init__(
        self,
        band: tuple[float, float],
        confidence: float,
        move: Move,
        *,
        threshold: float = Q_THRESHOLD,
        id: str | None = None,
    ) -> None:
        super().__init__(id=id)
        self._band, self._confidence, self._move = band, confidence, move
        self.threshold = threshold
        self._rows = ShownRows.of(pl.DataFrame())
        self._seen: pl.DataFrame | None = None
        self._passes = np.empty(0, dtype=bool)
        self._span = interval_span(np.empty(0), np.empty(0), np.empty(0), band)
        self._cursor = 0
        self._grouped = False
        self._order: np.ndarray | None = None  # list index per position (None: list order)
        self._starts: np.ndarray | None = None
        self._position: np.ndarray | None = None  # position per list index
        self._layout: RowLayout | None = None
        self._painter = Painter(self)

    def notify_style_update(self) -> None:
        super().notify_style_update()
        self._painter.forget()  # focus, theme or CSS changed

    # -- what is shown -----------------------------------------------------------------
    @property
    def cursor(self) -> int:
        """The list index of the marked row."""
        return self._cursor

    @property
    def grouped(self) -> bool:
        return self._grouped

    def follow(self, frame: pl.DataFrame, index: int) -> None:
        """Show ``frame`` (the list's) with its row ``index`` marked and in sight."""
        if frame is not self._seen:
            self._seen = frame
            if not self._rows.same_rows(frame):
                self._rows = ShownRows.of(frame)
                rows = self._rows
                self._passes = rows.passes(self.threshold)
                self._span = interval_span(rows.point, rows.low, rows.high, self._band)
                self._layout = None
                self._regroup()
        self._cursor = min(max(index, 0), max(self._rows.count - 1, 0))
        self.virtual_size = Size(1, self._rows.count + self.ABOVE + self.BELOW)
        self._keep_in_sight()
        self.refresh()

    def _regroup(self) -> None:
        if self._grouped and self._rows.count:
            self._order, self._starts = self._rows.outcome_order()
            self._position = np.empty_like(self._order)
            self._position[self._order] = np.arange(self._order.size)
        else:
            self._order = self._starts = self._position = None

    def _index_at(self, position: int) -> int:
        return position if self._order is None else int(self._order[position])

    def _position_of(self, index: int) -> int:
        return index if self._position is None else int(self._position[index])

    def _layout_now(self) -> RowLayout:
        width = self.scrollable_size.width
        layout = self._layout
        if layout is None or layout.width != width:
            layout = self._layout = row_layout(width, self._span, self._band)
        return layout

    def on_resize(self) -> None:
        self._layout = None
        self._keep_in_sight()

    # -- moving ------------------------------------------------------------------------
    @property
    def _in_sight(self) -> int:
        return max(self.scrollable_size.height - self.ABOVE - self.BELOW, 1)

    def _keep_in_sight(self) -> None:
        if not self._rows.count:
            return
        position, top = self._position_of(self._cursor), int(self.scroll_y)
        if position < top:
            self.scroll_to(y=position, animate=False, immediate=True)
        elif position >= top + self._in_sight:
            self.scroll_to(y=position - self._in_sight + 1, animate=False, immediate=True)

    def _go(self, position: int) -> None:
        if not self._rows.count:
            return
        position = min(max(position, 0), self._rows.count - 1)
        self._cursor = self._index_at(position)
        self._move(self._cursor)
        self._keep_in_sight()
        self.refresh()

    def action_step(self, by: int) -> None:
        self._go(self._position_of(self._cursor) + by)

    def action_page(self, by: int) -> None:
        self._go(self._position_of(self._cursor) + by * max(self._in_sight - 1, 1))

    def action_end_of_list(self, end: int) -> None:
        self._go(0 if not end else self._rows.count - 1)

    def action_toggle_grouping(self) -> None:
        """List order, or grouped by outcome."""
        self._grouped = not self._grouped
        self._regroup()
        self._keep_in_sight()
        self.refresh()

    def on_click(self, event: events.Click) -> None:
        position = event.y - self.ABOVE + int(self.scroll_y)
        in_rows = self.ABOVE <= event.y < self.scrollable_size.height - self.BELOW
        if in_rows and 0 <= position < self._rows.count:
            self._go(position)
        self.focus()

    # -- painting ----------------------------------------------------------------------
    def legend(self, width: int) -> str:
        """The line above the rows: what is drawn, in which order, what the marks mean."""
        order = "order: by outcome (g)" if self._grouped else "order: list (g)"
        return _joined(
            [
                f"{self._rows.count:,} rows, {level_text(self._confidence)} CI",
                f"{PASS} q<{self.threshold:g} {NOT_PASS} not",
                _legend_band(self._band),
                order,
                f"{ONE} ratio 1",
                f"{BEYOND_LEFT}{BEYOND_RIGHT} past the axis",
            ],
            width,
        )

    def render_line(self, y: int) -> Strip:
        width, height = self.scrollable_size.width, self.scrollable_size.height
        layout = self._layout_now()
        if y < self.ABOVE:
            return self._painter.strip(Cells(self.legend(width), "h" * width), width)
        if y >= height - self.BELOW:
            cells = layout.rule if y == height - self.BELOW else layout.labels
            lead = " " * layout.plot_start
            cells = Cells(lead + cells.text, " " * len(lead) + cells.codes)
            return self._painter.strip(cells, width)
        position = y - self.ABOVE + int(self.scroll_y)
        if position >= self._rows.count:
            if position == 0:
                text = _fit("No comparison matches the filter.", width)
                return self._painter.strip(Cells(text, "m" * len(text)), width)
            return Strip.blank(width, self.rich_style)
        index = self._index_at(position)
        return self._painter.strip(
            self.row_cells(index, position, layout), width, cursor=index == self._cursor
        )

    def _label(self, index: int, position: int, width: int) -> str:
        """The row's label; grouped by outcome, only a group's first row (or the top row in
        sight) names the outcome, the others hang from it."""
        starts = self._starts
        if starts is None or starts[position] or position == int(self.scroll_y):
            return _fit(self._rows.label(index, width), width)
        ends = position + 1 >= starts.size or starts[position + 1]
        branch = "└ " if ends else "├ "
        return _fit("  " + branch + self._rows.label(index, width - 4, outcome=False), width)

    def row_cells(self, index: int, position: int, layout: RowLayout) -> Cells:
        """Row ``index`` (at ``position``): mark, label, interval, ratio."""
        rows = self._rows
        plot = draw_interval(
            layout.axis,
            layout.back,
            float(rows.point[index]),
            float(rows.low[index]),
            float(rows.high[index]),
            bool(self._passes[index]),
        )
        mark = CURSOR if index == self._cursor else " "
        label = self._label(index, position, layout.label_width)
        number = ""
        if layout.number_width:
            number = " " + ratio_text(float(rows.ratio[index])).rjust(layout.number_width - 1)
        text = mark + label + " " + plot.text + number
        codes = " " * (2 + len(label)) + plot.codes + " " * len(number)
        return Cells(text, codes)


# -- the evidence map --------------------------------------------------------------------
@dataclass(frozen=True)
class MapLayout:
    """The map at one size: axes, each point's cell, the painted grid rows."""

    size: Size
    margin: int
    x_axis: Axis
    y_axis: StrengthAxis
    column: np.ndarray
    row: np.ndarray  # from the top
    counts: np.ndarray  # [row from the top, column]
    grid: list[Cells]
    rule: Cells
    labels: Cells


def _map_background(
    x_axis: Axis, y_axis: StrengthAxis, band: tuple[float, float]
) -> tuple[np.ndarray, np.ndarray]:
    """The grid without points: the band shaded, 2-fold and ratio 1 lines, the q line."""
    text = np.full((y_axis.rows, x_axis.cells), " ", dtype="<U1")
    codes = np.full((y_axis.rows, x_axis.cells), " ", dtype="<U1")
    first, last = x_axis.place(np.log2(np.array(band, dtype=float))).astype(int)
    text[:, first : last + 1], codes[:, first : last + 1] = BAND, "b"
    if y_axis.line:
        text[y_axis.above, :], codes[y_axis.above, :] = Q_LINE, "a"
    for fold, glyph, code in ((-1.0, TWO_FOLD, "a"), (1.0, TWO_FOLD, "a"), (0.0, ONE, "o")):
        if x_axis.low <= fold <= x_axis.high:
            cell = int(x_axis.place(np.array([fold]))[0])
            text[:, cell], codes[:, cell] = glyph, code
    return text, codes


def _row_text(cells: np.ndarray) -> str:
    """A row of one-character cells as one string."""
    return str(np.ascontiguousarray(cells).view(f"<U{cells.size}")[0])


#: Columns left of the map for the strength labels and the axis.
MAP_MARGIN = 6


def map_layout(
    rows: ShownRows, size: Size, band: tuple[float, float], threshold: float = Q_THRESHOLD
) -> MapLayout:
    """Bin every point into the cells of a map of ``size`` (legend, grid, axis, info)."""
    strength = rows.strength()
    # A q equal to the threshold does not pass: keep it under the line.
    line = -math.log10(threshold)
    strength = np.where(
        rows.passes(threshold), strength, np.minimum(strength, np.nextafter(line, 0))
    )
    low, high = map_span(rows.point, band)
    x_axis = Axis(low, high, max(size.width - MAP_MARGIN, 8), binned=True)
    y_axis = strength_axis(strength_top(strength), max(size.height - 4, 1), threshold)
    column, bins, counts = bin_points(rows.point, strength, x_axis.edges(), y_axis.edges())
    row = y_axis.screen_rows(bins)
    on_screen = np.zeros((y_axis.rows, x_axis.cells), dtype=counts.dtype)
    on_screen[y_axis.screen_rows(np.arange(counts.shape[0]))] = counts
    text, codes = _map_background(x_axis, y_axis, band)
    occupied = on_screen > 0
    text[occupied], codes[occupied] = density_glyphs(on_screen)[occupied], "n"
    labels = dict(y_axis.ticks())
    grid = []
    for line_number in range(y_axis.rows):
        label = labels.get(line_number, "")
        edge = "┤" if label else "│"
        grid.append(
            Cells(
                label.rjust(MAP_MARGIN - 1)[-(MAP_MARGIN - 1) :]
                + edge
                + _row_text(text[line_number]),
                "a" * MAP_MARGIN + _row_text(codes[line_number]),
            )
        )
    rule, fold_labels = tick_lines(x_axis)
    rule = Cells(" " * (MAP_MARGIN - 1) + "└" + rule.text[1:-1], "a" * (MAP_MARGIN + x_axis.cells))
    fold_labels = Cells(
        " " * (MAP_MARGIN - 1) + fold_labels.text, "a" * (MAP_MARGIN + x_axis.cells + 1)
    )
    return MapLayout(
        size, MAP_MARGIN, x_axis, y_axis, column, row, on_screen, grid, rule, fold_labels
    )


class EvidenceMap(Widget, can_focus=True):
    """Every shown comparison as a point: size of change (log2 ratio, across) against
    strength of evidence (-log10 q, up). Cells shared by more points show denser glyphs;
    the point under the list's cursor is ◆."""

    BINDINGS = [
        Binding("left", "toward('left')", "Left", show=False, id="map.left"),
        Binding("right", "toward('right')", "Right", show=False, id="map.right"),
        Binding("up", "toward('up')", "Up", show=False, id="map.up"),
        Binding("down", "toward('down')", "Down", show=False, id="map.down"),
        Binding("j", "step(1)", "Next in list", show=False, id="map.next"),
        Binding("k", "step(-1)", "Previous in list", show=False, id="map.previous"),
        Binding("pagedown", "step(20)", "20 on", show=False, id="map.page_down"),
        Binding("pageup", "step(-20)", "20 back", show=False, id="map.page_up"),
        Binding("home", "end_of_list(0)", "First", show=False, id="map.first"),
        Binding("end", "end_of_list(1)", "Last", show=False, id="map.last"),
    ]
    COMPONENT_CLASSES = COMPONENTS
    ABOVE, BELOW = 1, 3

    def __init__(
        self,
        band: tuple[float, float],
        move: Move,
        *,
        threshold: float = Q_THRESHOLD,
        id: str | None = None,
    ) -> None:
        super().__init__(id=id)
        self._band, self._move, self.threshold = band, move, threshold
        self._rows = ShownRows.of(pl.DataFrame())
        self._seen: pl.DataFrame | None = None
        self._cursor = 0
        self._layout: MapLayout | None = None
        self._painter = Painter(self)

    def notify_style_update(self) -> None:
        super().notify_style_update()
        self._painter.forget()  # focus, theme or CSS changed

    @property
    def cursor(self) -> int:
        return self._cursor

    def follow(self, frame: pl.DataFrame, index: int) -> None:
        """Show ``frame`` (the list's) with the point of row ``index`` selected."""
        if frame is not self._seen:
            self._seen = frame
            if not self._rows.same_rows(frame):
                self._rows = ShownRows.of(frame)
                self._layout = None
        self._cursor = min(max(index, 0), max(self._rows.count - 1, 0))
        self.refresh()

    def layout_now(self) -> MapLayout:
        """The map at the widget's size (binned once per frame and size)."""
        layout = self._layout
        if layout is None or layout.size != self.size:
            layout = self._layout = map_layout(self._rows, self.size, self._band, self.threshold)
        return layout

    def on_resize(self) -> None:
        self._layout = None
        self.refresh()

    def selected_cell(self) -> tuple[int, int] | None:
        """(column, row from the top) of the selected point; None when it is not drawn."""
        layout = self.layout_now()
        if not self._rows.count or layout.column[self._cursor] < 0:
            return None
        return int(layout.column[self._cursor]), int(layout.row[self._cursor])

    # -- moving ------------------------------------------------------------------------
    def _go(self, index: int) -> None:
        if not self._rows.count:
            return
        self._cursor = min(max(index, 0), self._rows.count - 1)
        self._move(self._cursor)
        self.refresh()

    def action_toward(self, direction: Direction) -> None:
        """To the nearest point that way."""
        layout = self.layout_now()
        found = nearest(layout.column, layout.row, self._cursor, direction)
        if found is not None:
            self._go(found)

    def action_step(self, by: int) -> None:
        """On or back in list order."""
        self._go(self._cursor + by)

    def action_end_of_list(self, end: int) -> None:
        self._go(0 if not end else self._rows.count - 1)

    def on_click(self, event: events.Click) -> None:
        layout = self.layout_now()
        column, row = event.x - layout.margin, event.y - self.ABOVE
        there = np.flatnonzero((layout.column == column) & (layout.row == row))
        if there.size:
            self._go(int(there[0]))
        self.focus()

    # -- painting ----------------------------------------------------------------------
    def legend(self, width: int) -> str:
        return _joined(
            [
                "evidence map",
                "x: ratio b÷a, log2",
                "y: −log10 q",
                f"{Q_LINE} q {self.threshold:g}",
                _legend_band(self._band),
                f"{TWO_FOLD} 2-fold",
                "points per cell: " + " ".join(glyph for _, glyph in DENSITY),
            ],
            width,
        )

    def info(self, width: int) -> str:
        """The line under the map: the selected point, and what is not drawn."""
        rows, layout = self._rows, self.layout_now()
        if not rows.count:
            return _fit("No comparison matches the filter.", width)
        index = self._cursor
        parts = [
            f"{SELECTED} {rows.label(index)}: ratio {ratio_text(float(rows.ratio[index]))},"
            f" q {p_text(float(rows.q[index]))}"
        ]
        cell = self.selected_cell()
        if cell is None:
            parts[0] += " (not drawn: no ratio or q)"
        elif layout.counts[cell[1], cell[0]] > 1:
            parts.append(f"{layout.counts[cell[1], cell[0]]} in its cell (j k: list order)")
        missing = int(np.count_nonzero(layout.column < 0))
        if missing:
            parts.append(f"{missing:,} not drawn (no ratio or q)")
        return _joined(parts, width)

    def render_line(self, y: int) -> Strip:
        width, height = self.size.width, self.size.height
        layout = self.layout_now()
        if y < self.ABOVE:
            return self._painter.strip(Cells(self.legend(width), "h" * width), width)
        grid_line = y - self.ABOVE
        if grid_line < len(layout.grid):
            cells = layout.grid[grid_line]
            cell = self.selected_cell()
            if cell is not None and cell[1] == grid_line:
                at = layout.margin + cell[0]
                text = cells.text[:at] + SELECTED + cells.text[at + 1 :]
                cells = Cells(text, cells.codes[:at] + "s" + cells.codes[at + 1 :])
            return self._painter.strip(cells, width)
        below = y - self.ABOVE - len(layout.grid)
        if below == 0:
            return self._painter.strip(layout.rule, width)
        if below == 1:
            return self._painter.strip(layout.labels, width)
        if y == height - 1:
            text = self.info(width)
            return self._painter.strip(Cells(text, "h" * len(text)), width)
        return Strip.blank(width, self.rich_style)
