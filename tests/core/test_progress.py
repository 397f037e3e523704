"""Progress bars (pipeline.core.progress): shown on a terminal, never in a log or a pipe; a
run, and a model per series, report to the progress they are handed (by default, nowhere),
never to one read from a global.

References: an in-memory stream that is not a terminal and one that claims to be; a
progress that records what it is given.
"""

from __future__ import annotations

import inspect
import io

import numpy as np
import yaml
from conftest import ROOT

import pipeline
from pipeline import runner
from pipeline.core import progress
from pipeline.core.design import Design
from pipeline.models import make_model
from pipeline.models.per_series import CHUNK_SERIES, PerSeriesOLS
from pipeline.spec import ModelChoice
from pipeline.stages import backtest, forecast, multistep


class FakeTerminal(io.StringIO):
    """A text stream that says it is a terminal, as a console's standard error does."""

    def isatty(self) -> bool:
        return True


class Recording(progress.Quiet):
    """Records every report it is given, in order."""

    def __init__(self) -> None:
        self.reports: list[tuple] = []

    def start(self, label: str, total: int) -> None:
        self.reports.append(("start", label, total))

    def advance(self, label: str, steps: int = 1) -> None:
        self.reports.append(("advance", label, steps))


def test_a_stream_that_is_not_a_terminal_gets_nothing():
    stream = io.StringIO()
    with progress.showing(stream) as bar:
        assert isinstance(bar, progress.Quiet) and not isinstance(bar, progress.TerminalBar)
        bar.start("origins", 3)
        bar.advance("origins")
    assert stream.getvalue() == ""


def test_a_terminal_gets_bars_with_counts_for_origins_and_series():
    stream = FakeTerminal()
    with progress.showing(stream) as bar:
        assert isinstance(bar, progress.TerminalBar)
        bar.start("origins", 12)
        bar.start("series fitted", 2 * CHUNK_SERIES)
        for _ in range(12):
            bar.advance("origins")
        bar.advance("series fitted", CHUNK_SERIES)
    text = stream.getvalue()
    assert "origins" in text and "series fitted" in text
    assert "12/12" in text


def test_the_bars_run_no_thread_so_a_run_may_fork_under_them():
    import threading
    stream = FakeTerminal()
    before = threading.active_count()
    with progress.showing(stream) as bar:
        bar.start("origins", 3)
        assert threading.active_count() == before   # rich's refresh thread would forbid core.forked
        for _ in range(3):
            bar.advance("origins")
        bar.finish("origins")
    assert "3/3" in stream.getvalue()


def test_a_run_reports_origins_and_series_to_the_progress_it_is_handed(tmp_path):
    """The demo data (for plumbing: 4 regions) at 3 rolling origins with a model per series:
    every origin is counted, and every per-series fit (one per origin, then the final fit on
    all history) counts its 4 series."""
    spec = yaml.safe_load((ROOT / "configs" / "compost_demo.yaml").read_text(encoding="utf-8"))
    spec["input"]["file"] = str(ROOT / "data_samples" / "compost_sales.csv")
    spec["validation"] = {"method": "rolling_origin", "horizon": 3, "min_train_periods": 48,
                          "origins": 3}
    spec["models"] = ["ols", {"kind": "ols", "per_series": True}]
    path = tmp_path / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    recording = Recording()
    pipeline.run(path, output_folder=tmp_path / "out", progress=recording)
    series = [("start", "series fitted", 4), ("advance", "series fitted", 4)]
    origin = series + [("advance", "origins", 1)]
    assert recording.reports == [("start", "origins", 3), *origin * 3, *series]


# ---------------------------------------------------------------- a model per series

def _fit_some_series(bar) -> None:
    rng = np.random.default_rng(1)
    series = np.repeat(["a", "b", "c"], 10)
    PerSeriesOLS(progress=bar).fit(Design(rng.normal(size=(30, 2)), ["u", "v"], series),
                                   rng.normal(size=30))


def test_without_a_progress_given_nothing_is_reported():
    assert PerSeriesOLS().progress is progress.QUIET
    assert make_model(ModelChoice(kind="ols", per_series=True)).progress is progress.QUIET
    for function in (backtest.run_backtest, forecast.make_forecast, multistep.predict_ahead,
                     make_model, PerSeriesOLS.from_choice, runner.run):
        assert inspect.signature(function).parameters["progress"].default is progress.QUIET


def test_a_model_per_series_counts_the_series_it_fitted_on_the_progress_it_is_given():
    recording = Recording()
    _fit_some_series(recording)
    assert recording.reports == [("start", "series fitted", 3), ("advance", "series fitted", 3)]


def test_progress_on_a_stream_that_is_not_a_terminal_shows_nothing():
    stream = io.StringIO()
    with progress.showing(stream) as bar:
        assert isinstance(bar, progress.Quiet) and not isinstance(bar, progress.TerminalBar)
        _fit_some_series(bar)
    assert stream.getvalue() == ""


def test_progress_on_a_terminal_shows_the_bar():
    """The counterpart of the test above, so that it can fail: a stream that says it is a
    terminal gets the bar's label written to it."""
    stream = FakeTerminal()
    with progress.showing(stream) as bar:
        assert isinstance(bar, progress.TerminalBar)
        _fit_some_series(bar)
    assert "series fitted" in stream.getvalue()


def test_a_stream_without_isatty_is_not_a_terminal():
    class Bare:
        def write(self, text: str) -> int:
            raise AssertionError("nothing should be written")

    with progress.showing(Bare()) as bar:
        assert isinstance(bar, progress.Quiet)
        _fit_some_series(bar)
