"""One plain sentence per comparison, stating the multiplicative finding."""

from __future__ import annotations

import math
import re

import polars as pl

from .diagnostics import SYMMETRY_WARNINGS

_UNIT = re.compile(r"_(mg|ug|ng|g|mmol|umol|nmol|us|ms|s|iu|u)_per_([a-z0-9]+)$")


def readable_outcome(name: str) -> str:
    """``copper_mg_per_kg`` -> ``copper (mg/kg)``; other names get underscores as spaces."""
    match = _UNIT.search(name)
    if match:
        unit = f"{match.group(1)}/{match.group(2)}".replace("ug", "µg").replace("us/", "µS/")
        return f"{name[: match.start()].replace('_', ' ')} ({unit})"
    return name.replace("_", " ")


def number(value: float | None, digits: int = 3) -> str:
    if value is None or not math.isfinite(value):
        return "n/a"
    if value != 0 and (abs(value) >= 10 ** (digits + 2) or abs(value) < 10**-(digits)):
        return f"{value:.{digits - 1}e}"
    return (
        f"{value:.{digits}g}" if abs(value) >= 1 else f"{value:.{digits}f}".rstrip("0").rstrip(".")
    )


def ratio_text(value: float | None) -> str:
    """Ratios with two decimals in the usual range, three significant digits outside."""
    if value is None or not math.isfinite(value):
        return "n/a"
    return f"{value:.2f}" if 0.1 <= value < 1000 else number(value)


def p_text(value: float | None, symbol: str = "") -> str:
    """``p = 0.012``; below 0.0001 written ``p < 0.0001``."""
    prefix = f"{symbol} = " if symbol else ""
    if value is None or not math.isfinite(value):
        return prefix + "n/a"
    if value < 0.0001:
        return f"{symbol} < 0.0001" if symbol else "< 0.0001"
    return prefix + _p_digits(value)


def _p_digits(value: float) -> str:
    if value < 0.001:
        return f"{value:.4f}"
    return f"{value:.3f}" if value < 0.1 else f"{value:.2f}"


def _group(grouping: str, level: str) -> str:
    """``field`` + ``ashgrove`` -> "field ashgrove" (a stratified grouping's own name)."""
    base = grouping.partition(" within ")[0]
    return level if base.lower() in level.lower() else f"{base} {level}"


def _stratum(grouping: str) -> str:
    """``field within season=spring`` -> ", within season spring"; else ""."""
    stratum = grouping.partition(" within ")[2]
    if not stratum:
        return ""
    name, _, value = stratum.partition("=")
    return f", within {name} {value}"


def finding(row: dict) -> str:
    """The sentence for one row of the comparisons frame (a dict of its columns)."""
    outcome = readable_outcome(row["outcome"])
    group_b = _group(row["grouping"], row["level_b"])
    group_a = _group(row["grouping"], row["level_a"])
    ratio = row.get("ratio")
    if ratio is None or not math.isfinite(ratio):
        reasons = [
            w for w in (row.get("warnings") or "").split(";") if w in ("too-few", "no-spread")
        ]
        why = "too few usable values" if "too-few" in reasons else "no spread in the values"
        where = _stratum(row["grouping"])
        return f"{outcome}: {group_b} against {group_a}{where} cannot be compared ({why})."
    warnings = set((row.get("warnings") or "").split(";"))
    doubtful = sorted(warnings & set(SYMMETRY_WARNINGS))
    level = round(100 * float(row.get("confidence") or 0.95))
    test = "Welch" if row.get("test", "welch") == "welch" else "pooled"
    detail = (
        f"{level}% CI {ratio_text(row['ci_low'])} to {ratio_text(row['ci_high'])}; "
        f"{test} t-test on logs, {p_text(row.get('p_value'), 'p')}, {p_text(row.get('q_bh'), 'q')}"
    )
    measure = "Geometric-mean" if doubtful else "Median"
    text = (
        f"{measure} {outcome} in {group_b} is {ratio_text(ratio)}× that in {group_a}"
        f"{_stratum(row['grouping'])} ({detail})."
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
    return pl.Series(
        "sentence", [finding(row) for row in frame.iter_rows(named=True)], dtype=pl.Utf8
    )
