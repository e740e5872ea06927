"""Explicit handling of values the log cannot take: zeros, negatives and censored entries.

Nothing is dropped or replaced silently: each policy yields, per outcome, the value used
on the log scale and per-row markers that the summaries count per group.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import polars as pl

from .load import CENSORED_SUFFIX

#: Zero or negative values: leave them out (counted), or put half the smallest positive
#: value of the same outcome in their place (counted as substituted).
NONPOSITIVE_POLICIES = ("exclude", "half-min")
#: Entries like ``<0.5``: leave them out (counted), or put DL/2 or DL/sqrt(2) in their place.
CENSORED_POLICIES = ("exclude", "half-dl", "dl-root2")

USED = "__used"
EXCLUDED = "__excluded"
SUBSTITUTED = "__substituted"


@dataclass(frozen=True)
class ValuePolicy:
    """How non-positive and censored entries reach the log scale."""

    nonpositive: str = "exclude"
    censored: str = "exclude"

    def __post_init__(self) -> None:
        if self.nonpositive not in NONPOSITIVE_POLICIES:
            raise ValueError(
                f"unknown non-positive policy {self.nonpositive!r}; "
                f"choose one of {', '.join(NONPOSITIVE_POLICIES)}"
            )
        if self.censored not in CENSORED_POLICIES:
            raise ValueError(
                f"unknown censored policy {self.censored!r}; "
                f"choose one of {', '.join(CENSORED_POLICIES)}"
            )

    def describe(self) -> str:
        words = {
            "exclude": "left out",
            "half-min": "replaced by half the smallest positive value",
            "half-dl": "replaced by half the detection limit",
            "dl-root2": "replaced by the detection limit divided by sqrt(2)",
        }
        return (
            f"zero/negative values {words[self.nonpositive]}; "
            f"below-detection entries {words[self.censored]}"
        )


def apply_policy(
    frame: pl.DataFrame, outcomes: tuple[str, ...], policy: ValuePolicy
) -> pl.DataFrame:
    """Add ``<o>__used``, ``<o>__excluded`` and ``<o>__substituted`` for each outcome.

    ``__used`` is the strictly positive value that goes to the log scale (null when the
    entry is missing or left out). Missing entries count as neither excluded nor
    substituted.
    """
    exprs: list[pl.Expr] = []
    for name in outcomes:
        value = pl.col(name)
        censored = pl.col(name + CENSORED_SUFFIX)
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
            .when(nonpositive)
            .then(nonpositive_value)
            .otherwise(value)
        )
        excluded = (censored & ((policy.censored == "exclude") | (value <= 0))) | (
            nonpositive & (policy.nonpositive == "exclude")
        )
        substituted = (censored_usable & (policy.censored != "exclude")) | (
            nonpositive & (policy.nonpositive != "exclude")
        )
        exprs += [
            used.alias(name + USED),
            excluded.fill_null(False).alias(name + EXCLUDED),
            substituted.fill_null(False).alias(name + SUBSTITUTED),
        ]
    return frame.with_columns(exprs)
