"""Odd and hostile input files: each is read right, or refused in one line that names the
file or column and what to do (exit status 2) — never a wrong answer in silence, a
traceback or a hang.

Test data is small invented text written in each test. The rule each test checks and its
source are named beside it:

- CSV quoting: RFC 4180 §2 (fields with separators, quotes or line breaks are enclosed in
  double quotes; a quote inside is doubled).
- Encodings: the Unicode Standard, ch. 3 (well-formed UTF-8 byte sequences, Table 3-7); the
  UTF-8 and UTF-16 byte-order marks (EF BB BF; FF FE / FE FF); Windows-1252 as the WHATWG
  Encoding Standard defines it (the label "latin1" maps to it; bytes 81 8D 8F 90 9D are
  undefined in Python's strict cp1252 codec). From memory.
- Decimal marks: the SI Brochure (9th ed., §5.4.4) and ISO 80000-1 allow the point or the
  comma as decimal marker, and group digits in threes; locales group with a point, a comma
  or a space (Unicode CLDR number symbols). From memory.
- Laboratory codes: the US EPA Contract Laboratory Program National Functional Guidelines
  data qualifiers (U: not detected at the reported limit; J: estimated; UJ: not detected,
  limit estimated) and the usual "ND"/"<LOD" spellings of below-detection results. From
  memory.
- The ``sep=`` first line: common practice of spreadsheet programs, which write it so that
  the file opens with its separator in any locale (from memory).
- Missing markers (NA, n/a, null, -, ., missing, empty): common practice.
- Named pipes: POSIX ``open()`` of a FIFO for reading blocks until a writer opens it, and a
  second open after the writer has gone blocks again (POSIX.1-2017, open(); from memory).
- Parquet nested columns: polars documentation of the List and Struct data types.
- Pairs of levels: k levels give k(k-1)/2 unordered pairs, or k-1 against one reference
  (common combinatorics).
"""

from __future__ import annotations

import codecs
import hashlib
import os
import threading
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from foldsift.stats import load, textfile
from foldsift.stats.load import InputError
from foldsift.stats.scan import ScanSettings, run_scan
from foldsift.tui.cli import main

EXIT_BAD_INPUT = 2


def _file(tmp_path: Path, name: str, content: str | bytes) -> Path:
    path = tmp_path / name
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    return path


def _one_line_failure(code: int, captured: pytest.CaptureResult[str], *names: str) -> str:
    """Exit 2, nothing on stdout, one stderr line starting 'foldsift:' naming all of names."""
    assert code == EXIT_BAD_INPUT, captured.err
    assert captured.out == ""
    lines = [line for line in captured.err.splitlines() if line.strip()]
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("foldsift: ")
    assert "Traceback" not in captured.err
    for name in names:
        assert name in lines[0], (name, lines[0])
    return lines[0]


def _values(table: load.Table, outcome: str) -> list[float | None]:
    return table.frame[outcome].to_list()


# -- 1. mostly-numeric columns are outcomes; codes, units, percentages --------------------


def test_a_quarter_nd_entries_keep_the_column_an_outcome(tmp_path):
    """US EPA qualifier usage (from memory): ND is "not detected" with no number, so it is
    censored with no known limit, left out and counted; it does not make the column a
    grouping. `<0.5` is censored at its limit 0.5."""
    rows = ["site,copper"] + [
        f"{s},{v}"
        for s, v in zip(
            "aaaabbbb", ["1.2", "ND", "2.5", "3.1", "4.5", "<0.5", "ND", "6.1"], strict=True
        )
    ]
    table = load.load_table(_file(tmp_path, "cu.csv", "\n".join(rows) + "\n"))
    assert table.groupings == ("site",)
    assert table.outcomes == ("copper",)
    assert _values(table, "copper") == [1.2, None, 2.5, 3.1, 4.5, 0.5, None, 6.1]
    assert table.frame[table.names.censored("copper")].to_list() == [
        False, False, False, False, False, True, False, False,
    ]  # fmt: skip
    reading = table.readings["copper"]
    assert reading.censored_without_limit == 2 and reading.censored == 1
    assert reading.unparsed == 0
    assert any("2 entries below detection without a limit" in n for n in table.notes)


@pytest.mark.parametrize(
    "entry",
    ["<0.5", "< 0.5", "<=0.5", "≤0.5", "0.5U", "0.5 U", "0.5 u", "0.5 UJ", "0.5 ND", "<0,5"],
)
def test_below_detection_with_a_limit_is_censored_at_that_limit(entry):
    """`<x` means below the limit x; qualifier U (or UJ) after a number means "not detected
    at this limit" (US EPA CLP National Functional Guidelines, from memory): censored at 0.5.
    `<0,5` is the same with a decimal comma (SI Brochure §5.4.4)."""
    frame = pl.DataFrame({"site": list("aabb"), "lead": [entry, "1,5", "2,5", "3,5"]})
    table = load.load_table(frame=frame)
    assert table.frame["lead"][0] == 0.5
    assert table.frame[table.names.censored("lead")][0] is True


@pytest.mark.parametrize(
    "entry", ["ND", "n.d.", "N.D.", "<LOQ", "<LOD", "< RL", "BDL", "not detected"]
)
def test_below_detection_without_a_number_is_left_out_and_counted(entry):
    """Below-detection spellings with no limit (common laboratory usage, from memory): no
    value, counted as below detection without a limit, and not unparsed."""
    frame = pl.DataFrame(
        {"site": list("aaabbb"), "zinc": [entry, "1.5", "2.5", "3.5", entry, "4.5"]}
    )
    table = load.load_table(frame=frame)
    assert table.outcomes == ("zinc",)
    assert _values(table, "zinc") == [None, 1.5, 2.5, 3.5, None, 4.5]
    assert table.readings["zinc"].censored_without_limit == 2
    assert table.unparsed == {}


def test_estimated_and_above_range_entries_are_kept_and_counted():
    """J = estimated (US EPA qualifiers, from memory): the value is used and counted. `>1500`
    is above the measuring range: the number is kept (a lower bound), it is not
    censored-below, and it is counted with a note."""
    frame = pl.DataFrame(
        {"site": list("aaabbb"), "iron": ["12 J", "14", ">1500", "20", "22", "0.5J"]}
    )
    table = load.load_table(frame=frame)
    assert _values(table, "iron") == [12.0, 14.0, 1500.0, 20.0, 22.0, 0.5]
    assert not table.frame[table.names.censored("iron")].any()
    reading = table.readings["iron"]
    assert (reading.estimated, reading.above_range) == (2, 1)
    assert any("above the measuring range" in n for n in table.notes)


def test_units_in_cells_are_read_and_noted(tmp_path):
    """A number followed by its unit is that number (common practice in laboratory
    exports); the note names the unit."""
    text = "site,cadmium\na,12.5 mg/kg\na,13mg/kg\na,<0.5 mg/kg\nb,20.1 mg/kg\nb, 22 MG/KG\nb,19\n"
    table = load.load_table(_file(tmp_path, "cd.csv", text))
    assert _values(table, "cadmium") == [12.5, 13.0, 0.5, 20.1, 22.0, 19.0]
    assert table.readings["cadmium"].units == ("mg/kg",)  # spelling case does not matter
    assert any("unit mg/kg" in n and "1 entry without a unit" in n for n in table.notes)


def test_mixed_units_in_one_column_are_refused(tmp_path, capsys):
    """Values in mg/L and µg/L differ 1000-fold; comparing them unconverted is wrong, so the
    column is refused, naming it and the units found."""
    text = "site,nitrate\na,12.5 mg/L\na,3.1 ug/L\nb,14.2 mg/L\nb,15.7 mg/L\n"
    path = _file(tmp_path, "no3.csv", text)
    code = main(["scan", str(path)])
    line = _one_line_failure(code, capsys.readouterr(), "no3.csv", "'nitrate'", "mg/L", "ug/L")
    assert "--outcome" in line


def test_percentages_are_read_as_numbers_with_a_note():
    """`15%` is the number 15 in percent (common practice); the note says so."""
    frame = pl.DataFrame({"arm": list("aabb"), "hba1c": ["5.5%", "6.1 %", "7.0%", "7.4%"]})
    table = load.load_table(frame=frame)
    assert _values(table, "hba1c") == [5.5, 6.1, 7.0, 7.4]
    assert any("percentages" in n for n in table.notes)


def test_unreadable_entries_are_counted_and_named_not_a_reason_for_a_grouping(tmp_path):
    """A column of numbers with 25% entries nobody can read ('see note', 'lost') is still an
    outcome (mostly numbers); the entries are counted and their spellings named."""
    values = ["1.2", "see note", "2.5", "3.1", "4.5", "lost", "5.2", "6.1"]
    text = "site,copper\n" + "".join(f"{s},{v}\n" for s, v in zip("aaaabbbb", values, strict=True))
    table = load.load_table(_file(tmp_path, "cu.csv", text))
    assert table.outcomes == ("copper",) and table.groupings == ("site",)
    assert table.unparsed == {"copper": 2}
    assert table.readings["copper"].unparsed_examples == (("lost", 1), ("see note", 1))
    assert any("'see note' (1)" in n and "'lost' (1)" in n for n in table.notes)


def test_labels_that_start_with_a_number_stay_groupings():
    """Plot codes (1A, 1B), ordinals (1st, 2nd, 3rd) and a few dose levels with a unit
    (10 mg) are labels (common practice), as they were before units and qualifiers were
    read: the new rules must not turn them into measurements (nor 2nd into "2, not
    detected")."""
    frame = pl.DataFrame(
        {
            "plot": ["1A", "1B", "2A", "2B"] * 2,
            "visit": ["1st", "2nd", "3rd", "2nd"] * 2,
            "dose": ["10 mg", "20 mg", "40 mg", "10 mg"] * 2,
            "lead": ["1.5", "2.5", "3.5", "4.5", "1.1", "2.2", "3.3", "4.4"],
        }
    )
    table = load.load_table(frame=frame)
    assert table.groupings == ("plot", "visit", "dose")
    assert table.outcomes == ("lead",)
    assert set(table.frame["visit"].to_list()) == {"1st", "2nd", "3rd"}


def test_command_line_prints_the_notes(tmp_path, capsys):
    text = "site,copper\na,1.2\na,ND\na,2.5\nb,4.5\nb,5.5 J\nb,6.1\n"
    code = main(["scan", str(_file(tmp_path, "cu.csv", text))])
    err = capsys.readouterr().err
    assert code == 0
    assert "foldsift: note: copper: 1 entry below detection without a limit" in err
    assert "foldsift: note: copper: 1 entry marked J (estimated)" in err


# -- 2. decimal comma or thousands separator, per column ----------------------------------


def test_thousands_commas_with_a_decimal_point_elsewhere_in_the_column(tmp_path):
    """Tab-separated, `1,234` beside `12.5`: the point is the decimal mark in this column, so
    the comma groups thousands (SI Brochure §5.4.4; CLDR grouping). Never 1.234 beside 980."""
    text = "site\tzinc\na\t1,234\na\t980\na\t12.5\nb\t1,500\nb\t870\nb\t2,010.5\n"
    table = load.load_table(_file(tmp_path, "zn.tsv", text))
    assert _values(table, "zinc") == [1234.0, 980.0, 12.5, 1500.0, 870.0, 2010.5]
    assert any("separate thousands" in n for n in table.notes)


def test_decimal_commas_decided_from_the_column_in_a_comma_separated_file(tmp_path):
    """Quoted fields keep their commas (RFC 4180 §2.6). `"12,5"` (one comma, two digits
    after it) shows a decimal comma, so `"1,234"` in the same column is 1.234 and 980 is
    980."""
    text = 'site,lead\na,"12,5"\na,"1,234"\na,980\nb,"3,75"\nb,"4,5"\nb,2\n'
    table = load.load_table(_file(tmp_path, "pb.csv", text))
    assert _values(table, "lead") == [12.5, 1.234, 980.0, 3.75, 4.5, 2.0]


def test_quoted_numbers_with_thousands_and_decimal_point(tmp_path):
    """`"1,234.5"` (RFC 4180 quoting; comma groups, point decimal) is 1234.5."""
    text = 'site,cost\na,"1,234.5"\na,"2,000.25"\na,980\nb,"12,345,678"\nb,15.5\nb,7\n'
    table = load.load_table(_file(tmp_path, "cost.csv", text))
    assert _values(table, "cost") == [1234.5, 2000.25, 980.0, 12345678.0, 15.5, 7.0]


def test_points_between_thousands_and_spaces_with_a_decimal_comma(tmp_path):
    """`1.234,5` and `1 234,5` (CLDR: point or space grouping with a decimal comma)."""
    text = "site;mass\na;1.234,5\na;1 234,5\na;2\nb;12,25\nb;3.000.000,5\nb;0,5\n"
    table = load.load_table(_file(tmp_path, "mass.csv", text))
    assert _values(table, "mass") == [1234.5, 1234.5, 2.0, 12.25, 3000000.5, 0.5]


def test_a_column_that_could_be_read_both_ways_is_refused(tmp_path, capsys):
    """`1,234`, `980`, `1,500`: every comma has exactly three digits after it and nothing
    else decides, so it could be 1.234 or 1234: refused, naming the column and --decimal."""
    text = "site\tzinc\na\t1,234\na\t980\nb\t1,500\nb\t870\n"
    path = _file(tmp_path, "zn.tsv", text)
    code = main(["scan", str(path)])
    line = _one_line_failure(code, capsys.readouterr(), "zn.tsv", "'zinc'", "--decimal")
    assert "1.234 or 1234" in line


@pytest.mark.parametrize(("mark", "expected"), [("point", 1234.0), ("comma", 1.234)])
def test_the_decimal_option_settles_an_open_column(tmp_path, mark, expected):
    text = "site\tzinc\na\t1,234\na\t980\nb\t1,500\nb\t870\n"
    path = _file(tmp_path, "zn.tsv", text)
    table = load.load_table(path, reading=load.ReadOptions(decimal=mark))
    assert _values(table, "zinc")[0] == pytest.approx(expected)


def test_the_decimal_option_reaches_the_command_line(tmp_path, capsys):
    text = "site\tzinc\na\t1,234\na\t980\nb\t1,500\nb\t870\n"
    path = _file(tmp_path, "zn.tsv", text)
    assert main(["scan", str(path), "--decimal", "point"]) == 0
    row = pl.read_csv(capsys.readouterr().out.encode()).row(0, named=True)
    assert (row["median_a"], row["median_b"]) == (1107.0, 1185.0)  # (1234+980)/2, (1500+870)/2


def test_three_decimals_in_a_decimal_comma_file_are_refused(tmp_path, capsys):
    """In a `;`-separated file whose other column uses decimal commas, `1.250` could be
    1.25 or 1250 (point grouping with a decimal comma, CLDR): refused, not guessed."""
    text = "site;lead;iron\na;1,5;1.250\na;2,5;2.500\nb;3,5;1.750\nb;4,5;3.125\n"
    path = _file(tmp_path, "fe.csv", text)
    code = main(["scan", str(path)])
    _one_line_failure(code, capsys.readouterr(), "fe.csv", "'iron'", "--decimal")


# -- 3. encodings ------------------------------------------------------------------------


def _names_csv(encoding: str) -> bytes:
    rows = ["name,v", "Müller,1.5", "Müller,2.5", "Möller,3.5", "Möller,4.5"]
    return ("\r\n".join(rows) + "\r\n").encode(encoding)


def test_windows_1252_names_stay_distinct(tmp_path):
    """ü (FC) and ö (F6) are single bytes in Windows-1252, invalid as UTF-8 (Unicode ch. 3):
    the file is read as Windows-1252, so Müller and Möller stay two levels; a note says so."""
    path = _file(tmp_path, "names.csv", _names_csv("cp1252"))
    table = load.load_table(path)
    assert sorted(set(table.frame["name"].to_list())) == ["Möller", "Müller"]
    assert any("Windows-1252" in n for n in table.notes)


@pytest.mark.parametrize("encoding", ["utf-8-sig", "utf-16"])
def test_byte_order_marks_are_honoured(tmp_path, encoding):
    """UTF-8 with a byte-order mark (EF BB BF) and UTF-16 with one (FF FE): the first column
    is named 'name', not '\\ufeffname', and the names are intact."""
    table = load.load_table(_file(tmp_path, "names.csv", _names_csv(encoding)))
    assert table.groupings == ("name",)
    assert sorted(set(table.frame["name"].to_list())) == ["Möller", "Müller"]


def test_the_encoding_option_reads_another_encoding(tmp_path):
    """Cyrillic in Windows-1251 is read right when named (Python codec cp1251)."""
    text = "район,v\nСевер,1.5\nСевер,2.5\nЮг,3.5\nЮг,4.5\n"
    path = _file(tmp_path, "ru.csv", text.encode("cp1251"))
    table = load.load_table(path, reading=load.ReadOptions(encoding="cp1251"))
    assert table.groupings == ("район",)
    assert sorted(set(table.frame["район"].to_list())) == ["Север", "Юг"]


def test_utf8_mixed_with_other_bytes_is_refused(tmp_path, capsys):
    """A file with both a valid UTF-8 ü (C3 BC) and a lone Windows-1252 ü (FC) cannot be read
    in one encoding without the same name becoming two levels: refused, naming the line."""
    content = "name,v\nMüller,1.5\n".encode() + "Müller,2.5\nMöller,3.5\nMöller,4.5\n".encode(
        "cp1252"
    )
    code = main(["scan", str(_file(tmp_path, "mixed.csv", content))])
    _one_line_failure(code, capsys.readouterr(), "mixed.csv", "line 3", "--encoding")


def test_bytes_neither_utf8_nor_windows_1252_are_refused(tmp_path, capsys):
    """Byte 81 is undefined in Windows-1252 (strict) and invalid in UTF-8: refused."""
    content = b"name,v\nM\x81ller,1.5\nM\x81ller,2.5\nX,3.5\nX,4.5\n"
    code = main(["scan", str(_file(tmp_path, "odd.csv", content))])
    _one_line_failure(code, capsys.readouterr(), "odd.csv", "0x81", "--encoding")


def test_a_wrong_encoding_given_is_refused_not_replaced(tmp_path, capsys):
    """--encoding utf-8 on a Windows-1252 file: strict decoding fails on byte FC, line 2."""
    path = _file(tmp_path, "names.csv", _names_csv("cp1252"))
    code = main(["scan", str(path), "--encoding", "utf-8"])
    _one_line_failure(code, capsys.readouterr(), "names.csv", "line 2", "0xfc", "--encoding")


def test_an_unknown_encoding_name_is_refused(tmp_path, capsys):
    path = _file(tmp_path, "names.csv", _names_csv("utf-8"))
    code = main(["scan", str(path), "--encoding", "klingon-8"])
    _one_line_failure(code, capsys.readouterr(), "klingon-8")


# -- 4. missing markers are not levels ----------------------------------------------------


def test_missing_markers_are_no_level_and_are_counted(tmp_path, capsys):
    """NA, n/a, null, -, ., missing and empty are missing in grouping columns too (common
    practice): never a level; the rows are left out of that grouping and counted."""
    markers = ["NA", "n/a", "null", "-", ".", "missing", ""]
    rows = [f"{s},{v}" for s, v in zip("aabb", ["1.5", "2.5", "3.5", "4.5"], strict=True)]
    rows += [f"{m},{5 + i}.5" for i, m in enumerate(markers)]
    path = _file(tmp_path, "m.csv", "site,v\n" + "\n".join(rows) + "\n")
    table = load.load_table(path)
    assert set(table.frame["site"].drop_nulls().to_list()) == {"a", "b"}
    assert table.no_level == {"site": len(markers)}
    result = run_scan(table)
    assert result.comparisons.select("level_a", "level_b").rows() == [("a", "b")]
    assert main(["scan", str(path)]) == 0
    assert "site: 7 row(s) have no level" in capsys.readouterr().err


# -- 5. sep= line and comment lines -------------------------------------------------------


@pytest.mark.parametrize("first", ["sep=;", '"sep=;"', "SEP=;;;"])
def test_a_sep_line_sets_the_separator(tmp_path, first):
    """The `sep=;` first line spreadsheet programs write (common practice, from memory)
    names the separator and is not the header."""
    text = f"{first}\r\nsite;lead\r\na;1,5\r\na;2,5\r\nb;3,5\r\nb;4,5\r\n"
    table = load.load_table(_file(tmp_path, "sep.csv", text))
    assert (table.groupings, table.outcomes) == (("site",), ("lead",))
    assert _values(table, "lead") == [1.5, 2.5, 3.5, 4.5]


def test_comment_lines_before_the_header_are_skipped_and_counted(tmp_path):
    """Lines starting with # before the header are comments (common practice); the note
    counts them."""
    text = "# exported 2026-01-02\n# lab: invented\n\nsite,lead\na,1.5\na,2.5\nb,3.5\nb,4.5\n"
    table = load.load_table(_file(tmp_path, "c.csv", text))
    assert (table.groupings, table.outcomes) == (("site",), ("lead",))
    assert any("skipped 2 comment line(s)" in n for n in table.notes)


# -- 6. column names ---------------------------------------------------------------------


def test_repeated_and_empty_names_are_renamed_and_said(tmp_path, capsys):
    """Decision: rename and say so (a refusal would make the file unusable). A repeated name
    gets _2; an empty or blank one becomes column_N; the notes name the positions."""
    text = "site,lead,lead,  ,zinc\na,1.5,2.5,x,1.1\na,2.5,3.5,y,2.2\nb,3.5,4.5,x,3.3\nb,4.5,5.5,y,4.4\n"
    path = _file(tmp_path, "n.csv", text)
    table = load.load_table(path)
    assert table.frame.columns[:1] == ["site"]
    assert set(table.outcomes) == {"lead", "lead_2", "zinc"}
    assert "column_4" in table.groupings
    assert "column 3 repeats the name 'lead'; it is called 'lead_2' here" in table.notes
    assert "column 4 has no name; it is called 'column_4' here" in table.notes
    assert main(["scan", str(path)]) == 0
    assert "foldsift: note: column 3 repeats the name 'lead'" in capsys.readouterr().err


def test_a_trailing_separator_column_is_left_out_with_a_note(tmp_path):
    text = "site,lead,\na,1.5,\na,2.5,\nb,3.5,\nb,4.5,\n"
    table = load.load_table(_file(tmp_path, "t.csv", text))
    assert table.frame.columns == ["site", "lead", table.names.censored("lead")]
    assert "left out 1 column(s) with neither a name nor entries" in table.notes


def test_quoted_names_are_read_by_rfc_4180(tmp_path):
    """Decision: names keep their characters as RFC 4180 reads them (§2.7: a doubled quote
    inside a quoted field is one quote); a line break inside a quoted name (§2.6) becomes a
    space, with a note."""
    text = '"dose ""high""","zinc\nmg/kg"\na,1.5\na,2.5\nb,3.5\nb,4.5\n'
    table = load.load_table(_file(tmp_path, "q.csv", text))
    assert table.groupings == ('dose "high"',)
    assert table.outcomes == ("zinc mg/kg",)
    assert any("column 2 had control characters" in n for n in table.notes)


def test_a_stray_quote_is_refused_not_guessed(tmp_path, capsys):
    """`5" pipe` breaks RFC 4180 §2.5 (a quote only in a quoted field): refused in one line."""
    text = 'size,v\n5" pipe,1.5\n6" pipe,2.5\n5" pipe,3.5\n'
    code = main(["scan", str(_file(tmp_path, "s.csv", text))])
    _one_line_failure(code, capsys.readouterr(), "s.csv", "quote")


# -- 7. read once: a named pipe ----------------------------------------------------------


def _through_fifo(tmp_path: Path, name: str, content: bytes) -> tuple[object, bytes]:
    """Load `content` written into a named pipe by a writer thread; fails (not hangs) if the
    reader does not finish within 20 s."""
    fifo = tmp_path / name
    os.mkfifo(fifo)

    def writer() -> None:
        with open(fifo, "wb") as handle:
            handle.write(content)

    outcome: dict[str, object] = {}

    def reader() -> None:
        try:
            outcome["table"] = load.load_table(fifo)
        except Exception as error:  # reported below
            outcome["table"] = error

    threads = [threading.Thread(target=f, daemon=True) for f in (writer, reader)]
    for thread in threads:
        thread.start()
    threads[1].join(timeout=20)
    if threads[1].is_alive():
        # Release the reader blocked in a second open(), then fail.
        os.close(os.open(fifo, os.O_WRONLY | os.O_NONBLOCK))
        pytest.fail("reading a named pipe hung: the input was opened more than once")
    return outcome["table"], content


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs POSIX named pipes")
def test_a_named_pipe_is_read_once(tmp_path):
    content = b"site,lead\na,1.5\na,2.5\nb,3.5\nb,4.5\n"
    table, written = _through_fifo(tmp_path, "data.csv", content)
    assert isinstance(table, load.Table), table
    assert table.fingerprint == hashlib.sha256(written).hexdigest()
    assert _values(table, "lead") == [1.5, 2.5, 3.5, 4.5]


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs POSIX named pipes")
def test_parquet_through_a_named_pipe(tmp_path):
    frame = pl.DataFrame({"site": list("aabb"), "lead": [1.5, 2.5, 3.5, 4.5]})
    frame.write_parquet(tmp_path / "f.parquet")
    content = (tmp_path / "f.parquet").read_bytes()
    table, written = _through_fifo(tmp_path, "data.parquet", content)
    assert isinstance(table, load.Table), table
    assert table.fingerprint == hashlib.sha256(written).hexdigest()
    assert _values(table, "lead") == [1.5, 2.5, 3.5, 4.5]


def test_the_fingerprint_is_of_the_bytes_read(tmp_path):
    """The same bytes give the same SHA-256 as before (review files keep matching)."""
    content = codecs.BOM_UTF8 + b"site,lead\na,1.5\na,2.5\nb,3.5\nb,4.5\n"
    path = _file(tmp_path, "d.csv", content)
    assert load.load_table(path).fingerprint == hashlib.sha256(content).hexdigest()


def test_a_wide_parquet_file_is_read_in_column_batches_with_its_fingerprint(tmp_path):
    """A Parquet file wider than one reading batch gives the same frame as polars' own
    whole-file reading, and the SHA-256 of its bytes (hashlib over the file as stored)."""
    rng = np.random.default_rng(7)
    frame = pl.DataFrame(
        {"site": ["a", "b"] * 50}
        | {
            f"y{j:02d}": np.exp(rng.normal(size=100))
            for j in range(textfile._PARQUET_BATCH * 2 + 3)
        }
    )
    path = tmp_path / "wide.parquet"
    frame.write_parquet(path, row_group_size=30)
    table = textfile.read_table_file(path)
    assert table.frame.equals(pl.read_parquet(path))
    assert table.fingerprint == hashlib.sha256(path.read_bytes()).hexdigest()


def test_a_parquet_file_that_changes_while_read_is_refused(tmp_path, monkeypatch):
    """The fingerprint is taken beside the reading; a file rewritten meanwhile would pair the
    figures of one content with the fingerprint of another, so it is refused in one line."""
    path = tmp_path / "moving.parquet"
    pl.DataFrame({"site": list("aabb"), "lead": [1.5, 2.5, 3.5, 4.5]}).write_parquet(path)
    digest = textfile._file_digest

    def rewritten(target):
        result = digest(target)
        pl.DataFrame({"site": list("aabbb"), "lead": [1.5, 2.5, 3.5, 4.5, 5.5]}).write_parquet(
            target
        )
        return result

    monkeypatch.setattr(textfile, "_file_digest", rewritten)
    with pytest.raises(load.InputError, match="changed while it was being read"):
        textfile.read_table_file(path)


# -- 8. Parquet list and struct columns ---------------------------------------------------


@pytest.mark.parametrize(("option", "column"), [("--outcome", "tags"), ("--group", "meta")])
def test_nested_parquet_columns_are_refused_in_one_line(tmp_path, capsys, option, column):
    """polars List and Struct columns hold several values per row (polars documentation of
    the nested data types): they cannot be a grouping or an outcome."""
    frame = pl.DataFrame(
        {
            "site": list("aabb"),
            "tags": [[1, 2], [3], [4], [5, 6]],
            "meta": [{"x": 1}, {"x": 2}, {"x": 1}, {"x": 2}],
            "lead": [1.5, 2.5, 3.5, 4.5],
        }
    )
    path = tmp_path / "n.parquet"
    frame.write_parquet(path)
    code = main(["scan", str(path), option, column])
    _one_line_failure(code, capsys.readouterr(), "n.parquet", repr(column), "flatten")


def test_nested_parquet_columns_are_passed_over_when_guessing(tmp_path):
    frame = pl.DataFrame(
        {"site": list("aabb"), "tags": [[1], [2], [3], [4]], "lead": [1.5, 2.5, 3.5, 4.5]}
    )
    path = tmp_path / "n.parquet"
    frame.write_parquet(path)
    table = load.load_table(path)
    assert (table.groupings, table.outcomes) == (("site",), ("lead",))


# -- 9. too many comparisons --------------------------------------------------------------


def _many_levels(levels: int) -> pl.DataFrame:
    return pl.DataFrame(
        {
            "plot": [f"p{i:03d}" for i in range(levels) for _ in range(2)],
            "lead": [1.0 + (i % 7) / 3 for i in range(2 * levels)],
            "zinc": [2.0 + (i % 5) / 4 for i in range(2 * levels)],
        }
    )


def test_too_many_comparisons_are_refused_before_any_is_built():
    """30 levels give 30*29/2 = 435 pairs, times 2 outcomes = 870 comparisons (common
    combinatorics): above a limit of 500 the scan is refused, naming the count and the
    option."""
    table = load.load_table(frame=_many_levels(30), groupings=["plot"])
    with pytest.raises(InputError) as refused:
        run_scan(table, ScanSettings(max_comparisons=500))
    message = str(refused.value)
    assert "870 comparisons" in message and "30 levels" in message
    assert "--max-comparisons" in message and "500" in message


def test_against_a_reference_the_count_is_k_minus_one_per_outcome():
    """Each of 29 levels against the reference: 29 * 2 = 58 comparisons, within 500."""
    table = load.load_table(frame=_many_levels(30), groupings=["plot"])
    result = run_scan(table, ScanSettings(pairs="reference", max_comparisons=500))
    assert result.comparisons.height == 58


def test_the_limit_is_a_command_line_option(tmp_path, capsys):
    path = tmp_path / "many.csv"
    _many_levels(30).write_csv(path)
    code = main(["scan", str(path), "--group", "plot", "--max-comparisons", "500"])
    _one_line_failure(code, capsys.readouterr(), "many.csv", "870", "--max-comparisons")
    assert main(["scan", str(path), "--group", "plot", "--max-comparisons", "870"]) == 0
    assert len(capsys.readouterr().out.splitlines()) == 871  # header + 870 rows


def test_a_summary_table_is_held_to_the_same_limit(tmp_path):
    """A summary table with 40 levels: 780 pairs for one outcome, above a limit of 100."""
    from foldsift.stats.summary_input import scan_summary_table

    rows = ["grouping,level,outcome,n,mean_log,sd_log"]
    rows += [f"plot,p{i:02d},lead,5,{0.1 * i:.1f},0.5" for i in range(40)]
    path = _file(tmp_path, "summary.csv", "\n".join(rows) + "\n")
    with pytest.raises(InputError, match="780 comparisons"):
        scan_summary_table(path, ScanSettings(max_comparisons=100))
