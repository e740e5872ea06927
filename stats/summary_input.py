"""Scans from a summary table: one row per grouping × level × outcome, as a distributed
engine's plain SQL GROUP BY produces it when the raw data is too big for one machine.

Required columns: ``grouping, level, outcome, n, mean_log`` and one of ``sd_log``,
``var_log`` or ``ss_log`` (natural logs; SD and variance with n - 1 in the denominator).
Optional: ``median`` and the counts ``n_missing, n_excluded, n_substituted, n_censored``.
Medians, Shapiro–Wilk, skewness, histograms and the robust cross-checks need raw values,
so they stay empty.

Censored fits (under the default ``--censored mle``): a row with ``n_censored`` > 0 is the
censored maximum-likelihood fit of its group: ``n`` counts every entry (detected and below
detection), ``mean_log`` and ``sd_log`` are the fit's estimates of the mean and SD of the
logs, and the optional ``se_mean_log`` is the fit's standard error of ``mean_log`` (the
square root of the inverse observed information, as survival libraries report it). Without
it the variance of ``mean_log`` is the expected-information value for one detection limit
at the row's censored share (``censored_information``). Either is multiplied by n / (n - 1),
as for raw data, so a summary of the same fits gives the raw scan's numbers. The fit rules of raw data apply: fewer than 2 detected entries or more
than 80% censored gives no ratio and the ``not-fitted`` warning. Under another policy
``n_censored`` only counts entries that ``n`` does not hold.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import polars as pl

from .censored import MAX_CENSORED_SHARE, MIN_DETECTED, TOO_CENSORED, TOO_FEW_DETECTED
from .censored_information import variance_of_mean_log
from .load import InputError, read_raw, read_source
from .policy import ValuePolicy
from .scan import (
    DataSource,
    ScanResult,
    ScanSettings,
    compare_summaries,
    complete_summaries,
    reference_notes,
)
from .summaries import SUMMARY_SCHEMA

REQUIRED = ("grouping", "level", "outcome", "n", "mean_log")
SPREADS = ("sd_log", "var_log", "ss_log")
OPTIONAL_COUNTS = (
    "n_missing",
    "n_excluded",
    "n_substituted",
    "n_censored",
    "n_no_limit",
    "n_above_range",
    "n_estimated",
)


def _spread_column(raw: pl.DataFrame, path: Path) -> str:
    """The spread column the table has; an InputError naming what is missing otherwise."""
    missing = [name for name in REQUIRED if name not in raw.columns]
    spreads = [name for name in SPREADS if name in raw.columns]
    if missing or not spreads:
        need = ", ".join(missing + ([] if spreads else ["sd_log or var_log or ss_log"]))
        raise InputError(
            f"{path}: a summary table needs the columns {', '.join(REQUIRED)} and one of "
            f"{', '.join(SPREADS)}; missing: {need}"
        )
    return spreads[0]


def _typed(raw: pl.DataFrame, spread: str, path: Path) -> pl.DataFrame:
    """Names as trimmed text and figures as numbers; refuses entries that are not numbers."""
    numbers = ["n", "mean_log", spread, "median", "se_mean_log", *OPTIONAL_COUNTS]
    typed = raw.with_columns(
        [pl.col(name).cast(pl.Utf8).str.strip_chars() for name in ("grouping", "level", "outcome")]
        + [
            pl.col(name).cast(pl.Utf8).str.strip_chars().cast(pl.Float64, strict=False)
            for name in numbers
            if name in raw.columns
        ]
    )
    for name in ("n", "mean_log", spread):
        bad = typed.filter(pl.col(name).is_null() & raw[name].is_not_null()).height
        if bad:
            raise InputError(f"{path}: column {name!r} has {bad} entries that are not numbers")
    if (typed["n"] < 0).any() or (typed["n"] % 1 != 0).any():
        raise InputError(f"{path}: column 'n' must hold whole counts of at least 0")
    if (typed[spread] < 0).any():
        raise InputError(f"{path}: column {spread!r} cannot be negative")
    duplicated = typed.select("grouping", "level", "outcome").is_duplicated()
    if duplicated.any():
        first = typed.filter(duplicated).row(0, named=True)
        raise InputError(
            f"{path}: more than one row for grouping {first['grouping']!r}, level "
            f"{first['level']!r}, outcome {first['outcome']!r}; give one row per group"
        )
    return typed


def _optional(typed: pl.DataFrame, name: str, dtype: pl.DataType) -> pl.Expr:
    if name in typed.columns:
        return pl.col(name).cast(dtype).alias(name)
    return pl.lit(0 if dtype == pl.Int64 else None, dtype).alias(name)


def read_summary_table(
    path: Path | str, raw: pl.DataFrame | None = None, policy: ValuePolicy | None = None
) -> pl.DataFrame:
    """Read (unless ``raw`` is the file already read) and check a summary table; return it
    in the scan's summary layout (with the censored-fit columns under ``mle``)."""
    policy = policy or ValuePolicy()
    path = Path(path)
    raw = read_raw(path) if raw is None else raw
    raw = raw.rename({name: name.strip().lower() for name in raw.columns})
    spread = _spread_column(raw, path)
    typed = _typed(raw, spread, path)
    n = pl.col("n")
    ss = {
        "sd_log": pl.col(spread).pow(2) * (n - 1),
        "var_log": pl.col(spread) * (n - 1),
        "ss_log": pl.col(spread),
    }[spread]
    nothing = pl.lit(None, pl.Float64)
    summaries = typed.select(
        "grouping",
        pl.lit(None, pl.Utf8).alias("within"),
        pl.lit(None, pl.Utf8).alias("stratum"),
        "level",
        "outcome",
        n.cast(pl.Int64).alias("n"),
        *[_optional(typed, c, pl.Int64()) for c in OPTIONAL_COUNTS],
        pl.col("mean_log"),
        pl.when(n >= 2).then(ss).otherwise(None).alias("ss_log"),
        _optional(typed, "median", pl.Float64()),
        nothing.alias("skew_log"),
        nothing.alias("skew_raw"),
        nothing.alias("shapiro_w"),
        nothing.alias("shapiro_p"),
    )
    ordered = [*SUMMARY_SCHEMA, "shapiro_w", "shapiro_p"]
    summaries = summaries.select(ordered).cast(SUMMARY_SCHEMA)
    if policy.censored != "mle" or "n_censored" not in typed.columns:
        return summaries
    return _censored_fits(summaries, typed, spread)


def _censored_fits(summaries: pl.DataFrame, typed: pl.DataFrame, spread: str) -> pl.DataFrame:
    """Rows with censored entries as censored fits: their SD, the variance of their mean
    (given, or from the expected information) and the reason a row is not fitted."""
    n = typed["n"].to_numpy().astype(float)
    censored = typed["n_censored"].fill_null(0).to_numpy().astype(float)
    values = typed[spread].to_numpy().astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        sd = {"sd_log": values, "var_log": np.sqrt(values), "ss_log": np.sqrt(values / (n - 1))}[
            spread
        ]
        approximate = variance_of_mean_log(n, censored, sd) * n / (n - 1)
    if "se_mean_log" in typed.columns:
        with np.errstate(divide="ignore", invalid="ignore"):
            given = typed["se_mean_log"].to_numpy().astype(float) ** 2 * n / (n - 1)
        variance = np.where(np.isfinite(given), given, approximate)
    else:
        variance = approximate
    fitted = censored > 0
    reason = np.full(n.size, None, dtype=object)
    reason[fitted & (n - censored < MIN_DETECTED)] = TOO_FEW_DETECTED
    reason[fitted & (n - censored >= MIN_DETECTED) & (censored > MAX_CENSORED_SHARE * n)] = (
        TOO_CENSORED
    )
    usable = fitted & (reason == None)  # noqa: E711 (element-wise on an object array)
    return summaries.with_columns(
        pl.Series("n_left", np.where(fitted, censored, 0).astype(np.int64)),
        pl.Series("n_right", np.zeros(n.size, dtype=np.int64)),
        pl.Series("fit_sd_log", np.where(usable, sd, np.nan)).fill_nan(None),
        pl.Series("fit_var_mean_log", np.where(usable, variance, np.nan)).fill_nan(None),
        pl.Series("fit_reason", reason, dtype=pl.Utf8),
        pl.when(pl.Series(fitted)).then(None).otherwise(pl.col("ss_log")).alias("ss_log"),
        pl.when(pl.Series(fitted & ~usable))
        .then(None)
        .otherwise(pl.col("mean_log"))
        .alias("mean_log"),
    )


def scan_summary_table(path: Path | str, settings: ScanSettings | None = None) -> ScanResult:
    """All comparisons from a summary table, as the same result type as a raw scan (with no
    raw values for charts and cross-checks)."""
    path = Path(path)
    settings = settings or ScanSettings()
    if settings.within is not None:
        raise InputError(f"{path}: --within needs raw values; it cannot use a summary table")
    read = read_source(path)  # read once: the fingerprint is of the bytes parsed
    summaries = complete_summaries(read_summary_table(path, read.frame, settings.policy))
    outcomes = tuple(dict.fromkeys(summaries["outcome"].to_list()))
    comparisons = compare_summaries(summaries, settings, outcomes)
    source = DataSource(
        path=path,
        fingerprint=read.fingerprint,
        kind="summary table",
        groupings=tuple(dict.fromkeys(summaries["grouping"].to_list())),
        outcomes=outcomes,
        notes=reference_notes(summaries, settings),
    )
    return ScanResult(comparisons, summaries, settings, source, values=None)
