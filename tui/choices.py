"""The few words and numbers the command line offers for exports, kept apart from the modules
that write them so that ``foldsift --help`` imports nothing heavy."""

from __future__ import annotations

from typing import Literal, get_args

#: Which rows an export writes: flagged ones, ones with a decision, the ones the filter
#: shows, or all of them.
Selection = Literal["flagged", "decided", "shown", "all"]
SELECTIONS: tuple[Selection, ...] = get_args(Selection)
#: Which columns an export writes: the short set a colleague reads, or every column.
ColumnSet = Literal["short", "full"]
COLUMN_SETS: tuple[ColumnSet, ...] = get_args(ColumnSet)
DEFAULT_DIGITS = 4
#: 17 significant digits write every float64 exactly (IEEE 754-2008, 5.12.2).
MAX_DIGITS = 17
