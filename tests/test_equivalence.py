"""Tests for foldsift.stats.equivalence: TOST with a ratio band and the band classes.

Sources named beside each check:
- Rule: equivalence when the 90% CI of the ratio of geometric means lies within
  0.80-1.25 (WHO guideline on bioequivalence; US FDA guidance "Statistical Approaches to
  Establishing Bioequivalence", 2001).
- Duality: the two one-sided tests at level alpha reject both nulls exactly when the
  (1 - 2 alpha) CI lies inside the band (Schuirmann 1987, J. Pharmacokin. Biopharm.
  15:657-680).
- Independent library: statsmodels.stats.weightstats.ttost_ind and CompareMeans.
- Published t quantiles: NIST/SEMATECH e-Handbook 1.3.6.7.2, t(0.95; 30) = 1.697.
"""

from __future__ import annotations

import math

import numpy as np
import polars as pl
import pytest
from statsmodels.stats.weightstats import CompareMeans, DescrStatsW, ttost_ind

from foldsift.stats import equivalence
from foldsift.stats.load import load_table
from foldsift.stats.scan import run_scan
from foldsift.stats.ttest import log_t_test

BAND = (0.80, 1.25)


def _tost_one(ratio: float, se: float, df: float, band=BAND):
    p, low, high = equivalence.tost(
        np.array([math.log(ratio)]), np.array([se]), np.array([df]), band
    )
    return float(p[0]), float(low[0]), float(high[0])


@pytest.mark.parametrize(
    ("ratio", "se", "inside"),
    [
        (1.00, 0.05, True),  # clearly inside: about 0.92-1.09
        (1.05, 0.04, True),
        (1.60, 0.05, False),  # clearly outside: about 1.47-1.74
        (0.55, 0.06, False),
        (1.20, 0.05, False),  # straddles 1.25: about 1.10-1.31
        (0.84, 0.05, False),  # straddles 0.80: about 0.77-0.92
        (1.00, 0.20, False),  # wider than the band on both sides
    ],
)
def test_ninety_percent_ci_inside_band_rule(ratio, se, inside):
    """The 90% CI with df 30 is exp(log R -/+ 1.697 se) (NIST t table, 3 decimals, so the
    bounds agree to 0.0005 se on the log scale); equivalence (p_tost <= 0.05) holds iff
    that CI lies within 0.80-1.25 (WHO / FDA 2001 rule)."""
    p, low, high = _tost_one(ratio, se, 30)
    tolerance = 0.0005 * se * 1.01
    assert math.log(low) == pytest.approx(math.log(ratio) - 1.697 * se, abs=tolerance)
    assert math.log(high) == pytest.approx(math.log(ratio) + 1.697 * se, abs=tolerance)
    assert (BAND[0] <= low and high <= BAND[1]) is inside
    assert (p <= 0.05) is inside


def test_tost_duality_with_ci_on_many_cases():
    """p_tost <= alpha exactly when the (1 - 2 alpha) CI is inside the band (Schuirmann
    1987), over 20,000 random comparisons and two alphas and bands."""
    rng = np.random.default_rng(1987)
    size = 20_000
    difference = rng.normal(0, 0.3, size)
    se = rng.uniform(0.01, 0.3, size)
    df = rng.uniform(2, 200, size)
    for band in (BAND, (0.9, 1.11), (0.5, 3.0)):
        for alpha in (0.05, 0.10):
            p, low, high = equivalence.tost(difference, se, df, band, alpha=alpha)
            inside = (low >= band[0]) & (high <= band[1])
            assert 0 < inside.sum() < size  # both outcomes occur, so the check has teeth
            np.testing.assert_array_equal(p <= alpha, inside)


@pytest.mark.parametrize(
    ("shift", "sd_a", "sd_b", "n_a", "n_b"),
    [(0.0, 0.2, 0.25, 20, 24), (0.15, 0.3, 0.3, 12, 30), (-0.2, 0.5, 0.2, 40, 9)],
)
def test_tost_matches_statsmodels_on_logs(shift, sd_a, sd_b, n_a, n_b):
    """Welch on logs then TOST equals statsmodels' ttost_ind(usevar='unequal') with
    bounds log 0.8 and log 1.25, and the 90% CI equals CompareMeans.tconfint_diff
    (alpha 0.10, unequal variances) exponentiated (statsmodels: independent library)."""
    rng = np.random.default_rng(int(1000 * (shift + 1)) + n_a)
    log_a = np.log(rng.lognormal(1.0, sd_a, n_a))
    log_b = np.log(rng.lognormal(1.0 + shift, sd_b, n_b))
    summary = [
        (np.array([x.size]), np.array([x.mean()]), np.array([((x - x.mean()) ** 2).sum()]))
        for x in (log_a, log_b)
    ]
    test = log_t_test(*summary[0], *summary[1], test="welch")
    p, low, high = equivalence.tost(test.difference, test.standard_error, test.df, BAND)
    expected_p = ttost_ind(log_b, log_a, math.log(0.8), math.log(1.25), usevar="unequal")[0]
    assert float(p[0]) == pytest.approx(expected_p, rel=1e-9)
    compare = CompareMeans(DescrStatsW(log_b), DescrStatsW(log_a))
    expected_ci = np.exp(compare.tconfint_diff(alpha=0.10, usevar="unequal"))
    np.testing.assert_allclose([low[0], high[0]], expected_ci, rtol=1e-10)


def test_run_scan_tost_and_class_against_statsmodels():
    """Through run_scan: two groups with a tiny true difference and many values are
    classed 'equivalent'; p_tost and the 90% CI agree with statsmodels on the logs."""
    rng = np.random.default_rng(2001)
    a = rng.lognormal(2.0, 0.15, 40)
    b = rng.lognormal(2.0, 0.15, 40)
    c = a * 1.6  # the same spread, 1.6 times higher: a difference outside the band
    frame = pl.DataFrame(
        {"arm": ["ref"] * 40 + ["test"] * 40 + ["zhigh"] * 40, "auc": np.concatenate([a, b, c])}
    )
    table = load_table(frame=frame, groupings=["arm"], outcomes=["auc"])
    rows = {
        (r["level_a"], r["level_b"]): r for r in run_scan(table).comparisons.iter_rows(named=True)
    }
    row = rows[("ref", "test")]
    expected_p = ttost_ind(np.log(b), np.log(a), math.log(0.8), math.log(1.25), usevar="unequal")[0]
    assert row["p_tost"] == pytest.approx(expected_p, rel=1e-9)
    compare = CompareMeans(DescrStatsW(np.log(b)), DescrStatsW(np.log(a)))
    expected_ci = np.exp(compare.tconfint_diff(alpha=0.10, usevar="unequal"))
    np.testing.assert_allclose([row["tost_ci_low"], row["tost_ci_high"]], expected_ci, rtol=1e-9)
    assert row["p_tost"] <= 0.05 and row["band_class"] == "equivalent"
    assert rows[("ref", "zhigh")]["band_class"] == "different"


def _classes(ci, tost, band=BAND):
    ci = np.array(ci, dtype=float)
    tost = np.array(tost, dtype=float)
    return equivalence.band_class(ci[:, 0], ci[:, 1], tost[:, 0], tost[:, 1], band).tolist()


def test_band_class_on_constructed_intervals():
    """The four classes by their definitions (BAND_CLASSES): whether the CI excludes 1,
    crossed with whether the 90% CI lies inside the band; not computable -> ''."""
    ci = [(1.05, 1.15), (0.90, 1.10), (1.30, 1.60), (0.70, 1.40), (0.60, 0.95), (np.nan, 1.2)]
    tost = [(1.06, 1.14), (0.92, 1.08), (1.33, 1.55), (0.75, 1.30), (0.63, 0.91), (0.9, 1.1)]
    assert _classes(ci, tost) == [
        "minor-difference",
        "equivalent",
        "different",
        "inconclusive",
        "different",
        "",
    ]
    assert set(equivalence.BAND_CLASSES) == {
        "different",
        "minor-difference",
        "equivalent",
        "inconclusive",
    }


def test_band_class_edges_and_other_band():
    """A 90% CI that touches the band limits counts as inside: the guidance asks for the
    interval to lie within 80.00-125.00% (limits included; from memory of the EMA/WHO
    wording). A narrower band (0.90, 1.11) changes 'equivalent' to 'inconclusive'."""
    assert _classes([(0.78, 1.27)], [(0.80, 1.25)]) == ["equivalent"]
    assert _classes([(0.78, 1.27)], [(0.7999, 1.25)]) == ["inconclusive"]
    assert _classes([(0.88, 1.12)], [(0.90, 1.10)]) == ["equivalent"]
    assert _classes([(0.88, 1.12)], [(0.90, 1.10)], band=(0.9, 1.11)) == ["equivalent"]
    assert _classes([(0.85, 1.15)], [(0.87, 1.13)]) == ["equivalent"]
    assert _classes([(0.85, 1.15)], [(0.87, 1.13)], band=(0.9, 1.11)) == ["inconclusive"]


@pytest.mark.parametrize(
    ("text", "expected"),
    [("0.80,1.25", (0.80, 1.25)), (" 0.9 , 1.1 ", (0.9, 1.1)), ("0.5,2", (0.5, 2.0))],
)
def test_parse_band_accepts_valid(text, expected):
    """A band is two positive ratios LOW < 1 < HIGH (a ratio band around no change, as in
    the 0.80-1.25 rule)."""
    assert equivalence.parse_band(text) == pytest.approx(expected)


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("1.25,0.80", "LOW must be below HIGH"),
        ("1,1", "LOW must be below HIGH"),
        ("0,1.25", "positive"),
        ("-0.8,1.25", "positive"),
        ("0.8,inf", "positive"),
        ("nan,1.25", "positive"),
        ("low,high", "must be numbers"),
        ("0.8;1.25", "LOW,HIGH"),
        ("0.8", "LOW,HIGH"),
        ("0.8,1.25,2", "LOW,HIGH"),
        ("1.05,1.25", "contain 1"),
        ("0.5,0.95", "contain 1"),
    ],
)
def test_parse_band_rejects_invalid(text, message):
    """Ratios must be positive numbers, LOW below HIGH, and the band must contain 1."""
    with pytest.raises(ValueError, match=message):
        equivalence.parse_band(text)


def test_tost_rejects_invalid_band():
    with pytest.raises(ValueError, match="contain 1"):
        equivalence.tost(np.array([0.0]), np.array([0.1]), np.array([10.0]), (1.1, 1.3))
