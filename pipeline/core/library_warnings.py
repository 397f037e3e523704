"""The libraries' own warnings (pandas, matplotlib, scikit-learn, statsmodels, numpy), kept
out of what a command prints.

castline says what a user must know in its own ``warning:`` and ``note:`` lines; a
library's UserWarning, RuntimeWarning or FutureWarning is about castline's code, not the
user's spec or data. A command collects them, and those a library writes through
``logging`` (matplotlib's font messages), and ``--verbose`` prints them after the command's
own output (after the ``castline:`` line of an error, never before it).
"""

from __future__ import annotations

import logging
import warnings
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TextIO


class Logged(Warning):
    """A warning a library wrote through ``logging`` (matplotlib's font messages)."""


class _Collecting(logging.Handler):
    """Turns what a library writes through ``logging`` at WARNING or above into a warning
    (Logged), collected with the others instead of printed; a forked copy of this process
    hands it back with its other warnings (core.forked)."""

    def __init__(self) -> None:
        super().__init__(logging.WARNING)

    def emit(self, record: logging.LogRecord) -> None:
        try:
            message = record.getMessage()
        except Exception:   # noqa: BLE001 - a library's malformed message is still kept
            message = str(record.msg)
        try:
            warnings.warn_explicit(message, Logged, record.pathname, record.lineno)
        except Warning:   # Logged made an error (-W error): a message is not worth failing for
            pass


@contextmanager
def caught_warnings(*, shown: bool | Callable[[], bool] = False,
                    stream: TextIO | None = None) -> Iterator[list]:
    """Collect the warnings raised inside, and those written through ``logging`` at WARNING or
    above, instead of printing them; when ``shown`` (or what it returns, asked on leaving),
    print each distinct one to ``stream`` on leaving (after whatever the block printed).

    The filters in force stay in force (a warning turned into an error, by ``-W error`` or
    a test's settings, is still raised); only what would have been printed is collected.
    """
    with warnings.catch_warnings(record=True) as caught:
        handler, last_resort, root = _Collecting(), logging.lastResort, logging.getLogger()
        root.addHandler(handler)
        logging.lastResort = handler   # a library's logger that does not reach the root's handlers
        try:
            yield caught
        finally:
            root.removeHandler(handler)
            logging.lastResort = last_resort
            if (shown() if callable(shown) else shown) and stream is not None:
                for line in warning_lines(caught):
                    print(line, file=stream)


def warning_lines(caught: list[warnings.WarningMessage]) -> list[str]:
    """Return each distinct warning once, on one line: its library, kind, message and place."""
    lines = []
    for item in caught:
        place = Path(item.filename)
        parts = place.parts
        library = (parts[parts.index("site-packages") + 1] if "site-packages" in parts
                   else place.stem)
        message = " ".join(str(item.message).split())
        line = f"library warning ({library}): {item.category.__name__}: {message} ({place.name}:{item.lineno})"
        if line not in lines:
            lines.append(line)
    return lines
