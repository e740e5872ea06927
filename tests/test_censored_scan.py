"""Censored entries through the whole scan (run_scan, summary tables, warnings, sentences).

Every table here is simulated with a fixed seed: lognormal values, each row given one of a
few detection limits, written as text cells (``<0.5`` below a limit, ``>8`` above the
range, plain numbers otherwise) exactly as a laboratory file holds them. The reference
figures are computed from those same cells, read back here with ``float`` (not by
foldsift's reader), by libraries outside the project:

* lifelines (test-only): ``LogNormalFitter.fit_left_censoring`` and
  ``fit_interval_censoring`` (mu_, sigma_ and ``variance_matrix_``, the inverse observed
  information), ``LogNormalAFTFitter.fit_left_censoring`` (a common sigma and a 0/1 group
  covariate on mu) and ``KaplanMeierFitter`` (product-limit median on flipped data). Its
  optimiser is run with tight tolerances (``TIGHT``), so that its optimum agrees with an
  exact one to about 1e-10; the comparisons below allow 1e-7.
* scipy: ``stats.t`` (quantile and tail of Student's t), ``stats.ttest_ind`` with its
  ``confidence_interval`` (Welch's and the pooled t-test on logs).
* numpy: means, variances and medians of data without censoring.

The rule that turns two lifelines fits into a comparison is the one the project states for
``--censored mle`` (stats/censored.py): d = mu_b - mu_a; each group's variance of mu is its
inverse observed information times n / (n - 1) (the sample variance of the logs over n for
a group without censoring); SE^2 is their sum; df = SE^4 / sum(v_i^2 / (n_i - 1)); the CI is
d +- t(df) SE and the ratio exp(d). The method itself (censored maximum likelihood, the
Kaplan–Meier median of flipped data, substitution biasing comparisons whose groups have
different limits) is that of Helsel, Statistics for Censored Environmental Data Using
Minitab and R (2012), and the US EPA Unified Guidance (2009), ch. 15, from memory.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import polars as pl
import pytest
from scipy import stats as sps

from foldsift.stats import censored
from foldsift.stats.columns import comparison_row
from foldsift.stats.load import load_table
from foldsift.stats.policy import ValuePolicy
from foldsift.stats.scan import Reference, ScanResult, ScanSettings, run_scan
from foldsift.stats.sentence import finding
from foldsift.stats.summary_input import scan_summary_table

lifelines = pytest.importorskip("lifelines")

#: L-BFGS-B options for lifelines' univariate fitters (its default stops near 1e-6).
TIGHT = {"gtol": 1e-12, "ftol": 1e-15, "maxiter": 2000}
#: BFGS options for lifelines' AFT regression fitter.
TIGHT_AFT = {"gtol": 1e-10}
#: Agreement required with a lifelines fit (its optimiser is numerical).
REL = 1e-7


# -- simulated tables ----------------------------------------------------------------------


@dataclass(frozen=True)
class Entries:
    """One group's entries as numbers: the value, or the limit where ``left`` (below it) or
    ``right`` (above it) is set."""

    values: np.ndarray
    left: np.ndarray
    right: np.ndarray

    @property
    def censored(self) -> np.ndarray:
        return self.left | self.right

    def scaled(self, k: float) -> Entries:
        return Entries(self.values * k, self.left, self.right)


def read_cells(cells: list[str]) -> Entries:
    """The reference's own reading of the cells (independent of foldsift's reader)."""
    return Entries(
        values=np.array([float(cell.lstrip("<>")) for cell in cells]),
        left=np.array([cell.startswith("<") for cell in cells]),
        right=np.array([cell.startswith(">") for cell in cells]),
    )


def write_cells(entries: Entries) -> list[str]:
    """Text cells holding exactly these numbers (``repr`` round-trips a float)."""
    texts = [repr(float(value)) for value in entries.values]
    return [
        f"<{text}" if left else f">{text}" if right else text
        for text, left, right in zip(texts, entries.left, entries.right, strict=True)
    ]


def simulate_cells(
    rng: np.random.Generator,
    n: int,
    mu: float,
    sigma: float,
    limits: list[float],
    top: float | None = None,
) -> list[str]:
    """Lognormal entries, each row measured against one of ``limits`` (drawn per row) and,
    with ``top``, reported as ``>top`` above it; detected values to 4 decimals."""
    x = np.exp(rng.normal(mu, sigma, n))
    limit = rng.choice(limits, n)
    cells = []
    for value, row_limit in zip(x, limit, strict=True):
        if value < row_limit:
            cells.append(f"<{row_limit:g}")
        elif top is not None and value > top:
            cells.append(f">{top:g}")
        else:
            cells.append(f"{value:.4f}")
    return cells


def table_of(groups: dict[tuple[str, str], list[str]], grouping: str = "site"):
    """A wide table (one grouping, one column per outcome) from cells per (level, outcome);
    every outcome of a level has the same number of rows."""
    levels = list(dict.fromkeys(level for level, _ in groups))
    outcomes = list(dict.fromkeys(outcome for _, outcome in groups))
    columns: dict[str, list[str]] = {grouping: [], **{outcome: [] for outcome in outcomes}}
    for level in levels:
        n = len(groups[(level, outcomes[0])])
        columns[grouping] += [level] * n
        for outcome in outcomes:
            columns[outcome] += groups[(level, outcome)]
    return load_table(frame=pl.DataFrame(columns), groupings=[grouping], outcomes=outcomes)


def rows_of(result: ScanResult) -> list[dict]:
    return list(result.comparisons.iter_rows(named=True))


def row_for(result: ScanResult, level_a: str, level_b: str, outcome: str) -> dict:
    (row,) = [
        row
        for row in rows_of(result)
        if (row["level_a"], row["level_b"], row["outcome"]) == (level_a, level_b, outcome)
    ]
    return row


# -- references ----------------------------------------------------------------------------


@dataclass(frozen=True)
class GroupReference:
    mu: float
    sigma: float
    variance: float  # the variance of mu the comparison uses
    n: int


def lifelines_group(entries: Entries) -> GroupReference:
    """A group's figures from lifelines (censored) or numpy (no censoring)."""
    n = entries.values.size
    logs = np.log(entries.values)
    if not entries.censored.any():
        # numpy; the Welch t-test's s^2 / n (NIST/SEMATECH e-Handbook 1.3.5.3)
        return GroupReference(logs.mean(), logs.std(ddof=1), logs.var(ddof=1) / n, n)
    fitter = lifelines.LogNormalFitter()
    if entries.right.any():
        lower = np.where(entries.left, 0.0, entries.values)
        upper = np.where(entries.right, np.inf, entries.values)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # lifelines warns about the bound 0
            fitter.fit_interval_censoring(lower, upper, fit_options=TIGHT)
    else:
        fitter.fit_left_censoring(entries.values, ~entries.left, fit_options=TIGHT)
    information_inverse = fitter.variance_matrix_.loc["mu_", "mu_"]
    return GroupReference(fitter.mu_, fitter.sigma_, information_inverse * n / (n - 1), n)


def t_answer(d: float, se: float, df: float, confidence: float = 0.95) -> dict[str, float]:
    """Ratio, CI and two-sided p from d, its SE and Student's t with df (scipy.stats.t)."""
    q = sps.t.ppf(0.5 + confidence / 2, df)
    return {
        "ratio": math.exp(d),
        "ci_low": math.exp(d - q * se),
        "ci_high": math.exp(d + q * se),
        "p_value": 2 * sps.t.sf(abs(d) / se, df),
        "df": df,
        "se_log": se,
    }


def welch_reference(a: GroupReference, b: GroupReference) -> dict[str, float]:
    """The stated comparison rule applied to two reference fits."""
    se2 = a.variance + b.variance
    df = se2**2 / (a.variance**2 / (a.n - 1) + b.variance**2 / (b.n - 1))
    return t_answer(b.mu - a.mu, math.sqrt(se2), df)


def scipy_welch_on_logs(logs_a: np.ndarray, logs_b: np.ndarray) -> dict[str, float]:
    """scipy.stats.ttest_ind(equal_var=False) on logs; the ratio is exp of the difference of
    the mean logs (numpy) and the CI scipy's confidence_interval, exponentiated."""
    result = sps.ttest_ind(logs_b, logs_a, equal_var=False)
    interval = result.confidence_interval(0.95)
    return {
        "ratio": math.exp(logs_b.mean() - logs_a.mean()),
        "ci_low": math.exp(interval.low),
        "ci_high": math.exp(interval.high),
        "p_value": result.pvalue,
        "df": result.df,
    }


def assert_matches(row: dict, expected: dict[str, float], rel: float, prefix: str = "") -> None:
    for name, value in expected.items():
        assert row[prefix + name] == pytest.approx(value, rel=rel), prefix + name


def excludes_one(low: float, high: float) -> bool:
    return low > 1 or high < 1


# -- 1. the default comparison against lifelines ---------------------------------------------

LEVELS = {"north": (0.6, 0.8, 30), "south": (1.0, 0.9, 25), "west": (0.9, 0.7, 35)}
LIMITS = {"zinc": [0.8, 1.2, 2.0], "lead": [0.7, 1.2, 1.8]}


@pytest.fixture(scope="module")
def three_sites() -> dict[tuple[str, str], list[str]]:
    """Three levels × two outcomes, three limits per outcome drawn per row (seed 2024)."""
    rng = np.random.default_rng(2024)
    return {
        (level, outcome): simulate_cells(rng, n, mu, sigma, limits)
        for level, (mu, sigma, n) in LEVELS.items()
        for outcome, limits in LIMITS.items()
    }


@pytest.fixture(scope="module")
def three_sites_scan(three_sites) -> ScanResult:
    return run_scan(table_of(three_sites))


@pytest.fixture(scope="module")
def three_sites_fits(three_sites) -> dict[tuple[str, str], GroupReference]:
    return {key: lifelines_group(read_cells(cells)) for key, cells in three_sites.items()}


def test_censored_ml_comparisons_match_lifelines_fits(
    three_sites, three_sites_scan, three_sites_fits
):
    """Every comparison of the scan (3 levels × 2 outcomes, 10–40% censored at three limits
    per outcome): ratio, CI, p, df and SE equal the stated rule applied to lifelines'
    LogNormalFitter.fit_left_censoring per group (mu_, variance_matrix_) with scipy.stats.t
    (lifelines and scipy, independent; 1e-7 for lifelines' optimiser)."""
    shares = [read_cells(cells).left.mean() for cells in three_sites.values()]
    assert all(0.1 <= share <= 0.4 for share in shares), shares
    rows = rows_of(three_sites_scan)
    assert len(rows) == 6
    for row in rows:
        a = three_sites_fits[(row["level_a"], row["outcome"])]
        b = three_sites_fits[(row["level_b"], row["outcome"])]
        assert row["method"] == "censored ML"
        assert_matches(row, welch_reference(a, b), rel=REL)
        # the per-group figures shown beside the comparison: the fitted SD of the logs
        assert row["sd_log_a"] == pytest.approx(a.sigma, rel=REL)
        assert row["sd_log_b"] == pytest.approx(b.sigma, rel=REL)
        assert row["gm_b"] == pytest.approx(math.exp(b.mu), rel=REL)


# -- 2. entries above the range --------------------------------------------------------------


def test_entries_above_the_range_are_right_censored_like_lifelines_interval_fit():
    """'>8' entries under mle: each group's fit (mean and SD of the logs, variance of the
    mean) and the comparison equal lifelines' LogNormalFitter.fit_interval_censoring with
    (0, L] below a limit, [U, inf) above the range and [x, x] for a detected value, combined
    by the stated rule with scipy.stats.t (lifelines, scipy; 1e-7)."""
    rng = np.random.default_rng(7)
    cells = {
        ("a", "iron"): simulate_cells(rng, 30, 1.0, 0.8, [1.0, 2.0], top=8.0),
        ("b", "iron"): simulate_cells(rng, 30, 1.5, 0.8, [1.0, 2.0], top=8.0),
    }
    entries = {level: read_cells(group) for (level, _), group in cells.items()}
    assert entries["b"].right.sum() >= 3 and entries["b"].left.sum() >= 3
    result = run_scan(table_of(cells))
    fits = {level: lifelines_group(group) for level, group in entries.items()}
    summaries = {row["level"]: row for row in result.summaries.iter_rows(named=True)}
    for level, fit in fits.items():
        got = summaries[level]
        assert got["n"] == entries[level].values.size
        assert got["n_right"] == entries[level].right.sum()
        assert got["n_left"] == entries[level].left.sum()
        assert got["mean_log"] == pytest.approx(fit.mu, rel=REL)
        assert got["fit_sd_log"] == pytest.approx(fit.sigma, rel=REL)
        assert got["fit_var_mean_log"] == pytest.approx(fit.variance, rel=REL)
    (row,) = rows_of(result)
    assert row["method"] == "censored ML"
    assert (row["n_right_a"], row["n_right_b"]) == (
        entries["a"].right.sum(),
        entries["b"].right.sum(),
    )
    assert_matches(row, welch_reference(fits["a"], fits["b"]), rel=REL)


# -- 3. --test pooled --------------------------------------------------------------------------


def test_pooled_censored_comparison_matches_lifelines_lognormal_aft():
    """--test pooled with left censoring: lifelines' LogNormalAFTFitter.fit_left_censoring
    with a 0/1 covariate for group b on mu (one sigma for both groups) gives d (its
    coefficient) and the ML SE of d; the scan's SE is that times sqrt(N / (N - 2)), df is
    N - 2, CI and p from scipy.stats.t (lifelines, scipy; 1e-7)."""
    rng = np.random.default_rng(11)
    cells = {
        ("a", "auc"): simulate_cells(rng, 24, 0.5, 0.8, [0.8, 1.5, 2.5]),
        ("b", "auc"): simulate_cells(rng, 30, 1.0, 0.8, [0.8, 1.5, 2.5]),
    }
    a, b = read_cells(cells[("a", "auc")]), read_cells(cells[("b", "auc")])
    assert a.left.sum() >= 5 and b.left.sum() >= 5
    (row,) = rows_of(run_scan(table_of(cells), ScanSettings(test="pooled")))
    frame = pd.DataFrame(
        {
            "T": np.concatenate([a.values, b.values]),
            "E": ~np.concatenate([a.left, b.left]),
            "b": np.repeat([0, 1], [a.values.size, b.values.size]),
        }
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        aft = lifelines.LogNormalAFTFitter().fit_left_censoring(
            frame, "T", "E", fit_options=TIGHT_AFT
        )
    total = len(frame)
    d = aft.summary.loc[("mu_", "b"), "coef"]
    se = aft.summary.loc[("mu_", "b"), "se(coef)"] * math.sqrt(total / (total - 2))
    assert row["test"] == "pooled" and row["method"] == "censored ML"
    assert row["mean_log_difference"] == pytest.approx(d, rel=REL)
    assert row["df"] == total - 2
    assert_matches(row, t_answer(d, se, total - 2), rel=REL)


# -- 4. the value policies and the method column -----------------------------------------------


@pytest.fixture(scope="module")
def policy_cells() -> dict[tuple[str, str], list[str]]:
    """zinc: levels a and b censored (three limits), c and d without a censored entry;
    copper: no censored entry anywhere (seed 31)."""
    rng = np.random.default_rng(31)
    cells = {}
    for level, mu, n in (("a", 0.4, 20), ("b", 0.9, 22), ("c", 0.7, 18), ("d", 1.1, 21)):
        limits = [0.6, 1.0, 1.4] if level in "ab" else [1e-6]
        cells[(level, "zinc")] = simulate_cells(rng, n, mu, 0.7, limits)
        cells[(level, "copper")] = simulate_cells(rng, n, mu + 2, 0.5, [1e-6])
    return cells


def test_default_method_column_and_mixed_groups(policy_cells):
    """Under the default policy the method is "censored ML" where either group has censored
    entries and "t-test on logs" elsewhere. A censored group against one without censoring
    follows the stated rule (lifelines for the one, numpy's sample variance for the other);
    comparisons without censoring are exactly scipy's Welch t-test on the logs (1e-10)."""
    result = run_scan(table_of(policy_cells))
    assert result.comparisons.height == 12
    for row in rows_of(result):
        a = read_cells(policy_cells[(row["level_a"], row["outcome"])])
        b = read_cells(policy_cells[(row["level_b"], row["outcome"])])
        if a.censored.any() or b.censored.any():
            assert row["method"] == "censored ML"
            expected = welch_reference(lifelines_group(a), lifelines_group(b))
            assert_matches(row, expected, rel=REL)
        else:
            assert row["method"] == "t-test on logs"
            expected = scipy_welch_on_logs(np.log(a.values), np.log(b.values))
            assert_matches(row, expected, rel=1e-10)
    methods = result.comparisons["method"].cast(pl.String).to_list()
    assert methods.count("censored ML") == 5 and methods.count("t-test on logs") == 7


SUBSTITUTES = {
    "exclude": (None, "nondetects left out"),
    "half-dl": (0.5, "DL/2 substituted"),
    "dl-root2": (1 / math.sqrt(2), "DL/sqrt2 substituted"),
}


@pytest.mark.parametrize("policy", list(SUBSTITUTES))
def test_substitution_policies_are_welch_on_the_substituted_logs(policy_cells, policy):
    """--censored exclude / half-dl / dl-root2: every comparison is scipy's
    ttest_ind(equal_var=False) on the logs with the below-limit entries left out, or put at
    DL/2 or DL/sqrt(2) (scipy; 1e-10), and the method column names the treatment where a
    group had censored entries ("t-test on logs" elsewhere)."""
    factor, method = SUBSTITUTES[policy]

    def logs(entries: Entries) -> np.ndarray:
        if factor is None:
            return np.log(entries.values[~entries.left])
        return np.log(np.where(entries.left, entries.values * factor, entries.values))

    result = run_scan(table_of(policy_cells), ScanSettings(policy=ValuePolicy(censored=policy)))
    for row in rows_of(result):
        a = read_cells(policy_cells[(row["level_a"], row["outcome"])])
        b = read_cells(policy_cells[(row["level_b"], row["outcome"])])
        censored_pair = a.left.any() or b.left.any()
        assert row["method"] == (method if censored_pair else "t-test on logs")
        assert_matches(row, scipy_welch_on_logs(logs(a), logs(b)), rel=1e-10)
        assert row["half_dl_ratio"] is None  # the DL/2 answer is shown beside ML answers only
        if policy == "exclude":
            assert row["n_a"] == (~a.left).sum() and row["n_b"] == (~b.left).sum()
        else:
            assert row["n_a"] == a.values.size and row["n_b"] == b.values.size


# -- 5. groups that cannot be fitted -----------------------------------------------------------

UNFITTABLE = {
    # 1 detected value and 2 below the limit (67% censored)
    "one": (["2.0", "<1", "<1"], censored.TOO_FEW_DETECTED),
    # 2 distinct detected values, 9 of 11 below the limit (82%)
    "most": (["2.0", "3.0"] + ["<1"] * 9, censored.TOO_CENSORED),
    # censored entries and detected values all equal
    "flat": (["2.0", "2.0", "2.0", "<1", "<1"], censored.NO_SPREAD),
}


@pytest.mark.parametrize("reference", ["ok", "base"])
def test_groups_that_cannot_be_fitted_give_no_ratio_and_say_why(reference):
    """Against a fittable reference group: one detected value, more than 80% censored, and
    detected values all equal with censoring give no ratio, the not-fitted warning, the
    reason on the b side and a sentence saying they cannot be compared; nothing is raised.
    (The module's stated rules: two distinct detected values bound the likelihood; the 80%
    limit is Helsel 2012, from memory, and common practice.) The reference level is named
    so that it sorts after some unfitted levels ("ok") or before all of them ("base"): the
    per-group reasons are then a column that starts with a fitted group or with one that is
    not."""
    rng = np.random.default_rng(3)
    cells = {(reference, "zinc"): simulate_cells(rng, 15, 1.0, 0.7, [1.0])}
    cells.update({(level, "zinc"): group for level, (group, _) in UNFITTABLE.items()})
    table = table_of(cells)
    settings = ScanSettings(pairs="reference", reference=(Reference.of(reference),))
    result = run_scan(table, settings)
    assert result.comparisons.height == len(UNFITTABLE)
    for index in range(result.comparisons.height):
        row = comparison_row(result.comparisons, index)
        assert row["level_a"] == reference and row["fit_reason_a"] is None
        assert row["fit_reason_b"] == UNFITTABLE[row["level_b"]][1]
        assert row["ratio"] is None and row["ci_low"] is None and row["p_value"] is None
        assert "not-fitted" in row["warnings"]
        sentence = finding(row)
        assert "cannot be compared" in sentence and row["fit_reason_b"] in sentence


# -- 6. censoring-sensitive ------------------------------------------------------------------


def test_censoring_sensitive_when_dl2_and_ml_disagree():
    """Equal distributions; group b measured with a limit of 1.5 (about 60% censored), group
    a with 0.2. The ML CI (lifelines + the stated rule) includes 1 and the DL/2 one (scipy
    Welch on substituted logs) excludes it, so the scan warns censoring-sensitive and shows
    the DL/2 ratio and CI equal to scipy's (1e-10). Substitution biases comparisons whose
    groups have different limits: Helsel 2012 and EPA 2009 ch. 15, from memory."""
    rng = np.random.default_rng(8)
    cells = {
        ("a", "zinc"): simulate_cells(rng, 40, 0.0, 1.0, [0.2]),
        ("b", "zinc"): simulate_cells(rng, 40, 0.0, 1.0, [1.5]),
    }
    a, b = read_cells(cells[("a", "zinc")]), read_cells(cells[("b", "zinc")])
    ml = welch_reference(lifelines_group(a), lifelines_group(b))
    half = scipy_welch_on_logs(
        np.log(np.where(a.left, a.values / 2, a.values)),
        np.log(np.where(b.left, b.values / 2, b.values)),
    )
    # the premise, from the references alone
    assert not excludes_one(ml["ci_low"], ml["ci_high"])
    assert excludes_one(half["ci_low"], half["ci_high"])
    (row,) = rows_of(run_scan(table_of(cells)))
    assert_matches(row, ml, rel=REL)
    assert "censoring-sensitive" in row["warnings"]
    assert row["half_dl_ratio"] == pytest.approx(half["ratio"], rel=1e-10)
    assert row["half_dl_ci_low"] == pytest.approx(half["ci_low"], rel=1e-10)
    assert row["half_dl_ci_high"] == pytest.approx(half["ci_high"], rel=1e-10)
    assert "sensitive to the below-detection entries" in finding(row)


def test_equal_limits_and_little_censoring_are_not_censoring_sensitive():
    """Same limit 0.4 in both groups, at most 10 of 80 censored, a true ratio of 3: both answers
    exclude 1 (references as above), no censoring-sensitive warning, and the DL/2 ratio
    beside the ML one is still scipy's Welch on the substituted logs (1e-10)."""
    rng = np.random.default_rng(12)
    cells = {
        ("a", "zinc"): simulate_cells(rng, 40, 0.0, 0.8, [0.4]),
        ("b", "zinc"): simulate_cells(rng, 40, math.log(3), 0.8, [0.4]),
    }
    a, b = read_cells(cells[("a", "zinc")]), read_cells(cells[("b", "zinc")])
    assert 0 < a.left.sum() + b.left.sum() <= 10
    half = scipy_welch_on_logs(
        np.log(np.where(a.left, a.values / 2, a.values)),
        np.log(np.where(b.left, b.values / 2, b.values)),
    )
    (row,) = rows_of(run_scan(table_of(cells)))
    assert excludes_one(row["ci_low"], row["ci_high"])
    assert excludes_one(half["ci_low"], half["ci_high"])
    assert "censoring-sensitive" not in row["warnings"]
    assert row["half_dl_ratio"] == pytest.approx(half["ratio"], rel=1e-10)
    assert row["half_dl_ci_low"] == pytest.approx(half["ci_low"], rel=1e-10)


# -- 7. limits-differ ------------------------------------------------------------------------


@pytest.mark.parametrize(("limit_b", "warned"), [(5.0, True), (1.0, False)])
def test_limits_differ_warning(limit_b, warned):
    """Limits 1 in group a and 5 in group b: limits-differ; the same limit 1 in both: not
    (Helsel 2012 / EPA 2009, from memory: substitution is biased when groups have different
    limits; the factor 2 between median limits is the project's stated rule)."""
    rng = np.random.default_rng(40)
    cells = {
        ("a", "zinc"): simulate_cells(rng, 30, 0.5, 0.8, [1.0]),
        ("b", "zinc"): simulate_cells(rng, 40, 1.5, 1.0, [limit_b]),
    }
    assert all(read_cells(group).left.any() for group in cells.values())
    (row,) = rows_of(run_scan(table_of(cells)))
    assert row["limit_low_a"] == row["limit_high_a"] == 1.0
    assert row["limit_low_b"] == row["limit_high_b"] == limit_b
    assert ("limits-differ" in row["warnings"]) is warned


# -- 8. Kaplan–Meier medians -------------------------------------------------------------------


def lifelines_flipped_median(entries: Entries) -> float:
    """The median of left-censored values: M minus the Kaplan–Meier median of the flipped
    data (M - x, event = detected), read off lifelines' KaplanMeierFitter curve.

    The convention is handled here explicitly. The median is the first time the curve is
    at most one half (lifelines' rule, and R survival's); where the curve equals one half
    exactly, R's survival package (which Helsel's NADA uses; from memory) takes the
    midpoint to the next event time, and lifelines does not. A curve that is one half on
    paper can be 0.5000000000000001 after lifelines' products, so "at most one half" and
    "exactly one half" are read with a tolerance of 1e-9 (lifelines' own
    ``median_survival_time_`` compares without one)."""
    flip = entries.values.max() + 1.0
    km = lifelines.KaplanMeierFitter().fit(flip - entries.values, event_observed=~entries.left)
    curve = km.survival_function_["KM_estimate"]
    reached = np.flatnonzero(curve.to_numpy() <= 0.5 + 1e-9)
    if reached.size == 0:
        return math.nan
    time = curve.index[reached[0]]
    if abs(curve.iloc[reached[0]] - 0.5) <= 1e-9:
        events = km.event_table.index[km.event_table["observed"] > 0].to_numpy()
        later = events[events > time]
        time = (time + later[0]) / 2 if later.size else time
    return flip - time


def test_kaplan_meier_medians_match_lifelines_on_flipped_data(three_sites, three_sites_scan):
    """median_a / median_b of every censored group of the scan equal the Kaplan–Meier median
    of lifelines on the flipped data, flipped back (lifelines; 1e-12)."""
    checked = 0
    for row in rows_of(three_sites_scan):
        for which in ("a", "b"):
            entries = read_cells(three_sites[(row[f"level_{which}"], row["outcome"])])
            assert row[f"median_{which}"] == pytest.approx(
                lifelines_flipped_median(entries), rel=1e-12
            )
            assert row[f"median_at_most_{which}"] is None
            checked += 1
    assert checked == 12


def test_kaplan_meier_median_at_exactly_one_half_and_above_half_censored():
    """Group 'half' (<1, 2, 3, 4, 5, 6): flipped at M = 7, lifelines' curve is one half
    (to rounding) between the event times 3 and 4, so the median is the midpoint 3.5
    (R survival's convention, see ``lifelines_flipped_median``), which is also
    numpy.median of the values with <1 put anywhere below 2. Group 'low' (4 of 7 below 1):
    the flipped curve never reaches one half (lifelines' median is infinite), so the median
    is empty and median_at_most is the limit 1, the bound at most which 4 of the 7 entries
    are known to lie (common practice: report such a median as "<DL")."""
    half_cells = ["<1", "2", "3", "4", "5", "6"]
    low_cells = ["<1", "<1", "<1", "<1", "2", "3", "5"]
    frame = pl.DataFrame({"site": ["half"] * 6 + ["low"] * 7, "zinc": half_cells + low_cells})
    (row,) = rows_of(run_scan(load_table(frame=frame, groupings=["site"], outcomes=["zinc"])))
    assert (row["level_a"], row["level_b"]) == ("half", "low")
    half = read_cells(half_cells)
    km = lifelines.KaplanMeierFitter().fit(7.0 - half.values, event_observed=~half.left)
    assert km.survival_function_["KM_estimate"].loc[3.0] == pytest.approx(0.5, abs=1e-12)
    assert lifelines_flipped_median(half) == pytest.approx(3.5, abs=1e-12)
    assert np.median(np.where(half.left, 0.5, half.values)) == 3.5
    assert row["median_a"] == pytest.approx(3.5, abs=1e-12) and row["median_at_most_a"] is None
    low = read_cells(low_cells)
    km_low = lifelines.KaplanMeierFitter().fit(6.0 - low.values, event_observed=~low.left)
    assert math.isinf(km_low.median_survival_time_)
    assert math.isnan(lifelines_flipped_median(low))
    assert row["median_b"] is None and row["median_at_most_b"] == 1.0


# -- 9. summary tables of censored fits -------------------------------------------------------


@pytest.fixture(scope="module")
def single_limit_cells() -> dict[tuple[str, str], list[str]]:
    """Two groups of 40, one limit each at the 30% quantile of its lognormal (seed 5)."""
    rng = np.random.default_rng(5)
    cells = {}
    for level, mu in (("a", 0.5), ("b", 1.0)):
        limit = round(math.exp(mu + 0.8 * sps.norm.ppf(0.3)), 3)
        cells[(level, "auc")] = simulate_cells(rng, 40, mu, 0.8, [limit])
    return cells


def write_summary(path: Path, cells: dict, with_se: bool) -> Path:
    """A summary CSV from lifelines fits: n counts every entry, mean_log and sd_log are the
    fit's mu_ and sigma_, se_mean_log the square root of its variance_matrix_ entry for mu
    (the fit's standard error of mu)."""
    rows = []
    for (level, outcome), group in cells.items():
        entries = read_cells(group)
        n = entries.values.size
        fitter = lifelines.LogNormalFitter().fit_left_censoring(
            entries.values, ~entries.left, fit_options=TIGHT
        )
        se = math.sqrt(fitter.variance_matrix_.loc["mu_", "mu_"])
        row = {
            "grouping": "site",
            "level": level,
            "outcome": outcome,
            "n": n,
            "n_censored": int(entries.left.sum()),
            "mean_log": fitter.mu_,
            "sd_log": fitter.sigma_,
        }
        if with_se:
            row["se_mean_log"] = se
        rows.append(row)
    pl.DataFrame(rows).write_csv(path)
    return path


def test_summary_table_ratio_matches_the_raw_scan(tmp_path, single_limit_cells):
    """A summary of lifelines fits gives the raw scan's ratio (lifelines mu_; 1e-7)."""
    (raw,) = rows_of(run_scan(table_of(single_limit_cells)))
    path = write_summary(tmp_path / "fits.csv", single_limit_cells, with_se=True)
    (row,) = rows_of(scan_summary_table(path))
    assert row["method"] == "censored ML"
    assert row["ratio"] == pytest.approx(raw["ratio"], rel=REL)
    assert row["mean_log_difference"] == pytest.approx(raw["mean_log_difference"], rel=REL)


def test_summary_table_with_the_fits_se_gives_the_raw_ci_and_p(tmp_path, single_limit_cells):
    """The same summary with the fit's standard error of mean_log (lifelines'
    variance_matrix_) gives the raw scan's CI and p (1e-6): the same fit, the same answer."""
    (raw,) = rows_of(run_scan(table_of(single_limit_cells)))
    path = write_summary(tmp_path / "fits.csv", single_limit_cells, with_se=True)
    (row,) = rows_of(scan_summary_table(path))
    for name in ("ci_low", "ci_high", "p_value", "df", "se_log"):
        assert row[name] == pytest.approx(raw[name], rel=1e-6), name


def test_summary_table_without_se_uses_an_approximation_close_to_the_raw_one(
    tmp_path, single_limit_cells
):
    """Without se_mean_log the variance of mean_log is the expected-information value for one
    limit at the row's censored share: an approximation (Cohen 1959, from memory), so the SE
    is only within 10% of the raw scan's (inverse observed information) at n = 40 with about
    30% censored at a single limit, and the ratio is the same (lifelines mu_; 1e-7)."""
    shares = [read_cells(group).left.mean() for group in single_limit_cells.values()]
    assert all(0.15 <= share <= 0.45 for share in shares), shares
    (raw,) = rows_of(run_scan(table_of(single_limit_cells)))
    path = write_summary(tmp_path / "fits.csv", single_limit_cells, with_se=False)
    (row,) = rows_of(scan_summary_table(path))
    assert row["ratio"] == pytest.approx(raw["ratio"], rel=REL)
    assert row["se_log"] == pytest.approx(raw["se_log"], rel=0.10)
    assert math.log(row["ci_high"] / row["ci_low"]) == pytest.approx(
        math.log(raw["ci_high"] / raw["ci_low"]), rel=0.10
    )


# -- 10. identities ------------------------------------------------------------------------------


@pytest.mark.parametrize("test", ["welch", "pooled"])
def test_swapping_levels_inverts_ratio_and_ci(three_sites, test):
    """Exchanging the two levels negates d: the ratio becomes its reciprocal, the CI
    (low, high) becomes (1 / high, 1 / low), p is unchanged (common practice: algebra of
    the definitions)."""
    cells = {key: group for key, group in three_sites.items() if key[0] in ("north", "south")}
    forward = run_scan(table_of(cells), ScanSettings(test=test))
    backward = run_scan(
        table_of(cells),
        ScanSettings(test=test, pairs="reference", reference=(Reference.of("south"),)),
    )
    for outcome in LIMITS:
        there = row_for(forward, "north", "south", outcome)
        back = row_for(backward, "south", "north", outcome)
        assert back["method"] == there["method"] == "censored ML"
        assert back["ratio"] == pytest.approx(1 / there["ratio"], rel=1e-9)
        assert back["ci_low"] == pytest.approx(1 / there["ci_high"], rel=1e-9)
        assert back["ci_high"] == pytest.approx(1 / there["ci_low"], rel=1e-9)
        assert back["p_value"] == pytest.approx(there["p_value"], rel=1e-9)


@pytest.mark.parametrize("test", ["welch", "pooled"])
def test_rescaling_one_level_multiplies_the_ratio(three_sites, test):
    """Multiplying every value and limit of level 'south' by k = 4 multiplies the ratio, both
    CI bounds and the DL/2 ratio by 4 and leaves the SE of the log ratio and its df
    unchanged: the censored ML fit is equivariant under a change of scale (a shift of the
    logs moves mu and leaves sigma and the information alone; common practice)."""
    k = 4.0
    base = {key: group for key, group in three_sites.items() if key[0] in ("north", "south")}
    scaled = {
        key: write_cells(read_cells(group).scaled(k)) if key[0] == "south" else group
        for key, group in base.items()
    }
    before = run_scan(table_of(base), ScanSettings(test=test))
    after = run_scan(table_of(scaled), ScanSettings(test=test))
    for outcome in LIMITS:
        one = row_for(before, "north", "south", outcome)
        two = row_for(after, "north", "south", outcome)
        assert two["method"] == "censored ML"
        for name in ("ratio", "ci_low", "ci_high", "half_dl_ratio"):
            assert two[name] == pytest.approx(k * one[name], rel=1e-9), name
        assert two["se_log"] == pytest.approx(one["se_log"], rel=1e-9)
        assert two["df"] == pytest.approx(one["df"], rel=1e-9)


@pytest.mark.parametrize("batch", [1, 3])
def test_censored_figures_by_batches_of_outcomes_equal_all_at_once(monkeypatch, batch):
    """The censored figures are aggregated a few outcomes at a time to bound memory; every
    figure equals the aggregation of all outcomes together (the demo's censored outcomes,
    both groupings; the lifelines agreement of the figures is checked above)."""
    from foldsift.demo.generate import demo_path
    from foldsift.stats import censored_groups

    table = load_table(demo_path())
    together = run_scan(table).summaries
    monkeypatch.setattr(censored_groups, "CENSORED_BATCH", batch)
    batched = run_scan(table).summaries
    assert batched.sort(batched.columns[:5]).equals(together.sort(together.columns[:5]))
    assert together["n_censored"].sum() > 0
