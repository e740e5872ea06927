"""The whole scan: every grouping × outcome × pair of levels as one polars frame."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
import numpy.typing as npt
import polars as pl

from . import diagnostics, equivalence, precision
from .columns import COMPARISON_SCHEMA, key_expression, side
from .load import InputError, Table
from .multiplicity import adjust
from .policy import ValuePolicy, apply_policy
from .summaries import group_summaries, level_order
from .ttest import LogTTest, log_t_test
from .values import GroupSpec, GroupValues, group_specs
from .vocabulary import FAMILIES, PAIRS, TESTS, Family, Pairs, Test, choose

Array = npt.NDArray[np.float64]

#: The columns that name a set of levels compared with each other.
_SET = ["grouping", "within", "stratum"]
#: The default limit on the comparisons of one scan (each is a row the review lists; 200,000
#: rows take a few hundred MB and well under a minute on a small machine).
DEFAULT_MAX_COMPARISONS = 200_000


@dataclass(frozen=True)
class Reference:
    """A reference level (denominator) as the user wrote it: ``LEVEL`` (for every grouping
    that has that level) or ``GROUPING=LEVEL``. Names may themselves hold ``=``: every
    reading is tried against the groupings and levels of the data, and a text that fits
    more than one is refused as ambiguous."""

    text: str

    @classmethod
    def parse(cls, text: str) -> Reference:
        if not text or text.startswith("=") or text.endswith("="):
            raise ValueError(f"reference {text!r}: write LEVEL or GROUPING=LEVEL")
        return cls(text)

    @classmethod
    def of(cls, level: str, grouping: str | None = None) -> Reference:
        return cls(level if grouping is None else f"{grouping}={level}")

    def readings(self) -> list[tuple[str | None, str]]:
        """(grouping or None, level) for the whole text and each ``=`` it holds."""
        splits = [i for i, char in enumerate(self.text) if char == "="]
        return [(None, self.text)] + [(self.text[:i], self.text[i + 1 :]) for i in splits]

    def __str__(self) -> str:
        return self.text


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

    def __post_init__(self) -> None:
        choose(self.pairs, PAIRS, "pairs")
        if self.max_comparisons < 1:
            raise ValueError(f"max_comparisons must be at least 1, got {self.max_comparisons}")
        choose(self.test, TESTS, "test")
        choose(self.family, FAMILIES, "family")
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


def _level_sets(table: Table, specs: list[GroupSpec]) -> pl.DataFrame:
    """The count of levels of each set compared (a grouping, or a grouping within one
    stratum), from the table before any summary is computed."""
    parts = []
    for spec in specs:
        present = table.frame.select(spec.keys).drop_nulls()
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


def run_scan(table: Table, settings: ScanSettings | None = None) -> ScanResult:
    """Compute every comparison of the table under the settings."""
    settings = settings or ScanSettings()
    check_within(table, settings.within)
    specs: list[GroupSpec] = group_specs(table.groupings, settings.within)
    check_comparison_count(_level_sets(table, specs), len(table.outcomes), settings, table.name)
    used = apply_policy(table.frame, table.outcomes, settings.policy, table.names)
    values = GroupValues(used, specs, table.outcomes, table.names)
    summaries = group_summaries(used, specs, table.outcomes, table.names)
    normality = diagnostics.group_normality(values)
    summaries = summaries.join(
        normality,
        on=["grouping", "within", "stratum", "level", "outcome"],
        how="left",
        nulls_equal=True,
    )
    comparisons = compare_summaries(
        complete_summaries(summaries), settings, table.outcomes, table.units, table.units_apart
    )
    source = DataSource(
        path=table.path,
        fingerprint=table.fingerprint,
        kind="raw",
        groupings=table.groupings,
        outcomes=table.outcomes,
        unparsed=dict(table.unparsed),
        notes=table.notes,
    )
    return ScanResult(comparisons, summaries, settings, source, values)


def complete_summaries(summaries: pl.DataFrame) -> pl.DataFrame:
    """Add the derived per-group figures: geometric mean, log SD, censored share."""
    return summaries.with_columns(
        gm=pl.col("mean_log").exp(),
        sd_log=(pl.col("ss_log") / (pl.col("n") - 1)).sqrt(),
        censored_share=pl.col("n_censored") / (pl.col("n") + pl.col("n_excluded")).cast(pl.Float64),
    ).with_columns(
        sd_log=pl.when(pl.col("n") >= 2).then(pl.col("sd_log")).otherwise(None),
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
        pooled_sd = np.sqrt((column("ss_log_a") + column("ss_log_b")) / (n_a + n_b - 2))
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
        "median_ratio": median_ratio,
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
        "detectable_ratio": precision.detectable_ratio(n_a, n_b, pooled_sd, alpha=alpha),
        "n_needed": n_needed,
    }


def compare_summaries(
    summaries: pl.DataFrame,
    settings: ScanSettings,
    outcomes: tuple[str, ...],
    units: Mapping[str, str] | None = None,
    units_apart: Sequence[str] = (),
) -> pl.DataFrame:
    """Every comparison from per-group summaries (one row per grouping × stratum × level ×
    outcome): the part of the scan that needs no raw values. Returns a frame with exactly
    ``columns.COMPARISON_SCHEMA``."""
    frame = _join_sides(summaries, settings, outcomes)

    def column(name: str) -> Array:
        values: Array = frame[name].cast(pl.Float64).fill_null(np.nan).to_numpy()
        return values

    test = log_t_test(
        column("n_a"),
        column("mean_log_a"),
        column("ss_log_a"),
        column("n_b"),
        column("mean_log_b"),
        column("ss_log_b"),
        test=settings.test,
        confidence=settings.confidence,
    )
    figures = _figures(frame, test, settings)
    classes = equivalence.band_class(
        figures["ci_low"],
        figures["ci_high"],
        figures["tost_ci_low"],
        figures["tost_ci_high"],
        settings.band,
    )
    frame = frame.with_columns(
        [pl.Series(name, values, dtype=pl.Float64) for name, values in figures.items()]
    ).with_columns(
        pl.col(pl.Float64).fill_nan(None),
        pl.Series("band_class", classes, dtype=pl.String).replace("", None),
        pl.lit(settings.test).alias("test"),
        pl.col("outcome")
        .replace_strict(dict(units or {}), default=None, return_dtype=pl.String)
        .alias("unit"),
        pl.col("outcome").is_in(list(units_apart)).alias("units_apart"),
        pl.lit(settings.confidence, pl.Float64).alias("confidence"),
    )
    frame = frame.with_columns(
        diagnostics.warning_expression().alias("warnings"), key_expression().alias("key")
    )
    return frame.select(list(COMPARISON_SCHEMA)).cast(COMPARISON_SCHEMA)
