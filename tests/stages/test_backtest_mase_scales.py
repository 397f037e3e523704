"""sMAPE, WAPE, MASE and out-of-sample R², and the MASE scale per series.

Worked examples are computed by hand below, with the formulas from
R. J. Hyndman & A. B. Koehler (2006), "Another look at measures of forecast
accuracy", International Journal of Forecasting 22(4), 679-688:

- sMAPE = mean(200 |Y_t − F_t| / (Y_t + F_t))  (section 3.3); castline reports
  it as a fraction (no factor 100) and, like the M3/M4 competitions, puts
  |Y_t| + |F_t| in the denominator, which is the same for the positive data used here.
- MASE = mean(|q_t|), q_t = e_t / ((1/(n − m)) Σ_{i=m+1..n} |Y_i − Y_{i−m}|)
  (section 3.4, the seasonal form with period m = 12; the in-sample MAE of the
  seasonal naive forecast).
- WAPE = Σ|F_t − Y_t| / Σ|Y_t| (no paper needed: the definition).

Out-of-sample R² is checked against sklearn.metrics.r2_score, and mase_scales
against a direct pandas computation with shift(12) per series.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import r2_score

from pipeline.core import metrics
from pipeline.core.columns import PERIOD, SERIES
from pipeline.stages import backtest as backtest_module
from pipeline.stages.backtest import mase_scales

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


def worked_training_window() -> pd.DataFrame:
    """Series 'A': 14 months from 2020-01, so two seasonal differences: |110 − 90| = 20, |104 − 100| = 4.
    Series 'B': 4 months only, less than a season: one-month differences 3, 2, 4."""
    a = [90, 100, 95, 97, 99, 101, 103, 105, 102, 98, 96, 94, 110, 104]
    b = [10, 13, 11, 15]
    return pd.DataFrame({
        SERIES: ["A"] * len(a) + ["B"] * len(b),
        PERIOD: list(pd.period_range("2020-01", periods=len(a), freq="M"))
        + list(pd.period_range("2020-01", periods=len(b), freq="M")),
        "y": np.array(a + b, float),
    })


def test_mase_scale_and_mase_worked_example():
    scales = mase_scales(worked_training_window(), "y")
    # Hyndman & Koehler: (1/(n − m)) Σ |Y_i − Y_{i−m}| with n = 14, m = 12: (20 + 4) / 2 = 12.
    assert scales["A"] == pytest.approx(12.0, rel=1e-14)
    # Fewer than m + 1 months: castline falls back to m = 1 (the one-step naive): (3 + 2 + 4) / 3.
    assert scales["B"] == pytest.approx(3.0, rel=1e-14)
    # MASE = mean(|e_t| / 12) = (10 + 20 + 0 + 10) / 4 / 12.
    assert metrics.mase(ACTUAL, PREDICTED, scales["A"]) == pytest.approx(40 / 4 / 12, rel=1e-14)


def test_mase_leaves_out_rows_without_a_usable_scale():
    scale = [12.0, np.nan, 0.0, 12.0]
    assert metrics.mase(ACTUAL, PREDICTED, scale) == pytest.approx((10 / 12 + 10 / 12) / 2, rel=1e-14)
    assert np.isnan(metrics.mase(ACTUAL, PREDICTED, [np.nan] * 4))


def reference_scales(frame: pd.DataFrame, season: int = 12) -> dict[str, float]:
    """Per series: reindex to every month of its span, then mean |y − y.shift(m)| (m = 12, or 1 when
    the series spans fewer than 13 months). Reindexing makes shift(m) pair months by date."""
    out = {}
    for name, rows in frame.groupby(SERIES):
        values = rows.set_index(PERIOD)["y"].sort_index()
        full = values.reindex(pd.period_range(values.index.min(), values.index.max(), freq="M"))
        lag = season if len(full) > season else 1
        out[name] = float((full - full.shift(lag)).abs().mean())
    return out


def simulated_panel(seed: int, gaps: bool) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frames = []
    for k, length in enumerate([40, 25, 13, 12, 7]):
        months = pd.period_range("2018-01", periods=length, freq="M")
        season = 10 * np.sin(2 * np.pi * np.arange(length) / 12)
        frame = pd.DataFrame({SERIES: f"s{k}", PERIOD: months,
                              "y": 100 + season + rng.normal(scale=3, size=length)})
        if gaps and length > 12:
            frame = frame.drop(index=rng.choice(np.arange(1, length - 1), size=3, replace=False))
        frames.append(frame)
    panel = pd.concat(frames, ignore_index=True)
    return panel.sample(frac=1.0, random_state=seed).reset_index(drop=True)  # any row order


@pytest.mark.parametrize("gaps", [False, True], ids=["complete", "with_gaps"])
def test_mase_scales_equal_a_direct_pandas_computation(gaps):
    frame = simulated_panel(seed=3, gaps=gaps)
    got = mase_scales(frame, "y")
    expected = reference_scales(frame)
    assert set(got) == set(expected)
    for name in expected:
        assert got[name] == pytest.approx(expected[name], rel=1e-12), name


@pytest.mark.parametrize("how", ["by_key", "codes_given"])
def test_mase_scales_equal_pandas_by_key_lookup_and_with_series_codes_given(how, monkeypatch):
    # The grid of row positions is used up to DENSE_GRID_CELLS; beyond it, a key lookup.
    # Either way, and with the series factorised beforehand (names including a series
    # with no row, as a window of a larger design has), the same numbers as pandas.
    frame = simulated_panel(seed=5, gaps=True)
    codes_given = None
    if how == "by_key":
        monkeypatch.setattr(backtest_module, "DENSE_GRID_CELLS", 0)
    else:
        codes, names = pd.factorize(frame[SERIES].to_numpy(), sort=True)
        names = np.append(np.asarray(names, object), "absent series")
        codes_given = (codes, names)
    got = backtest_module.mase_scales(frame, "y", series_codes=codes_given)
    expected = reference_scales(frame)
    assert set(got) == set(expected)
    for name in expected:
        assert got[name] == pytest.approx(expected[name], rel=1e-12), name


def test_mase_scales_without_gaps_equal_groupby_shift_12():
    # The plainest form: rows sorted by month within each series, shift(12) by position.
    frame = simulated_panel(seed=4, gaps=False)
    long = frame[frame.groupby(SERIES)[PERIOD].transform("count") > 12].sort_values([SERIES, PERIOD])
    direct = (long["y"] - long.groupby(SERIES)["y"].shift(12)).abs().groupby(long[SERIES]).mean()
    got = mase_scales(frame, "y")
    for name, value in direct.items():
        assert got[name] == pytest.approx(value, rel=1e-12)


def test_r2_out_of_sample_equals_sklearn_r2_score():
    rng = np.random.default_rng(7)
    actual = rng.normal(50, 10, size=200)
    for predicted in (actual + rng.normal(0, 3, size=200), np.full(200, 55.0), actual[::-1].copy()):
        assert metrics.r2_out_of_sample(actual, predicted) == pytest.approx(
            r2_score(actual, predicted), rel=1e-12, abs=1e-12)


def test_r2_out_of_sample_is_nan_when_the_actuals_do_not_vary():
    assert np.isnan(metrics.r2_out_of_sample([3.0, 3.0, 3.0], [2.0, 3.0, 4.0]))
