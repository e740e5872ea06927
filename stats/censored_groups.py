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

import threading
from collections.abc import Sequence
from typing import Any

import numpy as np
import numpy.typing as npt
import polars as pl

from .censored import (
    CensoredComparison,
    compare_pooled,
    fit_censored_pooled,
    fit_censored_summarised,
    kaplan_meier_median,
)
from .entries import ABOVE
from .load import DerivedNames
from .policy import ValuePolicy
from .summaries import GROUP_COLUMNS, group_identity
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


_STATS = (
    "n_fit",
    "n_left",
    "n_right",
    "n_det",
    "mean_det",
    "ss_det",
    "detected_min",
    "detected_max",
    "limit_low",
    "limit_high",
    "limit_median",
    "half_dl_n",
    "half_dl_mean_log",
    "half_dl_ss_log",
    "median_obs",
    "lower_middle",
)


def _entry_expressions(
    name: str, names: DerivedNames, policy: ValuePolicy, columns: Sequence[str]
) -> tuple[pl.Expr, pl.Expr, pl.Expr]:
    """(observed, below a limit, above the range) of one outcome's entries: the value the
    policy left (``names.used``) for a detected entry, the limit for a censored one; null
    for an entry no fit takes."""
    value = pl.col(name)
    left = (pl.col(names.censored(name)) & (value > 0)).fill_null(False)
    if policy.censored == "mle" and names.kind(name) in columns:
        right = ((pl.col(names.kind(name)) == ABOVE) & (value > 0)).fill_null(False)
    else:
        right = pl.lit(False)
    observed = pl.when(left | right).then(value).otherwise(pl.col(names.used(name)))
    observed = pl.when(observed > 0).then(observed)
    return observed, left, right


def _columns(
    name: str, names: DerivedNames, policy: ValuePolicy, columns: Sequence[str]
) -> tuple[list[pl.Expr], list[pl.Expr]]:
    """Working columns of one outcome, made once so the aggregations read plain columns:
    the entry a fit takes, its flags, the logs of detected values, the limits of entries
    below them and the logs with DL/2 put in."""
    observed, left, right = _entry_expressions(name, names, policy, columns)

    def column(role: str) -> str:
        return names.derived(name, f"cg_{role}")

    x = pl.col(column("x"))
    is_left, is_right = pl.col(column("left")), pl.col(column("right"))
    return [
        observed.alias(column("x")),
        left.alias(column("left")),
        right.alias(column("right")),
    ], [
        pl.when(~is_left & ~is_right).then(x.log()).alias(column("logdet")),
        pl.when(is_left & x.is_not_null()).then(x).alias(column("limit")),
        pl.when(is_left).then(x / 2).otherwise(x).log().alias(column("loghalf")),
    ]


def _aggregations(name: str, names: DerivedNames) -> list[pl.Expr]:
    def column(role: str) -> pl.Expr:
        return pl.col(names.derived(name, f"cg_{role}"))

    x, logdet, limit, half = column("x"), column("logdet"), column("limit"), column("loghalf")
    ok = x.is_not_null()
    figures = {
        "n_fit": x.count(),
        "n_left": (ok & column("left")).sum(),
        "n_right": (ok & column("right")).sum(),
        "n_det": logdet.count(),
        "mean_det": logdet.mean(),
        "ss_det": logdet.var(ddof=0) * logdet.count(),
        "detected_min": logdet.min().exp(),
        "detected_max": logdet.max().exp(),
        "limit_low": limit.min(),
        "limit_high": limit.max(),
        "limit_median": limit.median(),
        "half_dl_n": half.count(),
        "half_dl_mean_log": half.mean(),
        "half_dl_ss_log": half.var(ddof=0) * half.count(),
        "median_obs": x.median(),
        "lower_middle": x.quantile(0.5, "lower"),
    }
    return [expr.alias(names.derived(name, f"cg_{stat}")) for stat, expr in figures.items()]


def _spec_groups(
    frame: pl.DataFrame,
    spec: GroupSpec,
    outcomes: Sequence[str],
    names: DerivedNames,
    policy: ValuePolicy,
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Per group (one row each, all outcomes): the figures of ``_aggregations``; and the
    censored entries as distinct (group, outcome, limit, kind, count) rows."""
    columns = frame.columns
    lazy = frame.lazy().drop_nulls(spec.keys)
    made = [_columns(name, names, policy, columns) for name in outcomes]
    prepared = lazy.select(*spec.keys, *[e for first, _ in made for e in first]).with_columns(
        [e for _, second in made for e in second]
    )
    aggregations = [e for name in outcomes for e in _aggregations(name, names)]
    plans = [prepared.group_by(spec.keys).agg(aggregations)]
    for name in outcomes:
        observed, left, right = _entry_expressions(name, names, policy, columns)
        plans.append(
            lazy.select(
                *spec.keys,
                observed.alias("limit"),
                pl.when(left).then(1).otherwise(2).cast(pl.Int64).alias("kind"),
                (left | right).alias("censored"),
            )
            .filter(pl.col("censored") & pl.col("limit").is_not_null())
            .group_by([*spec.keys, "limit", "kind"])
            .agg(pl.len().cast(pl.Int64).alias("count"))
            .with_columns(pl.lit(name, pl.Utf8).alias("outcome"))
        )
    wide, *censored = pl.collect_all(plans)
    identity = group_identity(spec)
    long = pl.concat(
        [
            wide.select(
                *identity,
                pl.lit(name, pl.Utf8).alias("outcome"),
                *[pl.col(names.derived(name, f"cg_{stat}")).alias(stat) for stat in _STATS],
            )
            for name in outcomes
        ]
    )
    entries = pl.concat(
        [part.select(*identity, "outcome", "limit", "kind", "count") for part in censored]
    )
    return long, entries


_Key = tuple[str, str | None, str | None, str, str]


def _exact_medians(
    frame: pl.DataFrame, groups: pl.DataFrame, names: DerivedNames, policy: ValuePolicy
) -> dict[_Key, tuple[float, float]]:
    """Kaplan–Meier medians (and "at most" values) of the groups whose middle values do not
    all lie above their highest limit, computed on the group's entries."""
    out: dict[_Key, tuple[float, float]] = {}
    for grouping, within, stratum, level, outcome in groups.select(GROUP_COLUMNS).rows():
        keys = pl.col(grouping).cast(pl.Utf8) == level
        if within is not None:
            keys = keys & (pl.col(within).cast(pl.Utf8) == stratum)
        observed, left, _ = _entry_expressions(outcome, names, policy, frame.columns)
        part = frame.filter(keys).select(observed.alias("x"), left.alias("left")).drop_nulls("x")
        km = kaplan_meier_median(part["x"].to_numpy(), part["left"].to_numpy())
        at_most = km.at_most if km.reason else np.nan
        out[(grouping, within, stratum, level, outcome)] = (km.median, at_most)
    return out


def _fit_columns(groups: pl.DataFrame, entries: pl.DataFrame, mle: bool) -> list[pl.Series]:
    """The censored ML fit of every group (NaN and no reason when the policy is not mle)."""
    m = groups.height
    if not mle:
        nothing = np.full(m, np.nan)
        return [
            pl.Series("fit_mean_log", nothing),
            pl.Series("fit_sd_log", nothing),
            pl.Series("fit_var_mean_log", nothing),
            pl.Series("fit_reason", [None] * m, dtype=pl.Utf8),
        ]
    coded = entries.join(
        groups.select(*GROUP_COLUMNS, "code"), on=list(GROUP_COLUMNS), nulls_equal=True
    )
    fit = fit_censored_summarised(
        (
            groups["n_det"].to_numpy(),
            groups["mean_det"].fill_null(np.nan).to_numpy(),
            groups["ss_det"].fill_null(np.nan).to_numpy(),
            (groups["detected_max"] > groups["detected_min"]).fill_null(False).to_numpy(),
        ),
        (
            coded["code"].to_numpy(),
            coded["limit"].to_numpy(),
            coded["kind"].to_numpy(),
            coded["count"].to_numpy(),
        ),
        m,
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        n = fit.n.astype(np.float64)
        variance = fit.var_mu * (n / (n - 1))
    reason: list[str | None] = [r or None for r in fit.reason.tolist()]
    return [
        pl.Series("fit_mean_log", fit.mu),
        pl.Series("fit_sd_log", fit.sigma),
        pl.Series("fit_var_mean_log", variance),
        pl.Series("fit_reason", reason, dtype=pl.Utf8),
    ]


def _figures(
    frame: pl.DataFrame,
    spec: GroupSpec,
    outcomes: Sequence[str],
    names: DerivedNames,
    policy: ValuePolicy,
) -> pl.DataFrame:
    """The censored figures of every group of one grouping spec (``CENSORED_SCHEMA``)."""
    groups, entries = _spec_groups(frame, spec, outcomes, names, policy)
    groups = groups.with_row_index("code")
    groups = groups.with_columns(_fit_columns(groups, entries, policy.censored == "mle"))
    concerned = (pl.col("n_left") + pl.col("n_right")) > 0
    # Above the highest limit the Kaplan-Meier curve is the empirical one: where both middle
    # values lie above every limit of the group, the K-M median is the ordinary median.
    plain = (pl.col("n_left") == 0) | (pl.col("lower_middle") > pl.col("limit_high"))
    exact = _exact_medians(frame, groups.filter(concerned & ~plain), names, policy)
    medians = [exact.get(key, (np.nan, np.nan)) for key in groups.select(GROUP_COLUMNS).rows()]
    groups = groups.with_columns(
        pl.when(concerned & plain)
        .then(pl.col("median_obs"))
        .otherwise(pl.Series([m[0] for m in medians], dtype=pl.Float64))
        .alias("km_median"),
        pl.Series("median_at_most", [m[1] for m in medians], dtype=pl.Float64),
    )
    return (
        groups.with_columns(pl.col(pl.Float64).fill_nan(None))
        .select(list(CENSORED_SCHEMA))
        .cast(CENSORED_SCHEMA)
    )


#: Outcomes whose censored figures are aggregated together (``GroupEntries.figures``).
CENSORED_BATCH = 8


class GroupEntries:
    """The entries of every group of the outcomes with censored entries: detected values,
    limits of below-detection entries and (under ``mle``) above-range entries, each flagged.
    The per-group figures come from group-by aggregations; a group's entries are read from
    the table when asked for (charts, cross-checks, pooled fits)."""

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
        self._frame = frame
        self._specs = list(specs)
        self._names = names
        self._parts: dict[GroupSpec, dict[tuple[str | None, str], pl.DataFrame]] = {}
        self._lock = threading.Lock()

    def figures(self) -> pl.DataFrame:
        """One row per group of each outcome with a censored entry (``CENSORED_SCHEMA``);
        the fit, median and limit figures are filled for groups that hold such an entry."""
        if not self.outcomes or not self._specs:
            return pl.DataFrame(schema=CENSORED_SCHEMA)
        # A batch of outcomes at a time: the prepared columns and the per-group sorting of a
        # batch are the working memory, not the table's worth of them.
        batches = [
            self.outcomes[start : start + CENSORED_BATCH]
            for start in range(0, len(self.outcomes), CENSORED_BATCH)
        ]
        return pl.concat(
            [
                _figures(self._frame, spec, batch, self._names, self.policy)
                for spec in self._specs
                for batch in batches
            ]
        )

    def _partition(self, spec: GroupSpec) -> dict[tuple[str | None, str], pl.DataFrame]:
        with self._lock:
            if spec not in self._parts:
                columns = self._frame.columns
                exprs = []
                for index, name in enumerate(self.outcomes):
                    observed, left, right = _entry_expressions(
                        name, self._names, self.policy, columns
                    )
                    exprs += [
                        observed.alias(f"{index}x"),
                        left.alias(f"{index}l"),
                        right.alias(f"{index}r"),
                    ]
                frame = self._frame.select(*spec.keys, *exprs).drop_nulls(spec.keys)
                parts = frame.partition_by(spec.keys, as_dict=True, include_key=False)
                self._parts[spec] = {
                    ((str(key[0]), str(key[1])) if spec.within else (None, str(key[0]))): part
                    for key, part in parts.items()
                }
            return self._parts[spec]

    def entries(self, group: GroupId) -> tuple[FloatArray, BoolArray, BoolArray] | None:
        """(values, below a limit, above the range) of one group; None for a group of an
        outcome without censored entries."""
        grouping, within, stratum, level, outcome = group
        spec = GroupSpec(grouping, within)
        if outcome not in self.outcomes or spec not in self._specs:
            return None
        part = self._partition(spec).get((stratum, level))
        if part is None:
            return None
        index = self.outcomes.index(outcome)
        chosen = part.select(f"{index}x", f"{index}l", f"{index}r").drop_nulls(f"{index}x")
        return (
            chosen[f"{index}x"].to_numpy().astype(np.float64),
            chosen[f"{index}l"].to_numpy().astype(bool),
            chosen[f"{index}r"].to_numpy().astype(bool),
        )

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
