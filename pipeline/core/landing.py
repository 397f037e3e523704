"""Whether this process's run folder has landed: the one fact an interrupted command must get
right when it says what was written.

The ledger writer marks the run folder the moment its rename into place has succeeded
(``mark``); the command line reads it when it is interrupted (``landed``), and forgets it when
a command starts (``forget``), since one process may run several commands (the tests do).
"""

from __future__ import annotations

from pathlib import Path

_LANDED: list[Path] = []


def forget() -> None:
    _LANDED.clear()


def mark(folder: Path) -> None:
    _LANDED.append(Path(folder))


def landed() -> Path | None:
    """Return the run folder this command placed, or None if none has landed."""
    return _LANDED[-1] if _LANDED else None


def interrupted_message() -> str:
    """Return the one line an interrupted command prints: what was written, truthfully."""
    folder = landed()
    if folder is None:
        return "interrupted; no run folder was written"
    return (f"interrupted after the run folder was written: {folder} is whole and recorded in the "
            "ledger")
