"""Comparisons within strata (--within): by definition, the comparison of two levels of g
inside stratum s is the ordinary comparison on the rows of s alone (common practice for
stratified comparisons; no outside source needed beyond the tests that check the ordinary
comparison against NIST and statsmodels)."""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest

from foldsift.stats.load import InputError, load_table
from foldsift.stats.robust import robust_all
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.tui.cli import main

NUMBERS = ["n_a", "n_b", "gm_a", "gm_b", "median_a", "median_b", "ratio", "ci_low", "ci_high"]


def _frame(seed: int = 3) -> pl.DataFrame:
    rng = np.random.default_rng(seed)
    rows = 120
    return pl.DataFrame(
        {
            "zone": rng.choice(["n", "s", "w"], rows),
            "season": rng.choice(["dry", "wet"], rows),
            "iron": rng.lognormal(1.0, 0.5, rows),
            "zinc": rng.lognormal(0.2, 0.8, rows),
        }
    )


@pytest.mark.parametrize("pairs", ["all", "reference"])
def test_within_equals_the_scan_of_each_stratum_alone(pairs):
    frame = _frame()
    settings = ScanSettings(pairs=pairs, within="season")
    table = load_table(frame=frame, groupings=["zone", "season"], outcomes=["iron", "zinc"])
    stratified = run_scan(table, settings).comparisons
    assert set(stratified["grouping"]) == {"zone"}
    assert set(stratified["within"]) == {"season"}
    assert set(stratified["stratum"]) == {"dry", "wet"}
    for season in ("dry", "wet"):
        alone = load_table(
            frame=frame.filter(pl.col("season") == season),
            groupings=["zone"],
            outcomes=["iron", "zinc"],
        )
        expected = run_scan(alone, ScanSettings(pairs=pairs)).comparisons
        got = stratified.filter(pl.col("stratum") == season)
        assert (
            got.select("outcome", "level_a", "level_b").rows()
            == expected.select("outcome", "level_a", "level_b").rows()
        )
        for name in NUMBERS:
            np.testing.assert_allclose(got[name].to_numpy(), expected[name].to_numpy(), rtol=1e-12)
    # adjustment runs over the whole stratified scan, so q differs from a per-stratum scan
    assert stratified["q_bh"].null_count() == 0
    # the stratum has its own parts of the review key
    assert all(
        s.startswith("zone|") and s.endswith(("|season|dry", "|season|wet"))
        for s in stratified["key"]
    )


def test_within_robust_checks_use_the_stratum_rows_only():
    frame = _frame(5)
    table = load_table(frame=frame, groupings=["zone", "season"], outcomes=["iron"])
    result = run_scan(table, ScanSettings(within="season"))
    checked = robust_all(result, resamples=400)
    row = checked.filter(
        pl.col("grouping") == "zone",
        pl.col("stratum") == "wet",
        pl.col("level_a") == "n",
        pl.col("level_b") == "s",
    ).row(0, named=True)
    wet = frame.filter(pl.col("season") == "wet")
    a = wet.filter(pl.col("zone") == "n")["iron"].to_numpy()
    b = wet.filter(pl.col("zone") == "s")["iron"].to_numpy()
    # Hodges-Lehmann ratio: exp(median of all pairwise log differences), by definition
    expected = float(np.exp(np.median(np.subtract.outer(np.log(b), np.log(a)))))
    assert row["hl_ratio"] == pytest.approx(expected, rel=1e-12)


def test_within_needs_a_grouping_column_and_another_grouping():
    frame = _frame()
    table = load_table(frame=frame, groupings=["zone", "season"], outcomes=["iron"])
    with pytest.raises(InputError, match="not a grouping column"):
        run_scan(table, ScanSettings(within="iron"))
    only = load_table(frame=frame, groupings=["season"], outcomes=["iron"])
    with pytest.raises(InputError, match="needs another grouping"):
        run_scan(only, ScanSettings(within="season"))


def test_within_on_the_command_line(tmp_path, capsys):
    path = tmp_path / "survey.csv"
    _frame().write_csv(path)
    assert main(["scan", str(path), "--within", "season", "--out", str(tmp_path / "o.csv")]) == 0
    out = pl.read_csv(tmp_path / "o.csv")
    assert out["sentence"].str.contains("within season").all()
    assert main(["scan", str(path), "--within", "nosuch"]) == 2
    assert "nosuch" in capsys.readouterr().err
