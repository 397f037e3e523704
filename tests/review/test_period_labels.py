"""The ledger keeps periods as text and the review reads them back by label, whatever the spacing
(issue 24): quarterly ("2024Q4") and ISO weekly ("2024-W52") forecasts are matched to the actuals
that came later, across a year's end, and the review's words name the period.

ISO 8601 weeks: 2024 has 52 of them and week 2025-W01 starts on Monday 2024-12-30, so the label
after 2024-W52 is 2025-W01 (and text order is time order: "2024-W52" < "2025-W01").
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.core.cadence import MONTH, QUARTER, WEEK
from pipeline.record.ledger.store import insert, open_for_writing, reading
from pipeline.review.compare import month_changes
from pipeline.review.history import realised_history, realised_per_run
from pipeline.review.history_book import _change_rank, _data_words
from pipeline.review.track_record import (
    _earlier_forecasts,
    _realised_warning,
    _search_warning,
    realised_skill_warning,
    score_forecasts,
)

NAN = float("nan")


def run_row(run_id: str, created: str, last_period: str, folder) -> dict:
    return {"run_id": run_id, "created": created, "spec_name": "s", "spec_hash": "h", "spec_json": "{}",
            "input_sha256": "i", "castline_version": "0", "first_period": None, "last_period": last_period,
            "history_rows": 10, "future_rows": 3, "recommended": "ols", "select_by": "mae",
            "beats_baseline": 1, "folder": str(folder), "staging": str(folder), "state": "placed"}


def forecast_row(period: str, horizon: int, forecast: float) -> dict:
    return {"run_id": "run-a", "model": "ols", "period": period, "series": "x", "horizon": horizon,
            "forecast": forecast, "analytic_low_80": forecast - 1, "analytic_high_80": forecast + 1,
            "analytic_low_95": forecast - 2, "analytic_high_95": forecast + 2, "interval_method": "analytic"}


@pytest.fixture(params=[("week", ["2024-W51", "2024-W52", "2025-W01", "2025-W02"]),
                        ("quarter", ["2024Q3", "2024Q4", "2025Q1", "2025Q2"])], ids=["week", "quarter"])
def ledger(request, tmp_path):
    """A ledger of two runs: run-a with actuals to the first label, forecasting the next three;
    run-b with actuals to the third, which scores run-a's first two forecasts."""
    _, periods = request.param
    path = tmp_path / "ledger.sqlite"
    conn = open_for_writing(path)
    try:
        insert(conn, "runs", [run_row("run-a", "2025-01-01T00:00:00", periods[0], tmp_path),
                              run_row("run-b", "2025-01-20T00:00:00", periods[2], tmp_path)])
        insert(conn, "forecasts", [forecast_row(p, h, 10.0 + h) for h, p in enumerate(periods[1:], start=1)])
        insert(conn, "horizon_metrics", [{"run_id": "run-a", "model": "ols", "horizon": h, "n": 5, "mae": 0.5 * h}
                                         for h in (1, 2, 3)])
    finally:
        conn.close()
    return path, periods


def test_the_forecasts_up_to_the_last_actual_are_read_back_by_label_across_the_years_end(ledger):
    path, periods = ledger
    with reading(path) as conn:
        from pipeline.record.ledger.read import visible_runs
        runs = visible_runs(conn, "s")
        earlier = _earlier_forecasts(conn, runs[runs["run_id"] == "run-a"], periods[2])
    # The ledger's "period <= ?" keeps the two forecasts up to run-b's last actual, not the third.
    assert sorted(earlier["period"]) == periods[1:3]
    actuals = pd.DataFrame({"period": periods[:3], "series": "x", "actual": [1.0, 10.0, 14.0]})
    expected = pd.DataFrame({"run_id": "run-a", "model": "ols", "horizon": [1.0, 2.0], "expected_mae": [0.5, 1.0]})
    scored = score_forecasts(earlier, actuals, expected).set_index("period")
    # Forecast 11 against 10 one period ahead, 12 against 14 two ahead (error = forecast − actual).
    assert scored.loc[periods[1], "error"] == 1.0 and scored.loc[periods[2], "error"] == -2.0
    assert list(scored["horizon"]) == [1, 2] and list(scored["expected_mae"]) == [0.5, 1.0]
    assert scored.loc[periods[1], "inside_95"] and not scored.loc[periods[2], "inside_80"]


def test_the_scores_recorded_by_label_are_the_history_of_realised_accuracy(ledger):
    path, periods = ledger
    with reading(path) as conn:
        from pipeline.record.ledger.read import visible_runs
        runs = visible_runs(conn, "s")
        earlier = _earlier_forecasts(conn, runs[runs["run_id"] == "run-a"], periods[2])
    actuals = pd.DataFrame({"period": periods[:3], "series": "x", "actual": [1.0, 10.0, 14.0]})
    expected = pd.DataFrame({"run_id": "run-a", "model": "ols", "horizon": [1.0, 2.0], "expected_mae": [0.5, 1.0]})
    scored = score_forecasts(earlier, actuals, expected)
    columns = ["forecast_run_id", "model", "period", "series", "horizon", "forecast", "actual", "error",
               "expected_mae", "interval_method", "low_80", "high_80", "low_95", "high_95", "inside_80",
               "inside_95", "backtest_low_95", "backtest_high_95", "within_backtest_95"]
    conn = open_for_writing(path)
    try:
        insert(conn, "realised", [{"run_id": "run-b", **{c: row[c] for c in columns}}
                                  for row in scored.to_dict("records")])
    finally:
        conn.close()
    with reading(path) as conn:
        per_horizon = realised_history(conn, "s")
        per_run = realised_per_run(conn, "s")
    assert list(per_horizon["horizon"]) == [1, 2]
    assert list(per_horizon["realised_mae"]) == [1.0, 2.0]
    (row,) = per_run.to_dict("records")
    assert row["months_ahead"] == "1–2" and row["n"] == 2 and row["realised_mae"] == 1.5
    assert row["scored_through"] == periods[2] and row["last_period"] == periods[0]


def months_of_equal_errors(labels: list[str]) -> dict:
    return {"forecasts": 2 * len(labels), "months": len(labels), "runs": 1, "model_mae": 1.0,
            "baseline_mae": 1.0, "skill": 0.0}


def test_realised_skill_warns_after_a_year_of_periods_in_the_periods_words():
    # A year: 12 months (as before), 4 quarters, 52 weeks.
    assert realised_skill_warning(months_of_equal_errors(["m"] * 11)) is None
    monthly = realised_skill_warning(months_of_equal_errors(["m"] * 12))
    assert monthly.startswith("Over the last 12 realised months") and "mean of the training months" in monthly
    assert realised_skill_warning(months_of_equal_errors(["q"] * 3), QUARTER) is None
    quarterly = realised_skill_warning(months_of_equal_errors(["q"] * 4), QUARTER)
    assert quarterly.startswith("Over the last 4 realised quarters")
    assert "mean of the training quarters" in quarterly and "month" not in quarterly
    assert realised_skill_warning(months_of_equal_errors(["w"] * 51), WEEK) is None
    assert realised_skill_warning(months_of_equal_errors(["w"] * 52), WEEK).startswith("Over the last 52 realised weeks")


def test_the_realised_warning_and_the_search_warning_name_the_period():
    realised = pd.DataFrame({"forecast_run_id": "run-a", "forecast_created": "t", "model": "ols",
                             "period": ["2025-W01"], "series": "x", "horizon": [2], "error": [9.0],
                             "within_backtest_95": [False], "backtest_low_95": [-1.0], "backtest_high_95": [1.0]})
    runs = pd.DataFrame({"run_id": ["run-a"], "recommended": ["ols"]})
    warning = _realised_warning(realised, runs, WEEK)
    assert "2025-W01 x (2 week(s) ahead)" in warning and "the weeks just past were unusual" in warning
    assert "(2 month(s) ahead)" in _realised_warning(realised, runs)
    assert _search_warning(6, QUARTER).endswith("judge the one you keep on quarters none of them has seen")
    assert _search_warning(6).endswith("judge the one you keep on months none of them has seen")


def fingerprints(rows: list[tuple[str, int, str]]) -> pd.DataFrame:
    return pd.DataFrame(rows, columns=["period", "actual_rows", "sha256"]).assign(planned_rows=0)


def test_compare_names_a_new_quarter_or_week_to_forecast():
    earlier = fingerprints([("2024Q4", 2, "a"), ("2025Q1", 0, "b")])
    later = fingerprints([("2024Q4", 2, "a"), ("2025Q1", 2, "c"), ("2025Q2", 0, "d")])
    changes = month_changes(earlier, later).set_index("period")["change"].to_dict()
    assert changes == {"2025Q1": "actuals added", "2025Q2": "new quarter to forecast"}
    weekly = month_changes(fingerprints([("2024-W52", 0, "a")]), fingerprints([("2025-W01", 0, "b")]))
    assert list(weekly["change"]) == ["week to forecast dropped", "new week to forecast"]
    monthly = month_changes(fingerprints([("2024-12", 0, "a")]), fingerprints([("2025-01", 0, "b")]))
    assert list(monthly["change"]) == ["month to forecast dropped", "new month to forecast"]
    # The history page tells them in the order of their monthly names.
    assert _change_rank("new quarter to forecast") == _change_rank("new month to forecast") == 4
    assert _change_rank("week to forecast dropped") == 5


def test_the_history_pages_data_words_name_the_period_when_periods_were_not_recorded():
    class Comparison:
        earlier, later = {"input_sha256": "a"}, {"input_sha256": "b"}
        months_recorded = False

        def data_summary(self):
            return {"rows_with_actuals_added": 3}

    assert _data_words(Comparison(), WEEK) == "the input changed (+3 rows with actuals); weeks not recorded"
    assert _data_words(Comparison(), MONTH) == "the input changed (+3 rows with actuals); months not recorded"


def test_history_positions_runs_by_the_ordinal_of_their_label():
    from pipeline.present.history_plot import _period_labeller, run_positions
    table = pd.DataFrame({"spec_name": "s", "run_id": ["a", "b", "c"],
                          "last_period": ["2024-W52", "2025-W01", "2025-W01"]})
    positions = run_positions(table)
    assert np.diff(positions["month"]).tolist() == [1, 0]     # consecutive weeks, then a rerun
    assert positions["rerun"].tolist() == [0, 0, 1]
    assert _period_labeller(WEEK)(float(positions["month"].iloc[1])) == "2025-W01"
    assert _period_labeller(QUARTER)(float(QUARTER.parse("2025Q1").ordinal)) == "2025Q1"
    assert _period_labeller(MONTH)(float(MONTH.parse("2025-01").ordinal) + 0.2) == ""
