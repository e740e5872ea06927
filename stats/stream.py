"""Scans of Parquet data larger than the memory the scan may use: a file, a folder of part
files or a glob, read a batch of outcome columns at a time.

Every per-group figure of a scan depends on one outcome's column and the grouping columns
only, so the table never needs to be in memory at once: for each batch of outcomes the
grouping columns and that batch are read (Parquet reads columns on their own), summarised
exactly as an in-memory scan summarises them (``scan.summarise``: counts, log moments,
exact medians, Shapiro–Wilk, censored fits), and let go; the summaries of all batches are
then compared together (``scan.compare_summaries``), so the multiplicity adjustment covers
the whole scan. The numbers are those of an in-memory scan of the same data.

The batch size follows the memory budget (``memory_budget``: half of what the machine, or
the memory control group the process runs in, has free): about ``WORKING_COPIES`` copies of
a column are alive while it is summarised. Column roles come from the first
``ROLE_SAMPLE_ROWS`` rows (name them with --group and --outcome to decide them yourself).
The fingerprint is the SHA-256 of the files' bytes in path order, read in chunks. The charts
and cross-checks of the review need each group's values in memory and are not offered for
such a scan (as for a summary table).
"""

from __future__ import annotations

import glob
import hashlib
import os
from collections.abc import Callable, Sequence
from pathlib import Path

import polars as pl

from .entries import missing_of, text_of
from .errors import InputError
from .formatting import unit_from_name
from .load import DerivedNames, Table, load_table
from .scan import (
    DataSource,
    ScanResult,
    ScanSettings,
    check_comparison_count,
    compare_summaries,
    complete_summaries,
    level_sets,
    reference_notes,
    summarise,
)
from .values import group_specs

#: Copies of one column alive while it is summarised (read, typed, used, logs, sorting).
WORKING_COPIES = 6
#: Rows read to decide the column roles.
ROLE_SAMPLE_ROWS = 20_000
_CHUNK = 1 << 20


def parquet_files(data: Path | str) -> list[Path]:
    """The Parquet files a path names: the file, every ``*.parquet`` below a folder, or the
    files a glob matches (sorted); an InputError when there are none."""
    text = str(data)
    path = Path(text)
    if path.is_dir():
        files = sorted(path.rglob("*.parquet"))
    elif any(char in text for char in "*?["):
        files = sorted(Path(name) for name in glob.glob(text, recursive=True))
    else:
        files = [path] if path.is_file() else []
    files = [f for f in files if f.is_file()]
    if not files:
        raise InputError(f"{text}: no Parquet files found")
    return files


def is_parquet_source(data: Path | str) -> bool:
    """A folder, a glob, or a file ending in .parquet/.pq."""
    text = str(data)
    return (
        Path(text).is_dir()
        or any(char in text for char in "*?[")
        or Path(text).suffix.lower() in (".parquet", ".pq")
    )


def _cgroup_free() -> int | None:
    """Bytes the memory control group of this process may still use (v2 or v1), if any."""
    try:
        lines = Path("/proc/self/cgroup").read_text().splitlines()
    except OSError:
        return None
    for line in lines:
        _, controllers, where = line.split(":", 2)
        if controllers == "":  # cgroup v2
            base = Path("/sys/fs/cgroup") / where.lstrip("/")
            limit_file, usage_file = base / "memory.max", base / "memory.current"
        elif "memory" in controllers.split(","):
            base = Path("/sys/fs/cgroup/memory") / where.lstrip("/")
            limit_file, usage_file = base / "memory.limit_in_bytes", base / "memory.usage_in_bytes"
        else:
            continue
        try:
            limit = limit_file.read_text().strip()
            usage = int(usage_file.read_text().strip())
        except (OSError, ValueError):
            continue
        if limit.isdigit() and int(limit) < 1 << 60:
            return max(int(limit) - usage, 0)
    return None


def memory_budget() -> int:
    """Half the memory this process may still use: the machine's available memory, or less
    when a memory control group limits the process."""
    available = None
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                available = int(line.split()[1]) * 1024
    except OSError:
        pass
    candidates = [v for v in (available, _cgroup_free()) if v is not None]
    return min(candidates) // 2 if candidates else 1 << 30


def estimated_bytes(files: Sequence[Path]) -> tuple[int, int, int]:
    """(rows, columns, bytes) of the data in memory as 8-byte numbers (from the files'
    metadata: nothing is read but the footers)."""
    lazy = pl.scan_parquet([str(f) for f in files])
    columns = len(lazy.collect_schema())
    rows = int(lazy.select(pl.len()).collect().item())
    return rows, columns, rows * columns * 8


def fingerprint(files: Sequence[Path]) -> str:
    """SHA-256 of the files' bytes in path order, read in chunks."""
    digest = hashlib.sha256()
    for path in files:
        with path.open("rb") as handle:
            while chunk := handle.read(_CHUNK):
                digest.update(chunk)
    return digest.hexdigest()


def batch_size(rows: int, groupings: int, outcomes: int, budget: int) -> int:
    """How many outcome columns are summarised together within ``budget`` bytes."""
    per_column = max(rows, 1) * 8 * WORKING_COPIES
    room = budget - max(rows, 1) * 16 * max(groupings, 1)
    return max(1, min(outcomes, room // per_column))


Say = Callable[[str], None]


def roles(
    files: Sequence[Path], groupings: Sequence[str] | None, outcomes: Sequence[str] | None
) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The grouping and outcome columns, decided on the first rows as a scan decides them."""
    lazy = pl.scan_parquet([str(f) for f in files])
    # Column by column: a Parquet reader decodes whole row groups, so one read of every
    # column's first rows could hold a large part of the table at once.
    sample = pl.DataFrame(
        [
            lazy.select(name).head(ROLE_SAMPLE_ROWS).collect().to_series()
            for name in lazy.collect_schema().names()
        ]
    )
    table = load_table(frame=sample, groupings=groupings, outcomes=outcomes)
    return table.groupings, table.outcomes


def read_batch(
    files: Sequence[Path], groupings: Sequence[str], outcomes: Sequence[str]
) -> pl.DataFrame:
    """The grouping columns and these outcome columns of every file."""
    lazy = pl.scan_parquet([str(f) for f in files]).select(*groupings, *outcomes)
    return lazy.collect(engine="streaming")


def environment_budget() -> int:
    """``FOLDSIFT_MEMORY_MB`` when set (for tests and shared servers), else
    ``memory_budget()``."""
    text = os.environ.get("FOLDSIFT_MEMORY_MB", "")
    return int(text) * (1 << 20) if text.isdigit() else memory_budget()


def scan_parquet(
    data: Path | str,
    settings: ScanSettings,
    groupings: Sequence[str] | None = None,
    outcomes: Sequence[str] | None = None,
    say: Say | None = None,
    budget: int | None = None,
) -> ScanResult:
    """Every comparison of Parquet data, a batch of outcomes at a time within ``budget``
    bytes (default ``environment_budget()``). The same numbers as an in-memory scan."""
    tell = say or (lambda stage: None)
    files = parquet_files(data)
    try:
        return _scan_files(data, files, settings, groupings, outcomes, tell, budget)
    except pl.exceptions.PolarsError as error:
        raise InputError(
            f"{data}: cannot be read as Parquet ({type(error).__name__}); check that every "
            "part file is complete"
        ) from None


def _scan_files(
    data: Path | str,
    files: Sequence[Path],
    settings: ScanSettings,
    groupings: Sequence[str] | None,
    outcomes: Sequence[str] | None,
    tell: Say,
    budget: int | None,
) -> ScanResult:
    """``scan_parquet`` once the files are found."""
    if settings.pair_by is not None:
        raise InputError(f"{data}: --pair-by needs the data in memory; it cannot be streamed")
    chosen_groups, chosen_outcomes = roles(files, groupings, outcomes)
    rows, _, _ = estimated_bytes(files)
    size = batch_size(
        rows, len(chosen_groups), len(chosen_outcomes), budget or environment_budget()
    )
    specs = group_specs(chosen_groups, settings.within)
    # The grouping columns once, as text, missing markers as no level (as the reader does).
    levels = read_batch(files, chosen_groups, []).select(
        pl.when(~missing_of(text_of(name))).then(text_of(name)).alias(name)
        for name in chosen_groups
    )
    sets = level_sets(levels, specs)
    check_comparison_count(sets, len(chosen_outcomes), settings, str(data))
    parts: list[pl.DataFrame] = []
    units: dict[str, str] = {}
    for start in range(0, len(chosen_outcomes), size):
        batch = list(chosen_outcomes[start : start + size])
        tell(
            f"summarising outcomes {start + 1}-{start + len(batch)} of "
            f"{len(chosen_outcomes)} ({rows:,} rows, {size} at a time)"
        )
        table = _batch_table(files, levels, chosen_groups, batch)
        units.update(table.units)
        parts.append(summarise(table, specs, settings.policy).summaries)
        del table
    tell(f"comparing the levels of {sum(p.height for p in parts):,} groups")
    summaries = pl.concat(parts, how="diagonal_relaxed")
    comparisons = compare_summaries(
        complete_summaries(summaries), settings, tuple(chosen_outcomes), units
    )
    source = DataSource(
        path=Path(str(data)),
        fingerprint=fingerprint(files),
        kind="raw",
        groupings=tuple(chosen_groups),
        outcomes=tuple(chosen_outcomes),
        notes=(f"read {len(files)} Parquet file(s) {size} outcome(s) at a time",)
        + reference_notes(summaries, settings),
    )
    return ScanResult(comparisons, summaries, settings, source, values=None)


def _batch_table(
    files: Sequence[Path], levels: pl.DataFrame, groupings: Sequence[str], batch: list[str]
) -> Table:
    """A table of the grouping columns (read once, as text) and these outcome columns. Numeric
    columns are used as they are (non-finite numbers missing, nothing censored): no text to
    read; columns stored as text go through the full reader."""
    read = pl.scan_parquet([str(f) for f in files]).select(batch).collect(engine="streaming")
    if not all(dtype.is_numeric() for dtype in read.dtypes):
        return load_table(frame=levels.hstack(read), groupings=groupings, outcomes=batch)
    names = DerivedNames.beside([*groupings, *batch])
    columns: list[pl.Expr] = []
    for name in batch:
        value = pl.col(name).cast(pl.Float64)
        columns += [
            pl.when(value.is_finite()).then(value).alias(name),
            pl.repeat(False, pl.len()).alias(names.censored(name)),
        ]
    typed = levels.hstack(read.select(columns))
    return Table(
        frame=typed,
        groupings=tuple(groupings),
        outcomes=tuple(batch),
        path=None,
        fingerprint="",
        names=names,
        units={name: unit for name in batch if (unit := unit_from_name(name))},
    )
