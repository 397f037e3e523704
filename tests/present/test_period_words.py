"""The pages' words, labels and date axes follow the run's period (issue 24): quarterly and weekly
runs read "quarters ahead", "same week last year", "2024Q1", "2024-W05"; monthly runs keep their words.

The monthly words compared here are the catalogue's labels and the pages' sentences as castline
wrote them before periods other than months existed (tests/data/same_output holds whole pages
of them). Quarter and ISO week labels follow ISO 8601 (weeks Monday to Sunday, week 1 holding
the year's first Thursday).
"""

from __future__ import annotations

import matplotlib.dates as mdates
import numpy as np
import pandas as pd
import pytest

from pipeline.core.cadence import MONTH, QUARTER, WEEK, cadence_of_labels, first_days, ordinal_of, year_before
from pipeline.core.catalogue import column_label, model_label
from pipeline.core.formatting import markdown_table
from pipeline.present import plots
from pipeline.present.first_screen import _a_year_earlier, forecast_glance, next_months
from pipeline.present.history_page import unchanged_words
from pipeline.present.report import cautions, held_by_view
from pipeline.present.templating import page_environment
from pipeline.present.track_record import first_run_words, skill_words, track_record_view


def labels(cadence, first: str, count: int) -> list[str]:
    start = cadence.parse(first).ordinal
    return cadence.labels(range(start, start + count))


# --- model labels -------------------------------------------------------------------------------

MONTHLY_LABELS = {   # the catalogue's labels before they became templates
    "mean_baseline": "mean of the training months", "calendar_month_mean": "calendar-month average",
    "trailing_mean": "trailing 12-month mean", "seasonal_naive": "same month last year",
    "ols": "OLS", "ols_per_series": "OLS per series", "last_value": "last value",
}


@pytest.mark.parametrize("cadence", [None, MONTH])
def test_monthly_model_labels_are_word_for_word_as_before(cadence):
    assert {name: model_label(name, cadence) for name in MONTHLY_LABELS} == MONTHLY_LABELS


def test_quarterly_and_weekly_model_labels_name_their_period():
    assert model_label("seasonal_naive", QUARTER) == "same quarter last year"
    assert model_label("calendar_month_mean", QUARTER) == "calendar-quarter average"
    assert model_label("trailing_mean", QUARTER) == "trailing 4-quarter mean"
    assert model_label("mean_baseline", QUARTER) == "mean of the training quarters"
    assert model_label("seasonal_naive", WEEK) == "same week last year"
    assert model_label("trailing_mean", WEEK) == "trailing 52-week mean"
    assert model_label("mean_baseline", WEEK) == "mean of the training weeks"
    assert model_label("ols_per_series", WEEK) == "OLS per series"
    assert model_label("not-a-model", WEEK) == "not-a-model"


def test_column_labels_name_the_period():
    assert column_label("last_period") == column_label("last_period", MONTH) == "last actual month"
    assert column_label("last_period", WEEK) == "last actual week"
    assert column_label("months_ahead", QUARTER) == "quarters_ahead"
    assert column_label("months_ahead") == column_label("months_ahead", MONTH) == "months_ahead"
    assert column_label("seasonal_naive", QUARTER) == "same quarter last year"


# --- labels read back -----------------------------------------------------------------------------

def test_a_year_before_is_12_months_4_quarters_or_52_weeks_back():
    assert year_before("2024-03") == "2023-03"
    assert year_before("2024Q1") == "2023Q1"
    assert year_before("2024-W05") == "2023-W05"
    # 52 weeks (364 days) back from ISO week 2021-W01 (Monday 2021-01-04) is Monday 2020-01-06,
    # in ISO week 2020-W02: ISO year 2020 has 53 weeks, so the week number shifts by one.
    assert year_before("2021-W01") == "2020-W02"


def test_labels_say_their_spacing_and_their_first_day():
    assert cadence_of_labels(["2024Q3", "2024Q4"]) is QUARTER
    assert cadence_of_labels([None, "2025-W01"]) is WEEK
    assert cadence_of_labels(["not a period"]) is MONTH
    assert list(first_days(["2024Q2", "2024Q3"])) == [pd.Timestamp("2024-04-01"), pd.Timestamp("2024-07-01")]
    # ISO week 2025-W01 starts on Monday 2024-12-30.
    assert list(first_days(["2025-W01", "2024-W05"])) == [pd.Timestamp("2024-12-30"), pd.Timestamp("2024-01-29")]
    assert ordinal_of("2024-W06") - ordinal_of("2024-W05") == 1
    assert ordinal_of("2025Q1") - ordinal_of("2024Q4") == 1


# --- the first screen ------------------------------------------------------------------------------

def quarterly_frames():
    past = labels(QUARTER, "2021Q1", 12)          # 2021Q1 .. 2023Q4
    ahead = labels(QUARTER, "2024Q1", 4)
    history = pd.DataFrame({"period": past, "series": "a", "actual": np.arange(1.0, 13.0)})
    stated = pd.DataFrame({"period": ahead, "series": "a", "forecast": [20.0, 21.0, 22.0, 23.0],
                           "80% from": 1.0, "80% to": 2.0, "95% from": 0.5, "95% to": 2.5})
    return history, stated


def test_the_first_screens_numbers_are_headed_by_the_quarter_and_compared_with_the_same_quarters():
    history, stated = quarterly_frames()
    table = next_months(stated, "a")
    assert list(table.columns[:2]) == ["quarter", "forecast"]
    assert list(table["quarter"]) == ["2024Q1", "2024Q2", "2024Q3"]
    # The same quarters a year earlier are 2023Q1..2023Q3: actuals 9, 10 and 11.
    assert _a_year_earlier(history, "a", ["2024Q1", "2024Q2", "2024Q3"]) == 30.0
    alt = forecast_glance(history, stated, "a", "seasonal_naive", "empirical").alt
    assert "the last 8 quarters of actuals" in alt              # two years: 8 quarters
    assert "same quarter last year forecast for the next 4 quarters" in alt
    assert "The next 3 quarters are forecast at 63 in all" in alt
    assert ", 110% against the same quarters a year earlier (30)" in alt   # 63 / 30 − 1
    assert "month" not in alt


def test_the_monthly_first_screen_keeps_its_words():
    past = labels(MONTH, "2022-01", 24)
    history = pd.DataFrame({"period": past, "series": "a", "actual": 10.0})
    stated = pd.DataFrame({"period": labels(MONTH, "2024-01", 3), "series": "a", "forecast": 11.0,
                           "80% from": 1.0, "80% to": 2.0, "95% from": 0.5, "95% to": 2.5})
    assert list(next_months(stated, "a").columns[:1]) == ["month"]
    alt = forecast_glance(history, stated, "a", "ols", "analytic").alt
    assert alt.startswith("Line chart of the last 24 months of actuals of a and the OLS forecast for the "
                          "next 3 months")
    assert ", 10% against the same months a year earlier (30)" in alt


def test_weekly_history_a_year_earlier_matches_52_weeks_back():
    past = labels(WEEK, "2023-W01", 60)
    history = pd.DataFrame({"period": past, "series": "a", "actual": np.arange(60.0)})
    # 2024-W05 is 52 weeks after 2023-W05, whose actual is its place in the list: 4.
    assert _a_year_earlier(history, "a", ["2024-W05"]) == 4.0


# --- pictures --------------------------------------------------------------------------------------

def tick_texts(cadence, shown: list[str]) -> list[str]:
    figure, axis = plots._subplots(figsize=(6, 3))
    axis.plot(first_days(shown), np.arange(len(shown)))
    plots.date_axis(axis, cadence=cadence)
    low, high = axis.get_xlim()
    return [t.get_text() for t, x in zip(axis.get_xticklabels(), axis.get_xticks()) if low <= x <= high]


def test_a_quarterly_axis_is_ticked_at_quarters_written_as_castline_writes_them():
    assert tick_texts(QUARTER, labels(QUARTER, "2023Q1", 6)) == [
        "2023Q1", "2023Q2", "2023Q3", "2023Q4", "2024Q1", "2024Q2"]
    # Eight quarters are more than 7 ticks: every second quarter, from a first quarter.
    assert tick_texts(QUARTER, labels(QUARTER, "2023Q1", 8)) == ["2023Q1", "2023Q3", "2024Q1", "2024Q3"]
    years = tick_texts(QUARTER, labels(QUARTER, "2015Q1", 40))
    assert years[0] == "2015Q1" and all(text.endswith("Q1") for text in years) and len(years) <= 7


def test_a_weekly_axis_is_ticked_at_iso_weeks():
    texts = tick_texts(WEEK, labels(WEEK, "2024-W01", 10))
    assert texts[0] == "2024-W01" and len(texts) <= 7
    assert all(WEEK.parse(text).start_time.day_of_week == 0 for text in texts)   # each a Monday's week
    long = tick_texts(WEEK, labels(WEEK, "2022-W01", 120))
    assert long[:3] == ["2022-W01", "2022-W27", "2023-W01"]


def test_the_monthly_axis_keeps_matplotlibs_date_ticks():
    figure, axis = plots._subplots(figsize=(6, 3))
    axis.plot(first_days(labels(MONTH, "2023-01", 24)), np.arange(24))
    plots.date_axis(axis)
    assert isinstance(axis.xaxis.get_major_locator(), mdates.AutoDateLocator)


def backtest_frames(cadence, first: str):
    periods = labels(cadence, first, 16)
    history = pd.DataFrame({"period": periods, "series": "a", "actual": np.arange(16.0)})
    scored = periods[-4:]
    rows = []
    for horizon in (1, 2):
        for period in scored:
            for model in ("mean_baseline", "seasonal_naive"):
                rows.append({"origin": f"o{horizon}", "period": period, "horizon": horizon, "series": "a", "model": model,
                             "actual": float(periods.index(period)), "prediction": 1.0})
    return history, pd.DataFrame(rows)


def test_the_backtest_picture_speaks_of_weeks_for_weekly_labels():
    history, predictions = backtest_frames(WEEK, "2024-W40")
    alt = plots.backtest_picture(history, predictions).alt
    # 2024-W40 and 15 weeks after it: 2024 has 52 ISO weeks, so the last four are 2024-W52 to 2025-W03.
    assert "made 1 week ahead (4 weeks, 2024-W52 to 2025-W03) and 2 weeks ahead (4 weeks" in alt
    assert "2 weeks ahead" in alt and "per series and week" in alt
    assert "same week last year" in alt and "mean of the training weeks" in alt
    assert "month" not in alt


def test_the_track_record_picture_counts_quarters_ahead():
    scored = pd.DataFrame({"horizon": [1, 2], "forecast_created": "t", "forecast_run_id": "r",
                           "period": ["2024Q1", "2024Q2"], "series": "a", "error": [5.0, -1.0],
                           "backtest_low_95": [-1.0, -2.0], "backtest_high_95": [1.0, 2.0]})
    alt = plots.track_record_picture(scored, QUARTER).alt
    assert "by quarters ahead" in alt and "1 at 1 quarter(s) ahead" in alt
    assert "(2024Q1, a, 1 quarter(s) ahead)" in alt


# --- the pages' sections ----------------------------------------------------------------------------

def test_held_by_is_headed_by_the_periods_ahead():
    detail = pd.DataFrame({"model": "ols", "method": "empirical", "by": "months ahead", "group": ["1", "2"],
                           "level": 0.8, "coverage": [0.75, 0.8], "n": [10, 10]})
    assert list(held_by_view(detail, "ols", "empirical", QUARTER)["tables"][0].columns[:1]) == ["quarters ahead"]
    assert list(held_by_view(detail, "ols", "empirical")["tables"][0].columns[:1]) == ["months ahead"]


def test_cautions_name_the_period():
    assert "the next weeks can be further off" in cautions(WEEK)[0]
    assert "the next months can be further off" in cautions()[0]


SKILL = {"forecasts": 8, "months": 4, "runs": 2, "model_mae": 1.0, "baseline_mae": 2.0, "skill": 0.5,
         "without_baseline": 0}


def test_track_record_words_and_tables_name_weeks():
    words = skill_words(SKILL, WEEK)
    assert "over 4 week(s), 8 forecasts from 2 earlier run(s)" in words
    assert "forecasts of the mean of the training weeks over the same weeks and series" in words
    assert "month" not in words
    assert "months' actuals arrive" in first_run_words({"ledger": "l"})
    assert "weeks' actuals arrive" in first_run_words({"ledger": "l"}, WEEK)
    realised = pd.DataFrame({
        "forecast_run_id": "r1", "forecast_created": "t", "model": "ols", "period": ["2024-W05", "2024-W06"],
        "series": "a", "horizon": [1, 2], "forecast": 2.0, "actual": 1.0, "error": 1.0, "expected_mae": 1.0,
        "inside_80": True, "inside_95": True, "within_backtest_95": True, "backtest_low_95": -2.0,
        "backtest_high_95": 2.0})
    track = {"warnings": [], "earlier_runs": 1, "ledger": "l", "recommended": {"r1": "ols"},
             "realised_skill": {**SKILL, "by_run": [{"forecast_run_id": "r1", "model": "ols", "forecasts": 2,
                                                     "months": 2, "model_mae": 1.0, "baseline_mae": 2.0,
                                                     "skill": 0.5}]}}
    view = track_record_view(track, realised, rows_shown=10, cadence=WEEK)
    assert "weeks ahead" in view["forecasts"].columns and "weeks ahead" in view["by_horizon"].columns
    assert list(view["by_run"]["weeks"]) == [2]


def test_the_page_templates_label_models_by_the_views_period_even_in_imported_tables():
    frame = pd.DataFrame({"model": ["seasonal_naive", "trailing_mean"], "mae": [1.0, 2.0]})
    template = page_environment().from_string(
        '{% from "_tables.html.j2" import table with context %}{{ table(frame) }}')
    quarterly = template.render(frame=frame, period=QUARTER)
    assert "same quarter last year" in quarterly and "trailing 4-quarter mean" in quarterly
    monthly = template.render(frame=frame)
    assert "same month last year" in monthly and "trailing 12-month mean" in monthly


def test_the_markdown_tables_follow_the_period():
    frame = pd.DataFrame({"model": ["seasonal_naive"], "last_period": ["2024Q1"]})
    assert "same quarter last year" in markdown_table(frame, QUARTER)
    assert "| last actual quarter |" in markdown_table(frame, QUARTER)
    assert markdown_table(frame) == markdown_table(frame, MONTH)
    assert "same month last year" in markdown_table(frame)


def test_the_history_pages_unchanged_words_name_the_period():
    table = pd.DataFrame({"from": ["a"], "to": ["b"], "data": ["x"]})
    assert "no planned driver changed in a quarter two runs both forecast" in unchanged_words(table, QUARTER)
    assert "no planned driver changed in a month two runs both forecast" in unchanged_words(table)


# --- whole pages of a quarterly run folder ------------------------------------------------------------

def _as_quarters(folder) -> None:
    """Rewrite a monthly run folder's period labels as consecutive quarters (2010Q1 for 2020-01 on),
    as a quarterly run would have written them; everything else stays."""
    import json
    shift = QUARTER.parse("2010Q1").ordinal - MONTH.parse("2020-01").ordinal

    def quarter(label):
        return QUARTER.label(MONTH.parse(str(label)).ordinal + shift)

    for path in folder.glob("*.csv"):
        frame = pd.read_csv(path, dtype=str, keep_default_na=False)
        if "period" in frame.columns:
            frame["period"] = [quarter(p) if p else p for p in frame["period"]]
            frame.to_csv(path, index=False)
    fingerprint = json.loads((folder / "fingerprint.json").read_text(encoding="utf-8"))
    for key in ("first_period", "last_period"):
        fingerprint[key] = quarter(fingerprint[key])
    (folder / "fingerprint.json").write_text(json.dumps(fingerprint), encoding="utf-8")


def test_the_pages_of_a_quarterly_run_folder_speak_of_quarters(tiny_runs, tmp_path):
    import html
    import json
    import shutil

    from pipeline.present.pages import render_pages
    from pipeline.present.run_files import load_run_files
    result = tiny_runs[2][2][0]
    folder = tmp_path / "run"
    shutil.copytree(result.folder.path, folder)
    monthly = render_pages(folder)
    _as_quarters(folder)
    assert load_run_files(folder).cadence() is QUARTER
    pages = render_pages(folder)
    # The verdict was written into metrics.json by the (monthly) run itself: left out here.
    verdict = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))["verdict"]
    summary, report = pages["summary.md"].replace(verdict, ""), pages["report.html"].replace(html.escape(verdict), "")
    assert "### The next 3 quarters" in summary and "### The next 3 months" in monthly["summary.md"]
    assert "same-quarter-last-year forecast" in summary
    assert "mean of the training quarters" in summary and "mean of the training months" not in summary
    assert "<h3>The next 3 quarters" in report and 'data-column="quarter"' in report
    assert "the mean of the training quarters first" in report
    assert "<li>quarters: 2010Q" in report and "<li>months: 2020-" in monthly["report.html"]
    assert "the next quarters can be further off" in report
    assert "mean of the training months" not in report
    assert "<h3>By quarters ahead</h3>" in report and "same quarter last year" in report


def test_a_week_label_reads_back_as_that_week():
    # ISO 8601: week 5 of 2024 runs from Monday 29 January to Sunday 4 February.
    assert cadence_of_labels(["2024-W05"]) is WEEK
    assert year_before("2024-W05") == "2023-W05"     # 364 days back: Monday 30 January 2023
    assert list(first_days(["2024-W05"])) == [pd.Timestamp("2024-01-29")]
    assert ordinal_of("2024-W05") == pd.Period("2024-01-29", freq="W-SUN").ordinal
