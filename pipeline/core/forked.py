"""Work shared with a forked copy of this process, on a machine with a second core.

A run's report draws a dozen pictures, each a pure function of values already in memory.
``map_shared`` hands every other one to a copy of the process made by ``os.fork`` (which
starts at once: it shares the memory and the libraries already imported) and does the
rest itself, so two cores draw them in about half the time. Only the results cross back,
pickled through a pipe.

It falls back to doing everything here, with the same results in the same order,
wherever forking is unsafe or pays nothing: off Linux, on one core, when the process
runs threads of its own (a thread holding a lock when the copy is made would leave the
copy's lock held forever), or with ``CASTLINE_ONE_PROCESS`` set. When the copy fails in
any way (an error, a warning turned into an error, a crash), its share is done again
here, so an error is raised where and as it would have been without the copy. Warnings
the copy caught are raised again here, for the command to collect as its own.
"""

from __future__ import annotations

import os
import pickle
import signal
import sys
import threading
import warnings
from collections.abc import Callable, Sequence


def can_fork() -> bool:
    """Return whether work may be shared with a forked copy of this process now."""
    return (sys.platform.startswith("linux") and hasattr(os, "fork") and (os.cpu_count() or 1) > 1
            and threading.active_count() == 1 and not os.environ.get("CASTLINE_ONE_PROCESS"))


def _read_all(descriptor: int) -> bytes:
    chunks = []
    while chunk := os.read(descriptor, 1 << 20):
        chunks.append(chunk)
    return b"".join(chunks)


def _serve(function: Callable, items: Sequence, descriptor: int) -> None:
    """In the copy: compute the items, write (results, warnings) pickled to the pipe, and leave
    without running any of the parent's exit handlers or flushing its buffers."""
    try:
        with warnings.catch_warnings(record=True) as caught:
            results = [function(item) for item in items]
        raised = [(str(w.message), w.category, w.filename, w.lineno) for w in caught]
        data = pickle.dumps((results, raised), protocol=pickle.HIGHEST_PROTOCOL)
        view = memoryview(data)
        while view:
            view = view[os.write(descriptor, view):]
    except BaseException:   # noqa: BLE001 (the parent does this share again and meets the error itself)
        pass
    finally:
        os._exit(0)


def map_shared(function: Callable, items: Sequence) -> list:
    """Return ``[function(item) for item in items]``, every other item computed in a forked copy
    of this process when ``can_fork()``; results must pickle."""
    items = list(items)
    if len(items) < 2 or not can_fork():
        return [function(item) for item in items]
    theirs, mine = items[1::2], items[0::2]
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:
        os.close(read)
        _serve(function, theirs, write)
    os.close(write)
    try:
        done = [function(item) for item in mine]
        data = _read_all(read)
    except BaseException:
        os.kill(pid, signal.SIGKILL)
        raise
    finally:
        os.close(read)
        os.waitpid(pid, 0)
    try:
        shared, raised = pickle.loads(data)
    except Exception:   # noqa: BLE001 (the copy failed: its share is done here)
        shared = [function(item) for item in theirs]
    else:
        for message, category, filename, lineno in raised:
            warnings.warn_explicit(message, category, filename, lineno)
    results = [None] * len(items)
    results[0::2], results[1::2] = done, shared
    return results
