"""Reading the mapped columns of a file as Arrow tables, fast.

CSV files are parsed by pyarrow's multithreaded reader, every mapped column
as dictionary-encoded text (each distinct value is stored once, so a column
of a million dates holds a few thousand strings).  Whatever pyarrow cannot
read exactly as the streaming pandas reader of :mod:`tracker.ingest.reader`
would (a trailing delimiter, blank lines, bad UTF-8, a quoted header...)
falls back to that reader, which reads the same rows or names the problem
(see :class:`ArrowFallback`).  Parquet and Excel files go through pandas.

Row places: data rows are numbered from 1 after the header;
:func:`editor_lines` turns them into the line numbers an editor shows (the
header is line 1, a record whose quoted text spans lines starts where it
starts), found again only when a message needs them.
"""

from __future__ import annotations

import csv
import sys
from pathlib import Path
from typing import Iterator

import numpy as np
import pyarrow as pa

from tracker.errors import InputError
from tracker.ingest.reader import TableFile

__all__ = ["ArrowFallback", "arrow_tables", "pandas_tables", "editor_lines", "place_error"]

#: Files up to this size are parsed in one multithreaded call; larger ones stream.
WHOLE_FILE_BYTES = 256 << 20
_BLOCK = 16 << 20
_TEXT = pa.dictionary(pa.int32(), pa.string())


class ArrowFallback(Exception):
    """pyarrow could not read a CSV file as the pandas reader would: read it with that one."""


def arrow_tables(table: TableFile, columns: list[str]) -> Iterator[tuple[int, pa.Table]]:
    """Yield ``(rows, table)`` of the mapped ``columns`` as dictionary-encoded text.

    ``rows`` is the first data row number (consecutive rows follow), or an
    array of every row's number.

    Raises :class:`ArrowFallback` (possibly after some tables were yielded)
    when the pandas reader must read the file instead.
    """
    if table.kind != "csv" or not _arrow_safe(table):
        yield from pandas_tables(table, columns)
        return
    import pyarrow.csv as pacsv

    read = pacsv.ReadOptions(column_names=table.columns, skip_rows=1, use_threads=True, block_size=_BLOCK, encoding="utf8")
    parse = pacsv.ParseOptions(
        delimiter=table.delimiter or ",", quote_char='"', double_quote=True, escape_char=False,
        newlines_in_values=True, ignore_empty_lines=False,
    )
    convert = pacsv.ConvertOptions(
        column_types={c: _TEXT for c in columns}, include_columns=columns, null_values=[],
        strings_can_be_null=False, quoted_strings_can_be_null=False, check_utf8=True,
    )
    try:
        if table.size <= WHOLE_FILE_BYTES:
            whole = pacsv.read_csv(table.path, read_options=read, parse_options=parse, convert_options=convert)
            table.bytes_read = table.size
            _no_blank_rows(whole)
            if whole.num_rows:
                yield 1, whole
            return
        first = 1
        with pacsv.open_csv(table.path, read_options=read, parse_options=parse, convert_options=convert) as stream:
            for batch in stream:
                if batch.num_rows == 0:
                    continue
                table.bytes_read = min(table.size, int(table.size * 0.99))
                part = pa.Table.from_batches([batch])
                _no_blank_rows(part)
                yield first, part
                first += batch.num_rows
        table.bytes_read = table.size
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, UnicodeDecodeError) as exc:
        raise ArrowFallback(str(exc)) from None


def _no_blank_rows(part: pa.Table) -> None:
    """Blank lines are rows that keep their number but hold no data: the pandas reader skips those."""
    blank = np.ones(part.num_rows, dtype=bool)
    for column in part.columns:
        array = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
        if not pa.types.is_dictionary(array.type):
            return
        empty = np.array([v == "" for v in array.dictionary.to_pylist()], dtype=bool)
        if not empty.any():
            return
        blank &= empty[array.indices.to_numpy(zero_copy_only=False)]
        if not blank.any():
            return
    if blank.any():
        raise ArrowFallback("blank lines")


def pandas_tables(table: TableFile, columns: list[str]) -> Iterator[tuple[int, pa.Table]]:
    """The same tables read by the streaming pandas reader (every check of :mod:`tracker.ingest.reader`)."""
    for _, frame in table.chunks():
        # blank lines are left out but keep their numbers: pass the row numbers along
        yield frame.index.to_numpy(dtype=np.int64), pa.Table.from_pandas(frame[columns], preserve_index=False)


def _arrow_safe(table: TableFile) -> bool:
    """Whether pyarrow reads the file as pandas would: a plain header line (no quotes, no lone CR)."""
    with open(table.path, "rb") as handle:
        head = handle.read(1 << 16)
    line, newline, _ = head.partition(b"\n")
    return bool(newline) and b'"' not in line and b"\r" not in line.rstrip(b"\r")


def editor_lines(table: TableFile, rows) -> dict[int, int]:
    """Editor line (header = line 1) where each data row starts.

    CSV files are read again with :mod:`csv` up to the last row asked for,
    so quoted line breaks and blank lines count as an editor counts them;
    Excel rows are the sheet's row numbers; Parquet has no lines (empty).
    """
    wanted = sorted({int(r) for r in rows})
    if not wanted or table.kind == "parquet":
        return {}
    if table.kind != "csv":
        return {r: r + 1 for r in wanted}
    found: dict[int, int] = {}
    limit = csv.field_size_limit()
    csv.field_size_limit(min(sys.maxsize, 2**31 - 1))
    try:
        with open(table.path, encoding=table.encoding, newline="", errors="replace") as handle:
            records = csv.reader(handle, delimiter=table.delimiter or ",")
            next(records, None)
            start, pending = records.line_num + 1, iter(wanted)
            target = next(pending)
            for number, _ in enumerate(records, start=1):
                if number == target:
                    found[number] = start
                    target = next(pending, None)
                    if target is None:
                        break
                start = records.line_num + 1
    except csv.Error:
        pass
    finally:
        csv.field_size_limit(limit)
    return found


def place_error(table: TableFile, exc: InputError) -> InputError:
    """The same error naming the editor line of its row (unchanged for Parquet or without a row)."""
    if exc.row is None or exc.line is not None or table.kind == "parquet":
        return exc
    line = editor_lines(table, [exc.row]).get(exc.row)
    if line is None:
        return exc
    return InputError(exc.problem, file=exc.file, line=line, column=exc.column, value=exc.value, fix=exc.fix)


def read_excel(path: Path):
    """Every sheet row of the first sheet of an .xlsx file as text ('' for empty cells)."""
    import pandas as pd

    try:
        frame = pd.read_excel(path, dtype=str, header=0, engine="openpyxl")
    except Exception as exc:  # openpyxl raises many kinds for damaged files
        raise InputError(f"cannot be read as an Excel workbook ({type(exc).__name__})", file=path.name,
                         fix="open it in a spreadsheet program and save it again as .xlsx or CSV UTF-8") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame.fillna("").astype(str)
