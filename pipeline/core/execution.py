"""Where the per-series fits run: in this process, in worker processes, or on a Dask cluster.

Every way runs the same tasks (the series cut into the same chunks, see
``models.per_series``), each a pure function of its numbers, so a run gives
the same digits whichever way it is executed. The way is chosen by the spec's
``compute`` section and set for the length of a run with ``using``.
"""

from __future__ import annotations

import contextvars
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager

from pipeline.core.errors import SpecError


class InProcess:
    """Runs each task in turn, here."""

    description = "in this process"

    def map(self, function: Callable, tasks: Sequence) -> list:
        return [function(task) for task in tasks]


class WorkerProcesses:
    """Runs the tasks in worker processes on this machine (joblib)."""

    def __init__(self, workers: int) -> None:
        self.workers = workers
        self.description = f"in {workers} worker processes"

    def map(self, function: Callable, tasks: Sequence) -> list:
        if len(tasks) < 2:
            return [function(task) for task in tasks]
        import joblib
        return joblib.Parallel(n_jobs=self.workers, backend="loky")(
            joblib.delayed(function)(task) for task in tasks)


class DaskCluster:
    """Runs the tasks on a Dask cluster through its scheduler (dask.distributed)."""

    def __init__(self, client, address: str) -> None:
        self.client = client
        self.description = f"on the Dask cluster at {address}"

    def map(self, function: Callable, tasks: Sequence) -> list:
        futures = self.client.map(function, list(tasks), pure=False)
        return self.client.gather(futures)


_current: contextvars.ContextVar = contextvars.ContextVar("castline_execution", default=None)


def current():
    """Return the way the per-series fits run for the run in progress."""
    return _current.get() or InProcess()


@contextmanager
def using(compute, spec=None) -> Iterator[object]:
    """Set, for the block, where the per-series fits run, from a spec's ``compute`` section.

    Raises SpecError (placed at ``compute.scheduler``) when the scheduler cannot be reached.
    """
    if compute.scheduler:
        runner = _connect(compute.scheduler, spec)
    elif compute.workers > 1:
        runner = WorkerProcesses(compute.workers)
    else:
        runner = InProcess()
    token = _current.set(runner)
    try:
        yield runner
    finally:
        _current.reset(token)
        if isinstance(runner, DaskCluster):
            runner.client.close()


def _connect(address: str, spec) -> DaskCluster:
    try:
        from dask.distributed import Client
    except ImportError as exc:   # pragma: no cover - dask is a declared dependency
        raise _error(spec, f"dask.distributed is not installed ({exc})") from None
    try:
        client = Client(address, timeout="10s", set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise _error(spec, f"cannot reach the Dask scheduler at {address}: "
                           f"{str(exc).splitlines()[0] if str(exc) else type(exc).__name__}") from None
    return DaskCluster(client, address)


def _error(spec, message: str) -> SpecError:
    if spec is not None:
        return spec.error(("compute", "scheduler"), message)
    return SpecError(message, key="compute.scheduler")
