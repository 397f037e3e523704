"""The tests marked 'forks' need a process that may fork; a test process where an earlier test
left threads running (a Dask cluster's, say) skips them. This runs them again in a fresh one,
whatever this process could do."""

from __future__ import annotations

import re
import subprocess
import sys

import pytest
from conftest import ROOT


def test_the_tests_of_forked_work_pass_in_a_fresh_process():
    # Every test marked 'forks' (test_forked.py, the pages drawn in one process or two), in a process
    # no earlier test left threads in.
    if not sys.platform.startswith("linux"):
        pytest.skip("forking is used on Linux only")
    done = subprocess.run([sys.executable, "-m", "pytest", "-p", "no:randomly", "-p", "no:cacheprovider",
                           "-rs", "-m", "forks", str(ROOT / "tests")],
                          cwd=ROOT, capture_output=True, text=True)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-2000:]
    assert " passed" in done.stdout and "skipped" not in done.stdout, done.stdout[-2000:]
    assert int(re.search(r"(\d+) passed", done.stdout).group(1)) >= 20, done.stdout[-2000:]
