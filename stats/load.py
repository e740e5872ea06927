"""Read a wide table and decide which columns group rows and which are outcomes.

Every outcome column becomes two columns in the loaded frame: the numeric value
(Float64, null where missing) and a Boolean ``censored`` flag for entries below a detection
limit (``<0.5``, ``0.5 U``; the value is then the limit itself).

What the reader does with odd input, and where the rules are written:

- The file is read once, its encoding, preamble (``sep=`` line, ``#`` comments), separator,
  quoting and column names as :mod:`foldsift.stats.textfile` describes. Column names that
  are empty, repeated or hold control characters are renamed (``column_N``, ``name_2``) and
  a note says so; a nameless column with no entries (a separator at the end of every line)
  is left out with a note.
- Entries are read as numbers per column as :mod:`foldsift.stats.entries` describes:
  below-detection codes, qualifiers, units, percentages, above-range entries, decimal
  commas and thousands separators. A column whose entries are mostly numbers
  (:data:`NUMERIC_SHARE` of its non-missing entries are numbers or recognised codes) is an
  outcome; the entries that still cannot be read are counted and named, never the reason
  to take the column for a grouping. An outcome with mixed units, or whose decimal mark
  cannot be decided, is refused with a message naming the column.
- Grouping columns: the missing markers (:data:`MISSING_WORDS`) are no level; those rows
  are left out of that grouping's comparisons, and a note counts them.
- Columns holding lists or structures (Parquet) cannot be groupings or outcomes: naming one
  is refused; guessing passes over them.
- Guessing never takes for an outcome a column of identifiers (:func:`_looks_like_identifier`),
  of unit numbers, of years (:func:`_is_year`) or of a quantity on an interval scale
  (:func:`_interval_note`); each column so left out gets a note saying why, and naming it
  with ``--outcome`` (or ``--group``) uses it as named.
"""

from __future__ import annotations

import hashlib
import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal, get_args

import numpy as np
import polars as pl

from .entries import (
    MISSING,
    MISSING_WORDS,
    NUMBER,
    ColumnReading,
    Decimal,
    ParsedColumn,
    missing_of,
    read_columns,
    text_of,
)
from .errors import InputError
from .formatting import unit_from_name
from .long import (
    ROLE_NAMES,
    LongOptions,
    WideFromLong,
    find_long_columns,
    long_to_wide,
    squash_name,
)
from .textfile import RawTable, read_table_file

__all__ = [
    "MISSING_WORDS",
    "DerivedNames",
    "InputError",
    "ReadOptions",
    "Table",
    "load_table",
    "read_raw",
    "read_source",
]

#: A string column with more distinct values than this is taken for an identifier.
MAX_GROUP_LEVELS = 50
#: An integer column with at most this many distinct values is taken for a grouping.
MAX_INTEGER_GROUP_LEVELS = 6
#: Share of non-missing entries that must be numbers or recognised codes (below detection,
#: above range) for an outcome column: "mostly numbers", with room for up to 40% entries
#: that cannot be read (they are counted and named).
NUMERIC_SHARE = 0.6


@dataclass(frozen=True)
class ReadOptions:
    """How to read a file where guessing is not safe: its text encoding (``--encoding``)
    and its decimal mark (``--decimal comma|point``); None means decide from the file."""

    encoding: str | None = None
    decimal: Decimal | None = None

    def __post_init__(self) -> None:
        if self.decimal is not None and self.decimal not in get_args(Decimal):
            raise ValueError(f"decimal must be comma or point, got {self.decimal!r}")


@dataclass(frozen=True)
class DerivedNames:
    """Names of the working columns derived from user columns (a censored flag, the value
    used on the log scale, ...), chosen so that no user column can collide with them.

    Each is ``<user column><marker><role>`` where the marker is a run of ASCII unit
    separators that occurs in no user column name: the first marker in a derived name then
    ends the user's part, so two derived names are equal only for the same column and role,
    and no user name (which holds no marker) equals a derived one."""

    marker: str = "\x1f"

    @classmethod
    def beside(cls, user_columns: Iterable[str]) -> DerivedNames:
        names = list(user_columns)
        marker = "\x1f"
        while any(marker in name for name in names):
            marker += "\x1f"
        return cls(marker)

    def derived(self, column: str, role: str) -> str:
        return f"{column}{self.marker}{role}"

    def censored(self, column: str) -> str:
        """True where the entry was written below a limit (``<0.5``)."""
        return self.derived(column, "censored")

    def used(self, column: str) -> str:
        """The strictly positive value that goes to the log scale (null if none)."""
        return self.derived(column, "used")

    def excluded(self, column: str) -> str:
        return self.derived(column, "excluded")

    def substituted(self, column: str) -> str:
        return self.derived(column, "substituted")

    def log(self, column: str) -> str:
        return self.derived(column, "log")

    def kind(self, column: str) -> str:
        """What each entry was (``entries`` kinds: a number, censored, no limit, above the
        range, estimated, ...), for the per-group counts; only outcomes that hold an entry
        of a counted kind have this column."""
        return self.derived(column, "kind")


@dataclass(frozen=True)
class Table:
    """A loaded wide table with its column roles.

    Attributes
    ----------
    frame:
        Grouping columns as Utf8 (null where there is no level); each outcome as Float64
        plus its censored flag (``names.censored(outcome)``).
    groupings, outcomes:
        Column names in file order.
    path:
        The file read (None for an in-memory frame).
    fingerprint:
        SHA-256 of the file's bytes as read (of the frame's values for in-memory frames).
    unparsed:
        Per outcome, the count of entries that were neither numbers, recognised codes nor
        missing markers and were therefore read as missing.
    names:
        The names of the working columns derived from the user's columns.
    readings:
        Per text outcome, what reading its entries found (codes, units, decimal mark).
    no_level:
        Per grouping, the count of rows with no level (empty or a missing marker).
    notes:
        One line for each thing the reader did that the user should know (renamed columns,
        the encoding, skipped lines, units, codes, rows without a level, columns of numbers
        that guessing left out and why).
    units:
        Per outcome, its unit where one is known (from a long table's unit column, the
        cells, or the column name such as ``copper_mg_per_kg``).
    units_apart:
        Outcomes of an analyte that was also reported in a unit that does not convert.
    """

    frame: pl.DataFrame
    groupings: tuple[str, ...]
    outcomes: tuple[str, ...]
    path: Path | None
    fingerprint: str
    unparsed: dict[str, int] = field(default_factory=dict)
    names: DerivedNames = field(default_factory=DerivedNames)
    readings: dict[str, ColumnReading] = field(default_factory=dict)
    no_level: dict[str, int] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    units: dict[str, str] = field(default_factory=dict)
    units_apart: tuple[str, ...] = ()
    #: Design columns carried as text beside the groupings (the unit of ``--pair-by``, the
    #: period and sequence of a crossover); never compared themselves.
    design: tuple[str, ...] = ()

    @property
    def name(self) -> str:
        return self.path.name if self.path is not None else "<table>"


def file_fingerprint(path: Path) -> str:
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def frame_fingerprint(frame: pl.DataFrame) -> str:
    """SHA-256 over each column's name, type and values (an in-memory frame has no file)."""
    digest = hashlib.sha256()
    for name, series in frame.to_dict().items():
        digest.update(f"{name}\x00{series.dtype}\x00".encode())
        digest.update(series.is_null().to_numpy().tobytes())
        if series.dtype.is_numeric() or series.dtype == pl.Boolean:
            digest.update(series.fill_null(0).to_numpy().tobytes())
        else:
            digest.update("\x00".join(series.cast(pl.Utf8).fill_null("").to_list()).encode())
    return digest.hexdigest()


def read_source(path: Path | str, reading: ReadOptions | None = None) -> RawTable:
    """Read a CSV/TSV/Parquet file once: raw frame, fingerprint, separator and notes."""
    return read_table_file(Path(path), (reading or ReadOptions()).encoding)


def read_raw(path: Path | str, reading: ReadOptions | None = None) -> pl.DataFrame:
    """Read CSV/TSV/Parquet; text files are read as strings so censored entries survive."""
    return read_source(path, reading).frame


def _unusable(dtype: pl.DataType) -> str | None:
    """What a column type holds when it cannot be a grouping or outcome (None if it can)."""
    if isinstance(dtype, pl.List | pl.Array):
        return "lists"
    if isinstance(dtype, pl.Struct):
        return "structures"
    if dtype in (pl.Binary, pl.Object):
        return "binary objects"
    return None


def _is_text(dtype: pl.DataType) -> bool:
    return dtype == pl.Utf8 or isinstance(dtype, pl.Categorical | pl.Enum)


#: Entry kinds of plain columns: only outcomes holding another kind (a code, a limit, a
#: qualifier) carry a kind column for the per-group counts.
PLAIN_KINDS = [NUMBER, MISSING]

_ARTICLE = {"grouping": "a", "outcome": "an", "design column": "a"}
_ID_NAME = re.compile(r"(^|[_ .-])(id|no|num|number|index|idx|sample|row)$", re.IGNORECASE)
#: The same words ending a name written in camel case (``SampleID``, ``PatientNo``).
_ID_CAMEL = re.compile(r"[a-z](ID|Id|No|Nr|Num|Number|Index|Idx)$")
#: Our rule for identifiers neither named like one nor numbered 1..n (patient numbers such as
#: 10056, 10059, 10089, ...): whole numbers, all different but for at most 1% of the rows,
#: packed so closely that measurements would repeat values. From the spacing of the sorted
#: values (a smooth density on their grid), the pairs of equal values that many measurements
#: would give are expected; seeing as few as the column has is then less likely than this
#: (Poisson). The usual two-sided significance levels are 0.05 and 0.01; this is stricter
#: because a false call leaves a measurement out.
IDENTIFIER_ALPHA = 1e-3
#: Names of columns that number the units measured (subjects, patients, animals): whole
#: numbers repeated on several rows there identify, they neither measure nor group.
_UNIT_NAME = re.compile(
    r"(^|[_ .-])(id|subject|subj|patient|participant|animal|individual|person|case)"
    r"([_ .-]?(id|no|num|number))?$",
    re.IGNORECASE,
)
#: A date or a time stamp as written (2024-05-01, 01/05/2024, 2024-05-01T10:30, 1.5.2024).
_DATE = re.compile(
    r"^(\d{4}-\d{1,2}-\d{1,2}|\d{1,2}[/.-]\d{1,2}[/.-]\d{2,4})([ T]\d{1,2}:\d{2}(:\d{2})?.*)?$"
)
#: Whole numbers all in this range of calendar years are years (our rule): never guessed as
#: outcomes; a grouping when they take 2 to MAX_INTEGER_GROUP_LEVELS values and no
#: --group is given, else left out with a note (name them with --group to compare them).
_YEARS = (1800, 2200)
_YEAR_NAME = re.compile(r"(^|[_ .-])(year|yr|jahr|annee|año|date|time)s?$", re.IGNORECASE)
#: A name that says "year" (singular: ``year``, ``sampling_year``) holds years whatever their
#: range (1, 2, 3 for study years); the plural says how long (``age_years``), a measurement.
_YEAR_WORD = re.compile(
    r"(^|[_ .-])(year|yr|jahr|annee|année|año)$|(?-i:[a-z]Year)$", re.IGNORECASE
)
#: Our rule for a quantity on an interval scale (a temperature in degrees Celsius, a
#: difference, a score), whose ratios mean nothing: at least NEGATIVE_COUNT of its values,
#: and at least NEGATIVE_SHARE of them, are negative, and the most negative reaches
#: NEGATIVE_REACH of its median positive value below zero. Fewer or smaller negatives are
#: taken for noise around zero (blank-corrected laboratory results near the detection limit
#: are commonly reported as they are, negatives included) or for a slip, and are left out per
#: group like zeros. Zeros alone never make a column interval-scale (a concentration can be
#: 0), and a column with no positive value is refused by name as before.
NEGATIVE_COUNT = 3
NEGATIVE_SHARE = 0.01
NEGATIVE_REACH = 0.25
#: A whole number as written, maybe before a unit (``12``, ``10 mg``, ``20%``; not ``12.0``
#: nor ``1e3``).
_INTEGER = r"^[$€£¥]?\s*[+-]?[0-9]+(?:$|[^0-9.,eE])"


def _integer_like(frame: pl.DataFrame, name: str, value: pl.Series) -> bool:
    """Every entry that gives a number is written as a whole number (``12``, ``10 mg``;
    not ``12.0``)."""
    numbers = value.drop_nulls()
    if numbers.len() == 0 or not (numbers % 1 == 0).all():
        return False
    written = frame.select(text_of(name))[name].filter(value.is_not_null())
    return bool(written.str.contains(_INTEGER).all())


def _looks_like_identifier(name: str, numbers: pl.Series, distinct: int) -> bool:
    """Whole numbers that number rows: one per row and named like an identifier or running
    0/1..n in steps of 1, or too nearly all different for measurements (``_too_different``)."""
    if distinct < 3:
        return False
    if distinct == numbers.len():
        if _ID_NAME.search(name) or _ID_CAMEL.search(name):
            return True
        ordered = numbers.sort()
        if bool((ordered.diff().drop_nulls() == 1).all()):
            return True
    return _too_different(numbers, distinct)


def _too_different(numbers: pl.Series, distinct: int) -> bool:
    """``IDENTIFIER_ALPHA``: whole numbers with fewer pairs of equal values than measurements
    spread as they are could plausibly give."""
    n = numbers.len()
    largest = numbers.cast(pl.Float64).abs().max()
    if n - distinct > max(1, n // 100) or not isinstance(largest, float) or largest >= 2.0**53:
        return False
    ordered = np.sort(numbers.cast(pl.Int64).to_numpy())
    gaps = np.diff(ordered)
    step = int(np.gcd.reduce(gaps[gaps > 0])) if bool((gaps > 0).any()) else 1
    # The chance that a value falls on one point of the grid near each value, from the
    # span of the k values above it (a k-nearest-neighbour density estimate).
    k = max(2, math.isqrt(n))
    spans = (ordered[k:] - ordered[:-k]) / step
    chance = k / (n * np.maximum(spans, 1.0))
    expected = 0.5 * n * (n - 1) * float(chance.mean())
    _, counts = np.unique(ordered, return_counts=True)
    pairs = int((counts * (counts - 1) // 2).sum())
    # The Poisson CDF from scipy.special (what scipy.stats.poisson.cdf calls), imported only
    # here: reading a file needs no scipy otherwise, and scipy.stats is slow to import.
    from scipy.special import pdtr

    return bool(pdtr(pairs, expected) < IDENTIFIER_ALPHA)


def _is_year(name: str, numbers: pl.Series) -> bool:
    """Whole numbers that say when: all within the calendar years ``_YEARS``, or in a
    column whose name says year."""
    if _YEAR_WORD.search(name):
        return True
    bounds = _bounds(numbers)
    return bounds is not None and _YEARS[0] <= bounds[0] <= bounds[1] <= _YEARS[1]


def _bounds(numbers: pl.Series) -> tuple[float, float] | None:
    """The smallest and largest value (None if there is none)."""
    value = numbers.cast(pl.Float64)
    low, high = value.min(), value.max()
    return (low, high) if isinstance(low, float) and isinstance(high, float) else None


#: Why whole numbers are not measurements: they number rows or the units measured, say
#: when, or are a few levels; None: they are measurements.
WholeKind = Literal["identifier", "unit", "year", "levels"] | None


def _whole_number_kind(name: str, numbers: pl.Series) -> WholeKind:
    """What whole numbers are: an identifier, a year, a unit number, a few levels, or (None)
    a measurement."""
    distinct = numbers.n_unique()
    if _looks_like_identifier(name, numbers, distinct):
        return "identifier"  # a sample number, not a measurement nor a grouping
    if _UNIT_NAME.search(name) and distinct < numbers.len():
        return "unit"  # subject 1..k on several rows each: who was measured
    if _is_year(name, numbers):
        return "year"
    if 2 <= distinct <= MAX_INTEGER_GROUP_LEVELS:
        return "levels"
    return None


Role = Literal["grouping", "outcome"] | None


@dataclass(frozen=True)
class _Guess:
    """A column's guessed role, and why it is not an outcome when it holds numbers (a note;
    for a guessed grouping: why it stays out of the outcomes when --group names others)."""

    role: Role
    why: str | None = None


def _whole_guess(name: str, kind: WholeKind, numbers: pl.Series) -> _Guess:
    """The guess for whole numbers that are not measurements (``kind`` is not None)."""
    distinct, rows = numbers.n_unique(), numbers.len()
    if kind == "levels":
        return _Guess("grouping", _interval_note(name, numbers))
    if kind == "year":
        low, high = _bounds(numbers) or (math.nan, math.nan)
        why = (
            f"{name}: left out of the outcomes: years ({low:g} to {high:g}) say when, not "
            "what was measured; name it with --group to compare its years"
        )
        few = 2 <= distinct <= MAX_INTEGER_GROUP_LEVELS
        return _Guess("grouping" if few else None, why)
    what = "an identifier" if kind == "identifier" else "the number of the unit measured"
    return _Guess(
        None,
        f"{name}: left out as {what}: whole numbers, {distinct:,} different in {rows:,} rows; "
        "name it with --outcome or --group to use it",
    )


def _interval_note(name: str, values: pl.Series) -> str | None:
    """Why a column of numbers is on an interval scale (the rule at ``NEGATIVE_COUNT``), or
    None when it is not."""
    value = values.cast(pl.Float64)
    if int((value < 0).sum()) < NEGATIVE_COUNT:
        return None  # most columns: one quick pass
    finite = value.is_finite()
    negative = value.filter(finite & (value < 0))
    count, total = negative.len(), int(finite.sum())
    if count < max(NEGATIVE_COUNT, NEGATIVE_SHARE * total):
        return None
    lowest = negative.min()
    typical = value.filter(finite & (value > 0)).median()
    if not isinstance(lowest, float) or not isinstance(typical, float):
        return None  # no positive value: the reader refuses it by name (no logs at all)
    if -lowest < NEGATIVE_REACH * typical:
        return None  # noise around zero: left out per group like zeros
    return (
        f"{name}: left out of the outcomes: {count:,} of {total:,} values are negative "
        f"(down to {lowest:g}), so it is on an interval scale (a temperature, a difference, "
        "a score) where a ratio means nothing; name it with --outcome to compare it anyway"
    )


def _measured(name: str, values: pl.Series) -> _Guess:
    """An outcome, unless the values are on an interval scale or all the same."""
    why = _interval_note(name, values) or _constant_note(name, values)
    return _Guess("outcome") if why is None else _Guess(None, why)


def _constant_note(name: str, values: pl.Series) -> str | None:
    """Why a column holding one value only (a flag that never changes, a fixed setting) is
    not an outcome: every comparison would have no spread."""
    value = values.cast(pl.Float64)
    value = value.filter(value.is_finite())
    low, high = value.min(), value.max()
    if value.len() < 2 or not isinstance(low, float) or low != high:
        return None
    return (
        f"{name}: left out of the outcomes: every value is {low:g}, so no comparison has "
        "anything to compare; name it with --outcome to keep it"
    )


def _looks_like_dates(frame: pl.DataFrame, name: str) -> bool:
    text = frame.select(text_of(name))[name].drop_nulls()
    text = text.filter(text != "")
    dated = int(text.str.contains(_DATE.pattern).sum())
    return text.len() > 0 and dated >= 0.8 * text.len()


def _yearish(name: str, numbers: pl.Series) -> bool:
    """Whole numbers named like a year or a date, or all within the calendar years."""
    if numbers.len() == 0 or not bool((numbers.cast(pl.Float64) % 1 == 0).all()):
        return False
    return bool(_YEAR_NAME.search(name)) or _is_year(name, numbers)


def _text_role(frame: pl.DataFrame, name: str, parsed: ParsedColumn, distinct: int) -> _Guess:
    """The role of a text column: numbers (mostly) or labels. Dates with many levels are
    neither (name them with --group)."""
    reading = parsed.reading
    if reading.entries and reading.share >= NUMERIC_SHARE:
        # Detection limits and range codes mark measurements, never labels.
        coded = reading.censored + reading.censored_without_limit + reading.above_range
        numbers = parsed.value.drop_nulls()
        if not coded and (_yearish(name, numbers) or _integer_like(frame, name, parsed.value)):
            kind = _whole_number_kind(name, numbers)
            if kind is not None:
                return _whole_guess(name, kind, numbers)
        return _measured(name, parsed.value)
    if distinct > MAX_INTEGER_GROUP_LEVELS and _looks_like_dates(frame, name):
        return _Guess(None)
    if 2 <= distinct <= MAX_GROUP_LEVELS and distinct < frame.height:
        why = _unit_names(frame, name, distinct)
        return _Guess("grouping") if why is None else _Guess(None, why)
    return _Guess(None)


#: Our rule for labels that name the units measured (plots, wells, patients), not groups to
#: compare: at least this many levels, and at most 2 rows for most of them — comparing every
#: pair of such levels would be hundreds of comparisons of one or two values each.
UNIT_NAME_LEVELS = 10


def _unit_names(frame: pl.DataFrame, name: str, distinct: int) -> str | None:
    """Why a text column of labels looks like the names of the units measured (None when it
    looks like groups)."""
    if distinct < UNIT_NAME_LEVELS:
        return None
    text = text_of(name)
    sizes = frame.select(text.filter(~missing_of(text)).value_counts(sort=False))
    median = sizes.to_series().struct.field("count").median()
    if not isinstance(median, (int, float)) or median > 2:
        return None
    return (
        f"{name}: not taken as a grouping: {distinct} labels with at most 2 rows for most of "
        "them, like the names of the units measured; name it with --pair-by to compare other "
        "levels within each unit, or with --group to compare its labels"
    )


def _typed_role(frame: pl.DataFrame, name: str, distinct: int) -> _Guess:
    """The role of a column that arrived typed (Parquet, an in-memory frame). Dates and
    times are not guessed (name them with --group)."""
    dtype = frame.schema[name]
    if dtype == pl.Boolean:
        return _Guess("grouping")
    if not dtype.is_numeric():
        return _Guess(None)
    numbers = frame[name].drop_nulls()
    if dtype.is_integer() or _yearish(name, numbers):
        kind = _whole_number_kind(name, numbers)
        if kind is not None:
            return _whole_guess(name, kind, numbers)
    return _measured(name, frame[name])


def _level_counts(frame: pl.DataFrame, columns: Iterable[str]) -> dict[str, int]:
    """Distinct non-missing values of the named columns."""
    exprs = []
    for name in columns:
        if _is_text(frame.schema[name]):
            text = text_of(name)
            exprs.append(text.filter(~missing_of(text)).n_unique().alias(name))
        else:
            exprs.append(pl.col(name).drop_nulls().n_unique().alias(name))
    return frame.select(exprs).row(0, named=True) if exprs else {}


def _counted(frame: pl.DataFrame, parsed: dict[str, ParsedColumn]) -> list[str]:
    """The columns whose role depends on their count of levels: text columns that are not
    mostly numbers, and typed columns other than floats, lists and structures."""
    return [
        name
        for name, dtype in frame.schema.items()
        if (name in parsed and parsed[name].reading.share < NUMERIC_SHARE)
        or (name not in parsed and not dtype.is_float() and _unusable(dtype) is None)
    ]


def infer_roles(
    frame: pl.DataFrame, parsed: dict[str, ParsedColumn] | None = None
) -> tuple[list[str], list[str]]:
    """Guess grouping and outcome columns of a raw frame (``parsed``: its text columns read
    as numbers, when already done)."""
    guesses = _guesses(frame, parsed)
    return _having(guesses, "grouping"), _having(guesses, "outcome")


def _guesses(
    frame: pl.DataFrame, parsed: dict[str, ParsedColumn] | None = None
) -> dict[str, _Guess]:
    """Each column's guessed role, and why a column of numbers is not an outcome."""
    if parsed is None:
        parsed = read_columns(frame, [n for n, t in frame.schema.items() if _is_text(t)])
    levels = _level_counts(frame, _counted(frame, parsed))
    guesses = {}
    for name in frame.columns:
        distinct = levels.get(name, 0)
        if name in parsed:
            guesses[name] = _text_role(frame, name, parsed[name], distinct)
        else:
            guesses[name] = _typed_role(frame, name, distinct)
    return guesses


def _having(guesses: dict[str, _Guess], role: Role) -> list[str]:
    return [name for name, guess in guesses.items() if guess.role == role]


def _read(
    path: Path | str | None, frame: pl.DataFrame | None, reading: ReadOptions
) -> tuple[RawTable, Path | None]:
    """The raw table (frame, fingerprint, separator, notes) and its path."""
    if frame is not None:
        source = Path(path) if path is not None else None
        return RawTable(frame, frame_fingerprint(frame), None), source
    if path is None:
        raise ValueError("give a path or a frame")
    return read_source(path, reading), Path(path)


def _check_named(raw: pl.DataFrame, label: str, role: str, names: Sequence[str]) -> None:
    for name in names:
        if name not in raw.columns:
            shown = ", ".join(raw.columns[:12]) + (" …" if raw.width > 12 else "")
            raise InputError(
                f"{label}: no column named {name!r} (asked for as {role}); columns are: {shown}"
            )
        holds = _unusable(raw.schema[name])
        if holds:
            raise InputError(
                f"{label}: column {name!r} holds {holds} ({raw.schema[name]}), not one value "
                f"per row, so it cannot be {_ARTICLE[role]} {role}; choose another column or flatten it first"
            )


def _choose_roles(
    raw: pl.DataFrame,
    groupings: Sequence[str],
    outcomes: Sequence[str],
    parsed: dict[str, ParsedColumn],
) -> tuple[list[str], list[str], dict[str, str]]:
    """Grouping and outcome columns: the named ones, the rest guessed; and, when outcomes
    are guessed, why each column of numbers used for neither was left out (a note)."""
    if groupings and outcomes:
        return list(groupings), list(outcomes), {}
    guesses = _guesses(raw, parsed)
    guessed_groups = _having(guesses, "grouping")
    chosen_groups = list(groupings) or [n for n in guessed_groups if n not in outcomes]
    if outcomes:
        return chosen_groups, list(outcomes), {}
    chosen_outcomes = [name for name in _having(guesses, "outcome") if name not in chosen_groups]
    if groupings:
        chosen_outcomes += _levels_measured(raw, guesses, chosen_groups, parsed)
        chosen_outcomes.sort(key=raw.columns.index)
    used = {*chosen_groups, *chosen_outcomes}
    left_out = {
        name: guess.why for name, guess in guesses.items() if guess.why and name not in used
    }
    return chosen_groups, chosen_outcomes, left_out


def _levels_measured(
    raw: pl.DataFrame,
    guesses: dict[str, _Guess],
    groupings: Sequence[str],
    parsed: dict[str, ParsedColumn],
) -> list[str]:
    """When the user names the groupings, the few-level integer columns guessed as
    groupings are measurements too; not years nor codes below zero (their guess says why)."""
    return [
        name
        for name, guess in guesses.items()
        if guess.role == "grouping"
        and guess.why is None
        and name not in groupings
        and _is_numeric_column(raw, name, parsed)
    ]


def _is_numeric_column(raw: pl.DataFrame, name: str, parsed: dict[str, ParsedColumn]) -> bool:
    if name in parsed:
        return parsed[name].reading.share >= NUMERIC_SHARE
    return raw.schema[name].is_numeric()


def _check_roles(
    groupings: list[str], outcomes: list[str], label: str, left_out: Sequence[str] = ()
) -> None:
    overlap = set(groupings) & set(outcomes)
    if overlap:
        raise InputError(
            f"{label}: column {sorted(overlap)[0]!r} cannot be both grouping and outcome"
        )
    if not outcomes:
        passed = (
            f" (guessing left out {', '.join(left_out)}: identifiers, years, values below zero or constants)"
            if left_out
            else ""
        )
        raise InputError(
            f"{label}: no numeric outcome columns found{passed}; name them with --outcome COLUMN"
        )
    if not groupings:
        raise InputError(
            f"{label}: no grouping column found (text or few-level columns); "
            "name one with --group COLUMN"
        )


def _check_readings(readings: dict[str, ColumnReading], label: str) -> None:
    """Refuse an outcome whose entries cannot be read for sure (decimal mark, units)."""
    for reading in readings.values():
        problem = reading.problem or reading.unit_problem
        if problem:
            raise InputError(f"{label}: {problem}")


def _typed(
    raw: pl.DataFrame,
    groupings: list[str],
    outcomes: list[str],
    names: DerivedNames,
    parsed: dict[str, ParsedColumn],
) -> pl.DataFrame:
    """Groupings as text (null where there is no level); each outcome as Float64 plus its
    censored flag."""
    columns: list[pl.Expr] = []
    for name in groupings:
        text = text_of(name)
        columns.append(pl.when(~missing_of(text)).then(text).alias(name))
    series: list[pl.Series] = []
    finite = _all_finite(raw, [name for name in outcomes if name not in parsed])
    for name in outcomes:
        column = parsed.get(name)
        if column is not None:
            series.append(column.value.alias(name))
            series.append(column.censored.alias(names.censored(name)))
            if column.kind is not None and bool((~column.kind.is_in(PLAIN_KINDS)).any()):
                series.append(column.kind.alias(names.kind(name)))
            continue
        value = pl.col(name).cast(pl.Float64)
        if name in finite:
            # Every value is a finite number already: a Float64 column is taken as it is
            # (no copy of the table's largest part).
            columns.append(value.alias(name))
        else:
            columns.append(pl.when(value.is_finite()).then(value).otherwise(None).alias(name))
        columns.append(pl.lit(False).alias(names.censored(name)))
    typed = raw.select(columns).hstack(series)
    typed_columns = set(typed.columns)
    order = [
        c
        for name in outcomes
        for c in (name, names.censored(name), names.kind(name))
        if c in typed_columns
    ]
    return typed.select(*groupings, *order)


def _all_finite(raw: pl.DataFrame, outcomes: list[str]) -> set[str]:
    """The typed outcome columns without NaN or infinite values (one pass over them)."""
    if not outcomes:
        return set()
    row = raw.select(
        pl.col(name).cast(pl.Float64).is_finite().fill_null(True).all().alias(name)
        for name in outcomes
    ).row(0, named=True)
    return {name for name in outcomes if row[name]}


def _check_values(
    typed: pl.DataFrame, groupings: list[str], outcomes: list[str], label: str
) -> None:
    for name in outcomes:
        if typed[name].is_null().all():
            raise InputError(
                f"{label}: outcome column {name!r} has no numeric values; "
                "leave it out or fix its entries"
            )
        if not (typed[name] > 0).any():
            raise InputError(
                f"{label}: outcome column {name!r} has no positive values, so logs are undefined; "
                "leave it out"
            )
    for name in groupings:
        distinct = typed[name].drop_nulls().n_unique()
        if distinct >= 2 and distinct == typed[name].drop_nulls().len() and typed.height > 2:
            raise InputError(
                f"{label}: grouping column {name!r} has a different value in every row, like an "
                "identifier; choose a column whose levels repeat"
            )
        if distinct < 2:
            raise InputError(
                f"{label}: grouping column {name!r} has a single level; "
                "choose a column with two or more levels"
            )


def _to_parse(raw: pl.DataFrame, groupings: Sequence[str], outcomes: Sequence[str]) -> list[str]:
    """The text columns to read as numbers: the named outcomes when both roles are named
    (nothing is guessed then), else every text column."""
    texts = [name for name, dtype in raw.schema.items() if _is_text(dtype)]
    if groupings and outcomes:
        return [name for name in texts if name in outcomes]
    return texts


def _looks_long(groupings: Sequence[str]) -> list[str]:
    """Notes for groupings named like a long table's analyte or unit column."""
    notes = []
    for name in groupings:
        for role in ("analyte", "unit"):
            if squash_name(name) in ROLE_NAMES[role]:
                notes.append(
                    f"{name}: compared as a grouping, but it looks like the {role} column of a "
                    "long table (one row per sample × analyte); if it is, name the columns "
                    "with --analyte and --result"
                )
    return notes


def _notes(
    raw_notes: Sequence[str], readings: Iterable[ColumnReading], no_level: dict[str, int]
) -> tuple[str, ...]:
    notes = list(raw_notes)
    for reading in readings:
        notes += reading.notes()
    for name, count in no_level.items():
        notes.append(
            f"{name}: {count} row(s) have no level (empty or a missing marker such as NA) "
            "and are left out of its comparisons"
        )
    return tuple(notes)


def _widened(
    source: RawTable, options: LongOptions, label: str, reading: ReadOptions
) -> tuple[RawTable, WideFromLong | None]:
    """The source as a wide table, and what turning it wide found when it was long."""
    try:
        columns = find_long_columns(source.frame.columns, options)
    except InputError as error:
        raise InputError(f"{label}: {error}") from None
    if columns is None:
        return source, None
    wide = long_to_wide(
        source.frame,
        columns,
        options,
        label=label,
        decimal=reading.decimal,
        comma_hint=source.separator == ";",
    )
    notes = (*source.notes, *wide.notes)
    return RawTable(wide.frame, source.fingerprint, None, notes), wide


def _units(
    outcomes: Sequence[str], readings: dict[str, ColumnReading], widened: WideFromLong | None
) -> dict[str, str]:
    """Each outcome's unit: a long table's unit column, else its cells, else its name."""
    units = {}
    for name in outcomes:
        unit = widened.units.get(name) if widened else None
        reading = readings.get(name)
        if unit is None and reading is not None and len(reading.units) == 1:
            unit = reading.units[0]
        unit = unit or unit_from_name(name)
        if unit is not None:
            units[name] = unit
    return units


def load_table(
    path: Path | str | None = None,
    *,
    frame: pl.DataFrame | None = None,
    groupings: Sequence[str] | None = None,
    outcomes: Sequence[str] | None = None,
    reading: ReadOptions | None = None,
    long: LongOptions | None = None,
    design: Sequence[str] = (),
) -> Table:
    """Load a file (or an in-memory raw frame) and resolve column roles.

    A long table (one row per sample × analyte; ``long`` names its columns, or they are
    recognised by name) is first turned wide, one outcome per analyte (``stats/long.py``).

    Named ``groupings``/``outcomes`` override the guesses; a named column that does not
    exist, or that holds lists or structures, raises :class:`InputError`. ``reading`` sets
    the encoding and the decimal mark where the file cannot be trusted to show them.
    ``design`` columns (a unit, period or sequence) are kept as text and are neither
    groupings nor outcomes.
    """
    reading = reading or ReadOptions()
    named_groups = tuple(groupings or ())
    source, path_read = _read(path, frame, reading)
    label = str(path_read) if path_read is not None else "table"
    if source.frame.height == 0:
        raise InputError(f"{label}: has a header but no data rows; nothing to compare")
    source, widened = _widened(source, long or LongOptions(), label, reading)
    named_outcomes = tuple(outcomes or ()) or _long_outcomes(widened)
    raw = source.frame
    parsed = _parsed(source, (named_groups, named_outcomes), reading, label)
    chosen_groups, chosen_outcomes, left_out = _roles(
        raw, (named_groups, named_outcomes), parsed, design, label
    )
    readings = {name: parsed[name].reading for name in chosen_outcomes if name in parsed}
    _check_readings(readings, label)
    names = DerivedNames.beside(raw.columns)
    typed = _typed(raw, chosen_groups, chosen_outcomes, names, parsed)
    _check_values(typed, chosen_groups, chosen_outcomes, label)
    typed = _with_design(typed, raw, design)
    no_level = {g: typed[g].null_count() for g in chosen_groups if typed[g].null_count()}
    return Table(
        frame=typed,
        groupings=tuple(chosen_groups),
        outcomes=tuple(chosen_outcomes),
        path=path_read,
        fingerprint=source.fingerprint,
        unparsed={n: r.unparsed for n, r in readings.items() if r.unparsed},
        names=names,
        readings=readings,
        no_level=no_level,
        notes=_notes(source.notes, readings.values(), no_level)
        + left_out
        + tuple(_looks_long(chosen_groups) if widened is None else ()),
        units=_units(chosen_outcomes, readings, widened),
        units_apart=_long_units_apart(widened),
        design=tuple(design),
    )


def _parsed(
    source: RawTable,
    named: tuple[Sequence[str], Sequence[str]],
    reading: ReadOptions,
    label: str,
) -> dict[str, ParsedColumn]:
    """The named columns checked, then the text columns read as numbers where they can be."""
    raw = source.frame
    _check_named(raw, label, "grouping", named[0])
    _check_named(raw, label, "outcome", named[1])
    return read_columns(
        raw,
        _to_parse(raw, named[0], named[1]),
        decimal=reading.decimal,
        comma_hint=source.separator == ";",
    )


def _roles(
    raw: pl.DataFrame,
    named: tuple[Sequence[str], Sequence[str]],
    parsed: dict[str, ParsedColumn],
    design: Sequence[str],
    label: str,
) -> tuple[list[str], list[str], tuple[str, ...]]:
    """The grouping and outcome columns (``_choose_roles``), design columns taken out, and
    the notes on columns of numbers that guessing left out."""
    _check_named(raw, label, "design column", design)
    groups, outcomes, left_out = _choose_roles(raw, named[0], named[1], parsed)
    groups = [name for name in groups if name not in design]
    outcomes = [name for name in outcomes if name not in design]
    left_out = {name: why for name, why in left_out.items() if name not in design}
    _check_roles(groups, outcomes, label, list(left_out))
    return groups, outcomes, tuple(left_out.values())


def _with_design(typed: pl.DataFrame, raw: pl.DataFrame, design: Sequence[str]) -> pl.DataFrame:
    """The typed table with the design columns as text (null where there is no value)."""
    if not design:
        return typed
    return typed.hstack(
        raw.select(
            pl.when(~missing_of(text_of(name))).then(text_of(name)).alias(name) for name in design
        )
    )


def _long_outcomes(widened: WideFromLong | None) -> tuple[str, ...]:
    return widened.outcomes if widened is not None else ()


def _long_units_apart(widened: WideFromLong | None) -> tuple[str, ...]:
    return widened.units_apart if widened is not None else ()
