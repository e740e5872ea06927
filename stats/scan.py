"""The whole scan: every grouping × outcome × pair of levels as one polars frame."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, replace

import numpy as np
import polars as pl

from . import diagnostics, equivalence, precision
from .load import InputError, Table
from .multiplicity import FAMILIES, adjust
from .policy import ValuePolicy, apply_policy
from .summaries import group_summaries, level_order
from .ttest import TESTS, log_t_test

PAIRS = ("all", "reference")
KEY_SEPARATOR = "|"
WITHIN = " within "  # joins a grouping and its stratum in a stratified grouping's name

#: The columns every scan CSV starts with, in this order.
LEADING_COLUMNS = (
    "grouping",
    "outcome",
    "level_a",
    "level_b",
    "n_a",
    "n_b",
    "gm_a",
    "gm_b",
    "median_a",
    "median_b",
    "ratio",
    "ci_low",
    "ci_high",
    "p_value",
    "p_holm",
    "q_bh",
    "warnings",
)


@dataclass(frozen=True)
class ScanSettings:
    """Everything that decides the numbers of a scan (exported beside every CSV)."""

    pairs: str = "all"
    reference: tuple[str, ...] = ()
    test: str = "welch"
    confidence: float = 0.95
    policy: ValuePolicy = field(default_factory=ValuePolicy)
    family: str = "scan"
    band: tuple[float, float] = equivalence.DEFAULT_BAND
    target_ratio: float | None = None
    within: str | None = None

    def __post_init__(self) -> None:
        if self.pairs not in PAIRS:
            raise ValueError(f"unknown pairs {self.pairs!r}; choose all or reference")
        if self.test not in TESTS:
            raise ValueError(f"unknown test {self.test!r}; choose welch or pooled")
        if not 0.5 <= self.confidence < 1:
            raise ValueError(f"confidence must be at least 0.5 and below 1, got {self.confidence}")
        if self.family not in FAMILIES:
            raise ValueError(f"unknown family {self.family!r}; choose scan, outcome or grouping")
        equivalence.check_band(*self.band)
        if self.target_ratio is not None and (
            not math.isfinite(self.target_ratio) or self.target_ratio <= 0 or self.target_ratio == 1
        ):
            raise ValueError(
                f"target ratio must be a positive number other than 1, got {self.target_ratio}"
            )

    def as_dict(self) -> dict:
        data = asdict(self)
        data["policy"] = asdict(self.policy)
        data["band"] = list(self.band)
        data["reference"] = list(self.reference)
        return data


def _reference_for(grouping: str, levels: list[str], references: tuple[str, ...]) -> str:
    for item in references:
        if "=" in item:
            name, _, level = item.partition("=")
            if name == grouping.partition(WITHIN)[0] and level in levels:
                return level
        elif item in levels:
            return item
    return levels[0]


def build_pairs(summaries: pl.DataFrame, settings: ScanSettings) -> pl.DataFrame:
    """One row per grouping × (level_a, level_b); level_a is the denominator."""
    rows: dict[str, list[str]] = {"grouping": [], "level_a": [], "level_b": []}
    levels_by_grouping = (
        summaries.group_by("grouping", maintain_order=True).agg(pl.col("level").unique()).rows()
    )
    all_levels = set()
    for grouping, levels in levels_by_grouping:
        ordered = level_order(list(levels))
        all_levels.update(ordered)
        all_levels.update(f"{grouping.partition(WITHIN)[0]}={level}" for level in ordered)
        if settings.pairs == "reference":
            reference = _reference_for(grouping, ordered, settings.reference)
            pairs = [(reference, level) for level in ordered if level != reference]
        else:
            pairs = [
                (ordered[i], ordered[j])
                for i in range(len(ordered))
                for j in range(i + 1, len(ordered))
            ]
        for level_a, level_b in pairs:
            rows["grouping"].append(grouping)
            rows["level_a"].append(level_a)
            rows["level_b"].append(level_b)
    for item in settings.reference:
        if item not in all_levels:
            raise InputError(
                f"reference level {item!r} is not a level of any grouping column; "
                "write LEVEL or GROUPING=LEVEL"
            )
    return pl.DataFrame(rows, schema={"grouping": pl.Utf8, "level_a": pl.Utf8, "level_b": pl.Utf8})


def _family_codes(frame: pl.DataFrame, family: str) -> np.ndarray:
    if family == "scan":
        return np.zeros(frame.height, dtype=np.int64)
    return frame.select(pl.col(family).rank("dense")).to_series().to_numpy()


@dataclass(frozen=True)
class ScanResult:
    """The comparisons frame plus what produced it."""

    comparisons: pl.DataFrame
    summaries: pl.DataFrame
    settings: ScanSettings
    table: Table
    used: pl.DataFrame  # the table with the policy columns, for histograms and robust checks

    def metadata(self) -> dict:
        return {
            "data_file": str(self.table.path) if self.table.path else None,
            "data_fingerprint_sha256": self.table.fingerprint,
            "groupings": list(self.table.groupings),
            "outcomes": list(self.table.outcomes),
            "settings": self.settings.as_dict(),
            "comparisons": self.comparisons.height,
        }


def stratify(table: Table, within: str) -> Table:
    """Compare inside each level of ``within``: every other grouping g becomes one grouping
    per stratum s, named ``"g within w=s"``, whose value is g's level on the rows of s and
    missing elsewhere. Everything downstream then works unchanged."""
    if within not in table.groupings:
        raise InputError(
            f"{table.name}: --within {within!r} is not a grouping column; "
            f"groupings are: {', '.join(table.groupings)}"
        )
    others = [g for g in table.groupings if g != within]
    if not others:
        raise InputError(
            f"{table.name}: --within {within!r} needs another grouping column to compare "
            "inside its levels; name one with --group"
        )
    strata = level_order(table.frame[within].drop_nulls().unique().to_list())
    derived: list[pl.Expr] = []
    names: list[str] = []
    for grouping in others:
        for stratum in strata:
            name = f"{grouping}{WITHIN}{within}={stratum}"
            names.append(name)
            derived.append(pl.when(pl.col(within) == stratum).then(pl.col(grouping)).alias(name))
    return replace(table, frame=table.frame.with_columns(derived), groupings=tuple(names))


def run_scan(table: Table, settings: ScanSettings | None = None) -> ScanResult:
    """Compute every comparison of the table under the settings."""
    settings = settings or ScanSettings()
    if settings.within is not None:
        table = stratify(table, settings.within)
    used = apply_policy(table.frame, table.outcomes, settings.policy)
    summaries = group_summaries(used, table.groupings, table.outcomes)
    normality = diagnostics.group_normality(used, table.groupings, table.outcomes)
    summaries = summaries.join(normality, on=["grouping", "level", "outcome"], how="left")
    summaries = complete_summaries(summaries)
    comparisons = compare_summaries(summaries, settings, table.outcomes)
    return ScanResult(comparisons, summaries, settings, table, used)


def complete_summaries(summaries: pl.DataFrame) -> pl.DataFrame:
    """Add the derived per-group figures: geometric mean, log SD, censored share."""
    return summaries.with_columns(
        gm=pl.col("mean_log").exp(),
        sd_log=(pl.col("ss_log") / (pl.col("n") - 1)).sqrt(),
        censored_share=pl.col("n_censored") / (pl.col("n") + pl.col("n_excluded")).cast(pl.Float64),
    ).with_columns(
        sd_log=pl.when(pl.col("n") >= 2).then(pl.col("sd_log")).otherwise(None),
    )


def compare_summaries(
    summaries: pl.DataFrame, settings: ScanSettings, outcomes: tuple[str, ...]
) -> pl.DataFrame:
    """Every comparison from per-group summaries (one row per grouping × level × outcome):
    the part of the scan that needs no raw values."""
    pairs = build_pairs(summaries, settings)
    stats_columns = [c for c in summaries.columns if c not in ("grouping", "level", "outcome")]
    side_a = summaries.rename({"level": "level_a", **{c: c + "_a" for c in stats_columns}})
    side_b = summaries.rename({"level": "level_b", **{c: c + "_b" for c in stats_columns}})
    frame = pairs.join(side_a, on=["grouping", "level_a"], how="inner").join(
        side_b, on=["grouping", "outcome", "level_b"], how="inner"
    )
    order = {name: index for index, name in enumerate(outcomes)}
    frame = (
        frame.with_columns(
            pl.col("outcome").replace_strict(order, return_dtype=pl.Int64).alias("__outcome_order")
        )
        .sort("grouping", "__outcome_order", maintain_order=True)
        .drop("__outcome_order")
    )

    def column(name: str) -> np.ndarray:
        return frame[name].cast(pl.Float64).fill_null(np.nan).to_numpy()

    n_a, n_b = column("n_a"), column("n_b")
    test = log_t_test(
        n_a,
        column("mean_log_a"),
        column("ss_log_a"),
        n_b,
        column("mean_log_b"),
        column("ss_log_b"),
        test=settings.test,
        confidence=settings.confidence,
    )
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
        log_median_ratio = np.log(median_ratio)
        sd_log_ratio = sd_b / sd_a
    extra = {
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
            log_median_ratio, test.difference, sd_a, n_a, sd_b, n_b
        ),
        "p_tost": p_tost,
        "tost_ci_low": tost_low,
        "tost_ci_high": tost_high,
        "ci_fold": ratio_high / ratio_low,
        "detectable_ratio": precision.detectable_ratio(n_a, n_b, pooled_sd, alpha=alpha),
    }
    if settings.target_ratio is not None:
        extra["n_needed"] = precision.n_per_group(settings.target_ratio, pooled_sd, alpha=alpha)
    frame = frame.with_columns(
        [pl.Series(name, values, dtype=pl.Float64) for name, values in extra.items()]
    )
    frame = frame.with_columns(
        pl.Series(
            "band_class",
            equivalence.band_class(ratio_low, ratio_high, tost_low, tost_high, settings.band),
            dtype=pl.Utf8,
        ),
        pl.lit(settings.test).alias("test"),
        pl.lit(settings.confidence).alias("confidence"),
    ).with_columns(pl.col(pl.Float64).fill_nan(None))
    frame = frame.with_columns(
        diagnostics.warning_expression().alias("warnings"),
        pl.concat_str(["grouping", "outcome", "level_a", "level_b"], separator=KEY_SEPARATOR).alias(
            "key"
        ),
    )
    return frame.select(ordered_columns(frame))


def ordered_columns(frame: pl.DataFrame) -> list[str]:
    wanted = list(LEADING_COLUMNS) + [
        "median_ratio",
        "percent_change",
        "log2_ratio",
        "df",
        "t",
        "test",
        "confidence",
        "band_class",
        "p_tost",
        "tost_ci_low",
        "tost_ci_high",
        "ci_fold",
        "detectable_ratio",
        "n_needed",
        "n_excluded_a",
        "n_excluded_b",
        "n_substituted_a",
        "n_substituted_b",
        "n_censored_a",
        "n_censored_b",
        "n_missing_a",
        "n_missing_b",
        "censored_share_a",
        "censored_share_b",
        "mean_log_difference",
        "se_log",
        "sd_log_a",
        "sd_log_b",
        "sd_log_ratio",
        "spread_p",
        "skew_log_a",
        "skew_log_b",
        "skew_raw_a",
        "skew_raw_b",
        "shapiro_w_a",
        "shapiro_w_b",
        "shapiro_p_a",
        "shapiro_p_b",
        "median_gm_z",
        "key",
    ]
    return [name for name in wanted if name in frame.columns]
