"""Where the per-series fits run (pipeline.core.execution): handed to the stages and fits,
never read from a global (how a run reports progress is in test_progress.py).

References: the same tasks run here in this process (a list comprehension); the process
ids the tasks report; a Dask LocalCluster started in this test process; executors that
record what they are given.
"""

from __future__ import annotations

import contextvars
import inspect
import os

import numpy as np
import pytest

from pipeline.core import execution, progress
from pipeline.core.design import Design
from pipeline.core.errors import SpecError
from pipeline.models import make_model
from pipeline.models.per_series import CHUNK_SERIES, PerSeriesOLS, fit_series_chunk
from pipeline.spec import ComputeSection, ModelChoice
from pipeline.stages import backtest, forecast, multistep


def square(value: int) -> int:
    return value * value


def where(value: int) -> tuple[int, int]:
    return value, os.getpid()


# ---------------------------------------------------------------- execution

class RecordingExecutor(execution.InProcess):
    """Runs the tasks here, as InProcess does, and records each function and batch given."""

    description = "recording"

    def __init__(self) -> None:
        self.calls: list[tuple[object, int]] = []

    def map(self, function, tasks):
        self.calls.append((function, len(tasks)))
        return super().map(function, tasks)


def _series_design(count: int, rows: int = 12, seed: int = 3) -> tuple[Design, np.ndarray]:
    rng = np.random.default_rng(seed)
    series = np.repeat([f"s{k:03d}" for k in range(count)], rows)
    matrix = rng.normal(size=(len(series), 2))
    return Design(matrix, ["a", "b"], series), matrix @ [1.0, -2.0] + rng.normal(size=len(series))


def test_without_an_executor_given_the_fits_run_in_this_process():
    assert isinstance(execution.IN_PROCESS, execution.InProcess)
    assert execution.IN_PROCESS.map(square, [1, 2, 3]) == [1, 4, 9]
    assert PerSeriesOLS().executor is execution.IN_PROCESS
    assert make_model(ModelChoice(kind="ols", per_series=True)).executor is execution.IN_PROCESS
    for function in (backtest.run_backtest, forecast.make_forecast, multistep.predict_ahead,
                     make_model, PerSeriesOLS.from_choice):
        assert inspect.signature(function).parameters["executor"].default is execution.IN_PROCESS


def test_no_executor_or_progress_is_held_in_a_context_variable():
    for module in (execution, progress):
        assert not [name for name, value in vars(module).items()
                    if isinstance(value, contextvars.ContextVar)]


def test_a_model_per_series_runs_its_chunks_on_the_executor_it_is_given():
    """Reference: the fit in this process with the default executor: the same numbers."""
    design, y = _series_design(2 * CHUNK_SERIES + 20)
    recording = RecordingExecutor()
    model = make_model(ModelChoice(kind="ols", per_series=True), executor=recording)
    there = model.fit(design, y)
    here = PerSeriesOLS().fit(design, y)
    assert recording.calls == [(fit_series_chunk, 3)]   # three chunks, in one batch of up to 8
    np.testing.assert_array_equal(there.coef_, here.coef_)


def test_the_compute_section_chooses_the_way():
    with execution.executor_for(ComputeSection()) as runner:
        assert isinstance(runner, execution.InProcess)
    with execution.executor_for(ComputeSection(workers=3)) as runner:
        assert isinstance(runner, execution.WorkerProcesses) and runner.workers == 3
    with pytest.raises(RuntimeError), execution.executor_for(ComputeSection(workers=2)):
        raise RuntimeError("a failing run")


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
    with execution.executor_for(spec) as runner:
        assert isinstance(runner, execution.DaskCluster)
        assert runner.map(square, list(range(30))) == [k * k for k in range(30)]
        client = runner.client
    assert client.status in ("closed", "closing")
    assert "square" in dask_cluster.scheduler.task_prefixes


def test_a_model_per_series_fitted_on_dask_equals_the_fit_in_this_process(dask_cluster):
    """More series than one chunk, so several tasks go to the cluster; coefficients, (X'X)⁻¹
    and residual SDs equal the fit in this process exactly."""
    design, y = _series_design(520)
    here = PerSeriesOLS().fit(design, y)
    with execution.executor_for(ComputeSection(scheduler=dask_cluster.scheduler_address)) as runner:
        there = PerSeriesOLS(executor=runner).fit(design, y)
    assert "fit_series_chunk" in dask_cluster.scheduler.task_prefixes
    np.testing.assert_array_equal(there.coef_, here.coef_)
    np.testing.assert_array_equal(there.xtx_inverse_, here.xtx_inverse_)
    np.testing.assert_array_equal(there.resid_sd_, here.resid_sd_)


def test_an_unreachable_scheduler_is_a_spec_error_at_compute_scheduler():
    with pytest.raises(SpecError) as caught, \
            execution.executor_for(ComputeSection(scheduler="tcp://127.0.0.1:1")):
        pytest.fail("the block ran without a scheduler")
    assert caught.value.key == "compute.scheduler"
    assert "cannot reach the Dask scheduler at tcp://127.0.0.1:1" in str(caught.value)
    assert "\n" not in str(caught.value)


@pytest.mark.parametrize("address", ["127.0.0.1:8786", "http://host:8786", "tcp://"])
def test_a_scheduler_address_without_a_dask_protocol_is_refused_by_the_spec(address):
    with pytest.raises(ValueError):
        ComputeSection(scheduler=address)


@pytest.mark.parametrize("workers", [0, -1, 257, 2.0])
def test_workers_must_be_a_whole_number_from_1_to_256(workers):
    with pytest.raises(ValueError):
        ComputeSection(workers=workers)
