"""The detail of the highlighted comparison: its facts beside both groups' charts."""

from __future__ import annotations

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
from .histograms import back_to_back
from .plain import visible

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

    def paint(self) -> None:
        if self._subject is None:
            return
        sentence = self.query_one("#sentence", Static)
        row = self._subject.row
        if row is None:
            sentence.update(Text("No comparison matches the filter.", style="italic"))
            return
        width = max(sentence.size.width, 20)
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
    """Both groups' histograms on the raw and the log scale. Drawn once the cursor has
    rested for ``DELAY`` seconds: moving through the list does not wait for them."""

    DELAY = 0.06

    def __init__(
        self, values_of: ValuesOf, limits_of: ValuesOf | None = None, *, id: str | None = None
    ) -> None:
        super().__init__("", id=id)
        self._values_of = values_of
        self._limits_of = limits_of
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
        if row is None:
            self.update("", layout=False)
            return
        a, b = self._values_of(row)
        limits_a, limits_b = self._limits_of(row) if self._limits_of else (np.empty(0), np.empty(0))
        limits = np.unique(np.concatenate([limits_a, limits_b]))
        width = max(self.size.width - 1, 30)
        height = max(self.size.height // 2, 7)
        # Names from the data, with control characters as symbols: the chart's text is read
        # back with Text.from_ansi, which would obey escape sequences in a name.
        legend = visible(
            f"{readable_outcome(row['outcome'])}: ▲ b {row['level_b']} · ▼ a {row['level_a']}"
        )
        raw = back_to_back(
            a, b, log_scale=False, width=width, height=height, title=legend, limits=limits
        )
        marks = "lines: GM, + median" + (", grey: detection limits" if limits.size else "")
        log_title = f"log scale (ticks in raw units) · {marks}"
        log = back_to_back(
            a, b, log_scale=True, width=width, height=height, title=log_title, limits=limits
        )
        self.update(Text.assemble(raw, "\n", log), layout=False)


class Detail(Horizontal):
    """Facts and charts of one comparison; the screen sets ``subject``."""

    subject: var[Subject] = var(Subject(), always_update=True, init=False)

    def __init__(
        self,
        band: tuple[float, float],
        values_of: ValuesOf,
        limits_of: ValuesOf | None = None,
        *,
        id: str | None = None,
    ) -> None:
        super().__init__(id=id)
        self._band = band
        self._values_of = values_of
        self._limits_of = limits_of

    def compose(self) -> ComposeResult:
        yield Facts(self._band, id="facts")
        yield Charts(self._values_of, self._limits_of, id="plots")

    def watch_subject(self, old: Subject, new: Subject) -> None:
        try:
            facts, charts = self.query_one(Facts), self.query_one(Charts)
        except NoMatches:  # a late message while the app ends: the panes are gone
            return
        facts.show(new)
        if old.key != new.key or new.row is None:
            charts.show(new.row)
