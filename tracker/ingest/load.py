"""One file to validated event blocks: read (:mod:`.columns`), validate (:mod:`.block`), report bad rows."""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Callable, Iterator

from tracker.ingest.block import EventBlock, Rejected, validate_block
from tracker.ingest.columns import arrow_tables, editor_lines, pandas_tables
from tracker.ingest.events import EventMapping
from tracker.ingest.periods import PeriodScheme
from tracker.ingest.reader import TableFile

__all__ = ["event_blocks", "write_rejected"]


def event_blocks(
    table: TableFile,
    mapping: EventMapping,
    scheme: PeriodScheme,
    *,
    arrow: bool = True,
    collect: list[Rejected] | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> Iterator[EventBlock]:
    """Validated blocks of a file's events.

    ``arrow`` reads with pyarrow (may raise :class:`tracker.ingest.columns.ArrowFallback`),
    else with the streaming pandas reader.  With ``collect`` (a list), bad
    rows are appended there and left out instead of raising.
    """
    wanted = [c for c in mapping.columns().values() if c is not None]
    tables = arrow_tables(table, wanted) if arrow else pandas_tables(table, wanted)
    for first, part in tables:
        block = validate_block(part, first, mapping, scheme, table.name, collect=collect is not None)
        if collect is not None:
            collect.extend(block.rejected)
        yield block
        if progress is not None:
            progress(table.bytes_read, table.size)


def write_rejected(path: str | Path, table: TableFile, rejected: list[Rejected]) -> int:
    """Write bad rows as CSV: line (editor line, header = 1; the data row for Parquet), column, value, problem, fix."""
    lines = editor_lines(table, [r.row for r in rejected])
    place = "row" if table.kind == "parquet" else "line"
    with open(path, "w", newline="", encoding="utf-8") as handle:
        out = csv.writer(handle)
        out.writerow([place, "column", "value", "problem", "fix"])
        for r in sorted(rejected, key=lambda r: r.row):
            out.writerow([lines.get(r.row, r.row), r.column, r.value, r.problem, r.fix])
    return len(rejected)
