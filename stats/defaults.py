"""Defaults and small parsers the command line needs before any data is read: nothing here
imports numpy, polars or scipy, so ``foldsift --help`` starts at once."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal, get_args

#: The ratio band of no practical difference (the usual 80-125% rule).
DEFAULT_BAND = (0.80, 1.25)
#: Bootstrap resamples and the seed of the cross-checks.
DEFAULT_RESAMPLES = 2000
DEFAULT_SEED = 20261201
#: The default limit on the comparisons of one scan (each is a row the review lists; 200,000
#: rows take a few hundred MB and well under a minute on a small machine).
DEFAULT_MAX_COMPARISONS = 200_000
#: Several results for one sample and analyte of a long table: geometric mean, the first, or
#: refuse.
Duplicates = Literal["mean-log", "first", "refuse"]
DUPLICATE_POLICIES: tuple[Duplicates, ...] = get_args(Duplicates)


def parse_band(text: str) -> tuple[float, float]:
    """Parse ``LOW,HIGH``; raise ValueError with a clear message if it is not a valid band."""
    parts = [part.strip() for part in text.split(",")]
    if len(parts) != 2:
        raise ValueError(f"band {text!r}: write it as LOW,HIGH, for example 0.80,1.25")
    try:
        low, high = float(parts[0]), float(parts[1])
    except ValueError:
        raise ValueError(
            f"band {text!r}: LOW and HIGH must be numbers, for example 0.80,1.25"
        ) from None
    check_band(low, high)
    return low, high


def check_band(low: float, high: float) -> None:
    if not (math.isfinite(low) and math.isfinite(high)) or low <= 0 or high <= 0:
        raise ValueError(f"band {low},{high}: both bounds must be positive ratios")
    if low >= high:
        raise ValueError(f"band {low},{high}: LOW must be below HIGH")
    if not low < 1 < high:
        raise ValueError(f"band {low},{high}: the band must contain 1 (no change)")


@dataclass(frozen=True)
class Reference:
    """A reference level (denominator) as the user wrote it: ``LEVEL`` (for every grouping
    that has that level) or ``GROUPING=LEVEL``. Names may themselves hold ``=``: every
    reading is tried against the groupings and levels of the data, and a text that fits
    more than one is refused as ambiguous."""

    text: str

    @classmethod
    def parse(cls, text: str) -> Reference:
        if not text or text.startswith("=") or text.endswith("="):
            raise ValueError(f"reference {text!r}: write LEVEL or GROUPING=LEVEL")
        return cls(text)

    @classmethod
    def of(cls, level: str, grouping: str | None = None) -> Reference:
        return cls(level if grouping is None else f"{grouping}={level}")

    def readings(self) -> list[tuple[str | None, str]]:
        """(grouping or None, level) for the whole text and each ``=`` it holds."""
        splits = [i for i, char in enumerate(self.text) if char == "="]
        return [(None, self.text)] + [(self.text[:i], self.text[i + 1 :]) for i in splits]

    def __str__(self) -> str:
        return self.text
