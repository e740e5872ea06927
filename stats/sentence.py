"""One plain sentence per comparison, stating the multiplicative finding."""

from __future__ import annotations

from typing import cast

import polars as pl

from .columns import SENTENCE, ComparisonRow
from .diagnostics import SYMMETRY_WARNINGS
from .formatting import interval_text, level_text, p_text, ratio_text, readable_outcome

__all__ = ["finding", "group_name", "readable_outcome", "sentence_column", "stratum_phrase"]


def group_name(grouping: str, level: str) -> str:
    """``field`` + ``ashgrove`` -> "field ashgrove"; a level that names its grouping
    (``season`` + ``spring season``) is used alone."""
    return level if grouping.lower() in level.lower() else f"{grouping} {level}"


def stratum_phrase(row: ComparisonRow) -> str:
    """``, within season spring`` for a comparison inside a stratum, else ``""``."""
    if row["within"] is None:
        return ""
    return f", within {row['within']} {row['stratum']}"


def _not_comparable(row: ComparisonRow, outcome: str, group_a: str, group_b: str) -> str:
    why = "too few usable values" if "too-few" in row["warnings"] else "no spread in the values"
    return (
        f"{outcome}: {group_b} against {group_a}{stratum_phrase(row)} cannot be compared ({why})."
    )


def finding(row: ComparisonRow) -> str:
    """The sentence for one row of the comparisons frame."""
    outcome = readable_outcome(row["outcome"])
    group_b = group_name(row["grouping"], row["level_b"])
    group_a = group_name(row["grouping"], row["level_a"])
    ratio = row["ratio"]
    if ratio is None:
        return _not_comparable(row, outcome, group_a, group_b)
    doubtful = sorted(set(row["warnings"]) & set(SYMMETRY_WARNINGS))
    test = "Welch" if row["test"] == "welch" else "pooled"
    detail = (
        f"{level_text(row['confidence'])} CI {interval_text(row['ci_low'], row['ci_high'], ' to ')}; "
        f"{test} t-test on logs, {p_text(row['p_value'], 'p')}, {p_text(row['q_bh'], 'q')}"
    )
    measure = "Geometric-mean" if doubtful else "Median"
    text = (
        f"{measure} {outcome} in {group_b} is {ratio_text(ratio)}× that in {group_a}"
        f"{stratum_phrase(row)} ({detail})."
    )
    low, high = row["ci_low"], row["ci_high"]
    if low is not None and high is not None and low <= 1 <= high:
        text += " The interval includes 1: no clear difference."
    if doubtful:
        text += (
            " Read it as a ratio of geometric means, not of medians (see the warnings: "
            + ", ".join(doubtful)
            + ")."
        )
    return text


def sentence_column(frame: pl.DataFrame) -> pl.Series:
    """The ``sentence`` column for every row of a comparisons frame."""
    rows = frame.iter_rows(named=True)
    return pl.Series(SENTENCE, [finding(cast(ComparisonRow, row)) for row in rows], dtype=pl.Utf8)
