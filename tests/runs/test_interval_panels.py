"""Intervals that hold for every series: a whole run on a panel whose series' scales differ
100-fold, its forecasts scored against the future drawn from the same process.

References, named beside each check:

* the simulation below, whose design is stated here (invented data, numpy.random.default_rng
  with fixed seeds; the true future is drawn from the same process, so the share of it inside
  an interval is the interval's coverage, up to Monte Carlo error);
* split conformal (Vovk, Gammerman & Shafer 2005; Lei, G'Sell, Rinaldo, Tibshirani & Wasserman
  2018, section 2.2): the ⌈(n + 1)·level⌉-th smallest of n absolute errors, computed here by
  hand from predictions.csv for the old, unscaled band;
* the requirement of the issue: in each third of the series by scale, the 80% and 95%
  coverage within ±4 points of nominal, over at least 1,000 future points;
* hand arithmetic on forecast.csv for the clipped lower bounds of counts (the interval is the
  point ± a width, so the bound before clipping is 2·point − high).

The panel: 105 series (shops) with levels L_i log-uniform from 10 to 1,000 (the largest about
100 times the smallest), 108 months (nine years) of actuals from 2015-01, then 12 months to
forecast whose planned driver x is filled in. Each month

    y_t = L_i · (1 + 0.25·sin(2π·month_t/12 + phase_i) + 0.1·x_t + 0.08·e_t)

with phase_i uniform on [0, 2π), x_t uniform on [−1, 1] (a plan known ahead, rounded to three
decimals) and e_t ~ N(0, 1) independent. Every y is above zero (it would need e_t below −8),
so the target is never below zero. The spec fits OLS to each series alone on x and one pair of
calendar-month Fourier terms (the model the data follow), validated at rolling origins 12
months ahead (48 months in the first window, an origin every 3 months: 17 origins); castline
adds the mean of the training months and the simple rules. The true future is
FUTURE_DRAWS independent draws of e_t for each series' 12 months ahead (the forecast is fixed,
the draws are not), so each third of the series holds 35 series × 12 months × 5 draws = 2,100
future points.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

import pipeline

SERIES = 105
LEVEL_LOW, LEVEL_HIGH = 10.0, 1000.0
HISTORY, FUTURE = 108, 12
FUTURE_DRAWS = 5
SEASON, DRIVER, NOISE = 0.25, 0.1, 0.08        # the simulated effects, as shares of the level
LEVELS = (0.80, 0.95)
TOLERANCE = 0.04        # the requirement: ±4 points of nominal in each third
FEWEST_POINTS = 1000    # the requirement: over at least 1,000 future points
MODEL = "ols_per_series"
THIRDS = ("small", "middle", "large")
BOUND_COLUMNS = [f"{method}_{side}_{level}" for method in ("analytic", "empirical")
                 for level in ("80", "95") for side in ("low", "high")]


def write_run(folder: Path, frame: pd.DataFrame, **keys) -> Path:
    """Write the data as CSV and a spec for it (per-series OLS on x and the month of year,
    rolling origins 12 months ahead); return the spec's path."""
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "data.csv", index=False)
    spec = {"name": "interval-panel",
            "input": {"file": "data.csv", "date_column": "month", "series": ["shop"]},
            "target": "y",
            "drivers": {"numeric": [{"column": "x", "future": "given"}],
                        "calendar": {"month_of_year": "fourier", "harmonics": 1}},
            "validation": {"method": "rolling_origin", "horizon": 12, "min_train_periods": 48,
                           "step": 3},
            "models": [{"kind": "ols", "per_series": True}],
            "output": {"folder": "runs"}}
    spec.update(keys)
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def simulate_panel(seed: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return the panel's rows (actuals, then the months to forecast with y empty) and, per
    series, its level, phase and third by level (see the module docstring)."""
    rng = np.random.default_rng(seed)
    level = np.exp(rng.uniform(np.log(LEVEL_LOW), np.log(LEVEL_HIGH), SERIES))
    phase = rng.uniform(0, 2 * np.pi, SERIES)
    names = [f"shop{i:03d}" for i in range(SERIES)]
    months = pd.period_range("2015-01", periods=HISTORY + FUTURE, freq="M")
    month = months.month.to_numpy()
    frames = []
    for i, name in enumerate(names):
        x = rng.uniform(-1, 1, len(months)).round(3)
        e = rng.normal(0, 1, len(months))
        y = level[i] * (1 + SEASON * np.sin(2 * np.pi * month / 12 + phase[i]) + DRIVER * x + NOISE * e)
        y[HISTORY:] = np.nan
        frames.append(pd.DataFrame({"month": months.to_timestamp().strftime("%Y-%m-%d"), "shop": name,
                                    "x": x, "y": y}))
    third = np.empty(SERIES, dtype=object)
    for group, part in zip(THIRDS, np.array_split(np.argsort(level, kind="stable"), 3)):
        third[part] = group
    truth = pd.DataFrame({"series": names, "level": level, "phase": phase, "third": third})
    return pd.concat(frames, ignore_index=True), truth


def future_draws(frame: pd.DataFrame, truth: pd.DataFrame, seed: int) -> pd.DataFrame:
    """Return FUTURE_DRAWS independent draws of every month to forecast, from the process that
    made the history: one row per series, month and draw, with the series' third."""
    rng = np.random.default_rng(seed)
    ahead = frame[frame["y"].isna()].merge(truth, left_on="shop", right_on="series")
    month = pd.PeriodIndex(ahead["month"], freq="M").month.to_numpy()
    mean = ahead["level"] * (1 + SEASON * np.sin(2 * np.pi * month / 12 + ahead["phase"])
                             + DRIVER * ahead["x"])
    draws = [pd.DataFrame({"series": ahead["series"], "period": pd.PeriodIndex(ahead["month"], freq="M")
                           .astype(str), "third": ahead["third"], "draw": k,
                           "actual": mean + ahead["level"] * NOISE * rng.normal(0, 1, len(ahead))})
             for k in range(FUTURE_DRAWS)]
    return pd.concat(draws, ignore_index=True)


@pytest.fixture(scope="module")
def panel(tmp_path_factory):
    """One run of the panel (seed 20260301) and the future drawn for it (seed 20260302):
    (forecast.csv, predictions.csv, interval_coverage_by.csv, the drawn future)."""
    frame, truth = simulate_panel(20260301)
    result = pipeline.run(write_run(tmp_path_factory.mktemp("panel"), frame))
    folder = result.folder.path
    return (pd.read_csv(folder / "forecast.csv"), pd.read_csv(folder / "predictions.csv"),
            pd.read_csv(folder / "interval_coverage_by.csv"), future_draws(frame, truth, 20260302))


def scored(forecast: pd.DataFrame, future: pd.DataFrame, model: str = MODEL) -> pd.DataFrame:
    """Return the drawn future beside the model's forecast rows for the same series and month."""
    own = forecast[forecast["model"] == model]
    joined = future.merge(own, on=["series", "period"], how="left", validate="many_to_one")
    assert joined["forecast"].notna().all(), "a drawn month without its forecast"
    return joined


def coverage_by_third(joined: pd.DataFrame, low, high) -> pd.DataFrame:
    """Return, per third, the share of the drawn future inside [low, high] and how many points."""
    inside = (joined["actual"] >= low) & (joined["actual"] <= high)
    return inside.groupby(joined["third"]).agg(["mean", "size"]).reindex(list(THIRDS))


def bounds_of(joined: pd.DataFrame, method: str, level: float) -> tuple[pd.Series, pd.Series]:
    tag = f"{level * 100:g}"
    return joined[f"{method}_low_{tag}"], joined[f"{method}_high_{tag}"]


def assert_holds_in_every_third(joined: pd.DataFrame, method: str, level: float) -> None:
    low, high = bounds_of(joined, method, level)
    assert low.notna().all() and high.notna().all(), f"{method} {level}: rows without a bound"
    table = coverage_by_third(joined, low, high)
    assert (table["size"] >= FEWEST_POINTS).all(), table         # the issue: ≥ 1,000 points
    off = table[(table["mean"] - level).abs() > TOLERANCE]      # the issue: ±4 points of nominal
    assert off.empty, f"{method} {level:.0%} coverage off nominal by more than 4 points:\n{table}"


# ------------------------------------------------------------------ coverage in each third

# Measured with these seeds (per third small / middle / large, 2,100 future points each):
#   empirical 80%: 0.804 / 0.822 / 0.800      empirical 95%: 0.960 / 0.960 / 0.945
#   analytic  80%: 0.806 / 0.806 / 0.791      analytic  95%: 0.957 / 0.949 / 0.945
# With panel seeds 11 and 23 instead (tried once, not run here) every figure was within 2.6
# points of nominal.

@pytest.mark.parametrize("level", LEVELS)
def test_empirical_intervals_hold_in_every_third_of_the_series_by_scale(panel, level):
    # Reference: the simulated future (module docstring); the issue's ±4 points over ≥ 1,000.
    forecast, _, _, future = panel
    assert_holds_in_every_third(scored(forecast, future), "empirical", level)


@pytest.mark.parametrize("level", LEVELS)
def test_analytic_intervals_hold_in_every_third_too(panel, level):
    # The per-series OLS is the model the data follow, with normal errors of a constant
    # variance in each series: its t interval is exact for each series (here as a contrast
    # to the empirical one, against the same simulated future and the same requirement).
    forecast, _, _, future = panel
    assert_holds_in_every_third(scored(forecast, future), "analytic", level)


def test_the_runs_own_backtest_coverage_by_size_agrees(panel):
    # The run's interval_coverage_by.csv (thirds by mean actual, empirical bounds stated at
    # each origin from earlier origins' errors) against the same requirement; measured, small
    # / middle / large, 0.781 / 0.814 / 0.801 at 80% and 0.940 / 0.951 / 0.950 at 95%, over
    # 6,720 backtest rows per third.
    _, _, by, _ = panel
    own = by[(by["model"] == MODEL) & (by["method"] == "empirical") & (by["by"] == "size of series")]
    assert sorted(own["group"].unique()) == sorted(THIRDS)
    assert (own["n"] >= FEWEST_POINTS).all()
    assert ((own["coverage"] - own["level"]).abs() <= TOLERANCE).all(), own


def old_unscaled_bounds(predictions: pd.DataFrame, joined: pd.DataFrame, level: float):
    """Return the interval the empirical method gave before it read errors on each series'
    scale: at each horizon, the ⌈(n + 1)·level⌉-th smallest of the n absolute backtest errors
    of every series pooled (Lei et al. 2018), in units, one band for every series."""
    own = predictions[predictions["model"] == MODEL]
    band = {}
    for horizon, rows in own.groupby("horizon"):
        errors = np.sort(np.abs(rows["prediction"] - rows["actual"]).to_numpy(float))
        band[horizon] = errors[math.ceil((len(errors) + 1) * level) - 1]
    width = joined["horizon"].map(band)
    return joined["forecast"] - width, joined["forecast"] + width


def test_the_old_unscaled_band_misses_the_large_series(panel):
    # Reference: the simulated future, against bounds computed by hand from predictions.csv
    # the old way (pooled absolute errors in units). Errors are 0.08·L_i·e: a band in units
    # fits the middle of the pooled errors, far too wide for the small series and far too
    # narrow for the large. Measured, per third small / middle / large:
    #   80%: 1.000 / 0.971 / 0.408        95%: 1.000 / 1.000 / 0.845
    forecast, predictions, _, future = panel
    joined = scored(forecast, future)
    old = {level: coverage_by_third(joined, *old_unscaled_bounds(predictions, joined, level))["mean"]
           for level in LEVELS}
    assert old[0.80]["large"] < 0.80 - 0.20       # more than 20 points short where it matters
    assert old[0.95]["large"] < 0.95 - 0.05
    assert old[0.80]["small"] > 0.80 + 0.15       # and far too wide for the small series
    new = coverage_by_third(joined, *bounds_of(joined, "empirical", 0.80))["mean"]
    assert abs(new["large"] - 0.80) <= TOLERANCE  # the scaled errors mend it (the issue's ±4)


def test_no_published_lower_bound_is_below_zero(panel):
    # Reference: the simulated target is never below zero (module docstring), and the module
    # intervals' rule: a target never below zero gets no bound below zero.
    forecast, _, _, _ = panel
    assert forecast["forecast"].min() > 0
    for column in [c for c in BOUND_COLUMNS if "_low_" in c]:
        present = forecast[column].dropna()
        assert len(present), column
        assert (present >= 0).all(), f"{column}: {present.min()}"


# ------------------------------------------------------------------ counts near zero

COUNT_SERIES, COUNT_HISTORY = 24, 72


def simulate_counts(seed: int) -> pd.DataFrame:
    """Monthly counts of COUNT_SERIES shops: Poisson with mean μ_i·(1 + 0.5·sin(2π·month/12 +
    phase_i)), μ_i uniform on [0.5, 3], COUNT_HISTORY months of actuals and 12 to forecast."""
    rng = np.random.default_rng(seed)
    months = pd.period_range("2018-01", periods=COUNT_HISTORY + FUTURE, freq="M")
    month = months.month.to_numpy()
    frames = []
    for i in range(COUNT_SERIES):
        mean = rng.uniform(0.5, 3) * (1 + 0.5 * np.sin(2 * np.pi * month / 12 + rng.uniform(0, 2 * np.pi)))
        y = rng.poisson(mean).astype(float)
        y[COUNT_HISTORY:] = np.nan
        frames.append(pd.DataFrame({"month": months.to_timestamp().strftime("%Y-%m-%d"),
                                    "shop": f"shop{i:02d}", "y": y}))
    return pd.concat(frames, ignore_index=True)


@pytest.fixture(scope="module")
def counts(tmp_path_factory):
    """forecast.csv of one run on the counts (seed 20260303): per-series OLS on the month of
    year, and drift, whose straight line may run below zero."""
    spec = write_run(tmp_path_factory.mktemp("counts"), simulate_counts(20260303),
                     drivers={"calendar": {"month_of_year": "fourier", "harmonics": 1}},
                     validation={"method": "rolling_origin", "horizon": 12, "min_train_periods": 36,
                                 "step": 3},
                     models=[{"kind": "ols", "per_series": True}, "drift"])
    return pd.read_csv(pipeline.run(spec).folder.path / "forecast.csv")


def test_count_lower_bounds_are_clipped_at_zero_and_never_above_the_point(counts):
    # Reference: hand arithmetic. Without a transform each interval is the point ± a width,
    # so the bound before clipping is 2·point − high; clipped, it is that or 0, whichever is
    # higher, for a point at or above 0, and never above the point itself (drift's straight
    # line runs below zero here in some series; such a point keeps its bound at or below it,
    # pipeline.core.intervals.floored, so a bound there is below zero: 48 rows of drift,
    # the lowest point −0.34). Measured: of the 2,016 rows with an empirical 80% bound (7
    # models), 1,432 were clipped to 0; of the 288 with an analytic one, 193.
    point = counts["forecast"]
    clipped = 0
    for method in ("analytic", "empirical"):
        for level in ("80", "95"):
            low, high = counts[f"{method}_low_{level}"], counts[f"{method}_high_{level}"]
            has = low.notna()
            assert has.any(), f"{method} {level}: no bound"
            low, high, own = low[has], high[has], point[has]
            assert (low <= own).all(), f"{method} {level}: a lower bound above its point"
            assert (high >= own).all(), f"{method} {level}: an upper bound below its point"
            at_or_above = own >= 0
            assert (low[at_or_above] >= 0).all(), f"{method} {level}: a bound below zero"
            np.testing.assert_allclose(low[at_or_above], np.maximum(2 * own - high, 0)[at_or_above],
                                       rtol=1e-9, atol=1e-9)
            clipped += int(((low == 0) & (2 * own - high < 0))[at_or_above].sum())
    assert clipped > 0, "no bound was clipped: the counts do not exercise the floor"
