"""Words, not code names: the report, the summary and the command line name models and columns
by the catalogue's labels (pipeline/core/catalogue.py), and all three agree.

The rule checked here (the project's own, stated in the catalogue): a person reads
"mean of the training months", "same month last year", "skill against the mean", never
``mean_baseline``, ``seasonal_naive`` or ``skill_vs_mean``. Code names stay where a person
types them: the spec as resolved (the report's Run details) and the files' column names.
"""

from __future__ import annotations

import html as html_text
import json
import re
from pathlib import Path

import pytest
from conftest import SHIPPED_DEMO_SPEC

from pipeline.cli import main
from pipeline.core.catalogue import BASELINE, COLUMN_LABELS, MODEL_KINDS, SKILL, column_label, model_label

# Every code name a person could meet in a table or a sentence: the model kinds whose label
# differs from their name (drift, ridge and lasso are their own words) and the columns the
# catalogue gives words to (those with an underscore, which no word has).
CODE_NAMES = sorted({kind.name for kind in MODEL_KINDS if kind.name != kind.label} | {SKILL, "p_value", "p_holm", "std_error",
                                                           "low_95", "high_95", "cooks_distance",
                                                           "above_4_over_n", "interval_score",
                                                           *(n for n in COLUMN_LABELS if "_" in n)})
CODE_NAME = re.compile(r"(?<![\w-])(" + "|".join(map(re.escape, CODE_NAMES)) + r")(?![\w-])")
OLD_WORDS = re.compile(r"mean baseline", re.IGNORECASE)


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> dict:
    """The shipped demo run through the command line: its printed table, report and summary."""
    import contextlib
    import io
    out = io.StringIO()
    folder = tmp_path_factory.mktemp("words")
    with contextlib.redirect_stdout(out):
        assert main(["run", str(SHIPPED_DEMO_SPEC), "--output-folder", str(folder)]) == 0
    run = next(folder.glob("run-*"))
    page = folder / "history.html"
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["history", str(SHIPPED_DEMO_SPEC), "--ledger", str(folder / "ledger.sqlite"),
                     "--html", str(page)]) == 0
        assert main(["run", str(SHIPPED_DEMO_SPEC), "--output-folder", str(folder)]) == 0
    compared = io.StringIO()
    with contextlib.redirect_stdout(compared):
        assert main(["compare", *map(str, sorted(folder.glob("run-*")))]) == 0
    return {"history": page.read_text(encoding="utf-8"), "cli": out.getvalue(), "compare": compared.getvalue(),
            "report": (run / "report.html").read_text(encoding="utf-8"),
            "summary": (run / "summary.md").read_text(encoding="utf-8"),
            "models": [row["model"] for row in json.loads((run / "metrics.json").read_text())["models"]]}


def visible_text(page: str) -> str:
    """Return what a reader sees of a report, less the spec as resolved (Run details), where
    the spec's own keys and values are the point: text, table cells, captions and alt text."""
    page = re.sub(r'<section id="run">.*?</section>', "", page, flags=re.S)
    page = re.sub(r"<(style|svg)\b.*?</\1>", "", page, flags=re.S)
    alts = " ".join(re.findall(r'\balt="([^"]*)"', page))
    text = re.sub(r"<[^>]+>", " ", page)
    return html_text.unescape(text + " " + alts)


def test_the_report_shows_no_code_name(demo):
    found = sorted(set(CODE_NAME.findall(visible_text(demo["report"]))))
    assert found == []
    assert not OLD_WORDS.search(visible_text(demo["report"]))


def test_the_summary_shows_no_code_name(demo):
    assert sorted(set(CODE_NAME.findall(demo["summary"]))) == []
    assert not OLD_WORDS.search(demo["summary"])


def test_the_history_page_shows_no_code_name(demo):
    """Its tables with a column per model are headed by the models' labels too."""
    assert sorted(set(CODE_NAME.findall(visible_text(demo["history"])))) == []
    assert model_label("calendar_month_mean") in demo["history"]


def test_the_command_line_shows_no_code_name(demo):
    assert sorted(set(CODE_NAME.findall(demo["cli"]))) == []
    assert not OLD_WORDS.search(demo["cli"])


def test_castline_compare_shows_no_code_name(demo):
    """Its header names each run's recommended model by its label, as its tables do."""
    assert sorted(set(CODE_NAME.findall(demo["compare"]))) == []
    assert "recommended OLS;" in demo["compare"]


def test_report_summary_and_command_line_name_every_model_alike(demo):
    """Each model of the run is named by its catalogue label in the report's comparison table,
    the summary's and the command line's, and the baseline's label is the issue's words."""
    assert model_label(BASELINE) == "mean of the training months"
    assert model_label("seasonal_naive") == "same month last year"
    assert column_label(SKILL) == "skill against the mean"
    table = re.search(r'<table id="comparison-table">.*?</table>', demo["report"], re.S).group(0)
    report_names = [html_text.unescape(name) for name in
                    re.findall(r'<tr data-model="[^"]+"><td class="text">([^<]*)</td>', table)]
    comparison = demo["summary"].split("## Model comparison", 1)[1]
    summary_names = [line.split("|")[1].strip() for line in comparison.splitlines()
                     if line.startswith("| ") and line.split("|")[1].strip() in report_names]
    cli_lines = demo["cli"].splitlines()
    labels = [model_label(name) for name in demo["models"]]
    assert sorted(report_names) == sorted(labels)
    assert report_names[0] == model_label(BASELINE)
    assert summary_names[: len(labels)] == report_names
    for label in labels:
        assert any(line.startswith(label + " ") for line in cli_lines), label
    # The answer's sentence uses the same words as the tables.
    assert f"the {model_label(BASELINE)}" in demo["cli"]
    assert all(column_label(SKILL) in text for text in (demo["cli"], demo["summary"], demo["report"]))


def test_a_column_without_words_keeps_its_name():
    """A column the catalogue has no words for (a user's driver, say) is shown as named."""
    assert column_label("shelf_price") == "shelf_price"
    assert model_label("not_a_model") == "not_a_model"
    assert column_label("mae") == "MAE"
    assert Path(SHIPPED_DEMO_SPEC).exists()
