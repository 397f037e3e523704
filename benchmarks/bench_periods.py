"""Benchmark: the whole ``castline run`` on weekly, quarterly and monthly data of one size.

    .venv/bin/python benchmarks/bench_periods.py [--series 200] [--periods 260]

Not a test. Data: a simulated panel (seeded numpy, no reference value in it) of
``--series`` series of ``--periods`` periods each: a level per series, a trend, a yearly
wave and noise. The same numbers are written three times, dated as ISO weeks, months and
quarters. The spec: trend, the season as 2 Fourier pairs and a level per series, OLS beside
the mean and the simple rules, rolling origin with 12 origins at horizon 4. Each runs as a
whole process, as a user runs it, timed from start to exit:

  (a) ``castline run SPEC`` on the weekly file (check, backtest, evaluation, forecast,
      report, ledger), and on the monthly and quarterly files;
  (b) a hand-written script on the weekly file: read the CSV, build the same design
      (weeks since the first, sine and cosine of each week's Thursday over 365.25 days, a
      0/1 column per series but the first), a statsmodels OLS fit per origin and the
      same-week-last-year forecast (364 days back), the predictions written to a CSV file.

Targets: (b)/(a) >= 1 on the weekly file (the whole run, with its report and checks, no
slower than the bare loop); a weekly run at most 1.25x the monthly run of the same rows
(weeks cost no more than months). Printed beside the figures, never asserted.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_run import timed_process  # noqa: E402  (a whole process, timed as bench_run times it)

ORIGINS, HORIZON = 12, 4
TARGET_LOOP, TARGET_WEEKS = 1.0, 1.25
STARTS = {"week": "2000-01-05", "month": "2000-01-01", "quarter": "1955-01-01"}   # each ends before today
STEPS = {"week": "7D", "month": "MS", "quarter": "QS"}
PER_YEAR = {"week": 365.25 / 7, "month": 12.0, "quarter": 4.0}

LOOP = r"""
import numpy as np, pandas as pd, statsmodels.api as sm
frame = pd.read_csv({data!r}, parse_dates=["date"])
weeks = sorted(frame["date"].unique())
position = {{day: k for k, day in enumerate(weeks)}}
frame["t"] = frame["date"].map(position).astype(float)
angle = 2 * np.pi * ((frame["date"] - pd.Timestamp("1970-01-01")).dt.days + 1) / 365.25
names = sorted(frame["shop"].unique())
columns = [np.ones(len(frame)), frame["t"].to_numpy(), np.sin(angle), np.cos(angle),
           np.sin(2 * angle), np.cos(2 * angle)]
columns += [(frame["shop"] == name).to_numpy(float) for name in names[1:]]
design = np.column_stack(columns)
y = frame["sales"].to_numpy(float)
year_before = frame.set_index([frame["date"] + pd.Timedelta(days=364), "shop"])["sales"]
rows = []
for origin in weeks[-({origins} + {horizon}):-{horizon}]:
    train = (frame["date"] <= origin).to_numpy()
    test = ((frame["date"] > origin) & (frame["date"] <= origin + pd.Timedelta(weeks={horizon}))).to_numpy()
    fit = sm.OLS(y[train], design[train]).fit()
    predicted = fit.predict(design[test])
    naive = year_before.reindex(pd.MultiIndex.from_arrays([frame["date"][test], frame["shop"][test]])).to_numpy()
    for model, values in (("ols", predicted), ("naive", naive)):
        rows += [(str(origin)[:10], model, value) for value in values]
pd.DataFrame(rows, columns=["origin", "model", "prediction"]).to_csv({out!r}, index=False)
"""


def panel(series: int, periods: int, seed: int = 5) -> tuple[np.ndarray, np.ndarray]:
    """Return the shop names and a (series, periods) array of sales: level + trend + wave + noise."""
    rng = np.random.default_rng(seed)
    level = rng.uniform(50, 150, series)[:, None]
    t = np.arange(periods)[None, :]
    sales = level + 0.05 * t + 10 * np.sin(2 * np.pi * t / 52.18) + rng.normal(0, 2, (series, periods))
    return np.array([f"shop{k:04d}" for k in range(series)]), sales


def write(folder: Path, period: str, names: np.ndarray, sales: np.ndarray) -> Path:
    """Write the panel dated by one spacing, and its spec; return the spec's path."""
    dates = pd.date_range(STARTS[period], periods=sales.shape[1], freq=STEPS[period]).strftime("%Y-%m-%d")
    frame = pd.DataFrame({"date": np.tile(dates, len(names)), "shop": np.repeat(names, sales.shape[1]),
                          "sales": np.round(sales.ravel(), 4)})
    frame.to_csv(folder / f"{period}.csv", index=False)
    spec = {"name": f"bench-{period}",
            "input": {"file": f"{period}.csv", "date_column": "date", "period": period, "series": ["shop"]},
            "target": "sales",
            "drivers": {"calendar": {"trend": True, "season": "fourier", "harmonics": 2}},
            "models": ["ols"],
            "validation": {"method": "rolling_origin", "horizon": HORIZON, "origins": ORIGINS},
            "output": {"folder": f"out-{period}"}}
    path = folder / f"{period}.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=200)
    parser.add_argument("--periods", type=int, default=260)
    args = parser.parse_args()
    names, sales = panel(args.series, args.periods)
    print(f"panel: {args.series:,} series x {args.periods} periods = {sales.size:,} rows, "
          f"{ORIGINS} origins at horizon {HORIZON}")
    runs = {}
    with tempfile.TemporaryDirectory(prefix="castline-bench-periods-") as tmp:
        folder = Path(tmp)
        for period in ("week", "month", "quarter"):
            spec = write(folder, period, names, sales)
            runs[period] = timed_process(["-m", "pipeline", "run", str(spec)], folder)[:2]
        script = folder / "loop.py"
        script.write_text(LOOP.format(data=str(folder / "week.csv"), origins=ORIGINS, horizon=HORIZON,
                                      out=str(folder / "loop.csv")), encoding="utf-8")
        loop, loop_mb, _ = timed_process([str(script)], folder)
        written = pd.read_csv(folder / "loop.csv")
        assert written["origin"].nunique() == ORIGINS

    print("\nwhole processes:")
    for period, (seconds, mb) in runs.items():
        word = {"week": "weekly", "month": "monthly", "quarter": "quarterly"}[period]
        print(f"  (a) castline run, {word:<10}                {seconds:8.2f} s   peak {mb:7,.0f} MB")
    print(f"  (b) hand-written statsmodels loop, weekly {loop:8.2f} s   peak {loop_mb:7,.0f} MB")
    ratio, weeks = loop / runs["week"][0], runs["week"][0] / runs["month"][0]
    print(f"\nratio (b)/(a) on weeks = {ratio:.2f}x (target >= {TARGET_LOOP:g}x: "
          f"{'met' if ratio >= TARGET_LOOP else 'MISSED'})")
    print(f"weekly run / monthly run = {weeks:.2f}x (target <= {TARGET_WEEKS:g}x: "
          f"{'met' if weeks <= TARGET_WEEKS else 'MISSED'})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
