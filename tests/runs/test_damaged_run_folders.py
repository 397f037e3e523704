"""A run folder changed by hand or damaged stops ``castline report`` in one line, and stays as it is.

Each case edits a copy of a real run folder (the second of two runs of the tiny invented spec,
made once for the module, so it holds realised.csv and track_record.json with rows) as a user
with a spreadsheet or an editor might, then runs ``castline report`` through
``pipeline.cli.main`` in this process. Plumbing only: no figure here is a reference value.
"""

from __future__ import annotations

import csv
import io
import json
import shutil
from pathlib import Path

import pytest
from conftest import tiny_data, write_tiny_spec

from pipeline import cli


@pytest.fixture(scope="module")
def run_folder(tmp_path_factory):
    base = tmp_path_factory.mktemp("folders")
    data = tiny_data(("north", "south"))
    for cut in ("2021-12", "2022-03"):   # the second run scores the first's forecasts
        spec = write_tiny_spec(base, data, actuals_to=cut, models=["ols", "ridge"])
        assert cli.main(["run", str(spec)]) == 0
    return sorted((base / "runs").glob("run-*"))[-1]


def _rows(path: Path) -> list[list[str]]:
    return list(csv.reader(io.StringIO(path.read_text(encoding="utf-8"))))


def _write_rows(path: Path, rows: list[list[str]]) -> None:
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows(rows)
    path.write_text(out.getvalue(), encoding="utf-8")


def renamed(old: str, new: str):
    def edit(path: Path) -> None:
        rows = _rows(path)
        rows[0] = [new if name == old else name for name in rows[0]]
        _write_rows(path, rows)
    return edit


def dropped(column: str):
    def edit(path: Path) -> None:
        rows = _rows(path)
        at = rows[0].index(column)
        _write_rows(path, [row[:at] + row[at + 1:] for row in rows])
    return edit


def cell(column: str, text: str, line: int = 2):
    """Put `text` in `column` on the file's line `line` (the header is line 1)."""
    def edit(path: Path) -> None:
        rows = _rows(path)
        rows[line - 1][rows[0].index(column)] = text
        _write_rows(path, rows)
    return edit


def emptied(path: Path) -> None:
    path.write_bytes(b"")


def cut_short(path: Path) -> None:
    data = path.read_bytes()
    path.write_bytes(data[:len(data) // 2 + 3])


def header_again(path: Path) -> None:
    """The header pasted again below the first row, as a careless copy and paste leaves it."""
    lines = path.read_text(encoding="utf-8").split("\n")
    path.write_text("\n".join(lines[:2] + lines[:1] + lines[2:]), encoding="utf-8")


def header_only(path: Path) -> None:
    path.write_text(path.read_text(encoding="utf-8").split("\n")[0] + "\n", encoding="utf-8")


def column_twice(column: str):
    def edit(path: Path) -> None:
        _write_rows(path, [row + [row[_rows(path)[0].index(column)]] for row in _rows(path)])
    return edit


def not_json(path: Path) -> None:
    path.write_text("{ this is not json", encoding="utf-8")


def in_document(change):
    def edit(path: Path) -> None:
        document = json.loads(path.read_text(encoding="utf-8"))
        change(document)
        path.write_text(json.dumps(document), encoding="utf-8")
    return edit


def without(key: str):
    return in_document(lambda d: d.pop(key))


def set_to(key: str, value):
    return in_document(lambda d: d.__setitem__(key, value))


def in_first_model(key: str, value):
    return in_document(lambda d: d["models"][0].__setitem__(key, value))


def removed(path: Path) -> None:
    path.unlink()


# (file, edit, what the line says besides the file)
CASES = [
    ("predictions.csv", renamed("prediction", "predicted"), "column 'prediction': is missing"),
    ("predictions.csv", dropped("actual"), "column 'actual': is missing"),
    ("predictions.csv", cell("prediction", "about twenty"), "line 2, column 'prediction': holds 'about twenty'"),
    ("predictions.csv", cell("horizon", "soon"), "line 2, column 'horizon'"),
    ("predictions.csv", cell("horizon", ""), "line 2, column 'horizon': is empty"),
    ("predictions.csv", emptied, "the file is empty"),
    ("predictions.csv", cut_short, "cut short"),
    ("predictions.csv", header_again, "line 3, column 'horizon': holds 'horizon'"),
    ("predictions.csv", header_only, "a header and no rows"),
    ("predictions.csv", column_twice("model"), "column 'model': is named twice"),
    ("forecast.csv", renamed("forecast", "value"), "column 'forecast': is missing"),
    ("forecast.csv", dropped("period"), "column 'period': is missing"),
    ("forecast.csv", cell("forecast", "high", 3), "line 3, column 'forecast': holds 'high'"),
    ("forecast.csv", cell("analytic_low_80", "low"), "column 'analytic_low_80'"),
    ("forecast.csv", cell("horizon", "1.5"), "column 'horizon': holds '1.5' where castline writes a whole number"),
    ("forecast.csv", emptied, "the file is empty"),
    ("forecast.csv", cut_short, "cut short"),
    ("coefficients.csv", renamed("estimate", "est"), "column 'estimate': is missing"),
    ("coefficients.csv", cell("estimate", "large"), "column 'estimate': holds 'large'"),
    ("coefficients.csv", dropped("term"), "column 'term': is missing"),
    ("coefficients.csv", header_again, "line 3, column 'estimate'"),
    ("history.csv", renamed("actual", "value"), "column 'actual': is missing"),
    ("history.csv", cell("actual", "twelve"), "column 'actual': holds 'twelve'"),
    ("history.csv", emptied, "the file is empty"),
    ("history.csv", cut_short, "cut short"),
    ("residuals.csv", dropped("residual"), "column 'residual': is missing"),
    ("residuals.csv", cell("fitted", "nearly"), "column 'fitted'"),
    ("series.csv", dropped("mae"), "column 'mae': is missing"),
    ("series.csv", cell("beats", "perhaps"), "column 'beats': holds 'perhaps' where castline writes True or False"),
    ("series.csv", header_again, "line 3, column 'n'"),
    ("realised.csv", dropped("error"), "column 'error': is missing"),
    ("realised.csv", cell("actual", "later"), "column 'actual'"),
    ("realised.csv", cut_short, "cut short"),
    ("interval_coverage.csv", dropped("coverage"), "column 'coverage': is missing"),
    ("interval_coverage.csv", cell("level", "high"), "column 'level'"),
    ("interval_coverage_by.csv", dropped("group"), "column 'group': is missing"),
    ("diagnostics.csv", cell("flagged", "maybe"), "column 'flagged'"),
    ("influential_rows.csv", dropped("cooks_distance"), "column 'cooks_distance': is missing"),
    ("series_fallbacks.csv", renamed("model", "m"), "column 'model': is missing"),
    ("metrics.json", not_json, "cannot be read as JSON"),
    ("metrics.json", without("models"), "key 'models': is missing"),
    ("metrics.json", without("recommended"), "key 'recommended': is missing"),
    ("metrics.json", set_to("models", "none"), "key 'models': holds 'none'"),
    ("metrics.json", in_first_model("mae", "big"), "key 'models[0].mae': holds 'big'"),
    ("metrics.json", set_to("by_origin", 3), "key 'by_origin'"),
    ("metrics.json", set_to("series_summary", [{"a": 1}]), "key 'series_summary[0].model': is missing"),
    ("metrics.json", set_to("significance_level", "x"), "key 'significance_level'"),
    ("metrics.json", set_to("recommended", "nosuch"), "key 'recommended': names 'nosuch'"),
    ("metrics.json", lambda p: p.write_text("[1, 2]", encoding="utf-8"), "holds no JSON object"),
    ("model.json", not_json, "cannot be read as JSON"),
    ("model.json", without("models"), "key 'models': is missing"),
    ("model.json", set_to("series_columns", "region"), "key 'series_columns'"),
    ("fingerprint.json", without("series"), "key 'series': is missing"),
    ("fingerprint.json", set_to("rows", "sixty"), "key 'rows'"),
    ("track_record.json", not_json, "cannot be read as JSON"),
    ("track_record.json", without("warnings"), "key 'warnings': is missing"),
    ("track_record.json", set_to("recommended", []), "key 'recommended'"),
    ("spec.yaml", removed, "missing spec.yaml"),
    ("scenarios.csv", lambda p: p.write_text("a,b\n1,2\n", encoding="utf-8"), "column 'scenario': is missing"),
]


def _pages(folder: Path) -> dict[str, bytes]:
    return {name: (folder / name).read_bytes() for name in ("report.html", "summary.md")}


@pytest.mark.parametrize("name, edit, says", CASES, ids=[f"{n}-{i}" for i, (n, _, _) in enumerate(CASES)])
def test_a_damaged_run_file_stops_the_report_in_one_line(run_folder, tmp_path, capsys, name, edit, says):
    folder = tmp_path / run_folder.name
    shutil.copytree(run_folder, folder)
    target = folder / name
    edit(target)
    before = target.read_bytes() if target.exists() else None
    pages = _pages(folder)
    capsys.readouterr()
    assert cli.main(["report", str(folder)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert err.count("\n") == 1, err
    named = str(folder) if name == "spec.yaml" else str(target)
    assert err.startswith(f"castline: {named}"), err
    assert says in err, err
    assert (target.read_bytes() if target.exists() else None) == before
    assert _pages(folder) == pages, "no page was written"


def test_an_untouched_run_folder_and_one_with_a_stray_file_report_as_before(run_folder, tmp_path, capsys):
    folder = tmp_path / run_folder.name
    shutil.copytree(run_folder, folder)
    (folder / "notes.txt").write_text("checked by hand\n", encoding="utf-8")
    capsys.readouterr()
    assert cli.main(["report", str(folder)]) == 0
    assert capsys.readouterr().err == ""
