"""The review app: a list of every comparison, the detail of the highlighted one, and the
reviewer's flags, decisions and notes, saved at once."""

from __future__ import annotations

import argparse
from dataclasses import dataclass
from pathlib import Path

import polars as pl
from rich.text import Text
from textual import events, on, work
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, VerticalScroll
from textual.css.query import NoMatches
from textual.message import Message
from textual.timer import Timer
from textual.widgets import Footer, Input, Static
from textual.worker import get_current_worker

from foldsift.stats.equivalence import BAND_CLASSES
from foldsift.tui.export import join_reviews, write_export
from foldsift.stats.load import InputError, load_table
from foldsift.tui.store import ReviewStore, ReviewStoreError, default_review_path
from foldsift.stats.robust import DEFAULT_RESAMPLES, GroupValues, RobustCheck, robust_check
from foldsift.stats.scan import ScanResult, ScanSettings, run_scan
from foldsift.stats.sentence import readable_outcome, sentence_column

from .filtering import FilterError, parse_filter
from .screens.dialogs import (
    CAUTIONS,
    ConfirmScreen,
    ExportChoice,
    ExportScreen,
    NoteScreen,
    TextScreen,
)
from .widgets.comparison_list import COLUMNS, ComparisonList
from .widgets.facts import facts_text
from .widgets.histograms import back_to_back

SORTABLE = [column.sort_on for column in COLUMNS]
SORT_NAMES = {column.sort_on: column.title for column in COLUMNS} | {
    "flagged": "flag",
    "note": "note",
    "warning_count": "warnings",
    "level_b": "levels",
    "n_min": "smaller n",
    "ci_low": "CI",
    "change_size": "size of change",
}
#: Columns the app adds for sorting, searching and drawing; exports leave them out.
DISPLAY_ONLY = ("warning_count", "outcome_label", "change_size", "n_min")


@dataclass
class ScanFinished(Message):
    """The background scan is done (result) or failed (error)."""

    result: ScanResult | None
    error: str | None


@dataclass
class RobustProgress(Message):
    """How far the cross-checks worker is; later ones replace earlier ones in the queue."""

    done: int
    total: int
    finished: bool = False

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, RobustProgress) and not message.finished


@dataclass
class RobustFinished(Message):
    key: str
    check: RobustCheck | None
    error: str | None = None


class FoldsiftApp(App[int]):
    """Triage every comparison of a scan."""

    CSS_PATH = "app.tcss"
    TITLE = "foldsift"
    ENABLE_COMMAND_PALETTE = False  # every action has its key; the footer needs the room
    BINDINGS = [
        Binding("slash", "focus_filter", "Filter", id="app.filter"),
        Binding("s", "next_sort", "Sort", id="app.sort"),
        Binding("r", "reverse_sort", "Reverse", show=False, id="app.reverse"),
        Binding("space", "toggle_flag", "Flag", id="app.flag"),
        Binding("n", "edit_note", "Note", id="app.note"),
        Binding("1", "decide('keep')", "Keep·2 Doubt·3 Drop", id="app.keep"),
        Binding("2", "decide('doubt')", "Doubt", show=False, id="app.doubt"),
        Binding("3", "decide('drop')", "Drop", show=False, id="app.drop"),
        Binding("0", "decide('')", "Undecide", show=False, id="app.undecide"),
        Binding("b", "robust", "Cross-check", id="app.robust"),
        Binding("B", "robust_shown", "Cross-check shown", show=False, id="app.robust_shown"),
        Binding("escape", "stop_checks", "Stop checks", show=False, id="app.stop_checks"),
        Binding("x", "export", "Export", id="app.export"),
        Binding("z", "cycle_panes", "Panes", id="app.panes"),
        Binding("question_mark", "help", "Help", id="app.help"),
        Binding("i", "about", "About", show=False, id="app.about"),
    ]

    def __init__(
        self,
        data_path: Path,
        settings: ScanSettings,
        *,
        groupings: list[str] | None = None,
        outcomes: list[str] | None = None,
        reviews: Path | None = None,
        export_dir: Path | None = None,
        robust_on_open: bool = False,
    ) -> None:
        super().__init__()
        self.robust_on_open = robust_on_open
        self.data_path = Path(data_path)
        self.settings = settings
        self._groupings = groupings
        self._outcomes = outcomes
        self._reviews_path = reviews
        self.export_dir = export_dir or Path.cwd()
        self.result: ScanResult | None = None
        self.store: ReviewStore | None = None
        self.base: pl.DataFrame = pl.DataFrame()
        self.sort_on = "q_bh"
        self.descending = False
        self.filter_text = ""
        self.robust: dict[str, RobustCheck] = {}
        self._values: GroupValues | None = None
        self._plot_timer: Timer | None = None
        self._message = ""
        self._facts_lines = -1
        self._facts_key: str | None = None
        self._note_key: str | None = None
        self._note_before = ""
        self.error_text: str | None = None

    # -- layout -----------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield Static("", id="status")
        yield Input(
            placeholder="filter: words · q<0.05 · ratio>2 · outside:0.8,1.25 · warned · flagged · undecided  (/ to type, ? for all)",
            id="filter",
        )
        yield ComparisonList(id="list")
        with Horizontal(id="detail"):
            with VerticalScroll(id="facts"):
                yield Static("", id="sentence")
            yield Static("", id="plots")
        yield Footer()

    def on_mount(self) -> None:
        self.sub_title = self.data_path.name
        self._set_status(f"scanning {self.data_path.name} …")
        listing = self.query_one(ComparisonList)
        listing.loading = True  # a busy indicator over the list until the scan is back
        listing.focus()
        self.run_scan()

    # -- scan -------------------------------------------------------------------------------
    @work(thread=True, exclusive=True, group="scan")
    def run_scan(self) -> None:
        try:
            table = load_table(self.data_path, groupings=self._groupings, outcomes=self._outcomes)
            result = run_scan(table, self.settings)
        except (InputError, ValueError) as error:
            self.post_message(ScanFinished(None, str(error)))
            return
        self.post_message(ScanFinished(result, None))

    @on(ScanFinished)
    def scan_finished(self, message: ScanFinished) -> None:
        listing = self.query_one(ComparisonList)
        listing.loading = False
        listing.focus()  # the busy indicator took focus away from the list
        if message.result is None:
            self._show_error(f"Cannot open the data: {message.error}")
            return
        self.result = message.result
        path = self._reviews_path or default_review_path(self.data_path)
        try:
            self.store = ReviewStore(path, self.result.table.fingerprint)
        except ReviewStoreError as error:
            self._show_error(f"Cannot open the review file: {error}")
            return
        self._values = GroupValues(
            self.result.used, self.result.table.groupings, self.result.table.outcomes
        )
        self.base = self._with_reviews(self.result.comparisons)
        self._apply_view()
        earlier = int(self.base["on_earlier_data"].sum())
        self._message = f"reviews are saved as you go in {self.store.path}"
        if earlier:
            self._message += (
                f"; {earlier} review(s) were made on an earlier version of the data (italics)"
            )
        self._set_status()
        if self.robust_on_open:
            self.action_robust_shown()

    def _show_error(self, text: str) -> None:
        self._message = text
        self.error_text = text
        self.query_one("#status", Static).update(
            Text(text + "  — press ctrl+q to quit", style="bold red")
        )
        self.query_one("#sentence", Static).update(Text(text, style="bold red"))

    def _with_reviews(self, comparisons: pl.DataFrame) -> pl.DataFrame:
        assert self.store is not None and self.result is not None
        joined = join_reviews(comparisons, self.store.frame())
        labels = {name: readable_outcome(name) for name in self.result.table.outcomes}
        return joined.with_columns(
            outcome_label=pl.col("outcome").replace_strict(labels, return_dtype=pl.Utf8),
            change_size=pl.col("log2_ratio").abs(),
            n_min=pl.min_horizontal("n_a", "n_b"),
            warning_count=pl.when(pl.col("warnings") == "")
            .then(0)
            .otherwise(pl.col("warnings").str.count_matches(";") + 1),
        )

    # -- view: sort and filter --------------------------------------------------------------
    def _apply_view(self, keep_key: str | None = None) -> None:
        """Filter and sort the base frame; the cursor stays on keep_key, else goes to the top."""
        listing = self.query_one(ComparisonList)
        frame = self.base
        try:
            expression = parse_filter(self.filter_text, self.base.columns)
        except FilterError as error:
            self._message = f"filter not applied: {error}"
            expression = None
        else:
            if self._message.startswith("filter not applied:"):
                self._message = ""
        if expression is not None:
            frame = frame.filter(expression)
        frame = self._sorted(frame)
        listing.sort_on = self.sort_on
        listing.descending = self.descending
        listing.show(frame, keep_key=keep_key)
        self._set_status()

    def _sorted(self, frame: pl.DataFrame) -> pl.DataFrame:
        return frame.sort(
            self.sort_on, descending=self.descending, nulls_last=True, maintain_order=True
        )

    def _set_status(self, text: str | None = None) -> None:
        status = self.query_one("#status", Static)
        if text is not None:
            status.update(text)
            return
        shown = self.query_one(ComparisonList).frame.height
        total = self.base.height
        flagged = int(self.base["flagged"].sum()) if total else 0
        decided = int(self.base["decision"].is_not_null().sum()) if total else 0
        order = "descending" if self.descending else "ascending"
        line = Text.assemble(
            ("shown ", "dim"),
            (f"{shown}", "bold"),
            (f"/{total}", ""),
            ("  flagged ", "dim"),
            (f"{flagged}", "bold"),
            ("  decided ", "dim"),
            (f"{decided}", "bold"),
            ("  sort ", "dim"),
            (f"{SORT_NAMES.get(self.sort_on, self.sort_on)} {order}", "bold"),
            ("  filter ", "dim"),
            (self.filter_text or "none", "bold"),
        )
        if self._message:
            alarm = self._message.startswith(("filter not applied", "NOT SAVED", "export failed"))
            line.append("\n" + self._message, style="bold red" if alarm else "italic")
        status.update(line)

    @on(Input.Changed, "#filter")
    def filter_changed(self, event: Input.Changed) -> None:
        self.filter_text = event.value
        if self.result is not None:
            self._apply_view()

    @on(Input.Submitted, "#filter")
    def filter_submitted(self) -> None:
        self.query_one(ComparisonList).focus()

    def on_key(self, event: events.Key) -> None:
        # A key reaches the app after bubbling up from the widget it was queued for. When
        # "/" is followed at once by more keys (a fast typist, a paste over SSH), those were
        # queued for the list before focus moved: hand them to the filter line instead of
        # losing them. Keys the filter itself receives never bubble this far.
        field = self.focused
        if (
            isinstance(field, Input)
            and field.id == "filter"
            and event.is_printable
            and event.character
        ):
            field.insert_text_at_cursor(event.character)
            event.stop()

    def action_focus_filter(self) -> None:
        # Focus at once, not on the next idle (Widget.focus): keys typed right after "/"
        # (a fast typist, a paste over SSH) must land in the filter, not in the list.
        self.screen.set_focus(self.query_one("#filter", Input))

    def action_next_sort(self) -> None:
        index = SORTABLE.index(self.sort_on) if self.sort_on in SORTABLE else -1
        self.sort_on = SORTABLE[(index + 1) % len(SORTABLE)]
        self._apply_view()

    def action_reverse_sort(self) -> None:
        self.descending = not self.descending
        self._apply_view()

    @on(ComparisonList.HeaderClicked)
    def header_clicked(self, message: ComparisonList.HeaderClicked) -> None:
        if message.sort_on == self.sort_on:
            self.descending = not self.descending
        else:
            self.sort_on, self.descending = message.sort_on, False
        self._apply_view()

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        needs_row = {
            "toggle_flag",
            "edit_note",
            "decide",
            "robust",
            "robust_shown",
            "export",
            "next_sort",
            "reverse_sort",
        }
        if action in needs_row and (self.result is None or self.store is None):
            return None
        return not (isinstance(self.focused, Input) and action in needs_row | {"focus_filter"})

    PANE_LAYOUTS = ("", "detail-large", "list-large")

    def action_cycle_panes(self) -> None:
        """Balanced, a large detail, or a large list (for small terminals)."""
        current = next(
            (name for name in self.PANE_LAYOUTS if name and self.screen.has_class(name)), ""
        )
        following = self.PANE_LAYOUTS[
            (self.PANE_LAYOUTS.index(current) + 1) % len(self.PANE_LAYOUTS)
        ]
        self.screen.remove_class(*[name for name in self.PANE_LAYOUTS if name])
        if following:
            self.screen.add_class(following)
        self._facts_lines = -1
        self.call_after_refresh(self._show_plots)
        self.call_after_refresh(self._show_facts)

    # -- detail -----------------------------------------------------------------------------
    def _current(self) -> dict | None:
        listing = self.query_one(ComparisonList)
        if not listing.frame.height:
            return None
        return listing.frame.row(listing.cursor_row, named=True)

    @on(ComparisonList.Highlighted)
    def highlighted(self, message: ComparisonList.Highlighted) -> None:
        if self.store is None:  # still scanning, or opening failed: keep the message shown
            return
        try:
            self._show_facts()
        except NoMatches:  # a late message while the app is closing
            return
        if self._plot_timer is not None:
            self._plot_timer.stop()
        self._plot_timer = self.set_timer(0.06, self._show_plots)

    def _show_facts(self) -> None:
        row = self._current()
        key = row["key"] if row else None
        if key != self._facts_key:  # a new comparison starts at the top of its facts
            self._facts_key = key
            self.query_one("#facts").scroll_home(animate=False)
        sentence = self.query_one("#sentence", Static)
        if row is None:
            sentence.update(Text("No comparison matches the filter.", style="italic"))
            return
        # A layout pass costs more than the paint: only ask for one when the height changes.
        width = max(sentence.size.width, 20)
        text = facts_text(row, self.settings.band, self.robust.get(row["key"]), width)
        lines = len(text.wrap(self.console, width))
        if lines != self._facts_lines:
            self._facts_lines = lines
            sentence.styles.height = lines
            sentence.update(text)
        else:
            sentence.update(text, layout=False)

    def _show_plots(self) -> None:
        try:
            row = self._current()
            plots = self.query_one("#plots", Static)
        except NoMatches:  # the timer fired while the app was closing
            return
        if row is None or self._values is None:
            plots.update("", layout=False)
            return
        a = self._values.values(row["grouping"], row["level_a"], row["outcome"])
        b = self._values.values(row["grouping"], row["level_b"], row["outcome"])
        width = max(plots.size.width - 1, 30)
        height = max(plots.size.height // 2, 7)
        name = readable_outcome(row["outcome"])
        legend = f"{name}: ▲ b {row['level_b']} · ▼ a {row['level_a']}"
        raw = back_to_back(a, b, log_scale=False, width=width, height=height, title=legend)
        log = back_to_back(
            a,
            b,
            log_scale=True,
            width=width,
            height=height,
            title="log scale (ticks in raw units) · lines: GM, + median",
        )
        plots.update(Text.assemble(raw, "\n", log), layout=False)

    # -- reviewing --------------------------------------------------------------------------
    def _changed(self, key: str) -> None:
        assert self.store is not None
        review = self.store.get(key)
        values = {
            "flagged": review.flagged if review else False,
            "decision": review.decision if review else None,
            "note": review.note if review else "",
            "on_earlier_data": review.on_earlier_data if review else False,
            "review_fingerprint": review.fingerprint if review else None,
            "updated_at": review.updated_at if review else None,
        }
        match = pl.col("key") == key
        self.base = self.base.with_columns(
            [
                pl.when(match)
                .then(pl.lit(v, dtype=self.base.schema[c]))
                .otherwise(pl.col(c))
                .alias(c)
                for c, v in values.items()
            ]
        )
        # The row stays where it is even if it no longer matches the filter or the sort: a
        # row that vanished under the cursor would make the next key act on its neighbour.
        # Editing the filter or sorting again applies them afresh.
        listing = self.query_one(ComparisonList)
        listing.update_row(
            listing.frame.with_columns(
                [
                    pl.when(match)
                    .then(pl.lit(v, dtype=self.base.schema[c]))
                    .otherwise(pl.col(c))
                    .alias(c)
                    for c, v in values.items()
                ]
            )
        )
        self._set_status()
        self._show_facts()

    def _save(self, change) -> bool:
        try:
            change()
        except ReviewStoreError as error:
            self._message = f"NOT SAVED: {error}"
            self._set_status()
            self.bell()
            return False
        return True

    def action_toggle_flag(self) -> None:
        key = self.query_one(ComparisonList).current_key
        if key and self.store and self._save(lambda: self.store.toggle_flag(key)):
            self._changed(key)

    def action_decide(self, decision: str) -> None:
        key = self.query_one(ComparisonList).current_key
        if (
            key
            and self.store
            and self._save(lambda: self.store.set_decision(key, decision or None))
        ):
            self._changed(key)

    def action_edit_note(self) -> None:
        row = self._current()
        if row is None or self.store is None:
            return
        key = row["key"]
        title = f"Note: {readable_outcome(row['outcome'])}, {row['level_b']} ÷ {row['level_a']} ({row['grouping']})"

        def done(text: str | None) -> None:
            if (
                text is not None
                and self.store
                and self._save(lambda: self.store.set_note(key, text))
            ):
                self._changed(key)

        self._note_key, self._note_before = key, row.get("note") or ""
        self.push_screen(NoteScreen(title, self._note_before), done)

    # -- robust cross-checks ----------------------------------------------------------------
    def action_robust(self) -> None:
        """Cross-checks for the highlighted comparison."""
        row = self._current()
        if row is not None:
            self._start_checks([row])

    def action_robust_shown(self) -> None:
        """Cross-checks for every comparison the filter shows that has none yet."""
        frame = self.query_one(ComparisonList).frame
        rows = [row for row in frame.iter_rows(named=True) if row["key"] not in self.robust]
        if not rows:
            self._message = "every shown comparison already has its cross-checks"
            self._set_status()
            return
        self._start_checks(rows)

    def action_stop_checks(self) -> None:
        self.workers.cancel_group(self, "robust")

    def _start_checks(self, rows: list[dict]) -> None:
        if self._values is None:
            return
        jobs = [
            (row["key"], row["grouping"], row["level_a"], row["level_b"], row["outcome"])
            for row in rows
        ]
        self._message = f"cross-checks: 0/{len(jobs)} (bootstrap {DEFAULT_RESAMPLES:,} resamples)"
        self._set_status()
        self._robust_worker(jobs, rows[0]["confidence"])

    @work(thread=True, exclusive=True, group="robust")
    def _robust_worker(self, jobs: list[tuple[str, str, str, str, str]], confidence: float) -> None:
        worker = get_current_worker()
        assert self._values is not None
        done = 0
        for key, grouping, level_a, level_b, outcome in jobs:
            if worker.is_cancelled:
                break
            a = self._values.values(grouping, level_a, outcome)
            b = self._values.values(grouping, level_b, outcome)
            try:
                check = robust_check(a, b, confidence=confidence)
            except Exception as error:  # a numerical failure must not end the session
                self.post_message(RobustFinished(key, None, str(error)))
                continue
            done += 1
            self.post_message(RobustFinished(key, check))
            self.post_message(RobustProgress(done, len(jobs)))
        self.post_message(RobustProgress(done, len(jobs), finished=True))

    @on(RobustFinished)
    def robust_finished(self, message: RobustFinished) -> None:
        if message.check is None:
            self._message = f"cross-checks failed for one comparison: {message.error}"
            self._set_status()
            return
        self.robust[message.key] = message.check
        if message.key == self.query_one(ComparisonList).current_key:
            self._show_facts()

    @on(RobustProgress)
    def robust_progress(self, message: RobustProgress) -> None:
        if message.finished:
            stopped = message.done < message.total
            self._message = (
                f"cross-checks stopped after {message.done}/{message.total}"
                if stopped
                else f"cross-checks done for {message.done} comparison(s)"
            )
        else:
            share = message.done / max(message.total, 1)
            bar = "#" * round(20 * share) + "." * (20 - round(20 * share))
            self._message = f"cross-checks [{bar}] {message.done}/{message.total} · escape stops"
        self._set_status()

    def robust_frame(self) -> pl.DataFrame:
        """Cross-check results so far, one row per key (empty frame with the columns if none)."""
        columns = {
            "key": pl.Utf8,
            "boot_median_ratio_low": pl.Float64,
            "boot_median_ratio_high": pl.Float64,
            "hl_ratio": pl.Float64,
            "hl_ci_low": pl.Float64,
            "hl_ci_high": pl.Float64,
            "mann_whitney_p": pl.Float64,
        }
        rows = [
            (
                key,
                c.median_ratio_ci_low,
                c.median_ratio_ci_high,
                c.hl_ratio,
                c.hl_ci_low,
                c.hl_ci_high,
                c.mann_whitney_p,
            )
            for key, c in self.robust.items()
        ]
        frame = pl.DataFrame(rows, schema=columns, orient="row")
        return frame.with_columns(pl.col(pl.Float64).fill_nan(None))

    # -- export -----------------------------------------------------------------------------
    def action_export(self) -> None:
        if self.result is None:
            return
        listing = self.query_one(ComparisonList)
        counts = {
            "flagged": int(self.base["flagged"].sum()),
            "shown": listing.frame.height,
            "all": self.base.height,
        }
        default = self.export_dir / f"{self.data_path.stem}-findings.csv"
        self.push_screen(ExportScreen(default, counts), self._export_chosen)

    def _export_chosen(self, choice: ExportChoice | None) -> None:
        if choice is None:
            return
        if choice.path.exists():
            self.push_screen(
                ConfirmScreen(f"{choice.path} exists. Replace it?"),
                lambda yes: self._export(choice, overwrite=True) if yes else None,
            )
            return
        self._export(choice, overwrite=False)

    def export_frame(self, rows: str) -> pl.DataFrame:
        """The rows an export writes: flagged, shown (the filter) or all, with sentences."""
        if rows == "shown":
            frame = self.query_one(ComparisonList).frame
        elif rows == "all":
            frame = self._sorted(self.base)
        else:
            frame = self._sorted(self.base.filter(pl.col("flagged")))
        frame = frame.drop(*DISPLAY_ONLY).join(self.robust_frame(), on="key", how="left")
        return frame.with_columns(sentence_column(frame))

    def _export(self, choice: ExportChoice, *, overwrite: bool) -> None:
        assert self.result is not None
        frame = self.export_frame(choice.rows)
        settings = self.result.metadata() | {
            "rows_chosen": choice.rows,
            "filter": self.filter_text,
            "reviews": str(self.store.path) if self.store else None,
        }
        try:
            written = write_export(frame, choice.path, settings, overwrite=overwrite)
        except (OSError, ValueError) as error:
            self._message = f"export failed: {error}"
        else:
            self._message = f"exported {frame.height} row(s) to {written}"
        self._set_status()

    # -- help -------------------------------------------------------------------------------
    def action_help(self) -> None:
        self.push_screen(TextScreen(help_text()))

    def action_about(self) -> None:
        self.push_screen(TextScreen(about_text()))

    async def action_quit(self) -> None:
        """Quit; the exit status is 2 when the data could not be opened (as for scan).

        Quitting from the note editor keeps what was typed: nothing is lost on the way out."""
        if isinstance(self.screen, NoteScreen) and self.store and self._note_key:
            text = self.screen.text
            if text != self._note_before:
                self._save(lambda: self.store.set_note(self._note_key, text))
        code = 2 if self.error_text else 0
        self.exit(code, return_code=code)  # exit(2) alone sets the result, not the status

    def on_unmount(self) -> None:
        if self.store is not None:
            self.store.close()


def help_text() -> str:
    from .filtering import __doc__ as filter_doc

    keys = [
        ("↑ ↓ / j k, page up/down, home/end", "move through the list"),
        ("click a column title", "sort on it (again: reverse)"),
        ("s / r", "sort on the next column / reverse the order"),
        ("/", "type in the filter line (enter returns to the list)"),
        ("space", "flag or unflag the highlighted comparison"),
        ("1 / 2 / 3 / 0", "decision: keep / doubt / drop / none"),
        ("n", "write a note (ctrl+s saves, escape cancels)"),
        ("b", "cross-checks: bootstrap CI of the median ratio, Hodges-Lehmann"),
        ("B / escape", "cross-check every shown comparison (progress in the status) / stop"),
        ("x", "export flagged, filtered or all rows to CSV"),
        ("z", "pane sizes: balanced, large detail, large list"),
        ("tab", "move between the list, the filter and the detail"),
        ("?  /  i", "this help / about and cautions"),
        ("ctrl+q", "quit (every change is already saved)"),
    ]
    lines = ["# foldsift keys", ""]
    lines += [f"- **{key}** — {does}" for key, does in keys]
    words = (filter_doc or "").split("Words, separated", 1)[-1]
    lines += ["", "# Filter line", "", "Words, separated" + words]
    lines += ["", "# Equivalence classes", ""]
    lines += [f"- **{name}**: {text}" for name, text in BAND_CLASSES.items()]
    lines += ["", "# Warnings", ""]
    from foldsift.stats.diagnostics import WARNINGS

    lines += [f"- **{name}**: {text}" for name, text in WARNINGS.items()]
    return "\n".join(lines)


def about_text() -> str:
    return (
        "# About foldsift\n\n"
        "Each comparison is a two-sample t-test on the logs (Welch by default). The ratio is "
        "exp(mean log b − mean log a), the ratio of geometric means of b over a; it is the "
        "ratio of medians when each group's logs are symmetric. The CI is exp() of the CI of "
        "the difference of mean logs. Holm and Benjamini-Hochberg (q) adjust across the family.\n\n"
        + CAUTIONS
    )


def make_app(
    data_path: Path,
    args: argparse.Namespace | None = None,
    *,
    reviews: Path | None = None,
    export_dir: Path | None = None,
) -> FoldsiftApp:
    """Build the app from a data file and parsed command-line options (tests call this too)."""
    from .cli import settings_from

    settings = settings_from(args) if args is not None else ScanSettings()
    return FoldsiftApp(
        data_path,
        settings,
        groupings=getattr(args, "group", None),
        outcomes=getattr(args, "outcome", None),
        reviews=reviews,
        export_dir=export_dir,
        robust_on_open=bool(getattr(args, "robust", False)),
    )
