"""Modal dialogs: the note editor, export, overwrite question, help and about."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Button, Input, Label, Markdown, RadioButton, RadioSet, TextArea

from ..session import SELECTIONS, Selection

CAUTIONS = """\
**Cautions.** foldsift's results are screening aids, not decisions. A ratio of geometric
means is a ratio of medians only when each group's log-scale distribution is symmetric: read
the warnings. Substituting values for below-detection entries is a convention, not a
measurement. Where a finding bears on health, safety or compliance (drinking water,
clinical values, exposure limits), decisions follow the applicable local regulations,
accredited laboratory methods and qualified professional judgement, not this tool.
"""


class NoteScreen(ModalScreen[str | None]):
    """Multi-line note for one comparison; returns the text, or None when cancelled."""

    BINDINGS = [
        Binding("ctrl+s", "save", "Save note", id="note.save"),
        Binding("escape", "cancel", "Cancel", id="note.cancel"),
    ]

    def __init__(self, title: str, text: str) -> None:
        super().__init__()
        self._title = title
        self._text = text

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(self._title, classes="dialog-title")
            yield TextArea(self._text, id="note-text", soft_wrap=True)
            yield Label(
                "ctrl+s saves · escape cancels · ctrl+q keeps the note and quits",
                classes="dialog-hint",
            )

    def on_mount(self) -> None:
        self.query_one(TextArea).focus()

    def action_save(self) -> None:
        self.dismiss(self.query_one(TextArea).text)

    def action_cancel(self) -> None:
        self.dismiss(None)

    @property
    def text(self) -> str:
        return self.query_one(TextArea).text


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
            self.query_one("#export-error", Label).update("give a file name")
            return
        path = Path(text).expanduser()
        if path.suffix.lower() != ".csv":
            path = path.with_name(path.name + ".csv")
        if not path.parent.exists():
            self.query_one("#export-error", Label).update(f"folder {path.parent} does not exist")
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
            yield Label(self._question, classes="dialog-title")
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
    """A scrollable page of Markdown (help, about); escape or q closes it."""

    BINDINGS = [Binding("escape,q,question_mark", "close", "Close", id="page.close")]

    def __init__(self, markdown: str) -> None:
        super().__init__()
        self._markdown = markdown

    def compose(self) -> ComposeResult:
        with VerticalScroll(classes="dialog page"):
            yield Markdown(self._markdown)
            yield Label("escape closes", classes="dialog-hint")

    def action_close(self) -> None:
        self.dismiss(None)
