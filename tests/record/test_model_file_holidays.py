"""Model files holding moving holidays and dated events (HolidayShares, EventCounts).

The reference for each forecast is the forecast.csv the run itself wrote when it wrote
the model file (tests/data/model_files_v4/holidays/; its README says how).
"""

from __future__ import annotations

import copy
import json

import pandas as pd
import pytest
from test_model_file import V4, _each_field, _load_and_forecast, damaged_outcomes, forecast_as_its_run

from pipeline.features.holidays import EventCounts, HolidayShares
from pipeline.features.plan import PART_CLASSES

FOLDER = V4 / "holidays"
OURS = {"HolidayShares", "EventCounts"}


def _document() -> dict:
    return json.loads((FOLDER / "model.json").read_text(encoding="utf-8"))


@pytest.mark.parametrize("rows", ["rows.csv", "data.csv"])
def test_the_holidays_model_file_forecasts_what_its_run_wrote(rows, tmp_path):
    merged = forecast_as_its_run(FOLDER, rows, tmp_path)
    assert len(merged) == 2 * 4 * 7     # two regions, four months, seven models


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
    outcomes = damaged_outcomes(document, fields, rows, path)
    assert outcomes[("part 3 (HolidayShares) names", "'text'")] == "refused"
    # A holiday castline does not know, and a period that is none, are refused on loading.
    for key, value in [("names", ["midsummer"]), ("period_", "fortnight"), ("absent_", ["easter2"])]:
        changed = copy.deepcopy(document)
        part = next(p for p in changed["plan"]["parts"] if p["class"] == "HolidayShares")
        part["state"][key] = value
        assert _load_and_forecast(changed, rows, path) == "refused", key
