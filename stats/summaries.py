"""Per-group summaries: one polars aggregation per grouping column, all outcomes at once.

The log-scale statistics are mergeable sufficient statistics (count, mean of logs and
sum of squared deviations of logs); medians and skewness need the raw values of the
group and are computed in the same pass.
"""

from __future__ import annotations

import polars as pl

from .load import CENSORED_SUFFIX
from .policy import EXCLUDED, SUBSTITUTED, USED

SUMMARY_SCHEMA = pl.Schema(
    {
        "grouping": pl.Utf8,
        "level": pl.Utf8,
        "outcome": pl.Utf8,
        "n": pl.Int64,
        "n_missing": pl.Int64,
        "n_excluded": pl.Int64,
        "n_substituted": pl.Int64,
        "n_censored": pl.Int64,
        "mean_log": pl.Float64,
        "ss_log": pl.Float64,
        "median": pl.Float64,
        "skew_log": pl.Float64,
        "skew_raw": pl.Float64,
    }
)

LOG = "__log"  # the log of the used value, computed once per outcome before aggregating

_STATS = [name for name in SUMMARY_SCHEMA if name not in ("grouping", "level", "outcome")]


def mean_and_sum_of_squares(values: pl.Expr) -> tuple[pl.Expr, pl.Expr]:
    """Mean and sum of squared deviations of ``values`` (nulls ignored).

    Two-pass: deviations are taken from the mean, for accuracy when the spread is tiny next
    to the level (NIST StRD univariate data sets NumAcc1-4)."""
    mean = values.mean()
    return mean, (values - mean).pow(2).sum()


def _aggregations(outcome: str) -> list[pl.Expr]:
    used = pl.col(outcome + USED)
    logs = pl.col(outcome + LOG)
    mean_log, ss_log = mean_and_sum_of_squares(logs)
    prefix = outcome + "\x00"
    return [
        used.count().cast(pl.Int64).alias(prefix + "n"),
        pl.col(outcome).null_count().cast(pl.Int64).alias(prefix + "n_missing"),
        pl.col(outcome + EXCLUDED).sum().cast(pl.Int64).alias(prefix + "n_excluded"),
        pl.col(outcome + SUBSTITUTED).sum().cast(pl.Int64).alias(prefix + "n_substituted"),
        pl.col(outcome + CENSORED_SUFFIX).sum().cast(pl.Int64).alias(prefix + "n_censored"),
        mean_log.alias(prefix + "mean_log"),
        ss_log.alias(prefix + "ss_log"),
        used.median().alias(prefix + "median"),
        logs.skew(bias=True).alias(prefix + "skew_log"),
        used.skew(bias=True).alias(prefix + "skew_raw"),
    ]


def group_summaries(
    frame: pl.DataFrame, groupings: tuple[str, ...], outcomes: tuple[str, ...]
) -> pl.DataFrame:
    """One row per grouping × level × outcome (rows whose group is missing are left out)."""
    aggregations = [expr for outcome in outcomes for expr in _aggregations(outcome)]
    plans = [
        frame.lazy()
        .with_columns([pl.col(o + USED).log().alias(o + LOG) for o in outcomes])
        .filter(pl.col(grouping).is_not_null())
        .group_by(grouping)
        .agg(aggregations)
        .rename({grouping: "level"})
        for grouping in groupings
    ]
    parts: list[pl.DataFrame] = []
    for grouping, wide in zip(groupings, pl.collect_all(plans), strict=True):
        for outcome in outcomes:
            prefix = outcome + "\x00"
            parts.append(
                wide.select(
                    pl.lit(grouping).alias("grouping"),
                    pl.col("level").cast(pl.Utf8),
                    pl.lit(outcome).alias("outcome"),
                    *[pl.col(prefix + stat).alias(stat) for stat in _STATS],
                )
            )
    if not parts:
        return pl.DataFrame(schema=SUMMARY_SCHEMA)
    result = pl.concat(parts, how="vertical")
    return result.cast(SUMMARY_SCHEMA).sort("grouping", "outcome", "level")


def level_order(levels: list[str]) -> list[str]:
    """Natural order: numerically when every level is a number, else as text."""
    try:
        return sorted(levels, key=float)
    except ValueError:
        return sorted(levels)
