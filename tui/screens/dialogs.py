"""Modal dialogs: the note editor and its question about unsaved changes, export, the
question before replacing a file, help and about.

Every text that holds data (names, notes, paths) is given to its widget as ``Content`` made
by ``widgets.plain.literal``: shown as it is, never read as markup."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from contextlib import suppress
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.content import Content
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

from ..export import COLUMN_SETS, DEFAULT_DIGITS, ColumnSet
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


NOTE_HINT = "ctrl+s saves · escape closes · ctrl+q keeps it and quits"

#: What the question about a note's unsaved changes returns.
NoteAnswer = Literal["save", "discard", "keep"]


class NoteScreen(ModalScreen[str | None]):
    """Multi-line note for one comparison; returns the text, or None when cancelled.

    ``lines`` are said above the text (a draft restored, a note changed elsewhere and how
    it reads now). With ``keep_draft``, the text is kept as a draft ``DRAFT_DELAY`` seconds
    after each change, so that a note being typed survives a dropped connection.

    Escape closes the editor at once when the text is the saved note (``saved``; by default
    the text it opened on); otherwise it asks first: save, discard, or keep editing."""

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
        saved: str | None = None,
    ) -> None:
        super().__init__()
        self._title = title
        self._lines = tuple(lines)
        self._keep_draft = keep_draft
        self._saved = text if saved is None else saved
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

    @property
    def unsaved(self) -> bool:
        """The text differs from the saved note."""
        return self.text != self._saved

    def action_save(self) -> None:
        self.stop_drafts()
        self.dismiss(self.text)

    def action_cancel(self) -> None:
        if self.unsaved:
            self.app.push_screen(UnsavedNoteScreen(), self._answered)
            return
        self.discard()

    def discard(self) -> None:
        """Close without saving: the saved note stays."""
        self.stop_drafts()
        self.dismiss(None)

    def _answered(self, answer: NoteAnswer | None) -> None:
        if answer == "save":
            self.action_save()
        elif answer == "discard":
            self.discard()
        else:
            self._area.focus()

    @property
    def text(self) -> str:
        return self._area.text


class UnsavedNoteScreen(ModalScreen[NoteAnswer]):
    """Escape in a note editor with unsaved changes: save (s), discard (d), or keep editing
    (escape, k, or enter on the button that has the focus at first)."""

    BINDINGS = [
        Binding("s", "answer('save')", "Save", id="unsaved.save"),
        Binding("d", "answer('discard')", "Discard", id="unsaved.discard"),
        Binding("escape,k", "answer('keep')", "Keep editing", id="unsaved.keep"),
    ]
    QUESTION = "This note has changes that are not saved."

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(self.QUESTION, classes="dialog-title")
            with Horizontal(classes="dialog-buttons"):
                yield Button("Save (s)", variant="primary", id="unsaved-save")
                yield Button("Discard (d)", variant="warning", id="unsaved-discard")
                yield Button("Keep editing (esc)", id="unsaved-keep")

    def on_mount(self) -> None:
        self.query_one("#unsaved-keep", Button).focus()

    def action_answer(self, answer: NoteAnswer) -> None:
        self.dismiss(answer)

    @on(Button.Pressed)
    def pressed(self, event: Button.Pressed) -> None:
        answers: dict[str, NoteAnswer] = {
            "unsaved-save": "save",
            "unsaved-discard": "discard",
        }
        self.dismiss(answers.get(event.button.id or "", "keep"))


class ChoiceSet(RadioSet):
    """Radio buttons whose choice moves with the arrow keys (a plain ``RadioSet`` moves a
    highlight and takes enter to choose); enter submits the screen it is on."""

    DEFAULT_CSS = """
    ChoiceSet {
        height: auto;
        width: 1fr;
    }
    """
    BINDINGS = [
        Binding("down,right", "step(1)", "Next choice", show=False),
        Binding("up,left", "step(-1)", "Previous choice", show=False),
        Binding("space", "toggle_button", "Choose", show=False),
        Binding("enter", "screen.submit", "Submit", show=False),
    ]

    def on_mount(self) -> None:
        if self.pressed_index >= 0:
            self._selected = self.pressed_index  # the highlight on the choice, not the top

    def action_step(self, step: int) -> None:
        """Choose the next (1) or previous (-1) button; stops at either end."""
        buttons = list(self.query(RadioButton))
        if buttons:
            index = min(max(self.pressed_index + step, 0), len(buttons) - 1)
            buttons[index].value = True


class Choice(RadioButton):
    """A radio button whose choice shows by its shape as well as its colour (● chosen, ○ not),
    for terminals that show few or no colours."""

    @property
    def _button(self) -> Content:
        self.BUTTON_INNER = "●" if self.value else "○"
        return super()._button


@dataclass(frozen=True)
class ExportChoice:
    """What the export dialog returns."""

    path: Path
    rows: Selection
    columns: ColumnSet = "short"


def rows_text(count: int | None) -> str:
    """``1 row``, ``42 rows``; ``rows unknown`` when a file could not be read as CSV."""
    if count is None:
        return "rows unknown: not readable as CSV"
    return f"{count} row" if count == 1 else f"{count} rows"


EXPORT_HINT = "↑↓ choose · tab moves on · enter exports · escape cancels"


class ExportScreen(ModalScreen[ExportChoice | None]):
    """Ask which rows, which columns and which file name; returns None when cancelled.

    The keys start on the row choice: up and down change it, enter exports, tab moves on to
    the columns, the file name and the buttons. Each row choice says how many rows it
    writes. ``last`` (the previous choice in this session) sets the choices and the name;
    an error about the name goes as soon as the name changes."""

    BINDINGS = [Binding("escape", "cancel", "Cancel", id="export.cancel")]

    #: How each column set reads in the dialog.
    COLUMN_LABELS: dict[ColumnSet, str] = {
        "short": f"short: {DEFAULT_DIGITS} significant digits",
        "full": "full: all columns, all digits",
    }

    def __init__(
        self,
        default_path: Path,
        counts: dict[Selection, int],
        *,
        last: ExportChoice | None = None,
    ) -> None:
        super().__init__()
        self._counts = counts
        # Flagged rows by default; with nothing flagged yet, the rows the filter shows.
        rows: Selection = "flagged" if counts["flagged"] else "shown"
        self._first = last or ExportChoice(default_path, rows)

    def compose(self) -> ComposeResult:
        first = self._first
        with Vertical(classes="dialog"):
            yield Label("Export comparisons to CSV", classes="dialog-title")
            with Horizontal(id="export-choices"):
                with Vertical(id="export-rows-part"):
                    yield Label("Rows", classes="export-heading")
                    with ChoiceSet(id="export-rows", compact=True):
                        for which in SELECTIONS:
                            yield Choice(
                                f"{which} ({self._counts[which]})",
                                value=which == first.rows,
                                id=f"rows-{which}",
                            )
                with Vertical(id="export-columns-part"):
                    yield Label("Columns", classes="export-heading")
                    with ChoiceSet(id="export-columns", compact=True):
                        for columns in COLUMN_SETS:
                            yield Choice(
                                self.COLUMN_LABELS[columns],
                                value=columns == first.columns,
                                id=f"columns-{columns}",
                            )
            with Horizontal(id="export-file"):
                yield Label("File name ", id="export-path-label")
                # Not selected on focus: tabbing in and typing must not replace the name.
                yield Input(str(first.path), id="export-path", select_on_focus=False)
            yield Label("", id="export-error", classes="dialog-error")
            yield Label(EXPORT_HINT, id="export-hint", classes="dialog-hint")
            with Horizontal(classes="dialog-buttons"):
                yield Button("Export", variant="primary", id="export-go")
                yield Button("Cancel", id="export-cancel")

    def on_mount(self) -> None:
        self._say("")
        self.query_one("#export-rows", ChoiceSet).focus()

    def _say(self, error: str) -> None:
        """Show ``error`` in place of the hint; no error brings the hint back."""
        label = self.query_one("#export-error", Label)
        label.update(literal(error))
        label.display = bool(error)
        self.query_one("#export-hint", Label).display = not error

    def _pressed(self, selector: str) -> str:
        pressed = self.query_one(selector, ChoiceSet).pressed_button
        return (pressed.id or "") if pressed else ""

    def _rows(self) -> Selection:
        name = self._pressed("#export-rows")
        return next((w for w in SELECTIONS if f"rows-{w}" == name), self._first.rows)

    def _columns(self) -> ColumnSet:
        name = self._pressed("#export-columns")
        return next((c for c in COLUMN_SETS if f"columns-{c}" == name), "short")

    @on(Input.Changed, "#export-path")
    def _path_changed(self) -> None:
        self._say("")  # an error about the name said before no longer holds

    @on(Input.Submitted, "#export-path")
    @on(Button.Pressed, "#export-go")
    def action_submit(self) -> None:
        text = self.query_one("#export-path", Input).value.strip()
        if not text:
            self._say("give a file name")
            return
        path = Path(text).expanduser()
        if path.suffix.lower() != ".csv":
            path = path.with_name(path.name + ".csv")
        if not path.parent.exists():
            self._say(f"folder {path.parent} does not exist")
            return
        self.dismiss(ExportChoice(path=path, rows=self._rows(), columns=self._columns()))

    @on(Button.Pressed, "#export-cancel")
    def action_cancel(self) -> None:
        self.dismiss(None)


def replace_question(path: Path, old_rows: int | None, new_rows: int) -> ConfirmScreen:
    """Ask before an export replaces ``path``, with the rows it holds and the rows it
    would hold: ``replace out.csv (42 rows) with 2 rows?``"""
    return ConfirmScreen(
        f"{path} exists.",
        detail=f"Replace {path.name} ({rows_text(old_rows)}) with {rows_text(new_rows)}?",
    )


class ConfirmScreen(ModalScreen[bool]):
    """A yes/no question (``detail`` below it); y answers yes, n or escape no, enter the
    button with the focus (no, at first)."""

    BINDINGS = [
        Binding("y", "answer(True)", "Yes", id="confirm.yes"),
        Binding("n,escape", "answer(False)", "No", id="confirm.no"),
    ]

    def __init__(self, question: str, *, detail: str = "") -> None:
        super().__init__()
        self._question = question
        self._detail = detail

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Label(literal(self._question), classes="dialog-title")
            if self._detail:
                yield Label(literal(self._detail), id="confirm-detail")
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
