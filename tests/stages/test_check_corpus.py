"""The data checks against a corpus of broken inputs (tests/data/broken_inputs/cases.yaml).

Every case is run through the library: its spec (the manifest's base spec with the
case's overrides) is written to tmp_path, read with ``pipeline.load_spec`` and
checked with ``pipeline.check`` (or ``check_data(today=...)`` where the case fixes
the current day). A few cases also go through the command line in a real
process. Expected rows are lines of the file with the header as line 1; they
were counted by hand in the corpus files, which are invented and carry no
reference values of their own. Interpolated values are compared with
numpy.interp (reference library).
"""

from __future__ import annotations

import copy
import csv
import subprocess
import sys
from dataclasses import dataclass
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import TEST_DATA

import pipeline
from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.errors import DataError, SpecError
from pipeline.stages.check import CheckedData, CheckFailed, Problem, check_data
from pipeline.stages.ingest import read_input

CORPUS = TEST_DATA / "broken_inputs"
MANIFEST = yaml.safe_load((CORPUS / "cases.yaml").read_text(encoding="utf-8"))
CASES = {case["id"]: case for case in MANIFEST["cases"]}


# ------------------------------------------------------------------ helpers

def merged(base: dict, override: dict) -> dict:
    """Return base with override merged in: mappings merge key by key, anything else replaces."""
    out = copy.deepcopy(base)
    for key, value in override.items():
        if isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = merged(out[key], value)
        else:
            out[key] = copy.deepcopy(value)
    return out


def spec_data(case: dict, folder: Path) -> dict:
    data = merged(MANIFEST["base_spec"], case.get("spec") or {})
    data["input"]["file"] = str(CORPUS / case["file"])
    data["output"] = {"folder": str(folder / "reports")}
    return data


def write_spec(case: dict, folder: Path) -> Path:
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec_data(case, folder), sort_keys=False, allow_unicode=True),
                    encoding="utf-8")
    return path


def run_case(case: dict, folder: Path) -> CheckedData:
    """Return the checked data of a case, or raise CheckFailed / DataError."""
    spec = pipeline.load_spec(write_spec(case, folder))
    today = case.get("today")
    if today is None:
        return pipeline.check(spec)
    return check_data(spec, read_input(spec), today=today)


def matches(expected: dict, problem: Problem) -> bool:
    return (expected["check"] in problem.check
            and expected["column"] == problem.column
            and expected["row"] == problem.row
            and str(expected.get("value", "")) in problem.value
            and expected.get("count", problem.count) == problem.count)


def assert_same_problems(expected: list[dict], found: list[Problem]) -> None:
    """Assert the problems are exactly the expected ones, in any order."""
    listing = "\n".join(f"  {p}" for p in found) or "  (none)"
    assert len(found) == len(expected), f"expected {len(expected)} problem(s), found:\n{listing}"
    left = list(found)
    for want in expected:
        hit = next((p for p in left if matches(want, p)), None)
        assert hit is not None, f"no problem like {want}; found:\n{listing}"
        left.remove(hit)


def checked_rows(data: CheckedData) -> pd.DataFrame:
    return pd.concat([data.history, data.future], ignore_index=True)


def cell(data: CheckedData, series: str, period: str, column: str):
    rows = checked_rows(data)
    hit = rows[(rows[SERIES] == series) & (rows[PERIOD] == pd.Period(period, freq="M"))]
    assert len(hit) == 1, f"{len(hit)} rows for {series} {period}"
    return hit.iloc[0][column]


def reference_interpolation(data: CheckedData, spec: pipeline.Spec, series: str, period: str,
                            column: str) -> float:
    """Return numpy.interp (reference library) of the column over the file's own months."""
    raw = data.raw.frame
    rows = raw[raw[spec.input.series[0]] == series]
    months = pd.to_datetime(rows[spec.input.date_column]).dt.to_period("M")
    given = rows[column].notna().to_numpy()
    at = pd.Period(period, freq="M")
    assert at not in set(months[given]), "the cell was given in the file: nothing to interpolate"
    x = np.array([m.ordinal for m in months[given]], dtype=float)
    order = np.argsort(x)
    return float(np.interp(at.ordinal, x[order], rows[column].to_numpy(dtype=float)[given][order]))


def corpus_params(kind: str | None = None, *, exact: bool = True) -> list:
    """Return the cases as pytest params, the known bugs as strict xfails.

    exact: whether the test asserts the problems are exactly the expected ones (a case with
    xfail_exact finds its fault but reports more).
    """
    params = []
    for case in MANIFEST["cases"]:
        if kind and kind not in case["expect"]:
            continue
        reason = case.get("xfail") or (case.get("xfail_exact") if exact else None)
        marks = [pytest.mark.xfail(strict=True, reason=reason)] if reason else []
        params.append(pytest.param(case, id=case["id"], marks=marks))
    return params


# ------------------------------------------------------------------ the manifest itself

def test_the_corpus_is_complete_and_every_file_is_listed():
    listed = {case["file"] for case in MANIFEST["cases"]}
    data_files = {p.name for p in CORPUS.iterdir()
                  if p.is_file() and p.name not in ("cases.yaml", "make_binary_cases.py")}
    assert len(MANIFEST["cases"]) >= 30
    assert len(CASES) == len(MANIFEST["cases"]), "two cases share an id"
    assert listed == data_files, (listed ^ data_files)
    suffixes = {Path(name).suffix for name in data_files}
    assert {".csv", ".parquet", ".xlsx"} <= suffixes
    for case in MANIFEST["cases"]:
        expect = case["expect"]
        assert len({"problems", "passes", "data_error"} & set(expect)) == 1, case["id"]


def test_every_check_is_covered_by_the_corpus():
    checks = {p["check"] for case in MANIFEST["cases"] if not case.get("xfail")
              for p in case["expect"].get("problems", []) + case["expect"].get("allowed", [])}
    wanted = ["column missing", "not a number", "not a date", "not a whole number",
              "below the minimum", "above the maximum", "not one of", "missing value",
              "is infinite", "month given twice", "month missing", "month missing (allowed",
              "month missing, filled", "target missing in history", "driver missing",
              "driver missing in a month to forecast", "actual after the as-of date", "no history"]
    for word in wanted:
        assert any(word in check for check in checks), word


# ------------------------------------------------------------------ every case, through the library

@pytest.mark.parametrize("case", corpus_params())
def test_corpus_case(case, tmp_path):
    expect = case["expect"]
    if "data_error" in expect:
        with pytest.raises(DataError) as caught:
            run_case(case, tmp_path)
        assert not isinstance(caught.value, CheckFailed)
        assert expect["data_error"] in str(caught.value)
        assert str(CORPUS / case["file"]) in str(caught.value), "the message names the file"
        return
    if "problems" in expect:
        with pytest.raises(CheckFailed) as caught:
            run_case(case, tmp_path)
        assert_same_problems(expect["problems"], caught.value.problems)
        assert "'castline check' lists them all" in str(caught.value)
        return
    data = run_case(case, tmp_path)
    assert_same_problems(expect.get("allowed", []), data.problems_allowed)
    if "history_rows" in expect:
        assert len(data.history) == expect["history_rows"]
    if "future_rows" in expect:
        assert len(data.future) == expect["future_rows"]
    for want in expect.get("values", []):
        assert cell(data, want["series"], want["period"], want["column"]) == pytest.approx(want["equals"])


@pytest.mark.parametrize("case", corpus_params("problems", exact=False))
def test_corpus_fault_is_found_where_it_is(case, tmp_path):
    with pytest.raises(CheckFailed) as caught:
        run_case(case, tmp_path)
    found = caught.value.problems
    for want in case["expect"]["problems"]:
        assert any(matches(want, p) for p in found), (want, found)


@pytest.mark.parametrize("case", corpus_params("interpolated"))
def test_filled_cells_match_numpy_interp(case, tmp_path):
    spec = pipeline.load_spec(write_spec(case, tmp_path))
    data = pipeline.check(spec)
    for want in case["expect"]["interpolated"]:
        got = cell(data, want["series"], want["period"], want["column"])
        expected = reference_interpolation(data, spec, want["series"], want["period"], want["column"])
        assert got == pytest.approx(expected, rel=1e-12), want  # numpy.interp (reference library)


def test_filled_months_are_new_rows_without_a_source_line(tmp_path):
    data = pipeline.check(pipeline.load_spec(write_spec(CASES["months_missing_filled"], tmp_path)))
    rows = checked_rows(data)
    north = rows[rows[SERIES] == "North"].sort_values(PERIOD)
    assert list(north[PERIOD].astype(str)) == [f"2020-{m:02d}" for m in range(1, 8)]
    inserted = north[north[ROW].isna()]
    assert list(inserted[PERIOD].astype(str)) == ["2020-03", "2020-04"]
    assert list(inserted["month"]) == [pd.Timestamp("2020-03-01"), pd.Timestamp("2020-04-01")]
    assert len(data.raw.frame) == 12, "the raw rows stay as read"


def test_every_problem_of_a_file_is_reported_at_once(tmp_path):
    with pytest.raises(CheckFailed) as caught:
        run_case(CASES["several_faults"], tmp_path)
    message = str(caught.value)
    assert message.startswith("4 problem(s) in the data: ")  # five faulty cells, four problems
    assert "(and 1 more)" in message, "the one-line message shows three and counts the rest"
    rows = [p.row for p in caught.value.problems]
    assert rows == sorted(rows), "problems are listed in file order"


def test_an_undecodable_byte_is_placed_at_its_line_in_the_file(tmp_path):
    rows = ["month,region,sales,price,channel"]
    rows += [f"2020-{m:02d}-01,R{r:05d},1,1.5,shop" for r in range(5000) for m in range(1, 7)]
    rows.append("2020-01-01,Zürich,1,1.5,shop")
    data = ("\n".join(rows) + "\n").encode("latin-1")
    (tmp_path / "big.csv").write_bytes(data)
    case = {"file": str(tmp_path / "big.csv"), "spec": {"drivers": {"categorical": []}}}
    with pytest.raises(DataError) as caught:
        run_case(case, tmp_path)
    line = data[: data.index("ü".encode("latin-1"))].count(b"\n") + 1   # counted in the test
    assert f"(line {line} holds a byte that cannot be decoded)" in str(caught.value)


def test_the_as_of_default_is_today(tmp_path):
    case = CASES["actual_after_today"]
    spec = pipeline.load_spec(write_spec(case, tmp_path))
    raw = read_input(spec)
    check_data(spec, raw, today=date(2020, 6, 1))   # June's actuals are in by June
    with pytest.raises(CheckFailed):
        check_data(spec, raw, today=date(2020, 5, 31))


# ------------------------------------------------------------------ spec mistakes in the columns section

SPEC_HEAD = """\
name: column-rules
input:
  file: {data}
  date_column: month
  series: [region]
target: sales
drivers:
  numeric: [price]
  categorical: [channel]
validation: {{method: holdout, last_periods: 2}}
output: {{folder: reports}}
columns:
"""  # the columns section starts on line 13

SPEC_MISTAKES = [
    pytest.param("  price:\n    type: number\n    min: 10\n    max: 1\n",
                 15, "columns.price.min", "min 10 is above max 1", id="min_above_max"),
    pytest.param("  price:\n    type: number\n    allowed: [cheap, dear]\n",
                 15, "columns.price.allowed", "allowed levels apply to type 'category'",
                 id="allowed_on_a_number"),
    pytest.param("  sales:\n    type: category\n",
                 14, "columns.sales.type", "'sales' is the target, so its type must be number",
                 id="target_as_category"),
    pytest.param("  price:\n    type: number\n    missing_allowed: true\n",
                 15, "columns.price.missing_allowed", "may not be missing",
                 id="missing_allowed_on_a_numeric_driver"),
    pytest.param("  channel:\n    type: category\n    missing_allowed: true\n",
                 15, "columns.channel.missing_allowed", "may not be missing",
                 id="missing_allowed_on_a_categorical_driver"),
    pytest.param("  month:\n    type: number\n",
                 14, "columns.month.type", "'month' is the date column", id="date_column_as_number"),
    pytest.param("  notes:\n    type: text\n    max: 3\n",
                 15, "columns.notes.max", "min and max apply to numbers", id="max_on_text"),
    pytest.param("  price:\n    type: numeric\n",
                 14, "columns.price.type", "must be 'number'", id="unknown_type"),
    pytest.param("  price:\n    type: number\n    minimum: 0\n",
                 15, "columns.price.minimum", "did you mean 'min'?", id="unknown_rule_key"),
]


@pytest.mark.parametrize(("rules", "line", "key", "fragment"), SPEC_MISTAKES)
def test_column_rule_mistakes_name_file_line_and_key(tmp_path, rules, line, key, fragment):
    path = tmp_path / "spec.yaml"
    path.write_text(SPEC_HEAD.format(data=CORPUS / "clean.csv") + rules, encoding="utf-8")
    with pytest.raises(SpecError) as caught:
        pipeline.load_spec(path)
    error = caught.value
    assert (error.file, error.line, error.key) == (str(path), line, key)
    assert fragment in error.message
    assert str(error).startswith(f"{path}:{line}: {key}: ")


# ------------------------------------------------------------------ through the command line

@dataclass
class Outcome:
    returncode: int
    stdout: str
    stderr: str
    folder: Path


def castline(*args: str, cwd: Path) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "pipeline", *args], cwd=cwd, text=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)


CLI_CHECK_CASES = ["several_faults", "month_missing", "wrong_delimiter", "driver_missing_in_future",
                   "excel_not_a_number", "parquet_month_twice", "month_twice_other_day"]
CLI_PASS_CASES = ["month_missing_allowed"]
CLI_ERROR_CASES = ["empty_file", "workbook_named_csv"]
CLI_RUN_CASES = ["several_faults", "target_missing_in_history"]


@pytest.fixture(scope="module")
def cli_outcomes(tmp_path_factory) -> dict[tuple[str, str], Outcome]:
    """Start every command-line scenario at once (importing castline dominates each one)."""
    started = {}
    for command, names in (("check", CLI_CHECK_CASES + CLI_PASS_CASES + CLI_ERROR_CASES),
                           ("run", CLI_RUN_CASES)):
        for name in names:
            folder = tmp_path_factory.mktemp(f"{command}-{name}")
            spec = write_spec(CASES[name], folder)
            args = [command, str(spec)]
            if command == "check":
                args += ["--problems", str(folder / "problems.csv")]
            started[(command, name)] = (castline(*args, cwd=folder), folder)
    outcomes = {}
    for key, (process, folder) in started.items():
        stdout, stderr = process.communicate(timeout=300)
        outcomes[key] = Outcome(process.returncode, stdout, stderr, folder)
    return outcomes


def problem_lines(stdout: str) -> list[str]:
    lines = stdout.splitlines()
    header = next(i for i, line in enumerate(lines) if line.split()[:3] == ["row", "column", "check"])
    return [line for line in lines[header + 1:] if not line.startswith("problems written to")]


@pytest.mark.parametrize("name", CLI_CHECK_CASES)
def test_cli_check_lists_every_problem_with_its_row(cli_outcomes, name):
    outcome = cli_outcomes[("check", name)]
    expected = CASES[name]["expect"]["problems"]
    assert outcome.returncode == 2, outcome.stderr
    assert "Traceback" not in outcome.stdout + outcome.stderr
    assert "rows count the header as line 1" in outcome.stdout
    printed = problem_lines(outcome.stdout)
    assert len(printed) == len(expected), outcome.stdout
    for want in expected:
        row = "-" if want["row"] is None else str(want["row"])
        assert any(line.split()[:2] == [row, want["column"]] and want["check"] in line
                   for line in printed), (want, outcome.stdout)
    stderr_lines = outcome.stderr.strip().splitlines()
    assert len(stderr_lines) == 1 and f"{len(expected)} problem(s)" in stderr_lines[0]


@pytest.mark.parametrize("name", CLI_CHECK_CASES)
def test_cli_check_problems_file_is_a_csv_of_every_problem(cli_outcomes, name):
    outcome = cli_outcomes[("check", name)]
    with (outcome.folder / "problems.csv").open(newline="", encoding="utf-8") as handle:
        reader = csv.DictReader(handle)
        rows = list(reader)
    assert reader.fieldnames == ["check", "column", "row", "value", "count"]
    found = [Problem(r["check"], r["column"], int(r["row"]) if r["row"] else None, r["value"],
                     int(r["count"])) for r in rows]
    assert_same_problems(CASES[name]["expect"]["problems"], found)


def test_cli_check_passes_and_lists_what_the_spec_allows(cli_outcomes):
    outcome = cli_outcomes[("check", "month_missing_allowed")]
    assert outcome.returncode == 0, outcome.stderr
    assert outcome.stderr == ""
    assert "rows pass the checks" in outcome.stdout
    assert "allowed by the spec:" in outcome.stdout
    problems = pd.read_csv(outcome.folder / "problems.csv")
    assert list(problems.columns) == ["check", "column", "row", "value", "count"]
    assert problems[["check", "column", "row"]].values.tolist() == [
        ["month missing (allowed by input.gaps)", "month", 5]]


@pytest.mark.parametrize("name", CLI_ERROR_CASES)
def test_cli_check_unreadable_file_is_one_line(cli_outcomes, name):
    outcome = cli_outcomes[("check", name)]
    assert outcome.returncode == 2
    assert "Traceback" not in outcome.stderr
    lines = outcome.stderr.strip().splitlines()
    assert len(lines) == 1
    assert CASES[name]["expect"]["data_error"] in lines[0]
    assert str(CORPUS / CASES[name]["file"]) in lines[0]
    assert not (outcome.folder / "problems.csv").exists()


@pytest.mark.parametrize("name", CLI_RUN_CASES)
def test_cli_run_on_bad_data_stops_before_writing(cli_outcomes, name):
    outcome = cli_outcomes[("run", name)]
    assert outcome.returncode == 2
    assert "Traceback" not in outcome.stderr
    lines = outcome.stderr.strip().splitlines()
    assert len(lines) == 1, outcome.stderr
    assert "castline check" in lines[0]
    assert outcome.stdout == ""
    reports = outcome.folder / "reports"
    leftovers = list(reports.iterdir()) if reports.exists() else []
    assert leftovers == [], "a failed run left a folder behind"
    assert not list(outcome.folder.rglob(".incomplete-*"))
    assert not list(outcome.folder.rglob("run-*"))
