"""Progress of a long run: origins done, series fitted, time left.

Stages and fits report to the progress they are handed; by default that is
``QUIET``, which shows nothing. The command line opens a bar for the length of
a run (``showing``), only when its output is a terminal, so logs and pipes stay
quiet, and hands it to the runner.
"""

from __future__ import annotations

import sys
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Protocol


class Progress(Protocol):
    """Where work reports how far it has got, one count per label."""

    def start(self, label: str, total: int) -> None: ...

    def advance(self, label: str, steps: int = 1) -> None: ...

    def finish(self, label: str) -> None: ...


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
                             console=Console(file=stream), transient=True, auto_refresh=False)
        self._tasks: dict[str, int] = {}
        self._drawn = 0.0

    def _refresh(self, now: bool = False) -> None:
        """Redraw the bars, at most ten times a second. They are redrawn as work reports, never by
        a thread of their own: a run forks copies of itself (core.forked), which a thread forbids."""
        import time
        if now or time.monotonic() - self._drawn >= 0.1:
            self._bar.refresh()
            self._drawn = time.monotonic()

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
        self._refresh(now=True)

    def advance(self, label: str, steps: int = 1) -> None:
        if label in self._tasks:
            self._bar.advance(self._tasks[label], steps)
            self._refresh()

    def finish(self, label: str) -> None:
        if label in self._tasks:
            task = self._tasks[label]
            self._bar.update(task, completed=self._bar.tasks[task].total)
            self._refresh(now=True)


QUIET = Quiet()   # the default of every stage and fit that takes a progress


@contextmanager
def showing(stream=None) -> Iterator[Progress]:
    """Give, for the block, progress bars on ``stream`` (standard error) if it is a terminal,
    and otherwise ``QUIET``."""
    stream = sys.stderr if stream is None else stream
    if not (hasattr(stream, "isatty") and stream.isatty()):
        yield QUIET
        return
    with TerminalBar(stream) as bar:
        yield bar
