"""Modal dialogs: the note editor, export, overwrite question, help and about.

Every text that holds data (names, notes, paths) is given to its widget as ``Content`` made
by ``widgets.plain.literal``: shown as it is, never read as markup."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from contextlib import suppress
from dataclasses import dataclass
from pathlib import Path

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.css.query import NoMatches
from textual.screen import ModalScreen
from textual.timer import Timer
from textual.widgets import (
    Button,
    Input,
    Label,
    Markdown,
    RadioButton,
    RadioSet,
    Static,
    TextArea,
)

from ..session import SELECTIONS, Selection
from ..widgets.plain import literal

#: Keeps ``text`` as the draft of the open note; returns why it could not, or None.
KeepDraft = Callable[[str], str | None]

CAUTIONS = """\
**Cautions.** foldsift's results are screening aids, not decisions. A ratio of geometric
means is a ratio of medians only when each group's log-scale distribution is symmetric: read
the warnings. Substituting values for below-detection entries is a convention, not a
measurement. Where a finding bears on health, safety or compliance (drinking water,
clinical values, exposure limits), decisions follow the applicable local regulations,
accredited laboratory methods and qualified professional judgement, not this tool.
"""


NOTE_HINT = "ctrl+s saves · escape cancels · ctrl+q keeps the note and quits"


class NoteScreen(ModalScreen[str | None]):
    """Multi-line note for one comparison; returns the text, or None when cancelled.

    ``lines`` are said above the text (a draft restored, a note changed elsewhere and how
    it reads now). With ``keep_draft``, the text is kept as a draft ``DRAFT_DELAY`` seconds
    after each change, so that a note being typed survives a dropped connection."""

    BINDINGS = [
        Binding("ctrl+s", "save", "Save note", id="note.save"),
        Binding("escape", "cancel", "Cancel", id="note.cancel"),
    ]
    #: Seconds of quiet after a change before the draft is kept.
    DRAFT_DELAY = 0.5

    def __init__(
        self,
        title: str,
        text: str,
        *,
        lines: Sequence[str] = (),
        keep_draft: KeepDraft | None = None,
    ) -> None:
        super().__init__()
        self._title = title
        self._lines = tuple(lines)
        self._keep_draft = keep_draft
        # Held here, not looked up: the text stays readable after the screen is removed
        # (the app keeps it as a draft when it ends with the editor open).
        self._area = TextArea(text, id="note-text", soft_wrap=True)
        self._kept = text  # the text last kept (a draft, or the text the editor opened on)
        self._timer: Timer | None = None
        self._done = False

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(literal(self._title), classes="dialog-title")
            if self._lines:
                with VerticalScroll(id="note-lines"):
                    for line in self._lines:
                        yield Static(literal(line, lines=True), classes="dialog-line")
            yield self._area
            yield Label(NOTE_HINT, id="note-hint", classes="dialog-hint")

    def on_mount(self) -> None:
        self._area.focus()

    @on(TextArea.Changed)
    def _changed(self) -> None:
        if self._keep_draft is None or self._done:
            return
        if self._timer is not None:
            self._timer.stop()
        self._timer = self.set_timer(self.DRAFT_DELAY, self.keep_draft)

    def keep_draft(self) -> None:
        """Keep the text as a draft now, if it changed since it was last kept."""
        text = self.text
        if self._keep_draft is None or self._done or text == self._kept:
            return
        problem = self._keep_draft(text)
        if problem is None:
            self._kept = text
        hint = NOTE_HINT if problem is None else f"draft not kept: {problem}"
        with suppress(NoMatches):  # the editor is being removed as the app ends
            self.query_one("#note-hint", Label).update(literal(hint))

    def stop_drafts(self) -> None:
        """Keep no more drafts (the note is saved, cancelled or kept by the app)."""
        self._done = True
        if self._timer is not None:
            self._timer.stop()

    def action_save(self) -> None:
        self.stop_drafts()
        self.dismiss(self.text)

    def action_cancel(self) -> None:
        self.stop_drafts()
        self.dismiss(None)

    @property
    def text(self) -> str:
        return self._area.text


@dataclass(frozen=True)
class ExportChoice:
    """What the export dialog returns."""

    path: Path
    rows: Selection


class ExportScreen(ModalScreen[ExportChoice | None]):
    """Ask which rows and which file name; returns None when cancelled."""

    BINDINGS = [Binding("escape", "cancel", "Cancel", id="export.cancel")]

    #: How each selection reads in the dialog.
    LABELS: dict[Selection, str] = {
        "flagged": "flagged rows",
        "decided": "rows with a decision",
        "shown": "rows shown by the filter",
        "all": "all rows",
    }

    def __init__(self, default_path: Path, counts: dict[Selection, int]) -> None:
        super().__init__()
        self._default = default_path
        self._counts = counts

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label("Export comparisons to CSV", classes="dialog-title")
            # Flagged rows by default; with nothing flagged yet, the rows the filter shows.
            default: Selection = "flagged" if self._counts["flagged"] else "shown"
            with RadioSet(id="export-rows"):
                for which in SELECTIONS:
                    yield RadioButton(
                        f"{self.LABELS[which]} ({self._counts[which]})",
                        value=which == default,
                        id=f"rows-{which}",
                    )
            yield Label("File name:")
            yield Input(str(self._default), id="export-path")
            yield Label("", id="export-error", classes="dialog-error")
            with Horizontal(classes="dialog-buttons"):
                yield Button("Export", variant="primary", id="export-go")
                yield Button("Cancel", id="export-cancel")

    def on_mount(self) -> None:
        self.query_one("#export-path", Input).focus()

    def _rows(self) -> Selection:
        pressed = self.query_one(RadioSet).pressed_button
        name = (pressed.id or "") if pressed else ""
        return next((w for w in SELECTIONS if f"rows-{w}" == name), "flagged")

    @on(Input.Submitted, "#export-path")
    @on(Button.Pressed, "#export-go")
    def submit(self) -> None:
        text = self.query_one("#export-path", Input).value.strip()
        if not text:
            self.query_one("#export-error", Label).update(literal("give a file name"))
            return
        path = Path(text).expanduser()
        if path.suffix.lower() != ".csv":
            path = path.with_name(path.name + ".csv")
        if not path.parent.exists():
            missing = f"folder {path.parent} does not exist"
            self.query_one("#export-error", Label).update(literal(missing))
            return
        self.dismiss(ExportChoice(path=path, rows=self._rows()))

    @on(Button.Pressed, "#export-cancel")
    def action_cancel(self) -> None:
        self.dismiss(None)


class ConfirmScreen(ModalScreen[bool]):
    """A yes/no question; y or enter answers yes, n or escape no."""

    BINDINGS = [
        Binding("y", "answer(True)", "Yes", id="confirm.yes"),
        Binding("n,escape", "answer(False)", "No", id="confirm.no"),
    ]

    def __init__(self, question: str) -> None:
        super().__init__()
        self._question = question

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(literal(self._question), classes="dialog-title")
            with Horizontal(classes="dialog-buttons"):
                yield Button("Yes (y)", variant="warning", id="confirm-yes")
                yield Button("No (n)", id="confirm-no")

    def on_mount(self) -> None:
        self.query_one("#confirm-no", Button).focus()

    def action_answer(self, value: bool) -> None:
        self.dismiss(value)

    @on(Button.Pressed)
    def pressed(self, event: Button.Pressed) -> None:
        self.dismiss(event.button.id == "confirm-yes")


class TextScreen(ModalScreen[None]):
    """A scrollable page of Markdown (help, about) written by the app, then ``lines`` that
    hold data (the review file, reviews that match no comparison), shown as they are;
    escape or q closes it."""

    BINDINGS = [Binding("escape,q,question_mark", "close", "Close", id="page.close")]

    def __init__(self, markdown: str, lines: Sequence[str] = ()) -> None:
        super().__init__()
        self._markdown = markdown
        self._lines = tuple(lines)

    def compose(self) -> ComposeResult:
        with VerticalScroll(classes="dialog page"):
            yield Markdown(self._markdown)
            if self._lines:
                yield Static(literal("\n".join(self._lines), lines=True), classes="page-lines")
            yield Label("escape closes", classes="dialog-hint")

    def action_close(self) -> None:
        self.dismiss(None)
