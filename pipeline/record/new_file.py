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
    return replace_file(target, lambda path: path.write_text(text, encoding="utf-8"), option=option, what=what)


SQLITE_HEADER = b"SQLite format 3\x00"
MODEL_FORMAT = b'"castline-model"'   # pipeline.record.model_file.FORMAT, as the file's text holds it


def _same_file(one: Path, other: Path) -> bool:
    """Whether two paths name one file: the same path once links are followed, or the same
    file on disk (a hard link)."""
    if os.path.realpath(one) == os.path.realpath(other):
        return True
    try:
        return os.path.samefile(one, other)
    except (OSError, ValueError):
        return False


def _castline_file(target: Path) -> str | None:
    """Return what castline file ``target`` is, if it is one that no option may write over: a
    ledger (any SQLite file), a model file, or a file inside a run folder."""
    folder = target.parent
    if (folder / "metrics.json").is_file() and (folder / "fingerprint.json").is_file():
        return f"a file of the run folder {folder}"
    try:
        with target.open("rb") as handle:
            head = handle.read(4096)
    except OSError:
        return None
    if head.startswith(SQLITE_HEADER):
        return "an SQLite database (a ledger, or another program's)"
    if MODEL_FORMAT in head:
        return "a castline model file"
    return None


def output_file_target(target: Path, *, option: str, inputs: dict[str, Path], overwrite: bool) -> Path:
    """Return the path an option's output file may be written to, or raise UserError (one line
    naming the option and the path) when it is a folder, in a folder that does not exist, one
    of the command's ``inputs`` (by name: the spec, the data file, the model file, the ledger),
    a castline file (a ledger, a model file, a run folder's file), or, unless ``overwrite``, any
    file already there. Checked before the command's work, so a refused run has done nothing."""
    if target.is_dir():
        raise UserError(f"{option} {target}: is a folder; give a file name")
    if not target.parent.is_dir():
        raise UserError(f"{option} {target}: no such folder {target.parent}")
    for name, path in inputs.items():
        if path is not None and _same_file(target, path):
            raise UserError(f"{option} {target}: is the {name}; castline never writes over what a "
                            "command reads (give another file name)")
    if target.exists() or target.is_symlink():
        kind = _castline_file(target)
        if kind:
            raise UserError(f"{option} {target}: is {kind}; castline never writes over it "
                            "(give another file name)")
        if not overwrite:
            raise UserError(f"{option} {target}: a file is there already; give another file name, or "
                            "add --overwrite to replace it")
    return target


def replace_file(target: Path, write, *, option: str, what: str) -> Path:
    """Write a file by ``write(path)`` into a hidden file beside ``target``, then rename it over
    ``target`` in one step, so a failed write never leaves half a file or damages the one before."""
    try:
        handle, temporary = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
        os.close(handle)
    except OSError as exc:
        raise UserError(f"{option} {target}: cannot write the {what}: {exc.strerror or exc}") from None
    try:
        write(Path(temporary))
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(temporary, 0o666 & ~mask)
        os.replace(temporary, target)
    except OSError as exc:
        Path(temporary).unlink(missing_ok=True)
        raise UserError(f"{option} {target}: cannot write the {what}: {exc.strerror or exc}") from None
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
    return target
