"""The paths a user gives (on the command line or in a spec), checked in one place.

Every path castline is given (the spec, its data file, output folder and ledger, --problems,
--output, --plot, --html, --revisions, a run folder, a model file, a data file) goes through
:func:`given_path` before it is used: a NUL byte, ``~user`` for a user who does not exist,
a name too long for the file system or a loop of symbolic links become one line naming the
path and the reason, as the operating system words it. :func:`os_problem` words an OSError
met later (a full disk, a read-only folder) the same way.
"""

from __future__ import annotations

import errno
import os
from pathlib import Path

from pipeline.core.errors import UserError

# The operating system's refusals that come from the path or the machine the user gave, not
# from castline: each is reported as one line naming the path, exit code 2.
USER_ERRNOS = frozenset(getattr(errno, name) for name in (
    "ENOENT", "ENAMETOOLONG", "ELOOP", "EACCES", "EPERM", "EROFS", "ENOSPC", "EDQUOT", "EISDIR",
    "ENOTDIR", "EEXIST", "EFBIG", "EMFILE", "ENFILE", "EXDEV", "ETXTBSY", "EBUSY", "ENXIO", "EIO")
    if hasattr(errno, name))

# How stat answers for a path that does not exist yet (a file or folder castline will make).
_NOT_THERE = frozenset({errno.ENOENT})


class PathError(UserError):
    """A path the system refuses: ``path`` as given (shown on one line) and ``why``."""

    def __init__(self, path: str | os.PathLike, why: str, doing: str = "") -> None:
        self.path, self.why = shown(path), why
        super().__init__(f"{self.path}: {doing + ': ' if doing else ''}{why}")


def shown(path: str | os.PathLike) -> str:
    """Return a path as one line can show it: control characters (a NUL byte, a line break)
    written as escapes."""
    text = os.fspath(path)
    text = text.decode(errors="backslashreplace") if isinstance(text, bytes) else text
    return "".join(c if c.isprintable() or c == " " else repr(c)[1:-1] for c in text)


def reason(exc: BaseException) -> str:
    """Return the operating system's plain words for an error (``No space left on device``)."""
    number = getattr(exc, "errno", None)
    if isinstance(number, int):
        return os.strerror(number)
    return " ".join(str(exc).split()) or type(exc).__name__


def os_problem(exc: OSError, path: str | os.PathLike, doing: str = "") -> PathError:
    """Return the one-line error an OSError means for a path the user gave; ``doing`` says what
    castline was doing (``cannot write the run folder``)."""
    return PathError(path, reason(exc), doing)


def _expanded(text: str, doing: str) -> Path:
    if "\x00" in text:
        raise PathError(text, "the path holds a NUL byte", doing)
    try:
        return Path(text).expanduser()
    except RuntimeError:   # '~name' for a user this machine does not know
        user = text[1:].split("/", 1)[0]
        raise PathError(text, f"no user '{user}' on this machine, so '~{user}' names no home "
                        "folder", doing) from None


def given_path(raw: str | os.PathLike, base: Path | None = None, *, doing: str = "") -> Path:
    """Return a path the user gave, ``~`` expanded and a relative one read from ``base`` (the
    spec's folder) if given, after checking the system can name it.

    Raises UserError naming the path when it holds a NUL byte, names the home folder of a
    user who does not exist, or when the system refuses to look it up (a name too long, a
    loop of symbolic links, a folder that may not be searched, a file where a folder should
    be). A path that does not exist yet passes: the caller says what is missing.
    """
    text = os.fspath(raw)
    text = os.fsdecode(text) if isinstance(text, bytes) else text
    path = _expanded(text, doing)
    if base is not None and not path.is_absolute():
        path = base / path
    try:
        os.stat(path)
    except OSError as exc:
        if exc.errno not in _NOT_THERE:
            raise os_problem(exc, path, doing) from None
    except ValueError as exc:   # the system cannot take the name at all
        raise PathError(path, reason(exc), doing) from None
    return path


def resolved_path(raw: str | os.PathLike, base: Path | None = None, *, doing: str = "") -> Path:
    """Return a user's path checked by :func:`given_path`, absolute and resolved."""
    path = given_path(raw, base, doing=doing)
    try:
        return path.resolve()
    except RuntimeError:   # a loop of symbolic links met while resolving
        raise PathError(path, os.strerror(errno.ELOOP), doing) from None
    except OSError as exc:
        raise os_problem(exc, path, doing) from None
