"""The whole scan: every grouping × outcome × pair of levels as one polars frame."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
import numpy.typing as npt
import polars as pl

from . import diagnostics, equivalence, precision
from .censored import CensoredComparison
from .censored_groups import SUMMARY_EXTRA, GroupEntries, merge_censored
from .columns import COMPARISON_SCHEMA, key_expression, side
from .defaults import DEFAULT_MAX_COMPARISONS, Reference
from .design import DESIGN_SCHEMA, crossover_rows, paired_rows
from .distributions import t_ppf, t_sf
from .load import InputError, Table
from .multiplicity import adjust
from .policy import ValuePolicy, apply_policy
from .summaries import group_summaries, level_order
from .ttest import LogTTest, log_t_test
from .values import GroupId, GroupSpec, GroupValues, group_specs
from .vocabulary import (
    FAMILIES,
    METHODS,
    PAIRS,
    TESTS,
    WARNING_NAMES,
    Family,
    Method,
    Pairs,
    Test,
    choose,
)

Array = npt.NDArray[np.float64]

#: The columns that name a set of levels compared with each other.
_SET = ["grouping", "within", "stratum"]


@dataclass(frozen=True)
class ScanSettings:
    """Everything that decides the numbers of a scan (exported beside every CSV)."""

    pairs: Pairs = "all"
    reference: tuple[Reference, ...] = ()
    test: Test = "welch"
    confidence: float = 0.95
    policy: ValuePolicy = field(default_factory=ValuePolicy)
    family: Family = "scan"
    band: tuple[float, float] = equivalence.DEFAULT_BAND
    target_ratio: float | None = None
    within: str | None = None
    #: The most comparisons a scan builds; more is refused before any is built.
    max_comparisons: int = DEFAULT_MAX_COMPARISONS
    #: The unit measured at several levels (``--pair-by``): paired comparisons.
    pair_by: str | None = None
    #: Several values of one unit at one level: their geometric mean, or refuse.
    pair_duplicates: Literal["mean-log", "refuse"] = "mean-log"
    #: A 2×2 crossover's period and sequence columns (with ``pair_by`` the subject).
    period: str | None = None
    sequence: str | None = None

    def __post_init__(self) -> None:
        choose(self.pairs, PAIRS, "pairs")
        if self.max_comparisons < 1:
            raise ValueError(f"max_comparisons must be at least 1, got {self.max_comparisons}")
        choose(self.test, TESTS, "test")
        choose(self.family, FAMILIES, "family")
        if (self.period is None) != (self.sequence is None):
            raise ValueError("a 2x2 crossover needs both the period and the sequence column")
        if self.period is not None and self.pair_by is None:
            raise ValueError("a 2x2 crossover needs the subject column (--pair-by)")
        if not 0.5 <= self.confidence < 1:
            raise ValueError(f"confidence must be at least 0.5 and below 1, got {self.confidence}")
        equivalence.check_band(*self.band)
        if self.target_ratio is not None and (
            not math.isfinite(self.target_ratio) or self.target_ratio <= 0 or self.target_ratio == 1
        ):
            raise ValueError(
                f"target ratio must be a positive number other than 1, got {self.target_ratio}"
            )

    def as_dict(self) -> dict[str, Any]:
        data = asdict(self)
        data["policy"] = asdict(self.policy)
        data["band"] = list(self.band)
        data["reference"] = [str(item) for item in self.reference]
        return data


@dataclass(frozen=True)
class DataSource:
    """What a scan read: the file, its fingerprint, its kind and its column roles."""

    path: Path | None
    fingerprint: str
    kind: Literal["raw", "summary table"]
    groupings: tuple[str, ...]
    outcomes: tuple[str, ...]
    unparsed: dict[str, int] = field(default_factory=dict)
    #: What the reader did that the user should know (one line each; see ``Table.notes``).
    notes: tuple[str, ...] = ()

    @property
    def name(self) -> str:
        return self.path.name if self.path is not None else "<table>"


@dataclass(frozen=True)
class ScanResult:
    """The comparisons frame (``columns.COMPARISON_SCHEMA``) plus what produced it.

    ``values`` gives each group's usable values for charts and cross-checks; it is None
    for a scan of a summary table, which has no raw values."""

    comparisons: pl.DataFrame
    summaries: pl.DataFrame
    settings: ScanSettings
    source: DataSource
    values: GroupValues | None
    #: Detected values, limits and above-range entries of the groups of outcomes with
    #: censored entries (None for a summary table).
    entries: GroupEntries | None = None

    def metadata(self) -> dict[str, Any]:
        return {
            "data_file": str(self.source.path) if self.source.path else None,
            "data_kind": self.source.kind,
            "data_fingerprint_sha256": self.source.fingerprint,
            "groupings": list(self.source.groupings),
            "outcomes": list(self.source.outcomes),
            "settings": self.settings.as_dict(),
            "comparisons": self.comparisons.height,
        }


#: A resolved reference: (grouping or None for every grouping, level).
_Resolved = tuple[str | None, str]


def _reference_for(grouping: str, levels: list[str], resolved: list[_Resolved]) -> str | None:
    for name, level in resolved:
        if name in (None, grouping) and level in levels:
            return level
    return None


def _resolve_references(
    summaries: pl.DataFrame, references: tuple[Reference, ...]
) -> list[_Resolved]:
    """Each reference's one reading that names levels of this data; an InputError for a
    reference that fits none or more than one."""
    known = set(summaries.select("grouping", "level").unique().rows())
    levels = {level for _, level in known}
    resolved = []
    for item in references:
        fits = [
            (name, level)
            for name, level in item.readings()
            if (level in levels if name is None else (name, level) in known)
        ]
        if not fits:
            raise InputError(
                f"reference level {str(item)!r} is not a level of any grouping column; "
                "write LEVEL or GROUPING=LEVEL"
            )
        if len(fits) > 1:
            readings = "; ".join(
                f"level {level!r}" if name is None else f"grouping {name!r} level {level!r}"
                for name, level in fits
            )
            raise InputError(
                f"reference {str(item)!r} is ambiguous in this data ({readings}); "
                "rename a column or level, or give the grouping with --pairs all"
            )
        resolved.append(fits[0])
    return resolved


def reference_notes(summaries: pl.DataFrame, settings: ScanSettings) -> tuple[str, ...]:
    """A note for each grouping compared against a reference in which none of the given
    reference levels is a level: its first level in natural order is the reference there."""
    if settings.pairs != "reference" or not settings.reference:
        return ()
    resolved = _resolve_references(summaries, settings.reference)
    given = ", ".join(repr(str(item)) for item in settings.reference)
    notes = []
    for grouping, levels in (
        summaries.group_by("grouping", maintain_order=True).agg(pl.col("level").unique()).rows()
    ):
        ordered = level_order(list(levels))
        if _reference_for(grouping, ordered, resolved) is None:
            notes.append(
                f"grouping {grouping!r} has no reference level {given}: its levels are "
                f"compared with {ordered[0]!r}, the first in order; name one with "
                f"--reference {grouping}=LEVEL"
            )
    return tuple(notes)


def _level_pairs(
    grouping: str, levels: list[str], pairs: Pairs, references: list[_Resolved]
) -> list[tuple[str, str]]:
    ordered = level_order(levels)
    if pairs == "reference":
        reference = _reference_for(grouping, ordered, references) or ordered[0]
        return [(reference, level) for level in ordered if level != reference]
    return [
        (ordered[i], ordered[j]) for i in range(len(ordered)) for j in range(i + 1, len(ordered))
    ]


_REFERENCE_ADVICE = {
    "all": ", compare each level with one reference (--pairs reference)",
    "reference": "",
}


def pairs_per_set(levels: int, pairs: Pairs) -> int:
    """Pairs of levels one set of ``levels`` levels gives: all pairs, or each against one."""
    if levels < 2:
        return 0
    return levels * (levels - 1) // 2 if pairs == "all" else levels - 1


def check_comparison_count(
    sets: pl.DataFrame, outcomes: int, settings: ScanSettings, label: str
) -> None:
    """Refuse a scan whose comparisons would exceed ``settings.max_comparisons`` before any
    is built. ``sets`` has one row per compared set of levels: ``grouping`` and ``levels``
    (the count of its levels)."""
    per_set = [pairs_per_set(k, settings.pairs) for k in sets["levels"].to_list()]
    total = sum(per_set) * outcomes
    if total <= settings.max_comparisons:
        return
    counts = sets.with_columns(pl.Series("pairs", per_set, dtype=pl.Int64))
    worst = counts.group_by("grouping").agg(pl.col("levels").max(), pl.col("pairs").sum())
    grouping, levels, _ = worst.sort("pairs", descending=True).row(0)
    raise InputError(
        f"{label}: {total:,} comparisons (grouping {grouping!r} has {levels:,} levels, "
        f"{outcomes} outcome(s)) is more than the limit of {settings.max_comparisons:,}; "
        f"choose groupings with fewer levels{_REFERENCE_ADVICE[settings.pairs]}, "
        "or raise the limit with --max-comparisons N"
    )


def build_pairs(summaries: pl.DataFrame, settings: ScanSettings) -> pl.DataFrame:
    """One row per grouping × stratum × (level_a, level_b); level_a is the denominator.
    Refuses before building when there would be more than ``settings.max_comparisons``."""
    counts = summaries.group_by(_SET).agg(pl.col("level").n_unique().alias("levels"))
    check_comparison_count(counts, summaries["outcome"].n_unique(), settings, "scan")
    references = _resolve_references(summaries, settings.reference)
    sets = summaries.group_by(_SET, maintain_order=True).agg(pl.col("level").unique()).rows()
    rows = [
        (grouping, within, stratum, level_a, level_b)
        for grouping, within, stratum, levels in sets
        for level_a, level_b in _level_pairs(grouping, list(levels), settings.pairs, references)
    ]
    return pl.DataFrame(
        rows, schema={name: pl.Utf8 for name in [*_SET, "level_a", "level_b"]}, orient="row"
    )


def _family_codes(frame: pl.DataFrame, family: Family) -> npt.NDArray[np.int64]:
    if family == "scan":
        return np.zeros(frame.height, dtype=np.int64)
    codes: npt.NDArray[np.int64] = frame.select(pl.col(family).rank("dense")).to_series().to_numpy()
    return codes


def check_within(table: Table, within: str | None) -> None:
    """``--within`` must name a grouping column and leave another one to compare."""
    if within is None:
        return
    if within not in table.groupings:
        raise InputError(
            f"{table.name}: --within {within!r} is not a grouping column; "
            f"groupings are: {', '.join(table.groupings)}"
        )
    if len(table.groupings) < 2:
        raise InputError(
            f"{table.name}: --within {within!r} needs another grouping column to compare "
            "inside its levels; name one with --group"
        )


def level_sets(frame: pl.DataFrame, specs: Sequence[GroupSpec]) -> pl.DataFrame:
    """The count of levels of each set compared (a grouping, or a grouping within one
    stratum), from the grouping columns before any summary is computed."""
    parts = []
    for spec in specs:
        present = frame.select(spec.keys).drop_nulls()
        if spec.within is None:
            levels = present.select(pl.col(spec.grouping).n_unique().alias("levels"))
        else:
            levels = present.group_by(spec.within).agg(
                pl.col(spec.grouping).n_unique().alias("levels")
            )
        parts.append(
            levels.select(pl.lit(spec.grouping).alias("grouping"), pl.col("levels").cast(pl.Int64))
        )
    return (
        pl.concat(parts)
        if parts
        else pl.DataFrame(schema={"grouping": pl.Utf8, "levels": pl.Int64})
    )


#: Told what a scan is doing, stage by stage (the command line and the app show it).
Progress = Callable[[str], None]


def _silent(stage: str) -> None:
    del stage


def run_scan(
    table: Table, settings: ScanSettings | None = None, progress: Progress | None = None
) -> ScanResult:
    """Compute every comparison of the table under the settings; ``progress`` hears each
    stage as it starts."""
    settings = settings or ScanSettings()
    say = progress or _silent
    check_within(table, settings.within)
    specs: list[GroupSpec] = group_specs(table.groupings, settings.within)
    check_comparison_count(
        level_sets(table.frame, specs), len(table.outcomes), settings, table.name
    )
    part = summarise(table, specs, settings.policy, say)
    used, values, entries, summaries = part.used, part.values, part.entries, part.summaries
    completed = complete_summaries(summaries)
    say(f"comparing the levels of {completed.height:,} groups")
    comparisons = compare_summaries(
        completed,
        settings,
        table.outcomes,
        table.units,
        table.units_apart,
        entries=entries,
        design=_design(table, used, specs, completed, settings),
    )
    source = DataSource(
        path=table.path,
        fingerprint=table.fingerprint,
        kind="raw",
        groupings=table.groupings,
        outcomes=table.outcomes,
        unparsed=dict(table.unparsed),
        notes=table.notes + reference_notes(summaries, settings),
    )
    return ScanResult(comparisons, summaries, settings, source, values, entries)


@dataclass(frozen=True)
class Summarised:
    """The per-group figures of a table (or of a batch of its outcomes) before comparison:
    the policy-applied frame, each group's values and censored entries, and the summaries
    with the normality check and the censored figures merged in."""

    used: pl.DataFrame
    values: GroupValues
    entries: GroupEntries
    summaries: pl.DataFrame


def summarise(
    table: Table, specs: list[GroupSpec], policy: ValuePolicy, say: Progress = _silent
) -> Summarised:
    """Every group's figures: counts, log moments, medians, Shapiro-Wilk, censored fits."""
    say(
        f"summarising {table.frame.height:,} rows x {len(table.outcomes)} outcomes by "
        f"{len(specs)} grouping(s)"
    )
    used = apply_policy(table.frame, table.outcomes, policy, table.names)
    values = GroupValues(used, specs, table.outcomes, table.names)
    entries = GroupEntries(used, specs, table.outcomes, table.names, policy)
    summaries = group_summaries(used, specs, table.outcomes, table.names)
    say(f"checking the logs of {summaries.height:,} groups")
    normality = diagnostics.group_normality(values, summaries)
    summaries = summaries.join(
        normality, on=list(diagnostics.GROUP_KEYS), how="left", nulls_equal=True
    )
    if entries.outcomes:
        say(f"fitting the below-detection entries of {len(entries.outcomes)} outcome(s)")
    summaries = merge_censored(summaries, entries.figures(), policy)
    return Summarised(used, values, entries, summaries)


def _design(
    table: Table,
    used: pl.DataFrame,
    specs: list[GroupSpec],
    summaries: pl.DataFrame,
    settings: ScanSettings,
) -> pl.DataFrame | None:
    """The paired or crossover rows that replace independent-groups comparisons (None
    without ``pair_by``)."""
    unit = settings.pair_by
    if unit is None:
        return None
    for role, name in (
        ("unit", unit),
        ("period", settings.period),
        ("sequence", settings.sequence),
    ):
        if name is not None and name not in table.design:
            raise InputError(f"{table.name}: the {role} column {name!r} was not read")
    if settings.period is not None and settings.sequence is not None:
        return crossover_rows(
            table, used, unit, settings.period, settings.sequence, confidence=settings.confidence
        )
    return paired_rows(
        table,
        used,
        specs,
        build_pairs(summaries, settings),
        unit,
        policy=settings.policy,
        confidence=settings.confidence,
        target_ratio=settings.target_ratio,
        duplicates=settings.pair_duplicates,
    )


def complete_summaries(summaries: pl.DataFrame) -> pl.DataFrame:
    """Add the derived per-group figures: geometric mean, log SD, the variance of the mean of
    the logs the comparison uses, censored share; the censored columns (``SUMMARY_EXTRA``)
    stay null where no censored fit applies."""
    missing = [
        pl.lit(0 if name in ("n_left", "n_right") else None, dtype).alias(name)
        for name, dtype in SUMMARY_EXTRA.items()
        if name not in summaries.columns
    ]
    plain_sd = (pl.col("ss_log") / (pl.col("n") - 1)).sqrt()
    return (
        summaries.with_columns(missing)
        .with_columns(
            gm=pl.col("mean_log").exp(),
            sd_log=pl.coalesce(pl.col("fit_sd_log"), plain_sd),
            censored_share=pl.col("n_censored")
            / (pl.col("n") + pl.col("n_excluded")).cast(pl.Float64),
        )
        .with_columns(
            sd_log=pl.when(pl.col("n") >= 2).then(pl.col("sd_log")).otherwise(None),
        )
        .with_columns(
            var_mean_log=pl.coalesce(
                pl.col("fit_var_mean_log"), pl.col("sd_log").pow(2) / pl.col("n")
            ),
        )
    )


def _join_sides(
    summaries: pl.DataFrame, settings: ScanSettings, outcomes: tuple[str, ...]
) -> pl.DataFrame:
    """Each pair of levels with both groups' figures (``n_a``, ``n_b``, ...), in outcome order."""
    pairs = build_pairs(summaries, settings)
    figures = [c for c in summaries.columns if c not in (*_SET, "level", "outcome")]

    def one_side(which: Literal["a", "b"]) -> pl.DataFrame:
        return summaries.rename(
            {"level": side("level", which), **{c: side(c, which) for c in figures}}
        )

    frame = pairs.join(one_side("a"), on=[*_SET, "level_a"], how="inner", nulls_equal=True).join(
        one_side("b"), on=[*_SET, "outcome", "level_b"], how="inner", nulls_equal=True
    )
    order = {name: index for index, name in enumerate(outcomes)}
    return frame.sort(
        pl.col("grouping"),
        pl.col("stratum"),
        pl.col("outcome").replace_strict(order, return_dtype=pl.Int64),
        maintain_order=True,
    )


def _design_or(frame: pl.DataFrame, name: str, values: Array) -> Array:
    """The design's figure where a row has a design (paired or crossover), else ``values``."""
    designed = frame["design_method"].is_not_null().to_numpy()
    given = frame[name].cast(pl.Float64).fill_null(np.nan).to_numpy()
    chosen: Array = np.where(designed, given, values)
    return chosen


def _figures(frame: pl.DataFrame, test: LogTTest, settings: ScanSettings) -> dict[str, Array]:
    """Every numeric column computed from the t-test and both groups' figures."""

    def column(name: str) -> Array:
        values: Array = frame[name].cast(pl.Float64).fill_null(np.nan).to_numpy()
        return values

    n_a, n_b = column("n_a"), column("n_b")
    ratio_low, ratio_high = test.ratio_ci
    holm, bh = adjust(test.p_value, _family_codes(frame, settings.family))
    alpha = 1 - settings.confidence
    p_tost, tost_low, tost_high = equivalence.tost(
        test.difference, test.standard_error, test.df, settings.band, alpha=0.05
    )
    sd_a, sd_b = column("sd_log_a"), column("sd_log_b")
    with np.errstate(divide="ignore", invalid="ignore"):
        pooled_sd = np.sqrt(((n_a - 1) * sd_a**2 + (n_b - 1) * sd_b**2) / (n_a + n_b - 2))
        median_ratio = column("median_b") / column("median_a")
        sd_log_ratio = sd_b / sd_a
    n_needed = (
        precision.n_per_group(settings.target_ratio, pooled_sd, alpha=alpha)
        if settings.target_ratio is not None
        else np.full(frame.height, np.nan)
    )
    return {
        "ratio": test.ratio,
        "ci_low": ratio_low,
        "ci_high": ratio_high,
        "p_value": test.p_value,
        "p_holm": holm,
        "q_bh": bh,
        "median_ratio": _design_or(frame, "design_median_ratio", median_ratio),
        "percent_change": 100 * (test.ratio - 1),
        "log2_ratio": test.difference / math.log(2),
        "mean_log_difference": test.difference,
        "se_log": test.standard_error,
        "df": test.df,
        "t": test.t,
        "sd_log_ratio": sd_log_ratio,
        "spread_p": diagnostics.spread_test(sd_a, n_a, sd_b, n_b),
        "median_gm_z": diagnostics.median_gm_z(
            np.log(median_ratio), test.difference, sd_a, n_a, sd_b, n_b
        ),
        "p_tost": p_tost,
        "tost_ci_low": tost_low,
        "tost_ci_high": tost_high,
        "ci_fold": ratio_high / ratio_low,
        "detectable_ratio": _design_or(
            frame,
            "design_detectable_ratio",
            precision.detectable_ratio(n_a, n_b, pooled_sd, alpha=alpha),
        ),
        "n_needed": _design_or(frame, "design_n_needed", n_needed),
    }


def _pair_groups(frame: pl.DataFrame) -> list[tuple[GroupId, GroupId]]:
    rows = frame.select(*_SET, "level_a", "level_b", "outcome").rows()
    return [((g, w, st, a, o), (g, w, st, b, o)) for g, w, st, a, b, o in rows]


def _censored_rows(frame: pl.DataFrame) -> npt.NDArray[np.bool_]:
    censored: npt.NDArray[np.bool_] = (
        frame.select(
            (pl.col("n_left_a") + pl.col("n_right_a") + pl.col("n_left_b") + pl.col("n_right_b"))
            > 0
        )
        .to_series()
        .to_numpy()
    )
    return censored


def _log_test(
    frame: pl.DataFrame,
    settings: ScanSettings,
    entries: GroupEntries | None,
    prefix: str = "",
) -> LogTTest:
    """The t-test on the logs of every comparison; under ``mle`` censored groups enter with
    their fitted mean and the variance of it (Welch), or through the joint common-SD fit of
    the comparison (pooled). ``prefix`` "half_dl_" takes the DL/2 figures instead."""

    def column(name: str) -> Array:
        values: Array = frame[name].cast(pl.Float64).fill_null(np.nan).to_numpy()
        return values

    def figure(name: str, which: Literal["a", "b"]) -> Array:
        plain = column(side(name, which))
        if not prefix:
            return plain
        other = column(side(prefix + name, which))
        chosen: Array = np.where(np.isfinite(other), other, plain)
        return chosen

    test = log_t_test(
        figure("n", "a"),
        figure("mean_log", "a"),
        figure("ss_log", "a"),
        figure("n", "b"),
        figure("mean_log", "b"),
        figure("ss_log", "b"),
        test=settings.test,
        confidence=settings.confidence,
        var_mean_a=None if prefix else column("fit_var_mean_log_a"),
        var_mean_b=None if prefix else column("fit_var_mean_log_b"),
    )
    if prefix or settings.test != "pooled" or settings.policy.censored != "mle":
        return test
    rows = np.flatnonzero(_censored_rows(frame))
    if rows.size == 0:
        return test
    if entries is None:
        raise InputError(
            "--test pooled with censored fits needs the raw values (the common-SD fit of "
            "each comparison); use --test welch with a summary table"
        )
    pairs = _pair_groups(frame)
    joint = entries.pooled([pairs[i] for i in rows], settings.confidence)
    return _with_rows(test, rows, joint, settings.confidence)


def _with_rows(
    test: LogTTest, rows: npt.NDArray[np.intp], joint: CensoredComparison, confidence: float
) -> LogTTest:
    """``test`` with the rows at ``rows`` replaced by the censored comparisons."""
    fields = {
        "difference": joint.d,
        "standard_error": joint.se,
        "df": joint.df,
        "ci_low": joint.ci_low,
        "ci_high": joint.ci_high,
        "p_value": joint.p,
    }
    replaced = {}
    for name, values in fields.items():
        column = np.array(getattr(test, name), dtype=float, copy=True)
        column[rows] = values
        replaced[name] = column
    with np.errstate(divide="ignore", invalid="ignore"):
        t = replaced["difference"] / replaced["standard_error"]
        t_critical = t_ppf(0.5 + confidence / 2, replaced["df"])
    return LogTTest(t=t, t_critical=t_critical, **replaced)


_IDENTITY = [*_SET, "outcome", "level_a", "level_b"]


def _with_design(frame: pl.DataFrame, design: pl.DataFrame | None) -> pl.DataFrame:
    """The comparisons with the design rows joined (null columns without a design)."""
    rows = design if design is not None else pl.DataFrame(schema=DESIGN_SCHEMA)
    joined = frame.join(rows, on=_IDENTITY, how="left", nulls_equal=True)
    # A paired comparison whose two levels hold no below-detection entry is plain.
    plain = (pl.col("n_censored_a") + pl.col("n_censored_b") == 0) & pl.col(
        "design_method"
    ).str.starts_with("paired t,")
    return joined.with_columns(
        pl.when(plain)
        .then(pl.lit("paired t on logs"))
        .otherwise(pl.col("design_method"))
        .alias("design_method"),
        pl.col("design_warnings").fill_null(pl.lit([], pl.List(pl.Enum(list(WARNING_NAMES))))),
        pl.coalesce("design_gm_a", "gm_a").alias("gm_a"),
        pl.coalesce("design_gm_b", "gm_b").alias("gm_b"),
    )


def _design_test(test: LogTTest, frame: pl.DataFrame, confidence: float) -> LogTTest:
    """``test`` with the rows of a paired or crossover design replaced by the design's
    difference, SE and df (then its own CI and p)."""
    difference = frame["design_difference"].cast(pl.Float64).fill_null(np.nan).to_numpy()
    rows = np.flatnonzero(frame["design_method"].is_not_null().to_numpy())
    if rows.size == 0:
        return test
    se = frame["design_se"].cast(pl.Float64).fill_null(np.nan).to_numpy()[rows]
    df = frame["design_df"].cast(pl.Float64).fill_null(np.nan).to_numpy()[rows]
    d = difference[rows]
    with np.errstate(divide="ignore", invalid="ignore"):
        p = 2 * t_sf(np.abs(d / se), df)
        critical = t_ppf(0.5 + confidence / 2, df)
    joint = CensoredComparison(d, se, df, d - critical * se, d + critical * se, p)
    return _with_rows(test, rows, joint, confidence)


def _method_expression(policy: ValuePolicy) -> pl.Expr:
    """What each comparison's numbers rest on (``vocabulary.METHODS``)."""
    fitted = (
        pl.col("n_left_a") + pl.col("n_right_a") + pl.col("n_left_b") + pl.col("n_right_b")
    ) > 0
    censored = (pl.col("n_censored_a") + pl.col("n_censored_b")) > 0
    other: dict[str, Method] = {
        "mle": "nondetects left out",
        "exclude": "nondetects left out",
        "half-dl": "DL/2 substituted",
        "dl-root2": "DL/sqrt2 substituted",
    }
    by_policy = (
        pl.when(fitted & pl.lit(policy.censored == "mle"))
        .then(pl.lit("censored ML"))
        .when(censored)
        .then(pl.lit(other[policy.censored]))
        .otherwise(pl.lit("t-test on logs"))
    )
    return by_policy.cast(pl.Enum(list(METHODS)))


def _sensitivity(
    frame: pl.DataFrame, settings: ScanSettings, figures: dict[str, Array]
) -> dict[str, Array]:
    """The DL/2 answer of every censored-ML comparison (NaN elsewhere) and whether it tells
    a different story: the CI excludes 1 in one answer only, or the band class differs."""
    half = _log_test(frame, settings, None, prefix="half_dl_")
    low, high = half.ratio_ci
    _, tost_low, tost_high = equivalence.tost(
        half.difference, half.standard_error, half.df, settings.band, alpha=0.05
    )
    half_class = equivalence.band_class(low, high, tost_low, tost_high, settings.band)
    censored = _censored_rows(frame) & (settings.policy.censored == "mle")
    with np.errstate(invalid="ignore"):
        excludes_ml = (figures["ci_low"] > 1) | (figures["ci_high"] < 1)
        excludes_half = (low > 1) | (high < 1)
    known = np.isfinite(half.difference) & np.isfinite(figures["ratio"])
    differs = known & ((excludes_ml != excludes_half) | (half_class != figures["band_class"]))
    return {
        "half_dl_ratio": np.where(censored, half.ratio, np.nan),
        "half_dl_ci_low": np.where(censored, low, np.nan),
        "half_dl_ci_high": np.where(censored, high, np.nan),
        "censoring_sensitive": censored & differs,
        "half_dl_band_class": np.where(censored, half_class, ""),
    }


def compare_summaries(
    summaries: pl.DataFrame,
    settings: ScanSettings,
    outcomes: tuple[str, ...],
    units: Mapping[str, str] | None = None,
    units_apart: Sequence[str] = (),
    *,
    entries: GroupEntries | None = None,
    design: pl.DataFrame | None = None,
) -> pl.DataFrame:
    """Every comparison from per-group summaries (one row per grouping × stratum × level ×
    outcome): the part of the scan that needs no raw values, except the common-SD fits of
    censored comparisons under ``--test pooled`` (from ``entries``). Returns a frame with
    exactly ``columns.COMPARISON_SCHEMA``."""
    frame = _with_design(_join_sides(summaries, settings, outcomes), design)
    test = _design_test(_log_test(frame, settings, entries), frame, settings.confidence)
    figures = _figures(frame, test, settings)
    classes = equivalence.band_class(
        figures["ci_low"],
        figures["ci_high"],
        figures["tost_ci_low"],
        figures["tost_ci_high"],
        settings.band,
    )
    sensitivity = _sensitivity(frame, settings, {**figures, "band_class": classes})
    sensitive = sensitivity.pop("censoring_sensitive")
    half_class = sensitivity.pop("half_dl_band_class")
    frame = frame.with_columns(
        [
            pl.Series(name, values, dtype=pl.Float64)
            for name, values in {**figures, **sensitivity}.items()
        ]
    ).with_columns(
        pl.col(pl.Float64).fill_nan(None),
        pl.Series("band_class", classes, dtype=pl.String).replace("", None),
        pl.Series("censoring_sensitive", sensitive, dtype=pl.Boolean),
        pl.Series("half_dl_band_class", half_class, dtype=pl.String).replace("", None),
        pl.lit(settings.test).alias("test"),
        pl.coalesce(
            pl.col("design_method").cast(pl.Enum(list(METHODS))),
            _method_expression(settings.policy),
        ).alias("method"),
        pl.col("outcome")
        .replace_strict(dict(units or {}), default=None, return_dtype=pl.String)
        .alias("unit"),
        pl.col("outcome").is_in(list(units_apart)).alias("units_apart"),
        pl.lit(settings.confidence, pl.Float64).alias("confidence"),
    )
    frame = frame.with_columns(
        pl.concat_list(diagnostics.warning_expression(), pl.col("design_warnings"))
        .list.unique(maintain_order=True)
        .alias("warnings"),
        key_expression().alias("key"),
    )
    return frame.select(list(COMPARISON_SCHEMA)).cast(COMPARISON_SCHEMA)
