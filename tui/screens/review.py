"""The review screen: the status line, the filter line, the list of comparisons and the
detail of the highlighted one.

The screen holds the state of the view (sort, filter, pane sizes, the status message) as
reactives and sets its widgets from them and from the session ("attributes down"); widgets
tell it what happened by messages ("messages up"). Keys become calls on the session: flags,
decisions, notes, cross-checks and exports all go through ``ReviewSession``.

Another session may write the same review file. A change refused because the review was
changed there (``ReviewConflict``) shows the review as it is now and says that the same key
applies the change; the note editor shows the other text before replacing it. A note being
typed is kept as a draft at every pause and restored when the editor next opens on it.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from contextlib import suppress
from dataclasses import dataclass
from pathlib import Path
from typing import Literal, get_args

import polars as pl
from textual import events, on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.css.query import NoMatches
from textual.reactive import reactive
from textual.screen import Screen
from textual.widgets import Footer, Input
from textual.worker import get_current_worker

from foldsift.stats.columns import ReviewedRow
from foldsift.stats.robust import CheckJob
from foldsift.stats.sentence import readable_outcome, stratum_phrase
from foldsift.stats.vocabulary import DECISIONS, choose

from ..export import ExportForm, csv_rows
from ..messages import CrossCheckDone, CrossCheckProgress
from ..session import DEFAULT_SORT, ReviewSession, Selection
from ..store import Review, ReviewConflict, ReviewStoreBusy, ReviewStoreError
from ..widgets.comparison_list import SORT_NAMES, SORTABLE, ComparisonList
from ..widgets.detail import Detail, Subject
from ..widgets.overview import VIEW_NAMES, EvidenceMap, IntervalView, ViewName
from ..widgets.status_line import Notice, StatusLine, ViewSummary
from .dialogs import ExportChoice, ExportScreen, NoteScreen, replace_question

#: The pane sizes ``z`` steps through; the screen carries the class of any but the first.
PaneLayout = Literal["balanced", "detail-large", "list-large"]
PANE_LAYOUTS: tuple[PaneLayout, ...] = get_args(PaneLayout)

#: Actions on the list, which do nothing while the filter line has the keys.
LIST_ACTIONS = frozenset(
    {
        "focus_filter",
        "toggle_flag",
        "edit_note",
        "decide",
        "clear_decision",
        "robust",
        "robust_shown",
        "export",
        "next_sort",
        "reverse_sort",
        "next_view",
    }
)
CROSS_CHECK_ACTIONS = frozenset({"robust", "robust_shown"})
FILTER_HINT = (
    "filter: words · q<0.05 · ratio>2 · outside:0.8,1.25 · warned · flagged · undecided"
    "  (/ to type, ? for all)"
)
BUSY = "review file busy — not saved, try again"
DRAFT_RESTORED = "unsaved draft restored: ctrl+s saves it, escape asks whether to keep it"
CHANGED_ELSEWHERE = (
    "this review was changed in another session since it was shown: the note is shown as it is now"
)
#: The key that repeats each decision.
DECISION_KEYS = {"keep": "1", "doubt": "2", "drop": "3"}
#: How many characters of another session's note the status line quotes.
QUOTED = 60


def comparison_name(row: ReviewedRow) -> str:
    """``copper (mg/kg), north ÷ south (site)``: which comparison a note belongs to."""
    return (
        f"{readable_outcome(row['outcome'])}, {row['level_b']} ÷ {row['level_a']} "
        f"({row['grouping']}{stratum_phrase(row)})"
    )


def review_state(review: Review | None) -> str:
    """A review in a few words, for the status line."""
    if review is None:
        return "no flag, decision or note"
    note = " ".join(review.note.split())
    if len(note) > QUOTED:
        note = note[: QUOTED - 1] + "…"
    return ", ".join(
        [
            "flagged" if review.flagged else "not flagged",
            f"decision {review.decision}" if review.decision else "no decision",
            f"note “{note}”" if note else "no note",
        ]
    )


def conflict_text(current: Review | None, again: str) -> str:
    """Why a change was not saved when another session changed the review first."""
    what = "removed this review" if current is None else "changed this review"
    return (
        f"not saved: another session {what}; now {review_state(current)} — press {again}"
        " again to apply your change"
    )


def time_left(done: int, total: int, elapsed: float) -> str:
    """ " · about 3 min left" from the pace so far; nothing before there is a pace to go by
    (3 done and 2 seconds) or when the rest takes under 5 seconds."""
    if done < 3 or elapsed < 2 or done >= total:
        return ""
    seconds = elapsed / done * (total - done)
    if seconds < 5:
        return ""
    if seconds < 90:
        return f" · about {round(seconds, -1) or 5:.0f} s left"
    return f" · about {round(seconds / 60):.0f} min left"


@dataclass(frozen=True)
class OpenNote:
    """The note editor that is open: for which key, over which saved note."""

    key: str
    before: str
    editor: NoteScreen


class ReviewScreen(Screen[None]):
    """Triage every comparison of one session."""

    BINDINGS = [
        # A priority binding acts as the key arrives, before the keys queued behind it are
        # handed on: "/copper" typed fast (or pasted over SSH) all lands in the filter line.
        Binding("slash", "focus_filter", "Filter", id="app.filter", priority=True),
        Binding("s", "next_sort", "Sort", id="app.sort"),
        Binding("r", "reverse_sort", "Reverse", show=False, id="app.reverse"),
        Binding("space", "toggle_flag", "Flag", id="app.flag"),
        Binding("n", "edit_note", "Note", id="app.note"),
        Binding("1", "decide('keep')", "Decide", id="app.keep"),
        Binding("2", "decide('doubt')", "Doubt", show=False, id="app.doubt"),
        Binding("3", "decide('drop')", "Drop", show=False, id="app.drop"),
        Binding("0", "clear_decision", "Undecide", show=False, id="app.undecide"),
        Binding("b", "robust", "Check", show=False, id="app.robust"),
        Binding("B", "robust_shown", "Cross-check shown", show=False, id="app.robust_shown"),
        Binding("escape", "stop_checks", "Stop checks", show=False, id="app.stop_checks"),
        Binding("x", "export", "Export", id="app.export"),
        Binding("z", "cycle_panes", "Panes", show=False, id="app.panes"),
        Binding("v", "next_view", "View", id="app.view"),
    ]

    sort_on: reactive[str] = reactive(DEFAULT_SORT, init=False)
    descending: reactive[bool] = reactive(False, init=False)
    filter_text: reactive[str] = reactive("", init=False)
    panes: reactive[PaneLayout] = reactive("balanced", init=False)
    view: reactive[ViewName] = reactive("list", init=False)
    notice: reactive[Notice | None] = reactive(None, init=False)

    def __init__(
        self, session: ReviewSession, *, export_dir: Path, check_all_on_open: bool = False
    ) -> None:
        super().__init__()
        self.session = session
        self.export_dir = export_dir
        self._check_all_on_open = check_all_on_open
        self._note: OpenNote | None = None
        self._last_export: ExportChoice | None = None  # the dialog opens on it again

    # -- layout and the view ---------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield StatusLine(id="status")
        # The filter line takes keys only after "/" (not by tab): a stray tab would
        # otherwise send the command keys that follow into it.
        line = Input(placeholder=FILTER_HINT, id="filter")
        line.can_focus = False
        yield line
        yield ComparisonList(id="list")
        settings = self.session.result.settings
        move = self._move_cursor
        intervals = IntervalView(settings.band, settings.confidence, move, id="intervals")
        yield intervals.add_class("-off")
        yield EvidenceMap(settings.band, move, id="evidence-map").add_class("-off")
        yield Detail(
            self.session.result.settings.band,
            self.session.group_values,
            self.session.group_limits,
            ratios_of=self.session.pair_ratios,
            id="detail",
        )
        yield Footer()

    def on_mount(self) -> None:
        self._sort_changed()
        self.notice = self._opening_notice()
        self.query_one(ComparisonList).focus()
        if self._check_all_on_open:
            self.action_robust_shown()

    def _opening_notice(self) -> Notice:
        """What opening found: a new review file, reviews of earlier data, reviews that
        match no comparison, note drafts left from before."""
        store = self.session.store
        parts = [
            f"started a new review file at {store.path}; reviews are saved as you go"
            if store.created
            else f"reviews are saved as you go in {store.path}"
        ]
        earlier = self.session.counts()["earlier"]
        if earlier:
            parts.append(
                f"{earlier} review(s) were made on an earlier version of the data (italics)"
            )
        unmatched = len(self.session.unmatched_reviews)
        if unmatched:
            parts.append(
                f"{unmatched} review(s) in the file match no comparison of this data"
                " (kept; i lists them)"
            )
        drafts = self._guarded(self.session.pending_drafts) or {}
        if drafts:
            parts.append(f"{len(drafts)} unsaved note draft(s) from before (i lists them)")
        return Notice("; ".join(parts))

    def about_lines(self) -> list[str]:
        """The review file, and what it holds that the list does not show, for the about
        page: reviews that match no comparison, and note drafts."""
        lines = [f"Review file: {self.session.store.path}"]
        unmatched = self.session.unmatched_reviews
        if unmatched:
            lines += ["", "Reviews in the file that match no comparison of this data (kept):"]
            lines += [f"  {key}" for key in unmatched]
        drafts = self._guarded(self.session.pending_drafts) or {}
        if drafts:
            lines += ["", "Unsaved note drafts (n on the comparison restores one):"]
            for key in drafts:
                row = self.session.row(key)
                lines.append(f"  {comparison_name(row) if row else key}")
        return lines

    def _guarded(self, read: Callable[[], dict[str, str]]) -> dict[str, str] | None:
        """``read()``, or None (said in the status line) when the review file fails."""
        try:
            return read()
        except ReviewStoreError as error:
            self.notice = Notice(str(error), "error")
            return None

    def _show_view(self) -> None:
        """The session's view in the list, the cursor at the top."""
        self.query_one(ComparisonList).show(self.session.view())
        self._show_summary()

    def _show_summary(self) -> None:
        counts = self.session.counts()
        self.query_one(StatusLine).summary = ViewSummary(
            shown=self.query_one(ComparisonList).frame.height,
            total=counts["all"],
            flagged=counts["flagged"],
            decided=counts["decided"],
            sort=SORT_NAMES.get(self.sort_on, self.sort_on),
            descending=self.descending,
            filter=self.filter_text,
            filter_error=self.session.filter_error,
        )

    def _show_detail(self) -> None:
        try:
            row = self.query_one(ComparisonList).current_row
            detail = self.query_one(Detail)
        except NoMatches:  # a late message while the screen closes
            return
        check = None if row is None else self.session.checks.get(row["key"])
        detail.subject = Subject(row, check)

    @on(ComparisonList.Highlighted)
    def _highlighted(self) -> None:
        self._show_detail()
        self._follow_cursor()

    def watch_notice(self, notice: Notice | None) -> None:
        with suppress(NoMatches):  # said while the app ends (keeping a note's draft failed)
            self.query_one(StatusLine).notice = notice

    def watch_panes(self, old: PaneLayout, new: PaneLayout) -> None:
        self.set_class(False, old)
        self.set_class(new != "balanced", new)

    def action_cycle_panes(self) -> None:
        """Balanced, a large detail, or a large list (for small terminals)."""
        self.panes = PANE_LAYOUTS[(PANE_LAYOUTS.index(self.panes) + 1) % len(PANE_LAYOUTS)]

    # -- the overviews: every shown row's interval, the evidence map -------------------------
    def _view_widget(self) -> ComparisonList | IntervalView | EvidenceMap:
        """The widget the body shows now (the list, or an overview in its place)."""
        if self.view == "intervals":
            return self.query_one(IntervalView)
        if self.view == "map":
            return self.query_one(EvidenceMap)
        return self.query_one(ComparisonList)

    def watch_view(self, new: ViewName) -> None:
        # A class on the three widgets, not on the screen: restyling the whole screen would
        # cost more than drawing the view.
        shown = self._view_widget()
        for widget in self.query_one(ComparisonList), *self.query("IntervalView, EvidenceMap"):
            widget.set_class(widget is not shown, "-off")
        self._follow_cursor()
        shown.focus()

    def action_next_view(self) -> None:
        """The list, every shown row's interval, or the evidence map."""
        self.view = VIEW_NAMES[(VIEW_NAMES.index(self.view) + 1) % len(VIEW_NAMES)]

    def _move_cursor(self, index: int) -> None:
        """An overview moved: the list's cursor follows at once (the detail by message)."""
        self.query_one(ComparisonList).cursor_row = index

    def _follow_cursor(self) -> None:
        """The overview on show draws the list's rows and marks its cursor."""
        with suppress(NoMatches):  # a late message while the screen closes
            shown = self._view_widget()
            if not isinstance(shown, ComparisonList):
                listing = self.query_one(ComparisonList)
                shown.follow(listing.frame, listing.cursor_row)

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        if action in CROSS_CHECK_ACTIONS and not self.session.can_cross_check:
            return None  # a summary table has no values to cross-check
        return not (isinstance(self.focused, Input) and action in LIST_ACTIONS)

    # -- sort and filter -------------------------------------------------------------------
    def watch_sort_on(self) -> None:
        self._sort_changed()

    def watch_descending(self) -> None:
        self._sort_changed()

    def _sort_changed(self) -> None:
        self.session.set_sort(self.sort_on, self.descending)
        listing = self.query_one(ComparisonList)
        listing.sort_on, listing.descending = self.sort_on, self.descending
        self._show_view()

    def action_next_sort(self) -> None:
        index = SORTABLE.index(self.sort_on) if self.sort_on in SORTABLE else -1
        self.sort_on = SORTABLE[(index + 1) % len(SORTABLE)]

    def action_reverse_sort(self) -> None:
        self.descending = not self.descending

    @on(ComparisonList.HeaderClicked)
    def _header_clicked(self, message: ComparisonList.HeaderClicked) -> None:
        if message.sort_on == self.sort_on:
            self.descending = not self.descending
            return
        self.set_reactive(ReviewScreen.descending, False)  # one re-sort, not two
        self.sort_on = message.sort_on

    def watch_filter_text(self, text: str) -> None:
        self.session.set_filter(text)
        self._show_view()

    @on(Input.Changed, "#filter")
    def _filter_changed(self, event: Input.Changed) -> None:
        self.filter_text = event.value

    @on(Input.Submitted, "#filter")
    def _filter_submitted(self) -> None:
        self._view_widget().focus()

    def action_focus_filter(self) -> None:
        # Focus at once, not on the next idle (Widget.focus): keys typed right after "/"
        # must land in the filter, not in the list.
        line = self.query_one("#filter", Input)
        line.can_focus = True
        self.set_focus(line)

    @on(events.Click, "#filter")
    def _filter_clicked(self) -> None:
        self.action_focus_filter()

    def on_descendant_blur(self, event: events.DescendantBlur) -> None:
        """The filter line leaves the tab order again once it loses focus."""
        if event.widget.id == "filter":
            event.widget.can_focus = False

    # -- reviewing -------------------------------------------------------------------------
    def _review(self, change: Callable[[str], object], again: str) -> None:
        """Save one change of the highlighted row and show it; ``again`` names the key that
        repeats the change (said when another session changed the review first).

        The row stays where it is even if it no longer matches the filter or the sort: a row
        that vanished under the cursor would make the next key act on its neighbour. Editing
        the filter or sorting again applies them afresh."""
        key = self.query_one(ComparisonList).current_key
        if key is None:
            return
        try:
            change(key)
        except ReviewStoreError as error:
            self._not_saved(key, error, again)
            return
        self._saved(key)

    def _not_saved(self, key: str, error: ReviewStoreError, again: str) -> None:
        """Say why a change of ``key`` was not saved; after a change elsewhere, show the row
        as it is stored now."""
        if isinstance(error, ReviewConflict):
            self._show_row(key)  # the session has read the row as it is now
            self.notice = Notice(conflict_text(error.current, again), "error")
        elif isinstance(error, ReviewStoreBusy):
            self.notice = Notice(BUSY, "error")
        else:
            self.notice = Notice(f"NOT SAVED: {error}", "error")
        self.app.bell()

    def _saved(self, key: str) -> None:
        """A change of ``key`` is saved: show it; an error said about an earlier change
        no longer holds."""
        if self.notice is not None and self.notice.severity == "error":
            self.notice = None
        self._show_row(key)

    def _show_row(self, key: str) -> None:
        """The stored review of ``key`` in the list, the counts and the detail."""
        listing = self.query_one(ComparisonList)
        listing.update_rows(self.session.apply_review(listing.frame, key))
        self._show_summary()
        self._show_detail()

    def action_toggle_flag(self) -> None:
        self._review(self.session.toggle_flag, "space")

    def action_decide(self, decision: str) -> None:
        chosen = choose(decision, DECISIONS, "decision")
        self._review(lambda key: self.session.decide(key, chosen), DECISION_KEYS[chosen])

    def action_clear_decision(self) -> None:
        self._review(lambda key: self.session.decide(key, None), "0")

    # -- notes -----------------------------------------------------------------------------
    def action_edit_note(self) -> None:
        """Open the note editor on the note as stored now, or on its draft."""
        key = self.query_one(ComparisonList).current_key
        if key is None:
            return
        lines = []
        try:
            if self.session.reload(key):
                lines.append(CHANGED_ELSEWHERE)
            draft = self.session.draft(key)
        except ReviewStoreError as error:
            self.notice = Notice(str(error), "error")
            return
        self._show_row(key)
        row = self.session.row(key)
        if row is None:
            return
        before = row["note"]
        if draft is not None and draft != before:
            lines.append(DRAFT_RESTORED)
        elif draft is not None:
            self._drop_draft(key)  # saved meanwhile: nothing to restore
        text = before if draft is None else draft
        self._open_editor(key, before, text, lines)

    def _open_editor(self, key: str, before: str, text: str, lines: list[str]) -> None:
        row = self.session.row(key)
        title = f"Note: {comparison_name(row) if row else key}"
        editor = NoteScreen(
            title,
            text,
            lines=lines,
            keep_draft=lambda typed: self._keep_draft(key, typed),
            saved=before,
        )
        self._note = OpenNote(key, before, editor)
        self.app.push_screen(editor, lambda typed: self._note_closed(key, typed))

    def _note_closed(self, key: str, typed: str | None) -> None:
        note, self._note = self._note, None
        if typed is None:  # cancelled: the saved note stays, the draft goes
            self._drop_draft(key)
            return
        try:
            self.session.set_note(key, typed)
        except ReviewStoreError as error:
            self._note_not_saved(key, typed, error, note.before if note else "")
            return
        self._saved(key)

    def _note_not_saved(self, key: str, typed: str, error: ReviewStoreError, before: str) -> None:
        """The note was not saved: open the editor again on what was typed, with the note
        as another session wrote it, or with the reason."""
        self._not_saved(key, error, "ctrl+s")
        self._keep_draft(key, typed)  # until it is saved, what was typed is a draft
        if isinstance(error, ReviewConflict):
            theirs = "" if error.current is None else error.current.note
            lines = [
                "not saved: another session changed this note since the editor opened; it"
                " now reads:",
                theirs or "(no note)",
                "ctrl+s saves yours over it · escape keeps theirs",
            ]
            before = theirs
        else:
            lines = [BUSY if isinstance(error, ReviewStoreBusy) else f"not saved: {error}"]
        self._open_editor(key, before, typed, lines)

    def _keep_draft(self, key: str, text: str) -> str | None:
        """Keep ``text`` as the draft of the note of ``key``; why not, if it fails."""
        try:
            self.session.keep_draft(key, text)
        except ReviewStoreBusy:
            return "the review file is busy; it is kept at the next change"
        except ReviewStoreError as error:
            return str(error)
        return None

    def _drop_draft(self, key: str) -> None:
        try:
            self.session.drop_draft(key)
        except ReviewStoreError as error:
            self.notice = Notice(f"the note's draft was not removed: {error}", "error")

    def keep_open_note(self, *, as_draft: bool = False) -> None:
        """Keep what the open note editor holds when the app ends with it open: as the
        note (ctrl+q: the reviewer chose to quit from the editor), or as a draft (a hang-up
        or a kill). A note that cannot be saved (changed elsewhere, file busy) is kept as a
        draft: it never replaces another session's note unseen."""
        note, self._note = self._note, None
        if note is None:
            return
        note.editor.stop_drafts()
        text = note.editor.text
        if text == note.before:
            self._drop_draft(note.key)  # nothing unsaved
            return
        if not as_draft:
            try:
                self.session.set_note(note.key, text)
                return
            except ReviewStoreError:
                pass
        self._keep_draft(note.key, text)

    # -- cross-checks ----------------------------------------------------------------------
    def action_robust(self) -> None:
        """Cross-checks for the highlighted comparison."""
        listing = self.query_one(ComparisonList)
        if listing.frame.height:
            row = listing.frame.slice(listing.cursor_row, 1)
            self._start_checks(row, "this comparison already has its cross-checks")

    def action_robust_shown(self) -> None:
        """Cross-checks for every comparison the list shows that has none yet."""
        frame = self.query_one(ComparisonList).frame
        self._start_checks(frame, "every shown comparison already has its cross-checks")

    def action_stop_checks(self) -> None:
        self.workers.cancel_group(self, "cross-checks")

    def _start_checks(self, frame: pl.DataFrame, none_left: str) -> None:
        jobs = self.session.check_jobs(frame)
        if not jobs:
            self.notice = Notice(none_left)
            return
        resamples = self.session.options.resamples
        self.notice = Notice(f"cross-checks: 0/{len(jobs)} (bootstrap {resamples:,} resamples)")
        self._run_checks(jobs)

    @work(thread=True, exclusive=True, group="cross-checks")
    def _run_checks(self, jobs: list[CheckJob]) -> None:
        """Compute in this thread, record on the main thread (messages)."""
        worker = get_current_worker()
        done = 0
        start = time.monotonic()
        for job in jobs:
            if worker.is_cancelled:
                break
            key = job[0]
            try:
                check = self.session.run_check(job)
            except Exception as error:  # a numerical failure must not end the session
                self.post_message(CrossCheckDone(key, None, str(error)))
                continue
            done += 1
            self.post_message(CrossCheckDone(key, check))
            self.post_message(CrossCheckProgress(done, len(jobs), elapsed=time.monotonic() - start))
        self.post_message(CrossCheckProgress(done, len(jobs), finished=True))

    @on(CrossCheckDone)
    def _check_done(self, message: CrossCheckDone) -> None:
        if message.check is None:
            self.notice = Notice(
                f"cross-checks failed for one comparison: {message.error}", "error"
            )
            return
        self.session.record(message.key, message.check)
        if message.key == self.query_one(ComparisonList).current_key:
            self._show_detail()

    @on(CrossCheckProgress)
    def _check_progress(self, message: CrossCheckProgress) -> None:
        done, total = message.done, message.total
        if message.finished and done < total:
            self.notice = Notice(f"cross-checks stopped after {done}/{total}")
        elif message.finished:
            self.notice = Notice(f"cross-checks done for {done} comparison(s)")
        else:
            filled = round(20 * done / max(total, 1))
            bar = "#" * filled + "." * (20 - filled)
            left = time_left(done, total, message.elapsed)
            self.notice = Notice(f"cross-checks [{bar}] {done}/{total}{left} · escape stops")

    # -- export ----------------------------------------------------------------------------
    def action_export(self) -> None:
        counts = self.session.counts()
        choices: dict[Selection, int] = {
            "flagged": counts["flagged"],
            "decided": counts["decided"],
            "shown": self.session.view().height,
            "all": counts["all"],
        }
        default = self.export_dir / f"{self.session.options.data_path.stem}-findings.csv"
        dialog = ExportScreen(default, choices, last=self._last_export)
        self.app.push_screen(dialog, self._export_chosen)

    def _export_chosen(self, choice: ExportChoice | None) -> None:
        if choice is None:
            return
        self._last_export = choice
        if not choice.path.exists():
            self._export(choice, overwrite=False)
            return

        def answered(replace: bool | None) -> None:
            if replace:
                self._export(choice, overwrite=True)

        rows = self.session.selection(choice.rows).height
        self.app.push_screen(replace_question(choice.path, csv_rows(choice.path), rows), answered)

    def _export(self, choice: ExportChoice, *, overwrite: bool) -> None:
        form = ExportForm(columns=choice.columns)
        try:
            report = self.session.export(choice.path, choice.rows, overwrite=overwrite, form=form)
        except (OSError, ValueError) as error:
            self.notice = Notice(f"export failed: {error}", "error")
            return
        self.notice = Notice(f"exported {report.rows} row(s) to {report.path}")
