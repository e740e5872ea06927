"""Paired comparisons and the 2×2 crossover on the log scale, vectorised over comparisons.

**Paired levels** (``--pair-by UNIT``): the same units (wells, patients, plots) measured at
several levels of a grouping (before/after, time points, years). For levels a and b the
comparison uses the within-unit log ratios d_i = ln y_i − ln x_i (y at b, x at a) over the
units that have a usable value at both levels:

- paired t on the logs: mean d, SE = s_d / √n, df = n − 1, two-sided p; ratio =
  exp(mean d) = GM(b)/GM(a) over the paired units, CI = exp(mean d ± t·SE) (NIST/SEMATECH
  e-Handbook of Statistical Methods, sec. 7.3.1 (paired observations);
  ``scipy.stats.ttest_rel`` on the logs gives the same t and p);
- within-unit CV = √(exp(s²) − 1) with s² = s_d² / 2, the log-scale variance of one
  measurement when both levels have the same within-unit spread;
- precision: the smallest ratio detectable with 80% power at the observed n pairs and s_d,
  and the n pairs needed for a target ratio (noncentral t with df n − 1, both rejection
  tails; the one-sample form of ``precision``'s definition and conventions).

Units left out of a comparison are counted: present at one level only (``n_only_a``,
``n_only_b``; a row without a unit is a unit of its own, never paired), or not paired because
the value policy left out every entry it had at a or at b (``n_left_out``). Several values of one unit at
one level are combined by their geometric mean (``duplicates="mean-log"``; the paired units
whose value at a or b was so combined are counted in ``n_combined``) or refused
(``"refuse"``: :class:`~foldsift.stats.errors.InputError` naming the unit).

API (every comparison of every grouping and outcome at once; one polars pass per grouping):

- :func:`plain_outcomes` / :func:`policy_outcomes` → ``list[PairedOutcome]``: where each
  outcome's value and left-out flag are (a plain frame, or the frame after
  ``policy.apply_policy``);
- :func:`paired_summaries` ``(frame, unit, specs, outcomes, *, duplicates, level_pairs)`` →
  a frame with exactly :data:`PAIRED_SCHEMA` (one row per grouping × stratum × outcome ×
  (level_a, level_b)): counts, mean log of the paired units at a and b, mean, sum of squared
  deviations, median and skewness of d, and the influence figure of the most influential unit;
- :func:`paired_t` ``(n_pairs, mean_d, ss_d, confidence)`` → ``ttest.LogTTest`` (the same
  result type as the two-sample test; ``equivalence.tost`` applies to it unchanged);
- :func:`paired_detectable_ratio`, :func:`n_pairs_needed`, :func:`within_unit_cv`,
  :func:`outlier_p`;
- :func:`paired_figures` ``(summaries, confidence, target_ratio)`` → the summaries with
  ratio, CI, p, SE, df, t, GMs, median ratio, within-unit CV, precision, outlier p and the
  list of :data:`PAIRED_WARNINGS` that apply (:func:`paired_warning_expression`);
- :func:`groupings_within_units` ``(frame, unit, groupings)``: the groupings some unit is
  measured at two or more levels of.

**2×2 crossover** (``--period``, ``--sequence``, ``--pair-by`` the subject):
:func:`crossover_2x2` → :class:`CrossoverResult`. With w = ln(test) − ln(reference) per
subject, the treatment effect is (mean w of sequence 1 + mean w of sequence 2) / 2 (the
period effect cancels), its SE² = (MSE / 2)(1/n_1 + 1/n_2) with the residual mean square
MSE = (pooled within-sequence variance of w) / 2 and df = n_1 + n_2 − 2: exactly the
treatment term of the analysis of variance of the logs on sequence, subject within sequence,
period and treatment, for balanced and unbalanced sequences (Chow & Liu, Design and Analysis
of Bioavailability and Bioequivalence Studies, 3rd ed., ch. 3 and 4, from memory; checked
against an ordinary least squares fit of that model in the tests). Within-subject CV =
√(exp(MSE) − 1). Designs that are not 2×2 are refused with an ``InputError``.

Checks of the pairing (rules in :data:`PAIRED_WARNINGS`, thresholds as constants below).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Literal, NamedTuple, get_args

import numpy as np
import numpy.typing as npt
import polars as pl

from . import equivalence
from .diagnostics import (
    FEW_PAIRED_SHARE,
    INFLUENCE_SHIFT,
    LOG_SKEW,
    LOG_SKEW_MIN_N,
    OUTLIER_ALPHA,
    WARNINGS,
)
from .distributions import norm_ppf, t_ppf, t_sf
from .entries import MISSING
from .errors import InputError
from .load import DerivedNames
from .precision import DEFAULT_POWER, _bisect, _power
from .summaries import level_order, mean_and_sum_of_squares
from .ttest import LogTTest, t_result
from .values import GroupSpec

Array = npt.NDArray[np.float64]

#: Several values of one unit at one level: combine by their geometric mean, or refuse.
PairedDuplicates = Literal["mean-log", "refuse"]
PAIRED_DUPLICATE_POLICIES: tuple[PairedDuplicates, ...] = get_args(PairedDuplicates)

#: The thresholds of the pairing checks live with the other warnings' rules
#: (``diagnostics``): fewer paired units than FEW_PAIRED_SHARE (our rule); |skewness of d|
#: above the ``log-skew`` rule of thumb with enough pairs (common practice); a unit dominates
#: when leaving it out moves the mean log ratio by more than INFLUENCE_SHIFT standard errors
#: (the SE computed without it) and it is an outlier: its externally studentized residual,
#: Bonferroni-adjusted over the n pairs, has p below OUTLIER_ALPHA (the usual outlier test,
#: e.g. Kutner, Nachtsheim & Neter, Applied Linear Regression Models, sec. 10.2; common
#: practice). Our rule; in simulations of normal log ratios (20,000 per n) it fired in at
#: most 1.1% of samples for n 3..200, and it caught one unit shifted by 6 SD in 54–88% of
#: samples of 8–20 pairs.
PAIR_SKEW = LOG_SKEW
PAIR_SKEW_MIN_N = LOG_SKEW_MIN_N
#: The influence check needs an SE without the unit: at least this many pairs.
INFLUENCE_MIN_N = 3

#: The named warnings of paired comparisons (also in ``vocabulary.WarningName``).
PairedWarningName = Literal["few-paired", "values-combined", "pairs-skewed", "unit-dominates"]
PAIRED_WARNING_NAMES: tuple[PairedWarningName, ...] = get_args(PairedWarningName)
PAIRED_WARNINGS: dict[PairedWarningName, str] = {
    name: WARNINGS[name] for name in PAIRED_WARNING_NAMES
}

_SET = ["grouping", "within", "stratum"]

PAIRED_SCHEMA = pl.Schema(
    {
        "grouping": pl.Utf8,
        "within": pl.Utf8,
        "stratum": pl.Utf8,
        "outcome": pl.Utf8,
        "level_a": pl.Utf8,
        "level_b": pl.Utf8,
        "n_pairs": pl.Int64,  # units with a usable value at both levels
        "n_only_a": pl.Int64,  # units with a value at a and no entry at b
        "n_only_b": pl.Int64,
        "n_left_out": pl.Int64,  # units not paired because the value policy left a value out
        "n_units": pl.Int64,  # all units of the comparison: the four counts above
        "n_combined": pl.Int64,  # paired units' values that were geometric means of several
        "mean_log_a": pl.Float64,  # over the paired units
        "mean_log_b": pl.Float64,
        "mean_d": pl.Float64,  # d = ln(value at b) - ln(value at a)
        "ss_d": pl.Float64,  # sum of squared deviations of d
        "median_d": pl.Float64,
        "skew_d": pl.Float64,  # sample skewness (biased, as ``summaries``)
        "influence": pl.Float64,  # largest leave-one-out shift of mean d, in SEs without it
        "influential_unit": pl.Utf8,  # the unit of that shift
    }
)


@dataclass(frozen=True)
class PairedOutcome:
    """One outcome: the strictly positive value used on the log scale (null where there is
    none) and whether an entry was given but left out by the value policy."""

    name: str
    value: pl.Expr
    left_out: pl.Expr


def plain_outcomes(columns: Sequence[str]) -> list[PairedOutcome]:
    """Numeric columns as they are: positive values used, zero and negative ones left out
    (the ``exclude`` policy), nulls missing."""
    return [
        PairedOutcome(
            name,
            pl.when(pl.col(name) > 0).then(pl.col(name).cast(pl.Float64)),
            (pl.col(name) <= 0).fill_null(False),
        )
        for name in columns
    ]


def policy_outcomes(
    frame: pl.DataFrame, outcomes: Sequence[str], names: DerivedNames
) -> list[PairedOutcome]:
    """The outcomes of a table after ``policy.apply_policy``: the used value, and left out
    where an entry was written (a number, a censored or above-range entry, a code without a
    limit, an unreadable entry) but no value is used. A paired comparison fits no censored
    entries: under ``mle`` they count as left out here."""
    chosen = []
    for name in outcomes:
        used = pl.col(names.used(name))
        if names.kind(name) in frame.columns:
            written = pl.col(names.kind(name)) != MISSING
        else:
            written = pl.col(name).is_not_null() | pl.col(names.censored(name))
        chosen.append(PairedOutcome(name, used, (written & used.is_null()).fill_null(False)))
    return chosen


def groupings_within_units(
    frame: pl.DataFrame, unit: str, groupings: Sequence[str]
) -> tuple[str, ...]:
    """The groupings (in the order given) at two or more levels of which some unit was
    measured: the groupings a paired comparison applies to."""
    _check_unit(frame, unit, [GroupSpec(g) for g in groupings])
    plans = [
        frame.lazy()
        .select(pl.col(unit), pl.col(g).cast(pl.Utf8).alias("level"))
        .drop_nulls()
        .group_by(unit)
        .agg(pl.col("level").n_unique().alias("levels"))
        .select((pl.col("levels").max() >= 2).fill_null(False).alias("within"))
        for g in groupings
    ]
    flags = [bool(part.item()) for part in pl.collect_all(plans)]
    return tuple(g for g, flag in zip(groupings, flags, strict=True) if flag)


def _check_unit(frame: pl.DataFrame, unit: str, specs: Sequence[GroupSpec]) -> None:
    if unit not in frame.columns:
        raise InputError(f"--pair-by {unit!r} is not a column of the table")
    for spec in specs:
        if unit in spec.keys:
            raise InputError(
                f"--pair-by {unit!r} is also a grouping to compare; the unit column names "
                "what was measured twice, not a group: leave it out of the groupings"
            )


def _unit_code() -> pl.Expr:
    """Units as integer codes (joins on them are several times faster than on text); each
    row without a unit gets a code of its own, above every unit's, so it is never paired."""
    code = pl.col("unit").rank("dense").cast(pl.Int64)
    own = code.max().fill_null(0) + 1 + pl.int_range(pl.len(), dtype=pl.Int64)
    return pl.when(code.is_null()).then(own).otherwise(code).alias("code")


def _cells(
    frame: pl.DataFrame, unit: str, spec: GroupSpec, outcomes: Sequence[PairedOutcome]
) -> pl.DataFrame:
    """One row per stratum × level × unit with a row in the table; per outcome i the mean of
    the logs of its usable values (``mean#i``, null when none), whether there were several
    (``multi#i``) and whether an entry was left out (``left#i``). Outcomes stay in columns so
    that joins and aggregations run once for all of them."""
    stratum = pl.col(spec.within).cast(pl.Utf8) if spec.within else pl.lit(None, pl.Utf8)
    count = range(len(outcomes))
    base = (
        frame.lazy()
        .select(
            stratum.alias("stratum"),
            pl.col(spec.grouping).cast(pl.Utf8).alias("level"),
            pl.col(unit).cast(pl.Utf8).alias("unit"),
            *[o.value.cast(pl.Float64).log().alias(f"value#{i}") for i, o in enumerate(outcomes)],
            *[o.left_out.fill_null(False).alias(f"left#{i}") for i, o in enumerate(outcomes)],
        )
        .drop_nulls(["level", "stratum"] if spec.within else ["level"])
        .with_columns(_unit_code())
        .collect()
    )
    keys = ["stratum", "level", "code"]
    if base.select(pl.struct(keys).n_unique()).item() == base.height:
        # One row per unit and level (the usual case): nothing to combine.
        return base.select(
            *keys,
            "unit",
            *[
                expr
                for i in count
                for expr in (
                    pl.col(f"value#{i}").alias(f"mean#{i}"),
                    pl.lit(False).alias(f"multi#{i}"),
                    pl.col(f"left#{i}"),
                )
            ],
        )
    return base.group_by(keys).agg(
        pl.col("unit").first(),
        *[
            expr
            for i in count
            for expr in (
                pl.col(f"value#{i}").mean().alias(f"mean#{i}"),
                (pl.col(f"value#{i}").count() > 1).alias(f"multi#{i}"),
                pl.col(f"left#{i}").any().alias(f"left#{i}"),
            )
        ],
    )


def _refuse_duplicates(
    cells: pl.DataFrame, unit: str, spec: GroupSpec, outcomes: Sequence[PairedOutcome]
) -> None:
    doubled = cells.filter(pl.any_horizontal(pl.col(f"multi#{i}") for i in range(len(outcomes))))
    if doubled.is_empty():
        return
    first = doubled.sort("level", "unit").row(0, named=True)
    name = next(o.name for i, o in enumerate(outcomes) if first[f"multi#{i}"])
    where = f" in {spec.within!r} {first['stratum']!r}" if spec.within else ""
    raise InputError(
        f"{doubled.height} unit(s) have several values at one level: {unit} "
        f"{first['unit']!r} has several values of {name!r} at {spec.grouping} "
        f"{first['level']!r}{where}; combine them first, or choose --duplicates mean-log "
        "(their geometric mean)"
    )


def _all_pairs(cells: pl.DataFrame) -> pl.DataFrame:
    """Every pair of levels present in each stratum, in the natural level order."""
    levels = cells.group_by("stratum", maintain_order=True).agg(pl.col("level").unique())
    rows = []
    for stratum, present in levels.rows():
        ordered = level_order(list(present))
        rows += [
            (stratum, ordered[i], ordered[j])
            for i in range(len(ordered))
            for j in range(i + 1, len(ordered))
        ]
    return pl.DataFrame(
        rows, schema={"stratum": pl.Utf8, "level_a": pl.Utf8, "level_b": pl.Utf8}, orient="row"
    )


def _chosen_pairs(level_pairs: pl.DataFrame, spec: GroupSpec) -> pl.DataFrame:
    within = pl.col("within").is_null() if spec.within is None else pl.col("within") == spec.within
    return level_pairs.filter((pl.col("grouping") == spec.grouping) & within).select(
        pl.col("stratum").cast(pl.Utf8), pl.col("level_a").cast(pl.Utf8), pl.col("level_b")
    )


def _side(cells: pl.LazyFrame, pairs: pl.LazyFrame, which: Literal["a", "b"]) -> pl.LazyFrame:
    """The cells of one side of every pair: ``pair``, ``code`` and the figures suffixed."""
    level = f"level_{which}"
    renamed = cells.rename({"level": level}).rename(
        lambda name: f"{name}_{which}" if "#" in name or name == "unit" else name
    )
    joined = pairs.select("pair", "stratum", level).join(
        renamed, on=["stratum", level], how="inner", nulls_equal=True
    )
    return joined.drop("stratum", level)


def _unit_flags(i: int) -> list[pl.Expr]:
    """How a unit counts in a comparison of outcome i: paired, at one level only, or left
    out (a level's only entries left out by the value policy); its log ratio d."""
    mean_a, mean_b = pl.col(f"mean#{i}_a"), pl.col(f"mean#{i}_b")
    has_a, has_b = mean_a.is_not_null(), mean_b.is_not_null()
    left_a = pl.col(f"left#{i}_a").fill_null(False) & ~has_a
    left_b = pl.col(f"left#{i}_b").fill_null(False) & ~has_b
    paired = has_a & has_b
    return [
        paired.alias(f"paired#{i}"),
        (has_a & ~has_b & ~left_b).alias(f"only_a#{i}"),
        (has_b & ~has_a & ~left_a).alias(f"only_b#{i}"),
        (~paired & (left_a | left_b)).alias(f"left_out#{i}"),
        (has_a | has_b | left_a | left_b).alias(f"in#{i}"),
        (paired & pl.col(f"multi#{i}_a")).alias(f"combined_a#{i}"),
        (paired & pl.col(f"multi#{i}_b")).alias(f"combined_b#{i}"),
        pl.when(paired).then(mean_a).alias(f"paired_a#{i}"),
        (mean_b - mean_a).alias(f"d#{i}"),  # null unless paired
    ]


def _comparison_figures(i: int) -> list[pl.Expr]:
    d = pl.col(f"d#{i}")
    mean_d, ss_d = mean_and_sum_of_squares(d)
    deviation = (d - d.mean()).abs()
    counts = {"n_pairs": "paired", "n_only_a": "only_a", "n_only_b": "only_b"}
    counts |= {"n_left_out": "left_out", "n_units": "in"}
    return [
        *[
            pl.col(f"{flag}#{i}").sum().cast(pl.Int64).alias(f"{n}#{i}")
            for n, flag in counts.items()
        ],
        (pl.col(f"combined_a#{i}").sum() + pl.col(f"combined_b#{i}").sum())
        .cast(pl.Int64)
        .alias(f"n_combined#{i}"),
        pl.col(f"paired_a#{i}").mean().alias(f"mean_log_a#{i}"),
        mean_d.alias(f"mean_d#{i}"),
        ss_d.alias(f"ss_d#{i}"),
        d.median().alias(f"median_d#{i}"),
        d.skew(bias=True).alias(f"skew_d#{i}"),
        deviation.max().alias(f"largest_deviation#{i}"),
        pl.col("unit_a").get(deviation.arg_max()).alias(f"influential_unit#{i}"),
    ]


def _influence(i: int) -> list[pl.Expr]:
    """The leave-one-out shift of mean d for the unit farthest from the mean, in SEs of the
    mean without it: |d_i − m| / (n − 1) over s_(i) / √(n − 1), with
    s_(i)² = (SS − n/(n − 1)(d_i − m)²)/(n − 2) (the deleted-case variance of a one-mean
    model). It grows with |d_i − m| and s_(i) shrinks, so that unit has the largest shift."""
    n = pl.col(f"n_pairs#{i}").cast(pl.Float64)
    e = pl.col(f"largest_deviation#{i}")
    loo_ss = (pl.col(f"ss_d#{i}") - n / (n - 1) * e.pow(2)).clip(lower_bound=0.0)
    shift = e / ((loo_ss / (n - 2)).sqrt() * (n - 1).sqrt())
    usable = (n >= INFLUENCE_MIN_N) & (e > 0)
    return [
        (pl.col(f"mean_log_a#{i}") + pl.col(f"mean_d#{i}")).alias(f"mean_log_b#{i}"),
        pl.when(usable).then(shift).alias(f"influence#{i}"),
        pl.when(usable).then(pl.col(f"influential_unit#{i}")).alias(f"influential_unit#{i}"),
    ]


_FIGURES = [name for name in PAIRED_SCHEMA if name not in (*_SET, "outcome", "level_a", "level_b")]


def _one_grouping(
    frame: pl.DataFrame,
    unit: str,
    spec: GroupSpec,
    outcomes: Sequence[PairedOutcome],
    duplicates: PairedDuplicates,
    level_pairs: pl.DataFrame | None,
) -> list[pl.DataFrame]:
    """The comparisons of one grouping: one row per stratum × pair of levels with every
    outcome in columns (computed once), then one part per outcome."""
    cells = _cells(frame, unit, spec, outcomes)
    if duplicates == "refuse":
        _refuse_duplicates(cells, unit, spec, outcomes)
    pairs = _all_pairs(cells) if level_pairs is None else _chosen_pairs(level_pairs, spec)
    pairs = pairs.with_row_index("pair")  # keeps the order of the pairs given
    count = range(len(outcomes))
    joined = _side(cells.lazy(), pairs.lazy(), "a").join(
        _side(cells.lazy(), pairs.lazy(), "b"), on=["pair", "code"], how="full", coalesce=True
    )
    wide = (
        joined.with_columns(expr for i in count for expr in _unit_flags(i))
        .group_by("pair")
        .agg(expr for i in count for expr in _comparison_figures(i))
        .with_columns(expr for i in count for expr in _influence(i))
        .join(pairs.lazy(), on="pair", how="inner")
        .collect()
    )
    identity = [
        pl.lit(spec.grouping, pl.Utf8).alias("grouping"),
        pl.lit(spec.within, pl.Utf8).alias("within"),
        pl.col("stratum"),
    ]
    return [
        wide.select(
            *identity,
            pl.lit(o.name, pl.Utf8).alias("outcome"),
            pl.col("level_a"),
            pl.col("level_b"),
            *[pl.col(f"{name}#{i}").alias(name) for name in _FIGURES],
            pl.col("pair"),
        ).filter(pl.col("n_units") > 0)
        for i, o in enumerate(outcomes)
    ]


def paired_summaries(
    frame: pl.DataFrame,
    unit: str,
    specs: Sequence[GroupSpec | str],
    outcomes: Sequence[PairedOutcome],
    *,
    duplicates: PairedDuplicates = "mean-log",
    level_pairs: pl.DataFrame | None = None,
) -> pl.DataFrame:
    """Every paired comparison: one row per grouping × stratum × outcome × (level_a,
    level_b), columns :data:`PAIRED_SCHEMA`; level_a is the denominator.

    ``level_pairs`` (columns grouping, within, stratum, level_a, level_b, as
    ``scan.build_pairs`` gives) chooses the pairs; by default every pair of levels present
    is compared, in the natural level order; a comparison with no unit at either level gives
    no row. Raises ``InputError`` for a unit column that is missing or also a grouping, and
    under ``duplicates="refuse"`` for a unit with several usable values at one level (an
    entry left out beside a usable value of the same unit and level is not counted)."""
    if duplicates not in PAIRED_DUPLICATE_POLICIES:
        raise ValueError(f"duplicates must be one of {', '.join(PAIRED_DUPLICATE_POLICIES)}")
    chosen = [GroupSpec(s) if isinstance(s, str) else s for s in specs]
    _check_unit(frame, unit, chosen)
    if not chosen or not outcomes:
        return pl.DataFrame(schema=PAIRED_SCHEMA)
    parts = [
        part
        for spec in chosen
        for part in _one_grouping(frame, unit, spec, outcomes, duplicates, level_pairs)
    ]
    order = {o.name: i for i, o in enumerate(outcomes)}
    result = pl.concat(parts, how="vertical")
    return (
        result.sort(
            pl.col("grouping"),
            pl.col("stratum"),
            pl.col("outcome").replace_strict(order, return_dtype=pl.Int64),
            pl.col("pair"),
            maintain_order=True,
        )
        .drop("pair")
        .cast(PAIRED_SCHEMA)
    )


def paired_t(
    n_pairs: npt.ArrayLike,
    mean_d: npt.ArrayLike,
    ss_d: npt.ArrayLike,
    confidence: float = 0.95,
) -> LogTTest:
    """Paired t on the logs from the count, mean and sum of squared deviations of the
    within-unit log ratios; NaN where n < 2 or the ratios do not vary."""
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must be between 0 and 1, got {confidence}")
    n, mean, ss = (np.asarray(x, dtype=float) for x in (n_pairs, mean_d, ss_d))
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(ss / (n - 1) / n)
    return t_result(mean, se, n - 1, confidence, (n >= 2) & np.isfinite(mean))


def within_unit_cv(sd_d: npt.ArrayLike) -> Array:
    """CV of one measurement within a unit, √(exp(s_d²/2) − 1), from the SD of the
    within-unit log ratios (each ratio holds two measurements' errors)."""
    sd = np.asarray(sd_d, dtype=float)
    with np.errstate(over="ignore", invalid="ignore"):
        cv: Array = np.sqrt(np.expm1(sd**2 / 2))
    return cv


def lognormal_cv(variance_log: npt.ArrayLike) -> Array:
    """√(exp(σ²) − 1): the CV of a lognormal variable whose log has variance σ²."""
    variance = np.asarray(variance_log, dtype=float)
    with np.errstate(over="ignore", invalid="ignore"):
        cv: Array = np.sqrt(np.expm1(variance))
    return cv


def paired_detectable_ratio(
    n_pairs: npt.ArrayLike,
    sd_d: npt.ArrayLike,
    alpha: float = 0.05,
    power: float = DEFAULT_POWER,
    method: str = "t",
) -> Array:
    """Smallest ratio (> 1) a paired t at two-sided level ``alpha`` detects with ``power``
    from ``n_pairs`` pairs whose log ratios have SD ``sd_d``; its inverse is the smallest
    detectable decrease. NaN where n < 2 or the SD is not positive.

    The noncentrality is log(R) √n / s_d with df n − 1; the normal approximation is
    log(R) = (z_{1−α/2} + z_power) s_d / √n."""
    n = np.asarray(n_pairs, dtype=float)
    sd = np.asarray(sd_d, dtype=float)
    valid = (n >= 2) & (sd > 0) & np.isfinite(sd)
    scale = np.where(valid, sd / np.sqrt(np.maximum(n, 1)), np.nan)
    if method == "normal":
        delta = (norm_ppf(1 - alpha / 2) + norm_ppf(power)) * scale
        with np.errstate(over="ignore"):
            ratio: Array = np.exp(delta)
            return ratio
    if method != "t":
        raise ValueError("method must be 't' or 'normal'")
    df = np.where(valid, n - 1, 1.0)
    distinct, inverse = np.unique(df, return_inverse=True)
    critical = t_ppf(1 - alpha / 2, distinct)
    # With one df the noncentrality must reach several critical values (about 1.3 c at 80%
    # power, the 80% point of |N(0, 1)| times c): search up to 60 + 5 c.
    ncp = _bisect(
        lambda x: _power(x, distinct, alpha, critical) - power,
        np.zeros_like(distinct),
        60 + 5 * critical,
        iterations=64,
    )[inverse.reshape(df.shape)]
    with np.errstate(over="ignore"):
        detectable: Array = np.where(valid, np.exp(ncp * scale), np.nan)
        return detectable


def n_pairs_exact(
    target_ratio: float,
    sd_d: npt.ArrayLike,
    alpha: float = 0.05,
    power: float = DEFAULT_POWER,
) -> Array:
    """The continuous solution n of the paired power equation (at least 2), before rounding."""
    sd = np.asarray(sd_d, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        effect = abs(math.log(target_ratio)) / sd
    return _bisect(
        lambda m: _power(effect * np.sqrt(m), m - 1, alpha) - power,
        np.full_like(effect, 2.0),
        np.full_like(effect, 1e8),
        iterations=100,
    )


def n_pairs_needed(
    target_ratio: float,
    sd_d: npt.ArrayLike,
    alpha: float = 0.05,
    power: float = DEFAULT_POWER,
    method: str = "t",
) -> Array:
    """Pairs needed to detect ``target_ratio`` (either direction), rounded up; at least 2.

    Normal approximation: n = (z_{1−α/2} + z_power)² s_d² / log(R)²."""
    if not target_ratio > 0 or target_ratio == 1:
        raise ValueError(f"target ratio must be positive and not 1, got {target_ratio}")
    sd = np.asarray(sd_d, dtype=float)
    valid = (sd > 0) & np.isfinite(sd)
    effect = abs(math.log(target_ratio)) / np.where(valid, sd, 1.0)
    if method == "normal":
        n = (norm_ppf(1 - alpha / 2) + norm_ppf(power)) ** 2 / effect**2
        needed: Array = np.where(valid, np.maximum(np.ceil(n), 2), np.nan)
        return needed
    if method != "t":
        raise ValueError("method must be 't' or 'normal'")
    exact = n_pairs_exact(target_ratio, np.where(valid, sd, 1.0), alpha, power)
    rounded: Array = np.where(valid, np.ceil(exact - 1e-9), np.nan)
    return rounded


def outlier_p(n_pairs: npt.ArrayLike, influence: npt.ArrayLike) -> Array:
    """Bonferroni-adjusted two-sided p of the most influential unit's externally studentized
    residual t_i (t with n − 2 df); t_i = influence × √n for a one-mean model."""
    n = np.asarray(n_pairs, dtype=float)
    shift = np.asarray(influence, dtype=float)
    with np.errstate(invalid="ignore", over="ignore"):
        t = shift * np.sqrt(n)
        p: Array = np.minimum(1.0, n * 2 * t_sf(t, n - 2))
    return np.where((n >= INFLUENCE_MIN_N) & ~np.isnan(shift), p, np.nan)


def paired_warning_expression() -> pl.Expr:
    """The list of :data:`PAIRED_WARNINGS` that apply, over a frame with the columns of
    :func:`paired_figures` (NaN replaced by null)."""
    conditions: dict[PairedWarningName, pl.Expr] = {
        "few-paired": pl.col("n_pairs") < FEW_PAIRED_SHARE * pl.col("n_units"),
        "values-combined": pl.col("n_combined") > 0,
        "pairs-skewed": (pl.col("skew_d").abs() > PAIR_SKEW)
        & (pl.col("n_pairs") >= PAIR_SKEW_MIN_N),
        "unit-dominates": (pl.col("influence") > INFLUENCE_SHIFT)
        & (pl.col("outlier_p") < OUTLIER_ALPHA),
    }
    parts = [
        pl.when(condition.fill_null(False)).then(pl.lit(name))
        for name, condition in conditions.items()
    ]
    return pl.concat_list(parts).list.drop_nulls().cast(pl.List(pl.Enum(PAIRED_WARNING_NAMES)))


def paired_figures(
    summaries: pl.DataFrame, confidence: float = 0.95, target_ratio: float | None = None
) -> pl.DataFrame:
    """The summaries (:data:`PAIRED_SCHEMA`) with the paired t and its figures: ratio,
    ci_low, ci_high, p_value, mean_log_difference, se_log, df, t, gm_a, gm_b (of the paired
    units), median_ratio (exp of the median d), sd_d, within_cv, detectable_ratio (80% power
    at 1 − confidence), n_pairs_needed (for ``target_ratio``; null without one), outlier_p
    and warnings. Missing numbers are null."""

    def column(name: str) -> Array:
        values: Array = summaries[name].cast(pl.Float64).fill_null(np.nan).to_numpy()
        return values

    n = column("n_pairs")
    test = paired_t(n, column("mean_d"), column("ss_d"), confidence)
    low, high = test.ratio_ci
    with np.errstate(divide="ignore", invalid="ignore"):
        sd_d = np.where(n >= 2, np.sqrt(column("ss_d") / (n - 1)), np.nan)
    alpha = 1 - confidence
    needed = (
        n_pairs_needed(target_ratio, sd_d, alpha=alpha)
        if target_ratio is not None
        else np.full(summaries.height, np.nan)
    )
    figures = {
        "ratio": test.ratio,
        "ci_low": low,
        "ci_high": high,
        "p_value": test.p_value,
        "mean_log_difference": test.difference,
        "se_log": test.standard_error,
        "df": test.df,
        "t": test.t,
        "gm_a": np.exp(column("mean_log_a")),
        "gm_b": np.exp(column("mean_log_b")),
        "median_ratio": np.exp(column("median_d")),
        "sd_d": sd_d,
        "within_cv": within_unit_cv(sd_d),
        "detectable_ratio": paired_detectable_ratio(n, sd_d, alpha=alpha),
        "n_pairs_needed": needed,
        "outlier_p": outlier_p(n, column("influence")),
    }
    frame = summaries.with_columns(
        [pl.Series(name, values, dtype=pl.Float64) for name, values in figures.items()]
    ).with_columns(pl.col(pl.Float64).fill_nan(None))
    return frame.with_columns(paired_warning_expression().alias("warnings"))


# -- the 2×2 crossover ---------------------------------------------------------------------


class RatioInterval(NamedTuple):
    low: Array
    high: Array


@dataclass(frozen=True)
class CrossoverDesign:
    """A checked 2×2 crossover: the reference and test treatments, the two sequences (the
    one that starts with the reference first) and the two periods in their natural order."""

    reference: str
    test: str
    sequences: tuple[str, str]
    periods: tuple[str, str]


@dataclass(frozen=True)
class CrossoverResult:
    """One entry per outcome. ``test`` holds the treatment effect on the log scale
    (mean ln(test) − mean ln(reference), period removed) with its SE, df, t, p and CI at
    ``confidence``; ``ratio`` is test / reference."""

    outcomes: tuple[str, ...]
    design: CrossoverDesign
    confidence: float
    #: Subjects with a usable value in both periods, per sequence (``design.sequences``).
    n_sequence_1: Array
    n_sequence_2: Array
    #: Subjects left out of an outcome for a missing or left-out value in a period.
    n_left_out: Array
    test: LogTTest
    #: The residual mean square of the analysis of variance on the logs.
    mse: Array

    @property
    def ratio(self) -> Array:
        ratio: Array = self.test.ratio
        return ratio

    @property
    def within_cv(self) -> Array:
        """Within-subject CV, √(exp(MSE) − 1)."""
        return lognormal_cv(self.mse)

    def ratio_interval(self, confidence: float = 0.90) -> RatioInterval:
        """The CI of the ratio at ``confidence`` (90% by default: the equivalence rule)."""
        if not 0 < confidence < 1:
            raise ValueError(f"confidence must be between 0 and 1, got {confidence}")
        critical = t_ppf(0.5 + confidence / 2, self.test.df)
        spread = critical * self.test.standard_error
        with np.errstate(over="ignore"):
            return RatioInterval(
                np.exp(self.test.difference - spread), np.exp(self.test.difference + spread)
            )

    def band_class(self, band: tuple[float, float] = equivalence.DEFAULT_BAND) -> np.ndarray:
        """Where each outcome falls against the band (``equivalence.BAND_CLASSES``) from the
        CI at ``confidence`` and the 90% CI; empty where not computable."""
        low, high = self.test.ratio_ci
        inner = self.ratio_interval(0.90)
        return equivalence.band_class(low, high, inner.low, inner.high, band)

    def to_frame(self, band: tuple[float, float] = equivalence.DEFAULT_BAND) -> pl.DataFrame:
        """One row per outcome: ratio, ci_low, ci_high (at ``confidence``), ci90_low,
        ci90_high, p_value, p_tost (two one-sided tests against ``band`` at 5% each),
        band_class, mean_log_difference, se_log, df, t, mse, within_cv and the counts.
        Missing numbers are null."""
        low, high = self.test.ratio_ci
        inner = self.ratio_interval(0.90)
        p_tost, _, _ = equivalence.tost(
            self.test.difference, self.test.standard_error, self.test.df, band, alpha=0.05
        )
        numbers = {
            "ratio": self.ratio,
            "ci_low": low,
            "ci_high": high,
            "ci90_low": inner.low,
            "ci90_high": inner.high,
            "p_value": self.test.p_value,
            "p_tost": p_tost,
            "mean_log_difference": self.test.difference,
            "se_log": self.test.standard_error,
            "df": self.test.df,
            "t": self.test.t,
            "mse": self.mse,
            "within_cv": self.within_cv,
        }
        counts = {
            "n_sequence_1": self.n_sequence_1,
            "n_sequence_2": self.n_sequence_2,
            "n_left_out": self.n_left_out,
        }
        return pl.DataFrame(
            [
                pl.Series("outcome", self.outcomes, dtype=pl.Utf8),
                *[pl.Series(k, v, dtype=pl.Float64).fill_nan(None) for k, v in numbers.items()],
                *[pl.Series(k, v).cast(pl.Int64) for k, v in counts.items()],
                pl.Series("band_class", self.band_class(band), dtype=pl.Utf8).replace("", None),
            ]
        )


def _distinct(frame: pl.DataFrame, column: str) -> list[str]:
    values: list[str] = frame[column].cast(pl.Utf8).unique().to_list()
    return level_order(values)


def _check_columns(frame: pl.DataFrame, roles: Mapping[str, str]) -> None:
    for role, column in roles.items():
        if column not in frame.columns:
            raise InputError(f"crossover: the {role} column {column!r} is not in the table")
        missing = frame[column].null_count()
        if missing:
            raise InputError(
                f"crossover: {missing} row(s) have no {role} in column {column!r}; "
                "fill them in or leave those rows out"
            )
    for role in ("period", "sequence", "treatment"):
        levels = _distinct(frame, roles[role])
        if len(levels) != 2:
            shown = ", ".join(repr(v) for v in levels[:5]) + (" ..." if len(levels) > 5 else "")
            raise InputError(
                f"crossover: column {roles[role]!r} has {len(levels)} {role}s ({shown}); "
                "a 2x2 crossover has exactly 2 periods, 2 sequences and 2 treatments"
            )


def _first(frame: pl.DataFrame, column: str) -> str:
    return repr(str(frame[column][0]))


def _check_subjects(frame: pl.DataFrame, subject: str, period: str, sequence: str) -> None:
    """Each subject in one sequence, with exactly one row in each of the two periods."""
    per_subject = frame.group_by(subject).agg(
        pl.col(sequence).n_unique().alias("sequences"),
        pl.col(period).n_unique().alias("periods"),
        pl.len().alias("rows"),
    )
    checks = [
        (
            pl.col("sequences") > 1,
            "in both sequences; each subject follows one sequence",
        ),
        (
            pl.col("periods") < 2,
            "observed in one period only; a 2x2 crossover needs every subject in both "
            "periods: leave out that subject's rows",
        ),
        (
            pl.col("rows") > pl.col("periods"),
            "with several rows in one period; combine them first (one row per subject and period)",
        ),
    ]
    for condition, problem in checks:
        bad = per_subject.filter(condition).sort(subject)
        if not bad.is_empty():
            raise InputError(
                f"crossover: {bad.height} subject(s) {problem} (the first: {subject} "
                f"{_first(bad, subject)})"
            )


def _check_treatments(
    frame: pl.DataFrame, period: str, sequence: str, treatment: str, reference: str | None
) -> CrossoverDesign:
    """One treatment per sequence × period, different in the two periods of a sequence and
    in the first period of the two sequences."""
    cells = frame.group_by(sequence, period).agg(
        pl.col(treatment).cast(pl.Utf8).unique().alias("treatments")
    )
    mixed = cells.filter(pl.col("treatments").list.len() > 1).sort(sequence, period)
    if not mixed.is_empty():
        raise InputError(
            f"crossover: sequence {_first(mixed, sequence)} has both treatments in period "
            f"{_first(mixed, period)}; every subject of a sequence gets the same treatment in "
            "a period"
        )
    periods = _distinct(frame, period)
    sequences = _distinct(frame, sequence)
    given = {
        (str(s), str(p)): str(t[0])
        for s, p, t in cells.select(
            pl.col(sequence).cast(pl.Utf8), pl.col(period).cast(pl.Utf8), "treatments"
        ).rows()
    }
    for name in sequences:
        if given[(name, periods[0])] == given[(name, periods[1])]:
            raise InputError(
                f"crossover: sequence {name!r} gives treatment {given[(name, periods[0])]!r} in "
                "both periods; each sequence gives both treatments, one per period"
            )
    treatments = _distinct(frame, treatment)
    if reference is None:
        reference = treatments[0]
    if reference not in treatments:
        raise InputError(
            f"crossover: reference {reference!r} is not a treatment; treatments are "
            f"{treatments[0]!r} and {treatments[1]!r}"
        )
    test = treatments[1] if reference == treatments[0] else treatments[0]
    first = [name for name in sequences if given[(name, periods[0])] == reference]
    if len(first) != 1:
        raise InputError(
            f"crossover: both sequences give the same treatment first; a 2x2 crossover "
            f"has one sequence {reference!r} then {test!r} and one the other way round"
        )
    others = [name for name in sequences if name != first[0]]
    return CrossoverDesign(reference, test, (first[0], others[0]), (periods[0], periods[1]))


def _within_subject(
    frame: pl.DataFrame,
    roles: Mapping[str, str],
    design: CrossoverDesign,
    outcomes: Sequence[PairedOutcome],
) -> tuple[pl.DataFrame, int]:
    """Per sequence and outcome i: the count, mean and sum of squared deviations of
    w = ln(test) − ln(reference) of the subjects with both values; and the subject count."""
    treatment = pl.col("treatment")
    logs = frame.lazy().select(
        pl.col(roles["subject"]).cast(pl.Utf8).alias("subject"),
        pl.col(roles["sequence"]).cast(pl.Utf8).alias("sequence"),
        pl.col(roles["treatment"]).cast(pl.Utf8).alias("treatment"),
        *[o.value.cast(pl.Float64).log().alias(f"value{i}") for i, o in enumerate(outcomes)],
    )
    differences = logs.group_by("subject", "sequence").agg(
        (
            pl.col(f"value{i}").filter(treatment == design.test).first()
            - pl.col(f"value{i}").filter(treatment == design.reference).first()
        ).alias(f"w{i}")
        for i in range(len(outcomes))
    )
    figures = []
    for i in range(len(outcomes)):
        mean, ss = mean_and_sum_of_squares(pl.col(f"w{i}"))
        figures += [
            pl.col(f"w{i}").count().cast(pl.Float64).alias(f"n{i}"),
            mean.alias(f"mean{i}"),
            ss.alias(f"ss{i}"),
        ]
    per_sequence, subjects = pl.collect_all(
        [differences.group_by("sequence").agg(figures), differences.select(pl.len())]
    )
    return per_sequence, int(subjects.item())


def _crossover_test(
    first: tuple[Array, Array, Array], second: tuple[Array, Array, Array], confidence: float
) -> tuple[LogTTest, Array]:
    """The treatment effect from each sequence's (n, mean w, sum of squares of w)."""
    (n1, m1, ss1), (n2, m2, ss2) = first, second
    with np.errstate(divide="ignore", invalid="ignore"):
        df = n1 + n2 - 2
        usable = (n1 >= 1) & (n2 >= 1) & (df >= 1)
        mse = np.where(usable, (ss1 + ss2) / df / 2, np.nan)
        se = np.sqrt(mse / 2 * (1 / n1 + 1 / n2))
    return t_result((m1 + m2) / 2, se, df, confidence, usable), mse


def crossover_2x2(
    frame: pl.DataFrame,
    *,
    subject: str,
    period: str,
    sequence: str,
    treatment: str,
    outcomes: Sequence[PairedOutcome | str],
    reference: str | None = None,
    confidence: float = 0.95,
) -> CrossoverResult:
    """The treatment ratio (test / reference) of a 2×2 crossover for every outcome, from
    the analysis of variance on the logs (see the module docstring). One row per subject and
    period; outcomes as :class:`PairedOutcome` or plain column names (positive values used,
    others left out). A subject with a missing or left-out value in a period is left out
    of that outcome and counted. ``reference`` defaults to the first treatment in natural
    order. Raises ``InputError`` for a design that is not 2×2."""
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must be between 0 and 1, got {confidence}")
    roles = {"subject": subject, "period": period, "sequence": sequence, "treatment": treatment}
    if len(set(roles.values())) < 4:
        raise InputError("crossover: subject, period, sequence and treatment need four columns")
    _check_columns(frame, roles)
    _check_subjects(frame, subject, period, sequence)
    design = _check_treatments(frame, period, sequence, treatment, reference)
    chosen = [plain_outcomes([o])[0] if isinstance(o, str) else o for o in outcomes]
    per_sequence, subjects = _within_subject(frame, roles, design, chosen)

    def figures(name: str) -> tuple[Array, Array, Array]:
        row = per_sequence.filter(pl.col("sequence") == name).fill_null(np.nan).row(0, named=True)

        def each(kind: str) -> Array:
            return np.array([row[f"{kind}{i}"] for i in range(len(chosen))], dtype=float)

        return each("n"), each("mean"), each("ss")

    first, second = figures(design.sequences[0]), figures(design.sequences[1])
    test, mse = _crossover_test(first, second, confidence)
    return CrossoverResult(
        outcomes=tuple(o.name for o in chosen),
        design=design,
        confidence=confidence,
        n_sequence_1=first[0],
        n_sequence_2=second[0],
        n_left_out=subjects - first[0] - second[0],
        test=test,
        mse=mse,
    )
