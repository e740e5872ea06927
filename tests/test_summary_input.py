"""Scans from a summary table (one row per grouping × level × outcome), the route for data
too big for one machine: the summary comes from a plain SQL GROUP BY or another engine, and
the scan must give the same comparisons as the raw data.

Sources: the NIST/SEMATECH e-Handbook 1.3.5.3 AUTO83B data (tests/data) with the
log-scale results computed by an independent library (shared reference README: pooled
ratio US/Japan 0.64333, 95% CI 0.59813 to 0.69195; Welch CI 0.60576 to 0.68324). The
summaries are built by SQLite (standard library, SQL GROUP BY) and by pandas, engines
independent of foldsift's polars aggregation.
"""

from __future__ import annotations

import math
import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import polars as pl
import pytest

from foldsift.demo.generate import demo_path
from foldsift.stats.columns import COMPARISON_SCHEMA
from foldsift.stats.load import InputError, load_table
from foldsift.stats.policy import ValuePolicy
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.stats.summary_input import scan_summary_table
from foldsift.tui.cli import main

DATA = Path(__file__).parent / "data"


def _sql_summary(path: Path) -> Path:
    """GROUP BY in SQLite with a registered natural log, variance by the textbook formula."""
    rows = pl.read_csv(DATA / "nist_auto83b_mpg.csv").rows()
    with sqlite3.connect(":memory:") as conn:
        conn.create_function("ln", 1, math.log)
        conn.execute("CREATE TABLE cars (origin TEXT, mpg REAL)")
        conn.executemany("INSERT INTO cars VALUES (?, ?)", rows)
        result = conn.execute(
            """
            SELECT 'origin' AS grouping, origin AS level, 'mpg' AS outcome, COUNT(*) AS n,
                   AVG(ln(mpg)) AS mean_log,
                   (SUM(ln(mpg) * ln(mpg)) - SUM(ln(mpg)) * SUM(ln(mpg)) / COUNT(*))
                       / (COUNT(*) - 1) AS var_log
            FROM cars GROUP BY origin
            """
        ).fetchall()
    frame = pl.DataFrame(
        result, schema=["grouping", "level", "outcome", "n", "mean_log", "var_log"], orient="row"
    )
    frame.write_csv(path)
    return path


@pytest.mark.parametrize(
    ("test", "low", "high"), [("pooled", 0.59813, 0.69195), ("welch", 0.60576, 0.68324)]
)
def test_sql_group_by_summary_reproduces_the_reference(tmp_path, test, low, high):
    summary = scan_summary_table(_sql_summary(tmp_path / "s.csv"), ScanSettings(test=test))
    metadata = summary.metadata()
    assert summary.values is None, "a summary table has no raw values"
    assert summary.comparisons.schema == COMPARISON_SCHEMA, "the same result type as a raw scan"
    row = summary.comparisons.row(0, named=True)
    assert (row["level_a"], row["level_b"]) == ("japan", "us")
    assert row["ratio"] == pytest.approx(0.64333, abs=5e-6)
    assert row["ci_low"] == pytest.approx(low, abs=5e-6)
    assert row["ci_high"] == pytest.approx(high, abs=5e-6)
    assert metadata["data_kind"] == "summary table"
    raw = run_scan(
        load_table(DATA / "nist_auto83b_mpg.csv", groupings=["origin"], outcomes=["mpg"]),
        ScanSettings(test=test),
    ).comparisons.row(0, named=True)
    for name in ("ratio", "ci_low", "ci_high", "p_value", "df"):
        assert row[name] == pytest.approx(raw[name], rel=1e-9), name


def test_pandas_summary_of_the_demo_matches_the_raw_scan(tmp_path):
    """Every one of the demo's 330 comparisons, from a pandas summary of the same usable
    values (below-detection entries as DL/2, the policy the raw scan uses here)."""
    settings = ScanSettings(policy=ValuePolicy(censored="half-dl"))
    result = run_scan(load_table(demo_path()), settings)
    assert result.values is not None
    parts = []
    for grouping in result.source.groupings:
        for outcome in result.source.outcomes:
            # the usable values of each group, as the scan saw them; summarised by pandas
            groups = {
                level: result.values.values((grouping, None, None, level, outcome))
                for level in result.summaries.filter(pl.col("grouping") == grouping)["level"]
            }
            values = np.concatenate(list(groups.values()))
            levels = np.repeat(list(groups), [v.size for v in groups.values()])
            frame = pd.DataFrame({"level": levels, "log": np.log(values), "value": values})
            summary = frame.dropna().groupby("level").agg(
                n=("log", "size"), mean_log=("log", "mean"), sd_log=("log", "std"),
                median=("value", "median"),
            )  # fmt: skip
            summary = summary.reset_index().assign(grouping=grouping, outcome=outcome)
            parts.append(summary)
    path = tmp_path / "demo_summary.csv"
    pd.concat(parts).to_csv(path, index=False)
    comparisons = scan_summary_table(path, settings).comparisons
    raw = result.comparisons
    assert comparisons.height == raw.height == 330
    got = comparisons.sort("key")
    expected = raw.sort("key")
    assert got["key"].to_list() == expected["key"].to_list()
    for name in ("ratio", "ci_low", "ci_high", "p_value", "q_bh", "median_ratio"):
        # The raw scan's medians of groups with below-detection entries are Kaplan-Meier
        # medians (test_censored_scan.py checks them against lifelines); the pandas summary
        # has the medians of the substituted values, so those rows are compared without them.
        plain = (expected["n_censored_a"] + expected["n_censored_b"] == 0).to_numpy()
        rows = plain if name == "median_ratio" else np.ones(plain.size, dtype=bool)
        np.testing.assert_allclose(
            got[name].to_numpy()[rows], expected[name].to_numpy()[rows], rtol=1e-9, err_msg=name
        )


BAD = [
    ("missing", "grouping,level,n,mean_log,sd_log\ng,a,3,0.1,0.2\n", "missing: outcome"),
    ("no-spread", "grouping,level,outcome,n,mean_log\ng,a,o,3,0.1\n", "sd_log or var_log"),
    ("text-n", "grouping,level,outcome,n,mean_log,sd_log\ng,a,o,x,0.1,0.2\n", "'n'"),
    ("negative-sd", "grouping,level,outcome,n,mean_log,sd_log\ng,a,o,3,0.1,-1\n", "negative"),
    (
        "duplicate",
        "grouping,level,outcome,n,mean_log,sd_log\ng,a,o,3,0.1,0.2\ng,a,o,4,0.1,0.2\n",
        "more than one row",
    ),
]


@pytest.mark.parametrize(("name", "text", "message"), BAD, ids=[b[0] for b in BAD])
def test_bad_summary_tables_are_refused_clearly(tmp_path, capsys, name, text, message):
    path = tmp_path / f"{name}.csv"
    path.write_text(text)
    with pytest.raises(InputError, match=message):
        scan_summary_table(path)
    assert main(["scan", str(path), "--summary"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("foldsift:") and f"{name}.csv" in err and len(err.splitlines()) == 1


def test_summary_scan_refuses_robust_and_within(tmp_path, capsys):
    path = _sql_summary(tmp_path / "s.csv")
    assert main(["scan", str(path), "--summary", "--robust"]) == 2
    assert "raw values" in capsys.readouterr().err
    assert main(["scan", str(path), "--summary", "--within", "origin"]) == 2
    assert "raw values" in capsys.readouterr().err
