"""pipeline/record/model_file.py: the empirical intervals a model file states for new rows.

Two runs of the demo (conftest.DEMO_SPEC, a holdout; invented data, so plumbing only): as it
is but for `unseen: use_reference` on the region (so a region the run never saw can be
forecast), and with a log target. The reference for every bound is the run itself: its
forecast.csv, written by the forecast stage, a different code path from the stored model's.
"""

from __future__ import annotations

import copy
import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import DEMO_DATA, DEMO_SPEC

import pipeline
from pipeline import cli
from pipeline.core.errors import ModelFileError, UserError
from pipeline.record.model_file import StoredIntervals, load_model

# The interval columns, named as in the run's forecast.csv.
EMPIRICAL = ["empirical_low_80", "empirical_high_80", "empirical_low_95", "empirical_high_95"]
TARGET = "bags_sold"


def _demo_run(folder: Path, changes: dict[str, str]):
    """Run a copy of the holdout demo, its spec's text changed as given, in the shipped layout."""
    (folder / "configs").mkdir(parents=True)
    (folder / "data_samples").mkdir()
    shutil.copy(DEMO_DATA, folder / "data_samples" / DEMO_DATA.name)
    text = DEMO_SPEC.read_text(encoding="utf-8")
    for old, new in changes.items():
        assert old in text, old
        text = text.replace(old, new)
    spec = folder / "configs" / DEMO_SPEC.name
    spec.write_text(text, encoding="utf-8")
    return pipeline.run(spec)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("intervals")
    return {
        "demo": _demo_run(root / "demo", {"      reference: North\n":
                                          "      reference: North\n      unseen: use_reference\n"}),
        "log": _demo_run(root / "log", {"target_transform: none": "target_transform: log"}),
    }


def _future(result) -> pd.DataFrame:
    """The rows of the run's input with no target: its months to forecast."""
    data = pd.read_csv(result.spec.input.file)
    return data[data[TARGET].isna()]


def _forecast(result, rows: pd.DataFrame, tmp_path: Path, capsys, *options: str) -> tuple[pd.DataFrame, str]:
    """Run `castline forecast` on the rows with the run's model.json; return the table and stdout."""
    path, output = tmp_path / "rows.csv", tmp_path / "again.csv"
    rows.to_csv(path, index=False)
    code = cli.main(["forecast", str(result.folder.path / "model.json"), str(path), "--output", str(output),
                     *options])
    printed = capsys.readouterr()
    assert code == 0, printed.err
    return pd.read_csv(output), printed.out


# ------------------------------------------------------------------ the run's own months

@pytest.mark.parametrize("which", ["demo", "log"])
def test_castline_forecast_gives_the_runs_empirical_intervals_for_every_model(which, runs, tmp_path, capsys):
    result = runs[which]
    again, printed = _forecast(result, _future(result), tmp_path, capsys)
    assert "note:" not in printed                      # every series known, every month ahead
    assert list(again.columns) == ["period", "horizon", "series", "model", "forecast", *EMPIRICAL]
    written = pd.read_csv(result.folder.path / "forecast.csv")      # what the run wrote
    merged = again.merge(written, on=["period", "series", "model"], validate="one_to_one",
                         suffixes=("", "_run"))
    assert len(merged) == len(again) == len(written) == len(_future(result)) * len(result.spec.models)
    assert set(merged["model"]) == set(result.spec.model_kinds)
    assert (merged["horizon"] == merged["horizon_run"]).all()
    assert sorted(merged["horizon"].unique()) == [1, 2, 3]          # the demo's months to forecast
    for column in EMPIRICAL:
        assert np.isfinite(merged[f"{column}_run"]).all(), column   # the run stated them all
        np.testing.assert_allclose(merged[column], merged[f"{column}_run"], rtol=1e-9, atol=0,
                                   err_msg=column)
    assert (merged["empirical_low_95"] <= merged["empirical_low_80"]).all()
    assert (merged["empirical_high_80"] <= merged["empirical_high_95"]).all()


def test_the_log_run_stores_its_transform_and_floor(runs):
    document = json.loads((runs["log"].folder.path / "model.json").read_text(encoding="utf-8"))
    assert document["format_version"] == 4          # 3 added the intervals, 4 the multi-step strategy
    assert document["intervals"]["transform"] == "log"
    assert document["intervals"]["floor"] == 0.0          # bags sold are never below zero
    assert document["intervals"]["last_period"] == {"__period__": "2026-10", "freq": "M"}


def test_the_stored_intervals_are_what_the_forecast_stage_kept(runs):
    result = runs["demo"]
    stored = load_model(result.folder.path / "model.json").intervals
    kept = result.forecast_result
    assert sorted(stored.tables) == sorted(kept.interval_bounds) == sorted(result.spec.model_kinds)
    for kind, table in kept.interval_bounds.items():
        pd.testing.assert_frame_equal(stored.tables[kind], table.reset_index(drop=True), check_dtype=False)
    assert stored.series_scales == kept.series_scales
    assert (stored.transform, stored.floor, str(stored.last_period)) == ("none", 0.0, kept.last_period)
    again = StoredIntervals.from_dict(json.loads(json.dumps(stored.to_dict())), sorted(stored.tables))
    assert json.dumps(again.to_dict()) == json.dumps(stored.to_dict())


# ------------------------------------------------------------------ rows the run did not forecast

def _seasonal_naive_mae(result, region: str) -> float:
    """The series' MASE scale worked out here from the run's input: the mean absolute change
    from the same month a year earlier over its history (the demo's history has no gaps)."""
    data = pd.read_csv(result.spec.input.file)
    own = data[(data["region"] == region) & data[TARGET].notna()].sort_values("month")
    return float(own[TARGET].diff(12).abs().mean())


def test_a_series_the_run_never_saw_takes_the_median_scale_of_the_others(runs, tmp_path, capsys):
    result = runs["demo"]
    future = _future(result)
    first = future[(future["month"] == future["month"].min()) & future["region"].isin(["East", "West"])]
    rows = pd.concat([first, first.iloc[[0]].assign(region="Nowhere")], ignore_index=True)
    table, printed = _forecast(result, rows, tmp_path, capsys, "--model", "ols")
    assert printed.splitlines()[1:] == ["note: 1 series was not in the run's history: its intervals use the "
                                        "median scale of the others"]
    half = table.set_index("series").eval("empirical_high_95 - forecast")   # bound × scale, one horizon
    east, west = _seasonal_naive_mae(result, "East"), _seasonal_naive_mae(result, "West")
    assert half["Nowhere"] / half["East"] == pytest.approx(np.median([east, west]) / east, rel=1e-9)
    assert half["West"] / half["East"] == pytest.approx(west / east, rel=1e-9)


def test_a_row_at_or_before_the_last_month_of_history_gets_no_interval(runs, tmp_path, capsys):
    result = runs["demo"]
    data = pd.read_csv(result.spec.input.file)
    east = data[data["region"] == "East"]
    rows = pd.concat([east[east["month"] == "2026-10-01"].assign(**{TARGET: np.nan}),
                      east[east["month"] == "2026-11-01"]], ignore_index=True)
    table, printed = _forecast(result, rows, tmp_path, capsys, "--model", "ols")
    assert list(table["horizon"]) == [0, 1]
    assert table.loc[0, EMPIRICAL].isna().all() and table.loc[1, EMPIRICAL].notna().all()
    assert "note: 1 row is at or before the run's last month of history (2026-10): no interval" in printed


def test_printed_on_the_console_the_intervals_are_columns_too(runs, tmp_path, capsys):
    result = runs["demo"]
    path = tmp_path / "rows.csv"
    _future(result).to_csv(path, index=False)
    assert cli.main(["forecast", str(result.folder.path / "model.json"), str(path), "--model", "ols"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split() == ["period", "horizon", "series", "model", "forecast", *EMPIRICAL]
    assert len(lines) == 1 + len(_future(result)) and lines[1].split()[:4] == ["2026-11", "1", "East", "OLS"]


# ------------------------------------------------------------------ damaged intervals

HOSTILE = [None, True, -1, 1.5, "text", [], [1, "a"], {}, {"__float__": "nan"}, {"__float__": "-inf"},
           {"__array__": "x"}, {"__array__": [1, 2], "dtype": "int64"}, {"__period__": "not a month"},
           {"__dict__": {"East": -1.0}}]


def _interval_fields(document: dict):
    """Yield (where, the holder of a field in a copy of the document, the key) for every field
    of the intervals and of one model's bounds."""
    for key in document["intervals"]:
        yield f"intervals {key}", lambda d: d["intervals"], key
    for key in document["intervals"]["bounds"]["ols"]:
        yield f"bounds of ols {key}", lambda d: d["intervals"]["bounds"]["ols"], key


def _outcome(document: dict, rows: pd.DataFrame, path: Path) -> str:
    path.write_text(json.dumps(document), encoding="utf-8")
    try:
        stored = load_model(path)
    except ModelFileError as exc:
        assert "\n" not in str(exc) and str(path) in str(exc)
        return "refused"
    try:
        stored.forecast(rows)
    except UserError:
        return "refused at forecast"
    return "loaded"


def test_any_interval_field_damaged_missing_or_added_stops_with_a_model_file_error(runs, tmp_path):
    # Never another exception (an internal error, exit 1): each field set to a value of each
    # kind, removed, and a field added beside it.
    document = json.loads((runs["demo"].folder.path / "model.json").read_text(encoding="utf-8"))
    rows = _future(runs["demo"])
    path = tmp_path / "model.json"
    outcomes = {}
    for where, holder, key in _interval_fields(document):
        for value in HOSTILE:
            changed = copy.deepcopy(document)
            holder(changed)[key] = value
            outcomes[(where, repr(value))] = _outcome(changed, rows, path)
        removed = copy.deepcopy(document)
        del holder(removed)[key]
        assert _outcome(removed, rows, path) == "refused", where
        added = copy.deepcopy(document)
        holder(added)[key + "_extra"] = holder(added)[key]
        assert _outcome(added, rows, path) == "refused", where
    assert outcomes[("intervals floor", "None")] == "loaded"       # a target that may go below zero
    assert outcomes[("intervals bounds", "{}")] == "refused"
    assert outcomes[("bounds of ols bound", repr({"__array__": [1, 2], "dtype": "int64"}))] == "refused"


def test_a_file_of_version_2_with_intervals_is_refused(runs, tmp_path):
    # Version 3 added the intervals and nothing else: the same file marked version 2 holds a
    # field version 2 never had.
    document = json.loads((runs["demo"].folder.path / "model.json").read_text(encoding="utf-8"))
    document["format_version"] = 2
    path = tmp_path / "model.json"
    path.write_text(json.dumps(document), encoding="utf-8")
    with pytest.raises(ModelFileError, match="model.json: a model file of version 2 holds no intervals"):
        load_model(path)
    del document["intervals"], document["multi_step"]      # version 4 added the strategy
    path.write_text(json.dumps(document), encoding="utf-8")
    assert load_model(path).intervals is None
