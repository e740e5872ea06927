"""Tests for foldsift.stats.diagnostics (Shapiro-Wilk on logs, named warnings) and for how
run_scan handles groups where nothing can be computed.

Sources named beside each check:
- Shapiro & Wilk (1965), Biometrika 52:591-611, weights of 11 men: W = 0.7888,
  p = 0.0067 (as computed by scipy's Royston algorithm; W ~ 0.79 in the paper, from memory).
- Royston's algorithm AS R94 test values used in scipy's own test suite
  (scipy/stats/tests/test_morestats.py): x1 W = 0.900473, p = 0.042090; x4 W = 0.83467,
  p = 0.000914.
- The scipy.stats.shapiro documentation: n >= 3 needed; above n = 5000 the p-value may not
  be accurate (hence the range 3..5000).
- Thresholds of the warnings (Shapiro p < 0.01, n < 5) are common practice without a
  published source.
- Two-sample t on logs: scipy.stats.ttest_ind(equal_var=False) as the independent library;
  the statistic needs n >= 2 per group and a non-zero standard error (NIST/SEMATECH
  e-Handbook 1.3.5.3 formula).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import polars as pl
import pytest
from scipy import stats as sps

from foldsift.stats import diagnostics, robust
from foldsift.stats.load import load_table
from foldsift.stats.policy import ValuePolicy, apply_policy
from foldsift.stats.scan import run_scan
from foldsift.stats.values import GroupValues, group_specs

WEIGHTS = [148, 154, 158, 160, 161, 162, 166, 170, 182, 195, 236]
X1 = [0.11, 7.87, 4.61, 10.14, 7.95, 3.14, 0.46, 4.43, 0.21, 4.75]
X1 += [0.71, 1.52, 3.24, 0.93, 0.42, 4.97, 9.53, 4.55, 0.47, 6.66]
X4 = [0.139, 0.157, 0.175, 0.256, 0.344, 0.413, 0.503, 0.577, 0.614, 0.655, 0.954, 1.392]
X4 += [1.557, 1.648, 1.690, 1.994, 2.174, 2.206, 3.245, 3.510, 3.571, 4.354, 4.980, 6.084]
X4 += [8.351]


def _table(groups: dict[str, np.ndarray | list[float]]):
    frame = pl.DataFrame(
        {
            "plot": [name for name, values in groups.items() for _ in values],
            "nitrate": np.concatenate([np.asarray(v, dtype=float) for v in groups.values()]),
        }
    )
    return load_table(frame=frame, groupings=["plot"], outcomes=["nitrate"])


def _normality(groups) -> dict[str, tuple[float, float]]:
    table = _table(groups)
    used = apply_policy(table.frame, table.outcomes, ValuePolicy(), table.names)
    values = GroupValues(used, group_specs(table.groupings, None), table.outcomes, table.names)
    result = diagnostics.group_normality(values)
    return {row["level"]: (row["shapiro_w"], row["shapiro_p"]) for row in result.to_dicts()}


def _lognormal_by_scores(n: int, mu: float = 1.0, sd: float = 0.5) -> np.ndarray:
    """Values whose logs are exactly normal scores (Blom 1958 positions), so the logs look
    as normal as n points can."""
    return np.exp(mu + sd * sps.norm.ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25)))


#: foldsift computes Shapiro-Wilk itself (stats/shapiro.py, Royston's AS R94 in double
#: precision) so that a scan needs no scipy.stats; scipy.stats.shapiro wraps the Fortran
#: routine of the same algorithm, which keeps some quantities in single precision (from
#: memory). Agreement found: W within 1e-8 relative, p within 2e-6 relative.
SHAPIRO_TOLERANCE = (1e-8, 1e-5)


@pytest.mark.parametrize("n", [3, 4, 5, 6, 7, 9, 11, 12, 13, 20, 35, 50, 100, 500, 2000, 5000])
def test_shapiro_wilk_agrees_with_scipy_at_every_size(n):
    """W and p of foldsift's AS R94 against scipy.stats.shapiro (an independent
    implementation of the algorithm, Fortran) on normal and lognormal samples, n = 3..5000,
    across the algorithm's branches (n = 3 exact, 4..5, 6..11, 12 and up)."""
    from foldsift.stats.shapiro import shapiro_wilk

    rng = np.random.default_rng(n)
    for sample in (rng.normal(0, 1, n), rng.lognormal(0, 1, n), rng.uniform(0, 1, n)):
        w, p = shapiro_wilk(sample)
        expected = sps.shapiro(sample)
        assert w == pytest.approx(expected.statistic, rel=SHAPIRO_TOLERANCE[0])
        assert p == pytest.approx(expected.pvalue, rel=SHAPIRO_TOLERANCE[1], abs=1e-12)


def test_shapiro_published_values_through_group_normality():
    """exp(values) go in; group_normality takes logs, so W and p are those of the values."""
    got = _normality({"weights": np.exp(WEIGHTS), "x1": np.exp(X1), "x4": np.exp(X4)})
    # Shapiro & Wilk (1965) weights, to the 4 decimals given
    assert got["weights"][0] == pytest.approx(0.7888, abs=5e-5)
    assert got["weights"][1] == pytest.approx(0.0067, abs=5e-5)
    # AS R94 values from scipy's test suite, to the decimals given
    assert got["x1"][0] == pytest.approx(0.900473, abs=5e-7)
    assert got["x1"][1] == pytest.approx(0.042090, abs=5e-7)
    assert got["x4"][0] == pytest.approx(0.83467, abs=5e-6)
    # x4 values are from Royston's paper; the algorithm's own p differs from the printed
    # 0.000914 by about 5e-7, so one unit in the last printed decimal is allowed
    assert got["x4"][1] == pytest.approx(0.000914, abs=1e-6)


def test_shapiro_range_and_no_spread_give_nan():
    """n 3..5000 only (scipy.stats.shapiro docs); inside it the result equals scipy on the
    logs (independent library); a group with all values equal has no W."""
    rng = np.random.default_rng(65)
    groups = {
        "n2": [1.5, 2.5],
        "n3": [1.5, 2.5, 7.0],
        "n5000": rng.lognormal(0, 1, 5000),
        "n5001": rng.lognormal(0, 1, 5001),
        "flat": [4.0] * 12,
    }
    got = _normality(groups)
    assert all(math.isnan(x) for x in got["n2"] + got["n5001"] + got["flat"])
    for name in ("n3", "n5000"):
        expected = sps.shapiro(np.log(np.asarray(groups[name])))
        # AS R94 in double precision against scipy's routine (see SHAPIRO_TOLERANCE)
        assert got[name][0] == pytest.approx(expected.statistic, rel=SHAPIRO_TOLERANCE[0])
        assert got[name][1] == pytest.approx(expected.pvalue, rel=SHAPIRO_TOLERANCE[1])


def _rows(frame: pl.DataFrame) -> dict[tuple[str, str], dict]:
    return {(r["level_a"], r["level_b"]): r for r in frame.iter_rows(named=True)}


def test_log_not_normal_warning_follows_shapiro_threshold():
    """x4 (p = 0.000914 < 0.01) gives 'log-not-normal' to every comparison it is in; x1
    (p = 0.042, above the 0.01 threshold) and two groups of exactly normal logs do not."""
    groups = {
        "normal_a": _lognormal_by_scores(20),
        "normal_b": _lognormal_by_scores(25, mu=1.2),
        "x1": np.exp(X1),
        "x4": np.exp(X4),
    }
    rows = _rows(run_scan(_table(groups)).comparisons)
    for pair, row in rows.items():
        names = diagnostics.explain(row["warnings"])
        assert all(text == diagnostics.WARNINGS[name] for name, text in names)
        assert ("log-not-normal" in row["warnings"]) is ("x4" in pair), pair
    row = rows[("x1", "x4")]
    assert row["shapiro_p_a"] == pytest.approx(0.042090, abs=5e-7)
    assert row["shapiro_p_b"] == pytest.approx(0.000914, abs=1e-6)


def test_scan_with_too_few_and_constant_groups():
    """A 1-value group, a 2-value group and two constant groups: NaN (null) where nothing
    can be computed, each with its reason, and no crash; the rest agree with scipy."""
    spread = _lognormal_by_scores(8)
    groups = {
        "a_one": [3.0],
        "b_two": [2.0, 5.0],
        "c_flat": [5.0] * 6,
        "d_flat": [7.0] * 6,
        "e_spread": spread,
    }
    result = run_scan(_table(groups))
    rows = _rows(result.comparisons)
    assert len(rows) == 10
    for pair, row in rows.items():
        names = row["warnings"]
        if "a_one" in pair:  # fewer than 2 values: no test (too-few)
            assert "too-few" in names
            assert all(row[k] is None for k in ("ratio", "ci_low", "p_value", "p_tost"))
            assert row["band_class"] is None and row["detectable_ratio"] is None
        else:
            assert "too-few" not in names
    flat = rows[("c_flat", "d_flat")]  # both constant: zero standard error (no-spread)
    assert "no-spread" in flat["warnings"]
    assert all(flat[k] is None for k in ("ratio", "ci_low", "ci_high", "p_value", "t"))
    assert flat["shapiro_p_a"] is None and flat["shapiro_p_b"] is None
    assert flat["band_class"] is None and flat["detectable_ratio"] is None
    assert flat["median_ratio"] == pytest.approx(7 / 5)  # medians still exist
    two = rows[("b_two", "e_spread")]  # n = 2: a t-test but no Shapiro-Wilk (n < 3)
    assert {"small-n"} <= set(two["warnings"])
    assert two["shapiro_p_a"] is None and two["shapiro_w_a"] is None
    expected_p = sps.shapiro(np.log(spread)).pvalue
    assert two["shapiro_p_b"] == pytest.approx(expected_p, rel=SHAPIRO_TOLERANCE[1])
    expected = sps.ttest_ind(np.log(spread), np.log([2.0, 5.0]), equal_var=False)
    assert two["p_value"] == pytest.approx(expected.pvalue, rel=1e-10)
    # one constant group against a spread one: the Welch SE is still positive
    mixed = rows[("c_flat", "e_spread")]
    with warnings.catch_warnings():  # scipy warns that one sample is constant; it is, by design
        warnings.simplefilter("ignore", RuntimeWarning)
        expected = sps.ttest_ind(np.log(spread), np.log([5.0] * 6), equal_var=False)
    assert mixed["p_value"] == pytest.approx(expected.pvalue, rel=1e-10)
    assert "no-spread" not in mixed["warnings"]

    out = robust.robust_all(result, resamples=99)
    robust_rows = _rows(out)
    for pair, row in robust_rows.items():
        if "a_one" in pair:
            assert all(row[name] is None for name in robust.ROBUST_COLUMNS), pair
        else:
            assert row["mann_whitney_p"] is not None
    assert robust_rows[("c_flat", "d_flat")]["hl_ratio"] == pytest.approx(7 / 5)


def test_spread_test_matches_f_distribution():
    """Two-sided F-test for equal variances: 2 min(F_cdf, F_sf) of (s_b/s_a)^2 with
    (n_b - 1, n_a - 1) df (scipy.stats.f, independent library; NIST e-Handbook 1.3.5.9,
    section number from memory), from the variance ratio of two raw samples."""
    rng = np.random.default_rng(9)
    x, y = rng.normal(0, 1.0, 15), rng.normal(0, 1.8, 22)
    f = np.var(y, ddof=1) / np.var(x, ddof=1)
    cdf = sps.f.cdf(f, y.size - 1, x.size - 1)
    expected = 2 * min(cdf, 1 - cdf)
    got = diagnostics.spread_test(
        np.array([x.std(ddof=1)]), np.array([15.0]), np.array([y.std(ddof=1)]), np.array([22.0])
    )
    assert float(got[0]) == pytest.approx(expected, rel=1e-10)
