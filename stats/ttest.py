"""Two-sample t-tests on the log scale from summary statistics, vectorised over comparisons.

Formulas: NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.5.3 (two-sample
t-test; Welch–Satterthwaite degrees of freedom for unequal variances).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .distributions import t_ppf, t_sf
from .vocabulary import TESTS, Test


@dataclass(frozen=True)
class LogTTest:
    """Arrays, one entry per comparison; NaN where the test cannot be computed."""

    difference: np.ndarray  # mean(log b) - mean(log a)
    standard_error: np.ndarray
    df: np.ndarray
    t: np.ndarray
    p_value: np.ndarray
    t_critical: np.ndarray
    ci_low: np.ndarray  # of the difference of mean logs
    ci_high: np.ndarray

    @property
    def ratio(self) -> np.ndarray:
        ratio: np.ndarray = np.exp(self.difference)
        return ratio

    @property
    def ratio_ci(self) -> tuple[np.ndarray, np.ndarray]:
        # A bound past exp's range (df near 1, tiny n) is honestly infinite: no warning.
        with np.errstate(over="ignore"):
            return np.exp(self.ci_low), np.exp(self.ci_high)


def log_t_test(
    n_a: np.ndarray,
    mean_a: np.ndarray,
    ss_a: np.ndarray,
    n_b: np.ndarray,
    mean_b: np.ndarray,
    ss_b: np.ndarray,
    *,
    test: Test = "welch",
    confidence: float = 0.95,
    var_mean_a: np.ndarray | None = None,
    var_mean_b: np.ndarray | None = None,
) -> LogTTest:
    """Welch or pooled t-test of mean(log b) - mean(log a) from counts, means and sums of
    squared deviations of the logs. Rows with fewer than 2 values in a group, or with no
    spread at all, give NaN.

    ``var_mean_a``, ``var_mean_b`` (Welch only): where finite, the variance of that group's
    mean of the logs to use instead of s^2 / n, e.g. from a censored fit
    (``censored.compare_censored`` documents the rule); the df is then the
    Welch–Satterthwaite df of those variances with n - 1 per group."""
    if test not in TESTS:
        raise ValueError(f"unknown test {test!r}; choose welch or pooled")
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must be between 0 and 1, got {confidence}")
    n_a, n_b, mean_a, mean_b, ss_a, ss_b = (
        np.asarray(x, dtype=float) for x in (n_a, n_b, mean_a, mean_b, ss_a, ss_b)
    )
    usable = (n_a >= 2) & (n_b >= 2)
    with np.errstate(divide="ignore", invalid="ignore"):
        var_a = np.where(usable, ss_a / (n_a - 1), np.nan)
        var_b = np.where(usable, ss_b / (n_b - 1), np.nan)
        difference = np.where(usable, mean_b - mean_a, np.nan)
        if test == "welch":
            share_a = _override(var_a / n_a, var_mean_a, usable)
            share_b = _override(var_b / n_b, var_mean_b, usable)
            se2 = share_a + share_b
            df = se2**2 / (share_a**2 / (n_a - 1) + share_b**2 / (n_b - 1))
        else:
            df = n_a + n_b - 2
            pooled = (ss_a + ss_b) / df
            se2 = pooled * (1 / n_a + 1 / n_b)
        se = np.sqrt(se2)
    return t_result(difference, se, df, confidence, usable)


def t_result(
    difference: np.ndarray,
    standard_error: np.ndarray,
    df: np.ndarray | float,
    confidence: float,
    usable: np.ndarray | bool = True,
) -> LogTTest:
    """The t, two-sided p and CI of a difference of mean logs from its standard error and
    Student's t with ``df``; NaN where a row is not ``usable`` or its SE is not positive and
    finite. The one place every test on the logs (two-sample, paired, crossover) ends."""
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.asarray(standard_error, dtype=float)
        valid = usable & (se > 0) & np.isfinite(se)
        se = np.where(valid, se, np.nan)
        df = np.where(valid, df, np.nan)
        difference = np.where(valid, difference, np.nan)
        t = difference / se
        p_value = 2 * t_sf(np.abs(t), df)
        t_critical = t_ppf(0.5 + confidence / 2, df)
    return LogTTest(
        difference=difference,
        standard_error=se,
        df=df,
        t=t,
        p_value=p_value,
        t_critical=t_critical,
        ci_low=difference - t_critical * se,
        ci_high=difference + t_critical * se,
    )


def _override(share: np.ndarray, given: np.ndarray | None, usable: np.ndarray) -> np.ndarray:
    if given is None:
        return share
    given = np.asarray(given, dtype=float)
    chosen: np.ndarray = np.where(usable & np.isfinite(given), given, share)
    return chosen
