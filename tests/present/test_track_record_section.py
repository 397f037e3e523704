"""pipeline/present/track_record.py: the summary's Track record section.

Hand-written track records (the numbers worked out in comments) and, as plumbing, the tiny
invented runs, whose realised MAE is recomputed here with pandas from their files.
"""

from __future__ import annotations

import pandas as pd

from pipeline.core.formatting import format_number
from pipeline.present.track_record import track_record_section, with_track_record

TRACK = {"ledger": "/data/ledger.sqlite", "earlier_runs": 2,
         "recommended": {"run-1": "ols", "run-2": "ridge"}, "warnings": []}


def scored(run_id, model, horizon, error, inside):
    return {"forecast_run_id": run_id, "forecast_created": run_id.replace("run-", "2024-0"),
            "model": model, "horizon": horizon, "error": error, "expected_mae": 2.0,
            "inside_80": inside, "inside_95": True, "within_backtest_95": True}


REALISED = pd.DataFrame([
    scored("run-1", "ols", 1, 3.0, True), scored("run-1", "ols", 1, -1.0, False),
    scored("run-1", "mean_baseline", 1, 9.0, False),         # not run-1's recommended model
    scored("run-2", "ridge", 2, -4.0, True)])


def body(section: str) -> list[str]:
    return [line for line in section.splitlines() if line.startswith("| run-")]


def test_one_row_per_earlier_run_recommended_model_and_months_ahead():
    rows = body(track_record_section(TRACK, REALISED))
    # run-1 ols, 1 month ahead: errors +3, −1 → MAE 2, bias 1, inside 80% 1 of 2 = 0.5
    # run-2 ridge, 2 months ahead: error −4 → MAE 4, bias −4
    assert rows == ["| run-1 | OLS | 1 | 2 | 2 | 2 | 1 | 0.5 | 1 |",   # models named by the catalogue
                    "| run-2 | ridge | 2 | 1 | 4 | 2 | -4 | 1 | 1 |"]
    assert "2 earlier run(s) of this spec are in the ledger `/data/ledger.sqlite`." in \
        track_record_section(TRACK, REALISED)


def test_the_first_run_and_runs_without_actuals_yet_say_so():
    first = track_record_section({**TRACK, "earlier_runs": 0, "recommended": {}}, None)
    assert "This is the first run of this spec in the ledger `/data/ledger.sqlite`" in first
    none_yet = track_record_section(TRACK, REALISED.iloc[:0])
    assert "None of their forecasts has an actual in this run's data yet." in none_yet
    assert body(none_yet) == []


def test_warnings_come_first():
    section = track_record_section({**TRACK, "warnings": ["realised accuracy: 2 of 3 missed"]}, REALISED)
    assert section.splitlines()[:3] == ["## Track record", "", "- **Warning:** realised accuracy: 2 of 3 missed"]


def test_only_the_latest_runs_are_shown():
    section = track_record_section(TRACK, REALISED, runs_shown=1)
    assert [row.split(" | ")[0] for row in body(section)] == ["| run-2"]


def test_the_section_goes_before_the_data_section_or_at_the_end():
    summary = "# s\n\n## Forecast\n\nx\n\n## Data\n\n- rows\n"
    placed = with_track_record(summary, TRACK, REALISED)
    assert placed.index("## Forecast") < placed.index("## Track record") < placed.index("## Data")
    assert with_track_record(summary, None, REALISED) == summary
    bare = with_track_record("# s\n\nno sections\n", TRACK, REALISED)
    assert bare.startswith("# s\n\nno sections\n\n## Track record")


def test_a_runs_summary_shows_how_the_earlier_runs_forecasts_turned_out(tiny_runs):
    runs = tiny_runs[2]
    (first, _), (second, data) = runs[0], runs[1]
    summary = (second.folder.path / "summary.md").read_text(encoding="utf-8")
    forecast = pd.read_csv(first.folder.path / "forecast.csv")
    recommended = first.evaluation.recommended
    actual = data.assign(period=data["month"].str[:7])[["period", "y"]]
    own = forecast[forecast["model"] == recommended].merge(actual, on="period")
    rows = [row.split(" | ") for row in body(summary)]
    assert [r[0] for r in rows] == [f"| {first.folder.run_id}"] * 3
    # realised MAE per months ahead: |forecast − actual| of the one forecast at that horizon (pandas)
    assert [r[4] for r in rows] == [format_number(float(abs(e))) for e in own["forecast"] - own["y"]]


# Realised skill as track_record.json holds it; hand-written: MAE 4.25 against 5, 1 − 4.25/5 = 15%.
SKILL = {"forecasts": 4, "months": 2, "model_mae": 4.25, "baseline_mae": 5.0, "skill": 0.15, "runs": 2,
         "without_baseline": 1, "runs_without_baseline": [], "by_run": []}


def test_the_realised_skill_against_the_baselines_own_forecasts_in_one_sentence():
    section = track_record_section({**TRACK, "realised_skill": SKILL}, REALISED)
    assert ("Realised skill against the forecasts of the mean of the training months: 15% over 2 month(s), 4 forecasts "
            "from 2 earlier run(s) (1 − realised MAE of each run's recommended model, 4.25, / realised "
            "MAE of the forecasts of the mean of the training months over the same months and series, 5).") in section
    assert "1 scored forecast(s) of the recommended models have no forecast of the mean of the training months" in section
    # it comes before the table
    assert section.index("Realised skill") < section.index("| run |")


def test_without_baseline_forecasts_the_realised_skill_is_said_to_be_unknown():
    unknown = {**SKILL, "forecasts": 0, "months": 0, "model_mae": None, "baseline_mae": None, "skill": None,
               "runs": 0, "without_baseline": 3, "runs_without_baseline": ["run-1", "run-2"]}
    section = track_record_section({**TRACK, "realised_skill": unknown}, REALISED)
    assert ("Realised skill against the forecasts of the mean of the training months: not known; the ledger holds no "
            "forecast of the mean of the training months beside the 3 scored forecast(s) of the recommended models.") in section


def test_a_track_record_written_before_realised_skill_reads_without_it():
    # TRACK has no realised_skill key, as track_record.json files written before it do
    section = track_record_section(TRACK, REALISED)
    assert "Realised skill" not in section and len(body(section)) == 2
