"""A new file written once: refused if anything is already at its path."""

from __future__ import annotations

from pathlib import Path

from pipeline.core.errors import UserError


def write_new_file(target: Path, text: str, *, what: str, refusal: str, hint: str = "") -> Path:
    """Write text to a file that must not exist yet and return its path.

    Raises UserError (one line naming the file) when the path is taken or cannot be written;
    the check and the creation are one step, so a file made meanwhile is never overwritten.
    """
    if target.exists():
        raise UserError(f"{target}: {refusal}{hint}")
    try:
        with target.open("x", encoding="utf-8") as handle:
            handle.write(text)
    except FileExistsError:
        raise UserError(f"{target}: {refusal}") from None
    except OSError as exc:
        raise UserError(f"{target}: cannot write the {what}: {exc.strerror}") from None
    return target
