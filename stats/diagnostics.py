"""Checks of the log-scale assumptions, each turned into a short named warning.

The thresholds are rules of thumb, stated beside each warning so the reader can judge.
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
import polars as pl

from .columns import P_VALUE, side
from .distributions import f_cdf
from .shapiro import shapiro_wilk
from .values import GroupId, GroupValues
from .vocabulary import WARNING_NAMES, WarningName

Array = npt.NDArray[np.float64]

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
#: Median detection limits of two groups further apart than this factor bias a substituted
#: comparison (our rule; see ``WARNINGS["limits-differ"]``).
LIMITS_FACTOR = 2.0
#: Paired comparisons (``paired``): fewer paired units than this share of the units (our
#: rule); a unit shifting the mean log ratio by more than INFLUENCE_SHIFT SE and an outlier
#: at Bonferroni p < OUTLIER_ALPHA (see ``paired``).
FEW_PAIRED_SHARE = 0.5
INFLUENCE_SHIFT = 1.0
OUTLIER_ALPHA = 0.01

#: Warning name -> one-line explanation, in the order they are listed.
WARNINGS: dict[WarningName, str] = {
    "too-few": "a group has fewer than 2 usable values: no test is possible",
    "no-spread": "all values are equal in both groups: the t-test is undefined",
    "small-n": f"a group has fewer than {SMALL_N} usable values: checks have little power",
    "censored-share": (
        f"over {CENSORED_SHARE:.0%} of a group is below detection: substitution (DL/2) is "
        "trusted only below that share (a common rule of thumb), and a censored fit leans "
        "on the lognormal shape for the part it cannot see"
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
    "no-limit": (
        "a group has below-detection entries with no limit (ND, <LOD with no limit column): "
        "they were left out, so the group looks higher than it is"
    ),
    "above-range": (
        "a group has entries above the measuring range (>x): fitted as lying above x under "
        "censored ML, otherwise used at x, which understates that group"
    ),
    "units-apart": (
        "this analyte was also reported in a unit that does not convert into this one; those "
        "results are a separate outcome"
    ),
    "not-fitted": (
        "a group's censored fit was not made (fewer than 2 detected values, detected values "
        "all equal, or more than 80% below detection): no ratio is given"
    ),
    "censoring-sensitive": (
        "substituting DL/2 for the below-detection entries would change the finding (whether "
        "the CI excludes 1, or the equivalence class): the answer depends on how they are "
        "treated"
    ),
    "limits-differ": (
        f"the groups' detection limits differ by more than {LIMITS_FACTOR:g}x (medians of "
        "their limits), or one group has detected values below half the other's limits: a "
        "substituted comparison would be biased, the censored fit is not"
    ),
    "few-paired": (
        f"fewer than {FEW_PAIRED_SHARE:.0%} of the units are paired (the rest are measured "
        "at one level only or have a value left out): the pairs may not represent the units"
    ),
    "values-combined": (
        "some paired units had several values at one level: they were combined by their "
        "geometric mean"
    ),
    "pairs-skewed": (
        f"the within-unit log ratios have |skewness| above {LOG_SKEW:g} "
        f"(n >= {LOG_SKEW_MIN_N}): the ratio is of geometric means, and a few units may "
        "drive it"
    ),
    "unit-dominates": (
        f"leaving out one unit (named) moves the mean log ratio by more than "
        f"{INFLUENCE_SHIFT:g} SE, and that unit is an outlier (studentized residual, "
        f"Bonferroni p < {OUTLIER_ALPHA:g})"
    ),
    "units-repeated": (
        "with --pair-by, some unit gives several values to one group of this comparison (the "
        "units are nested in its levels, e.g. measured in several years): the t-test counts "
        "each value as an independent unit, so the CI is too narrow and p too small; compare "
        "within the grouping that repeats the units, or give one value per unit"
    ),
}

#: Warnings that make "ratio of medians" doubtful: the finding then speaks of geometric means.
SYMMETRY_WARNINGS: tuple[WarningName, ...] = (
    "log-skew",
    "log-not-normal",
    "median-vs-gm",
    "spread-differs",
)


#: The columns that name one group (as in the summaries).
GROUP_KEYS = ("grouping", "within", "stratum", "level", "outcome")


def group_normality(values: GroupValues, sizes: pl.DataFrame | None = None) -> pl.DataFrame:
    """Shapiro–Wilk W and p on the logs of each group (n 3..5000), one row per group.

    One call per group, not per comparison. Outside the range, or with no spread, the
    result is NaN. ``sizes`` (the summaries: the group columns and ``n``) lets the groups
    outside the range be answered without reading their values."""
    wanted: set[GroupId] | None = None
    rows: list[tuple[str, str | None, str | None, str, str, float, float]] = []
    if sizes is not None:
        low, high = SHAPIRO_RANGE
        inside = pl.col("n").is_between(low, high)
        keys = list(GROUP_KEYS)
        wanted = {tuple(row) for row in sizes.filter(inside).select(keys).iter_rows()}
        outside = sizes.filter(~inside.fill_null(False)).select(keys).iter_rows()
        rows += [(*group, math.nan, math.nan) for group in outside]
    for group, group_values in values.each_group(wanted=wanted):
        w = p = math.nan
        if SHAPIRO_RANGE[0] <= group_values.size <= SHAPIRO_RANGE[1]:
            logs = np.log(group_values)
            if np.ptp(logs) > 0:
                w, p = shapiro_wilk(logs)
        rows.append((*group, w, p))
    return pl.DataFrame(
        rows,
        schema={
            "grouping": pl.Utf8,
            "within": pl.Utf8,
            "stratum": pl.Utf8,
            "level": pl.Utf8,
            "outcome": pl.Utf8,
            "shapiro_w": pl.Float64,
            "shapiro_p": pl.Float64,
        },
        orient="row",
    )


def spread_test(sd_a: Array, n_a: Array, sd_b: Array, n_b: Array) -> Array:
    """Two-sided F-test p for equal log-scale variances."""
    with np.errstate(divide="ignore", invalid="ignore"):
        f = (sd_b / sd_a) ** 2
        one_side = f_cdf(f, n_b - 1, n_a - 1)
        p: Array = np.minimum(1.0, 2 * np.minimum(one_side, 1 - one_side))
        return p


def median_gm_z(
    log_median_ratio: Array,
    difference: Array,
    sd_a: Array,
    n_a: Array,
    sd_b: Array,
    n_b: Array,
) -> Array:
    """z for log(median ratio) - log(GM ratio) under log-normality.

    For normal data the sample median minus the mean has asymptotic variance
    (pi/2 - 1) sigma^2 / n (the median's variance pi sigma^2 / 2n less the mean's, the mean
    being efficient; Kendall & Stuart, Advanced Theory of Statistics, vol. 1, sec. 10.10)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt((math.pi / 2 - 1) * (sd_a**2 / n_a + sd_b**2 / n_b))
        z: Array = (log_median_ratio - difference) / se
        return z


def warning_expression() -> pl.Expr:
    """The list of the names of the warnings that apply, as one polars expression over the
    comparisons frame. Expects NaN already replaced by null (polars orders NaN above every
    number)."""

    def either(name: str) -> tuple[pl.Expr, pl.Expr]:
        return pl.col(side(name, "a")), pl.col(side(name, "b"))

    n_a, n_b = either("n")
    excluded_a, excluded_b = either("n_excluded")
    censored_a, censored_b = either("censored_share")
    sd_a, sd_b = either("sd_log")
    total_a = n_a + excluded_a
    total_b = n_b + excluded_b
    skew_a, skew_b = either("skew_log")
    shapiro_a, shapiro_b = either("shapiro_p")
    sd_ratio = pl.max_horizontal(sd_a, sd_b) / pl.min_horizontal(sd_a, sd_b)
    conditions: dict[WarningName, pl.Expr] = {
        "too-few": (n_a < 2) | (n_b < 2),
        "no-spread": (n_a >= 2) & (n_b >= 2) & pl.col(P_VALUE).is_null(),
        "small-n": (n_a < SMALL_N) | (n_b < SMALL_N),
        "censored-share": (censored_a > CENSORED_SHARE) | (censored_b > CENSORED_SHARE),
        "excluded-share": (excluded_a > EXCLUDED_SHARE * total_a)
        | (excluded_b > EXCLUDED_SHARE * total_b),
        "log-skew": ((skew_a.abs() > LOG_SKEW) & (n_a >= LOG_SKEW_MIN_N))
        | ((skew_b.abs() > LOG_SKEW) & (n_b >= LOG_SKEW_MIN_N)),
        "log-not-normal": (shapiro_a < SHAPIRO_ALPHA) | (shapiro_b < SHAPIRO_ALPHA),
        "spread-differs": (sd_ratio > SPREAD_RATIO) & (pl.col("spread_p") < SPREAD_ALPHA),
        "median-vs-gm": pl.col("median_gm_z").abs() > MEDIAN_GM_Z,
        "no-limit": _either_above_zero("n_no_limit"),
        "above-range": _either_above_zero("n_above_range"),
        "units-apart": pl.col("units_apart"),
        "not-fitted": pl.col(side("fit_reason", "a")).is_not_null()
        | pl.col(side("fit_reason", "b")).is_not_null(),
        "censoring-sensitive": pl.col("censoring_sensitive"),
        "limits-differ": _limits_differ(),
    }
    parts = [
        pl.when(condition.fill_null(False)).then(pl.lit(name))
        for name, condition in conditions.items()
    ]
    return pl.concat_list(parts).list.drop_nulls().cast(pl.List(pl.Enum(list(WARNING_NAMES))))


def _limits_differ() -> pl.Expr:
    """Both groups have limits whose medians differ by more than ``LIMITS_FACTOR``; or only one
    has limits and the other has detected values below half of that group's median limit
    (the other group was measured more sensitively)."""
    limit_a, limit_b = pl.col(side("limit_median", "a")), pl.col(side("limit_median", "b"))
    low_a, low_b = pl.col(side("detected_min", "a")), pl.col(side("detected_min", "b"))
    ratio = pl.max_horizontal(limit_a, limit_b) / pl.min_horizontal(limit_a, limit_b)
    both = limit_a.is_not_null() & limit_b.is_not_null() & (ratio > LIMITS_FACTOR)
    only_a = limit_b.is_null() & (low_b < limit_a / LIMITS_FACTOR)
    only_b = limit_a.is_null() & (low_a < limit_b / LIMITS_FACTOR)
    return both | only_a | only_b


def _either_above_zero(name: str) -> pl.Expr:
    return (pl.col(side(name, "a")) > 0) | (pl.col(side(name, "b")) > 0)


def explain(warnings: list[WarningName]) -> list[tuple[WarningName, str]]:
    """(name, one-line explanation) for each warning of a comparison."""
    return [(name, WARNINGS[name]) for name in warnings]
