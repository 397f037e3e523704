"""pipeline/record/model_file.py: model files written by earlier versions keep loading.

The reference for each forecast is the forecast.csv the run itself wrote when it wrote
the model file (tests/data/model_files_v1/, made by castline 0.1.0, and model_files_v2/
and model_files_v3/; their READMEs say how).
"""

from __future__ import annotations

import copy
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import TEST_DATA, run_cli

from pipeline import cli
from pipeline.core.errors import ModelFileError, UserError
from pipeline.features.plan import PART_CLASSES, FeaturePlan
from pipeline.features.target import TargetTransform
from pipeline.models.per_series import PerSeriesOLS
from pipeline.record import model_file
from pipeline.record.model_file import load_model

V1 = TEST_DATA / "model_files_v1"
FIXTURES = ["demo", "wide", "calendar"]


def _keyed(table: pd.DataFrame) -> pd.Series:
    return table.set_index(["period", "series", "model"])["forecast"].sort_index()


def _assert_same_forecasts(written: Path, folder: Path) -> None:
    mine = _keyed(pd.read_csv(written))
    theirs = _keyed(pd.read_csv(folder / "forecast.csv"))      # what the run wrote at the time
    assert list(mine.index) == list(theirs.index)
    np.testing.assert_allclose(mine.to_numpy(), theirs.to_numpy(), rtol=1e-9, atol=0)


V2 = TEST_DATA / "model_files_v2"


# Version 2's `estimated` leaves the estimated drivers empty in its months to forecast: the
# stored estimates fill them. `references` holds the calendar-month and trailing means.
# Files of versions 1 and 2 predate the intervals (version 3): they forecast without them,
# and say so in one line.
@pytest.mark.parametrize("folder", [V1 / name for name in FIXTURES] + [V2 / "estimated", V2 / "references"],
                         ids=[*FIXTURES, "v2-estimated", "v2-references"])
def test_a_model_file_forecasts_what_its_run_wrote(folder, tmp_path, capsys):
    output = tmp_path / "forecast.csv"
    code = cli.main(["forecast", str(folder / "model.json"), str(folder / "rows.csv"),
                     "--output", str(output)])
    printed = capsys.readouterr()
    assert code == 0, printed.err
    _assert_same_forecasts(output, folder)
    assert printed.out.splitlines() == [f"forecasts written to {output}",
                                        "note: this model file predates intervals: no intervals given"]
    assert list(pd.read_csv(output).columns) == ["period", "series", "model", "forecast"]
    assert load_model(folder / "model.json").intervals is None


V3 = TEST_DATA / "model_files_v3"
EMPIRICAL = ["empirical_low_80", "empirical_high_80", "empirical_low_95", "empirical_high_95"]


def test_a_version_3_model_file_forecasts_what_its_run_wrote_intervals_included(tmp_path, capsys):
    folder = V3 / "demo-log"
    output = tmp_path / "forecast.csv"
    code = cli.main(["forecast", str(folder / "model.json"), str(folder / "rows.csv"),
                     "--output", str(output)])
    printed = capsys.readouterr()
    assert code == 0, printed.err
    assert printed.out.splitlines() == [f"forecasts written to {output}"]
    _assert_same_forecasts(output, folder)
    mine = pd.read_csv(output)
    assert list(mine.columns) == ["period", "horizon", "series", "model", "forecast", *EMPIRICAL]
    theirs = pd.read_csv(folder / "forecast.csv")      # what the run wrote at the time
    merged = mine.merge(theirs, on=["period", "series", "model"], validate="one_to_one", suffixes=("", "_run"))
    assert len(merged) == len(theirs)
    for column in ["horizon", *EMPIRICAL]:
        np.testing.assert_allclose(merged[column], merged[f"{column}_run"], rtol=1e-9, atol=0, err_msg=column)


V4 = TEST_DATA / "model_files_v4"


# Version 4 added the run's multi_step strategy: a target lag of one month, four months
# forecast. The data file may be the months to forecast alone (the lags read the history
# the model file kept) or the run's whole input (the lags read its actuals).
@pytest.mark.parametrize("rows", ["rows.csv", "data.csv"])
@pytest.mark.parametrize("strategy", ["direct", "recursive"])
def test_a_version_4_model_file_forecasts_what_its_run_wrote_by_its_strategy(strategy, rows, tmp_path, capsys):
    folder = V4 / strategy
    output = tmp_path / "forecast.csv"
    code = cli.main(["forecast", str(folder / "model.json"), str(folder / rows), "--output", str(output)])
    printed = capsys.readouterr()
    assert code == 0, printed.err
    assert printed.out.splitlines() == [f"forecasts written to {output}"]
    _assert_same_forecasts(output, folder)
    mine = pd.read_csv(output)
    theirs = pd.read_csv(folder / "forecast.csv")      # what the run wrote at the time
    merged = mine.merge(theirs, on=["period", "series", "model"], validate="one_to_one", suffixes=("", "_run"))
    assert len(merged) == len(theirs) == 2 * 4 * 7     # two regions, four months, seven models
    for column in ["horizon", *EMPIRICAL]:
        np.testing.assert_allclose(merged[column], merged[f"{column}_run"], rtol=1e-9, atol=0, err_msg=column)
    document = json.loads((folder / "model.json").read_text(encoding="utf-8"))
    assert document["multi_step"]["strategy"] == strategy
    assert [fit["horizon"] for fit in document["multi_step"]["horizons"]] == (
        [2, 3, 4] if strategy == "direct" else [])


def test_a_version_3_files_intervals_read_and_written_again_are_the_same_json():
    document = json.loads((V3 / "demo-log" / "model.json").read_text(encoding="utf-8"))
    stored = model_file.StoredIntervals.from_dict(document["intervals"], list(document["models"]), 3)
    assert json.dumps(stored.to_dict()) == json.dumps(document["intervals"])


def test_a_version_1_model_file_forecasts_through_the_command_in_a_subprocess(tmp_path):
    folder = V1 / "wide"
    output = tmp_path / "forecast.csv"
    done = subprocess.run([sys.executable, "-m", "pipeline", "forecast", str(folder / "model.json"),
                           str(folder / "rows.csv"), "--output", str(output)],
                          capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PYTHONWARNINGS": "ignore"})
    assert done.returncode == 0, done.stderr
    _assert_same_forecasts(output, folder)


# ------------------------------------------------------------------ the fields of each part

def _document(name: str) -> dict:
    return json.loads((V1 / name / "model.json").read_text(encoding="utf-8"))


def _as_version_1(plan: dict) -> dict:
    """Return a plan's stored form without the fields version 2 added: the plan's estimates
    of drivers nobody knows ahead (``future_``) and each numeric driver's ``future`` rule
    (None in a file of version 1, whose drivers were all given)."""
    plan = copy.deepcopy(plan)
    state = plan["state"]
    assert state.pop("future_") is None
    for driver in state["numeric"]:
        assert driver["__settings__"].pop("future") is None
    for lagged in state["lags"]:
        assert lagged["__settings__"].pop("future") is None
    return plan


@pytest.mark.parametrize("name", FIXTURES)
def test_a_version_1_file_read_and_written_again_is_the_same_json(name):
    # Each part's to_dict writes exactly the fields (names, order, tags) castline 0.1.0 wrote,
    # besides those version 2 added.
    document = _document(name)
    plan = FeaturePlan.from_dict(document["plan"], version=1)
    assert _as_version_1(plan.to_dict()) == document["plan"]
    # the order of the keys too
    assert json.dumps(_as_version_1(plan.to_dict())) == json.dumps(document["plan"])
    for kind, entry in document["models"].items():
        stored = model_file._model_from_dict(kind, entry, document["feature_names"], 1)
        again = ({"kind": "baseline", "class": type(stored).__name__, "state": stored.to_dict()}
                 if entry["kind"] == "baseline" else {"kind": entry["kind"], **stored.to_dict()})
        assert json.dumps(again) == json.dumps(entry), kind


def test_the_fixtures_hold_every_kind_of_stored_part():
    # A new stored class needs a model file holding it among the fixtures (of the version
    # that brought it: tests/data/model_files_v<N>/), or nothing checks it keeps loading.
    documents = [json.loads(path.read_text(encoding="utf-8"))
                 for path in V1.parent.glob("model_files_v*/*/model.json")]
    held = {part["class"] for document in documents for part in document["plan"]["parts"]}
    baselines = {entry["class"] for document in documents for entry in document["models"].values()
                 if entry["kind"] == "baseline"}
    kinds = {entry["kind"] for document in documents for entry in document["models"].values()}
    assert held == set(PART_CLASSES)
    assert baselines == set(model_file.BASELINES)
    assert kinds == {"linear", "linear_per_series", "baseline"}


@pytest.mark.parametrize("cls", [*PART_CLASSES.values(), *model_file.BASELINES.values(), PerSeriesOLS,
                                 TargetTransform])
def test_each_stored_class_reads_the_fields_it_writes_itself(cls):
    # A subclass that writes fields of its own must read them too (SeriesTerms, not OneHotEncoder's).
    def owner(method: str) -> type:
        return next(base for base in cls.__mro__ if method in vars(base))
    assert owner("to_dict") is owner("from_dict"), cls


HOSTILE = [None, True, -1, 1.5, "text", [], [1, "a"], {}, {"__part__": 0}, {"__array__": "x"},
           {"__float__": "nan"}, {"__series__": {}}, {"__period__": "not a month"}, {"__tuple__": 3}]


def _label(entry: dict) -> str:
    return entry.get("class", entry.get("kind"))


def _each_field(document: dict, skip: set[str] = frozenset()):
    """Yield (where, the holder of a field in a copy of the document, the field's key) for every
    field of every stored part and model, and of the plan, but those of the classes in skip."""
    for place, part in enumerate(document["plan"]["parts"]):
        if part["class"] not in skip:
            for key in part["state"]:
                yield (f"part {place} ({part['class']}) {key}",
                       lambda d, p=place: d["plan"]["parts"][p]["state"], key)
    if "FeaturePlan" not in skip:
        for key in document["plan"]["state"]:
            yield f"plan {key}", lambda d: d["plan"]["state"], key
    for kind, entry in document["models"].items():
        if _label(entry) in skip:
            continue
        baseline = entry["kind"] == "baseline"
        for key in (entry["state"] if baseline else entry):
            if key != "kind":
                yield (f"model {kind} {key}",
                       lambda d, m=kind, b=baseline: d["models"][m]["state"] if b else d["models"][m], key)


def _classes(name: str) -> set[str]:
    document = _document(name)
    return ({part["class"] for part in document["plan"]["parts"]} | {"FeaturePlan"}
            | {_label(entry) for entry in document["models"].values()})


def _load_and_forecast(document: dict, rows: pd.DataFrame, path: Path):
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


@pytest.mark.filterwarnings("ignore:overflow encountered:RuntimeWarning")
@pytest.mark.parametrize("name", ["demo", "calendar", "wide"])
def test_any_field_damaged_missing_or_added_stops_with_a_model_file_error_or_still_forecasts(
        name, tmp_path):
    # Never another exception (an internal error, exit 1): each field of each part, set to a
    # value of each kind, removed, and a field added. The wide file (large, for its window of
    # lagged values) only for the classes the other two lack.
    skip = _classes("demo") | _classes("calendar") if name == "wide" else set()
    document = _document(name)
    rows = pd.read_csv(V1 / name / "rows.csv")
    path = tmp_path / "model.json"
    outcomes = damaged_outcomes(document, _each_field(document, skip), rows, path)
    assert "refused" in outcomes.values()


def damaged_outcomes(document: dict, fields, rows: pd.DataFrame, path) -> dict:
    """Return what loading and forecasting gives with each field (where, holder, key) set to a
    value of each kind and removed, by (where, the value written); a removed field, or one
    added beside it, must be refused."""
    outcomes = {}
    for where, holder, key in fields:
        for value in [*HOSTILE, "REMOVE"]:
            changed = copy.deepcopy(document)
            if value == "REMOVE":
                del holder(changed)[key]
            else:
                holder(changed)[key] = value
            outcomes[(where, repr(value))] = _load_and_forecast(changed, rows, path)
        assert outcomes[(where, "'REMOVE'")] == "refused", where
        added = copy.deepcopy(document)
        holder(added)[key + "_extra"] = holder(added)[key]
        assert _load_and_forecast(added, rows, path) == "refused", where
    return outcomes


def forecast_as_its_run(folder, rows: str, tmp_path) -> pd.DataFrame:
    """Forecast a fixture folder's rows from its model file; check the forecasts equal what its
    run wrote (forecast.csv, to 1e-9, empirical bounds too) and return them beside the run's."""
    output = tmp_path / "forecast.csv"
    code, _, err = run_cli(["forecast", str(folder / "model.json"), str(folder / rows), "--output", str(output)])
    assert code == 0, err
    _assert_same_forecasts(output, folder)
    theirs = pd.read_csv(folder / "forecast.csv")      # what the run wrote at the time
    merged = pd.read_csv(output).merge(theirs, on=["period", "series", "model"], validate="one_to_one",
                                       suffixes=("", "_run"))
    assert len(merged) == len(theirs)
    for column in EMPIRICAL:
        np.testing.assert_allclose(merged[column], merged[f"{column}_run"], rtol=1e-9, atol=0, err_msg=column)
    return merged


def _step_fields(document: dict):
    """Yield (where, the holder of a field in a copy of the document, the key) for every field
    of the multi-step strategy, of its first fit and of that fit's OLS model."""
    for key in document["multi_step"]:
        yield f"multi_step {key}", lambda d: d["multi_step"], key
    for key in document["multi_step"]["horizons"][0]:
        yield f"the first fit's {key}", lambda d: d["multi_step"]["horizons"][0], key
    for key in document["multi_step"]["horizons"][0]["models"]["ols"]:
        yield f"the first fit's ols {key}", lambda d: d["multi_step"]["horizons"][0]["models"]["ols"], key


@pytest.mark.filterwarnings("ignore:overflow encountered:RuntimeWarning")
def test_any_field_of_the_multi_step_strategy_damaged_missing_or_added_is_refused(tmp_path):
    # Never another exception (an internal error, exit 1): each field set to a value of each
    # kind, removed, and a field added beside it.
    document = json.loads((V4 / "direct" / "model.json").read_text(encoding="utf-8"))
    rows = pd.read_csv(V4 / "direct" / "rows.csv")
    path = tmp_path / "model.json"
    outcomes = {}
    for where, holder, key in _step_fields(document):
        for value in HOSTILE:
            changed = copy.deepcopy(document)
            holder(changed)[key] = value
            outcomes[(where, repr(value))] = _load_and_forecast(changed, rows, path)
        removed = copy.deepcopy(document)
        del holder(removed)[key]
        assert _load_and_forecast(removed, rows, path) == "refused", where
        added = copy.deepcopy(document)
        holder(added)[key + "_extra"] = holder(added)[key]
        assert _load_and_forecast(added, rows, path) == "refused", where
    assert outcomes[("multi_step strategy", "'text'")] == "refused"
    assert outcomes[("the first fit's horizon", "-1")] == "refused"
    # A fit given twice, or for a model the file does not hold, or the strategy missing.
    twice = copy.deepcopy(document)
    twice["multi_step"]["horizons"].append(twice["multi_step"]["horizons"][0])
    stranger = copy.deepcopy(document)
    fit = stranger["multi_step"]["horizons"][0]
    fit["models"]["lasso"] = fit["models"]["ols"]
    missing = copy.deepcopy(document)
    del missing["multi_step"]
    for changed in (twice, stranger, missing):
        assert _load_and_forecast(changed, rows, path) == "refused"
