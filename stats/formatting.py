"""How numbers read, in one place: the list, the detail pane, the sentence and the help all
format ratios, intervals, p and q, percentages and counts with these functions, so the same
number reads the same everywhere. A missing or undefined number reads "–".

Ratios follow one rule at every size (``RATIO_RULE`` says it in words for the help):

- from 0.01 up to 100, a decimal: two decimals from 0.1 to 10 (``0.24``, ``1.90``, ``1.00``:
  ratios near 1 keep their two decimals, and a column of them aligns), one decimal from 10
  (``12.5``, ``96.0``), three below 0.1 (``0.012``);
- beyond, a fold to two significant digits instead of scientific notation: ratio 1.9e-4
  reads ``÷5.3k`` (compact, for list columns and the detail's figures) or ``5,300× lower``
  (in words, for the sentence); ratio 1234 reads ``×1.2k`` or ``1,200× higher``. Compact
  folds from 1,000 use k, M, bn, tn, so an interval of two fits the list's 12-cell column
  (``÷7.4k–÷4.0k``); words use thousands separators, then "million", "billion", "trillion";
- a confidence interval with a bound beyond the decimal range writes both bounds as folds:
  ``÷5.3k–÷21``, ``5,300× lower to 21× lower`` (not ``5,300× lower to 0.048``).

Percent changes are written only from -90% to +900% (ratios 0.1 to 10); further out they
read as a compact fold (``÷20``, ``×12``), since "-99.98%" hides how large the change is.
Zero, negative, infinite and missing ratios read "–".
"""

from __future__ import annotations

import math
import re

from .units import normalise_unit

MISSING = "–"

#: Ratios from PLAIN_LOW up to (not including) PLAIN_HIGH read as decimals; others as folds.
PLAIN_LOW = 0.01
PLAIN_HIGH = 99.95  # 99.95 would round to "100": it reads "×100"
#: Percent changes in this range are written as percentages; outside it, as folds.
PERCENT_RANGE = (-90.0, 900.0)

#: The rule in words, for the help (Markdown).
RATIO_RULE = """\
Ratios from 0.01 to 100 are decimals (`0.24`, `1.90`, `12.5`). Larger and smaller ones are
folds: `×120` is 120 times higher, `÷5.3k` is 5,300 times lower (k = thousand,
M = million, bn = billion, tn = trillion); an interval with one such bound gives both as
folds (`÷5.3k–÷21`). Percent changes are shown from -90% to +900%; beyond, the fold.
"""

_SCALES = ((1e12, "tn", "trillion"), (1e9, "bn", "billion"), (1e6, "M", "million"))
_MOST = 1e15  # folds from here read as "more than 999 trillion"


def _finite(value: float | None) -> bool:
    return value is not None and math.isfinite(value)


def _ratio(value: float | None) -> float | None:
    """The ratio when it is a number a ratio can be (finite and above 0), else None."""
    if value is None or not math.isfinite(value) or value <= 0:
        return None
    return value


def _decimal(value: float) -> str:
    """Two decimals from 0.1 to 10, one up to 100, three below 0.1; chosen on the rounded
    value, so 9.996 reads ``10.0``, not ``10.00``."""
    decimals = 3 if value < 0.0995 else 2 if value < 9.995 else 1
    return f"{value:.{decimals}f}"


def _two_digits(value: float) -> float:
    """``value`` (>= 1) rounded to two significant digits."""
    step = 10.0 ** (math.floor(math.log10(value)) - 1)
    return round(value / step) * step


def _short(value: float) -> str:
    """A two-digit figure below 1000: ``5.3``, ``53``, ``530``."""
    return f"{value:.1f}" if value < 9.95 else f"{value:.0f}"


def fold_number(fold: float, words: bool = False) -> str:
    """A fold (>= 1) to two significant digits: ``530``; compact from 1,000 (``5.3k``,
    ``5.3M``, so that an interval of two fits a 12-cell column), in words with thousands
    separators up to a million (``5,300``, ``5.3 million``)."""
    rounded = _two_digits(fold)
    if rounded >= _MOST:
        return "more than 999 trillion" if words else ">999tn"
    for size, symbol, name in _SCALES:
        if rounded >= size:
            return (
                f"{_short(rounded / size)} {name}" if words else f"{_short(rounded / size)}{symbol}"
            )
    if rounded < 10:
        return _short(rounded)
    if not words and rounded >= 1000:
        return f"{_short(rounded / 1000)}k"
    return f"{rounded:,.0f}"


def fold_of(value: float | None) -> float | None:
    """How many times higher or lower a ratio is, when it lies outside the decimal range
    (``1.9e-4`` -> about 5,263); None inside that range or when the ratio is not a ratio."""
    ratio = _ratio(value)
    if ratio is None or PLAIN_LOW <= ratio < PLAIN_HIGH:
        return None
    return ratio if ratio >= 1 else 1 / ratio


def _written(value: float | None, words: bool, folded: bool | None = None) -> str:
    """A ratio compact or in words; ``folded`` forces the fold form (True) where an
    interval's other bound needs it; None follows the ratio's own range."""
    ratio = _ratio(value)
    if ratio is None:
        return MISSING
    if folded is None:
        folded = fold_of(ratio) is not None
    if not folded:
        return _decimal(ratio)
    fold = fold_number(max(ratio, 1 / ratio), words)
    if words:
        return f"{fold}× {'higher' if ratio >= 1 else 'lower'}"
    return ("×" if ratio >= 1 else "÷") + fold


def ratio_text(value: float | None, folded: bool | None = None) -> str:
    """A ratio, compact (list columns, the detail's figures): ``0.24``, ``1.90``, ``12.5``;
    ``÷5.3k`` for 1.9e-4, ``×1.2k`` for 1234; "–" when missing, zero, negative or
    infinite. ``folded=True`` writes a fold in any range (``×80``), to match an interval
    written as folds (``any_fold``)."""
    return _written(value, False, folded)


def ratio_words(value: float | None, folded: bool | None = None) -> str:
    """A ratio for a sentence: ``1.90`` in the decimal range, else ``5,300× lower`` or
    ``1,200× higher``; "–" when it is not a ratio. ``folded`` as for ``ratio_text``."""
    return _written(value, True, folded)


def any_fold(*values: float | None) -> bool:
    """Whether any of these ratios lies beyond the decimal range (then an interval, and a
    ratio stated with it, read as folds)."""
    return any(fold_of(value) is not None for value in values)


def interval_text(low: float | None, high: float | None, joiner: str = "–") -> str:
    """A confidence interval of a ratio by the ratio's rule: ``1.70–3.10``; when a bound is
    a fold, both are (``÷5.3k–÷21``, not ``÷5.3k–0.048``). ``joiner=" to "`` gives
    ``1.70 to 3.10``; one "–" when neither bound is a ratio (no interval)."""
    if _ratio(low) is None and _ratio(high) is None:
        return MISSING
    folded = any_fold(low, high)
    return f"{_written(low, False, folded)}{joiner}{_written(high, False, folded)}"


def interval_words(low: float | None, high: float | None) -> str:
    """A confidence interval for a sentence: ``1.70 to 3.10``; when a bound is a fold, both
    are: ``5,300× lower to 21× lower``."""
    folded = any_fold(low, high)
    return f"{_written(low, True, folded)} to {_written(high, True, folded)}"


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


def percent_text(value: float | None, ratio: float | None = None) -> str:
    """A percent change with its sign, from -90% to +900%: ``+23%``, ``-48%``, one decimal
    below 1% (``-0.2%``). Further out, the compact fold of the ratio (``÷20``, ``×1.2k``);
    ``ratio`` is taken as 1 + value/100 unless given (give it where it is at hand: near
    -100% the percentage has lost the ratio's digits)."""
    if not _finite(value):
        return MISSING
    assert value is not None
    if value < -100 or (ratio is not None and _ratio(ratio) is None):
        return MISSING
    if not PERCENT_RANGE[0] <= value <= PERCENT_RANGE[1]:
        ratio = 1 + value / 100 if ratio is None else ratio
        if ratio <= 0:  # -100% exactly: the ratio was below 1e-16
            return "÷" + fold_number(_MOST)
        return ("×" if ratio > 1 else "÷") + fold_number(max(ratio, 1 / ratio))
    if abs(value) < 0.05:
        return "0%"
    if abs(value) < 1:
        return f"{value:+.1f}%"
    return f"{value:+.0f}%"


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


# A unit written into a column name: ``<amount>_per_<base>`` at the end (``copper_mg_per_kg``,
# ``chloride_g_per_L``, ``coliforms_cfu_per_100ml``), a share (``clay_pct``, ``lead_ppm``),
# or a unit in brackets (``copper (mg/l)``, ``lead [ug/L]``). Names are read without case.
_AMOUNTS = "mg|ug|µg|mcg|ng|pg|g|kg|mmol|umol|µmol|nmol|mol|meq|us|µs|ms|iu|u|cfu|mpn|cells"
_BASES = "l|ml|dl|ul|µl|100ml|kg|g|mg|100g|cm|m|m2|m3"
_PER_UNIT = re.compile(rf"[_ ]({_AMOUNTS})_per_({_BASES})$", re.IGNORECASE)
_SHARE_UNIT = re.compile(r"[_ ](ppm|ppb|pct|percent)$", re.IGNORECASE)
_BRACKET_UNIT = re.compile(r"[_ ]*[(\[]([^()\[\]]+)[)\]]$")
_SHARES = {"ppm": "ppm", "ppb": "ppb", "pct": "%", "percent": "%"}


def _name_unit(name: str) -> tuple[str, str] | None:
    """The part of a column name before its unit, and the unit as displayed; None when the
    name carries no unit this module reads."""
    match = _PER_UNIT.search(name)
    if match:
        unit = normalise_unit(f"{match.group(1)}/{match.group(2)}")
    elif match := _SHARE_UNIT.search(name):
        unit = _SHARES[match.group(1).lower()]
    elif match := _BRACKET_UNIT.search(name):
        unit = normalise_unit(match.group(1).strip())
    else:
        return None
    if unit is None or not name[: match.start()].strip(" _"):
        return None
    return name[: match.start()], unit


def unit_from_name(name: str) -> str | None:
    """The unit a column name carries: ``copper_mg_per_kg`` -> ``mg/kg``,
    ``chloride_g_per_l`` -> ``g/L``, ``ec_us_per_cm`` -> ``µS/cm``; else None."""
    found = _name_unit(name)
    return None if found is None else found[1]


def readable_outcome(name: str) -> str:
    """An outcome name as shown: the unit in brackets, spelt one way (``copper_mg_per_kg``
    -> ``copper (mg/kg)``, ``chloride_g_per_L`` -> ``chloride (g/L)``, ``lead [ug/l]`` ->
    ``lead (µg/L)``); underscores read as spaces."""
    found = _name_unit(name)
    if found is None:
        return name.replace("_", " ")
    base, unit = found
    return f"{base.replace('_', ' ').strip()} ({unit})"
