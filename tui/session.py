"""The review session: one scan, its review store, its cross-checks, the current view (filter
and sort) and the export of a selection. No Textual: the app and ``foldsift export`` both go
through it, and tests use it directly."""

from __future__ import annotations

import hashlib
import json
import tempfile
from collections.abc import Callable, Sequence
from contextlib import suppress
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl

from foldsift.stats import columns as col
from foldsift.stats.columns import (
    EXPORT_SCHEMA,
    LIST_SCHEMA,
    ReviewedRow,
    earlier_key_expression,
    reviewed_row,
)
from foldsift.stats.design import unit_ratios
from foldsift.stats.load import InputError, ReadOptions, load_table
from foldsift.stats.long import LongOptions
from foldsift.stats.robust import (
    DEFAULT_RESAMPLES,
    DEFAULT_SEED,
    CheckJob,
    CrossChecker,
    RobustCheck,
    check_jobs,
    checks_frame,
    group_id,
)
from foldsift.stats.scan import ScanResult, ScanSettings, run_scan
from foldsift.stats.sentence import readable_outcome, sentence_column
from foldsift.stats.vocabulary import Decision

from .choices import SELECTIONS as SELECTIONS
from .choices import Selection as Selection
from .export import DEFAULT_FORM, ExportForm, join_reviews, short_export, write_export
from .filtering import FilterError, parse_filter, searchable_names
from .store import (
    STAMP_PREFIX,
    Review,
    ReviewConflict,
    ReviewStore,
    ReviewStoreError,
    default_review_path,
)

#: The list's order when it opens, and the order of every export: smallest q first.
DEFAULT_SORT = col.Q_BH


@dataclass(frozen=True)
class SessionOptions:
    """Everything needed to open a session, as the command line gives it."""

    data_path: Path
    settings: ScanSettings = field(default_factory=ScanSettings)
    groupings: tuple[str, ...] | None = None
    outcomes: tuple[str, ...] | None = None
    summary: bool = False
    reviews_path: Path | None = None
    resamples: int = DEFAULT_RESAMPLES
    seed: int = DEFAULT_SEED
    allow_formulas: bool = False  # write text cells like "=1+1" unguarded
    reading: ReadOptions = field(default_factory=ReadOptions)  # --encoding, --decimal
    long: LongOptions = field(default_factory=LongOptions)  # --analyte, --result, ...

    @property
    def review_file(self) -> Path:
        return self.reviews_path or default_review_path(self.data_path)


def _streamed(options: SessionOptions) -> bool:
    """Parquet data read a batch of outcomes at a time: a folder or glob of part files, or a
    file whose numbers would take more than a quarter of the memory budget (an in-memory
    scan holds about four copies)."""
    from foldsift.stats.stream import (
        environment_budget,
        estimated_bytes,
        is_parquet_source,
        parquet_files,
    )

    path = options.data_path
    if options.settings.pair_by is not None or not is_parquet_source(path):
        return False
    if path.is_dir() or not path.exists():
        return True
    try:
        _, _, size = estimated_bytes(parquet_files(path))
    except Exception:  # a damaged file: the ordinary reader says what is wrong in one line
        return False
    return size * 4 > environment_budget()


def scan(options: SessionOptions, progress: Callable[[str], None] | None = None) -> ScanResult:
    """Load the data and compute every comparison (a raw table or a summary table);
    ``progress`` hears each stage as it starts."""
    say = progress or (lambda stage: None)
    say(f"reading {options.data_path.name}")
    if options.summary:
        from foldsift.stats.summary_input import scan_summary_table

        if options.groupings or options.outcomes:
            raise InputError(
                f"{options.data_path}: a summary table names its groupings and outcomes itself"
            )
        return scan_summary_table(options.data_path, options.settings)
    settings = options.settings
    if _streamed(options):
        from foldsift.stats.stream import scan_parquet

        return scan_parquet(
            options.data_path, settings, options.groupings, options.outcomes, progress
        )
    design = [c for c in (settings.pair_by, settings.period, settings.sequence) if c]
    table = load_table(
        options.data_path,
        groupings=options.groupings,
        outcomes=options.outcomes,
        reading=options.reading,
        long=options.long,
        design=design,
    )
    return run_scan(table, options.settings, say)


@dataclass(frozen=True)
class ExportReport:
    """What an export wrote."""

    path: Path
    rows: int


def carry_over(comparisons: pl.DataFrame, store: ReviewStore) -> pl.DataFrame:
    """The stored reviews, with reviews kept under a comparison's earlier key (written
    before key parts were escaped) moved to its key, in the file too when it is writable.
    Only unambiguous moves are made: one comparison per earlier key, no review at the new
    key yet."""
    reviews = store.frame()
    stored = set(reviews[col.KEY].to_list())
    orphans = stored - set(comparisons[col.KEY].to_list())
    if not orphans:
        return reviews
    earlier = comparisons.select(col.KEY, earlier_key_expression().alias("earlier"))
    unique = earlier.filter(pl.len().over("earlier") == 1)
    mapping = {
        old: new
        for new, old in unique.rows()
        if old in orphans and old != new and new not in stored
    }
    if not mapping:
        return reviews
    if not store.read_only:
        store.rename_keys(mapping)
    return reviews.with_columns(pl.col(col.KEY).replace(mapping))


def _list_columns(frame: pl.DataFrame, outcomes: Sequence[str]) -> pl.DataFrame:
    labels = {name: readable_outcome(name) for name in outcomes}
    return frame.with_columns(
        pl.col(col.OUTCOME).replace_strict(labels, return_dtype=pl.String).alias(col.OUTCOME_LABEL),
        pl.col(col.LOG2_RATIO).abs().alias(col.CHANGE_SIZE),
        pl.min_horizontal(col.N_A, col.N_B).alias(col.N_MIN),
        pl.col(col.WARNINGS).list.len().cast(pl.Int64).alias(col.WARNING_COUNT),
    )


#: The columns whose values a review judged: the groups' sizes, centres and spreads, the
#: ratio with its CI and p, the counts of entries left out, substituted or censored, and
#: the method. Not q or Holm's p, which move when other comparisons change.
STAMPED_COLUMNS = (
    "n_a",
    "n_b",
    "gm_a",
    "gm_b",
    "sd_log_a",
    "sd_log_b",
    "median_a",
    "median_b",
    "ratio",
    "ci_low",
    "ci_high",
    "p_value",
    "n_excluded_a",
    "n_excluded_b",
    "n_substituted_a",
    "n_substituted_b",
    "n_censored_a",
    "n_censored_b",
    "method",
)
#: Settings that change the numbers of a comparison that exists under both (not which
#: comparisons exist, nor the adjustment over the others).
_UNSTAMPED_SETTINGS = ("pairs", "reference", "family", "max_comparisons")


def comparison_stamps(comparisons: pl.DataFrame, settings: ScanSettings) -> dict[str, str]:
    """Per key, the stamp a review of that comparison carries: ``c1:`` + the SHA-256 of the
    comparison's inputs (``STAMPED_COLUMNS`` and the settings that change them), then
    ``|n_a|n_b|ratio`` as they are now, so a later session can say what changed."""
    chosen = {k: v for k, v in settings.as_dict().items() if k not in _UNSTAMPED_SETTINGS}
    prefix = json.dumps(chosen, sort_keys=True, default=str)
    text = comparisons.select(
        col.KEY,
        pl.concat_str(
            [pl.col(name).cast(pl.Utf8).fill_null("-") for name in STAMPED_COLUMNS],
            separator="\x1f",
        ).alias("inputs"),
        pl.concat_str(
            [
                pl.col(col.N_A).cast(pl.Utf8),
                pl.col(col.N_B).cast(pl.Utf8),
                pl.col(col.RATIO).cast(pl.Utf8).fill_null(""),
            ],
            separator="|",
        ).alias("snapshot"),
    )
    stamps = {}
    for key, inputs, snapshot in text.iter_rows():
        digest = hashlib.sha256(f"{prefix}\x1e{key}\x1e{inputs}".encode()).hexdigest()
        stamps[key] = f"{STAMP_PREFIX}{digest}|{snapshot}"
    return stamps


def _review_values(review: Review | None) -> dict[str, Any]:
    return {
        col.FLAGGED: review.flagged if review else False,
        col.DECISION: review.decision if review else None,
        col.NOTE: review.note if review else "",
        "review_fingerprint": review.fingerprint if review else None,
        "updated_at": review.updated_at if review else None,
        col.ON_EARLIER_DATA: review.on_earlier_data if review else False,
    }


class ReviewSession:
    """One scan under review: the rows with their reviews, the view, cross-checks, exports."""

    def __init__(self, options: SessionOptions, result: ScanResult, store: ReviewStore) -> None:
        self.options = options
        self.result = result
        self.store = store
        self.checks: dict[str, RobustCheck] = {}
        self.filter_text = ""
        self.filter_error: str | None = None
        self.sort_on: str = DEFAULT_SORT
        self.descending = False
        self._filter: pl.Expr | None = None
        self._checker = (
            CrossChecker(
                result.values.values,
                confidence=result.settings.confidence,
                resamples=options.resamples,
                seed=options.seed,
                entries=result.entries.entries if result.entries is not None else None,
            )
            if result.values is not None
            else None
        )
        store.use_stamps(comparison_stamps(result.comparisons, result.settings))
        reviews = carry_over(result.comparisons, store)
        known = set(result.comparisons[col.KEY].to_list())
        #: Stored reviews that match no comparison (a level renamed, an outcome dropped):
        #: kept in the file, counted and listed, never deleted.
        self.unmatched_reviews: list[str] = [k for k in reviews[col.KEY] if k not in known]
        joined = join_reviews(result.comparisons, reviews)
        self._rows = _list_columns(joined, result.source.outcomes)
        #: The names a plain filter word searches (a word none contains is an error).
        self._names = searchable_names(self._rows)
        self._cleanup: Callable[[], None] | None = None

    @classmethod
    def open(cls, options: SessionOptions) -> ReviewSession:
        """Scan the data and open its review file (InputError, ReviewStoreError on failure)."""
        return cls.from_scan(options, scan(options))

    @classmethod
    def from_scan(cls, options: SessionOptions, result: ScanResult) -> ReviewSession:
        """Open the review file for a finished scan (on the thread that will use it: SQLite
        connections stay on the thread that made them). A path the user gave must be in an
        existing folder; the default one is created under the user's data folder when
        needed."""
        fingerprint = result.source.fingerprint
        if options.reviews_path is not None:
            store = ReviewStore(options.reviews_path, fingerprint)
        else:
            store = ReviewStore.open_default(options.data_path, fingerprint)
        return cls(options, result, store)

    @classmethod
    def open_to_read(
        cls, options: SessionOptions, progress: Callable[[str], None] | None = None
    ) -> ReviewSession:
        """Scan the data and read its reviews without changing the review file: opened
        read-only, or none yet (every row then unreviewed)."""
        result = scan(options, progress)
        path = options.review_file
        if path.exists():
            store = ReviewStore(path, result.source.fingerprint, read_only=True)
            return cls(options, result, store)
        folder = tempfile.TemporaryDirectory(prefix="foldsift-")
        store = ReviewStore(Path(folder.name) / "none.sqlite", result.source.fingerprint)
        session = cls(options, result, store)
        session._cleanup = folder.cleanup
        return session

    def close(self) -> None:
        self.store.close()
        if self._cleanup is not None:
            self._cleanup()
            self._cleanup = None

    # -- rows and the view --------------------------------------------------------------
    @property
    def rows(self) -> pl.DataFrame:
        """Every comparison with its review and the list's columns, in scan order."""
        return self._rows

    def row(self, key: str) -> ReviewedRow | None:
        found = self._rows.filter(pl.col(col.KEY) == key)
        return reviewed_row(found, 0) if found.height else None

    def set_filter(self, text: str) -> str | None:
        """Use the filter line ``text``; returns the error when a word cannot be read (the
        rows are then shown unfiltered)."""
        self.filter_text = text
        try:
            self._filter = parse_filter(text, self._rows.columns, self._names)
        except FilterError as error:
            self._filter = None
            self.filter_error = str(error)
        else:
            self.filter_error = None
        return self.filter_error

    def set_sort(self, column: str, descending: bool = False) -> None:
        if column not in self._rows.columns:
            raise ValueError(f"cannot sort on {column!r}: no such column")
        self.sort_on, self.descending = column, descending

    def sorted(self, frame: pl.DataFrame) -> pl.DataFrame:
        return frame.sort(
            self.sort_on, descending=self.descending, nulls_last=True, maintain_order=True
        )

    def view(self) -> pl.DataFrame:
        """The rows the filter shows, in the current order."""
        frame = self._rows if self._filter is None else self._rows.filter(self._filter)
        return self.sorted(frame)

    def counts(self) -> dict[str, int]:
        """How many rows there are, are flagged, decided, and reviewed on earlier data."""
        rows = self._rows
        return {
            "all": rows.height,
            "flagged": int(rows[col.FLAGGED].sum()),
            "decided": int(rows[col.DECISION].is_not_null().sum()),
            "earlier": int(rows[col.ON_EARLIER_DATA].sum()),
        }

    # -- reviewing -------------------------------------------------------------------------
    def toggle_flag(self, key: str) -> bool:
        """Flip the flag; returns the new state. Saved before it returns.

        Every change raises ``ReviewConflict`` (nothing saved, the row refreshed to what is
        stored now) when another session changed the review since this one read it; the
        same change made again then applies."""
        flagged = self._change(key, lambda: self.store.toggle_flag(key))
        return bool(flagged)

    def decide(self, key: str, decision: Decision | None) -> None:
        """Set the decision (None clears it). Saved before it returns."""
        self._change(key, lambda: self.store.set_decision(key, decision))

    def set_note(self, key: str, text: str) -> None:
        """Replace the note (empty removes it). Saved before it returns; the draft of the
        note is then forgotten."""
        self._change(key, lambda: self.store.set_note(key, text))
        # The note is saved; a draft left behind (the file busy a moment) equals it and is
        # dropped when the editor next opens on it.
        with suppress(ReviewStoreError):
            self.store.clear_draft(key)

    # -- drafts of notes (the text of a note being typed; see ReviewStore) ------------------
    def draft(self, key: str) -> str | None:
        return self.store.draft(key)

    def keep_draft(self, key: str, text: str) -> None:
        self.store.save_draft(key, text)

    def drop_draft(self, key: str) -> None:
        self.store.clear_draft(key)

    def pending_drafts(self) -> dict[str, str]:
        """Drafts of this data's comparisons that differ from their saved notes."""
        drafts = self.store.drafts()
        if not drafts:
            return {}
        notes = dict(self._rows.select(col.KEY, col.NOTE).iter_rows())
        return {key: text for key, text in drafts.items() if key in notes and notes[key] != text}

    def reload(self, key: str) -> bool:
        """Read the review of ``key`` as stored now (another session may have changed it),
        counting it as seen; True when it differs from what the rows held."""
        names = list(_review_values(None))

        def held() -> list[tuple[Any, ...]]:
            return self._rows.filter(pl.col(col.KEY) == key).select(names).rows()

        before = held()
        self._refresh(key)
        return held() != before

    def _change(self, key: str, change: Callable[[], object]) -> object:
        try:
            outcome = change()
        except ReviewConflict:
            self._refresh(key)
            raise
        self._refresh(key)
        return outcome

    def review_values(self, key: str) -> dict[str, Any]:
        """The review columns of ``key`` as stored now."""
        return _review_values(self.store.get(key))

    def apply_review(self, frame: pl.DataFrame, key: str) -> pl.DataFrame:
        """``frame`` with the stored review of ``key`` written into its row (other rows as
        they are): how the list shows a change without re-filtering under the cursor."""
        match = pl.col(col.KEY) == key
        return frame.with_columns(
            pl.when(match)
            .then(pl.lit(value, dtype=frame.schema[name]))
            .otherwise(pl.col(name))
            .alias(name)
            for name, value in self.review_values(key).items()
        )

    def _refresh(self, key: str) -> None:
        self._rows = self.apply_review(self._rows, key)

    # -- cross-checks ----------------------------------------------------------------------
    @property
    def can_cross_check(self) -> bool:
        return self._checker is not None

    def group_values(self, row: ReviewedRow) -> tuple[np.ndarray, np.ndarray]:
        """The usable values of both groups of a row (empty without raw data)."""
        if self.result.values is None:
            return np.empty(0), np.empty(0)
        values = self.result.values.values
        return values(group_id(row, "a")), values(group_id(row, "b"))

    def pair_ratios(self, row: ReviewedRow) -> np.ndarray:
        """The within-unit ratios of a paired or crossover row (empty for other rows or
        without raw data)."""
        values, unit = self.result.values, row["pair_by"]
        if values is None or unit is None:
            return np.empty(0)
        return unit_ratios(
            values.frame,
            values.names.used(row["outcome"]),
            unit,
            (row["grouping"], row["within"], row["stratum"]),
            row["level_a"],
            row["level_b"],
        )

    def group_limits(self, row: ReviewedRow) -> tuple[np.ndarray, np.ndarray]:
        """The distinct detection limits of both groups' below-detection entries (empty
        where a group has none, or without raw data)."""
        entries = self.result.entries

        def limits(which: col.Side) -> np.ndarray:
            got = entries.entries(group_id(row, which)) if entries is not None else None
            if got is None:
                return np.empty(0)
            values, below, _ = got
            return np.unique(values[below])

        return limits("a"), limits("b")

    def check_jobs(self, frame: pl.DataFrame) -> list[CheckJob]:
        """The cross-checks the rows of ``frame`` need (those without one yet)."""
        return check_jobs(frame, skip=self.checks)

    def run_check(self, job: CheckJob) -> RobustCheck:
        """Compute one cross-check (safe in a worker thread); record it with ``record``."""
        if self._checker is None:
            raise InputError("cross-checks need raw values; a summary table has none")
        _, group_a, group_b = job
        return self._checker.check(group_a, group_b)

    def record(self, key: str, check: RobustCheck) -> None:
        self.checks[key] = check

    def cross_check(
        self,
        frame: pl.DataFrame,
        *,
        progress: Callable[[int, int], None] | None = None,
        cancelled: Callable[[], bool] | None = None,
    ) -> int:
        """Cross-check every row of ``frame`` that has none yet; returns how many were done."""
        if self._checker is None:
            raise InputError("cross-checks need raw values; a summary table has none")
        jobs = self.check_jobs(frame)
        done = self._checker.check_many(jobs, progress=progress, cancelled=cancelled)
        self.checks.update(done)
        return len(done)

    # -- export ----------------------------------------------------------------------------
    def selection(self, which: Selection) -> pl.DataFrame:
        """The rows of a selection in the current order (``shown``: the filter's rows)."""
        if which == "shown":
            return self.view()
        frame = self._rows
        if which == "flagged":
            frame = frame.filter(pl.col(col.FLAGGED))
        elif which == "decided":
            frame = frame.filter(pl.col(col.DECISION).is_not_null())
        return self.sorted(frame)

    def export_frame(self, which: Selection) -> pl.DataFrame:
        """The rows an export writes, with the export's columns and their sentences."""
        frame = self.selection(which)
        checks = checks_frame(frame[col.KEY].to_list(), self.checks)
        frame = frame.drop(*LIST_SCHEMA).join(checks, on=col.KEY, how="left", maintain_order="left")
        frame = frame.select(list(EXPORT_SCHEMA))
        return frame.with_columns(sentence_column(frame))

    @property
    def stratified(self) -> bool:
        """The comparisons were made inside strata (``within`` and ``stratum`` are used)."""
        return bool(self._rows[col.WITHIN].is_not_null().any())

    def export_settings(self, which: Selection, form: ExportForm = DEFAULT_FORM) -> dict[str, Any]:
        return self.result.metadata() | {
            "export": form.describe(),
            "rows_chosen": which,
            "filter": self.filter_text if which == "shown" else "",
            "sort": {"column": self.sort_on, "descending": self.descending},
            "reviews": str(self.store.path),
            "cross_check_resamples": self.options.resamples,
            "cross_check_seed": self.options.seed,
        }

    def export(
        self,
        path: Path,
        which: Selection,
        *,
        overwrite: bool = False,
        form: ExportForm = DEFAULT_FORM,
    ) -> ExportReport:
        """Write the selection to CSV with its settings sidecar, atomically, in the short
        form (the default) or the full one."""
        frame = self.export_frame(which)
        if form.columns == "short":
            frame = short_export(frame, form.digits, stratified=self.stratified)
        written = write_export(
            frame,
            path,
            self.export_settings(which, form),
            overwrite=overwrite,
            protect=[self.options.data_path],
            allow_formulas=self.options.allow_formulas,
            bom=form.bom,
        )
        return ExportReport(written, frame.height)
