"""pipeline/present/summary.py: summary.md from a run folder's files.

The references are the folder's own files (metrics.json, forecast.csv), each number written as
pipeline.core.formatting.format_number writes it (the one formatter the README's pages share),
and the README's list of the summary's sections. Runs on the tiny invented data (plumbing only).
"""

from __future__ import annotations

import json
import shutil

import pandas as pd
from conftest import tiny_data, write_tiny_spec

import pipeline
from pipeline.core.catalogue import SCORES
from pipeline.core.formatting import format_number
from pipeline.present.run_files import load_run_files
from pipeline.present.summary import render_summary


def table_rows(text: str, heading: str) -> list[list[str]]:
    """Return the body rows of the first Markdown table after a heading, cell by cell."""
    lines = text.split(f"\n{heading}\n", 1)[1].splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("| "))
    rows = []
    for line in lines[start + 2:]:
        if not line.startswith("|"):
            break
        rows.append([cell.strip() for cell in line.strip("|").split(" | ")])
    return rows


# The comparison's headings in words (README): each column name and the words heading it.
HEADINGS = {"model": "model", "n": "forecasts scored", "mae": "MAE", "rmse": "RMSE", "mape": "MAPE",
            "smape": "sMAPE", "wape": "WAPE", "mase": "MASE", "r2": "R²", "bias": "bias",
            "skill_vs_mean": "skill against the mean"}
MODEL_WORDS = {"mean_baseline": "mean of the training months", "ols": "OLS",
               "calendar_month_mean": "calendar-month average",
               "trailing_mean": "trailing 12-month mean", "last_value": "last value",
               "seasonal_naive": "same month last year"}


def markdown_tables_after(text: str, heading: str) -> list[tuple[list[str], list[list[str]]]]:
    """Return the (header, body rows) of every Markdown table between a heading and the next."""
    part = text.split(f"\n{heading}\n", 1)[1].split("\n## ", 1)[0]
    tables, lines = [], part.splitlines()
    for index, line in enumerate(lines):
        if line.startswith("| ") and (index == 0 or not lines[index - 1].startswith("|")):
            body = []
            for row in lines[index + 2:]:
                if not row.startswith("|"):
                    break
                body.append([cell.strip() for cell in row.strip("|").split(" | ")])
            tables.append(([cell.strip() for cell in line.strip("|").split(" | ")], body))
    return tables


def test_the_comparison_tables_hold_metrics_json_as_format_number_writes_it(tiny_runs):
    folder = tiny_runs[2][1][0].folder.path
    summary = render_summary(load_run_files(folder))
    models = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))["models"]
    heading = next(line for line in summary.splitlines() if line.startswith("## Model comparison"))
    tables = markdown_tables_after(summary, heading)
    assert len(tables) == 2
    words = {v: k for k, v in HEADINGS.items()}
    seen = set()
    for header, rows in tables:
        assert [row[0] for row in rows] == [MODEL_WORDS[m["model"]] for m in models]
        for position, label in enumerate(header):
            if label not in words or label == "model":
                continue
            column = words[label]
            seen.add(column)
            assert [row[position] for row in rows] == [format_number(m[column]) for m in models], column
    assert seen == set(SCORES)


def test_the_answer_names_the_recommended_model_and_the_run(tiny_runs):
    folder = tiny_runs[2][1][0].folder.path
    metrics = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))
    summary = render_summary(load_run_files(folder))
    assert summary.startswith(f"# tiny: forecast run {metrics['run_id']}\n")
    assert f"Recommended model: **{MODEL_WORDS[metrics['recommended']]}**" in summary   # the catalogue's words
    assert metrics["verdict"] in summary


def test_the_forecast_table_is_the_recommended_models_forecast(tiny_runs):
    folder = tiny_runs[2][1][0].folder.path
    recommended = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))["recommended"]
    forecast = pd.read_csv(folder / "forecast.csv")
    own = forecast[forecast["model"] == recommended]
    rows = table_rows(render_summary(load_run_files(folder)), "## Forecast")
    assert [row[0] for row in rows] == list(own["period"])
    assert [row[2] for row in rows] == [format_number(float(v)) for v in own["forecast"]]


def test_sections_in_order_with_the_track_record_before_the_data(tiny_runs):
    summary = render_summary(load_run_files(tiny_runs[2][1][0].folder.path))
    headings = [line for line in summary.splitlines() if line.startswith("## ")]
    assert headings[0] == "## The answer"
    assert headings.index("## Track record") + 1 == headings.index("## Data")
    assert headings[-1] == "## Cautions"


def test_without_track_record_json_the_summary_has_no_track_record(tiny_runs, tmp_path):
    copy = tmp_path / "run"
    shutil.copytree(tiny_runs[2][0][0].folder.path, copy)
    (copy / "track_record.json").unlink()
    summary = render_summary(load_run_files(copy))
    assert "## Track record" not in summary and "## Data" in summary


def test_series_names_with_leading_zeros_are_shown_as_written(tmp_path):
    spec = write_tiny_spec(tmp_path, tiny_data(regions=("007", "010")), actuals_to="2021-12")
    result = pipeline.run(spec)
    rows = table_rows(render_summary(load_run_files(result.folder.path)), "## Forecast")
    assert {row[1] for row in rows} == {"007", "010"}
