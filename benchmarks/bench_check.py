"""Benchmark: castline's read + data checks against reading the same CSV with pandas alone.

Not a test. Run with ``.venv/bin/python benchmarks/bench_check.py`` (add
``--profile`` to print where castline's time goes, ``--series`` and ``--months`` to
change the size, ``--repeats`` to change how many timed runs). It builds a CSV of
1,000,000 rows x 20 columns in a temporary folder — 10,000 series x 100 months
(the last month to forecast), a series key, the target, 14 numeric drivers and
three category columns — and times, best of three:

- pandas alone: ``pd.read_csv`` with the options castline's reader passes
  (``pipeline.stages.ingest._read_csv``);
- castline: ``pipeline.stages.ingest.read_input`` (read and sha256) plus
  ``pipeline.stages.check.check_data`` on a spec with rules for every column.

The target is castline under 3x pandas alone. The data is random (numpy,
seeded); no value in it is a reference value.
"""

from __future__ import annotations

import argparse
import cProfile
import pstats
import sys
import tempfile
import time
from datetime import date
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from pipeline import load_spec  # noqa: E402
from pipeline.stages.check import check_data  # noqa: E402
from pipeline.stages.ingest import read_input  # noqa: E402

TARGET_RATIO = 3.0
DRIVERS = [f"driver_{i:02d}" for i in range(1, 15)]
TODAY = date(2100, 1, 1)


def build_csv(folder: Path, n_series: int, n_months: int, seed: int = 20240601) -> Path:
    """Write the benchmark CSV and return its path."""
    rng = np.random.default_rng(seed)
    months = pd.date_range("2010-01-01", periods=n_months, freq="MS")
    n = n_series * n_months
    frame = pd.DataFrame({
        "month": np.tile(months.strftime("%Y-%m-%d"), n_series),
        "store": np.repeat([f"S{i:05d}" for i in range(n_series)], n_months),
        "sales": rng.gamma(4.0, 250.0, n).round(2),
    })
    for i, name in enumerate(DRIVERS):
        frame[name] = rng.normal(50 + i, 10, n).round(3)
    frame["format"] = rng.choice(["mall", "street", "outlet", "kiosk"], n)
    frame["tier"] = rng.choice(["A", "B", "C"], n)
    frame["manager"] = rng.choice([f"M{i:03d}" for i in range(200)], n)
    frame.loc[np.arange(n) % n_months == n_months - 1, "sales"] = np.nan  # the month to forecast
    path = folder / "bench.csv"
    frame.to_csv(path, index=False)
    return path


def write_spec(folder: Path, data: Path) -> Path:
    spec = {
        "name": "bench",
        "input": {"file": str(data), "date_column": "month", "series": ["store"]},
        "target": "sales",
        "drivers": {"numeric": DRIVERS, "categorical": ["format", "tier"]},
        "columns": {
            "sales": {"type": "number", "min": 0},
            **{name: {"type": "number", "min": -1000, "max": 1000} for name in DRIVERS[:4]},
            "format": {"type": "category", "allowed": ["mall", "street", "outlet", "kiosk"]},
            "tier": {"type": "category", "allowed": ["A", "B", "C"]},
            "manager": {"type": "category"},
        },
        "validation": {"method": "holdout", "last_periods": 12},
        "output": {"folder": str(folder / "reports")},
    }
    path = folder / "bench.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def pandas_alone(path: Path, spec) -> pd.DataFrame:
    """Read the file as castline's reader does (ingest._read_csv), with nothing after."""
    options = spec.input.csv
    return pd.read_csv(path, sep=options.delimiter, decimal=options.decimal,
                       thousands=options.thousands, encoding="utf-8-sig", skip_blank_lines=False,
                       skipinitialspace=True)


def castline(spec):
    return check_data(spec, read_input(spec), today=TODAY)


def best_of(repeats: int, work) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        work()
        times.append(time.perf_counter() - start)
    return min(times)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=10_000)
    parser.add_argument("--months", type=int, default=100)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--profile", action="store_true", help="profile one castline pass")
    args = parser.parse_args(argv)

    with tempfile.TemporaryDirectory(prefix="castline-bench-") as tmp:
        folder = Path(tmp)
        start = time.perf_counter()
        data = build_csv(folder, args.series, args.months)
        spec = load_spec(write_spec(folder, data))
        rows = args.series * args.months
        print(f"built {data.name}: {rows:,} rows x 20 columns, "
              f"{data.stat().st_size / 1e6:.0f} MB in {time.perf_counter() - start:.1f} s")

        checked = castline(spec)  # once untimed: warms the imports and checks it passes
        assert len(checked.history) + len(checked.future) == rows, "the clean file must pass"

        reading = best_of(args.repeats, lambda: pandas_alone(data, spec))
        checking = best_of(args.repeats, lambda: castline(spec))
        ratio = checking / reading
        print(f"pandas read_csv alone          {reading:8.2f} s  (best of {args.repeats})")
        print(f"castline read_input+check_data {checking:8.2f} s  (best of {args.repeats})")
        print(f"ratio                          {ratio:8.2f} x  (target < {TARGET_RATIO:g}x: "
              f"{'met' if ratio < TARGET_RATIO else 'NOT met'})")

        if args.profile:
            profiler = cProfile.Profile()
            profiler.runcall(castline, spec)
            stats = pstats.Stats(profiler)
            stats.sort_stats("cumulative").print_stats(r"pipeline", 25)
            stats.sort_stats("tottime").print_stats(15)
    return 0


if __name__ == "__main__":
    sys.exit(main())
