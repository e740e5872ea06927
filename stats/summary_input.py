"""Scans from a summary table: one row per grouping × level × outcome, as a distributed
engine's plain SQL GROUP BY produces it when the raw data is too big for one machine.

Required columns: ``grouping, level, outcome, n, mean_log`` and one of ``sd_log``,
``var_log`` or ``ss_log`` (natural logs; SD and variance with n - 1 in the denominator).
Optional: ``median`` and the counts ``n_missing, n_excluded, n_substituted, n_censored``.
Medians, Shapiro–Wilk, skewness, histograms and the robust cross-checks need raw values,
so they stay empty.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import polars as pl

from .load import InputError, read_raw
from .scan import ScanSettings, compare_summaries, complete_summaries
from .summaries import SUMMARY_SCHEMA

REQUIRED = ("grouping", "level", "outcome", "n", "mean_log")
SPREADS = ("sd_log", "var_log", "ss_log")
OPTIONAL_COUNTS = ("n_missing", "n_excluded", "n_substituted", "n_censored")


def read_summary_table(path: Path | str) -> pl.DataFrame:
    """Read and check a summary table; return it in the scan's summary layout."""
    path = Path(path)
    raw = read_raw(path)
    raw = raw.rename({name: name.strip().lower() for name in raw.columns})
    missing = [name for name in REQUIRED if name not in raw.columns]
    spreads = [name for name in SPREADS if name in raw.columns]
    if missing or not spreads:
        need = ", ".join(missing + ([] if spreads else ["sd_log or var_log or ss_log"]))
        raise InputError(
            f"{path}: a summary table needs the columns {', '.join(REQUIRED)} and one of "
            f"{', '.join(SPREADS)}; missing: {need}"
        )
    numbers = ["n", "mean_log", spreads[0], "median", *OPTIONAL_COUNTS]
    typed = raw.with_columns(
        [pl.col(name).cast(pl.Utf8).str.strip_chars() for name in ("grouping", "level", "outcome")]
        + [
            pl.col(name).cast(pl.Utf8).str.strip_chars().cast(pl.Float64, strict=False)
            for name in numbers
            if name in raw.columns
        ]
    )
    for name in ("n", "mean_log", spreads[0]):
        bad = typed.filter(pl.col(name).is_null() & raw[name].is_not_null()).height
        if bad:
            raise InputError(f"{path}: column {name!r} has {bad} entries that are not numbers")
    if (typed["n"] < 0).any() or (typed["n"] % 1 != 0).any():
        raise InputError(f"{path}: column 'n' must hold whole counts of at least 0")
    if (typed[spreads[0]] < 0).any():
        raise InputError(f"{path}: column {spreads[0]!r} cannot be negative")
    duplicated = typed.select("grouping", "level", "outcome").is_duplicated()
    if duplicated.any():
        first = typed.filter(duplicated).row(0, named=True)
        raise InputError(
            f"{path}: more than one row for grouping {first['grouping']!r}, level "
            f"{first['level']!r}, outcome {first['outcome']!r}; give one row per group"
        )
    n = pl.col("n")
    spread = pl.col(spreads[0])
    ss = {
        "sd_log": spread.pow(2) * (n - 1),
        "var_log": spread * (n - 1),
        "ss_log": spread,
    }[spreads[0]]
    summaries = typed.select(
        "grouping",
        "level",
        "outcome",
        n.cast(pl.Int64).alias("n"),
        *[
            (pl.col(c).cast(pl.Int64) if c in typed.columns else pl.lit(0, pl.Int64)).alias(c)
            for c in OPTIONAL_COUNTS
        ],
        pl.col("mean_log"),
        pl.when(n >= 2).then(ss).otherwise(None).alias("ss_log"),
        (pl.col("median") if "median" in typed.columns else pl.lit(None, pl.Float64)).alias(
            "median"
        ),
        pl.lit(None, pl.Float64).alias("skew_log"),
        pl.lit(None, pl.Float64).alias("skew_raw"),
        pl.lit(None, pl.Float64).alias("shapiro_w"),
        pl.lit(None, pl.Float64).alias("shapiro_p"),
    )
    ordered = [c for c in SUMMARY_SCHEMA] + ["shapiro_w", "shapiro_p"]
    return summaries.select(ordered).cast(SUMMARY_SCHEMA)


def scan_summary_table(
    path: Path | str, settings: ScanSettings | None = None
) -> tuple[pl.DataFrame, dict]:
    """All comparisons from a summary table, and the metadata an export records."""
    settings = settings or ScanSettings()
    if settings.within is not None:
        raise InputError(f"{path}: --within needs raw values; it cannot use a summary table")
    summaries = complete_summaries(read_summary_table(path))
    outcomes = tuple(dict.fromkeys(summaries["outcome"].to_list()))
    comparisons = compare_summaries(summaries, settings, outcomes)
    digest = hashlib.sha256(Path(path).read_bytes()).hexdigest()
    metadata = {
        "data_file": str(path),
        "data_kind": "summary table",
        "data_fingerprint_sha256": digest,
        "groupings": list(dict.fromkeys(summaries["grouping"].to_list())),
        "outcomes": list(outcomes),
        "settings": settings.as_dict(),
        "comparisons": comparisons.height,
    }
    return comparisons, metadata
