"""Benchmark: the small commands as a user runs them, whole processes, beside a bare Python.

Not a test. Run with ``.venv/bin/python benchmarks/bench_small.py`` (``--repeats`` for
how many timed runs of each, the median kept; ``--panel-series`` and ``--panel-months``
for the size of the panel; ``--source`` to time another castline tree, e.g. an older
checkout, with the same interpreter). It times, each as its own process:

- a bare ``python -c "import pandas, numpy"``: what any pandas tool pays to start;
- ``castline check`` and ``castline run`` on the shipped demo (configs/compost_demo.yaml,
  each run the spec's first, into an empty temporary folder), as ratios to the bare start, and the run once more with
  ``CASTLINE_ONE_PROCESS=1`` (all of it in one process: what the second core saves);
- ``castline run`` of a generated panel (46 series x 120 months, three numeric drivers,
  the series as a one-hot categorical driver, rolling origins), once under cProfile:
  the share of its time spent in the final fit's diagnostics
  (``pipeline.models.inference.diagnose``) and in their variance inflation factors.

Targets on the reference machine: check <= 1.5 s, run <= 3 s, the panel's diagnostics
<= 10% of its run. They are printed beside the measured figures, never asserted: a
shared or slow machine misses them without anything being wrong. The panel's data is
random (numpy, seeded); no value in it is a reference value.
"""

from __future__ import annotations

import argparse
import os
import pstats
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "configs" / "compost_demo.yaml"
TARGET_CHECK, TARGET_RUN, TARGET_SHARE = 1.5, 3.0, 0.10


def environment(source: Path) -> dict[str, str]:
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [str(source), os.environ.get("PYTHONPATH")])))
    env.update(OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    return env


def timed(arguments: list[str], env: dict[str, str], cwd: Path) -> float:
    """Return the wall time of one process; stop the benchmark if it fails."""
    start = time.perf_counter()
    done = subprocess.run([sys.executable, *arguments], env=env, cwd=cwd, capture_output=True, text=True)
    elapsed = time.perf_counter() - start
    if done.returncode != 0:
        raise SystemExit(f"failed: {' '.join(arguments)}\n{done.stdout[-2000:]}{done.stderr[-2000:]}")
    return elapsed


def demo_copy(folder: Path) -> Path:
    """Copy the demo spec beside a copy of its data, the data path made absolute."""
    text = DEMO.read_text(encoding="utf-8").replace("../data_samples/", f"{ROOT / 'data_samples'}/")
    spec = folder / "demo.yaml"
    spec.write_text(text, encoding="utf-8")
    return spec


def build_panel(folder: Path, n_series: int, n_months: int, seed: int = 46) -> Path:
    """Write a panel spec and CSV: monthly sales of n_series stores, three drivers."""
    rng = np.random.default_rng(seed)
    months = pd.date_range("2015-01-01", periods=n_months, freq="MS")
    n = n_series * n_months
    month = np.tile(months.month.to_numpy(), n_series)
    level = np.repeat(rng.normal(500, 80, n_series), n_months)
    frame = pd.DataFrame({
        "month": np.tile(months.strftime("%Y-%m-%d"), n_series),
        "store": np.repeat([f"store {i:02d}" for i in range(n_series)], n_months),
        "price": rng.normal(4, 0.3, n).round(2),
        "promo_days": rng.integers(0, 8, n),
        "temperature": (10 + 8 * np.sin(2 * np.pi * month / 12) + rng.normal(0, 2, n)).round(1),
    })
    frame["sales"] = (level - 40 * frame["price"] + 6 * frame["promo_days"] + 3 * frame["temperature"]
                      + rng.normal(0, 20, n)).round(1)
    frame.loc[np.tile(np.arange(n_months) >= n_months - 6, n_series), "sales"] = np.nan  # to forecast
    data = folder / "panel.csv"
    frame.to_csv(data, index=False)
    spec = {
        "name": "panel", "target": "sales",
        "input": {"file": str(data), "date_column": "month", "series": ["store"]},
        "drivers": {"numeric": ["price", "promo_days", "temperature"],
                    "categorical": [{"column": "store", "encoding": "one_hot"}],
                    "calendar": {"trend": True, "month_of_year": "fourier", "harmonics": 2}},
        "validation": {"method": "rolling_origin", "horizon": 6,
                       "min_train_periods": max(24, n_months - 6 - 24)},
        "models": ["ols"], "output": {"folder": str(folder / "reports")},
    }
    path = folder / "panel.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def profiled_share(spec: Path, env: dict[str, str], cwd: Path) -> tuple[float, float, float]:
    """Run the panel once under cProfile; return its total, diagnose's and the VIF's seconds."""
    profile = cwd / "panel.prof"
    program = ("import cProfile, sys; from pipeline.cli import main; "
               "cProfile.run('main([\"run\", sys.argv[2]])', sys.argv[1])")
    # main(), not the castline program: that ends its process before cProfile could write its file
    timed(["-c", program, str(profile), str(spec)], env, cwd)
    stats = pstats.Stats(str(profile)).stats
    total = max(entry[3] for entry in stats.values())

    def cumulative(function: str) -> float:
        return sum(entry[3] for (path, _, name), entry in stats.items()
                   if name == function and path.endswith(os.path.join("models", "inference.py")))
    return total, cumulative("diagnose"), cumulative("variance_inflation")


def verdict(met: bool) -> str:
    return "met" if met else "MISSED"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5, help="timed runs of each command (median)")
    parser.add_argument("--panel-series", type=int, default=46)
    parser.add_argument("--panel-months", type=int, default=120)
    parser.add_argument("--source", type=Path, default=ROOT, help="the castline tree to time")
    args = parser.parse_args(argv)
    env = environment(args.source.resolve())

    with tempfile.TemporaryDirectory(prefix="castline-bench-") as tmp:
        folder = Path(tmp)
        spec = demo_copy(folder)
        out = folder / "out"
        # Each repeat times every command once, in turn: a shared machine's speed drifts over
        # minutes, and interleaving spreads the drift over all of them alike. Every run is a spec's
        # first (an empty output folder and ledger), so each repeat times the same work.
        commands = {
            "bare": (["-c", "import pandas, numpy"], env),
            "check": (["-m", "pipeline", "check", str(spec)], env),
            "run": (["-m", "pipeline", "run", str(spec), "--output-folder", str(out)], env),
            "alone": (["-m", "pipeline", "run", str(spec), "--output-folder", str(out)],
                      dict(env, CASTLINE_ONE_PROCESS="1")),
        }
        times: dict[str, list[float]] = {name: [] for name in commands}
        for _ in range(args.repeats):
            for name, (arguments, environ) in commands.items():
                times[name].append(timed(arguments, environ, folder))
                shutil.rmtree(out, ignore_errors=True)
        bare, check, run, alone = (statistics.median(times[name]) for name in commands)
        panel = build_panel(folder, args.panel_series, args.panel_months)
        total, diagnose, vif = profiled_share(panel, env, folder)

    print(f"castline from {args.source}; median of {args.repeats} process(es) each")
    print(f"bare python -c 'import pandas, numpy'  {bare:7.2f} s")
    print(f"castline check (demo)                  {check:7.2f} s  = {check / bare:5.1f} x bare  "
          f"(target <= {TARGET_CHECK} s: {verdict(check <= TARGET_CHECK)})")
    print(f"castline run (demo)                    {run:7.2f} s  = {run / bare:5.1f} x bare  "
          f"(target <= {TARGET_RUN} s: {verdict(run <= TARGET_RUN)})")
    print(f"castline run (demo), one process       {alone:7.2f} s  = {alone / bare:5.1f} x bare  "
          f"(CASTLINE_ONE_PROCESS=1: no forked copies; {os.cpu_count()} cores here)")
    share = diagnose / total
    print(f"panel run ({args.panel_series} series x {args.panel_months} months, under cProfile) "
          f"{total:7.2f} s; diagnostics {diagnose:.2f} s = {share:.1%} of it, of which VIF "
          f"{vif:.2f} s (target <= {TARGET_SHARE:.0%}: {verdict(share <= TARGET_SHARE)})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
