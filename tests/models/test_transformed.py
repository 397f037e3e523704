"""A linear model on a transformed target, turned back with Duan's smearing
(pipeline/models/transformed.py).

The reference is computed here with statsmodels.api.OLS on log(y) (or log(1 + y))
and numpy: the smearing factor S = mean(exp(residuals)) of that fit, and the
prediction of the mean exp(x·β̂)·S (Duan 1983, "Smearing estimate: a
nonparametric retransformation method", JASA 78(383)). The data are simulated
(numpy.random.default_rng(31)): log y = 1 + 0.4·x1 − 0.2·x2 + e with skewed
(centred exponential) errors, so the factor differs from the lognormal one.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from pipeline.core.design import Design
from pipeline.features.target import TargetTransform
from pipeline.models import make_model
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


def test_no_standard_error_on_the_targets_scale_and_the_note_says_why():
    design, y = simulate()
    model = TransformedTargetModel(OLSModel(), TargetTransform("y", "log")).fit(design, y)
    assert model.prediction_se(design) is None and model.residual_df(design) is None
    note = model.describe()
    assert "log(y)" in note and f"{model.smearing_:.4f}" in note
    assert "no analytic interval" in note


def test_make_model_wraps_linear_models_and_leaves_baselines_alone():
    target = TargetTransform("y", "log")
    assert isinstance(make_model("ridge", target=target), TransformedTargetModel)
    assert isinstance(make_model("ridge", target=target).model, PenalisedModel)
    assert not isinstance(make_model("mean_baseline", target=target), TransformedTargetModel)
    assert not isinstance(make_model("ols", target=TargetTransform("y", "none")), TransformedTargetModel)
