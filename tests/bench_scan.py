"""Benchmark: foldsift's scan against the plain per-comparison loop, on one synthetic table.

Run as a script (it is not collected by pytest):

    /work/venv/bin/python tests/bench_scan.py            # 200,000 rows x 100 outcomes x 6 levels
    /work/venv/bin/python tests/bench_scan.py --quick    # small smoke run
    /work/venv/bin/python tests/bench_scan.py --robust   # also time robust_all on a subset

The table is built with numpy from a fixed seed: one string grouping column and positive
lognormal outcomes (a small share of entries missing, so the "drop missing" step of both
sides is exercised). foldsift is timed in-process as ``load_table(frame=...)`` followed by
``run_scan(...)``, best of ``--repeats`` runs. The loop is what a user would write with
pandas and scipy: boolean masks per pair of levels, logs, ``scipy.stats.ttest_ind`` with
``equal_var=False`` and the Welch CI by hand; it is run once. The two result sets are then
matched comparison by comparison and their largest relative differences printed, so the
timing compares like with like.
"""

from __future__ import annotations

import argparse
import cProfile
import dataclasses
import gc
import io
import math
import os
import pstats
import sys
import time

import numpy as np
import pandas as pd
import polars as pl
from scipy import stats as sps

from foldsift.stats.load import load_table
from foldsift.stats.robust import robust_all
from foldsift.stats.scan import ScanSettings, run_scan

GROUP = "site"
TARGET_SPEEDUP = 20.0
CONFIDENCE = 0.95
#: Largest relative difference of t and p still counted as agreement.
AGREEMENT_TOLERANCE = 1e-6

FULL_SIZE = {"rows": 200_000, "outcomes": 100, "levels": 6}
QUICK_SIZE = {"rows": 20_000, "outcomes": 20, "levels": 6}


# --------------------------------------------------------------------------- the table


def level_names(count: int) -> list[str]:
    width = len(str(count))
    return [f"L{index:0{width}d}" for index in range(1, count + 1)]


def outcome_names(count: int) -> list[str]:
    width = max(3, len(str(count - 1)))
    return [f"y{index:0{width}d}" for index in range(count)]


def make_columns(
    rows: int, outcomes: int, levels: int, seed: int, missing: float
) -> tuple[np.ndarray, dict[str, np.ndarray], list[str]]:
    """The grouping labels and the outcome columns as numpy arrays.

    Groups have unequal sizes (weights 1..2). Each outcome has its own log-scale mean and
    SD; about a fifth get a group shift of the log mean and a group factor on the log SD,
    so both null and non-null comparisons (and unequal variances) occur.
    """
    rng = np.random.default_rng(seed)
    names = level_names(levels)
    weights = np.linspace(1.0, 2.0, levels)
    codes = rng.choice(levels, size=rows, p=weights / weights.sum())
    labels = np.array(names)[codes]
    columns: dict[str, np.ndarray] = {}
    for name in outcome_names(outcomes):
        mu = rng.normal(1.0, 1.0)
        sigma = rng.uniform(0.4, 1.2)
        if rng.random() < 0.2:
            shift = rng.normal(0.0, 0.05, size=levels)
            spread = rng.uniform(0.9, 1.1, size=levels)
        else:
            shift = np.zeros(levels)
            spread = np.ones(levels)
        logs = mu + shift[codes] + sigma * spread[codes] * rng.standard_normal(rows)
        values = np.exp(logs)
        if missing > 0:
            values[rng.random(rows) < missing] = np.nan
        columns[name] = values
    return labels, columns, names


# --------------------------------------------------------------------------- foldsift


def foldsift_once(frame: pl.DataFrame, outcomes: list[str]):
    """One load + scan: (result, load seconds, scan seconds, process CPU seconds)."""
    cpu = time.process_time()
    start = time.perf_counter()
    table = load_table(frame=frame, groupings=[GROUP], outcomes=outcomes)
    loaded = time.perf_counter()
    result = run_scan(table, ScanSettings(confidence=CONFIDENCE))
    done = time.perf_counter()
    return result, loaded - start, done - loaded, time.process_time() - cpu


def time_foldsift(frame: pl.DataFrame, outcomes: list[str], repeats: int):
    loads, scans, totals = [], [], []
    result = None
    for run in range(1, repeats + 1):
        gc.collect()
        result, load_seconds, scan_seconds, cpu_seconds = foldsift_once(frame, outcomes)
        loads.append(load_seconds)
        scans.append(scan_seconds)
        totals.append(load_seconds + scan_seconds)
        print(
            f"  run {run}: load/typing {load_seconds:8.3f} s   scan {scan_seconds:8.3f} s   "
            f"total {load_seconds + scan_seconds:8.3f} s   (CPU {cpu_seconds:.3f} s)",
            flush=True,
        )
    return result, min(loads), min(scans), min(totals)


def profile_foldsift(frame: pl.DataFrame, outcomes: list[str], lines: int) -> None:
    gc.collect()
    profiler = cProfile.Profile()
    profiler.enable()
    foldsift_once(frame, outcomes)
    profiler.disable()
    for sort in ("cumulative", "tottime"):
        out = io.StringIO()
        pstats.Stats(profiler, stream=out).strip_dirs().sort_stats(sort).print_stats(lines)
        print(f"\n--- cProfile of one load_table + run_scan, sorted by {sort} ---")
        print(out.getvalue().rstrip())


# --------------------------------------------------------------------------- the loop


def plain_loop(df: pd.DataFrame, outcomes: list[str], levels: list[str]) -> pd.DataFrame:
    """The straightforward loop: masks, logs, Welch t-test and CI, one comparison at a time."""
    results = []
    for column in outcomes:
        for i, level_a in enumerate(levels):
            for level_b in levels[i + 1 :]:
                values_a = df[df[GROUP] == level_a][column]
                values_b = df[df[GROUP] == level_b][column]
                values_a = values_a[values_a > 0].dropna()  # NaN > 0 is False as well
                values_b = values_b[values_b > 0].dropna()
                log_a = np.log(values_a.to_numpy())
                log_b = np.log(values_b.to_numpy())
                test = sps.ttest_ind(log_b, log_a, equal_var=False)
                n_a, n_b = len(log_a), len(log_b)
                share_a = np.var(log_a, ddof=1) / n_a
                share_b = np.var(log_b, ddof=1) / n_b
                se = math.sqrt(share_a + share_b)
                dof = (share_a + share_b) ** 2 / (share_a**2 / (n_a - 1) + share_b**2 / (n_b - 1))
                critical = sps.t.ppf(0.5 + CONFIDENCE / 2, dof)
                difference = log_b.mean() - log_a.mean()
                results.append(
                    {
                        "outcome": column,
                        "level_a": level_a,
                        "level_b": level_b,
                        "n_a": n_a,
                        "n_b": n_b,
                        "ratio": math.exp(difference),
                        "ci_low": math.exp(difference - critical * se),
                        "ci_high": math.exp(difference + critical * se),
                        "df": dof,
                        "t": float(test.statistic),
                        "p_value": float(test.pvalue),
                    }
                )
    return pd.DataFrame(results)


def lean_loop(df: pd.DataFrame, outcomes: list[str], levels: list[str]) -> pd.DataFrame:
    """A more careful loop: one mask per level, only the needed column selected."""
    masks = {level: (df[GROUP] == level).to_numpy() for level in levels}
    results = []
    for column in outcomes:
        values = df[column].to_numpy()
        logs = {}
        for level in levels:
            chosen = values[masks[level]]
            logs[level] = np.log(chosen[chosen > 0])
        for i, level_a in enumerate(levels):
            for level_b in levels[i + 1 :]:
                test = sps.ttest_ind(logs[level_b], logs[level_a], equal_var=False)
                results.append(
                    {
                        "outcome": column,
                        "level_a": level_a,
                        "level_b": level_b,
                        "t": float(test.statistic),
                        "p_value": float(test.pvalue),
                    }
                )
    return pd.DataFrame(results)


# --------------------------------------------------------------------------- agreement


def relative_difference(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """|x - y| / max(|x|, |y|); 0 where both are equal (zeros included), inf where one is
    NaN and the other is not."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = np.maximum(np.abs(x), np.abs(y))
        out = np.where(x == y, 0.0, np.abs(x - y) / scale)
    both_nan = np.isnan(x) & np.isnan(y)
    one_nan = np.isnan(x) ^ np.isnan(y)
    out = np.where(both_nan, 0.0, out)
    return np.where(one_nan, np.inf, out)


def compare(result, loop: pd.DataFrame) -> dict[str, float]:
    ours = result.comparisons.select(
        "outcome",
        "level_a",
        "level_b",
        "n_a",
        "n_b",
        "ratio",
        "ci_low",
        "ci_high",
        "df",
        "t",
        "p_value",
    )
    keyed = {
        (row[0], row[1], row[2]): row[3:] for row in ours.rows()
    }  # (n_a, n_b, ratio, ci_low, ci_high, df, t, p_value)
    fields = ["n_a", "n_b", "ratio", "ci_low", "ci_high", "df", "t", "p_value"]
    theirs = loop[["outcome", "level_a", "level_b", *fields]].itertuples(index=False)
    pairs: dict[str, list[tuple[float, float]]] = {name: [] for name in fields}
    unmatched = 0
    for row in theirs:
        mine = keyed.pop((row[0], row[1], row[2]), None)
        if mine is None:
            unmatched += 1
            continue
        for index, name in enumerate(fields):
            value = mine[index]
            pairs[name].append((math.nan if value is None else value, row[3 + index]))
    unmatched += len(keyed)
    summary: dict[str, float] = {"matched": len(pairs["t"]), "unmatched": unmatched}
    for name, values in pairs.items():
        array = np.array(values, dtype=float).reshape(-1, 2)
        summary[name] = float(relative_difference(array[:, 0], array[:, 1]).max(initial=0.0))
    return summary


# --------------------------------------------------------------------------- robust


def time_robust_subset(result, count: int) -> tuple[float, int]:
    subset = dataclasses.replace(result, comparisons=result.comparisons.head(count))
    gc.collect()
    start = time.perf_counter()
    checked = robust_all(subset)
    seconds = time.perf_counter() - start
    return seconds, checked.height


def time_robust_full(result) -> float:
    start = time.perf_counter()
    last = [start]

    def progress(done: int, total: int) -> None:
        now = time.perf_counter()
        if now - last[0] >= 30 or done == total:
            last[0] = now
            elapsed = now - start
            eta = elapsed / done * (total - done)
            print(
                f"  robust_all: {done}/{total} after {elapsed:.0f} s (about {eta:.0f} s left)",
                file=sys.stderr,
                flush=True,
            )

    robust_all(result, progress=progress)
    return time.perf_counter() - start


# --------------------------------------------------------------------------- main


def machine_line() -> str:
    """CPUs, polars threads and the load average: timings from a busy machine read high."""
    try:
        load = "load average {:.2f} {:.2f} {:.2f}".format(*os.getloadavg())
    except OSError:
        load = "load average unknown"
    return f"{os.cpu_count()} CPUs, polars {pl.thread_pool_size()} threads, {load}"


def parse_arguments(argv: list[str] | None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, help=f"rows (default {FULL_SIZE['rows']:,})")
    parser.add_argument("--outcomes", type=int, help=f"outcomes (default {FULL_SIZE['outcomes']})")
    parser.add_argument("--levels", type=int, help=f"levels (default {FULL_SIZE['levels']})")
    parser.add_argument(
        "--quick",
        action="store_true",
        help=f"small smoke run: {QUICK_SIZE['rows']:,} rows x {QUICK_SIZE['outcomes']} outcomes",
    )
    parser.add_argument("--seed", type=int, default=20260101, help="numpy seed of the table")
    parser.add_argument(
        "--missing", type=float, default=0.01, help="share of outcome entries left missing"
    )
    parser.add_argument("--repeats", type=int, default=3, help="foldsift runs (best is kept)")
    parser.add_argument(
        "--lean-loop",
        action="store_true",
        help="also time a more careful loop (one mask per level, one column at a time)",
    )
    parser.add_argument("--robust", action="store_true", help="also time robust_all on a subset")
    parser.add_argument(
        "--robust-comparisons",
        type=int,
        default=30,
        metavar="N",
        help="comparisons in the robust_all subset (default 30)",
    )
    parser.add_argument(
        "--robust-full", action="store_true", help="time robust_all on every comparison (slow)"
    )
    parser.add_argument(
        "--profile",
        type=int,
        nargs="?",
        const=30,
        default=0,
        metavar="LINES",
        help="cProfile one load_table + run_scan and print the top LINES entries",
    )
    arguments = parser.parse_args(argv)
    base = QUICK_SIZE if arguments.quick else FULL_SIZE
    for name, default in base.items():
        if getattr(arguments, name) is None:
            setattr(arguments, name, default)
    if arguments.levels < 2 or arguments.outcomes < 1 or arguments.rows < 2 * arguments.levels:
        parser.error("need at least 2 levels, 1 outcome and 2 rows per level")
    if arguments.repeats < 1 or arguments.robust_comparisons < 1:
        parser.error("--repeats and --robust-comparisons must be at least 1")
    if not 0 <= arguments.missing < 1:
        parser.error("--missing must be at least 0 and below 1")
    return arguments


def main(argv: list[str] | None = None) -> int:
    arguments = parse_arguments(argv)
    rows, outcome_count, level_count = arguments.rows, arguments.outcomes, arguments.levels
    pairs_per_outcome = level_count * (level_count - 1) // 2
    comparisons = pairs_per_outcome * outcome_count

    print(
        f"Building the table: {rows:,} rows x {outcome_count} outcomes, one grouping column "
        f"{GROUP!r} with {level_count} levels (seed {arguments.seed}, "
        f"{arguments.missing:.1%} missing)",
        flush=True,
    )
    start = time.perf_counter()
    labels, columns, levels = make_columns(
        rows, outcome_count, level_count, arguments.seed, arguments.missing
    )
    outcomes = list(columns)
    frame = pl.DataFrame({GROUP: labels, **columns})
    df = pd.DataFrame({GROUP: labels, **columns})
    print(f"  built in {time.perf_counter() - start:.2f} s")
    print(f"Machine: {machine_line()}")
    print(f"Table shape: {frame.height:,} rows x {frame.width} columns")
    print(f"Comparisons: {pairs_per_outcome} pairs x {outcome_count} outcomes = {comparisons:,}")

    print(f"\nfoldsift: load_table(frame=...) + run_scan(...), best of {arguments.repeats}")
    result, best_load, best_scan, best_total = time_foldsift(frame, outcomes, arguments.repeats)
    print(f"  best load/typing: {best_load:.3f} s")
    print(f"  best scan:        {best_scan:.3f} s")
    print(f"  best total:       {best_total:.3f} s")
    if result.comparisons.height != comparisons:
        print(f"  WARNING: foldsift returned {result.comparisons.height} comparisons")

    if arguments.profile:
        profile_foldsift(frame, outcomes, arguments.profile)

    print("\nPlain loop (pandas masks + scipy.stats.ttest_ind, Welch), run once", flush=True)
    gc.collect()
    start = time.perf_counter()
    loop = plain_loop(df, outcomes, sorted(df[GROUP].unique()))
    loop_seconds = time.perf_counter() - start
    print(f"  loop: {loop_seconds:.3f} s ({loop_seconds / len(loop) * 1000:.2f} ms per comparison)")

    agreement = compare(result, loop)
    print("\nAgreement, foldsift vs loop (max relative difference over matched comparisons)")
    print(
        f"  matched {agreement['matched']:,} of {comparisons:,}; unmatched {agreement['unmatched']}"
    )
    for name in ("t", "p_value", "ratio", "ci_low", "ci_high", "df", "n_a", "n_b"):
        print(f"  {name:8s} {agreement[name]:.3e}")
    agrees = (
        agreement["unmatched"] == 0
        and agreement["matched"] == comparisons
        and agreement["t"] <= AGREEMENT_TOLERANCE
        and agreement["p_value"] <= AGREEMENT_TOLERANCE
    )
    print(f"  agree within {AGREEMENT_TOLERANCE:g}: {'yes' if agrees else 'NO'}")

    lean_seconds = None
    if arguments.lean_loop:
        gc.collect()
        start = time.perf_counter()
        lean = lean_loop(df, outcomes, sorted(df[GROUP].unique()))
        lean_seconds = time.perf_counter() - start
        lean_agreement = compare_lean(result, lean)
        print(
            f"\nLean loop (one mask per level): {lean_seconds:.3f} s; "
            f"max rel. diff t {lean_agreement[0]:.3e}, p {lean_agreement[1]:.3e}"
        )

    speedup = loop_seconds / best_total
    print("\nSummary")
    print(f"  table:            {frame.height:,} rows x {frame.width} columns")
    print(f"  comparisons:      {comparisons:,}")
    print(
        f"  foldsift:         {best_total:.3f} s total "
        f"(load/typing {best_load:.3f} s + scan {best_scan:.3f} s)"
    )
    print(f"  plain loop:       {loop_seconds:.3f} s")
    print(f"  speed-up:         {speedup:.1f}x (loop / foldsift total)")
    if lean_seconds is not None:
        print(f"  vs lean loop:     {lean_seconds / best_total:.1f}x")
    met = speedup >= TARGET_SPEEDUP
    print(f"  target >= {TARGET_SPEEDUP:g}x:   {'met' if met else 'NOT met'}")
    print(f"  results agree:    {'yes' if agrees else 'NO'}")
    print(f"  machine:          {machine_line()}")

    if arguments.robust or arguments.robust_full:
        count = min(arguments.robust_comparisons, comparisons)
        print(f"\nrobust_all on the first {count} comparisons", flush=True)
        seconds, checked = time_robust_subset(result, count)
        per = seconds / checked
        print(f"  {seconds:.2f} s for {checked} comparisons: {per:.3f} s per comparison")
        if count % pairs_per_outcome:
            print(
                "  note: the subset is not a whole number of outcomes, so the share of "
                "bootstrap draws per comparison differs from the full table"
            )
        print(
            f"  extrapolated to all {comparisons:,}: {per * comparisons:.0f} s "
            f"({per * comparisons / 60:.1f} min)"
        )
        if arguments.robust_full:
            print(f"\nrobust_all on all {comparisons:,} comparisons", flush=True)
            full_seconds = time_robust_full(result)
            print(f"  {full_seconds:.1f} s ({full_seconds / comparisons:.3f} s per comparison)")
    return 0


def compare_lean(result, lean: pd.DataFrame) -> tuple[float, float]:
    ours = {
        (row[0], row[1], row[2]): (row[3], row[4])
        for row in result.comparisons.select("outcome", "level_a", "level_b", "t", "p_value").rows()
    }
    values = np.array(
        [
            (*ours[(row[0], row[1], row[2])], row[3], row[4])
            for row in lean[["outcome", "level_a", "level_b", "t", "p_value"]].itertuples(
                index=False
            )
        ],
        dtype=float,
    ).reshape(-1, 4)
    return (
        float(relative_difference(values[:, 0], values[:, 2]).max(initial=0.0)),
        float(relative_difference(values[:, 1], values[:, 3]).max(initial=0.0)),
    )


if __name__ == "__main__":
    sys.exit(main())
