"""The castline command line, run as a real process: exit codes, one-line errors, what it writes.

Each scenario gets its own folder (a copy of the demo spec and data, changed as
the scenario needs) and its own ``python -m pipeline`` process. The processes
start together in a module fixture, because importing castline's scientific
stack (about two seconds) dominates each process's time; each test then reads
one finished result. A few extra cases at the end call ``pipeline.cli.main``
in this process instead, to keep the file fast.
"""

from __future__ import annotations

import hashlib
import os
import re
import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import pytest
from conftest import DEMO_DATA, DEMO_SPEC, ROOT

import pipeline

SPEC = Path("configs") / "demo.yaml"           # as typed on the command line, relative to cwd
DATA = Path("data_samples") / "compost_sales.csv"

TEXT_LINE = 10        # the line of the CSV (header = line 1) whose shelf_price becomes 'abc'
DUPLICATED_LINE = 21  # the line whose row is given a second time ...
DUPLICATE_LINE = 31   # ... as this line


@dataclass
class Outcome:
    args: list[str]
    cwd: Path
    returncode: int
    stdout: str
    stderr: str
    before: dict[str, str]
    after: dict[str, str]


def snapshot(folder: Path) -> dict[str, str]:
    """Return every file and folder under folder, with a hash of each file's bytes."""
    tree = {}
    for path in sorted(folder.rglob("*")):
        rel = path.relative_to(folder).as_posix()
        tree[rel] = hashlib.sha256(path.read_bytes()).hexdigest() if path.is_file() else "<dir>"
    return tree


def demo_copy(folder: Path) -> Path:
    """Copy the demo spec and data into folder, keeping their relative layout; return folder."""
    (folder / "configs").mkdir(parents=True)
    (folder / "data_samples").mkdir()
    shutil.copy(DEMO_SPEC, folder / SPEC)
    shutil.copy(DEMO_DATA, folder / DATA)
    return folder


def edit_spec(folder: Path, old: str, new: str) -> None:
    path = folder / SPEC
    text = path.read_text(encoding="utf-8")
    assert text.count(old) == 1, f"{old!r} must occur once in the demo spec"
    path.write_text(text.replace(old, new), encoding="utf-8")


def spec_line(folder: Path, needle: str) -> int:
    """Return the number of the first line, not a comment, that holds needle."""
    for number, line in enumerate((folder / SPEC).read_text(encoding="utf-8").splitlines(), 1):
        if needle in line and not line.lstrip().startswith("#"):
            return number
    raise AssertionError(needle)


def write_bad_data(folder: Path) -> None:
    """Make one shelf_price the text 'abc' and give one region's month twice."""
    path = folder / DATA
    lines = path.read_text(encoding="utf-8").splitlines()
    header = lines[0].split(",")
    cells = lines[TEXT_LINE - 1].split(",")
    cells[header.index("shelf_price")] = "abc"
    lines[TEXT_LINE - 1] = ",".join(cells)
    lines.insert(DUPLICATE_LINE - 1, lines[DUPLICATED_LINE - 1])
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def write_duplicate_only(folder: Path) -> None:
    path = folder / DATA
    lines = path.read_text(encoding="utf-8").splitlines()
    lines.insert(DUPLICATE_LINE - 1, lines[DUPLICATED_LINE - 1])
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def months_of_history() -> int:
    lines = DEMO_DATA.read_text(encoding="utf-8").splitlines()
    header = lines[0].split(",")
    date, target = header.index("month"), header.index("bags_sold")
    return len({row.split(",")[date] for row in lines[1:] if row.split(",")[target] != ""})


def _prepare(name: str, base: Path) -> tuple[list[str], Path]:
    """Build the scenario's folder and return the command-line arguments and the cwd."""
    folder = base / name
    if name == "no_command":
        folder.mkdir()
        return [], folder
    if name == "version":
        folder.mkdir()
        return ["--version"], folder
    if name == "missing_spec":
        folder.mkdir()
        return ["run", "nope.yaml"], folder
    demo_copy(folder)
    if name == "bad_spec":
        edit_spec(folder, "  series: [region]", "  serie: [region]")
    elif name == "missing_data":
        (folder / DATA).unlink()
    elif name in ("run_bad_data", "check_bad_data"):
        write_bad_data(folder)
    elif name == "run_long_holdout":
        edit_spec(folder, "  last_periods: 12", f"  last_periods: {months_of_history()}")
    command = "check" if name.startswith("check") else "run"
    return [command, str(SPEC)], folder


SCENARIOS = ["no_command", "version", "missing_spec", "bad_spec", "missing_data", "run_bad_data",
             "check_bad_data", "run_long_holdout", "check_demo", "run_demo"]


@pytest.fixture(scope="module")
def outcomes(tmp_path_factory) -> dict[str, Outcome]:
    base = tmp_path_factory.mktemp("cli")
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    env.update(OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    started = {}
    for name in SCENARIOS:
        args, cwd = _prepare(name, base)
        before = snapshot(cwd)
        process = subprocess.Popen([sys.executable, "-m", "pipeline", *args], cwd=cwd, env=env,
                                   stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        started[name] = (process, args, cwd, before)
    results = {}
    try:
        for name, (process, args, cwd, before) in started.items():
            stdout, stderr = process.communicate(timeout=300)
            results[name] = Outcome(args, cwd, process.returncode, stdout, stderr, before,
                                    snapshot(cwd))
    finally:
        for process, *_ in started.values():
            if process.poll() is None:
                process.kill()
                process.wait()
    return results


def assert_one_line_user_error(outcome: Outcome) -> str:
    """Exit 2, nothing on stdout, one 'castline: ' line on stderr, no traceback; return it."""
    assert outcome.returncode == 2, outcome
    assert "Traceback" not in outcome.stderr and "Traceback" not in outcome.stdout
    assert outcome.stderr.startswith("castline: "), outcome.stderr
    assert outcome.stderr.endswith("\n") and outcome.stderr.count("\n") == 1, outcome.stderr
    return outcome.stderr.rstrip("\n")


# ---------------------------------------------------------------- user mistakes: exit 2, one line

def test_bad_spec(outcomes):
    outcome = outcomes["bad_spec"]
    line = assert_one_line_user_error(outcome)
    assert outcome.stdout == ""
    assert line == (f"castline: {SPEC}:{spec_line(outcome.cwd, 'serie:')}: input.serie: unknown key; "
                    "did you mean 'series'?")


def test_missing_spec_file(outcomes):
    outcome = outcomes["missing_spec"]
    line = assert_one_line_user_error(outcome)
    assert outcome.stdout == ""
    assert line.startswith("castline: nope.yaml: ") and "no such spec file" in line


def test_missing_data_file(outcomes):
    outcome = outcomes["missing_data"]
    line = assert_one_line_user_error(outcome)
    assert outcome.stdout == ""
    missing = (outcome.cwd / DATA).resolve()
    assert line == (f"castline: {SPEC}:{spec_line(outcome.cwd, 'file:')}: input.file: "
                    f"no such data file: {missing}")


def test_bad_data_on_run(outcomes):
    outcome = outcomes["run_bad_data"]
    line = assert_one_line_user_error(outcome)
    assert outcome.stdout == ""
    assert str((outcome.cwd / DATA).resolve()) in line
    assert f":{TEXT_LINE}:" in line and "shelf_price" in line
    assert "castline check" in line
    assert not (outcome.cwd / "reports").exists(), "a failed run wrote something"


def test_holdout_longer_than_the_history(outcomes):
    outcome = outcomes["run_long_holdout"]
    line = assert_one_line_user_error(outcome)
    assert outcome.stdout == ""
    assert line.startswith(f"castline: {SPEC}:{spec_line(outcome.cwd, 'last_periods:')}: "
                           "validation.last_periods: ")
    assert str(months_of_history()) in line
    assert not (outcome.cwd / "reports").exists()


# ---------------------------------------------------------------- castline check

def test_check_on_the_demo_passes_and_writes_nothing(outcomes):
    outcome = outcomes["check_demo"]
    assert outcome.returncode == 0, outcome
    assert outcome.stderr == ""
    assert "pass the checks" in outcome.stdout
    assert outcome.after == outcome.before, "castline check wrote or changed files"
    assert not (outcome.cwd / "reports").exists()


def listed_problems(stdout: str) -> list[tuple[str, str, str]]:
    """Return (row, column, rest of the line) of every problem in check's problems table."""
    lines = stdout.splitlines()
    headers = [i for i, line in enumerate(lines) if line.split()[:2] == ["row", "column"]]
    assert len(headers) == 1, stdout
    problems = []
    for line in lines[headers[0] + 1:]:
        if not line.strip() or line.startswith("problems written"):
            break
        row, column, rest = line.split(None, 2)
        problems.append((row, column, rest))
    return problems


def failed_check(outcome: Outcome) -> list[tuple[str, str, str]]:
    """Exit 2, one 'castline: ' line on stderr, nothing written; return the listed problems."""
    assert outcome.returncode == 2, outcome
    assert "Traceback" not in outcome.stderr + outcome.stdout
    assert outcome.stderr.startswith("castline: ") and outcome.stderr.count("\n") == 1, outcome.stderr
    assert outcome.after == outcome.before, "castline check wrote or changed files"
    data = (outcome.cwd / DATA).resolve()
    assert outcome.stdout.startswith(f"{data}: "), outcome.stdout
    assert "header as line 1" in outcome.stdout.splitlines()[0]
    return listed_problems(outcome.stdout)


def test_check_on_bad_data_lists_the_text_value_at_its_line(outcomes):
    problems = failed_check(outcomes["check_bad_data"])
    text = [p for p in problems if p[1] == "shelf_price"]
    assert text, problems
    assert text[0][0] == str(TEXT_LINE) and "'abc'" in text[0][2]


def test_check_on_bad_data_gives_every_problem_its_line(outcomes):
    problems = failed_check(outcomes["check_bad_data"])
    assert problems
    for row, column, rest in problems:
        assert row.isdigit(), (row, column, rest)


def test_check_on_bad_data_also_lists_the_duplicated_month(outcomes):
    problems = failed_check(outcomes["check_bad_data"])
    assert [p for p in problems if p[0] == str(DUPLICATE_LINE) and "twice" in p[2]], problems


# ---------------------------------------------------------------- argparse and --version

def test_no_command(outcomes):
    line = assert_one_line_user_error(outcomes["no_command"])
    assert "command" in line and "--help" in line


def test_version(outcomes):
    outcome = outcomes["version"]
    assert outcome.returncode == 0, outcome
    assert outcome.stdout == f"castline {pipeline.__version__}\n"


# ---------------------------------------------------------------- castline run

def test_run_prints_the_run_folder_and_summary_and_they_exist(outcomes):
    outcome = outcomes["run_demo"]
    assert outcome.returncode == 0, outcome
    assert "Traceback" not in outcome.stderr
    folder = re.search(r"^run folder: (.+)$", outcome.stdout, re.MULTILINE)
    summary = re.search(r"^summary: +(.+)$", outcome.stdout, re.MULTILINE)
    assert folder and summary, outcome.stdout
    folder_path, summary_path = Path(folder.group(1)), Path(summary.group(1))
    assert folder_path.is_absolute()
    assert folder_path.is_dir() and summary_path.is_file()
    assert summary_path.parent == folder_path
    # output.folder is ../reports, read from the spec's folder (configs/), not from cwd
    assert folder_path.parent == (outcome.cwd / "reports").resolve()
    assert sorted(p.name for p in folder_path.parent.iterdir()) == sorted([folder_path.name, "ledger.sqlite"])
    assert "mean of the training months" in outcome.stdout and "OLS" in outcome.stdout


# ---------------------------------------------------------------- in this process: cli.main

def call_main(argv: list[str], capsys) -> tuple[int, str, str]:
    from pipeline.cli import main
    code = main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_check_lists_a_duplicated_month_at_its_second_line(tmp_path, monkeypatch, capsys):
    write_duplicate_only(demo_copy(tmp_path))
    monkeypatch.chdir(tmp_path)
    code, out, err = call_main(["check", str(SPEC)], capsys)
    assert code == 2 and err.startswith("castline: ") and err.count("\n") == 1
    problems = listed_problems(out)
    assert len(problems) == 1, out
    row, column, rest = problems[0]
    assert (row, column) == (str(DUPLICATE_LINE), "month") and "twice" in rest


def test_check_prints_every_spec_problem_on_a_line_of_its_own(tmp_path, monkeypatch, capsys):
    demo_copy(tmp_path)
    edit_spec(tmp_path, "name: compost-by-region", "name: compost/by-region")
    edit_spec(tmp_path, "  series: [region]", "  serie: [region]")
    edit_spec(tmp_path, "  last_periods: 12", "  last_periods: -1")
    monkeypatch.chdir(tmp_path)
    code, out, err = call_main(["check", str(SPEC)], capsys)
    assert code == 2 and out == "" and "Traceback" not in err, err
    assert err.endswith("\n") and err.splitlines() == [
        f"castline: {SPEC}:{spec_line(tmp_path, 'name:')}: name: a name, not a path: "
        "'/', '\\' and '..' are refused",
        f"castline: {SPEC}:{spec_line(tmp_path, 'serie:')}: input.serie: unknown key; "
        "did you mean 'series'?",
        f"castline: {SPEC}:{spec_line(tmp_path, 'last_periods:')}: validation.last_periods: "
        "must be greater than or equal to 1",
    ]


def test_run_prints_every_spec_rule_problem_and_writes_nothing(tmp_path, monkeypatch, capsys):
    demo_copy(tmp_path)
    edit_spec(tmp_path, "  series: [region]", "  series: [region, bags_sold, month]")
    monkeypatch.chdir(tmp_path)
    code, out, err = call_main(["run", str(SPEC)], capsys)
    line = spec_line(tmp_path, "series:")
    assert code == 2 and out == "" and "Traceback" not in err, err
    assert err.splitlines() == [
        f"castline: {SPEC}:{line}: input.series[1]: column 'bags_sold' is already the target",
        f"castline: {SPEC}:{line}: input.series[2]: column 'month' is already the date column",
    ]
    assert not (tmp_path / "reports").exists()


def test_run_without_a_spec(capsys):
    with pytest.raises(SystemExit) as info:
        call_main(["run"], capsys)
    err = capsys.readouterr().err
    assert info.value.code == 2
    assert err.startswith("castline: ") and err.count("\n") == 1 and "spec" in err


def test_check_refuses_a_holdout_longer_than_the_history(tmp_path, monkeypatch, capsys):
    demo_copy(tmp_path)
    edit_spec(tmp_path, "  last_periods: 12", f"  last_periods: {months_of_history()}")
    monkeypatch.chdir(tmp_path)
    code, out, err = call_main(["check", str(SPEC)], capsys)
    assert code == 2, (out, err)


def test_output_folder_that_is_a_file(tmp_path, monkeypatch, capsys):
    demo_copy(tmp_path)
    monkeypatch.chdir(tmp_path)
    code, out, err = call_main(["run", str(SPEC), "--output-folder", str(DATA)], capsys)
    assert code == 2 and "Traceback" not in err and err.count("\n") == 1, err


def test_a_console_table_writes_p_values_metrics_and_dashes_as_the_pages_do(capsys):
    # The rules of pipeline/core/formatting.py on the console: a p-value column to two
    # significant digits ("< 0.001" below 0.001), a metric with its thousands, a missing
    # value as a dash, and the line that says what the dash means under the table.
    from pipeline.cli import _print_table
    from pipeline.core.formatting import DASH_NOTE
    _print_table([{"model": "mean_baseline", "mae": 12345.6, "p_holm": float("nan")},
                  {"model": "ols", "mae": 1234.5, "p_holm": 0.003709},
                  {"model": "drift", "mae": 0.5, "p_holm": 0.0002}], ["model", "mae", "p_holm"])
    lines = capsys.readouterr().out.splitlines()
    # Headed in the catalogue's words, models named as the answer names them.
    assert lines[0].split() == ["model", "MAE", "p", "(Holm)"]
    assert [line.split() for line in lines[1:4]] == [["mean", "of", "the", "training", "months", "12,346", "—"],
                                                     ["OLS", "1,235", "0.0037"],
                                                     ["drift", "0.5", "<", "0.001"]]
    assert lines[4] == DASH_NOTE


def test_a_console_table_without_a_missing_value_has_no_footnote(capsys):
    from pipeline.cli import _print_table
    _print_table([{"model": "ols", "p_value": 0.5}], ["model", "p_value"])
    assert capsys.readouterr().out.splitlines() == ["model  p", "OLS    0.50"]


# ---------------------------------------------------------------- quick commands, notes and warnings

def test_check_loads_no_models_pictures_or_cluster(tmp_path):
    # castline check needs the spec, pandas and pandera only: scikit-learn, statsmodels,
    # matplotlib and dask (and hypothesis, which pandera would load) are never imported.
    demo_copy(tmp_path)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")])))
    heavy = {"sklearn", "statsmodels", "matplotlib", "dask", "hypothesis"}
    program = ("import sys; from pipeline.cli import main; code = main(['check', sys.argv[1]]); "
               f"print(sorted({{m.split('.')[0] for m in sys.modules if m.split('.')[0] in {sorted(heavy)}}})); "
               "sys.exit(code)")
    done = subprocess.run([sys.executable, "-c", program, str(SPEC)], cwd=tmp_path, env=env,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "rows pass the checks" in done.stdout
    assert done.stdout.splitlines()[-1] == "[]", done.stdout


def _warning_first(stage):
    """Return the stage, first raising a RuntimeWarning inside numpy as a library would."""
    import numpy as np

    def warned(*args, **kwargs):
        np.log(np.array([-1.0]))   # numpy: RuntimeWarning, invalid value encountered in log
        return stage(*args, **kwargs)
    return warned


def test_a_log_target_run_notes_the_smearing_and_hides_library_warnings(tmp_path, monkeypatch, capsys):
    import pipeline.runner as runner
    demo_copy(tmp_path)
    edit_spec(tmp_path, "target_transform: none", "target_transform: log")
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(runner, "evaluate", _warning_first(runner.evaluate))
    code, out, err = call_main(["run", str(SPEC)], capsys)
    assert code == 0, err
    smearing = [line for line in out.splitlines() if "smearing" in line]
    assert smearing and all(line.startswith("note: ols: fitted on log(bags_sold)") for line in smearing)
    assert not [line for line in out.splitlines() if line.startswith("warning:") and "Duan" in line]
    assert "invalid value" not in err and "RuntimeWarning" not in err and err == "", err


def test_verbose_shows_library_warnings_after_the_one_error_line(tmp_path, monkeypatch, capsys):
    import pipeline.runner as runner
    demo_copy(tmp_path)
    edit_spec(tmp_path, "  last_periods: 12", f"  last_periods: {months_of_history()}")
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(runner, "check_data", _warning_first(runner.check_data))
    code, _, err = call_main(["run", str(SPEC), "--verbose"], capsys)
    lines = err.splitlines()
    assert code == 2 and lines[0].startswith("castline: ") and len(lines) == 2, err
    assert lines[1].startswith("library warning (") and "RuntimeWarning: invalid value encountered in log" in lines[1]
    code, _, quiet = call_main(["run", str(SPEC)], capsys)
    assert code == 2 and quiet.splitlines() == lines[:1]
