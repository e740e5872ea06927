"""How numbers read, in one place: the list, the detail pane, the sentence and the help all
format ratios, intervals, p and q, percentages and counts with these functions, so the same
number reads the same everywhere. A missing or undefined number reads "–"."""

from __future__ import annotations

import math
import re

MISSING = "–"


def _finite(value: float | None) -> bool:
    return value is not None and math.isfinite(value)


def ratio_text(value: float | None) -> str:
    """A ratio: two decimals from 0.1 to 10, three significant digits up to 1000 and down to
    0.001, scientific beyond (``2.31``, ``12.3``, ``0.052``, ``1.9e-05``)."""
    if value is None or math.isnan(value):
        return MISSING
    if math.isinf(value):
        return "∞" if value > 0 else "-∞"
    if value == 0:
        return "0"
    size = abs(value)
    if 0.1 <= size < 10:
        return f"{value:.2f}"
    if 10 <= size < 100:
        return f"{value:.1f}"
    if 100 <= size < 1000:
        return f"{value:.0f}"
    if 0.001 <= size < 0.1:
        return f"{value:.3f}"
    return f"{value:.1e}"


def interval_text(low: float | None, high: float | None, joiner: str = "–") -> str:
    """A confidence interval of a ratio: ``1.70–3.10`` (or ``1.70 to 3.10``)."""
    return f"{ratio_text(low)}{joiner}{ratio_text(high)}"


def p_text(value: float | None, symbol: str = "") -> str:
    """A p- or q-value: ``0.35``, ``0.012``, ``0.0003``, ``<0.0001``; with a symbol
    ``p = 0.012`` and ``p < 0.0001``."""
    if not _finite(value):
        return f"{symbol} = {MISSING}" if symbol else MISSING
    assert value is not None
    if value < 0.0001:
        return f"{symbol} < 0.0001" if symbol else "<0.0001"
    if value < 0.001:
        digits = f"{value:.4f}"
    elif value < 0.1:
        digits = f"{value:.3f}"
    else:
        digits = f"{value:.2f}"
    return f"{symbol} = {digits}" if symbol else digits


def percent_text(value: float | None) -> str:
    """A percent change with its sign: ``+23%``, ``-48%``, one decimal below 1% (``-0.2%``),
    scientific from 10,000%."""
    if not _finite(value):
        return MISSING
    assert value is not None
    if abs(value) < 0.05:
        return "0%"
    if abs(value) < 1:
        return f"{value:+.1f}%"
    return f"{value:+.0f}%" if abs(value) < 10000 else f"{value:+.0e}%"


def count_text(value: int | None) -> str:
    """A count: ``12``; missing reads "–"."""
    return MISSING if value is None else str(value)


def number_text(value: float | None, digits: int = 3) -> str:
    """Any other figure (skewness, a mean, df, z) to ``digits`` significant digits,
    scientific when very large or small."""
    if not _finite(value):
        return MISSING
    assert value is not None
    if value != 0 and (abs(value) >= 10 ** (digits + 2) or abs(value) < 10**-digits):
        return f"{value:.{digits - 1}e}"
    if abs(value) >= 1:
        return f"{value:.{digits}g}"
    return f"{value:.{digits}f}".rstrip("0").rstrip(".")


def level_text(confidence: float) -> str:
    """A confidence level as a percentage: ``95%``."""
    return f"{100 * confidence:g}%"


_NAME_UNIT = re.compile(r"_(mg|ug|ng|g|mmol|umol|nmol|us|ms|s|iu|u)_per_([a-z0-9]+)$")


def unit_from_name(name: str) -> str | None:
    """The unit a column name carries: ``copper_mg_per_kg`` -> ``mg/kg``; else None."""
    match = _NAME_UNIT.search(name)
    if not match:
        return None
    return f"{match.group(1)}/{match.group(2)}".replace("ug", "µg").replace("us/", "µS/")


def readable_outcome(name: str) -> str:
    """``copper_mg_per_kg`` -> ``copper (mg/kg)``; other names get underscores as spaces."""
    unit = unit_from_name(name)
    if unit is not None:
        match = _NAME_UNIT.search(name)
        assert match is not None
        return f"{name[: match.start()].replace('_', ' ')} ({unit})"
    return name.replace("_", " ")
