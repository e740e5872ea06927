"""Read a wide table and decide which columns group rows and which are outcomes.

Every outcome column becomes two columns in the loaded frame: the numeric value
(Float64, null where missing) and a Boolean ``censored`` flag for entries written
like ``<0.5`` (below a detection limit; the value is then the limit itself).
"""

from __future__ import annotations

import csv
import hashlib
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import polars as pl

#: Entries treated as missing in outcome columns (compared case-insensitively).
MISSING_WORDS = ("", "na", "n/a", "nan", "null", "none", "-", ".", "missing")
#: A string column with more distinct values than this is taken for an identifier.
MAX_GROUP_LEVELS = 50
#: An integer column with at most this many distinct values is taken for a grouping.
MAX_INTEGER_GROUP_LEVELS = 6
#: Share of non-missing entries that must parse as numbers for an outcome column.
NUMERIC_SHARE = 0.8


class InputError(ValueError):
    """Bad input: the message is one line that names the file or column and what to do."""


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


@dataclass(frozen=True)
class Table:
    """A loaded wide table with its column roles.

    Attributes
    ----------
    frame:
        Grouping columns as Utf8; each outcome as Float64 plus its censored flag
        (``names.censored(outcome)``).
    groupings, outcomes:
        Column names in file order.
    path:
        The file read (None for an in-memory frame).
    fingerprint:
        SHA-256 of the file's bytes (of the frame's CSV text for in-memory frames).
    unparsed:
        Per outcome, the count of entries that were neither numbers, censored
        entries nor missing markers and were therefore read as missing.
    names:
        The names of the working columns derived from the user's columns.
    """

    frame: pl.DataFrame
    groupings: tuple[str, ...]
    outcomes: tuple[str, ...]
    path: Path | None
    fingerprint: str
    unparsed: dict[str, int] = field(default_factory=dict)
    names: DerivedNames = field(default_factory=DerivedNames)

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


def _sniff_separator(sample: str, suffix: str) -> str:
    if suffix in (".tsv", ".tab"):
        return "\t"
    lines = [line for line in sample.splitlines() if line.strip()][:20]
    if not lines:
        return ","
    try:
        return csv.Sniffer().sniff("\n".join(lines), delimiters=",\t;|").delimiter
    except csv.Error:
        counts = {sep: lines[0].count(sep) for sep in ",\t;|"}
        best = max(counts, key=lambda sep: counts[sep])
        return best if counts[best] > 0 else ","


def _read_parquet(path: Path) -> pl.DataFrame:
    try:
        return pl.read_parquet(path)
    except Exception as error:  # polars raises several error types for bad files
        raise InputError(
            f"{path}: cannot be read as Parquet ({type(error).__name__}); "
            "check that the file is complete"
        ) from None


def _text_head(path: Path) -> tuple[str, str]:
    """The first 64 KiB as text, and the encoding polars should read the file with."""
    try:
        with path.open("rb") as handle:
            head = handle.read(64 * 1024)
    except OSError as error:
        raise InputError(
            f"{path}: cannot be opened ({error.strerror or type(error).__name__}); "
            "check the file's permissions"
        ) from None
    if not head.strip():
        raise InputError(f"{path}: is empty; give a table with a header row and data rows")
    if b"\x00" in head:
        raise InputError(
            f"{path}: looks like a binary file, not text; give a CSV, TSV or Parquet file"
        )
    try:
        return head.decode("utf-8"), "utf8"
    except UnicodeDecodeError:
        return head.decode("latin-1"), "utf8-lossy"


def _read_delimited(path: Path) -> pl.DataFrame:
    sample, encoding = _text_head(path)
    separator = _sniff_separator(sample, path.suffix.lower())
    try:
        frame = pl.read_csv(
            path,
            separator=separator,
            infer_schema=False,
            encoding=encoding,
            truncate_ragged_lines=False,
        )
    except pl.exceptions.NoDataError:
        raise InputError(
            f"{path}: is empty; give a table with a header row and data rows"
        ) from None
    except Exception as error:
        first = str(error).strip().splitlines()[0] if str(error).strip() else ""
        raise InputError(f"{path}: cannot be read as a delimited table ({first[:120]})") from None
    frame = frame.rename({name: name.strip() for name in frame.columns})
    return _decimal_commas(frame) if separator != "," else frame


def read_raw(path: Path | str) -> pl.DataFrame:
    """Read CSV/TSV/Parquet; text files are read as strings so censored entries survive."""
    path = Path(path)
    if not path.exists():
        raise InputError(f"{path}: no such file; check the path and try again")
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a data file; give a CSV, TSV or Parquet file")
    if path.suffix.lower() in (".parquet", ".pq"):
        frame = _read_parquet(path)
    else:
        frame = _read_delimited(path)
    if frame.height == 0:
        raise InputError(f"{path}: has a header but no data rows; nothing to compare")
    return frame


_DECIMAL_COMMA = r"^(\s*<?\s*-?\d+),(\d+\s*)$"


def _decimal_commas(frame: pl.DataFrame) -> pl.DataFrame:
    """Files separated by ; or tabs often write 1,5 for 1.5: read a column's decimal commas
    when every one of its non-empty entries is a number written that way or a plain one."""
    changes = []
    for name in frame.columns:
        text = frame[name].drop_nulls().str.strip_chars()
        text = text.filter(text != "")
        with_comma = text.str.contains(_DECIMAL_COMMA)
        if text.len() and with_comma.any():
            plain = text.str.contains(r"^<?\s*-?\d+(\.\d+)?$")
            if (with_comma | plain).all():
                changes.append(pl.col(name).str.replace(_DECIMAL_COMMA, "$1.$2"))
    return frame.with_columns(changes) if changes else frame


def _parse_outcome(column: pl.Expr) -> tuple[pl.Expr, pl.Expr, pl.Expr]:
    """Expressions for (value, censored flag, unparsed flag) of a string outcome column."""
    text = column.cast(pl.Utf8).str.strip_chars()
    lowered = text.str.to_lowercase()
    missing = text.is_null() | lowered.is_in(list(MISSING_WORDS))
    censored = text.str.starts_with("<")
    number_text = (
        pl.when(censored).then(text.str.strip_prefix("<").str.strip_chars()).otherwise(text)
    )
    value = number_text.cast(pl.Float64, strict=False)
    value = pl.when(missing).then(None).otherwise(value)
    value = pl.when(value.is_finite()).then(value).otherwise(None)
    unparsed = (~missing) & value.is_null()
    return value, (censored & value.is_not_null()), unparsed


def _numeric_share(frame: pl.DataFrame) -> dict[str, float]:
    exprs = []
    for name in frame.columns:
        value, _, unparsed = _parse_outcome(pl.col(name))
        exprs.append(value.is_not_null().sum().alias(name + "\x00ok"))
        exprs.append(unparsed.sum().alias(name + "\x00bad"))
    counts = frame.select(exprs).row(0)
    shares = {}
    for index, name in enumerate(frame.columns):
        ok, bad = counts[2 * index], counts[2 * index + 1]
        shares[name] = ok / (ok + bad) if ok + bad else 0.0
    return shares


def _is_numeric_column(frame: pl.DataFrame, name: str) -> bool:
    dtype = frame.schema[name]
    if dtype.is_numeric():
        return True
    if dtype not in (pl.Utf8, pl.Categorical):
        return False
    return _numeric_share(frame.select(name))[name] >= NUMERIC_SHARE


_ID_NAME = re.compile(r"(^|[_ .-])(id|no|num|number|index|idx|sample|row)$", re.IGNORECASE)


def _looks_like_identifier(name: str, values: pl.Series, distinct: int) -> bool:
    """Whole numbers, one per row, named like an identifier or running 0/1..n in steps of 1."""
    if distinct != values.len() or distinct < 3:
        return False
    if _ID_NAME.search(name):
        return True
    numbers = values.cast(pl.Int64, strict=False).drop_nulls().sort()
    return numbers.len() == distinct and bool((numbers.diff().drop_nulls() == 1).all())


Role = Literal["grouping", "outcome"] | None


def _text_role(frame: pl.DataFrame, name: str, share: float, distinct: int) -> Role:
    """The role of a text column: numbers (mostly) or labels."""
    if share >= NUMERIC_SHARE:
        text_values = frame[name].drop_nulls().str.strip_chars()
        integer_like = bool(text_values.str.contains(r"^-?\d+$").all())
        if integer_like and _looks_like_identifier(name, text_values, distinct):
            return None  # a sample number, not a measurement nor a grouping
        if integer_like and 2 <= distinct <= MAX_INTEGER_GROUP_LEVELS:
            return "grouping"
        return "outcome"
    if 2 <= distinct <= MAX_GROUP_LEVELS and distinct < frame.height:
        return "grouping"
    return None


def _typed_role(dtype: pl.DataType, distinct: int) -> Role:
    """The role of a column that arrived typed (Parquet, an in-memory frame)."""
    if dtype.is_integer() and 2 <= distinct <= MAX_INTEGER_GROUP_LEVELS:
        return "grouping"
    if dtype.is_numeric():
        return "outcome"
    if dtype == pl.Boolean:
        return "grouping"
    return None


def infer_roles(frame: pl.DataFrame) -> tuple[list[str], list[str]]:
    """Guess grouping and outcome columns of a raw frame."""
    string_columns = [n for n, t in frame.schema.items() if t in (pl.Utf8, pl.Categorical)]
    shares = _numeric_share(frame.select(string_columns)) if string_columns else {}
    # Float columns are outcomes whatever their count of distinct values: skip counting them.
    counted = [n for n, t in frame.schema.items() if not t.is_float()]
    levels = (
        frame.select(pl.col(counted).drop_nulls().n_unique()).row(0, named=True) if counted else {}
    )
    roles: dict[str, list[str]] = {"grouping": [], "outcome": []}
    for name, dtype in frame.schema.items():
        distinct = levels.get(name, 0)
        if name in shares:
            role = _text_role(frame, name, shares[name], distinct)
        else:
            role = _typed_role(dtype, distinct)
        if role is not None:
            roles[role].append(name)
    return roles["grouping"], roles["outcome"]


def _read(
    path: Path | str | None, frame: pl.DataFrame | None
) -> tuple[pl.DataFrame, Path | None, str]:
    """The raw frame, its path and its fingerprint, from a file or an in-memory frame."""
    if frame is not None:
        return frame, (Path(path) if path is not None else None), frame_fingerprint(frame)
    if path is None:
        raise ValueError("give a path or a frame")
    path = Path(path)
    raw = read_raw(path)
    return raw, path, file_fingerprint(path)


def _check_named(raw: pl.DataFrame, label: str, role: str, names: Sequence[str]) -> None:
    for name in names:
        if name not in raw.columns:
            shown = ", ".join(raw.columns[:12]) + (" …" if raw.width > 12 else "")
            raise InputError(
                f"{label}: no column named {name!r} (asked for as {role}); columns are: {shown}"
            )


def _choose_roles(
    raw: pl.DataFrame, groupings: Sequence[str], outcomes: Sequence[str], label: str
) -> tuple[list[str], list[str]]:
    """Grouping and outcome columns: the named ones, the rest guessed."""
    if groupings and outcomes:
        return list(groupings), list(outcomes)
    guessed_groups, guessed_outcomes = infer_roles(raw)
    chosen_groups = list(groupings) or [n for n in guessed_groups if n not in outcomes]
    if outcomes:
        return chosen_groups, list(outcomes)
    chosen_outcomes = [name for name in guessed_outcomes if name not in chosen_groups]
    if groupings:
        # The user named the groupings: few-level integer columns are measurements too.
        chosen_outcomes += [
            name
            for name in guessed_groups
            if name not in chosen_groups and _is_numeric_column(raw, name)
        ]
        chosen_outcomes.sort(key=raw.columns.index)
    return chosen_groups, chosen_outcomes


def _check_roles(groupings: list[str], outcomes: list[str], label: str) -> None:
    overlap = set(groupings) & set(outcomes)
    if overlap:
        raise InputError(
            f"{label}: column {sorted(overlap)[0]!r} cannot be both grouping and outcome"
        )
    if not outcomes:
        raise InputError(
            f"{label}: no numeric outcome columns found; name them with --outcome COLUMN"
        )
    if not groupings:
        raise InputError(
            f"{label}: no grouping column found (text or few-level columns); "
            "name one with --group COLUMN"
        )


def _typed(
    raw: pl.DataFrame, groupings: list[str], outcomes: list[str], names: DerivedNames
) -> tuple[pl.DataFrame, dict[str, int]]:
    """Groupings as text; each outcome as Float64 plus its censored flag; unparsed counts."""
    columns: list[pl.Expr] = [
        pl.col(name).cast(pl.Utf8).str.strip_chars().alias(name) for name in groupings
    ]
    unparsed_exprs = []
    for name in outcomes:
        if raw.schema[name].is_numeric():
            value = pl.col(name).cast(pl.Float64)
            columns.append(pl.when(value.is_finite()).then(value).otherwise(None).alias(name))
            columns.append(pl.lit(False).alias(names.censored(name)))
            continue
        value, censored, unparsed = _parse_outcome(pl.col(name))
        columns.append(value.alias(name))
        columns.append(censored.fill_null(False).alias(names.censored(name)))
        unparsed_exprs.append(unparsed.sum().alias(name))
    counts = raw.select(unparsed_exprs).row(0, named=True) if unparsed_exprs else {}
    return raw.select(columns), {k: int(v) for k, v in counts.items() if v}


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


def load_table(
    path: Path | str | None = None,
    *,
    frame: pl.DataFrame | None = None,
    groupings: Sequence[str] | None = None,
    outcomes: Sequence[str] | None = None,
) -> Table:
    """Load a file (or an in-memory raw frame) and resolve column roles.

    Named ``groupings``/``outcomes`` override the guesses; a named column that does not
    exist raises :class:`InputError`.
    """
    raw, source, fingerprint = _read(path, frame)
    label = str(source) if source is not None else "table"
    if raw.height == 0:
        raise InputError(f"{label}: has a header but no data rows; nothing to compare")
    _check_named(raw, label, "grouping", groupings or ())
    _check_named(raw, label, "outcome", outcomes or ())
    chosen_groups, chosen_outcomes = _choose_roles(raw, groupings or (), outcomes or (), label)
    _check_roles(chosen_groups, chosen_outcomes, label)
    names = DerivedNames.beside(raw.columns)
    typed, unparsed = _typed(raw, chosen_groups, chosen_outcomes, names)
    _check_values(typed, chosen_groups, chosen_outcomes, label)
    return Table(
        frame=typed,
        groupings=tuple(chosen_groups),
        outcomes=tuple(chosen_outcomes),
        path=source,
        fingerprint=fingerprint,
        unparsed=unparsed,
        names=names,
    )
