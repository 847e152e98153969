"""Writing listings as a terminal table, CSV or JSON (one shared option)."""

from __future__ import annotations

import io
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd

__all__ = ["FORMATS", "render", "to_json_records"]

FORMATS = ("table", "csv", "json")


def to_json_records(frame: pd.DataFrame) -> list[dict]:
    """Records with NaN as null and numpy scalars as plain numbers."""
    records = []
    for row in frame.to_dict(orient="records"):
        clean = {}
        for key, value in row.items():
            if isinstance(value, (np.generic,)):
                value = value.item()
            if isinstance(value, float) and not math.isfinite(value):
                value = None
            elif value is pd.NA or value is pd.NaT:
                value = None
            clean[str(key)] = value
        records.append(clean)
    return records


def render(frame: pd.DataFrame, fmt: str, *, title: str | None = None, digits: int = 3) -> str:
    """The text of a listing in one of :data:`FORMATS`."""
    if fmt == "csv":
        buffer = io.StringIO()
        frame.to_csv(buffer, index=False, lineterminator="\n")
        return buffer.getvalue()
    if fmt == "json":
        return json.dumps(to_json_records(frame), indent=2, ensure_ascii=False, default=str) + "\n"
    return _table(frame, title, digits)


#: Above this many rows a plain fixed-width table is written instead of a rich one
#: (rich lays out every cell, about half a millisecond a row).
PLAIN_ROWS = 500


def _table(frame: pd.DataFrame, title: str | None, digits: int) -> str:
    if len(frame) > PLAIN_ROWS:
        return _plain_table(frame, title, digits)
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    table = Table(title=title, show_lines=False, header_style="bold")
    for column in frame.columns:
        numeric = pd.api.types.is_numeric_dtype(frame[column]) and not pd.api.types.is_bool_dtype(frame[column])
        table.add_column(str(column), justify="right" if numeric else "left")
    for row in frame.itertuples(index=False, name=None):
        # Text objects, so labels such as "[bold]" are shown as typed, not styled.
        table.add_row(*[Text(_cell(v, digits)) for v in row])
    console = Console(file=io.StringIO(), width=200, color_system=None, highlight=False)
    console.print(table)
    return console.file.getvalue()


def _plain_table(frame: pd.DataFrame, title: str | None, digits: int) -> str:
    cells = [[_cell(v, digits) for v in row] for row in frame.itertuples(index=False, name=None)]
    header = [str(c) for c in frame.columns]
    widths = [max([len(h)] + [len(r[i]) for r in cells]) for i, h in enumerate(header)]
    numeric = [pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c]) for c in frame.columns]

    def line(values):
        return "  ".join(v.rjust(w) if num else v.ljust(w) for v, w, num in zip(values, widths, numeric)).rstrip()

    out = ([title] if title else []) + [line(header), "  ".join("-" * w for w in widths)] + [line(r) for r in cells]
    return "\n".join(out) + "\n"


def _cell(value, digits: int) -> str:
    if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
        return "-"
    if isinstance(value, (float, np.floating)):
        return f"{value:.{digits}f}"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    return str(value)


def write(text: str, path: str | Path | None) -> None:
    """Write to a file, or to standard output when ``path`` is None or '-'."""
    if path is None or str(path) == "-":
        import click

        click.echo(text, nl=False)
    else:
        Path(path).write_text(text, encoding="utf-8")
