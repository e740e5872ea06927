"""Both groups' distributions drawn as text, on a log axis and on a raw axis.

Each panel has one x axis shared by both groups. Group b's bars sit in rows of their own
above group a's; each group's bars are its share of values per bin, scaled to its own
tallest bin, and grow by eighths of a row, so every non-empty bin shows at least ``▁``
whatever the other group looks like. Under each group's bars a strip marks its range, its
middle half, its median, its geometric mean and its detection limits, each with a glyph of
its own so that they read without colour; the legend lists the marks drawn and no others.
When the pane is small a panel shrinks to the two strips: one line per group. The log
panel comes first (the comparison is made on logs) and gets rows before the raw one.

Drawn here into rich Text rather than with a plotting library: each group gets rows of its
own, bars grow by fractions of a row, the drawing fits the size it is given exactly (axis
labels included, so nothing hangs below the pane), and every cell can be checked in tests.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
from rich.cells import cell_len
from rich.text import Text

from .plain import make_visible, visible

#: The groups' colours, also used by the facts beside the charts.
STYLE_A = "cyan"
STYLE_B = "dark_orange"

#: A bar cell filled to 0..8 eighths of a row.
EIGHTHS = np.array(list(" ▁▂▃▄▅▆▇█"))
#: Past this magnitude a raw axis's span and tick arithmetic come near overflow.
LARGEST = 1e300
#: Bar rows per group at most, however tall the pane.
MOST_BAR_ROWS = 12
#: Which panels, in their order on screen.
SCALES = ("log", "raw")


@dataclass(frozen=True)
class Mark:
    """A glyph of the strips under the bars, with its legend names (short and long)."""

    glyph: str
    short: str
    long: str


GM = Mark("◆", "GM", "geometric mean")
MEDIAN = Mark("┃", "median", "median")
GM_AT_MEDIAN = Mark("◈", "GM=median", "GM and median in one cell")
MIDDLE_HALF = Mark("━", "IQR", "middle half")
RANGE = Mark("╌", "range", "range")
LIMIT = Mark("<", "DL", "detection limit (as in a <0.5 entry)")
#: Every mark, in the legend's order.
MARKS = (GM, MEDIAN, GM_AT_MEDIAN, MIDDLE_HALF, RANGE, LIMIT)
_STRONG = {GM.glyph, MEDIAN.glyph, GM_AT_MEDIAN.glyph, LIMIT.glyph}


@dataclass(frozen=True)
class Group:
    """One group to draw: its label, usable values and colour; the detection limits of its
    below-detection entries; the geometric mean and median to mark (None: computed from
    ``values``; NaN: not marked)."""

    label: str
    values: np.ndarray
    style: str
    limits: np.ndarray = field(default_factory=lambda: np.empty(0))
    gm: float | None = None
    median: float | None = None


@dataclass(frozen=True)
class Axis:
    """A panel's x axis: drawn units (natural logs on a log axis) from ``low`` to ``high``
    across ``bins`` bins of ``cells`` columns each, starting at column ``left``."""

    log: bool
    low: float
    high: float
    left: int
    bins: int
    cells: int

    @property
    def columns(self) -> int:
        return self.bins * self.cells

    def units(self, values: np.ndarray | Sequence[float]) -> np.ndarray:
        """``values`` in drawn units."""
        values = np.asarray(values, dtype=float)
        if not self.log:
            return values
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.log(values)

    def column(self, values: np.ndarray | Sequence[float]) -> np.ndarray:
        """The plot column (0 at ``left``) each finite, drawable value falls in."""
        return self.column_of_units(self.units(values))

    def column_of_units(self, units: np.ndarray) -> np.ndarray:
        """The plot column of each value given in drawn units (at least ``low``)."""
        scaled = (units - self.low) * (self.columns / (self.high - self.low))
        return np.clip(scaled.astype(np.int64), 0, self.columns - 1)


@dataclass(frozen=True)
class Drawing:
    """The drawn text with what tests and callers need to read it: each panel's axis, the
    line numbers of each part (``(scale, "a" | "b", "bars" | "strip")``, ``(scale, "",
    "ticks" | "axis")``, ``("", "", "title" | "legend")``) and the marks in the legend."""

    text: Text
    axes: dict[str, Axis] = field(default_factory=dict)
    rows: dict[tuple[str, str, str], list[int]] = field(default_factory=dict)
    legend: tuple[Mark, ...] = ()


@dataclass(frozen=True)
class _OnScale:
    """A group's values drawable on one scale (positive ones on a log axis), the same in
    drawn units, their quartiles and extremes, and the figures to mark (NaN: none)."""

    key: str
    group: Group
    values: np.ndarray
    units: np.ndarray
    quantiles: np.ndarray  # 0, 25, 50, 75 and 100% (empty without values)
    gm: float
    median: float
    limits: np.ndarray


@dataclass(frozen=True)
class _Side:
    """One group as a panel draws it: bin counts, the strip's glyphs, its tallest share."""

    key: str
    group: Group
    counts: np.ndarray
    strip: list[str]
    tallest: float  # percent of the group's values in its tallest bin


@dataclass(frozen=True)
class _Panel:
    name: str
    left: int  # the plot's first column (the margin's width)
    axis: Axis | None
    sides: tuple[_Side, ...] = ()  # top first: b, then a
    message: str = ""

    @cached_property
    def glyphs(self) -> frozenset[str]:
        return frozenset(cell for side in self.sides for cell in side.strip)


def draw_groups(a: Group, b: Group, *, width: int, height: int, title: Text | str = "") -> Drawing:
    """Both groups' panels (log, then raw) in at most ``width`` × ``height`` cells, under
    ``title`` when there is room. Labels and title are shown with control characters as
    symbols, never read as markup."""
    if not (_usable(a.values, False).size or _usable(b.values, False).size):
        return Drawing(Text("no usable values to draw", style="italic"))
    # Room for the labels, and for "max 100%", cut to a quarter of the width.
    labels = max(cell_len(visible(group.label)) for group in (a, b)) + 1
    margin = min(max(labels, 9), max(6, width // 4))
    columns = width - margin - 1  # one column spare on the right for the last tick label
    if columns < 5 or height < 3:  # the smallest chart: one line per group and the axis
        return Drawing(Text("pane too small for a chart"[:width], style="italic"))
    try:
        with np.errstate(all="ignore"):
            scaled = [_on_scales("b", b), _on_scales("a", a)]
            panels = [
                _panel(name == "log", [g[name == "log"] for g in scaled], margin, columns)
                for name in SCALES
            ]
            heading = (
                make_visible(title.copy()) if isinstance(title, Text) else Text(visible(title))
            )
            return _compose(_plan(panels, width, height, bool(heading)), panels, width, heading)
    except (ValueError, OverflowError, ZeroDivisionError) as error:  # never end the session
        return Drawing(Text(f"chart unavailable: {error}", style="italic"))


def _usable(values: np.ndarray, log: bool) -> np.ndarray:
    values = np.asarray(values, dtype=float)
    keep = np.isfinite(values) & (values > 0) if log else np.isfinite(values)
    return values[keep]


def _on_scales(key: str, group: Group) -> dict[bool, _OnScale]:
    """The group on the raw (False) and the log (True) scale; its quantiles are computed
    once when every value is positive, as they are for usable values."""
    finite = _usable(group.values, False)
    positive = finite[finite > 0]
    quantiles = {False: _quantiles(finite)}
    quantiles[True] = quantiles[False] if positive.size == finite.size else _quantiles(positive)
    logs = np.log(positive)
    gm = group.gm
    if gm is None:
        gm = float(np.exp(np.mean(logs))) if logs.size else math.nan
    scales = {}
    for log, values in ((False, finite), (True, positive)):
        median = group.median
        if median is None:
            median = float(quantiles[log][2]) if quantiles[log].size else math.nan
        limits = _usable(group.limits, log)
        units = logs if log else values
        scales[log] = _OnScale(key, group, values, units, quantiles[log], gm, median, limits)
    return scales


def _quantiles(values: np.ndarray) -> np.ndarray:
    return np.percentile(values, [0, 25, 50, 75, 100]) if values.size else np.empty(0)


def _panel(log: bool, groups: Sequence[_OnScale], left: int, columns: int) -> _Panel:
    """One scale's axis, bins and strips for both groups (or why it cannot be drawn)."""
    name = "log" if log else "raw"
    if not any(g.values.size for g in groups):
        return _Panel(name, left, None, message="no values to draw on this scale")
    reach = [g.quantiles[[0, -1]] for g in groups if g.values.size]
    reach += [g.limits for g in groups]
    reach.append(_usable(np.array([f for g in groups for f in (g.gm, g.median)]), log))
    units = np.concatenate(reach)
    units = np.log(units) if log else units
    low, high = float(units.min()), float(units.max())
    span = high - low
    if max(abs(low), abs(high)) > LARGEST or not math.isfinite(span):
        return _Panel(name, left, None, message="values too large to draw on this scale")
    if span <= 0:
        low, high = low - 0.5, high + 0.5
    wanted = int(np.clip(math.ceil(2 * max(g.values.size for g in groups) ** (1 / 3)), 5, columns))
    cells = max(1, columns // wanted)  # Rice's rule for the number of bins
    axis = Axis(log, low, high, left, columns // cells, cells)
    return _Panel(name, left, axis, tuple(_side(group, axis) for group in groups))


def _side(group: _OnScale, axis: Axis) -> _Side:
    if group.values.size:
        counts = np.bincount(axis.column_of_units(group.units) // axis.cells, minlength=axis.bins)
    else:
        counts = np.zeros(axis.bins, dtype=int)
    tallest = 100 * float(counts.max()) / group.values.size if group.values.size else 0.0
    return _Side(group.key, group.group, counts, _strip(group, axis), tallest)


def _strip(group: _OnScale, axis: Axis) -> list[str]:
    """A group's marks, one glyph per plot column: range, middle half, detection limits,
    then the median and the geometric mean over them."""
    cells = [" "] * axis.columns
    if group.values.size:
        lowest, first, _, third, highest = axis.column(group.quantiles)
        cells[lowest : highest + 1] = [RANGE.glyph] * (highest - lowest + 1)
        cells[first : third + 1] = [MIDDLE_HALF.glyph] * (third - first + 1)
    for column in set(axis.column(group.limits).tolist()):
        cells[column] = LIMIT.glyph
    gm, median = (_usable(np.array([f]), axis.log) for f in (group.gm, group.median))
    gm_column = int(axis.column(gm)[0]) if gm.size else -1
    if median.size:
        median_column = int(axis.column(median)[0])
        cells[median_column] = GM_AT_MEDIAN.glyph if median_column == gm_column else MEDIAN.glyph
    if gm.size and cells[gm_column] != GM_AT_MEDIAN.glyph:
        cells[gm_column] = GM.glyph
    return cells


# Layout: which parts fit, added in order of use to a reviewer while they fit.


@dataclass
class _Plan:
    shown: dict[str, int] = field(default_factory=dict)  # panel -> bar rows per group
    axis_lines: frozenset[str] = frozenset()
    title: bool = False
    legend: bool = False
    spacer: bool = False


def _steps() -> Iterator[tuple[str, str]]:
    yield from (("show", "log"), ("legend", ""), ("show", "raw"), ("grow", "log"))
    yield from (("title", ""), ("grow", "raw"), ("grow", "log"), ("grow", "raw"))
    yield from (("axis", "log"), ("axis", "raw"))
    for _ in range(MOST_BAR_ROWS - 2):
        yield from (("grow", "log"), ("grow", "raw"))
    yield ("spacer", "")


def _apply(plan: _Plan, step: tuple[str, str], panels: dict[str, _Panel]) -> _Plan | None:
    """The plan with one more part, or None when that part does not apply."""
    kind, name = step
    if kind == "title":
        return replace(plan, title=True)
    if kind == "legend":
        return replace(plan, legend=True)
    if kind == "spacer":
        return replace(plan, spacer=True) if len(plan.shown) == 2 else None
    if kind == "show":
        return replace(plan, shown={**plan.shown, name: 0})
    if name not in plan.shown or panels[name].axis is None:
        return None
    if kind == "grow":
        return replace(plan, shown={**plan.shown, name: plan.shown[name] + 1})
    return replace(plan, axis_lines=plan.axis_lines | {name})


def _plan(panels: list[_Panel], width: int, height: int, titled: bool) -> _Plan:
    by_name = {panel.name: panel for panel in panels}
    # The legend's lines for each set of panels shown (the panels' marks may differ).
    legend_rows: dict[tuple[str, ...], int] = {
        names: len(_legend([by_name[name] for name in names], width)[0])
        for names in ((), ("log",), ("log", "raw"))
    }
    plan = _Plan()
    for step in _steps():
        bigger = _apply(plan, step, by_name)
        if bigger is None or (bigger.title and not titled):
            continue
        rows = int(bigger.title) + int(bigger.spacer)
        for name, bars in bigger.shown.items():
            rows += _panel_rows(by_name[name], bars, name in bigger.axis_lines)
        rows += legend_rows[tuple(bigger.shown)] if bigger.legend else 0
        if rows <= height:
            plan = bigger
    return plan


def _panel_rows(panel: _Panel, bars: int, axis_line: bool) -> int:
    if panel.axis is None:
        return 1
    return len(panel.sides) * (bars + 1) + int(axis_line) + 1


# Drawing the parts.


def _compose(plan: _Plan, panels: list[_Panel], width: int, title: Text) -> Drawing:
    lines: list[Text] = []
    rows: dict[tuple[str, str, str], list[int]] = {}

    def add(key: tuple[str, str, str], line: Text) -> None:
        rows.setdefault(key, []).append(len(lines))
        lines.append(line)

    if plan.title:
        heading = title.copy()
        heading.truncate(width, overflow="ellipsis")
        add(("", "", "title"), heading)
    shown = [panel for panel in panels if panel.name in plan.shown]
    for index, panel in enumerate(shown):
        if index and plan.spacer:
            lines.append(Text(""))
        for key, line in _panel_lines(panel, plan.shown[panel.name], plan, width):
            add(key, line)
    legend, marks = _legend(shown, width) if plan.legend else ([], ())
    for line in legend:
        add(("", "", "legend"), line)
    text = Text("\n").join(lines)
    text.no_wrap, text.overflow = True, "crop"
    axes = {panel.name: panel.axis for panel in shown if panel.axis is not None}
    return Drawing(text, axes, rows, marks)


def _panel_lines(
    panel: _Panel, bars: int, plan: _Plan, width: int
) -> Iterator[tuple[tuple[str, str, str], Text]]:
    name, axis = panel.name, panel.axis
    if axis is None:
        yield (
            (name, "", "message"),
            _margin(name, "dim", panel.left).append(panel.message, "italic"),
        )
        return
    for side in panel.sides:
        label = visible(side.group.label)
        scale = f"max {_percent(side.tallest)}"
        for row, body in enumerate(_bar_lines(side.counts, bars, axis.cells)):
            margin = label if row == 0 else scale if row == 1 else ""
            line = _margin(margin, side.group.style, axis.left)
            yield (name, side.key, "bars"), line.append(body, side.group.style)
        margin = label if bars == 0 else scale if bars == 1 else ""
        yield (name, side.key, "strip"), _strip_line(side, axis, margin)
    ticks, columns = _tick_line(axis, name, width)
    if name in plan.axis_lines:
        rule = ["─"] * axis.columns
        for column in columns:
            rule[column] = "┬"
        yield (name, "", "axis"), _margin("", "", axis.left).append("".join(rule), "dim")
    yield (name, "", "ticks"), ticks


def _margin(text: str, style: str, width: int) -> Text:
    """``text`` in ``width`` - 1 cells (cut with an ellipsis) and a space."""
    margin = Text(text, style=style, no_wrap=True)
    margin.truncate(max(width - 1, 0), overflow="ellipsis", pad=True)
    margin.append(" " if width else "")
    return margin


def _percent(share: float) -> str:
    return f"{share:.0f}%" if share >= 1 else f"{share:.1f}%"


def _bar_lines(counts: np.ndarray, rows: int, cells: int) -> list[str]:
    """Bars ``rows`` high, top line first: the tallest bin fills every row, any non-empty
    bin at least one eighth of the bottom one."""
    tallest = counts.max(initial=0)
    if rows == 0 or tallest == 0:
        return [" " * (counts.size * cells)] * rows
    eighths = np.maximum(np.rint(counts / tallest * 8 * rows), counts > 0)
    per_column = np.repeat(eighths.astype(int), cells)
    return [
        "".join(EIGHTHS[np.clip(per_column - 8 * level, 0, 8)]) for level in range(rows - 1, -1, -1)
    ]


def _strip_line(side: _Side, axis: Axis, margin: str) -> Text:
    line = _margin(margin, side.group.style, axis.left)
    if set(side.strip) == {" "}:
        return line.append("no values on this scale", "dim italic")
    start = len(line)
    line.append("".join(side.strip), side.group.style)
    for column, glyph in enumerate(side.strip):
        if glyph in _STRONG:
            line.stylize("bold", start + column, start + column + 1)
    return line


def _tick_line(axis: Axis, name: str, width: int) -> tuple[Text, list[int]]:
    """Tick labels in raw units, each centred on its value's column; labels that would
    overlap the one before or run past ``width`` are left out."""
    ends = (math.exp(axis.low), math.exp(axis.high)) if axis.log else (axis.low, axis.high)
    ticks = _nice_ticks(*ends, axis.log, most=max(2, axis.columns // 7))
    cells = [" "] * width
    free = len(name) + 1  # the first cell a label may take
    cells[: len(name)] = list(name)
    columns = []
    for value in ticks:
        column = int(axis.column([value])[0])
        label = _tick(value)
        start = axis.left + column - (len(label) - 1) // 2
        if start < free or start + len(label) > width:
            continue
        cells[start : start + len(label)] = list(label)
        free = start + len(label) + 1
        columns.append(column)
    line = Text("".join(cells).rstrip(), no_wrap=True)
    line.stylize("dim", 0, len(name))
    return line, columns


def _legend(panels: Sequence[_Panel], width: int) -> tuple[list[Text], tuple[Mark, ...]]:
    """Legend lines naming the marks the panels draw, long names when they fit on one line,
    else short names, wrapped if need be."""
    drawn = frozenset().union(*(panel.glyphs for panel in panels))
    marks = tuple(mark for mark in MARKS if mark.glyph in drawn)
    if not marks:
        return [], ()
    for gap, space, long in (("  ", " ", True), ("  ", " ", False), (" ", "", False)):
        items = [f"{mark.glyph}{space}{mark.long if long else mark.short}" for mark in marks]
        if cell_len(gap.join(items)) <= width:
            return [_legend_line(items, gap)], marks
    lines: list[list[str]] = [[]]
    for item in items:
        if lines[-1] and cell_len(" ".join([*lines[-1], item])) > width:
            lines.append([])
        lines[-1].append(item)
    return [_legend_line(line, " ") for line in lines], marks


def _legend_line(items: list[str], gap: str) -> Text:
    line = Text(no_wrap=True, overflow="crop")
    for index, item in enumerate(items):
        line.append(gap if index else "")
        line.append(item[0], "bold")
        line.append(item[1:], "dim")
    return line


# Tick values.


def _nice_ticks(low: float, high: float, log_scale: bool, most: int = 5) -> list[float]:
    """Round tick values inside [low, high]: 1-2-5 steps, or 1-2-5 × 10^k on a log scale."""
    if not (math.isfinite(low) and math.isfinite(high)) or high <= low:
        return [low]
    if log_scale and low > 0:
        ticks = _decade_ticks(low, high, most)
        if len(ticks) >= 2:
            return ticks
    return _linear_ticks(low, high, most)


def _decade_ticks(low: float, high: float, most: int) -> list[float]:
    """1, 2 and 5 × 10^k inside [low, high] (0 < low); when there would be more than
    ``most``, the powers of ten, or every second or third value counted from one."""
    ticks = []
    for exponent in range(math.floor(math.log10(low)), math.ceil(math.log10(high)) + 1):
        for mantissa in (1, 2, 5):
            value = mantissa * 10.0**exponent
            if math.isfinite(value) and low <= value <= high:
                ticks.append(value)
    if len(ticks) <= most:
        return ticks
    powers = [v for v in ticks if math.isclose(math.log10(v) % 1, 0, abs_tol=1e-9)]
    if len(powers) >= 2:
        return powers[:: math.ceil(len(powers) / most)]
    stride = math.ceil(len(ticks) / most)
    start = ticks.index(powers[0]) % stride if powers else 0
    return ticks[start::stride]


def _linear_ticks(low: float, high: float, most: int) -> list[float]:
    """Evenly spaced ticks inside [low, high], the step 1, 2 or 5 × 10^k: as many as
    there can be up to ``most``."""
    base = 10 ** math.floor(math.log10((high - low) / most))
    for factor in (1, 2, 5, 10, 20, 50):
        step = base * factor
        first = math.ceil(low / step) * step
        count = int((high - first) / step + 1e-9) + 1
        if count <= most:
            break
    return [first + i * step for i in range(count)]


def _tick(value: float) -> str:
    if value == 0:
        return "0"
    if abs(value) >= 100000 or abs(value) < 0.001:
        return f"{value:.0e}"
    return f"{value:g}"
