"""Join reviews onto comparisons and write them as CSV plus a JSON file of the settings used.

Every CSV foldsift writes goes through ``write_export``:

- Both files are written atomically (temporary file in the target folder, fsync,
  os.replace), so a reader never sees half a file and a crash leaves either the old file or
  the new one. Temporary files carry the writer's process id; ones left by a process that
  no longer runs are removed at the next write.
- A path that is a symbolic link is written through to its target; anything that is not a
  regular file (a device, a pipe, a folder) is refused, and so is the input data file.
- Text cells that begin with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return get a
  leading apostrophe, so a spreadsheet program shows them instead of running them as a
  formula (the practice web-security guidance recommends for CSV files); numbers stay
  numbers, and so do text cells that are plain numbers (``-5``). ``allow_formulas=True``
  turns this off.

Two forms of the CSV (``ExportForm``):

- **short** (the default of the app and of ``foldsift export``): the columns a colleague
  reads (``SHORT_COLUMNS``, and the cross-checks when any row has them), the outcome by
  its readable name, numbers rounded to a stated number of significant digits (4 by
  default), each note on one line (``escape_note``).
- **full**: every column of the comparison, the cross-checks and the review, numbers at
  full precision, notes as typed.

Either may start with a UTF-8 byte-order mark, which some spreadsheet programs need to read
the file as UTF-8. The sidecar's ``settings.export`` says which form was written.
"""

from __future__ import annotations

import contextlib
import glob
import json
import math
import os
import re
import secrets
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from decimal import Decimal
from pathlib import Path
from typing import Any, BinaryIO

import polars as pl

from foldsift.stats import columns as col
from foldsift.stats.columns import csv_ready
from foldsift.stats.formatting import readable_outcome
from foldsift.tui.choices import COLUMN_SETS as COLUMN_SETS
from foldsift.tui.choices import DEFAULT_DIGITS as DEFAULT_DIGITS
from foldsift.tui.choices import MAX_DIGITS as MAX_DIGITS
from foldsift.tui.choices import ColumnSet as ColumnSet

__all__ = [
    "COLUMN_SETS",
    "DEFAULT_FORM",
    "SELECTIONS",
    "SHORT_COLUMNS",
    "ColumnSet",
    "ExportError",
    "ExportForm",
    "csv_rows",
    "escape_note",
    "guard_formulas",
    "join_reviews",
    "select_rows",
    "settings_path",
    "short_export",
    "significant",
    "unescape_note",
    "write_export",
]

#: The first characters that make a spreadsheet program read a cell as a formula.
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$"


class ExportError(ValueError):
    """The export cannot be written where asked; the message says why and what to do."""


def guard_formulas(frame: pl.DataFrame) -> pl.DataFrame:
    """Text cells that a spreadsheet would run as a formula, with a leading apostrophe."""
    guarded = []
    for name, dtype in frame.schema.items():
        if dtype == pl.String:
            cell = pl.col(name)
            risky = cell.str.starts_with(FORMULA_STARTS[0])
            for start in FORMULA_STARTS[1:]:
                risky = risky | cell.str.starts_with(start)
            risky = risky & ~cell.str.contains(_PLAIN_NUMBER)
            guarded.append(pl.when(risky).then(pl.lit("'") + cell).otherwise(cell).alias(name))
    return frame.with_columns(guarded) if guarded else frame


SELECTIONS: tuple[str, ...] = ("flagged", "all")

# Values given to comparisons that have no review row, so exports never show nulls for them.
_REVIEW_DEFAULTS: dict[str, Any] = {"flagged": False, "note": "", "on_earlier_data": False}


def join_reviews(comparisons: pl.DataFrame, reviews: pl.DataFrame) -> pl.DataFrame:
    """Left-join ``reviews`` onto ``comparisons`` by ``key``, keeping the comparison order.

    Comparisons without a review get flagged=False, note='' and on_earlier_data=False;
    decision, review_fingerprint and updated_at stay null for them.
    """
    for name, frame in (("comparisons", comparisons), ("reviews", reviews)):
        if "key" not in frame.columns:
            raise ValueError(f"{name} frame has no 'key' column")
    clashes = sorted(set(comparisons.columns) & set(reviews.columns) - {"key"})
    if clashes:
        # A silent '_right' suffix would put the wrong column under a familiar name.
        raise ValueError(f"comparisons already have review column(s): {', '.join(clashes)}")
    if reviews.get_column("key").is_duplicated().any():
        raise ValueError("reviews frame has duplicate keys")
    joined = comparisons.join(reviews, on="key", how="left", maintain_order="left")
    fills = [
        pl.col(name).fill_null(value) for name, value in _REVIEW_DEFAULTS.items() if name in joined
    ]
    return joined.with_columns(fills) if fills else joined


def select_rows(joined: pl.DataFrame, which: str = "flagged") -> pl.DataFrame:
    """Rows to export: ``"flagged"`` keeps flagged rows only, ``"all"`` keeps every row."""
    if which == "all":
        return joined
    if which == "flagged":
        if "flagged" not in joined.columns:
            raise ValueError("frame has no 'flagged' column; join the reviews first")
        return joined.filter(pl.col("flagged"))
    raise ValueError(f"unknown row selection {which!r}; use one of {', '.join(SELECTIONS)}")


# -- the two forms of an export -------------------------------------------------------------

#: How a note is put on one line in the short export (said in the sidecar and the README).
NOTE_ESCAPES = {"\\": "\\\\", "\n": "\\n", "\r": "\\r"}
NOTE_ESCAPING = (
    "each note on one line: a line break is written as the two characters \\n, a carriage "
    "return as \\r, and a backslash as two backslashes \\\\"
)


@dataclass(frozen=True)
class ExportForm:
    """How an export is written: which columns, how many significant digits (short form
    only; the full form keeps full precision), and whether a byte-order mark comes first."""

    columns: ColumnSet = "short"
    digits: int = DEFAULT_DIGITS
    bom: bool = False

    def __post_init__(self) -> None:
        if self.columns not in COLUMN_SETS:
            raise ValueError(f"unknown column set {self.columns!r}; use short or full")
        if not 1 <= self.digits <= MAX_DIGITS:
            raise ValueError(f"{self.digits} significant digits: give 1 to {MAX_DIGITS}")

    def describe(self) -> dict[str, Any]:
        """The form as the sidecar records it (``settings.export``)."""
        short = self.columns == "short"
        return {
            "columns": self.columns,
            "digits": self.digits if short else None,
            "numbers": f"rounded to {self.digits} significant digits"
            if short
            else "full precision",
            "notes": NOTE_ESCAPING if short else "as typed; line breaks inside quoted cells",
            "byte_order_mark": self.bom,
        }


DEFAULT_FORM = ExportForm()

#: The short export's columns, in CSV order, named as they are written.
SHORT_COLUMNS = (
    col.OUTCOME,
    col.UNIT,
    col.GROUPING,
    col.WITHIN,
    col.STRATUM,
    col.LEVEL_A,
    col.LEVEL_B,
    col.N_A,
    col.N_B,
    "gm_a",
    "gm_b",
    col.RATIO,
    col.CI_LOW,
    col.CI_HIGH,
    "p",
    "q",
    "class",
    "method",
    col.WARNINGS,
    "flag",
    col.DECISION,
    col.NOTE,
    col.SENTENCE,
)
#: Full-export columns that the short export writes under a shorter name.
SHORT_NAMES = {col.P_VALUE: "p", col.Q_BH: "q", col.BAND_CLASS: "class", col.FLAGGED: "flag"}
#: The columns the short export rounds (counts stay whole numbers).
ROUNDED = ("gm_a", "gm_b", col.RATIO, col.CI_LOW, col.CI_HIGH, col.P_VALUE, col.Q_BH)
#: Written by the short export after ``method`` when any of its rows has cross-checks.
CROSS_CHECKS = tuple(col.CROSS_CHECK_SCHEMA)
#: Below this power of ten a rounded number is written out in full (12340, not 1.234e+04).
_PLAIN_BELOW = 16


def significant(value: float | None, digits: int = DEFAULT_DIGITS) -> str | None:
    """``value`` rounded to ``digits`` significant digits, as Python's ``format(value,
    '.4g')`` rounds it, written without an exponent up to 10^15 (``12340``); None for a
    missing value or NaN, ``inf`` for an infinite one."""
    if value is None or math.isnan(value):
        return None
    text = format(value, f".{digits}g")
    _, plus, exponent = text.partition("e+")
    if plus and int(exponent) < _PLAIN_BELOW:
        return format(Decimal(text), "f")
    return text


def escape_note(note: pl.Expr) -> pl.Expr:
    """The note on one line (``NOTE_ESCAPING``); ``unescape_note`` reads it back."""
    for plain, escaped in NOTE_ESCAPES.items():  # the backslash first
        note = note.str.replace_all(plain, escaped, literal=True)
    return note


_ESCAPED = re.compile(r"\\([\\nr])")
_UNESCAPES = {escaped[1]: plain for plain, escaped in NOTE_ESCAPES.items()}


def unescape_note(text: str) -> str:
    """A note of a short export as it was typed."""
    return _ESCAPED.sub(lambda match: _UNESCAPES[match.group(1)], text)


def short_export(frame: pl.DataFrame, digits: int, *, stratified: bool) -> pl.DataFrame:
    """The short form of an export frame (the full columns and their ``sentence``):
    ``SHORT_COLUMNS``, the outcome by its readable name, numbers as text rounded to
    ``digits`` significant digits, ``flag`` as yes/no, notes on one line. ``within`` and
    ``stratum`` only when the scan compared inside strata (``stratified``); the
    cross-check columns only when a row has cross-checks."""
    labels = {name: readable_outcome(name) for name in frame[col.OUTCOME].unique()}
    checked = frame.select(pl.any_horizontal(pl.col(CROSS_CHECKS).is_not_null()).any()).item()
    checks = CROSS_CHECKS if checked else ()
    rounded = [
        pl.Series(name, [significant(v, digits) for v in frame[name]], dtype=pl.String)
        for name in (*ROUNDED, *checks)
    ]
    frame = frame.with_columns(
        pl.col(col.OUTCOME).replace_strict(labels, return_dtype=pl.String),
        *rounded,
        pl.when(pl.col(col.FLAGGED)).then(pl.lit("yes")).otherwise(pl.lit("no")).alias(col.FLAGGED),
        escape_note(pl.col(col.NOTE)),
    ).rename(SHORT_NAMES)
    strata = () if stratified else (col.WITHIN, col.STRATUM)
    names = [name for name in SHORT_COLUMNS if name not in strata]
    after = names.index("method") + 1
    return frame.select(*names[:after], *checks, *names[after:])


def csv_rows(path: Path) -> int | None:
    """How many rows the CSV at ``path`` holds (quoted line breaks read as CSV does), or
    None when it cannot be read as a CSV."""
    try:
        return int(pl.scan_csv(path, infer_schema=False).select(pl.len()).collect().item())
    except (OSError, pl.exceptions.PolarsError):
        return None


def settings_path(csv_path: Path) -> Path:
    """The sidecar JSON written next to ``csv_path``: ``<csv name>.settings.json``."""
    csv_path = Path(csv_path)
    return csv_path.with_name(csv_path.name + ".settings.json")


def _target(path: Path, protect: Sequence[Path]) -> Path:
    """The regular file to write: a symbolic link's target; refuses the input data and
    anything that is not a regular file."""
    path = Path(path).expanduser()
    if path.is_symlink():
        path = path.resolve()
    if path.is_dir():
        raise IsADirectoryError(f"{path} is a folder; give a file name for the export")
    if path.exists() and not path.is_file():
        raise ExportError(f"{path}: is not a regular file (a device or a pipe); choose a file name")
    for other in protect:
        if path.exists() and Path(other).exists() and path.samefile(other):
            raise ExportError(f"{path}: is the input data file; choose another name for the CSV")
    if not path.parent.is_dir():
        raise ExportError(
            f"{path}: folder {path.parent} does not exist; create it or choose another"
        )
    return path


def csv_text(frame: pl.DataFrame, *, allow_formulas: bool = False) -> pl.DataFrame:
    """The frame as the CSV holds it: lists joined, enums as text, formulas guarded."""
    frame = csv_ready(frame)
    _reject_nested(frame)
    return frame if allow_formulas else guard_formulas(frame)


def write_export(
    frame: pl.DataFrame,
    path: Path,
    settings: dict[str, Any],
    overwrite: bool = False,
    *,
    protect: Sequence[Path] = (),
    allow_formulas: bool = False,
    bom: bool = False,
) -> Path:
    """Write ``frame`` to ``path`` as CSV and the settings to ``<path>.settings.json``.

    The JSON holds ``settings`` under the key ``"settings"`` (kept apart so a setting can
    never collide with the fields added here) plus ``exported_at``, ``rows``, ``columns``,
    ``csv`` and ``formulas_guarded``. Existing files are only replaced when ``overwrite``
    is true; the files in ``protect`` (the input data) never are. With ``bom``, the CSV
    starts with the UTF-8 byte-order mark.
    """
    path = _target(path, protect)
    sidecar = settings_path(path)
    frame = csv_text(frame, allow_formulas=allow_formulas)
    if not overwrite:
        for target in (path, sidecar):
            if target.exists():
                raise FileExistsError(
                    f"{target} already exists; choose another name or allow overwriting"
                )
    _remove_stale_temps(path)
    _remove_stale_temps(sidecar)
    meta = {
        "formulas_guarded": not allow_formulas,
        "settings": settings,
        "exported_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "rows": frame.height,
        "columns": frame.columns,
        "csv": path.name,
    }
    # Serialise before touching the disk so bad settings cannot leave a CSV without its JSON.
    meta_text = json.dumps(
        meta, indent=2, ensure_ascii=False, allow_nan=False, default=_json_default
    )

    csv_tmp = _write_temp(path, lambda fh: frame.write_csv(fh, include_bom=bom))
    try:
        json_tmp = _write_temp(sidecar, lambda fh: fh.write(meta_text.encode("utf-8") + b"\n"))
    except BaseException:
        _unlink_quietly(csv_tmp)
        raise
    try:
        os.replace(csv_tmp, path)
        os.replace(json_tmp, sidecar)
    except BaseException:
        _unlink_quietly(csv_tmp)
        _unlink_quietly(json_tmp)
        raise
    _fsync_dir(path.parent)
    return path


def _reject_nested(frame: pl.DataFrame) -> None:
    # CSV has no faithful form for these; refusing beats writing an unreadable cell.
    for name, dtype in frame.schema.items():
        if isinstance(dtype, pl.List | pl.Array | pl.Struct | pl.Object):
            raise ValueError(
                f"column {name!r} has nested type {dtype}; flatten or drop it before exporting"
            )


def _json_default(value: object) -> object:
    # Paths and sets are common in settings; anything else unknown is an error, not str().
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if isinstance(value, set | frozenset):
        return sorted(value, key=str)
    raise TypeError(f"setting value {value!r} of type {type(value).__name__} is not JSON-ready")


def _create_temp(target: Path) -> tuple[int, Path]:
    """A new, empty temporary file beside ``target``, readable as the user's umask allows.

    Same folder as the target, so os.replace is a rename within one filesystem. Created
    with mode 0o666 so the kernel applies the umask (an export is for colleagues; mkstemp
    would make it private), without changing the process-wide umask while other threads
    run."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0)
    for _ in range(100):
        tmp = target.with_name(f".{target.name}.{os.getpid()}-{secrets.token_hex(6)}.tmp")
        try:
            return os.open(tmp, flags, 0o666), tmp
        except FileExistsError:
            continue
    raise FileExistsError(f"{target.parent}: could not create a temporary file for {target.name}")


def _write_temp(target: Path, write: Callable[[BinaryIO], object]) -> Path:
    """Write into a new temporary file beside ``target`` and fsync it; return its path."""
    fd, tmp = _create_temp(target)
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        _unlink_quietly(tmp)
        raise
    return tmp


def _remove_stale_temps(target: Path) -> None:
    """Remove temporary files of ``target`` left by a writer that no longer runs (killed
    during an export): our own naming, ``.<name>.<pid>-<random>.tmp``."""
    prefix = f".{target.name}."
    for leftover in target.parent.glob(f"{glob.escape(prefix)}*.tmp"):
        pid_text = leftover.name[len(prefix) :].partition("-")[0]
        if pid_text.isdigit() and not _running(int(pid_text)):
            _unlink_quietly(leftover)


def _running(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # someone else's process: leave its files alone
    return True


def _unlink_quietly(path: Path) -> None:
    with contextlib.suppress(FileNotFoundError):
        path.unlink()


def _fsync_dir(directory: Path) -> None:
    # Makes the renames themselves durable; directories cannot be opened this way on Windows.
    if os.name != "posix":
        return
    fd = os.open(directory, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
