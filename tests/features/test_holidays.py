"""Moving holidays and dated events as terms of the plan (pipeline.features.holidays).

Every reference value names its source beside it: a hand count from the calendar of
the year, worked in the comment. The data are simulated (tests/features/test_plan.py's
make_panel, and a weekly panel made here); they are not reference values themselves.
"""

from __future__ import annotations

import json
from datetime import date

import numpy as np
import pandas as pd
import pytest
from conftest import SHIPPED_DEMO_DATA, SHIPPED_DEMO_SPEC, run_cli
from test_plan import fitted_plan, make_panel

from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.errors import DataError
from pipeline.features.plan import FeaturePlan
from pipeline.models import make_model

CALENDAR = {"holidays": ["easter", "good_friday"],
            "events": {"stocktake": ["2023-03-31", "2024-03-28", "2024-09-30"]}}


def make_weekly_panel(weeks: int = 30, first: str = "2024-01-01", regions=("East", "West")) -> pd.DataFrame:
    """Return rows of ISO weeks as the check stage hands them on: one per region and week."""
    rng = np.random.default_rng(5)
    periods = pd.period_range(first, periods=weeks, freq="W-SUN")
    frame = pd.DataFrame([{"month": period.start_time, "region": region,
                           "sales": float(rng.normal(100, 5))}
                          for region in regions for period in periods])
    frame[PERIOD] = frame["month"].dt.to_period("W-SUN")
    frame[SERIES] = frame["region"]
    frame[ROW] = np.arange(len(frame)) + 2
    return frame


def _by_period(table: pd.DataFrame, frame: pd.DataFrame, column: str, label) -> dict[str, float]:
    """Return a column's nonzero values of the first series, by period label."""
    first = (frame[SERIES] == frame[SERIES].iloc[0]).to_numpy()
    values = table.loc[first, column].to_numpy()
    periods = frame.loc[first, PERIOD]
    return {label(period): value for period, value in zip(periods, values, strict=True) if value}


def test_holidays_and_events_by_month_through_the_plan():
    frame = make_panel(months=24, start="2023-01")
    plan = fitted_plan({"calendar": CALENDAR}, frame)
    table = plan.feature_table(frame)
    assert table.columns.tolist() == ["share of Easter in the month", "Good Friday in the month",
                                      "stocktake dates in the month"]
    # By hand: Easter Sunday 2023 is 9 April (Good Friday 7 to Easter Monday 10 April, all in
    # April); 2024, 31 March (Good Friday 29 March to Easter Monday 1 April: 3 days of 4 in March).
    assert _by_period(table, frame, "share of Easter in the month", str) == {
        "2023-04": 1.0, "2024-03": 0.75, "2024-04": 0.25}
    assert _by_period(table, frame, "Good Friday in the month", str) == {"2023-04": 1.0, "2024-03": 1.0}
    # By hand: one stocktake date in each of March 2023, March 2024 and September 2024.
    assert _by_period(table, frame, "stocktake dates in the month", str) == {
        "2023-03": 1.0, "2024-03": 1.0, "2024-09": 1.0}
    design, _ = plan.training_design(frame)
    # Each term its own group for the generalised VIF.
    assert list(design.term_groups) == table.columns.tolist()


def test_holidays_and_events_by_iso_week_through_the_plan():
    frame = make_weekly_panel()
    plan = fitted_plan({"calendar": CALENDAR}, frame)
    table = plan.feature_table(frame)
    assert table.columns.tolist() == ["share of Easter in the week", "Good Friday in the week",
                                      "stocktake dates in the week"]
    label = "{0.start_time:%G-W%V}".format    # the ISO year and week of the week's Monday
    # By hand: ISO week 13 of 2024 is Monday 25 to Sunday 31 March, so it holds Good Friday,
    # Saturday and Easter Sunday; Easter Monday, 1 April, opens week 14. Thursday 28 March
    # 2024, the stocktake, is in week 13 too.
    assert _by_period(table, frame, "share of Easter in the week", label) == {
        "2024-W13": 0.75, "2024-W14": 0.25}
    assert _by_period(table, frame, "Good Friday in the week", label) == {"2024-W13": 1.0}
    assert _by_period(table, frame, "stocktake dates in the week", label) == {"2024-W13": 1.0}


def test_a_holiday_the_training_window_lacks_is_left_out_of_the_fit_and_refused_ahead():
    # May 2023 to February 2024 holds no Easter (9 April 2023, 31 March 2024): its column is
    # all zero there, the fit leaves it out and says so, and March 2024 cannot be predicted.
    frame = make_panel(months=14, start="2023-05")
    window = frame[frame[PERIOD] <= pd.Period("2024-02", "M")]
    plan = fitted_plan({"calendar": {"trend": True, "holidays": ["easter"]}}, window)
    design, y = plan.training_design(window)
    fit = make_model("ols").fit(design, y).fit_
    assert [dropped.describe() for dropped in fit.dropped] == [
        "'share of Easter in the month' is all zeros after encoding; left out of the fit"]
    with pytest.raises(DataError) as refused:
        plan.transform(frame[frame[PERIOD] >= pd.Period("2024-03", "M")])
    assert ("the holiday 'easter' falls in 2024-03 but in no month of the training window "
            "(2023-05 to 2024-02), so it has no coefficient") in str(refused.value)
    # The rows of the window itself still transform: their column is all zero.
    assert not plan.transform(window).matrix[:, 1].any()


def test_an_event_the_training_window_lacks_is_refused_ahead():
    frame = make_weekly_panel(weeks=20)
    plan = fitted_plan({"calendar": {"events": {"launch": [date(2024, 5, 1)]}}}, frame.iloc[:10])
    with pytest.raises(DataError) as refused:
        plan.transform(frame)
    # By hand: Wednesday 1 May 2024 is in ISO week 18 (Monday 29 April to Sunday 5 May); the
    # window is the first ten weeks of East.
    assert ("the event 'launch' has a date in 2024-W18 but in no week of the training window "
            "(2024-W01 to 2024-W10)") in str(refused.value)


def test_the_plan_with_holidays_and_events_read_back_from_its_stored_form():
    frame = make_panel(months=24, start="2023-01")
    plan = fitted_plan({"calendar": CALENDAR}, frame)
    stored = json.loads(json.dumps(plan.to_dict()))
    again = FeaturePlan.from_dict(stored)
    assert again.get_feature_names_out() == plan.get_feature_names_out()
    np.testing.assert_array_equal(again.feature_table(frame).to_numpy(), plan.feature_table(frame).to_numpy())
    # Stored as named: the holidays' names, the events' dates.
    states = {part["class"]: part["state"] for part in stored["parts"]}
    assert states["HolidayShares"]["names"] == ["easter", "good_friday"]
    assert states["EventCounts"]["events"]["__dict__"]["stocktake"][2] == {"__date__": "2024-09-30"}


def test_a_whole_run_on_the_demo_data_with_easter(tmp_path):
    spec = SHIPPED_DEMO_SPEC.read_text(encoding="utf-8")
    for old, new in [("../data_samples/compost_sales.csv", str(SHIPPED_DEMO_DATA)),
                     ("    harmonics: 2\n", "    harmonics: 2\n    holidays: [easter]\n"),
                     ("folder: ../reports", f"folder: {tmp_path / 'reports'}")]:
        assert old in spec
        spec = spec.replace(old, new)
    path = tmp_path / "spec.yaml"
    path.write_text(spec, encoding="utf-8")
    code, out, err = run_cli(["run", str(path)])
    assert code == 0, err
    [folder] = (tmp_path / "reports").glob("run-*")
    coefficients = pd.read_csv(folder / "coefficients.csv")
    easter = coefficients[coefficients["term"] == "share of Easter in the month"]
    assert len(easter) == 1 and np.isfinite(easter["estimate"]).all()
    code, out, err = run_cli(["forecast", str(folder / "model.json"), str(SHIPPED_DEMO_DATA),
                              "--output", str(tmp_path / "again.csv")])
    assert code == 0, err
    keys = ["period", "series", "model"]
    mine = pd.read_csv(tmp_path / "again.csv").set_index(keys).sort_index()["forecast"]
    theirs = pd.read_csv(folder / "forecast.csv").set_index(keys).sort_index()["forecast"]
    assert list(mine.index) == list(theirs.index)
    np.testing.assert_allclose(mine.to_numpy(), theirs.to_numpy(), rtol=1e-9)
