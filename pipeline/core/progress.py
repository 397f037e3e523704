"""Progress of a long run: origins done, series fitted, time left.

Stages report through ``current()``; by default nothing is shown. The command
line sets a bar on the terminal for the length of a run (``showing``), and only
when its output is a terminal, so logs and pipes stay quiet.
"""

from __future__ import annotations

import contextvars
import sys
from collections.abc import Iterator
from contextlib import contextmanager


class Quiet:
    """Shows nothing."""

    def start(self, label: str, total: int) -> None:
        pass

    def advance(self, label: str, steps: int = 1) -> None:
        pass

    def finish(self, label: str) -> None:
        pass


class TerminalBar(Quiet):
    """A bar per kind of work (origins, series), with counts and the time left (rich)."""

    def __init__(self, stream) -> None:
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn
        self._bar = Progress(TextColumn("{task.description:>16}"), BarColumn(), MofNCompleteColumn(),
                             TextColumn("left"), TimeRemainingColumn(),
                             console=Console(file=stream), transient=True)
        self._tasks: dict[str, int] = {}

    def __enter__(self) -> TerminalBar:
        self._bar.start()
        return self

    def __exit__(self, *exc) -> None:
        self._bar.stop()

    def start(self, label: str, total: int) -> None:
        if label in self._tasks:
            self._bar.reset(self._tasks[label], total=total)
        else:
            self._tasks[label] = self._bar.add_task(label, total=total)

    def advance(self, label: str, steps: int = 1) -> None:
        if label in self._tasks:
            self._bar.advance(self._tasks[label], steps)

    def finish(self, label: str) -> None:
        if label in self._tasks:
            task = self._tasks[label]
            self._bar.update(task, completed=self._bar.tasks[task].total)


_current: contextvars.ContextVar = contextvars.ContextVar("castline_progress", default=None)


def current():
    """Return where the run in progress reports how far it has got."""
    return _current.get() or Quiet()


@contextmanager
def showing(stream=None) -> Iterator[object]:
    """Show progress bars on ``stream`` (standard error) for the block, if it is a terminal."""
    stream = sys.stderr if stream is None else stream
    if not (hasattr(stream, "isatty") and stream.isatty()):
        yield Quiet()
        return
    with TerminalBar(stream) as bar:
        token = _current.set(bar)
        try:
            yield bar
        finally:
            _current.reset(token)
