"""Where the per-series fits run (pipeline.core.execution) and how a run reports progress
(pipeline.core.progress).

References: the same tasks run here in this process (a list comprehension); the process
ids the tasks report; a Dask LocalCluster started in this test process; an in-memory
stream that is not a terminal and one that claims to be.
"""

from __future__ import annotations

import io
import os

import numpy as np
import pytest

from pipeline.core import execution, progress
from pipeline.core.design import Design
from pipeline.core.errors import SpecError
from pipeline.models.per_series import PerSeriesOLS
from pipeline.spec import ComputeSection


def square(value: int) -> int:
    return value * value


def where(value: int) -> tuple[int, int]:
    return value, os.getpid()


# ---------------------------------------------------------------- execution

def test_outside_a_run_the_fits_run_in_this_process():
    assert isinstance(execution.current(), execution.InProcess)
    assert execution.current().map(square, [1, 2, 3]) == [1, 4, 9]


def test_the_compute_section_chooses_the_way_and_the_block_restores_it():
    with execution.using(ComputeSection()) as runner:
        assert isinstance(runner, execution.InProcess) and execution.current() is runner
    with execution.using(ComputeSection(workers=3)) as runner:
        assert isinstance(runner, execution.WorkerProcesses) and runner.workers == 3
        assert execution.current() is runner
    assert isinstance(execution.current(), execution.InProcess)
    with pytest.raises(RuntimeError), execution.using(ComputeSection(workers=2)):
        raise RuntimeError("a failing run")
    assert isinstance(execution.current(), execution.InProcess)


def test_worker_processes_return_every_result_in_order_from_other_processes():
    """Reference: the same map in this process; the tasks report process ids other than
    this one (a single task is run here, as WorkerProcesses.map does on purpose)."""
    runner = execution.WorkerProcesses(2)
    tasks = list(range(20))
    found = runner.map(where, tasks)
    assert [value for value, _ in found] == tasks
    assert os.getpid() not in {pid for _, pid in found}
    assert runner.map(where, [5]) == [(5, os.getpid())]




def test_a_dask_scheduler_runs_the_tasks_in_order_and_the_client_is_closed_after(dask_cluster):
    spec = ComputeSection(scheduler=dask_cluster.scheduler_address)
    with execution.using(spec) as runner:
        assert isinstance(runner, execution.DaskCluster)
        assert runner.map(square, list(range(30))) == [k * k for k in range(30)]
        client = runner.client
    assert client.status in ("closed", "closing")
    assert "square" in dask_cluster.scheduler.task_prefixes


def test_a_model_per_series_fitted_on_dask_equals_the_fit_in_this_process(dask_cluster):
    """More series than one chunk, so several tasks go to the cluster; coefficients, (X'X)⁻¹
    and residual SDs equal the fit in this process exactly."""
    rng = np.random.default_rng(3)
    series = np.repeat([f"s{k:03d}" for k in range(520)], 12)
    matrix = rng.normal(size=(len(series), 2))
    y = matrix @ [1.0, -2.0] + rng.normal(size=len(series))
    design = Design(matrix, ["a", "b"], series)
    here = PerSeriesOLS().fit(design, y)
    with execution.using(ComputeSection(scheduler=dask_cluster.scheduler_address)):
        there = PerSeriesOLS().fit(design, y)
    assert "fit_series_chunk" in dask_cluster.scheduler.task_prefixes
    np.testing.assert_array_equal(there.coef_, here.coef_)
    np.testing.assert_array_equal(there.xtx_inverse_, here.xtx_inverse_)
    np.testing.assert_array_equal(there.resid_sd_, here.resid_sd_)


def test_an_unreachable_scheduler_is_a_spec_error_at_compute_scheduler():
    with pytest.raises(SpecError) as caught, \
            execution.using(ComputeSection(scheduler="tcp://127.0.0.1:1")):
        pass
    assert caught.value.key == "compute.scheduler"
    assert "cannot reach the Dask scheduler at tcp://127.0.0.1:1" in str(caught.value)
    assert "\n" not in str(caught.value)
    assert isinstance(execution.current(), execution.InProcess)


@pytest.mark.parametrize("address", ["127.0.0.1:8786", "http://host:8786", "tcp://"])
def test_a_scheduler_address_without_a_dask_protocol_is_refused_by_the_spec(address):
    with pytest.raises(ValueError):
        ComputeSection(scheduler=address)


@pytest.mark.parametrize("workers", [0, -1, 257, 2.0])
def test_workers_must_be_a_whole_number_from_1_to_256(workers):
    with pytest.raises(ValueError):
        ComputeSection(workers=workers)


# ---------------------------------------------------------------- progress

class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def _fit_some_series() -> None:
    rng = np.random.default_rng(1)
    series = np.repeat(["a", "b", "c"], 10)
    PerSeriesOLS().fit(Design(rng.normal(size=(30, 2)), ["u", "v"], series), rng.normal(size=30))


def test_progress_on_a_stream_that_is_not_a_terminal_shows_nothing():
    stream = io.StringIO()
    with progress.showing(stream) as bar:
        assert isinstance(bar, progress.Quiet) and not isinstance(bar, progress.TerminalBar)
        assert isinstance(progress.current(), progress.Quiet)
        _fit_some_series()
    assert stream.getvalue() == ""


def test_progress_on_a_terminal_shows_the_bar_and_is_reset_after():
    """The counterpart of the test above, so that it can fail: a stream that says it is a
    terminal gets the bar's label written to it."""
    stream = _Terminal()
    with progress.showing(stream) as bar:
        assert isinstance(bar, progress.TerminalBar) and progress.current() is bar
        _fit_some_series()
    assert "series fitted" in stream.getvalue()
    assert not isinstance(progress.current(), progress.TerminalBar)


def test_a_stream_without_isatty_is_not_a_terminal():
    class Bare:
        def write(self, text: str) -> int:
            raise AssertionError("nothing should be written")

    with progress.showing(Bare()) as bar:
        assert isinstance(bar, progress.Quiet)
        _fit_some_series()
