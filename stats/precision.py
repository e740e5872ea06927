"""Precision and power on the log scale, vectorised over comparisons.

For two groups of sizes n_a, n_b with common log-scale SD s, a true log ratio delta gives
the noncentrality ncp = delta / (s * sqrt(1/n_a + 1/n_b)) for the pooled t statistic with
df = n_a + n_b - 2; power at two-sided level alpha is
P(T' > t_crit) + P(T' < -t_crit) for T' noncentral t(df, ncp) (Cohen 1988, Statistical
Power Analysis, ch. 2; the same definition as statsmodels' TTestIndPower). The normal
approximation replaces that with delta = (z_{1-alpha/2} + z_{power}) * s * sqrt(1/n_a + 1/n_b)
(Chow, Shao & Wang, Sample Size Calculations in Clinical Research, 2nd ed., sec. 3.2).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from .distributions import nct_sf, norm_ppf, t_ppf

DEFAULT_POWER = 0.80


def _power(
    ncp: np.ndarray, df: np.ndarray, alpha: float, critical: np.ndarray | None = None
) -> np.ndarray:
    if critical is None:
        critical = t_ppf(1 - alpha / 2, df)
    # Lower tail P(T' < -c; ncp) as P(T' > c; -ncp) (T'(ncp) and -T'(-ncp) have one law):
    # scipy's nct.cdf returns NaN far in that tail (e.g. df 98, ncp 10), which broke the
    # bisection; nct.sf does not.
    power: np.ndarray = nct_sf(critical, df, ncp) + nct_sf(critical, df, -ncp)
    return power


def _bisect(
    function: Callable[[np.ndarray], np.ndarray],
    low: np.ndarray,
    high: np.ndarray,
    iterations: int = 80,
) -> np.ndarray:
    """Vectorised root of an increasing function crossing zero in [low, high].

    The bracket shrinks by the Illinois variant of the false-position method (Dowell &
    Jarratt, BIT 11, 1971, 168-174), which converges superlinearly for smooth functions, with a
    halving wherever the false position is not usable (no sign change, a NaN): at most
    ``iterations`` evaluations, stopping once every bracket is narrower than about 1e-14
    relative. Elements without a root in the bracket end at its edge, as plain bisection
    would leave them."""
    low = low.astype(float).copy()
    high = high.astype(float).copy()
    f_low, f_high = function(low).astype(float), function(high).astype(float)
    side = np.zeros(low.shape, dtype=np.int8)  # the end kept last time: -1 low, +1 high
    for _ in range(iterations):
        active = (high - low) > 1e-14 * np.maximum(1.0, np.abs(high))
        if not active.any():
            break
        bracketed = (f_low <= 0) & (f_high > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            falsi = (low * f_high - high * f_low) / (f_high - f_low)
        usable = bracketed & np.isfinite(falsi) & (falsi > low) & (falsi < high)
        middle = np.where(usable, falsi, (low + high) / 2)
        value = function(middle)
        above = value > 0
        # Illinois: halve the kept end's value when the same end is kept twice running.
        f_low = np.where(above & (side == -1), f_low / 2, f_low)
        f_high = np.where(~above & (side == 1), f_high / 2, f_high)
        high = np.where(active & above, middle, high)
        f_high = np.where(active & above, value, f_high)
        low = np.where(active & ~above, middle, low)
        f_low = np.where(active & ~above, value, f_low)
        side = np.where(above, -1, 1).astype(np.int8)
    root: np.ndarray = (low + high) / 2
    return root


def detectable_ratio(
    n_a: np.ndarray,
    n_b: np.ndarray,
    sd_log: np.ndarray,
    alpha: float = 0.05,
    power: float = DEFAULT_POWER,
    method: str = "t",
) -> np.ndarray:
    """Smallest ratio (> 1) detectable with the given power; its inverse is the smallest
    detectable decrease. NaN where n < 2 or the SD is not positive."""
    n_a = np.asarray(n_a, dtype=float)
    n_b = np.asarray(n_b, dtype=float)
    sd_log = np.asarray(sd_log, dtype=float)
    valid = (n_a >= 2) & (n_b >= 2) & (sd_log > 0) & np.isfinite(sd_log)
    scale = np.where(
        valid, sd_log * np.sqrt(1 / np.maximum(n_a, 1) + 1 / np.maximum(n_b, 1)), np.nan
    )
    if method == "normal":
        delta = (norm_ppf(1 - alpha / 2) + norm_ppf(power)) * scale
        with np.errstate(over="ignore"):
            ratio: np.ndarray = np.exp(delta)
            return ratio
    if method != "t":
        raise ValueError("method must be 't' or 'normal'")
    df = np.where(valid, n_a + n_b - 2, 2.0)
    # The noncentrality that gives the power depends on df alone: solve once per distinct df.
    distinct, inverse = np.unique(df, return_inverse=True)
    critical = t_ppf(1 - alpha / 2, distinct)  # fixed during the search: compute once
    # 52 halvings of [0, 60] leave an interval of about 1e-14.
    ncp = _bisect(
        lambda x: _power(x, distinct, alpha, critical) - power,
        np.zeros_like(distinct),
        np.full_like(distinct, 60.0),
        iterations=52,
    )[inverse]
    with np.errstate(over="ignore"):  # an enormous log SD honestly gives an infinite ratio
        return np.where(valid, np.exp(ncp * scale), np.nan)


def n_per_group(
    target_ratio: float,
    sd_log: np.ndarray,
    alpha: float = 0.05,
    power: float = DEFAULT_POWER,
    method: str = "t",
) -> np.ndarray:
    """Equal n per group needed to detect ``target_ratio`` (either direction), rounded up.

    Normal approximation: n = 2 (z_{1-alpha/2} + z_power)^2 s^2 / log(R)^2."""
    if not target_ratio > 0 or target_ratio == 1:
        raise ValueError(f"target ratio must be positive and not 1, got {target_ratio}")
    sd_log = np.asarray(sd_log, dtype=float)
    valid = (sd_log > 0) & np.isfinite(sd_log)
    effect = abs(np.log(target_ratio)) / np.where(valid, sd_log, 1.0)
    if method == "normal":
        n = 2 * (norm_ppf(1 - alpha / 2) + norm_ppf(power)) ** 2 / effect**2
        return np.where(valid, np.ceil(n), np.nan)
    if method != "t":
        raise ValueError("method must be 't' or 'normal'")
    return np.where(
        valid, np.ceil(n_per_group_exact(target_ratio, sd_log, alpha, power) - 1e-9), np.nan
    )


def n_per_group_exact(
    target_ratio: float, sd_log: np.ndarray, alpha: float = 0.05, power: float = DEFAULT_POWER
) -> np.ndarray:
    """The continuous solution of the t-based power equation, before rounding up."""
    sd_log = np.asarray(sd_log, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        effect = abs(np.log(target_ratio)) / sd_log
    return _bisect(
        lambda m: _power(effect * np.sqrt(m / 2), 2 * m - 2, alpha) - power,
        np.full_like(effect, 1.5),
        np.full_like(effect, 1e8),
        iterations=100,
    )
