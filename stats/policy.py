"""Explicit handling of values the log cannot take: zeros, negatives and censored entries.

Nothing is dropped or replaced silently: each policy yields, per outcome, the value used
on the log scale and per-row markers that the summaries count per group.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import polars as pl

from .entries import ABOVE
from .load import DerivedNames
from .vocabulary import (
    CENSORED_POLICIES,
    NONPOSITIVE_POLICIES,
    CensoredPolicy,
    NonpositivePolicy,
    choose,
)

__all__ = ["CENSORED_POLICIES", "NONPOSITIVE_POLICIES", "ValuePolicy", "apply_policy"]


@dataclass(frozen=True)
class ValuePolicy:
    """How non-positive and censored entries reach the log scale."""

    nonpositive: NonpositivePolicy = "exclude"
    censored: CensoredPolicy = "mle"

    def __post_init__(self) -> None:
        # Literal types are checked by mypy; this catches values built at run time.
        choose(self.nonpositive, NONPOSITIVE_POLICIES, "non-positive policy")
        choose(self.censored, CENSORED_POLICIES, "censored policy")

    def describe(self, nonpositive: bool = True, censored: bool = True) -> str:
        """The policies in words; only the parts that applied when told which found entries
        (``nonpositive``: some zero or negative value; ``censored``: some below-detection or
        above-range entry)."""
        words = {
            "mle": "fitted by censored maximum likelihood",
            "exclude": "left out",
            "half-min": "replaced by half the smallest positive value",
            "half-dl": "replaced by half the detection limit",
            "dl-root2": "replaced by the detection limit divided by sqrt(2)",
        }
        parts = [
            *([f"zero/negative values {words[self.nonpositive]}"] if nonpositive else []),
            *([f"below-detection entries {words[self.censored]}"] if censored else []),
        ]
        return "; ".join(parts) or "no zero, negative or below-detection entries"


def apply_policy(
    frame: pl.DataFrame, outcomes: tuple[str, ...], policy: ValuePolicy, names: DerivedNames
) -> pl.DataFrame:
    """Add the used value, an excluded flag and a substituted flag for each outcome
    (``names.used``, ``names.excluded``, ``names.substituted``); an outcome with nothing to
    leave out or replace gets only its used value (the column itself, not a copy).

    The used value is the strictly positive value that goes to the log scale (null when the
    entry is missing, left out, or fitted as censored). Under ``mle`` a below-detection entry
    with a positive limit and an entry above the measuring range are neither used as numbers
    nor excluded: the censored fit (``censored_groups``) takes them at their limits. Missing
    entries count as neither excluded nor substituted.
    """
    clean = _clean_outcomes(frame, outcomes, names)
    exprs: list[pl.Expr] = []
    for name in outcomes:
        if name in clean:
            # Nothing to leave out or replace: the values themselves (no copy is made), and
            # no excluded or substituted flags (``summaries`` counts 0 where they are absent).
            exprs.append(pl.col(name).alias(names.used(name)))
        else:
            exprs += _policy_columns(name, policy, names, names.kind(name) in frame.columns)
    return frame.with_columns(exprs)


def _policy_columns(
    name: str, policy: ValuePolicy, names: DerivedNames, coded: bool
) -> list[pl.Expr]:
    """The used value, excluded flag and substituted flag of one outcome under the policy
    (``coded``: the outcome has a kind column, so above-range entries can be told apart)."""
    value = pl.col(name)
    censored = pl.col(names.censored(name))
    above = (
        pl.col(names.kind(name)) == ABOVE if policy.censored == "mle" and coded else pl.lit(False)
    )
    plain = value.is_not_null() & ~censored
    nonpositive = plain & (value <= 0)
    smallest_positive = value.filter(plain & (value > 0)).min()
    if policy.nonpositive == "half-min":
        nonpositive_value = smallest_positive / 2
    else:
        nonpositive_value = pl.lit(None, dtype=pl.Float64)
    if policy.censored == "half-dl":
        censored_value = value / 2
    elif policy.censored == "dl-root2":
        censored_value = value / math.sqrt(2)
    else:
        censored_value = pl.lit(None, dtype=pl.Float64)
    censored_usable = censored & (value > 0)
    used = (
        pl.when(censored_usable)
        .then(censored_value)
        .when(censored)
        .then(None)
        .when(above & (value > 0))
        .then(None)
        .when(nonpositive)
        .then(nonpositive_value)
        .otherwise(value)
    )
    excluded = (censored & ((policy.censored == "exclude") | (value <= 0))) | (
        nonpositive & (policy.nonpositive == "exclude")
    )
    substituted = (censored_usable & (policy.censored not in ("exclude", "mle"))) | (
        nonpositive & (policy.nonpositive != "exclude")
    )
    return [
        used.alias(names.used(name)),
        excluded.fill_null(False).alias(names.excluded(name)),
        substituted.fill_null(False).alias(names.substituted(name)),
    ]


def _clean_outcomes(
    frame: pl.DataFrame, outcomes: tuple[str, ...], names: DerivedNames
) -> set[str]:
    """The outcomes with no censored, coded, zero or negative entry: every value is used as
    it is (one pass over the table)."""
    if not outcomes:
        return set()
    checks = [
        (
            pl.col(names.censored(name)).any()
            | (pl.col(name) <= 0).any()
            | pl.lit(names.kind(name) in frame.columns)
        ).alias(name)
        for name in outcomes
    ]
    row = frame.select(checks).row(0, named=True)
    return {name for name in outcomes if not row[name]}
