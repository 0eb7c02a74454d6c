"""Progress reporting for long stages.

Long stages (ray tracing of couplings, heating along the orbit) take a ``reporter`` and
call, for each unit of work done::

    with reporter.stage("view factors", total=n_rays, unit="rays") as bar:
        ...
        bar.advance(k)

:func:`make_reporter` returns a bar on a terminal (rich, with rate and time left) and a
silent reporter otherwise, so logs and CI stay quiet. Library code never prints.
"""

from __future__ import annotations

import sys
from contextlib import contextmanager

__all__ = ["Reporter", "NullReporter", "RichReporter", "LineReporter", "make_reporter"]


class _NullBar:
    def advance(self, n: int = 1) -> None:
        """Record ``n`` more units of work (ignored)."""

    def set_total(self, total: int) -> None:
        """Change the total (ignored)."""


class Reporter:
    """Interface of a progress reporter; the base class reports nothing."""

    @contextmanager
    def stage(self, description: str, total: int, unit: str = "items"):
        yield _NullBar()

    def message(self, text: str) -> None:
        """A short status line (shown only by reporters that show anything)."""


class NullReporter(Reporter):
    """Reports nothing (the default for library calls and non-terminals)."""


class _RichBar:
    def __init__(self, progress, task_id):
        self._progress = progress
        self._task = task_id

    def advance(self, n: int = 1) -> None:
        self._progress.advance(self._task, n)

    def set_total(self, total: int) -> None:
        self._progress.update(self._task, total=total)


class RichReporter(Reporter):
    """A progress bar with rate and time left, drawn with rich on standard error."""

    def __init__(self, stream=None):
        from rich.console import Console

        self._console = Console(file=stream or sys.stderr)

    @contextmanager
    def stage(self, description: str, total: int, unit: str = "items"):
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TaskProgressColumn,
                                   TextColumn, TimeElapsedColumn, TimeRemainingColumn)

        columns = (TextColumn("[bold]{task.description}"), BarColumn(), TaskProgressColumn(),
                   MofNCompleteColumn(), TextColumn("{task.fields[rate]}"),
                   TimeElapsedColumn(), TextColumn("elapsed,"), TimeRemainingColumn(),
                   TextColumn("left"))
        with Progress(*columns, console=self._console, transient=False) as progress:
            task = progress.add_task(description, total=max(int(total), 1), rate="")
            bar = _RateBar(progress, task, unit)
            yield bar

    def message(self, text: str) -> None:
        self._console.print(text)


class _RateBar(_RichBar):
    def __init__(self, progress, task_id, unit):
        super().__init__(progress, task_id)
        self._unit = unit

    def advance(self, n: int = 1) -> None:
        super().advance(n)
        task = self._progress.tasks[self._task]
        speed = task.speed
        if speed:
            self._progress.update(self._task, rate=f"{_si(speed)} {self._unit}/s")


def _si(value: float) -> str:
    for factor, prefix in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if value >= factor:
            return f"{value / factor:.2f}{prefix}"
    return f"{value:.0f}"


class _CountBar:
    def __init__(self):
        self.done = 0
        self.total = 0

    def advance(self, n: int = 1) -> None:
        self.done += int(n)

    def set_total(self, total: int) -> None:
        self.total = int(total)


class LineReporter(Reporter):
    """Plain lines on a stream (no terminal needed): one when a stage starts, one when it
    ends with the work done, the time taken and the rate; messages as they come. Used for
    ``--verbose`` when standard error is not a terminal (logs, CI)."""

    def __init__(self, stream=None):
        self._stream = stream or sys.stderr

    @contextmanager
    def stage(self, description: str, total: int, unit: str = "items"):
        import time

        bar = _CountBar()
        bar.total = int(total)
        print(f"{description}: {int(total):,} {unit} ...", file=self._stream, flush=True)
        start = time.perf_counter()
        yield bar
        seconds = time.perf_counter() - start
        rate = f", {_si(bar.done / seconds)} {unit}/s" if seconds > 0 and bar.done else ""
        print(f"{description}: done, {bar.done:,} {unit} in {seconds:.1f} s{rate}",
              file=self._stream, flush=True)

    def message(self, text: str) -> None:
        print(text, file=self._stream, flush=True)


def make_reporter(quiet: bool = False, stream=None, verbose: bool = False) -> Reporter:
    """A rich progress bar when ``stream`` (default standard error) is a terminal and
    ``quiet`` is false; plain stage lines when ``verbose`` and not a terminal; a silent
    reporter otherwise."""
    stream = stream or sys.stderr
    if quiet:
        return NullReporter()
    if getattr(stream, "isatty", lambda: False)():
        return RichReporter(stream)
    if verbose:
        return LineReporter(stream)
    return NullReporter()
