"""Where the per-series fits run: in this process, in worker processes, or on a Dask cluster.

Every way runs the same tasks (the series cut into the same chunks, see
``models.per_series``), each a pure function of its numbers, so a run gives
the same digits whichever way it is executed. The runner opens the way the
spec's ``compute`` section chooses with ``executor_for`` and hands it to the
stages, which hand it to the fits; a fit given none runs its tasks here
(``IN_PROCESS``).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from typing import Protocol

from pipeline.core.errors import SpecError


class Executor(Protocol):
    """Runs a function over tasks and returns the results in the tasks' order."""

    description: str

    def map(self, function: Callable, tasks: Sequence) -> list: ...


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


IN_PROCESS = InProcess()   # the default of every stage and fit that takes an executor


@contextmanager
def executor_for(compute, spec=None) -> Iterator[Executor]:
    """Give, for the block, the executor a spec's ``compute`` section chooses; a Dask
    cluster's client is closed when the block ends.

    Raises SpecError (placed at ``compute.scheduler``) when the scheduler cannot be reached.
    """
    if compute.scheduler:
        runner = _connect(compute.scheduler, spec)
    elif compute.workers > 1:
        runner = WorkerProcesses(compute.workers)
    else:
        runner = InProcess()
    try:
        yield runner
    finally:
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
