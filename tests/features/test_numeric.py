"""Numeric drivers (pipeline.features.numeric): fill, clip, log and standardise by hand.

Every reference value names its source beside it: a reference library
(statsmodels, pandas, numpy), or a hand example worked in the comment. The
data are simulated here (tests/features/test_plan.py's make_panel); they are not
reference values themselves.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from test_plan import fitted_plan, make_panel

from pipeline.core.columns import ROW
from pipeline.core.errors import DataError
from pipeline.features.numeric import NumericTerms

# ------------------------------------------------------------------ numeric drivers

def test_numeric_preparation_fill_clip_log_and_standardise_by_hand():
    train = pd.DataFrame({"x": [1.0, 2.0, np.nan, 4.0, 100.0]})
    terms = NumericTerms("x", degree=2, transform="log", clip_quantiles=[0.0, 0.75],
                         missing="median", standardise=True).fit(train)
    # By hand: median of 1, 2, 4, 100 = 3; the 0.75 quantile (numpy's linear rule) = 4 + 0.25·96 = 28;
    # filled and clipped: 1, 2, 3, 4, 28; then log, centred on its mean and scaled by its SD.
    assert terms.fill_value_ == 3.0
    assert terms.clip_bounds_ == (1.0, 28.0)
    logged = np.log([1.0, 2.0, 3.0, 4.0, 28.0])
    z = (logged - logged.mean()) / logged.std()
    np.testing.assert_allclose(terms.transform(train), np.column_stack([z, z ** 2, [0, 0, 1, 0, 0]]))
    assert terms.get_feature_names_out() == ["standardised log(x)", "(standardised log(x))^2",
                                             "x was missing"]
    later = pd.DataFrame({"x": [np.nan]})
    assert terms.notes(later) == ["x: 1 of the 1 rows had no value and were filled with the median "
                                  "of the training window (3), marked by 'x was missing'"]


def test_a_non_positive_driver_under_log_names_its_row():
    frame = make_panel(months=6)
    frame.loc[frame.index[4], "price"] = 0.0
    with pytest.raises(DataError) as stopped:
        fitted_plan({"numeric": [{"column": "price", "transform": "log"}]}, frame)
    assert stopped.value.column == "price" and stopped.value.row == int(frame[ROW].iloc[4])
    assert stopped.value.file == "data.csv"
    log1p = fitted_plan({"numeric": [{"column": "price", "transform": "log1p"}]}, frame)
    assert log1p.get_feature_names_out() == ["log(1 + price)"]


def test_a_drivers_powers_are_its_prepared_values_powers_rounded_once():
    # The reference is the exact power of each prepared double (fractions.Fraction) rounded
    # once to the nearest double (CPython's correctly rounded int division); the first column
    # is the prepared values themselves, bit for bit.
    rng = np.random.default_rng(11)
    train = pd.DataFrame({"x": rng.normal(50.0, 7.0, 400)})
    terms = NumericTerms("x", degree=10, standardise=True).fit(train)
    prepared = terms.prepared(train)
    matrix = terms.transform(train)
    assert matrix.shape == (400, 10)
    assert np.array_equal(matrix[:, 0], prepared)
    truth = np.array([[float(Fraction(float(v)) ** k) for k in range(1, 11)] for v in prepared])
    assert np.array_equal(matrix, truth)
    assert not np.array_equal(prepared[:, None] ** np.arange(1, 11), truth)   # pow is not always
