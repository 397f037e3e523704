"""Benchmark: castline's expanding-window OLS backtest against one lstsq fit and scikit-learn.

    .venv/bin/python benchmarks/bench_backtest.py [--series 10000] [--months 100] [--drivers 40]

Data: 10,000 series × 100 months = 1,000,000 rows × 40 numeric drivers,
simulated with a fixed seed. The shape is that of a real monthly panel (many
products or stores, eight years or so of history); fewer series with more
months (say 1,000 × 1,000) would mean 83 years of monthly data, which no user
has. With 100 months the 12 expanding origins (horizon 1) start at month 88,
so the first training window already holds 88% of the rows: the growing QR
factorises that block once, then adds 10,000 rows per origin.

The spec sets drivers.series_effects.intercepts to false, so the stage fits the
same pooled design as (a), (b) and (c): an intercept and the 40 drivers. (With
series intercepts, castline's default, the design would carry 9,999 series
columns, which castline refuses at this size, and the comparison would no longer
be like for like.) The simulated series levels are left in the data; none of
the fits models them, so they end up in every fit's residuals alike.

Measured side by side, best of 3 each, in this one process:
  (a) castline's OLS backtest on the design: pipeline.models.ols.expanding_ols_predictions,
      the growing QR that run_backtest uses for OLS over expanding windows, 12 origins,
      horizon 1 — the same work lstsq and cross_validate are given;
  (a') the whole backtest stage, pipeline.stages.backtest.run_backtest(spec, checked_data):
      rolling_origin, expanding, OLS + the mean baseline, with the feature plan fitted in
      every window and the MASE scales (printed for information; the spec is loaded and
      the data checked beforehand, not timed);
  (b) one numpy.linalg.lstsq fit of the full design (intercept + 40 drivers);
  (c) sklearn cross_validate(LinearRegression(), X, y, cv=TimeSeriesSplit(n_splits=12)),
      rows in time order.
Targets (issue 5): (a)/(b) ≤ 1.0 and (c)/(a) ≥ 10. Prints both ratios, the
peak memory, and, when a target is missed, the top functions of a cProfile of
run_backtest. The environment (OPENBLAS_CORETYPE, thread counts) is left as it is.
"""

from __future__ import annotations

import argparse
import cProfile
import gc
import io
import os
import platform
import pstats
import resource
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import pipeline  # noqa: E402
from pipeline.core.columns import PERIOD  # noqa: E402
from pipeline.models.ols import expanding_ols_predictions  # noqa: E402
from pipeline.stages.backtest import run_backtest  # noqa: E402

REPEATS = 3
ORIGINS = 12
HORIZON = 1


def simulate(n_series: int, n_months: int, n_drivers: int, seed: int = 20240605) -> pd.DataFrame:
    """Rows in time order (month, then series); y = 10 + X·β + a series level + noise."""
    rng = np.random.default_rng(seed)
    months = pd.date_range("2016-01-01", periods=n_months, freq="MS")
    n = n_series * n_months
    frame = pd.DataFrame({
        "month": np.repeat(months.to_numpy(), n_series),
        "store": np.tile(np.array([f"s{k:05d}" for k in range(n_series)], dtype=object), n_months),
    })
    x = rng.normal(size=(n, n_drivers))
    beta = rng.normal(size=n_drivers)
    level = np.tile(rng.normal(scale=2.0, size=n_series), n_months)
    y = 10.0 + x @ beta + level + rng.normal(size=n)
    drivers = pd.DataFrame(x, columns=[f"x{j:02d}" for j in range(1, n_drivers + 1)])
    return pd.concat([frame, drivers, pd.DataFrame({"sales": y})], axis=1)


def write_spec(folder: Path, drivers: list[str], min_train: int) -> Path:
    spec = {
        "name": "bench-backtest",
        "input": {"file": "data.parquet", "date_column": "month", "series": ["store"]},
        "target": "sales",
        # The pooled design lstsq and cross_validate fit too (intercept + drivers): no series levels.
        "drivers": {"numeric": drivers, "series_effects": {"intercepts": False}},
        "validation": {"method": "rolling_origin", "window": "expanding", "horizon": HORIZON,
                       "min_train_periods": min_train, "origins": ORIGINS},
        "models": ["ols"],
        "output": {"folder": "reports"},
    }
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def best_of(label: str, fn, repeats: int = REPEATS) -> tuple[float, object]:
    times, result = [], None
    for k in range(repeats):
        result = None
        gc.collect()
        start = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - start)
        print(f"  {label:<44} run {k + 1}: {times[-1]:8.3f} s", flush=True)
    return min(times), result


def max_rss_mb() -> float:
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return rss / 1024 / 1024 if sys.platform == "darwin" else rss / 1024  # bytes on macOS, KiB on Linux


def load_average() -> str:
    try:
        return "load average {:.1f} {:.1f} {:.1f}".format(*os.getloadavg())
    except OSError:
        return "load average unknown"


def blas_info() -> None:
    print(load_average())
    print(f"python {platform.python_version()}, numpy {np.__version__}, machine {platform.machine()}, "
          f"{os.cpu_count()} CPUs")
    for name in ("OPENBLAS_CORETYPE", "OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        if name in os.environ:
            print(f"  {name}={os.environ[name]}")
    try:
        from threadpoolctl import threadpool_info
    except ImportError:
        print("  threadpoolctl not installed")
        return
    for pool in threadpool_info():
        print(f"  threadpool: {pool.get('internal_api')} {pool.get('version')} "
              f"threads={pool.get('num_threads')} arch={pool.get('architecture')} "
              f"lib={Path(pool.get('filepath', '')).name}")


def profile(spec, data, top: int = 20) -> None:
    profiler = cProfile.Profile()
    profiler.enable()
    run_backtest(spec, data)
    profiler.disable()
    for order in ("cumulative", "tottime"):
        out = io.StringIO()
        pstats.Stats(profiler, stream=out).strip_dirs().sort_stats(order).print_stats(top)
        print(f"\n--- cProfile of run_backtest, top {top} by {order} ---")
        print("\n".join(line for line in out.getvalue().splitlines() if line.strip())[:6000])


def prepare(args) -> tuple:
    """Return the spec and checked data of the simulated panel, and the reference arrays
    (drivers, target, design with an intercept) built once from the same numbers."""
    with tempfile.TemporaryDirectory(prefix="castline-bench-") as tmp:
        folder = Path(tmp)
        start = time.perf_counter()
        frame = simulate(args.series, args.months, args.drivers)
        drivers = [c for c in frame.columns if c.startswith("x")]
        frame.to_parquet(folder / "data.parquet", index=False)
        # Reference arrays, built once from the same numbers, in time order.
        x = frame[drivers].to_numpy(float)
        y = frame["sales"].to_numpy(float)
        design = np.column_stack([np.ones(len(x)), x])
        del frame
        spec = pipeline.load_spec(write_spec(folder, drivers, min_train=args.months - ORIGINS - HORIZON))
        data = pipeline.check(spec)
        print(f"prepared (simulate, write Parquet, load spec, check; not timed): "
              f"{time.perf_counter() - start:.1f} s")
    return spec, data, x, y, design


def time_castline(spec, data, design: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Return the best times of (a) castline's OLS backtest engine and (a') the whole backtest
    stage, after checking the stage's OLS predictions are the engine's."""
    # (a) the OLS backtest itself, on the same design lstsq and sklearn are given: castline's
    # growing QR across the 12 expanding origins (what run_backtest calls for OLS).
    months = data.history[PERIOD].array.asi8
    order = np.argsort(months, kind="stable")
    sorted_design, sorted_y, sorted_months = design[order], y[order], months[order]
    origin_months = sorted(np.unique(sorted_months))[-ORIGINS - HORIZON:-HORIZON]
    tests = [sorted_design[sorted_months == m + HORIZON] for m in origin_months]
    castline, found = best_of("(a) castline OLS backtest (growing QR, 12 origins)",
                              lambda: expanding_ols_predictions(sorted_design, sorted_y, sorted_months,
                                                                origin_months, tests))
    assert found is not None and len(found) == ORIGINS
    whole, result = best_of("(a') castline run_backtest, whole stage", lambda: run_backtest(spec, data))
    origins = result.predictions["origin"].nunique()
    assert origins == ORIGINS, origins
    # The stage's OLS predictions are the engine's, origin by origin (same numbers): within an
    # origin the test rows are in series order in both (the simulated names sort that way).
    ols = result.predictions[result.predictions["model"] == "ols"]
    assert len(ols) == sum(len(t) for t in tests)
    stage = ols.sort_values(["origin", "series"], kind="stable")["prediction"].to_numpy(float)
    engine = np.concatenate([predicted for predicted, _se, _df in found])
    assert np.allclose(stage, engine, rtol=1e-9, atol=1e-9), float(np.max(np.abs(stage - engine)))
    del result
    return castline, whole


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=10_000)
    parser.add_argument("--months", type=int, default=100)
    parser.add_argument("--drivers", type=int, default=40)
    parser.add_argument("--profile", action="store_true", help="profile run_backtest even if on target")
    args = parser.parse_args()

    blas_info()
    rows = args.series * args.months
    print(f"\ndata: {args.series:,} series x {args.months} months = {rows:,} rows x {args.drivers} drivers; "
          f"rolling_origin expanding, horizon {HORIZON}, {ORIGINS} origins; OLS + mean baseline")

    spec, data, x, y, design = prepare(args)

    print("\ntimings (best of 3):")
    castline, whole = time_castline(spec, data, design, y)
    lstsq, _ = best_of("(b) numpy.linalg.lstsq, full design",
                       lambda: np.linalg.lstsq(design, y, rcond=None))

    from sklearn.linear_model import LinearRegression
    from sklearn.model_selection import TimeSeriesSplit, cross_validate
    sklearn, _ = best_of("(c) sklearn cross_validate + TimeSeriesSplit(12)",
                         lambda: cross_validate(LinearRegression(), x, y,
                                                cv=TimeSeriesSplit(n_splits=ORIGINS)))

    rss_before_trace = max_rss_mb()
    tracemalloc.start()
    run_backtest(spec, data)
    _, traced_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()

    data_mb = (data.history.memory_usage(deep=True).sum()) / 1e6
    first = castline / lstsq
    second = sklearn / castline
    print(f"\n(a) castline OLS backtest {castline:8.3f} s")
    print(f"(a') whole backtest stage  {whole:8.3f} s  (adds the feature plan per window, the mean "
          "baseline, MASE scales and the prediction table; "
          f"{whole / lstsq:.1f}x one lstsq fit)")
    print(f"(b) one lstsq fit          {lstsq:8.3f} s")
    print(f"(c) sklearn cross_validate {sklearn:8.3f} s")
    print(f"\ncastline / lstsq   = {first:6.2f}   (target <= 1.0)  {'met' if first <= 1.0 else 'MISSED'}")
    print(f"sklearn / castline = {second:6.2f}   (target >= 10)   {'met' if second >= 10 else 'MISSED'}")
    print(f"\nmemory: checked history {data_mb:,.0f} MB; peak allocated during one run_backtest "
          f"(tracemalloc) {traced_peak / 1e6:,.0f} MB; process peak RSS {rss_before_trace:,.0f} MB "
          f"(includes the data, the reference arrays and sklearn's copies)")

    print(f"{load_average()} (on {os.cpu_count()} CPUs: other work on the machine skews every timing)")

    if args.profile or first > 1.0 or second < 10:
        profile(spec, data)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
