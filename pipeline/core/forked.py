"""Work shared with a forked copy of this process, on a machine with a second core.

``map_shared`` hands about half of a list of items (by their weights) to a copy of the
process made by ``os.fork`` (which starts at once: it shares the memory and the libraries
already imported) and does the rest itself; only the results cross back, pickled through
a pipe. A run uses it for its windows' feature plans and fits and its report's pictures.
``Helper`` is a copy made at the start of a run that imports what the run's last step
needs (the pages' libraries) while the run works, then does that step when asked; ``Ahead``
a copy that starts a piece of work at once, its result taken when needed.

It falls back to doing everything here, with the same results in the same order,
wherever forking is unsafe or pays nothing: off Linux, on one core, when the process
runs threads of its own (a thread holding a lock when the copy is made would leave the
copy's lock held forever), or with ``CASTLINE_ONE_PROCESS`` set. When the copy fails in
any way (an error, a warning turned into an error, a crash), its share is done again
here, so an error is raised where and as it would have been without the copy. Warnings
the copy caught are raised again here, for the command to collect as its own.
"""

from __future__ import annotations

import ctypes
import functools
import gc
import importlib
import os
import pickle
import signal
import sys
import threading
import time
import warnings
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from typing import Any

# True in a copy map_shared made: a copy shares nothing further (two cores, two processes).
_sharing_copy = False


def in_copy() -> bool:
    """Return whether this process is a copy map_shared made (which should report no progress:
    the process that made it counts the copy's work when it is done)."""
    return _sharing_copy


def can_fork() -> bool:
    """Return whether work may be shared with a forked copy of this process now."""
    return (not _sharing_copy and sys.platform.startswith("linux") and hasattr(os, "fork") and (os.cpu_count() or 1) > 1
            and threading.active_count() == 1 and not os.environ.get("CASTLINE_ONE_PROCESS"))


@contextmanager
def settled() -> Iterator[None]:
    """For the block, set every object alive now (the modules, classes and functions imported)
    aside from the garbage collector's scans (``gc.freeze``), and put them back after. A run
    makes many short-lived objects; each full collection would otherwise walk the libraries'
    hundreds of thousands of objects again (some 10% of a small run's time), and in a forked copy
    touch every page the copy shares with its parent, copying it."""
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()


# The seconds of work from which sharing it with a copy pays, roughly: on the 2-core machine the
# project is measured on, the demo's backtest windows (some 0.25 s) ran no faster shared, while
# the report's pictures (some 1 s) take little more than half as long.
PAYS_FROM = 0.5


def settle_again() -> None:
    """Inside ``settled``: set the objects made since it began (modules loaded late) aside too."""
    gc.freeze()


def _die_with_parent(parent: int) -> None:
    """In a copy: be killed when the parent ends (Linux's PR_SET_PDEATHSIG), so a copy never
    outlives a run that was interrupted or killed."""
    try:
        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)   # 1: PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass
    if os.getppid() != parent:   # the parent ended before the request took effect
        os._exit(0)


def _write_all(descriptor: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        view = view[os.write(descriptor, view):]


def _read_all(descriptor: int) -> bytes:
    chunks = []
    while chunk := os.read(descriptor, 1 << 20):
        chunks.append(chunk)
    return b"".join(chunks)


def _packed(result, caught: list) -> bytes:
    raised = [(str(w.message), w.category, w.filename, w.lineno) for w in caught]
    return pickle.dumps((result, raised), protocol=pickle.HIGHEST_PROTOCOL)


def _unpacked(data: bytes):
    """Return what a copy sent, its warnings raised again here; raise ValueError when it sent
    nothing whole (it failed)."""
    try:
        result, raised = pickle.loads(data)
    except Exception as error:   # noqa: BLE001
        raise ValueError("the copy failed") from error
    for message, category, filename, lineno in raised:
        warnings.warn_explicit(message, category, filename, lineno)
    return result


def _serve(function: Callable, items: Sequence, descriptor: int) -> None:
    """In the copy: compute the items, write (results, warnings) pickled to the pipe, and leave
    without running any of the parent's exit handlers or flushing its buffers."""
    try:
        with warnings.catch_warnings(record=True) as caught:
            results = [function(item) for item in items]
        _write_all(descriptor, _packed(results, caught))
    except BaseException:   # noqa: BLE001 (the parent does this share again and meets the error itself)
        pass
    finally:
        os._exit(0)


def _halves(weights: Sequence[float]) -> tuple[list[int], list[int]]:
    """Return the items' positions cut in two of about equal weight: the heaviest first, each to
    the lighter half so far (this process's half first on a tie)."""
    halves: tuple[list[int], list[int]] = ([], [])
    loads = [0.0, 0.0]
    for position in sorted(range(len(weights)), key=lambda i: -weights[i]):
        lighter = 0 if loads[0] <= loads[1] else 1
        halves[lighter].append(position)
        loads[lighter] += weights[position]
    return sorted(halves[0]), sorted(halves[1])


def called(task: Callable):
    """Return ``task()``: the function to map over tasks (partials), for work of different kinds."""
    return task()


def map_shared(function: Callable, items: Sequence, weights: Sequence[float] | None = None, *,
               least: float = 0.0) -> list:
    """Return ``[function(item) for item in items]``, about half of them (by ``weights``, a rough
    cost of each; by count without) computed in a forked copy of this process when
    ``can_fork()``; results must pickle.

    With ``least`` (seconds), the first item is done here first and timed, and the others are
    shared only when they would take at least that long here (its time scaled by their weights):
    a copy costs a fork and its first touches of the memory it shares with this process, which
    small work does not repay."""
    items = list(items)
    weights = list(weights) if weights is not None else [1.0] * len(items)
    first = []
    if least > 0 and len(items) > 2 and can_fork():
        start = time.perf_counter()
        first = [function(items[0])]
        spent = time.perf_counter() - start
        ahead = spent * sum(weights[1:]) / weights[0] if weights[0] > 0 else spent * (len(items) - 1)
        items, weights = items[1:], weights[1:]
        if ahead < least:
            return first + [function(item) for item in items]
    return first + _shared(function, items, weights)


def _sharing_copy_of(function: Callable, items: list, *, nice: int = 0) -> tuple[int, int]:
    """Fork a copy that computes ``function`` over ``items`` (``_serve``), shares nothing further
    and dies with this process; return its pid and the pipe its answer comes through."""
    read, write = os.pipe()
    parent = os.getpid()
    pid = os.fork()
    if pid == 0:
        global _sharing_copy
        _sharing_copy = True
        os.close(read)
        _die_with_parent(parent)
        if nice:
            os.nice(nice)
        _serve(function, items, write)
    os.close(write)
    return pid, read


def _shared(function: Callable, items: list, weights: list) -> list:
    if len(items) < 2 or not can_fork():
        return [function(item) for item in items]
    here, there = _halves(weights)
    mine, theirs = [items[i] for i in here], [items[i] for i in there]
    pid, read = _sharing_copy_of(function, theirs)
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
        shared = _unpacked(data)
    except ValueError:   # the copy failed: its share is done here
        shared = [function(item) for item in theirs]
    results = [None] * len(items)
    for position, result in zip(here + there, done + shared, strict=True):
        results[position] = result
    return results


class _Copy:
    """What ``Ahead`` and ``Helper`` share: a forked copy's answer read from its pipe (or the
    work done here when the copy sent nothing whole), and the copy's end."""

    pid: int | None = None
    answers: int = -1

    def _descriptors(self) -> tuple[int, ...]:
        return (self.answers,)

    def _reap(self) -> None:
        for descriptor in self._descriptors():
            if descriptor >= 0:
                os.close(descriptor)
        os.waitpid(self.pid, 0)
        self.pid = None

    def _taken(self, here: Callable[[], Any]):
        """Return what the copy sent, the copy reaped; ``here()`` when it sent nothing whole."""
        try:
            data = _read_all(self.answers)
        except OSError:
            data = b""
        self._reap()
        try:
            return _unpacked(data)
        except ValueError:   # the copy failed: done here, so an error is raised here
            return here()

    def close(self) -> None:
        """End the copy if its answer was never taken (a run that failed early): at once."""
        if self.pid is not None:
            os.kill(self.pid, signal.SIGKILL)
            self._reap()

    def __enter__(self):
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class Ahead(_Copy):
    """Work started at once in a forked copy of this process, at a lower priority than the
    process's own, whose result is taken later: ``Ahead(function, *arguments).result()`` is
    ``function(*arguments)``. The copy works on the memory as it was when made, so it suits work
    on values nobody changes meanwhile. Where ``can_fork()`` is false, or the copy fails, the
    function runs here when its result is asked for; ``close`` (or leaving a ``with`` block)
    ends a copy whose result was never taken. The result must pickle."""

    def __init__(self, function: Callable, *arguments) -> None:
        self.function, self.arguments, self.pid = function, arguments, None
        if can_fork():
            self.pid, self.answers = _sharing_copy_of(lambda _: function(*arguments), [None], nice=10)

    def result(self):
        here = functools.partial(self.function, *self.arguments)
        return here() if self.pid is None else self._taken(lambda: [here()])[0]


class Helper(_Copy):
    """A forked copy of this process that imports a module at once, while this process goes on
    with other work, and later runs one function of it for this process: ``helper(*arguments)``
    returns ``function(*arguments)``. Used once; ``close`` ends it unused.

    The module is the copy's own once forked: what this process imports or changes later is
    not seen there. The arguments and the result must pickle. Where ``can_fork()`` is false,
    or the copy fails, the function runs here (imported here), so its errors are raised here.
    """

    def __init__(self, module: str, function: str, *, preload: tuple[str, ...] = (),
                 background: bool = False) -> None:
        self.module, self.function, self.preload, self.pid = module, function, preload, None
        if not can_fork():
            return
        request_read, request_write = os.pipe()
        answer_read, answer_write = os.pipe()
        parent = os.getpid()
        pid = os.fork()
        if pid == 0:
            os.close(request_write)
            os.close(answer_read)
            _die_with_parent(parent)
            if background:   # while it only prepares, the process's own work (and its copies) goes first
                os.nice(10)
            self._serve(request_read, answer_write)
        os.close(request_read)
        os.close(answer_write)
        self.pid, self.requests, self.answers = pid, request_write, answer_read

    def _here(self) -> Callable:
        return getattr(importlib.import_module(self.module), self.function)

    def _serve(self, requests: int, answers: int) -> None:
        try:
            for name in self.preload:
                module, _, prepare = name.partition(":")
                loaded = importlib.import_module(module)
                if prepare:
                    getattr(loaded, prepare)()
            function = self._here()
            gc.freeze()   # what the preparing made is set aside too, as in settled (for this copy's own copies)
            request = _read_all(requests)
            if request:   # nothing: this process closed the helper unused
                with warnings.catch_warnings(record=True) as caught:
                    result = function(*pickle.loads(request))
                _write_all(answers, _packed(result, caught))
        except BaseException:   # noqa: BLE001 (this process runs the function itself and meets the error)
            pass
        finally:
            os._exit(0)

    def __call__(self, *arguments):
        return self.ask(*arguments)()

    def ask(self, *arguments) -> Callable[[], Any]:
        """Ask the copy for ``function(*arguments)`` at once and return what waits for its answer,
        so this process can go on meanwhile (where there is no copy, what runs it here)."""
        if self.pid is None:
            return functools.partial(self._here(), *arguments)
        try:
            _write_all(self.requests, pickle.dumps(arguments, protocol=pickle.HIGHEST_PROTOCOL))
            os.close(self.requests)
            self.requests = -1
        except OSError:   # the copy is gone (a broken pipe)
            self._reap()
            return functools.partial(self._here(), *arguments)
        return functools.partial(self._answer, arguments)

    def _answer(self, arguments: tuple):
        return self._taken(lambda: self._here()(*arguments))

    def _descriptors(self) -> tuple[int, ...]:
        return (self.requests, self.answers)
