"""Prediction intervals: the analytic OLS interval against statsmodels, its coverage on
simulated data, the empirical interval from out-of-sample errors, and backtest coverage.

Sources of reference values: statsmodels ``OLSResults.get_prediction(...).summary_frame``
(obs_ci_lower / obs_ci_upper), ``numpy.quantile`` (default linear interpolation), and
counts worked out by hand in the comments.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm

from pipeline.core import intervals
from pipeline.core.design import Design
from pipeline.core.intervals import MIN_ERRORS, analytic_bounds, coverage, empirical_bounds, empirical_offsets
from pipeline.models.ols import OLSModel


def _design(matrix: np.ndarray, names: list[str] | None = None) -> Design:
    matrix = np.asarray(matrix, float)
    return Design(matrix=matrix, names=names or [f"x{j}" for j in range(matrix.shape[1])],
                  series=np.zeros(len(matrix)))


# ------------------------------------------------------------------ analytic against statsmodels

@pytest.mark.parametrize("level", [0.80, 0.95])
def test_the_analytic_interval_equals_statsmodels_get_prediction(level):
    rng = np.random.default_rng(2024)
    n = 48
    x = np.column_stack([rng.normal(10, 2, n), rng.uniform(0, 5, n), rng.normal(0, 1, n)])
    y = 3 + 0.5 * x[:, 0] - 1.2 * x[:, 1] + 0.3 * x[:, 2] + rng.normal(0, 1.5, n)
    x_new = np.column_stack([rng.normal(10, 3, 7), rng.uniform(-1, 7, 7), rng.normal(0, 2, 7)])

    model = OLSModel().fit(_design(x), y)
    new = _design(x_new)
    low, high = analytic_bounds(model.predict(new), model.prediction_se(new), model.residual_df(), level)

    reference = sm.OLS(y, sm.add_constant(x)).fit()
    # statsmodels OLSResults.get_prediction(x_new).summary_frame(alpha=1 − level)
    frame = reference.get_prediction(sm.add_constant(x_new, has_constant="add")).summary_frame(
        alpha=1 - level)
    np.testing.assert_allclose(low, frame["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(high, frame["obs_ci_upper"], rtol=1e-10)
    np.testing.assert_allclose(model.predict(new), frame["mean"], rtol=1e-10)


def test_the_analytic_interval_without_an_intercept_equals_statsmodels():
    rng = np.random.default_rng(7)
    x = rng.uniform(1, 4, (30, 2))
    y = x @ [2.0, -0.5] + rng.normal(0, 0.4, 30)
    x_new = rng.uniform(0, 5, (5, 2))
    model = OLSModel(fit_intercept=False).fit(_design(x), y)
    low, high = analytic_bounds(model.predict(_design(x_new)), model.prediction_se(_design(x_new)),
                                model.residual_df(), 0.95)
    frame = sm.OLS(y, x).fit().get_prediction(x_new).summary_frame(alpha=0.05)   # statsmodels
    np.testing.assert_allclose(low, frame["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(high, frame["obs_ci_upper"], rtol=1e-10)


def test_analytic_bounds_is_prediction_plus_minus_t_times_se():
    low, high = analytic_bounds(np.array([10.0]), np.array([2.0]), 12, 0.9)
    multiplier = scipy.stats.t.ppf(0.95, 12)                       # scipy t quantile, 1.7823 for df 12
    assert low[0] == pytest.approx(10 - 2 * multiplier, rel=1e-14)
    assert high[0] == pytest.approx(10 + 2 * multiplier, rel=1e-14)


def test_the_95_interval_covers_about_95_percent_of_simulated_future_values():
    # 400 independent replications of 5 future values each, 2,000 in all: simulate a history
    # of 40 months with normal errors, fit, draw 5 future values at new driver rows, and count
    # those inside their 95% interval. The band 93%–97% is common practice (±2 percentage
    # points around nominal). The share's standard deviation is about 0.5 pp here (binomial
    # 0.49 pp, plus about 0.13 pp from the fit shared by each replication's 5 values), so the
    # band is about 4 standard deviations wide on each side.
    rng = np.random.default_rng(20240601)
    n, fits, ahead, inside = 40, 400, 5, 0
    beta = np.array([5.0, 1.5, -0.8])
    for _ in range(fits):
        x = rng.normal(0, 1, (n + ahead, 2))
        y = beta[0] + x @ beta[1:] + rng.normal(0, 2.0, n + ahead)
        model = OLSModel().fit(_design(x[:n]), y[:n])
        new = _design(x[n:])
        low, high = analytic_bounds(model.predict(new), model.prediction_se(new), model.residual_df(), 0.95)
        inside += int(((low <= y[n:]) & (y[n:] <= high)).sum())
    share = inside / (fits * ahead)
    assert fits * ahead == 2000
    assert 0.93 <= share <= 0.97, share


# ------------------------------------------------------------------ empirical offsets and bounds

def _errors(rng: np.random.Generator, counts: dict[int, int]) -> pd.DataFrame:
    rows = [(h, e) for h, count in counts.items() for e in rng.standard_t(4, count) * h]
    return pd.DataFrame(rows, columns=["horizon", "residual"])


@pytest.mark.parametrize("level", [0.80, 0.95])
def test_empirical_offsets_equal_numpy_quantiles_per_horizon(level):
    rng = np.random.default_rng(3)
    errors = _errors(rng, {1: 30, 2: 25, 3: MIN_ERRORS, 4: MIN_ERRORS - 1})
    offsets = empirical_offsets(errors, level)
    tail = (1 - level) / 2
    assert sorted(offsets) == [1, 2, 3]                            # horizon 4 has too few errors
    for horizon, (low, high) in offsets.items():
        values = errors.loc[errors["horizon"] == horizon, "residual"].to_numpy()
        assert low == np.quantile(values, tail)                    # numpy.quantile, linear
        assert high == np.quantile(values, 1 - tail)


def test_empirical_bounds_add_the_offsets_of_the_horizon_and_reuse_the_furthest_beyond():
    rng = np.random.default_rng(4)
    errors = _errors(rng, {1: 20, 2: 20, 3: 20})
    offsets = empirical_offsets(errors, 0.8)
    forecast = np.array([100.0, 200.0, 300.0, 400.0, 500.0])
    horizons = np.array([1, 2, 3, 5, 12])
    low, high = empirical_bounds(forecast, horizons, errors, 0.8)
    expected = [offsets[1], offsets[2], offsets[3], offsets[3], offsets[3]]
    np.testing.assert_array_equal(low, forecast + [o[0] for o in expected])
    np.testing.assert_array_equal(high, forecast + [o[1] for o in expected])


def test_empirical_bounds_are_nan_with_too_few_errors():
    errors = pd.DataFrame({"horizon": [1] * (MIN_ERRORS - 1), "residual": np.arange(MIN_ERRORS - 1.0)})
    low, high = empirical_bounds(np.array([1.0, 2.0]), np.array([1, 2]), errors, 0.95)
    assert np.isnan(low).all() and np.isnan(high).all()


def test_empirical_bounds_without_time_order_pool_every_error():
    # k-fold predictions all have horizon 0; with none per horizon above the minimum, all pool.
    errors = pd.DataFrame({"horizon": 0, "residual": np.linspace(-5, 5, 11)})
    low, high = empirical_bounds(np.array([10.0]), np.array([0]), errors, 0.8)
    assert low[0] == 10 + np.quantile(np.linspace(-5, 5, 11), 0.1)   # numpy.quantile: −4
    assert high[0] == 10 + np.quantile(np.linspace(-5, 5, 11), 0.9)  # numpy.quantile: +4


# ------------------------------------------------------------------ coverage by hand

def _tiny_predictions() -> pd.DataFrame:
    """Ten origins, one month ahead each, prediction 0, so each actual is its own error."""
    errors = [-4.0, -3.0, -2.0, -1.0, 1.0, 2.0, 3.0, 4.0, 3.5, -3.7]
    origins = [f"2020-{m:02d}" for m in range(1, 11)]
    ols = pd.DataFrame({"origin": origins, "period": [f"2020-{m:02d}" for m in range(2, 12)],
                        "horizon": 1, "series": "all", "model": "ols", "actual": errors,
                        "prediction": 0.0, "mase_scale": 1.0, "prediction_se": 2.0,
                        "df_resid": 1000.0})
    baseline = ols.assign(model="mean_baseline", prediction_se=np.nan, df_resid=np.nan)
    return pd.concat([baseline, ols], ignore_index=True)


def test_coverage_counts_by_hand():
    table = coverage(_tiny_predictions()).set_index(["model", "method", "level"])
    # Analytic, se 2, t(1000): 80% half-width 2·1.2824 = 2.565 holds −2, −1, 1, 2 → 4 of 10;
    # 95% half-width 2·1.9623 = 3.925 holds all but −4 and 4 → 8 of 10.
    assert table.loc[("ols", "analytic", 0.8), "coverage"] == pytest.approx(0.4)
    assert table.loc[("ols", "analytic", 0.95), "coverage"] == pytest.approx(0.8)
    assert table.loc[("ols", "analytic", 0.8), "n"] == 10
    # Empirical: only origins 9 and 10 have 8 earlier errors.
    # Origin 9, errors −4..4 (8): 80% bounds (−3.3, 3.3), 95% (−3.825, 3.825); actual 3.5 → 95 only.
    # Origin 10, those and 3.5 (9): 80% bounds (−3.2, 3.6), 95% (−3.8, 3.9); actual −3.7 → 95 only.
    assert table.loc[("ols", "empirical", 0.8), "coverage"] == 0.0
    assert table.loc[("ols", "empirical", 0.95), "coverage"] == 1.0
    assert table.loc[("ols", "empirical", 0.95), "n"] == 2
    # The baseline has no standard errors: no analytic row, the same empirical counts.
    assert ("mean_baseline", "analytic", 0.8) not in table.index
    assert table.loc[("mean_baseline", "empirical", 0.95), "coverage"] == 1.0


def test_coverage_with_no_earlier_errors_is_nan():
    one_origin = _tiny_predictions().assign(origin="2020-01")
    table = coverage(one_origin)
    empirical = table[table["method"] == "empirical"]
    assert empirical["coverage"].isna().all() and (empirical["n"] == 0).all()


# ------------------------------------------------------------------ leakage

def _rolling_predictions(seed: int = 11, origins: int = 24, horizon: int = 3) -> pd.DataFrame:
    """A rolling-origin backtest's predictions: one origin a month, horizons 1..3."""
    rng = np.random.default_rng(seed)
    rows = []
    for index in range(origins):
        origin = pd.Period("2018-01", freq="M") + index
        for h in range(1, horizon + 1):
            rows.append({"origin": str(origin), "period": str(origin + h), "horizon": h,
                         "series": "all", "model": "ols", "actual": rng.normal(0, h),
                         "prediction": 0.0, "mase_scale": 1.0, "prediction_se": 1.0,
                         "df_resid": 30.0})
    return pd.DataFrame(rows)


class _Recorder:
    """Wraps intervals._earlier_rows and records the rows each origin's interval learned from
    (the predictions hold one model, so the mask is over all of them)."""

    def __init__(self, predictions: pd.DataFrame) -> None:
        self.predictions = predictions
        self.calls: list[pd.DataFrame] = []
        self.original = intervals._earlier_rows

    def __call__(self, *args):
        mask = self.original(*args)
        if mask.sum() >= MIN_ERRORS:   # an origin with fewer is not scored
            self.calls.append(self.predictions[mask])
        return mask


def _recorded(monkeypatch, predictions: pd.DataFrame) -> tuple[list[pd.DataFrame], list[str]]:
    """Return the rows used at each scored origin and the origins scored."""
    recorder = _Recorder(predictions)
    monkeypatch.setattr(intervals, "_earlier_rows", recorder)
    coverage(predictions)
    origins = sorted(predictions["origin"].unique())
    # An origin is scored once the earlier origins' errors for months already past number
    # at least MIN_ERRORS.
    scored = [o for i, o in enumerate(origins)
              if ((predictions["origin"].isin(origins[:i])) & (predictions["period"] <= o)).sum()
              >= MIN_ERRORS]
    assert len(recorder.calls) == len(scored)                        # one per origin scored
    return recorder.calls, scored


def test_an_empirical_interval_at_an_origin_only_uses_errors_of_earlier_origins(monkeypatch):
    predictions = _rolling_predictions()
    calls, scored = _recorded(monkeypatch, predictions)
    origins = sorted(predictions["origin"].unique())
    for used, origin in zip(calls, scored):
        assert (used["origin"] < origin).all()
        earlier = predictions[predictions["origin"].isin(origins[:origins.index(origin)])]
        # every earlier origin's error for a month already past at this origin
        assert len(used) == int((earlier["period"] <= origin).sum())


def test_an_empirical_interval_only_uses_errors_whose_month_was_known_at_the_origin(monkeypatch):
    predictions = _rolling_predictions()
    calls, scored = _recorded(monkeypatch, predictions)
    for used, origin in zip(calls, scored):
        assert (used["period"] <= origin).all(), (origin, sorted(used["period"].unique())[-3:])
