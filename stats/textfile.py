"""Reading a data file's bytes once and turning them into a raw frame of text columns.

The file (a regular file, a named pipe, a device such as ``/dev/stdin``) is read once; its
SHA-256 is taken over exactly those bytes, and the table is parsed from memory, so the
fingerprint always describes what was read.

Rules, in order:

- **Parquet** when the name ends in ``.parquet``/``.pq`` or the bytes start with ``PAR1``.
- **Encoding** (text files): ``--encoding NAME`` when given (strict: a byte that is not valid
  in NAME is refused, naming its line). Otherwise a UTF-8 byte-order mark means UTF-8 and a
  UTF-16 one UTF-16; then UTF-8 if every byte sequence is valid UTF-8; then Windows-1252
  (cp1252, the usual encoding of spreadsheet exports in Western European locales; a note
  says so). Both decodings map distinct bytes to distinct characters, so two distinct names
  never become one. A file that is neither valid UTF-8 nor Windows-1252, or that mixes
  valid UTF-8 sequences with bytes that are not UTF-8 (the same name could then be spelled
  in two encodings), is refused with a message naming ``--encoding``. Nothing is decoded
  with replacement characters.
- **Preamble**: blank lines, comment lines starting with ``#`` and a ``sep=X`` line (as
  spreadsheet programs write it, optionally quoted) before the header are skipped; the
  ``sep=`` line sets the separator, and a note counts the comment lines.
- **Separator**: from the ``sep=`` line; ``\\t`` for ``.tsv``/``.tab``; else sniffed among
  ``, \\t ; |`` from the first lines.
- **Fields** are read by RFC 4180: a field holding the separator, a quote or a line break is
  enclosed in double quotes, and a quote inside is doubled (the field ``"5"" pipe"`` is ``5" pipe``).
  A quote that breaks this rule is refused, not guessed around. Blank lines are skipped.
- **Column names** (see :func:`name_columns`).
"""

from __future__ import annotations

import codecs
import csv
import hashlib
import io
import os
import re
import stat
import threading
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import polars as pl

from .errors import InputError

_HEAD_BYTES = 64 * 1024
_UTF16_MARKS = (codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)
_PARQUET_SUFFIXES = (".parquet", ".pq")
_SEPARATORS = ",\t;|"
_UTF8_SEQUENCE = re.compile(
    rb"[\xc2-\xdf][\x80-\xbf]|[\xe0-\xef][\x80-\xbf]{2}|[\xf0-\xf4][\x80-\xbf]{3}"
)
_SEP_LINE = re.compile(r'^\s*"?sep=(\\t|tab|[^"\r\n])"?[,;\t| ]*$', re.IGNORECASE)
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f]")


@dataclass(frozen=True)
class RawTable:
    """A file read once: its frame (text columns for delimited files), the SHA-256 of its
    bytes, the separator (None for Parquet) and notes on what the reader did."""

    frame: pl.DataFrame
    fingerprint: str
    separator: str | None
    notes: tuple[str, ...] = ()


def _open_error(path: Path, error: OSError) -> InputError:
    return InputError(
        f"{path}: cannot be opened ({error.strerror or type(error).__name__}); "
        "check the file's permissions"
    )


def _check_head(path: Path, head: bytes, encoding: str | None) -> None:
    """Refuse an empty or binary input from its first bytes (before reading an endless one).
    NUL bytes are text in UTF-16 and UTF-32, so they are allowed with a byte-order mark or
    a given encoding."""
    if not head.strip():
        raise InputError(f"{path}: is empty; give a table with a header row and data rows")
    if encoding is not None or head.startswith((b"PAR1", *_UTF16_MARKS)):
        return
    if b"\x00" in head:
        raise InputError(
            f"{path}: looks like a binary file, not text; give a CSV, TSV or Parquet file "
            "(UTF-16 text without a byte-order mark needs --encoding utf-16)"
        )


def read_bytes(path: Path, encoding: str | None = None) -> bytes:
    """The whole input, read once; an empty or binary input is refused from its head."""
    if not path.exists():
        raise InputError(f"{path}: no such file; check the path and try again")
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a data file; give a CSV, TSV or Parquet file")
    try:
        with path.open("rb") as handle:
            if stat.S_ISREG(path.stat().st_mode):
                data = handle.read()
                _check_head(path, data[:_HEAD_BYTES], encoding)
                return data
            head = handle.read(_HEAD_BYTES)
            _check_head(path, head, encoding)
            return head + handle.read()
    except OSError as error:
        raise _open_error(path, error) from None


def _line_of(data: bytes, offset: int) -> int:
    return data.count(b"\n", 0, offset) + 1


def _utf8_error(data: bytes) -> int | None:
    """The offset of the first byte that is not valid UTF-8 (None when all are)."""
    if data.isascii():
        return None
    decoder = codecs.getincrementaldecoder("utf-8")()
    view = memoryview(data)
    step = 1 << 20
    for start in range(0, len(data), step):
        pending = len(decoder.getstate()[0])  # bytes of a character split by the step
        try:
            decoder.decode(view[start : start + step], final=start + step >= len(data))
        except UnicodeDecodeError as error:
            return start - pending + error.start
    return None


def _with_encoding(path: Path, data: bytes, encoding: str) -> bytes:
    try:
        codec = codecs.lookup(encoding)
    except LookupError:
        raise InputError(
            f"--encoding {encoding}: not an encoding Python knows; try utf-8, cp1252 or latin-1"
        ) from None
    try:
        text = data.decode(codec.name)
    except UnicodeDecodeError as error:
        raise InputError(
            f"{path}: line {_line_of(data, error.start)} holds byte 0x{data[error.start]:02x}, "
            f"which is not valid {codec.name}; give the file's encoding with --encoding NAME"
        ) from None
    return text.removeprefix("\ufeff").encode("utf-8")


def _guess_encoding(path: Path, data: bytes) -> tuple[bytes, str | None]:
    """UTF-8 bytes of the text, and a note when the file was not UTF-8."""
    if data.startswith(codecs.BOM_UTF8):
        data = data[len(codecs.BOM_UTF8) :]
    elif data.startswith(_UTF16_MARKS):
        return _with_encoding(path, data, "utf-16"), "read as UTF-16 text (it has a UTF-16 mark)"
    bad = _utf8_error(data)
    if bad is None:
        return data, None
    line = _line_of(data, bad)
    if _UTF8_SEQUENCE.search(data):
        raise InputError(
            f"{path}: mixes UTF-8 text with bytes that are not UTF-8 (first on line {line}); "
            "fix that line, or give the file's encoding with --encoding NAME"
        )
    try:
        text = data.decode("cp1252")
    except UnicodeDecodeError as error:
        raise InputError(
            f"{path}: is neither UTF-8 nor Windows-1252 text (byte 0x{data[error.start]:02x} on "
            f"line {_line_of(data, error.start)}); give its encoding with --encoding NAME, "
            "e.g. --encoding latin-1"
        ) from None
    note = (
        f"read as Windows-1252 text (it is not UTF-8: line {line}); if names look wrong, "
        "give the encoding with --encoding NAME"
    )
    return text.encode("utf-8"), note


def _separator_from(line: str) -> str | None:
    match = _SEP_LINE.match(line)
    if match is None:
        return None
    found = match.group(1)
    return "\t" if found.lower() in ("\\t", "tab") else found


def _preamble(data: bytes) -> tuple[int, str | None, int]:
    """Where the header starts, the separator a ``sep=`` line names, and the count of
    comment lines before the header."""
    position, separator, comments = 0, None, 0
    while position < len(data):
        end = data.find(b"\n", position)
        end = len(data) if end < 0 else end
        line = data[position : min(end, position + 4096)].decode("utf-8", errors="replace")
        line = line.rstrip("\r")
        if line.strip().startswith("#"):
            comments += 1
        elif line.strip() and (separator is not None or _separator_from(line) is None):
            break
        elif line.strip():
            separator = _separator_from(line)
        position = end + 1
    return position, separator, comments


def sniff_separator(sample: str, suffix: str) -> str:
    if suffix in (".tsv", ".tab"):
        return "\t"
    lines = [line for line in sample.splitlines() if line.strip()][:20]
    if not lines:
        return ","
    try:
        return csv.Sniffer().sniff("\n".join(lines), delimiters=_SEPARATORS).delimiter
    except csv.Error:
        counts = {sep: lines[0].count(sep) for sep in _SEPARATORS}
        best = max(counts, key=lambda sep: counts[sep])
        return best if counts[best] > 0 else ","


def _parse_delimited(path: Path, data: bytes, separator: str) -> pl.DataFrame:
    try:
        return pl.read_csv(
            data,
            has_header=False,
            separator=separator,
            infer_schema=False,
            encoding="utf8",
            truncate_ragged_lines=False,
        )
    except pl.exceptions.NoDataError:
        raise InputError(
            f"{path}: is empty; give a table with a header row and data rows"
        ) from None
    except Exception as error:  # polars raises several error types for malformed text
        first = str(error).strip().splitlines()[0] if str(error).strip() else ""
        raise InputError(
            f"{path}: cannot be read as a delimited table ({first[:120]}); check the "
            "separators and quotes (a quote inside a field must be doubled, RFC 4180)"
        ) from None


NO_NAME = "has no name"


@dataclass(frozen=True)
class Renamed:
    """A column whose name was changed: its position (from 1), new name and why."""

    position: int
    name: str
    why: str

    def note(self) -> str:
        return f"column {self.position} {self.why}; it is called {self.name!r} here"


def name_columns(header: Sequence[str | None]) -> tuple[list[str], list[Renamed]]:
    """Column names from header cells, and every name that was changed.

    Names are trimmed; control characters (tabs, line breaks, escapes) become spaces; an
    empty name becomes ``column_N`` (N its position from 1); a name already taken gets
    ``_2``, ``_3``, ... Quotes and other characters are kept as RFC 4180 reads them."""
    names: list[str] = []
    renamed: list[Renamed] = []
    for position, cell in enumerate(header, start=1):
        original = cell or ""
        name = _CONTROL.sub(" ", original).strip()
        why = "had control characters in its name" if _CONTROL.search(original) else ""
        if not name:
            name, why = f"column_{position}", NO_NAME
        if name in names:
            base, count = name, 2
            while f"{base}_{count}" in names:
                count += 1
            name, why = f"{base}_{count}", f"repeats the name {base!r}"
        names.append(name)
        if why:
            renamed.append(Renamed(position, name, why))
    return names, renamed


def _named_frame(raw: pl.DataFrame, notes: list[str]) -> pl.DataFrame:
    """The rows after the header under the header's names; blank lines and nameless
    columns with no entries (a separator at the end of every line) are left out."""
    header = [str(cell) if cell is not None else None for cell in raw.row(0)]
    names, renamed = name_columns(header)
    frame = raw.slice(1).rename(dict(zip(raw.columns, names, strict=True)))
    frame = frame.filter(~pl.all_horizontal(pl.all().is_null()))
    empty = [
        item.name
        for item in renamed
        if item.why == NO_NAME and frame[item.name].null_count() == frame.height
    ]
    if empty:
        frame = frame.drop(empty)
        notes.append(f"left out {len(empty)} column(s) with neither a name nor entries")
    notes += [item.note() for item in renamed if item.name not in empty]
    return frame


def _read_text(path: Path, data: bytes, encoding: str | None) -> RawTable:
    notes: list[str] = []
    if encoding is not None:
        text = _with_encoding(path, data, encoding)
    else:
        text, note = _guess_encoding(path, data)
        notes += [note] if note else []
    start, separator, comments = _preamble(text)
    if comments:
        notes.append(f"skipped {comments} comment line(s) starting with # before the header")
    body = text[start:] if start else text
    if not body.strip():
        raise InputError(f"{path}: has no header row after its first lines; nothing to read")
    if separator is None:
        head = body[:_HEAD_BYTES].decode("utf-8", errors="replace")
        separator = sniff_separator(head, path.suffix.lower())
    frame = _named_frame(_parse_delimited(path, body, separator), notes)
    return RawTable(frame, "", separator, tuple(notes))


#: Columns of a Parquet file read at a time: polars' reader holds about twice a batch while
#: it decodes, so reading a batch at a time keeps its working memory a batch's.
_PARQUET_BATCH = 16


def _parquet_frame(source: Path | bytes) -> pl.DataFrame:
    if isinstance(source, bytes):
        return pl.read_parquet(io.BytesIO(source))
    width = len(pl.read_parquet_schema(source))
    if width <= _PARQUET_BATCH:
        return pl.read_parquet(source)
    parts = [
        pl.read_parquet(source, columns=list(range(start, min(start + _PARQUET_BATCH, width))))
        for start in range(0, width, _PARQUET_BATCH)
    ]
    return pl.concat(parts, how="horizontal")


def _read_parquet(path: Path, source: Path | bytes) -> RawTable:
    try:
        frame = _parquet_frame(source)
    except Exception as error:  # polars raises several error types for bad files
        raise InputError(
            f"{path}: cannot be read as Parquet ({type(error).__name__}); "
            "check that the file is complete"
        ) from None
    names, renamed = name_columns(frame.columns)
    frame = frame.rename(dict(zip(frame.columns, names, strict=True)))
    return RawTable(frame, "", None, tuple(item.note() for item in renamed))


#: Bytes hashed at a time when a file is fingerprinted beside its reading.
_HASH_CHUNK = 1 << 20


def _file_digest(path: Path) -> str:
    """SHA-256 of a file read a chunk at a time (the memory it takes is one chunk's)."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        while chunk := handle.read(_HASH_CHUNK):
            digest.update(chunk)
    return digest.hexdigest()


def _parquet_file(path: Path) -> bool:
    """A regular file that is Parquet by its name, or by the magic bytes PAR1 at its start
    and end (Apache Parquet format)."""
    try:
        if not stat.S_ISREG(path.stat().st_mode):
            return False
        if path.suffix.lower() in _PARQUET_SUFFIXES:
            return True
        with path.open("rb") as handle:
            head = handle.read(4)
            handle.seek(-4, io.SEEK_END)
            return head == b"PAR1" and handle.read(4) == b"PAR1"
    except OSError:
        return False  # read_bytes gives the message


def _read_parquet_file(path: Path) -> RawTable:
    """A Parquet file read by polars from its path (no copy of its bytes in memory), its
    fingerprint taken a chunk at a time in a thread meanwhile (hashlib and polars release the
    interpreter lock). A file that changes during the reading is refused."""
    try:
        with path.open("rb") as handle:
            _check_head(path, handle.read(_HEAD_BYTES), None)
        before = path.stat()
    except OSError as error:
        raise _open_error(path, error) from None
    digest: list[str] = []
    failed: list[OSError] = []

    def fingerprint() -> None:
        try:
            digest.append(_file_digest(path))
        except OSError as error:
            failed.append(error)

    hasher = threading.Thread(target=fingerprint)
    hasher.start()
    try:
        table = _read_parquet(path, path)
    finally:
        hasher.join()
        _check_unchanged(path, before)
    if failed:
        raise _open_error(path, failed[0])
    return RawTable(table.frame, digest[0], None, table.notes)


def _check_unchanged(path: Path, before: os.stat_result) -> None:
    """Refuse a file whose size or modification time changed since ``before`` (this message
    wins over a reading error the change may have caused)."""
    try:
        after = path.stat()
    except OSError as error:
        raise _open_error(path, error) from None
    if (before.st_size, before.st_mtime_ns) != (after.st_size, after.st_mtime_ns):
        raise InputError(
            f"{path}: changed while it was being read; read it again once it is complete"
        )


def read_table_file(path: Path, encoding: str | None = None) -> RawTable:
    """Read a CSV/TSV/Parquet file once: the raw frame (text files as strings, so censored
    entries survive), the fingerprint of its bytes, its separator and the reader's notes."""
    parquet = _parquet_file(path)
    table = _read_parquet_file(path) if parquet else _read_bytes_file(path, encoding)
    if table.frame.height == 0:
        raise InputError(f"{path}: has a header but no data rows; nothing to compare")
    return table


def _read_bytes_file(path: Path, encoding: str | None) -> RawTable:
    """A text file (or a stream) read into memory once, hashed while it is parsed."""
    data = read_bytes(path, encoding)
    # The fingerprint is taken while the bytes are parsed: hashlib and polars both release
    # the interpreter lock, so on two cores the hash costs no extra time.
    digest: list[str] = []
    hasher = threading.Thread(target=lambda: digest.append(hashlib.sha256(data).hexdigest()))
    hasher.start()
    try:
        if data.startswith(b"PAR1") and data.endswith(b"PAR1"):
            table = _read_parquet(path, data)
        else:
            table = _read_text(path, data, encoding)
    finally:
        hasher.join()
    return RawTable(table.frame, digest[0], table.separator, table.notes)
