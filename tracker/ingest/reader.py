"""Streaming CSV and Parquet files in chunks of text columns.

CSV files may be UTF-8 with or without a byte-order mark (as spreadsheet
programs write them); the delimiter is detected from the first lines unless
given.  Every value comes back as text; validation happens in
:mod:`tracker.ingest.events` and :mod:`tracker.ingest.roster`.  Data rows are
numbered from 1 (the first row after the header); lines that are completely
empty are skipped but keep their number, so the numbers match what a
spreadsheet shows minus the header.
"""

from __future__ import annotations

import codecs
import csv
import hashlib
import io
import itertools
import re
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

import pandas as pd

from tracker.errors import InputError

__all__ = ["TableFile", "open_table", "file_hash"]

CHUNK_ROWS = 200_000
_SNIFF_BYTES = 64 * 1024
_DELIMITERS = ",;\t|"
#: One spare column beyond the header: a row with one field too many lands
#: there (and is refused unless it is empty, as a trailing delimiter leaves it)
#: instead of pandas taking the first field for a row index and shifting the
#: others one column to the left.  Header names are stripped, so none starts
#: with a space.
_SPARE = " spare"
_TOO_MANY = re.compile(r"Expected (\d+) fields in line (\d+), saw (\d+)")


def file_hash(path: Path) -> str:
    """SHA-256 of the file's bytes (identifies a batch's content)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


class _CountingReader(io.RawIOBase):
    """A binary file wrapper that counts the bytes handed out (for progress bars)."""

    def __init__(self, handle):
        self._handle = handle
        self.count = 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:
        data = self._handle.read(len(buffer))
        buffer[: len(data)] = data
        self.count += len(data)
        return len(data)


@dataclass
class TableFile:
    """An input table opened for streaming."""

    path: Path
    columns: list[str]
    size: int
    kind: str  # "csv", "parquet" or "xlsx"
    delimiter: str | None = None
    encoding: str = "utf-8"
    chunk_rows: int = CHUNK_ROWS
    bytes_read: int = field(default=0, init=False)
    sheet: pd.DataFrame | None = field(default=None, repr=False)  # an Excel sheet, read whole

    @property
    def name(self) -> str:
        return self.path.name

    def require(self, wanted: dict[str, str | None]) -> None:
        """Check that every mapped column exists; ``wanted`` maps option name -> column."""
        for option, column in wanted.items():
            if column is not None and column not in self.columns:
                shown = ", ".join(repr(c) for c in self.columns[:12])
                raise InputError(
                    f"has no column {column!r} (given by {option})",
                    file=self.name,
                    fix=f"the columns are {shown}; pass one of them to {option}",
                )

    def chunks(self) -> Iterator[tuple[int, pd.DataFrame]]:
        """Yield ``(first_row_number, frame)``; frames hold text, '' for missing."""
        if self.kind == "parquet":
            yield from self._parquet_chunks()
        elif self.kind == "xlsx":
            frame = self.sheet.copy()
            frame.index = range(1, len(frame) + 1)
            blank = (frame == "").all(axis=1)
            self.bytes_read = self.size
            if len(frame[~blank]):
                yield 1, frame[~blank]
        else:
            yield from self._csv_chunks()

    def _csv_chunks(self) -> Iterator[tuple[int, pd.DataFrame]]:
        with open(self.path, "rb") as raw:
            counter = _CountingReader(raw)
            buffered = io.BufferedReader(counter, 1 << 20)
            text = io.TextIOWrapper(buffered, encoding=self.encoding, newline="")
            try:
                # header=None and skiprows=1 skip the header record (quoted line
                # breaks included) without checking its width against ``names``;
                # index_col=False keeps pandas from guessing a row index.
                reader = pd.read_csv(
                    text,
                    sep=self.delimiter,
                    dtype=str,
                    keep_default_na=False,
                    na_filter=False,
                    skip_blank_lines=False,
                    chunksize=self.chunk_rows,
                    engine="c",
                    header=None,
                    skiprows=1,
                    index_col=False,
                    names=[*self.columns, _SPARE],
                )
                first = 1
                for frame in _strict_chunks(reader, self._wide_first_row):
                    self.bytes_read = counter.count
                    frame.index = range(first, first + len(frame))
                    first += len(frame)
                    spare = frame.pop(_SPARE)
                    extra = (spare != "").to_numpy()
                    if extra.any():
                        row = int(frame.index[int(extra.argmax())])
                        raise InputError(
                            f"has more fields than the header's {len(self.columns)}",
                            file=self.name, row=row, value=spare.loc[row],
                            fix="quote values that contain the delimiter, remove the stray delimiter, or pass --delimiter",
                        )
                    blank = (frame == "").all(axis=1)
                    if blank.any():
                        frame = frame[~blank]
                    if len(frame):
                        yield frame.index[0], frame
                self.bytes_read = self.size
            except UnicodeDecodeError:
                line, offset = _first_bad_utf8(self.path)
                raise InputError(
                    f"is not valid UTF-8 text (line {line}, byte {offset})",
                    file=self.name,
                    fix="re-save it as UTF-8 (CSV UTF-8 in a spreadsheet program)",
                ) from None
            except pd.errors.ParserError as exc:
                raise self._parser_error(exc) from None

    def _wide_first_row(self) -> InputError:
        """The error for a first data row wider than the header plus the spare column.

        pandas takes such a row's width as the file's and silently drops the
        fields beyond ``names`` (with a ParserWarning); later wide rows raise
        ParserError instead.  The row is found again with :mod:`csv`.
        """
        width = len(self.columns)
        with open(self.path, encoding=self.encoding, newline="", errors="replace") as handle:
            records = csv.reader(handle, delimiter=self.delimiter or ",")
            next(records, None)
            for row, record in enumerate(itertools.islice(records, self.chunk_rows), start=1):
                if len(record) > width + 1 or (len(record) == width + 1 and record[-1] != ""):
                    return InputError(
                        f"has {len(record)} fields, more than the header's {width}", file=self.name, row=row,
                        fix="quote values that contain the delimiter, remove the stray delimiters, or pass --delimiter",
                    )
        return InputError(
            f"has a row with more fields than the header's {width}", file=self.name,
            fix="quote values that contain the delimiter, remove the stray delimiters, or pass --delimiter",
        )

    def _parser_error(self, exc: Exception) -> InputError:
        lines = str(exc).strip().splitlines() or [type(exc).__name__]
        detail = lines[-1]
        many = _TOO_MANY.search(str(exc))
        if many:
            # pandas counts records from 1 at the header; data rows from 1 after it.
            row, saw = int(many.group(2)) - 1, int(many.group(3))
            return InputError(
                f"has {saw} fields, more than the header's {len(self.columns)}",
                file=self.name, row=row,
                fix="quote values that contain the delimiter, remove the stray delimiters, or pass --delimiter",
            )
        return InputError(
            f"cannot be read as CSV ({detail})",
            file=self.name,
            fix="check the quoting on that line, or pass --delimiter",
        )

    def _parquet_chunks(self) -> Iterator[tuple[int, pd.DataFrame]]:
        import pyarrow as pa
        import pyarrow.parquet as pq

        first = 1
        done_rows = 0
        try:
            handle = pq.ParquetFile(self.path)
            total_rows = max(handle.metadata.num_rows, 1)
            batches = handle.iter_batches(batch_size=self.chunk_rows)
            while True:
                # A damaged page only shows when its batch is decoded.
                try:
                    batch = next(batches)
                except StopIteration:
                    break
                frame = batch.to_pandas()
                frame = frame.astype(object).where(frame.notna(), "").astype(str)
                frame.index = range(first, first + len(frame))
                first += len(frame)
                done_rows += len(frame)
                self.bytes_read = int(self.size * done_rows / total_rows)
                yield frame.index[0], frame
        except (pa.ArrowException, OSError, ValueError) as exc:
            raise InputError(
                f"cannot be read as Parquet after row {first - 1} ({type(exc).__name__})",
                file=self.name, fix="check that the file is complete, or export it again",
            ) from None


def _first_bad_utf8(path: Path) -> tuple[int, int]:
    """Line (from 1) and byte offset (from 1) of the first byte that is not UTF-8."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    line, done = 1, 0
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            try:
                decoder.decode(block)
            except UnicodeDecodeError as exc:
                # The decoder may hold back the start of a character from the previous block.
                held = len(exc.object) - len(block)
                return line + exc.object[: exc.start].count(b"\n"), done - held + exc.start + 1
            line += block.count(b"\n")
            done += len(block)
    try:
        decoder.decode(b"", final=True)
    except UnicodeDecodeError as exc:  # a character cut short at the end of the file
        return line, done - len(exc.object) + exc.start + 1
    return line, done


def _strict_chunks(reader, wide_row_error) -> Iterator[pd.DataFrame]:
    """The chunks of a pandas reader, raising ``wide_row_error()`` where pandas would drop fields."""
    while True:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", pd.errors.ParserWarning)
            try:
                frame = next(reader)
            except StopIteration:
                return
        for warning in caught:
            if issubclass(warning.category, pd.errors.ParserWarning):
                raise wide_row_error()
            warnings.warn_explicit(warning.message, warning.category, warning.filename, warning.lineno)
        yield frame


def open_table(path: str | Path, *, delimiter: str | None = None, chunk_rows: int | None = None) -> TableFile:
    """Open a CSV, Parquet or Excel (.xlsx, first sheet) file for streaming, checking what can be checked up front.

    Raises :class:`InputError` for a missing or empty file, undecodable text,
    an unreadable header, or duplicate or blank column names.
    """
    path = Path(path)
    chunk_rows = CHUNK_ROWS if chunk_rows is None else chunk_rows
    if not path.exists():
        raise InputError("file not found", file=str(path), fix="check the path")
    if not path.is_file():
        raise InputError("is not a file", file=str(path), fix="give the path of a CSV or Parquet file")
    size = path.stat().st_size
    if path.suffix.lower() in (".parquet", ".pq"):
        return _open_parquet(path, size, chunk_rows)
    with open(path, "rb") as handle:
        head = handle.read(_SNIFF_BYTES)
    if head.startswith(b"PK\x03\x04") or path.suffix.lower() in (".xlsx", ".xlsm"):
        from tracker.ingest.columns import read_excel

        sheet = read_excel(path)
        _check_header(list(sheet.columns), path.name)
        return TableFile(path, list(sheet.columns), size, "xlsx", None, "utf-8", chunk_rows, sheet=sheet)
    if head.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        raise InputError("is UTF-16 text", file=path.name, fix="re-save it as UTF-8 (CSV UTF-8 in a spreadsheet program)")
    encoding = "utf-8-sig" if head.startswith(codecs.BOM_UTF8) else "utf-8"
    if head.startswith(b"PAR1"):
        return _open_parquet(path, size, chunk_rows)
    try:
        sample = codecs.getincrementaldecoder(encoding)().decode(head, final=len(head) < _SNIFF_BYTES)
    except UnicodeDecodeError:
        raise InputError("is not valid UTF-8 text", file=path.name, fix="re-save it as UTF-8 (CSV UTF-8 in a spreadsheet program)") from None
    if "\x00" in sample:
        raise InputError("looks like a binary file, not CSV text", file=path.name, fix="export the data as CSV (UTF-8) or Parquet")
    if not sample.strip():
        raise InputError("is empty", file=path.name, fix="give a file with a header row and at least one data row")
    if delimiter is None:
        delimiter = _sniff_delimiter(sample)
    elif len(delimiter) != 1:
        delimiter = {"tab": "\t", "\\t": "\t"}.get(delimiter.lower(), delimiter)
        if len(delimiter) != 1:
            raise InputError(f"--delimiter must be one character, not {delimiter!r}", fix="e.g. --delimiter ';' or --delimiter tab")
    try:
        # The first record, read as pandas will read it: quoted line breaks
        # belong to the field, and only \n, \r and \r\n end a line.
        header = next(csv.reader(io.StringIO(sample, newline=""), delimiter=delimiter))
    except (csv.Error, StopIteration):
        raise InputError("has an unreadable header row", file=path.name, fix="make the first line a list of column names") from None
    columns = [name.strip() for name in header]
    _check_header(columns, path.name)
    return TableFile(path, columns, size, "csv", delimiter, encoding, chunk_rows)


def _open_parquet(path: Path, size: int, chunk_rows: int) -> TableFile:
    import pyarrow.parquet as pq

    try:
        columns = [str(c) for c in pq.ParquetFile(path).schema_arrow.names]
    except Exception as exc:
        raise InputError(f"cannot be read as Parquet ({type(exc).__name__})", file=path.name, fix="check that the file is complete") from None
    _check_header(columns, path.name)
    return TableFile(path, columns, size, "parquet", None, "utf-8", chunk_rows)


def _check_header(columns: list[str], name: str) -> None:
    if not columns or all(c == "" for c in columns):
        raise InputError("has no header row", file=name, fix="make the first line a list of column names")
    seen: set[str] = set()
    for column in columns:
        if column == "":
            raise InputError("has a column without a name in its header", file=name, fix="name every column in the first line")
        if column in seen:
            raise InputError(f"has two columns named {column!r}", file=name, fix="rename one of them in the header")
        seen.add(column)


def _sniff_delimiter(sample: str) -> str:
    """The candidate delimiter that splits the header into most rows of equal width.

    Each candidate reads the first 50 records with :mod:`csv` (linear time:
    :class:`csv.Sniffer` is quadratic in the line length and takes minutes on
    a damaged 64 KB line); the score is the number of data records as wide as
    the header, then the header's width.  A header of one field under every
    candidate means a one-column file, read with commas.
    """
    best, best_score = ",", (0, 1)
    for delimiter in _DELIMITERS:
        try:
            records = list(itertools.islice(csv.reader(io.StringIO(sample, newline=""), delimiter=delimiter), 51))
        except csv.Error:
            continue
        if not records or len(records[0]) < 2:
            continue
        width = len(records[0])
        data = [r for r in records[1:-1] if r] or [r for r in records[1:] if r]
        score = (sum(len(r) == width for r in data), width)
        if score > best_score:
            best, best_score = delimiter, score
    return best
