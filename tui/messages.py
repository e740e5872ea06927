"""Messages between the app's workers, screens and widgets that are not tied to one widget.

Widget-specific messages (a cursor move, a click on a column title) stay nested in the
widget that sends them; these are the ones a worker thread posts.
"""

from __future__ import annotations

from dataclasses import dataclass

from textual.message import Message

from foldsift.stats.robust import RobustCheck
from foldsift.stats.scan import ScanResult


@dataclass
class ScanFinished(Message):
    """The background scan is done (``result``) or failed (``error``, one line)."""

    result: ScanResult | None
    error: str | None


@dataclass
class CrossCheckDone(Message):
    """One comparison's cross-checks (``check``), or why they failed (``error``)."""

    key: str
    check: RobustCheck | None
    error: str | None = None


@dataclass
class CrossCheckProgress(Message):
    """How far the cross-checks worker is; later ones replace earlier ones in the queue."""

    done: int
    total: int
    finished: bool = False
    #: Seconds since the checks started (for the time left).
    elapsed: float = 0.0

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, CrossCheckProgress) and not message.finished
