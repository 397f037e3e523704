"""The per-series view: series.csv, the summary in metrics.json, and the Per series section.

Data: simulated monthly sales (numpy.random.default_rng, fixed seeds) of 32 series whose
driver effect differs from series to series (so one OLS fit per series wins), plus a
series that starts late (too few rows in early windows: a model per series forecasts it
by its mean there), with three future months. References: evaluation.by_series and
evaluation.series_summary held in memory, the run folder's own CSV files read with
pandas, and numpy medians and quantiles.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import ROOT
from statsmodels.stats.multitest import multipletests

import pipeline
from pipeline.present import plots
from pipeline.present.report import TABLE_ROWS, drivers_view, per_series_view

SHORT = "zz-late"
HISTORY, FUTURE = 48, 3


def simulate(series: int, seed: int = 11, late: bool = True) -> pd.DataFrame:
    """Sales = level + slope · x1 + noise; slopes from −3 to 3 across series, levels rising
    with the series number (so the largest series by total are the last ones)."""
    rng = np.random.default_rng(seed)
    months = pd.period_range("2018-01", periods=HISTORY + FUTURE, freq="M")
    frames = []
    names = [f"s{k:02d}" for k in range(series)] + ([SHORT] if late else [])
    for k, name in enumerate(names):
        x1 = rng.normal(0, 1, len(months)).round(4)
        slope = np.linspace(-3, 3, max(series, 2))[k % max(series, 2)]
        sales = 50 + 2 * k + slope * x1 + rng.normal(0, 0.5, len(months))
        sales[HISTORY:] = np.nan
        frame = pd.DataFrame({"month": months.to_timestamp().strftime("%Y-%m-%d"), "shop": name,
                              "x1": x1, "sales": sales.round(4)})
        if name == SHORT:   # only the last 8 months of history and the future
            frame = frame.iloc[HISTORY - 8:]
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def run(folder: Path, frame: pd.DataFrame):
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "data.csv", index=False)
    spec = {"name": "series-view-test",
            "input": {"file": "data.csv", "date_column": "month", "series": ["shop"]},
            "target": "sales", "drivers": {"numeric": ["x1"]},
            "validation": {"method": "rolling_origin", "horizon": 3, "min_train_periods": 24,
                           "origins": 12},   # MIN_ORIGINS: the fewest that give a p-value
            "models": ["ols", {"kind": "ols", "per_series": True}, "seasonal_naive"],
            "output": {"folder": "runs"}}
    (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return pipeline.run(folder / "spec.yaml", output_folder=folder / "runs")


@pytest.fixture(scope="module")
def many(tmp_path_factory):
    return run(tmp_path_factory.mktemp("many"), simulate(32))


@pytest.fixture(scope="module")
def one(tmp_path_factory):
    return run(tmp_path_factory.mktemp("one"), simulate(1, late=False))


def section(html: str, name: str) -> str:
    start = html.index(f'<section id="{name}">')
    return html[start:html.index("</section>", start)]


def test_series_csv_rows_equal_the_evaluation_by_series(many):
    written = pd.read_csv(many.folder.path / "series.csv")
    expected = many.evaluation.by_series.reset_index(drop=True)
    assert list(written.columns) == list(expected.columns)
    assert {"skill_vs_mean", "p_value", "beats", "beats_significantly"} <= set(written.columns)
    # seven models (the mean of the training months, the three listed, and the simple rules a rolling origin
    # always adds: calendar_month_mean, trailing_mean, last_value) and 33 series
    assert len(written) == 7 * 33
    pd.testing.assert_frame_equal(written, expected, check_dtype=False, check_exact=True)


def test_metrics_json_holds_the_per_series_summary(many):
    metrics = json.loads((many.folder.path / "metrics.json").read_text(encoding="utf-8"))
    assert metrics["series_count"] == 33
    assert metrics["significance_level"] == 0.05
    expected = many.evaluation.series_summary
    assert [row["model"] for row in metrics["series_summary"]] == [
        "ols", "ols_per_series", "seasonal_naive", "calendar_month_mean", "trailing_mean", "last_value"]
    for row, (_, want) in zip(metrics["series_summary"], expected.iterrows()):
        for column in expected.columns:
            assert row[column] == (want[column].item() if hasattr(want[column], "item")
                                   else want[column]), column
    # Reference: the shares recomputed from series.csv.
    table = pd.read_csv(many.folder.path / "series.csv")
    own = table[table["model"] == "ols_per_series"]
    row = next(r for r in metrics["series_summary"] if r["model"] == "ols_per_series")
    assert row["beats_share"] == pytest.approx((own["skill_vs_mean"] > 0).mean())
    # Significantly: skill above 0 and the p-value Holm-adjusted across the model's series
    # below 0.05 (statsmodels' multipletests, NaN p-values left out).
    tested = own["p_value"].notna().to_numpy()
    assert tested.sum() == 32   # every series but the late one has the 12 origins a test needs
    adjusted = np.full(len(own), np.nan)
    adjusted[tested] = multipletests(own["p_value"].to_numpy()[tested], method="holm")[1]
    assert row["significant_share"] == pytest.approx(
        ((own["skill_vs_mean"].to_numpy() > 0) & (adjusted < 0.05)).mean())
    assert row["skill_median"] == pytest.approx(np.median(own["skill_vs_mean"]))


def test_the_report_has_the_per_series_section_after_the_backtest(many):
    html = (many.folder.path / "report.html").read_text(encoding="utf-8")
    sections = re.findall(r'<section id="([^"]+)">', html)
    assert sections.index("per-series") == sections.index("backtest") + 1
    part = section(html, "per-series")
    summary = json.loads((many.folder.path / "metrics.json").read_text(encoding="utf-8"))["series_summary"]
    for model in ("ols", "ols_per_series"):   # the linear models; the naive one is left out
        row = next(r for r in summary if r["model"] == model)
        cells = re.search(rf'<tr data-model="{model}">(.*?)</tr>', part).group(1)
        assert f"{row['beats']} of 33 ({row['beats_share']:.1%})" in cells
        assert f"{row['beats_significantly']} of 33 ({row['significant_share']:.1%})" in cells
    assert 'data-model="seasonal_naive"' not in part
    assert "series.csv" in part


def test_the_worst_series_are_the_lowest_skill_of_the_recommended_model(many):
    assert many.evaluation.recommended == "ols_per_series"
    html = (many.folder.path / "report.html").read_text(encoding="utf-8")
    table = re.search(r'<table id="worst-series-table">(.*?)</table>', html, re.S).group(1)
    shown = re.findall(r'<tr><td class="text">([^<]+)</td>', table)
    series = pd.read_csv(many.folder.path / "series.csv")
    own = series[series["model"] == "ols_per_series"].sort_values("skill_vs_mean", kind="stable")
    assert shown == own["series"].head(5).tolist()
    part = section(html, "per-series")
    for name in shown:
        assert f'alt="Line chart of series {name}:' in part


def test_the_report_lists_the_series_that_fell_back_to_their_mean(many):
    fallbacks = pd.read_csv(many.folder.path / "series_fallbacks.csv")
    assert SHORT in set(fallbacks["series"])
    html = (many.folder.path / "report.html").read_text(encoding="utf-8")
    paragraph = re.search(r'<p id="series-fallbacks">(.*?)</p>', html, re.S).group(1)
    assert SHORT in paragraph and "series_fallbacks.csv" in paragraph
    assert f'data-value="{fallbacks["series"].nunique()}"' in paragraph
    summary = (many.folder.path / "summary.md").read_text(encoding="utf-8")
    per_series = summary[summary.index("## Per series"):summary.index("## Forecast")]
    assert SHORT in per_series and "series.csv" in per_series


def test_the_number_of_pictures_is_bounded_and_each_has_a_text_alternative(many):
    html = (many.folder.path / "report.html").read_text(encoding="utf-8")
    alts = re.findall(r'<img src="data:image/(?:png;base64|svg\+xml),[^"]+" alt="([^"]*)"', html)
    assert len(alts) == html.count("<img ")
    # the first screen's forecast, backtest (3), histogram, 5 worst series, forecast, drivers,
    # residual checks (3)
    assert len(alts) <= 15
    assert all(len(alt) > 20 for alt in alts)


def test_the_forecast_picture_shows_the_six_largest_series_and_the_table_is_cut(many):
    html = (many.folder.path / "report.html").read_text(encoding="utf-8")
    part = section(html, "forecast")
    history = pd.read_csv(many.folder.path / "history.csv")
    largest = history.groupby("series")["actual"].sum().sort_values(ascending=False).index[:6]
    alt = re.search(r'alt="([^"]*)"', part).group(1)
    assert "the 6 of 33 series with the largest total actuals" in alt
    assert f"({', '.join(largest)};" in alt
    forecast = pd.read_csv(many.folder.path / "forecast.csv")
    rows = (forecast["model"] == "ols_per_series").sum()
    assert rows == 33 * FUTURE > TABLE_ROWS
    assert part.count("<tr>") - 1 == TABLE_ROWS   # the header row, then the rows shown
    assert f"The first {TABLE_ROWS} of {rows} forecast rows; forecast.csv" in part
    data = section(html, "data")
    assert "and 13 more (fingerprint.json lists them all)" in data


def test_the_drivers_of_a_model_per_series_are_summarised_across_series(many):
    html = (many.folder.path / "report.html").read_text(encoding="utf-8")
    part = section(html, "drivers")
    table = re.search(r'<table id="drivers-across-series">(.*?)</table>', part, re.S).group(1)
    rows = re.findall(r"<tr>(.*?)</tr>", table, re.S)[1:]
    coefficients = pd.read_csv(many.folder.path / "coefficients.csv")
    own = coefficients[coefficients["model"] == "ols_per_series"]
    assert len(rows) == own["term"].nunique() == 2   # intercept and x1, not one row per series
    x1 = own.loc[own["term"] == "x1"]
    cells = re.findall(r'data-value="([^"]*)"', next(r for r in rows if ">x1<" in r))
    assert int(cells[0]) == x1["estimate"].notna().sum()
    assert float(cells[1]) == pytest.approx(np.median(x1["estimate"].dropna()), rel=1e-12)
    assert float(cells[2]) == pytest.approx(np.quantile(x1["estimate"].dropna(), 0.25), rel=1e-12)
    assert float(cells[3]) == pytest.approx(np.quantile(x1["estimate"].dropna(), 0.75), rel=1e-12)
    assert float(cells[4]) == pytest.approx((x1["p_value"].dropna() < 0.05).mean(), rel=1e-12)


def test_series_terms_of_a_pooled_model_are_summarised_with_many_series(many):
    coefficients = pd.read_csv(many.folder.path / "coefficients.csv")
    pooled = coefficients[coefficients["model"] == "ols"]
    levels = pooled[pooled["term"].str.startswith("series: ")]
    assert len(levels) == 32   # each series but the first has a level of its own
    view = drivers_view(coefficients, "ols", 33)
    assert not view["terms"]["term"].str.startswith("series: ").any()
    assert "x1" in set(view["terms"]["term"])
    spread = view["spread"].set_index("term")
    row = spread.loc["series level (each series against the first)"]
    assert row["series"] == 32
    assert row["median estimate"] == pytest.approx(np.median(levels["estimate"]), rel=1e-12)
    # With few series, every term is listed as it is.
    few = drivers_view(coefficients, "ols", 4)
    assert few["spread"] is None and len(few["terms"]) == len(pooled)


def test_the_report_and_summary_are_rebuilt_byte_for_byte_from_the_folder(many, tmp_path):
    # Both pages come from the run folder's files alone: without the run's memory, castline
    # report writes them again exactly as the run did.
    copy = tmp_path / "copy"
    shutil.copytree(many.folder.path, copy)
    (copy / "report.html").unlink()
    (copy / "summary.md").unlink()
    environment = {**os.environ, "PYTHONPATH": str(ROOT)}   # this checkout's code
    done = subprocess.run([sys.executable, "-m", "pipeline", "report", str(copy)],
                          capture_output=True, text=True, cwd=tmp_path, env=environment)
    assert done.returncode == 0, done.stderr
    assert (copy / "report.html").read_bytes() == (many.folder.path / "report.html").read_bytes()
    assert (copy / "summary.md").read_bytes() == (many.folder.path / "summary.md").read_bytes()
    assert f"summary: {copy / 'summary.md'}" in done.stdout and f"report: {copy / 'report.html'}" in done.stdout


def test_a_one_series_run_has_no_per_series_section(one):
    html = (one.folder.path / "report.html").read_text(encoding="utf-8")
    assert 'id="per-series"' not in html and "<h2>Per series</h2>" not in html
    summary = (one.folder.path / "summary.md").read_text(encoding="utf-8")
    assert "## Per series" not in summary
    # The file is still written: one row per model (seven, the simple rules too) for the one series.
    written = pd.read_csv(one.folder.path / "series.csv")
    assert len(written) == 7 and written["series"].nunique() == 1


def small_series_table() -> pd.DataFrame:
    rows = []
    skills = {"ols": [0.2, -0.4, 0.1], "ridge": [-0.1, 0.3, -0.2], "drift": [-0.9, -0.8, -0.7]}
    for model, values in [("mean_baseline", [0.0, 0.0, 0.0]), *skills.items()]:
        for name, skill in zip(["a", "b", "c"], values):
            rows.append({"model": model, "series": name, "mae": 1 - skill, "skill_vs_mean": skill,
                         "p_value": np.nan if model == "mean_baseline" else 0.5})
    return pd.DataFrame(rows)


def summary_of(table: pd.DataFrame) -> list[dict]:
    return [{"model": m, "series": 3, "beats": int((own["skill_vs_mean"] > 0).sum()),
             "beats_significantly": 0, "skill_q25": 0.0, "skill_median": 0.0, "skill_q75": 0.0}
            for m, own in table.groupby("model", sort=False) if m != "mean_baseline"]


def test_when_the_mean_baseline_wins_the_worst_series_are_those_of_the_best_other_model():
    table = small_series_table()
    rows = [{"model": "mean_baseline", "mae": 1.0}, {"model": "ols", "mae": 1.2},
            {"model": "ridge", "mae": 1.1}, {"model": "drift", "mae": 1.5}]
    view = per_series_view(table, summary_of(table), None, rows=rows, recommended="mean_baseline",
                           select_by="mae", level=0.05, series_count=3)
    assert view["models"] == ["ols", "ridge"]          # the linear models; drift is naive
    assert list(view["summary"]["model"]) == ["ols", "ridge"]
    assert view["featured"] == "ridge"                  # lowest MAE after the mean of the training months
    assert view["worst"]["series"].tolist() == ["c", "a", "b"]   # ridge's skills −0.2, −0.1, 0.3
    # A naive model recommended is the one whose worst series are shown.
    assert per_series_view(table, summary_of(table), None, rows=rows, recommended="drift",
                           select_by="mae", level=0.05, series_count=3)["featured"] == "drift"


def test_no_per_series_view_for_one_series_or_for_the_mean_baseline_alone():
    table = small_series_table()
    assert per_series_view(table, summary_of(table), None, rows=[], recommended="ols",
                           select_by="mae", level=0.05, series_count=1) is None
    alone = table[table["model"] == "mean_baseline"]
    assert per_series_view(alone, [], None, rows=[], recommended="mean_baseline",
                           select_by="mae", level=0.05, series_count=3) is None


def test_a_series_name_with_dollar_signs_is_drawn_as_text():
    history = pd.DataFrame({"period": [str(p) for p in pd.period_range("2020-01", periods=6, freq="M")],
                            "series": "a$_$b", "actual": np.arange(6.0)})
    predictions = pd.DataFrame({"period": history["period"].iloc[-2:].tolist() * 2, "series": "a$_$b",
                                "horizon": [1, 2, 1, 2], "model": ["ols"] * 2 + ["mean_baseline"] * 2,
                                "prediction": [4.0, 5.0, 3.0, 3.0]})
    picture = plots.series_picture(history, predictions, "a$_$b", "ols", -0.5, ["mean_baseline", "ols"])
    assert picture.uri.startswith(("data:image/png;base64,", "data:image/svg+xml,")) and "a$_$b" in picture.alt


def test_a_dollar_sign_in_a_series_name_is_drawn_as_text_in_the_forecast_picture():
    # matplotlib reads text between two '$' as maths (its mathtext, from its documentation):
    # "a$_$b" would fail to parse as a panel title; castline escapes it.
    history = pd.DataFrame({"period": [str(p) for p in pd.period_range("2024-01", periods=6, freq="M")],
                            "series": "a$_$b", "actual": np.arange(6.0)})
    forecast = pd.DataFrame({"period": ["2024-07", "2024-08"], "series": "a$_$b", "model": "ols",
                             "horizon": [1, 2], "forecast": [6.0, 7.0],
                             "analytic_low_80": [5.0, 6.0], "analytic_high_80": [7.0, 8.0],
                             "analytic_low_95": [4.0, 5.0], "analytic_high_95": [8.0, 9.0]})
    picture = plots.forecast_picture(history, forecast, "ols", "analytic", None)
    assert picture.uri.startswith(("data:image/png;base64,", "data:image/svg+xml,")) and "a$_$b" in picture.alt


def test_the_pictures_draw_the_fitted_models_the_mean_and_the_rules_that_matter():
    # The catalogue's families decide: simple rules other than the mean of the training months are drawn only
    # when kept (the best rule, the recommended model); fitted models and unknown names always.
    from pipeline.present.report import pictured_models
    every = ["mean_baseline", "ols", "calendar_month_mean", "trailing_mean", "last_value",
             "seasonal_naive", "ridge", "someone_elses"]
    assert pictured_models(every, ("calendar_month_mean", "ols")) == [
        "mean_baseline", "ols", "calendar_month_mean", "ridge", "someone_elses"]
    assert pictured_models(every, ("mean_baseline", "last_value")) == [
        "mean_baseline", "ols", "last_value", "ridge", "someone_elses"]


def test_the_backtest_picture_draws_the_recommended_model_and_its_two_references():
    # metrics.json's recommended model and best rule decide; a fitted model joins only when the
    # mean baseline is recommended (then the fitted model with the best score, by select_by).
    from pipeline.present.report import backtest_models
    every = ["mean_baseline", "ols", "calendar_month_mean", "ridge", "lasso"]
    rows = [{"model": "mean_baseline", "mae": 5.0}, {"model": "ols", "mae": 3.0},
            {"model": "calendar_month_mean", "mae": 4.0}, {"model": "ridge", "mae": 2.5},
            {"model": "lasso", "mae": 2.9}]
    assert backtest_models(every, rows, "ols", "calendar_month_mean", "mae") == [
        "mean_baseline", "ols", "calendar_month_mean"]
    assert backtest_models(every, rows, "mean_baseline", "calendar_month_mean", "mae") == [
        "mean_baseline", "calendar_month_mean", "ridge"]
