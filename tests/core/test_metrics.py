"""Accuracy measures in pipeline.core.metrics against scikit-learn (reference library),
direct numpy computations written here, and hand-worked examples.

sMAPE, WAPE and MASE are worked by hand with the formulas from R. J. Hyndman &
A. B. Koehler (2006), "Another look at measures of forecast accuracy",
International Journal of Forecasting 22(4), 679-688:

- sMAPE = mean(200 |Y_t − F_t| / (Y_t + F_t))  (section 3.3); castline reports
  it as a fraction (no factor 100) and, like the M3/M4 competitions, puts
  |Y_t| + |F_t| in the denominator, which is the same for the positive data used here.
- MASE = mean(|q_t|), q_t = e_t / scale, the scale being the in-sample MAE of the
  seasonal naive forecast (section 3.4; the scale per series is tested with
  pipeline.stages.backtest.mase_scales in tests/stages/test_backtest_mase_scales.py).
- WAPE = Σ|F_t − Y_t| / Σ|Y_t| (no paper needed: the definition).

Out-of-sample R² is checked against sklearn.metrics.r2_score.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from sklearn.metrics import mean_absolute_error, mean_absolute_percentage_error, r2_score

from pipeline.core import metrics
from pipeline.core.metrics import bias, mae, mape, rmse, skill

try:  # scikit-learn >= 1.4
    from sklearn.metrics import root_mean_squared_error
except ImportError:  # pragma: no cover - older scikit-learn
    from sklearn.metrics import mean_squared_error

    def root_mean_squared_error(actual, predicted):
        return math.sqrt(mean_squared_error(actual, predicted))


SEEDS = [0, 1, 2, 3]


def _pair(seed: int, n: int = 200):
    rng = np.random.default_rng(seed)
    actual = rng.normal(loc=50, scale=20, size=n)
    predicted = actual + rng.normal(loc=1.0, scale=5, size=n)
    return actual, predicted


def _mape_direct(actual, predicted):
    """Direct numpy computation for this test: leave out and count rows whose actual is 0."""
    actual = np.asarray(actual, float)
    predicted = np.asarray(predicted, float)
    keep = actual != 0
    if not keep.any():
        return math.nan, int((~keep).sum())
    return float(np.mean(np.abs(predicted[keep] - actual[keep]) / np.abs(actual[keep]))), int((~keep).sum())


# ---- fixed seeds against scikit-learn (reference library) -----------------------------------

@pytest.mark.parametrize("seed", SEEDS)
def test_mae_rmse_match_sklearn(seed):
    actual, predicted = _pair(seed)
    assert mae(actual, predicted) == pytest.approx(mean_absolute_error(actual, predicted), rel=1e-12)
    assert rmse(actual, predicted) == pytest.approx(root_mean_squared_error(actual, predicted), rel=1e-12)


@pytest.mark.parametrize("seed", SEEDS)
def test_mape_matches_sklearn_without_zero_actuals(seed):
    actual, predicted = _pair(seed)
    assert (actual != 0).all()
    value, skipped = mape(actual, predicted)
    assert skipped == 0
    # scikit-learn returns a fraction too (not a percentage).
    assert value == pytest.approx(mean_absolute_percentage_error(actual, predicted), rel=1e-12)


@pytest.mark.parametrize("seed", SEEDS)
def test_mape_leaves_out_and_counts_zero_actuals(seed):
    actual, predicted = _pair(seed)
    rng = np.random.default_rng(100 + seed)
    zeros = rng.choice(len(actual), size=17, replace=False)
    actual[zeros] = 0.0
    value, skipped = mape(actual, predicted)
    expected, expected_skipped = _mape_direct(actual, predicted)  # direct numpy, above
    assert skipped == expected_skipped == 17
    assert value == pytest.approx(expected, rel=1e-12)
    # Same as scikit-learn on the rows that are left.
    keep = actual != 0
    assert value == pytest.approx(mean_absolute_percentage_error(actual[keep], predicted[keep]), rel=1e-12)


def test_mape_hand_example_with_a_zero():
    # Hand-worked: rows (10 → 12) 20 %, (0 → 3) left out, (-4 → -5) 25 %: mean 22.5 %.
    value, skipped = mape([10.0, 0.0, -4.0], [12.0, 3.0, -5.0])
    assert skipped == 1
    assert value == pytest.approx(0.225, rel=1e-15)


def test_mape_all_zero_actuals_is_nan():
    value, skipped = mape([0.0, 0.0, 0.0], [1.0, -2.0, 0.0])
    assert math.isnan(value)
    assert skipped == 3


# ---- hand examples ---------------------------------------------------------------------------

def test_bias_sign_convention_hand_example():
    # Errors are prediction − actual: (12−10) + (9−10) + (13−10) = 4 over 3 rows.
    assert bias([10.0, 10.0, 10.0], [12.0, 9.0, 13.0]) == pytest.approx(4 / 3, rel=1e-15)
    assert bias([10.0, 10.0], [11.0, 12.0]) > 0   # forecast ran high: positive
    assert bias([10.0, 10.0], [8.0, 9.0]) < 0     # forecast ran low: negative


def test_mae_rmse_hand_example():
    actual, predicted = [1.0, 2.0, 3.0, 4.0], [2.0, 2.0, 1.0, 8.0]  # errors 1, 0, −2, 4
    assert mae(actual, predicted) == pytest.approx(7 / 4, rel=1e-15)
    assert rmse(actual, predicted) == pytest.approx(math.sqrt(21 / 4), rel=1e-15)


def test_skill_hand_example():
    # 1 − MAE_model / MAE_base: model MAE 3 against baseline MAE 4 → 0.25.
    assert skill(3.0, 4.0) == pytest.approx(0.25, rel=1e-15)
    assert skill(6.0, 4.0) == pytest.approx(-0.5, rel=1e-15)  # worse than the baseline: negative
    assert skill(0.0, 4.0) == 1.0                               # perfect model


def test_skill_from_maes_hand_example():
    actual = [10.0, 20.0, 30.0, 40.0]
    model = [11.0, 19.0, 32.0, 40.0]      # MAE = (1 + 1 + 2 + 0) / 4 = 1
    baseline = [25.0, 25.0, 25.0, 25.0]   # MAE = (15 + 5 + 5 + 15) / 4 = 10
    assert skill(mae(actual, model), mae(actual, baseline)) == pytest.approx(0.9, rel=1e-15)


@pytest.mark.parametrize("seed", SEEDS)
def test_skill_of_baseline_against_itself_is_zero(seed):
    actual, predicted = _pair(seed)
    base = mae(actual, predicted)
    assert skill(base, base) == 0.0


def test_skill_against_a_perfect_baseline_is_nan():
    assert math.isnan(skill(1.0, 0.0))


# ---- input checks ----------------------------------------------------------------------------

@pytest.mark.parametrize("metric", [mae, rmse, mape, bias])
def test_shape_mismatch_raises(metric):
    with pytest.raises(ValueError, match="shape"):
        metric([1.0, 2.0, 3.0], [1.0, 2.0])
    with pytest.raises(ValueError, match="shape"):
        metric(np.ones((2, 3)), np.ones(6))


@pytest.mark.parametrize("metric", [mae, rmse, mape, bias])
def test_empty_arrays_raise(metric):
    with pytest.raises(ValueError):
        metric([], [])
    with pytest.raises(ValueError):
        metric(np.empty(0), np.empty(0))


# ---- property tests (hypothesis) -------------------------------------------------------------

finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)
nonzero = finite.filter(lambda v: abs(v) >= 1e-3)


@st.composite
def pairs(draw, elements=finite, actual_elements=None):
    n = draw(st.integers(min_value=1, max_value=50))
    actual = draw(arrays(np.float64, n, elements=elements if actual_elements is None else actual_elements))
    predicted = draw(arrays(np.float64, n, elements=elements))
    return actual, predicted


PROPERTY = settings(max_examples=100, deadline=None, database=None)


@PROPERTY
@given(pairs())
def test_property_mae_rmse_bias_match_references(pair):
    actual, predicted = pair
    # References: scikit-learn for MAE and RMSE; numpy directly for the mean error.
    assert mae(actual, predicted) == pytest.approx(mean_absolute_error(actual, predicted), rel=1e-9, abs=1e-9)
    assert rmse(actual, predicted) == pytest.approx(root_mean_squared_error(actual, predicted),
                                                    rel=1e-9, abs=1e-9)
    assert bias(actual, predicted) == pytest.approx(float(np.mean(predicted - actual)), rel=1e-9, abs=1e-9)
    assert 0 <= mae(actual, predicted) <= rmse(actual, predicted) * (1 + 1e-12) + 1e-12
    assert abs(bias(actual, predicted)) <= mae(actual, predicted) * (1 + 1e-12) + 1e-12


@PROPERTY
@given(pairs(actual_elements=nonzero))
def test_property_mape_matches_sklearn_without_zeros(pair):
    actual, predicted = pair
    value, skipped = mape(actual, predicted)
    assert skipped == 0
    assert value == pytest.approx(mean_absolute_percentage_error(actual, predicted), rel=1e-9, abs=1e-12)


@PROPERTY
@given(pairs(actual_elements=st.one_of(st.just(0.0), nonzero)))
def test_property_mape_with_zeros_matches_direct_numpy(pair):
    actual, predicted = pair
    value, skipped = mape(actual, predicted)
    expected, expected_skipped = _mape_direct(actual, predicted)
    assert skipped == expected_skipped
    if math.isnan(expected):
        assert math.isnan(value)
    else:
        assert value == pytest.approx(expected, rel=1e-12, abs=1e-15)


@PROPERTY
@given(pairs())
def test_property_skill_of_baseline_against_itself(pair):
    actual, predicted = pair
    base = mae(actual, predicted)
    if base == 0:
        assert math.isnan(skill(base, base))
    else:
        assert skill(base, base) == 0.0


# ---- sMAPE, WAPE, MASE and out-of-sample R² (worked examples) ----------------------------------

ACTUAL = [100.0, 120.0, 80.0, 50.0]
PREDICTED = [110.0, 100.0, 80.0, 60.0]
# |e| = 10, 20, 0, 10;  Y + F = 210, 220, 160, 110


def test_smape_worked_example():
    by_hand = (2 * 10 / 210 + 2 * 20 / 220 + 2 * 0 / 160 + 2 * 10 / 110) / 4   # = 0.114719...
    value, left_out = metrics.smape(ACTUAL, PREDICTED)
    assert value == pytest.approx(by_hand, rel=1e-14)
    assert value == pytest.approx(0.11471861471861472, rel=1e-14)
    assert left_out == 0


def test_smape_leaves_out_rows_where_actual_and_prediction_are_both_zero():
    value, left_out = metrics.smape([0.0, 100.0], [0.0, 110.0])
    assert left_out == 1
    assert value == pytest.approx(2 * 10 / 210, rel=1e-14)


def test_smape_uses_absolute_values_in_the_denominator():
    # Y = −100, F = −110: 2·10 / (100 + 110); the signed form would give a negative sMAPE.
    value, _ = metrics.smape([-100.0], [-110.0])
    assert value == pytest.approx(2 * 10 / 210, rel=1e-14)


def test_wape_worked_example():
    assert metrics.wape(ACTUAL, PREDICTED) == pytest.approx((10 + 20 + 0 + 10) / (100 + 120 + 80 + 50),
                                                           rel=1e-14)


def test_mase_leaves_out_rows_without_a_usable_scale():
    scale = [12.0, np.nan, 0.0, 12.0]
    assert metrics.mase(ACTUAL, PREDICTED, scale) == pytest.approx((10 / 12 + 10 / 12) / 2, rel=1e-14)
    assert np.isnan(metrics.mase(ACTUAL, PREDICTED, [np.nan] * 4))


def test_r2_out_of_sample_equals_sklearn_r2_score():
    rng = np.random.default_rng(7)
    actual = rng.normal(50, 10, size=200)
    for predicted in (actual + rng.normal(0, 3, size=200), np.full(200, 55.0), actual[::-1].copy()):
        assert metrics.r2_out_of_sample(actual, predicted) == pytest.approx(
            r2_score(actual, predicted), rel=1e-12, abs=1e-12)


def test_r2_out_of_sample_is_nan_when_the_actuals_do_not_vary():
    assert np.isnan(metrics.r2_out_of_sample([3.0, 3.0, 3.0], [2.0, 3.0, 4.0]))
