"""Checks of the log-scale assumptions, each turned into a short named warning.

The thresholds are rules of thumb, stated beside each warning so the reader can judge.
"""

from __future__ import annotations

import math

import numpy as np
import polars as pl
from scipy import stats as sps

from .policy import USED

SMALL_N = 5
CENSORED_SHARE = 0.15
EXCLUDED_SHARE = 0.10
LOG_SKEW = 1.0
LOG_SKEW_MIN_N = 8
SHAPIRO_ALPHA = 0.01
SHAPIRO_RANGE = (3, 5000)
SPREAD_RATIO = 1.5
SPREAD_ALPHA = 0.05
MEDIAN_GM_Z = 1.96

#: Warning name -> one-line explanation, in the order they are listed.
WARNINGS: dict[str, str] = {
    "too-few": "a group has fewer than 2 usable values: no test is possible",
    "no-spread": "all values are equal in both groups: the t-test is undefined",
    "small-n": f"a group has fewer than {SMALL_N} usable values: checks have little power",
    "censored-share": (
        f"over {CENSORED_SHARE:.0%} of a group is below detection; simple substitution is "
        "trusted only below that share (a common rule of thumb)"
    ),
    "excluded-share": (
        f"over {EXCLUDED_SHARE:.0%} of a group's entries were left out (zero, negative or "
        "below detection): the rest may not represent the group"
    ),
    "log-skew": (
        f"a group's logs have |skewness| above {LOG_SKEW:g} (n >= {LOG_SKEW_MIN_N}): the log "
        "scale is not symmetric, so the ratio is of geometric means, not medians"
    ),
    "log-not-normal": (
        f"Shapiro-Wilk on a group's logs gives p < {SHAPIRO_ALPHA:g}: the logs do not look normal"
    ),
    "spread-differs": (
        f"log-scale SDs differ by more than {SPREAD_RATIO:g}x (F-test p < {SPREAD_ALPHA:g}): one "
        "multiplicative shift does not describe the difference"
    ),
    "median-vs-gm": (
        "the ratio of sample medians and the ratio of geometric means disagree beyond their "
        "uncertainty: do not read the ratio as a ratio of medians"
    ),
}

#: Warnings that make "ratio of medians" doubtful: the finding then speaks of geometric means.
SYMMETRY_WARNINGS = ("log-skew", "log-not-normal", "median-vs-gm", "spread-differs")


def group_normality(
    frame: pl.DataFrame, groupings: tuple[str, ...], outcomes: tuple[str, ...]
) -> pl.DataFrame:
    """Shapiro–Wilk W and p on the logs of each grouping × level × outcome (n 3..5000).

    One call per group, not per comparison. Outside the range, or with no spread, the
    result is NaN."""
    rows: dict[str, list] = {
        "grouping": [],
        "level": [],
        "outcome": [],
        "shapiro_w": [],
        "shapiro_p": [],
    }
    used_columns = [outcome + USED for outcome in outcomes]
    for grouping in groupings:
        parts = frame.select(grouping, *used_columns).partition_by(grouping, as_dict=True)
        for (level,), part in parts.items():
            if level is None:
                continue
            for outcome in outcomes:
                values = part[outcome + USED].drop_nulls().to_numpy()
                w = p = math.nan
                if SHAPIRO_RANGE[0] <= values.size <= SHAPIRO_RANGE[1]:
                    logs = np.log(values)
                    if np.ptp(logs) > 0:
                        w, p = (float(x) for x in sps.shapiro(logs))
                rows["grouping"].append(grouping)
                rows["level"].append(str(level))
                rows["outcome"].append(outcome)
                rows["shapiro_w"].append(w)
                rows["shapiro_p"].append(p)
    return pl.DataFrame(
        rows,
        schema={
            "grouping": pl.Utf8,
            "level": pl.Utf8,
            "outcome": pl.Utf8,
            "shapiro_w": pl.Float64,
            "shapiro_p": pl.Float64,
        },
    )


def spread_test(sd_a: np.ndarray, n_a: np.ndarray, sd_b: np.ndarray, n_b: np.ndarray) -> np.ndarray:
    """Two-sided F-test p for equal log-scale variances."""
    with np.errstate(divide="ignore", invalid="ignore"):
        f = (sd_b / sd_a) ** 2
        one_side = sps.f.cdf(f, n_b - 1, n_a - 1)
        return np.minimum(1.0, 2 * np.minimum(one_side, 1 - one_side))


def median_gm_z(
    log_median_ratio: np.ndarray, difference: np.ndarray, sd_a, n_a, sd_b, n_b
) -> np.ndarray:
    """z for log(median ratio) - log(GM ratio) under log-normality.

    For normal data the sample median minus the mean has asymptotic variance
    (pi/2 - 1) sigma^2 / n (the median's variance pi sigma^2 / 2n less the mean's, the mean
    being efficient; Kendall & Stuart, Advanced Theory of Statistics, vol. 1, sec. 10.10)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt((math.pi / 2 - 1) * (sd_a**2 / n_a + sd_b**2 / n_b))
        return (log_median_ratio - difference) / se


def warning_expression() -> pl.Expr:
    """Expects NaN already replaced by null (polars orders NaN above every number).

    A polars expression joining the names of the warnings that apply into one string."""

    def either(name: str) -> tuple[pl.Expr, pl.Expr]:
        return pl.col(name + "_a"), pl.col(name + "_b")

    n_a, n_b = either("n")
    total_a = n_a + pl.col("n_excluded_a")
    total_b = n_b + pl.col("n_excluded_b")
    skew_a, skew_b = either("skew_log")
    shapiro_a, shapiro_b = either("shapiro_p")
    sd_ratio = pl.max_horizontal("sd_log_a", "sd_log_b") / pl.min_horizontal("sd_log_a", "sd_log_b")
    conditions = {
        "too-few": (n_a < 2) | (n_b < 2),
        "no-spread": (n_a >= 2) & (n_b >= 2) & pl.col("p_value").is_null(),
        "small-n": (n_a < SMALL_N) | (n_b < SMALL_N),
        "censored-share": (pl.col("censored_share_a") > CENSORED_SHARE)
        | (pl.col("censored_share_b") > CENSORED_SHARE),
        "excluded-share": (pl.col("n_excluded_a") > EXCLUDED_SHARE * total_a)
        | (pl.col("n_excluded_b") > EXCLUDED_SHARE * total_b),
        "log-skew": ((skew_a.abs() > LOG_SKEW) & (n_a >= LOG_SKEW_MIN_N))
        | ((skew_b.abs() > LOG_SKEW) & (n_b >= LOG_SKEW_MIN_N)),
        "log-not-normal": (shapiro_a < SHAPIRO_ALPHA) | (shapiro_b < SHAPIRO_ALPHA),
        "spread-differs": (sd_ratio > SPREAD_RATIO) & (pl.col("spread_p") < SPREAD_ALPHA),
        "median-vs-gm": pl.col("median_gm_z").abs() > MEDIAN_GM_Z,
    }
    parts = [
        pl.when(condition.fill_null(False)).then(pl.lit(name))
        for name, condition in conditions.items()
    ]
    return pl.concat_str(parts, separator=";", ignore_nulls=True).fill_null("")


def explain(warnings: str) -> list[tuple[str, str]]:
    """(name, one-line explanation) for each warning in a ``;``-joined list."""
    return [(name, WARNINGS.get(name, "")) for name in warnings.split(";") if name]
