"""Benchmark: OLS over all series with a level per series, at 10,000 series, levels absorbed.

    .venv/bin/python benchmarks/bench_pooled.py [--series 10000] [--months 120] [--drivers 6]
                                                [--dense-series 300]

Not a test. Data: the simulated panel of bench_many_series (seeded numpy, no reference value
in it), written as Parquet. Each side runs as a process of its own, timed from start to exit,
its peak memory its own maximum resident set (os.wait4):

  (a) castline's fit: pipeline.models.absorbed.absorbed_least_squares on the drivers with
      a level per series (the within transformation);
  (b) the same fit written by hand: pandas groupby-transform demeaning, then numpy lstsq;
  (c) on the first --dense-series series only, the fit with a column per series
      (statsmodels OLS on the drivers and the series dummies), beside (a) on those series;
  (d) the whole ``castline run`` with that model (OLS over all series, the mean and
      same-month-last-year beside it; rolling origin, 12 origins, horizon 3).

It prints the times, the ratios, the largest difference between the slopes of each pair,
the memory a column per series would take at the full size, and the target line of issue 21
(a pooled OLS over 10,000 series x 120 months fits in under 2 GB), never asserted.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_many_series import HORIZON, ORIGINS, written_panel  # noqa: E402  (the same panel)
from bench_run import timed_process  # noqa: E402  (a whole process, its time and peak memory)

TARGET_MB = 2048

# Each fit as a script of its own: read the panel, fit, save the slopes.
READ = r"""
import json, sys
import numpy as np, pandas as pd
frame = pd.read_parquet({data!r})
drivers = [c for c in frame.columns if c.startswith("x")]
keep = sorted(frame["shop"].unique())[:{series}]
frame = frame[frame["shop"].isin(keep)]
x, y, series = frame[drivers].to_numpy(float), frame["units"].to_numpy(float), frame["shop"].to_numpy()
"""
FITS = {
    "castline": READ + r"""
from pipeline.models.absorbed import absorbed_least_squares
slopes = absorbed_least_squares(x, y, series, drivers).slopes.coef
np.save({out!r}, slopes)
""",
    "by hand": READ + r"""
demeaned = frame[drivers + ["units"]] - frame.groupby("shop")[drivers + ["units"]].transform("mean")
slopes = np.linalg.lstsq(demeaned[drivers].to_numpy(float), demeaned["units"].to_numpy(float), rcond=None)[0]
np.save({out!r}, slopes)
""",
    "dense": READ + r"""
import statsmodels.api as sm
dummies = pd.get_dummies(frame["shop"], drop_first=True, dtype=float).to_numpy()
design = np.column_stack([np.ones(len(x)), x, dummies])
slopes = sm.OLS(y, design).fit().params[1:1 + x.shape[1]]
np.save({out!r}, slopes)
""",
}


def fit(folder: Path, name: str, series: int) -> tuple[float, float, object]:
    """Return one fit's wall time, peak memory (MB) and slopes, run as a process of its own."""
    import numpy as np
    script = folder / f"fit_{name.replace(' ', '_')}_{series}.py"
    out = folder / f"slopes_{name.replace(' ', '_')}_{series}.npy"
    script.write_text(FITS[name].format(data=str(folder / "data.parquet"), series=series, out=str(out)),
                      encoding="utf-8")
    seconds, mb, _ = timed_process([str(script)], folder)
    return seconds, mb, np.load(out)


def apart(first, second) -> float:
    import numpy as np
    return float(np.max(np.abs(first - second) / np.maximum(np.abs(second), 1.0)))


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--series", type=int, default=10_000)
    parser.add_argument("--months", type=int, default=120)
    parser.add_argument("--drivers", type=int, default=6)
    parser.add_argument("--dense-series", type=int, default=300,
                        help="series for the fit with a column per series (its design is dense)")
    args = parser.parse_args()
    print(f"data: {args.series:,} series x {args.months} months x {args.drivers} drivers (bench_many_series' "
          "panel); OLS over all series with a level per series")
    with tempfile.TemporaryDirectory(prefix="castline-bench-pooled-") as tmp:
        folder = Path(tmp)
        _, drivers = written_panel(folder, args)
        ours = fit(folder, "castline", args.series)
        hand = fit(folder, "by hand", args.series)
        small = min(args.dense_series, args.series)
        ours_small = fit(folder, "castline", small)
        dense = fit(folder, "dense", small)
        spec = {"name": "bench-pooled",
                "input": {"file": "data.parquet", "date_column": "month", "series": ["shop"]},
                "target": "units", "drivers": {"numeric": drivers},
                "validation": {"method": "rolling_origin", "window": "expanding", "horizon": HORIZON,
                               "min_train_periods": args.months - ORIGINS - HORIZON + 1, "origins": ORIGINS},
                "models": ["ols", "seasonal_naive"], "output": {"folder": "reports"}}
        (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
        run, run_mb, text = timed_process(["-m", "pipeline", "run", str(folder / "spec.yaml")], folder)
        absorbed = "series levels are too many for a column each" in text

    rows = args.series * args.months
    print(f"\nthe fit, {args.series:,} series x {args.months} months ({rows:,} rows), whole processes:")
    print(f"  (a) castline, levels absorbed                {ours[0]:8.2f} s   peak {ours[1]:7,.0f} MB")
    print(f"  (b) by hand: groupby demeaning + lstsq       {hand[0]:8.2f} s   peak {hand[1]:7,.0f} MB")
    print(f"  ratio (b)/(a) = {hand[0] / ours[0]:.2f}x; slopes apart by {apart(ours[2], hand[2]):.1e} (relative)")
    print(f"  a column per series would take {rows * (args.series + len(drivers)) * 8 / 1e9:,.1f} GB "
          "for the design alone")
    print(f"\nthe fit on {small:,} series, against a column per series (statsmodels OLS):")
    print(f"  (a) castline, levels absorbed                {ours_small[0]:8.2f} s   peak {ours_small[1]:7,.0f} MB")
    print(f"  (c) statsmodels, a column per series         {dense[0]:8.2f} s   peak {dense[1]:7,.0f} MB")
    print(f"  ratio (c)/(a) = {dense[0] / ours_small[0]:.2f}x; slopes apart by "
          f"{apart(ours_small[2], dense[2]):.1e} (relative)")
    print(f"\n(d) castline run, OLS over all series: {run:.2f} s, peak {run_mb:,.0f} MB "
          f"(levels {'absorbed' if absorbed else 'as columns'})")
    met = ours[1] < TARGET_MB
    print(f"\npeak memory of the fit = {ours[1]:,.0f} MB (target < {TARGET_MB:,} MB at 10,000 series x 120 "
          f"months: {'met' if met else 'MISSED'}{'' if args.series >= 10_000 else '; a smaller panel here'})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
