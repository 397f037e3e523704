"""How a castline command ends: its exit code and what it says on standard error.

Exit codes: 0 success, 2 a user mistake (one line starting ``castline:``, no traceback), 1 an
internal error. A refusal of the operating system about a path the user gave (a name too long,
a loop of symbolic links, a read-only folder, a full disk) is a user mistake: one line naming
the path. Every path argument is checked before the command starts (core.paths). Once a run
folder has landed, a failure to print its summary (standard output closed, on a full device)
no longer fails the command: it exits 0.
"""

from __future__ import annotations

import errno
import os
import sys
import traceback
from collections.abc import Callable

from pipeline.core import landing
from pipeline.core.errors import UserError
from pipeline.core.library_warnings import caught_warnings
from pipeline.core.paths import USER_ERRNOS, PathError, given_path, reason, shown

EXIT_OK, EXIT_INTERNAL, EXIT_USER = 0, 1, 2

# The arguments of the commands that name a file or folder, each checked before the command runs.
PATH_ARGUMENTS = ("spec", "output_folder", "problems", "run_folder", "model_file", "data_file",
                  "output", "spec_file", "ledger", "plot", "html", "revisions", "spec_or_name",
                  "first", "second")


class OutputLost(Exception):
    """Standard output refused what the command printed (closed, a full device, a reader gone)."""

    def __init__(self, cause: BaseException) -> None:
        self.cause = cause
        super().__init__(reason(cause))


class _Guarded:
    """Standard output, whose failures are raised as OutputLost (every other attribute is the
    stream's own)."""

    def __init__(self, stream) -> None:
        self._stream = stream

    def write(self, text: str) -> int:
        try:
            return self._stream.write(text)
        except (OSError, ValueError) as exc:   # ValueError: the stream was closed
            raise OutputLost(exc) from None

    def flush(self) -> None:
        try:
            self._stream.flush()
        except (OSError, ValueError) as exc:
            raise OutputLost(exc) from None

    def __getattr__(self, name: str):
        return getattr(self._stream, name)


def _flush_output() -> None:
    if sys.stdout is not None:
        sys.stdout.flush()


def check_paths(args) -> None:
    """Check every path argument the command was given (core.paths.given_path): one line naming
    the path for a NUL byte, an unknown ``~user``, a name too long, a loop of symbolic links."""
    for name in PATH_ARGUMENTS:
        value = getattr(args, name, None)
        if isinstance(value, str) and value:   # an empty one: the command says what it lacks
            setattr(args, name, str(given_path(value)))


def _say(line: str) -> None:
    """Print one line to standard error, if standard error can take it."""
    stream = sys.stderr
    if stream is None:   # closed when castline started (print would write to standard output)
        return
    try:
        stream.write(line + "\n")
        stream.flush()
    except (OSError, ValueError):   # closed since, or on a full device
        pass


def _os_mistake(exc: BaseException) -> UserError | None:
    """Return the one-line mistake an operating system's refusal means, or None for a bug."""
    if isinstance(exc, OSError) and exc.errno in USER_ERRNOS:
        where = exc.filename if exc.filename is not None else "a file castline was writing or reading"
        return PathError(where, reason(exc))
    if isinstance(exc, RuntimeError) and str(exc).startswith("Symlink loop from "):
        return UserError(f"{shown(str(exc)[len('Symlink loop from '):].strip(chr(39)))}: "
                         f"{os.strerror(errno.ELOOP)}")
    return None


def _ended(exc: BaseException) -> int:
    """Return the exit code an exception ends the command with, after saying why on one line."""
    if isinstance(exc, UserError):   # one line per problem (a spec may have several)
        for line in exc.lines():
            _say(f"castline: {line}")
        return EXIT_USER
    if isinstance(exc, OutputLost):
        if isinstance(exc.cause, BrokenPipeError):   # piped into a reader that stopped (| head)
            return EXIT_OK
        folder = landing.landed()
        if folder is not None:   # the run is recorded: printing it can no longer fail it
            _say(f"castline: the run folder {folder} was written, but its summary could not be "
                 f"printed: standard output: {exc}")
            return EXIT_OK
        _say(f"castline: standard output: cannot print the output: {exc}")
        return EXIT_USER
    if isinstance(exc, KeyboardInterrupt):
        _say(f"castline: {landing.interrupted_message()}")
        return 130
    mistake = _os_mistake(exc)
    if mistake is not None:
        return _ended(mistake)
    if sys.stderr is not None:   # an internal error: keep the traceback for the bug report
        try:
            traceback.print_exc(file=sys.stderr)
        except (OSError, ValueError):
            pass
    _say("castline: internal error (a bug in castline, not in your spec or data)")
    return EXIT_INTERNAL


def outcome(parse: Callable[[list[str] | None], object], handlers: dict[str, Callable[[object], int]],
            argv: list[str] | None = None) -> int:
    """Parse the arguments, run the command's handler and return its exit code; the libraries'
    warnings are collected from the start (the modules a command loads warn as they load) and
    printed only with --verbose, after everything else."""
    verbose = [False]   # known once the arguments are parsed
    guarded = given = sys.stdout
    with caught_warnings(shown=lambda: verbose[0], stream=sys.stderr):
        try:
            args = parse(argv)
            verbose[0] = bool(getattr(args, "verbose", False))
            check_paths(args)
            landing.forget()   # what this command places (core.landing): none yet
            guarded = sys.stdout = _Guarded(given) if given is not None else None
            code = handlers[args.command](args)
            _flush_output()
            return code
        except BaseException as exc:   # noqa: BLE001 - every ending is said on one line
            if isinstance(exc, SystemExit):
                raise
            code = _ended(exc)
            if isinstance(exc, OutputLost):
                given = None   # the output is gone: nothing more is written to it
            return code
        finally:
            if sys.stdout is guarded:
                sys.stdout = given
