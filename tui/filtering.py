"""The filter line: plain words and conditions turned into one polars expression.

This module imports nothing from Textual, so it is tested without a terminal. The words it
reads are listed in ``FILTER_WORDS``, which the app's help shows as it is.
"""

from __future__ import annotations

import re
from collections.abc import Collection

import polars as pl

from foldsift.stats import columns as col
from foldsift.stats.diagnostics import WARNINGS
from foldsift.stats.equivalence import BAND_CLASSES
from foldsift.stats.vocabulary import DECISIONS

NUMERIC_FIELDS = {
    "q": "q_bh",
    "p": "p_value",
    "holm": "p_holm",
    "ratio": "ratio",
    "change": "percent_change",
    "n": "n_min",  # the smaller group's n
    "fold": "ci_fold",
    "below": "below_share",  # the larger group's below-detection share, in percent
}
#: ``method:WORD`` -> the method it picks (``stats.vocabulary.METHODS``).
METHOD_WORDS = {
    "logs": "t-test on logs",
    "ml": "censored ML",
    "left-out": "nondetects left out",
    "dl2": "DL/2 substituted",
    "dl-root2": "DL/sqrt2 substituted",
}
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

- any plain word: text search in outcome, grouping, stratum and level names (case-insensitive)
- `q<0.05`, `p<=0.01`, `holm<0.05`, `ratio>2`, `ratio<0.5`, `change>50`, `n>=10` (the smaller
  group), `fold<3` (the CI's upper/lower ratio): numeric conditions
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
"""


class FilterError(ValueError):
    """A word of the filter line that cannot be read; the message says which and why."""


def _band(text: str, word: str) -> tuple[float, float]:
    try:
        low, high = (float(part) for part in text.split(","))
    except ValueError:
        raise FilterError(f"{word!r}: write the band as LOW,HIGH, e.g. outside:0.8,1.25") from None
    if not 0 < low < high:
        raise FilterError(f"{word!r}: the band needs 0 < LOW < HIGH")
    return low, high


def _condition(word: str, match: re.Match[str]) -> pl.Expr:
    """``q<0.05``, ``ratio>2``, ``n>=10``: a numeric condition."""
    field = match["field"]
    if field not in NUMERIC_FIELDS:
        raise FilterError(
            f"{word!r}: unknown field {field!r}; use one of {', '.join(NUMERIC_FIELDS)}"
        )
    try:
        value = float(match["value"])
    except ValueError:
        raise FilterError(f"{word!r}: {match['value']!r} is not a number") from None
    if field == "n":
        column = pl.min_horizontal(col.N_A, col.N_B)
    elif field == "below":
        column = 100 * pl.max_horizontal(
            col.side("censored_share", "a"), col.side("censored_share", "b")
        )
    else:
        column = pl.col(NUMERIC_FIELDS[field])
    return _OPERATORS[match["op"]](column, value).fill_null(False)


def _prefixed(word: str, lowered: str) -> pl.Expr | None:
    """``outside:``, ``inside:``, ``warn:`` and ``class:`` words; None for other words."""
    kind, colon, text = lowered.partition(":")
    if not colon:
        return None
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
    if kind == "class":
        if text not in BAND_CLASSES:
            raise FilterError(f"{word!r}: classes are {', '.join(BAND_CLASSES)}")
        return (pl.col(col.BAND_CLASS).cast(pl.String) == text).fill_null(False)
    return None


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
    names = [col.OUTCOME, col.GROUPING, col.STRATUM, col.LEVEL_A, col.LEVEL_B]
    if col.OUTCOME_LABEL in columns:
        names.insert(0, col.OUTCOME_LABEL)
    return pl.any_horizontal(
        pl.col(name).str.to_lowercase().str.contains(lowered, literal=True).fill_null(False)
        for name in names
        if name in columns or not columns
    )


def _word(word: str, columns: Collection[str] = ()) -> pl.Expr:
    lowered = word.lower()
    match = _CONDITION.match(lowered)
    if match:
        return _condition(word, match)
    expression = _prefixed(word, lowered)
    if expression is None:
        expression = _state(lowered)
    if expression is not None:
        return expression
    if any(symbol in lowered for symbol in "<>="):
        raise FilterError(f"{word!r}: write conditions like q<0.05 or ratio>2")
    return _text(lowered, columns)


def parse_filter(text: str, columns: Collection[str] = ()) -> pl.Expr | None:
    """One expression for the whole line (None when the line is empty).

    ``columns`` are the frame's columns: with ``outcome_label`` there, text also matches the
    readable outcome names (``mg/kg``, ``µg``)."""
    expression: pl.Expr | None = None
    for word in text.split():
        negate = word.startswith("-") and len(word) > 1 and not word[1].isdigit()
        part = _word(word[1:] if negate else word, columns)
        if negate:
            part = ~part
        expression = part if expression is None else expression & part
    return expression
