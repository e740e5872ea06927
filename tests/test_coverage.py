"""Seeded Monte Carlo checks with known truth: coverage of the log-scale intervals and the
rejection rate at the detectable ratio.

Truth: for lognormal groups log(Y) ~ N(mu, sigma^2) the median is exp(mu) (NIST/SEMATECH
e-Handbook 8.1.6.4), so the true ratio of medians of b over a is exp(mu_b - mu_a).

Tolerances: a 95% interval covers in a fraction p = 0.95 of repetitions; with R repetitions
the estimate has binomial SE sqrt(p (1 - p) / R). "Within 3 SEs" is common practice for
Monte Carlo checks, not a published rule. Every simulation uses a fixed seed, so a run is
reproducible; the tolerance is what a correct method would meet for most seeds.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from foldsift.stats import precision, robust
from foldsift.stats.ttest import log_t_test

WELCH_REPS = 4000
WELCH_TOL = 3 * math.sqrt(0.95 * 0.05 / WELCH_REPS)  # 3 binomial SEs, about 0.0103


def _log_summaries(rng: np.random.Generator, mu: float, sigma: float, n: int, reps: int):
    """Count, mean and sum of squared deviations of the logs of `reps` lognormal samples."""
    logs = np.log(rng.lognormal(mean=mu, sigma=sigma, size=(reps, n)))
    mean = logs.mean(axis=1)
    ss = ((logs - mean[:, None]) ** 2).sum(axis=1)
    return np.full(reps, float(n)), mean, ss


def _coverage(test: str, n_a: int, n_b: int, sd_a: float, sd_b: float, seed: int) -> float:
    rng = np.random.default_rng(seed)
    mu_a, mu_b = 1.3, 0.6
    na, ma, sa = _log_summaries(rng, mu_a, sd_a, n_a, WELCH_REPS)
    nb, mb, sb = _log_summaries(rng, mu_b, sd_b, n_b, WELCH_REPS)
    low, high = log_t_test(na, ma, sa, nb, mb, sb, test=test, confidence=0.95).ratio_ci
    truth = math.exp(mu_b - mu_a)  # ratio of lognormal medians (NIST e-Handbook 8.1.6.4)
    return float(np.mean((low <= truth) & (truth <= high)))


@pytest.mark.parametrize(
    ("n_a", "n_b", "sd_a", "sd_b"),
    [
        (5, 5, 1.0, 1.0),
        (10, 10, 0.5, 0.5),
        (20, 20, 0.8, 0.8),
        (50, 50, 1.2, 1.2),
        (5, 5, 0.3, 1.2),
        (10, 10, 1.0, 0.4),
        (20, 20, 0.5, 1.5),
        (50, 50, 1.0, 0.3),
        (5, 20, 1.0, 0.4),  # small group with the larger spread: the hard case for pooled t
        (50, 10, 0.4, 1.0),
        (20, 5, 0.7, 0.7),
        (10, 50, 1.5, 0.5),
    ],
)
def test_welch_log_ci_covers_true_median_ratio(n_a, n_b, sd_a, sd_b):
    """Welch's interval is approximately exact for normal logs with unequal variances
    (Welch 1947, Biometrika 34:28-35; NIST e-Handbook 1.3.5.3): coverage within 3 binomial
    SEs of 95% over 4000 seeded repetitions."""
    seed = 1000 * n_a + n_b + int(100 * sd_a) + int(10 * sd_b)
    coverage = _coverage("welch", n_a, n_b, sd_a, sd_b, seed)
    assert abs(coverage - 0.95) <= WELCH_TOL, coverage


@pytest.mark.parametrize(("n_a", "n_b", "sd"), [(5, 5, 1.0), (10, 30, 0.6), (50, 50, 0.4)])
def test_pooled_log_ci_covers_with_equal_spreads(n_a, n_b, sd):
    """With equal log-SDs the pooled t interval is exact (Student's t; NIST e-Handbook
    1.3.5.3), so its coverage is 95% within 3 binomial SEs (4000 repetitions)."""
    coverage = _coverage("pooled", n_a, n_b, sd, sd, seed=7 * n_a + n_b)
    assert abs(coverage - 0.95) <= WELCH_TOL, coverage


def test_pooled_log_ci_undercovers_when_small_group_is_more_spread():
    """Known failure of the pooled interval (the Behrens-Fisher problem; e.g. Welch 1938,
    Biometrika 29:350-362, from memory): with n 5 vs 20 and the larger SD in the small
    group its coverage falls clearly below 95%, while Welch's (checked above) does not. This
    guards that test='pooled' and test='welch' really differ."""
    coverage = _coverage("pooled", 5, 20, 1.0, 0.3, seed=4242)
    assert coverage < 0.95 - WELCH_TOL, coverage


BOOT_REPS = 300  # repetitions of the whole bootstrap, each with BOOT_RESAMPLES resamples
BOOT_RESAMPLES = 999  # below the default 2000 (which is for users) to keep the test fast


@pytest.mark.parametrize(
    ("n_a", "n_b", "sd_a", "sd_b"),
    [(30, 30, 1.0, 1.0), (30, 30, 0.5, 1.2), (31, 29, 0.8, 0.8)],
)
def test_bca_median_ratio_ci_coverage_at_n30(n_a, n_b, sd_a, sd_b):
    """The BCa interval (Efron & Tibshirani 1993, ch. 14) for the ratio of sample medians
    covers the true median ratio exp(mu_b - mu_a) at least 90% of the time at n = 30
    (300 seeded repetitions, 999 resamples each). 90% is a floor for a nominal 95%
    bootstrap interval of a median, chosen here as common practice rather than from a
    published bound: 95% minus about 4 binomial SEs (SE 0.0126 at 300 repetitions).

    Where the log-SDs are equal the logs differ by a pure shift, so the Hodges-Lehmann
    interval (distribution-free under a shift; Hollander, Wolfe & Chicken 2014, sec. 4.3)
    covers the true shift at least 95% minus 3 binomial SEs."""
    rng = np.random.default_rng(20240000 + n_a + 7 * n_b + int(10 * sd_b))
    mu_a, mu_b = 2.0, 2.0 + math.log(1.4)
    truth = math.exp(mu_b - mu_a)
    boot_hits = hl_hits = 0
    for rep in range(BOOT_REPS):
        a = rng.lognormal(mu_a, sd_a, n_a)
        b = rng.lognormal(mu_b, sd_b, n_b)
        check = robust.robust_check(a, b, resamples=BOOT_RESAMPLES, seed=rep)
        boot_hits += check.median_ratio_ci_low <= truth <= check.median_ratio_ci_high
        hl_hits += check.hl_ci_low <= truth <= check.hl_ci_high
    assert boot_hits / BOOT_REPS >= 0.90, boot_hits / BOOT_REPS
    if sd_a == sd_b:
        floor = 0.95 - 3 * math.sqrt(0.95 * 0.05 / BOOT_REPS)
        assert hl_hits / BOOT_REPS >= floor, hl_hits / BOOT_REPS


POWER_REPS = 4000


@pytest.mark.parametrize(("n_a", "n_b", "sd", "power"), [(12, 18, 0.6, 0.80), (6, 6, 1.1, 0.90)])
def test_rejection_rate_at_detectable_ratio_matches_power(n_a, n_b, sd, power):
    """Simulated truth: lognormal groups whose true median ratio is the detectable ratio
    are rejected by the pooled t on logs (the test the power formula describes; Cohen 1988,
    ch. 2) at the stated power, within 3 binomial SEs over 4000 repetitions; at ratio 1 the
    rejection rate is alpha = 0.05 within 3 SEs."""
    ratio = float(
        precision.detectable_ratio(np.array([n_a]), np.array([n_b]), np.array([sd]), power=power)[0]
    )
    rng = np.random.default_rng(n_a * 100 + n_b)
    for true_ratio, expected in ((ratio, power), (1.0, 0.05)):
        na, ma, sa = _log_summaries(rng, 0.0, sd, n_a, POWER_REPS)
        nb, mb, sb = _log_summaries(rng, math.log(true_ratio), sd, n_b, POWER_REPS)
        p = log_t_test(na, ma, sa, nb, mb, sb, test="pooled").p_value
        rate = float(np.mean(p < 0.05))
        tolerance = 3 * math.sqrt(expected * (1 - expected) / POWER_REPS)
        assert abs(rate - expected) <= tolerance, (true_ratio, rate)
