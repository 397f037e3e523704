"""A linear model on a transformed target, turned back with Duan's smearing
(pipeline/models/transformed.py).

The reference is computed here with statsmodels.api.OLS on log(y) (or log(1 + y))
and numpy: the smearing factor S = mean(exp(residuals)) of that fit, and the
prediction of the mean exp(x·β̂)·S (Duan 1983, "Smearing estimate: a
nonparametric retransformation method", JASA 78(383)). The data are simulated
(numpy.random.default_rng(31)): log y = 1 + 0.4·x1 − 0.2·x2 + e with skewed
(centred exponential) errors, so the factor differs from the lognormal one.

The analytic interval under a log or log1p target is checked against statsmodels:
``sm.OLS(log(y), X).fit().get_prediction(x_new).summary_frame(alpha=1 − level)``,
whose obs_ci_lower / obs_ci_upper, turned back with exp (or expm1 for log1p), must equal
castline's bounds. Besides the simulated data, two public data sets shipped with
statsmodels: Mauna Loa CO2 (``statsmodels.datasets.co2``, weekly, averaged by month,
months without a reading dropped), log(co2) on a quadratic trend in years and month
dummies; and yearly sunspot activity (``statsmodels.datasets.sunspots``, which has
zeros, hence log1p), log(1 + activity) on its own two previous years.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from pipeline.core.design import Design
from pipeline.core.intervals import analytic_bounds, back_from
from pipeline.features.target import TargetTransform
from pipeline.models import make_model, prediction_spread
from pipeline.models.ols import OLSModel
from pipeline.models.penalised import PenalisedModel
from pipeline.models.transformed import TransformedTargetModel


def simulate(n: int = 80, seed: int = 31, shift: float = 0.0):
    rng = np.random.default_rng(seed)
    x = np.column_stack([rng.normal(0, 1, n), rng.uniform(0, 5, n)])
    errors = rng.exponential(0.5, n) - 0.5
    y = np.exp(1 + 0.4 * x[:, 0] - 0.2 * x[:, 1] + errors) - shift
    design = Design(x, ["x1", "x2"], np.array(["all"] * n, dtype=object), np.arange(600, 600 + n))
    return design, y


def statsmodels_reference(x_fit, z_fit, x_new):
    fit = sm.OLS(z_fit, sm.add_constant(x_fit)).fit()
    smearing = float(np.mean(np.exp(fit.resid)))
    return np.exp(sm.add_constant(x_new, has_constant="add") @ fit.params), smearing


def test_log_predictions_are_exp_of_the_fit_times_the_smearing_factor():
    design, y = simulate()
    fit, new = design.rows(slice(0, 60)), design.rows(slice(60, 80))
    model = TransformedTargetModel(OLSModel(), TargetTransform("y", "log")).fit(fit, y[:60])
    exp_fit, smearing = statsmodels_reference(fit.matrix, np.log(y[:60]), new.matrix)
    assert model.smearing_ == pytest.approx(smearing, rel=1e-10)
    np.testing.assert_allclose(model.predict(new), exp_fit * smearing, rtol=1e-10)
    # skewed errors: the factor is above 1 (Jensen), so the mean is above the back-transformed median
    assert smearing > 1


def test_log1p_predictions_subtract_one_after_smearing():
    design, y = simulate(shift=1.0)   # y = exp(…) − 1 > −1: log(1 + y) is linear in x
    fit, new = design.rows(slice(0, 60)), design.rows(slice(60, 80))
    model = TransformedTargetModel(OLSModel(), TargetTransform("y", "log1p")).fit(fit, y[:60])
    exp_fit, smearing = statsmodels_reference(fit.matrix, np.log1p(y[:60]), new.matrix)
    assert model.smearing_ == pytest.approx(smearing, rel=1e-10)
    np.testing.assert_allclose(model.predict(new), exp_fit * smearing - 1.0, rtol=1e-10, atol=1e-12)


def test_the_smeared_mean_is_unbiased_in_the_training_window():
    # For OLS with an intercept, mean(exp(x·β̂)·S) is not exactly mean(y), but the smeared
    # prediction is far closer to it than the unsmeared exp(x·β̂), whose mean falls short.
    design, y = simulate(n=400, seed=4)
    model = TransformedTargetModel(OLSModel(), TargetTransform("y", "log")).fit(design, y)
    smeared = model.predict(design).mean()
    unsmeared = (model.predict(design) / model.smearing_).mean()
    assert abs(smeared - y.mean()) < abs(unsmeared - y.mean())


def test_the_standard_error_is_the_inner_fits_on_the_log_scale_and_the_note_says_so():
    design, y = simulate()
    model = TransformedTargetModel(OLSModel(), TargetTransform("y", "log")).fit(design, y)
    inner = OLSModel().fit(design, np.log(y))
    np.testing.assert_allclose(model.centre(design), inner.predict(design), rtol=1e-12)
    np.testing.assert_allclose(model.prediction_se(design), inner.prediction_se(design), rtol=1e-12)
    assert model.residual_df(design) == inner.residual_df(design) == len(y) - 3
    se, df, centre = prediction_spread(model, design)
    np.testing.assert_array_equal(centre, model.centre(design))
    note = model.describe()
    assert "log(y)" in note and f"{model.smearing_:.4f}" in note
    assert "analytic interval is found on the log(y) scale and turned back with exp" in note
    assert "centred on the median of y" in note and "(smeared) mean" in note
    assert "no analytic interval" not in note


def test_a_penalised_model_on_a_log_target_still_gives_no_standard_error():
    design, y = simulate()
    model = make_model("ridge", target=TargetTransform("y", "log")).fit(design, y)
    assert model.prediction_se(design) is None and model.residual_df(design) is None
    assert prediction_spread(model, design) == (None, None, None)
    assert "analytic interval" not in model.describe()


# ------------------------------------------------- the analytic interval against statsmodels

def _simulated(shift: float = 0.0):
    """The simulated design above: log(y + shift) linear in x1, x2, skewed errors; the last 20
    rows predicted from the first 60."""
    design, y = simulate(n=80, shift=shift)
    return design.matrix[:60], y[:60], design.matrix[60:]


def _simulated_log1p():
    """The same with y = exp(…) − 1, so log(1 + y) is linear in x1, x2."""
    return _simulated(shift=1.0)


def _co2():
    """Mauna Loa CO2 by month (statsmodels.datasets.co2): a quadratic trend in years since
    1958-03 and 11 month dummies; the last 24 months predicted from the rest."""
    weekly = sm.datasets.co2.load_pandas().data["co2"]
    monthly = weekly.resample("MS").mean().dropna()
    years = (monthly.index.year - 1958) + (monthly.index.month - 3) / 12
    dummies = pd.get_dummies(monthly.index.month, drop_first=True).to_numpy(float)
    x = np.column_stack([years, years ** 2, dummies])
    y = monthly.to_numpy(float)
    return x[:-24], y[:-24], x[-24:]


def _sunspots():
    """Yearly sunspot activity 1700-2008 (statsmodels.datasets.sunspots, zeros included):
    log(1 + activity) on its values one and two years earlier; the last 30 years predicted
    one year ahead from the rest."""
    activity = sm.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(float)
    z = np.log1p(activity)
    x = np.column_stack([z[1:-1], z[:-2]])
    y = activity[2:]
    return x[:-30], y[:-30], x[-30:]


CASES = [("log", _simulated), ("log1p", _simulated_log1p), ("log", _co2), ("log1p", _sunspots)]


def _fitted(kind: str, data):
    x_fit, y_fit, x_new = data()
    fit = Design(x_fit, [f"x{j}" for j in range(x_fit.shape[1])], np.array(["all"] * len(x_fit), dtype=object),
                 np.arange(len(x_fit)))
    new = Design(x_new, fit.names, np.array(["all"] * len(x_new), dtype=object),
                 np.arange(len(x_fit), len(x_fit) + len(x_new)))
    model = make_model("ols", target=TargetTransform("y", kind)).fit(fit, y_fit)
    return model, new, x_fit, y_fit, x_new


@pytest.mark.parametrize("level", [0.80, 0.95])
@pytest.mark.parametrize(("kind", "data"), CASES, ids=["log-simulated", "log1p-simulated", "log-co2",
                                                       "log1p-sunspots"])
def test_the_analytic_interval_equals_statsmodels_on_the_transformed_scale_turned_back(kind, data, level):
    model, new, x_fit, y_fit, x_new = _fitted(kind, data)
    se, df, centre = prediction_spread(model, new)
    low, high = analytic_bounds(centre, se, df, level, kind)
    # statsmodels OLSResults.get_prediction(x_new).summary_frame(alpha=1 − level), fitted on
    # log(y) (or log(1 + y)); its observation interval turned back with exp (or expm1).
    scaled = np.log(y_fit) if kind == "log" else np.log1p(y_fit)
    reference = sm.OLS(scaled, sm.add_constant(x_fit)).fit()
    frame = reference.get_prediction(sm.add_constant(x_new, has_constant="add")).summary_frame(
        alpha=1 - level)
    inverse = np.exp if kind == "log" else np.expm1
    np.testing.assert_allclose(low, inverse(frame["obs_ci_lower"]), rtol=1e-10)
    np.testing.assert_allclose(high, inverse(frame["obs_ci_upper"]), rtol=1e-10)
    np.testing.assert_allclose(centre, frame["mean"], rtol=1e-10)
    assert np.all(df == reference.df_resid)


@pytest.mark.parametrize(("kind", "data"), CASES, ids=["log-simulated", "log1p-simulated", "log-co2",
                                                       "log1p-sunspots"])
def test_the_interval_is_centred_on_the_median_and_holds_the_smeared_mean(kind, data):
    model, new, *_ = _fitted(kind, data)
    se, df, centre = prediction_spread(model, new)
    forward = np.log if kind == "log" else np.log1p
    median = back_from(centre, kind)
    mean = model.predict(new)
    # The smeared mean is exp(centre)·S (minus 1 for log1p), not the median.
    np.testing.assert_allclose(forward(mean), centre + np.log(model.smearing_), rtol=1e-12, atol=1e-12)
    assert model.smearing_ != 1.0
    for level in (0.80, 0.95):
        low, high = analytic_bounds(centre, se, df, level, kind)
        # On the transformed scale the interval is symmetric about the centre: its midpoint
        # turned back is the median.
        np.testing.assert_allclose((forward(low) + forward(high)) / 2, centre, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(back_from((forward(low) + forward(high)) / 2, kind), median, rtol=1e-12)
        assert np.all((low < median) & (median < high))
        # The point forecast (the mean) lies inside, off the centre.
        assert np.all((low < mean) & (mean < high))
    # On the target's own scale the interval is skewed: further above the median than below.
    low, high = analytic_bounds(centre, se, df, 0.95, kind)
    assert np.all(high - median > median - low)


def test_make_model_wraps_linear_models_and_leaves_baselines_alone():
    target = TargetTransform("y", "log")
    assert isinstance(make_model("ridge", target=target), TransformedTargetModel)
    assert isinstance(make_model("ridge", target=target).model, PenalisedModel)
    assert not isinstance(make_model("mean_baseline", target=target), TransformedTargetModel)
    assert not isinstance(make_model("ols", target=TargetTransform("y", "none")), TransformedTargetModel)
