"""Benchmark: the whole `foldsift scan` command against the floor, at several table sizes.

Run as a script (it is not collected by pytest):

    .venv/bin/python tests/bench_scale.py                  # 100k x 50 and 200k x 100
    .venv/bin/python tests/bench_scale.py --sizes all      # also 500k x 100 and 1M x 200
    .venv/bin/python tests/bench_scale.py --loop           # also the plain pandas/scipy loop
    .venv/bin/python tests/bench_scale.py --start-up       # only `--help` and the demo scan

Each table is written once as Parquet (one 6-level string grouping, lognormal outcomes,
1% missing) under a temporary folder. Per size, side by side, medians of ``--repeats`` runs:

- the whole command: ``foldsift scan FILE --out FILE.csv`` in a child process, wall time
  and its peak resident memory (GNU ``/usr/bin/time``);
- the floor: a bare polars group-by in a child process reading the same file: count, mean
  and variance of the logs and the median per group and outcome — the least any tool that
  reads the file and computes the summaries the scan needs must do;
- the in-process stages of the scan (read, fingerprint, load, summaries, normality, fits,
  comparisons);
- optionally (``--duckdb``) the same per-group summary as one SQL query on DuckDB
  (``foldsift summary-sql``), the engine that spills to disk;
- optionally the per-comparison loop a user writes (pandas boolean masks per pair of levels
  and ``scipy.stats.ttest_ind(equal_var=False)`` on the logs), at the two smaller sizes.

Figures go into DEVELOPERS.md with this command. The numeric data's in-memory size is
rows × outcomes × 8 bytes.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import polars as pl

SIZES = {
    "100k x 50": (100_000, 50),
    "200k x 100": (200_000, 100),
    "500k x 100": (500_000, 100),
    "1M x 200": (1_000_000, 200),
}
LEVELS = 6
FOLDSIFT = [sys.executable, "-m", "foldsift.tui.cli"]

FLOOR = """
import sys, polars as pl
path = sys.argv[1]
frame = pl.read_parquet(path)
outcomes = [c for c in frame.columns if c != "site"]
aggregations = []
for name in outcomes:
    logs = pl.col(name).filter(pl.col(name) > 0).log()
    aggregations += [
        logs.count().alias(name + "n"), logs.mean().alias(name + "m"),
        logs.var().alias(name + "v"), pl.col(name).median().alias(name + "q"),
    ]
frame.group_by("site").agg(aggregations)
"""


DUCKDB = """
import sys, duckdb
from foldsift.stats.summary_sql import source_for, summary_query
path, outcomes = sys.argv[1], int(sys.argv[2])
names = [f"y{j:03d}" for j in range(outcomes)]
duckdb.sql(summary_query(source_for(path, "duckdb"), ["site"], names, "duckdb")).fetchall()
"""


def make_table(rows: int, outcomes: int, path: Path, seed: int = 20261202) -> None:
    rng = np.random.default_rng(seed)
    site = rng.integers(0, LEVELS, rows)
    columns = {"site": pl.Series([f"S{i + 1}" for i in range(LEVELS)])[site]}
    for j in range(outcomes):
        values = np.exp(rng.normal(2.0 + 0.05 * site, 1.0))
        values[rng.random(rows) < 0.01] = np.nan
        columns[f"y{j:03d}"] = pl.Series(values).fill_nan(None)
    pl.DataFrame(columns).write_parquet(path)


#: The children run as an installed program does: Python may keep the compiled form of the
#: modules it imports (an install compiles them; ``PYTHONDONTWRITEBYTECODE``, set on some
#: development machines, would make every start compile foldsift's ~40 modules again, about
#: 0.1 s). ``warm_up`` runs one scan first so the compiled files exist.
CHILD_ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def warm_up() -> None:
    demo = Path(__file__).resolve().parents[1] / "demo" / "marrowby_soils.csv"
    out = Path(tempfile.gettempdir()) / "foldsift-bench-warm-up.csv"
    subprocess.run(
        [*FOLDSIFT, "scan", str(demo), "--overwrite", "--quiet", "--out", str(out)],
        check=True,
        env=CHILD_ENV,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )


def child(command: list[str]) -> tuple[float, float]:
    """Wall seconds and the peak resident memory (MB) of one child process, measured by
    GNU time (``/usr/bin/time -f "%e %M"``: seconds and maximum resident set in KB)."""
    with tempfile.NamedTemporaryFile("r", suffix=".time") as report:
        subprocess.run(
            ["/usr/bin/time", "-o", report.name, "-f", "%e %M", *command],
            check=True,
            env=CHILD_ENV,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        seconds, kilobytes = report.read().split()[-2:]
    return float(seconds), float(kilobytes) / 1024


def medians(command: list[str], repeats: int) -> tuple[float, float]:
    runs = [child(command) for _ in range(repeats)]
    return statistics.median(r[0] for r in runs), max(r[1] for r in runs)


def stages(path: Path) -> dict[str, float]:
    """In-process stage times of one scan."""
    from foldsift.stats import diagnostics
    from foldsift.stats.censored_groups import GroupEntries, merge_censored
    from foldsift.stats.load import load_table
    from foldsift.stats.policy import ValuePolicy, apply_policy
    from foldsift.stats.scan import ScanSettings, compare_summaries, complete_summaries
    from foldsift.stats.summaries import group_summaries
    from foldsift.stats.values import GroupValues, group_specs

    out: dict[str, float] = {}
    start = time.perf_counter()
    table = load_table(path)
    out["read + load"] = time.perf_counter() - start
    settings, policy = ScanSettings(), ValuePolicy()
    specs = group_specs(table.groupings, None)
    start = time.perf_counter()
    used = apply_policy(table.frame, table.outcomes, policy, table.names)
    values = GroupValues(used, specs, table.outcomes, table.names)
    summaries = group_summaries(used, specs, table.outcomes, table.names)
    out["summaries"] = time.perf_counter() - start
    start = time.perf_counter()
    normality = diagnostics.group_normality(values, summaries)
    out["Shapiro-Wilk per group"] = time.perf_counter() - start
    start = time.perf_counter()
    entries = GroupEntries(used, specs, table.outcomes, table.names, policy)
    summaries = merge_censored(
        summaries.join(normality, on=list(diagnostics.GROUP_KEYS)),
        entries.figures(),
        policy,
    )
    out["censored figures"] = time.perf_counter() - start
    start = time.perf_counter()
    compare_summaries(complete_summaries(summaries), settings, table.outcomes)
    out["comparisons"] = time.perf_counter() - start
    return out


def loop(path: Path) -> float:
    """The plain per-comparison loop a user writes with pandas and scipy."""
    import pandas as pd
    from scipy import stats

    start = time.perf_counter()
    read = pl.read_parquet(path)
    frame = pd.DataFrame({name: read[name].to_numpy() for name in read.columns})
    levels = sorted(frame["site"].unique())
    for name in [c for c in frame.columns if c != "site"]:
        for i, a in enumerate(levels):
            for b in levels[i + 1 :]:
                x = frame.loc[(frame["site"] == a) & (frame[name] > 0), name]
                y = frame.loc[(frame["site"] == b) & (frame[name] > 0), name]
                stats.ttest_ind(np.log(y), np.log(x), equal_var=False)
    return time.perf_counter() - start


def start_up(repeats: int) -> None:
    demo = Path(__file__).resolve().parents[1] / "demo" / "marrowby_soils.csv"
    help_s, _ = medians([*FOLDSIFT, "--help"], repeats)
    out = Path(tempfile.gettempdir()) / "foldsift-bench-demo.csv"
    demo_s, demo_mb = medians(
        [*FOLDSIFT, "scan", str(demo), "--overwrite", "--out", str(out)], repeats
    )
    print(f"foldsift --help: {help_s:.2f} s (target < 0.3 s)")
    print(f"foldsift scan of the demo: {demo_s:.2f} s, peak {demo_mb:.0f} MB (target < 1 s)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", choices=("small", "all"), default="small")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--loop", action="store_true")
    parser.add_argument("--start-up", action="store_true")
    parser.add_argument(
        "--duckdb", action="store_true", help="also time the summary query on DuckDB"
    )
    args = parser.parse_args()
    print(f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    warm_up()
    start_up(args.repeats)
    if args.start_up:
        return
    chosen = list(SIZES) if args.sizes == "all" else list(SIZES)[:2]
    with tempfile.TemporaryDirectory() as folder:
        for label in chosen:
            rows, outcomes = SIZES[label]
            path = Path(folder) / f"t{rows}x{outcomes}.parquet"
            make_table(rows, outcomes, path)
            data_mb = rows * outcomes * 8 / 1e6
            command_s, command_mb = medians(
                [*FOLDSIFT, "scan", str(path), "--overwrite", "--out", str(path) + ".csv"],
                args.repeats,
            )
            floor_s, floor_mb = medians([sys.executable, "-c", FLOOR, str(path)], args.repeats)
            engine = ""
            if args.duckdb:
                duck = [sys.executable, "-c", DUCKDB, str(path), str(outcomes)]
                duck_s, duck_mb = medians(duck, args.repeats)
                engine = f" | DuckDB summary query {duck_s:6.2f} s, peak {duck_mb:6.0f} MB"
            print(f"\n{label}: numeric data {data_mb:.0f} MB")
            print(
                f"  foldsift scan {command_s:6.2f} s, peak {command_mb:6.0f} MB "
                f"({command_mb / data_mb:.1f}x the data) | floor {floor_s:6.2f} s, peak "
                f"{floor_mb:6.0f} MB | command / floor {command_s / floor_s:.2f}x{engine}"
            )
            for stage, seconds in stages(path).items():
                print(f"    {stage:<24} {seconds:6.2f} s")
            if args.loop and label in list(SIZES)[:2]:
                print(f"  plain pandas + scipy loop {loop(path):6.1f} s")


if __name__ == "__main__":
    main()
