"""The usable values of each group, read from the policy-applied table when needed.

A group is one level of one grouping column (inside one stratum when the scan compares
within strata) for one outcome. Its values feed the normality checks, the charts and the
cross-checks; the table is split once per grouping and the parts are kept.
"""

from __future__ import annotations

import threading
from collections.abc import Collection, Iterator, Sequence
from dataclasses import dataclass

import numpy as np
import polars as pl

from .load import DerivedNames

#: (grouping, within, stratum, level, outcome); within and stratum are None outside strata.
GroupId = tuple[str, str | None, str | None, str, str]


@dataclass(frozen=True)
class GroupSpec:
    """One grouping column to compare, optionally inside each level of another."""

    grouping: str
    within: str | None = None

    @property
    def keys(self) -> list[str]:
        """The columns a group_by takes: the stratum first, then the grouping."""
        return [self.within, self.grouping] if self.within else [self.grouping]


def group_specs(groupings: Sequence[str], within: str | None) -> list[GroupSpec]:
    """Every grouping, or every grouping but ``within`` compared inside its levels."""
    if within is None:
        return [GroupSpec(g) for g in groupings]
    return [GroupSpec(g, within) for g in groupings if g != within]


class GroupValues:
    """Usable (policy-applied) values per group; safe to use from a worker thread."""

    def __init__(
        self,
        used: pl.DataFrame,
        specs: Sequence[GroupSpec],
        outcomes: Sequence[str],
        names: DerivedNames,
    ) -> None:
        self._used = used
        self._specs = list(specs)
        self._outcomes = tuple(outcomes)
        self._names = names
        self._parts: dict[GroupSpec, dict[tuple[str | None, str], pl.DataFrame]] = {}
        self._lock = threading.Lock()

    @property
    def specs(self) -> list[GroupSpec]:
        return list(self._specs)

    @property
    def frame(self) -> pl.DataFrame:
        """The policy-applied table the values come from."""
        return self._used

    @property
    def names(self) -> DerivedNames:
        return self._names

    def _partition(self, spec: GroupSpec) -> dict[tuple[str | None, str], pl.DataFrame]:
        with self._lock:
            if spec not in self._parts:
                columns = [self._names.used(o) for o in self._outcomes]
                frame = self._used.select(*spec.keys, *columns).drop_nulls(spec.keys)
                parts = frame.partition_by(spec.keys, as_dict=True, include_key=False)
                self._parts[spec] = {
                    ((str(key[0]), str(key[1])) if spec.within else (None, str(key[0]))): part
                    for key, part in parts.items()
                }
            return self._parts[spec]

    def values(self, group: GroupId) -> np.ndarray:
        """The group's usable values (empty when the group does not exist)."""
        grouping, within, stratum, level, outcome = group
        part = self._partition(GroupSpec(grouping, within)).get((stratum, level))
        if part is None or outcome not in self._outcomes:
            return np.empty(0)
        return part[self._names.used(outcome)].drop_nulls().to_numpy()

    def groups(self) -> Iterator[tuple[GroupId, np.ndarray]]:
        """Every group with its values, grouping by grouping."""
        for spec in self._specs:
            for (stratum, level), part in self._partition(spec).items():
                for outcome in self._outcomes:
                    values = part[self._names.used(outcome)].drop_nulls().to_numpy()
                    yield (spec.grouping, spec.within, stratum, level, outcome), values

    def each_group(
        self, batch: int = 16, wanted: Collection[GroupId] | None = None
    ) -> Iterator[tuple[GroupId, np.ndarray]]:
        """Every group with its values, like ``groups`` but a batch of outcomes at a time and
        without keeping the split table: the memory it takes is one batch's. ``wanted``: only
        these groups (a batch of outcomes none of whose groups is wanted is not split)."""
        for spec in self._specs:
            outcomes = self._outcomes
            if wanted is not None:
                needed = {g[4] for g in wanted if g[0] == spec.grouping and g[1] == spec.within}
                outcomes = tuple(o for o in outcomes if o in needed)
            for start in range(0, len(outcomes), batch):
                chosen = outcomes[start : start + batch]
                columns = [self._names.used(o) for o in chosen]
                frame = self._used.select(*spec.keys, *columns).drop_nulls(spec.keys)
                parts = frame.partition_by(spec.keys, as_dict=True, include_key=False)
                for key, part in parts.items():
                    stratum, level = (
                        (str(key[0]), str(key[1])) if spec.within else (None, str(key[0]))
                    )
                    for outcome, column in zip(chosen, columns, strict=True):
                        group = (spec.grouping, spec.within, stratum, level, outcome)
                        if wanted is None or group in wanted:
                            yield group, part[column].drop_nulls().to_numpy()
