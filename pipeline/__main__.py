"""The castline program (``castline``, ``python -m pipeline``): the command line of
``pipeline.cli``, its process ended without the interpreter's teardown."""

import atexit
import os
import signal
import sys


def entry() -> None:
    """The ``castline`` program: run :func:`main`, then end the process without tearing it down.

    Once the command has returned, its files are closed and its output is written. What is
    left is the interpreter freeing every object of pandas, matplotlib and statsmodels one by
    one: about 0.2 s of a 2.5 s demo run, measured by alternating runs with and without it.
    The exit handlers still run (logging, any finaliser a library registered), the two
    streams are flushed, and the process ends with the command's exit code.
    """
    _hold_closed_streams()
    try:
        from pipeline.cli import main
        code = main()
    except KeyboardInterrupt:   # outside the command's own handling (its imports, its warnings' end)
        from pipeline.core.landing import interrupted_message
        print(f"castline: {interrupted_message()}", file=sys.stderr)
        code = 130
    signal.signal(signal.SIGINT, signal.SIG_IGN)   # the command is over: only flushing is left
    from pipeline.core.library_warnings import caught_warnings
    with caught_warnings():   # a library's words at exit come after the command's last line: none
        atexit._run_exitfuncs()
    for stream in (sys.stdout, sys.stderr):
        try:
            if stream is not None:
                stream.flush()
        except (OSError, ValueError):   # a closed or full stream: the command's code still stands
            pass
    os._exit(code)


def _hold_closed_streams() -> None:
    """Open the null device on a standard stream the shell closed (``>&-``), so that no file
    the command opens is given that stream's number and written to by accident."""
    for number in (0, 1, 2):
        try:
            os.fstat(number)
        except OSError:
            held = os.open(os.devnull, os.O_RDWR)
            if held != number:   # (the lowest free number is this one: never expected)
                os.dup2(held, number)
                os.close(held)


if __name__ == "__main__":
    entry()
