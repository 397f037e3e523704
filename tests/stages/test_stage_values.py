"""Each stage leaves the values of the stages before it as they were.

A stage returns a new value; it never changes the one it was given. Each test
takes a deep copy of an earlier stage's tables before the stage runs and
compares them afterwards with pandas.testing.assert_frame_equal (values, dtypes,
index and column order). The demo data is used for plumbing only: it has dates
written as text and whole numbers read as integers, which the check turns into
dates and floats in its own, typed, copy. There are no reference values here.
"""

from __future__ import annotations

from datetime import date
from pathlib import Path

import pandas as pd
import pytest
import yaml
from conftest import DEMO_DATA, ROOT
from pandas.testing import assert_frame_equal

from pipeline.spec import load_spec
from pipeline.stages.backtest import run_backtest
from pipeline.stages.check import CheckFailed, check_data
from pipeline.stages.evaluate import evaluate
from pipeline.stages.forecast import make_forecast
from pipeline.stages.ingest import read_input

TODAY = date(2030, 1, 1)   # after every month of the demo data


def _spec(folder: Path, data_file: Path = DEMO_DATA, **changes):
    spec = yaml.safe_load((ROOT / "configs" / "compost_demo.yaml").read_text(encoding="utf-8"))
    spec["input"]["file"] = str(data_file)
    spec["output"] = {"folder": str(folder / "reports")}
    spec.update(changes)
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return load_spec(path)


def test_check_leaves_the_raw_frame_as_read(tmp_path):
    spec = _spec(tmp_path)
    raw = read_input(spec)
    # The file has what the check coerces: dates as text, whole numbers as integers.
    assert not pd.api.types.is_datetime64_any_dtype(raw.frame["month"])
    assert pd.api.types.is_integer_dtype(raw.frame["promo_days"])
    before = raw.frame.copy(deep=True)
    data = check_data(spec, raw, today=TODAY)
    assert_frame_equal(raw.frame, before)
    assert data.raw is raw
    # The checked rows are typed all the same.
    assert pd.api.types.is_datetime64_any_dtype(data.history["month"])
    assert pd.api.types.is_float_dtype(data.history["promo_days"])


def test_check_leaves_the_raw_frame_as_read_when_it_fails(tmp_path):
    frame = pd.read_csv(DEMO_DATA)
    frame["promo_days"] = frame["promo_days"].astype(object)
    frame.loc[5, "promo_days"] = "lots"          # not a number
    broken = tmp_path / "broken.csv"
    frame.to_csv(broken, index=False)
    spec = _spec(tmp_path, broken)
    raw = read_input(spec)
    before = raw.frame.copy(deep=True)
    with pytest.raises(CheckFailed) as failed:
        check_data(spec, raw, today=TODAY)
    assert any(p.column == "promo_days" and p.row == 7 for p in failed.value.problems)
    assert_frame_equal(raw.frame, before)


SPECS = {
    # A holdout with the plain demo features, a model per series and a scenario.
    "holdout": {"models": ["ols", {"kind": "ols", "per_series": True}, "ridge", "seasonal_naive"],
                "scenarios": [{"name": "cheaper",
                               "changes": [{"column": "shelf_price", "percent": -10}]}]},
    # A log target and a one-month lag of it, predicted ahead recursively at rolling origins.
    "recursive": {"target_transform": "log", "multi_step": "recursive",
                  "drivers": {"numeric": ["shelf_price", "promo_days"],
                              "lags": [{"column": "bags_sold", "lags": [1]}]},
                  "validation": {"method": "rolling_origin", "horizon": 3, "min_train_periods": 36,
                                 "step": 6},
                  "models": ["ols", "drift"]},
}


@pytest.mark.parametrize("name", sorted(SPECS))
def test_backtest_evaluate_and_forecast_leave_earlier_values_as_they_were(tmp_path, name):
    spec = _spec(tmp_path, **SPECS[name])
    data = check_data(spec, read_input(spec), today=TODAY)
    history, future = data.history.copy(deep=True), data.future.copy(deep=True)
    backtest = run_backtest(spec, data)
    assert_frame_equal(data.history, history)
    assert_frame_equal(data.future, future)
    predictions = backtest.predictions.copy(deep=True)
    notes = list(backtest.notes)
    evaluate(spec, backtest)
    assert_frame_equal(backtest.predictions, predictions)
    assert backtest.notes == notes
    make_forecast(spec, data, backtest)
    assert_frame_equal(data.history, history)
    assert_frame_equal(data.future, future)
    assert_frame_equal(backtest.predictions, predictions)
