"""The status line: what the list shows (counts, order, filter) and one message."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from rich.text import Text
from textual.reactive import reactive
from textual.widget import Widget

from .plain import literal_text, visible

#: How a message reads: ``error`` for what went wrong (not saved, export failed, a filter
#: word that cannot be read), ``info`` for the rest.
Severity = Literal["info", "error"]


@dataclass(frozen=True)
class Notice:
    """One message for the status line."""

    text: str
    severity: Severity = "info"


@dataclass(frozen=True)
class ViewSummary:
    """What the list shows: how many rows of how many, the reviews, the order and filter."""

    shown: int
    total: int
    flagged: int
    decided: int
    sort: str  # the readable name of the sort column
    descending: bool
    filter: str
    filter_error: str | None = None


class StatusLine(Widget):
    """Counts, order and filter on the first line; below them one message (a filter word
    that cannot be read takes the message's place until it is fixed)."""

    summary: reactive[ViewSummary | None] = reactive(None, layout=True)
    notice: reactive[Notice | None] = reactive(None, layout=True)

    def render(self) -> Text:
        lines = []
        notice = self.notice
        summary = self.summary
        if summary is not None:
            lines.append(_summary_text(summary))
            if summary.filter_error:  # until the filter is fixed, in place of the message
                notice = Notice(f"filter not applied: {summary.filter_error}", "error")
        if notice is not None:
            lines.append(_notice_text(notice))
        return Text("\n").join(lines)


def _summary_text(summary: ViewSummary) -> Text:
    order = "descending" if summary.descending else "ascending"
    return Text.assemble(
        ("shown ", "dim"),
        (f"{summary.shown}", "bold"),
        (f"/{summary.total}", ""),
        ("  flagged ", "dim"),
        (f"{summary.flagged}", "bold"),
        ("  decided ", "dim"),
        (f"{summary.decided}", "bold"),
        ("  sort ", "dim"),
        (f"{summary.sort} {order}", "bold"),
        ("  filter ", "dim"),
        (visible(summary.filter) or "none", "bold"),
    )


def _notice_text(notice: Notice) -> Text:
    # Messages quote paths, notes and names from the data: never markup.
    return literal_text(notice.text, "bold red" if notice.severity == "error" else "italic")
