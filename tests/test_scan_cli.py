"""``foldsift scan`` on bad input and on comparisons that cannot be computed.

Expected behaviour is the project's own contract (README, "Bad input"): exit status 2, one
line on stderr that starts with "foldsift:" and names the file or column, no traceback. Exit
status 2 for usage errors follows the convention of Python's argparse (common practice, no
outside source). The undefined cases (a group with fewer than 2 values; no spread in either
group) follow from the t statistic's formula (NIST/SEMATECH e-Handbook 1.3.5.3): its
standard error needs n >= 2 per group and is 0 when neither group varies.
"""

from __future__ import annotations

import subprocess
import sys
import warnings
from pathlib import Path

import polars as pl
import pytest

from foldsift.tui.cli import main

EXIT_BAD_INPUT = 2


def write(path: Path, content: str | bytes) -> Path:
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content)
    return path


def assert_one_line_failure(code: int, captured, *names: str) -> str:
    """Exit 2, nothing on stdout, exactly one stderr line starting 'foldsift:' naming all
    of `names`, and no traceback."""
    assert code == EXIT_BAD_INPUT
    assert captured.out == ""
    lines = [line for line in captured.err.splitlines() if line.strip()]
    assert len(lines) == 1, captured.err
    line = lines[0]
    assert line.startswith("foldsift:"), line
    assert "Traceback" not in captured.err
    for name in names:
        assert name in line, (name, line)
    return line


OK_CSV = "site,value\na,1.5\na,2.5\nb,3.5\nb,4.5\n"


def case(case_id: str, name: str, content, extra: list[str], *names: str):
    """A bad input: file name, content (None: do not create it), extra arguments, and what
    the message must hold (the file or column, and the reason)."""
    return pytest.param(name, content, extra, names, id=case_id)


BAD_INPUTS = [
    case("missing-file", "nowhere.csv", None, [], "nowhere.csv", "no such file"),
    case(
        "binary-file",
        "image.csv",
        b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR",
        [],
        "image.csv",
        "binary",
    ),
    case("empty-file", "empty.csv", "", [], "empty.csv", "empty"),
    case("blank-lines-only", "blank.csv", "\n  \n\n", [], "blank.csv", "empty"),
    case("header-only", "header.csv", "site,value\n", [], "header.csv", "no data rows"),
    case(
        "no-numeric-columns",
        "words.csv",
        "site,colour\na,red\nb,blue\na,green\n",
        [],
        "words.csv",
        "no numeric outcome",
    ),
    case("unknown-group", "ok.csv", OK_CSV, ["--group", "zone"], "ok.csv", "zone", "no column"),
    case("unknown-outcome", "ok.csv", OK_CSV, ["--outcome", "lead"], "ok.csv", "lead", "no column"),
    case(
        "single-level-grouping",
        "one.csv",
        "site,value\na,1.5\na,2.5\na,3.5\n",
        ["--group", "site"],
        "one.csv",
        "site",
        "single level",
    ),
    case(
        "outcome-all-nonpositive",
        "neg.csv",
        "site,value\na,0\na,-1.5\nb,0.0\nb,-2.5\n",
        [],
        "neg.csv",
        "value",
        "no positive values",
    ),
    case(
        "named-integer-outcome-all-nonpositive",
        "count.csv",
        "site,count\na,0\na,-1\nb,0\nb,-1\n",
        ["--outcome", "count"],
        "count.csv",
        "count",
        "no positive values",
    ),
    case(
        "outcome-all-missing",
        "gaps.csv",
        "site,value\na,\na,NA\nb,\nb,n/a\n",
        ["--group", "site", "--outcome", "value"],
        "gaps.csv",
        "value",
        "no numeric values",
    ),
    case("corrupt-parquet", "broken.parquet", b"not parquet", [], "broken.parquet", "Parquet"),
    case(
        "ragged-rows",
        "ragged.csv",
        "site,value\na,1.5,9,9\nb,2.5\n",
        [],
        "ragged.csv",
        "delimited table",
    ),
]


@pytest.mark.parametrize(("name", "content", "extra", "names"), BAD_INPUTS)
def test_bad_input_fails_in_one_line(tmp_path, capsys, name, content, extra, names):
    """README "Bad input": one-line message naming the file or column, exit status 2."""
    path = tmp_path / name
    if content is not None:
        write(path, content)
    code = main(["scan", str(path), *extra])
    assert_one_line_failure(code, capsys.readouterr(), *names)


def test_folder_instead_of_file(tmp_path, capsys):
    """README "Bad input": a folder is not a data file."""
    code = main(["scan", str(tmp_path)])
    assert_one_line_failure(code, capsys.readouterr(), str(tmp_path), "folder")


def test_unreadable_file(tmp_path, capsys, monkeypatch):
    """README "Bad input": a file that cannot be opened (permission denied). The suite may
    run as root, which ignores file modes, so opening this one path is made to fail."""
    path = write(tmp_path / "locked.csv", OK_CSV)
    original = Path.open

    def refuse(self, *args, **kwargs):
        if self == path:
            raise PermissionError(13, "Permission denied", str(self))
        return original(self, *args, **kwargs)

    monkeypatch.setattr(Path, "open", refuse)
    code = main(["scan", str(path)])
    line = assert_one_line_failure(code, capsys.readouterr(), "locked.csv")
    assert "Permission denied" in line


@pytest.mark.parametrize("band", ["1.25,0.80", "1.0,1.0", "0.9,0.9"])
def test_band_with_low_not_below_high_fails_cleanly(capsys, band):
    """--band LOW,HIGH needs LOW < HIGH; argparse rejects it with status 2 (argparse's
    convention for usage errors) and a message that says why, without a traceback."""
    with pytest.raises(SystemExit) as raised:
        main(["scan", "unused.csv", "--band", band])
    captured = capsys.readouterr()
    assert raised.value.code == EXIT_BAD_INPUT
    assert "--band" in captured.err
    assert "LOW must be below HIGH" in captured.err
    assert "Traceback" not in captured.err


def test_missing_file_in_a_subprocess(tmp_path):
    """The same contract end to end in a fresh interpreter: status 2, one stderr line."""
    missing = tmp_path / "absent.csv"
    done = subprocess.run(
        [sys.executable, "-m", "foldsift.tui.cli", "scan", str(missing)],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert done.returncode == EXIT_BAD_INPUT
    assert done.stdout == ""
    assert done.stderr.splitlines() == [done.stderr.strip()]
    assert done.stderr.startswith("foldsift:") and "absent.csv" in done.stderr


# --- comparisons that cannot be computed -------------------------------------------------

#: Level a: two values; b: one usable value (two left out as non-positive); c and d: two
#: equal values each (no spread in either group).
DEGENERATE = "site,value\na,1.5\na,2.5\nb,3.5\nb,0\nb,-1\nc,2.5\nc,2.5\nd,5.5\nd,5.5\n"
NUMBERS = ("ratio", "ci_low", "ci_high", "p_value", "p_holm", "q_bh", "t", "df")


def scan_rows(path: Path, tmp_path: Path, capsys) -> dict[tuple[str, str], dict]:
    out = tmp_path / "out.csv"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        code = main(["scan", str(path), "--out", str(out)])
    capsys.readouterr()
    assert code == 0
    assert not [w for w in caught if issubclass(w.category, RuntimeWarning)], [
        str(w.message) for w in caught
    ]
    frame = pl.read_csv(out, infer_schema_length=None)
    return {(row["level_a"], row["level_b"]): row for row in frame.iter_rows(named=True)}


def test_too_few_values_gives_an_empty_row(tmp_path, capsys):
    """NIST 1.3.5.3 formula: a group with one usable value has no variance, so no test:
    the row is kept with null numbers and the warning 'too-few' (no crash)."""
    rows = scan_rows(write(tmp_path / "few.csv", DEGENERATE), tmp_path, capsys)
    assert len(rows) == 6  # all pairs of 4 levels
    for pair in (("a", "b"), ("b", "c"), ("b", "d")):
        row = rows[pair]
        assert "too-few" in row["warnings"].split(";"), row["warnings"]
        for name in NUMBERS:
            assert row[name] is None, (pair, name)
    assert rows[("a", "b")]["n_b"] == 1
    assert rows[("a", "b")]["n_excluded_b"] == 2


def test_no_spread_gives_an_empty_row(tmp_path, capsys):
    """NIST 1.3.5.3 formula: when neither group varies the standard error is 0 and t is
    undefined: null numbers and the warning 'no-spread'. A pair with spread in one group
    only is still computed."""
    rows = scan_rows(write(tmp_path / "flat.csv", DEGENERATE), tmp_path, capsys)
    row = rows[("c", "d")]
    assert "no-spread" in row["warnings"].split(";"), row["warnings"]
    for name in NUMBERS:
        assert row[name] is None, name
    computed = rows[("a", "c")]
    for name in NUMBERS:
        assert computed[name] is not None, name
    assert "too-few" not in computed["warnings"] and "no-spread" not in computed["warnings"]


def test_uncomputable_rows_do_not_join_the_family(tmp_path, capsys):
    """Holm 1979 / Benjamini & Hochberg 1995 adjust over the tests actually made: with two
    computable comparisons, Holm's smaller adjusted p is 2 * the smaller p."""
    rows = scan_rows(write(tmp_path / "family.csv", DEGENERATE), tmp_path, capsys)
    computed = [row for row in rows.values() if row["p_value"] is not None]
    assert len(computed) == 2
    smallest = min(computed, key=lambda row: row["p_value"])
    assert smallest["p_holm"] == pytest.approx(min(1.0, 2 * smallest["p_value"]), rel=1e-12)


def test_degenerate_scan_writes_no_warnings_text(tmp_path):
    """In a fresh interpreter, the degenerate scan's stderr holds only foldsift's own
    'foldsift:' lines (no numpy RuntimeWarning text leaking out)."""
    path = write(tmp_path / "few.csv", DEGENERATE)
    done = subprocess.run(
        [sys.executable, "-m", "foldsift.tui.cli", "scan", str(path)],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert done.returncode == 0
    assert done.stderr.strip()
    assert all(line.startswith("foldsift:") for line in done.stderr.splitlines()), done.stderr
    assert len(pl.read_csv(done.stdout.encode())) == 6


def test_identifier_column_is_refused_as_grouping(tmp_path, capsys):
    """A grouping whose every row is its own level gives one comparison per pair of rows:
    refuse it with a message naming the column (project contract)."""
    path = write(tmp_path / "ids.csv", "sample,site,value\ns1,a,1\ns2,a,2\ns3,b,3\ns4,b,5\n")
    code = main(["scan", str(path), "--group", "sample"])
    line = assert_one_line_failure(code, capsys.readouterr(), "sample", "identifier")
    assert "ids.csv" in line


def test_few_level_integer_column_is_an_outcome_once_groupings_are_named(tmp_path, capsys):
    """With --group given, an integer column of counts with few distinct values is measured,
    not grouped on (project contract: named roles override the guess)."""
    path = write(tmp_path / "counts.csv", "site,eggs\na,1\na,2\na,3\nb,2\nb,3\nb,3\n")
    code = main(["scan", str(path), "--group", "site"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    frame = pl.read_csv(captured.out.encode())
    assert frame["outcome"].to_list() == ["eggs"]
    assert frame["n_a"].to_list() == [3] and frame["n_b"].to_list() == [3]


def test_usage_error_is_one_line(capsys):
    """Usage errors use the same one-line form as every other error, exit status 2."""
    with pytest.raises(SystemExit) as raised:
        main(["scan", "x.csv", "--test", "sometimes"])
    assert raised.value.code == EXIT_BAD_INPUT
    assert_one_line_failure(EXIT_BAD_INPUT, capsys.readouterr(), "--test", "sometimes")


def test_a_grouping_without_the_reference_level_is_noted(tmp_path, capsys):
    """--reference names a level of one grouping only: the other grouping falls back to its
    first level, and the command says so (the comparison count alone would not tell)."""
    path = write(
        tmp_path / "two.csv",
        "season,field,lead\n"
        + "".join(
            f"{s},{f},{1 + i + 0.5 * j}\n"
            for i, s in enumerate(("autumn", "spring"))
            for j, f in enumerate(("ash", "oak", "elm"))
            for _ in range(3)
        ),
    )
    out = tmp_path / "out.csv"
    assert main(["scan", str(path), "--reference", "spring", "--out", str(out)]) == 0
    err = capsys.readouterr().err
    assert "grouping 'field' has no reference level 'spring'" in err
    assert "compared with 'ash'" in err and "--reference field=LEVEL" in err
    assert "grouping 'season' has no reference" not in err
    rows = pl.read_csv(out)
    assert set(rows.filter(pl.col("grouping") == "field")["level_a"]) == {"ash"}
    assert set(rows.filter(pl.col("grouping") == "season")["level_a"]) == {"spring"}


def test_the_summary_line_names_only_the_policies_that_met_entries(tmp_path, capsys):
    """Clean positive numbers: the line says there was nothing to leave out or fit, rather
    than naming the censored fit for data that has no below-detection entry."""
    clean = write(tmp_path / "clean.csv", "site,lead\na,1.5\na,2.5\nb,3.5\nb,4.5\n")
    assert main(["scan", str(clean), "--out", str(tmp_path / "c.csv")]) == 0
    err = capsys.readouterr().err
    assert "no zero, negative or below-detection entries" in err
    assert "maximum likelihood" not in err
    coded = write(tmp_path / "coded.csv", "site,lead\na,<1\na,2.5\na,3\nb,3.5\nb,4.5\nb,0\n")
    assert main(["scan", str(coded), "--out", str(tmp_path / "d.csv")]) == 0
    err = capsys.readouterr().err
    assert "zero/negative values left out" in err
    assert "below-detection entries fitted by censored maximum likelihood" in err
