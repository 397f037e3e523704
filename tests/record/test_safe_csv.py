"""CSV writing (pipeline.record.safe_csv): text cells that would run as spreadsheet formulas.

Plumbing tests on small invented tables; no figure here is a reference value. The
characters that start a spreadsheet formula (=, +, -, @) and the remedy (a single quote
in front of the cell) are those of the OWASP "CSV Injection" page. Whole runs' files are
checked in tests/runs/test_hostile_files.py.
"""

from __future__ import annotations

import csv

import numpy as np
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


def _tables(rows: int) -> dict[str, pd.DataFrame]:
    """Tables of every kind a run writes: floats with NaN, -0.0 and exponents, integers, booleans,
    text with commas, quotes, line breaks and formula starts, missing text, dates (written whole:
    pandas picks a date column's format from all of it); seeded numpy, values made up."""
    import numpy as np
    rng = np.random.default_rng(20261203)
    floats = rng.normal(size=rows) * 10.0 ** rng.integers(-8, 8, rows)
    floats[::7] = np.nan
    floats[1] = -0.0
    text = pd.array(rng.choice(["plain", "a, b", 'say "hi"', "two\nlines", "=1+1", "-3", None], rows), dtype="str")
    numbers = pd.DataFrame({"x": floats, "n": rng.integers(-10 ** 9, 10 ** 9, rows), "flag": rng.random(rows) < 0.5,
                            "name": text, "other": pd.Series(rng.choice([1.5, "t", None], rows), dtype=object)})
    dated = numbers.assign(when=pd.Timestamp("2024-01-01") + pd.to_timedelta(rng.integers(0, 3, rows), unit="D"))
    return {"numbers.csv": numbers, "dated.csv": dated, "small.csv": numbers.head(3), "empty.csv": numbers.head(0)}


@pytest.mark.forks
@pytest.mark.parametrize("one_process", [False, True])
def test_tables_written_together_in_runs_of_rows_are_the_bytes_write_csv_writes(tmp_path, monkeypatch, one_process):
    from pipeline.record import safe_csv
    if one_process:
        monkeypatch.setenv("CASTLINE_ONE_PROCESS", "1")
    monkeypatch.setattr(safe_csv, "PIECE_CELLS", 500)   # some 100 rows a run: many parts
    monkeypatch.setattr(safe_csv, "PAYS_FROM", 0.0)     # shared however little the work
    tables = _tables(2_345)
    (tmp_path / "one").mkdir()
    (tmp_path / "together").mkdir()
    for name, frame in tables.items():
        write_csv(frame, tmp_path / "one" / name)
    safe_csv.write_csvs([(frame, tmp_path / "together" / name) for name, frame in tables.items()])
    for name in tables:
        assert (tmp_path / "together" / name).read_bytes() == (tmp_path / "one" / name).read_bytes(), name
    assert sorted(p.name for p in (tmp_path / "together").iterdir()) == sorted(tables)   # no part left
    assert len(safe_csv._cut(tables["numbers.csv"])) > 20 and len(safe_csv._cut(tables["dated.csv"])) == 1


def test_numbers_are_written_as_pandas_itself_writes_them(tmp_path):
    # Reference: pandas' own DataFrame.to_csv of the same frame (numpy's text for each float).
    # write_csv makes that text with Python's repr, faster; the bytes must be the same for
    # every kind of float: missing, infinite, signed zero, the largest and smallest, integers,
    # the switch to exponent form at 1e16 and 1e-4, and random numbers of full precision.
    rng = np.random.default_rng(11)
    special = [np.nan, np.inf, -np.inf, -0.0, 0.0, 1e16, 9999999999999998.0, 1e-4, 9.9e-5, 5e-324,
               1.7976931348623157e308, 2.0, -3.0, 0.1, 1 / 3, 123456789012345678.0]
    values = np.concatenate([special, rng.normal(size=2000) * 10.0 ** rng.integers(-12, 20, 2000)])
    frame = pd.DataFrame({"name": [f"s{i}" for i in range(len(values))], "x": values,
                          "whole": np.arange(len(values)), "y": values[::-1].copy()})
    write_csv(frame, tmp_path / "ours.csv")
    frame.to_csv(tmp_path / "pandas.csv", index=False)
    assert (tmp_path / "ours.csv").read_bytes() == (tmp_path / "pandas.csv").read_bytes()
