"""The HTML report: opened in a real browser, escaped, and faithful to metrics.json.

The browser is Debian's headless Chromium driven by Selenium (.ci/run installs
chromium and chromium-driver when absent). The data are the invented demo (a
plumbing test), plus a copy whose region names are markup, and conftest's tiny data over
rolling origins for an answer with a p-value.
"""

from __future__ import annotations

import base64
import json
import math
import re
import shutil
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import pytest
from browser import CHROMEDRIVER, CHROMIUM, NEEDS_A_BROWSER, open_page
from conftest import DEMO_SPEC, ROOT, tiny_data, write_tiny_spec
from statsmodels.stats.multitest import multipletests

import pipeline
from pipeline.core.catalogue import model_label
from pipeline.core.formatting import format_number

DEMO = DEMO_SPEC
# The demo has four series, so the page has the Per series section after the backtest; its run
# is the first in its ledger, so the Track record section says so in one line.
SECTIONS = ["answer", "comparison", "backtest", "per-series", "forecast", "track-record", "drivers",
            "residuals", "data", "run", "cautions"]
HOSTILE = "<script>alert(1)</script>"


@pytest.fixture(scope="module")
def run_folder(tmp_path_factory) -> Path:
    return pipeline.run(DEMO, output_folder=tmp_path_factory.mktemp("runs")).folder.path


class _Cells(HTMLParser):
    """Collect, per table id, the rows of data-value attributes and texts."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: dict[str, list[list[tuple[str | None, str]]]] = {}
        self.scripts = 0
        self._table: str | None = None
        self._row: list | None = None
        self._cell: list | None = None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "script":
            self.scripts += 1
        if tag == "table":
            self._table = attrs.get("id") or f"table{len(self.tables)}"
            self.tables[self._table] = []
        elif tag == "tr" and self._table:
            self._row = []
        elif tag == "td" and self._row is not None:
            self._cell = [attrs.get("data-value"), ""]

    def handle_data(self, data):
        if self._cell is not None:
            self._cell[1] += data

    def handle_endtag(self, tag):
        if tag == "td" and self._cell is not None:
            self._row.append(tuple(self._cell))
            self._cell = None
        elif tag == "tr" and self._row is not None:
            if self._row:
                self.tables[self._table].append(self._row)
            self._row = None
        elif tag == "table":
            self._table = None


def test_the_comparison_tables_hold_the_numbers_of_metrics_json(run_folder):
    html = (run_folder / "report.html").read_text(encoding="utf-8")
    metrics = json.loads((run_folder / "metrics.json").read_text(encoding="utf-8"))
    cells = _Cells()
    cells.feed(html)
    seen = set()
    for table_id in ("comparison-table", "comparison-more"):
        rows = cells.tables[table_id]
        header = re.search(rf'<table id="{table_id}">\s*<thead><tr>(.*?)</tr>', html, re.S).group(1)
        columns = re.findall(r'<th[^>]*data-column="([^"]+)"', header)
        models = re.findall(r'<tr data-model="([^"]+)">', html.split(f'<table id="{table_id}">')[1].split("</table>")[0])
        assert models == [m["model"] for m in metrics["models"]]
        assert models[0] == "mean_baseline" and rows[0][0][1] == "mean of the training months"   # the catalogue's words
        for row, model in zip(rows, metrics["models"]):
            for column, (value, _) in zip(columns, row):
                if column in ("model", "against_mean"):
                    continue
                seen.add(column)
                expected = model[column]
                if expected is None or (isinstance(expected, float) and math.isnan(expected)):
                    assert value in ("", "None", "nan")
                else:
                    assert float(value) == expected, (model["model"], column)
    # every score the run compared is in one of the two tables
    assert {"mae", "rmse", "mase", "mape", "smape", "wape", "r2", "bias", "skill_vs_mean",
            "interval_score_95"} <= seen


def answer_of(folder: Path) -> tuple[str, dict, dict]:
    """Return the report's answer section, metrics.json, and its row of the recommended model."""
    html = (folder / "report.html").read_text(encoding="utf-8")
    metrics = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))
    answer = html[html.index('<section id="answer">'):html.index('<section id="comparison">')]
    chosen = next(m for m in metrics["models"] if m["model"] == metrics["recommended"])
    return answer, metrics, chosen


def test_the_answer_states_the_verdict_and_skill_and_no_p_value_after_a_holdout(run_folder):
    # A single holdout gives no significance test: the answer gives the skill, no p-value.
    answer, metrics, chosen = answer_of(run_folder)
    assert metrics["verdict"].replace("'", "&#39;") in answer
    assert f'data-value="{chosen["skill_vs_mean"]}"' in answer
    assert metrics["tested"] is False
    assert chosen["p_value"] is None and chosen["p_holm"] is None
    assert "one-sided test" not in answer and "p = " not in answer


def test_the_answer_states_the_verdict_skill_and_holm_adjusted_p_value(tmp_path):
    # Invented data (conftest.tiny_data: y = 10 + 2·x + noise) over 13 rolling origins, enough
    # for a test; the reference is statsmodels' Holm adjustment of the models' own p-values.
    spec = write_tiny_spec(tmp_path, tiny_data(), actuals_to="2022-03",
                           validation={"method": "rolling_origin", "horizon": 3, "min_train_periods": 12})
    answer, metrics, chosen = answer_of(pipeline.run(spec).folder.path)
    assert metrics["tested"] is True and metrics["recommended"] == "ols"
    assert metrics["verdict"].replace("'", "&#39;") in answer
    assert f'data-value="{chosen["skill_vs_mean"]}"' in answer
    others = [m for m in metrics["models"] if m["model"] != "mean_baseline"]
    holm = multipletests([m["p_value"] for m in others], method="holm")[1]
    assert chosen["p_holm"] == pytest.approx(holm[others.index(chosen)], rel=1e-12)
    assert "Holm-adjusted" in answer and f'data-value="{chosen["p_holm"]}"' in answer


def test_the_report_is_rebuilt_from_the_folder_alone(run_folder, tmp_path):
    copy = tmp_path / "copy"
    shutil.copytree(run_folder, copy)
    (copy / "report.html").unlink()
    done = subprocess.run([sys.executable, "-m", "pipeline", "report", str(copy)],
                          capture_output=True, text=True, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert (copy / "report.html").read_text(encoding="utf-8") == \
        (run_folder / "report.html").read_text(encoding="utf-8")


def test_report_on_a_folder_that_is_not_a_run_exits_2(tmp_path):
    done = subprocess.run([sys.executable, "-m", "pipeline", "report", str(tmp_path)],
                          capture_output=True, text=True, cwd=tmp_path)
    assert done.returncode == 2
    assert done.stderr.startswith("castline: ") and len(done.stderr.strip().splitlines()) == 1


def test_the_page_forbids_every_request_but_inline_pictures(run_folder):
    html = (run_folder / "report.html").read_text(encoding="utf-8")
    assert "default-src 'none'; img-src data:" in html
    assert not re.search(r'(src|href)="(?!data:)', html)


def test_markup_in_the_data_appears_as_text(tmp_path):
    data = (ROOT / "data_samples" / "compost_sales.csv").read_text(encoding="utf-8")
    (tmp_path / "hostile.csv").write_text(data.replace(",South,", f",{HOSTILE},"), encoding="utf-8")
    spec = DEMO.read_text(encoding="utf-8").replace("../data_samples/compost_sales.csv", "hostile.csv")
    (tmp_path / "spec.yaml").write_text(spec, encoding="utf-8")
    folder = pipeline.run(tmp_path / "spec.yaml", output_folder=tmp_path / "runs").folder.path
    html = (folder / "report.html").read_text(encoding="utf-8")
    assert HOSTILE not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    cells = _Cells()
    cells.feed(html)
    assert cells.scripts == 0


@pytest.mark.skipif(not (CHROMIUM and CHROMEDRIVER), reason=NEEDS_A_BROWSER)
def test_the_report_opens_in_a_browser_with_every_section_and_image_and_no_request(run_folder, tmp_path):
    page = open_page(run_folder / "report.html", tmp_path / "profile")
    assert page.sections == SECTIONS
    assert page.images and all(done and width > 0 and alt > 20 for done, width, alt in page.images)
    # The browser's log saw the page itself; chrome:// URLs are its own pages, not the network.
    assert any(url.startswith("file://") for url in page.requested), page.requested
    assert page.network == []
    # The page's own record of every resource it fetched (data: URIs are not fetched).
    assert page.fetched == []


def test_the_backtest_picture_states_whose_errors_were_smallest_from_the_single_origin(run_folder):
    # The demo's holdout has one origin, so the picture draws its predictions 1 to 12 months
    # ahead in one panel. Reference: metrics.json's MAE of each model (over every prediction of
    # that origin), among the recommended model, the mean of the training months and the best simple rule
    # (the models the picture draws).
    metrics = json.loads((run_folder / "metrics.json").read_text(encoding="utf-8"))
    drawn = {metrics["recommended"], "mean_baseline", metrics["best_rule"]}
    mae = {row["model"]: row["mae"] for row in metrics["models"] if row["model"] in drawn}
    best = min(mae, key=mae.get)
    html = (run_folder / "report.html").read_text(encoding="utf-8")
    alt = re.search(r'<section id="backtest">.*?<img [^>]*alt="([^"]*)"', html, re.S).group(1)
    origin = metrics["by_origin"][0]["origin"]
    assert alt.startswith("Line chart: ")
    assert (f"From {origin}, 1 to 12 months ahead, {model_label(best)} erred least of the models drawn: "
            f"MAE {format_number(mae[best])} per series and month") in alt
    others = {row["model"] for row in metrics["models"]} - drawn
    assert others and not any(m in alt for m in others)


def test_pictures_as_svg_where_smaller_make_the_report_smaller_than_all_png(run_folder, monkeypatch):
    # Reference: the same report rendered again from the folder with every picture a PNG (as
    # castline drew them before choosing per picture).
    from pipeline.present import plots
    from pipeline.present.report import render_report
    chosen = render_report(run_folder)
    assert "data:image/svg+xml," in chosen

    def png_only(figure, alt, kind=None):
        if figure.get_layout_engine() is None:
            figure.tight_layout()
        data = plots.picture_bytes(figure, "png")
        return plots.Figure("data:image/png;base64," + base64.b64encode(data).decode("ascii"), alt)
    monkeypatch.setattr(plots, "inline_picture", png_only)
    every_png = render_report(run_folder)
    assert "data:image/svg+xml" not in every_png
    assert len(chosen.encode()) < 0.9 * len(every_png.encode())
