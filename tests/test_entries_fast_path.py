"""The reader's shortcut for plain numbers gives what reading every entry by the rules gives.

``read_columns`` reads an entry that is a plain number (``3.4172``, ``-2``, ``1e5``) as its
own text cast to a number, reads each distinct other entry once, and maps the readings back
onto the rows. These checks compare it with a reference that takes no shortcut: every entry
of a column is read alone by the rules, then the column's figures are counted in Python.

Each check names what it is checked against, beside it:

- **The documented rules**: the ``foldsift.stats.entries`` module docstring (missing words,
  below-detection codes, comparison signs, units, percentages, labels, the decimal mark and
  its hints), which ``_reference`` below follows entry by entry.
- **Qualifier codes**: ``U``/``UJ``/``ND`` after a number for "not detected at this limit"
  and ``J`` for "estimated" are the usual laboratory data-validation codes (common practice,
  from memory), as the module docstring reads them.
"""

from __future__ import annotations

import random
import re
from collections import Counter
from dataclasses import astuple
from typing import Any

import polars as pl
import pytest
from polars.testing import assert_series_equal

from foldsift.stats import entries
from foldsift.stats.entries import (
    ABOVE,
    BELOW_WORDS,
    CENSORED,
    ESTIMATED,
    MISSING,
    MISSING_WORDS,
    NO_LIMIT,
    NUMBER,
    UNPARSED,
    ColumnReading,
    MarkCounts,
    decide_mode,
    read_columns,
)

# -- the reference: every entry read alone --------------------------------------------------


def _strip(frame: pl.DataFrame, name: str) -> pl.Series:
    return frame[name].cast(pl.String).str.strip_chars()


def _missing(text: str | None) -> bool:
    return text is None or text.lower() in MISSING_WORDS


def _plain_only(texts: pl.Series) -> bool:
    """Every entry that is not missing casts to a finite number."""
    numbers = texts.cast(pl.Float64, strict=False)
    return all(
        _missing(text) or (number is not None and abs(number) < float("inf"))
        for text, number in zip(texts.to_list(), numbers.to_list(), strict=True)
    )


def _shapes(texts: pl.Series) -> MarkCounts:
    """The shapes of every entry's number part (one count per entry, not per spelling)."""
    num = pl.col("p").struct.field("num")
    parts = pl.DataFrame({"text": texts}).with_columns(
        pl.col("text").str.extract_groups(entries._ENTRY).alias("p")
    )
    counts = parts.select(
        num.str.contains(pattern).sum().alias(shape) for shape, pattern in entries._SHAPES.items()
    ).row(0, named=True)
    examples = {}
    for mark in ("comma", "point"):
        ambiguous = num.filter(num.str.contains(entries._SHAPES[f"ambiguous_{mark}"]))
        examples[mark] = parts.select(ambiguous.min()).item()
    return MarkCounts(counts, examples["comma"], examples["point"])


def _every_entry(texts: pl.Series, mode: Any, undecided: bool) -> list[tuple[Any, int, Any]]:
    """(value, kind, unit) of each entry, each read by the rules on its own row."""
    read = (
        pl.DataFrame({"text": texts})
        .with_columns(pl.col("text").str.extract_groups(entries._ENTRY).alias("p"))
        .select(entries._entry(mode, undecided).alias("e"))
        .unnest("e")
    )
    rows = list(zip(read["value"], read["kind"], read["unit"], strict=True))
    # Labels: ordinals, and a number with one letter that differs between entries.
    letters = {u.lower() for _, _, u in rows if u is not None}
    coded = len(letters) >= 2 and all(re.fullmatch("[a-z]", u) for u in letters)
    ordinal = re.compile(entries._ORDINAL)
    return [
        (None, UNPARSED, None)
        if (text is not None and ordinal.match(text)) or (coded and unit is not None)
        else (value, kind, unit)
        for text, (value, kind, unit) in zip(texts.to_list(), rows, strict=True)
    ]


def _counted(
    name: str, texts: pl.Series, rows: list[tuple[Any, int, Any]], **how: Any
) -> ColumnReading:
    """The column's figures counted over its entries, one by one."""
    kinds = Counter(kind for _, kind, _ in rows)
    spellings: dict[str, str] = {}
    by_count = sorted(Counter(u for _, _, u in rows if u is not None).items(), key=_order)
    for spelling, _ in by_count:
        spellings.setdefault(spelling.casefold(), spelling)
    unparsed = Counter(
        t for t, (_, kind, _) in zip(texts.to_list(), rows, strict=True) if kind == UNPARSED
    )
    return ColumnReading(
        name=name,
        entries=len(rows) - kinds[MISSING],
        numbers=kinds[NUMBER],
        censored=kinds[CENSORED],
        censored_without_limit=kinds[NO_LIMIT],
        above_range=kinds[ABOVE],
        estimated=kinds[ESTIMATED],
        unparsed=kinds[UNPARSED],
        unparsed_examples=tuple(sorted(unparsed.items(), key=_order)[:4]),
        units=tuple(sorted(spellings.values())),
        without_unit=sum(v is not None and u is None for v, _, u in rows) if spellings else 0,
        **how,
    )


def _order(item: tuple[str, int]) -> tuple[int, str]:
    return -item[1], item[0]


def _reference(frame: pl.DataFrame, decimal: Any, comma_hint: bool) -> dict[str, Any]:
    """Per column: (values, kinds, units, reading), every entry read alone by the rules.

    As the module docstring says: a column whose entries all cast to numbers (or are
    missing) is read as numbers, and 1.234 in it is doubtful only when the file hints at
    decimal commas (``comma_hint``, or another column shows decimal commas); every other
    column is read by the full rules, entry by entry, under the decimal mark its entries
    decide, its labels (1A, 1B) told by the units of all its entries."""
    texts = {name: _strip(frame, name) for name in frame.columns}
    plain = {n for n, t in texts.items() if decimal != "comma" and _plain_only(t)}
    shapes = {n: _shapes(t) for n, t in texts.items()}
    shown = any(
        s.comma_evidence > 0 and s.point_evidence == 0 for n, s in shapes.items() if n not in plain
    )
    hint = comma_hint or shown
    if hint and decimal is None:
        plain -= {
            n for n in plain if texts[n].str.contains(entries._SHAPES["ambiguous_point"]).any()
        }
    result = {}
    for name, text in texts.items():
        if name in plain:
            number = text.cast(pl.Float64, strict=False).to_list()
            rows = [
                (None, MISSING, None) if _missing(t) else (v, NUMBER, None)
                for t, v in zip(text, number, strict=True)
            ]
            reading = _counted(name, text, rows)
        else:
            mode, problem = decide_mode(name, shapes[name], decimal, hint)
            rows = _every_entry(text, mode, problem is not None)
            how = {"mode": mode, "thousands": shapes[name].thousands > 0, "problem": problem}
            reading = _counted(name, text, rows, **how)
        result[name] = ([r[0] for r in rows], [r[1] for r in rows], [r[2] for r in rows], reading)
    return result


def _assert_same(frame: pl.DataFrame, decimal: Any = None, comma_hint: bool = False) -> None:
    got = read_columns(frame, frame.columns, decimal=decimal, comma_hint=comma_hint)
    want = _reference(frame, decimal, comma_hint)
    for name in frame.columns:
        values, kinds, units, reading = want[name]
        column = got[name]
        context = f"{name} {frame[name].to_list()} decimal={decimal} hint={comma_hint}"
        assert astuple(column.reading) == astuple(reading), context
        assert_series_equal(column.value, pl.Series(name, values, pl.Float64), check_exact=True)
        # (a column of plain numbers only names its kinds "literal": only the kinds are compared)
        assert_series_equal(column.kind, pl.Series(name, kinds, pl.UInt8), check_names=False)
        assert_series_equal(column.unit, pl.Series(name, units, pl.String))
        flags = pl.Series(name, [kind == CENSORED for kind in kinds])
        assert_series_equal(column.censored, flags)


# -- the documented rules, written out --------------------------------------------------------


def test_a_mixed_column_reads_as_the_documented_rules_say():
    """Module docstring: a number with ``<`` is censored at it, qualifiers U/UJ/ND censor and
    J is used as estimated (laboratory data-validation codes), ``>`` is kept and counted,
    below-detection words carry no limit, missing words are null; the plain numbers among
    them are read as themselves."""
    cells = [
        "12.5",
        "<0.5",
        "0.5 U",
        "0.25 UJ",
        "0.4 ND",
        "0.7 J",
        ">1500",
        "ND",
        "NA",
        "-3",
        "1e2",
    ]
    column = read_columns(pl.DataFrame({"lead": cells}), ["lead"])["lead"]
    assert column.value.to_list() == [12.5, 0.5, 0.5, 0.25, 0.4, 0.7, 1500, None, None, -3, 100]
    kinds = [NUMBER, CENSORED, CENSORED, CENSORED, CENSORED, ESTIMATED, ABOVE, NO_LIMIT]
    assert column.kind is not None
    assert column.kind.to_list() == [*kinds, MISSING, NUMBER, NUMBER]
    assert column.censored.to_list() == [k == CENSORED for k in [*kinds, MISSING, NUMBER, NUMBER]]
    reading = column.reading
    assert (reading.entries, reading.numbers, reading.censored) == (10, 3, 4)
    assert (reading.censored_without_limit, reading.above_range, reading.estimated) == (1, 1, 1)
    _assert_same(pl.DataFrame({"lead": cells}))


def test_units_and_percentages_among_plain_numbers():
    """Module docstring: a unit in the cell is noted and the bare numbers are taken to be in
    it too; ``15%`` is read as 15."""
    frame = pl.DataFrame(
        {
            "zinc": ["12.5 mg/kg", "3.25", "<1 mg/kg", "7", "8.5 mg/kg"],
            "cover": ["15%", "20", "7.5%", "NA", "3"],
        }
    )
    got = read_columns(frame, frame.columns)
    assert got["zinc"].value.to_list() == [12.5, 3.25, 1, 7, 8.5]
    assert (got["zinc"].reading.units, got["zinc"].reading.without_unit) == (("mg/kg",), 2)
    assert got["cover"].value.to_list() == [15, 20, 7.5, None, 3]
    assert got["cover"].reading.units == ("%",)
    _assert_same(frame)


def test_decimal_commas_refuse_the_shortcut():
    """Module docstring: with a decimal comma (``12,5``, or ``--decimal comma``) points
    separate thousands, so ``1.234`` is 1234, although it casts to 1.234."""
    frame = pl.DataFrame({"iron": ["1.234", "12,5", "<0,5", "7", "2.345.678"]})
    column = read_columns(frame, ["iron"])["iron"]
    assert column.reading.mode == "comma"
    assert column.value.to_list() == [1234, 12.5, 0.5, 7, 2345678]
    _assert_same(frame)
    forced = pl.DataFrame({"iron": ["1.234", "3", "<2"]})
    assert read_columns(forced, ["iron"], decimal="comma")["iron"].value.to_list() == [1234, 3, 2]
    _assert_same(forced, decimal="comma")


def test_both_marks_among_plain_numbers():
    """Module docstring: when both marks are shown to be decimal marks and no entry uses a
    thousands separator or could be read both ways, both are read as decimal marks."""
    frame = pl.DataFrame({"tin": ["12,5", "3.75", "<0,5", "4", "-1.5e2"]})
    column = read_columns(frame, ["tin"])["tin"]
    assert column.reading.mode == "both"
    assert column.value.to_list() == [12.5, 3.75, 0.5, 4, -150]
    _assert_same(frame)


def test_one_comma_before_three_digits_and_the_hint_for_1_234():
    """Module docstring: ``1,234`` alone could be 1.234 or 1234 (the column is refused);
    ``1.234`` is read with a decimal point unless the file hints at decimal commas."""
    frame = pl.DataFrame(
        {"a": ["1,234", "5", "<1"], "b": ["1.234", "5", "<1"], "c": ["-123.456", "5", "<1"]}
    )
    got = read_columns(frame, frame.columns)
    assert got["a"].reading.problem is not None and "--decimal" in got["a"].reading.problem
    assert got["b"].reading.problem is None and got["b"].value.to_list() == [1.234, 5, 1]
    hinted = read_columns(frame, frame.columns, comma_hint=True)
    assert hinted["b"].reading.problem is not None and "'1.234'" in hinted["b"].reading.problem
    assert hinted["c"].reading.problem is not None and "'-123.456'" in hinted["c"].reading.problem
    for hint in (False, True):
        _assert_same(frame, comma_hint=hint)


def test_labels_exponents_and_signs():
    """Module docstring: ordinals and codes like 1A/1B are labels (text), while exponents
    and signs are part of a number; ``5.`` and ``1.e3`` are not read as numbers by the full
    rules (a point needs digits after it in a number part)."""
    frame = pl.DataFrame(
        {
            "plot": ["1A", "1B", "2A", "3", "4.5", "NA"],
            "rank": ["1st", "2nd", "3", "4th", "<1", "6"],
            "odd": ["5.", "1.e3", "+.5", "-2.5E-3", "<1", "1E+2"],
            # Three digits after the point, then an exponent: the shape of point groups.
            "groups": ["1.234e5", "ND", "2", "3.5", "-12.345E-2", "7"],
        }
    )
    got = read_columns(frame, frame.columns)
    assert got["plot"].reading.unparsed == 3 and got["plot"].value.to_list()[3:] == [3, 4.5, None]
    assert got["rank"].reading.unparsed == 3
    assert got["odd"].value.to_list() == [None, None, 0.5, -0.0025, 1, 100]
    _assert_same(frame)


# -- generated columns -------------------------------------------------------------------------

#: Entries of every kind the module docstring names, and some it does not.
SPELLINGS = [
    *("12.5", "3.4172", "0.125", "-3.2", "+5", ".5", "-.5", "00.5", "-0", "99", "2.50"),
    *("1e5", "1E-3", "1.234e5", "12.345", "123.456", "1.234", "5.", "5.e3", "1.", "inf", "1e400"),
    *("<0.5", "< 0.5", "<=0.5", "≤0.2", "<-1", "0.5U", "0.5 U", "0.5 UJ", "0.5 ND", "0.5 u"),
    *("0.5 J", "3 j", ">1500", ">=1500", "≥9", "ND", "n.d.", "BDL", "<LOD", "not detected"),
    *("12.5 mg/kg", "12.5mg/L", "12.5 MG/KG", "7 µg/L", "7 μg/L", "$12", "€3", "15%", "12.5 %"),
    *("1st", "2nd", "1A", "1B", "2A", "NA", "n/a", "", "-", ".", "missing", "None", "abc"),
    *("1,234", "12,5", "1.234,5", "1,234.5", "1 234", "1\u00a0234,5", "0,125", ",5", "12,5 mg/kg"),
    *("1.234.567", "1,234,567", " 4.5 ", "\t<2 "),
]


def _number(rng: random.Random, digits: list[str], comma: float) -> str:
    """A number as an export writes it (``digits``: the formats it uses), with a decimal
    comma at the rate ``comma``."""
    value = rng.lognormvariate(1, 1.5) * rng.choice([1, 1, 1, -1])
    text = format(value, rng.choice(digits))
    return text.replace(".", ",") if rng.random() < comma else text


def _column(rng: random.Random, rows: int) -> list[str | None]:
    """Mostly numbers with a few spellings mixed in, as a laboratory export has."""
    pool = [rng.choice([*SPELLINGS, None]) for _ in range(rng.randint(1, 4))]
    share = rng.choice([0.0, 0.05, 0.3, 0.9])
    digits = rng.sample([".4f", ".3f", ".1f", ".0f", ".2e"], rng.randint(1, 3))
    comma = rng.choice([0.0, 0.0, 0.1, 1.0])
    return [
        rng.choice(pool) if rng.random() < share else _number(rng, digits, comma)
        for _ in range(rows)
    ]


@pytest.mark.parametrize("seed", range(8))
def test_generated_columns_match_reading_every_entry(seed):
    """Tables of several columns, each mostly plain numbers with other spellings among them,
    read by ``read_columns`` and by the reference (every entry alone, by the documented
    rules), under each decimal setting and with and without the hint."""
    rng = random.Random(seed)
    for _ in range(4):
        rows = rng.choice([1, 3, 40, 400])
        frame = pl.DataFrame(
            {
                f"c{j}": pl.Series(_column(rng, rows), dtype=pl.String)
                for j in range(rng.randint(1, 4))
            }
        )
        for decimal in (None, "point", "comma"):
            for hint in (False, True):
                _assert_same(frame, decimal, hint)


def test_below_detection_and_missing_words_in_any_case():
    """Module docstring: the words are compared case-insensitively, among plain numbers."""
    below = [w.upper() for w in BELOW_WORDS]
    missing = [w.title() for w in MISSING_WORDS]
    frame = pl.DataFrame({"x": ["1.5", *below, *missing, "2"]})
    column = read_columns(frame, ["x"])["x"]
    assert column.kind is not None
    kinds = [NUMBER] + [NO_LIMIT] * len(below) + [MISSING] * len(missing) + [NUMBER]
    assert column.kind.to_list() == kinds
    assert column.reading.censored_without_limit == len(below)
    _assert_same(frame)


@pytest.mark.parametrize("batch", [1, 3, 16])
def test_columns_read_in_batches_as_if_read_together(monkeypatch, batch):
    """Columns are read a batch at a time; a column that shows decimal commas in a later
    batch still makes ``1.234`` in an earlier one doubtful (the documented hint), exactly as
    when every column is read at once. Against the entry-by-entry reference."""
    columns: dict[str, list[str | None]] = {
        f"p{j:02d}": [f"{j + 1}.{k}5" for k in range(6)] for j in range(20)
    }
    columns["p03"] = ["1.234", "2.5", "3.75", "<0.5", "4.1", "5"]  # could be 1234 under commas
    columns["p07"] = ["1.234", "2.345", "3.456", "4.567", "5.678", "6.789"]  # only ambiguous
    columns["z_last"] = ["12,5", "13,25", "<0,5", "14,75", "1,5", "2,25"]  # decimal commas
    frame = pl.DataFrame(columns)
    monkeypatch.setattr(entries, "READ_BATCH", batch)
    _assert_same(frame)
    together = read_columns(frame, frame.columns)
    assert together["p07"].reading.problem is not None  # doubtful under the commas' hint
    assert together["z_last"].reading.mode == "comma"
