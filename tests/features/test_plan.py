"""Features: encodings, numeric preparation, calendar, lags and the target transform.

Every reference value names its source beside it: a reference library
(statsmodels, pandas, numpy), a published method (Duan 1983), or a hand
example worked in the comment. The data are simulated here; they are not
reference values themselves.
"""

from __future__ import annotations

from datetime import date

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from conftest import DEMO_DATA, DEMO_SPEC
from hypothesis import given, settings
from hypothesis import strategies as st

from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.design import Design
from pipeline.core.errors import DataError, SpecError
from pipeline.features.calendar import FourierTerms, working_days_in_month
from pipeline.features.categorical import OneHotEncoder, OrdinalEncoder, TargetMeanEncoder
from pipeline.features.lags import with_predictions
from pipeline.features.numeric import NumericTerms
from pipeline.features.plan import plan_features
from pipeline.features.target import TargetTransform
from pipeline.models import MeanBaseline, make_model
from pipeline.models.ols import OLSModel
from pipeline.models.transformed import TransformedTargetModel
from pipeline.spec import Spec
from pipeline.stages.backtest import run_backtest
from pipeline.stages.check import CheckedData

REGIONS = ("East", "North", "West")


def make_panel(months: int = 30, regions=REGIONS, seed: int = 0, start: str = "2020-01") -> pd.DataFrame:
    """Return rows shaped as the check stage hands them on: one per region and month."""
    rng = np.random.default_rng(seed)
    rows = []
    for number, region in enumerate(regions):
        for index, period in enumerate(pd.period_range(start, periods=months, freq="M")):
            price = 5 + rng.normal(0, 0.5)
            temp = max(0.5, 10 + 6 * np.sin(2 * np.pi * period.month / 12) + rng.normal(0, 1))
            rows.append({
                "month": period.to_timestamp(), "region": region,
                "store": rng.choice(["a", "b", "c", "d"], p=[0.4, 0.3, 0.2, 0.1]),
                "price": price, "temp": temp,
                "sales": float(np.exp(4 + 0.1 * number + 0.01 * index - 0.1 * price
                                      + 0.02 * temp + rng.normal(0, 0.1))),
            })
    frame = pd.DataFrame(rows)
    frame[PERIOD] = frame["month"].dt.to_period("M")
    frame[SERIES] = frame["region"]
    frame[ROW] = np.arange(len(frame)) + 2
    return frame


def make_spec(drivers: dict | None = None, **top) -> Spec:
    """Return a spec built in memory (no file: cross-key rules are tested in tests/spec/)."""
    drivers = dict(drivers or {})
    # These tests are about the drivers' own terms: no series levels unless a test asks.
    drivers.setdefault("series_effects", {"intercepts": False})
    data = {"name": "features-test", "target": "sales",
            "input": {"file": "data.csv", "date_column": "month", "series": ["region"]},
            "drivers": drivers, "validation": {"method": "holdout", "last_periods": 6},
            "output": {"folder": "out"}, **top}
    return Spec.model_validate(data)


def fitted_plan(drivers: dict, frame: pd.DataFrame, **top):
    return plan_features(make_spec(drivers, **top), SERIES).fit(frame)


# ------------------------------------------------------------------ one-hot against statsmodels

def test_one_hot_coefficients_equal_statsmodels_treatment_coding():
    # Reference library: statsmodels' formula interface, C(region, Treatment('North')).
    frame = make_panel(months=24)
    frame["y"] = frame["sales"]
    plan = plan_features(make_spec({"numeric": ["price"],
                                    "categorical": [{"column": "region", "reference": "North"}]}),
                         SERIES).fit(frame)
    design, y = plan.training_design(frame)
    ours = OLSModel().fit(design, y).coefficient_table().set_index("term")
    reference = smf.ols("y ~ C(region, Treatment('North')) + price", data=frame).fit()
    names = {"Intercept": "intercept", "price": "price",
             "C(region, Treatment('North'))[T.East]": "region: East",
             "C(region, Treatment('North'))[T.West]": "region: West"}
    assert sorted(ours.index) == sorted(names.values())
    for theirs, term in names.items():
        assert ours.loc[term, "estimate"] == pytest.approx(reference.params[theirs], rel=1e-9)
        assert ours.loc[term, "std_error"] == pytest.approx(reference.bse[theirs], rel=1e-8)


def test_one_hot_reference_defaults_to_the_most_frequent_level():
    frame = pd.DataFrame({"c": ["b", "a", "b", "c", "a", "b"]})
    encoder = OneHotEncoder("c").fit(frame)
    assert encoder.reference_ == "b"                       # 3 rows, more than a or c
    assert encoder.get_feature_names_out() == ["c: a", "c: c"]
    tie = OneHotEncoder("c").fit(pd.DataFrame({"c": ["y", "x", "y", "x"]}))
    assert tie.reference_ == "x"                           # a tie goes to the first alphabetically


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


# ------------------------------------------------------------------ leakage

LEAKAGE_DRIVERS = {
    "numeric": [{"column": "price", "clip_quantiles": [0.05, 0.95], "standardise": True, "degree": 2},
                {"column": "temp", "missing": "median", "transform": "log1p"}],
    "categorical": [{"column": "store", "encoding": "target_mean", "smoothing": 3, "group_below": 4,
                     "unseen": "use_reference"},
                    {"column": "region", "unseen": "use_reference"}],
    "interactions": [["price", "region"]],
    "calendar": {"trend": True, "month_of_year": "fourier", "harmonics": 2, "working_days": True},
    "lags": [{"column": "sales", "lags": [6, 7], "rolling_means": [3], "differences": [1],
              "start_lag": 6},
             {"column": "price", "lags": [1, 2], "rolling_means": [2]}],
}
LEAKAGE_SPEC = make_spec(LEAKAGE_DRIVERS, target_transform="log")
LEAKAGE_PANEL = make_panel(months=30, seed=11)
LEAKAGE_PANEL.loc[LEAKAGE_PANEL.index[::7], "temp"] = np.nan   # some months lack a temperature
HORIZON = 6


def _outputs_at(frame: pd.DataFrame, origin: pd.Period):
    """Return what the origin's backtest is made of: training design, coefficients,
    the predicted rows' features and the predictions."""
    train = frame[frame[PERIOD] <= origin]
    test = frame[(frame[PERIOD] > origin) & (frame[PERIOD] <= origin + HORIZON)]
    plan = plan_features(LEAKAGE_SPEC, SERIES).fit(train)
    design, y = plan.training_design(train)
    model = make_model("ols", target=plan.target_scale).fit(design, y)
    table = plan.feature_table(test)
    return design.matrix, model.model.coef_, table, model.predict(plan.transform(test)), test


@settings(max_examples=40, deadline=None, database=None)
@given(origin_month=st.integers(min_value=14, max_value=22), after=st.integers(min_value=1, max_value=8),
       regions=st.sets(st.sampled_from(REGIONS), min_size=1),
       column=st.sampled_from(["sales", "price", "temp", "store"]),
       scale=st.floats(min_value=0.05, max_value=40.0), level=st.sampled_from(["a", "d", "new"]))
def test_changing_any_value_after_the_origin_changes_nothing_known_at_the_origin(
        origin_month, after, regions, column, scale, level):
    periods = pd.period_range("2020-01", periods=30, freq="M")
    origin = periods[origin_month]
    changed_from = origin + after
    before = _outputs_at(LEAKAGE_PANEL, origin)
    frame = LEAKAGE_PANEL.copy()
    # Every value of the column from that month on, in the chosen series, is changed.
    where = (frame[PERIOD] >= changed_from) & frame["region"].isin(regions)
    frame.loc[where, column] = level if column == "store" else frame.loc[where, column] * scale
    now = _outputs_at(frame, origin)

    np.testing.assert_array_equal(now[0], before[0])       # training design
    np.testing.assert_array_equal(now[1], before[1])       # coefficients
    test = before[4]
    # Changed targets after the origin change no prediction; changed drivers, only
    # the rows of their own months (whose inputs they are).
    unaffected = (np.ones(len(test), bool) if column == "sales"
                  else (test[PERIOD] < changed_from).to_numpy())
    np.testing.assert_array_equal(now[2].to_numpy()[unaffected], before[2].to_numpy()[unaffected])
    np.testing.assert_array_equal(now[3][unaffected], before[3][unaffected])


def test_backtest_predictions_do_not_move_when_the_held_out_actuals_change():
    spec = make_spec(LEAKAGE_DRIVERS, target_transform="log", models=["ols"])
    history = LEAKAGE_PANEL.copy()
    before = run_backtest(spec, CheckedData(history=history, future=history.iloc[:0], raw=None))
    held_out = history[PERIOD] > history[PERIOD].max() - HORIZON
    history.loc[held_out, "sales"] *= np.random.default_rng(5).uniform(0.2, 5.0, held_out.sum())
    after = run_backtest(spec, CheckedData(history=history, future=history.iloc[:0], raw=None))
    np.testing.assert_array_equal(after.predictions["prediction"], before.predictions["prediction"])
    assert not np.array_equal(after.predictions["actual"], before.predictions["actual"])


def test_everything_learned_comes_from_the_training_window():
    frame = make_panel(months=30)
    window = frame[frame[PERIOD] <= pd.Period("2021-06", "M")]
    drivers = {"numeric": [{"column": "price", "missing": "mean", "clip_quantiles": [0.1, 0.9],
                            "standardise": True}],
               "categorical": [{"column": "store", "encoding": "target_mean"}],
               "calendar": {"trend": True}}
    plan = fitted_plan(drivers, window)
    price, store, trend = plan.parts_
    # Reference library: numpy's mean, quantile and standard deviation of the window only.
    assert price.fill_value_ == pytest.approx(window["price"].mean())
    assert price.clip_bounds_ == pytest.approx(tuple(np.quantile(window["price"], [0.1, 0.9])))
    clipped = np.clip(window["price"], *price.clip_bounds_)
    assert price.centre_ == pytest.approx(clipped.mean())
    assert price.scale_ == pytest.approx(clipped.std(ddof=0))
    assert store.overall_mean_ == pytest.approx(window["sales"].mean())
    assert str(trend.first_month_) == "2020-01"
    # Applied to later rows alone, each step uses what the window taught it, not the rows.
    later = frame[frame[PERIOD] == pd.Period("2022-03", "M")]
    table = plan.feature_table(later)
    assert (table["months since 2020-01"] == 26).all()
    expected_price = (np.clip(later["price"], *price.clip_bounds_) - price.centre_) / price.scale_
    np.testing.assert_allclose(table["standardised price"], expected_price)


# ------------------------------------------------------------------ calendar

def test_working_days_equal_numpy_busday_count_for_every_month_2000_to_2030():
    # Reference library: numpy.busday_count (Monday to Friday, less the holidays given).
    months = pd.period_range("2000-01", "2030-12", freq="M")
    starts = months.start_time.values.astype("datetime64[D]")
    ends = (months + 1).start_time.values.astype("datetime64[D]")
    np.testing.assert_array_equal(working_days_in_month(months.asi8), np.busday_count(starts, ends))
    closures = [date(2000, 1, 3), date(2012, 2, 29), date(2024, 12, 25), date(2024, 12, 25),
                date(2024, 12, 28), date(2030, 12, 31)]       # a repeat and a Saturday among them
    np.testing.assert_array_equal(working_days_in_month(months.asi8, closures),
                                  np.busday_count(starts, ends, holidays=closures))


def test_working_days_through_the_spec_with_closures():
    frame = make_panel(months=24)
    plan = fitted_plan({"calendar": {"working_days": True,
                                     "closures": ["2021-12-24", "2021-12-27", "2021-12-31"]}}, frame)
    table = plan.feature_table(frame)
    december = frame[PERIOD] == pd.Period("2021-12", "M")
    # Reference library: numpy.busday_count for December 2021 with the same closures.
    expected = np.busday_count("2021-12-01", "2022-01-01",
                               holidays=["2021-12-24", "2021-12-27", "2021-12-31"])
    assert (table.loc[december, "working days in the month"] == expected).all()


@pytest.mark.parametrize("harmonics", [1, 3, 6])
def test_fourier_terms_equal_sine_and_cosine_of_the_month(harmonics):
    frame = make_panel(months=24, regions=("East",))
    terms = FourierTerms(harmonics).fit(frame)
    month = frame[PERIOD].dt.month.to_numpy(float)
    # Reference: sin(2πk·month/12) and cos(2πk·month/12) computed directly with numpy.
    expected = []
    for k in range(1, harmonics + 1):
        if k < 6:                        # sin(2π·6·month/12) = sin(π·month) = 0 in every month
            expected.append(np.sin(2 * np.pi * k * month / 12))
        expected.append(np.cos(2 * np.pi * k * month / 12))
    np.testing.assert_allclose(terms.transform(frame), np.column_stack(expected), atol=1e-15)
    assert terms.get_feature_names_out()[:2] == ["sin(2π·month/12)", "cos(2π·month/12)"]
    assert len(terms.get_feature_names_out()) == 2 * harmonics - (harmonics == 6)


def test_month_dummies_trend_and_quarters():
    frame = make_panel(months=14, regions=("East",), start="2020-03")
    plan = fitted_plan({"calendar": {"trend": True, "month_of_year": "dummies"}}, frame)
    table = plan.feature_table(frame)
    assert table.columns[0] == "months since 2020-03"
    assert table.iloc[:, 0].tolist() == list(range(14))
    assert table.columns[1:].tolist() == [f"month: {m}" for m in (
        "February", "March", "April", "May", "June", "July", "August", "September", "October",
        "November", "December")]                           # January is the reference
    march = frame[PERIOD].dt.month.to_numpy() == 3
    assert (table.loc[march, "month: March"] == 1).all() and table["month: March"].sum() == 2
    quarters = fitted_plan({"calendar": {"quarter": True}}, frame).feature_table(frame)
    assert quarters.columns.tolist() == ["quarter: Q2", "quarter: Q3", "quarter: Q4"]


def test_a_month_the_training_window_lacks_has_no_dummy_and_stops():
    frame = make_panel(months=14, regions=("East",))
    plan = fitted_plan({"calendar": {"month_of_year": "dummies"}}, frame.iloc[:6])
    with pytest.raises(DataError, match="month July does not occur in the training window"):
        plan.transform(frame.iloc[6:8])


# ------------------------------------------------------------------ encoders by hand

def test_ordinal_encoding_hand_example():
    frame = pd.DataFrame({"size": ["medium", "small", "large", "medium"]})
    encoder = OrdinalEncoder("size", ["small", "medium", "large"]).fit(frame)
    # By hand: the place in the order, lowest = 0.
    assert encoder.transform(frame)[:, 0].tolist() == [1.0, 0.0, 2.0, 1.0]
    assert encoder.get_feature_names_out() == ["size: rank (small = 0, medium = 1, large = 2)"]
    with pytest.raises(DataError, match="'huge' is not in the order"):
        OrdinalEncoder("size", ["small", "medium", "large"]).fit(pd.DataFrame({"size": ["huge"]}))


def test_target_mean_encoding_hand_example():
    # The smoothed mean of a level is (n·mean_level + m·mean_all) / (n + m).
    # By hand, with m = 2: mean_all = (1 + 2 + 3 + 10) / 4 = 4;
    # level A: n = 3, mean 2 → (3·2 + 2·4) / 5 = 2.8; level B: n = 1, mean 10 → (10 + 8) / 3 = 6.
    frame = pd.DataFrame({"c": ["A", "A", "A", "B"]})
    encoder = TargetMeanEncoder("c", smoothing=2, target_name="sales").fit(frame, [1, 2, 3, 10])
    assert encoder.means_ == pytest.approx({"A": 2.8, "B": 6.0})
    assert encoder.transform(pd.DataFrame({"c": ["B", "A"]}))[:, 0] == pytest.approx([6.0, 2.8])
    assert encoder.get_feature_names_out() == ["c: smoothed mean of sales"]
    unsmoothed = TargetMeanEncoder("c", smoothing=0).fit(frame, [1, 2, 3, 10])
    assert unsmoothed.means_ == pytest.approx({"A": 2.0, "B": 10.0})


def test_target_mean_is_taken_on_the_models_scale():
    frame = make_panel(months=12)
    plan = fitted_plan({"categorical": [{"column": "region", "encoding": "target_mean",
                                         "smoothing": 0}]}, frame, target_transform="log")
    encoder = plan.parts_[0]
    assert encoder.means_["East"] == pytest.approx(np.log(frame.loc[frame.region == "East", "sales"]).mean())
    assert encoder.get_feature_names_out() == ["region: smoothed mean of log(sales)"]


def test_rare_levels_are_grouped_below_the_count():
    frame = pd.DataFrame({"store": ["A"] * 5 + ["B"] * 5 + ["C"] + ["D"] * 2})
    encoder = OneHotEncoder("store", group_below=3).fit(frame)
    assert encoder.grouped_ == ["C", "D"]
    assert encoder.reference_ == "A"
    assert encoder.get_feature_names_out() == ["store: B", "store: other (levels with fewer than 3 rows)"]
    assert encoder.transform(pd.DataFrame({"store": ["C", "D", "B", "A"]})).tolist() == [
        [0, 1], [0, 1], [1, 0], [0, 0]]
    means = TargetMeanEncoder("store", smoothing=0, group_below=3).fit(frame, np.arange(13.0))
    assert means.means_["other (levels with fewer than 3 rows)"] == pytest.approx((10 + 11 + 12) / 3)
    with pytest.raises(DataError, match="reference level 'C' has fewer than 3"):
        OneHotEncoder("store", reference="C", group_below=3).fit(frame)


def test_an_unseen_level_stops_by_default_naming_row_and_column():
    train = make_panel(months=12)
    later = make_panel(months=2, start="2021-01")
    later.loc[later.index[1], "region"] = "Central"
    plan = plan_features(make_spec({"categorical": ["region"]}), "region").fit(train)
    with pytest.raises(DataError) as stopped:
        plan.transform(later)
    assert stopped.value.column == "region" and stopped.value.row == int(later[ROW].iloc[1])
    assert "level 'Central' was not in the training rows" in str(stopped.value)
    assert "unseen: use_reference" in str(stopped.value)


@pytest.mark.parametrize("encoding", ["one_hot", "target_mean", "ordinal"])
def test_an_unseen_level_can_be_treated_as_the_reference_with_a_warning(encoding):
    train = pd.DataFrame({"c": ["x", "x", "y"], "sales": [1.0, 2.0, 6.0]})
    later = pd.DataFrame({"c": ["z", "y"], "sales": [np.nan, np.nan]})
    driver = {"column": "c", "encoding": encoding, "unseen": "use_reference"}
    if encoding == "ordinal":
        driver["order"] = ["x", "y"]
    spec = make_spec({"categorical": [driver]})
    plan = plan_features(spec, "c").fit(train)
    design = plan.transform(later)
    reference = plan.transform(pd.DataFrame({"c": ["x"]}))
    np.testing.assert_array_equal(design.matrix[0], reference.matrix[0])   # z is read as x
    assert design.notes == ("c: level 'z' was not in the training rows; 1 of the 2 rows were "
                            "treated as the reference level 'x'",)


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


def test_interactions_multiply_first_degree_columns():
    frame = make_panel(months=6)
    plan = fitted_plan({"numeric": [{"column": "price", "degree": 2}, "temp"],
                        "categorical": [{"column": "region", "reference": "East"}],
                        "interactions": [["price", "region"], ["price", "temp"]]}, frame)
    table = plan.feature_table(frame)
    west = (frame["region"] == "West").to_numpy(float)
    np.testing.assert_allclose(table["price × region: West"], frame["price"] * west)
    np.testing.assert_allclose(table["price × temp"], frame["price"] * frame["temp"])


# ------------------------------------------------------------------ names

def test_every_feature_has_a_name_read_without_a_legend():
    frame = make_panel(months=30)
    drivers = {"numeric": [{"column": "price", "degree": 2}, {"column": "temp", "transform": "log"}],
               "categorical": [{"column": "region", "reference": "North"}],
               "interactions": [["price", "region"]],
               "calendar": {"trend": True, "month_of_year": "fourier", "harmonics": 1,
                            "working_days": True},
               "lags": [{"column": "sales", "lags": [12], "rolling_means": [3]}]}
    assert fitted_plan(drivers, frame).get_feature_names_out() == [
        "price", "price^2", "log(temp)", "region: East", "region: West",
        "price × region: East", "price × region: West",
        "months since 2020-01", "sin(2π·month/12)", "cos(2π·month/12)", "working days in the month",
        "sales, 12 months earlier", "sales, mean of the 3 months before"]


# ------------------------------------------------------------------ the target transform

def test_smearing_makes_the_retransformed_mean_unbiased():
    # Duan (1983), "Smearing estimate: a nonparametric retransformation method", JASA 78(383):
    # with log y = a + b·x + e, E[y | x] = exp(a + b·x) · E[exp(e)], and mean(exp(residuals))
    # estimates E[exp(e)]. Simulated with log-normal errors, sigma = 0.8, so the plain
    # exp(prediction) estimates the median, exp(-sigma²/2) - 1 ≈ -27% below the mean.
    rng = np.random.default_rng(1983)
    sigma, a, b = 0.8, 1.0, 0.5
    x_new = np.linspace(0.0, 2.0, 9)
    truth = np.exp(a + b * x_new + sigma ** 2 / 2)
    corrected, plain = [], []
    for _ in range(300):
        x = rng.uniform(0.0, 2.0, 200)
        y = np.exp(a + b * x + rng.normal(0.0, sigma, x.size))
        model = TransformedTargetModel(OLSModel(), TargetTransform("y", "log"))
        model.fit(Design(x[:, None], ["x"], np.zeros(x.size)), y)
        new = Design(x_new[:, None], ["x"], np.zeros(x_new.size))
        corrected.append(np.mean(model.predict(new) / truth - 1))
        plain.append(np.mean(np.exp(model.model.predict(new)) / truth - 1))
    corrected, plain = np.array(corrected), np.array(plain)
    standard_error = corrected.std(ddof=1) / np.sqrt(corrected.size)
    assert abs(corrected.mean()) < 3 * standard_error                  # unbiased within sampling error
    assert plain.mean() < -20 * plain.std(ddof=1) / np.sqrt(plain.size)  # biased low, far beyond it
    assert plain.mean() == pytest.approx(np.exp(-sigma ** 2 / 2) - 1, abs=0.02)


def test_log1p_retransformation_smears_one_plus_the_target():
    transform = TargetTransform("y", "log1p")
    assert transform.to_mean([np.log(3.0)], 1.5) == pytest.approx([3.0 * 1.5 - 1.0])
    assert transform.smearing_factor([0.0, 0.0]) == 1.0


def test_a_non_positive_target_under_log_is_refused_naming_column_and_row():
    frame = make_panel(months=6)
    frame.loc[frame.index[3], "sales"] = 0.0
    with pytest.raises(DataError) as stopped:
        fitted_plan({"numeric": ["price"]}, frame, target_transform="log")
    assert stopped.value.column == "sales" and stopped.value.row == int(frame[ROW].iloc[3])
    assert "0 is not above 0, so target_transform: log cannot be applied" in str(stopped.value)
    assert "log1p takes zeros" in str(stopped.value)
    assert len(str(stopped.value).splitlines()) == 1


def test_baselines_keep_the_target_as_it_is():
    frame = make_panel(months=6)
    plan = fitted_plan({"numeric": ["price"]}, frame, target_transform="log")
    assert isinstance(make_model("ols", target=plan.target_scale), TransformedTargetModel)
    assert make_model("mean_baseline", target=plan.target_scale).__class__ is MeanBaseline
    assert make_model("ols", target=fitted_plan({}, frame).target_scale).__class__ is OLSModel


def test_a_term_too_large_to_fit_stops_with_its_name_and_row(tmp_path):
    """A driver of 1e60 raised to a power overflows the fit (1e150 bound: a square of a larger
    term, summed over rows, exceeds the largest float, about 1.8e308 — IEEE 754 double)."""
    import pipeline
    from pipeline.core.errors import DataError

    data = pd.read_csv(DEMO_DATA)
    data.loc[5, "rainfall_mm"] = 1e60
    data.to_csv(tmp_path / "big.csv", index=False)
    spec = DEMO_SPEC.read_text(encoding="utf-8")
    spec = spec.replace("../data_samples/compost_sales.csv", "big.csv").replace(
        "    - rainfall_mm\n", "    - column: rainfall_mm\n      degree: 6\n")
    (tmp_path / "spec.yaml").write_text(spec, encoding="utf-8")
    with pytest.raises(DataError) as stopped:
        pipeline.run(tmp_path / "spec.yaml", output_folder=tmp_path / "out")
    message = str(stopped.value)
    assert "big.csv:7:" in message and "'rainfall_mm^3'" in message and "too large to fit" in message
