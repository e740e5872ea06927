"""Tests for foldsift.tui.export: joining reviews, row selection and atomic CSV export."""

from __future__ import annotations

import json
from pathlib import Path

import polars as pl
import pytest

from foldsift.tui import export as export_mod
from foldsift.tui.export import join_reviews, select_rows, settings_path, write_export
from foldsift.tui.store import ReviewStore

# Values chosen so any rounding on the way to text would show up on reading back.
FLOATS = [
    0.1 + 0.2,
    1 / 3,
    2 / 3,
    1e-300,
    5e-324,
    -2.5e-17,
    123456789.123456789,
    1.7976931348623157e308,
    3.141592653589793,
]


def _comparisons() -> pl.DataFrame:
    n = len(FLOATS)
    return pl.DataFrame(
        {
            "key": [f"k{i}" for i in range(n)],
            "ratio": FLOATS,
            "p": [min(1.0, abs(x) % 1) for x in FLOATS],
            "n": list(range(n)),
        }
    )


def _reviews(tmp_path: Path) -> pl.DataFrame:
    with ReviewStore(tmp_path / "r.sqlite", "fp-now") as store:
        store.set_flag("k1", True)
        store.set_decision("k1", "keep")
        store.set_note("k3", "look at the outliers, ±2 SD\nsecond line")
        store.set_flag("k5", True)
        store.set_flag("not-a-comparison", True)
        return store.frame()


def _leftovers(directory: Path) -> list[str]:
    return sorted(p.name for p in directory.iterdir() if p.name.endswith(".tmp"))


def test_join_fills_defaults_and_keeps_order(tmp_path: Path) -> None:
    comparisons = _comparisons().reverse()
    joined = join_reviews(comparisons, _reviews(tmp_path))
    assert joined.height == comparisons.height
    assert joined["key"].to_list() == comparisons["key"].to_list()
    by_key = {row["key"]: row for row in joined.iter_rows(named=True)}
    assert by_key["k1"]["flagged"] is True
    assert by_key["k1"]["decision"] == "keep"
    assert by_key["k3"]["note"].startswith("look at")
    assert by_key["k3"]["flagged"] is False
    plain = by_key["k0"]
    assert plain["flagged"] is False
    assert plain["note"] == ""
    assert plain["on_earlier_data"] is False
    assert plain["decision"] is None
    assert plain["review_fingerprint"] is None
    assert joined["flagged"].null_count() == 0
    assert joined["note"].null_count() == 0
    assert joined["on_earlier_data"].null_count() == 0
    assert joined.schema["flagged"] == pl.Boolean
    assert "not-a-comparison" not in joined["key"].to_list()


def test_join_with_empty_store(tmp_path: Path) -> None:
    with ReviewStore(tmp_path / "r.sqlite", "fp") as store:
        empty = store.frame()
    joined = join_reviews(_comparisons(), empty)
    assert joined["flagged"].to_list() == [False] * len(FLOATS)
    assert joined["note"].to_list() == [""] * len(FLOATS)
    assert joined["decision"].to_list() == [None] * len(FLOATS)
    assert select_rows(joined).height == 0


def test_join_rejects_clashing_columns(tmp_path: Path) -> None:
    comparisons = _comparisons().with_columns(pl.lit("x").alias("note"))
    with pytest.raises(ValueError, match="note"):
        join_reviews(comparisons, _reviews(tmp_path))


def test_join_requires_key(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="key"):
        join_reviews(_comparisons().drop("key"), _reviews(tmp_path))


def test_select_rows(tmp_path: Path) -> None:
    joined = join_reviews(_comparisons(), _reviews(tmp_path))
    assert select_rows(joined)["key"].to_list() == ["k1", "k5"]
    assert select_rows(joined, "flagged")["key"].to_list() == ["k1", "k5"]
    assert select_rows(joined, "all").equals(joined)
    with pytest.raises(ValueError, match="unknown row selection"):
        select_rows(joined, "filtered")
    with pytest.raises(ValueError, match="flagged"):
        select_rows(_comparisons(), "flagged")


def test_export_round_trip_exact_floats(tmp_path: Path) -> None:
    frame = join_reviews(_comparisons(), _reviews(tmp_path))
    out = tmp_path / "out" / "export.csv"
    out.parent.mkdir()
    settings = {"alpha": 0.05, "method": "holm", "source": Path("/data/x.csv"), "rows": "all"}
    result = write_export(frame, out, settings)
    assert result == out

    back = pl.read_csv(out)
    assert back.columns == frame.columns
    assert back.height == frame.height
    assert back.schema["ratio"] == pl.Float64
    # Exact equality on purpose: the CSV must carry every bit of each float.
    assert back["ratio"].to_list() == FLOATS
    assert back["p"].to_list() == frame["p"].to_list()
    assert back["key"].to_list() == frame["key"].to_list()
    notes = dict(zip(back["key"], back["note"].fill_null(""), strict=True))
    assert notes["k3"] == "look at the outliers, ±2 SD\nsecond line"

    meta = json.loads(settings_path(out).read_text(encoding="utf-8"))
    assert settings_path(out) == out.parent / "export.csv.settings.json"
    assert meta["settings"] == {
        "alpha": 0.05,
        "method": "holm",
        "source": "/data/x.csv",
        "rows": "all",
    }
    assert meta["rows"] == frame.height
    assert meta["columns"] == frame.columns
    assert meta["csv"] == "export.csv"
    assert meta["exported_at"].endswith("+00:00")
    assert _leftovers(out.parent) == []


def test_refuses_to_overwrite(tmp_path: Path) -> None:
    out = tmp_path / "export.csv"
    out.write_text("precious\n")
    with pytest.raises(FileExistsError, match="already exists") as info:
        write_export(_comparisons(), out, {"a": 1})
    assert str(out) in str(info.value)
    assert out.read_text() == "precious\n"
    assert not settings_path(out).exists()
    assert _leftovers(tmp_path) == []


def test_refuses_when_only_sidecar_exists(tmp_path: Path) -> None:
    out = tmp_path / "export.csv"
    settings_path(out).write_text("{}")
    with pytest.raises(FileExistsError, match="settings.json"):
        write_export(_comparisons(), out, {})
    assert not out.exists()


def test_overwrite_replaces_both_files(tmp_path: Path) -> None:
    out = tmp_path / "export.csv"
    write_export(_comparisons(), out, {"version": 1})
    smaller = _comparisons().head(2)
    write_export(smaller, out, {"version": 2}, overwrite=True)
    assert pl.read_csv(out).height == 2
    meta = json.loads(settings_path(out).read_text(encoding="utf-8"))
    assert meta["settings"] == {"version": 2}
    assert meta["rows"] == 2
    assert _leftovers(tmp_path) == []


def test_nested_column_rejected(tmp_path: Path) -> None:
    frame = _comparisons().with_columns(pl.Series("groups", [[1, 2]] * len(FLOATS)))
    out = tmp_path / "export.csv"
    with pytest.raises(ValueError, match="groups"):
        write_export(frame, out, {})
    struct = _comparisons().with_columns(pl.struct("n", "p").alias("pair"))
    with pytest.raises(ValueError, match="pair"):
        write_export(struct, out, {})
    assert not out.exists()
    assert list(tmp_path.iterdir()) == []


def test_unserialisable_settings_leave_nothing(tmp_path: Path) -> None:
    out = tmp_path / "export.csv"
    with pytest.raises(TypeError, match="JSON"):
        write_export(_comparisons(), out, {"bad": object()})
    with pytest.raises(ValueError):
        write_export(_comparisons(), out, {"bad": float("nan")})
    assert list(tmp_path.iterdir()) == []


def test_failed_write_cleans_temporary_files(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    out = tmp_path / "export.csv"
    out.write_text("old\n")

    def broken_replace(src: str, dst: str) -> None:
        raise OSError("disk went away")

    monkeypatch.setattr(export_mod.os, "replace", broken_replace)
    with pytest.raises(OSError, match="disk went away"):
        write_export(_comparisons(), out, {}, overwrite=True)
    assert out.read_text() == "old\n"
    assert _leftovers(tmp_path) == []


def test_empty_frame_writes_header_only(tmp_path: Path) -> None:
    out = tmp_path / "none.csv"
    joined = join_reviews(_comparisons(), _reviews(tmp_path))
    write_export(joined.head(0), out, {})
    assert out.read_text().strip().split(",") == joined.columns
    assert json.loads(settings_path(out).read_text())["rows"] == 0


def test_directory_target_rejected(tmp_path: Path) -> None:
    target = tmp_path / "folder.csv"
    target.mkdir()
    with pytest.raises(IsADirectoryError):
        write_export(_comparisons(), target, {}, overwrite=True)
