"""Every benchmark in benchmarks/ runs to the end at a tiny size and prints its ratios.

Nothing here depends on timing: the benchmarks report a missed speed target and still
exit 0, and only the presence of the ratio lines (with a number) is checked. A new
benchmark needs an entry in TINY, or test_every_benchmark_has_a_tiny_size fails.
"""

from __future__ import annotations

import functools
import re
import subprocess
import sys

import pytest
from conftest import ROOT

BENCHMARKS = sorted(path.name for path in (ROOT / "benchmarks").glob("bench_*.py"))

NUMBER = r"[0-9]+(?:\.[0-9]+)?"

# Per benchmark: the tiny arguments, and the lines (regexes) its output must contain.
TINY: dict[str, tuple[list[str], list[str]]] = {
    # 12 origins at horizon 1 need at least 15 months (min_train_periods >= 2).
    "bench_backtest.py": (
        ["--series", "20", "--months", "16", "--drivers", "3"],
        [rf"castline / lstsq\s+=\s+{NUMBER}\s+\(target <= 1\.0\)\s+(met|MISSED)",
         rf"sklearn / castline =\s+{NUMBER}\s+\(target >= 10\)\s+(met|MISSED)"],
    ),
    "bench_check.py": (
        ["--series", "20", "--months", "24", "--repeats", "1"],
        [rf"pandas read_csv alone\s+{NUMBER} s",
         rf"castline read_input\+check_data\s+{NUMBER} s",
         rf"ratio\s+{NUMBER} x\s+\(target < 3x: (met|NOT met)\)"],
    ),
    # 12 origins at horizon 3 need at least 16 months; 30 leaves a year for the seasonal naive.
    # The demo's check and run once each; a panel of 3 series x 40 months under cProfile.
    # The whole run beside the hand-written loop, 10 series x 30 months (12 origins at horizon 3).
    "bench_run.py": (
        ["--series", "10", "--months", "30", "--drivers", "2"],
        [rf"\(a\) castline run\s+{NUMBER} s\s+peak\s+{NUMBER} MB",
         rf"\(b\) hand-written statsmodels loop \+ CSV\s+{NUMBER} s",
         rf"run_backtest\s+{NUMBER} s",
         rf"ratio \(b\)/\(a\) = {NUMBER}x \(target >= 10x: (met|MISSED)\)",
         rf"whole run / backtest stage = {NUMBER}x \(target <= 2x: (met|MISSED)\)",
         r"peak memory of castline run = [0-9,]+ MB \(target < 2,048 MB: (met|MISSED)\)"],
    ),
    # A local Dask cluster of 2 workers: the run on 40 series through it, 20 on this machine alone.
    "bench_cluster.py": (
        ["--series", "40", "--local-series", "20", "--months", "30", "--drivers", "2"],
        [rf"\(a\) castline run, Dask cluster of 2 workers\s+{NUMBER} s\s+client peak\s+[0-9,]+ MB\s+{NUMBER} ms per series",
         rf"\(b\) castline run, this machine alone\s+{NUMBER} s\s+peak\s+[0-9,]+ MB\s+{NUMBER} ms per series",
         r"client peak memory = [0-9,]+ MB \(target < 3,072 MB: (met|MISSED)\)",
         rf"time per series, cluster / local = {NUMBER}x \(target <= 1\.5x: (met|MISSED)\)"],
    ),
    # The fits and the whole run on 10 series x 30 months; the column-per-series fit on 5.
    "bench_pooled.py": (
        ["--series", "10", "--months", "30", "--drivers", "2", "--dense-series", "5"],
        [rf"\(a\) castline, levels absorbed\s+{NUMBER} s\s+peak\s+{NUMBER} MB",
         rf"ratio \(b\)/\(a\) = {NUMBER}x; slopes apart by {NUMBER}e[-+][0-9]+ \(relative\)",
         rf"ratio \(c\)/\(a\) = {NUMBER}x; slopes apart by {NUMBER}e[-+][0-9]+ \(relative\)",
         rf"\(d\) castline run, OLS over all series: {NUMBER} s, peak [0-9,]+ MB",
         r"peak memory of the fit = [0-9,]+ MB \(target < 2,048 MB at 10,000 series x 120 months: (met|MISSED)"],
    ),
    "bench_small.py": (
        ["--repeats", "1", "--panel-series", "3", "--panel-months", "40"],
        [rf"bare python -c 'import pandas, numpy'\s+{NUMBER} s",
         rf"castline check \(demo\)\s+{NUMBER} s\s+=\s+{NUMBER} x bare\s+\(target <= 1\.5 s: (met|MISSED)\)",
         rf"castline run \(demo\)\s+{NUMBER} s\s+=\s+{NUMBER} x bare\s+\(target <= 3\.0 s: (met|MISSED)\)",
         rf"castline run \(demo\), one process\s+{NUMBER} s\s+=\s+{NUMBER} x bare\s+\(CASTLINE_ONE_PROCESS=1",
         rf"diagnostics {NUMBER} s = {NUMBER}% of it, of which VIF {NUMBER} s \(target <= 10%: (met|MISSED)\)"],
    ),
    # The rule's cost on a 300 x 4 design, the refined fits at 21 rows (beside their exact
    # rational solutions), the whole run of a panel of 3 series x 40 months; no baseline tree.
    # Weekly, monthly and quarterly runs of 3 series x 120 periods beside the weekly loop.
    "bench_periods.py": (
        ["--series", "3", "--periods", "120"],
        [r"panel: 3 series x 120 periods = 360 rows, 12 origins at horizon 4",
         rf"\(a\) castline run, weekly\s+{NUMBER} s\s+peak\s+{NUMBER} MB",
         rf"\(a\) castline run, quarterly\s+{NUMBER} s\s+peak\s+{NUMBER} MB",
         rf"\(b\) hand-written statsmodels loop, weekly\s+{NUMBER} s",
         rf"ratio \(b\)/\(a\) on weeks = {NUMBER}x \(target >= 1x: (met|MISSED)\)",
         rf"weekly run / monthly run = {NUMBER}x \(target <= 1\.25x: (met|MISSED)\)"],
    ),
    "bench_precision.py": (
        ["--repeats", "1", "--sizes", "300x4", "--poly-rows", "21", "--runs", "panel",
         "--panel-series", "3", "--panel-months", "40"],
        [r"300 x 4\s+condition\s+[0-9.]+, estimated digits\s+[0-9.]+, refined False",
         rf"300 x 4: castline / ordinary = {NUMBER} \(target <= 1\.05: (met|MISSED)\); "
         rf"castline / hand-written = {NUMBER} \(target <= 2: (met|MISSED)\)",
         rf"degree 10, x on \[-8\.8, -3\.1\], 21 rows: condition {NUMBER}e\+[0-9]+; refined True",
         rf"castline / ordinary = {NUMBER}x \(no target\)",
         rf"against the exact solution: castline {NUMBER}, ordinary {NUMBER} digits",
         r"panel \(3 series x 40 months\): [0-9]+ fits through least_squares, [0-9]+ refined by the rule",
         rf"panel \(3 series x 40 months\): this tree / ordinary path = {NUMBER} \(target <= 1\.05: (met|MISSED)\)",
         rf"panel \(3 series x 40 months\): this tree / rule off = {NUMBER} \(target <= 1\.05: (met|MISSED)\)",
         r"panel \(3 series x 40 months\): this tree / baseline skipped"],
    ),
    "bench_many_series.py": (
        ["--series", "10", "--months", "30", "--drivers", "2"],
        [rf"ratio \(b\)/\(a\) = {NUMBER}x faster than the statsmodels loop with baselines "
         rf"\(target >= 15x\); fits only: {NUMBER}x",
         r"(targets met|TARGET MISSED)"],
    ),
}


def test_every_benchmark_has_a_tiny_size():
    assert BENCHMARKS, "no benchmarks/bench_*.py found"
    assert set(BENCHMARKS) == set(TINY)


@functools.cache
def run(name: str) -> subprocess.CompletedProcess:
    """Run one benchmark at its tiny size (once per session), from the repository root."""
    arguments, _ = TINY[name]
    # The timeout only stops a hung run; no timing is asserted.
    return subprocess.run([sys.executable, str(ROOT / "benchmarks" / name), *arguments],
                          cwd=ROOT, capture_output=True, text=True, timeout=600)


@pytest.mark.parametrize("name", BENCHMARKS)
def test_benchmark_runs_at_a_tiny_size(name):
    _, expected = TINY[name]
    done = run(name)
    assert done.returncode == 0, (done.stdout + done.stderr)[-4000:]
    for pattern in expected:
        assert re.search(pattern, done.stdout, re.MULTILINE), f"{pattern!r} not in:\n{done.stdout[-4000:]}"


def test_many_series_benchmark_agrees_with_statsmodels():
    """bench_many_series prints how far castline's per-series predictions are from statsmodels'."""
    done = run("bench_many_series.py")
    assert done.returncode == 0, (done.stdout + done.stderr)[-4000:]
    found = re.search(r"max relative difference ([0-9.]+e[-+][0-9]+)", done.stdout)
    assert found, done.stdout[-4000:]
    assert float(found.group(1)) < 1e-8


def test_pooled_benchmark_agrees_with_statsmodels_and_the_hand_written_fit():
    """bench_pooled prints how far castline's slopes (levels absorbed) are from the hand-written
    within fit (numpy lstsq) and from statsmodels' OLS with a column per series."""
    done = run("bench_pooled.py")
    assert done.returncode == 0, (done.stdout + done.stderr)[-4000:]
    found = re.findall(r"slopes apart by ([0-9.]+e[-+][0-9]+)", done.stdout)
    assert len(found) == 2, done.stdout[-4000:]
    assert max(float(value) for value in found) < 1e-8
