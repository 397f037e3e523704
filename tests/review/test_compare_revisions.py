"""pipeline/review/revisions.py: compare's forecast revisions and the planned drivers that changed.

Two runs of the tiny invented forecast (two regions) into one ledger, each reading its own
data file: the first with actuals to 2021-12 (forecasting 2022-01..03), the second with one
more month of actuals and South's planned x in 2022-03 changed (forecasting 2022-02..04).
Plumbing on invented data: every expected value is computed in this file from the run
folders' forecast.csv and metrics.json and the data files, with pandas as the reference,
never read back from the ledger.
"""

from __future__ import annotations

import json
import shutil
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from conftest import tiny_data, write_tiny_spec

import pipeline
from pipeline import cli
from pipeline.core.catalogue import model_label
from pipeline.core.columns import PERIOD, SERIES
from pipeline.record.ledger import reading
from pipeline.review.compare import compare_runs
from pipeline.review.revisions import forecast_revisions, largest_revisions, planned_differences

CHANGED_MONTH, CHANGED_SERIES, CHANGED_DRIVER, CHANGE = "2022-03", "South", "x", 1.5
NAN = float("nan")


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    """Return (ledger file, [(run result, data folder)] oldest first)."""
    base = tmp_path_factory.mktemp("revisions")
    data = tiny_data(("North", "South"))
    replanned = data.copy()
    where = (replanned["month"] == f"{CHANGED_MONTH}-01") & (replanned["region"] == CHANGED_SERIES)
    assert where.sum() == 1
    replanned.loc[where, CHANGED_DRIVER] += CHANGE
    runs = []
    for name, frame, cut in [("january", data, "2021-12"), ("february", replanned, "2022-01")]:
        spec = write_tiny_spec(base / name, frame, actuals_to=cut, output={"folder": str(base / "runs")})
        runs.append((pipeline.run(spec), base / name))
    return base / "runs" / "ledger.sqlite", runs


def table(run, name: str) -> pd.DataFrame:
    return pd.read_csv(run.folder.path / name, dtype={"period": str, "series": str})


def stated_method(run, model: str) -> str:
    """Return the interval method the run's summary stated for a model: of the methods its
    forecasts have, the one whose backtest 95% coverage came closest to 95%, else the first it
    has, else analytic (the summary's rule, core/intervals.py trusted_method)."""
    own = table(run, "forecast.csv").query("model == @model")
    available = [m for m in ("analytic", "empirical") if own[f"{m}_low_95"].notna().any()]
    metrics = json.loads((run.folder.path / "metrics.json").read_text(encoding="utf-8"))
    coverage = [row for row in metrics["interval_coverage"] if row["model"] == model
                and row["level"] == 0.95 and row["coverage"] is not None and row["method"] in available]
    if coverage:
        return min(coverage, key=lambda row: abs(row["coverage"] - 0.95))["method"]
    return available[0] if available else "analytic"


def recommended(run) -> str:
    return json.loads((run.folder.path / "metrics.json").read_text(encoding="utf-8"))["recommended"]


def expected_revisions(earlier, later, model: str) -> pd.DataFrame:
    """The reference: the two runs' forecast.csv rows of the model merged with pandas."""
    old = table(earlier, "forecast.csv").query("model == @model")
    new = table(later, "forecast.csv").query("model == @model")
    method = stated_method(earlier, model)
    old = old.assign(width=old[f"{method}_high_80"] - old[f"{method}_low_80"])
    both = old.merge(new, on=["period", "series"], suffixes=("_earlier", "_later"))
    both = both.sort_values(["period", "series"]).reset_index(drop=True)
    change = both["forecast_later"] - both["forecast_earlier"]
    return pd.DataFrame({"period": both["period"], "series": both["series"],
                         "earlier": both["forecast_earlier"], "later": both["forecast_later"],
                         "change": change, "earlier_width_80": both["width"],
                         "change_in_widths": change / both["width"]})


def compared(two_runs, model: str | None = None):
    ledger_file, runs = two_runs
    with reading(ledger_file) as conn:
        return compare_runs(conn, runs[0][0].folder.run_id, runs[1][0].folder.run_id, ledger_file,
                            model=model)


def test_revisions_equal_a_merge_of_the_two_forecast_files(two_runs):
    (earlier, _), (later, _) = two_runs[1]
    comparison = compared(two_runs)
    model = recommended(later)
    assert comparison.revisions.model == model
    assert comparison.revisions.interval_method == stated_method(earlier, model)
    expected = expected_revisions(earlier, later, model)
    # the months both runs forecast: 2022-02 and 2022-03, for both regions
    assert list(zip(expected["period"], expected["series"])) == [
        ("2022-02", "North"), ("2022-02", "South"), ("2022-03", "North"), ("2022-03", "South")]
    pd.testing.assert_frame_equal(comparison.revisions.table, expected, rtol=1e-12, atol=0)
    assert comparison.revisions.table["earlier_width_80"].gt(0).all()


def test_revisions_of_another_model_and_an_unknown_one(two_runs):
    (earlier, _), (later, _) = two_runs[1]
    comparison = compared(two_runs, model="mean_baseline")
    pd.testing.assert_frame_equal(comparison.revisions.table,
                                  expected_revisions(earlier, later, "mean_baseline"), rtol=1e-12, atol=0)
    # the tiny holdout is too short for the baseline's 95% intervals: its summary states the
    # analytic kind, which the baseline lacks, so there is no width to measure the change in
    if comparison.revisions.table["earlier_width_80"].isna().all():
        assert "no 80% bounds" in comparison.revisions.note
    with pytest.raises(Exception, match="--model: no forecasts of 'nope' in both runs"):
        compared(two_runs, model="nope")


def test_the_changed_driver_and_month_are_named(two_runs):
    (_, january), (_, february) = two_runs[1]
    comparison = compared(two_runs)
    months = comparison.months.set_index("period")["change"].to_dict()
    assert months == {"2022-01": "actuals added", CHANGED_MONTH: "planned drivers changed",
                      "2022-04": "new month to forecast"}
    old, new = (pd.read_csv(folder / "data.csv") for folder in (january, february))
    before, after = (frame.loc[(frame["month"] == f"{CHANGED_MONTH}-01")
                               & (frame["region"] == CHANGED_SERIES), CHANGED_DRIVER].item()
                     for frame in (old, new))
    planned = comparison.planned
    assert planned.named and planned.months == [CHANGED_MONTH]
    assert planned.table.to_dict(orient="records") == [
        {"period": CHANGED_MONTH, "driver": CHANGED_DRIVER, "series": CHANGED_SERIES,
         "earlier": before, "later": after}]
    assert after == pytest.approx(before + CHANGE)
    assert planned.by_month().to_dict(orient="records") == [
        {"driver": CHANGED_DRIVER, "period": CHANGED_MONTH, "series_changed": 1, "series": CHANGED_SERIES}]


def test_a_replaced_input_file_is_said_and_never_guessed(two_runs):
    (_, january), (_, february) = two_runs[1]
    kept = (january / "data.csv").read_bytes()
    try:
        shutil.copy(february / "data.csv", january / "data.csv")   # the file overwritten by next month's
        comparison = compared(two_runs)
    finally:
        (january / "data.csv").write_bytes(kept)
    planned = comparison.planned
    assert not planned.named and planned.table.empty and planned.months == [CHANGED_MONTH]
    assert "no longer holds what" in planned.note and str(january / "data.csv") in planned.note
    assert len(comparison.revisions.table) == 4   # the revisions come from the ledger alone


def test_compare_prints_revisions_and_drivers_and_writes_the_csv(two_runs, capsys, tmp_path):
    (earlier, _), (later, _) = two_runs[1]
    target = tmp_path / "revisions.csv"
    capsys.readouterr()
    assert cli.main(["compare", str(later.folder.path), str(earlier.folder.path), "--top", "3",
                     "--revisions", str(target)]) == 0
    printed = capsys.readouterr().out
    model = recommended(later)
    assert f"Forecast revisions of {model_label(model)}: 4 month-series in both runs" in printed
    assert "the 3 that moved most of 4" in printed
    assert f"{CHANGED_DRIVER}       {CHANGED_MONTH}               1  {CHANGED_SERIES}" in printed
    written = pd.read_csv(target, dtype={"period": str, "series": str})
    expected = expected_revisions(earlier, later, model).assign(model=model)
    pd.testing.assert_frame_equal(written, expected, rtol=1e-12, atol=0)


def test_compare_refuses_an_unknown_model_in_one_line(two_runs, capsys):
    ledger_file, runs = two_runs
    capsys.readouterr()
    code = cli.main(["compare", runs[0][0].folder.run_id, runs[1][0].folder.run_id,
                     "--ledger", str(ledger_file), "--model", "nope"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and err.startswith("castline: --model: no forecasts of 'nope'")


def forecasts(rows, method):
    return pd.DataFrame([{"model": "ols", "period": p, "series": s, "forecast": f,
                          "analytic_low_80": lo, "analytic_high_80": hi, "interval_method": method}
                         for p, s, f, lo, hi in rows])


def test_revisions_by_hand_with_no_width_and_no_stated_interval():
    earlier = forecasts([("2024-01", "a", 10.0, 8.0, 12.0), ("2024-01", "b", 5.0, 5.0, 5.0),
                         ("2024-02", "a", 11.0, 9.0, 13.0)], "analytic")
    later = forecasts([("2024-01", "a", 13.0, 0, 0), ("2024-01", "b", 4.0, 0, 0),
                       ("2024-03", "a", 1.0, 0, 0)], "analytic")
    found = forecast_revisions(earlier, later, "ols")
    # by hand: a: 13 − 10 = 3 over a width of 12 − 8 = 4 → 0.75; b: −1, its width 0 → none;
    # 2024-02 and 2024-03 are in one run only
    assert found.table[["period", "series", "change"]].to_dict(orient="records") == [
        {"period": "2024-01", "series": "a", "change": 3.0}, {"period": "2024-01", "series": "b", "change": -1.0}]
    assert found.table["change_in_widths"].iloc[0] == 0.75 and np.isnan(found.table["change_in_widths"].iloc[1])
    assert list(largest_revisions(found.table, 1)["series"]) == ["a"]
    older = forecast_revisions(earlier.assign(interval_method=None), later, "ols")
    assert older.table["change_in_widths"].isna().all() and "stated no interval" in older.note


def planned(rows):
    frame = pd.DataFrame(rows, columns=["month", SERIES, "rain", "promo"])
    return SimpleNamespace(future=frame.assign(**{PERIOD: pd.PeriodIndex(frame.pop("month"), freq="M")}))


def test_planned_differences_by_hand():
    earlier = planned([("2024-05", "a", 1.0, "no"), ("2024-05", "b", NAN, "no"), ("2024-06", "a", 2.0, "no")])
    later = planned([("2024-05", "a", 1.0, "yes"), ("2024-05", "b", NAN, "no"), ("2024-05", "c", 3.0, NAN),
                     ("2024-06", "a", 2.5, "no")])
    found = planned_differences(earlier, later, ["2024-05"], ["rain", "promo"])
    # by hand, 2024-05 only: a's promo no → yes; b unchanged (an empty rain in both is no change);
    # c is planned in the later run only: its rain differs, its empty promo does not
    assert found.to_dict(orient="records") == [
        {"period": "2024-05", "driver": "promo", "series": "a", "earlier": "no", "later": "yes"},
        {"period": "2024-05", "driver": "rain", "series": "c", "earlier": None, "later": 3.0}]


def test_planned_drivers_named_period_and_series_are_the_users_own():
    # Drivers called as the table's own columns: each is compared as a driver, by its values.
    def rows(values):
        frame = pd.DataFrame(values, columns=["month", SERIES, "period", "series"])
        return SimpleNamespace(future=frame.assign(**{PERIOD: pd.PeriodIndex(frame.pop("month"), freq="M")}))
    earlier = rows([("2024-05", "a", 1.0, "x"), ("2024-05", "b", 2.0, "y")])
    later = rows([("2024-05", "a", 1.5, "x"), ("2024-05", "b", 2.0, "z")])
    found = planned_differences(earlier, later, ["2024-05"], ["period", "series"])
    assert found.to_dict(orient="records") == [
        {"period": "2024-05", "driver": "period", "series": "a", "earlier": 1.0, "later": 1.5},
        {"period": "2024-05", "driver": "series", "series": "b", "earlier": "y", "later": "z"}]
