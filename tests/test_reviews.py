"""Tests for foldsift.tui.store: round trips, clearing, errors, WAL and crash durability."""

from __future__ import annotations

import os
import selectors
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import polars as pl
import pytest

from foldsift.tui import store as reviews_mod
from foldsift.tui.store import (
    DECISIONS,
    REVIEW_SCHEMA,
    Review,
    ReviewStore,
    ReviewStoreBusy,
    ReviewStoreError,
    default_review_path,
)

NOTE = "first line: Ünïcödé — ±½ µg/L\nsecond line 日本語 ✓\n\ttabbed third line"


def _row_count(path: Path) -> int:
    with sqlite3.connect(path) as conn:
        return conn.execute("SELECT COUNT(*) FROM reviews").fetchone()[0]


def test_decisions_are_plain_words() -> None:
    assert DECISIONS == ("keep", "doubt", "drop")


def test_round_trip_survives_reopen(tmp_path: Path) -> None:
    path = tmp_path / "data.csv.reviews.sqlite"
    with ReviewStore(path, "fp-1") as store:
        store.set_flag("a|b", True)
        store.set_decision("a|b", "doubt")
        store.set_note("a|b", NOTE)
        store.set_decision("c|d", "keep")
        first = store.get("a|b")
    assert first is not None

    with ReviewStore(path, "fp-1") as store:
        again = store.get("a|b")
        other = store.get("c|d")
        assert store.get("never-touched") is None
        assert [r.key for r in store.all()] == ["a|b", "c|d"]

    assert again == first
    assert again is not None and other is not None
    assert (again.flagged, again.decision, again.note) == (True, "doubt", NOTE)
    assert (other.flagged, other.decision, other.note) == (False, "keep", "")
    assert again.fingerprint == "fp-1"
    assert not again.on_earlier_data


def test_on_earlier_data_when_fingerprint_changes(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "old") as store:
        store.set_flag("k1", True)
        store.set_flag("k2", True)

    with ReviewStore(path, "new") as store:
        # A session reads every review before it changes one; a change to a review this
        # store never read is refused as a conflict (tests/test_store_conflicts.py).
        store.frame()
        stale = store.get("k1")
        assert stale is not None
        assert stale.fingerprint == "old"
        assert stale.on_earlier_data
        # Touching a row re-stamps it with the data now loaded.
        store.set_note("k2", "checked again")
        fresh = store.get("k2")
        assert fresh is not None
        assert fresh.fingerprint == "new"
        assert not fresh.on_earlier_data
        frame = store.frame()
    assert dict(zip(frame["key"], frame["on_earlier_data"], strict=True)) == {
        "k1": True,
        "k2": False,
    }


def test_every_change_updates_timestamp(tmp_path: Path) -> None:
    with ReviewStore(tmp_path / "r.sqlite", "fp") as store:
        store.set_flag("k", True)
        first = store.get("k")
        time.sleep(0.002)
        store.set_decision("k", "keep")
        second = store.get("k")
    assert first is not None and second is not None
    assert second.updated_at > first.updated_at
    assert second.updated_at.endswith("+00:00")


def test_toggle_flag_returns_new_state(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        assert store.toggle_flag("k") is True
        review = store.get("k")
        assert review is not None and review.flagged
        assert store.toggle_flag("k") is False
        assert store.get("k") is None
    assert _row_count(path) == 0


def test_cleared_row_is_deleted(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        store.set_flag("k", True)
        store.set_decision("k", "drop")
        store.set_note("k", "why")
        store.set_flag("k", False)
        store.set_decision("k", None)
        assert store.get("k") is not None  # the note still holds it
        store.set_note("k", "")
        assert store.get("k") is None
        assert store.all() == []
    assert _row_count(path) == 0


def test_partial_clear_keeps_other_fields(tmp_path: Path) -> None:
    with ReviewStore(tmp_path / "r.sqlite", "fp") as store:
        store.set_flag("k", True)
        store.set_note("k", "keep me")
        store.set_flag("k", False)
        review = store.get("k")
    assert review is not None
    assert (review.flagged, review.decision, review.note) == (False, None, "keep me")


@pytest.mark.parametrize("bad", ["maybe", "Keep", "", 1])
def test_bad_decision_raises(tmp_path: Path, bad: object) -> None:
    with ReviewStore(tmp_path / "r.sqlite", "fp") as store:
        with pytest.raises(ValueError, match="unknown decision"):
            store.set_decision("k", bad)  # type: ignore[arg-type]
        assert store.get("k") is None


def test_bad_key_and_note_raise(tmp_path: Path) -> None:
    with ReviewStore(tmp_path / "r.sqlite", "fp") as store:
        with pytest.raises(ValueError, match="empty"):
            store.set_flag("", True)
        with pytest.raises(TypeError):
            store.set_flag(3, True)  # type: ignore[arg-type]
        with pytest.raises(TypeError):
            store.set_note("k", None)  # type: ignore[arg-type]
        assert store.all() == []


def test_frame_dtypes_when_empty_and_filled(tmp_path: Path) -> None:
    with ReviewStore(tmp_path / "r.sqlite", "fp") as store:
        empty = store.frame()
        store.set_flag("b", True)
        store.set_note("a", "n")
        filled = store.frame()
    expected = pl.Schema({"key": pl.String(), **REVIEW_SCHEMA})
    assert empty.height == 0
    assert empty.schema == expected
    assert filled.schema == expected
    assert filled["key"].to_list() == ["a", "b"]
    assert filled["flagged"].to_list() == [False, True]
    assert filled["decision"].to_list() == [None, None]
    assert filled["note"].to_list() == ["n", ""]
    assert filled["review_fingerprint"].to_list() == ["fp", "fp"]
    assert list(filled.columns) == [
        "key",
        "flagged",
        "decision",
        "note",
        "review_fingerprint",
        "updated_at",
        "on_earlier_data",
    ]


def test_wal_and_full_sync_are_on(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        conn = store._connection()
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        # 2 == FULL
        assert conn.execute("PRAGMA synchronous").fetchone()[0] == 2
    # WAL mode is persistent in the file, so a fresh plain connection sees it too.
    with sqlite3.connect(path) as conn:
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        version = conn.execute("SELECT value FROM meta WHERE name = 'schema_version'").fetchone()
    assert version == (str(reviews_mod.SCHEMA_VERSION),)


def test_change_is_visible_to_other_connection_before_close(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    store = ReviewStore(path, "fp")
    try:
        store.set_decision("k", "keep")
        with sqlite3.connect(path) as conn:
            row = conn.execute("SELECT decision FROM reviews WHERE key = 'k'").fetchone()
        assert row == ("keep",)
    finally:
        store.close()


def test_closed_store_raises(tmp_path: Path) -> None:
    store = ReviewStore(tmp_path / "r.sqlite", "fp")
    store.close()
    store.close()
    with pytest.raises(ReviewStoreError, match="closed"):
        store.set_flag("k", True)


def test_non_sqlite_file_raises(tmp_path: Path) -> None:
    path = tmp_path / "notes.txt"
    path.write_text("key,flagged\na,1\n" * 50)
    with pytest.raises(ReviewStoreError, match="not a SQLite database") as info:
        ReviewStore(path, "fp")
    message = str(info.value)
    assert str(path) in message
    assert "\n" not in message
    assert isinstance(info.value, ValueError)
    assert path.read_text().startswith("key,flagged")  # untouched


def test_sqlite_header_but_corrupt_body_raises(tmp_path: Path) -> None:
    path = tmp_path / "broken.sqlite"
    path.write_bytes(b"SQLite format 3\x00" + b"\xff" * 200)
    with pytest.raises(ReviewStoreError) as info:
        ReviewStore(path, "fp")
    assert str(path) in str(info.value)


def test_empty_file_becomes_store(tmp_path: Path) -> None:
    path = tmp_path / "empty.sqlite"
    path.touch()
    with ReviewStore(path, "fp") as store:
        store.set_flag("k", True)
    assert _row_count(path) == 1


def test_directory_path_raises(tmp_path: Path) -> None:
    with pytest.raises(ReviewStoreError, match="directory") as info:
        ReviewStore(tmp_path, "fp")
    assert str(tmp_path) in str(info.value)


def test_foreign_sqlite_database_raises(tmp_path: Path) -> None:
    path = tmp_path / "other.sqlite"
    with sqlite3.connect(path) as conn:
        conn.execute("CREATE TABLE reviews (id INTEGER, body TEXT)")
    with pytest.raises(ReviewStoreError, match="did not create"):
        ReviewStore(path, "fp")


def test_newer_schema_version_raises(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    ReviewStore(path, "fp").close()
    with sqlite3.connect(path) as conn:
        conn.execute("UPDATE meta SET value = '99' WHERE name = 'schema_version'")
    with pytest.raises(ReviewStoreError, match="schema version 99"):
        ReviewStore(path, "fp")


def test_missing_parent_folder_is_refused_unless_asked(tmp_path: Path) -> None:
    """A mistyped folder in a path the user gave is reported, and nothing is created."""
    path = tmp_path / "reveiws" / "er" / "r.sqlite"
    with pytest.raises(ReviewStoreError, match="does not exist") as info:
        ReviewStore(path, "fp")
    message = str(info.value)
    assert str(tmp_path / "reveiws" / "er") in message
    assert "\n" not in message
    assert list(tmp_path.iterdir()) == []
    # The caller may allow it (the default location under the XDG data folder does).
    with ReviewStore(path, "fp", create_folders=True) as store:
        assert store.created
        store.set_flag("k", True)
    assert path.is_file()


def test_parent_that_is_a_file_is_refused(tmp_path: Path) -> None:
    blocker = tmp_path / "plain"
    blocker.write_text("x")
    with pytest.raises(ReviewStoreError, match="is not a folder"):
        ReviewStore(blocker / "r.sqlite", "fp", create_folders=True)


def test_created_only_when_a_new_store_starts(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        assert store.created
        store.set_flag("k", True)
    with ReviewStore(path, "fp") as store:
        assert not store.created
    empty = tmp_path / "empty.sqlite"
    empty.touch()
    with ReviewStore(empty, "fp") as store:
        assert store.created


@pytest.mark.skipif(
    os.name != "posix" or os.geteuid() == 0, reason="needs POSIX permissions and a non-root user"
)
def test_unwritable_file_raises(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    ReviewStore(path, "fp").close()
    path.chmod(0o444)
    try:
        with pytest.raises(ReviewStoreError, match="not writable"):
            ReviewStore(path, "fp")
    finally:
        path.chmod(0o644)


def test_unwritable_folder_raises(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # Root ignores permission bits, so simulate the folder check failing for this folder only.
    locked = tmp_path / "locked"
    locked.mkdir()
    real_access = os.access
    monkeypatch.setattr(
        reviews_mod.os,
        "access",
        lambda p, mode: False if Path(p) == locked else real_access(p, mode),
    )
    with pytest.raises(ReviewStoreError, match="not writable") as info:
        ReviewStore(locked / "r.sqlite", "fp")
    assert str(locked / "r.sqlite") in str(info.value)
    assert not (locked / "r.sqlite").exists()


def test_review_equality_ignores_store_fingerprint() -> None:
    a = Review("k", True, None, "", "fp", "t", 3, store_fingerprint="fp")
    b = Review("k", True, None, "", "fp", "t", 3, store_fingerprint="other")
    assert a == b
    assert not a.on_earlier_data
    assert b.on_earlier_data


def test_empty_fingerprint_rejected(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="fingerprint"):
        ReviewStore(tmp_path / "r.sqlite", "")


# -- default_review_path -------------------------------------------------------------------


def test_default_path_beside_data(tmp_path: Path) -> None:
    data = tmp_path / "measurements.csv"
    data.write_text("x\n1\n")
    assert default_review_path(data) == tmp_path / "measurements.csv.reviews.sqlite"


def test_default_path_falls_back_to_xdg(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    pkg = tmp_path / "site-packages" / "thing"
    pkg.mkdir(parents=True)
    data = pkg / "demo.csv"
    data.write_text("x\n1\n")
    xdg = tmp_path / "xdg"
    monkeypatch.setenv("XDG_DATA_HOME", str(xdg))
    real_access = os.access
    monkeypatch.setattr(
        reviews_mod.os,
        "access",
        lambda p, mode: False if Path(p) == pkg else real_access(p, mode),
    )
    path = default_review_path(data)
    assert path.parent == xdg / "foldsift" / "reviews"
    assert path.name.startswith("demo-")
    assert path.name.endswith(".reviews.sqlite")

    # Same stem elsewhere must not share the file; same path must map to the same file.
    other_pkg = tmp_path / "other"
    other_pkg.mkdir()
    monkeypatch.setattr(
        reviews_mod.os,
        "access",
        lambda p, mode: False if Path(p) in (pkg, other_pkg) else real_access(p, mode),
    )
    other = default_review_path(other_pkg / "demo.csv")
    assert other != path
    assert default_review_path(data) == path

    # The fallback location is usable as a store: opening the default creates its folders.
    with ReviewStore.open_default(data, "fp") as store:
        assert store.path == path
        assert store.created
        store.set_flag("k", True)
    assert path.is_file()


def test_default_path_ignores_relative_xdg(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    pkg = tmp_path / "ro"
    pkg.mkdir()
    monkeypatch.setenv("XDG_DATA_HOME", "relative/dir")
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    real_access = os.access
    monkeypatch.setattr(
        reviews_mod.os,
        "access",
        lambda p, mode: False if Path(p) == pkg else real_access(p, mode),
    )
    path = default_review_path(pkg / "demo.csv")
    assert path.parent == tmp_path / "home" / ".local" / "share" / "foldsift" / "reviews"


# -- durability against SIGKILL ------------------------------------------------------------

_CHILD = """
import sys, time
from foldsift.tui.store import ReviewStore

path, action, key, value = sys.argv[1:5]
store = ReviewStore(path, "fp-child")
store.frame()  # what a session does first; a change to an unread review is a conflict
if action == "flag":
    store.set_flag(key, value == "1")
elif action == "decision":
    store.set_decision(key, value)
elif action == "note":
    store.set_note(key, value)
else:
    raise SystemExit("unknown action")
sys.stdout.write("done\\n")
sys.stdout.flush()
time.sleep(120)
"""


def _run_and_kill(path: Path, action: str, key: str, value: str) -> None:
    env = dict(os.environ, PYTHONIOENCODING="utf-8")
    proc = subprocess.Popen(
        [sys.executable, "-c", _CHILD, str(path), action, key, value],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        env=env,
    )
    try:
        assert proc.stdout is not None
        with selectors.DefaultSelector() as sel:
            sel.register(proc.stdout, selectors.EVENT_READ)
            ready = sel.select(timeout=60)
        assert ready, "child did not report within 60 s"
        line = proc.stdout.readline()
        if line != b"done\n":
            _, err = proc.communicate(timeout=10)
            pytest.fail(f"child failed: {line!r} {err.decode(errors='replace')}")
        os.kill(proc.pid, signal.SIGKILL)
        assert proc.wait(timeout=30) == -signal.SIGKILL
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=30)
        for stream in (proc.stdout, proc.stderr):
            if stream is not None:
                stream.close()


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL is POSIX only")
@pytest.mark.parametrize(
    ("action", "value", "expected"),
    [
        ("flag", "1", (True, None, "")),
        ("decision", "drop", (False, "drop", "")),
        ("note", NOTE, (False, None, NOTE)),
    ],
)
def test_change_survives_sigkill(
    tmp_path: Path, action: str, value: str, expected: tuple[bool, str | None, str]
) -> None:
    path = tmp_path / "killed.reviews.sqlite"
    _run_and_kill(path, action, "g1|g2|v", value)
    # Open with plain sqlite3 first so the check does not depend on ReviewStore's own reads.
    with sqlite3.connect(path) as conn:
        row = conn.execute(
            "SELECT flagged, decision, note FROM reviews WHERE key = 'g1|g2|v'"
        ).fetchone()
    assert row is not None
    assert (bool(row[0]), row[1], row[2]) == expected
    with ReviewStore(path, "fp-parent") as store:
        review = store.get("g1|g2|v")
    assert review is not None
    assert (review.flagged, review.decision, review.note) == expected
    assert review.fingerprint == "fp-child"
    assert review.on_earlier_data


@pytest.mark.skipif(os.name != "posix", reason="SIGKILL is POSIX only")
def test_changes_from_several_killed_processes_accumulate(tmp_path: Path) -> None:
    path = tmp_path / "killed.reviews.sqlite"
    _run_and_kill(path, "flag", "g1|g2|v", "1")
    _run_and_kill(path, "decision", "g1|g2|v", "drop")
    _run_and_kill(path, "note", "g3|g4|w", NOTE)
    with ReviewStore(path, "fp-parent") as store:
        first = store.get("g1|g2|v")
        second = store.get("g3|g4|w")
    assert first is not None and second is not None
    assert (first.flagged, first.decision, first.note) == (True, "drop", "")
    assert (second.flagged, second.decision, second.note) == (False, None, NOTE)


def test_default_review_path_avoids_installed_packages(tmp_path, monkeypatch):
    """Data inside an installed package (the demo, after `pip install .`) keeps its reviews
    under XDG_DATA_HOME even when the package folder is writable (root): a reinstall would
    otherwise delete them."""
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    package = tmp_path / "lib" / "python3.11" / "site-packages" / "foldsift" / "demo"
    package.mkdir(parents=True)
    data = package / "survey.csv"
    data.write_text("site,value\na,1\n")
    path = default_review_path(data)
    assert path.is_relative_to(tmp_path / "xdg" / "foldsift" / "reviews")
    assert path.name.startswith("survey-")


# -- read-only opening ---------------------------------------------------------------------


def _filled_store(path: Path, notes: int = 3) -> None:
    with ReviewStore(path, "fp") as store:
        for index in range(notes):
            store.set_note(f"key{index:04d}", f"note {index} " + NOTE)
        store.set_flag("key0000", True)


def _read_only_change_calls(store: ReviewStore) -> list[tuple[str, object]]:
    return [
        ("set_flag", lambda: store.set_flag("key0000", False)),
        ("toggle_flag", lambda: store.toggle_flag("new")),
        ("set_decision", lambda: store.set_decision("key0001", "keep")),
        ("set_note", lambda: store.set_note("key0001", "")),
        ("rename_keys", lambda: store.rename_keys({"key0001": "other"})),
    ]


def test_read_only_reads_and_never_changes_the_file(tmp_path: Path) -> None:
    # SQLite's URI documentation: mode=ro opens the database read-only.
    path = tmp_path / "r.sqlite"
    _filled_store(path)
    with ReviewStore(path, "fp") as writable:
        expected = writable.all()
    before = path.read_bytes()
    path.chmod(0o444)
    try:
        with ReviewStore(path, "fp", read_only=True) as store:
            assert store.read_only
            assert not store.created
            assert store.all() == expected
            assert store.get("key0002") == expected[2]
            assert store.frame()["note"].to_list() == [r.note for r in expected]
            for name, call in _read_only_change_calls(store):
                with pytest.raises(ReviewStoreError, match="opened read-only") as info:
                    call()  # type: ignore[operator]
                assert str(path) in str(info.value), name
            assert store.all() == expected
    finally:
        path.chmod(0o644)
    assert path.read_bytes() == before


def test_read_only_missing_file_creates_nothing(tmp_path: Path) -> None:
    path = tmp_path / "missing" / "r.sqlite"
    with pytest.raises(ReviewStoreError, match="no such review file") as info:
        ReviewStore(path, "fp", read_only=True)
    assert str(path) in str(info.value)
    assert list(tmp_path.iterdir()) == []


def test_read_only_zero_length_file_is_an_empty_store(tmp_path: Path) -> None:
    # SQLite treats a zero-length file as an empty database; reading it must not create tables.
    path = tmp_path / "empty.sqlite"
    path.touch()
    with ReviewStore(path, "fp", read_only=True) as store:
        assert store.all() == []
        assert store.get("k") is None
        assert store.frame().height == 0
    assert path.stat().st_size == 0


@contextmanager
def _unwritable_folder(folder: Path) -> Iterator[None]:
    """Make ``folder`` and its files unwritable; for root, whom permission bits do not stop,
    with the immutable attribute (chattr +i) where the file system has it."""
    files = sorted(folder.iterdir())
    locked: list[Path] = []
    for item in files:
        item.chmod(0o444)
    folder.chmod(0o555)
    try:
        if os.geteuid() == 0 and shutil.which("chattr"):
            for item in [*files, folder]:
                done = subprocess.run(["chattr", "+i", str(item)], capture_output=True)
                if done.returncode == 0:
                    locked.append(item)
        probe = folder / "probe"
        try:
            probe.touch()
        except OSError:
            pass
        else:
            probe.unlink()
            pytest.skip("cannot make a folder unwritable here")
        yield
    finally:
        for item in reversed(locked):
            subprocess.run(["chattr", "-i", str(item)], check=True)
        folder.chmod(0o755)
        for item in files:
            item.chmod(0o644)


@pytest.mark.skipif(os.name != "posix", reason="needs POSIX permissions")
def test_read_only_in_an_unwritable_folder(tmp_path: Path) -> None:
    # SQLite's documentation on read-only WAL databases: a WAL file opens read-only only when
    # its -shm and -wal files exist or can be created, or when it is opened as immutable.
    folder = tmp_path / "shared"
    folder.mkdir()
    path = folder / "r.sqlite"
    _filled_store(path)
    with ReviewStore(path, "fp") as writable:
        expected = writable.all()
    assert sorted(p.name for p in folder.iterdir()) == ["r.sqlite"]  # closed cleanly
    before = path.read_bytes()
    with _unwritable_folder(folder), ReviewStore(path, "fp", read_only=True) as store:
        assert store.all() == expected
        with pytest.raises(ReviewStoreError, match="opened read-only"):
            store.set_note("key0001", "changed")
    assert path.read_bytes() == before
    assert sorted(p.name for p in folder.iterdir()) == ["r.sqlite"]


@pytest.mark.skipif(os.name != "posix", reason="needs POSIX permissions")
def test_read_only_refuses_changes_it_cannot_see(tmp_path: Path) -> None:
    """A non-empty -wal file without its -shm in an unwritable folder holds changes that an
    immutable reading would miss: refuse rather than show old reviews."""
    source = tmp_path / "live.sqlite"
    ReviewStore(source, "fp").close()
    # SQLite's WAL documentation: the -wal file is folded into the database and removed when
    # the last connection closes, so a second connection that stays open keeps it there.
    keeper = sqlite3.connect(source, isolation_level=None)
    try:
        keeper.execute("SELECT COUNT(*) FROM reviews").fetchone()
        with ReviewStore(source, "fp") as store:
            store.set_note("k", "only in the -wal file")
        folder = tmp_path / "copy"
        folder.mkdir()
        shutil.copyfile(source, folder / "r.sqlite")
        shutil.copyfile(f"{source}-wal", folder / "r.sqlite-wal")
    finally:
        keeper.close()
    assert (folder / "r.sqlite-wal").stat().st_size > 0
    with _unwritable_folder(folder), pytest.raises(ReviewStoreError, match="r.sqlite-wal") as info:
        ReviewStore(folder / "r.sqlite", "fp", read_only=True)
    assert "\n" not in str(info.value)
    # Where SQLite can write its files, the same copy reads the change.
    with ReviewStore(folder / "r.sqlite", "fp", read_only=True) as store:
        review = store.get("k")
    assert review is not None and review.note == "only in the -wal file"


# -- another writer holding the lock -------------------------------------------------------


@contextmanager
def _held_write_lock(path: Path) -> Iterator[sqlite3.Connection]:
    """Another connection inside BEGIN IMMEDIATE: it holds the write lock until it ends
    (SQLite's documentation of BEGIN IMMEDIATE)."""
    other = sqlite3.connect(path, isolation_level=None)
    try:
        other.execute("BEGIN IMMEDIATE")
        yield other
    finally:
        if other.in_transaction:
            other.execute("ROLLBACK")
        other.close()


def _assert_busy_message(error: ReviewStoreError, path: Path) -> None:
    message = str(error)
    assert isinstance(error, ReviewStoreBusy)
    assert str(path) in message
    assert "busy" in message and "another program" in message and "try again" in message
    assert "choose another" not in message
    assert "\n" not in message


def test_change_while_another_connection_writes_is_busy_quickly(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        store.set_flag("k", True)
        with _held_write_lock(path):
            # SQLite's WAL documentation: readers do not wait for a writer.
            assert store.get("k") is not None
            for change in (
                lambda: store.set_note("k", "lost?"),
                lambda: store.toggle_flag("k"),
                lambda: store.rename_keys({"k": "k2"}),
            ):
                started = time.monotonic()
                with pytest.raises(ReviewStoreBusy) as info:
                    change()
                # The default wait is about 0.25 s (SQLITE_BUSY after the busy timeout).
                assert time.monotonic() - started < 2.0
                _assert_busy_message(info.value, path)
                assert "not saved" in str(info.value)
        # Once the other writer is done, the same change goes through.
        store.set_note("k", "saved")
        review = store.get("k")
    assert review is not None and review.note == "saved" and review.flagged


def test_busy_timeout_is_how_long_a_change_waits(tmp_path: Path) -> None:
    # Python's sqlite3 documentation: ``timeout`` is how long to wait for a lock to go away.
    path = tmp_path / "r.sqlite"
    ReviewStore(path, "fp").close()
    with ReviewStore(path, "fp", busy_timeout=0.6) as store, _held_write_lock(path):
        started = time.monotonic()
        with pytest.raises(ReviewStoreBusy):
            store.set_flag("k", True)
        assert time.monotonic() - started >= 0.4
    with pytest.raises(ValueError, match="busy_timeout"):
        ReviewStore(path, "fp", busy_timeout=-1)


def test_opening_while_another_connection_writes_says_busy(tmp_path: Path) -> None:
    path = tmp_path / "new.sqlite"
    path.touch()  # an empty database that still needs its tables
    with _held_write_lock(path), pytest.raises(ReviewStoreBusy) as info:
        ReviewStore(path, "fp")
    _assert_busy_message(info.value, path)
    with ReviewStore(path, "fp") as store:
        store.set_flag("k", True)


def test_opening_a_ready_store_while_another_writes_can_read(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    _filled_store(path)
    with _held_write_lock(path), ReviewStore(path, "fp") as store:
        assert [r.key for r in store.all()] == ["key0000", "key0001", "key0002"]


# -- damaged pages -------------------------------------------------------------------------


def _page_size(path: Path) -> int:
    with sqlite3.connect(path) as conn:
        size: int = conn.execute("PRAGMA page_size").fetchone()[0]
    return size


def _damage_a_page(path: Path) -> None:
    # SQLite's file format documentation: page 1 holds the header and the schema; a page
    # whose b-tree header byte is not a page type is damaged.
    size = _page_size(path)
    pages = path.stat().st_size // size
    assert pages > 4
    with path.open("r+b") as fh:
        fh.seek(size * (pages // 2))
        fh.write(b"\xff" * size)


def _damage_note_text(path: Path) -> None:
    data = path.read_bytes()
    at = data.index(b"note 150 ")
    with path.open("r+b") as fh:
        fh.seek(at)
        fh.write(b"\xff" * 12)


@pytest.mark.parametrize("damage", [_damage_a_page, _damage_note_text])
def test_damaged_pages_give_one_line_errors(tmp_path: Path, damage: object) -> None:
    path = tmp_path / "r.sqlite"
    _filled_store(path, notes=300)
    keys = [f"key{index:04d}" for index in range(300)]
    damage(path)  # type: ignore[operator]

    def check(error: ReviewStoreError, change: bool) -> None:
        message = str(error)
        assert str(path) in message and "damaged" in message, message
        assert "restore it from a copy" in message and "\n" not in message
        assert ("not saved" in message) == change

    with ReviewStore(path, "fp") as store:
        for read in (store.all, store.frame):
            with pytest.raises(ReviewStoreError) as info:
                read()
            check(info.value, change=False)
        unreadable = []
        for key in keys:
            try:
                store.get(key)
            except ReviewStoreError as error:
                check(error, change=False)
                unreadable.append(key)
        assert unreadable
        for key in unreadable:
            with pytest.raises(ReviewStoreError) as info:
                store.set_note(key, "replacement")
            check(info.value, change=True)
