"""Long laboratory exports: one row per sample × analyte, turned into the wide table the rest
of foldsift reads.

Columns (named with options, or recognised by their names, see ``ROLE_NAMES``):

- **analyte** (what was measured) and **result** (the value) select the long shape;
- **unit** (optional): each analyte's results are converted to its most frequent unit
  (``units.plan_units``); units that cannot be converted into it keep their rows apart as
  another outcome, named with its unit;
- **qualifier** (optional): laboratory qualifier or detection-condition text per row;
- **limit** (optional): the detection or reporting limit of that row;
- **sample** (optional): rows with the same sample are one sample; its other columns are its
  groupings.

Rules per row, in this order (codes compared case-insensitively; see ``QUALIFIERS``):

1. Qualifier ``R`` (rejected): left out, counted.
2. A result written below a limit (``<0.5``, ``0.5 U``): censored at that number.
3. A qualifier that says "not detected" (``<``, ``U``, ``UJ``, ``ND``, "Not Detected",
   "Below Detection Limit", ...) or a result code without a number (``ND``, ``<LOQ``):
   censored at the result's number when there is one, else at the row's limit; with no
   limit anywhere the row is left out and counted ("below detection without a limit").
4. Qualifier ``>`` / ``E`` or a result ``>1500`` (above the measuring range): the number is
   kept and counted (a lower bound: that group's figures are understated).
5. Qualifier ``J`` (estimated): the value is used and counted.
6. Any other qualifier is counted and named, and the value is used.

Several results for one sample × analyte (laboratory duplicates, re-runs) are combined by
their geometric mean (``--duplicates mean-log``, the default; censored results are used only
when every result is censored, then at the smallest limit), the first one is kept
(``first``), or the table is refused (``refuse``); every combination is counted. Without a
sample column every row is a sample of its own.

The wide table is written back as text in the forms ``entries`` reads (``<0.5``, ``ND``,
``>1500``, ``0.5 J``), so one reader decides every entry and counts it.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import polars as pl

from .defaults import DUPLICATE_POLICIES, Duplicates
from .entries import ABOVE, CENSORED, ESTIMATED, MISSING, NO_LIMIT, NUMBER, read_columns
from .errors import InputError

#: Column names (compared without case, spaces or punctuation) that mark each role: common
#: laboratory-export headers, the Water Quality Exchange result columns of public
#: water-quality portals (CharacteristicName, ResultMeasureValue, ...), and the laboratory
#: domain of the CDISC SDTM clinical data standard (LBTESTCD, LBSTRESN, ...).
ROLE_NAMES: dict[str, tuple[str, ...]] = {
    "analyte": (
        "analyte", "analytename", "parameter", "parametername", "characteristic",
        "characteristicname", "determinand", "test", "testcode", "testname", "compound",
        "chemical", "substance", "lbtestcd", "lbtest", "paramcd",
    ),
    "result": (
        "result", "resultvalue", "value", "measurement", "concentration",
        "resultmeasurevalue", "lbstresn", "lborres", "aval",
    ),
    "unit": (
        "unit", "units", "resultunit", "unitcode", "measureunit",
        "resultmeasuremeasureunitcode", "lbstresu", "lborresu",
    ),
    "qualifier": (
        "qualifier", "qualifiers", "resultqualifier", "labqualifier", "flag", "flags",
        "remark", "remarkcode", "detectioncondition", "resultdetectionconditiontext",
    ),
    "limit": (
        "limit", "detectionlimit", "reportinglimit", "quantitationlimit", "mdl", "rl", "lod",
        "loq", "pql", "dl", "methoddetectionlimit",
        "detectionquantitationlimitmeasuremeasurevalue", "lbllqq", "lblloq",
    ),
    "sample": (
        "sample", "sampleid", "sampleno", "samplenumber", "samplecode", "labsampleid",
        "activityidentifier", "activityid", "usubjid", "specimenid",
    ),
}  # fmt: skip

#: Qualifier and detection-condition texts and what they mean, compared after lowering case
#: and trimming: the common laboratory data-validation qualifiers (U, UJ, J, R; US EPA
#: National Functional Guidelines for data review) and the detection-condition texts of the
#: Water Quality Exchange ("Not Detected", "Below Detection Limit", ...).
QUALIFIERS: dict[str, tuple[str, ...]] = {
    "below": (
        "<", "<=", "u", "uj", "nd", "n.d.", "not detected", "non-detect", "nondetect",
        "below detection", "below detection limit", "below reporting limit",
        "not detected at reporting limit", "detected not quantified", "bdl", "blq", "bql",
        "<mdl", "<rl", "<lod", "<loq", "<dl", "<pql",
    ),
    "above": (">", ">=", "e", "above range", "above quantification limit", "present above quantification limit", "exceeds calibration range"),
    "estimated": ("j", "j+", "j-", "estimated"),
    "rejected": ("r", "rejected"),
}  # fmt: skip

#: Kind of a row that was rejected by its qualifier (beyond the entry kinds).
REJECTED = 7


def squash_name(name: str) -> str:
    """A column name without case, spaces or punctuation, as ``ROLE_NAMES`` holds it."""
    return re.sub(r"[^a-z0-9]", "", name.lower())


@dataclass(frozen=True)
class LongColumns:
    """Which columns hold what in a long export (None: not in this table)."""

    analyte: str
    result: str
    unit: str | None = None
    qualifier: str | None = None
    limit: str | None = None
    sample: str | None = None

    def used(self) -> list[str]:
        named = [self.analyte, self.result, self.unit, self.qualifier, self.limit, self.sample]
        return [name for name in named if name is not None]

    def describe(self) -> str:
        parts = [f"analyte {self.analyte!r}", f"result {self.result!r}"]
        for role in ("unit", "qualifier", "limit", "sample"):
            name = getattr(self, role)
            if name is not None:
                parts.append(f"{role} {name!r}")
        return ", ".join(parts)


@dataclass(frozen=True)
class LongOptions:
    """How to read a long table: the columns the user named (None: recognise them by
    name), how to combine duplicates, and whether to look for the long shape at all."""

    analyte: str | None = None
    result: str | None = None
    unit: str | None = None
    qualifier: str | None = None
    limit: str | None = None
    sample: str | None = None
    duplicates: Duplicates = "mean-log"
    recognise: bool = True

    @property
    def named(self) -> bool:
        return self.analyte is not None or self.result is not None

    def __post_init__(self) -> None:
        if (self.analyte is None) != (self.result is None):
            raise ValueError("a long table needs both --analyte and --result")
        if self.duplicates not in DUPLICATE_POLICIES:
            raise ValueError(f"duplicates must be one of {', '.join(DUPLICATE_POLICIES)}")


def _by_name(columns: Sequence[str], role: str, taken: set[str]) -> str | None:
    wanted = ROLE_NAMES[role]
    for name in columns:
        if name not in taken and squash_name(name) in wanted:
            return name
    return None


def _named(columns: Sequence[str], role: str, name: str) -> str:
    if name not in columns:
        shown = ", ".join(columns[:12]) + (" …" if len(columns) > 12 else "")
        raise InputError(f"no column named {name!r} (asked for as {role}); columns are: {shown}")
    return name


def find_long_columns(columns: Sequence[str], options: LongOptions) -> LongColumns | None:
    """The long-table columns: those named in ``options``, the others recognised by name.

    Without ``--analyte``/``--result`` a table is taken as long only when its analyte and
    result columns are recognised and so is at least one of unit, qualifier or limit (a
    wide table with columns named ``test`` and ``value`` stays wide)."""
    if not options.named and not options.recognise:
        return None
    found: dict[str, str | None] = {}
    taken: set[str] = set()
    for role in ("analyte", "result", "unit", "qualifier", "limit", "sample"):
        given = getattr(options, role)
        name = _named(columns, role, given) if given else _by_name(columns, role, taken)
        if name is not None:
            taken.add(name)
        found[role] = name
    analyte, result = found.pop("analyte"), found.pop("result")
    if analyte is None or result is None:
        return None
    if not options.named and not any(found[r] for r in ("unit", "qualifier", "limit")):
        return None
    return LongColumns(analyte, result, **found)


# -- one row: kind and value ---------------------------------------------------------------


def _qualifier_meaning(qualifier: pl.Expr) -> pl.Expr:
    """Per row: "below", "above", "estimated", "rejected", "other" (an unknown code) or null
    (no qualifier)."""
    text = qualifier.cast(pl.String).str.strip_chars().str.to_lowercase()
    code = {word: name for name, codes in QUALIFIERS.items() for word in codes}
    known = text.replace_strict(code, default=pl.lit("other"), return_dtype=pl.String)
    return pl.when(text.is_null() | (text == "")).then(None).otherwise(known)


def _rows(
    raw: pl.DataFrame,
    columns: LongColumns,
    decimal: Literal["point", "comma"] | None,
    comma_hint: bool,
) -> pl.DataFrame:
    """Per row: analyte, unit, kind (entry kinds and REJECTED) and value (the limit when
    censored), plus the qualifier's meaning and text for the counts."""
    to_read = [columns.result] + ([columns.limit] if columns.limit else [])
    parsed = read_columns(raw, to_read, decimal=decimal, comma_hint=comma_hint)
    for column in parsed.values():
        if column.reading.problem is not None:
            raise InputError(column.reading.problem)
    result = parsed[columns.result]
    assert result.kind is not None and result.unit is not None
    frame = pl.DataFrame(
        {
            "value": result.value,
            "kind": result.kind,
            "cell_unit": result.unit,
            "limit": parsed[columns.limit].value
            if columns.limit
            else pl.Series([None] * raw.height, dtype=pl.Float64),
        }
    )
    unit = (
        raw[columns.unit].cast(pl.String).str.strip_chars()
        if columns.unit
        else pl.Series([None] * raw.height, dtype=pl.String)
    )
    qualifier = (
        raw[columns.qualifier]
        if columns.qualifier
        else pl.Series([None] * raw.height, dtype=pl.String)
    )
    frame = frame.with_columns(
        analyte=raw[columns.analyte].cast(pl.String).str.strip_chars(),
        unit=pl.when(unit.str.len_chars() > 0).then(unit).otherwise(pl.col("cell_unit")),
        qualifier=qualifier.cast(pl.String).str.strip_chars(),
    ).with_columns(meaning=_qualifier_meaning(pl.col("qualifier")))
    return frame.with_columns(_final_kind_and_value()).drop("cell_unit")


def _final_kind_and_value() -> list[pl.Expr]:
    kind, value, limit, meaning = (
        pl.col("kind"),
        pl.col("value"),
        pl.col("limit"),
        pl.col("meaning"),
    )
    has_number = kind.is_in([NUMBER, ESTIMATED, ABOVE])
    says_below = (meaning == "below").fill_null(False) | (kind == NO_LIMIT)
    below_at = pl.when(has_number).then(value).otherwise(limit)
    final_kind = (
        pl.when((meaning == "rejected").fill_null(False))
        .then(REJECTED)
        .when(kind == CENSORED)
        .then(CENSORED)
        .when(says_below & below_at.is_not_null())
        .then(CENSORED)
        .when(says_below)
        .then(NO_LIMIT)
        .when(has_number & (meaning == "above").fill_null(False))
        .then(ABOVE)
        .when(has_number & (meaning == "estimated").fill_null(False))
        .then(ESTIMATED)
        .otherwise(kind)
        .cast(pl.UInt8)
    )
    final_value = (
        pl.when(final_kind == CENSORED)
        .then(pl.when(kind == CENSORED).then(value).otherwise(below_at))
        .when(final_kind.is_in([NUMBER, ESTIMATED, ABOVE]))
        .then(value)
    )
    return [final_kind.alias("kind"), final_value.alias("value")]


# -- units, duplicates and the wide table ---------------------------------------------------


def _unit_targets(units: Sequence[str | None]) -> dict[str | None, tuple[str | None, float]]:
    """Per distinct unit spelling of one analyte: the unit its rows are reported in and the
    factor to it (``units.plan_units``)."""
    from .units import plan_units

    plan = plan_units(list(units))
    return {
        spelling: (plan.target_of(spelling), plan.factor_of(spelling)) for spelling in set(units)
    }


def _outcome_names(rows: pl.DataFrame) -> tuple[pl.DataFrame, list[str]]:
    """Each row's outcome (``analyte (unit)``) with value converted to that unit; notes on
    conversions and on units kept apart."""
    notes: list[str] = []
    parts = []
    for (analyte,), part in rows.group_by("analyte", maintain_order=True):
        if analyte is None:
            continue
        spellings = part["unit"].to_list()
        targets = _unit_targets(spellings)
        units = sorted({t for t, _ in targets.values() if t is not None})
        mapping = pl.DataFrame(
            {
                "unit": list(targets),
                "target": [t for t, _ in targets.values()],
                "factor": [f for _, f in targets.values()],
            },
            schema={"unit": pl.String, "target": pl.String, "factor": pl.Float64},
        )
        part = part.join(mapping, on="unit", how="left", nulls_equal=True, maintain_order="left")
        converted = part.filter((pl.col("factor") != 1.0) & pl.col("value").is_not_null()).height
        if converted:
            notes.append(f"{analyte}: {converted} result(s) converted to the analyte's unit")
        if len(units) > 1:
            notes.append(
                f"{analyte}: results in units that do not convert into each other "
                f"({', '.join(units)}) are kept apart as separate outcomes"
            )
        parts.append(
            part.with_columns(
                value=pl.col("value") * pl.col("factor"),
                outcome=pl.when(pl.col("target").is_not_null())
                .then(pl.lit(str(analyte)) + " (" + pl.col("target") + ")")
                .otherwise(pl.lit(str(analyte))),
            ).drop("factor")
        )
    if not parts:
        raise InputError("the analyte column is empty; nothing to compare")
    return pl.concat(parts, how="vertical"), notes


def _combine(
    rows: pl.DataFrame, index: list[str], policy: Duplicates, label: str
) -> tuple[pl.DataFrame, list[str]]:
    """One row per index × outcome: duplicates combined by the policy, and counted."""
    keys = [*index, "outcome"]
    counted = rows.with_columns(pl.len().over(keys).alias("results"))
    doubled = counted.filter(pl.col("results") > 1)
    if doubled.is_empty():
        return rows, []
    if policy == "refuse":
        first = doubled.row(0, named=True)
        where = ", ".join(f"{k} {first[k]!r}" for k in keys)
        raise InputError(
            f"{label}: {first['results']} results for one sample and analyte ({where}); "
            "combine them first, or choose --duplicates mean-log or first"
        )
    samples = doubled.select(keys).unique().height
    note = (
        f"{samples} sample × analyte pair(s) had several results ({doubled.height} results): "
        + ("the first of each kept" if policy == "first" else "combined by their geometric mean")
    )
    if policy == "first":
        return rows.unique(subset=keys, keep="first", maintain_order=True), [note]
    single = counted.filter(pl.col("results") == 1).drop("results")
    merged = _geometric_means(doubled.drop("results"), keys)
    single = single.select(merged.columns)
    return pl.concat([single, merged.cast(single.schema)], how="vertical"), [note]


def _geometric_means(rows: pl.DataFrame, keys: list[str]) -> pl.DataFrame:
    kind, value = pl.col("kind"), pl.col("value")
    detected = kind.is_in([NUMBER, ESTIMATED, ABOVE]) & (value > 0)
    combined = rows.group_by(keys, maintain_order=True).agg(
        value=pl.when(detected.any())
        .then(value.filter(detected).log().mean().exp())
        .otherwise(value.filter(kind == CENSORED).min()),
        kind=pl.when(detected.any())
        .then(
            pl.when((kind == ABOVE).any())
            .then(ABOVE)
            .when((kind == ESTIMATED).any())
            .then(ESTIMATED)
            .otherwise(NUMBER)
        )
        .when((kind == CENSORED).any())
        .then(CENSORED)
        .otherwise(kind.min())
        .cast(pl.UInt8),
        text=pl.col("text").first(),
        analyte=pl.col("analyte").first(),
        target=pl.col("target").first(),
    )
    return combined


def _cell_text() -> pl.Expr:
    """The wide cell as the entry reader reads it back to the same kind and value."""
    number = pl.col("value").map_elements(repr, return_dtype=pl.String)
    kind = pl.col("kind")
    return (
        pl.when(kind == NUMBER)
        .then(number)
        .when(kind == CENSORED)
        .then("<" + number)
        .when(kind == NO_LIMIT)
        .then(pl.lit("ND"))
        .when(kind == ABOVE)
        .then(">" + number)
        .when(kind == ESTIMATED)
        .then(number + " J")
        .when(kind == MISSING)
        .then(None)
        .when(kind == REJECTED)
        .then(None)
        .otherwise(pl.col("text"))
    )


@dataclass(frozen=True)
class WideFromLong:
    """A long table turned wide: text cells the entry reader reads, the outcome columns in
    order, the candidate grouping columns, and notes on what was done."""

    frame: pl.DataFrame
    outcomes: tuple[str, ...]
    others: tuple[str, ...]
    notes: tuple[str, ...]
    units: dict[str, str]
    units_apart: tuple[str, ...]


def _counts_notes(rows: pl.DataFrame) -> list[str]:
    notes = []
    rejected = rows.filter(pl.col("kind") == REJECTED).height
    if rejected:
        notes.append(f"{rejected} result(s) with qualifier R (rejected) left out")
    other = rows.filter(pl.col("meaning") == "other")["qualifier"].value_counts(sort=True)
    if other.height:
        shown = ", ".join(f"{q!r} ({n})" for q, n in other.head(4).rows())
        notes.append(f"qualifiers not known to foldsift, values used as given: {shown}")
    return notes


def _sample_columns(
    raw: pl.DataFrame, sample: str, others: list[str]
) -> tuple[pl.DataFrame, list[str], list[str]]:
    """The columns that describe the sample: constant within it. A column that differs
    within most samples holding several results (the laboratory of each result) describes
    results, not samples, and is left out; one that differs within a few samples (a typing
    slip) takes the sample's first value. Both are said."""
    if not others:
        return raw, others, []
    counts = raw.group_by(sample).agg(
        pl.len().alias("\x1fn"), *[pl.col(c).n_unique() for c in others]
    )
    several = counts.filter(pl.col("\x1fn") > 1)
    notes, kept, firsts = [], [], []
    for name in others:
        varying = several.filter(pl.col(name) > 1).height
        if varying == 0:
            kept.append(name)
        elif varying > several.height / 2:
            notes.append(
                f"{name}: differs between the results of {varying} sample(s); it describes results, not samples, and is not a grouping"
            )
        else:
            kept.append(name)
            firsts.append(name)
            notes.append(
                f"{name}: differs within {varying} sample(s); each sample takes its first value"
            )
    if firsts:
        raw = raw.with_columns(pl.col(firsts).first().over(sample))
    return raw, kept, notes


def _drop_valueless(rows: pl.DataFrame) -> tuple[pl.DataFrame, list[str]]:
    """Outcomes with no usable value at all (every result ND without a limit, say) are left
    out with a note rather than refusing the table."""
    usable = pl.col("kind").is_in([NUMBER, CENSORED, ESTIMATED, ABOVE]) & (pl.col("value") > 0)
    per_outcome = rows.group_by("outcome", maintain_order=True).agg(
        usable.any().alias("usable"), pl.len().alias("results")
    )
    empty = per_outcome.filter(~pl.col("usable"))
    notes = [
        f"{outcome}: none of its {count} result(s) is a positive number or a limit "
        "(all below detection without a limit, missing or unreadable); left out"
        for outcome, _, count in empty.rows()
    ]
    return rows.filter(~pl.col("outcome").is_in(empty["outcome"].to_list())), notes


def _outcome_units(rows: pl.DataFrame) -> tuple[list[str], dict[str, str], list[str]]:
    """The outcomes in order, each one's unit, and those whose analyte has another outcome
    in a unit that does not convert (units kept apart)."""
    outcomes = list(dict.fromkeys(rows["outcome"].to_list()))
    per_outcome = rows.select("outcome", "analyte", "target").unique(maintain_order=True)
    units = {o: t for o, _, t in per_outcome.rows() if t is not None}
    split = per_outcome.filter(pl.col("analyte").is_duplicated())["outcome"].to_list()
    return outcomes, units, split


def _named_rows(rows: pl.DataFrame, notes: list[str]) -> pl.DataFrame:
    """The rows that name an analyte; the others are counted in ``notes``."""
    named = pl.col("analyte").is_not_null() & (pl.col("analyte") != "")
    nameless = rows.filter(~named).height
    if nameless:
        notes.append(f"{nameless} result(s) with no analyte named left out")
    return rows.filter(named)


def long_to_wide(
    raw: pl.DataFrame,
    columns: LongColumns,
    options: LongOptions,
    *,
    label: str,
    decimal: Literal["point", "comma"] | None = None,
    comma_hint: bool = False,
) -> WideFromLong:
    """One row per sample (or per result without a sample column), one text column per
    outcome, the sample's other columns kept for groupings."""
    others = [c for c in raw.columns if c not in columns.used()]
    notes = [f"read as a long table: {columns.describe()}; each analyte is an outcome"]
    if columns.sample is not None:
        raw, others, sample_notes = _sample_columns(raw, columns.sample, others)
        notes += sample_notes
    try:
        parsed_rows = _rows(raw, columns, decimal, comma_hint)
    except InputError as error:
        raise InputError(f"{label}: {error}") from None
    rows = parsed_rows.with_columns(
        text=raw[columns.result].cast(pl.String),
        **{
            name: raw[name].cast(pl.String)
            for name in [*others, *([columns.sample] if columns.sample else [])]
        },
    )
    notes += _counts_notes(rows)
    rows, unit_notes = _outcome_names(_named_rows(rows, notes).filter(pl.col("kind") != REJECTED))
    notes += unit_notes
    if columns.sample is not None:
        index = [columns.sample, *others]
        rows, duplicate_notes = _combine(rows, index, options.duplicates, label)
        notes += duplicate_notes
    else:
        rows = rows.with_columns(pl.int_range(pl.len()).over([*others, "outcome"]).alias("\x1frow"))
        index = [*others, "\x1frow"]
    rows, empty_notes = _drop_valueless(rows)
    notes += empty_notes
    outcomes, units, split = _outcome_units(rows)
    clash = set(outcomes) & set(index)
    if clash:
        raise InputError(
            f"{label}: analyte {sorted(clash)[0]!r} has the name of another column; rename one"
        )
    wide = rows.with_columns(cell=_cell_text()).pivot(
        on="outcome", index=index, values="cell", aggregate_function=None
    )
    wide = wide.drop("\x1frow", strict=False)
    if columns.sample is not None:
        wide = wide.drop(columns.sample)
    return WideFromLong(
        wide.select(*others, *outcomes),
        tuple(outcomes),
        tuple(others),
        tuple(notes),
        units,
        tuple(split),
    )
