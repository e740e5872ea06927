"""The paired and 2×2 crossover core (``stats/paired.py``) against independent references.

Sources, named beside each check:

* scipy.stats.ttest_rel on the logs (t, p) and statsmodels ``DescrStatsW.tconfint_mean``
  (the CI of the mean log ratio): independent implementations of the paired t-test
  (NIST/SEMATECH e-Handbook, sec. 7.3.1).
* Expected pairs, counts and geometric means of duplicates are computed in this file by a
  plain Python loop over the rows (dicts), independently of the core's polars joins.
* Open data: the ACTG 175 trial data set (AIDS Clinical Trials Group Study 175; Hammer et
  al., N Engl J Med 1996;335:1081-1090) shipped with lifelines as
  ``lifelines/datasets/ACTG175.csv``: CD4 counts of the same 2,139 patients at baseline
  (cd40), week 20 (cd420) and week 96 (cd496, missing for 797), CD8 counts at baseline and
  week 20 (cd80, cd820); a few counts are 0 (left out by the value policy).
* statsmodels OLS of ``logy ~ C(sequence) + C(subject) + C(period) + C(treatment)`` on a
  simulated 2×2 crossover: treatment coefficient, its CIs, p, residual df and mean square
  (the usual analysis of variance of a 2×2 crossover on the logs).
* statsmodels OLS of ``logy ~ C(unit) + C(level)`` on paired data: its residual mean square
  is the log-scale variance of one measurement, for the within-unit CV.
* statsmodels ``OLSResults.outlier_test(method="bonf")`` of the one-mean model of the log
  ratios: the Bonferroni p of the externally studentized residuals, for the influence check.
* statsmodels ``TTestPower`` (one-sample / paired noncentral-t power, both tails): the
  detectable ratio and the pairs needed.
* The lognormal CV, √(exp(σ²) − 1): a standard property of the lognormal distribution
  (Johnson, Kotz & Balakrishnan, Continuous Univariate Distributions, vol. 1, ch. 14; from
  memory).
"""

from __future__ import annotations

import importlib.resources
import math
import warnings
from collections import defaultdict

import numpy as np
import pandas as pd
import polars as pl
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy import integrate, special
from scipy import stats as sps
from statsmodels.stats.power import TTestPower
from statsmodels.stats.weightstats import DescrStatsW

from foldsift.stats import paired
from foldsift.stats.errors import InputError
from foldsift.stats.load import load_table
from foldsift.stats.policy import ValuePolicy, apply_policy
from foldsift.stats.values import GroupSpec

#: Agreement with scipy / statsmodels on the same arithmetic: relative error at most this.
RTOL = 1e-9


# -- test data and the plain reference --------------------------------------------------------


def simulated_long(
    seed: int,
    units: int = 25,
    levels: tuple[str, ...] = ("0", "12", "24"),
    outcomes: tuple[str, ...] = ("x", "y"),
) -> pl.DataFrame:
    """Units measured at each level (lognormal, a unit effect, a level effect), with some
    values missing, some rows absent, some zeros, a few duplicated rows and a row with no
    unit."""
    rng = np.random.default_rng(seed)
    rows: list[dict[str, object]] = []
    for u in range(units):
        unit_effect = rng.normal(0, 0.8, size=len(outcomes))
        for j, level in enumerate(levels):
            if rng.random() < 0.1:
                continue  # this unit was not measured at this level
            copies = 2 if rng.random() < 0.08 else 1
            for _ in range(copies):
                row: dict[str, object] = {"unit": f"u{u}", "time": level}
                for k, name in enumerate(outcomes):
                    value = math.exp(1 + unit_effect[k] + 0.2 * j + rng.normal(0, 0.3))
                    draw = rng.random()
                    row[name] = None if draw < 0.05 else (0.0 if draw < 0.09 else value)
                rows.append(row)
    rows.append({"unit": None, "time": levels[0], **{name: 2.0 for name in outcomes}})
    return pl.DataFrame(
        rows, schema={"unit": pl.Utf8, "time": pl.Utf8, **dict.fromkeys(outcomes, pl.Float64)}
    )


def reference_comparison(
    frame: pl.DataFrame, grouping: str, outcome: str, level_a: str, level_b: str
) -> dict[str, object]:
    """Pairs and counts by a plain loop: values of a unit at a level combined by their
    geometric mean; zero or negative entries left out; a row without a unit is its own unit."""
    usable: dict[tuple[object, str], list[float]] = defaultdict(list)
    left: dict[tuple[object, str], bool] = defaultdict(bool)
    for index, row in enumerate(frame.iter_rows(named=True)):
        unit = row["unit"] if row["unit"] is not None else ("row", index)
        value = row[outcome]
        if value is None or row[grouping] not in (level_a, level_b):
            continue
        key = (unit, row[grouping])
        if value > 0:
            usable[key].append(value)
        else:
            left[key] = True
    units = {unit for unit, _ in list(usable) + list(left)}
    counts = {"n_pairs": 0, "n_only_a": 0, "n_only_b": 0, "n_left_out": 0, "n_combined": 0}
    x, y = [], []
    for unit in units:
        a, b = usable.get((unit, level_a), []), usable.get((unit, level_b), [])
        if a and b:
            counts["n_pairs"] += 1
            counts["n_combined"] += (len(a) > 1) + (len(b) > 1)
            x.append(math.exp(np.mean(np.log(a))))
            y.append(math.exp(np.mean(np.log(b))))
        elif (left[(unit, level_a)] and not a) or (left[(unit, level_b)] and not b):
            counts["n_left_out"] += 1  # all its entries at a level were left out
        elif a:
            counts["n_only_a"] += 1
        else:
            counts["n_only_b"] += 1
    return {**counts, "n_units": len(units), "x": np.array(x), "y": np.array(y)}


def figures_for(result: pl.DataFrame, outcome: str, level_a: str, level_b: str) -> dict:
    rows = result.filter(
        (pl.col("outcome") == outcome)
        & (pl.col("level_a") == level_a)
        & (pl.col("level_b") == level_b)
    ).rows(named=True)
    assert len(rows) == 1
    return rows[0]


def assert_matches_paired_t(row: dict, x: np.ndarray, y: np.ndarray, confidence: float) -> None:
    """Ratio, CI, t and p of one comparison against scipy's ttest_rel and statsmodels'
    t interval of the mean log ratio (both independent)."""
    scipy_test = sps.ttest_rel(np.log(y), np.log(x))
    d = np.log(y) - np.log(x)
    low, high = DescrStatsW(d).tconfint_mean(alpha=1 - confidence)
    assert row["t"] == pytest.approx(scipy_test.statistic, rel=RTOL)
    assert row["p_value"] == pytest.approx(scipy_test.pvalue, rel=RTOL)
    assert row["df"] == len(d) - 1
    assert row["ratio"] == pytest.approx(math.exp(np.mean(d)), rel=RTOL)
    assert row["ci_low"] == pytest.approx(math.exp(low), rel=RTOL)
    assert row["ci_high"] == pytest.approx(math.exp(high), rel=RTOL)
    assert row["gm_a"] == pytest.approx(sps.gmean(x), rel=RTOL)
    assert row["gm_b"] == pytest.approx(sps.gmean(y), rel=RTOL)


# -- paired t on random data ------------------------------------------------------------------


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5])
@pytest.mark.parametrize("confidence", [0.95, 0.90])
def test_every_level_pair_matches_ttest_rel_and_statsmodels(seed, confidence):
    """All three pairs of three time points, two outcomes: pairs and counts as the plain
    loop finds them; t and p as scipy's ttest_rel on the logs; the CI as statsmodels'."""
    frame = simulated_long(seed)
    summaries = paired.paired_summaries(frame, "unit", ["time"], paired.plain_outcomes(["x", "y"]))
    result = paired.paired_figures(summaries, confidence=confidence)
    assert result.height == 3 * 2
    for outcome in ("x", "y"):
        for level_a, level_b in (("0", "12"), ("0", "24"), ("12", "24")):
            row = figures_for(result, outcome, level_a, level_b)
            expected = reference_comparison(frame, "time", outcome, level_a, level_b)
            for name in ("n_pairs", "n_only_a", "n_only_b", "n_left_out", "n_units", "n_combined"):
                assert row[name] == expected[name], name
            assert_matches_paired_t(row, expected["x"], expected["y"], confidence)


def test_schema_and_order_are_fixed():
    frame = simulated_long(7)
    summaries = paired.paired_summaries(frame, "unit", ["time"], paired.plain_outcomes(["y", "x"]))
    assert summaries.schema == paired.PAIRED_SCHEMA
    # Outcomes in the order given, then the natural level order (0 < 12 < 24 as numbers).
    assert summaries.select("outcome", "level_a", "level_b").rows() == [
        ("y", "0", "12"),
        ("y", "0", "24"),
        ("y", "12", "24"),
        ("x", "0", "12"),
        ("x", "0", "24"),
        ("x", "12", "24"),
    ]


def test_paired_t_gives_nan_without_two_pairs_or_spread():
    test = paired.paired_t([1, 3, 4], [0.5, 0.2, 0.3], [0.0, 0.0, 0.12])
    assert np.isnan(test.p_value[:2]).all()
    assert np.isnan(test.ratio_ci[0][:2]).all()
    # The third row against scipy: d = mean ± spread with the same SS (independent).
    d = np.array([0.3 - 0.2, 0.3, 0.3, 0.3 + 0.2])
    d = 0.3 + (d - 0.3) * math.sqrt(0.12 / np.sum((d - 0.3) ** 2))
    expected = sps.ttest_1samp(d, 0.0)
    assert test.t[2] == pytest.approx(expected.statistic, rel=RTOL)
    assert test.p_value[2] == pytest.approx(expected.pvalue, rel=RTOL)


# -- open paired data set ---------------------------------------------------------------------


def actg175_long() -> tuple[pd.DataFrame, pl.DataFrame]:
    """The ACTG 175 CD4 and CD8 counts (lifelines' copy), wide and long (patient × week)."""
    pytest.importorskip("lifelines")
    path = importlib.resources.files("lifelines.datasets") / "ACTG175.csv"
    wide = pd.read_csv(str(path), na_values="NA")
    columns = {"0": ("cd40", "cd80"), "20": ("cd420", "cd820"), "96": ("cd496", None)}
    parts = [
        pl.DataFrame(
            {
                "patient": wide["pidnum"].to_numpy(),  # integers: the unit need not be text
                "week": week,
                "cd4": wide[cd4].astype(float),
                "cd8": wide[cd8].astype(float) if cd8 else np.full(len(wide), np.nan),
            }
        ).with_columns(pl.col("cd4", "cd8").fill_nan(None))
        for week, (cd4, cd8) in columns.items()
    ]
    return wide, pl.concat(parts)


def test_actg175_cd4_over_time_matches_ttest_rel():
    """Every pair of weeks 0, 20, 96: the paired counts and the paired t on the logs of the
    patients with both counts positive (scipy ttest_rel, statsmodels CI); patients whose week
    96 count is missing are present at one week only; counts of 0 are left out."""
    wide, long = actg175_long()
    summaries = paired.paired_summaries(
        long, "patient", ["week"], paired.plain_outcomes(["cd4", "cd8"])
    )
    result = paired.paired_figures(summaries)
    names = {"0": "cd40", "20": "cd420", "96": "cd496"}
    for level_a, level_b in (("0", "20"), ("0", "96"), ("20", "96")):
        a, b = wide[names[level_a]].to_numpy(float), wide[names[level_b]].to_numpy(float)
        both = (a > 0) & (b > 0)
        zero = (a == 0) | (b == 0)
        row = figures_for(result, "cd4", level_a, level_b)
        assert row["n_pairs"] == both.sum()
        assert row["n_left_out"] == (~both & zero).sum()
        assert row["n_only_a"] == ((a > 0) & np.isnan(b)).sum()
        assert row["n_only_b"] == ((b > 0) & np.isnan(a)).sum()
        assert_matches_paired_t(row, a[both], b[both], 0.95)
    cd8 = figures_for(result, "cd8", "0", "20")
    assert_matches_paired_t(cd8, wide["cd80"].to_numpy(float), wide["cd820"].to_numpy(float), 0.95)
    # No CD8 at week 96: every patient is at week 0 only, so few are paired.
    no_week_96 = figures_for(result, "cd8", "0", "96")
    assert (no_week_96["n_pairs"], no_week_96["n_only_a"]) == (0, len(wide))
    assert "few-paired" in no_week_96["warnings"]
    assert no_week_96["p_value"] is None


def test_actg175_detectable_ratio_matches_statsmodels_power():
    """Precision of the observed CD4 comparison, baseline vs week 20: the detectable ratio
    at 80% power from statsmodels' TTestPower with effect = log(R) / s_d."""
    _, long = actg175_long()
    result = paired.paired_figures(
        paired.paired_summaries(long, "patient", ["week"], paired.plain_outcomes(["cd4"]))
    )
    row = figures_for(result, "cd4", "0", "20")
    effect = TTestPower().solve_power(
        effect_size=None, nobs=row["n_pairs"], alpha=0.05, power=0.8, alternative="two-sided"
    )
    assert row["detectable_ratio"] == pytest.approx(math.exp(effect * row["sd_d"]), rel=5e-5)


# -- identities -------------------------------------------------------------------------------


def _pairs(*pairs: tuple[str, str]) -> pl.DataFrame:
    return pl.DataFrame(
        [("time", None, None, a, b) for a, b in pairs],
        schema={n: pl.Utf8 for n in ("grouping", "within", "stratum", "level_a", "level_b")},
        orient="row",
    )


def test_swapping_levels_inverts_ratio_and_interval():
    frame = simulated_long(11)
    outcomes = paired.plain_outcomes(["x", "y"])
    forward = paired.paired_figures(
        paired.paired_summaries(frame, "unit", ["time"], outcomes, level_pairs=_pairs(("0", "24")))
    )
    backward = paired.paired_figures(
        paired.paired_summaries(frame, "unit", ["time"], outcomes, level_pairs=_pairs(("24", "0")))
    )
    assert forward.height == backward.height == 2
    for one, other in zip(forward.rows(named=True), backward.rows(named=True), strict=True):
        assert one["ratio"] == pytest.approx(1 / other["ratio"], rel=1e-12)
        assert one["ci_low"] == pytest.approx(1 / other["ci_high"], rel=1e-12)
        assert one["ci_high"] == pytest.approx(1 / other["ci_low"], rel=1e-12)
        assert one["p_value"] == pytest.approx(other["p_value"], rel=1e-12)
        assert (one["n_only_a"], one["n_only_b"]) == (other["n_only_b"], other["n_only_a"])
        assert one["within_cv"] == pytest.approx(other["within_cv"], rel=1e-12)


@pytest.mark.parametrize("k", [0.001, 3.0, 1e6])
def test_scaling_one_level_scales_the_ratio(k):
    frame = simulated_long(12)
    scaled = frame.with_columns(
        pl.when(pl.col("time") == "24").then(pl.col("x") * k).otherwise(pl.col("x")).alias("x")
    )
    outcomes = paired.plain_outcomes(["x"])
    plain = figures_for(
        paired.paired_figures(paired.paired_summaries(frame, "unit", ["time"], outcomes)),
        "x",
        "0",
        "24",
    )
    times_k = figures_for(
        paired.paired_figures(paired.paired_summaries(scaled, "unit", ["time"], outcomes)),
        "x",
        "0",
        "24",
    )
    for name in ("ratio", "ci_low", "ci_high", "gm_b", "median_ratio"):
        assert times_k[name] == pytest.approx(k * plain[name], rel=1e-9), name
    # The spread of the log ratios does not change (p does: the ratio tested moves by k).
    for name in ("se_log", "within_cv", "n_pairs", "gm_a", "skew_d", "influence"):
        assert times_k[name] == pytest.approx(plain[name], rel=1e-7), name


# -- duplicates, unpaired units, strata, policy ----------------------------------------------


def duplicated_frame() -> pl.DataFrame:
    return pl.DataFrame(
        {
            "unit": ["w1", "w1", "w1", "w2", "w2", "w3", "w3", "w3", "w4", "w5", None],
            "time": [
                "pre",
                "post",
                "post",
                "pre",
                "post",
                "pre",
                "pre",
                "post",
                "pre",
                "post",
                "pre",
            ],
            "arsenic": [4.0, 2.0, 8.0, 5.0, 3.0, 1.0, 9.0, 6.0, 7.0, 0.0, 3.0],
        }
    )


def test_duplicates_are_combined_by_geometric_mean_and_counted():
    frame = duplicated_frame()
    summaries = paired.paired_summaries(
        frame, "unit", ["time"], paired.plain_outcomes(["arsenic"]), level_pairs=None
    )
    row = paired.paired_figures(summaries).row(0, named=True)
    assert (row["level_a"], row["level_b"]) == ("post", "pre")  # text order
    expected = reference_comparison(frame, "time", "arsenic", "post", "pre")
    for name in ("n_pairs", "n_only_a", "n_only_b", "n_left_out", "n_units", "n_combined"):
        assert row[name] == expected[name], name
    # w1 post = GM(2, 8) = 4, w3 pre = GM(1, 9) = 3; w4 and the row without a unit are pre
    # only, w5's only value is 0 (left out).
    assert (row["n_pairs"], row["n_combined"], row["n_only_b"], row["n_only_a"]) == (3, 2, 2, 0)
    assert row["n_left_out"] == 1
    assert_matches_paired_t(row, expected["x"], expected["y"], 0.95)
    assert "values-combined" in row["warnings"]


def test_duplicates_refused_on_request():
    with pytest.raises(
        InputError, match=r"unit 'w1' has several values of 'arsenic' at time 'post'"
    ):
        paired.paired_summaries(
            duplicated_frame(),
            "unit",
            ["time"],
            paired.plain_outcomes(["arsenic"]),
            duplicates="refuse",
        )


def test_pairs_within_strata_match_each_stratum_alone():
    """Unit names repeat across sites (u0, u1, ... in each): inside a stratum they are
    different units, so each site's comparisons equal those of that site alone."""
    parts = [
        simulated_long(20 + i).with_columns(pl.lit(site).alias("site"))
        for i, site in enumerate("ABC")
    ]
    frame = pl.concat(parts)
    outcomes = paired.plain_outcomes(["x"])
    within = paired.paired_summaries(frame, "unit", [GroupSpec("time", "site")], outcomes)
    assert within["stratum"].unique().sort().to_list() == ["A", "B", "C"]
    for site in "ABC":
        alone = paired.paired_summaries(
            frame.filter(pl.col("site") == site), "unit", ["time"], outcomes
        )
        mine = within.filter(pl.col("stratum") == site).drop("within", "stratum")
        alone = alone.drop("within", "stratum")
        assert mine.columns == alone.columns
        for name in mine.columns:
            if mine[name].dtype == pl.Float64:  # sums in another order: equal to rounding
                np.testing.assert_allclose(
                    mine[name].to_numpy(), alone[name].to_numpy(), rtol=1e-12
                )
            else:
                assert mine[name].to_list() == alone[name].to_list(), name


def test_policy_outcomes_count_censored_and_unreadable_entries_as_left_out():
    """After the table reader and the value policy: a censored entry (under mle), a zero and
    a code without a limit leave their units out; a missing entry does not count."""
    raw = pl.DataFrame(
        {
            "well": ["a", "a", "b", "b", "c", "c", "d", "d", "e", "e", "f"],
            "visit": ["1", "2"] * 5 + ["1"],
            "zinc": ["3", "4", "<0.5", "2", "0", "5", "ND", "6", "7", "", "8"],
        }
    )
    table = load_table(frame=raw, groupings=["well", "visit"], outcomes=["zinc"])
    used = apply_policy(table.frame, table.outcomes, ValuePolicy(), table.names)
    outcomes = paired.policy_outcomes(used, table.outcomes, table.names)
    row = paired.paired_summaries(used, "well", ["visit"], outcomes).row(0, named=True)
    # a: paired; b, c, d: left out at visit 1; e: visit 1 only (missing at 2); f: visit 1 only.
    assert (row["n_pairs"], row["n_left_out"], row["n_only_a"], row["n_only_b"]) == (1, 3, 2, 0)
    assert row["n_units"] == 6


def test_groupings_within_units_and_bad_unit_columns():
    frame = simulated_long(3).with_columns(
        pl.col("unit").str.slice(1).cast(pl.Int64, strict=False).mod(3).cast(pl.Utf8).alias("site")
    )
    assert paired.groupings_within_units(frame, "unit", ["site", "time"]) == ("time",)
    with pytest.raises(InputError, match="not a column"):
        paired.paired_summaries(frame, "well", ["time"], paired.plain_outcomes(["x"]))
    with pytest.raises(InputError, match="also a grouping"):
        paired.paired_summaries(frame, "unit", ["unit"], paired.plain_outcomes(["x"]))


# -- checks of the pairing --------------------------------------------------------------------


def one_comparison(d: np.ndarray, names: list[str] | None = None) -> dict:
    """Units u0.. with value 1 before and exp(d) after."""
    names = names or [f"u{i}" for i in range(len(d))]
    frame = pl.DataFrame(
        {
            "unit": names * 2,
            "time": ["after"] * len(d) + ["before"] * len(d),
            "v": np.concatenate([np.exp(d), np.ones(len(d))]),
        }
    )
    summaries = paired.paired_summaries(
        frame, "unit", ["time"], paired.plain_outcomes(["v"]), level_pairs=None
    )
    row: dict = paired.paired_figures(summaries).row(0, named=True)
    # level_a is "after" (text order): the row's d is before - after = -d.
    return row


def test_influence_matches_leave_one_out_and_statsmodels_outlier_test():
    rng = np.random.default_rng(8)
    d = rng.normal(0.1, 0.1, size=14)
    d[6] = 1.5
    row = one_comparison(d)
    values = -d  # the row compares before / after
    shifts = []
    for i in range(len(values)):
        rest = np.delete(values, i)
        shifts.append(abs(values.mean() - rest.mean()) / (rest.std(ddof=1) / math.sqrt(len(rest))))
    assert row["influence"] == pytest.approx(max(shifts), rel=1e-9)
    assert row["influential_unit"] == "u6"
    outliers = sm.OLS(values, np.ones(len(values))).fit().outlier_test(method="bonf")
    assert row["outlier_p"] == pytest.approx(float(np.min(outliers[:, 2])), rel=1e-7)
    assert "unit-dominates" in row["warnings"]


def _many_comparisons(d: np.ndarray) -> pl.DataFrame:
    """One stratum (``rep``) per row of ``d``: units u0.. with value 1 before and exp(d)
    after, all compared in one call."""
    reps, n = d.shape
    frame = pl.DataFrame(
        {
            "rep": np.repeat(np.arange(reps), 2 * n).astype(str),
            "unit": np.tile([f"u{j}" for j in range(n)] * 2, reps),
            "time": np.tile(["after"] * n + ["before"] * n, reps),
            "v": np.column_stack([np.exp(d), np.ones((reps, n))]).ravel(),
        }
    )
    return paired.paired_figures(
        paired.paired_summaries(
            frame, "unit", [GroupSpec("time", "rep")], paired.plain_outcomes(["v"])
        )
    )


def test_unit_dominates_rule_on_simulated_normal_log_ratios():
    """The documented behaviour of our rule (seeded simulation, 2,000 samples of 10 pairs):
    on normal log ratios it fires in at most 2% of samples (design target 1%); with one
    unit shifted by 6 SD it fires in most of them and names that unit."""
    rng = np.random.default_rng(2024)
    d = rng.normal(size=(2000, 10))
    clean = _many_comparisons(d)
    assert clean.height == 2000
    dominated = clean["warnings"].list.contains("unit-dominates")
    assert dominated.mean() <= 0.02
    d[:, 3] += 6
    shifted = _many_comparisons(d)
    caught = shifted.filter(pl.col("warnings").list.contains("unit-dominates"))
    assert caught.height >= 0.5 * 2000
    assert (caught["influential_unit"] == "u3").all()


def test_skewed_ratios_and_clean_ratios():
    rng = np.random.default_rng(9)
    skewed = rng.exponential(0.5, size=40)
    row = one_comparison(skewed)
    assert row["skew_d"] == pytest.approx(sps.skew(-skewed, bias=True), rel=1e-9)
    assert "pairs-skewed" in row["warnings"]
    clean = one_comparison(rng.normal(0.2, 0.3, size=40))
    assert clean["warnings"] == []


def test_few_paired_units_are_named():
    frame = pl.DataFrame(
        {
            "unit": [f"u{i}" for i in range(10)] + [f"u{i}" for i in range(4)],
            "time": ["1"] * 10 + ["2"] * 4,
            "v": np.linspace(1, 3, 14),
        }
    )
    row = paired.paired_figures(
        paired.paired_summaries(frame, "unit", ["time"], paired.plain_outcomes(["v"]))
    ).row(0, named=True)
    assert (row["n_pairs"], row["n_only_a"], row["n_units"]) == (4, 6, 10)
    assert row["warnings"] == ["few-paired"]


# -- within-unit CV and precision -------------------------------------------------------------


def test_within_unit_cv_matches_the_two_way_model():
    """Two levels: s_d^2 / 2 is the residual mean square of logy ~ C(unit) + C(level)
    (statsmodels OLS), and the CV is that of a lognormal with that log variance."""
    rng = np.random.default_rng(10)
    units = 30
    unit_effect = rng.normal(0, 1, size=units)
    frame = pd.DataFrame(
        {
            "unit": [f"u{i}" for i in range(units)] * 2,
            "level": ["a"] * units + ["b"] * units,
            "logy": np.concatenate([unit_effect, unit_effect + 0.3])
            + rng.normal(0, 0.25, 2 * units),
        }
    )
    fit = smf.ols("logy ~ C(unit) + C(level)", frame).fit()
    row = paired.paired_figures(
        paired.paired_summaries(
            pl.from_pandas(frame).with_columns(pl.col("logy").exp().alias("y")),
            "unit",
            ["level"],
            paired.plain_outcomes(["y"]),
        )
    ).row(0, named=True)
    assert row["within_cv"] == pytest.approx(math.sqrt(math.exp(fit.mse_resid) - 1), rel=1e-9)
    assert row["ratio"] == pytest.approx(math.exp(fit.params["C(level)[T.b]"]), rel=1e-9)


PRECISION = [(2, 1.0), (3, 0.5), (5, 0.2), (12, 0.8), (40, 0.3), (300, 1.5)]


def power_by_definition(effect: float, n: int, alpha: float) -> float:
    """Power of the two-sided paired t from its definition: with T' = (Z + delta) /
    sqrt(V / df), delta = effect sqrt(n), df = n - 1, V chi-square(df),
    P(|T'| > c) = E_Z[F_chi2(df (Z + delta)^2 / c^2)], integrated over Z (scipy.integrate,
    scipy.special.chdtr); the same definition as tests/test_precision.py."""
    df = n - 1
    delta = effect * math.sqrt(n)
    c = sps.t.ppf(1 - alpha / 2, df)

    def given_z(z: float) -> float:
        density = math.exp(-z * z / 2) / math.sqrt(2 * math.pi)
        return density * special.chdtr(df, df * (z + delta) ** 2 / c**2)

    inside = [-delta] if -12 < -delta < 12 else None
    value, _ = integrate.quad(given_z, -12, 12, points=inside, epsabs=1e-13, epsrel=1e-12)
    return value


@pytest.mark.parametrize(("n", "sd"), PRECISION)
@pytest.mark.parametrize(("alpha", "power"), [(0.05, 0.8), (0.10, 0.9), (0.01, 0.8)])
def test_detectable_ratio_reaches_the_power(n, sd, alpha, power):
    """Power at the detectable ratio is the target, by the definition and (from 3 pairs;
    statsmodels' power is NaN with 1 df) by statsmodels' TTestPower.power. (Its solve_power
    stops its search early: 2% off at 3 pairs and alpha 0.01.)"""
    ratio = paired.paired_detectable_ratio([n], [sd], alpha=alpha, power=power)[0]
    effect = math.log(ratio) / sd
    assert power_by_definition(effect, n, alpha) == pytest.approx(power, abs=1e-8)
    if n < 3:
        return
    reached = TTestPower().power(effect, nobs=n, alpha=alpha, alternative="two-sided")
    assert reached == pytest.approx(power, abs=1e-9)


@pytest.mark.parametrize("sd", [0.1, 0.3, 0.8, 2.0])
@pytest.mark.parametrize("target", [0.5, 1.25, 2.0])
def test_pairs_needed_is_the_smallest_n_with_the_power(sd, target):
    """By the definition of power (statsmodels' power is NaN at 2 or 3 pairs with these
    large effects)."""
    needed = int(paired.n_pairs_needed(target, [sd])[0])
    effect = abs(math.log(target)) / sd
    assert power_by_definition(effect, needed, 0.05) >= 0.8 - 1e-9
    if needed > 2:
        assert power_by_definition(effect, needed - 1, 0.05) < 0.8
    if needed >= 10:
        solved = TTestPower().solve_power(
            effect_size=effect, nobs=None, alpha=0.05, power=0.8, alternative="two-sided"
        )
        assert needed == math.ceil(solved)


def test_precision_normal_approximation_and_bad_input():
    """The normal formulas n = (z_{1-a/2} + z_pow)^2 s^2 / log(R)^2 and
    log(R) = (z_{1-a/2} + z_pow) s / sqrt(n) (Chow, Shao & Wang, Sample Size Calculations
    in Clinical Research, sec. 3.1, one-sample / paired; from memory)."""
    z = sps.norm.ppf(0.975) + sps.norm.ppf(0.8)
    assert paired.n_pairs_needed(1.5, [0.4], method="normal")[0] == math.ceil(
        z**2 * 0.16 / math.log(1.5) ** 2
    )
    assert paired.paired_detectable_ratio([20], [0.4], method="normal")[0] == pytest.approx(
        math.exp(z * 0.4 / math.sqrt(20)), rel=1e-12
    )
    assert np.isnan(paired.paired_detectable_ratio([1, 10], [0.5, 0.0])).all()
    with pytest.raises(ValueError, match="target ratio"):
        paired.n_pairs_needed(1.0, [0.3])


# -- 2×2 crossover ------------------------------------------------------------------------------


def simulated_crossover(seed: int, sizes: tuple[int, int] = (12, 9)) -> pl.DataFrame:
    """A 2×2 crossover (sequences RT and TR), three outcomes with subject and period
    effects; outcome z has one subject's value missing in period 2."""
    rng = np.random.default_rng(seed)
    rows = []
    for sequence, size in zip(("RT", "TR"), sizes, strict=True):
        for k in range(size):
            subject_effect = rng.normal(0, 0.5, size=3)
            for period in (1, 2):
                treatment = sequence[period - 1]
                shift = 0.1 * (period == 2) + math.log(0.9) * (treatment == "T")
                values = np.exp(1 + subject_effect + shift + rng.normal(0, [0.2, 0.05, 0.4]))
                rows.append((f"{sequence}-{k}", sequence, f"P{period}", treatment, *values))
    frame = pl.DataFrame(
        rows,
        schema=["subject", "sequence", "period", "treatment", "x", "y", "z"],
        orient="row",
    )
    return frame.with_columns(
        pl.when((pl.col("subject") == "TR-3") & (pl.col("period") == "P2"))
        .then(None)
        .otherwise(pl.col("z"))
        .alias("z")
    )


def _ols_crossover(frame: pl.DataFrame, outcome: str):
    complete = frame.filter(pl.col(outcome).is_not_null().all().over("subject"))
    data = pd.DataFrame(
        complete.with_columns(pl.col(outcome).log().alias("logy")).to_dict(as_series=False)
    )
    with warnings.catch_warnings():
        # Subjects are nested in sequences: the design is rank-deficient by construction and
        # statsmodels (pinv) says so; the treatment contrast is estimable.
        warnings.simplefilter("ignore")
        return smf.ols(
            "logy ~ C(sequence) + C(subject) + C(period) + C(treatment)", data
        ).fit(), complete["subject"].n_unique()


@pytest.mark.parametrize(("seed", "sizes"), [(1, (12, 9)), (2, (8, 8)), (3, (5, 14))])
def test_crossover_matches_ols_of_the_usual_model(seed, sizes):
    frame = simulated_crossover(seed, sizes)
    result = paired.crossover_2x2(
        frame,
        subject="subject",
        period="period",
        sequence="sequence",
        treatment="treatment",
        outcomes=["x", "y", "z"],
        reference="R",
    )
    assert result.design == paired.CrossoverDesign("R", "T", ("RT", "TR"), ("P1", "P2"))
    ci90 = result.ratio_interval(0.90)
    for i, outcome in enumerate(("x", "y", "z")):
        fit, subjects = _ols_crossover(frame, outcome)
        term = "C(treatment)[T.T]"
        assert result.ratio[i] == pytest.approx(math.exp(fit.params[term]), rel=1e-9)
        assert result.test.standard_error[i] == pytest.approx(fit.bse[term], rel=1e-9)
        assert result.test.df[i] == fit.df_resid
        assert result.test.p_value[i] == pytest.approx(fit.pvalues[term], rel=1e-7)
        assert result.mse[i] == pytest.approx(fit.mse_resid, rel=1e-9)
        assert result.within_cv[i] == pytest.approx(
            math.sqrt(math.exp(fit.mse_resid) - 1), rel=1e-9
        )
        for level, (low, high) in ((0.90, ci90), (0.95, result.test.ratio_ci)):
            ols_low, ols_high = fit.conf_int(alpha=1 - level).loc[term]
            assert low[i] == pytest.approx(math.exp(ols_low), rel=1e-9)
            assert high[i] == pytest.approx(math.exp(ols_high), rel=1e-9)
        assert result.n_sequence_1[i] + result.n_sequence_2[i] == subjects
    assert result.n_left_out.tolist() == [0, 0, 1]
    table = result.to_frame()
    assert table["outcome"].to_list() == ["x", "y", "z"]
    assert table["n_left_out"].to_list() == [0, 0, 1]
    for i, outcome in enumerate(("x", "y", "z")):
        # Two one-sided tests against 0.80 and 1.25 from the OLS fit's t-tests of the
        # treatment term (statsmodels t_test; one-sided p from its t and df).
        fit, _ = _ols_crossover(frame, outcome)
        term = "C(treatment)[T.T]"
        lower = fit.t_test(f"{term} = {math.log(0.8)}")
        upper = fit.t_test(f"{term} = {math.log(1.25)}")
        p_tost = max(
            sps.t.sf(float(lower.tvalue.item()), lower.df_denom),
            sps.t.cdf(float(upper.tvalue.item()), upper.df_denom),
        )
        assert table["p_tost"][i] == pytest.approx(p_tost, rel=1e-7)
        assert table["ci90_low"][i] == pytest.approx(ci90.low[i], rel=1e-12)
    assert (result.n_sequence_1[2], result.n_sequence_2[2]) == (sizes[0], sizes[1] - 1)


def test_crossover_reference_swaps_the_ratio_and_band_class_follows_the_90_percent_ci():
    frame = simulated_crossover(4)
    roles = dict(subject="subject", period="period", sequence="sequence", treatment="treatment")
    forward = paired.crossover_2x2(frame, outcomes=["x", "y"], reference="R", **roles)
    backward = paired.crossover_2x2(frame, outcomes=["x", "y"], reference="T", **roles)
    assert backward.design.sequences == ("TR", "RT")
    np.testing.assert_allclose(forward.ratio, 1 / backward.ratio, rtol=1e-12)
    np.testing.assert_allclose(forward.within_cv, backward.within_cv, rtol=1e-12)
    inner = forward.ratio_interval(0.90)
    inside = (inner.low >= 0.8) & (inner.high <= 1.25)
    excludes_one = (forward.test.ratio_ci[0] > 1) | (forward.test.ratio_ci[1] < 1)
    expected = np.where(
        excludes_one,
        np.where(inside, "minor-difference", "different"),
        np.where(inside, "equivalent", "inconclusive"),
    )
    assert forward.band_class().tolist() == expected.tolist()


def _design(rows: list[tuple[str, str, str, str]]) -> pl.DataFrame:
    return pl.DataFrame(
        [(*row, 1.0 + i) for i, row in enumerate(rows)],
        schema=["subject", "sequence", "period", "treatment", "v"],
        orient="row",
    )


GOOD = [
    ("s1", "RT", "1", "R"),
    ("s1", "RT", "2", "T"),
    ("s2", "TR", "1", "T"),
    ("s2", "TR", "2", "R"),
    ("s3", "RT", "1", "R"),
    ("s3", "RT", "2", "T"),
]

BAD_DESIGNS = {
    "3 periods": (GOOD + [("s1", "RT", "3", "R")], r"has 3 periods \('1', '2', '3'\)"),
    "3 sequences": (
        GOOD + [("s4", "RR", "1", "R"), ("s4", "RR", "2", "T")],
        r"has 3 sequences",
    ),
    "3 treatments": (GOOD[:4] + [("s3", "RT", "1", "R"), ("s3", "RT", "2", "X")], "3 treatments"),
    "one period": (GOOD[:5], r"1 subject\(s\) observed in one period only.*subject 's3'"),
    "two rows": (GOOD + [("s3", "RT", "2", "T")], r"several rows in one period.*'s3'"),
    "two sequences": (GOOD[:5] + [("s3", "TR", "2", "T")], "in both sequences"),
    "same treatment": (
        [
            ("s1", "RR", "1", "R"),
            ("s1", "RR", "2", "R"),
            ("s2", "TT", "1", "T"),
            ("s2", "TT", "2", "T"),
        ],
        "sequence 'RR' gives treatment 'R' in both periods",
    ),
    "same order": (
        [
            ("s1", "A", "1", "R"),
            ("s1", "A", "2", "T"),
            ("s2", "B", "1", "R"),
            ("s2", "B", "2", "T"),
        ],
        "both sequences give the same treatment first",
    ),
    "mixed period": (
        GOOD[:4] + [("s3", "RT", "1", "T"), ("s3", "RT", "2", "R")],
        "sequence 'RT' has both treatments in period '1'",
    ),
}


@pytest.mark.parametrize("case", list(BAD_DESIGNS))
def test_designs_that_are_not_2x2_are_refused(case):
    rows, message = BAD_DESIGNS[case]
    with pytest.raises(InputError, match=message):
        paired.crossover_2x2(
            _design(rows),
            subject="subject",
            period="period",
            sequence="sequence",
            treatment="treatment",
            outcomes=["v"],
        )


def test_crossover_bad_columns_and_reference():
    roles = dict(subject="subject", period="period", sequence="sequence", treatment="treatment")
    frame = _design(GOOD)
    with pytest.raises(InputError, match="the period column 'visit' is not in the table"):
        paired.crossover_2x2(frame, outcomes=["v"], **{**roles, "period": "visit"})
    with pytest.raises(InputError, match="1 row.* have no period"):
        paired.crossover_2x2(
            frame.with_columns(
                pl.when(pl.col("v") == 1).then(None).otherwise(pl.col("period")).alias("period")
            ),
            outcomes=["v"],
            **roles,
        )
    with pytest.raises(InputError, match="reference 'X' is not a treatment"):
        paired.crossover_2x2(frame, outcomes=["v"], reference="X", **roles)
    result = paired.crossover_2x2(frame, outcomes=["v"], **roles)
    # 2 + 1 subjects: df 1; the reference defaults to the first treatment in order.
    assert result.design.reference == "R" and result.test.df.tolist() == [1.0]
