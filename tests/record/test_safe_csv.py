"""CSV writing (pipeline.record.safe_csv): text cells that would run as spreadsheet formulas.

Plumbing tests on small invented tables; no figure here is a reference value. The
characters that start a spreadsheet formula (=, +, -, @) and the remedy (a single quote
in front of the cell) are those of the OWASP "CSV Injection" page. Whole runs' files are
checked in tests/runs/test_hostile_files.py.
"""

from __future__ import annotations

import csv

import pandas as pd
import pytest

from pipeline.record.safe_csv import neutralise, neutralised, write_csv

FORMULA = '=HYPERLINK("http://example.invalid";"click")'


@pytest.mark.parametrize("text", ["=1+1", "+1+1", "-1+1", "@SUM(A1)", FORMULA, "-", "=cmd|' /C calc'!A0"])
def test_text_that_starts_a_formula_gets_a_quote(text):
    assert neutralise(text) == "'" + text


@pytest.mark.parametrize("value", ["North", "2020-01", "", " =x", "'=x", "a=b", 3, -3, -2.5, 0.0,
                                   float("-inf"), None, True])
def test_anything_else_is_left_as_it_is(value):
    assert neutralise(value) is value or neutralise(value) == value


def test_numbers_in_a_frame_are_untouched_and_text_cells_neutralised(tmp_path):
    frame = pd.DataFrame({"series": ["=evil", "North", "-South"], "value": [-1.5, 2.0, -3.0],
                          "count": [-1, 2, 3], "mixed": ["@x", -4.0, None]})
    path = tmp_path / "out.csv"
    write_csv(frame, path)
    rows = list(csv.reader(path.open(encoding="utf-8")))
    assert rows[0] == ["series", "value", "count", "mixed"]
    assert [r[0] for r in rows[1:]] == ["'=evil", "North", "'-South"]
    assert [float(r[1]) for r in rows[1:]] == [-1.5, 2.0, -3.0]
    assert [int(r[2]) for r in rows[1:]] == [-1, 2, 3]
    assert [r[3] for r in rows[1:]] == ["'@x", "-4.0", ""]
    assert frame["series"].tolist() == ["=evil", "North", "-South"]     # the original is not changed
    assert neutralised(pd.DataFrame({"=a": [1]})).columns.tolist() == ["'=a"]


def test_a_categorical_column_is_neutralised_too():
    frame = pd.DataFrame({"level": pd.Categorical(["+a", "b"])})
    assert neutralised(frame)["level"].tolist() == ["'+a", "b"]


@pytest.mark.parametrize("column", [
    ["=a", "b", None], ["b", "c"], [], [1.5, None], [None, None], ["-x", 2, None, "@y", -3.0, True],
    pd.array(["+a", None, "b"], dtype="string"), pd.array(["a", "b"], dtype="string"),
    pd.Categorical(["-a", "b", "-a"]), pd.Categorical([]),
])
def test_a_column_is_neutralised_as_each_cell_would_be(column):
    # The cell-by-cell rule (neutralise) applied with map is the construction checked against: the
    # same CSV text (a missing cell is written empty, whichever missing value holds it).
    frame = pd.DataFrame({"c": pd.Series(column, dtype=object if isinstance(column, list) else None)})
    expected = frame.assign(c=frame["c"].astype(object).map(neutralise))
    assert neutralised(frame).to_csv(index=False) == expected.to_csv(index=False)
    assert frame["c"].astype(object).tolist() == pd.Series(column, dtype=object).tolist()   # unchanged
