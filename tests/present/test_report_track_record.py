"""pipeline/present/track_record.py and report.py: report.html's Track record section.

Plumbing on conftest's tiny invented data (two series), run three times into one ledger:

1. actuals to 2021-09, forecasting 2021-10..12 (the first run: no track record yet);
2. actuals to 2021-12, forecasting 2022-01..03 (scores run 1's forecasts);
3. actuals to 2022-03, North's actuals from 2022-01 raised by 15 (invented), so run 2's forecasts of
   North miss by far more than its backtest's errors and the track record warns.

Every expected figure is recomputed here with pandas from the files the runs wrote (forecast.csv,
metrics.json, realised.csv, track_record.json) and the data each run read, never taken from the
section's own code.
"""

from __future__ import annotations

import html
import json
import re
from html.parser import HTMLParser
from pathlib import Path
from xml.etree import ElementTree

import pandas as pd
import pytest
from conftest import tiny_data, write_tiny_spec

import pipeline
from pipeline.core.catalogue import model_label
from pipeline.core.formatting import format_percent, format_signed
from pipeline.present import plots, report
from pipeline.present.pages import render_pages
from pipeline.present.track_record import track_record_view

SHIFT = 15.0


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> list[tuple[Path, pd.DataFrame]]:
    """Return [(run folder, the data.csv it read as a table)], oldest first."""
    base = tmp_path_factory.mktemp("track_record_runs")
    data = tiny_data(regions=("North", "South"))
    shifted = data.copy()
    late_north = (shifted["month"] >= "2022-01-01") & (shifted["region"] == "North")
    shifted.loc[late_north, "y"] = (shifted.loc[late_north, "y"] + SHIFT).round(2)
    folders = []
    for frame, cut in [(data, "2021-09"), (data, "2021-12"), (shifted, "2022-03")]:
        result = pipeline.run(write_tiny_spec(base, frame, actuals_to=cut))
        folders.append((result.folder.path, pd.read_csv(base / "data.csv")))
    return folders


class _Page(HTMLParser):
    """Collect the tables (by id: the cells' data-value attributes and texts) and the images."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: dict[str, list[list[tuple[str | None, str]]]] = {}
        self.headings: dict[str, list[str]] = {}
        self.images: list[dict] = []
        self._table: str | None = None
        self._row: list | None = None
        self._cell: list | None = None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "img":
            self.images.append(attrs)
        elif tag == "table":
            self._table = attrs.get("id") or f"table{len(self.tables)}"
            self.tables[self._table], self.headings[self._table] = [], []
        elif tag == "tr" and self._table:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = [attrs.get("data-value"), ""]

    def handle_data(self, data):
        if self._cell is not None:
            self._cell[1] += data

    def handle_endtag(self, tag):
        if tag == "th" and self._cell is not None:
            self.headings[self._table].append(self._cell[1])
            self._cell = None
        elif tag == "td" and self._cell is not None:
            self._row.append(tuple(self._cell))
            self._cell = None
        elif tag == "tr" and self._row is not None:
            if self._row:
                self.tables[self._table].append(self._row)
            self._row = None
        elif tag == "table":
            self._table = None


def section(folder: Path) -> str:
    """Return the report's Track record section (its HTML)."""
    page = (folder / "report.html").read_text(encoding="utf-8")
    found = re.search(r'<section id="track-record">.*?</section>', page, flags=re.S)
    assert found, "the report has no Track record section"
    return found.group(0)


def parsed(text: str) -> _Page:
    page = _Page()
    page.feed(text)
    return page


def frame_of(page: _Page, table: str) -> pd.DataFrame:
    """Return a table of the page with its headings: numbers from data-value, else the text."""
    rows = [[float(value) if value not in (None, "") else text for value, text in row]
            for row in page.tables[table]]
    return pd.DataFrame(rows, columns=page.headings[table])


def recommended_of(folder: Path) -> str:
    return json.loads((folder / "metrics.json").read_text(encoding="utf-8"))["recommended"]


def actuals_of(data: pd.DataFrame) -> pd.DataFrame:
    read = data.dropna(subset=["y"])
    return pd.DataFrame({"period": read["month"].str[:7], "series": read["region"], "actual": read["y"]})


def scored_by_pandas(runs) -> pd.DataFrame:
    """Return runs 1 and 2's recommended forecasts joined to run 3's actuals, with each run's id
    and the MAE its backtest found at that many months ahead (metrics.json by_horizon)."""
    actuals = actuals_of(runs[2][1])
    frames = []
    for folder, _ in runs[:2]:
        recommended = recommended_of(folder)
        forecast = pd.read_csv(folder / "forecast.csv", dtype={"series": str})
        own = forecast[forecast["model"] == recommended].merge(actuals, on=["period", "series"])
        by_horizon = pd.DataFrame(json.loads((folder / "metrics.json").read_text(encoding="utf-8"))["by_horizon"])
        expected = by_horizon[by_horizon["model"] == recommended].set_index("horizon")["mae"]
        frames.append(own.assign(run=folder.name, model=recommended,
                                 error=own["forecast"] - own["actual"],
                                 expected=own["horizon"].map(expected)))
    return pd.concat(frames, ignore_index=True)


def test_a_first_runs_report_says_there_is_no_track_record_yet(runs):
    first, _ = runs[0]
    text = section(first)
    assert "This is the first run of this spec in the ledger" in html.unescape(text)
    assert str(first.parent / "ledger.sqlite") in html.unescape(text)
    page = parsed(text)
    assert page.tables == {} and page.images == []
    assert 'id="track-record-flag"' not in (first / "report.html").read_text(encoding="utf-8")


def test_realised_mae_bias_and_expected_mae_by_months_ahead_equal_pandas_on_the_runs_files(runs):
    last, _ = runs[2]
    mine = scored_by_pandas(runs)
    expected = mine.groupby(["run", "horizon"]).agg(
        forecasts=("error", "size"), mae=("error", lambda e: e.abs().mean()), bias=("error", "mean"),
        expected=("expected", "first")).reset_index()
    shown = frame_of(parsed(section(last)), "track-record-by-horizon")
    assert list(shown["run"]) == list(expected["run"]) == [runs[0][0].name] * 3 + [runs[1][0].name] * 3
    assert list(shown["model"]) == list(mine.drop_duplicates(["run", "horizon"])["model"].map(model_label))
    assert list(shown["months ahead"]) == list(expected["horizon"].astype(float))
    assert list(shown["forecasts"]) == list(expected["forecasts"].astype(float)) == [2.0] * 6
    assert shown["realised MAE"].to_numpy() == pytest.approx(expected["mae"].to_numpy())
    assert shown["realised bias"].to_numpy() == pytest.approx(expected["bias"].to_numpy())
    assert shown["expected MAE"].to_numpy() == pytest.approx(expected["expected"].to_numpy())


def test_interval_hits_are_the_shares_of_actuals_inside_the_stated_intervals_of_realised_csv(runs):
    last, _ = runs[2]
    realised = pd.read_csv(last / "realised.csv", dtype={"series": str})
    recommended = {folder.name: recommended_of(folder) for folder, _ in runs[:2]}
    own = realised[realised["model"] == realised["forecast_run_id"].map(recommended)]
    for level in ("80", "95"):
        own = own.assign(**{f"in_{level}": (own["actual"] >= own[f"low_{level}"])
                            & (own["actual"] <= own[f"high_{level}"])})
    shares = own.groupby(["forecast_run_id", "horizon"])[["in_80", "in_95"]].mean().reset_index()
    shown = frame_of(parsed(section(last)), "track-record-by-horizon")
    assert own[["low_80", "high_80", "low_95", "high_95"]].notna().all().all()   # every interval stated
    assert shown["inside 80%"].to_numpy() == pytest.approx(shares["in_80"].to_numpy())
    assert shown["inside 95%"].to_numpy() == pytest.approx(shares["in_95"].to_numpy())


def test_the_forecasts_table_holds_each_earlier_forecast_against_its_actual_latest_run_first(runs):
    last, _ = runs[2]
    # run ids begin with the time they were made: the latest run's first
    mine = scored_by_pandas(runs).sort_values(["run", "period", "series"], ascending=[False, True, True], kind="stable")
    shown = frame_of(parsed(section(last)), "track-record-forecasts")
    assert list(zip(shown["run"], shown["period"], shown["series"])) == \
        list(zip(mine["run"], mine["period"], mine["series"]))
    assert list(shown["months ahead"]) == list(mine["horizon"].astype(float))
    assert shown["forecast"].to_numpy() == pytest.approx(mine["forecast"].to_numpy())
    assert shown["actual"].to_numpy() == pytest.approx(mine["actual"].to_numpy())
    assert shown["error"].to_numpy() == pytest.approx(mine["error"].to_numpy())
    assert "realised.csv holds these and the other models' scored forecasts." in html.unescape(section(last))


def test_a_long_forecasts_table_is_capped_with_a_note_pointing_to_realised_csv(runs, monkeypatch):
    last, _ = runs[2]
    monkeypatch.setattr(report, "TABLE_ROWS", 5)
    page = report.render_report(last)
    text = re.search(r'<section id="track-record">.*?</section>', page, flags=re.S).group(0)
    assert len(parsed(text).tables["track-record-forecasts"]) == 5
    assert "The first 5 of 12 scored forecasts; realised.csv holds every one, and the other models' too." \
        in html.unescape(text)


def test_the_realised_skill_against_the_mean_baselines_own_forecasts_is_shown_per_run_and_pooled(runs):
    last, _ = runs[2]
    actuals = actuals_of(runs[2][1])
    pairs = []
    for folder, _ in runs[:2]:
        forecast = pd.read_csv(folder / "forecast.csv", dtype={"series": str}).merge(actuals, on=["period", "series"])
        errors = forecast.assign(abs_error=(forecast["forecast"] - forecast["actual"]).abs()).pivot_table(
            index=["period", "series"], columns="model", values="abs_error")
        pairs.append(pd.DataFrame({"run": folder.name, "model": errors[recommended_of(folder)],
                                   "baseline": errors["mean_baseline"]}))
    pooled = pd.concat(pairs)
    per_run = pooled.groupby("run", sort=False)[["model", "baseline"]].mean()
    shown = frame_of(parsed(section(last)), "track-record-skill-table")
    assert list(shown["run"]) == list(per_run.index)
    assert shown["realised MAE"].to_numpy() == pytest.approx(per_run["model"].to_numpy())
    assert shown["realised MAE of the mean"].to_numpy() == pytest.approx(per_run["baseline"].to_numpy())
    assert shown["realised skill"].to_numpy() == pytest.approx(1 - per_run["model"] / per_run["baseline"])
    track = json.loads((last / "track_record.json").read_text(encoding="utf-8"))["realised_skill"]
    assert track["skill"] == pytest.approx(1 - pooled["model"].mean() / pooled["baseline"].mean())
    words = html.unescape(section(last))
    assert "12 forecasts from 2 earlier run(s)" in words
    assert f"Realised skill against the forecasts of the mean of the training months: {format_percent(track['skill'])} " \
           "over 6 month(s)" in words


def test_the_track_records_warnings_are_shown_in_the_section_and_flagged_in_the_answer(runs):
    last, _ = runs[2]
    warnings = json.loads((last / "track_record.json").read_text(encoding="utf-8"))["warnings"]
    realised_warning = [w for w in warnings if w.startswith("realised accuracy:")]
    assert len(realised_warning) == 1, warnings   # the premise: run 2's forecasts of North missed
    assert f"from {runs[1][0].name} (" in realised_warning[0] and " outside " in realised_warning[0]
    text = html.unescape(section(last))
    for warning in warnings:
        assert f"<strong>Warning:</strong> {warning}</p>" in text
    page = (last / "report.html").read_text(encoding="utf-8")
    answer = page[page.index('<section id="answer">'):page.index("</section>")]
    assert 'id="track-record-flag"' in answer and 'href="#track-record"' in answer
    assert f"{len(warnings)} warning(s)" in html.unescape(answer)


def test_the_picture_draws_the_realised_errors_and_its_text_states_how_many_fell_outside(runs):
    last, _ = runs[2]
    realised = pd.read_csv(last / "realised.csv", dtype={"series": str})
    recommended = {folder.name: recommended_of(folder) for folder, _ in runs[:2]}
    own = realised[realised["model"] == realised["forecast_run_id"].map(recommended)]
    outside = own[(own["error"] < own["backtest_low_95"]) | (own["error"] > own["backtest_high_95"])]
    assert len(outside) == 3 and set(outside["series"]) == {"North"}    # the premise
    worst = own.loc[own["error"].abs().idxmax()]
    images = parsed(section(last)).images
    assert len(images) == 1
    kind, picture = plots.picture_data(images[0]["src"])
    # An SVG that parses as XML (xml.etree), or a PNG by its signature (the PNG specification).
    assert (kind == "svg" and ElementTree.fromstring(picture).tag == "{http://www.w3.org/2000/svg}svg") \
        or (kind == "png" and picture[:8] == b"\x89PNG\r\n\x1a\n")
    alt = images[0]["alt"]
    assert alt.startswith("Dot chart of the realised errors (forecast − actual) of 12 forecast(s) from 2 earlier run(s)")
    assert f"{len(outside)} of {len(own)} fell outside it (" in alt
    assert f"The largest error was {format_signed(worst['error'])} ({worst['period']}, {worst['series']}" in alt
    assert f"<figcaption>{alt}</figcaption>" in html.unescape(section(last))


def test_the_report_is_rendered_again_exactly_from_the_folder(runs):
    for folder, _ in runs:
        assert render_pages(folder)["report.html"] == (folder / "report.html").read_text(encoding="utf-8")


# Hand-written (the numbers worked out in comments), for the view's branches the runs above do not reach.
TRACK = {"ledger": "/data/ledger.sqlite", "earlier_runs": 2,
         "recommended": {"run-1": "ols", "run-2": "ridge"}, "warnings": []}


def realised_row(run_id: str, model: str, horizon: int, error: float) -> dict:
    return {"forecast_run_id": run_id, "forecast_created": run_id.replace("run-", "2024-0"), "model": model,
            "period": f"2024-0{horizon + 1}", "series": "all", "horizon": horizon, "forecast": 10 + error,
            "actual": 10.0, "error": error, "expected_mae": 2.0, "low_80": 8.0, "high_80": 12.0,
            "low_95": 7.0, "high_95": 13.0, "inside_80": abs(error) <= 2, "inside_95": abs(error) <= 3,
            "backtest_low_95": -3.0, "backtest_high_95": 3.0, "within_backtest_95": abs(error) <= 3}


REALISED = pd.DataFrame([realised_row("run-1", "ols", 1, 3.0), realised_row("run-1", "ols", 1, -1.0),
                         realised_row("run-1", "mean_baseline", 1, 9.0),     # not run-1's recommended model
                         realised_row("run-2", "ridge", 2, -4.0)])


def test_without_track_record_json_there_is_no_section_and_without_actuals_one_line():
    assert track_record_view(None, REALISED, rows_shown=50) is None
    none_yet = track_record_view(TRACK, REALISED.iloc[:0], rows_shown=50)
    assert none_yet["none_yet"] and none_yet["forecasts"] is None and none_yet["pictured"] is None


def test_the_view_keeps_the_recommended_models_and_the_latest_runs():
    view = track_record_view(TRACK, REALISED, rows_shown=50, runs_shown=1)
    # run-1 ols, 1 month ahead: errors +3, −1 → MAE 2 (run-2 is the latest, the only one kept by
    # months ahead); the forecasts table keeps both runs' recommended rows, run-2's first.
    assert list(view["forecasts"]["run"]) == ["run-2", "run-1", "run-1"]
    assert list(view["forecasts"]["inside 80% · 95%"]) == ["no · no", "no · yes", "yes · yes"]
    assert list(view["by_horizon"]["run"]) == ["run-2"] and (view["runs"], view["runs_shown"]) == (2, 1)
    assert list(view["by_horizon"]["realised MAE"]) == [4.0]
    every = track_record_view(TRACK, REALISED, rows_shown=50)
    assert list(every["by_horizon"]["realised MAE"]) == [2.0, 4.0]
    assert list(every["by_horizon"]["inside 80%"]) == [0.5, 0.0]
    assert set(every["pictured"]["model"]) == {"ols", "ridge"}
