"""The filter line: plain words and conditions turned into one polars expression.

This module imports nothing from Textual, so it is tested without a terminal. The words it
reads are listed in ``FILTER_WORDS``, which the app's help shows as it is. A word it cannot
read raises ``FilterError`` with a message naming the word, so that a typing slip is said on
the filter line instead of showing no rows in silence.
"""

from __future__ import annotations

import math
import re
from collections.abc import Collection

import polars as pl

from foldsift.stats import columns as col
from foldsift.stats.diagnostics import WARNINGS
from foldsift.stats.equivalence import BAND_CLASSES
from foldsift.stats.vocabulary import DECISIONS

#: ``WORD<N`` -> the column it compares (``n``, ``fold`` and ``below`` are computed from
#: it, see ``_numeric_column``).
NUMERIC_FIELDS = {
    "q": "q_bh",
    "p": "p_value",
    "holm": "p_holm",
    "ratio": "ratio",
    "change": "percent_change",
    "n": "n_min",  # the smaller group's n
    "fold": "ratio",  # the ratio either way: max(ratio, 1/ratio)
    "ciwidth": "ci_fold",  # the CI's upper bound over its lower bound
    "below": "below_share",  # the larger group's below-detection share, in percent
}
#: The numbers each field can take: a condition outside them is a typing slip (``q<5``,
#: ``fold>0.5``), said as an error rather than shown as no rows or every row.
FIELD_RANGES: dict[str, tuple[float, float, str]] = {
    "q": (0.0, 1.0, "a q-value is between 0 and 1"),
    "p": (0.0, 1.0, "a p-value is between 0 and 1"),
    "holm": (0.0, 1.0, "a p-value is between 0 and 1"),
    "ratio": (0.0, math.inf, "a ratio is above 0"),
    "change": (-100.0, math.inf, "a change is above -100 (percent)"),
    "n": (0.0, math.inf, "n counts values: 0 or more"),
    "fold": (1.0, math.inf, "a fold is 1 or more: fold>=2 means a ratio >= 2 or <= 0.5"),
    "ciwidth": (1.0, math.inf, "the CI's upper/lower ratio is 1 or more"),
    "below": (0.0, 100.0, "below is a percentage, 0 to 100"),
}
#: ``method:WORD`` -> the method it picks (``stats.vocabulary.METHODS``).
METHOD_WORDS = {
    "logs": "t-test on logs",
    "ml": "censored ML",
    "left-out": "nondetects left out",
    "dl2": "DL/2 substituted",
    "dl-root2": "DL/sqrt2 substituted",
}
#: The words with a colon (``warn:log-skew``).
PREFIXES = ("outside", "inside", "warn", "method", "class")
#: The columns a plain word searches.
NAME_COLUMNS = (col.OUTCOME_LABEL, col.OUTCOME, col.GROUPING, col.STRATUM, col.LEVEL_A, col.LEVEL_B)

_CONDITION = re.compile(r"^(?P<field>[a-z]+)\s*(?P<op><=|>=|<|>|=)\s*(?P<value>[-+0-9.eE]+)$")
_OPERATORS = {
    "<": lambda c, v: c < v,
    "<=": lambda c, v: c <= v,
    ">": lambda c, v: c > v,
    ">=": lambda c, v: c >= v,
    "=": lambda c, v: c == v,
}


#: What the filter line reads, as the help shows it (Markdown).
FILTER_WORDS = """\
Words, separated by spaces; a row is shown when all of them hold:

- any plain word: text search in outcome, grouping, stratum and level names (case-insensitive,
  literal text); a word that no name contains is an error, not an empty list
- numeric conditions with `<`, `<=`, `>`, `>=`, `=`: `q<0.05`, `p<=0.01`, `holm<0.05`,
  `ratio>2`, `ratio<0.5`, `change>50` (percent change), `n>=10` (the smaller group)
- `fold>=2`: the ratio is at least 2-fold either way (ratio >= 2 or <= 0.5); `fold<1.5`:
  within 1.5-fold both ways
- `ciwidth<3`: the confidence interval's upper bound is less than 3 times its lower bound
  (a precise estimate)
- `below>30`: the larger group's share below detection, in percent; `censored`: rows with
  any below-detection entry
- `method:ml` (censored maximum likelihood), `method:logs` (t-test on logs, nothing
  censored), `method:left-out`, `method:dl2`, `method:dl-root2` (substitution)
- `outside:0.8,1.25`: ratio outside the band; `inside:0.8,1.25`: inside it
- `warned` (any warning), `clean` (none), `warn:log-skew` (that warning), e.g.
  `warn:censoring-sensitive`, `warn:limits-differ`, `warn:not-fitted`
- `flagged`, `unflagged`, `undecided`, `keep` / `doubt` / `drop` (decision),
  `noted` (has a note), `earlier` (review made on an earlier version of the data)
- `class:equivalent`, or the class name alone (`different`, `minor-difference`,
  `equivalent`, `inconclusive`)
- a leading `-` negates a word: `-warn:small-n`

A word that cannot be read (an unknown word before a colon, a number out of range such as
q<5 or fold>0.5) is shown as an error on the status line, and the list stays unfiltered
until it is fixed.
"""


class FilterError(ValueError):
    """A word of the filter line that cannot be read; the message says which and why."""


def searchable_names(frame: pl.DataFrame) -> frozenset[str]:
    """Every distinct name a plain word searches (outcome, readable outcome, grouping,
    stratum, levels), lower-cased: pass it to ``parse_filter`` as ``names``."""
    found: set[str] = set()
    for name in NAME_COLUMNS:
        if name in frame.columns:
            values = frame.get_column(name).drop_nulls().unique().cast(pl.String)
            found.update(value.lower() for value in values)
    return frozenset(found)


def _band(text: str, word: str) -> tuple[float, float]:
    try:
        low, high = (float(part) for part in text.split(","))
    except ValueError:
        raise FilterError(f"{word!r}: write the band as LOW,HIGH, e.g. outside:0.8,1.25") from None
    if not 0 < low < high:
        raise FilterError(f"{word!r}: the band needs 0 < LOW < HIGH")
    return low, high


def _numeric_column(field: str) -> pl.Expr:
    if field == "n":
        return pl.min_horizontal(col.N_A, col.N_B)
    if field == "below":
        return 100 * pl.max_horizontal(
            col.side("censored_share", "a"), col.side("censored_share", "b")
        )
    if field == "fold":
        ratio = pl.col(col.RATIO)
        return pl.when(ratio >= 1).then(ratio).otherwise(1 / ratio)
    return pl.col(NUMERIC_FIELDS[field])


def _condition(word: str, match: re.Match[str]) -> pl.Expr:
    """``q<0.05``, ``ratio>2``, ``fold>=2``, ``n>=10``: a numeric condition."""
    field = match["field"]
    if field not in NUMERIC_FIELDS:
        raise FilterError(
            f"{word!r}: unknown field {field!r}; use one of {', '.join(NUMERIC_FIELDS)}"
        )
    try:
        value = float(match["value"])
    except ValueError:
        raise FilterError(f"{word!r}: {match['value']!r} is not a number") from None
    low, high, rule = FIELD_RANGES[field]
    if not low <= value <= high:
        raise FilterError(f"{word!r}: {rule}")
    return _OPERATORS[match["op"]](_numeric_column(field), value).fill_null(False)


def _prefixed(word: str, kind: str, text: str) -> pl.Expr:
    """``outside:``, ``inside:``, ``warn:``, ``method:`` and ``class:`` words."""
    if kind in ("outside", "inside"):
        low, high = _band(text, word)
        outside = (pl.col(col.RATIO) < low) | (pl.col(col.RATIO) > high)
        return (outside if kind == "outside" else ~outside).fill_null(False)
    if kind == "warn":
        if text not in WARNINGS:
            # A misspelt name would otherwise match nothing and look like "no such warnings".
            raise FilterError(f"{word!r}: warnings are {', '.join(WARNINGS)}")
        return pl.col(col.WARNINGS).list.contains(pl.lit(text)).fill_null(False)
    if kind == "method":
        if text not in METHOD_WORDS:
            raise FilterError(f"{word!r}: methods are {', '.join(METHOD_WORDS)}")
        return (pl.col("method").cast(pl.String) == METHOD_WORDS[text]).fill_null(False)
    if text not in BAND_CLASSES:
        raise FilterError(f"{word!r}: classes are {', '.join(BAND_CLASSES)}")
    return (pl.col(col.BAND_CLASS).cast(pl.String) == text).fill_null(False)


def _state(lowered: str) -> pl.Expr | None:
    """Words about warnings, reviews and classes (``warned``, ``flagged``, ``keep``, ...)."""
    simple = {
        "warned": pl.col(col.WARNINGS).list.len() > 0,
        "clean": pl.col(col.WARNINGS).list.len() == 0,
        "flagged": pl.col(col.FLAGGED),
        "unflagged": ~pl.col(col.FLAGGED),
        "undecided": pl.col(col.DECISION).is_null(),
        "noted": pl.col(col.NOTE) != "",
        "earlier": pl.col(col.ON_EARLIER_DATA),
        "censored": (pl.col(col.side("n_censored", "a")) + pl.col(col.side("n_censored", "b"))) > 0,
    }
    if lowered in simple:
        return simple[lowered].fill_null(False)
    if lowered in BAND_CLASSES:
        return (pl.col(col.BAND_CLASS).cast(pl.String) == lowered).fill_null(False)
    if lowered in DECISIONS:
        return (pl.col(col.DECISION).cast(pl.String) == lowered).fill_null(False)
    return None


def _text(lowered: str, columns: Collection[str]) -> pl.Expr:
    """A plain word: text search in the outcome, grouping, stratum and level names."""
    return pl.any_horizontal(
        pl.col(name).str.to_lowercase().str.contains(lowered, literal=True).fill_null(False)
        for name in NAME_COLUMNS
        if name in columns or (not columns and name != col.OUTCOME_LABEL)
    )


def _named(lowered: str, names: Collection[str] | None) -> bool:
    """Whether some name contains the word (always, when the names are not known)."""
    return names is None or any(lowered in name.lower() for name in names)


def _word(
    word: str, columns: Collection[str] = (), names: Collection[str] | None = None
) -> pl.Expr:
    lowered = word.lower()
    match = _CONDITION.match(lowered)
    if match:
        return _condition(word, match)
    kind, colon, rest = lowered.partition(":")
    if colon and kind in PREFIXES:
        return _prefixed(word, kind, rest)
    expression = _state(lowered)
    if expression is not None:
        return expression
    if any(symbol in lowered for symbol in "<>="):
        raise FilterError(f"{word!r}: write conditions like q<0.05 or ratio>2")
    if colon and not _named(lowered, names or ()):
        # An unknown prefix (a misspelt ``warn:``) would otherwise search names for its text.
        raise FilterError(f"{word!r}: unknown word {kind + ':'!r}; use {', '.join(PREFIXES)}")
    if not _named(lowered, names):
        raise FilterError(f"{word!r}: no outcome, grouping or level name contains {word!r}")
    return _text(lowered, columns)


def parse_filter(
    text: str, columns: Collection[str] = (), names: Collection[str] | None = None
) -> pl.Expr | None:
    """One expression for the whole line (None when the line is empty).

    ``columns`` are the frame's columns: with ``outcome_label`` there, text also matches the
    readable outcome names (``mg/kg``, ``µg``). ``names`` are the names a plain word can
    match (``searchable_names(frame)``): given, a plain word that no name contains is an
    error; not given, such a word simply matches no row. Raises ``FilterError``."""
    expression: pl.Expr | None = None
    for word in text.split():
        negate = word.startswith("-") and len(word) > 1 and not word[1].isdigit()
        part = _word(word[1:] if negate else word, columns, names)
        if negate:
            part = ~part
        expression = part if expression is None else expression & part
    return expression
