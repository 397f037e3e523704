"""Every model in the catalogue keeps the one model contract (pipeline.models.contract.Model).

In the spirit of scikit-learn's check_estimator: each catalogue entry (and the
per-series variant, and each linear kind under a log target) is built from a
spec-like choice, fitted and asked every question of the contract. The checks
rest on definitions, not on castline's own numbers:
- a linear model fitted without an intercept predicts exactly 0 for a row of
  zeros (the definition of a model through the origin); with one, it does not;
- a linear model's prediction is its intercept plus the row times its slopes;
- a model either gives a standard error per row or says it gives none (None),
  never lacks the method; under a log target the wrapper's standard error is the
  inner model's, on the log scale, and goes with its prediction there (``centre``),
  which the smearing factor turns into the mean ``predict`` states.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pipeline.core.catalogue import LINEAR_KINDS, MODEL_KINDS, MODELS, PER_SERIES_KINDS, model_label
from pipeline.core.design import Design
from pipeline.features.target import TargetTransform
from pipeline.models import Model, TransformedTargetModel, make_model, prediction_spread
from pipeline.spec import ModelChoice


def _panel(seed: int = 3, months: int = 36) -> tuple[Design, np.ndarray]:
    # Two series, a year-and-a-half apart in level, two drivers, and a true intercept of 100,
    # so a fit forced through the origin is visibly different from one with an intercept.
    rng = np.random.default_rng(seed)
    n = 2 * months
    x = rng.normal(size=(n, 2)) + 3.0
    series = np.repeat(np.array(["north", "south"], dtype=object), months)
    period = np.tile(np.arange(600, 600 + months), 2)
    y = 100.0 + x @ np.array([4.0, -2.0]) + np.where(series == "south", 5.0, 0.0) + rng.normal(size=n)
    return Design(x, ["x1", "x2"], series, period), y


def _zero_rows(design: Design) -> Design:
    return Design(np.zeros((2, design.matrix.shape[1])), design.names,
                  np.array(["north", "south"], dtype=object), np.array([636, 636]))


CHOICES = [(kind.name, False) for kind in MODEL_KINDS] + [(name, True) for name in PER_SERIES_KINDS]


def _choice(name: str, per_series: bool) -> ModelChoice:
    return ModelChoice(kind=name, per_series=per_series)


@pytest.mark.parametrize(("name", "per_series"), CHOICES)
@pytest.mark.parametrize("log_target", [False, True])
def test_every_model_keeps_the_contract(name, per_series, log_target):
    design, y = _panel()
    target = TargetTransform("y", "log" if log_target else "none")
    model = make_model(_choice(name, per_series), intercept=True, target=target)
    kind = MODELS[name]
    assert isinstance(model, Model)
    wrapped = log_target and not kind.baseline
    assert isinstance(model, TransformedTargetModel) == wrapped
    assert model.fit(design, y) is model
    predicted = model.predict(design)
    assert predicted.shape == (len(y),) and np.isfinite(predicted).all()
    se = model.prediction_se(design)
    df = model.residual_df(design)
    sigma = model.residual_sd(design)
    spread_se, spread_df, centre = prediction_spread(model, design)
    if kind.can("prediction_se"):
        assert se is not None and np.shape(se) == (len(y),) and (np.asarray(se) > 0).all()
        assert df is not None and np.all(np.asarray(df) > 0)
        np.testing.assert_array_equal(spread_se, se)
        np.testing.assert_array_equal(spread_df, df)
        if wrapped:
            # On the log scale: the centre is the fit there, and exp(centre)·S the mean predicted.
            np.testing.assert_array_equal(centre, model.centre(design))
            np.testing.assert_allclose(np.exp(centre) * model.smearing_, predicted, rtol=1e-12)
            assert sigma is None   # no recursion fed back on the transformed scale
        else:
            assert centre is None   # the prediction itself is the centre
            # s·sqrt(1 + x'(X'X)⁻¹x) is at least s, the residual SD, which it starts from.
            assert sigma is not None and np.shape(sigma) == (len(y),)
            assert (0 < np.asarray(sigma)).all() and (np.asarray(sigma) <= np.asarray(se)).all()
    else:
        # No standard error: said with None, not by a missing method (under a log target the
        # wrapper once lacked it, and analytic intervals vanished).
        assert se is None and df is None and sigma is None
        assert spread_se is None and spread_df is None and centre is None
    table = model.coefficient_table()
    assert {"term", "estimate"} <= set(table.columns) and len(table)
    assert model.inner is not None and isinstance(model.notes(), list)
    assert model.describe() is None or isinstance(model.describe(), str)
    if wrapped and kind.can("prediction_se"):
        # The summary says where the interval is centred, and that the forecast is the mean.
        assert "analytic interval is found on the log(y) scale" in model.describe()
        assert "centred on the median" in model.describe()


@pytest.mark.parametrize("name", LINEAR_KINDS)
@pytest.mark.parametrize("intercept", [True, False])
def test_a_linear_model_honours_the_spec_intercept(name, intercept):
    design, y = _panel()
    model = make_model(_choice(name, False), intercept=intercept).fit(design, y)
    assert model.fit_intercept is intercept
    at_origin = model.predict(_zero_rows(design))
    if intercept:
        # The data's intercept is 100: a fit with one predicts well away from 0 at the origin.
        assert np.all(np.abs(at_origin) > 50)
    else:
        # Definition of a model through the origin: a row of zeros predicts exactly 0.
        np.testing.assert_array_equal(at_origin, 0.0)
        assert "intercept" not in set(model.coefficient_table()["term"])


@pytest.mark.parametrize("intercept", [True, False])
def test_a_model_per_series_honours_the_spec_intercept(intercept):
    design, y = _panel()
    model = make_model(_choice("ols", True), intercept=intercept).fit(design, y)
    at_origin = model.predict(_zero_rows(design))
    if intercept:
        assert np.all(np.abs(at_origin) > 50)
    else:
        np.testing.assert_array_equal(at_origin, 0.0)


@pytest.mark.parametrize("name", LINEAR_KINDS)
@pytest.mark.parametrize("intercept", [True, False])
def test_a_linear_model_predicts_its_intercept_plus_the_row_times_its_slopes(name, intercept):
    design, y = _panel(seed=11)
    model = make_model(_choice(name, False), intercept=intercept).fit(design, y)
    constant, slopes = model.linear_coefficients()
    np.testing.assert_allclose(model.predict(design), constant + design.matrix @ slopes, rtol=1e-10)


def test_a_wrapper_forwards_the_contract_to_the_model_inside():
    design, y = _panel()
    inner = make_model("ols", intercept=False)
    wrapper = TransformedTargetModel(inner, TargetTransform("y", "log")).fit(design, y)
    assert wrapper.fit_intercept is False and wrapper.inner is inner
    assert wrapper.least_squares_fit is inner.least_squares_fit is not None
    np.testing.assert_array_equal(wrapper.design_matrix(design), inner.design_matrix(design))
    pd.testing.assert_frame_equal(wrapper.coefficient_table(), inner.coefficient_table())


def test_the_catalogue_names_a_model_class_for_every_kind_and_the_spec_allows_exactly_them():
    for kind in MODEL_KINDS:
        assert issubclass(kind.model_class(), Model)
        if kind.can("per_series"):
            assert issubclass(kind.model_class(per_series=True), Model)
        assert model_label(kind.name)
    allowed = ModelChoice.model_fields["kind"].annotation.__args__
    assert tuple(allowed) == tuple(MODELS)
    assert model_label("ols_per_series") == "OLS per series"
    with pytest.raises(ValueError, match="unknown model kind"):
        make_model("a_kind_nobody_declared")
