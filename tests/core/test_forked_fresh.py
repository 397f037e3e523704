"""test_forked.py's checks need a process that may fork; a test process where an earlier test
left threads running (a Dask cluster's, say) skips them. This runs them again in a fresh one,
whatever this process could do."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from conftest import ROOT


def test_the_forked_work_checks_pass_in_a_fresh_process():
    if not sys.platform.startswith("linux"):
        pytest.skip("forking is used on Linux only")
    done = subprocess.run([sys.executable, "-m", "pytest", "-p", "no:randomly", "-p", "no:cacheprovider",
                           "-rs", str(Path(__file__).with_name("test_forked.py"))],
                          cwd=ROOT, capture_output=True, text=True)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-2000:]
    assert " passed" in done.stdout and "skipped" not in done.stdout, done.stdout[-2000:]
