"""The review app: it opens the session in a worker, then shows one review screen.

Everything a reviewer does happens on ``screens.review.ReviewScreen``, through the
``ReviewSession`` (no Textual) that the command line uses too. The app itself only opens
the session, shows a busy indicator or the reason the data cannot be opened, offers help
and about pages, and quits (exit status 2 when the data could not be opened)."""

from __future__ import annotations

from pathlib import Path

from rich.text import Text
from textual import on, work
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.widgets import Footer, Static

from foldsift.stats.load import InputError

from .messages import ScanFinished
from .screens.dialogs import TextScreen
from .screens.help import about_text, help_text
from .screens.review import ReviewScreen
from .session import ReviewSession, SessionOptions, scan
from .store import ReviewStoreError
from .widgets.status_line import Notice, StatusLine

#: The exit status when the data cannot be opened (as for ``foldsift scan``).
EXIT_BAD_INPUT = 2


class FoldsiftApp(App[int]):
    """Triage every comparison of a scan."""

    CSS_PATH = "app.tcss"
    TITLE = "foldsift"
    ENABLE_COMMAND_PALETTE = False  # every action has its key; the footer needs the room
    BINDINGS = [
        Binding("question_mark", "help", "Help", id="app.help"),
        Binding("i", "about", "About", show=False, id="app.about"),
    ]

    def __init__(
        self,
        options: SessionOptions,
        robust_on_open: bool = False,
        *,
        export_dir: Path | None = None,
    ) -> None:
        super().__init__()
        self.options = options
        self.robust_on_open = robust_on_open
        self.export_dir = export_dir or Path.cwd()
        self.session: ReviewSession | None = None
        #: Why the data could not be opened (one line), for the command line to repeat.
        self.error_text: str | None = None

    def compose(self) -> ComposeResult:
        yield StatusLine(id="status")
        yield Static("", id="opening")
        yield Footer()

    def on_mount(self) -> None:
        self.sub_title = self.options.data_path.name
        self.query_one(StatusLine).notice = Notice(f"scanning {self.options.data_path.name} …")
        self.query_one("#opening").loading = True  # a busy indicator until the scan is back
        self._scan()

    @work(thread=True, exclusive=True, group="scan")
    def _scan(self) -> None:
        try:
            result = scan(self.options)
        except (InputError, ValueError) as error:
            self.post_message(ScanFinished(None, str(error)))
            return
        self.post_message(ScanFinished(result, None))

    @on(ScanFinished)
    def _scan_finished(self, message: ScanFinished) -> None:
        self.query_one("#opening").loading = False
        if message.result is None:
            self._show_error(f"Cannot open the data: {message.error}")
            return
        # The review store is opened here, on the thread that uses it.
        try:
            self.session = ReviewSession.from_scan(self.options, message.result)
        except ReviewStoreError as error:
            self._show_error(f"Cannot open the review file: {error}")
            return
        screen = ReviewScreen(
            self.session, export_dir=self.export_dir, check_all_on_open=self.robust_on_open
        )
        self.push_screen(screen)

    def _show_error(self, text: str) -> None:
        self.error_text = text
        self.query_one(StatusLine).notice = Notice(f"{text}  — press ctrl+q to quit", "error")
        self.query_one("#opening", Static).update(Text(text, style="bold red"))

    def action_help(self) -> None:
        self.push_screen(TextScreen(help_text(self.options.settings.band)))

    def action_about(self) -> None:
        self.push_screen(TextScreen(about_text()))

    async def action_quit(self) -> None:
        """Quit; the exit status is 2 when the data could not be opened (as for scan).

        Quitting from the note editor keeps what was typed: nothing is lost on the way out."""
        for screen in self.screen_stack:
            if isinstance(screen, ReviewScreen):
                screen.keep_open_note()
        code = EXIT_BAD_INPUT if self.error_text else 0
        self.exit(code, return_code=code)  # exit(2) alone sets the result, not the status

    def on_unmount(self) -> None:
        if self.session is not None:
            self.session.close()
