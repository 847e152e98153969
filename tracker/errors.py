"""The one exception family for problems a user can cause and fix.

Every message is a single line that says what is wrong and what to do about it.
The command line prints ``str(error)`` and exits non-zero; it never shows a
traceback for these.
"""

from __future__ import annotations

__all__ = ["RoletrailError", "InputError", "StoreError", "UsageError"]


class RoletrailError(Exception):
    """Base class of every error a user can cause (bad file, bad option, bad study)."""

    exit_code = 2


class InputError(RoletrailError):
    """A problem in an input file.

    The message names the file, the place of the row (``line``: the line an
    editor or spreadsheet shows, the header being line 1; else ``row``: the
    data row, 1 = first row after the header), the column and the offending
    value, and ends with the fix.
    """

    def __init__(
        self,
        problem: str,
        *,
        file: str | None = None,
        row: int | None = None,
        column: str | None = None,
        value: object = None,
        fix: str | None = None,
        line: int | None = None,
    ) -> None:
        self.problem = problem
        self.line = line
        self.file = file
        self.row = row
        self.column = column
        self.value = value
        self.fix = fix
        where = []
        if file is not None:
            where.append(str(file))
        if line is not None:
            where.append(f"line {line}")
        elif row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column {column!r}")
        text = (", ".join(where) + ": " if where else "") + problem
        if value is not None:
            shown = str(value)
            if len(shown) > 60:
                shown = shown[:57] + "..."
            text += f" (value {shown!r})"
        if fix:
            text += f"; {fix}"
        super().__init__(" ".join(text.split()))


class StoreError(RoletrailError):
    """A problem with the study database (missing, too new, locked, inconsistent)."""


class UsageError(RoletrailError):
    """Options that do not fit together or do not fit the study's data."""
