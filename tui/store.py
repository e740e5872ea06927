"""Durable reviewer state (flag, decision, note) per comparison key, kept in SQLite.

Every change is its own committed transaction with ``synchronous=FULL`` in WAL mode, so a
change that a method has returned from survives the process being killed or the machine
losing power. Rows remember the data fingerprint they were written against, which lets the
app point out reviews that were made on an earlier version of the data.

Every row also carries a version, taken from one counter per file that only ever grows, so
a review that is deleted and written again never repeats a version. A store remembers the
version it last read or wrote of each key; a change to a key that another session changed
since then is refused with ``ReviewConflict`` instead of overwriting that session's work.

Beside the reviews, a ``drafts`` table keeps the text of a note while it is being typed
(one row per key, no versions): what a reviewer typed survives a dropped connection before
the note is saved. Drafts are not reviews: exports and the review columns never read them.
Writable openings create the table when it is missing (files written before drafts existed
need no migration); read-only openings never do.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager, suppress
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from types import TracebackType
from typing import Any, Literal

import polars as pl

from foldsift.stats.columns import REVIEW_SCHEMA
from foldsift.stats.vocabulary import DECISIONS, Decision

__all__ = [
    "DECISIONS",
    "DEFAULT_BUSY_TIMEOUT",
    "REVIEW_SCHEMA",
    "SCHEMA_VERSION",
    "STAMP_PREFIX",
    "Review",
    "ReviewConflict",
    "ReviewStore",
    "ReviewStoreBusy",
    "ReviewStoreError",
    "default_review_path",
]


SCHEMA_VERSION = 2

#: Seconds a change waits for another writer to finish before it gives up as busy.
DEFAULT_BUSY_TIMEOUT = 0.25

_V1_COLUMNS = ("key", "flagged", "decision", "note", "fingerprint", "updated_at")
_REVIEW_COLUMNS = (*_V1_COLUMNS, "version")

_CREATE_REVIEWS = """
CREATE TABLE IF NOT EXISTS reviews (
    key TEXT PRIMARY KEY,
    flagged INTEGER NOT NULL DEFAULT 0,
    decision TEXT,
    note TEXT NOT NULL DEFAULT '',
    fingerprint TEXT NOT NULL,
    updated_at TEXT NOT NULL,
    version INTEGER NOT NULL
)
"""

_CREATE_DRAFTS = """
CREATE TABLE IF NOT EXISTS drafts (
    key TEXT PRIMARY KEY,
    text TEXT NOT NULL,
    updated_at TEXT NOT NULL
)
"""

_SAVE_DRAFT = """
INSERT INTO drafts (key, text, updated_at) VALUES (?, ?, ?)
ON CONFLICT(key) DO UPDATE SET text = excluded.text, updated_at = excluded.updated_at
"""

_CREATE_META = """
CREATE TABLE IF NOT EXISTS meta (
    name TEXT PRIMARY KEY,
    value TEXT NOT NULL
)
"""

# SQLite adds a NOT NULL column only with a default; rows from version 1 all start at 1.
_MIGRATE_V1 = "ALTER TABLE reviews ADD COLUMN version INTEGER NOT NULL DEFAULT 1"

_UPSERT = """
INSERT INTO reviews (key, flagged, decision, note, fingerprint, updated_at, version)
VALUES (?, ?, ?, ?, ?, ?, ?)
ON CONFLICT(key) DO UPDATE SET
    flagged = excluded.flagged,
    decision = excluded.decision,
    note = excluded.note,
    fingerprint = excluded.fingerprint,
    updated_at = excluded.updated_at,
    version = excluded.version
"""

_SET_META = "INSERT OR REPLACE INTO meta (name, value) VALUES (?, ?)"

_SQLITE_MAGIC = b"SQLite format 3\x00"

# (flagged, decision, note): the reviewer-editable part of a row.
_Fields = tuple[bool, Decision | None, str]
# What opening has to do with the tables found in the file.
_Action = Literal["ready", "create", "migrate"]


class ReviewStoreError(ValueError):
    """The review file cannot be opened, read or written; the message says which file and why."""


class ReviewStoreBusy(ReviewStoreError):
    """Another connection holds the review file's write lock; trying again later may work."""


class ReviewConflict(ReviewStoreError):
    """The review of ``key`` was changed elsewhere since this store last read or wrote it.

    Nothing was written. ``current`` is the review as it is stored now (None when it was
    deleted); the store now counts it as seen, so repeating the same change applies it.
    """

    def __init__(self, message: str, key: str, current: Review | None) -> None:
        super().__init__(message)
        self.key = key
        self.current = current


@dataclass(frozen=True, slots=True)
class Review:
    """One stored review; ``store_fingerprint`` is the fingerprint of the data now loaded."""

    key: str
    flagged: bool
    decision: Decision | None
    note: str
    fingerprint: str
    updated_at: str
    #: Grows on every change of this row; read-only stores of version-1 files report 0.
    version: int
    # Not part of the stored row, so it takes no part in equality: the stamp this comparison
    # has now, and the fingerprint of the whole data file now loaded.
    store_fingerprint: str = field(repr=False, compare=False)
    data_fingerprint: str = field(default="", repr=False, compare=False)

    @property
    def on_earlier_data(self) -> bool:
        """True when the comparison this review judged has changed since it was last
        changed: its stamp (``comparison_stamp``) differs from the comparison's stamp now.
        A review stamped with a whole file's fingerprint (written before comparisons had
        stamps) counts as current while that same file is loaded."""
        stamp = stamp_identity(self.fingerprint)
        return stamp not in (stamp_identity(self.store_fingerprint), self.data_fingerprint)

    @property
    def judged(self) -> tuple[int, int, float | None] | None:
        """(n_a, n_b, ratio) of the comparison when the review was last changed, where the
        stamp holds them (None for reviews stamped before stamps held them)."""
        return stamp_snapshot(self.fingerprint)


#: Stamps of comparisons start with this, then the SHA-256 of the comparison's inputs, then
#: ``|n_a|n_b|ratio`` as they were (the ratio as Python's repr, or "" when there was none).
STAMP_PREFIX = "c1:"


def stamp_identity(stamp: str) -> str:
    """The part of a stamp that identifies the data judged (without the snapshot)."""
    return stamp.split("|", 1)[0]


def stamp_snapshot(stamp: str) -> tuple[int, int, float | None] | None:
    if not stamp.startswith(STAMP_PREFIX):
        return None
    parts = stamp.split("|")
    try:
        _, n_a, n_b, ratio = parts
        return int(n_a), int(n_b), (float(ratio) if ratio else None)
    except ValueError:
        return None


class ReviewStore:
    """Reviews for one data set, stored in one SQLite file through one connection.

    ``create_folders`` lets opening create missing folders above the file; leave it False
    for a path the user typed, so a typing mistake is reported instead of starting an empty
    store somewhere unexpected. ``read_only`` opens without ever writing (every change then
    raises ReviewStoreError). ``busy_timeout`` is how long, in seconds, a change waits for
    another writer before raising ReviewStoreBusy.
    """

    def __init__(
        self,
        path: Path | str,
        fingerprint: str,
        *,
        read_only: bool = False,
        create_folders: bool = False,
        busy_timeout: float = DEFAULT_BUSY_TIMEOUT,
    ) -> None:
        if not isinstance(fingerprint, str) or not fingerprint:
            raise ValueError("fingerprint must be a non-empty string")
        if isinstance(busy_timeout, bool) or not isinstance(busy_timeout, int | float):
            raise TypeError("busy_timeout must be a number of seconds")
        if not 0 <= busy_timeout < float("inf"):
            raise ValueError("busy_timeout must be zero or a positive number of seconds")
        self._path = Path(path).expanduser()
        self._fingerprint = fingerprint
        # The stamp of each comparison now (``use_stamps``); a key without one gets the file's
        # fingerprint, as before comparisons had stamps.
        self._stamps: dict[str, str] = {}
        self._read_only = bool(read_only)
        # The version last read or written of each key; a missing key counts as absent.
        self._seen: dict[str, int] = {}
        if self._read_only:
            _check_readable(self._path)
            opened = _open_read_only(self._path, float(busy_timeout))
        else:
            _check_openable(self._path, create_folders=create_folders)
            opened = _open_writable(self._path, float(busy_timeout))
        self._conn: sqlite3.Connection | None = opened.conn
        self._created = opened.created
        self._has_table = opened.has_table
        self._has_drafts = opened.has_drafts
        version = "version" if opened.versioned else "0"
        self._select = f"SELECT {', '.join(_V1_COLUMNS)}, {version} FROM reviews"

    @classmethod
    def open_default(
        cls,
        data_path: Path | str,
        fingerprint: str,
        *,
        read_only: bool = False,
        busy_timeout: float = DEFAULT_BUSY_TIMEOUT,
    ) -> ReviewStore:
        """Open the store at ``default_review_path(data_path)``; only there, and only under
        the XDG data folder, are missing folders created."""
        path = default_review_path(Path(data_path))
        return cls(
            path,
            fingerprint,
            read_only=read_only,
            create_folders=path.is_relative_to(_review_home()),
            busy_timeout=busy_timeout,
        )

    @property
    def path(self) -> Path:
        """The SQLite file backing this store."""
        return self._path

    @property
    def fingerprint(self) -> str:
        """Fingerprint of the data currently loaded; stamped on every change."""
        return self._fingerprint

    def use_stamps(self, stamps: dict[str, str]) -> None:
        """Stamp each change of a key with that comparison's stamp (``comparison_stamp``), and
        judge stored reviews against it: only reviews whose own comparison changed count as
        made on earlier data."""
        self._stamps = dict(stamps)

    @property
    def read_only(self) -> bool:
        """True when the store was opened read-only; changes then raise ReviewStoreError."""
        return self._read_only

    @property
    def created(self) -> bool:
        """True when this opening started a new, empty store (the file was new or empty)."""
        return self._created

    # -- changes -------------------------------------------------------------------------

    def set_flag(self, key: str, flagged: bool) -> None:
        """Flag or unflag ``key``."""
        value = bool(flagged)
        self._modify(key, lambda _f, decision, note: (value, decision, note))

    def toggle_flag(self, key: str) -> bool:
        """Flip the flag of ``key`` as stored now and return the new state."""
        # Read and write inside one transaction so two quick toggles cannot both read "off".
        flagged, _, _ = self._modify(key, lambda f, decision, note: (not f, decision, note))
        return flagged

    def set_decision(self, key: str, decision: Decision | None) -> None:
        """Set the decision for ``key`` to one of DECISIONS, or None to clear it."""
        if decision is not None and decision not in DECISIONS:
            choices = ", ".join(DECISIONS)
            raise ValueError(f"unknown decision {decision!r}; use one of {choices} or None")
        chosen = decision
        self._modify(key, lambda f, _d, note: (f, chosen, note))

    def set_note(self, key: str, text: str) -> None:
        """Replace the note of ``key``; an empty string removes it."""
        if not isinstance(text, str):
            raise TypeError(f"note must be a string, not {type(text).__name__}")
        self._modify(key, lambda f, decision, _n: (f, decision, text))

    def rename_keys(self, mapping: Mapping[str, str]) -> int:
        """Move reviews from old keys to new keys in one transaction; returns how many moved.

        A pair is skipped when the old key has no review, or when the new key already has
        one that stays (moved away by another pair counts as free); of several old keys
        naming the same new key, the first in ``mapping`` wins. A moved review keeps its
        fingerprint and time stamp and gets a new version.
        """
        pairs = [(old, new) for old, new in mapping.items() if old != new]
        for old, new in pairs:
            _check_key(old)
            _check_key(new)
        self._check_writable()
        if not pairs:
            return 0
        moved: dict[str, int] = {}
        with self._transaction() as conn:
            stored = {row[0] for row in conn.execute("SELECT key FROM reviews")}
            moving = _renames(pairs, stored)
            if moving:
                moved = _move_rows(conn, moving, _next_version(conn))
        # Forget every old key before remembering the new ones: in a swap they are the same.
        for old in moving:
            self._seen.pop(old, None)
        self._seen.update(moved)
        return len(moving)

    # -- reading -------------------------------------------------------------------------

    def get(self, key: str, *, mark_seen: bool = True) -> Review | None:
        """The review stored for ``key``, or None if there is none.

        With ``mark_seen`` (the default) the store counts this state as seen by its user:
        a later change of ``key`` is checked against it."""
        _check_key(key)
        with self._reading() as conn:
            row = (
                conn.execute(f"{self._select} WHERE key = ?", (key,)).fetchone()
                if self._has_table
                else None
            )
        review = None if row is None else self._review(row)
        if mark_seen:
            self._remember(key, None if review is None else review.version)
        return review

    def all(self, *, mark_seen: bool = True) -> list[Review]:
        """Every stored review, ordered by key; ``mark_seen`` as for ``get``, for every key."""
        with self._reading() as conn:
            rows = (
                conn.execute(f"{self._select} ORDER BY key").fetchall() if self._has_table else []
            )
        reviews = [self._review(row) for row in rows]
        if mark_seen:
            self._seen = {review.key: review.version for review in reviews}
        return reviews

    def frame(self, *, mark_seen: bool = True) -> pl.DataFrame:
        """Every stored review as a frame with the columns and dtypes of REVIEW_SCHEMA."""
        reviews = self.all(mark_seen=mark_seen)
        return pl.DataFrame(
            {
                "key": [r.key for r in reviews],
                "flagged": [r.flagged for r in reviews],
                "decision": [r.decision for r in reviews],
                "note": [r.note for r in reviews],
                "review_fingerprint": [r.fingerprint for r in reviews],
                "updated_at": [r.updated_at for r in reviews],
                "on_earlier_data": [r.on_earlier_data for r in reviews],
            },
            schema={"key": pl.String(), **REVIEW_SCHEMA},
        )

    # -- drafts of notes -----------------------------------------------------------------

    def save_draft(self, key: str, text: str) -> None:
        """Keep ``text`` as the draft of the note of ``key`` (replacing an earlier draft)."""
        _check_key(key)
        if not isinstance(text, str):
            raise TypeError(f"draft must be a string, not {type(text).__name__}")
        self._check_writable()
        with self._transaction() as conn:
            conn.execute(_SAVE_DRAFT, (key, text, _utc_now()))

    def clear_draft(self, key: str) -> None:
        """Forget the draft of ``key`` (nothing happens when there is none)."""
        _check_key(key)
        self._check_writable()
        with self._transaction() as conn:
            conn.execute("DELETE FROM drafts WHERE key = ?", (key,))

    def draft(self, key: str) -> str | None:
        """The draft of the note of ``key``, or None when there is none."""
        _check_key(key)
        return self.drafts([key]).get(key)

    def drafts(self, keys: list[str] | None = None) -> dict[str, str]:
        """Every draft by key (only those of ``keys`` when given)."""
        if not self._has_drafts:
            return {}
        with self._reading() as conn:
            rows = conn.execute("SELECT key, text FROM drafts ORDER BY key").fetchall()
        wanted = None if keys is None else set(keys)
        return {key: text for key, text in rows if wanted is None or key in wanted}

    # -- lifetime ------------------------------------------------------------------------

    def close(self) -> None:
        """Close the connection; further use raises ReviewStoreError. Safe to call twice."""
        if self._conn is not None:
            self._conn.close()
            self._conn = None

    def __enter__(self) -> ReviewStore:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    # -- internals -----------------------------------------------------------------------

    def _connection(self) -> sqlite3.Connection:
        if self._conn is None:
            raise ReviewStoreError(f"{self._path}: review store is closed; open it again")
        return self._conn

    def _check_writable(self) -> None:
        self._connection()
        if self._read_only:
            raise ReviewStoreError(
                f"{self._path}: opened read-only, so the change was not saved; open the review"
                " file for writing to change reviews"
            )

    def _remember(self, key: str, version: int | None) -> None:
        if version is None:
            self._seen.pop(key, None)
        else:
            self._seen[key] = version

    @contextmanager
    def _reading(self) -> Iterator[sqlite3.Connection]:
        conn = self._connection()
        try:
            yield conn
        except sqlite3.Error as exc:
            raise _store_error(self._path, exc, writing=False) from exc

    @contextmanager
    def _transaction(self) -> Iterator[sqlite3.Connection]:
        conn = self._connection()
        try:
            # IMMEDIATE takes the write lock up front, so the read-modify-write in _modify
            # cannot interleave with another process writing the same file.
            conn.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as exc:
            raise _store_error(self._path, exc, writing=True) from exc
        try:
            yield conn
            conn.execute("COMMIT")
        except BaseException as exc:
            # A failed COMMIT leaves the transaction open; roll back so the connection stays usable.
            _roll_back(conn)
            if isinstance(exc, sqlite3.Error):
                raise _store_error(self._path, exc, writing=True) from exc
            raise

    def _modify(self, key: str, change: Callable[[bool, Decision | None, str], _Fields]) -> _Fields:
        _check_key(key)
        self._check_writable()
        version: int | None = None
        with self._transaction() as conn:
            row = conn.execute(f"{self._select} WHERE key = ?", (key,)).fetchone()
            current = None if row is None else self._review(row)
            self._refuse_conflict(key, current)
            before: _Fields = (
                (current.flagged, current.decision, current.note) if current else (False, None, "")
            )
            flagged, decision, note = change(*before)
            if not flagged and decision is None and note == "":
                # Nothing left to remember: a cleared review leaves no row behind.
                conn.execute("DELETE FROM reviews WHERE key = ?", (key,))
            else:
                version = _next_version(conn)
                conn.execute(
                    _UPSERT,
                    (key, int(flagged), decision, note, self._stamp(key), _utc_now(), version),
                )
        self._remember(key, version)
        return flagged, decision, note

    def _refuse_conflict(self, key: str, current: Review | None) -> None:
        stored = None if current is None else current.version
        if stored == self._seen.get(key):
            return
        # The caller is about to be shown this state, so a repeated change applies to it.
        self._remember(key, stored)
        what = "deleted" if current is None else "changed"
        raise ReviewConflict(
            f"{self._path}: the review of {key!r} was {what} by another session since this one"
            " last read it; nothing was saved; look at the review as it is now and repeat the"
            " change to apply it",
            key,
            current,
        )

    def _review(self, row: tuple[Any, ...]) -> Review:
        key, flagged, decision, note, fingerprint, updated_at, version = row
        return Review(
            key=key,
            flagged=bool(flagged),
            decision=decision if decision in DECISIONS else None,
            note=note,
            fingerprint=fingerprint,
            updated_at=updated_at,
            version=int(version),
            store_fingerprint=self._stamp(key),
            data_fingerprint=self._fingerprint,
        )

    def _stamp(self, key: str) -> str:
        return self._stamps.get(key, self._fingerprint)


# -- changes on the connection -------------------------------------------------------------


def _roll_back(conn: sqlite3.Connection) -> None:
    if conn.in_transaction:
        # SQLite rolls back by itself after some errors; the original error matters more.
        with suppress(sqlite3.Error):
            conn.execute("ROLLBACK")


def _next_version(conn: sqlite3.Connection) -> int:
    """The next value of the file's version counter, stored before it is returned.

    The larger of the counter and the highest row version, so a counter lost or edited by
    hand cannot hand out a version that a row already carries.
    """
    counter = conn.execute(
        "SELECT MAX(CAST(value AS INTEGER)) FROM meta WHERE name = 'last_version'"
    ).fetchone()[0]
    highest = conn.execute("SELECT MAX(version) FROM reviews").fetchone()[0]
    version = max(int(counter or 0), int(highest or 0)) + 1
    conn.execute(_SET_META, ("last_version", str(version)))
    return version


def _renames(pairs: list[tuple[str, str]], stored: set[str]) -> dict[str, str]:
    """Which old keys move to which new keys (see ReviewStore.rename_keys)."""
    moving: dict[str, str] = {}
    targets: set[str] = set()
    for old, new in pairs:
        if old in stored and old not in moving and new not in targets:
            moving[old] = new
            targets.add(new)
    # A new key that holds a review is free only when that review moves away itself; drop
    # blocked pairs until none is left, since each drop can block another pair.
    while blocked := [old for old, new in moving.items() if new in stored and new not in moving]:
        for old in blocked:
            del moving[old]
    return moving


def _move_rows(conn: sqlite3.Connection, moving: dict[str, str], first: int) -> dict[str, int]:
    """Re-key the rows of ``moving``; returns the version each new key got."""
    olds = list(moving)
    marks = ", ".join("?" * len(olds))
    rows = conn.execute(
        "SELECT key, flagged, decision, note, fingerprint, updated_at FROM reviews"
        f" WHERE key IN ({marks}) ORDER BY key",
        olds,
    ).fetchall()
    conn.execute(f"DELETE FROM reviews WHERE key IN ({marks})", olds)
    versions = {moving[row[0]]: first + index for index, row in enumerate(rows)}
    conn.executemany(
        _UPSERT, [(moving[row[0]], *row[1:], versions[moving[row[0]]]) for row in rows]
    )
    conn.execute(_SET_META, ("last_version", str(first + len(rows) - 1)))
    return versions


# -- errors --------------------------------------------------------------------------------


def _error_code(exc: sqlite3.Error) -> int:
    # The primary result code is the low byte of SQLite's extended result code.
    code = getattr(exc, "sqlite_errorcode", None)
    return code & 0xFF if isinstance(code, int) else -1


def _detail(exc: sqlite3.Error) -> str:
    text = str(exc)
    if text.startswith("Could not decode"):
        # Python's message quotes the undecodable text, which may span lines.
        return "text that is not UTF-8"
    return " ".join(text.split())[:80]


def _store_error(path: Path, exc: sqlite3.Error, *, writing: bool) -> ReviewStoreError:
    """The one-line error for ``exc`` raised while reading or writing ``path``."""
    code = _error_code(exc)
    lost = "the change was not saved; " if writing else ""
    if code in (sqlite3.SQLITE_BUSY, sqlite3.SQLITE_LOCKED) or "is locked" in str(exc):
        return ReviewStoreBusy(
            f"{path}: the review file is busy: another program, or another foldsift, is writing"
            f" to it (SQLite cannot tell which); {lost}try again in a moment"
        )
    if code == sqlite3.SQLITE_FULL:
        return ReviewStoreError(f"{path}: the disk is full; {lost}free some space and try again")
    if code == sqlite3.SQLITE_READONLY:
        return ReviewStoreError(
            f"{path}: cannot be written (the file or its folder is read-only); {lost}fix its"
            " permissions or choose another review file"
        )
    if code in (sqlite3.SQLITE_IOERR, sqlite3.SQLITE_CANTOPEN, sqlite3.SQLITE_PERM):
        return ReviewStoreError(
            f"{path}: cannot be read or written ({_detail(exc)}); {lost}check the disk and the"
            " file's permissions, then try again"
        )
    if code == sqlite3.SQLITE_NOTADB:
        return ReviewStoreError(
            f"{path}: is not a SQLite database; move it aside or choose another review file"
        )
    return ReviewStoreError(
        f"{path}: the review file is damaged ({_detail(exc)}); {lost}restore it from a copy or"
        " choose another review file"
    )


# -- opening -------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class _Opened:
    conn: sqlite3.Connection
    created: bool
    has_table: bool
    versioned: bool
    has_drafts: bool


def _schema_action(path: Path, conn: sqlite3.Connection) -> tuple[_Action, bool]:
    """What the file's tables need before use, and whether a reviews table exists.

    Raises ReviewStoreError for a schema version this code does not know and for a reviews
    table that foldsift did not create.
    """
    columns = tuple(row[1] for row in conn.execute("PRAGMA table_info(reviews)"))
    has_meta = conn.execute(
        "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'meta'"
    ).fetchone()
    row = (
        conn.execute("SELECT value FROM meta WHERE name = 'schema_version'").fetchone()
        if has_meta
        else None
    )
    found = None if row is None else str(row[0])
    if found not in (None, "1", str(SCHEMA_VERSION)):
        raise ReviewStoreError(
            f"{path}: review schema version {found} is not supported (this foldsift knows"
            f" versions up to {SCHEMA_VERSION}); use a newer foldsift or choose another review"
            " file"
        )
    if not columns:
        return "create", False
    if columns == _REVIEW_COLUMNS and found in (None, str(SCHEMA_VERSION)):
        return ("ready" if found else "create"), True
    if columns == _V1_COLUMNS and found in (None, "1"):
        return "migrate", True
    raise ReviewStoreError(
        f"{path}: holds a 'reviews' table that foldsift did not create; choose another review file"
    )


def _has_drafts(conn: sqlite3.Connection) -> bool:
    found = conn.execute(
        "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'drafts'"
    ).fetchone()
    return found is not None


def _prepare(conn: sqlite3.Connection, action: _Action) -> None:
    """Create the tables of a new store, or bring a version-1 store to this version; add
    the drafts table to any store without one."""
    conn.execute(_CREATE_DRAFTS)
    if action == "create":
        conn.execute(_CREATE_REVIEWS)
        conn.execute(_CREATE_META)
        conn.execute(
            "INSERT OR IGNORE INTO meta (name, value) VALUES ('last_version', '0')",
        )
    elif action == "migrate":
        conn.execute(_MIGRATE_V1)
        conn.execute(_CREATE_META)
        conn.execute(_SET_META, ("last_version", "1"))
    conn.execute(_SET_META, ("schema_version", str(SCHEMA_VERSION)))


def _sqlite_connect(target: str, timeout: float, *, uri: bool = False) -> sqlite3.Connection:
    # isolation_level=None: the stdlib must not open implicit transactions; _transaction
    # issues BEGIN/COMMIT itself so each change is exactly one transaction.
    return sqlite3.connect(target, isolation_level=None, timeout=timeout, uri=uri)


def _open_writable(path: Path, timeout: float) -> _Opened:
    existed = path.exists()
    try:
        conn = _sqlite_connect(str(path), timeout)
    except sqlite3.Error as exc:
        raise _store_error(path, exc, writing=False) from exc
    try:
        conn.execute("PRAGMA journal_mode=WAL").fetchone()
        # synchronous is per connection, not stored in the file, so it is set on every open.
        conn.execute("PRAGMA synchronous=FULL")
        action, had_table = _schema_action(path, conn)
        if action != "ready" or not _has_drafts(conn):
            conn.execute("BEGIN IMMEDIATE")
            # Look again under the write lock: another process may have prepared it meanwhile.
            action, had_table = _schema_action(path, conn)
            _prepare(conn, action)
            conn.execute("COMMIT")
    except (sqlite3.Error, ReviewStoreError) as exc:
        conn.close()
        if not existed and path.exists() and path.stat().st_size == 0:
            path.unlink()
        if isinstance(exc, sqlite3.Error):
            raise _store_error(path, exc, writing=False) from exc
        raise
    return _Opened(conn, created=not had_table, has_table=True, versioned=True, has_drafts=True)


def _open_read_only(path: Path, timeout: float) -> _Opened:
    uri = path.absolute().as_uri() + "?mode=ro"
    try:
        conn = _read_only_connection(uri, timeout)
    except sqlite3.Error as exc:
        if _error_code(exc) not in (sqlite3.SQLITE_CANTOPEN, sqlite3.SQLITE_READONLY):
            raise _store_error(path, exc, writing=False) from exc
        _refuse_unfinished(path)
        # SQLite's documentation on read-only WAL databases: they open only when the -shm and
        # -wal files exist or can be created, or when the file is opened as immutable. With
        # no -wal file (or an empty one) every committed change is in the file itself, so
        # immutable=1 reads all of it; with a non-empty -wal it would miss changes, hence the
        # refusal above (likewise a rollback journal left by a crash, which only a writer can
        # undo). Immutable also skips locking, which is why it is only the fallback.
        try:
            conn = _read_only_connection(uri + "&immutable=1", timeout)
        except sqlite3.Error as again:
            raise _store_error(path, again, writing=False) from again
    try:
        action, has_table = _schema_action(path, conn)
        drafts = _has_drafts(conn)
    except (sqlite3.Error, ReviewStoreError) as exc:
        conn.close()
        if isinstance(exc, sqlite3.Error):
            raise _store_error(path, exc, writing=False) from exc
        raise
    versioned = action != "migrate"
    return _Opened(conn, False, has_table, versioned=versioned, has_drafts=drafts)


def _read_only_connection(uri: str, timeout: float) -> sqlite3.Connection:
    """A connection through ``uri`` that has read the schema (which is when SQLite opens
    the WAL files it needs)."""
    conn = _sqlite_connect(uri, timeout, uri=True)
    try:
        conn.execute("SELECT COUNT(*) FROM sqlite_master").fetchone()
    except BaseException:
        conn.close()
        raise
    return conn


def _refuse_unfinished(path: Path) -> None:
    for suffix in ("-wal", "-journal"):
        beside = path.with_name(path.name + suffix)
        if beside.exists() and beside.stat().st_size > 0:
            raise ReviewStoreError(
                f"{path}: cannot be read here: its latest changes are still in {beside.name}"
                " and SQLite needs to write beside the file to read them; open it once where"
                " its folder is writable, or copy it together with that file to such a folder"
            )


# -- paths ---------------------------------------------------------------------------------


def default_review_path(data_path: Path) -> Path:
    """Where the reviews for ``data_path`` live by default.

    Beside the data file as ``<name>.reviews.sqlite`` when that directory is writable and
    not part of an installed package (a reinstall would delete the reviews: the demo data
    lives there); otherwise under ``$XDG_DATA_HOME/foldsift/reviews/`` with a name made
    unique by a hash of the data path.
    """
    data_path = Path(data_path).expanduser().absolute()
    beside = data_path.with_name(data_path.name + ".reviews.sqlite")
    installed = any(part in ("site-packages", "dist-packages") for part in data_path.parts)
    # WAL mode creates -wal and -shm files next to the database, so the directory itself
    # must be writable, not just an existing review file.
    writable = _dir_writable(data_path.parent) and (
        not beside.exists() or os.access(beside, os.W_OK)
    )
    if writable and not installed:
        return beside
    # Hash the resolved path so two data files with the same name do not share reviews.
    digest = hashlib.sha256(os.fsencode(data_path.resolve())).hexdigest()[:12]
    return _review_home() / f"{data_path.stem}-{digest}.reviews.sqlite"


def _review_home() -> Path:
    return _data_home() / "foldsift" / "reviews"


def _data_home() -> Path:
    # The XDG spec says relative values must be ignored.
    xdg = os.environ.get("XDG_DATA_HOME", "")
    if xdg and Path(xdg).is_absolute():
        return Path(xdg)
    return Path.home() / ".local" / "share"


def _dir_writable(directory: Path) -> bool:
    return directory.is_dir() and os.access(directory, os.W_OK | os.X_OK)


def _utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="microseconds")


def _check_key(key: str) -> None:
    if not isinstance(key, str):
        raise TypeError(f"review key must be a string, not {type(key).__name__}")
    if not key:
        raise ValueError("review key must not be empty")


def _check_folder(path: Path, *, create_folders: bool) -> None:
    parent = path.parent
    if parent.is_dir():
        return
    if parent.exists():
        raise ReviewStoreError(f"{path}: {parent} is not a folder; choose another review file")
    if not create_folders:
        raise ReviewStoreError(
            f"{path}: folder {parent} does not exist; check the path, or create the folder first"
        )
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReviewStoreError(
            f"{path}: cannot create folder {parent} ({exc.strerror}); choose another review file"
        ) from exc


def _check_header(path: Path) -> None:
    if not path.is_file():
        raise ReviewStoreError(f"{path}: is not a regular file; choose another review file")
    try:
        with path.open("rb") as fh:
            header = fh.read(len(_SQLITE_MAGIC))
    except OSError as exc:
        raise ReviewStoreError(
            f"{path}: cannot read it ({exc.strerror}); fix its permissions or choose another"
            " review file"
        ) from exc
    # A zero-length file is a valid empty database to SQLite; anything else needs the magic.
    if header and header != _SQLITE_MAGIC:
        raise ReviewStoreError(
            f"{path}: is not a SQLite database; move it aside or choose another review file"
        )


def _check_readable(path: Path) -> None:
    """Fail early for a read-only opening; creates nothing."""
    if path.is_dir():
        raise ReviewStoreError(f"{path}: is a directory, not a review file; give a file path")
    if not path.exists():
        raise ReviewStoreError(f"{path}: no such review file; check the path")
    _check_header(path)


def _check_openable(path: Path, *, create_folders: bool) -> None:
    """Fail early, with a message a user can act on, before SQLite gives a vaguer one."""
    if path.is_dir():
        raise ReviewStoreError(f"{path}: is a directory, not a review file; give a file path")
    _check_folder(path, create_folders=create_folders)
    if path.exists():
        _check_header(path)
        if not os.access(path, os.W_OK):
            raise ReviewStoreError(
                f"{path}: is not writable; fix its permissions or choose another review file"
            )
    if not _dir_writable(path.parent):
        raise ReviewStoreError(
            f"{path}: folder {path.parent} is not writable (SQLite needs to create files beside"
            " the review file); choose another review file"
        )
