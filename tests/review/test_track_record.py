"""pipeline/review/track_record.py: earlier forecasts scored against the actuals that came later.

The reference values are hand computations on the tiny tables below, the arithmetic in a
comment beside each; the runs at the end are plumbing on invented data, checked against the
files the runs wrote (forecast.csv, the data each run read), never against figures of their own.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from conftest import tiny_data, write_tiny_spec

from pipeline.record.ledger.store import INTERVAL_COLUMNS
from pipeline.review.track_record import (
    REALISED_SKILL_MONTHS,
    realised_skill,
    realised_skill_warning,
    score_forecasts,
    summarise_realised,
    track_record,
)
from pipeline.runner import check
from pipeline.spec import load_spec

NAN = float("nan")
RUN = "run-A"


def forecast_row(model, period, series, horizon, forecast, analytic=(NAN,) * 4,
                 empirical=(NAN,) * 4, method=None):
    """One ledger forecast row; intervals given as (low 80, high 80, low 95, high 95)."""
    bounds = {}
    for kind, (low80, high80, low95, high95) in (("analytic", analytic), ("empirical", empirical)):
        bounds.update({f"{kind}_low_80": low80, f"{kind}_high_80": high80,
                       f"{kind}_low_95": low95, f"{kind}_high_95": high95})
    assert set(bounds) == set(INTERVAL_COLUMNS)
    return {"forecast_run_id": RUN, "forecast_created": "2024-01-05T00:00:00", "model": model,
            "period": period, "series": series, "horizon": horizon, "forecast": forecast,
            **bounds, "interval_method": method}


FORECASTS = pd.DataFrame([
    # error 110 − 100 = +10; 100 in [100, 120] and [95, 125] (the ends count);
    # backtest range from the stated 95%: [110 − 125, 110 − 95] = [−15, +15], +10 inside
    forecast_row("ols", "2024-01", "North", 1, 110.0, analytic=(100, 120, 95, 125), method="analytic"),
    # error 50 − 63 = −13; 63 outside [52, 60] and [48, 62]; range [50 − 62, 50 − 48] = [−12, +2]
    forecast_row("ols", "2024-01", "South", 1, 50.0, analytic=(52, 60, 48, 62), method="analytic"),
    # stated empirical: error 90 − 80 = +10; 80 outside [86, 94] and [82, 98] (though inside the
    # analytic 95% [80, 100]); range from the empirical 95%: [90 − 98, 90 − 82] = [−8, +8]
    forecast_row("ols", "2024-02", "North", 2, 90.0, analytic=(85, 95, 80, 100),
                 empirical=(86, 94, 82, 98), method="empirical"),
    # no actual for 2024-03: not scored
    forecast_row("ols", "2024-03", "North", 3, 95.0, analytic=(85, 105, 80, 110), method="analytic"),
    # no stated method, empirical bounds present: empirical. error 120 − 100 = +20;
    # 100 outside [105, 135], inside [95, 145]; range [120 − 145, 120 − 95] = [−25, +25]
    forecast_row("mean_baseline", "2024-01", "North", 1, 120.0, empirical=(105, 135, 95, 145)),
    # no bounds at all: error 60 − 63 = −3, nothing to judge it by
    forecast_row("mean_baseline", "2024-01", "South", 1, 60.0),
])
ACTUALS = pd.DataFrame({"period": ["2024-01", "2024-01", "2024-02"],
                        "series": ["North", "South", "North"], "actual": [100.0, 63.0, 80.0]})
# The backtest's MAE: at one month ahead, and overall (horizon NaN), used where a horizon has none.
EXPECTED = pd.DataFrame({"run_id": [RUN] * 4, "model": ["ols", "mean_baseline", "ols", "mean_baseline"],
                         "horizon": [1.0, 1.0, NAN, NAN], "expected_mae": [7.5, 25.0, 8.0, 30.0]})


@pytest.fixture(scope="module")
def scored() -> pd.DataFrame:
    return score_forecasts(FORECASTS, ACTUALS, EXPECTED)


def by_key(scored: pd.DataFrame) -> dict:
    return {(r.model, r.period, r.series): r for r in scored.itertuples()}


def test_errors_are_forecast_minus_actual_and_only_months_with_actuals_are_scored(scored):
    rows = by_key(scored)
    # the hand computations in FORECASTS' comments; 2024-03 has no actual
    assert {k: r.error for k, r in rows.items()} == {
        ("ols", "2024-01", "North"): 10.0, ("ols", "2024-01", "South"): -13.0,
        ("ols", "2024-02", "North"): 10.0, ("mean_baseline", "2024-01", "North"): 20.0,
        ("mean_baseline", "2024-01", "South"): -3.0}


def test_rows_are_ordered_by_run_time_model_month_and_series(scored):
    # sorted by hand: mean_baseline before ols, then month, then series
    assert list(zip(scored["model"], scored["period"], scored["series"])) == [
        ("mean_baseline", "2024-01", "North"), ("mean_baseline", "2024-01", "South"),
        ("ols", "2024-01", "North"), ("ols", "2024-01", "South"), ("ols", "2024-02", "North")]


def test_inside_the_stated_80_and_95_intervals(scored):
    rows = by_key(scored)
    # FORECASTS' comments: (inside 80%, inside 95%); None where no interval was stated
    assert {k: (r.inside_80, r.inside_95) for k, r in rows.items()} == {
        ("ols", "2024-01", "North"): (True, True), ("ols", "2024-01", "South"): (False, False),
        ("ols", "2024-02", "North"): (False, False), ("mean_baseline", "2024-01", "North"): (False, True),
        ("mean_baseline", "2024-01", "South"): (None, None)}


def test_the_stated_interval_is_the_one_judged(scored):
    rows = by_key(scored)
    assert rows[("ols", "2024-02", "North")].interval_method == "empirical"
    assert (rows[("ols", "2024-02", "North")].low_95, rows[("ols", "2024-02", "North")].high_95) == (82, 98)
    # no method stated: empirical when its bounds exist, else analytic
    assert rows[("mean_baseline", "2024-01", "North")].interval_method == "empirical"
    assert rows[("mean_baseline", "2024-01", "South")].interval_method == "analytic"


def test_the_backtest_95_range_of_errors(scored):
    rows = by_key(scored)
    # FORECASTS' comments: (low, high, error inside)
    assert {k: (r.backtest_low_95, r.backtest_high_95, r.within_backtest_95) for k, r in rows.items()
            if k != ("mean_baseline", "2024-01", "South")} == {
        ("ols", "2024-01", "North"): (-15.0, 15.0, True), ("ols", "2024-01", "South"): (-12.0, 2.0, False),
        ("ols", "2024-02", "North"): (-8.0, 8.0, False),
        ("mean_baseline", "2024-01", "North"): (-25.0, 25.0, True)}
    unjudged = rows[("mean_baseline", "2024-01", "South")]
    assert math.isnan(unjudged.backtest_low_95) and unjudged.within_backtest_95 is None


def test_expected_mae_at_the_horizon_else_the_models_overall(scored):
    rows = by_key(scored)
    # EXPECTED: ols at 1 month ahead 7.5; at 2 months ahead none, so its overall 8.0
    assert {k: r.expected_mae for k, r in rows.items()} == {
        ("ols", "2024-01", "North"): 7.5, ("ols", "2024-01", "South"): 7.5,
        ("ols", "2024-02", "North"): 8.0, ("mean_baseline", "2024-01", "North"): 25.0,
        ("mean_baseline", "2024-01", "South"): 25.0}


def test_nothing_to_score_gives_an_empty_table_with_the_columns():
    no_actuals = ACTUALS.assign(period="2030-01")
    empty = score_forecasts(FORECASTS, no_actuals, EXPECTED)
    assert len(empty) == 0 and {"error", "inside_80", "within_backtest_95"} <= set(empty.columns)
    assert "recorded" not in empty.columns


def test_summary_per_run_model_and_horizon(scored):
    table = summarise_realised(scored).set_index(["model", "horizon"])
    # mean_baseline, 1 month ahead: errors +20, −3 → MAE (20 + 3) / 2 = 11.5, bias (20 − 3) / 2 = 8.5;
    # inside 80%: only North judged, outside → 0; inside 95%: 1 of 1; within range: 1 of 1
    # ols, 1 month ahead: errors +10, −13 → MAE 11.5, bias −1.5; inside 1 of 2 each
    # ols, 2 months ahead: error +10 → MAE 10, bias 10; outside everything
    expected = pd.DataFrame({
        "model": ["mean_baseline", "ols", "ols"], "horizon": [1, 1, 2], "n": [2, 2, 1],
        "realised_mae": [11.5, 11.5, 10.0], "expected_mae": [25.0, 7.5, 8.0],
        "realised_bias": [8.5, -1.5, 10.0], "inside_80": [0.0, 0.5, 0.0], "inside_95": [1.0, 0.5, 0.0],
        "within_backtest_95": [1.0, 0.5, 0.0]}).set_index(["model", "horizon"])
    pd.testing.assert_frame_equal(table[expected.columns], expected, check_dtype=False)


def test_summary_lists_runs_oldest_first_and_a_share_is_nan_when_nothing_was_judged():
    realised = pd.DataFrame({
        "forecast_run_id": ["run-late", "run-early"], "forecast_created": ["2024-03-01", "2024-02-01"],
        "model": ["ols", "ols"], "horizon": [1, 1], "error": [-2.0, 4.0], "expected_mae": [3.0, NAN],
        "inside_80": [None, True], "inside_95": [None, True], "within_backtest_95": [None, False]})
    table = summarise_realised(realised)
    assert list(table["forecast_run_id"]) == ["run-early", "run-late"]   # by creation time
    late = table.iloc[1]
    assert (late["realised_mae"], late["realised_bias"], late["expected_mae"]) == (2.0, -2.0, 3.0)
    assert np.isnan(late["inside_80"]) and np.isnan(table.iloc[0]["expected_mae"])
    assert summarise_realised(realised.iloc[:0]).empty


def test_the_second_run_scores_the_first_runs_forecasts_from_its_files(tiny_runs):
    _, _, runs = tiny_runs
    (first, _), (second, data) = runs[0], runs[1]
    forecast = pd.read_csv(first.folder.path / "forecast.csv")
    actual = data.assign(period=data["month"].str[:7]).dropna(subset=["y"])
    merged = forecast.merge(actual[["period", "y"]], on="period")   # pandas, from the files
    realised = pd.read_csv(second.folder.path / "realised.csv")
    # 6 models (the mean of the training months, ols and the four simple rules a holdout adds) × 3 months
    # now with actuals
    assert len(realised) == len(merged) == 6 * 3
    joined = realised.merge(merged, on=["model", "period"])
    np.testing.assert_allclose(joined["error"], joined["forecast_y"] - joined["y"])
    assert set(realised["forecast_run_id"]) == {first.folder.run_id}
    assert second.track.earlier_runs == 1 and runs[2][0].track.earlier_runs == 2


def test_a_revised_actual_is_scored_again_and_only_it(tiny_runs):
    _, _, runs = tiny_runs
    third = runs[2][0].realised
    recorded = third[third["recorded"].astype(bool)]
    # the third run revised 2022-02 only: its six models' scores are recorded again
    assert list(recorded["period"]) == ["2022-02"] * 6
    assert recorded["model"].nunique() == 6


def test_a_run_without_skill_is_warned_about_after_the_set_number_of_runs(tmp_path):
    spec_path = write_tiny_spec(tmp_path, tiny_data(), actuals_to="2021-12",
                                output={"folder": "runs", "warn_after_runs_without_skill": 1})
    spec = load_spec(spec_path)
    data = check(spec)

    class Evaluation:            # track_record reads only whether the model beat the baseline
        beats_baseline = False   # ... and whether the validation gave a test at all
        tested = True

    record = track_record(spec, data, Evaluation())
    assert record.earlier_runs == 0 and record.runs_without_skill == 1
    assert len(record.warnings) == 1
    assert "not beaten the mean of the training months in the last 1 tested run" in record.warnings[0]
    Evaluation.beats_baseline = True
    assert track_record(spec, data, Evaluation()).warnings == []
    # A run whose validation gave no test says nothing either way: no streak, no warning.
    Evaluation.beats_baseline, Evaluation.tested = False, False
    untested = track_record(spec, data, Evaluation())
    assert untested.runs_without_skill == 0 and untested.warnings == []
    assert not (tmp_path / "runs" / "ledger.sqlite").exists()   # reading writes nothing


def test_a_month_filled_by_gaps_fill_is_not_scored_as_an_actual(tmp_path):
    # An earlier run forecast 2022-01..03; the new data lacks 2022-02 and fills it by
    # interpolation: only 2022-01 and 2022-03 are actuals the forecasts may be judged on.
    import pipeline
    data = tiny_data()
    first = pipeline.run(write_tiny_spec(tmp_path, data, actuals_to="2021-12"))
    gapped = data[data["month"] != "2022-02-01"]
    spec = write_tiny_spec(tmp_path, gapped, actuals_to="2022-03",
                           input={"file": "data.csv", "date_column": "month", "period": "month",
                                  "as_of": "2027-01-31", "gaps": "fill"})
    second = pipeline.run(spec)
    assert set(first.forecast["period"]) == {"2022-01", "2022-02", "2022-03"}
    assert set(second.realised["period"]) == {"2022-01", "2022-03"}


def test_more_than_five_specs_tried_on_one_input_is_warned_once_the_sixth_runs(tmp_path):
    # Six specs that differ in what they compare (the holdout's length), run on the same file
    # into one ledger; a spec differing only in its description is not another spec.
    import pipeline
    data = tiny_data()
    said = []
    for held_out, description in [(3, "a"), (3, "b"), (4, ""), (5, ""), (6, ""), (7, ""), (8, "")]:
        spec = write_tiny_spec(tmp_path, data, actuals_to="2021-12", description=description,
                               validation={"method": "holdout", "last_periods": held_out})
        said.append(any("different specs have been run on this same input" in w
                        for w in pipeline.run(spec).warnings))
    assert said == [False] * 6 + [True]


# ---------------------------------------------------------------- realised skill against the baseline

def scored_error(run_id, model, period, series, error):
    """One scored forecast, with only what the realised skill reads."""
    return {"forecast_run_id": run_id, "forecast_created": run_id.replace("run-", "2024-0"),
            "model": model, "period": period, "series": series, "error": error}


SCORED = pd.DataFrame([
    # run-1 recommended ols: its three forecasts, each with the baseline's of the same row
    scored_error("run-1", "ols", "2024-01", "A", 2.0), scored_error("run-1", "mean_baseline", "2024-01", "A", 5.0),
    scored_error("run-1", "ols", "2024-01", "B", -4.0),
    scored_error("run-1", "mean_baseline", "2024-01", "B", -5.0),
    scored_error("run-1", "ols", "2024-02", "A", 3.0), scored_error("run-1", "mean_baseline", "2024-02", "A", -6.0),
    # run-2 recommended ridge: 2024-02 B has no baseline forecast; its ols is not the recommended
    scored_error("run-2", "ridge", "2024-02", "A", -8.0),
    scored_error("run-2", "mean_baseline", "2024-02", "A", 4.0),
    scored_error("run-2", "ridge", "2024-02", "B", 2.0), scored_error("run-2", "ols", "2024-02", "A", 100.0)])
RECOMMENDED = {"run-1": "ols", "run-2": "ridge"}


def test_realised_skill_per_run_and_overall_hand_worked():
    by_run, overall = realised_skill(SCORED, RECOMMENDED)
    by_run = by_run.set_index("forecast_run_id")
    # Hand-worked. run-1: MAE of ols (2 + 4 + 3) / 3 = 3, of the baseline (5 + 5 + 6) / 3 = 16/3;
    # skill 1 − 3 / (16/3) = 1 − 9/16 = 0.4375, over 2 months, every forecast paired.
    assert by_run.loc["run-1", ["model", "forecasts", "months", "without_baseline"]].tolist() == ["ols", 3, 2, 0]
    assert by_run.loc["run-1", "model_mae"] == pytest.approx(3.0)
    assert by_run.loc["run-1", "baseline_mae"] == pytest.approx(16 / 3)
    assert by_run.loc["run-1", "skill"] == pytest.approx(0.4375)
    # run-2: only 2024-02 A is paired (B has no baseline forecast; ols is not its recommended):
    # MAE 8 against 4, skill 1 − 8/4 = −1.
    assert by_run.loc["run-2", ["model", "forecasts", "months", "without_baseline"]].tolist() == ["ridge", 1, 1, 1]
    assert by_run.loc["run-2", "skill"] == pytest.approx(-1.0)
    # Overall, every pair pooled: (2 + 4 + 3 + 8) / 4 = 4.25 against (5 + 5 + 6 + 4) / 4 = 5;
    # skill 1 − 4.25/5 = 0.15, over the 2 distinct months 2024-01 and 2024-02.
    assert overall == {"forecasts": 4, "months": 2, "model_mae": pytest.approx(4.25),
                       "baseline_mae": pytest.approx(5.0), "skill": pytest.approx(0.15), "runs": 2,
                       "without_baseline": 1, "runs_without_baseline": []}


def test_realised_skill_matches_a_pandas_pivot_of_the_same_rows():
    # An independent computation: pivot the recommended and the baseline's errors side by side.
    rng = np.random.default_rng(5)
    rows = [scored_error(run, model, f"2024-{m:02d}", s, float(rng.normal(0, 3 if model == "ols" else 5)))
            for run in ("run-1", "run-2") for model in ("ols", "mean_baseline")
            for m in range(1, 8) for s in ("A", "B", "C")]
    frame = pd.DataFrame(rows)
    wide = frame.pivot_table(index=["forecast_run_id", "period", "series"], columns="model", values="error")
    expected = 1 - wide["ols"].abs().mean() / wide["mean_baseline"].abs().mean()
    per_run = wide.abs().groupby(level="forecast_run_id").mean()
    _, overall = realised_skill(frame, {"run-1": "ols", "run-2": "ols"})
    by_run, _ = realised_skill(frame, {"run-1": "ols", "run-2": "ols"})
    assert overall["skill"] == pytest.approx(expected) and overall["months"] == 7 and overall["forecasts"] == 42
    np.testing.assert_allclose(by_run.set_index("forecast_run_id")["skill"],
                               1 - per_run["ols"] / per_run["mean_baseline"])


def test_a_run_that_recommended_the_baseline_has_realised_skill_zero():
    by_run, _ = realised_skill(SCORED, {"run-1": "mean_baseline"})
    assert by_run["forecast_run_id"].tolist() == ["run-1"] and by_run["skill"].tolist() == [0.0]


def test_without_baseline_forecasts_the_realised_skill_is_absent_and_said_so():
    # A ledger that recorded only the recommended model's forecasts.
    only_models = SCORED[SCORED["model"] != "mean_baseline"]
    by_run, overall = realised_skill(only_models, RECOMMENDED)
    assert overall["forecasts"] == 0 and math.isnan(overall["skill"])
    assert overall["without_baseline"] == 5 and overall["runs_without_baseline"] == ["run-1", "run-2"]
    assert by_run["skill"].isna().all()
    assert realised_skill_warning(overall) is None
    assert realised_skill(SCORED.iloc[:0], {})[1]["forecasts"] == 0   # nothing scored at all


def months_of_equal_errors(months: int, model_error: float) -> pd.DataFrame:
    """`months` realised months of one run, one series: the baseline missing by 10 each month."""
    periods = pd.period_range("2023-01", periods=months, freq="M").astype(str)
    return pd.DataFrame([row for p in periods for row in (
        scored_error("run-1", "ols", p, "A", model_error), scored_error("run-1", "mean_baseline", p, "A", -10.0))])


def test_the_realised_skill_warning_needs_twelve_realised_months():
    assert REALISED_SKILL_MONTHS == 12
    # model errors of 10 against the baseline's 10: skill 1 − 10/10 = 0, no more accurate
    eleven = realised_skill(months_of_equal_errors(11, 10.0), {"run-1": "ols"})[1]
    twelve = realised_skill(months_of_equal_errors(12, 10.0), {"run-1": "ols"})[1]
    assert realised_skill_warning(eleven) is None
    assert realised_skill_warning(twelve).startswith(
        "Over the last 12 realised months, the recommended forecasts were no more accurate than the "
        "forecasts of the mean of the training months (realised skill 0%")
    # errors of 12 against 10: skill 1 − 12/10 = −20%; errors of 9: 1 − 9/10 = +10%, no warning
    worse = realised_skill(months_of_equal_errors(12, 12.0), {"run-1": "ols"})[1]
    assert "(realised skill -20%" in realised_skill_warning(worse)
    assert realised_skill_warning(realised_skill(months_of_equal_errors(12, 9.0), {"run-1": "ols"})[1]) is None


def test_the_track_record_keeps_the_realised_skill_in_its_facts(tiny_runs):
    _, _, runs = tiny_runs
    second = runs[1][0].track
    facts = second.facts()["realised_skill"]
    by_run, overall = realised_skill(second.realised, second.recommended)
    assert facts["skill"] == pytest.approx(overall["skill"]) and facts["months"] == 3
    assert [row["forecast_run_id"] for row in facts["by_run"]] == by_run["forecast_run_id"].tolist()
    assert second.skill == overall
