"""The detail of the highlighted comparison: its facts beside both groups' charts."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, VerticalScroll
from textual.css.query import NoMatches
from textual.reactive import var
from textual.timer import Timer
from textual.widgets import Static

from foldsift.stats.columns import ReviewedRow
from foldsift.stats.robust import RobustCheck
from foldsift.stats.sentence import readable_outcome

from .facts import facts_text
from .histograms import STYLE_A, STYLE_B, Group, draw_groups
from .plain import visible
from .ratio_strip import ratio_strip

#: The within-unit ratios of a paired row.
RatiosOf = Callable[[ReviewedRow], np.ndarray]
#: Both groups' usable values for a row: (a, b).
ValuesOf = Callable[[ReviewedRow], tuple[np.ndarray, np.ndarray]]


@dataclass(frozen=True)
class Subject:
    """What the detail shows: a comparison (None when the filter shows none) and its
    cross-checks (None until computed)."""

    row: ReviewedRow | None = None
    check: RobustCheck | None = None

    @property
    def key(self) -> str | None:
        return None if self.row is None else self.row["key"]


class Facts(VerticalScroll):
    """The sentence, the figures of both groups, the warnings and the review state."""

    def __init__(self, band: tuple[float, float], *, id: str | None = None) -> None:
        super().__init__(id=id)
        self._band = band
        self._subject: Subject | None = None  # None until the screen shows the first row
        self._lines = -1

    def compose(self) -> ComposeResult:
        yield Static("", id="sentence")

    def show(self, subject: Subject) -> None:
        if self._subject is None or subject.key != self._subject.key:
            # A new comparison starts at the top of its facts.
            self.scroll_home(animate=False)
        self._subject = subject
        self.paint()

    @property
    def text_width(self) -> int:
        """The cells the facts are laid out for: the pane less its vertical scroll bar,
        whether or not the bar shows, so the layout does not change when it appears (the
        facts, laid out one cell too wide, would wrap their table rows)."""
        return self.size.width - self.styles.scrollbar_size_vertical

    def paint(self) -> None:
        if self._subject is None:
            return
        sentence = self.query_one("#sentence", Static)
        row = self._subject.row
        if row is None:
            sentence.update(Text("No comparison matches the filter.", style="italic"))
            return
        width = max(self.text_width, 20)
        text = facts_text(row, self._band, self._subject.check, width)
        # A layout pass costs more than the paint: only ask for one when the height changes.
        lines = len(text.wrap(self.app.console, width))
        if lines != self._lines:
            self._lines = lines
            sentence.styles.height = lines
            sentence.update(text)
        else:
            sentence.update(text, layout=False)

    def on_resize(self) -> None:
        self._lines = -1
        self.paint()


class Charts(Static):
    """Both groups' distributions on the log and the raw scale, drawn to the widget's size
    (``histograms.draw_groups``). Drawn once the cursor has rested for ``DELAY`` seconds:
    moving through the list does not wait for them."""

    DELAY = 0.06

    def __init__(
        self,
        values_of: ValuesOf,
        limits_of: ValuesOf | None = None,
        *,
        ratios_of: RatiosOf | None = None,
        band: tuple[float, float] = (0.8, 1.25),
        id: str | None = None,
    ) -> None:
        super().__init__("", id=id)
        self._values_of = values_of
        self._limits_of = limits_of
        self._ratios_of = ratios_of
        self._band = band
        self._row: ReviewedRow | None = None
        self._timer: Timer | None = None

    def show(self, row: ReviewedRow | None) -> None:
        self._row = row
        self._schedule()

    def on_resize(self) -> None:
        self._schedule()

    def _schedule(self) -> None:
        if self._timer is not None:
            self._timer.stop()
        self._timer = self.set_timer(self.DELAY, self.draw)

    def draw(self) -> None:
        row = self._row
        width, height = self.size
        if row is None or not (width and height):
            self.update("", layout=False)
            return
        values_a, values_b = self._values_of(row)
        if not (values_a.size or values_b.size) and (row["n_a"] or row["n_b"]):
            # A summary table, or Parquet data read a batch at a time: no values in memory.
            self.update(
                Text("no charts: this scan keeps no group's values in memory", style="italic"),
                layout=False,
            )
            return
        limits_a, limits_b = self._limits_of(row) if self._limits_of else (np.empty(0),) * 2
        a = _group(row, "a", values_a, limits_a)
        b = _group(row, "b", values_b, limits_b)
        strip = self._strip(row, width) if height >= 9 else None
        rest = height - (4 if strip is not None else 0)
        drawing = draw_groups(a, b, width=width, height=rest, title=_chart_title(row))
        self.update(
            drawing.text if strip is None else Text.assemble(strip, "\n\n", drawing.text),
            layout=False,
        )

    def _strip(self, row: ReviewedRow, width: int) -> Text | None:
        """The within-unit ratios of a paired row (None for other rows)."""
        if self._ratios_of is None or row["pair_by"] is None:
            return None
        band = self._band
        return ratio_strip(self._ratios_of(row), row["ratio"], band, width, row["pair_by"])


def _group(row: ReviewedRow, which: str, values: np.ndarray, limits: np.ndarray) -> Group:
    """Group ``which`` ("a" or "b") of the row, to draw. Its marks sit at the figures the
    facts give (a censored group's fitted geometric mean and Kaplan-Meier median); a figure
    the row lacks is not marked."""
    if which == "a":
        level, gm, median, style = row["level_a"], row["gm_a"], row["median_a"], STYLE_A
    else:
        level, gm, median, style = row["level_b"], row["gm_b"], row["median_b"], STYLE_B
    return Group(
        f"{which} {visible(level)}",
        values,
        style,
        limits,
        gm=math.nan if gm is None else float(gm),
        median=math.nan if median is None else float(median),
    )


def _chart_title(row: ReviewedRow) -> Text:
    """The outcome (and stratum) and both groups in their colours (names from the data made
    visible)."""
    within = f" within {row['within']} {row['stratum']}" if row["within"] else ""
    return Text.assemble(
        visible(readable_outcome(row["outcome"]) + within),
        ": ",
        (f"b {visible(row['level_b'])}", STYLE_B),
        " ÷ ",
        (f"a {visible(row['level_a'])}", STYLE_A),
        no_wrap=True,
    )


class Detail(Horizontal):
    """Facts and charts of one comparison; the screen sets ``subject``."""

    subject: var[Subject] = var(Subject(), always_update=True, init=False)

    def __init__(
        self,
        band: tuple[float, float],
        values_of: ValuesOf,
        limits_of: ValuesOf | None = None,
        *,
        ratios_of: RatiosOf | None = None,
        id: str | None = None,
    ) -> None:
        super().__init__(id=id)
        self._ratios_of = ratios_of
        self._band = band
        self._values_of = values_of
        self._limits_of = limits_of

    def compose(self) -> ComposeResult:
        yield Facts(self._band, id="facts")
        yield Charts(
            self._values_of,
            self._limits_of,
            ratios_of=self._ratios_of,
            band=self._band,
            id="plots",
        )

    def watch_subject(self, old: Subject, new: Subject) -> None:
        try:
            facts, charts = self.query_one(Facts), self.query_one(Charts)
        except NoMatches:  # a late message while the app ends: the panes are gone
            return
        facts.show(new)
        if old.key != new.key or new.row is None:
            charts.show(new.row)
