"""Benchmark: the whole ``castline run`` on thousands of series, against a hand-written loop.

    .venv/bin/python benchmarks/bench_run.py [--series 2000] [--months 120] [--drivers 6]
                                             [--loop-series N]

Not a test. Data: the simulated panel of bench_many_series (each series its own intercept
and slopes; seeded numpy, no reference value in it), written as Parquet. The spec: OLS per
series beside the mean and same-month-last-year baselines, rolling origin, expanding window,
12 origins, horizon 3. Each side runs as a whole process, as a user runs it, timed from
start to exit:

  (a) ``castline run SPEC`` (check, backtest, evaluation, forecast, report, ledger);
  (b) a hand-written script: read the Parquet file, a statsmodels OLS fit per series per
      origin with the mean and same-month-last-year forecasts (bench_many_series'
      statsmodels_loop), the predictions written to a CSV file.

Then (a) once more under a stage timer, in its own process, for the breakdown: how long each
stage of the run took, and the whole run against its backtest stage. The peak memory is each
process's own (its maximum resident set, from os.wait4).

Targets (issue 21): (b)/(a) >= 10, (a) at most 2x its backtest stage, peak memory of (a) under
2 GB. Printed beside the figures, never asserted: a shared or slow machine misses them without
anything being wrong. ``--loop-series N`` times (b) on the first N series and scales it up.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_many_series import HORIZON, ORIGINS, describe_panel, write_spec, written_panel  # noqa: E402  (the same panel and spec)
from bench_small import environment  # noqa: E402  (the same environment for a whole process)

TARGET_LOOP, TARGET_STAGE, TARGET_MB = 10.0, 2.0, 2048

# The hand-written equivalent, as a script of its own: what castline exists to replace.
LOOP = r"""
import sys, warnings
import numpy as np, pandas as pd
sys.path.insert(0, {benchmarks!r})
from bench_many_series import statsmodels_loop
frame = pd.read_parquet({data!r})
drivers = [c for c in frame.columns if c.startswith("x")]
months = sorted(frame["month"].unique())
origins = [pd.Timestamp(m) for m in months[-({origins} + {horizon} - 1) - 1:-{horizon}]]
series = sorted(frame["shop"].unique())[:{series}]
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    found = statsmodels_loop(frame, drivers, [np.datetime64(o) for o in origins], series)
rows = []
for (origin, name), (predicted, mean, naive) in found.items():
    for model, values in (("ols", predicted), ("mean", mean), ("naive", naive)):
        rows += [(str(origin)[:7], name, model, k + 1, v) for k, v in enumerate(values)]
pd.DataFrame(rows, columns=["origin", "series", "model", "horizon", "prediction"]).to_csv({out!r}, index=False)
"""

# castline's run with each stage timed: the runner's stage functions wrapped as they load.
STAGES = r"""
import json, sys, time
start = time.perf_counter()
import pipeline.runner as runner
found, loaded = {}, runner._stages
def timed(name, function):
    def run(*arguments, **options):
        begun = time.perf_counter()
        try:
            return function(*arguments, **options)
        finally:
            found[name] = found.get(name, 0.0) + time.perf_counter() - begun
    return run
runner._stages = lambda *names: [function if name == "executor_for" else timed(name, function)
                                 for name, function in zip(names, loaded(*names))]
runner._checked_while_loading = timed("read, check and load", runner._checked_while_loading)
from pipeline.cli import main
code = main(["run", sys.argv[1], "--output-folder", sys.argv[2]])
found["whole run"] = time.perf_counter() - start
print(json.dumps(found))
sys.exit(code)
"""


def timed_process(arguments: list[str], cwd: Path) -> tuple[float, float, str]:
    """Return a whole process's wall time, its own peak memory (MB, os.wait4) and its output;
    stop the benchmark if it fails."""
    with tempfile.TemporaryFile("w+") as out, tempfile.TemporaryFile("w+") as err:
        start = time.perf_counter()
        child = subprocess.Popen([sys.executable, *arguments], cwd=cwd, env=environment(ROOT), stdout=out,
                                 stderr=err)
        _, status, usage = os.wait4(child.pid, 0)
        elapsed = time.perf_counter() - start
        child.returncode = os.waitstatus_to_exitcode(status)
        out.seek(0)
        err.seek(0)
        text = out.read()
        if child.returncode != 0:
            raise SystemExit(f"failed: {' '.join(arguments)}\n{text[-2000:]}{err.read()[-2000:]}")
    return elapsed, usage.ru_maxrss / 1024, text


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=2_000)
    parser.add_argument("--months", type=int, default=120)
    parser.add_argument("--drivers", type=int, default=6)
    parser.add_argument("--loop-series", type=int, default=None,
                        help="time the hand-written loop on this many series and scale it up")
    args = parser.parse_args()
    describe_panel(args)
    with tempfile.TemporaryDirectory(prefix="castline-bench-run-") as tmp:
        folder = Path(tmp)
        frame, drivers = written_panel(folder, args)
        spec = write_spec(folder, drivers, args.months - ORIGINS - HORIZON + 1, workers=1)

        run, run_mb, _ = timed_process(["-m", "pipeline", "run", str(spec), "--output-folder",
                                        str(folder / "a")], folder)
        looped = min(args.loop_series or args.series, args.series)
        script = folder / "loop.py"
        script.write_text(LOOP.format(benchmarks=str(ROOT / "benchmarks"), data=str(folder / "data.parquet"),
                                      origins=ORIGINS, horizon=HORIZON, series=looped,
                                      out=str(folder / "loop.csv")), encoding="utf-8")
        loop, loop_mb, _ = timed_process([str(script)], folder)
        loop_scaled = loop * args.series / looped
        written = pd.read_csv(folder / "loop.csv")
        assert written["origin"].nunique() == ORIGINS and written["series"].nunique() == looped
        stage_script = folder / "stages.py"
        stage_script.write_text(STAGES, encoding="utf-8")
        _, _, out = timed_process([str(stage_script), str(spec), str(folder / "b")], folder)
        stages = json.loads(out.strip().splitlines()[-1])

    print("\nwhole processes:")
    print(f"  (a) castline run                                 {run:8.2f} s   peak {run_mb:7,.0f} MB")
    print(f"  (b) hand-written statsmodels loop + CSV          {loop_scaled:8.2f} s   peak {loop_mb:7,.0f} MB"
          + (f"  (scaled from {looped:,} series)" if looped != args.series else ""))
    print("\nstages of castline run (a second run, timed inside):")
    for name, seconds in stages.items():
        print(f"  {name:<30} {seconds:8.2f} s")
    backtest = stages.get("run_backtest", float("nan"))
    ratio, share = loop_scaled / run, stages["whole run"] / backtest
    print(f"\nratio (b)/(a) = {ratio:.1f}x (target >= {TARGET_LOOP:g}x: {'met' if ratio >= TARGET_LOOP else 'MISSED'})")
    print(f"whole run / backtest stage = {share:.1f}x (target <= {TARGET_STAGE:g}x: "
          f"{'met' if share <= TARGET_STAGE else 'MISSED'})")
    print(f"peak memory of castline run = {run_mb:,.0f} MB (target < {TARGET_MB:,} MB: "
          f"{'met' if run_mb < TARGET_MB else 'MISSED'})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
