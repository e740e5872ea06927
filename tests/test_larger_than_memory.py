"""A scan of Parquet part files whose numbers take several times the memory the scan may
use, run in a child under a hard memory cap, finishes with the right comparisons.

The cap is a Linux memory control group (cgroup v1 ``memory.limit_in_bytes``, with swap
counted through ``memory.memsw.limit_in_bytes`` where the kernel has it): the kernel stops the
child if it goes over. Where this machine does not let the test make a control group (not
root, no memory controller), the test is skipped and says why; the streamed scan's numbers
are then still checked against the in-memory scan in ``test_streamed_scan_equals_memory``.

References: each group's count, mean and SD of the logs and the Welch test per pair of
levels are computed here with numpy and ``scipy.stats.ttest_ind`` (independent of
foldsift), and the medians with numpy, regenerating each column from its seed.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import polars as pl
import pytest
from scipy import stats as sps

from foldsift.stats.load import load_table
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.stats.stream import scan_parquet

LEVELS = ("east", "north", "south", "west")
PARTS, ROWS_PER_PART, OUTCOMES = 3, 400_000, 100
CAP_MB = 300
CGROUP_ROOT = Path("/sys/fs/cgroup/memory")


def _column(j: int, site: np.ndarray) -> np.ndarray:
    rng = np.random.default_rng(1000 + j)
    return np.exp(rng.normal(1.0 + 0.1 * site + 0.01 * j, 0.8, site.size))


def _sites() -> np.ndarray:
    return np.random.default_rng(7).integers(0, len(LEVELS), PARTS * ROWS_PER_PART)


def _write_parts(folder: Path) -> None:
    """PARTS files of ROWS_PER_PART rows: a site column and OUTCOMES lognormal columns,
    each column regenerated from its own seed (so the test can recompute any one)."""
    site = _sites()
    names = np.array(LEVELS)[site]
    for part in range(PARTS):
        rows = slice(part * ROWS_PER_PART, (part + 1) * ROWS_PER_PART)
        columns = {"site": names[rows]}
        for j in range(OUTCOMES):
            columns[f"y{j:02d}"] = _column(j, site)[rows]
        pl.DataFrame(columns).write_parquet(folder / f"part-{part}.parquet")


def _reference(j: int, site: np.ndarray) -> dict[tuple[str, str], tuple[float, float, float]]:
    """(ratio, ci_low, ci_high) and the p of Welch's t on the logs per pair of levels."""
    logs = np.log(_column(j, site))
    out = {}
    for i, a in enumerate(LEVELS):
        for b in LEVELS[i + 1 :]:
            x, y = logs[site == i], logs[site == LEVELS.index(b)]
            test = sps.ttest_ind(y, x, equal_var=False)
            low, high = test.confidence_interval()
            out[(a, b)] = (
                float(np.exp(y.mean() - x.mean())),
                float(np.exp(low)),
                float(np.exp(high)),
                float(test.pvalue),
            )
    return out


def _check(comparisons: pl.DataFrame) -> None:
    site = _sites()
    assert comparisons.height == OUTCOMES * 6
    for j in (0, 17, OUTCOMES - 1):  # three outcomes, recomputed from their seeds
        expected = _reference(j, site)
        rows = comparisons.filter(pl.col("outcome") == f"y{j:02d}")
        for row in rows.iter_rows(named=True):
            ratio, low, high, p = expected[(row["level_a"], row["level_b"])]
            assert row["ratio"] == pytest.approx(ratio, rel=1e-10)
            assert row["ci_low"] == pytest.approx(low, rel=1e-10)
            assert row["ci_high"] == pytest.approx(high, rel=1e-10)
            assert row["p_value"] == pytest.approx(p, rel=1e-8, abs=1e-300)
            values = _column(j, site)
            assert row["median_a"] == pytest.approx(
                float(np.median(values[site == LEVELS.index(row["level_a"])])), rel=1e-12
            )


@pytest.fixture(scope="module")
def parts(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("parts")
    _write_parts(folder)
    return folder


def _make_cgroup(name: str, limit: int) -> Path | None:
    if os.geteuid() != 0 or not (CGROUP_ROOT / "memory.limit_in_bytes").exists():
        return None
    group = CGROUP_ROOT / name
    try:
        group.mkdir(exist_ok=True)
        (group / "memory.limit_in_bytes").write_text(str(limit))
        swap = group / "memory.memsw.limit_in_bytes"
        if swap.exists():
            swap.write_text(str(limit))
    except OSError:
        return None
    return group


def test_scan_of_parts_larger_than_a_hard_memory_cap(parts: Path, tmp_path: Path) -> None:
    data_mb = PARTS * ROWS_PER_PART * OUTCOMES * 8 / 2**20
    assert data_mb > 2.5 * CAP_MB, "the numbers must take several times the cap"
    group = _make_cgroup(f"foldsift-test-{os.getpid()}", CAP_MB << 20)
    if group is None:
        pytest.skip("cannot make a memory control group here (needs root and cgroup v1)")
    out = tmp_path / "scan.csv"
    try:
        child = subprocess.run(
            [sys.executable, "-m", "foldsift.tui.cli", "scan", str(parts), "--out", str(out)],
            preexec_fn=lambda: (group / "cgroup.procs").write_text(str(os.getpid())),
            capture_output=True,
            text=True,
            timeout=600,
        )
        limit = int((group / "memory.limit_in_bytes").read_text())
    finally:
        group.rmdir()
    # Killed by the kernel over the cap, the child would end with -9 (SIGKILL).
    assert limit == CAP_MB << 20
    assert child.returncode == 0, (child.returncode, child.stderr[-2000:])
    assert "outcome(s) at a time" in child.stderr
    _check(pl.read_csv(out, infer_schema_length=None))


def test_streamed_scan_equals_memory(tmp_path: Path) -> None:
    """On a table small enough for both: the streamed scan, one outcome at a time, gives
    exactly the in-memory scan's comparisons (the same summaries, the same adjustment)."""
    rng = np.random.default_rng(3)
    site = rng.integers(0, 3, 3000)
    frame = pl.DataFrame(
        {"site": np.array(["a", "b", "c"])[site]}
        | {f"z{j}": np.exp(rng.normal(site * 0.1, 1.0)) for j in range(5)}
    )
    path = tmp_path / "t.parquet"
    frame.write_parquet(path)
    streamed = scan_parquet(path, ScanSettings(), budget=1).comparisons.sort("key")
    memory = run_scan(load_table(path)).comparisons.sort("key")
    assert streamed.select("key").equals(memory.select("key"))
    for name in ("ratio", "ci_low", "ci_high", "p_value", "q_bh", "median_ratio", "shapiro_p_a"):
        assert streamed[name].to_list() == memory[name].to_list(), name
