"""One plain sentence per comparison, stating the multiplicative finding."""

from __future__ import annotations

from typing import cast

import polars as pl

from .columns import SENTENCE, ComparisonRow
from .diagnostics import SYMMETRY_WARNINGS
from .formatting import (
    interval_text,
    level_text,
    p_text,
    ratio_text,
    readable_outcome,
)

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
    reasons = [
        f"{group}: {reason}"
        for group, reason in ((group_a, row["fit_reason_a"]), (group_b, row["fit_reason_b"]))
        if reason
    ]
    if reasons:
        why = "no censored fit for " + "; ".join(reasons)
    elif "too-few" in row["warnings"]:
        why = "too few usable values"
    else:
        why = "no spread in the values"
    return (
        f"{outcome}: {group_b} against {group_a}{stratum_phrase(row)} cannot be compared ({why})."
    )


def censored_phrase(row: ComparisonRow) -> str:
    """How the below-detection entries of the two groups were treated, with their share:
    "31% below detection, fitted by censored maximum likelihood"; "" when there are none."""
    censored = row["n_censored_a"] + row["n_censored_b"]
    if censored == 0 and row["n_right_a"] + row["n_right_b"] == 0:
        return ""
    total = row["n_a"] + row["n_b"] + row["n_excluded_a"] + row["n_excluded_b"]
    share = f"{censored / total if total else 0.0:.0%} below detection"
    above = row["n_right_a"] + row["n_right_b"]
    if above:
        share += f" and {above} above the range"
    how = {
        "censored ML": "fitted by censored maximum likelihood",
        "nondetects left out": "left out",
        "DL/2 substituted": "replaced by half the detection limit",
        "DL/sqrt2 substituted": "replaced by the detection limit divided by sqrt(2)",
        "t-test on logs": "",
    }[row["method"]]
    return f"{share}, {how}" if how else share


def _excludes_one(low: float | None, high: float | None) -> bool:
    return low is not None and high is not None and (low > 1 or high < 1)


def _substitution_contrast(row: ComparisonRow) -> str:
    """What DL/2 substitution would have said instead, for a censoring-sensitive finding."""
    half = (
        f"with half the detection limit put in instead, the ratio would be "
        f"{ratio_text(row['half_dl_ratio'])}× "
        f"({interval_text(row['half_dl_ci_low'], row['half_dl_ci_high'], ' to ')})"
    )
    fitted = _excludes_one(row["ci_low"], row["ci_high"])
    substituted = _excludes_one(row["half_dl_ci_low"], row["half_dl_ci_high"])
    if fitted != substituted:
        change = "its interval would exclude 1" if substituted else "its interval would include 1"
    else:
        change = (
            f"the equivalence class would be {row['half_dl_band_class'] or 'none'} "
            f"instead of {row['band_class'] or 'none'}"
        )
    return f"Sensitive to the below-detection entries: {half}, and {change}."


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
    censored = censored_phrase(row)
    if row["method"] == "censored ML":
        basis = f"{censored}; {test} t on the fitted log means"
    else:
        basis = f"{censored}; {test} t-test on logs" if censored else f"{test} t-test on logs"
    detail = (
        f"{level_text(row['confidence'])} CI {interval_text(row['ci_low'], row['ci_high'], ' to ')}; "
        f"{basis}, {p_text(row['p_value'], 'p')}, {p_text(row['q_bh'], 'q')}"
    )
    measure = "Geometric-mean" if doubtful else "Median"
    text = (
        f"{measure} {outcome} in {group_b} is {ratio_text(ratio)}× that in {group_a}"
        f"{stratum_phrase(row)} ({detail})."
    )
    low, high = row["ci_low"], row["ci_high"]
    if low is not None and high is not None and low <= 1 <= high:
        text += " The interval includes 1: no clear difference."
    if "censoring-sensitive" in row["warnings"] and row["half_dl_ratio"] is not None:
        text += " " + _substitution_contrast(row)
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
