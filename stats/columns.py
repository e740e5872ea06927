"""The written schema of the comparisons frame: one row per grouping × outcome × pair of levels.

The typed rows below are the one declaration of every column, in CSV order: the polars
schemas are derived from them (``schema_of``), the sentence, the detail pane and the list
take them instead of a bare ``dict``, and a test asserts that a scan returns exactly
``COMPARISON_SCHEMA``. A new column is added here, in its typed row, and computed in
``scan.compare_summaries``.

Names that code outside this module refers to are constants here; per-group figures of the
two sides are named by ``side(name, "a")`` (``n`` → ``n_a``), never by concatenation
elsewhere.
"""

from __future__ import annotations

import types
import typing
from typing import Literal, TypedDict, get_args, get_origin, get_type_hints

import polars as pl

from .vocabulary import BandClass, Decision, Method, Test, WarningName

Side = Literal["a", "b"]


class ComparisonRow(TypedDict):
    """One comparison of level b against level a (the reference, denominator)."""

    grouping: str
    within: str | None  # the stratifying column (``--within``), or None
    stratum: str | None  # its level, or None
    outcome: str
    unit: str | None  # the outcome's unit, from its name, its cells or a unit column
    level_a: str
    level_b: str
    n_a: int
    n_b: int
    gm_a: float | None
    gm_b: float | None
    median_a: float | None
    median_b: float | None
    ratio: float | None  # GM(b) / GM(a) = exp(mean log b - mean log a)
    ci_low: float | None
    ci_high: float | None
    p_value: float | None
    p_holm: float | None
    q_bh: float | None
    warnings: list[WarningName]
    median_ratio: float | None
    percent_change: float | None
    log2_ratio: float | None
    df: float | None
    t: float | None
    test: Test
    method: Method  # what the numbers rest on: the t-test on logs, censored ML, a substitution
    confidence: float
    band_class: BandClass | None
    p_tost: float | None
    tost_ci_low: float | None
    tost_ci_high: float | None
    ci_fold: float | None
    detectable_ratio: float | None
    n_needed: float | None  # only with a target ratio
    n_excluded_a: int
    n_excluded_b: int
    n_substituted_a: int
    n_substituted_b: int
    n_censored_a: int
    n_censored_b: int
    n_missing_a: int
    n_missing_b: int
    n_no_limit_a: int  # below detection without a limit: left out
    n_no_limit_b: int
    n_above_range_a: int  # above the measuring range: used at the stated number
    n_above_range_b: int
    n_estimated_a: int  # qualifier J: used as given
    n_estimated_b: int
    censored_share_a: float | None
    censored_share_b: float | None
    n_left_a: int  # below-detection entries fitted at their limits (censored ML)
    n_left_b: int
    n_right_a: int  # above-range entries fitted as above their stated number (censored ML)
    n_right_b: int
    fit_reason_a: str | None  # why a group's censored fit was not made (None when it was)
    fit_reason_b: str | None
    limit_low_a: float | None  # range of the group's detection limits (of censored entries)
    limit_low_b: float | None
    limit_high_a: float | None
    limit_high_b: float | None
    median_at_most_a: float | None  # "< this" when the Kaplan-Meier median is undefined
    median_at_most_b: float | None
    half_dl_ratio: float | None  # the DL/2 substitution answer beside a censored-ML one
    half_dl_ci_low: float | None
    half_dl_ci_high: float | None
    half_dl_band_class: BandClass | None
    pair_by: str | None  # the unit column of a paired or crossover comparison (else None)
    n_pairs: int | None  # units with a usable value at both levels (subjects in a crossover)
    n_only_a: int | None  # units measured at level a only
    n_only_b: int | None
    n_unpaired_left_out: int | None  # units not paired: a value left out by the policy
    n_combined: int | None  # paired units whose several values were combined (geometric mean)
    within_cv: float | None  # within-unit (within-subject) CV from the log-scale SD
    influential_unit: str | None  # the unit behind unit-dominates
    mean_log_difference: float | None
    se_log: float | None
    sd_log_a: float | None
    sd_log_b: float | None
    sd_log_ratio: float | None
    spread_p: float | None
    skew_log_a: float | None
    skew_log_b: float | None
    skew_raw_a: float | None
    skew_raw_b: float | None
    shapiro_w_a: float | None
    shapiro_w_b: float | None
    shapiro_p_a: float | None
    shapiro_p_b: float | None
    median_gm_z: float | None
    key: str  # the stable review key (``comparison_key``)


class CrossCheckColumns(TypedDict):
    """The robust cross-checks of one comparison (empty until computed)."""

    boot_median_ratio_low: float | None
    boot_median_ratio_high: float | None
    hl_ratio: float | None
    hl_ci_low: float | None
    hl_ci_high: float | None
    mann_whitney_p: float | None
    peto_prentice_p: float | None  # censored comparisons only (generalized Wilcoxon)


class ReviewColumns(TypedDict):
    """The reviewer's state of one comparison, joined on ``key``."""

    flagged: bool
    decision: Decision | None
    note: str
    review_fingerprint: str | None
    updated_at: str | None
    on_earlier_data: bool


class ListColumns(TypedDict):
    """Columns the review list adds for sorting, searching and drawing; never exported."""

    outcome_label: str
    change_size: float | None  # |log2 ratio|: 0.25x ranks beside 4x
    n_min: int
    warning_count: int


class ReviewedRow(ComparisonRow, CrossCheckColumns, ReviewColumns, ListColumns):
    """A row as the review list and the detail pane see it."""


class ExportRow(ComparisonRow, CrossCheckColumns, ReviewColumns):
    """A row of an exported CSV, before its ``sentence`` column."""


def _dtype(hint: object) -> pl.DataType:
    """The polars type of one typed-row annotation (``X | None`` is a nullable X)."""
    if isinstance(hint, types.UnionType) or get_origin(hint) is typing.Union:
        (inner,) = [arg for arg in get_args(hint) if arg is not type(None)]
        return _dtype(inner)
    if get_origin(hint) is Literal:
        return pl.Enum(list(get_args(hint)))
    if get_origin(hint) is list:
        return pl.List(_dtype(get_args(hint)[0]))
    simple: dict[object, pl.DataType] = {
        str: pl.String(),
        int: pl.Int64(),
        float: pl.Float64(),
        bool: pl.Boolean(),
    }
    return simple[hint]


def schema_of(row: type) -> pl.Schema:
    """The polars schema of a typed row, its columns in declaration order."""
    return pl.Schema({name: _dtype(hint) for name, hint in get_type_hints(row).items()})


def _own(row: type, *bases: type) -> pl.Schema:
    inherited = {name for base in bases for name in get_type_hints(base)}
    return pl.Schema({k: v for k, v in schema_of(row).items() if k not in inherited})


COMPARISON_SCHEMA = schema_of(ComparisonRow)
CROSS_CHECK_SCHEMA = schema_of(CrossCheckColumns)
REVIEW_SCHEMA = schema_of(ReviewColumns)
LIST_SCHEMA = schema_of(ListColumns)
#: An export's columns in CSV order, before ``sentence``.
EXPORT_SCHEMA = pl.Schema({**COMPARISON_SCHEMA, **CROSS_CHECK_SCHEMA, **REVIEW_SCHEMA})

# -- names used outside this module -------------------------------------------------------
GROUPING = "grouping"
WITHIN = "within"
STRATUM = "stratum"
OUTCOME = "outcome"
UNIT = "unit"
LEVEL_A = "level_a"
LEVEL_B = "level_b"
N_A = "n_a"
N_B = "n_b"
RATIO = "ratio"
CI_LOW = "ci_low"
CI_HIGH = "ci_high"
P_VALUE = "p_value"
P_HOLM = "p_holm"
Q_BH = "q_bh"
WARNINGS = "warnings"
PERCENT_CHANGE = "percent_change"
LOG2_RATIO = "log2_ratio"
CI_FOLD = "ci_fold"
BAND_CLASS = "band_class"
CONFIDENCE = "confidence"
KEY = "key"
FLAGGED = "flagged"
DECISION = "decision"
NOTE = "note"
ON_EARLIER_DATA = "on_earlier_data"
OUTCOME_LABEL = "outcome_label"
CHANGE_SIZE = "change_size"
N_MIN = "n_min"
WARNING_COUNT = "warning_count"
SENTENCE = "sentence"

#: The columns that name a comparison (and, with ``level``, a group).
IDENTITY = (GROUPING, WITHIN, STRATUM, OUTCOME, LEVEL_A, LEVEL_B)
#: The columns that name one group of one outcome in the per-group summaries.
GROUP_IDENTITY = (GROUPING, WITHIN, STRATUM, "level", OUTCOME)
#: Separates the parts of a review key; a part holding it (or the escape) is escaped.
KEY_SEPARATOR = "|"
KEY_ESCAPE = "\\"
#: How keys written before parts were escaped named a stratum: ``zone within season=dry``.
WITHIN_WORD = " within "


def side(name: str, which: Side) -> str:
    """The column of one side's per-group figure: ``side("n", "a") == "n_a"``."""
    return f"{name}_{which}"


def _escaped(part: pl.Expr) -> pl.Expr:
    return part.str.replace_all(KEY_ESCAPE, KEY_ESCAPE * 2, literal=True).str.replace_all(
        KEY_SEPARATOR, KEY_ESCAPE + KEY_SEPARATOR, literal=True
    )


def key_expression() -> pl.Expr:
    """The review key of each comparison, unambiguous for any names: the parts
    ``grouping|outcome|level_a|level_b`` (then ``|within|stratum`` inside a stratum), each
    with backslash and ``|`` escaped by a backslash. A comparison of names without those
    characters and outside strata keeps the key review files have always held."""
    parts = [_escaped(pl.col(name)) for name in (GROUPING, OUTCOME, LEVEL_A, LEVEL_B)]
    plain = pl.concat_str(parts, separator=KEY_SEPARATOR)
    stratified = pl.concat_str(
        [*parts, _escaped(pl.col(WITHIN)), _escaped(pl.col(STRATUM))], separator=KEY_SEPARATOR
    )
    return pl.when(pl.col(WITHIN).is_null()).then(plain).otherwise(stratified)


def earlier_key_expression() -> pl.Expr:
    """The key review files held before key parts were escaped (parts joined as they are,
    a stratum written into the grouping): read only to carry old reviews over."""
    grouping = (
        pl.when(pl.col(WITHIN).is_not_null())
        .then(pl.concat_str(GROUPING, pl.lit(WITHIN_WORD), WITHIN, pl.lit("="), STRATUM))
        .otherwise(pl.col(GROUPING))
    )
    return pl.concat_str(
        [grouping, pl.col(OUTCOME), pl.col(LEVEL_A), pl.col(LEVEL_B)], separator=KEY_SEPARATOR
    )


def comparison_row(frame: pl.DataFrame, index: int) -> ComparisonRow:
    """Row ``index`` of a comparisons frame as a typed row."""
    return typing.cast(ComparisonRow, frame.row(index, named=True))


def reviewed_row(frame: pl.DataFrame, index: int) -> ReviewedRow:
    """Row ``index`` of the review list's frame as a typed row."""
    return typing.cast(ReviewedRow, frame.row(index, named=True))


def csv_ready(frame: pl.DataFrame) -> pl.DataFrame:
    """The frame as a CSV holds it: lists of words (the warnings) joined by ``;``, enums as
    plain text. Other nested columns are left for the writer to refuse."""
    changes = []
    for name, dtype in frame.schema.items():
        if isinstance(dtype, pl.List) and isinstance(dtype.inner, pl.Enum | pl.String):
            changes.append(pl.col(name).cast(pl.List(pl.String)).list.join(";").alias(name))
        elif isinstance(dtype, pl.Enum):
            changes.append(pl.col(name).cast(pl.String))
    return frame.with_columns(changes) if changes else frame
