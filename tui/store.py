"""Durable reviewer state (flag, decision, note) per comparison key, kept in SQLite.

Every change is its own committed transaction with ``synchronous=FULL`` in WAL mode, so a
change that a method has returned from survives the process being killed or the machine
losing power. Rows remember the data fingerprint they were written against, which lets the
app point out reviews that were made on an earlier version of the data.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from types import TracebackType

import polars as pl

from foldsift.stats.columns import REVIEW_SCHEMA
from foldsift.stats.vocabulary import DECISIONS, Decision

__all__ = [
    "DECISIONS",
    "REVIEW_SCHEMA",
    "SCHEMA_VERSION",
    "Review",
    "ReviewStore",
    "ReviewStoreError",
    "default_review_path",
]


SCHEMA_VERSION = 1

_REVIEW_COLUMNS = ("key", "flagged", "decision", "note", "fingerprint", "updated_at")

_CREATE_REVIEWS = """
CREATE TABLE IF NOT EXISTS reviews (
    key TEXT PRIMARY KEY,
    flagged INTEGER NOT NULL DEFAULT 0,
    decision TEXT,
    note TEXT NOT NULL DEFAULT '',
    fingerprint TEXT NOT NULL,
    updated_at TEXT NOT NULL
)
"""

_CREATE_META = """
CREATE TABLE IF NOT EXISTS meta (
    name TEXT PRIMARY KEY,
    value TEXT NOT NULL
)
"""

_UPSERT = """
INSERT INTO reviews (key, flagged, decision, note, fingerprint, updated_at)
VALUES (?, ?, ?, ?, ?, ?)
ON CONFLICT(key) DO UPDATE SET
    flagged = excluded.flagged,
    decision = excluded.decision,
    note = excluded.note,
    fingerprint = excluded.fingerprint,
    updated_at = excluded.updated_at
"""

_SQLITE_MAGIC = b"SQLite format 3\x00"

# (flagged, decision, note): the reviewer-editable part of a row.
_Fields = tuple[bool, Decision | None, str]


class ReviewStoreError(ValueError):
    """The review file cannot be opened or written; the message says which file and why."""


@dataclass(frozen=True, slots=True)
class Review:
    """One stored review; ``store_fingerprint`` is the fingerprint of the data now loaded."""

    key: str
    flagged: bool
    decision: Decision | None
    note: str
    fingerprint: str
    updated_at: str
    # Not part of the stored row, so it takes no part in equality.
    store_fingerprint: str = field(repr=False, compare=False)

    @property
    def on_earlier_data(self) -> bool:
        """True when this review was last changed while different data was loaded."""
        return self.fingerprint != self.store_fingerprint


class ReviewStore:
    """Reviews for one data set, stored in one SQLite file through one connection."""

    def __init__(self, path: Path | str, fingerprint: str) -> None:
        if not isinstance(fingerprint, str) or not fingerprint:
            raise ValueError("fingerprint must be a non-empty string")
        self._path = Path(path).expanduser()
        self._fingerprint = fingerprint
        _check_openable(self._path)
        self._conn: sqlite3.Connection | None = _connect(self._path)

    @property
    def path(self) -> Path:
        """The SQLite file backing this store."""
        return self._path

    @property
    def fingerprint(self) -> str:
        """Fingerprint of the data currently loaded; stamped on every change."""
        return self._fingerprint

    # -- changes -------------------------------------------------------------------------

    def set_flag(self, key: str, flagged: bool) -> None:
        """Flag or unflag ``key``."""
        value = bool(flagged)
        self._modify(key, lambda _f, decision, note: (value, decision, note))

    def toggle_flag(self, key: str) -> bool:
        """Flip the flag of ``key`` and return the new state."""
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

    # -- reading -------------------------------------------------------------------------

    def get(self, key: str) -> Review | None:
        """The review stored for ``key``, or None if there is none."""
        _check_key(key)
        row = (
            self._connection()
            .execute(f"SELECT {', '.join(_REVIEW_COLUMNS)} FROM reviews WHERE key = ?", (key,))
            .fetchone()
        )
        return None if row is None else self._review(row)

    def all(self) -> list[Review]:
        """Every stored review, ordered by key."""
        rows = (
            self._connection()
            .execute(f"SELECT {', '.join(_REVIEW_COLUMNS)} FROM reviews ORDER BY key")
            .fetchall()
        )
        return [self._review(row) for row in rows]

    def frame(self) -> pl.DataFrame:
        """Every stored review as a frame with the columns and dtypes of REVIEW_SCHEMA."""
        reviews = self.all()
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

    @contextmanager
    def _transaction(self) -> Iterator[sqlite3.Connection]:
        conn = self._connection()
        try:
            # IMMEDIATE takes the write lock up front, so the read-modify-write in _modify
            # cannot interleave with another process writing the same file.
            conn.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as exc:
            raise ReviewStoreError(f"{self._path}: could not save the change ({exc})") from exc
        try:
            yield conn
            conn.execute("COMMIT")
        except BaseException as exc:
            # A failed COMMIT leaves the transaction open; roll back so the connection stays usable.
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            if isinstance(exc, sqlite3.Error):
                raise ReviewStoreError(f"{self._path}: could not save the change ({exc})") from exc
            raise

    def _modify(self, key: str, change: Callable[[bool, Decision | None, str], _Fields]) -> _Fields:
        _check_key(key)
        with self._transaction() as conn:
            row = conn.execute(
                "SELECT flagged, decision, note FROM reviews WHERE key = ?", (key,)
            ).fetchone()
            current: _Fields = (bool(row[0]), row[1], row[2]) if row else (False, None, "")
            flagged, decision, note = change(*current)
            if not flagged and decision is None and note == "":
                # Nothing left to remember: a cleared review leaves no row behind.
                conn.execute("DELETE FROM reviews WHERE key = ?", (key,))
            else:
                conn.execute(
                    _UPSERT, (key, int(flagged), decision, note, self._fingerprint, _utc_now())
                )
        return flagged, decision, note

    def _review(self, row: tuple[str, int, str | None, str, str, str]) -> Review:
        key, flagged, decision, note, fingerprint, updated_at = row
        return Review(
            key=key,
            flagged=bool(flagged),
            decision=decision if decision in DECISIONS else None,
            note=note,
            fingerprint=fingerprint,
            updated_at=updated_at,
            store_fingerprint=self._fingerprint,
        )


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
    return _data_home() / "foldsift" / "reviews" / f"{data_path.stem}-{digest}.reviews.sqlite"


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


def _check_openable(path: Path) -> None:
    """Fail early, with a message a user can act on, before SQLite gives a vaguer one."""
    if path.is_dir():
        raise ReviewStoreError(f"{path}: is a directory, not a review file; give a file path")
    parent = path.parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReviewStoreError(
            f"{path}: cannot create folder {parent} ({exc.strerror}); choose another review file"
        ) from exc
    if path.exists():
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
        if not os.access(path, os.W_OK):
            raise ReviewStoreError(
                f"{path}: is not writable; fix its permissions or choose another review file"
            )
    if not _dir_writable(parent):
        raise ReviewStoreError(
            f"{path}: folder {parent} is not writable (SQLite needs to create files beside the"
            " review file); choose another review file"
        )


def _connect(path: Path) -> sqlite3.Connection:
    # isolation_level=None: the stdlib must not open implicit transactions; _transaction
    # issues BEGIN/COMMIT itself so each change is exactly one transaction.
    try:
        conn = sqlite3.connect(str(path), isolation_level=None, timeout=5.0)
    except sqlite3.Error as exc:
        raise ReviewStoreError(f"{path}: cannot open ({exc}); choose another review file") from exc
    try:
        conn.execute("PRAGMA journal_mode=WAL").fetchone()
        # synchronous is per connection, not stored in the file, so it is set on every open.
        conn.execute("PRAGMA synchronous=FULL")
        conn.execute("BEGIN IMMEDIATE")
        conn.execute(_CREATE_REVIEWS)
        conn.execute(_CREATE_META)
        conn.execute(
            "INSERT OR IGNORE INTO meta (name, value) VALUES ('schema_version', ?)",
            (str(SCHEMA_VERSION),),
        )
        version = conn.execute("SELECT value FROM meta WHERE name = 'schema_version'").fetchone()
        columns = tuple(row[1] for row in conn.execute("PRAGMA table_info(reviews)"))
        conn.execute("COMMIT")
    except sqlite3.DatabaseError as exc:
        conn.close()
        if "not a database" in str(exc):
            raise ReviewStoreError(
                f"{path}: is not a SQLite database; move it aside or choose another review file"
            ) from exc
        raise ReviewStoreError(f"{path}: cannot open ({exc}); choose another review file") from exc
    if version is None or version[0] != str(SCHEMA_VERSION):
        conn.close()
        found = "none" if version is None else version[0]
        raise ReviewStoreError(
            f"{path}: review schema version {found} is not supported (expected {SCHEMA_VERSION});"
            " use a matching foldsift or choose another review file"
        )
    if columns != _REVIEW_COLUMNS:
        conn.close()
        raise ReviewStoreError(
            f"{path}: holds a 'reviews' table that foldsift did not create; choose another"
            " review file"
        )
    return conn
