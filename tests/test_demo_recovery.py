"""The scan recovers the truth planted in the invented demo data (Marrowby Fens soil survey).

Source of truth: the demo generator's own planted effects, foldsift.demo.generate.planted_ratio
(the true ratio of medians = geometric means of level b over level a), and the demo CSV itself
for the counts of below-detection entries and zeros. The data are simulated lognormal values,
so the log-scale t-interval's nominal 95% coverage applies (NIST/SEMATECH e-Handbook 1.3.5.3 for
the interval; 8.1.6.4 for the lognormal's median exp(mu) and mean exp(mu + sigma^2/2)).

The scan is run as ``foldsift scan DEMO --censored half-dl``: below-detection entries become
DL/2 (a common convention, without an outside source here), the choice that keeps the most
data for the five analytes with detection limits.

Thresholds (ours, stated so they can be judged): a 95% CI should cover the truth in about 95%
of comparisons; we require at least 90%, because the comparisons are not independent (all
pairs of five fields share groups) and substitution for censored values biases a few of them
(arsenic and cadmium, whose low tails are censored).

Left out of the coverage count: the spread-only analyte (zinc by field). Its fields differ only
in log-scale SD, so the geometric means (medians) are equal but the arithmetic means are not
(exp(mu + sigma^2/2)); the ratio's truth is 1 only for the question the scan asks, and the
finding that matters there is the spread difference, checked separately below.
"""

from __future__ import annotations

import math

import polars as pl
import pytest

from foldsift.demo import generate
from foldsift.tui.cli import main

COVERAGE_REQUIRED = 0.90


@pytest.fixture(scope="module")
def comparisons(tmp_path_factory) -> pl.DataFrame:
    out = tmp_path_factory.mktemp("demo") / "scan.csv"
    code = main(["scan", str(generate.demo_path()), "--censored", "half-dl", "--out", str(out)])
    assert code == 0
    frame = pl.read_csv(out, infer_schema_length=None)
    return frame.with_columns(
        planted=pl.struct("outcome", "grouping", "level_a", "level_b").map_elements(
            lambda row: generate.planted_ratio(
                row["outcome"], row["grouping"], row["level_a"], row["level_b"]
            ),
            return_dtype=pl.Float64,
        )
    )


def spread_only(frame: pl.DataFrame) -> pl.Expr:
    expr = pl.lit(False)
    for analyte, spec in generate.SPREAD_ONLY.items():
        expr = expr | ((pl.col("outcome") == analyte) & (pl.col("grouping") == spec["grouping"]))
    return expr


def test_every_comparison_is_there(comparisons):
    """Demo design (generate.py): 30 analytes x (10 field pairs + 1 season pair)."""
    assert comparisons.height == len(generate.ANALYTES) * (10 + 1)
    assert comparisons["ratio"].null_count() == 0


def test_ci_covers_the_planted_ratio(comparisons):
    """Planted truth (generate.planted_ratio): the 95% CI covers it in >= 90% of the
    comparisons (spread-only analyte left out; module doc)."""
    judged = comparisons.filter(~spread_only(comparisons))
    covered = (pl.col("ci_low") <= pl.col("planted")) & (pl.col("planted") <= pl.col("ci_high"))
    share = judged.select(covered.mean()).item()
    assert judged.height == 320
    assert share >= COVERAGE_REQUIRED, share


def test_no_effect_comparisons_mostly_cover_one(comparisons):
    """Planted truth: where planted_ratio is 1 (no effect), the 95% CI covers 1 in >= 90% of
    the comparisons, i.e. the scan does not invent effects."""
    null = comparisons.filter(~spread_only(comparisons) & (pl.col("planted") == 1.0))
    share = null.select(((pl.col("ci_low") <= 1) & (pl.col("ci_high") >= 1)).mean()).item()
    assert null.height > 200
    assert share >= COVERAGE_REQUIRED, share


def test_large_planted_effects_are_found_in_the_right_direction(comparisons):
    """Planted truth: every effect of 2x or more (either way) is found, CI excluding 1 on the
    planted side. With >= 48 cores per group and log-SD <= 0.9, a 2x effect is >= 3.7 standard
    errors from 0, so the power of each is above 0.95 (normal approximation; common practice)."""
    large = comparisons.filter(
        ~spread_only(comparisons) & (pl.col("planted").log().abs() >= math.log(2) - 1e-12)
    )
    assert large.height >= 15
    found = (pl.col("planted") > 1) & (pl.col("ci_low") > 1) | (pl.col("planted") < 1) & (
        pl.col("ci_high") < 1
    )
    assert large.filter(~found).height == 0, large.filter(~found).select(
        "outcome", "level_a", "level_b", "planted", "ratio", "ci_low", "ci_high"
    )


def test_spread_only_analyte_is_flagged(comparisons):
    """Planted truth (generate.SPREAD_ONLY): every field pair whose planted log-SDs differ by
    1.5x or more carries the 'spread-differs' warning (the rule in stats/diagnostics.py)."""
    for analyte, spec in generate.SPREAD_ONLY.items():
        _, base_sd = generate.ANALYTES[analyte]
        rows = comparisons.filter(
            (pl.col("outcome") == analyte) & (pl.col("grouping") == spec["grouping"])
        )
        checked = 0
        for row in rows.iter_rows(named=True):
            sd_a = spec["log_sd"].get(row["level_a"], base_sd)
            sd_b = spec["log_sd"].get(row["level_b"], base_sd)
            if max(sd_a, sd_b) / min(sd_a, sd_b) >= 1.5:
                checked += 1
                assert "spread-differs" in (row["warnings"] or ""), row["key"]
        assert checked == 7


def raw_demo() -> pl.DataFrame:
    return pl.read_csv(generate.demo_path(), infer_schema=False)


@pytest.mark.parametrize("analyte", sorted(generate.DETECTION_LIMITS))
def test_censored_entries_are_counted_and_substituted(comparisons, analyte):
    """The demo CSV itself: per season, the count of '<DL' entries equals n_censored, and
    with --censored half-dl each is substituted (README: nothing is dropped or replaced
    without being counted)."""
    raw = raw_demo()
    row = comparisons.filter((pl.col("outcome") == analyte) & (pl.col("grouping") == "season")).row(
        0, named=True
    )
    for side in ("a", "b"):
        level = row[f"level_{side}"]
        cells = raw.filter(pl.col("season") == level)[analyte]
        censored = int(cells.str.starts_with("<").sum())
        assert censored > 0
        assert row[f"n_censored_{side}"] == censored
        assert row[f"n_substituted_{side}"] == censored
        assert row[f"n_missing_{side}"] == cells.null_count()


@pytest.mark.parametrize("analyte", sorted(generate.ZERO_COUNTS))
def test_zeros_are_left_out_and_counted(comparisons, analyte):
    """The demo's planted zeros (generate.ZERO_COUNTS): left out by default and counted."""
    row = comparisons.filter((pl.col("outcome") == analyte) & (pl.col("grouping") == "season")).row(
        0, named=True
    )
    assert row["n_excluded_a"] + row["n_excluded_b"] == generate.ZERO_COUNTS[analyte]


def test_censored_fit_covers_the_planted_ratio_where_limits_differ(tmp_path):
    """Planted truth (generate.planted_ratio) for the analytes with detection limits, scanned
    with the default censored maximum likelihood: the 95% CI covers the truth in >= 90% of
    their comparisons, the same threshold as above; and the comparisons of the field whose
    arsenic was measured with a higher limit (generate.FIELD_DETECTION_LIMITS) carry
    ``limits-differ``, those between fields sharing one limit do not."""
    out = tmp_path / "mle.csv"
    assert main(["scan", str(generate.demo_path()), "--out", str(out)]) == 0
    frame = pl.read_csv(out, infer_schema_length=None).filter(
        pl.col("outcome").is_in(list(generate.DETECTION_LIMITS))
    )
    planted = [
        generate.planted_ratio(r["outcome"], r["grouping"], r["level_a"], r["level_b"])
        for r in frame.iter_rows(named=True)
    ]
    frame = frame.with_columns(pl.Series("planted", planted))
    covered = (pl.col("ci_low") <= pl.col("planted")) & (pl.col("planted") <= pl.col("ci_high"))
    assert frame.select(covered.mean()).item() >= COVERAGE_REQUIRED
    assert set(frame["method"]) == {"censored ML"}
    arsenic = frame.filter(
        (pl.col("outcome") == "arsenic_mg_per_kg") & (pl.col("grouping") == "field")
    )
    higher = set(generate.FIELD_DETECTION_LIMITS["arsenic_mg_per_kg"])
    for row in arsenic.iter_rows(named=True):
        involved = bool({row["level_a"], row["level_b"]} & higher)
        assert ("limits-differ" in (row["warnings"] or "")) == involved, row["key"]


def test_paired_plots_recover_the_planted_year_effect_with_a_narrower_interval(tmp_path):
    """Planted truth of the two-year plot survey (generate.YEAR_EFFECTS): the paired 95% CI
    of each analyte's 2026/2025 ratio covers it, and is narrower than the interval of the
    same years compared as independent groups, since the plot effect cancels within plots
    (the reason to pair; common practice). Unpaired plots (generate.MISSED_PLOTS) and the
    repeated sampling (generate.REPEATED_PLOT) are counted."""
    paired_out, plain_out = tmp_path / "paired.csv", tmp_path / "plain.csv"
    plots = str(generate.plots_path())
    assert main(["scan", plots, "--pair-by", "plot", "--out", str(paired_out)]) == 0
    assert main(["scan", plots, "--out", str(plain_out)]) == 0
    paired = pl.read_csv(paired_out, infer_schema_length=None).filter(pl.col("grouping") == "year")
    plain = pl.read_csv(plain_out, infer_schema_length=None).filter(pl.col("grouping") == "year")
    assert paired.height == plain.height == len(generate.PLOT_ANALYTES)
    for row, other in zip(paired.iter_rows(named=True), plain.iter_rows(named=True), strict=True):
        truth = generate.YEAR_EFFECTS.get(row["outcome"], 1.0)
        assert row["method"] == "paired t on logs"
        assert row["ci_low"] <= truth <= row["ci_high"], row
        assert row["ci_high"] / row["ci_low"] < other["ci_high"] / other["ci_low"]
        missed = {year: list(generate.MISSED_PLOTS.values()).count(year) for year in generate.YEARS}
        assert (row["n_only_a"], row["n_only_b"]) == (missed["2026"], missed["2025"])
        assert row["n_combined"] == 1
