"""Numbers for people on the demo's pages: report.html and summary.md show no "nan", "None"
or "n/a" in any table cell, a value that does not exist reads as a dash, and every table that
holds a dash has the one-line footnote under it that says what the dash means
(pipeline/core/formatting.py states the rules; tests/core/test_formatting.py tests each one)."""

from __future__ import annotations

import html as html_text
import json
import re
import shutil
from pathlib import Path

import pytest
from conftest import DEMO_SPEC, SHIPPED_DEMO_SPEC

import pipeline
from pipeline.core.formatting import DASH_NOTE, MISSING
from pipeline.present.report import render_report
from pipeline.present.run_files import load_run_files
from pipeline.present.summary import render_summary

NOT_A_VALUE = re.compile(r"\b(nan|None|NaN|NaT|inf)\b|n/a", re.IGNORECASE)
TABLE = re.compile(r"<table\b.*?</table></div>(?P<note>\s*<p class=\"key dash-note\">(?P<text>[^<]*)</p>)?",
                   re.S)
CELL = re.compile(r"<t[dh]\b[^>]*>(.*?)</t[dh]>", re.S)
P_CELL = re.compile(r"^(< 0\.001|0\.\d*[1-9]\d?|1\.0)$")   # two significant digits, or "< 0.001"


@pytest.fixture(scope="module")
def shipped_run(tmp_path_factory) -> Path:
    """The shipped demo as it ships: rolling origins, so the answer has a p-value."""
    return pipeline.run(SHIPPED_DEMO_SPEC, output_folder=tmp_path_factory.mktemp("runs")).folder.path


@pytest.fixture(scope="module")
def holdout_run(tmp_path_factory) -> Path:
    """The demo on one holdout: a single origin, so no model has a p-value at all."""
    return pipeline.run(DEMO_SPEC, output_folder=tmp_path_factory.mktemp("runs")).folder.path


@pytest.fixture(params=["shipped_run", "holdout_run"])
def run_folder(request) -> Path:
    return request.getfixturevalue(request.param)


def html_tables(page: str) -> list[tuple[list[str], str | None]]:
    """Return each table of a page: its cells' text, and the footnote under it (or None)."""
    return [([html_text.unescape(re.sub(r"<[^>]+>", "", cell)).strip() for cell in CELL.findall(found.group(0))],
             html_text.unescape(found.group("text")) if found.group("note") else None)
            for found in TABLE.finditer(page)]


def markdown_tables(text: str) -> list[tuple[list[str], str | None]]:
    """Return each pipe table of a Markdown text: its cells, and the line after the blank line
    under it when that line is the footnote (or None)."""
    lines = text.splitlines()
    tables, at = [], 0
    while at < len(lines):
        if not lines[at].startswith("|"):
            at += 1
            continue
        start = at
        while at < len(lines) and lines[at].startswith("|"):
            at += 1
        cells = [cell.strip() for line in lines[start:at] if not line.startswith("| ---")
                 for cell in re.split(r"(?<!\\)\|", line)[1:-1]]
        note = lines[at + 1] if at + 1 < len(lines) and lines[at] == "" and lines[at + 1] == DASH_NOTE else None
        tables.append((cells, note))
    return tables


def test_report_tables_show_no_nan_none_or_n_a_and_explain_every_dash(run_folder):
    page = (run_folder / "report.html").read_text(encoding="utf-8")
    tables = html_tables(page)
    assert len(tables) >= 8
    for cells, note in tables:
        assert not [c for c in cells if NOT_A_VALUE.search(c)], cells
        assert (note == DASH_NOTE) if MISSING in cells else note is None, cells
    # The demo's comparison (the mean of the training months has no test against itself) and its residual
    # checks (a fit measure has no p-value) hold dashes, so the footnote is there to find.
    assert sum(note is not None for _, note in tables) >= 2
    assert page.count(DASH_NOTE) == sum(note is not None for _, note in tables)


def test_summary_tables_show_no_nan_none_or_n_a_and_explain_every_dash(run_folder):
    text = (run_folder / "summary.md").read_text(encoding="utf-8")
    tables = markdown_tables(text)
    assert len(tables) >= 6
    for cells, note in tables:
        assert not [c for c in cells if NOT_A_VALUE.search(c)], cells
        assert (note is not None) == (MISSING in cells), cells
    assert any(note is not None for _, note in tables)
    assert text.count(DASH_NOTE) == sum(note is not None for _, note in tables)


def test_report_p_values_have_two_significant_digits(shipped_run):
    page = (shipped_run / "report.html").read_text(encoding="utf-8")
    answer = re.search(r'<strong data-value="([^"]+)">(p [^<]+)</strong>', page)
    p, words = float(answer.group(1)), html_text.unescape(answer.group(2))
    # two significant digits, trailing zeros kept (the '#' of the format), "p < 0.001" below 0.001
    assert words == ("p < 0.001" if p < 0.001 else f"p = {p:#.2g}")
    header = re.search(r'<table id="comparison-table">\s*<thead><tr>(.*?)</tr>', page, re.S).group(1)
    columns = re.findall(r'<th[^>]*data-column="([^"]+)"', header)   # the column names behind the words
    body = re.search(r'<table id="comparison-table">.*?<tbody>(.*?)</tbody>', page, re.S).group(1)
    shown = []
    for row in re.findall(r"<tr[^>]*>(.*?)</tr>", body, re.S):
        cells = dict(zip(columns, (html_text.unescape(c) for c in CELL.findall(row))))
        shown.append(cells["p_holm"])
    assert shown[0] == MISSING                       # the mean of the training months is not tested against itself
    assert all(P_CELL.match(cell) for cell in shown[1:]), shown



def test_counts_in_the_words_of_the_pages_have_thousands_separators(holdout_run, tmp_path):
    # Rule: a count reads in full with its thousands ("12,345"), in the words as in the tables.
    folder = tmp_path / "run"
    shutil.copytree(holdout_run, folder)
    fingerprint = json.loads((folder / "fingerprint.json").read_text(encoding="utf-8"))
    fingerprint.update(rows=12345, history_rows=12000, future_rows=345)
    (folder / "fingerprint.json").write_text(json.dumps(fingerprint), encoding="utf-8")
    files = load_run_files(folder)
    assert "<li>rows: 12,345 (12,000 with actuals, 345 to forecast)</li>" in render_report(files)
    assert "- rows: 12,345 (12,000 with actuals, 345 to forecast)" in render_summary(files)
