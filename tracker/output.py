"""Writing listings as a terminal table, CSV or JSON (one shared option)."""

from __future__ import annotations

import io
import json
import math
from pathlib import Path

import numpy as np
import pandas as pd

__all__ = ["FORMATS", "render", "to_json_records", "neutralise"]

#: First characters that make a spreadsheet read a cell as a formula (OWASP, "CSV Injection").
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def neutralise(value):
    """A text cell a spreadsheet would run as a formula, with a leading single quote; other values as they are.

    Follows the OWASP guidance on CSV injection: cells beginning with ``=``,
    ``+``, ``-``, ``@``, tab or carriage return are prefixed with ``'`` so the
    spreadsheet shows them as text.  Numbers (a negative value such as -0.5)
    are left alone: only text is at risk.
    """
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def _csv_ready(frame: pd.DataFrame, raw: bool) -> pd.DataFrame:
    """Nested cells as JSON text (CSV cannot nest) and, unless ``raw``, formula-like text neutralised."""
    out = frame.copy()
    for col in out.columns:
        if pd.api.types.is_numeric_dtype(out[col]) or pd.api.types.is_bool_dtype(out[col]):
            continue
        values = [json.dumps(v, ensure_ascii=False, default=str) if isinstance(v, (dict, list)) else v
                  for v in out[col]]
        out[col] = pd.Series(values if raw else [neutralise(v) for v in values], index=out.index, dtype=object)
    if not raw:
        out.columns = [neutralise(str(c)) for c in out.columns]
    return out

FORMATS = ("table", "csv", "json")


def to_json_records(frame: pd.DataFrame) -> list[dict]:
    """Records with NaN as null, numpy scalars as plain numbers and whole floats of whole columns as integers."""
    whole = {str(c) for c in frame.columns if _whole_column(frame[c])}
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
            elif isinstance(value, float) and str(key) in whole:
                value = int(value)
            clean[str(key)] = value
        records.append(clean)
    return records


def render(frame: pd.DataFrame, fmt: str, *, title: str | None = None, digits: int = 3, raw: bool = False) -> str:
    """The text of a listing in one of :data:`FORMATS`.

    CSV neutralises formula-like text cells (see :func:`neutralise`) unless
    ``raw``; whole-number columns print as integers in every format.
    """
    frame = _whole_numbers(frame)
    if fmt == "csv":
        buffer = io.StringIO()
        _csv_ready(frame, raw).to_csv(buffer, index=False, lineterminator="\n")
        return buffer.getvalue()
    if fmt == "json":
        frame = _nested(frame)
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


#: Columns the store keeps as JSON text; a JSON listing nests them as objects instead of quoting them.
JSON_COLUMNS = ("diagnostics", "params", "mapping", "attributes")


def _nested(frame: pd.DataFrame) -> pd.DataFrame:
    """JSON text in :data:`JSON_COLUMNS` turned back into objects, so JSON output nests instead of quoting."""
    columns = [c for c in JSON_COLUMNS if c in frame.columns]
    if not columns:
        return frame
    out = frame.copy()
    for col in columns:
        out[col] = [json.loads(v) if isinstance(v, str) and v[:1] in "{[" else v for v in out[col]]
    return out


def _whole_column(column: pd.Series) -> bool:
    """A float column whose every value is a whole number (counts stored as floats, such as 5.0)."""
    if not pd.api.types.is_float_dtype(column):
        return False
    values = column.dropna().to_numpy()
    return values.size > 0 and bool(np.all(np.isfinite(values))) and bool(np.all(values == np.round(values)))


def _whole_numbers(frame: pd.DataFrame) -> pd.DataFrame:
    """Whole-number float columns as nullable integers (a count prints 5, not 5.000)."""
    columns = [c for c in frame.columns if _whole_column(frame[c])]
    if not columns:
        return frame
    out = frame.copy()
    for c in columns:
        out[c] = out[c].round().astype("Int64")
    return out


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
