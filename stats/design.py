"""Designs in which the same units are measured more than once: the paired comparisons of
``--pair-by`` and the 2×2 crossover of ``--period``/``--sequence``, as rows that replace the
independent-groups figures of the same comparisons in the scan.

``design_rows`` returns one row per replaced comparison (``DESIGN_SCHEMA``): the difference
of mean logs with its SE and df (the scan then derives the ratio, CI, p, q, equivalence class
and sentence from them as for every comparison), the method, the paired counts, the
within-unit CV, the paired units' geometric means, and the pairing warnings. The statistics
are in ``paired``.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import polars as pl

from .errors import InputError
from .load import Table
from .paired import (
    crossover_2x2,
    groupings_within_units,
    paired_figures,
    paired_summaries,
    policy_outcomes,
)
from .policy import ValuePolicy
from .values import GroupSpec
from .vocabulary import WARNING_NAMES, Method

#: The columns of a design row (the identity of a comparison, then its figures).
_DESIGN_COLUMNS: dict[str, pl.DataType] = {
    "grouping": pl.Utf8(),
    "within": pl.Utf8(),
    "stratum": pl.Utf8(),
    "outcome": pl.Utf8(),
    "level_a": pl.Utf8(),
    "level_b": pl.Utf8(),
    "design_difference": pl.Float64(),
    "design_se": pl.Float64(),
    "design_df": pl.Float64(),
    "design_method": pl.Utf8(),
    "pair_by": pl.Utf8(),
    "n_pairs": pl.Int64(),
    "n_only_a": pl.Int64(),
    "n_only_b": pl.Int64(),
    "n_unpaired_left_out": pl.Int64(),
    "n_combined": pl.Int64(),
    "within_cv": pl.Float64(),
    "design_gm_a": pl.Float64(),
    "design_gm_b": pl.Float64(),
    "design_median_ratio": pl.Float64(),
    "design_detectable_ratio": pl.Float64(),
    "design_n_needed": pl.Float64(),
    "influential_unit": pl.Utf8(),
    "design_warnings": pl.List(pl.Enum(list(WARNING_NAMES))),
}
DESIGN_SCHEMA = pl.Schema(_DESIGN_COLUMNS)

_PAIRED_METHODS: dict[str, Method] = {
    "mle": "paired t, nondetects left out",
    "exclude": "paired t, nondetects left out",
    "half-dl": "paired t, DL/2 substituted",
    "dl-root2": "paired t, DL/sqrt2 substituted",
}


def _paired_method(policy: ValuePolicy) -> pl.Expr:
    """Pairs follow the value policy: censored entries are substituted or left out (a
    censored fit of pairs is not made); comparisons without censored entries are plain."""
    censored = pl.col("n_censored_pairs") > 0
    return (
        pl.when(censored)
        .then(pl.lit(_PAIRED_METHODS[policy.censored]))
        .otherwise(pl.lit("paired t on logs"))
    )


def _censored_counts(table: Table) -> dict[str, int]:
    """Below-detection entries per outcome (over the whole table): whether the method name
    mentions them."""
    names = table.names
    row = table.frame.select(pl.col(names.censored(o)).sum().alias(o) for o in table.outcomes).row(
        0, named=True
    )
    return {o: int(row[o] or 0) for o in table.outcomes}


def paired_rows(
    table: Table,
    used: pl.DataFrame,
    specs: Sequence[GroupSpec],
    level_pairs: pl.DataFrame,
    unit: str,
    *,
    policy: ValuePolicy,
    confidence: float,
    target_ratio: float | None,
    duplicates: str,
) -> pl.DataFrame:
    """Design rows for every comparison of a grouping whose levels are measured on the same
    units (``paired.groupings_within_units``)."""
    paired_groupings = set(groupings_within_units(used, unit, table.groupings))
    chosen = [spec for spec in specs if spec.grouping in paired_groupings]
    others = [spec for spec in specs if spec.grouping not in paired_groupings]
    repeated = repeated_unit_rows(
        used,
        others,
        level_pairs.filter(pl.col("grouping").is_in([s.grouping for s in others])),
        unit,
        table.outcomes,
        [table.names.used(o) for o in table.outcomes],
    )
    if not chosen:
        return repeated
    outcomes = policy_outcomes(used, table.outcomes, table.names)
    pairs = level_pairs.filter(pl.col("grouping").is_in([s.grouping for s in chosen]))
    summaries = paired_summaries(
        used,
        unit,
        chosen,
        outcomes,
        duplicates="refuse" if duplicates == "refuse" else "mean-log",
        level_pairs=pairs,
    )
    figures = paired_figures(summaries, confidence, target_ratio)
    censored = _censored_counts(table)
    counted = figures.with_columns(
        pl.col("outcome").replace_strict(censored, return_dtype=pl.Int64).alias("n_censored_pairs")
    )
    paired = counted.select(_paired_columns(unit, policy)).cast(DESIGN_SCHEMA)
    return pl.concat([paired, repeated]) if repeated.height else paired


def _repeated_groups(
    used: pl.DataFrame, spec: GroupSpec, unit: str, outcomes: Sequence[str], names: Sequence[str]
) -> pl.LazyFrame:
    """The groups (grouping, within, stratum, level, outcome) of one grouping in which some
    unit gives two or more values."""
    counts = [pl.col(name).count().alias(o) for o, name in zip(outcomes, names, strict=True)]
    stratum = pl.col(spec.within).cast(pl.Utf8) if spec.within else pl.lit(None, pl.Utf8)
    return (
        used.lazy()
        .drop_nulls([*spec.keys, unit])
        .group_by(*spec.keys, unit)
        .agg(counts)
        .group_by(spec.keys)
        .agg(pl.col(list(outcomes)).max())
        .unpivot(index=spec.keys, variable_name="outcome", value_name="most")
        .filter(pl.col("most") > 1)
        .select(
            pl.lit(spec.grouping, pl.Utf8).alias("grouping"),
            pl.lit(spec.within, pl.Utf8).alias("within"),
            stratum.alias("stratum"),
            pl.col(spec.grouping).cast(pl.Utf8).alias("level"),
            "outcome",
        )
    )


def repeated_unit_rows(
    used: pl.DataFrame,
    specs: Sequence[GroupSpec],
    level_pairs: pl.DataFrame,
    unit: str,
    outcomes: Sequence[str],
    used_names: Sequence[str],
) -> pl.DataFrame:
    """Design rows carrying only the warning ``units-repeated`` for the comparisons of the
    groupings whose levels are not measured on the same units (so they stay independent-groups
    comparisons) where some unit gives two or more values in one of the two groups: those
    values are not independent, and the t-test counts each as a separate unit. One pass per
    grouping: the largest count of values per unit in each group, per outcome."""
    if not specs:
        return pl.DataFrame(schema=DESIGN_SCHEMA)
    plans = [_repeated_groups(used, spec, unit, outcomes, used_names) for spec in specs]
    groups = pl.concat(pl.collect_all(plans)).lazy()
    keys = ["grouping", "within", "stratum", "outcome"]
    pairs = level_pairs.lazy().join(
        groups.select(keys).unique(), on=keys[:3], how="inner", nulls_equal=True
    )
    flags = {
        side: groups.rename({"level": f"level_{side}"}).with_columns(pl.lit(True).alias(side))
        for side in ("a", "b")
    }
    rows = (
        pairs.join(flags["a"], on=[*keys, "level_a"], how="left", nulls_equal=True)
        .join(flags["b"], on=[*keys, "level_b"], how="left", nulls_equal=True)
        .filter(pl.col("a").fill_null(False) | pl.col("b").fill_null(False))
        .select(*keys, "level_a", "level_b")
        .collect()
    )
    empty = [name for name in DESIGN_SCHEMA if name not in rows.columns]
    return (
        rows.with_columns(pl.lit(None).alias(name) for name in empty)
        .with_columns(pl.lit(["units-repeated"]).alias("design_warnings"))
        .select(list(DESIGN_SCHEMA))
        .cast(DESIGN_SCHEMA)
    )


def _paired_columns(unit: str, policy: ValuePolicy) -> list[pl.Expr | str]:
    """The design columns from ``paired.paired_figures``' columns."""
    return [
        "grouping",
        "within",
        "stratum",
        "outcome",
        "level_a",
        "level_b",
        pl.col("mean_log_difference").alias("design_difference"),
        pl.col("se_log").alias("design_se"),
        pl.col("df").alias("design_df"),
        _paired_method(policy).alias("design_method"),
        pl.lit(unit, pl.Utf8).alias("pair_by"),
        "n_pairs",
        "n_only_a",
        "n_only_b",
        pl.col("n_left_out").alias("n_unpaired_left_out"),
        "n_combined",
        "within_cv",
        pl.col("gm_a").alias("design_gm_a"),
        pl.col("gm_b").alias("design_gm_b"),
        pl.col("median_ratio").alias("design_median_ratio"),
        pl.col("detectable_ratio").alias("design_detectable_ratio"),
        pl.col("n_pairs_needed").alias("design_n_needed"),
        pl.when(pl.col("warnings").list.contains("unit-dominates"))
        .then(pl.col("influential_unit"))
        .alias("influential_unit"),
        pl.col("warnings").cast(pl.List(pl.Utf8)).alias("design_warnings"),
    ]


def crossover_rows(
    table: Table,
    used: pl.DataFrame,
    unit: str,
    period: str,
    sequence: str,
    *,
    confidence: float,
) -> pl.DataFrame:
    """Design rows of a 2×2 crossover: one per outcome, the treatment grouping's test level
    over its reference (the first level in natural order)."""
    treatments = groupings_within_units(used, unit, table.groupings)
    if len(treatments) != 1:
        found = ", ".join(treatments) or "none"
        raise InputError(
            f"{table.name}: a 2x2 crossover needs exactly one grouping that changes within "
            f"subjects (the treatment); found: {found}; name it with --group"
        )
    treatment = treatments[0]
    outcomes = policy_outcomes(used, table.outcomes, table.names)
    result = crossover_2x2(
        used,
        subject=unit,
        period=period,
        sequence=sequence,
        treatment=treatment,
        outcomes=outcomes,
        confidence=confidence,
    )
    n = result.n_sequence_1 + result.n_sequence_2
    count = len(result.outcomes)
    return pl.DataFrame(
        {
            "grouping": [treatment] * count,
            "within": [None] * count,
            "stratum": [None] * count,
            "outcome": list(result.outcomes),
            "level_a": [result.design.reference] * count,
            "level_b": [result.design.test] * count,
            "design_difference": result.test.difference,
            "design_se": result.test.standard_error,
            "design_df": result.test.df,
            "design_method": ["2x2 crossover"] * count,
            "pair_by": [unit] * count,
            "n_pairs": n.astype(np.int64),
            "n_only_a": np.zeros(count, dtype=np.int64),
            "n_only_b": np.zeros(count, dtype=np.int64),
            "n_unpaired_left_out": result.n_left_out.astype(np.int64),
            "n_combined": np.zeros(count, dtype=np.int64),
            "within_cv": result.within_cv,
            "design_gm_a": np.full(count, np.nan),
            "design_gm_b": np.full(count, np.nan),
            "design_median_ratio": np.full(count, np.nan),
            "design_detectable_ratio": np.full(count, np.nan),
            "design_n_needed": np.full(count, np.nan),
            "influential_unit": [None] * count,
            "design_warnings": [[] for _ in range(count)],
        },
        schema=DESIGN_SCHEMA,
    ).with_columns(pl.col(pl.Float64).fill_nan(None))


def unit_ratios(
    used: pl.DataFrame,
    used_column: str,
    unit: str,
    group: tuple[str, str | None, str | None],
    level_a: str,
    level_b: str,
) -> np.ndarray:
    """The within-unit ratios y/x of one paired comparison (for its picture): per unit the
    geometric mean of its usable values at level b over that at level a, units with both.
    ``group`` is (grouping, within, stratum); ``used_column`` the outcome's used values."""
    grouping, within, stratum = group
    rows = used.lazy().filter(pl.col(unit).is_not_null() & pl.col(used_column).is_not_null())
    if within is not None:
        rows = rows.filter(pl.col(within).cast(pl.Utf8) == stratum)
    level = pl.col(grouping).cast(pl.Utf8)
    means = (
        rows.filter(level.is_in([level_a, level_b]))
        .group_by(unit, level.alias("level"))
        .agg(pl.col(used_column).log().mean().alias("mean_log"))
        .collect()
    )
    a = means.filter(pl.col("level") == level_a).select(unit, pl.col("mean_log").alias("a"))
    b = means.filter(pl.col("level") == level_b).select(unit, pl.col("mean_log").alias("b"))
    both = a.join(b, on=unit, how="inner")
    ratios: np.ndarray = np.exp((both["b"] - both["a"]).to_numpy())
    return ratios
