"""Tests for foldsift.tui.store across sessions: versions, conflicts, the version-1 migration
and carrying reviews over to new keys.

Detecting a change made elsewhere by a version number per row, and refusing a write whose
expected version is out of date, is common practice (optimistic concurrency control).
"""

from __future__ import annotations

import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from foldsift.tui.store import (
    SCHEMA_VERSION,
    Review,
    ReviewConflict,
    ReviewStore,
    ReviewStoreBusy,
    ReviewStoreError,
)


def _two_sessions(path: Path) -> tuple[ReviewStore, ReviewStore]:
    """Two stores on one file, each having read every review as a session does on opening."""
    first, second = ReviewStore(path, "fp-a"), ReviewStore(path, "fp-b")
    first.frame()
    second.frame()
    return first, second


def _fields(review: Review | None) -> tuple[bool, str | None, str] | None:
    return None if review is None else (review.flagged, review.decision, review.note)


def _stored(path: Path) -> dict[str, tuple[bool, str | None, str]]:
    with sqlite3.connect(path) as conn:
        rows = conn.execute("SELECT key, flagged, decision, note FROM reviews").fetchall()
    return {key: (bool(flagged), decision, note) for key, flagged, decision, note in rows}


# -- versions ------------------------------------------------------------------------------


def test_version_grows_on_every_change_and_never_repeats(tmp_path: Path) -> None:
    with ReviewStore(tmp_path / "r.sqlite", "fp") as store:
        seen = []
        store.set_flag("k", True)
        seen.append(store.get("k"))
        store.set_note("k", "why")
        seen.append(store.get("k"))
        store.set_decision("other", "keep")
        store.set_decision("k", "drop")
        seen.append(store.get("k"))
        # Cleared: the row goes; written again, it gets a version it never had before.
        store.set_flag("k", False)
        store.set_decision("k", None)
        store.set_note("k", "")
        assert store.get("k") is None
        store.set_flag("k", True)
        seen.append(store.get("k"))
    versions = [review.version for review in seen if review is not None]
    assert len(versions) == 4
    assert versions == sorted(set(versions))


def test_one_session_never_conflicts_with_itself(tmp_path: Path) -> None:
    with ReviewStore(tmp_path / "r.sqlite", "fp") as store:
        for _ in range(5):
            store.toggle_flag("k")
            store.set_note("k", "again")
            store.set_decision("k", "doubt")
            store.set_note("k", "")
        review = store.get("k")
    assert _fields(review) == (True, "doubt", "")


# -- conflicts -----------------------------------------------------------------------------


def test_note_saved_over_another_sessions_note_is_refused_then_applied(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    a, b = _two_sessions(path)
    with a, b:
        a.set_note("k", "A's finding")
        # B opened an empty editor before A saved; saving must not replace A's note.
        with pytest.raises(ReviewConflict) as info:
            b.set_note("k", "B's text")
        conflict = info.value
        assert isinstance(conflict, ReviewStoreError)
        assert conflict.key == "k"
        assert _fields(conflict.current) == (False, None, "A's finding")
        assert str(path) in str(conflict) and "\n" not in str(conflict)
        assert _stored(path) == {"k": (False, None, "A's finding")}
        # B has now been shown A's note; repeating the change is B's decision.
        b.set_note("k", "A's finding; B agrees")
        assert _stored(path) == {"k": (False, None, "A's finding; B agrees")}
        # And now A is the one who has not seen the latest.
        with pytest.raises(ReviewConflict):
            a.set_decision("k", "keep")


def test_toggle_after_a_conflict_flips_the_current_state(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    a, b = _two_sessions(path)
    with a, b:
        a.set_flag("k", True)
        # B still shows the row unflagged; its space must not silently unflag A's flag.
        with pytest.raises(ReviewConflict) as info:
            b.toggle_flag("k")
        assert _fields(info.value.current) == (True, None, "")
        assert _stored(path) == {"k": (True, None, "")}
        # Pressed again after seeing the flag: flips what is stored now.
        assert b.toggle_flag("k") is False
        assert _stored(path) == {}


def test_review_deleted_elsewhere_is_a_conflict(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as setup:
        setup.set_note("k", "old note")
    a, b = _two_sessions(path)
    with a, b:
        a.set_note("k", "")
        with pytest.raises(ReviewConflict) as info:
            b.set_flag("k", True)
        assert info.value.current is None
        assert "deleted" in str(info.value)
        assert _stored(path) == {}
        b.set_flag("k", True)
        assert _stored(path) == {"k": (True, None, "")}


def test_deleted_and_written_again_elsewhere_is_a_conflict(tmp_path: Path) -> None:
    """The same content as before but written again in between: still a change elsewhere."""
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as setup:
        setup.set_flag("k", True)
    a, b = _two_sessions(path)
    with a, b:
        a.set_flag("k", False)
        a.set_flag("k", True)
        with pytest.raises(ReviewConflict):
            b.set_note("k", "B")


def test_a_review_this_store_never_read_counts_as_absent(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as setup:
        setup.set_note("k", "stored")
    with ReviewStore(path, "fp") as store:
        with pytest.raises(ReviewConflict) as info:
            store.set_flag("k", True)
        assert _fields(info.value.current) == (False, None, "stored")
        store.set_flag("k", True)
        # A key nobody has written is absent for everyone: no conflict.
        store.set_flag("fresh", True)
    assert _stored(path) == {"k": (True, None, "stored"), "fresh": (True, None, "")}


@pytest.mark.parametrize("read", ["get", "all", "frame"])
def test_reading_marks_a_review_as_seen(tmp_path: Path, read: str) -> None:
    path = tmp_path / "r.sqlite"
    a, b = _two_sessions(path)
    with a, b:
        a.set_note("k", "A")
        if read == "get":
            b.get("k")
        else:
            getattr(b, read)()
        b.set_note("k", "B after reading A")
    assert _stored(path) == {"k": (False, None, "B after reading A")}


def test_reading_without_marking_keeps_the_check(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    a, b = _two_sessions(path)
    with a, b:
        a.set_note("k", "A")
        assert b.get("k", mark_seen=False) is not None
        assert b.all(mark_seen=False)
        assert b.frame(mark_seen=False).height == 1
        with pytest.raises(ReviewConflict):
            b.set_note("k", "B")


def test_all_forgets_reviews_deleted_elsewhere(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as setup:
        setup.set_flag("k", True)
    a, b = _two_sessions(path)
    with a, b:
        a.set_flag("k", False)
        assert b.all() == []
        b.set_note("k", "written after seeing it gone")
    assert _stored(path) == {"k": (False, None, "written after seeing it gone")}


_CHILD = """
import sys
from foldsift.tui.store import ReviewStore

with ReviewStore(sys.argv[1], "fp-child") as store:
    store.frame()
    store.set_note("k", "written by another process")
"""


def test_change_from_another_process_is_a_conflict(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        store.set_note("k", "mine")
        subprocess.run([sys.executable, "-c", _CHILD, str(path)], check=True, timeout=60)
        with pytest.raises(ReviewConflict) as info:
            store.set_note("k", "mine, edited")
        assert _fields(info.value.current) == (False, None, "written by another process")
        assert info.value.current is not None
        assert info.value.current.fingerprint == "fp-child"
    assert _stored(path) == {"k": (False, None, "written by another process")}


# -- the version-1 file --------------------------------------------------------------------

# The tables as version 1 of the review store created them.
_V1_REVIEWS = """
CREATE TABLE IF NOT EXISTS reviews (
    key TEXT PRIMARY KEY,
    flagged INTEGER NOT NULL DEFAULT 0,
    decision TEXT,
    note TEXT NOT NULL DEFAULT '',
    fingerprint TEXT NOT NULL,
    updated_at TEXT NOT NULL
)
"""
_V1_META = """
CREATE TABLE IF NOT EXISTS meta (
    name TEXT PRIMARY KEY,
    value TEXT NOT NULL
)
"""
_V1_ROWS = [
    ("g|o|a|b", 1, "doubt", "two lines\nÜnïcödé ±½", "fp-old", "2024-03-01T10:00:00+00:00"),
    ("g|o|a|c", 0, None, "note only", "fp-now", "2024-03-02T10:00:00+00:00"),
    ("g|o|b|c", 1, None, "", "fp-now", "2024-03-03T10:00:00+00:00"),
]


def _version_1_file(path: Path) -> None:
    conn = sqlite3.connect(path, isolation_level=None)
    try:
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute(_V1_REVIEWS)
        conn.execute(_V1_META)
        conn.execute("INSERT INTO meta (name, value) VALUES ('schema_version', '1')")
        conn.executemany("INSERT INTO reviews VALUES (?, ?, ?, ?, ?, ?)", _V1_ROWS)
    finally:
        conn.close()


def test_version_1_file_is_migrated_and_keeps_every_review(tmp_path: Path) -> None:
    path = tmp_path / "old.sqlite"
    _version_1_file(path)
    with ReviewStore(path, "fp-now") as store:
        assert not store.created
        reviews = store.all()
        assert [
            (r.key, int(r.flagged), r.decision, r.note, r.fingerprint, r.updated_at)
            for r in reviews
        ] == _V1_ROWS
        assert [r.version for r in reviews] == [1, 1, 1]
        assert [r.on_earlier_data for r in reviews] == [True, False, False]
        store.set_note("g|o|a|c", "changed after the migration")
        changed = store.get("g|o|a|c")
    assert changed is not None and changed.version == 2
    with sqlite3.connect(path) as conn:
        schema = conn.execute("SELECT value FROM meta WHERE name = 'schema_version'").fetchone()
        columns = [row[1] for row in conn.execute("PRAGMA table_info(reviews)")]
    assert schema == (str(SCHEMA_VERSION),)
    assert columns[-1] == "version"
    # Opening again changes nothing more.
    with ReviewStore(path, "fp-now") as store:
        assert len(store.all()) == 3


def test_version_1_file_read_only_is_read_without_migrating(tmp_path: Path) -> None:
    path = tmp_path / "old.sqlite"
    _version_1_file(path)
    before = path.read_bytes()
    with ReviewStore(path, "fp-now", read_only=True) as store:
        reviews = store.all()
    assert [r.note for r in reviews] == [row[3] for row in _V1_ROWS]
    assert {r.version for r in reviews} == {0}
    assert path.read_bytes() == before


def test_version_1_file_busy_at_opening(tmp_path: Path) -> None:
    path = tmp_path / "old.sqlite"
    _version_1_file(path)
    other = sqlite3.connect(path, isolation_level=None)
    try:
        other.execute("BEGIN IMMEDIATE")
        with pytest.raises(ReviewStoreBusy, match="busy"):
            ReviewStore(path, "fp")
    finally:
        other.execute("ROLLBACK")
        other.close()
    with ReviewStore(path, "fp") as store:
        assert len(store.all()) == 3


# -- carrying reviews over to new keys -----------------------------------------------------


def test_rename_keys_moves_reviews_whole(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp-old") as store:
        store.set_flag("a|b", True)
        store.set_note("a|b", "moved with it")
        store.set_decision("c|d", "keep")
        before = store.get("a|b")
    assert before is not None
    with ReviewStore(path, "fp-new") as store:
        store.frame()
        assert store.rename_keys({"a|b": "a%7Cb", "never-stored": "x", "c|d": "c|d"}) == 1
        after = store.get("a%7Cb")
        assert store.get("a|b") is None
        assert [r.key for r in store.all()] == ["a%7Cb", "c|d"]
        # The store knows the version it wrote: changing the moved review is no conflict.
        store.set_decision("a%7Cb", "doubt")
    assert after is not None
    assert _fields(after) == _fields(before)
    assert (after.fingerprint, after.updated_at) == (before.fingerprint, before.updated_at)
    assert after.on_earlier_data
    assert after.version > before.version


def test_rename_keys_skips_a_new_key_that_has_a_review(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        store.set_note("old", "old key's note")
        store.set_note("new", "already carried over")
        store.set_note("third", "wants the old key")
        assert store.rename_keys({"old": "new", "third": "old"}) == 0
    assert _stored(path) == {
        "old": (False, None, "old key's note"),
        "new": (False, None, "already carried over"),
        "third": (False, None, "wants the old key"),
    }


def test_rename_keys_swaps_chains_and_first_wins(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        for key in ("a", "b", "c", "d", "e"):
            store.set_note(key, key)
        # a<->b swap; c moves to the key d leaves; d and e both want the free key z, and the
        # first in the mapping gets it.
        moved = store.rename_keys({"a": "b", "b": "a", "c": "d", "d": "z", "e": "z"})
        assert moved == 4
        # The store knows what it moved, swapped keys included: no conflict with itself.
        for key in ("a", "b", "d", "z"):
            store.set_flag(key, False)
    assert _stored(path) == {
        "b": (False, None, "a"),
        "a": (False, None, "b"),
        "d": (False, None, "c"),
        "z": (False, None, "d"),
        "e": (False, None, "e"),
    }
    with ReviewStore(path, "fp") as store:
        store.frame()
        assert store.rename_keys({"a": "q", "b": "q"}) == 1
    assert _stored(path)["q"] == (False, None, "b")  # "a" held b's note after the swap
    assert "b" in _stored(path)


def test_rename_keys_is_one_transaction(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as store:
        store.set_note("a", "1")
        store.set_note("b", "2")
    with ReviewStore(path, "fp") as store, sqlite3.connect(path) as watcher:
        store.frame()
        calls: list[str] = []
        # SQLite's trace callback sees every statement; a rename is one BEGIN .. COMMIT.
        store._connection().set_trace_callback(calls.append)
        assert store.rename_keys({"a": "x", "b": "y"}) == 2
        store._connection().set_trace_callback(None)
        assert sum(call.startswith("BEGIN") for call in calls) == 1
        assert sum(call == "COMMIT" for call in calls) == 1
        keys = [row[0] for row in watcher.execute("SELECT key FROM reviews ORDER BY key")]
    assert keys == ["x", "y"]


def test_renamed_review_is_a_conflict_for_another_session(tmp_path: Path) -> None:
    path = tmp_path / "r.sqlite"
    with ReviewStore(path, "fp") as setup:
        setup.set_note("old", "note")
    a, b = _two_sessions(path)
    with a, b:
        assert a.rename_keys({"old": "new"}) == 1
        with pytest.raises(ReviewConflict) as gone:
            b.set_flag("old", True)
        assert gone.value.current is None
        with pytest.raises(ReviewConflict) as arrived:
            b.set_flag("new", True)
        assert _fields(arrived.value.current) == (False, None, "note")


def test_rename_keys_checks_its_keys(tmp_path: Path) -> None:
    with ReviewStore(tmp_path / "r.sqlite", "fp") as store:
        store.set_note("a", "n")
        with pytest.raises(ValueError, match="empty"):
            store.rename_keys({"a": ""})
        with pytest.raises(TypeError):
            store.rename_keys({"a": 3})  # type: ignore[dict-item]
        assert [r.key for r in store.all()] == ["a"]
