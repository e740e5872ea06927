"""Per-group summaries: one polars aggregation per grouping column, all outcomes at once.

The log-scale statistics are mergeable sufficient statistics (count, mean of logs and
sum of squared deviations of logs); medians and skewness need the raw values of the
group and are computed in the same pass.
"""

from __future__ import annotations

from collections.abc import Sequence

import polars as pl

from .entries import ABOVE, ESTIMATED, NO_LIMIT
from .load import DerivedNames
from .values import GroupSpec

#: The columns that name one group of one outcome.
GROUP_COLUMNS = ("grouping", "within", "stratum", "level", "outcome")

SUMMARY_SCHEMA = pl.Schema(
    {
        "grouping": pl.Utf8,
        "within": pl.Utf8,
        "stratum": pl.Utf8,
        "level": pl.Utf8,
        "outcome": pl.Utf8,
        "n": pl.Int64,
        "n_missing": pl.Int64,
        "n_excluded": pl.Int64,
        "n_substituted": pl.Int64,
        "n_censored": pl.Int64,
        "n_no_limit": pl.Int64,
        "n_above_range": pl.Int64,
        "n_estimated": pl.Int64,
        "mean_log": pl.Float64,
        "ss_log": pl.Float64,
        "median": pl.Float64,
        "skew_log": pl.Float64,
        "skew_raw": pl.Float64,
    }
)

_STATS = [name for name in SUMMARY_SCHEMA if name not in GROUP_COLUMNS]
#: Outcomes aggregated together: the working memory of a batch (its logs and the per-group
#: sorting for medians) is what the summaries add to the table's own.
OUTCOME_BATCH = 4


def mean_and_sum_of_squares(values: pl.Expr) -> tuple[pl.Expr, pl.Expr]:
    """Mean and sum of squared deviations of ``values`` (nulls ignored).

    Two-pass: deviations are taken from the mean, for accuracy when the spread is tiny next
    to the level (NIST StRD univariate data sets NumAcc1-4)."""
    mean = values.mean()
    return mean, (values - mean).pow(2).sum()


def _rows(names: DerivedNames) -> str:
    """The name of each group's row count in the aggregated frame (it holds the marker, so no
    user column has it)."""
    return names.derived("", "rows")


def _aggregations(outcome: str, names: DerivedNames, coded: bool, flagged: bool) -> list[pl.Expr]:
    """The figures of one outcome per group. ``flagged``: the policy marked some entries as
    left out or replaced (else ``apply_policy`` made no flags, every written value is used,
    and the missing entries are the group's rows less its values)."""
    used = pl.col(names.used(outcome))
    logs = pl.col(names.log(outcome))
    mean_log, ss_log = mean_and_sum_of_squares(logs)
    stat = names.derived
    counts = [used.count().cast(pl.Int64).alias(stat(outcome, "n"))]
    if flagged:
        counts += [
            pl.col(outcome).null_count().cast(pl.Int64).alias(stat(outcome, "n_missing")),
            *(
                pl.col(flag(outcome)).sum().cast(pl.Int64).alias(stat(outcome, name))
                for flag, name in (
                    (names.excluded, "n_excluded"),
                    (names.substituted, "n_substituted"),
                    (names.censored, "n_censored"),
                )
            ),
        ]
    return [
        *counts,
        *(_kind_counts(outcome, names) if coded else []),
        mean_log.alias(stat(outcome, "mean_log")),
        ss_log.alias(stat(outcome, "ss_log")),
        used.median().alias(stat(outcome, "median")),
        logs.skew(bias=True).alias(stat(outcome, "skew_log")),
        used.skew(bias=True).alias(stat(outcome, "skew_raw")),
    ]


_KIND_STATS = ("n_no_limit", "n_above_range", "n_estimated")


def _kind_counts(outcome: str, names: DerivedNames) -> list[pl.Expr]:
    kind = pl.col(names.kind(outcome))
    return [
        (kind == code).sum().cast(pl.Int64).alias(names.derived(outcome, stat))
        for stat, code in (
            ("n_no_limit", NO_LIMIT),
            ("n_above_range", ABOVE),
            ("n_estimated", ESTIMATED),
        )
    ]


def _stat(outcome: str, stat: str, names: DerivedNames, coded: bool, flagged: bool) -> pl.Expr:
    """One figure of one outcome from the aggregated frame (counts of kinds an outcome
    cannot hold are 0; without policy flags nothing was left out, replaced or censored)."""
    if stat in _KIND_STATS and not coded:
        return pl.lit(0, pl.Int64).alias(stat)
    if not flagged and stat in _FLAG_STATS:
        return pl.lit(0, pl.Int64).alias(stat)
    if not flagged and stat == "n_missing":
        n = pl.col(names.derived(outcome, "n"))
        return (pl.col(_rows(names)).cast(pl.Int64) - n).alias(stat)
    return pl.col(names.derived(outcome, stat)).alias(stat)


_FLAG_STATS = ("n_excluded", "n_substituted", "n_censored")


def group_identity(spec: GroupSpec) -> list[pl.Expr]:
    """The columns that name a group (grouping, within, stratum, level) as expressions."""
    stratum = pl.col(spec.within).cast(pl.Utf8) if spec.within else pl.lit(None, pl.Utf8)
    return [
        pl.lit(spec.grouping, pl.Utf8).alias("grouping"),
        pl.lit(spec.within, pl.Utf8).alias("within"),
        stratum.alias("stratum"),
        pl.col(spec.grouping).cast(pl.Utf8).alias("level"),
    ]


def group_summaries(
    frame: pl.DataFrame,
    specs: Sequence[GroupSpec],
    outcomes: Sequence[str],
    names: DerivedNames,
) -> pl.DataFrame:
    """One row per grouping × stratum × level × outcome (rows whose group or stratum is
    missing are left out)."""
    coded = {o for o in outcomes if names.kind(o) in frame.columns}
    flagged = {o for o in outcomes if names.excluded(o) in frame.columns}
    parts: list[pl.DataFrame] = []
    # Outcomes in batches: the logs and the per-group sorting behind the medians are made for
    # one batch at a time, so the memory they take is a batch's, not the table's.
    for start in range(0, len(outcomes), OUTCOME_BATCH):
        batch = list(outcomes[start : start + OUTCOME_BATCH])
        aggregations = [pl.len().alias(_rows(names))] + [
            expr
            for outcome in batch
            for expr in _aggregations(outcome, names, outcome in coded, outcome in flagged)
        ]
        plans = [
            frame.lazy()
            .with_columns([pl.col(names.used(o)).log().alias(names.log(o)) for o in batch])
            .drop_nulls(spec.keys)
            .group_by(spec.keys)
            .agg(aggregations)
            for spec in specs
        ]
        for spec, wide in zip(specs, pl.collect_all(plans), strict=True):
            identity = group_identity(spec)
            for outcome in batch:
                figures = [
                    _stat(outcome, stat, names, outcome in coded, outcome in flagged)
                    for stat in _STATS
                ]
                parts.append(
                    wide.select(*identity, pl.lit(outcome, pl.Utf8).alias("outcome"), *figures)
                )
    if not parts:
        return pl.DataFrame(schema=SUMMARY_SCHEMA)
    result = pl.concat(parts, how="vertical")
    return result.cast(SUMMARY_SCHEMA).sort("grouping", "stratum", "outcome", "level")


def level_order(levels: list[str]) -> list[str]:
    """Natural order: numerically when every level is a number, else as text."""
    try:
        return sorted(levels, key=float)
    except ValueError:
        return sorted(levels)
