"""Reading the entries of a text column as numbers, per column.

Each entry is trimmed, then read by these rules (codes compared case-insensitively):

- **Missing**: empty or one of :data:`MISSING_WORDS` (``NA``, ``n/a``, ``null``, ``-``, ``.``,
  ``missing`` ...): null, in every column.
- **A number** may carry, in this order, a comparison sign, a currency sign, the number, a
  unit and a laboratory qualifier:

  ==================================  =====================================================
  ``<0.5``, ``< 0.5``, ``<=0.5``      below a detection or reporting limit: censored, the
                                      value is the limit (0.5)
  ``0.5U``, ``0.5 U``, ``0.5 UJ``     qualifier U / UJ, "not detected at this limit" (the
  ``0.5 ND``                          usual laboratory data-validation codes): censored at 0.5
  ``0.5 J``                           qualifier J, "estimated": the value is used, and counted
  ``>1500``, ``>=1500``               above the measuring range: the number is kept (a lower
                                      bound of the true value, so that group's figures are
                                      understated) and counted; it is not censored-below
  ``12.5 mg/kg``, ``12.5mg/L``,       a unit in the cell: the number is read and the unit
  ``$12``                             noted; the cells of one column that carry a unit must
                                      all carry the same one, else the column is refused
                                      (mixed units need a conversion this reader does not do)
  ``15%``                             a percentage: read as 15, and the column's note says
                                      the entries were percentages
  ==================================  =====================================================

- **Below detection without a number** (:data:`BELOW_WORDS`: ``ND``, ``n.d.``, ``BDL``,
  ``not detected`` ..., and ``<`` before a word: ``<LOD``, ``<LOQ``, ``<RL``): censored with no
  known limit; left out and counted.
- **Labels that start with a number** are text, not numbers: ordinals (``1st``, ``2nd``)
  and codes of a number and one letter that differs between entries (``1A``, ``1B``,
  ``2A``: plot or sample codes, not units).
- Anything else is **unparsed**: left out, counted, and its spellings named.

**Decimal mark**, decided per column from all of its entries (``--decimal`` overrides):

- A comma is a decimal comma when some entry has 1, 2 or 4+ digits after its only comma, or
  no or a zero integer part before it (``,5``, ``0,125``), or points between groups of three
  digits before it (``1.234,5``, ``1.234.567``). The same rules with the marks swapped make
  the point the decimal mark (``12.5``, ``1,234.5``, ``1,234,567``).
- With a decimal comma, points separate thousands; with a decimal point, commas do. Spaces
  (also no-break and narrow no-break spaces) between groups of three digits separate
  thousands either way.
- When both marks are shown to be decimal marks and no entry uses a thousands separator or
  could be read both ways, both are read as decimal marks (the note says so); otherwise the
  column is refused.
- When nothing decides: an entry like ``1,234`` (one comma before exactly three digits) could
  be 1.234 or 1234, so the column is refused with a message naming ``--decimal``; an entry
  like ``1.234`` is read with a decimal point (the usual default) unless the file hints at
  decimal commas (it is separated by ``;``, or another column has decimal commas), when it
  is refused likewise. One column is never read half one way and half the other.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import polars as pl

#: Entries treated as missing in every column (compared case-insensitively).
MISSING_WORDS = ("", "na", "n/a", "nan", "null", "none", "-", ".", "missing")
#: Entries meaning "below detection" with no limit given (compared case-insensitively).
BELOW_WORDS = (
    "nd",
    "n.d.",
    "n.d",
    "n/d",
    "bdl",
    "bql",
    "blq",
    "not detected",
    "non detect",
    "non-detect",
    "nondetect",
    "below detection",
    "below detection limit",
    "below the detection limit",
    "below quantification limit",
)
#: Qualifier codes after a number that mean "not detected at this limit".
CENSORING_QUALIFIERS = ("u", "uj", "nd")
#: Qualifier code after a number meaning "estimated" (the value is used).
ESTIMATED_QUALIFIER = "j"

Decimal = Literal["point", "comma"]
Mode = Literal["point", "comma", "both"]

# Entry kinds.
MISSING, NUMBER, CENSORED, NO_LIMIT, ABOVE, ESTIMATED, UNPARSED = range(7)
_VALUE_KINDS = (NUMBER, CENSORED, ABOVE, ESTIMATED)

_GAP = "[ \u00a0\u202f]"
_EXP = "(?:[eE][+-]?[0-9]+)?"
_SPACED = rf"[0-9]{{1,3}}(?:{_GAP}[0-9]{{3}})+"
_NUM = rf"[+-]?(?:[0-9](?:[0-9.,\u00a0\u202f ]*[0-9])?|[.,][0-9]+){_EXP}"
_ENTRY = rf"^(?P<op><=|>=|<|>|≤|≥)?\s*(?P<cur>[$€£¥])?\s*(?P<num>{_NUM})\s*(?P<tail>\S.*)?$"
_UNIT = r"%|‰|[A-Za-zµμ°Ω][A-Za-z0-9µμ°Ω·.^²³_-]*(?:\s*/\s*[A-Za-z0-9µμ°Ω·.^²³_-]+)*"
_TAIL = rf"^(?P<unit>{_UNIT})?\s*(?P<qual>(?i:uj|u|j|nd))?$"
_BELOW_CODE = r"^(?:<=|<|≤)\s*[a-z][a-z0-9 ._-]*$"
_BELOW_SIGNS = ["<", "<=", "≤"]
_ORDINAL = r"(?i)^[0-9]*(?:1st|2nd|3rd|[0-9]th)$"
_ABOVE_SIGNS = [">", ">=", "≥"]

#: Shapes of the number part that show which mark is decimal (see the module docstring).
_SHAPES = {
    "single_comma": rf"^[+-]?(?:[0-9]+|{_SPACED})?,[0-9]+{_EXP}$",
    "ambiguous_comma": r"^[+-]?[1-9][0-9]{0,2},[0-9]{3}$",
    "single_point": rf"^[+-]?(?:[0-9]+|{_SPACED})?\.[0-9]+{_EXP}$",
    "ambiguous_point": r"^[+-]?[1-9][0-9]{0,2}\.[0-9]{3}$",
    "comma_groups": rf"^[+-]?[1-9][0-9]{{0,2}}(?:,[0-9]{{3}})+(?:\.[0-9]*)?{_EXP}$",
    "point_groups": rf"^[+-]?[1-9][0-9]{{0,2}}(?:\.[0-9]{{3}})+(?:,[0-9]*)?{_EXP}$",
    "spaced": rf"^[+-]?{_SPACED}",
}
#: The number part a mode accepts, and how it becomes a plain decimal-point number.
_VALID = {
    "point": rf"^[+-]?(?:[0-9]+|[0-9]{{1,3}}(?:,[0-9]{{3}})+|{_SPACED})?(?:\.[0-9]*)?{_EXP}$",
    "comma": rf"^[+-]?(?:[0-9]+|[0-9]{{1,3}}(?:\.[0-9]{{3}})+|{_SPACED})?(?:,[0-9]*)?{_EXP}$",
    "both": rf"^[+-]?[0-9]*(?:[.,][0-9]+)?{_EXP}$",
}
#: A plain number: a number part alone (a sign, digits with at most a point followed by
#: digits, an exponent), with no comparison sign, currency, unit or qualifier around it. The
#: full rules read it as its text cast to a number under a decimal point, both marks or an
#: undecided mark, so only decimal-comma columns read it otherwise (``5.``, ``1.e3`` and
#: ``inf`` cast too, but the full rules do not read them as that number).
_PLAIN = rf"^[+-]?(?:[0-9]+(?:\.[0-9]+)?|\.[0-9]+){_EXP}$"
#: About how many distinct entries are read by the full rules in one batch (the batches of
#: a table's columns are read in parallel).
_BATCH = 20_000


@dataclass(frozen=True)
class MarkCounts:
    """How many number parts of a column have each shape (keys of ``_SHAPES``)."""

    counts: dict[str, int]
    example_comma: str | None = None
    example_point: str | None = None

    def __getitem__(self, shape: str) -> int:
        return self.counts.get(shape, 0)

    @property
    def comma_evidence(self) -> int:
        """Entries that show the comma is the decimal mark."""
        return (self["single_comma"] - self["ambiguous_comma"]) + (
            self["point_groups"] - self["ambiguous_point"]
        )

    @property
    def point_evidence(self) -> int:
        return (self["single_point"] - self["ambiguous_point"]) + (
            self["comma_groups"] - self["ambiguous_comma"]
        )

    @property
    def thousands(self) -> int:
        """Entries that certainly use a thousands separator."""
        return (
            (self["comma_groups"] - self["ambiguous_comma"])
            + (self["point_groups"] - self["ambiguous_point"])
            + self["spaced"]
        )


def _ambiguous(name: str, example: str, why: str) -> str:
    mark = "," if "," in example else "."
    whole, _, part = example.lstrip("+-").partition(mark)
    return (
        f"column {name!r}: {example!r} could be {whole}.{part} or {whole}{part} ({why}); "
        "set --decimal comma or --decimal point"
    )


def decide_mode(
    name: str, marks: MarkCounts, decimal: Decimal | None, comma_hint: bool
) -> tuple[Mode, str | None]:
    """The column's decimal mode, and why it cannot be read for sure (None when it can)."""
    if decimal is not None:
        return decimal, None
    comma, point = marks.comma_evidence > 0, marks.point_evidence > 0
    ambiguous = marks["ambiguous_comma"] + marks["ambiguous_point"]
    if comma and point:
        if marks.thousands or ambiguous:
            return "point", (
                f"column {name!r} uses both a decimal comma and a decimal point, and some "
                "of its entries (thousands separators, or like 1,234) could be read either "
                "way; set --decimal comma or --decimal point"
            )
        return "both", None
    if comma or point:
        return ("comma" if comma else "point"), None
    if marks.example_comma is not None:
        why = "one comma before exactly three digits, and no other entry shows which"
        return "point", _ambiguous(name, marks.example_comma, why)
    if comma_hint and marks.example_point is not None:
        why = "the file uses decimal commas, and no entry of this column shows which"
        return "point", _ambiguous(name, marks.example_point, why)
    return "point", None


def _number(num: pl.Expr, mode: Mode) -> pl.Expr:
    """The number part as Float64 under the mode (null when the mode does not accept it)."""
    if mode == "point":
        plain = num.str.replace_all(f"[,{_GAP[1:-1]}]", "")
    elif mode == "comma":
        plain = num.str.replace_all(f"[.{_GAP[1:-1]}]", "").str.replace(",", ".", literal=True)
    else:
        plain = num.str.replace(",", ".", literal=True)
    value = pl.when(num.str.contains(_VALID[mode])).then(plain.cast(pl.Float64, strict=False))
    return pl.when(value.is_finite()).then(value)


def text_of(column: str) -> pl.Expr:
    return pl.col(column).cast(pl.Utf8).str.strip_chars()


def missing_of(text: pl.Expr) -> pl.Expr:
    return text.is_null() | text.str.to_lowercase().is_in(list(MISSING_WORDS))


def _entry(mode: Mode, undecided: bool = False) -> pl.Expr:
    """A struct (value, kind, unit) from a struct (text, p) where p holds the entry's parts.
    ``undecided``: the decimal mark is not known, so a number part any mode accepts counts
    as a number (for deciding the column's role; such a column is refused as an outcome)."""
    text = pl.col("text")
    parts = pl.col("p")
    lowered = text.str.to_lowercase()
    tail = parts.struct.field("tail")
    tail_parts = tail.str.extract_groups(_TAIL)
    unit = tail_parts.struct.field("unit")
    qual = tail_parts.struct.field("qual").str.to_lowercase()
    lone = qual.is_null() & unit.str.to_lowercase().is_in(
        [*CENSORING_QUALIFIERS, ESTIMATED_QUALIFIER]
    )
    qual = pl.when(lone).then(unit.str.to_lowercase()).otherwise(qual)
    unit = pl.when(lone).then(None).otherwise(unit)
    op = parts.struct.field("op")
    num = parts.struct.field("num")
    modes: tuple[Mode, ...] = ("point", "comma", "both") if undecided else (mode,)
    number = pl.coalesce([_number(num, each) for each in modes])
    parsed = number.is_not_null() & (tail.is_null() | tail.str.contains(_TAIL))
    below = op.is_in(_BELOW_SIGNS) | qual.is_in(list(CENSORING_QUALIFIERS))
    kind = (
        pl.when(missing_of(text))
        .then(MISSING)
        .when(lowered.is_in(list(BELOW_WORDS)) | lowered.str.contains(_BELOW_CODE))
        .then(NO_LIMIT)
        .when(~parsed)
        .then(UNPARSED)
        .when(below)
        .then(CENSORED)
        .when(op.is_in(_ABOVE_SIGNS))
        .then(ABOVE)
        .when(qual == ESTIMATED_QUALIFIER)
        .then(ESTIMATED)
        .otherwise(NUMBER)
        .cast(pl.UInt8)
    )
    full_unit = pl.concat_str([parts.struct.field("cur"), unit], ignore_nulls=True)
    full_unit = pl.when(parsed & (full_unit != "")).then(full_unit.str.replace_all("μ", "µ"))
    return pl.struct(
        value=pl.when(kind.is_in(list(_VALUE_KINDS))).then(number), kind=kind, unit=full_unit
    )


def _entries(count: int) -> str:
    return f"{count} entry" if count == 1 else f"{count} entries"


@dataclass(frozen=True)
class ColumnReading:
    """What reading one column's entries found (counts of non-missing entries)."""

    name: str
    entries: int = 0
    numbers: int = 0
    censored: int = 0
    censored_without_limit: int = 0
    above_range: int = 0
    estimated: int = 0
    unparsed: int = 0
    unparsed_examples: tuple[tuple[str, int], ...] = ()
    units: tuple[str, ...] = ()
    without_unit: int = 0
    mode: Mode = "point"
    thousands: bool = False
    problem: str | None = None

    @property
    def numeric_like(self) -> int:
        """Entries that are numbers or recognised codes (below detection, above range)."""
        return self.entries - self.unparsed

    @property
    def share(self) -> float:
        """The share of non-missing entries that are numbers or recognised codes."""
        return self.numeric_like / self.entries if self.entries else 0.0

    @property
    def unit_problem(self) -> str | None:
        if len(self.units) < 2:
            return None
        return (
            f"column {self.name!r} has entries in different units ({', '.join(self.units)}); "
            "convert them to one unit in the file, or name the other outcomes with --outcome"
        )

    def notes(self) -> list[str]:
        """One line per thing the reader did that the user should know."""
        notes = [*self._format_notes(), *self._code_notes()]
        if self.unparsed_examples:
            shown = ", ".join(f"{text!r} ({count})" for text, count in self.unparsed_examples)
            more = " …" if sum(c for _, c in self.unparsed_examples) < self.unparsed else ""
            notes.append(f"{self.name}: entries not read as numbers: {shown}{more}")
        return notes

    def _format_notes(self) -> list[str]:
        notes = []
        if self.mode == "comma":
            grouping = "; points separate thousands (1.234 = 1234)" if self.thousands else ""
            notes.append(f"{self.name}: read with decimal commas (12,5 = 12.5){grouping}")
        elif self.mode == "both":
            notes.append(f"{self.name}: both 12,5 and 12.5 occur; both read as decimal marks")
        elif self.thousands:
            notes.append(f"{self.name}: commas or spaces separate thousands (1,234 = 1234)")
        if self.units == ("%",):
            notes.append(f"{self.name}: entries are percentages (15% read as 15)")
        elif len(self.units) == 1:
            bare = f"; {_entries(self.without_unit)} without a unit taken to be in it too"
            notes.append(
                f"{self.name}: cells carry the unit {self.units[0]}; read as numbers in "
                f"{self.units[0]}{bare if self.without_unit else ''}"
            )
        return notes

    def _code_notes(self) -> list[str]:
        notes = []
        if self.censored_without_limit:
            notes.append(
                f"{self.name}: {_entries(self.censored_without_limit)} below detection "
                "without a limit (ND, <LOD, ...) left out"
            )
        if self.above_range:
            notes.append(
                f"{self.name}: {_entries(self.above_range)} above the measuring range (>x) "
                "used at the stated number, which understates them"
            )
        if self.estimated:
            notes.append(
                f"{self.name}: {_entries(self.estimated)} marked J (estimated) used as given"
            )
        return notes


@dataclass(frozen=True)
class ParsedColumn:
    """One column read as numbers: values, censored flags and what the reading found."""

    value: pl.Series
    censored: pl.Series
    reading: ColumnReading = field(compare=False)
    #: Per entry: its kind (MISSING, NUMBER, CENSORED, NO_LIMIT, ABOVE, ESTIMATED, UNPARSED)
    #: and the unit written in the cell (null when none).
    kind: pl.Series | None = field(default=None, compare=False)
    unit: pl.Series | None = field(default=None, compare=False)


def _numbers(texts: pl.DataFrame) -> pl.DataFrame:
    """Each entry cast to a number, null unless it is a finite one (cast once, then kept)."""
    cast = texts.select(pl.all().cast(pl.Float64, strict=False))
    return cast.select(
        pl.when(pl.col(c).is_finite()).then(pl.col(c)).alias(c) for c in cast.columns
    )


def _side_by_side(
    texts: pl.DataFrame, numbers: pl.DataFrame, columns: Sequence[str]
) -> pl.DataFrame:
    """The named columns' entries (``t <name>``) and finite numbers (``n <name>``)."""
    return pl.DataFrame(
        [
            *(texts[c].alias(f"t {c}") for c in columns),
            *(numbers[c].alias(f"n {c}") for c in columns),
        ]
    )


def _plain_counts(paired: pl.DataFrame, columns: Sequence[str]) -> dict[str, tuple[int, int]]:
    """Per column: (non-missing entries, entries that are finite numbers). Missing words
    are looked for only among the entries that are not finite numbers."""
    exprs = []
    for name in columns:
        text, number = pl.col(f"t {name}"), pl.col(f"n {name}")
        others = text.filter(text.is_not_null() & number.is_null())
        words = others.str.to_lowercase().is_in(list(MISSING_WORDS)).sum()
        exprs.append((pl.len() - text.null_count() - words).alias(f"e {name}"))
        exprs.append(number.count().alias(f"p {name}"))
    row = paired.select(exprs).row(0, named=True) if exprs else {}
    return {name: (int(row[f"e {name}"]), int(row[f"p {name}"])) for name in columns}


@dataclass(frozen=True)
class _Split:
    """One column's entries in two parts: its plain numbers (``fast``: each entry's number,
    null for the other entries, None when no entry is plain; ``plain``: how many there are)
    and its distinct other entries (``others``: ``text`` and its parts ``p``), with the
    shapes of both (``marks``)."""

    fast: pl.Series | None
    plain: int
    others: pl.DataFrame
    marks: MarkCounts


def _parts(others: pl.LazyFrame) -> pl.LazyFrame:
    return others.with_columns(pl.col("text").str.extract_groups(_ENTRY).alias("p"))


def _mark_counts(parts: pl.LazyFrame) -> pl.LazyFrame:
    """Shapes of the number parts of distinct entries (distinct entries suffice: every
    decision asks only whether some entry has a shape)."""
    num = pl.col("p").struct.field("num")
    exprs = [num.str.contains(p).sum().alias(shape) for shape, p in _SHAPES.items()]
    for mark in ("comma", "point"):
        ambiguous = num.filter(num.str.contains(_SHAPES[f"ambiguous_{mark}"]))
        exprs.append(ambiguous.min().alias(f"example_{mark}"))
    return parts.select(exprs)


def _marks(row: dict[str, Any], single_point: int, groups: dict[str, Any]) -> MarkCounts:
    """The shapes of a column's distinct other entries (``row``) and of its plain entries
    (``single_point``, ``groups``) together: counts of distinct entries plus counts of rows,
    as every decision asks only whether a count of entries of one shape but not of another
    is positive."""
    counts = {shape: int(row[shape] or 0) for shape in _SHAPES}
    counts["single_point"] += single_point
    for shape in ("point_groups", "ambiguous_point"):
        counts[shape] += int(groups[shape] or 0)
    examples = [e for e in (row["example_point"], groups["example_point"]) if e is not None]
    return MarkCounts(counts, row["example_comma"], min(examples, default=None))


def _plain_exprs(name: str, fast: bool) -> list[pl.Expr]:
    """A column's entries (``t <name>``), its plain numbers (``f <name>``, null for the other
    entries) and where the first point of each entry is (``dot <name>``). ``fast`` False: no
    entry is taken as plain."""
    text = pl.col(f"t {name}")
    number = pl.col(f"n {name}") if fast else pl.lit(None, pl.Float64)
    cast = pl.when(number.is_not_null()).then(text)  # the other entries are not looked at
    return [
        text,
        pl.when(cast.str.contains(_PLAIN)).then(number).alias(f"f {name}"),
        text.str.find(".", literal=True).alias(f"dot {name}"),
    ]


def _split_exprs(name: str) -> list[pl.Expr]:
    """For one column (see ``_plain_exprs``): how many plain numbers hold a point, the plain
    numbers that could have the shape of point groups (``_groups`` tells), how many entries
    are plain, and the distinct other entries.

    A plain number is its own number part, and it can have only three of ``_SHAPES`` (the
    others need a comma or a space): single point, exactly when it holds a point (``_PLAIN``
    puts digits after it); point groups, only when its point comes after a sign and 1 to 3
    digits, then 3 digits and the end or an exponent (2 characters or more); and like 1.234,
    a shape within point groups."""
    text, plain, dot = pl.col(f"t {name}"), pl.col(f"f {name}").is_not_null(), pl.col(f"dot {name}")
    after = text.str.len_bytes() - dot
    maybe = plain & (dot <= 4) & ((after == 4) | (after >= 6))
    return [
        (plain & dot.is_not_null()).sum().alias(f"single_point {name}"),
        text.filter(maybe).implode().alias(f"maybe {name}"),
        plain.sum().alias(f"plain {name}"),
        text.filter(~plain).unique().implode().alias(f"others {name}"),
    ]


def _groups(maybe: pl.Series) -> pl.LazyFrame:
    """Among plain numbers (``maybe``, see ``_split_exprs``): how many have the shape of point
    groups, how many are like 1.234 (a shape within it), and the least of those."""
    text, ambiguous = pl.col("text"), pl.col("ambiguous")
    grouped = pl.LazyFrame([maybe.alias("text")]).filter(text.str.contains(_SHAPES["point_groups"]))
    return grouped.with_columns(
        text.str.contains(_SHAPES["ambiguous_point"]).alias("ambiguous")
    ).select(
        pl.len().alias("point_groups"),
        ambiguous.sum().alias("ambiguous_point"),
        text.filter(ambiguous).min().alias("example_point"),
    )


def _split(paired: pl.DataFrame, columns: Sequence[str], fast: bool) -> dict[str, _Split]:
    """Each column's plain numbers and its distinct other entries, in two passes over all
    the columns, then the other entries' parts and shapes, the columns in parallel
    (``fast`` False: no entry is taken as plain)."""
    if not columns:
        return {}
    work = paired.select(expr for name in columns for expr in _plain_exprs(name, fast))
    sums = work.select(expr for name in columns for expr in _split_exprs(name))
    row = sums.select(pl.exclude(pl.List)).row(0, named=True)
    parts = pl.collect_all(
        _parts(sums.lazy().select(pl.col(f"others {name}").explode().alias("text")))
        for name in columns
    )
    shapes = pl.collect_all(
        [
            *(_mark_counts(others.lazy()) for others in parts),
            *(_groups(sums[f"maybe {name}"][0]) for name in columns),
        ]
    )
    result = {}
    for i, (name, others) in enumerate(zip(columns, parts, strict=True)):
        plain = int(row[f"plain {name}"])
        single = int(row[f"single_point {name}"])
        groups = shapes[len(columns) + i].row(0, named=True)
        marks = _marks(shapes[i].row(0, named=True), single, groups)
        result[name] = _Split(work[f"f {name}"] if plain else None, plain, others, marks)
    return result


def _full_split(texts: pl.DataFrame, name: str, marks: MarkCounts) -> _Split:
    """Every distinct entry of a column, for the full rules."""
    others = _parts(texts.lazy().select(pl.col(name).unique().alias("text")))
    return _Split(None, 0, others.collect(), marks)


def _units(read: pl.DataFrame, plain: int) -> tuple[tuple[str, ...], int]:
    """The distinct units (the most frequent spelling of each, case-insensitively) and the
    count of value entries without a unit (when there are units)."""
    spelled = (
        read.filter(pl.col("unit").is_not_null())
        .group_by("unit")
        .agg(pl.col("n").sum())
        .sort(["n", "unit"], descending=[True, False])
    )
    spellings: dict[str, str] = {}
    for spelling, _ in spelled.rows():
        spellings.setdefault(spelling.casefold(), spelling)
    if not spellings:
        return (), 0
    bare = read.filter(pl.col("value").is_not_null() & pl.col("unit").is_null())["n"].sum()
    return tuple(sorted(spellings.values())), plain + int(bare)


def _examples(read: pl.DataFrame, limit: int = 4) -> tuple[tuple[str, int], ...]:
    """The unparsed entries with their counts, most frequent first (ties in text order)."""
    unparsed = read.filter(pl.col("kind") == UNPARSED)
    rows = unparsed.sort(["n", "text"], descending=[True, False]).head(limit)
    return tuple((str(text), int(n)) for text, n in rows.select("text", "n").rows())


def _labels_as_text(read: pl.LazyFrame) -> pl.LazyFrame:
    """Ordinals (1st, 2nd, 3rd, 4th) and entries like 1A, 1B, 2A (a number and one letter
    that differs between entries of a column: plot or sample codes) are labels, not numbers
    in units or with a qualifier: read them as text. ``read`` holds the distinct entries of
    several columns, told apart by ``column``."""
    units = pl.col("unit").str.to_lowercase().drop_nulls()
    letters = ((units.n_unique() >= 2) & units.str.contains(r"^[a-z]$").all()).over("column")
    coded = pl.col("text").str.contains(_ORDINAL) | (letters & pl.col("unit").is_not_null())
    return read.with_columns(
        pl.when(coded).then(None).otherwise(pl.col("value")).alias("value"),
        pl.when(coded).then(UNPARSED).otherwise(pl.col("kind")).cast(pl.UInt8).alias("kind"),
        pl.when(coded).then(None).otherwise(pl.col("unit")).alias("unit"),
    )


def _reading(
    name: str, height: int, split: _Split, read: pl.DataFrame, mode: Mode, problem: str | None
) -> ColumnReading:
    """What reading a column found: from its distinct other entries as read, with how many
    times each occurs (``n``), and its plain numbers."""
    kinds = dict(read.group_by("kind").agg(pl.col("n").sum()).rows())
    counts = {kind: int(kinds.get(kind, 0)) for kind in range(7)}
    counts[NUMBER] += split.plain
    units, without_unit = _units(read, split.plain)
    return ColumnReading(
        name=name,
        entries=height - counts[MISSING],
        numbers=counts[NUMBER],
        censored=counts[CENSORED],
        censored_without_limit=counts[NO_LIMIT],
        above_range=counts[ABOVE],
        estimated=counts[ESTIMATED],
        unparsed=counts[UNPARSED],
        unparsed_examples=_examples(read) if counts[UNPARSED] else (),
        units=units,
        without_unit=without_unit,
        mode=mode,
        thousands=split.marks.thousands > 0,
        problem=problem,
    )


def _batches(
    sizes: Sequence[int], keys: Sequence[tuple[Mode, bool]]
) -> list[tuple[tuple[Mode, bool], list[int]]]:
    """The columns (by index) grouped by how they are read (``keys``), in batches of about
    ``_BATCH`` distinct entries (batches are read in parallel; a column is never split)."""
    batches = []
    for key in sorted(set(keys)):
        batch: list[int] = []
        size = 0
        for index in (i for i, each in enumerate(keys) if each == key):
            if batch and size + sizes[index] > _BATCH:
                batches.append((key, batch))
                batch, size = [], 0
            batch.append(index)
            size += sizes[index]
        batches.append((key, batch))
    return batches


def _read_others(
    splits: dict[str, _Split], modes: dict[str, tuple[Mode, str | None]]
) -> dict[str, pl.DataFrame]:
    """The distinct other entries of every column read by the full rules under the column's
    mode (``text``, ``value``, ``kind``, ``unit``)."""
    names = list(splits)
    keys = [(modes[name][0], modes[name][1] is not None) for name in names]
    queries = [
        _labels_as_text(
            pl.concat(
                splits[names[i]].others.with_columns(column=pl.lit(i, pl.UInt32)) for i in batch
            )
            .lazy()
            .select("column", "text", _entry(*key).alias("e"))
            .unnest("e")
        )
        for key, batch in _batches([s.others.height for s in splits.values()], keys)
    ]
    labelled = pl.concat(pl.collect_all(queries))
    groups = labelled.partition_by("column", as_dict=True, include_key=False)
    empty = labelled.drop("column").clear()
    return {name: groups.get((i,), empty) for i, name in enumerate(names)}


def _positions(
    texts: pl.DataFrame, splits: dict[str, _Split], reads: dict[str, pl.DataFrame]
) -> dict[str, pl.DataFrame]:
    """Per column: the rows of its other entries (``at``) and which of its distinct entries
    as read each is (``pos``), the columns joined in parallel."""
    queries = []
    for name, split in splits.items():
        rows = pl.DataFrame([texts[name].alias("text")]).with_row_index("at")
        if split.fast is not None:
            rows = rows.filter(split.fast.is_null())
        known = reads[name].select("text").with_row_index("pos")
        joined = rows.lazy().join(known.lazy(), on="text", how="left", nulls_equal=True)
        queries.append(joined.select("at", "pos"))
    return dict(zip(splits, pl.collect_all(queries), strict=True))


def _column(
    name: str, height: int, split: _Split, read: pl.DataFrame, found: pl.DataFrame
) -> tuple[pl.Series, pl.Series, pl.Series]:
    """A column's values, kinds and units per entry: a plain number is itself, the other
    entries (rows ``at``) are their distinct entries as read (rows ``pos`` of ``read``)."""
    at, pos = found["at"], found["pos"]
    if split.fast is None:
        value = pl.repeat(None, height, dtype=pl.Float64, eager=True)
    else:
        value = split.fast.clone()
    value = value.scatter(at, read["value"].gather(pos))
    kind = pl.repeat(NUMBER, height, dtype=pl.UInt8, eager=True)
    kind = kind.scatter(at, read["kind"].gather(pos))
    unit = pl.repeat(None, height, dtype=pl.String, eager=True)
    if read["unit"].null_count() < read.height:
        unit = unit.scatter(at, read["unit"].gather(pos))
    return value.alias(name), kind.alias(name), unit.alias(name)


def _read_parsed(
    texts: pl.DataFrame, splits: dict[str, _Split], decimal: Decimal | None, hint: bool
) -> dict[str, ParsedColumn]:
    """The columns read by the full rules: the distinct other entries of each are read, then
    mapped back onto its rows (plain numbers, read as themselves where the mode allows)."""
    if not splits:
        return {}
    splits = dict(splits)
    modes = {name: decide_mode(name, split.marks, decimal, hint) for name, split in splits.items()}
    for name, (mode, problem) in modes.items():
        if splits[name].fast is not None and mode == "comma" and problem is None:
            # 1.234 is 1234 with a decimal comma: no entry is read as it casts.
            splits[name] = _full_split(texts, name, splits[name].marks)
    reads = _read_others(splits, modes)
    positions = _positions(texts, splits, reads)
    result = {}
    for name, split in splits.items():
        found = positions[name]
        counts = np.bincount(found["pos"].to_numpy(), minlength=reads[name].height)
        read = reads[name].with_columns(n=pl.Series(counts, dtype=pl.Int64))
        value, kind, unit = _column(name, texts.height, split, read, found)
        reading = _reading(name, texts.height, split, read, *modes[name])
        result[name] = ParsedColumn(value, kind == CENSORED, reading, kind=kind, unit=unit)
    return result


def _plain(
    numbers: pl.DataFrame, columns: Sequence[str], counts: dict[str, tuple[int, int]]
) -> dict[str, ParsedColumn]:
    """Columns of plain numbers only (missing words read as null: none is a finite number)."""
    never = pl.repeat(False, numbers.height, dtype=pl.Boolean, eager=True)
    no_unit = pl.repeat(None, numbers.height, dtype=pl.String, eager=True)
    return {
        name: ParsedColumn(
            numbers[name],
            never.alias(name),
            ColumnReading(name, entries=counts[name][0], numbers=counts[name][0]),
            kind=numbers.select(
                pl.when(pl.col(name).is_null())
                .then(MISSING)
                .otherwise(NUMBER)
                .cast(pl.UInt8)
                .alias(name)
            ).to_series(),
            unit=no_unit.alias(name),
        )
        for name in columns
    }


def _doubtful_plain(texts: pl.DataFrame, plain: list[str]) -> list[str]:
    """The plain-number columns holding an entry like 1.234 (could be 1234 with a decimal
    comma): under a decimal-comma hint they are read by the full rules."""
    if not plain:
        return []
    flags = texts.select(
        pl.col(c).str.contains(_SHAPES["ambiguous_point"]).any() for c in plain
    ).row(0)
    return [c for c, flag in zip(plain, flags, strict=True) if flag]


def _shows_decimal_commas(marks: Iterable[MarkCounts]) -> bool:
    return any(m.comma_evidence > 0 and m.point_evidence == 0 for m in marks)


#: Columns read at a time: the working copies of a batch (trimmed text, casts, masks) are what
#: reading adds to the table's own memory.
READ_BATCH = 16


def read_columns(
    frame: pl.DataFrame,
    columns: Sequence[str],
    *,
    decimal: Decimal | None = None,
    comma_hint: bool = False,
) -> dict[str, ParsedColumn]:
    """Read the named text columns of ``frame`` as numbers by the module's rules.

    ``comma_hint`` says the file hints at decimal commas (it is separated by ``;``); a
    column that shows decimal commas gives the same hint for the others. A column that
    cannot be read for sure carries its reason in ``reading.problem`` (and mixed units in
    ``reading.unit_problem``); the caller refuses it only if it is used as an outcome.

    Columns are read ``READ_BATCH`` at a time; when a batch first shows decimal commas, the
    batches before it are read again under that hint, so every column is read as if all
    were read together."""
    batches = [list(columns[i : i + READ_BATCH]) for i in range(0, len(columns), READ_BATCH)]
    result: dict[str, ParsedColumn] = {}
    hint = comma_hint
    for index, batch in enumerate(batches):
        part, shows_commas = _read_batch(frame, batch, decimal, hint)
        if shows_commas and not hint:
            hint = True
            for earlier in batches[:index]:
                result |= _read_batch(frame, earlier, decimal, hint)[0]
        result |= part
    return {c: result[c] for c in columns}


def _read_batch(
    frame: pl.DataFrame, columns: Sequence[str], decimal: Decimal | None, comma_hint: bool
) -> tuple[dict[str, ParsedColumn], bool]:
    """Some columns read by the rules (``read_columns``), and whether one shows decimal
    commas."""
    texts = frame.select(text_of(c).alias(c) for c in columns)
    numbers = _numbers(texts)
    paired = _side_by_side(texts, numbers, columns)
    counts = _plain_counts(paired, columns)
    # Columns of plain numbers only take the fast path (unless decimal commas are forced).
    plain = [c for c in columns if decimal != "comma" and counts[c][0] == counts[c][1]]
    parsed = [c for c in columns if c not in plain]
    splits = _split(paired, parsed, decimal != "comma")
    shows_commas = _shows_decimal_commas(s.marks for s in splits.values())
    hint = comma_hint or shows_commas
    if hint and decimal is None:
        # Under a decimal-comma hint, 1.234 among plain numbers is read by the full rules.
        moved = _doubtful_plain(texts, plain)
        plain = [c for c in plain if c not in moved]
        splits |= _split(paired, moved, True)
    result = _plain(numbers, plain, counts) | _read_parsed(texts, splits, decimal, hint)
    return result, shows_commas
