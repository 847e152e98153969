"""Progress bars with a time estimate, for the command line.

:class:`Bars` is the reporter that the CLI hands to
:func:`tracker.execution.configured`: every :func:`tracker.execution.map_tasks`
below it (per-period fits, refits, structure tests) and every step that asks
:func:`tracker.execution.step_progress` gets one line on standard error with a
bar, done/total and the estimated time remaining.  The estimate is rich's:
the mean speed over the last 30 seconds of updates, applied to what is left.

Bars are silent (nothing is written) when standard error is not a terminal,
so piped or redirected output stays clean, and with ``--quiet``.  Bars are
transient: they disappear when the command ends and leave only its result.
"""

from __future__ import annotations

import sys
from typing import Callable

__all__ = ["Bars"]


class Bars:
    """``with Bars(quiet) as bars: bars("fitting periods", 20)(done, total)``.

    Parameters
    ----------
    quiet : bool
        Never draw anything.
    stream : file, optional
        Where to draw (default: standard error); bars are drawn only when it
        is a terminal.
    """

    def __init__(self, quiet: bool = False, stream=None) -> None:
        stream = sys.stderr if stream is None else stream
        isatty = getattr(stream, "isatty", None)
        self.enabled = not quiet and bool(isatty and isatty())
        self._stream = stream
        self._progress = None

    def __enter__(self) -> "Bars":
        return self

    def __exit__(self, *exc) -> None:
        if self._progress is not None:
            self._progress.stop()
            self._progress = None

    def _start(self):
        """The live display, started with the first bar and stopped when the last one ends.

        It never redirects standard output: results printed between steps go
        where the user sent them (a file, a pipe) and never into the bars.
        """
        if self._progress is None:
            from rich.console import Console
            from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn,
                                       TimeRemainingColumn)

            self._progress = Progress(
                TextColumn("[progress.description]{task.description}"), BarColumn(), MofNCompleteColumn(),
                TimeElapsedColumn(), TextColumn("left"), TimeRemainingColumn(),
                console=Console(file=self._stream), transient=True, redirect_stdout=False, redirect_stderr=False,
            )
            self._progress.start()
        return self._progress

    def _finish(self, task) -> None:
        progress = self._progress
        if progress is None:
            return
        progress.remove_task(task)
        if not progress.tasks:
            progress.stop()
            self._progress = None

    def __call__(self, label: str, total: int | None = None, *, unit: str | None = None) -> Callable[[int, int], None]:
        """A progress callback ``(done, total)`` drawing one bar labelled ``label``.

        ``unit="bytes"`` shows megabytes instead of counts.  The bar goes
        away once ``done`` reaches ``total``.
        """
        if not self.enabled:
            return _nothing
        progress = self._start()
        scale = 1_000_000 if unit == "bytes" else 1
        if unit == "bytes":
            label += " (MB)"
        task = progress.add_task(label, total=(total // scale) if total else None)

        finished = []

        def update(done: int, total_now: int | None = None) -> None:
            if finished:
                return
            total_now = max(1, total_now // scale) if total_now else None
            progress.update(task, completed=done // scale, total=total_now)
            if total_now is not None and done // scale >= total_now:
                finished.append(True)
                self._finish(task)

        return update


def _nothing(done: int, total: int | None = None) -> None:
    return None
