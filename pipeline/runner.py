"""A whole run: the stages in order, each handing a typed value to the next."""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass
from functools import partial
from pathlib import Path
from typing import TYPE_CHECKING

from pipeline.core import landing
from pipeline.core.errors import DataError, UserError
from pipeline.core.forked import Ahead, Helper, called, map_shared, settle_again, settled
from pipeline.core.progress import QUIET, Progress
from pipeline.spec import CsvOptions, Spec, load_spec

if TYPE_CHECKING:
    import pandas as pd

    from pipeline.record.run_folder import RunFolder
    from pipeline.review.track_record import TrackRecord
    from pipeline.stages.backtest import BacktestResult
    from pipeline.stages.check import CheckedData
    from pipeline.stages.evaluate import Evaluation
    from pipeline.stages.forecast import ForecastResult
    from pipeline.stages.survey import Inference

# The functions each command calls, by the module that holds them. They load on first use,
# so 'castline check' never imports the models (scikit-learn, scipy's statistics), the
# pictures (matplotlib) or the pages; each becomes an attribute of this module once
# loaded, so a name set here beforehand (a test's stand-in) is the one used.
_STAGES = {"read_input": "pipeline.stages.ingest", "check_data": "pipeline.stages.check",
           "plan_splits": "pipeline.stages.splits", "settle_validation": "pipeline.stages.splits",
           "run_backtest": "pipeline.stages.backtest",
           "evaluate": "pipeline.stages.evaluate", "make_forecast": "pipeline.stages.forecast",
           "executor_for": "pipeline.core.execution", "track_record": "pipeline.review.track_record",
           "publish": "pipeline.record.run_folder", "render_pages": "pipeline.present.pages",
           "period_fingerprints": "pipeline.record.ledger.fingerprints",
           "infer": "pipeline.stages.survey", "render_spec": "pipeline.present.starter_spec",
           "write_new_file": "pipeline.record.new_file"}


def __getattr__(name: str):
    if name in _STAGES:
        from importlib import import_module
        globals()[name] = getattr(import_module(_STAGES[name]), name)
        return globals()[name]
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def _stages(*names: str) -> list:
    """Return the named stage functions, loading their modules on first use."""
    return [globals()[name] if name in globals() else __getattr__(name) for name in names]


@dataclass(frozen=True)
class RunResult:
    """Every table a run's report shows, and where the run folder landed."""

    spec: Spec
    data: CheckedData
    backtest: BacktestResult
    evaluation: Evaluation
    forecast_result: ForecastResult
    folder: RunFolder
    track: TrackRecord | None = None   # earlier runs' forecasts scored against this data

    @property
    def metrics(self) -> pd.DataFrame:
        return self.evaluation.table

    @property
    def predictions(self) -> pd.DataFrame:
        return self.backtest.predictions

    @property
    def coefficients(self) -> pd.DataFrame:
        return self.forecast_result.coefficients

    @property
    def forecast(self) -> pd.DataFrame:
        return self.forecast_result.forecast

    @property
    def warnings(self) -> list[str]:
        track = self.track.warnings if self.track else []
        return self.forecast_result.warnings + self.notes + track

    @property
    def notes(self) -> list[str]:
        """Return the run's notes: the forecast's, the validation's, the ledger's (earlier
        unfinished runs left as they were)."""
        return [*self.forecast_result.notes, *self.evaluation.ahead_notes, *self.evaluation.notes,
                *self.folder.notes]

    @property
    def realised(self) -> pd.DataFrame:
        """Return the earlier forecasts whose months have actuals in this run's data, scored."""
        import pandas as pd
        return self.track.realised if self.track else pd.DataFrame()


def _as_spec(spec_or_path: Spec | str | Path) -> Spec:
    return spec_or_path if isinstance(spec_or_path, Spec) else load_spec(spec_or_path)


def check(spec_or_path: Spec | str | Path) -> CheckedData:
    """Return the validated data of a spec, after checking the validation scheme fits it.

    Writes nothing.
    """
    read_input, check_data, settle_validation, plan_splits = _stages(
        "read_input", "check_data", "settle_validation", "plan_splits")
    spec = _as_spec(spec_or_path)
    with _data_file_named(spec):
        data = check_data(spec, read_input(spec))
        spec, notes = settle_validation(spec, data)
        plan_splits(spec, data)
    return data.with_notes(notes)


def output_target(option: str, path: str | None, *, inputs: dict[str, Path | None],
                  overwrite: bool) -> Path | None:
    """Return where an option's output file may go (None when the option was not given), or raise
    UserError naming it: never onto one of the command's ``inputs`` (by name), a ledger, a model
    file or a run folder's file, nor onto any other file unless ``overwrite``."""
    if path is None:
        return None
    from pipeline.record.new_file import output_file_target
    return output_file_target(Path(path), option=option, inputs=inputs, overwrite=overwrite)


def spec_inputs(spec_path: str | Path) -> tuple[Spec, dict[str, Path | None]]:
    """Return the spec and what a command on it reads or records into: the spec file, its data
    file and its ledger (which no output option may be pointed at)."""
    from pipeline.record.ledger import ledger_path
    spec = load_spec(spec_path)
    return spec, {"spec": Path(spec_path), "data file": Path(spec.input.file), "ledger": ledger_path(spec)}


def write_table_file(table, target: Path, *, option: str, what: str) -> Path:
    """Write a table as castline's CSV to ``target`` (checked by ``output_target``) in one step."""
    from pipeline.record.new_file import replace_file
    from pipeline.record.safe_csv import write_csv
    return replace_file(target, lambda path: write_csv(table, path), option=option, what=what)


@contextmanager
def _data_file_named(spec: Spec):
    """Name the input file in any data error raised without one (e.g. by an encoder)."""
    try:
        yield
    except DataError as error:
        if error.file is None:
            raise DataError(error.message, file=str(spec.input.file), column=error.column,
                            row=error.row) from None
        raise


@contextmanager
def _one_blas_thread():
    """Run the fits' linear algebra on one BLAS thread: castline's matrices (tens of columns)
    are too small for threads to pay for waking each other (a 13 × 13 triangular solve took
    0.02 ms on one and up to 20 ms on two on a busy machine). Worker processes set their own."""
    from threadpoolctl import threadpool_limits
    with threadpool_limits(limits=1, user_api="blas"):
        yield


def run(spec_or_path: Spec | str | Path, *, output_folder: str | Path | None = None,
        progress: Progress = QUIET) -> RunResult:
    """Run the whole forecast a spec describes and return every table it produced.

    The per-series fits run where the spec's ``compute`` section says; the backtest and
    the forecast report how far they have got to ``progress`` (by default, nowhere).
    """
    spec = _as_spec(spec_or_path)
    landing.forget()   # what this run places; an interruption says whether it landed
    import pandas  # noqa: F401 (every process of the run needs it: loaded once, before any fork, and set aside)
    with settled(), _pages_helper() as pages:
        data, (settle_validation, run_backtest, evaluate, make_forecast, executor_for, track_record,
               publish) = _checked_while_loading(spec, _RUN_STAGES)
        settle_again()   # the modules loaded meanwhile are set aside too
        # The ledger's month fingerprints (a hash of every input cell's text) are made by a copy
        # on the checked data while the run fits, on what the second core has spare; before a
        # Dask client, whose threads would forbid the fork.
        with Ahead(*_stages("period_fingerprints"), data) as periods:
            with _data_file_named(spec), executor_for(spec.compute, spec) as executor, _one_blas_thread():
                spec, notes = settle_validation(spec, data)
                data = data.with_notes(notes)
                backtest = run_backtest(spec, data, executor=executor, progress=progress)
                evaluation = evaluate(spec, backtest)
                forecast = make_forecast(spec, data, backtest, executor=executor, progress=progress,
                                         coverage=evaluation.coverage)
            track = track_record(spec, data, evaluation, output_folder=output_folder)
            folder = publish(spec, data, backtest, evaluation, forecast,
                             output_folder=Path(output_folder) if output_folder else None,
                             realised=track.realised, track=track.facts(), pages=pages,
                             periods=periods.result)
    return RunResult(spec=spec, data=data, backtest=backtest, evaluation=evaluation,
                     forecast_result=forecast, folder=folder, track=track)


# What a run calls after the check, loaded while the data is read and checked.
_RUN_STAGES = ("settle_validation", "run_backtest", "evaluate", "make_forecast", "executor_for",
               "track_record", "publish")


def _read_and_check(spec: Spec) -> CheckedData:
    read_input, check_data = _stages("read_input", "check_data")
    with _data_file_named(spec):
        return check_data(spec, read_input(spec))


def _checked_while_loading(spec: Spec, names: tuple[str, ...]) -> tuple[CheckedData, list]:
    """Return the spec's data, read and checked, and the named stage functions: the data read and
    checked in a forked copy of this process (core.forked; which alone imports pandera) while
    this one loads the modules of the stages (scikit-learn, scipy: some 0.3 s), where the
    machine allows. Nothing is fitted before the check has passed: a check that fails in the
    copy is done again here, and its error raised here."""
    loading, checking = partial(_stages, *names), partial(_read_and_check, spec)
    data, stages = map_shared(called, [checking, loading], weights=[1, 2])   # the heavier share is this process's
    return data, stages


def _pages_of(folder: Path) -> dict[str, str]:
    """Return a run folder's pages, by the runner's render_pages (a test's stand-in if set)."""
    return _stages("render_pages")[0](folder)


def _pages_helper():
    """Return the pages' renderer for a run: a forked copy of this process that imports the pages'
    modules (matplotlib, jinja2: some 0.4 s) and compiles their templates while this one checks
    and fits, at a lower priority than the run's own work, and renders the
    pages once the run folder's files are written (core.forked.Helper; here where it cannot)."""
    return Helper(__name__, "_pages_of", preload=(_STAGES["render_pages"], "pipeline.present.report:compile_templates"),
                  background=True)


def init(data_file: str | Path, spec_file: str | Path | None = None, *,
         csv: CsvOptions | None = None, sheet: str | int = 0) -> tuple[Path, Inference]:
    """Write a starter spec for a data file and return its path and the survey; never overwrites.

    Raises DataError when the data file is missing or unreadable, UserError when the spec
    file exists already or cannot be written.
    """
    infer, render_spec, write_new_file = _stages("infer", "render_spec", "write_new_file")
    data_path = Path(data_file)
    if not data_path.exists():
        raise DataError("no such data file", file=str(data_path))
    if data_path.is_dir():
        raise DataError("is a folder, not a data file", file=str(data_path))
    target = Path(spec_file) if spec_file else Path(f"{data_path.stem}.spec.yaml")
    refusal = "already exists; castline init never overwrites a file"
    if target.exists():
        raise UserError(f"{target}: {refusal} (choose another name with --spec-file)")
    found = infer(data_path, csv=csv, sheet=sheet)
    write_new_file(target, render_spec(found, target), what="spec", refusal=refusal,
                   hint=" (choose another name with --spec-file)")
    return target, found
