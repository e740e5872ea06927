"""Per-group figures of outcomes with censored entries, for the scan.

For every group (grouping × stratum × level × outcome) of an outcome that holds entries below
a detection limit (or, under ``mle``, above the measuring range) this module gives, in one
vectorised pass over all such groups:

- the censored-lognormal maximum-likelihood fit (``censored.fit_censored_lognormal``): the
  mean and SD of the logs and the variance of the mean that the comparison uses (the inverse
  observed information times n / (n - 1)), or the reason a group is not fitted;
- the Kaplan–Meier median of the left-censored values (``censored.kaplan_meier_median``),
  or the value at most which half the entries are known to lie when the median is undefined;
- the range and median of the group's detection limits and its smallest detected value (for
  the ``limits-differ`` rule);
- the DL/2 substitution figures (count, mean and sum of squared deviations of the logs), the
  sensitivity answer the scan sets beside the fit.

Entries that a fit takes: a detected value as the value policy left it (``names.used``), a
below-detection entry with a positive limit at its limit (left-censored), and under ``mle`` an
entry above the measuring range at its stated number (right-censored). An above-range entry
counts as detected at its stated number for the Kaplan–Meier median (exact whenever the
median lies below the range's top, the usual case).

``GroupEntries`` keeps the stacked entries (sorted by group) so that the pooled (common-SD)
fit of each comparison and the cross-checks can take a group's entries without another pass.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import polars as pl

from .censored import (
    CensoredComparison,
    compare_pooled,
    fit_censored_lognormal,
    fit_censored_pooled,
    kaplan_meier_median,
)
from .entries import ABOVE
from .load import DerivedNames
from .policy import ValuePolicy
from .summaries import GROUP_COLUMNS
from .values import GroupId, GroupSpec

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]
BoolArray = npt.NDArray[np.bool_]

#: The per-group columns this module adds to the scan's summaries.
CENSORED_SCHEMA = pl.Schema(
    {
        "grouping": pl.Utf8,
        "within": pl.Utf8,
        "stratum": pl.Utf8,
        "level": pl.Utf8,
        "outcome": pl.Utf8,
        "n_fit": pl.Int64,
        "n_left": pl.Int64,
        "n_right": pl.Int64,
        "fit_mean_log": pl.Float64,
        "fit_sd_log": pl.Float64,
        "fit_var_mean_log": pl.Float64,
        "fit_reason": pl.Utf8,
        "km_median": pl.Float64,
        "median_at_most": pl.Float64,
        "limit_low": pl.Float64,
        "limit_high": pl.Float64,
        "limit_median": pl.Float64,
        "detected_min": pl.Float64,
        "half_dl_n": pl.Int64,
        "half_dl_mean_log": pl.Float64,
        "half_dl_ss_log": pl.Float64,
    }
)

#: The columns ``merge_censored`` leaves in the summaries (null where they do not apply).
SUMMARY_EXTRA = pl.Schema(
    {
        name: dtype
        for name, dtype in CENSORED_SCHEMA.items()
        if name not in (*GROUP_COLUMNS, "n_fit", "fit_mean_log", "km_median")
    }
)


def censored_outcomes(
    frame: pl.DataFrame, outcomes: Sequence[str], names: DerivedNames, policy: ValuePolicy
) -> list[str]:
    """The outcomes with at least one entry the censored figures concern: below a positive
    limit, or (under ``mle``) above the measuring range."""

    def flagged(name: str) -> pl.Expr:
        below = pl.col(names.censored(name)) & (pl.col(name) > 0)
        if policy.censored == "mle" and names.kind(name) in frame.columns:
            below = below | ((pl.col(names.kind(name)) == ABOVE) & (pl.col(name) > 0))
        return below.any().alias(name)

    if not outcomes:
        return []
    row = frame.select([flagged(name) for name in outcomes]).row(0, named=True)
    return [name for name in outcomes if row[name]]


@dataclass(frozen=True)
class _Stack:
    """The entries of every group of one grouping spec, sorted by group code."""

    spec: GroupSpec
    identity: pl.DataFrame  # code -> stratum, level, outcome
    observed: FloatArray
    left: BoolArray
    right: BoolArray
    group: IntArray
    starts: IntArray  # group code -> first index in the sorted arrays (length n_groups + 1)

    @property
    def n_groups(self) -> int:
        return self.identity.height


def _stack(
    frame: pl.DataFrame,
    spec: GroupSpec,
    outcomes: Sequence[str],
    names: DerivedNames,
    policy: ValuePolicy,
) -> _Stack:
    keys = frame.select(spec.keys)
    present = keys.select(pl.all_horizontal(pl.all().is_not_null())).to_series()
    coded = frame.filter(present).with_columns(
        (pl.struct(spec.keys).rank("dense").cast(pl.Int64) - 1).alias("\x1fcode")
    )
    levels = coded.select(*spec.keys, "\x1fcode").unique("\x1fcode").sort("\x1fcode")
    n_levels = levels.height
    parts = []
    for index, name in enumerate(outcomes):
        value = pl.col(name)
        left = pl.col(names.censored(name)) & (value > 0)
        if policy.censored == "mle" and names.kind(name) in frame.columns:
            right = (pl.col(names.kind(name)) == ABOVE) & (value > 0)
        else:
            right = pl.lit(False)
        observed = pl.when(left | right).then(value).otherwise(pl.col(names.used(name)))
        parts.append(
            coded.select(
                observed.alias("observed"),
                left.fill_null(False).alias("left"),
                right.fill_null(False).alias("right"),
                (pl.col("\x1fcode") + index * n_levels).alias("group"),
            ).filter(pl.col("observed").is_not_null() & (pl.col("observed") > 0))
        )
    stacked = pl.concat(parts).sort("group", maintain_order=True)
    group = stacked["group"].to_numpy().astype(np.int64)
    n_groups = n_levels * len(outcomes)
    counts = np.bincount(group, minlength=n_groups)
    starts = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    stratum = pl.col(spec.within).cast(pl.Utf8) if spec.within else pl.lit(None, pl.Utf8)
    identity = pl.concat(
        [
            levels.select(
                pl.lit(spec.grouping, pl.Utf8).alias("grouping"),
                pl.lit(spec.within, pl.Utf8).alias("within"),
                stratum.alias("stratum"),
                pl.col(spec.grouping).cast(pl.Utf8).alias("level"),
                pl.lit(name, pl.Utf8).alias("outcome"),
            )
            for name in outcomes
        ]
    )
    return _Stack(
        spec=spec,
        identity=identity,
        observed=stacked["observed"].to_numpy().astype(np.float64),
        left=stacked["left"].to_numpy().astype(bool),
        right=stacked["right"].to_numpy().astype(bool),
        group=group,
        starts=starts,
    )


def _mean_and_ss(
    y: FloatArray, group: IntArray, n_groups: int
) -> tuple[IntArray, FloatArray, FloatArray]:
    """Count, mean and sum of squared deviations per group (two-pass)."""
    n = np.bincount(group, minlength=n_groups).astype(np.int64)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.bincount(group, y, n_groups) / n
        ss = np.bincount(group, (y - mean[group]) ** 2, n_groups)
    return n, np.asarray(mean, dtype=np.float64), np.asarray(ss, dtype=np.float64)


def _group_min(values: FloatArray, group: IntArray, n_groups: int) -> FloatArray:
    out = np.full(n_groups, np.inf)
    np.minimum.at(out, group, values)
    return np.where(np.isfinite(out), out, np.nan)


def _group_max(values: FloatArray, group: IntArray, n_groups: int) -> FloatArray:
    out = np.full(n_groups, -np.inf)
    np.maximum.at(out, group, values)
    return np.where(np.isfinite(out), out, np.nan)


def _figures(stack: _Stack, policy: ValuePolicy) -> pl.DataFrame:
    """The censored figures of every group of one stack that has a censored entry."""
    m = stack.n_groups
    observed, left, right, group = stack.observed, stack.left, stack.right, stack.group
    n_left = np.bincount(group[left], minlength=m).astype(np.int64)
    n_right = np.bincount(group[right], minlength=m).astype(np.int64)
    concerned = (n_left + n_right) > 0
    out: dict[str, npt.NDArray[np.generic]] = {}
    if policy.censored == "mle":
        fit = fit_censored_lognormal(observed, left, group, m, right=right)
        out["fit_mean_log"] = fit.mu
        out["fit_sd_log"] = fit.sigma
        with np.errstate(divide="ignore", invalid="ignore"):
            n = fit.n.astype(np.float64)
            out["fit_var_mean_log"] = fit.var_mu * (n / (n - 1))
        reason = fit.reason.astype(object)
        reason[fit.reason == ""] = None
        out["fit_reason"] = reason
    else:
        for name in ("fit_mean_log", "fit_sd_log", "fit_var_mean_log"):
            out[name] = np.full(m, np.nan)
        out["fit_reason"] = np.full(m, None, dtype=object)
    half = np.log(np.where(left, observed / 2, observed))
    half_n, half_mean, half_ss = _mean_and_ss(half, group, m)
    detected = ~left & ~right
    limits = np.full(m, np.nan)
    km_median = np.full(m, np.nan)
    at_most = np.full(m, np.nan)
    for code in np.flatnonzero(concerned):
        lo, hi = stack.starts[code], stack.starts[code + 1]
        values, below = observed[lo:hi], left[lo:hi]
        if n_left[code]:
            limits[code] = float(np.median(values[below]))
        km = kaplan_meier_median(values, below)
        km_median[code], at_most[code] = km.median, (km.at_most if km.reason else np.nan)
    out.update(
        n_fit=np.bincount(group, minlength=m).astype(np.int64),
        n_left=n_left,
        n_right=n_right,
        km_median=km_median,
        median_at_most=at_most,
        limit_low=_group_min(observed[left], group[left], m),
        limit_high=_group_max(observed[left], group[left], m),
        limit_median=limits,
        detected_min=_group_min(observed[detected], group[detected], m),
        half_dl_n=half_n,
        half_dl_mean_log=half_mean,
        half_dl_ss_log=half_ss,
    )
    figures = pl.DataFrame(
        [
            pl.Series(name, list(out[name]) if dtype == pl.Utf8 else out[name], dtype=dtype)
            for name, dtype in CENSORED_SCHEMA.items()
            if name in out
        ]
    )
    return pl.concat([stack.identity, figures], how="horizontal").with_columns(
        pl.col(pl.Float64).fill_nan(None)
    )


class GroupEntries:
    """The entries of every group of the outcomes with censored entries: detected values,
    limits of below-detection entries and (under ``mle``) above-range entries, each flagged."""

    def __init__(
        self,
        frame: pl.DataFrame,
        specs: Sequence[GroupSpec],
        outcomes: Sequence[str],
        names: DerivedNames,
        policy: ValuePolicy,
    ) -> None:
        self.policy = policy
        self.outcomes = tuple(censored_outcomes(frame, outcomes, names, policy))
        self._stacks = (
            [_stack(frame, spec, self.outcomes, names, policy) for spec in specs]
            if self.outcomes
            else []
        )
        self._index: dict[GroupId, tuple[_Stack, int]] = {}
        for stack in self._stacks:
            for code, row in enumerate(stack.identity.iter_rows()):
                grouping, within, stratum, level, outcome = row
                self._index[(grouping, within, stratum, level, outcome)] = (stack, code)

    def figures(self) -> pl.DataFrame:
        """One row per group of each outcome with a censored entry (``CENSORED_SCHEMA``);
        the fit, median and limit figures are filled for groups that hold such an entry."""
        parts = [_figures(stack, self.policy) for stack in self._stacks]
        if not parts:
            return pl.DataFrame(schema=CENSORED_SCHEMA)
        return pl.concat(parts).select(list(CENSORED_SCHEMA)).cast(CENSORED_SCHEMA)

    def entries(self, group: GroupId) -> tuple[FloatArray, BoolArray, BoolArray] | None:
        """(values, below a limit, above the range) of one group; None for a group of an
        outcome without censored entries."""
        found = self._index.get(group)
        if found is None:
            return None
        stack, code = found
        lo, hi = stack.starts[code], stack.starts[code + 1]
        return stack.observed[lo:hi], stack.left[lo:hi], stack.right[lo:hi]

    def pooled(
        self, pairs: Sequence[tuple[GroupId, GroupId]], confidence: float
    ) -> CensoredComparison:
        """The common-SD joint fit of each pair (group a, group b) and its comparison."""
        parts: dict[str, list[npt.NDArray[Any]]] = {k: [] for k in ("x", "l", "r", "s", "p")}
        for index, (a, b) in enumerate(pairs):
            for which, group in ((0, a), (1, b)):
                got = self.entries(group)
                if got is None:
                    continue
                parts["x"].append(got[0])
                parts["l"].append(got[1])
                parts["r"].append(got[2])
                parts["s"].append(np.full(got[0].size, which, dtype=np.int64))
                parts["p"].append(np.full(got[0].size, index, dtype=np.int64))

        def joined(key: str, dtype: type) -> npt.NDArray[Any]:
            return np.concatenate(parts[key]) if parts[key] else np.empty(0, dtype=dtype)

        fit = fit_censored_pooled(
            joined("x", float),
            joined("l", bool),
            joined("s", np.int64),
            joined("p", np.int64),
            len(pairs),
            right=joined("r", bool),
        )
        return compare_pooled(fit, confidence=confidence)


def merge_censored(
    summaries: pl.DataFrame, figures: pl.DataFrame, policy: ValuePolicy
) -> pl.DataFrame:
    """The summaries with the censored figures joined; under ``mle`` each censored group's n,
    mean of the logs, SD and variance of the mean are those of its fit, and its median is
    the Kaplan–Meier median under every policy. Checks made on detected values only (skewness,
    Shapiro–Wilk) are left empty for fitted groups: they would describe a cut distribution."""
    joined = summaries.join(figures, on=list(GROUP_COLUMNS), how="left", nulls_equal=True)
    joined = joined.with_columns(pl.col("n_left").fill_null(0), pl.col("n_right").fill_null(0))
    concerned = (pl.col("n_left") + pl.col("n_right")) > 0
    fitted = concerned & pl.lit(policy.censored == "mle")
    blank = pl.lit(None, pl.Float64)
    return joined.with_columns(
        pl.when(fitted).then(pl.col("n_fit")).otherwise(pl.col("n")).alias("n"),
        pl.when(fitted)
        .then(pl.col("fit_mean_log"))
        .otherwise(pl.col("mean_log"))
        .alias("mean_log"),
        pl.when(fitted).then(blank).otherwise(pl.col("ss_log")).alias("ss_log"),
        pl.when(concerned).then(pl.col("km_median")).otherwise(pl.col("median")).alias("median"),
        *[
            pl.when(fitted).then(blank).otherwise(pl.col(name)).alias(name)
            for name in ("skew_log", "skew_raw", "shapiro_w", "shapiro_p")
            if name in joined.columns
        ],
        *[
            pl.when(fitted).then(pl.col(name)).otherwise(None).alias(name)
            for name in ("fit_sd_log", "fit_var_mean_log", "fit_reason")
        ],
        *[
            pl.when(concerned).then(pl.col(name)).otherwise(None).alias(name)
            for name in ("median_at_most", "half_dl_n", "half_dl_mean_log", "half_dl_ss_log")
        ],
    ).drop("n_fit", "fit_mean_log", "km_median")
