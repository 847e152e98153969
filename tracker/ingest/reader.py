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
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

import pandas as pd

from tracker.errors import InputError

__all__ = ["TableFile", "open_table", "file_hash"]

CHUNK_ROWS = 200_000
_SNIFF_BYTES = 64 * 1024
_DELIMITERS = ",;\t|"


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
    kind: str  # "csv" or "parquet"
    delimiter: str | None = None
    encoding: str = "utf-8"
    chunk_rows: int = CHUNK_ROWS
    bytes_read: int = field(default=0, init=False)

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
        else:
            yield from self._csv_chunks()

    def _csv_chunks(self) -> Iterator[tuple[int, pd.DataFrame]]:
        with open(self.path, "rb") as raw:
            counter = _CountingReader(raw)
            buffered = io.BufferedReader(counter, 1 << 20)
            text = io.TextIOWrapper(buffered, encoding=self.encoding, newline="")
            try:
                reader = pd.read_csv(
                    text,
                    sep=self.delimiter,
                    dtype=str,
                    keep_default_na=False,
                    na_filter=False,
                    skip_blank_lines=False,
                    chunksize=self.chunk_rows,
                    engine="c",
                    header=0,
                    names=self.columns,
                )
                first = 1
                for frame in reader:
                    self.bytes_read = counter.count
                    frame.index = range(first, first + len(frame))
                    first += len(frame)
                    blank = (frame == "").all(axis=1)
                    if blank.any():
                        frame = frame[~blank]
                    if len(frame):
                        yield frame.index[0], frame
                self.bytes_read = self.size
            except UnicodeDecodeError:
                raise InputError(
                    "is not valid UTF-8 text",
                    file=self.name,
                    fix="re-save it as UTF-8 (CSV UTF-8 in a spreadsheet program)",
                ) from None
            except pd.errors.ParserError as exc:
                detail = str(exc).strip().splitlines()[-1]
                raise InputError(
                    f"cannot be read as CSV ({detail})",
                    file=self.name,
                    fix="check the quoting on that line, or pass --delimiter",
                ) from None

    def _parquet_chunks(self) -> Iterator[tuple[int, pd.DataFrame]]:
        import pyarrow.parquet as pq

        handle = pq.ParquetFile(self.path)
        first = 1
        done_rows = 0
        total_rows = max(handle.metadata.num_rows, 1)
        for batch in handle.iter_batches(batch_size=self.chunk_rows):
            frame = batch.to_pandas()
            frame = frame.astype(object).where(frame.notna(), "").astype(str)
            frame.index = range(first, first + len(frame))
            first += len(frame)
            done_rows += len(frame)
            self.bytes_read = int(self.size * done_rows / total_rows)
            yield frame.index[0], frame


def open_table(path: str | Path, *, delimiter: str | None = None, chunk_rows: int = CHUNK_ROWS) -> TableFile:
    """Open a CSV or Parquet file for streaming, checking what can be checked up front.

    Raises :class:`InputError` for a missing or empty file, undecodable text,
    an unreadable header, or duplicate or blank column names.
    """
    path = Path(path)
    if not path.exists():
        raise InputError("file not found", file=str(path), fix="check the path")
    if not path.is_file():
        raise InputError("is not a file", file=str(path), fix="give the path of a CSV or Parquet file")
    size = path.stat().st_size
    if path.suffix.lower() in (".parquet", ".pq"):
        return _open_parquet(path, size, chunk_rows)
    with open(path, "rb") as handle:
        head = handle.read(_SNIFF_BYTES)
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
    header_line = sample.splitlines()[0] if sample.splitlines() else ""
    try:
        header = next(csv.reader([header_line], delimiter=delimiter))
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
    lines = "\n".join(sample.splitlines()[:50])
    try:
        return csv.Sniffer().sniff(lines, delimiters=_DELIMITERS).delimiter
    except csv.Error:
        first = sample.splitlines()[0]
        counts = {d: first.count(d) for d in _DELIMITERS}
        best = max(counts, key=counts.get)
        return best if counts[best] else ","
