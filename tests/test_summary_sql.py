"""`foldsift summary-sql` and `summary-merge`: the per-group summary computed where the data
lives, then scanned with `scan --summary`, must give the comparisons of a raw scan.

References outside foldsift: the engines themselves (DuckDB, the reference engine; a real
PostgreSQL server when its programs are on the machine; Spark in local mode when pyspark is
installed) compute the summaries from the query text, and numpy computes the whole-table
figures that merged partition summaries must equal. Data are simulated with fixed seeds,
plus the NIST/SEMATECH e-Handbook AUTO83B data shipped in tests/data.
"""

from __future__ import annotations

import contextlib
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
import pytest

from foldsift.stats.errors import InputError
from foldsift.stats.load import load_table
from foldsift.stats.scan import ScanResult, run_scan
from foldsift.stats.summary_input import scan_summary_table
from foldsift.stats.summary_sql import (
    merge_summaries,
    quote_name,
    read_summary_parts,
    summary_query,
)
from foldsift.tui.cli import main

DATA = Path(__file__).parent / "data"
#: An outcome name that needs quoting in every dialect (quotes, a space).
ODD = 'it\'s "odd" mg/kg'
FIGURES = ("ratio", "ci_low", "ci_high", "p_value", "df", "median_ratio")


def _simulated(seed: int, rows: int = 900) -> pl.DataFrame:
    """Two groupings (text with padded, missing and quoted levels; a few-level integer) and
    two lognormal outcomes with zeros, negatives, NaN, infinities and nulls; one level with
    a single row, one whose copper values are all zero."""
    rng = np.random.default_rng(seed)
    site = rng.choice(["north", " east ", "o'brien", "NA", None], rows).astype(object)
    site[:1] = "tiny"
    site[1:3] = "zeroes"
    copper = np.exp(rng.normal(1.0, 0.5, rows) + (site == "north") * 0.3)
    copper[rng.random(rows) < 0.05] = 0.0
    # Small negatives, as blank-corrected results near zero are reported (a large share of
    # clearly negative values would make guessing leave the column out: interval scale).
    copper[rng.random(rows) < 0.02] = -0.05
    copper[rng.random(rows) < 0.03] = np.nan
    copper[[5, 6]] = [np.inf, -np.inf]
    copper[1:3] = 0.0
    odd = np.exp(rng.normal(0.0, 1.0, rows))
    return pl.DataFrame(
        {
            "site": site.tolist(),
            "season": rng.integers(1, 4, rows),
            "copper": copper,
            ODD: odd,
        }
    ).with_columns(
        pl.when(pl.int_range(pl.len()) % 17 == 0).then(None).otherwise(pl.col(ODD)).alias(ODD)
    )


def _printed_query(capsys: pytest.CaptureFixture[str], *args: str) -> str:
    code = main(["summary-sql", *args])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return captured.out


def _duckdb_summary(query: str, out: Path) -> Path:
    """Run the printed query in DuckDB and save the result as CSV, as a user would."""
    connection = duckdb.connect()
    try:
        connection.sql(query).write_csv(str(out))
    finally:
        connection.close()
    return out


def _assert_scans_agree(summary_csv: Path, raw: ScanResult) -> None:
    """Every comparison and every group figure from the summary equals the raw scan's."""
    scanned = scan_summary_table(summary_csv)
    got, expected = scanned.comparisons.sort("key"), raw.comparisons.sort("key")
    assert got["key"].to_list() == expected["key"].to_list()
    assert got.height > 0
    for name in FIGURES:
        np.testing.assert_allclose(
            got[name].to_numpy().astype(float),
            expected[name].to_numpy().astype(float),
            rtol=1e-10,
            equal_nan=True,
            err_msg=name,
        )
    keys = ["grouping", "level", "outcome"]
    groups = scanned.summaries.join(raw.summaries, on=keys, how="full", suffix="_raw")
    assert groups.height == raw.summaries.height == scanned.summaries.height
    for name in ("n", "n_missing", "n_excluded"):
        assert groups[name].to_list() == groups[f"{name}_raw"].to_list(), name
    for name in ("mean_log", "median"):
        np.testing.assert_allclose(
            groups[name].to_numpy().astype(float),
            groups[f"{name}_raw"].to_numpy().astype(float),
            rtol=1e-12,
            equal_nan=True,
            err_msg=name,
        )


# -- DuckDB, the reference engine -----------------------------------------------------------


def test_duckdb_on_parquet_gives_the_raw_scan(tmp_path, capsys):
    """The printed DuckDB query over a Parquet file (odd names and levels, zeros, negatives,
    NaN, infinities, missing markers), its result scanned with `--summary`, equals a raw
    scan of the same file: ratio, CI, p, df, median ratio to 1e-10, counts exactly."""
    data = tmp_path / "samples.parquet"
    _simulated(11).write_parquet(data)
    raw = run_scan(load_table(data))
    assert set(raw.source.outcomes) == {"copper", ODD}
    query = _printed_query(capsys, str(data), "--engine", "duckdb")
    assert "read_parquet(" in query
    _assert_scans_agree(_duckdb_summary(query, tmp_path / "summary.csv"), raw)
    levels = set(raw.summaries["level"].to_list())
    assert {"east", "o'brien", "tiny", "zeroes"} <= levels and "NA" not in levels


def _coded_csv(path: Path) -> Path:
    """Text levels that look like numbers ("01"), missing markers and empty entries."""
    rng = np.random.default_rng(23)
    rows = 400
    code = rng.choice(["01", "02", "10", "NA", ""], rows)
    zinc = np.round(np.exp(rng.normal(3.0, 0.7, rows)), 3).astype(str).astype(object)
    zinc[rng.random(rows) < 0.05] = "NA"
    zinc[rng.random(rows) < 0.05] = ""
    zinc[rng.random(rows) < 0.03] = "0"
    lines = ["code,zinc_mg_per_kg"] + [f"{c},{z}" for c, z in zip(code, zinc, strict=True)]
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.mark.parametrize("which", ["coded", "nist"])
def test_duckdb_on_csv_gives_the_raw_scan(tmp_path, capsys, which):
    """A CSV read by DuckDB itself: levels keep their text ("01" stays "01", not 1), NA and
    empty entries are missing. Also the NIST AUTO83B data (tests/data)."""
    data = _coded_csv(tmp_path / "coded.csv") if which == "coded" else DATA / "nist_auto83b_mpg.csv"
    raw = run_scan(load_table(data))
    query = _printed_query(capsys, str(data), "--engine", "duckdb")
    _assert_scans_agree(_duckdb_summary(query, tmp_path / "summary.csv"), raw)
    if which == "coded":
        assert "01" in raw.summaries["level"].to_list()


def test_the_postgres_query_also_runs_on_duckdb(tmp_path):
    """Where no PostgreSQL server runs, the PostgreSQL text at least runs on DuckDB, which
    accepts its types and its ordered-set median, and gives the same summaries."""
    data = tmp_path / "samples.parquet"
    _simulated(5).write_parquet(data)
    connection = duckdb.connect()
    try:
        connection.sql(f"CREATE TABLE samples AS SELECT * FROM read_parquet('{data}')")
        query = summary_query("samples", ["site", "season"], ["copper", ODD], "postgres")
        assert "PERCENTILE_CONT(0.5) WITHIN GROUP" in query
        connection.sql(query).write_csv(str(tmp_path / "summary.csv"))
    finally:
        connection.close()
    _assert_scans_agree(tmp_path / "summary.csv", run_scan(load_table(data)))


# -- PostgreSQL, a real server when its programs are installed ------------------------------


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port: int = probe.getsockname()[1]
        return port


@contextlib.contextmanager
def _postgres_server() -> Iterator[list[str]]:
    """A throw-away PostgreSQL cluster on a free loopback port (as the postgres user when
    run as root, which PostgreSQL refuses); yields the psql command to reach it."""
    pg_ctl = shutil.which("pg_ctl")
    if pg_ctl is None or shutil.which("psql") is None:
        pytest.skip("PostgreSQL programs (pg_ctl, psql) are not installed")
    bindir = Path(pg_ctl).resolve().parent
    as_user: list[str] = []
    folder = Path(tempfile.mkdtemp(prefix="foldsift-pg-"))
    if os.geteuid() == 0:
        try:
            owner = pwd.getpwnam("postgres")
        except KeyError:
            pytest.skip("running as root and there is no postgres user")
        os.chown(folder, owner.pw_uid, owner.pw_gid)
        as_user = ["runuser", "-u", "postgres", "--"]
    port, cluster = _free_port(), str(folder / "cluster")
    try:
        options = f"-p {port} -k {folder} -c listen_addresses=127.0.0.1"
        start = [str(bindir / "pg_ctl"), "-D", cluster, "-w", "-l", f"{folder}/log"]
        for command in (
            [str(bindir / "initdb"), "-D", cluster, "-U", "postgres", "-A", "trust"],
            [*start, "-o", options, "start"],
        ):
            done = subprocess.run([*as_user, *command], capture_output=True, text=True)
            if done.returncode != 0:  # the machine, not foldsift: say why and skip
                pytest.skip(f"no PostgreSQL server could start here: {done.stderr.strip()}")
        yield ["psql", "-X", "-q", "-v", "ON_ERROR_STOP=1", "-h", "127.0.0.1", "-p", str(port)]
    finally:
        stop = [str(bindir / "pg_ctl"), "-D", cluster, "-m", "immediate", "stop"]
        subprocess.run([*as_user, *stop], capture_output=True)
        shutil.rmtree(folder, ignore_errors=True)


@pytest.fixture(scope="module")
def psql() -> Iterator[list[str]]:
    with _postgres_server() as command:
        yield [*command, "-U", "postgres", "-d", "postgres"]


def _postgres_summary(
    psql: list[str], table: str, frame: pl.DataFrame, query: str, folder: Path
) -> Path:
    """Load ``frame`` into a new table (text groupings, double outcomes), run the query as
    the README says (psql --csv -f) and save its result."""
    types = {
        name: "BIGINT" if dtype.is_integer() else "TEXT" for name, dtype in frame.schema.items()
    }
    types |= {name: "DOUBLE PRECISION" for name, dtype in frame.schema.items() if dtype.is_float()}
    columns = ", ".join(f"{quote_name(name, 'postgres')} {kind}" for name, kind in types.items())
    frame.write_csv(folder / "rows.csv")
    (folder / "summary.sql").write_text(query)
    subprocess.run([*psql, "-c", f"CREATE TABLE {table} ({columns})"], check=True)
    load = f"\\copy {table} FROM '{folder / 'rows.csv'}' CSV HEADER"
    subprocess.run([*psql, "-c", load], check=True)
    done = subprocess.run(
        [*psql, "--csv", "-f", str(folder / "summary.sql")],
        check=True,
        capture_output=True,
        text=True,
    )
    (folder / "summary.csv").write_text(done.stdout)
    return folder / "summary.csv"


def test_postgres_server_gives_the_raw_scan(tmp_path, capsys, psql):
    """The printed PostgreSQL query, run by psql on a real server over a table holding the
    simulated data (NaN and infinities included), scanned with `--summary`, equals the raw
    scan of the same data."""
    frame = _simulated(29)
    data = tmp_path / "samples.parquet"
    frame.write_parquet(data)
    query = _printed_query(capsys, str(data), "--engine", "postgres", "--table", "lab.samples")
    subprocess.run([*psql, "-c", "CREATE SCHEMA lab"], check=True)
    summary = _postgres_summary(psql, "lab.samples", frame, query, tmp_path)
    _assert_scans_agree(summary, run_scan(load_table(data)))


def test_postgres_wide_table_keeps_under_the_column_limit(tmp_path, capsys, psql):
    """450 outcomes (a SELECT on PostgreSQL holds at most 1664 columns): the query splits
    them over passes and still equals the raw scan."""
    rng = np.random.default_rng(7)
    rows = 40
    outcomes = {f"o{i:03d}": np.exp(rng.normal(0, 1, rows)) for i in range(450)}
    frame = pl.DataFrame({"site": np.repeat(["north", "south"], rows // 2), **outcomes})
    data = tmp_path / "wide.parquet"
    frame.write_parquet(data)
    query = _printed_query(capsys, str(data), "--engine", "postgres", "--table", "wide")
    assert query.count(" AS MATERIALIZED (") == 3
    summary = _postgres_summary(psql, "wide", frame, query, tmp_path)
    _assert_scans_agree(summary, run_scan(load_table(data)))


# -- Spark, in local mode when pyspark is installed (not in CI) ------------------------------


@pytest.mark.spark
def test_spark_local_gives_the_raw_scan(tmp_path, capsys):
    """The printed Spark SQL run by pyspark in local mode, over a Parquet path and over a
    view with a backtick and a backslash in its column names, equals the raw scan."""
    pyspark_sql = pytest.importorskip("pyspark.sql")
    if shutil.which("java") is None:
        pytest.skip("Spark needs Java")
    data = tmp_path / "samples.parquet"
    frame = _simulated(31).rename({ODD: "odd"})
    frame.write_parquet(data)
    raw = run_scan(load_table(data))
    by_path = _printed_query(capsys, str(data), "--engine", "spark")
    named = {"site": "si`te", "odd": "back\\slash 'odd'"}
    spark = (
        pyspark_sql.SparkSession.builder.master("local[1]")
        .config("spark.ui.enabled", "false")
        .config("spark.sql.shuffle.partitions", "2")
        .getOrCreate()
    )
    try:
        spark.read.parquet(str(data)).withColumnsRenamed(named).createOrReplaceTempView("samples")
        results = [spark.sql(by_path).collect()]
        renamed = tmp_path / "renamed.parquet"
        frame.rename(named).write_parquet(renamed)
        by_view = _printed_query(capsys, str(renamed), "--engine", "spark", "--table", "samples")
        results.append(spark.sql(by_view).collect())
    finally:
        spark.stop()
    for number, rows in enumerate(results):
        summary = pl.DataFrame([row.asDict() for row in rows]).with_columns(
            pl.col("grouping").replace({v: k for k, v in named.items()}),
            pl.col("outcome").replace({v: k for k, v in named.items()}),
        )
        summary.write_csv(tmp_path / f"summary{number}.csv")
        _assert_scans_agree(tmp_path / f"summary{number}.csv", raw)


# -- merging partitions ---------------------------------------------------------------------


def _numpy_groups(frame: pl.DataFrame, grouping: str, outcome: str) -> dict[str, tuple]:
    """Per level: n, mean and SD (n - 1) of the logs of the positive finite values, and the
    missing and zero/negative counts, by numpy (levels trimmed, missing markers left out)."""
    levels = np.array([str(v).strip() if v is not None else "NA" for v in frame[grouping]])
    values = frame[outcome].to_numpy().astype(float)
    groups = {}
    for level in sorted(set(levels) - {"NA"}):
        x = values[levels == level]
        finite = x[np.isfinite(x)]
        logs = np.log(finite[finite > 0])
        sd = float(np.std(logs, ddof=1)) if logs.size >= 2 else None
        mean = float(np.mean(logs)) if logs.size else None
        groups[level] = (logs.size, mean, sd, x.size - finite.size, int((finite <= 0).sum()))
    return groups


#: Three partitions of unequal size: (first row, rows).
BOUNDS = ((0, 90), (90, 610), (700, 500))


def test_merged_partitions_equal_the_whole(tmp_path, capsys):
    """Three partitions of unequal size (one without a level), each summarised by DuckDB
    from the printed query (--parquet PART), merged by `summary-merge`: n, mean_log and
    sd_log equal numpy's on the whole data to 1e-12, counts exactly, medians empty; and the
    merged table scans like the raw data."""
    pieces = [_simulated(41, rows=1200).slice(start, size) for start, size in BOUNDS]
    pieces[0] = pieces[0].filter(pl.col("site") != "o'brien")  # a level one part lacks
    whole = pl.concat(pieces)
    data = tmp_path / "whole.parquet"
    whole.write_parquet(data)
    parts = []
    for number, piece in enumerate(pieces):
        path = tmp_path / f"part{number}.parquet"
        piece.write_parquet(path)
        query = _printed_query(capsys, str(data), "--engine", "duckdb", "--parquet", str(path))
        parts.append(_duckdb_summary(query, tmp_path / f"summary{number}.csv"))
    merged_path = tmp_path / "merged.csv"
    assert main(["summary-merge", *map(str, parts), "--out", str(merged_path)]) == 0
    merged = pl.read_csv(merged_path, schema_overrides={"level": pl.Utf8})
    assert merged["median"].null_count() == merged.height
    for (grouping, outcome), rows in merged.group_by("grouping", "outcome"):
        expected = _numpy_groups(whole, str(grouping), str(outcome))
        assert sorted(rows["level"].to_list()) == sorted(expected)
        for row in rows.iter_rows(named=True):
            n, mean, sd, missing, excluded = expected[row["level"]]
            assert (row["n"], row["n_missing"], row["n_excluded"]) == (n, missing, excluded)
            for got, want in ((row["mean_log"], mean), (row["sd_log"], sd)):
                assert (got is None) == (want is None)
                if want is not None:
                    assert got == pytest.approx(want, rel=1e-12, abs=1e-15)
    raw = run_scan(load_table(data)).comparisons.sort("key")
    scanned = scan_summary_table(merged_path).comparisons.sort("key")
    assert scanned["key"].to_list() == raw["key"].to_list()
    for name in ("ratio", "ci_low", "ci_high", "p_value"):
        np.testing.assert_allclose(
            scanned[name].to_numpy().astype(float),
            raw[name].to_numpy().astype(float),
            rtol=1e-10,
            equal_nan=True,
            err_msg=name,
        )


def test_merge_takes_any_spread_column(tmp_path):
    """Parts giving the spread as sd_log, var_log or ss_log merge alike (numpy reference);
    a group of one value in one part and none in another counts right."""
    rng = np.random.default_rng(3)
    pieces = [np.exp(rng.normal(2, 0.4, size)) for size in (1, 7, 12)]
    files = []
    for number, (values, spread) in enumerate(
        zip(pieces, ("sd_log", "var_log", "ss_log"), strict=True)
    ):
        logs = np.log(values)
        squares = float(np.sum((logs - logs.mean()) ** 2))
        spreads = {"ss_log": squares}
        if logs.size > 1:
            spreads |= {"sd_log": np.sqrt(squares / (logs.size - 1))}
            spreads |= {"var_log": squares / (logs.size - 1)}
        figure = spreads.get(spread)
        rows = {"grouping": ["g", "g"], "level": ["a", "b"], "outcome": ["x", "x"]}
        rows |= {"n": [logs.size, 0], "mean_log": [logs.mean(), None], spread: [figure, None]}
        files.append(tmp_path / f"part{number}.csv")
        pl.DataFrame(rows).write_csv(files[-1])
    merged = merge_summaries(read_summary_parts(files))
    logs = np.log(np.concatenate(pieces))
    row = merged.filter(pl.col("level") == "a").row(0, named=True)
    assert row["n"] == logs.size and row["parts"] == 3
    assert row["mean_log"] == pytest.approx(np.mean(logs), rel=1e-12)
    assert row["sd_log"] == pytest.approx(np.std(logs, ddof=1), rel=1e-12)
    empty = merged.filter(pl.col("level") == "b").row(0, named=True)
    assert (empty["n"], empty["mean_log"], empty["sd_log"]) == (0, None, None)


def test_merge_refuses_what_it_cannot_merge(tmp_path, capsys):
    part = tmp_path / "part.csv"
    pl.DataFrame(
        {"grouping": ["g"], "level": ["a"], "outcome": ["x"], "n": [5], "mean_log": [1.0]}
        | {"sd_log": [0.5], "n_censored": [2]}
    ).write_csv(part)
    with pytest.raises(InputError, match="censored fits"):
        merge_summaries(read_summary_parts([part]))
    assert main(["summary-merge", str(part), str(tmp_path / "." / "part.csv")]) == 2
    assert "given twice" in capsys.readouterr().err
    bad = tmp_path / "bad.csv"
    bad.write_text("grouping,level,outcome,n,mean_log,sd_log\ng,a,x,five,1.0,0.5\n")
    assert main(["summary-merge", str(bad)]) == 2
    assert "column 'n' has 1 entries that are not numbers" in capsys.readouterr().err


# -- the command's choices and messages ----------------------------------------------------


def test_columns_from_a_header_only_file_when_named(tmp_path, capsys):
    header = tmp_path / "header.csv"
    header.write_text("site,season,copper,lead\n")
    query = _printed_query(
        capsys, str(header), "--engine", "spark", "--table", "lab.samples",
        "--group", "site", "--outcome", "lead", "--no-median",
    )  # fmt: skip
    assert "FROM `lab`.`samples`" in query and "PERCENTILE" not in query
    assert "`lead`" in query and "`copper`" not in query
    assert main(["summary-sql", str(header), "--engine", "duckdb"]) == 2
    assert "no data rows" in capsys.readouterr().err


def test_refusals_and_warnings(tmp_path, capsys):
    data = tmp_path / "samples.csv"
    data.write_text("site,copper,lead\nn,1.5,<0.5\nn,2.5,3\ns,3.5,4\ns,4.5,<0.5\n")
    assert main(["summary-sql", str(data), "--engine", "postgres"]) == 2
    assert "--table" in capsys.readouterr().err
    assert main(["summary-sql", str(data), "--engine", "spark"]) == 2
    assert "--table" in capsys.readouterr().err
    _printed_query(capsys, str(data), "--engine", "postgres", "--table", "samples")
    assert main(["summary-sql", str(data), "--engine", "duckdb"]) == 0
    warned = capsys.readouterr().err
    assert "lead: holds entries that are not plain numbers (2 below detection)" in warned
    long = tmp_path / "long.csv"
    long.write_text("sample,site,analyte,result,unit\n1,n,cu,1.5,mg/kg\n2,s,cu,2.5,mg/kg\n")
    assert main(["summary-sql", str(long), "--engine", "duckdb"]) == 2
    assert "long table" in capsys.readouterr().err
