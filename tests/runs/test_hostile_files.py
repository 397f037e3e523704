"""Hostile files: CSV cells that would run as spreadsheet formulas, names that read as paths,
and input files beyond the size and row limits set in the spec, through the command line
(the function that neutralises a cell is tested in tests/record/test_safe_csv.py).

Plumbing tests on small invented tables; no figure here is a reference value. The
characters that start a spreadsheet formula (=, +, -, @, tab, carriage return) and the remedy
(a single quote in front of the cell) are those of the OWASP "CSV Injection" page; every CSV a
command writes is read back with the standard library's csv.reader, the reference reader.
"""

from __future__ import annotations

import csv
import io
import math
import re
from pathlib import Path

import pandas as pd
import pytest
import yaml
from conftest import TEST_DATA

from pipeline import cli

CLEAN = TEST_DATA / "broken_inputs" / "clean.csv"
FORMULA = '=HYPERLINK("http://example.invalid";"click")'


# ------------------------------------------------------------ through the command line

def hostile_folder(tmp_path: Path, **input_keys) -> Path:
    """Write clean.csv with a formula as one region and one channel, and a spec for it."""
    text = CLEAN.read_text(encoding="utf-8").replace("South", FORMULA.replace('"', '""'))
    text = text.replace(",web\n", ",@SUM(A1)\n")
    (tmp_path / "hostile.csv").write_text(text.replace(f",{FORMULA.replace(chr(34), 2 * chr(34))},",
                                                       f',"{FORMULA.replace(chr(34), 2 * chr(34))}",'),
                                          encoding="utf-8")
    spec = {"name": "hostile",
            "input": {"file": "hostile.csv", "date_column": "month", "series": ["region"], **input_keys},
            "target": "sales", "drivers": {"numeric": ["price"], "categorical": ["channel"]},
            "validation": {"method": "holdout", "last_periods": 2},
            "models": ["ols"], "output": {"folder": "out"}}
    path = tmp_path / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def csv_cells(path: Path) -> list[str]:
    return [cell for row in csv.reader(path.open(encoding="utf-8")) for cell in row]


def test_the_run_folder_csvs_hold_no_cell_that_starts_a_formula(tmp_path, capsys):
    spec = hostile_folder(tmp_path)
    assert cli.main(["run", str(spec)]) == 0
    (folder,) = [p for p in (tmp_path / "out").iterdir() if p.is_dir()]
    written = sorted(folder.glob("*.csv"))
    assert {p.name for p in written} >= {"predictions.csv", "forecast.csv", "coefficients.csv",
                                         "history.csv", "residuals.csv"}
    for path in written:
        for cell in csv_cells(path):
            if cell[:1] in ("=", "+", "-", "@"):
                float(cell)      # only a number may start with '-' or '+'
    series = pd.read_csv(folder / "forecast.csv")["series"]
    assert "'" + FORMULA in set(series)
    assert "'" + FORMULA in set(pd.read_csv(folder / "history.csv")["series"])
    assert (pd.read_csv(folder / "history.csv")["actual"] > 0).all()


def test_the_problems_file_holds_no_cell_that_starts_a_formula(tmp_path, capsys):
    spec = hostile_folder(tmp_path)
    data = tmp_path / "hostile.csv"
    data.write_text(data.read_text(encoding="utf-8").replace(",128,", ",=1+2,").replace(",4.4,", ",-@x,"),
                    encoding="utf-8")
    problems = tmp_path / "problems.csv"
    assert cli.main(["check", str(spec), "--problems", str(problems)]) == 2
    values = pd.read_csv(problems, dtype=str)["value"].fillna("").tolist()
    assert any("=1+2" in v for v in values) and any("-@x" in v for v in values)
    assert not [c for c in csv_cells(problems) if c[:1] in ("=", "+", "@")]


# ------------------------------------------------------------ names that read as paths

@pytest.mark.parametrize("name", ["..", "../escape", "/etc/passwd", "a/b", "a..b", "..\\up", "C:\\x"])
def test_a_name_that_reads_as_a_path_is_refused_in_one_line(tmp_path, capsys, name):
    spec = hostile_folder(tmp_path)
    data = yaml.safe_load(spec.read_text(encoding="utf-8"))
    data["name"] = name
    spec.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    assert cli.main(["run", str(spec)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("castline: ")
    assert f"{spec}:1: name:" in err
    assert not (tmp_path / "out").exists()


def test_a_run_folder_lands_directly_inside_the_output_folder(tmp_path, capsys):
    spec = hostile_folder(tmp_path)
    assert cli.main(["run", str(spec)]) == 0
    folders = [p for p in (tmp_path / "out").rglob("*") if p.is_dir()]
    assert len(folders) == 1 and folders[0].parent == tmp_path / "out"


def test_a_run_id_that_would_escape_the_output_folder_is_refused(tmp_path, capsys, monkeypatch):
    from pipeline.record import run_folder as publish
    spec = hostile_folder(tmp_path)
    monkeypatch.setattr(publish, "new_run_id", lambda now=None: "../escaped")
    assert cli.main(["run", str(spec)]) == 2
    err = capsys.readouterr().err
    assert "outside the output folder" in err and err.count("\n") == 1
    assert not (tmp_path / "escaped").exists() and not (tmp_path / ".incomplete-").exists()


# ------------------------------------------------------------ size and row limits

def rows_in(path: Path) -> int:
    return len(path.read_text(encoding="utf-8").splitlines()) - 1


def test_a_file_with_more_rows_than_input_max_rows_is_refused_naming_file_and_limit(tmp_path, capsys):
    spec = hostile_folder(tmp_path, max_rows=10)
    assert rows_in(tmp_path / "hostile.csv") == 14
    assert cli.main(["check", str(spec)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("castline: ")
    assert str(tmp_path / "hostile.csv") in err and "input.max_rows: 10" in err


def test_a_file_at_the_row_limit_passes(tmp_path, capsys):
    spec = hostile_folder(tmp_path, max_rows=14)
    assert cli.main(["check", str(spec)]) == 0


def test_trailing_blank_lines_do_not_count_against_the_row_limit(tmp_path, capsys):
    spec = hostile_folder(tmp_path, max_rows=14)
    data = tmp_path / "hostile.csv"
    data.write_text(data.read_text(encoding="utf-8") + "\n\n\n", encoding="utf-8")
    assert cli.main(["check", str(spec)]) == 0


def test_a_file_larger_than_input_max_megabytes_is_refused_before_it_is_read(tmp_path, capsys,
                                                                           monkeypatch):
    from pipeline.stages import ingest
    spec = hostile_folder(tmp_path, max_megabytes=0.0001)          # 100 bytes; the file is larger
    assert (tmp_path / "hostile.csv").stat().st_size > 100
    monkeypatch.setattr(ingest, "_read_csv", lambda *a, **k: pytest.fail("the file was read"))
    assert cli.main(["check", str(spec)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and str(tmp_path / "hostile.csv") in err
    assert "input.max_megabytes: 0.0001" in err


def test_a_file_within_the_size_limit_passes(tmp_path, capsys):
    spec = hostile_folder(tmp_path, max_megabytes=1)
    assert cli.main(["check", str(spec)]) == 0


@pytest.mark.parametrize("keys, where", [({"max_rows": 0}, "input.max_rows"),
                                         ({"max_rows": "many"}, "input.max_rows"),
                                         ({"max_rows": 2.5}, "input.max_rows"),
                                         ({"max_megabytes": -1}, "input.max_megabytes"),
                                         ({"max_megabytes": "big"}, "input.max_megabytes")])
def test_the_limits_are_checked(tmp_path, capsys, keys, where):
    spec = hostile_folder(tmp_path, **keys)
    assert cli.main(["check", str(spec)]) == 2
    err = capsys.readouterr().err
    assert f": {where}: " in err and err.count("\n") == 1


def test_the_row_limit_applies_to_parquet_too(tmp_path, capsys):
    spec = hostile_folder(tmp_path, max_rows=3)
    frame = pd.read_csv(tmp_path / "hostile.csv")
    frame.to_parquet(tmp_path / "hostile.parquet")
    data = yaml.safe_load(spec.read_text(encoding="utf-8"))
    data["input"]["file"] = "hostile.parquet"
    spec.write_text(yaml.safe_dump(data), encoding="utf-8")
    assert cli.main(["check", str(spec)]) == 2
    assert "input.max_rows: 3" in capsys.readouterr().err
    assert math.isfinite(float(len(frame)))


# ------------------------------------------------------------ hostile text, every CSV read back

# Series names and categorical levels that break a careless CSV writer or start a formula:
# line breaks of every kind, quotes, the delimiter, formula starts (OWASP "CSV Injection": = + -
# @ tab, carriage return; also after leading spaces), unicode line separators, NUL and very long text.
HOSTILE_NAMES = ["North\rEast", "two\nlines", "crlf\r\nname", 'say "hi", twice', "a,b", "  =1+1", "\t=tab",
                 "\rCR start", "@SUM(A1)", "+plus", "-minus", "u\u2028v\u2029w", "n\x00m", "=" + "A" * 10_000]
HOSTILE_LEVELS = ["=shop", "web\r\n", "\t@mail"]
FORMULA_START = r"[\t\r]|\s*[=+\-@]"     # what the cells may not start with, unless a number


def _hostile_frame(nul: bool) -> pd.DataFrame:
    """Eight months of each hostile series, the last to forecast; sales a made-up trend."""
    names = HOSTILE_NAMES if nul else [n for n in HOSTILE_NAMES if "\x00" not in n]
    return pd.DataFrame([{"month": f"2020-{m + 1:02d}-01", "region": name,
                          "sales": float(100 + 10 * s + 3 * m + m % 3) if m < 7 else None,
                          "price": 4.0 + 0.1 * m + 0.01 * s, "channel": HOSTILE_LEVELS[(m + s) % 3]}
                         for s, name in enumerate(names) for m in range(8)])


def _hostile_spec(tmp_path: Path, file: str) -> Path:
    spec = {"name": "hostile", "input": {"file": file, "date_column": "month", "series": ["region"]},
            "target": "sales", "drivers": {"numeric": ["price"], "categorical": ["channel"]},
            "validation": {"method": "holdout", "last_periods": 2}, "models": ["ols"], "output": {"folder": "out"}}
    path = tmp_path / f"{Path(file).stem}.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def _read_back(source) -> list[list[str]]:
    # Reference reader: the standard library's csv.reader, over a file opened with newline="" as
    # its documentation asks.
    if isinstance(source, Path):
        with source.open(encoding="utf-8", newline="") as handle:
            return list(csv.reader(handle))
    return list(csv.reader(io.StringIO(source, newline="")))


def _assert_reads_back(source, rows: int) -> list[list[str]]:
    """The CSV reads back as the header and ``rows`` rows of as many cells, none a formula."""
    import re
    table = _read_back(source)
    assert len(table) == rows + 1, source
    assert {len(row) for row in table} == {len(table[0])}, source
    for row in table:
        for cell in row:
            if re.match(FORMULA_START, cell):
                float(cell)      # only a number castline wrote may start so
    return table


def test_hostile_text_in_every_csv_castline_writes_reads_back_row_for_row(tmp_path, capsys, monkeypatch):
    from conftest import run_cli

    from pipeline.record import run_folder, safe_csv
    written: dict[str, int] = {}
    real = safe_csv.write_csv

    def counting(frame, target, **options):
        # A run's tables are written in its staging folder, renamed when complete.
        key = str(target).replace("/.incomplete-", "/") if isinstance(target, (str, Path)) else "stdout"
        # An option's output file is written in one step: a hidden .NAME.*.part renamed over NAME.
        hidden = re.fullmatch(r"\.(.+)\.[^.]+\.part", Path(key).name)
        key = str(Path(key).with_name(hidden.group(1))) if hidden else key
        written[key] = len(frame)
        real(frame, target, **options)
    monkeypatch.setattr(safe_csv, "write_csv", counting)
    monkeypatch.setattr(run_folder, "write_csv", counting)

    _hostile_frame(nul=True).to_parquet(tmp_path / "hostile.parquet")   # NUL: parquet only (a NUL makes CSV binary)
    spec = _hostile_spec(tmp_path, "hostile.parquet")
    assert run_cli(["run", str(spec)])[0] == 0
    assert run_cli(["run", str(spec)])[0] == 0
    first, second = sorted(p for p in (tmp_path / "out").iterdir() if p.is_dir())
    for folder in (first, second):
        tables = sorted(folder.glob("*.csv"))
        assert {"forecast.csv", "history.csv", "predictions.csv", "coefficients.csv"} <= {p.name for p in tables}
        for path in tables:
            assert str(path) in written, f"{path.name} was not written by safe_csv.write_csv"
            _assert_reads_back(path, written[str(path)])
        series = {row[2] for row in _read_back(folder / "forecast.csv")[1:]}
        assert series == {safe_csv.neutralise(name) for name in HOSTILE_NAMES}   # every name whole
        levels = " ".join(row[1] for row in _read_back(folder / "coefficients.csv")[1:])
        assert "web\r\n" in levels
        code, _, err = run_cli(["report", str(folder)])
        assert code == 0, err

    out = tmp_path / "forecasts.csv"
    assert run_cli(["forecast", str(second / "model.json"), str(tmp_path / "hostile.parquet"),
                    "--output", str(out)])[0] == 0
    assert {row[2] for row in _assert_reads_back(out, written[str(out)])[1:]} \
        == {safe_csv.neutralise(name) for name in HOSTILE_NAMES}

    revisions = tmp_path / "revisions.csv"
    assert run_cli(["compare", str(first), str(second), "--revisions", str(revisions)])[0] == 0
    _assert_reads_back(revisions, written[str(revisions)])
    for show in ("metrics", "realised"):
        code, text, err = run_cli(["history", str(spec), "--format", "csv", "--show", show])
        assert code == 0, err
        _assert_reads_back(text, written.pop("stdout"))

    # The check's problems file, from a CSV input (written as the standard writer quotes it).
    frame = _hostile_frame(nul=False)
    frame["sales"] = frame["sales"].astype(object)
    frame.loc[0, "sales"], frame.loc[1, "sales"] = "\r=1+2", "-@x"
    frame.loc[frame["month"] == "2020-08-01", "price"] = None
    frame.to_csv(tmp_path / "hostile.csv", index=False, lineterminator="\r\n")
    problems = tmp_path / "problems.csv"
    code, _, err = run_cli(["check", str(_hostile_spec(tmp_path, "hostile.csv")), "--problems", str(problems)])
    assert code == 2 and err.startswith("castline: ") and err.count("\n") == 1
    table = _assert_reads_back(problems, written[str(problems)])
    assert len(table) > 2 and any("\\r=1+2" in cell for row in table for cell in row)
