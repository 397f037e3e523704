"""CSV writing (pipeline.record.safe_csv): text cells that would run as spreadsheet formulas.

Plumbing tests on small invented tables; no figure here is a reference value. The
characters that start a spreadsheet formula (=, +, -, @, tab, carriage return; the first four
also after leading white space) and the remedy (a single quote in front of the cell) are those
of the OWASP "CSV Injection" page. The reference reader of what is written is the standard
library's csv.reader. Whole runs' files are
checked in tests/runs/test_hostile_files.py.
"""

from __future__ import annotations

import csv
import re
import sys

import numpy as np
import pandas as pd
import pytest

from pipeline.record.safe_csv import line_end, neutralise, neutralised, write_csv

FORMULA = '=HYPERLINK("http://example.invalid";"click")'


@pytest.mark.parametrize("text", ["=1+1", "+1+1", "-1+1", "@SUM(A1)", FORMULA, "-", "=cmd|' /C calc'!A0",
                                  "\t", "\tplain", "\rplain", "\r\n=1", " =x", "   +1", " \t @x", "\n-2",
                                  "\u3000=x", "\xa0@x", "-3.5", "-@x"])
def test_text_that_starts_a_formula_gets_a_quote(text):
    assert neutralise(text) == "'" + text


@pytest.mark.parametrize("value", ["North", "2020-01", "", " ", " x", "'=x", "a=b", "x\r", "x\t=", "a\n=b",
                                   3, -3, -2.5, 0.0, float("-inf"), None, True])
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


def test_every_white_space_before_a_formula_start_is_seen_by_the_column_check():
    # Every character the pattern's white space (Python's re \s, str patterns) matches, then '=':
    # the column check (first characters at once) must pass each to the cell rule.
    spaces = [c for c in map(chr, range(sys.maxunicode + 1)) if re.fullmatch(r"\s", c)]
    assert len(spaces) > 20 and "\u3000" in spaces and "\x1c" in spaces
    frame = pd.DataFrame({"c": [space + "=1" for space in spaces] + ["x=1"]})
    assert neutralised(frame)["c"].tolist() == ["'" + space + "=1" for space in spaces] + ["x=1"]


def test_a_categorical_column_is_neutralised_too():
    frame = pd.DataFrame({"level": pd.Categorical(["+a", "b"])})
    assert neutralised(frame)["level"].tolist() == ["'+a", "b"]


@pytest.mark.parametrize("column", [
    ["=a", "b", None], ["b", "c"], [], [1.5, None], [None, None], ["-x", 2, None, "@y", -3.0, True],
    pd.array(["+a", None, "b"], dtype="string"), pd.array(["a", "b"], dtype="string"),
    pd.Categorical(["-a", "b", "-a"]), pd.Categorical([]), pd.Categorical(["b", " =a"]), pd.Categorical(["a", "b"]),
    ["\tx", " y", " =z", "\r", 4, "\u2028@"], pd.array(["  -a", "\t", None], dtype="str"),
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
    returns = numbers.assign(name=numbers["name"].where(np.arange(rows) != rows - 5, "a\rb"))   # one CR, late
    return {"numbers.csv": numbers, "dated.csv": dated, "small.csv": numbers.head(3), "empty.csv": numbers.head(0),
            "returns.csv": returns}


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
    # The carriage return is in the last run of rows only; every run ends its lines as the table does.
    assert (tmp_path / "together" / "returns.csv").read_bytes().count(b"\r\n") == len(tables["returns.csv"]) + 1
    assert len(_read_back(tmp_path / "together" / "returns.csv")) == len(tables["returns.csv"]) + 1


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


HOSTILE = ["North\rEast", "two\nlines", "crlf\r\nname", 'say "hi"', "a,b", '"', ",", "\r", "\n", "\r\n",
           "  =1+1", "\t=tab", "\tplain", "\rCR start", "@SUM(A1)", "+plus", "-minus", "-3.5", "u\u2028v\u2029w",
           "n\x00m", "x" * 100_000, "", None, "plain", "'=already", '=HYPERLINK("http://example.invalid","x")']


def _read_back(path) -> list[list[str]]:
    # Reference reader: the standard library's csv.reader, the file opened with newline="" as
    # its documentation asks.
    with open(path, encoding="utf-8", newline="") as handle:
        return list(csv.reader(handle))


@pytest.mark.parametrize("kind", ["object", "str", "category"])
def test_hostile_text_reads_back_row_for_row_as_written(tmp_path, kind):
    frame = pd.DataFrame({"name": pd.Series(HOSTILE, dtype=kind if kind != "str" else "str"),
                          "value": np.arange(len(HOSTILE)) - 3.5, "count": np.arange(len(HOSTILE)) - 3})
    path = tmp_path / "out.csv"
    write_csv(frame, path)
    rows = _read_back(path)
    assert rows[0] == ["name", "value", "count"] and len(rows) == len(frame) + 1
    assert all(len(row) == 3 for row in rows)
    missing = frame["name"].isna().to_numpy()
    expected = ["" if gone else neutralise(v) for v, gone in zip(frame["name"].astype(object), missing)]
    assert [row[0] for row in rows[1:]] == expected
    assert [float(row[1]) for row in rows[1:]] == (np.arange(len(HOSTILE)) - 3.5).tolist()   # numbers stay numbers
    assert [int(row[2]) for row in rows[1:]] == list(range(-3, len(HOSTILE) - 3))
    for row in rows:
        for cell in row:
            if re.match(r"[\t\r]|\s*[=+\-@]", cell):
                float(cell)   # only a number may start so
    # What the run folder's reader (present.run_files, pandas) makes of it: the same rows.
    back = pd.read_csv(path, dtype={"name": str}, keep_default_na=False)
    assert back["name"].tolist() == expected


def test_lines_end_in_cr_lf_only_when_a_cell_or_a_name_holds_a_carriage_return(tmp_path):
    plain = pd.DataFrame({"name": ["a\nb", "c"], "x": [1.0, 2.0]})
    assert line_end(plain) == "\n"
    write_csv(plain, tmp_path / "plain.csv")
    assert (tmp_path / "plain.csv").read_bytes() == b'name,x\n"a\nb",1.0\nc,2.0\n'
    for frame in [plain.assign(name=["a\rb", "c"]), plain.rename(columns={"x": "x\r"}),
                  plain.assign(name=pd.Categorical(["a", "b\r"])),
                  plain.assign(name=pd.array(["a", "\r"], dtype="str"))]:
        assert line_end(frame) == "\r\n"
    write_csv(plain.assign(name=["a\rb", "c"]), tmp_path / "cr.csv")
    assert (tmp_path / "cr.csv").read_bytes() == b'name,x\r\n"a\rb",1.0\r\nc,2.0\r\n'
    assert line_end(pd.DataFrame({"n": [1.5, None], "o": pd.Series([None, 2], dtype=object)})) == "\n"
