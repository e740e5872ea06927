"""The closed vocabularies of foldsift: every option and state that takes one of a few words.

Each is a ``Literal`` type, so mypy checks the spelling where it is used, and a tuple of its
words (``get_args``) for choices on the command line and checks at run time.
"""

from __future__ import annotations

from typing import Literal, TypeVar, get_args

T = TypeVar("T", bound=str)

#: Which pairs of levels are compared: all of them, or each level against a reference.
Pairs = Literal["all", "reference"]
#: The t-test on the logs.
Test = Literal["welch", "pooled"]
#: The family over which Holm and Benjamini-Hochberg adjust.
Family = Literal["scan", "outcome", "grouping"]
#: Zero or negative values: leave them out, or put half the smallest positive value instead.
NonpositivePolicy = Literal["exclude", "half-min"]
#: Entries like ``<0.5``: fit them by censored maximum likelihood (the default), leave them
#: out, or put DL/2 or DL/sqrt(2) instead.
CensoredPolicy = Literal["mle", "exclude", "half-dl", "dl-root2"]
#: The SQL dialect of ``foldsift summary-sql`` (``summary_sql.summary_query``).
SqlDialect = Literal["duckdb", "spark", "postgres"]
#: How a comparison's numbers were computed (the ``method`` column).
Method = Literal[
    "t-test on logs",
    "censored ML",
    "nondetects left out",
    "DL/2 substituted",
    "DL/sqrt2 substituted",
    "paired t on logs",
    "paired t, nondetects left out",
    "paired t, DL/2 substituted",
    "paired t, DL/sqrt2 substituted",
    "2x2 crossover",
]
#: A reviewer's decision on a finding (no decision is ``None``, never an empty string).
Decision = Literal["keep", "doubt", "drop"]
#: Where a comparison falls against the ratio band of no practical difference.
BandClass = Literal["different", "minor-difference", "equivalent", "inconclusive"]
#: The named warnings a comparison can carry (rules in ``diagnostics.WARNINGS``).
WarningName = Literal[
    "too-few",
    "no-spread",
    "small-n",
    "censored-share",
    "excluded-share",
    "log-skew",
    "log-not-normal",
    "spread-differs",
    "median-vs-gm",
    "no-limit",
    "above-range",
    "units-apart",
    "not-fitted",
    "censoring-sensitive",
    "limits-differ",
    "few-paired",
    "values-combined",
    "pairs-skewed",
    "unit-dominates",
    "units-repeated",
]

PAIRS: tuple[Pairs, ...] = get_args(Pairs)
TESTS: tuple[Test, ...] = get_args(Test)
FAMILIES: tuple[Family, ...] = get_args(Family)
NONPOSITIVE_POLICIES: tuple[NonpositivePolicy, ...] = get_args(NonpositivePolicy)
CENSORED_POLICIES: tuple[CensoredPolicy, ...] = get_args(CensoredPolicy)
SQL_DIALECTS: tuple[SqlDialect, ...] = get_args(SqlDialect)
METHODS: tuple[Method, ...] = get_args(Method)
DECISIONS: tuple[Decision, ...] = get_args(Decision)
BAND_CLASS_NAMES: tuple[BandClass, ...] = get_args(BandClass)
WARNING_NAMES: tuple[WarningName, ...] = get_args(WarningName)


def choose(value: str, words: tuple[T, ...], what: str) -> T:
    """``value`` as one of ``words``; a ValueError naming the choices otherwise."""
    for word in words:
        if value == word:
            return word
    raise ValueError(f"unknown {what} {value!r}; choose one of {', '.join(words)}")
