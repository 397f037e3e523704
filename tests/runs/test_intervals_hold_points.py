"""Every published interval holds its point forecast, and the 80% interval lies inside the
95%, for every model kind in the catalogue, on the target as it is and on its log.

Reference: the definition of a prediction interval around a point forecast, and the module
docstring of pipeline.core.intervals (a row's empirical interval is its point ± a bound,
turned back from the log scale for a log target, "so it always holds the point"; the analytic
one is the point ± t·se, or for a log target exp(centre ± t·se) around the smeared mean
exp(centre)·S, which holds it for any smearing factor S below e^{t·se}). A
conformal bound at 95% is a higher order statistic of the same scores than at 80% (Lei,
G'Sell, Rinaldo, Tibshirani & Wasserman 2018, section 2.2), and a t quantile at 97.5% is above
the one at 90%, so the 80% interval lies inside the 95% whichever way it was made.

Data: invented (numpy.random.default_rng, fixed seed), three shops of levels 2, 40 and 400,
the smallest so noisy that, with the target as it is, its lower bounds are clipped at zero;
60 months of actuals from 2019-01 and 6 months to forecast with the planned driver filled in;
never a reference value.

Scenarios are not checked: their rows (pipeline.stages.forecast._scenario_rows) carry the base
and the what-if forecasts and their difference, no interval columns.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

import pipeline
from pipeline.core.catalogue import MODEL_KINDS, PER_SERIES, PER_SERIES_KINDS, model_kind

HISTORY, FUTURE = 60, 6
SHOPS = {"corner": (2.0, 0.8), "market": (40.0, 0.1), "depot": (400.0, 0.1)}   # level, noise
METHODS = ("analytic", "empirical")
LEVELS = ("80", "95")
# Every kind in the catalogue over all series, and every kind that may be fitted per series,
# per series too; none needs a key (the penalised kinds choose from their default penalties).
MODELS = ([kind.name for kind in MODEL_KINDS]
          + [{"kind": name, "per_series": True} for name in PER_SERIES_KINDS])
EXPECTED = {kind.name for kind in MODEL_KINDS} | {f"{name}{PER_SERIES}" for name in PER_SERIES_KINDS}
# Relative slack for floating-point rounding (common practice): a bound turned back from the
# log scale may differ from the point in its last digits. (Measured: every check holds exactly.)
ROUNDING = 1e-12


def simulate(seed: int) -> pd.DataFrame:
    """Monthly sales of the shops: level·exp(0.2·sin(2π·month/12) + 0.1·x + noise·e), x the
    planned driver uniform on [−1, 1], e ~ N(0, 1); the 6 months to forecast have y empty."""
    rng = np.random.default_rng(seed)
    months = pd.period_range("2019-01", periods=HISTORY + FUTURE, freq="M")
    season = np.sin(2 * np.pi * months.month.to_numpy() / 12)
    frames = []
    for shop, (level, noise) in SHOPS.items():
        x = rng.uniform(-1, 1, len(months)).round(3)
        y = level * np.exp(0.2 * season + 0.1 * x + noise * rng.normal(0, 1, len(months)))
        y[HISTORY:] = np.nan
        frames.append(pd.DataFrame({"month": months.to_timestamp().strftime("%Y-%m-%d"), "shop": shop,
                                    "x": x, "y": y.round(3)}))
    return pd.concat(frames, ignore_index=True)


def write_spec(folder: Path, frame: pd.DataFrame, transform: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "data.csv", index=False)
    spec = {"name": f"every-kind-{transform}",
            "input": {"file": "data.csv", "date_column": "month", "series": ["shop"]},
            "target": "y",
            "drivers": {"numeric": [{"column": "x", "future": "given"}],
                        "calendar": {"month_of_year": "fourier", "harmonics": 1}},
            "target_transform": transform,
            "validation": {"method": "rolling_origin", "horizon": FUTURE, "min_train_periods": 36,
                           "step": 3},
            "models": MODELS,
            "output": {"folder": "runs"}}
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


@pytest.fixture(scope="module", params=["none", "log"])
def run(request, tmp_path_factory) -> tuple[str, pd.DataFrame]:
    """The target transform, and forecast.csv of one run of every model kind with it."""
    spec = write_spec(tmp_path_factory.mktemp(f"kinds-{request.param}"), simulate(20260304), request.param)
    return request.param, pd.read_csv(pipeline.run(spec).folder.path / "forecast.csv")


@pytest.fixture
def forecast(run) -> pd.DataFrame:
    return run[1]


def slack(point: pd.Series) -> pd.Series:
    return ROUNDING * np.maximum(point.abs(), 1.0)


def test_every_model_kind_is_forecast_with_an_empirical_interval(run):
    # Reference: the catalogue (every kind the spec listed, and per series where it may be).
    transform, forecast = run
    assert set(forecast["model"]) == EXPECTED
    assert len(forecast) == len(EXPECTED) * len(SHOPS) * FUTURE
    for level in LEVELS:
        present = forecast.groupby("model")[f"empirical_low_{level}"].count()
        assert (present == len(SHOPS) * FUTURE).all(), present
    # Analytic bounds are for the kinds with a standard error (the catalogue's prediction_se:
    # OLS, over all series and per series); on a log target they are found on the log scale
    # and turned back (pipeline.models.transformed), so the checks below meet both kinds.
    analytic = set(forecast.dropna(subset=["analytic_low_95"])["model"])
    with_se = {name for name in EXPECTED if model_kind(name).can("prediction_se")}
    assert with_se == {"ols", f"ols{PER_SERIES}"}
    assert analytic == with_se


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("level", LEVELS)
def test_every_published_interval_holds_its_point(forecast, method, level):
    low, high = forecast[f"{method}_low_{level}"], forecast[f"{method}_high_{level}"]
    present = low.notna() | high.notna()
    if method == "empirical":
        assert present.all()
    rows = forecast[present]
    low, high, point = low[present], high[present], rows["forecast"]
    assert low.notna().all() and high.notna().all(), "a row with one bound and not the other"
    below = rows[low > point + slack(point)]
    above = rows[high < point - slack(point)]
    assert below.empty, f"{method} {level}% low above the point:\n{below.to_string()}"
    assert above.empty, f"{method} {level}% high below the point:\n{above.to_string()}"


@pytest.mark.parametrize("method", METHODS)
def test_the_80_interval_lies_inside_the_95(forecast, method):
    columns = [f"{method}_{side}_{level}" for side in ("low", "high") for level in LEVELS]
    both = forecast.dropna(subset=columns)
    if method == "empirical":
        assert len(both) == len(forecast)
    slack_ = slack(both["forecast"])
    wider_low = both[both[f"{method}_low_95"] > both[f"{method}_low_80"] + slack_]
    wider_high = both[both[f"{method}_high_95"] < both[f"{method}_high_80"] - slack_]
    assert wider_low.empty, wider_low.to_string()
    assert wider_high.empty, wider_high.to_string()


def test_lower_bounds_stay_at_or_above_zero_and_the_floor_is_met(run):
    # Reference: the module docstring of pipeline.core.intervals (a target never below zero
    # gets no bound below zero, and the floor never lifts a bound above its point). With the
    # target as it is, the corner shop's bounds are clipped at zero, so the checks above meet
    # the floor; on the log scale every bound is exp of a number, above zero.
    transform, forecast = run
    point = forecast["forecast"]
    lows = forecast[[f"{method}_low_{level}" for method in METHODS for level in LEVELS]]
    for column in lows.columns:
        present = lows[column].notna() & (point >= 0)
        assert (lows.loc[present, column] >= 0).all(), column
    if transform == "none":
        assert int((lows == 0).to_numpy().sum()) > 0, "no bound was clipped at zero"
    else:
        assert (lows.stack().dropna() > 0).all()
