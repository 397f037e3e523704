"""Model files holding moving holidays and dated events (HolidayShares, EventCounts).

The reference for each forecast is the forecast.csv the run itself wrote when it wrote
the model file (tests/data/model_files_v4/holidays/; its README says how).
"""

from __future__ import annotations

import copy
import json

import numpy as np
import pandas as pd
import pytest
from test_model_file import EMPIRICAL, HOSTILE, V4, _assert_same_forecasts, _each_field, _load_and_forecast

from pipeline import cli
from pipeline.features.holidays import EventCounts, HolidayShares
from pipeline.features.plan import PART_CLASSES

FOLDER = V4 / "holidays"
OURS = {"HolidayShares", "EventCounts"}


def _document() -> dict:
    return json.loads((FOLDER / "model.json").read_text(encoding="utf-8"))


@pytest.mark.parametrize("rows", ["rows.csv", "data.csv"])
def test_the_holidays_model_file_forecasts_what_its_run_wrote(rows, tmp_path, capsys):
    output = tmp_path / "forecast.csv"
    code = cli.main(["forecast", str(FOLDER / "model.json"), str(FOLDER / rows), "--output", str(output)])
    printed = capsys.readouterr()
    assert code == 0, printed.err
    _assert_same_forecasts(output, FOLDER)
    mine = pd.read_csv(output)
    theirs = pd.read_csv(FOLDER / "forecast.csv")      # what the run wrote at the time
    merged = mine.merge(theirs, on=["period", "series", "model"], validate="one_to_one", suffixes=("", "_run"))
    assert len(merged) == len(theirs) == 2 * 4 * 7     # two regions, four months, seven models
    for column in EMPIRICAL:
        np.testing.assert_allclose(merged[column], merged[f"{column}_run"], rtol=1e-9, atol=0, err_msg=column)


def test_the_holiday_parts_read_and_written_again_are_the_same_json():
    stored = {part["class"]: part["state"] for part in _document()["plan"]["parts"] if part["class"] in OURS}
    assert set(stored) == OURS
    for name, state in stored.items():
        part = PART_CLASSES[name].from_dict(state, [], 4)
        assert json.dumps(part.to_dict()) == json.dumps(state), name
    holidays = HolidayShares.from_dict(stored["HolidayShares"], [], 4)
    assert holidays.get_feature_names_out() == ["share of Easter in the month", "Mothering Sunday in the month"]
    events = EventCounts.from_dict(stored["EventCounts"], [], 4)
    assert events.get_feature_names_out() == ["clearance dates in the month"]
    assert len(events.events["clearance"]) == 6


@pytest.mark.filterwarnings("ignore:overflow encountered:RuntimeWarning")
def test_any_field_of_the_holiday_parts_damaged_missing_or_added_stops_with_a_model_file_error(tmp_path):
    # Never another exception (an internal error, exit 1): each field of the two parts set to
    # a value of each kind, removed, and a field added beside it.
    document = _document()
    skip = ({part["class"] for part in document["plan"]["parts"]} - OURS) | {"FeaturePlan"} | {
        entry.get("class", entry.get("kind")) for entry in document["models"].values()}
    rows = pd.read_csv(FOLDER / "rows.csv")
    path = tmp_path / "model.json"
    fields = list(_each_field(document, skip))
    assert len(fields) == 8                                # four fields in each of the two parts
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
    assert outcomes[("part 3 (HolidayShares) names", "'text'")] == "refused"
    # A holiday castline does not know, and a period that is none, are refused on loading.
    for key, value in [("names", ["midsummer"]), ("period_", "fortnight"), ("absent_", ["easter2"])]:
        changed = copy.deepcopy(document)
        part = next(p for p in changed["plan"]["parts"] if p["class"] == "HolidayShares")
        part["state"][key] = value
        assert _load_and_forecast(changed, rows, path) == "refused", key
