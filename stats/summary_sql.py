"""The per-group summary as one SQL query, for data that lives in a database or on a cluster.

:func:`summary_query` writes the query whose result is the summary table that
``foldsift scan --summary`` reads (:mod:`foldsift.stats.summary_input`): one row per
grouping × level × outcome with the columns ``grouping, level, outcome, n, mean_log,
sd_log, median, n_missing, n_excluded``. It computes what the raw scan computes under the
default policies (``policy.apply_policy`` then ``summaries.group_summaries``):

- the level is the grouping column cast to text, spaces trimmed; rows whose level is null
  or a missing marker (:data:`MISSING_WORDS`: empty, NA, n/a, ...) are left out of that
  grouping, as the raw scan leaves them out;
- the value is the outcome column cast to a double; NaN and infinite values count as
  missing, as in the raw scan;
- ``n`` counts the strictly positive values; ``mean_log`` is AVG(LN(x)) and ``sd_log`` is
  STDDEV_SAMP(LN(x)) over them (n - 1 in the denominator, null when n < 2); zero and
  negative values are left out and counted in ``n_excluded`` (``--nonpositive exclude``);
  nulls are counted in ``n_missing``;
- ``median`` is the median of the positive values, the mean of the two middle values for
  an even count (as the raw scan's). It is exact in all three dialects: DuckDB
  ``QUANTILE_CONT(x, 0.5)``, PostgreSQL ``PERCENTILE_CONT(0.5) WITHIN GROUP (ORDER BY x)``
  and Spark ``PERCENTILE(x, 0.5)`` (which holds a group's values in memory; Spark's
  ``PERCENTILE_APPROX`` is not exact and is not used). ``median=False`` leaves the column
  out, for groups too large to sort.

The query treats every outcome column as numeric. Entries below a detection limit
(``<0.5``, ``0.5 U``), codes such as ``ND``, units in cells and decimal commas are read by
foldsift's own reader only: on an engine the cast to a double fails on such text (or,
where the engine casts leniently, reads it as missing). Handle them upstream, and give
groups with below-detection entries as the censored fit rows of a summary table
(``n_censored`` > 0, README, ``--summary``).

The query makes one pass over the data per grouping (a common table expression that
aggregates every outcome at once, as the raw scan does; on PostgreSQL 200 outcomes at most
per pass, as a SELECT there holds at most 1664 columns), then one small SELECT per grouping
× outcome, joined by UNION ALL. DuckDB and PostgreSQL are asked to materialise each pass;
on Spark, which would read the data again for each SELECT of a pass, the pass's columns
become rows by one ``LATERAL VIEW STACK`` instead.

:func:`merge_summaries` combines the summaries of separate partitions of one table into the
summary of the whole.
"""

from __future__ import annotations

import csv
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import polars as pl

from .entries import MISSING_WORDS, ColumnReading
from .errors import InputError
from .load import ReadOptions, load_table, read_raw
from .long import LongOptions, find_long_columns
from .textfile import name_columns, sniff_separator
from .vocabulary import SQL_DIALECTS, SqlDialect

__all__ = [
    "DIALECTS",
    "Dialect",
    "QueryColumns",
    "Source",
    "merge_summaries",
    "query_columns",
    "quote_name",
    "read_summary_parts",
    "source_for",
    "string_literal",
    "summary_query",
    "table_reference",
]

Dialect = SqlDialect
DIALECTS = SQL_DIALECTS

#: The columns of the summary table the query returns, in order (``median`` optional).
QUERY_COLUMNS = (
    "grouping",
    "level",
    "outcome",
    "n",
    "mean_log",
    "sd_log",
    "median",
    "n_missing",
    "n_excluded",
)


@dataclass(frozen=True)
class _Words:
    """What differs between the dialects."""

    quote: str  # identifiers
    text: str  # the text type
    double: str  # the double-precision type
    materialized: str  # a CTE computed once
    backslash_escapes: bool  # string literals read \ as an escape
    median: str  # the exact median of {x}
    #: At most this many outcomes in one pass (PostgreSQL allows 1664 columns in a SELECT;
    #: each outcome takes 6 or 7); None: all in one.
    outcomes_per_pass: int | None = None
    #: Turn a pass's columns into rows with one LATERAL VIEW STACK (Spark, which would
    #: otherwise read the data again for every outcome's SELECT of the pass) rather than
    #: one SELECT per outcome from the materialised pass.
    stack: bool = False


_WORDS: dict[Dialect, _Words] = {
    "duckdb": _Words('"', "VARCHAR", "DOUBLE", " MATERIALIZED", False, "QUANTILE_CONT({x}, 0.5)"),
    "postgres": _Words(
        '"',
        "TEXT",
        "DOUBLE PRECISION",
        " MATERIALIZED",
        False,
        "PERCENTILE_CONT(0.5) WITHIN GROUP (ORDER BY {x})",
        outcomes_per_pass=200,
    ),
    "spark": _Words("`", "STRING", "DOUBLE", "", True, "PERCENTILE({x}, 0.5)", stack=True),
}


def _words(dialect: str) -> _Words:
    if dialect not in _WORDS:
        raise ValueError(f"unknown SQL dialect {dialect!r}; choose {', '.join(DIALECTS)}")
    return _WORDS[dialect]


def quote_name(name: str, dialect: Dialect) -> str:
    """An identifier in the dialect's quotes, an embedded quote doubled."""
    quote = _words(dialect).quote
    return quote + name.replace(quote, quote * 2) + quote


def string_literal(text: str, dialect: Dialect) -> str:
    """A string literal: quotes doubled (DuckDB, PostgreSQL); in Spark, whose literals read
    backslash escapes, backslashes and quotes escaped by a backslash."""
    if _words(dialect).backslash_escapes:
        return "'" + text.replace("\\", "\\\\").replace("'", "\\'") + "'"
    return "'" + text.replace("'", "''") + "'"


@dataclass(frozen=True)
class Source:
    """The FROM clause's source as SQL text (a table function or a path reference), made
    by :func:`source_for`; a plain ``str`` given to :func:`summary_query` is a table name."""

    sql: str


def table_reference(name: str, dialect: Dialect) -> str:
    """A table name, each dot-separated part (catalog, schema, table) quoted."""
    parts = name.split(".")
    if not name.strip() or any(not part for part in parts):
        raise InputError(f"{name!r} is not a table name; give e.g. samples or lab.samples")
    return ".".join(quote_name(part, dialect) for part in parts)


_TEXT_SUFFIXES = (".csv", ".tsv", ".txt", ".csv.gz", ".tsv.gz")
_CASES = (str.lower, str.upper, str.title)


def source_for(path: str | Path, dialect: Dialect) -> Source:
    """The data file, folder or glob as a source the engine reads: DuckDB
    ``read_parquet('...')`` (a folder: every Parquet file below it) or, for text files,
    ``read_csv('...', all_varchar = true, nullstr = [...])`` (groupings keep their text, as
    foldsift reads them, and the missing markers in lower, upper and title case are null);
    Spark ``parquet.`...```. PostgreSQL reads tables only (give a table name)."""
    _words(dialect)
    text = str(path)
    is_text = text.lower().endswith(_TEXT_SUFFIXES)
    if dialect == "duckdb":
        if is_text:
            spellings = sorted({f(word) for word in MISSING_WORDS for f in _CASES})
            markers = ", ".join(string_literal(word, dialect) for word in spellings)
            return Source(
                f"read_csv({string_literal(text, dialect)}, header = true, "
                f"all_varchar = true, nullstr = [{markers}])"
            )
        if Path(text).is_dir():
            text = text.rstrip("/") + "/**/*.parquet"
        return Source(f"read_parquet({string_literal(text, dialect)})")
    if dialect == "spark" and not is_text:
        return Source(f"parquet.{quote_name(text, dialect)}")
    if dialect == "spark":
        raise InputError(
            f"{text}: Spark reads a CSV file only with options (header, types); make it a "
            "table or view on the cluster and give its name with --table"
        )
    raise InputError(f"{text}: PostgreSQL reads tables, not files; give the table with --table")


def _value(outcome: str, words: _Words, dialect: Dialect) -> str:
    """The outcome as a double, null where it is NaN or infinite (missing to the raw scan).

    x - x = 0 holds exactly for finite x (IEEE 754: NaN - NaN and inf - inf are NaN) in all
    three engines, and no optimiser can answer it from a file's statistics, which may leave
    NaN out (DuckDB 2.0 took ``x NOT IN ('NaN', 'Infinity', '-Infinity')`` as true for
    every row of a Parquet file whose statistics gave a finite range)."""
    cast = f"CAST({quote_name(outcome, dialect)} AS {words.double})"
    return f"CASE WHEN {cast} - {cast} = 0 THEN {cast} END"


def _aggregates(index: int, words: _Words, median: bool) -> list[str]:
    """The figures of outcome ``index`` over the rows of one level."""
    value = f"v{index}"
    positive = f"CASE WHEN {value} > 0 THEN {value} END"
    figures = [
        f"COUNT({positive}) AS n_{index}",
        f"AVG(LN({positive})) AS mean_log_{index}",
        f"STDDEV_SAMP(LN({positive})) AS sd_log_{index}",
        f"COUNT(*) - COUNT({value}) AS n_missing_{index}",
        f"COUNT(CASE WHEN {value} <= 0 THEN 1 END) AS n_excluded_{index}",
    ]
    if median:
        figures.insert(3, f"{words.median.format(x=positive)} AS median_{index}")
    return figures


def _pass(
    number: int, grouping: str, batch: Sequence[tuple[int, str]], source: str, options: _Options
) -> str:
    """One aggregation over the source for one grouping: the figures per level of every
    outcome of the batch (numbered as in the whole list)."""
    words, dialect = options.words, options.dialect
    level = f"TRIM(CAST({quote_name(grouping, dialect)} AS {words.text}))"
    values = [f"{_value(outcome, words, dialect)} AS v{index}" for index, outcome in batch]
    figures = [figure for index, _ in batch for figure in _aggregates(index, words, options.median)]
    missing = ", ".join(string_literal(word, dialect) for word in MISSING_WORDS)
    lines = [
        f"pass{number} AS{words.materialized} (",
        "  SELECT",
        "    lvl,",
        *_listed(figures, "    "),
        "  FROM (",
        "    SELECT",
        f"      {level} AS lvl,",
        *_listed(values, "      "),
        f"    FROM {source}",
        "  ) AS rows_read",
        f"  WHERE lvl IS NOT NULL AND LOWER(lvl) NOT IN ({missing})",
        "  GROUP BY lvl",
        ")",
    ]
    return "\n".join(lines)


def _listed(items: Sequence[str], indent: str) -> list[str]:
    """Items one per line, separated by commas."""
    return [f"{indent}{item}{',' if i < len(items) - 1 else ''}" for i, item in enumerate(items)]


@dataclass(frozen=True)
class _Options:
    dialect: Dialect
    words: _Words
    median: bool


def _figure_names(options: _Options) -> list[str]:
    return [name for name in QUERY_COLUMNS[3:] if options.median or name != "median"]


def _rows(number: int, grouping: str, index: int, outcome: str, options: _Options) -> str:
    """The summary rows of one grouping × outcome from its pass."""
    dialect = options.dialect
    columns = [
        f"{string_literal(grouping, dialect)} AS {quote_name('grouping', dialect)}",
        f"lvl AS {quote_name('level', dialect)}",
        f"{string_literal(outcome, dialect)} AS {quote_name('outcome', dialect)}",
        *[f"{name}_{index} AS {quote_name(name, dialect)}" for name in _figure_names(options)],
    ]
    return f"SELECT {', '.join(columns)}\nFROM pass{number}"


def _stacked(
    number: int, grouping: str, batch: Sequence[tuple[int, str]], options: _Options
) -> str:
    """The summary rows of one grouping × every outcome of a pass, its columns stacked into
    rows by one LATERAL VIEW STACK (Spark)."""
    dialect = options.dialect
    figures = _figure_names(options)
    items = [
        ", ".join([string_literal(outcome, dialect), *[f"{name}_{index}" for name in figures]])
        for index, outcome in batch
    ]
    names = ", ".join(quote_name(name, dialect) for name in ("outcome", *figures))
    lines = [
        f"SELECT {string_literal(grouping, dialect)} AS {quote_name('grouping', dialect)}, "
        f"lvl AS {quote_name('level', dialect)}, {names}",
        f"FROM pass{number}",
        f"LATERAL VIEW STACK({len(batch)},",
        *_listed(items, "  "),
        f") stacked AS {names}",
    ]
    return "\n".join(lines)


def _checked(groupings: Sequence[str], outcomes: Sequence[str]) -> None:
    if not groupings or not outcomes:
        raise InputError("a summary query needs at least one grouping and one outcome column")
    both = set(groupings) & set(outcomes)
    if both:
        raise InputError(f"column {sorted(both)[0]!r} cannot be both grouping and outcome")
    for names, role in ((groupings, "grouping"), (outcomes, "outcome")):
        if len(set(names)) < len(names):
            raise InputError(f"a {role} column is named twice: {', '.join(names)}")
        if any(not name for name in names):
            raise InputError(f"a {role} column has an empty name")


def summary_query(
    table: str | Source,
    groupings: Sequence[str],
    outcomes: Sequence[str],
    dialect: Dialect,
    *,
    median: bool = True,
) -> str:
    """One query returning the summary table of ``outcomes`` per level of each of
    ``groupings`` (the module docstring says what each figure is). ``table`` is a table
    name (``lab.samples``: each dotted part quoted) or a :class:`Source` from
    :func:`source_for`."""
    _checked(groupings, outcomes)
    options = _Options(dialect, _words(dialect), median)
    source = table.sql if isinstance(table, Source) else table_reference(table, dialect)
    size = options.words.outcomes_per_pass or len(outcomes)
    numbered = list(enumerate(outcomes))
    batches = [numbered[start : start + size] for start in range(0, len(numbered), size)]
    passes: list[str] = []
    selects: list[str] = []
    for grouping in groupings:
        for batch in batches:
            number = len(passes)
            passes.append(_pass(number, grouping, batch, source, options))
            if options.words.stack:
                selects.append(_stacked(number, grouping, batch, options))
            else:
                selects += [_rows(number, grouping, i, outcome, options) for i, outcome in batch]
    order = ", ".join(quote_name(name, dialect) for name in ("grouping", "outcome", "level"))
    head = (
        f"-- foldsift summary table ({dialect}): {len(groupings)} grouping(s) x "
        f"{len(outcomes)} outcome(s); save the result as CSV and run: foldsift scan "
        "--summary FILE.csv"
    )
    return (
        f"{head}\nWITH\n"
        + ",\n".join(passes)
        + "\n"
        + "\nUNION ALL\n".join(selects)
        + f"\nORDER BY {order};\n"
    )


# -- the columns a scan would compare -----------------------------------------------------


@dataclass(frozen=True)
class QueryColumns:
    """The grouping and outcome columns of a data file, chosen as ``foldsift scan`` chooses
    them, and per outcome what in the file is not a plain number (the query casts it)."""

    groupings: tuple[str, ...]
    outcomes: tuple[str, ...]
    not_plain: dict[str, str]


def _not_plain(reading: ColumnReading) -> str | None:
    """What in a text column the engine's cast to a number would not read as foldsift does."""
    found = [
        f"{count} {what}"
        for count, what in (
            (reading.censored + reading.censored_without_limit, "below detection"),
            (reading.above_range, "above the range"),
            (reading.estimated, "estimated (J)"),
            (reading.unparsed, "not numbers"),
        )
        if count
    ]
    if reading.units:
        found.append(f"units in cells ({', '.join(reading.units)})")
    if reading.mode != "point" or reading.thousands:
        found.append("decimal commas or thousands separators")
    return "; ".join(found) or None


def _header_names(path: Path) -> list[str] | None:
    """The column names of a file that has a header and no data rows (None otherwise)."""
    try:
        if path.suffix.lower() in (".parquet", ".pq"):
            if pl.scan_parquet(path).select(pl.len()).collect().item() > 0:
                return None
            header = list(pl.read_parquet_schema(path))
        else:
            text = path.read_text(encoding="utf-8-sig", errors="replace")
            lines = [line for line in text.splitlines() if line.strip()]
            lines = [line for line in lines if not line.startswith("#")]
            lines = [line for line in lines if not line.lower().startswith("sep=")]
            if len(lines) != 1:
                return None
            separator = sniff_separator(lines[0], path.suffix.lower())
            header = next(csv.reader([lines[0]], delimiter=separator))
    except (OSError, ValueError, pl.exceptions.PolarsError):
        return None
    return name_columns(header)[0]


def _named_only(
    path: Path, groupings: Sequence[str], outcomes: Sequence[str], error: InputError
) -> QueryColumns:
    """The named columns of a file with no data rows (its header names them)."""
    names = _header_names(path)
    if names is None:
        raise error
    if not (groupings and outcomes):
        raise InputError(
            f"{path}: has no data rows, so the columns' roles cannot be guessed; give a "
            "sample of the data, or name every column with --group and --outcome"
        )
    missing = [name for name in (*groupings, *outcomes) if name not in names]
    if missing:
        raise InputError(f"{path}: no column named {missing[0]!r}; columns are: {', '.join(names)}")
    _checked(groupings, outcomes)
    return QueryColumns(tuple(groupings), tuple(outcomes), {})


def query_columns(
    path: Path | str,
    groupings: Sequence[str] = (),
    outcomes: Sequence[str] = (),
    *,
    reading: ReadOptions | None = None,
    wide: bool = False,
) -> QueryColumns:
    """The columns of ``path`` that a scan would compare: ``path`` is the data, a sample of
    it, or (when both roles are named) a file with just the header. A long table (one row
    per sample x analyte) is refused unless ``wide``: the query needs a column per outcome."""
    path = Path(path)
    try:
        raw = read_raw(path, reading)
    except InputError as error:
        return _named_only(path, groupings, outcomes, error)
    if not wide and find_long_columns(raw.columns, LongOptions()) is not None:
        raise InputError(
            f"{path}: looks like a long table (one row per sample x analyte); the query needs "
            "one column per outcome: pivot it first, or add --wide to take it as it is"
        )
    table = load_table(
        path,
        groupings=groupings or None,
        outcomes=outcomes or None,
        reading=reading,
        long=LongOptions(recognise=False),
    )
    not_plain = {name: _not_plain(table.readings[name]) for name in table.readings}
    return QueryColumns(
        table.groupings, table.outcomes, {k: v for k, v in not_plain.items() if v is not None}
    )


# -- merging partitions -------------------------------------------------------------------

_KEYS = ("grouping", "level", "outcome")
_SPREADS = ("sd_log", "var_log", "ss_log")
_COUNTS = ("n_missing", "n_excluded", "n_substituted", "n_censored")


def _spread_name(frame: pl.DataFrame, label: str) -> str:
    """The spread column of a summary frame; an InputError naming what is missing otherwise."""
    spreads = [name for name in _SPREADS if name in frame.columns]
    missing = [name for name in (*_KEYS, "n", "mean_log") if name not in frame.columns]
    if missing or not spreads:
        need = ", ".join(missing + ([] if spreads else ["sd_log or var_log or ss_log"]))
        raise InputError(f"{label}: a summary table needs the columns {need}")
    return spreads[0]


def _sum_of_squares(spread: str) -> pl.Expr:
    """Each row's sum of squared deviations of the logs, from its spread column (0 for a
    group of fewer than 2 values)."""
    n, value = pl.col("n"), pl.col(spread)
    ss = {"sd_log": value.pow(2) * (n - 1), "var_log": value * (n - 1), "ss_log": value}
    return pl.when(n < 2).then(0.0).otherwise(ss[spread])


def _check_parts(parts: pl.DataFrame, ss: pl.Expr, label: str) -> None:
    bad = parts.filter(
        (pl.col("n") < 0)
        | (pl.col("n") % 1 != 0)
        | ((pl.col("n") >= 1) & pl.col("mean_log").is_null())
        | ((pl.col("n") >= 2) & (ss.is_null() | (ss < 0)))
    )
    if bad.height:
        row = bad.row(0, named=True)
        raise InputError(
            f"{label}: grouping {row['grouping']!r}, level {row['level']!r}, outcome "
            f"{row['outcome']!r}: n must be a whole count, with mean_log when n >= 1 and a "
            "spread of at least 0 when n >= 2"
        )
    if "n_censored" in parts.columns and (parts["n_censored"].fill_null(0) > 0).any():
        raise InputError(
            f"{label}: rows with n_censored > 0 are censored fits, which cannot be merged by "
            "counts, means and spreads; fit each group on the whole data instead"
        )


def merge_summaries(parts: pl.DataFrame, label: str = "summary parts") -> pl.DataFrame:
    """The summary of a whole table from summaries of its partitions (rows of the same
    grouping, level and outcome are parts of one group).

    Counts are added; the mean and the sum of squared deviations of the logs combine by the
    parallel formula of Chan, Golub and LeVeque (1979), here in its k-part form: with
    N = Σ nᵢ and mean = Σ nᵢ meanᵢ / N, SS = Σ SSᵢ + Σ nᵢ (meanᵢ − mean)² (for two parts
    this is SS_a + SS_b + δ² n_a n_b / N). ``sd_log`` = √(SS / (N − 1)), null when N < 2.
    Medians cannot be merged from medians: ``median`` is null. ``parts`` counts the rows
    merged into each group. Takes ``sd_log``, ``var_log`` or ``ss_log`` (one per frame;
    :func:`read_summary_parts` brings files with different ones to ``ss_log``)."""
    ss = _sum_of_squares(_spread_name(parts, label))
    typed = parts.with_columns(pl.col("n").cast(pl.Float64), pl.col("mean_log").cast(pl.Float64))
    _check_parts(typed, ss, label)
    counts = [name for name in _COUNTS if name in typed.columns]
    n = pl.col("n")
    used = n > 0
    total = n.sum()
    mean = pl.when(used).then(n * pl.col("mean_log")).otherwise(0.0).sum() / total
    spread = pl.when(used).then(n * (pl.col("mean_log") - mean).pow(2)).otherwise(0.0).sum()
    merged = (
        typed.with_columns(ss.alias("ss_part"))
        .group_by(*_KEYS, maintain_order=True)
        .agg(
            total.cast(pl.Int64).alias("n"),
            pl.when(total > 0).then(mean).alias("mean_log"),
            (pl.col("ss_part").sum() + spread).alias("ss"),
            *[pl.col(name).fill_null(0).sum().cast(pl.Int64).alias(name) for name in counts],
            pl.len().alias("parts"),
        )
    )
    return merged.select(
        *_KEYS,
        "n",
        "mean_log",
        pl.when(pl.col("n") >= 2).then((pl.col("ss") / (pl.col("n") - 1)).sqrt()).alias("sd_log"),
        pl.lit(None, pl.Float64).alias("median"),
        *counts,
        "parts",
    )


def _typed_part(raw: pl.DataFrame, label: str) -> pl.DataFrame:
    """One part file's names trimmed and lower-cased, keys as text, figures as numbers, the
    spread as ``ss_log``; refuses entries that are not numbers."""
    raw = raw.rename({name: name.strip().lower() for name in raw.columns})
    spread = _spread_name(raw, label)
    numbers = [name for name in ("n", "mean_log", spread, *_COUNTS) if name in raw.columns]
    text = {name: pl.col(name).cast(pl.Utf8).str.strip_chars() for name in numbers}
    typed = raw.select(
        *[pl.col(name).cast(pl.Utf8).str.strip_chars() for name in _KEYS],
        *[text[name].cast(pl.Float64, strict=False) for name in numbers],
    )
    for name in numbers:
        given = raw.select((text[name].is_not_null() & (text[name] != "")).alias("given"))
        bad = typed.filter(pl.col(name).is_null() & given["given"]).height
        if bad:
            raise InputError(f"{label}: column {name!r} has {bad} entries that are not numbers")
    return typed.with_columns(_sum_of_squares(spread).alias("ss_log")).drop(
        [name for name in ("sd_log", "var_log") if name in typed.columns]
    )


def read_summary_parts(paths: Sequence[Path | str]) -> pl.DataFrame:
    """The summary tables of several partitions (CSV, TSV or Parquet, as the engine wrote
    them) as one frame for :func:`merge_summaries`; a file given twice is refused (its
    groups would count twice)."""
    seen: dict[Path, Path] = {}
    frames = []
    for given in map(Path, paths):
        resolved = given.resolve()
        if resolved in seen:
            raise InputError(
                f"{given}: given twice (as {seen[resolved]}); its rows would count twice"
            )
        seen[resolved] = given
        frames.append(_typed_part(read_raw(given), str(given)))
    if not frames:
        raise InputError("give at least one summary file to merge")
    return pl.concat(frames, how="diagonal_relaxed")
