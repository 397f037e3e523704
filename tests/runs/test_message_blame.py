"""Messages that blame the right thing (issue 22), through the command line in this process:

- ``castline forecast MODEL NEWDATA``: a problem in the new data names the new data file,
  its column and its row, never the file the model was fitted on;
- a scenario's ``where`` compares a value as its column holds it (2, 2.0 and "2" are one
  number), and one that matches no month to forecast names its key and the values there are;
- a spec number that is not finite is refused at its own key, and a term other than a lag
  with no number is not blamed on the lags;
- ``input.csv.missing_values``: a level ``NA``, ``None`` or ``null`` kept as a level gives the
  same run as the level renamed; without the key it reads as missing.

Plumbing tests on a small invented table (tiny_data in conftest, with invented columns
added here): no figure here is a reference value.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import run_cli, tiny_data, write_tiny_spec

import pipeline
from pipeline.core.columns import SERIES
from pipeline.core.errors import DataError
from pipeline.features.plan import plan_features

CUT = "2021-12"   # the last month with an actual; three months after it are forecast


def _data(level: str = "store") -> pd.DataFrame:
    """Two regions; promo, a whole number of promotion days; channel, a level that is
    ``level`` in most rows (so it is the reference), else web or shop."""
    frame = tiny_data(("East", "West"))
    rng = np.random.default_rng(11)
    frame["promo"] = np.arange(len(frame)) % 4
    frame["channel"] = rng.choice([level, level, "web", "shop"], len(frame))
    frame["y"] = frame["y"] + 3 * frame["promo"] + np.where(frame["channel"] == "web", 4.0, 0.0)
    return frame


def _spec(folder: Path, frame: pd.DataFrame, csv: dict | None = None, **keys) -> Path:
    keys = {"drivers": {"numeric": ["x", "promo"], "categorical": ["channel"]}, **keys}
    path = write_tiny_spec(folder, frame, actuals_to=CUT, **keys)
    if csv is not None:
        spec = yaml.safe_load(path.read_text(encoding="utf-8"))
        spec["input"]["csv"] = csv
        path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def _run_folder(spec: Path) -> Path:
    code, out, err = run_cli(["run", str(spec)])
    assert code == 0, err
    return Path(next(line.split(": ", 1)[1] for line in out.splitlines() if line.startswith("run folder:")))


def _one_problem(code: int, err: str) -> str:
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("castline: "), err
    return lines[0]


# ------------------------------------------------------------ forecast: the new data's file

@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """A run's model file, the file it was fitted on, and the rows of that file."""
    folder = tmp_path_factory.mktemp("blame_fitted")
    spec = _spec(folder, _data())
    model = _run_folder(spec) / "model.json"
    return model, folder / "data.csv", pd.read_csv(folder / "data.csv", keep_default_na=False)


def _last_to_forecast(frame: pd.DataFrame) -> int:
    return int(np.flatnonzero(frame["y"].astype(str) == "")[-1])


def _unseen_level(frame):
    at = _last_to_forecast(frame)
    frame.loc[at, "channel"] = "phone"
    return frame, "channel", at


def _text_in_a_number(frame):
    at = _last_to_forecast(frame)
    frame["x"] = frame["x"].astype(object)
    frame.loc[at, "x"] = "about 4"
    return frame, "x", at


def _empty_driver(frame):
    at = _last_to_forecast(frame)
    frame["x"] = frame["x"].astype(object)
    frame.loc[at, "x"] = ""
    return frame, "x", at


def _not_a_date(frame):
    at = 5
    frame.loc[at, "month"] = "sometime"
    return frame, "month", at


def _no_such_column(frame):
    return frame.drop(columns=["promo"]), "promo", None


def _nothing_to_forecast(frame):
    frame["y"] = frame["y"].replace("", "20")
    return frame, "y", None


NEW_DATA_PROBLEMS = [_unseen_level, _text_in_a_number, _empty_driver, _not_a_date, _no_such_column,
                     _nothing_to_forecast]


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
@pytest.mark.parametrize("problem", NEW_DATA_PROBLEMS, ids=lambda f: f.__name__.strip("_"))
def test_a_problem_in_the_new_data_names_the_new_file_column_and_row(fitted, tmp_path, problem, suffix):
    model, trained_on, rows = fitted
    frame, column, at = problem(rows.copy())
    new = tmp_path / f"new_rows{suffix}"
    if suffix == ".csv":
        frame.to_csv(new, index=False)
    else:
        frame.astype(str).to_parquet(new, index=False)
    line = _one_problem(*run_cli(["forecast", str(model), str(new)])[::2])
    # A CSV's row is its line (the header is line 1); a Parquet file's rows count from 1.
    place = str(new) if at is None else f"{new}:{at + (2 if suffix == '.csv' else 1)}"
    assert line.startswith(f"castline: {place}: column '{column}': "), line
    assert str(trained_on) not in line and str(trained_on.parent / 'runs') not in line


# ------------------------------------------------------------ scenarios: where

def _scenario_run(tmp_path: Path, where: dict) -> pd.DataFrame:
    spec = _spec(tmp_path, _data(), scenarios=[{"name": "dearer", "changes": [
        {"column": "x", "add": 1, "where": where}]}])
    return pd.read_csv(_run_folder(spec) / "scenarios.csv")


def _future(frame: pd.DataFrame) -> pd.DataFrame:
    months = pd.PeriodIndex(pd.to_datetime(frame["month"]), freq="M")
    cut = pd.Period(CUT, "M")
    ahead = (months > cut) & (months <= cut + 3)
    return frame[ahead].assign(period=months[ahead].astype(str))


@pytest.mark.parametrize("two", [2, 2.0, "2"], ids=["int", "float", "text"])
def test_a_where_on_a_whole_number_column_matches_2_however_it_is_written(tmp_path, two):
    table = _scenario_run(tmp_path, {"promo": two})
    ols = table[table["model"] == "ols"]
    changed = set(zip(ols.loc[ols["difference"].abs() > 1e-9, "period"],
                      ols.loc[ols["difference"].abs() > 1e-9, "series"]))
    future = _future(_data())
    wanted = set(zip(future.loc[future["promo"] == 2, "period"], future.loc[future["promo"] == 2, "region"]))
    assert wanted and changed == wanted


def test_a_where_on_the_date_column_matches_its_month(tmp_path):
    table = _scenario_run(tmp_path, {"month": "2022-02-01"})
    ols = table[table["model"] == "ols"]
    assert set(ols.loc[ols["difference"].abs() > 1e-9, "period"]) == {"2022-02"}


@pytest.mark.parametrize(("where", "key", "held"), [
    ({"promo": 7}, "where.promo", "0, 1, 2, 3"),
    ({"region": "North"}, "where.region", "East, West"),
    ({"month": "2030-01-01"}, "where.month", "2022-01, 2022-02, 2022-03"),
])
def test_a_where_that_matches_no_month_names_its_key_and_the_values_there_are(tmp_path, where, key, held):
    spec = _spec(tmp_path, _data(), scenarios=[{"name": "dearer", "changes": [
        {"column": "x", "add": 1, "where": where}]}])
    line = _one_problem(*run_cli(["run", str(spec)])[::2])
    assert line.startswith(f"castline: {spec}:"), line
    assert f"scenarios[0].changes[0].{key}: " in line and f"(they hold: {held})" in line, line


# ------------------------------------------------------------ numbers that are not finite

@pytest.mark.parametrize(("change", "key"), [
    (lambda s: s["drivers"].update(categorical=[{"column": "channel", "encoding": "target_mean",
                                                 "smoothing": float("inf")}]),
     "drivers.categorical[0].smoothing"),
    (lambda s: s.update(models=[{"kind": "ridge", "penalties": [1.0, float("nan")]}]), "models[0].penalties[1]"),
    (lambda s: s.update(models=[{"kind": "huber", "huber_threshold": float("inf")}]), "models[0].huber_threshold"),
    (lambda s: s["input"].update(max_megabytes=float("inf")), "input.max_megabytes"),
])
def test_a_spec_number_that_is_not_finite_is_refused_at_its_key(tmp_path, change, key):
    path = _spec(tmp_path, _data())
    spec = yaml.safe_load(path.read_text(encoding="utf-8"))
    change(spec)
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    line = _one_problem(*run_cli(["check", str(path)])[::2])
    assert f": {key}: " in line and "lag" not in line, line


@pytest.mark.parametrize("smoothing", [float("inf"), float("nan")])
def test_a_term_with_no_number_that_is_not_a_lag_is_named_not_blamed_on_the_lags(tmp_path, smoothing):
    # The spec refuses such a smoothing; set past it, as a stored or hand-made plan could be.
    spec = pipeline.load_spec(_spec(tmp_path, _data(), drivers={
        "numeric": ["x"], "categorical": [{"column": "channel", "encoding": "target_mean"}],
        "lags": [{"column": "y", "lags": [6]}]}))
    object.__setattr__(spec.drivers.categorical[0], "smoothing", smoothing)
    history = pipeline.check(spec).history
    plan = plan_features(spec, SERIES).fit(history)
    with pytest.raises(DataError) as caught:
        plan.training_design(history)
    assert "the term 'channel: " in caught.value.message and "'channel'" in caught.value.message
    assert "lag available" not in caught.value.message and "it is not a lag" in caught.value.message


# ------------------------------------------------------------ input.csv.missing_values

def _scores(folder: Path) -> tuple[dict, list]:
    models = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))["models"]
    coefficients = pd.read_csv(folder / "coefficients.csv")
    return ({m["model"]: m["mae"] for m in models},
            coefficients[["model", "estimate"]].to_numpy().tolist())


@pytest.mark.parametrize("level", ["NA", "None", "null"])
def test_a_level_kept_by_missing_values_runs_as_the_level_renamed(tmp_path, level):
    kept = _run_folder(_spec(tmp_path / "kept", _data(level), csv={"missing_values": [""]}))
    renamed = _run_folder(_spec(tmp_path / "renamed", _data("Na_level")))
    assert (tmp_path / "kept" / "data.csv").read_text(encoding="utf-8").count(f",{level}\n") > 10
    kept_mae, kept_coefficients = _scores(kept)
    renamed_mae, renamed_coefficients = _scores(renamed)
    assert set(kept_mae) == set(renamed_mae) and len(kept_coefficients) == len(renamed_coefficients)
    for model, mae in kept_mae.items():
        assert mae == pytest.approx(renamed_mae[model], rel=1e-12)
    for (model, estimate), (other, expected) in zip(kept_coefficients, renamed_coefficients):
        assert model == other and (estimate == pytest.approx(expected, rel=1e-9, abs=1e-12)
                                   or (np.isnan(estimate) and np.isnan(expected)))


@pytest.mark.parametrize("level", ["NA", "None", "null"])
def test_without_missing_values_the_level_reads_as_missing(tmp_path, level):
    line = _one_problem(*run_cli(["run", str(_spec(tmp_path, _data(level)))])[::2])
    # The message shows the text read as missing, and the key that keeps it.
    assert "column 'channel'" in line and f"'{level}', read as missing" in line, line
    assert "input.csv.missing_values" in line, line


def test_missing_values_lists_the_texts_that_read_as_missing(tmp_path):
    frame = _data("NA")
    frame["x"] = frame["x"].astype(object)
    frame.loc[3, "x"] = "-"
    line = _one_problem(*run_cli(["run", str(_spec(tmp_path, frame, csv={"missing_values": ["-", ""]}))])[::2])
    assert "column 'x'" in line and ("missing" in line or "no value" in line), line


@pytest.mark.parametrize("name", ["NA", "None"])
def test_a_series_named_na_keeps_its_name_in_the_pages(tmp_path, name):
    frame = _data()
    frame["region"] = frame["region"].replace("East", name)
    folder = _run_folder(_spec(tmp_path, frame, csv={"missing_values": [""]}))
    forecast = pd.read_csv(folder / "forecast.csv", keep_default_na=False)
    assert set(forecast["series"]) == {name, "West"}
    # The pages are rendered from the run folder's files read back (present/run_files.py).
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert f"series {name}:" in page and "series nan" not in page


@pytest.mark.parametrize("level", ["NA", "None"])
def test_init_says_which_column_holds_a_text_read_as_missing(tmp_path, level):
    data = tmp_path / "data.csv"
    _data(level).to_csv(data, index=False)
    code, out, err = run_cli(["init", str(data), "--spec-file", str(tmp_path / "spec.yaml")])
    assert code == 0, err
    assert f"note: column 'channel' holds '{level}' in " in out and "missing_values" in out, out


def test_init_says_nothing_of_missing_texts_where_there_are_none(tmp_path):
    data = tmp_path / "data.csv"
    _data().to_csv(data, index=False)
    code, out, err = run_cli(["init", str(data), "--spec-file", str(tmp_path / "spec.yaml")])
    assert code == 0 and "channel" in (tmp_path / "spec.yaml").read_text(encoding="utf-8"), err
    assert "missing_values" not in out, out


def test_forecast_reads_the_new_data_with_the_runs_missing_values(tmp_path):
    spec = _spec(tmp_path, _data("NA"), csv={"missing_values": [""]})
    folder = _run_folder(spec)
    written = tmp_path / "again.csv"
    code, _, err = run_cli(["forecast", str(folder / "model.json"), str(tmp_path / "data.csv"),
                            "--output", str(written)])
    assert code == 0, err
    # The run's own forecasts again: the level NA read as a level, as the run read it.
    again = pd.read_csv(written).query("model == 'ols'").sort_values(["period", "series"])
    stored = pd.read_csv(folder / "forecast.csv").query("model == 'ols'").sort_values(["period", "series"])
    assert len(again) == len(stored) == 6
    np.testing.assert_allclose(again["forecast"].to_numpy(), stored["forecast"].to_numpy(), rtol=1e-9)
