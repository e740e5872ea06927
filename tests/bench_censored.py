"""Benchmark: scans of tables with below-detection entries, censored ML against substitution.

Run as a script (it is not collected by pytest):

    .venv/bin/python tests/bench_censored.py            # the demo and 200,000 rows x 100 outcomes
    .venv/bin/python tests/bench_censored.py --quick    # the demo and 20,000 rows x 20 outcomes

The synthetic table is built with numpy from a fixed seed: one grouping column of 6 levels
and lognormal outcomes written as text, about 30% of each outcome's entries below one of
three detection limits (``<0.5``-style cells, the limits at the 20th, 30th and 40th
percentiles of the whole column, one chosen per row). Each policy is timed in-process as
``run_scan`` on the loaded table (best of ``--repeats``); reading and parsing the text is
timed once, as it is the same for every policy. The censored-ML stage alone (the per-group
fits, Kaplan–Meier medians and DL/2 figures of ``censored_groups``) is timed as well, and so
is the whole ``foldsift scan`` command on the table written as a CSV (a child process, wall
time and peak memory by GNU time), as a laboratory export reaches it.
"""

from __future__ import annotations

import argparse
import gc
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import polars as pl

from foldsift.stats.censored_groups import GroupEntries
from foldsift.stats.load import load_table
from foldsift.stats.policy import ValuePolicy, apply_policy
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.stats.values import group_specs

DEMO = Path(__file__).resolve().parents[1] / "demo" / "marrowby_soils.csv"
POLICIES = ("mle", "half-dl", "exclude")


def make_table(rows: int, outcomes: int, levels: int, seed: int, share: float) -> pl.DataFrame:
    rng = np.random.default_rng(seed)
    site = rng.integers(0, levels, rows)
    columns: dict[str, object] = {"site": [f"S{i + 1}" for i in site]}
    for j in range(outcomes):
        logs = rng.normal(2.0 + 0.05 * site, 1.0)
        values = np.exp(logs)
        limits = np.quantile(values, [share * 2 / 3, share, share * 4 / 3])
        limit = limits[rng.integers(0, 3, rows)]
        below = values < limit
        text = pl.Series(np.round(values, 4)).cast(pl.Utf8)
        cells = pl.select(
            pl.when(pl.Series(below))
            .then(pl.lit("<") + pl.Series(limit).round(4).cast(pl.Utf8))
            .otherwise(text)
        ).to_series()
        columns[f"y{j:03d}"] = cells
    return pl.DataFrame(columns)


def best(function, repeats: int) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeats):
        gc.collect()
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def run(label: str, table, repeats: int) -> None:  # type: ignore[no-untyped-def]
    print(f"\n{label}: {table.frame.height:,} rows, {len(table.outcomes)} outcomes")
    base = None
    for policy in POLICIES:
        settings = ScanSettings(policy=ValuePolicy(censored=policy))
        seconds = best(lambda settings=settings: run_scan(table, settings), repeats)
        base = base or seconds
        print(f"  scan --censored {policy:<8} {seconds:8.3f} s   ({seconds / base:4.2f}x of mle)")
    policy = ValuePolicy()
    specs = group_specs(table.groupings, None)
    used = apply_policy(table.frame, table.outcomes, policy, table.names)
    entries = GroupEntries(used, specs, table.outcomes, table.names, policy)
    stage = best(
        lambda: GroupEntries(used, specs, table.outcomes, table.names, policy).figures(), repeats
    )
    groups = entries.figures()
    fitted = groups.filter(pl.col("n_left") > 0).height
    print(
        f"  censored stage (fits, K-M medians, DL/2 figures): {stage:.3f} s for {fitted:,} censored groups"
    )


def command(frame: pl.DataFrame) -> str:
    """The whole scan command on the table written as a CSV (compiled modules kept, as an
    installed program has them)."""
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    with tempfile.TemporaryDirectory() as folder:
        data = Path(folder) / "lab.csv"
        frame.write_csv(data)
        report = Path(folder) / "time.txt"
        scan = [sys.executable, "-m", "foldsift.tui.cli", "scan", str(data), "--quiet"]
        subprocess.run(
            ["/usr/bin/time", "-o", str(report), "-f", "%e %M", *scan, "--out", f"{data}.out"],
            check=True,
            env=env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        seconds, kilobytes = report.read_text().split()[-2:]
        size = data.stat().st_size / 1e6
    return (
        f"foldsift scan of it as a {size:.0f} MB CSV: {float(seconds):.2f} s, "
        f"peak {float(kilobytes) / 1024:.0f} MB"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    start = time.perf_counter()
    demo = load_table(DEMO)
    print(f"demo load: {time.perf_counter() - start:.3f} s")
    run("demo", demo, args.repeats)
    rows, outcomes = (20_000, 20) if args.quick else (200_000, 100)
    start = time.perf_counter()
    frame = make_table(rows, outcomes, 6, 20261202, 0.3)
    built = time.perf_counter() - start
    start = time.perf_counter()
    table = load_table(
        frame=frame, groupings=["site"], outcomes=[c for c in frame.columns if c != "site"]
    )
    print(
        f"\nsynthetic table built in {built:.1f} s; read and parsed in {time.perf_counter() - start:.2f} s"
    )
    print(command(frame))
    share = sum(int(table.frame[table.names.censored(o)].sum()) for o in table.outcomes) / (
        rows * outcomes
    )
    print(f"share below detection: {share:.1%}")
    run("synthetic", table, args.repeats)


if __name__ == "__main__":
    main()
