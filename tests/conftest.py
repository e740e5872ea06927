"""Fixtures shared by the app tests (used by name; the sandbox is opted into per module)."""

from __future__ import annotations

from pathlib import Path

import pytest

from foldsift.demo.generate import demo_path
from foldsift.stats.load import load_table
from foldsift.stats.scan import ScanResult, ScanSettings, run_scan


@pytest.fixture
def sandbox(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg-data"))
    monkeypatch.chdir(tmp_path)
    return tmp_path


@pytest.fixture(scope="module")
def demo_scan() -> ScanResult:
    return run_scan(load_table(demo_path()), ScanSettings())
