"""The review app: it reads and scans the data in a thread, then shows one review screen.

Everything a reviewer does happens on ``screens.review.ReviewScreen``, through the
``ReviewSession`` (no Textual) that the command line uses too. The app itself only opens
the session, shows a busy indicator or the reason the data cannot be opened, offers help
and about pages, and quits (exit status 2 when the data could not be opened).

Ending: ctrl+q quits at once, also while the data is still being read (the reading thread
is a daemon that nobody waits for: a read that blocks, such as a named pipe nobody writes
to, cannot be interrupted). A note being typed is kept: ctrl+q saves it as the note, and
SIGHUP (the terminal or the SSH connection is gone) or SIGTERM keep it as a draft that the
editor restores next time. A signal is not the reviewer's choice: a half-typed note must
not reach an export as if it were finished, nor replace a note another session saved
meanwhile; a draft does neither and loses nothing. The app then ends with status 128 + the
signal's number, the shells' convention for a process ended by a signal."""

from __future__ import annotations

import asyncio
import signal
import threading
from collections.abc import Callable
from contextlib import suppress
from pathlib import Path
from types import FrameType
from typing import Any

from textual import on
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
from .widgets.plain import literal_text
from .widgets.status_line import Notice, StatusLine

#: The exit status when the data cannot be opened (as for ``foldsift scan``).
EXIT_BAD_INPUT = 2
#: The signals that end the app after keeping the open note as a draft.
ENDING_SIGNALS: tuple[signal.Signals, ...] = tuple(
    getattr(signal, name) for name in ("SIGHUP", "SIGTERM") if hasattr(signal, name)
)
#: What signal.signal accepts as a handler.
Handler = Callable[[int, FrameType | None], Any] | int | None


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
        self._scan_thread: threading.Thread | None = None
        self._old_handlers: dict[int, Handler] = {}

    def compose(self) -> ComposeResult:
        yield StatusLine(id="status")
        yield Static("", id="opening")
        yield Footer()

    def on_mount(self) -> None:
        self.sub_title = self.options.data_path.name
        self.query_one(StatusLine).notice = Notice(f"scanning {self.options.data_path.name} …")
        self.query_one("#opening").loading = True  # a busy indicator until the scan is back
        self._install_signal_handlers()
        # A daemon thread, not a worker: quitting must not wait for a read that blocks.
        self._scan_thread = threading.Thread(target=self._scan, name="foldsift-scan", daemon=True)
        self._scan_thread.start()

    @property
    def scanning(self) -> bool:
        """True while the data is being read and scanned."""
        return self._scan_thread is not None and self._scan_thread.is_alive()

    def _scan(self) -> None:
        """Runs in the scan thread; the result goes back as a message."""
        try:
            message = ScanFinished(scan(self.options, self._stage), None)
        except (InputError, ValueError) as error:
            message = ScanFinished(None, str(error))
        except Exception as error:  # a thread's failure must reach the screen, in one line
            message = ScanFinished(None, f"unexpected {type(error).__name__}: {error}")
        with suppress(RuntimeError):  # the app has ended meanwhile (its loop is closed)
            self.post_message(message)

    def _stage(self, what: str) -> None:
        """Runs in the scan thread: the busy notice says what the scan is doing."""
        with suppress(RuntimeError):  # the app has ended meanwhile
            self.call_from_thread(self._show_stage, what)

    def _show_stage(self, what: str) -> None:
        if self.scanning:
            self.query_one(StatusLine).notice = Notice(f"{what} …")

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
        self.query_one("#opening", Static).update(literal_text(text, "bold red"))

    def action_help(self) -> None:
        self.push_screen(TextScreen(help_text(self.options.settings.band)))

    def action_about(self) -> None:
        screen = self._review_screen()
        lines = screen.about_lines() if screen is not None else []
        self.push_screen(TextScreen(about_text(), lines))

    def _review_screen(self) -> ReviewScreen | None:
        return next((s for s in self.screen_stack if isinstance(s, ReviewScreen)), None)

    async def action_quit(self) -> None:
        """Quit; the exit status is 2 when the data could not be opened (as for scan).

        Keys that arrived before ctrl+q in the same burst wait in the focused widget's queue
        (ctrl+q is a priority key: the app acts on it before that widget has read them), so
        quitting waits behind them there: text typed just before ctrl+q is in the note."""
        target = self.focused or self.screen
        if not target.call_later(self._quit_now):  # the widget is closing: quit now
            self._quit_now()

    def _quit_now(self) -> None:
        """Keep what the note editor holds as the note, then end."""
        screen = self._review_screen()
        if screen is not None:
            screen.keep_open_note()
        code = EXIT_BAD_INPUT if self.error_text else 0
        self.exit(code, return_code=code)  # exit(2) alone sets the result, not the status

    # -- signals ---------------------------------------------------------------------------
    def _install_signal_handlers(self) -> None:
        """Handle SIGHUP and SIGTERM (Python runs handlers on the main thread only, which
        is where the app runs; elsewhere, as in a test's thread, nothing is installed)."""
        if threading.current_thread() is not threading.main_thread():
            return
        loop = asyncio.get_running_loop()

        def handler(signum: int, frame: FrameType | None) -> None:
            # The handler may run between any two steps of the app's code: act from the
            # event loop, where no change of the review file is half done.
            with suppress(RuntimeError):  # the loop is closed: the app has ended
                loop.call_soon_threadsafe(self._end_by_signal, signum)

        for signum in ENDING_SIGNALS:
            self._old_handlers[signum] = signal.signal(signum, handler)

    def _restore_signal_handlers(self) -> None:
        for signum, old in self._old_handlers.items():
            signal.signal(signum, signal.SIG_DFL if old is None else old)
        self._old_handlers.clear()

    def _end_by_signal(self, signum: int) -> None:
        """Keep the open note as a draft and end with status 128 + signum."""
        screen = self._review_screen()
        if screen is not None:
            screen.keep_open_note(as_draft=True)
        code = 128 + signum
        self.exit(code, return_code=code)

    def on_unmount(self) -> None:
        # Ended some other way with the editor open: what it holds is kept as a draft.
        screen = self._review_screen()
        if screen is not None:
            screen.keep_open_note(as_draft=True)
        self._restore_signal_handlers()
        if self.session is not None:
            self.session.close()
