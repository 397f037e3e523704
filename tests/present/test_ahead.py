"""pipeline/present/ahead.py: the pages' block on the drivers in the months ahead.

The references are the run folder's own metrics.json ("drivers_ahead", "models" as scored
with the estimates, "hindsight_models" had the estimated drivers been known), each number
as pipeline.core.formatting.format_number writes it (the one formatter the pages share), the
cost worked out here by hand as (as scored − had they been known) / had they been known, and
the page's own wording of the rules, written out here. The runs are the invented demo (which
estimates rainfall and temperature) and the tiny invented data: plumbing only.
"""

from __future__ import annotations

import json
import shutil
from html.parser import HTMLParser
from pathlib import Path

import pytest
from conftest import DEMO_SPEC, tiny_data, write_tiny_spec

import pipeline
from pipeline.cli import main
from pipeline.core.catalogue import model_label
from pipeline.core.formatting import format_number
from pipeline.present.pages import render_pages

HEADING = "Drivers in the months ahead"
MONTH_MEAN = "each series' average for that calendar month over the training months"
USES_ESTIMATES = "The comparison, the verdict and the intervals use these estimates, as the forecast must."
GIVEN = "Known ahead, scored at their actual values (the forecast needs their planned values): "


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    return pipeline.run(DEMO_SPEC, output_folder=tmp_path_factory.mktemp("runs"))


@pytest.fixture(scope="module")
def demo_folder(demo_run) -> Path:
    return demo_run.folder.path


def _metrics(folder: Path) -> dict:
    return json.loads((folder / "metrics.json").read_text(encoding="utf-8"))


def _page(folder: Path, name: str) -> str:
    return (folder / name).read_text(encoding="utf-8")


def _answer_part(summary: str) -> str:
    """The summary from its answer to the model comparison."""
    return summary.split("## The answer\n", 1)[1].split("\n## Model comparison", 1)[0]


def _notes(summary: str) -> list[str]:
    if "## Warnings and notes\n" not in summary:
        return []
    part = summary.split("## Warnings and notes\n", 1)[1].split("\n## ", 1)[0]
    return [line[2:] for line in part.splitlines() if line.startswith("- ")]


class _Block(HTMLParser):
    """Collect the cells (data-value, text) of table#ahead-table, the texts of
    ul#drivers-estimated's items and of p#drivers-given, and the notes' list items."""

    def __init__(self) -> None:
        super().__init__()
        self.rows: list[list[tuple[str | None, str]]] = []
        self.estimated: list[str] = []
        self.given: str | None = None
        self.notes: list[str] = []
        self._where: str | None = None
        self._cell: list | None = None
        self._item: list[str] | None = None
        self._in_notes = False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if attrs.get("id") in ("ahead-table", "drivers-estimated", "drivers-given"):
            self._where = attrs["id"]
            if self._where == "drivers-given":
                self.given = ""
        if self._where == "ahead-table" and tag == "tr":
            self.rows.append([])
        elif self._where == "ahead-table" and tag == "td":
            self._cell = [attrs.get("data-value"), ""]
        elif tag == "li" and (self._where == "drivers-estimated" or self._in_notes):
            self._item = []

    def handle_endtag(self, tag):
        if tag == "td" and self._cell is not None:
            self.rows[-1].append(tuple(self._cell))
            self._cell = None
        elif tag == "li" and self._item is not None:
            (self.notes if self._in_notes else self.estimated).append("".join(self._item))
            self._item = None
        elif (tag, self._where) in (("table", "ahead-table"), ("ul", "drivers-estimated"),
                                    ("p", "drivers-given")):
            self._where = None
        elif tag == "ul":
            self._in_notes = False

    def handle_data(self, data):
        if data == "Notes from the run":
            self._in_notes = True
        if self._cell is not None:
            self._cell[1] += data
        if self._item is not None:
            self._item.append(data)
        if self._where == "drivers-given":
            self.given += data


def _block(html: str) -> _Block:
    parser = _Block()
    parser.feed(html)
    return parser


def test_the_demo_run_says_which_drivers_it_estimated(demo_folder):
    ahead = _metrics(demo_folder)["drivers_ahead"]
    assert ahead["estimated"] == {"rainfall_mm": "month_mean", "mean_temp_c": "month_mean"}
    answer = _answer_part(_page(demo_folder, "summary.md"))
    assert f"### {HEADING}" in answer
    assert GIVEN + "shelf_price, promo_days and region; the calendar terms come from the date." in answer
    for column in ahead["estimated"]:
        assert f"- {column}: {MONTH_MEAN} (month_mean)" in answer
    assert USES_ESTIMATES in answer
    block = _block(_page(demo_folder, "report.html"))
    assert block.given == GIVEN + "shelf_price, promo_days and region; the calendar terms come from the date."
    assert block.estimated == [f"{column}: {MONTH_MEAN} (month_mean)" for column in ahead["estimated"]]


def test_the_ex_post_table_holds_metrics_json_in_both_pages(demo_run, demo_folder):
    metrics = _metrics(demo_folder)
    assert metrics["select_by"] == "mae"
    ante = {row["model"]: row["mae"] for row in metrics["models"]}
    post = {row["model"]: row["mae"] for row in metrics["hindsight_models"]}
    others = [m for m in post if m != "mean_baseline"]
    assert others == ["ols"]
    expected = [[model_label(m), format_number(ante[m]), format_number(post[m]),
                 f"{(ante[m] - post[m]) / post[m]:+.0%}"] for m in others]
    # 149.5 as scored against 127.9 had they been known: +17%, as the run's console note says.
    assert any("its MAE would have been 127.9 rather than 149.5 (+17%" in note
               for note in demo_run.warnings)
    answer = _answer_part(_page(demo_folder, "summary.md"))
    assert "Had rainfall_mm and mean_temp_c been known ahead:" in answer
    lines = answer.split("Had rainfall_mm and mean_temp_c been known ahead:\n\n", 1)[1].splitlines()
    assert lines[0] == "| model | MAE as scored | MAE if known | cost |"
    assert [[cell.strip() for cell in line.strip("|").split(" | ")] for line in lines[2:3]] == expected
    assert expected == [["OLS", "149.5", "127.9", "+17%"]]
    rows = _block(_page(demo_folder, "report.html")).rows
    assert [[text for _, text in row] for row in rows if row] == expected
    (cells,) = [row for row in rows if row]
    assert float(cells[1][0]) == ante["ols"] and float(cells[2][0]) == post["ols"]


def test_the_notes_the_block_says_are_not_listed_again(demo_run, demo_folder):
    # The console says them as notes; the run folder's notes (and so the pages' lists) do not.
    said = [n for n in demo_run.warnings
            if n.startswith("Drivers known ahead") or "been known ahead, its" in n]
    assert len(said) == 2
    notes = _metrics(demo_folder)["notes"]
    assert not set(said) & set(notes)
    assert _notes(_page(demo_folder, "summary.md")) == notes
    assert _block(_page(demo_folder, "report.html")).notes == notes


def test_a_folder_older_than_the_block_is_rendered_without_it(demo_folder, tmp_path, capsys):
    old = tmp_path / "old"
    shutil.copytree(demo_folder, old)
    metrics = _metrics(old)
    del metrics["drivers_ahead"], metrics["hindsight_models"]
    (old / "metrics.json").write_text(json.dumps(metrics), encoding="utf-8")
    assert main(["report", str(old)]) == 0                  # castline report RUN_FOLDER
    summary, html = _page(old, "summary.md"), _page(old, "report.html")
    assert HEADING not in summary and HEADING not in html
    assert 'id="drivers-ahead"' not in html
    # Without the block, every note is listed, as before.
    assert _notes(summary) == metrics["notes"]
    assert _block(html).notes == metrics["notes"]
    assert render_pages(old) == {"summary.md": summary, "report.html": html}


def test_drivers_all_given_show_only_the_line_saying_so(tmp_path):
    spec = write_tiny_spec(tmp_path, tiny_data(), actuals_to="2021-12")
    folder = pipeline.run(spec).folder.path
    ahead = _metrics(folder)["drivers_ahead"]
    assert ahead == {"given": ["x"], "estimated": {}, "calendar": False}
    assert _metrics(folder)["hindsight_models"] == []
    answer = _answer_part(_page(folder, "summary.md"))
    block = answer.split(f"### {HEADING}\n", 1)[1].strip()
    assert block == GIVEN + "x."
    html = _page(folder, "report.html")
    parsed = _block(html)
    assert parsed.given == GIVEN + "x."
    assert parsed.estimated == [] and parsed.rows == []
    assert "ahead-table" not in html and USES_ESTIMATES not in html


def test_no_drivers_show_no_block(tmp_path):
    spec = write_tiny_spec(tmp_path, tiny_data(), actuals_to="2021-12",
                           drivers={"calendar": {"trend": True}})
    folder = pipeline.run(spec).folder.path
    assert _metrics(folder)["drivers_ahead"] == {"given": [], "estimated": {}, "calendar": True}
    assert HEADING not in _page(folder, "summary.md")
    assert 'id="drivers-ahead"' not in _page(folder, "report.html")


def test_k_fold_says_its_backtest_knew_the_estimated_drivers(tmp_path):
    data = tiny_data()
    data["w"] = (data.index % 7).astype(float)
    spec = write_tiny_spec(tmp_path, data, actuals_to="2021-12",
                           drivers={"numeric": ["x", {"column": "w", "future": "mean"}]},
                           validation={"method": "kfold", "folds": 3})
    folder = pipeline.run(spec).folder.path
    metrics = _metrics(folder)
    assert metrics["drivers_ahead"]["estimated"] == {"w": "mean"}
    assert metrics["hindsight_models"] == []
    answer = _answer_part(_page(folder, "summary.md"))
    assert "Estimated by castline from each training window for the forecast:" in answer
    assert "- w: each series' average (mean)" in answer
    assert "scored them at their actual values" in answer and USES_ESTIMATES not in answer
