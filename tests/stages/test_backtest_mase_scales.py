"""The MASE scale per series (pipeline.stages.backtest.mase_scales), and MASE with it.

The scale is that of R. J. Hyndman & A. B. Koehler (2006), "Another look at measures
of forecast accuracy", International Journal of Forecasting 22(4), 679-688, section 3.4:
MASE = mean(|q_t|), q_t = e_t / ((1/(n − m)) Σ_{i=m+1..n} |Y_i − Y_{i−m}|), the seasonal
form with period m = 12 (the in-sample MAE of the seasonal naive forecast). A worked
example is computed by hand below; mase_scales is checked against a direct pandas
computation with shift(12) per series.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.core import metrics
from pipeline.core.columns import PERIOD, SERIES
from pipeline.stages import backtest as backtest_module
from pipeline.stages.backtest import mase_scales

ACTUAL = [100.0, 120.0, 80.0, 50.0]
PREDICTED = [110.0, 100.0, 80.0, 60.0]
# |e| = 10, 20, 0, 10;  Y + F = 210, 220, 160, 110


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
