"""Load: 20 runs in a row in this process and 4 runs at once in child processes, one output folder.

Every run lands, the ledger records exactly those runs (and they are the run folders a
user sees), and the memory of this process does not grow run over run: the largest
resident set size (RSS, read from /proc/self/statm after a garbage collection) over the
last 10 runs stays within 10% of the largest over the first 10. The 10% margin is a
common allowance for allocator noise in leak checks, not a reference value; a leak of a
run's data (the demo's tables, its models, its report) would show as steady growth past
it. The spec is a copy of the demo's (holdout validation, OLS and the mean of the training months
only). Plumbing tests on the invented demo data; no test measures time.
"""

from __future__ import annotations

import gc
import os
import subprocess
import sys
from pathlib import Path

import pytest
import yaml
from conftest import DEMO_DATA, DEMO_SPEC, ROOT

import pipeline
from pipeline.record import ledger

CONSECUTIVE, CONCURRENT = 20, 4
MARGIN = 0.10          # a common allowance for allocator noise (see the docstring)
CHILD_LIMIT = 600      # seconds a child may take before the test gives up on it (not a measure)


def load_spec(folder: Path) -> Path:
    spec = yaml.safe_load(DEMO_SPEC.read_text(encoding="utf-8"))
    spec["input"]["file"] = str(DEMO_DATA)
    spec["validation"] = {"method": "holdout", "last_periods": 12}
    spec["models"] = ["ols"]
    spec["output"] = {"folder": "runs"}
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def rss_bytes() -> int:
    with open("/proc/self/statm", encoding="ascii") as statm:
        return int(statm.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")


def recorded_runs(runs: Path) -> tuple[set[str], set[str]]:
    """Return the run ids in the ledger's runs table and those it counts as visible."""
    with ledger.reading(runs / ledger.LEDGER_FILE) as conn:
        every = {row[0] for row in conn.execute("SELECT run_id FROM runs")}
        shown = set(ledger.visible_runs(conn)["run_id"])
    return every, shown


def folders(runs: Path) -> set[str]:
    return {p.name for p in runs.iterdir() if p.is_dir() and not p.name.startswith(".")}


@pytest.fixture(scope="module")
def loaded(tmp_path_factory):
    """Run the spec 20 times in a row here, then 4 times at once in children; return what happened."""
    folder = tmp_path_factory.mktemp("load")
    spec = load_spec(folder)
    in_process, memory = [], []
    for _ in range(CONSECUTIVE):
        in_process.append(pipeline.run(spec).folder.path.name)
        gc.collect()
        memory.append(rss_bytes())
    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    children = [subprocess.Popen([sys.executable, "-m", "pipeline", "run", str(spec)], cwd=folder,
                                 env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
                for _ in range(CONCURRENT)]
    outcomes = [(child.communicate(timeout=CHILD_LIMIT), child.returncode) for child in children]
    return folder / "runs", in_process, memory, outcomes


def test_every_run_lands(loaded):
    runs, in_process, _, outcomes = loaded
    assert len(set(in_process)) == CONSECUTIVE
    for (out, err), code in outcomes:
        assert code == 0, err
        assert "Traceback" not in err and "run folder: " in out
    from_children = {line.split("run folder: ")[1].strip().rsplit("/", 1)[-1]
                     for (out, _), _ in outcomes for line in out.splitlines()
                     if line.startswith("run folder: ")}
    assert len(from_children) == CONCURRENT
    assert folders(runs) == set(in_process) | from_children
    assert not [p for p in runs.iterdir() if p.name.startswith(".incomplete-")]


def test_the_ledger_holds_exactly_those_runs(loaded):
    runs, in_process, _, outcomes = loaded
    every, shown = recorded_runs(runs)
    assert len(every) == CONSECUTIVE + CONCURRENT
    assert every == shown == folders(runs)
    assert set(in_process) <= every
    with ledger.reading(runs / ledger.LEDGER_FILE) as conn:
        assert conn.execute("SELECT DISTINCT state FROM runs").fetchall() == [("placed",)]
        per_run = dict(conn.execute("SELECT run_id, COUNT(*) FROM forecasts GROUP BY run_id"))
    assert set(per_run) == every and len(set(per_run.values())) == 1


def test_memory_does_not_grow_run_over_run(loaded):
    _, _, memory, _ = loaded
    first, last = max(memory[:10]), max(memory[10:])
    assert last <= first * (1 + MARGIN), (
        f"RSS grew from {first / 1e6:.1f} MB (runs 1-10) to {last / 1e6:.1f} MB (runs 11-20)")
