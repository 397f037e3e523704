"""The libraries' own warnings (pandas, matplotlib, scikit-learn, statsmodels, numpy), kept
out of what a command prints.

castline says what a user must know in its own ``warning:`` and ``note:`` lines; a
library's UserWarning, RuntimeWarning or FutureWarning is about castline's code, not the
user's spec or data. A command collects them, and ``--verbose`` prints them after the
command's own output (after the ``castline:`` line of an error, never before it).
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TextIO


@contextmanager
def caught_warnings(*, shown: bool | Callable[[], bool] = False,
                    stream: TextIO | None = None) -> Iterator[list]:
    """Collect the warnings raised inside instead of printing them; when ``shown`` (or what it
    returns, asked on leaving), print each distinct one to ``stream`` on leaving (after
    whatever the block printed).

    The filters in force stay in force (a warning turned into an error, by ``-W error`` or
    a test's settings, is still raised); only what would have been printed is collected.
    """
    with warnings.catch_warnings(record=True) as caught:
        try:
            yield caught
        finally:
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
