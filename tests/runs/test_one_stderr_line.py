"""One stderr line means one line: the libraries' warnings never come before or between it.

A mistake ends in exactly one ``castline:`` line on standard error, whatever pandas, pandera,
numpy, statsmodels or matplotlib said on the way (as a warning, through ``logging``, or while
their modules were imported). A run that succeeds prints nothing on standard error; with
``--verbose`` the libraries' words come after the command's output. Most cases run the
command in a subprocess, as a user does; the warnings are raised by the classes the libraries
raise them with, or, for matplotlib's missing glyphs, by drawing series named in a script
its font lacks. Plumbing tests on the invented tiny data of conftest: no figure here is a
reference value.
"""

from __future__ import annotations

import logging
import os
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import ROOT, run_cli, tiny_data, write_tiny_spec

# Run castline with the data check made to warn first, in every way a library does (FutureWarning
# and PerformanceWarning of pandas, pandera's SchemaWarning, numpy's RuntimeWarning, statsmodels'
# ValueWarning and ConvergenceWarning, matplotlib's missing glyph as a warning and its font
# message through logging), and a module that warns and logs as it is imported.
WARNING_FIRST = r'''
import logging, sys, warnings
import numpy as np
import pipeline.runner as runner
from pipeline.__main__ import entry

def warned(*args, **kwargs):
    import pandas.errors
    import pandera.errors
    from statsmodels.tools.sm_exceptions import ConvergenceWarning, ValueWarning
    import warns_as_imported   # noqa: F401
    warnings.warn("the default of observed will change", FutureWarning)
    warnings.warn("DataFrame is highly fragmented", pandas.errors.PerformanceWarning)
    warnings.warn("column 'y' coerced", pandera.errors.SchemaWarning)
    np.log(np.array([-1.0]))
    warnings.warn("no frequency information was provided", ValueWarning)
    warnings.warn("maximum likelihood optimisation failed to converge", ConvergenceWarning)
    warnings.warn("Glyph 26481 missing from font(s) DejaVu Sans.", UserWarning)
    logging.getLogger("matplotlib.font_manager").warning("findfont: Font family 'Nope' not found.")
    return stage(*args, **kwargs)

stage = runner.check_data
runner.check_data = warned
sys.argv = ["castline", *sys.argv[1:]]
entry()
'''
IMPORTED = '''import logging, warnings
warnings.warn("this module is deprecated", DeprecationWarning, stacklevel=2)
warnings.warn("imported with an old option", UserWarning)
logging.getLogger("warns_as_imported").warning("a message logged while importing")
'''


def _env(extra: Path | None = None) -> dict[str, str]:
    paths = [str(ROOT), str(extra) if extra else None, os.environ.get("PYTHONPATH")]
    return dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, paths)),
                PYTHONWARNINGS="always")   # every warning as loud as a library's first one


def warned_run(folder: Path, *args: str) -> subprocess.CompletedProcess:
    (folder / "warns_as_imported.py").write_text(IMPORTED, encoding="utf-8")
    return subprocess.run([sys.executable, "-c", WARNING_FIRST, *args], cwd=folder, env=_env(folder),
                          capture_output=True, text=True, check=False)


def _bad_data(folder: Path) -> Path:
    """The tiny spec, its target holding a word at one month: a mistake the check finds."""
    data = tiny_data()
    data["y"] = data["y"].astype(object)
    data.loc[5, "y"] = "twelve"
    return write_tiny_spec(folder, data, actuals_to="2021-12")


def _only_castline_line(done: subprocess.CompletedProcess) -> str:
    lines = done.stderr.splitlines()
    assert done.returncode == 2, done.stderr
    assert len(lines) == 1 and lines[0].startswith("castline: "), done.stderr
    return lines[0]


@pytest.mark.parametrize("command", ["run", "check"])
def test_warnings_of_every_library_before_a_mistake_leave_one_line(tmp_path, command):
    spec = _bad_data(tmp_path)
    line = _only_castline_line(warned_run(tmp_path, command, spec.name))
    assert "data.csv" in line and "Warning" not in line and "findfont" not in line


def test_verbose_prints_every_library_warning_after_the_one_line(tmp_path):
    spec = _bad_data(tmp_path)
    done = warned_run(tmp_path, "run", spec.name, "--verbose")
    first, *rest = done.stderr.splitlines()
    assert done.returncode == 2 and first.startswith("castline: ") and "data.csv" in first, done.stderr
    assert rest and all(line.startswith("library warning (") for line in rest), done.stderr
    shown = "\n".join(rest)
    for words in ("FutureWarning: the default of observed", "PerformanceWarning: DataFrame is highly",
                  "SchemaWarning: column 'y'", "RuntimeWarning: invalid value encountered in log",
                  "ValueWarning: no frequency", "ConvergenceWarning: maximum likelihood",
                  "UserWarning: Glyph 26481", "Logged: findfont: Font family 'Nope'",
                  "UserWarning: imported with an old option", "Logged: a message logged while importing"):
        assert words in shown, (words, shown)


def test_a_warned_run_that_succeeds_prints_nothing_on_standard_error(tmp_path):
    spec = write_tiny_spec(tmp_path, tiny_data(), actuals_to="2021-12")
    done = warned_run(tmp_path, "run", spec.name)
    assert done.returncode == 0 and done.stderr == "", done.stderr
    assert "run folder: " in done.stdout


def test_missing_glyphs_of_series_names_are_not_printed_unless_asked(tmp_path):
    # Series named in scripts DejaVu Sans (matplotlib's font) lacks: drawing them warns.
    spec = write_tiny_spec(tmp_path, tiny_data(regions=("東京", "Hill🌱")), actuals_to="2021-12")
    quiet = subprocess.run([sys.executable, "-m", "pipeline", "run", spec.name], cwd=tmp_path, env=_env(),
                           capture_output=True, text=True, check=False)
    assert quiet.returncode == 0 and quiet.stderr == "", quiet.stderr
    told = subprocess.run([sys.executable, "-m", "pipeline", "run", spec.name, "--verbose"], cwd=tmp_path,
                          env=_env(), stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, check=False)
    lines = told.stdout.splitlines()
    glyphs = [i for i, line in enumerate(lines) if "Glyph" in line and "missing from font" in line]
    assert told.returncode == 0 and glyphs, told.stdout
    last_output = max(i for i, line in enumerate(lines) if line.startswith(("ledger:", "summary:")))
    assert min(glyphs) > last_output and all(lines[i].startswith("library warning (") for i in glyphs)


def test_a_message_logged_by_a_library_before_a_mistake_is_kept_out(tmp_path, monkeypatch):
    # In this process: with no handler of its own, a logged warning would reach standard error.
    import pipeline.runner as runner
    spec = _bad_data(tmp_path)
    stage = runner.check_data

    def logged(*args, **kwargs):
        logging.getLogger("matplotlib.font_manager").warning("findfont: Font family 'Nope' not found.")
        return stage(*args, **kwargs)
    monkeypatch.setattr(runner, "check_data", logged)
    monkeypatch.setattr(logging.getLogger(), "handlers", [])   # as in a plain process
    code, _, err = run_cli(["run", str(spec)])
    assert code == 2 and len(err.splitlines()) == 1 and err.startswith("castline: "), err
