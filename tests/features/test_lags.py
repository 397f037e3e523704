"""Lags of the target and drivers (pipeline.features.lags): lags, rolling means and
differences against pandas per series, and what is known at the origin.

Every reference value names its source beside it: a reference library
(statsmodels, pandas, numpy), or a hand example worked in the comment. The
data are simulated here (tests/features/test_plan.py's make_panel); they are not
reference values themselves.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from test_plan import fitted_plan, make_panel

from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.errors import DataError, SpecError
from pipeline.features.lags import with_predictions

# ------------------------------------------------------------------ lags against pandas

LAG_DRIVERS = {
    "numeric": ["price"],
    "lags": [{"column": "sales", "lags": [1, 3], "rolling_means": [2, 4], "differences": [1, 12]},
             {"column": "price", "lags": [2], "rolling_means": [3], "differences": [2],
              "start_lag": 2}],
}


@pytest.mark.parametrize("with_gap", [False, True])
def test_lags_rolling_means_and_differences_equal_pandas_per_series(with_gap):
    # Reference library: pandas' groupby shift, rolling(w).mean() and diff(d) on each series,
    # laid out on the complete monthly calendar (a missing month is a missing value).
    frame = make_panel(months=30)
    if with_gap:
        frame = frame[~((frame["region"] == "North") & (frame[PERIOD] == pd.Period("2021-02", "M")))]
    frame = frame.sample(frac=1.0, random_state=3)   # rows in no particular order
    plan = fitted_plan(LAG_DRIVERS, frame)
    table = plan.feature_table(frame)
    for _region, rows in frame.groupby(SERIES):
        calendar = pd.period_range(rows[PERIOD].min(), rows[PERIOD].max(), freq="M")
        full = rows.set_index(PERIOD).reindex(calendar)
        sales, price = full["sales"], full["price"]
        expected = pd.DataFrame({
            "sales, 1 month earlier": sales.shift(1),
            "sales, 3 months earlier": sales.shift(3),
            "sales, mean of the 2 months before": sales.shift(1).rolling(2).mean(),
            "sales, mean of the 4 months before": sales.shift(1).rolling(4).mean(),
            "sales, 1 month earlier minus 2 months earlier": sales.shift(1).diff(1),
            "sales, 1 month earlier minus 13 months earlier": sales.shift(1).diff(12),
            "price, 2 months earlier": price.shift(2),
            "price, mean of months 2 to 4 earlier": price.shift(2).rolling(3).mean(),
            "price, 2 months earlier minus 4 months earlier": price.shift(2).diff(2),
        }).loc[rows[PERIOD]]
        ours = table.loc[rows.index, list(expected.columns)]
        np.testing.assert_allclose(ours.to_numpy(), expected.to_numpy(), rtol=1e-12, equal_nan=True)


def test_training_rows_whose_lags_are_unavailable_are_left_out_and_reported():
    frame = make_panel(months=24)
    plan = fitted_plan({"lags": [{"column": "sales", "lags": [12]}]}, frame)
    design, y = plan.training_design(frame)
    assert len(y) == design.matrix.shape[0] == 3 * 12      # the first 12 months of each series
    assert not np.isnan(design.matrix).any()
    assert any("36 of the 72 rows" in note and "left out of every model's fit" in note
               for note in design.notes)
    with pytest.raises(DataError, match="is not available"):
        plan.transform(frame)                              # rows to predict must have their lags


# ------------------------------------------------------------------ the origin

def test_a_target_lag_shorter_than_the_horizon_stops_with_the_key():
    frame = make_panel(months=30)
    origin = pd.Period("2021-12", "M")
    train, test = frame[frame[PERIOD] <= origin], frame[frame[PERIOD] > origin]
    plan = fitted_plan({"lags": [{"column": "sales", "lags": [12, 3]}]}, train)
    with pytest.raises(SpecError) as stopped:
        plan.transform(test)                               # 6 months ahead, lag 3
    assert stopped.value.key == "drivers.lags[0].lags[1]"
    assert "'sales, 3 months earlier' reaches past the forecast origin (2021-12)" in str(stopped.value)
    assert "at least 6 months" in str(stopped.value)
    assert "multi_step: recursive" in str(stopped.value)    # the way out, named
    plan.transform(test[test[PERIOD] <= origin + 3])       # 3 months ahead: lag 3 is known


def test_rolling_means_of_the_target_reach_from_start_lag():
    frame = make_panel(months=30)
    train = frame[frame[PERIOD] <= pd.Period("2021-12", "M")]
    plan = fitted_plan({"lags": [{"column": "sales", "rolling_means": [3]}]}, train)
    with pytest.raises(SpecError) as stopped:
        plan.transform(frame[frame[PERIOD] == pd.Period("2022-02", "M")])
    assert stopped.value.key == "drivers.lags[0].start_lag"


def test_recursive_step_reads_fed_back_predictions_as_the_targets_lags():
    frame = make_panel(months=30)
    origin = pd.Period("2021-12", "M")
    train = frame[frame[PERIOD] <= origin]
    first, second = (frame[frame[PERIOD] == origin + h] for h in (1, 2))
    plan = fitted_plan({"lags": [{"column": "sales", "lags": [1]}]}, train)
    one = plan.transform(first).matrix[:, 0]
    np.testing.assert_allclose(one, train[train[PERIOD] == origin]["sales"].to_numpy())
    with pytest.raises(SpecError):
        plan.transform(second)                             # month 2 needs month 1's target
    guesses = np.array([101.0, 202.0, 303.0])
    known = with_predictions(None, first, guesses, "sales")
    np.testing.assert_allclose(plan.transform(second, known=known).matrix[:, 0], guesses)
    # The actuals of the rows being transformed are never read, even when they are there.
    both = plan.transform(pd.concat([first, second]), known=known).matrix[:, 0]
    np.testing.assert_allclose(both[len(first):], guesses)
