"""Prediction intervals: the analytic OLS interval against statsmodels, its coverage on
simulated data, the empirical interval from out-of-sample errors, and backtest coverage.

Sources of reference values: statsmodels ``OLSResults.get_prediction(...).summary_frame``
(obs_ci_lower / obs_ci_upper), the split conformal quantile of Lei, G'Sell, Rinaldo,
Tibshirani & Wasserman (2018) and the interval score of Winkler (1972) and Gneiting &
Raftery (2007), worked out by hand in the comments.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm

from pipeline.core import intervals
from pipeline.core.design import Design
from pipeline.core.intervals import analytic_bounds, coverage
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


# ------------------------------------------------------------------ the conformal bound, by hand

def test_the_conformal_bound_is_the_rank_ceil_n_plus_1_times_level_smallest_score():
    # Split conformal (Lei et al. 2018, section 2.2): the ⌈(n + 1)(1 − α)⌉-th smallest of n
    # scores. Worked by hand: n = 10 scores, 80%: ⌈11 · 0.8⌉ = ⌈8.8⌉ = 9, the 9th smallest.
    scores = [0.5, 3, 1, 2, 4, 9, 7, 6, 8, 5]
    assert intervals.conformal_bound(scores, 0.80) == 8
    # 95%: ⌈11 · 0.95⌉ = ⌈10.45⌉ = 11 > 10: too few scores for the level.
    assert np.isnan(intervals.conformal_bound(scores, 0.95))
    # n = 19 at 95%: ⌈20 · 0.95⌉ = 19, the largest; n = 39: ⌈40 · 0.95⌉ = 38, the second largest.
    assert intervals.conformal_bound(np.arange(1.0, 20.0), 0.95) == 19
    assert intervals.conformal_bound(np.arange(1.0, 40.0), 0.95) == 38


def test_the_errors_a_level_needs_follow_from_alpha_at_least_one_over_n_plus_1():
    # The bound exists when α ≥ 1/(n + 1), i.e. n ≥ 1/α − 1 (Lei et al. 2018): 4 at 80%, 19 at
    # 95%, 9 at 90%, 99 at 99%.
    for level in (0.80, 0.90, 0.95, 0.99):
        assert intervals.needed_errors(level) == round(1 / (1 - level) - 1)
    assert intervals.FEWEST_ERRORS == 39 > intervals.needed_errors(0.95)


def test_scores_are_errors_on_each_series_own_scale_or_on_the_log_scale():
    actual = np.array([110.0, 9.0, 0.0])
    prediction = np.array([100.0, 10.0, 2.0])
    scale = np.array([20.0, 0.5, 4.0])
    # |110 − 100| / 20 = 0.5; |9 − 10| / 0.5 = 2; |0 − 2| / 4 = 0.5 (by hand)
    np.testing.assert_allclose(intervals.error_scores(actual, prediction, scale), [0.5, 2.0, 0.5])
    # log: |ln 110 − ln 100| = ln 1.1; log1p: |ln 10 − ln 11| = ln 1.1
    assert intervals.error_scores([110.0], [100.0], [1.0], "log")[0] == pytest.approx(np.log(1.1), rel=1e-14)
    assert intervals.error_scores([9.0], [10.0], [1.0], "log1p")[0] == pytest.approx(np.log(1.1), rel=1e-14)
    # A prediction a log cannot take counts as a miss: an infinite score.
    assert intervals.error_scores([5.0], [-1.0], [1.0], "log")[0] == np.inf


def test_unknown_or_zero_scales_take_the_median_of_the_others():
    np.testing.assert_array_equal(intervals.usable_scales([2.0, np.nan, 0.0, 4.0, 6.0]), [2, 4, 4, 4, 6])
    np.testing.assert_array_equal(intervals.usable_scales([np.nan, np.nan]), [1.0, 1.0])   # k-fold


def test_scaled_bounds_hold_the_point_and_stay_at_or_above_the_floor():
    low, high = intervals.scaled_bounds([100.0, 3.0, -2.0], 1.5, np.array([10.0, 4.0, 1.0]), floor=0.0)
    # 100 ± 15; 3 ± 6 → [0, 9] (floored at 0); −2 ± 1.5 → [−3.5, −0.5] floored at the point −2
    np.testing.assert_allclose(low, [85.0, 0.0, -2.0])
    np.testing.assert_allclose(high, [115.0, 9.0, -0.5])
    # log scale: 100 · e^{±0.2}
    low, high = intervals.scaled_bounds([100.0], 0.2, np.array([1.0]), "log")
    np.testing.assert_allclose([low[0], high[0]], [100 * np.exp(-0.2), 100 * np.exp(0.2)], rtol=1e-14)


def test_a_horizon_with_too_few_errors_borrows_its_neighbours():
    # Counts by horizon 1: 50, 2: 10, 3: 10, 4: 50. Horizon 2 takes 3 (equal distance to 1 and
    # 3, the further ahead first: 20 < 39), then 1 (distance 1 beats 4's distance 2): 70.
    # Horizon 3 takes 4 (distance 1, ahead): 60. Horizons 1 and 4 have their own 50.
    horizons = np.repeat([1, 2, 3, 4], [50, 10, 10, 50])
    scores = np.arange(len(horizons), dtype=float)   # scores 0..119 in horizon order
    table = intervals.horizon_bounds(horizons, scores).drop_duplicates("horizon").set_index("horizon")
    assert table.loc[1, ["errors", "from_horizon", "to_horizon"]].tolist() == [50, 1, 1]
    assert table.loc[2, ["errors", "from_horizon", "to_horizon"]].tolist() == [70, 1, 3]
    assert table.loc[3, ["errors", "from_horizon", "to_horizon"]].tolist() == [60, 3, 4]
    bounds = intervals.horizon_bounds(horizons, scores).set_index(["horizon", "level"])["bound"]
    # Horizon 1, scores 0..49, 80%: ⌈51 · 0.8⌉ = 41st smallest = 40; 95%: ⌈48.45⌉ = 49th = 48.
    assert bounds[(1, 0.8)] == 40 and bounds[(1, 0.95)] == 48
    # Horizon 3, scores 60..119, 95%: ⌈61 · 0.95⌉ = 58th smallest = 60 + 57 = 117.
    assert bounds[(3, 0.95)] == 117
    note = intervals.borrowing_note(intervals.horizon_bounds(horizons, scores), furthest=6)
    assert "2 (1–3), 3 (3–4)" in note and "more than 4 ahead" in note


def test_a_horizon_with_errors_enough_reads_its_bound_from_its_own_errors_in_any_order():
    # Design: 6 horizons with 39 to 120 errors each (all enough), scores drawn from an exponential
    # and shuffled across horizons, ties and misses (inf) among them. Each bound must be the
    # ⌈(n + 1)·level⌉-th smallest of the horizon's own scores (Lei et al. 2018), taken here from
    # numpy's full sort of that horizon's scores alone.
    rng = np.random.default_rng(20261203)
    horizons = np.repeat(np.arange(1, 7), [39, 40, 57, 80, 99, 120]).astype(float)
    scores = np.round(rng.exponential(size=len(horizons)), 2)
    scores[rng.choice(len(scores), 5, replace=False)] = np.inf
    order = rng.permutation(len(horizons))
    horizons, scores = horizons[order], scores[order]
    table = intervals.horizon_bounds(horizons, scores)
    for (horizon, level), bound in table.set_index(["horizon", "level"])["bound"].items():
        own = np.sort(scores[horizons == horizon])
        rank = int(np.ceil((len(own) + 1) * level - 1e-9))
        assert bound == own[rank - 1] if rank <= len(own) else np.isnan(bound)
    assert (table["errors"] == table["horizon"].map(dict(zip(*np.unique(horizons, return_counts=True))))).all()
    assert (table["from_horizon"] == table["horizon"]).all() and (table["to_horizon"] == table["horizon"]).all()


def test_empirical_bounds_use_the_bound_of_the_horizon_and_the_furthest_beyond():
    horizons = np.repeat([1, 2], [40, 40])
    scores = np.concatenate([np.linspace(0, 1, 40), np.linspace(0, 2, 40)])
    table = intervals.horizon_bounds(horizons, scores)
    low, high = intervals.empirical_bounds(np.array([100.0, 100.0, 100.0]), np.array([1, 2, 7]),
                                           np.array([10.0, 10.0, 5.0]), table, 0.8)
    # 80% of 40: ⌈41 · 0.8⌉ = 33rd smallest, 32 steps of numpy.linspace's 1/39 (2/39 at horizon 2)
    first, second = 32 / 39, 2 * 32 / 39
    np.testing.assert_allclose(high - 100, [10 * first, 10 * second, 5 * second])
    np.testing.assert_allclose(100 - low, high - 100)


def test_no_empirical_interval_without_enough_errors_for_the_level():
    table = intervals.horizon_bounds(np.ones(10), np.arange(10.0))      # 10 errors: 80% yes, 95% no
    low, high = intervals.empirical_bounds(np.array([5.0]), np.array([1]), np.array([1.0]), table, 0.95)
    assert np.isnan(low).all() and np.isnan(high).all()
    low, high = intervals.empirical_bounds(np.array([5.0]), np.array([1]), np.array([1.0]), table, 0.8)
    assert (low[0], high[0]) == (5 - 8, 5 + 8)                           # ⌈11 · 0.8⌉ = 9th: 8


def test_the_interval_score_by_hand():
    # Winkler (1972); Gneiting & Raftery (2007), section 6.2: (u − l) + (2/α)(l − y)⁺ + (2/α)(y − u)⁺.
    # 80%: α = 0.2, 2/α = 10. [10, 20] with y = 15 → 10; y = 5 → 10 + 10·5 = 60; y = 26 → 70.
    scores = intervals.interval_score([15.0, 5.0, 26.0], [10.0] * 3, [20.0] * 3, 0.8)
    np.testing.assert_allclose(scores, [10.0, 60.0, 70.0])
    # 95%: 2/α = 40. [0, 4] with y = 5 → 4 + 40 = 44.
    assert intervals.interval_score([5.0], [0.0], [4.0], 0.95)[0] == pytest.approx(44.0)


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
    # Empirical, scale 1: origin k (k = 1..10) learns from the k − 1 earlier errors. 80% needs
    # 4, so origins 5..10 are scored. Their bounds: origin 5, |errors| 4, 3, 2, 1 → ⌈5·0.8⌉ = 4th
    # = 4; origins 6..9 also 4 (the 5th..8th of up to 8, the largest being 4); origin 10, nine
    # errors, ⌈10·0.8⌉ = 8th smallest of 1,1,2,2,3,3,3.5,4,4 = 4. Actuals 1, 2, 3, 4, 3.5, −3.7
    # are all within ±4: 6 of 6. 95% needs 19 errors: no origin is scored.
    assert table.loc[("ols", "empirical", 0.8), "coverage"] == 1.0
    assert table.loc[("ols", "empirical", 0.8), "n"] == 6
    assert table.loc[("ols", "empirical", 0.95), "n"] == 0
    assert np.isnan(table.loc[("ols", "empirical", 0.95), "coverage"])
    # Its interval score: width 8 at every scored origin, no miss → 8 (Winkler 1972).
    assert table.loc[("ols", "empirical", 0.8), "interval_score"] == pytest.approx(8.0)
    # The baseline has no standard errors: no analytic row, the same empirical counts.
    assert ("mean_baseline", "analytic", 0.8) not in table.index
    assert table.loc[("mean_baseline", "empirical", 0.8), "coverage"] == 1.0


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
        if mask.any():   # an origin with no earlier error learns nothing
            self.calls.append(self.predictions[mask])
        return mask


def _recorded(monkeypatch, predictions: pd.DataFrame) -> tuple[list[pd.DataFrame], list[str]]:
    """Return the rows used at each scored origin and the origins scored."""
    recorder = _Recorder(predictions)
    monkeypatch.setattr(intervals, "_earlier_rows", recorder)
    coverage(predictions)
    origins = sorted(predictions["origin"].unique())
    # An origin learns once the earlier origins have an error for a month already past.
    scored = [o for i, o in enumerate(origins)
              if ((predictions["origin"].isin(origins[:i])) & (predictions["period"] <= o)).any()]
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
