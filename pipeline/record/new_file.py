"""Files written for people outside a run folder: a new file written once (refused if anything
is already at its path), and a page replaced only by a page of its own kind."""

from __future__ import annotations

import os
import tempfile
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


def page_target(target: Path, marker: str, *, what: str, option: str) -> Path:
    """Return the path a page may be written to: an .html file whose folder exists, and which is
    absent or a page of the same kind (it holds `marker`), so no other file is ever replaced.

    Raises UserError (one line naming the path and the option) otherwise.
    """
    if target.suffix.lower() not in (".html", ".htm"):
        raise UserError(f"{option} {target}: the {what} is an HTML page; give a file name ending in .html")
    if not target.parent.is_dir():
        raise UserError(f"{option} {target}: no such folder {target.parent}")
    if target.is_dir():
        raise UserError(f"{option} {target}: is a folder; give a file name ending in .html")
    if target.exists():
        try:
            with target.open("rb") as handle:
                head = handle.read(4096)
        except OSError as exc:
            raise UserError(f"{option} {target}: cannot read the file there: {exc.strerror}") from None
        if marker.encode("utf-8") not in head:
            raise UserError(f"{option} {target}: a file is there that castline did not write as a "
                            f"{what}; it is left alone (give another file name)")
    return target


def replace_page(target: Path, text: str, marker: str, *, what: str, option: str) -> Path:
    """Write a page to `target` (checked by page_target) in one step: a hidden file beside it,
    then renamed over it, so a failure never leaves half a page or damages the one before."""
    page_target(target, marker, what=what, option=option)
    try:
        handle, temporary = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    except OSError as exc:   # a folder we may not write in: nothing was made
        raise UserError(f"{option} {target}: cannot write the {what}: {exc.strerror or exc}") from None
    try:
        with os.fdopen(handle, "w", encoding="utf-8") as stream:
            stream.write(text)
        # The permissions a new file gets here (mkstemp's are the owner's only).
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(temporary, 0o666 & ~mask)
        os.replace(temporary, target)
    except OSError as exc:
        Path(temporary).unlink(missing_ok=True)
        raise UserError(f"{option} {target}: cannot write the {what}: {exc.strerror or exc}") from None
    return target
