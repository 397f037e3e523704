"""Ridge, lasso, elastic net and Huber (pipeline/models/penalised.py) against scikit-learn.

Each reference standardises the data itself (sklearn.preprocessing.StandardScaler
for the drivers, (y − mean) / SD for the target, both with the population SD) and
fits scikit-learn's own estimator with the same penalty; predictions are turned
back to the target's scale by hand. The data are simulated
(numpy.random.default_rng(21)): 2 series × 36 months, three drivers on very
different scales, y = 5 + 2·x1 − 0.03·x2 + 40·x3 + N(0, 1), a few large outliers
added for Huber.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.linear_model import ElasticNet, HuberRegressor, Lasso, Ridge
from sklearn.preprocessing import StandardScaler

from pipeline.core.design import Design
from pipeline.models.penalised import INNER_SHARE, HuberModel, PenalisedModel

START = 600   # months since 1970-01 (2020-01)


def simulate(months: int = 36, seed: int = 21):
    rng = np.random.default_rng(seed)
    period = np.repeat(np.arange(START, START + months), 2)
    series = np.tile(np.array(["A", "B"], dtype=object), months)
    x = np.column_stack([rng.normal(10, 3, len(period)), rng.normal(500, 200, len(period)),
                         rng.uniform(0, 0.1, len(period))])
    y = 5 + 2 * x[:, 0] - 0.03 * x[:, 1] + 40 * x[:, 2] + rng.normal(0, 1, len(period))
    return Design(x, ["x1", "x2", "x3"], series, period), y


def reference(estimator, train_x, train_y, new_x):
    """Fit a scikit-learn estimator on standardised data; return predictions on y's scale and
    the standardised coefficients."""
    scaler = StandardScaler().fit(train_x)
    mean, sd = train_y.mean(), train_y.std()
    estimator.fit(scaler.transform(train_x), (train_y - mean) / sd)
    return estimator.predict(scaler.transform(new_x)) * sd + mean, estimator.coef_ * sd


@pytest.mark.parametrize(("kind", "penalty", "estimator", "share"), [
    ("ridge", 0.7, Ridge(alpha=0.7), 1e-10),
    ("lasso", 0.01, Lasso(alpha=0.01, max_iter=100000, tol=1e-10), 1e-3),
    ("elastic_net", 0.02, ElasticNet(alpha=0.02, l1_ratio=0.3, max_iter=100000, tol=1e-10), 1e-3),
])
def test_a_single_penalty_equals_sklearn_on_standardised_data(kind, penalty, estimator, share):
    design, y = simulate()
    fit, new = design.rows(slice(0, 60)), design.rows(slice(60, 72))
    model = PenalisedModel(kind, penalties=[penalty], l1_share=0.3).fit(fit, y[:60])
    expected, coefficients = reference(estimator, fit.matrix, y[:60], new.matrix)
    assert model.penalty_ == penalty
    # The reference is solved to tol=1e-10; castline's coordinate descent stops at scikit-learn's
    # default tol=1e-4, so lasso and elastic net agree to a thousandth of y's SD; ridge is
    # solved directly and agrees to rounding.
    close = share * y[:60].std()
    np.testing.assert_allclose(model.predict(new), expected, rtol=0, atol=close)
    table = model.coefficient_table()
    np.testing.assert_allclose(table["estimate_standardised"].to_numpy()[1:], coefficients,
                               rtol=0, atol=close)


def test_lasso_with_a_large_penalty_keeps_no_driver():
    # A penalty above max|X'y|/n on standardised data (at most 1 here) zeroes every coefficient
    # (the lasso's known threshold), so the prediction is the window's mean.
    design, y = simulate()
    model = PenalisedModel("lasso", penalties=[5.0]).fit(design, y)
    assert (model.coefficient_table()["estimate"].to_numpy()[1:] == 0).all()
    np.testing.assert_allclose(model.predict(design), np.full(len(y), y.mean()), rtol=1e-12)


def test_huber_equals_sklearn_huber_regressor_on_standardised_data():
    design, y = simulate()
    y = y.copy()
    y[[5, 17, 40]] += [60.0, -45.0, 80.0]    # outliers
    model = HuberModel(threshold=1.35).fit(design, y)
    expected, _ = reference(HuberRegressor(epsilon=1.35, alpha=0.0, max_iter=1000), design.matrix, y,
                            design.matrix)
    np.testing.assert_allclose(model.predict(design), expected, rtol=1e-6)


def test_huber_is_less_moved_by_outliers_than_least_squares():
    # The clean line is known (the simulation's); the outliers pull least squares further from it.
    design, y = simulate()
    clean = 5 + 2 * design.matrix[:, 0] - 0.03 * design.matrix[:, 1] + 40 * design.matrix[:, 2]
    spoiled = y.copy()
    spoiled[::9] += 50.0
    huber = HuberModel().fit(design, spoiled).predict(design)
    ols = np.column_stack([np.ones(len(y)), design.matrix])
    least_squares = ols @ np.linalg.lstsq(ols, spoiled, rcond=None)[0]
    assert np.mean(np.abs(huber - clean)) < np.mean(np.abs(least_squares - clean))


@pytest.mark.parametrize("model", [
    PenalisedModel("ridge", penalties=[0.5], fit_intercept=False),
    PenalisedModel("lasso", penalties=[0.01], fit_intercept=False),
    PenalisedModel("elastic_net", penalties=[0.01], fit_intercept=False),
    HuberModel(fit_intercept=False),
])
def test_without_an_intercept_a_row_of_zeros_predicts_zero(model):
    design, y = simulate()
    model.fit(design, y)
    zero = Design(np.zeros((1, 3)), design.names, np.array(["A"], dtype=object), np.array([START]))
    assert model.predict(zero)[0] == pytest.approx(0.0, abs=1e-12)
    assert "(intercept)" not in model.coefficient_table()["term"].tolist()


def test_without_an_intercept_ridge_equals_sklearn_on_root_mean_square_scaling():
    # scaled, not centred: each column divided by its root mean square, y likewise
    design, y = simulate()
    x_scale = np.sqrt(np.mean(design.matrix ** 2, axis=0))
    y_scale = np.sqrt(np.mean(y ** 2))
    ridge = Ridge(alpha=0.5, fit_intercept=False).fit(design.matrix / x_scale, y / y_scale)
    model = PenalisedModel("ridge", penalties=[0.5], fit_intercept=False).fit(design, y)
    np.testing.assert_allclose(model.predict(design), ridge.predict(design.matrix / x_scale) * y_scale,
                               rtol=1e-10)


def test_the_inner_validation_holds_out_the_windows_latest_months():
    """Recompute the choice by hand: of the window's 36 months, the last round(36 · 0.2) = 7 are
    held out, each candidate is fitted (with sklearn, on standardised data) on the 29 before
    them, and the lowest mean squared error on the held months wins."""
    design, y = simulate(months=36)
    penalties = [0.001, 0.1, 3.0, 30.0]
    model = PenalisedModel("ridge", penalties=penalties).fit(design, y)
    held = int(round(36 * INNER_SHARE))
    assert held == 7
    inner = design.period < START + 36 - held
    expected = {}
    for penalty in penalties:
        predicted, _ = reference(Ridge(alpha=penalty), design.matrix[inner], y[inner], design.matrix[~inner])
        expected[penalty] = float(np.mean((predicted - y[~inner]) ** 2))
    assert model.penalty_scores_ == pytest.approx(expected, rel=1e-8)
    assert model.penalty_ == min(expected, key=expected.get)


def test_the_inner_validation_reads_months_not_row_order():
    design, y = simulate()
    order = np.random.default_rng(2).permutation(len(y))
    shuffled = design.rows(order)
    penalties = [0.001, 0.1, 3.0, 30.0]
    in_order = PenalisedModel("ridge", penalties=penalties).fit(design, y)
    out_of_order = PenalisedModel("ridge", penalties=penalties).fit(shuffled, y[order])
    assert out_of_order.penalty_scores_ == pytest.approx(in_order.penalty_scores_, rel=1e-9)


def test_the_choice_ignores_months_outside_the_window():
    # Two windows share their first 30 months; months after them are wildly different.
    # Fitted on the first 30 months alone, the choice cannot depend on what comes later.
    design, y = simulate(months=36)
    later = y.copy()
    later[design.period >= START + 30] *= -50
    window = design.period < START + 30
    penalties = [0.001, 0.1, 3.0, 30.0]
    first = PenalisedModel("ridge", penalties=penalties).fit(design.rows(window), y[window])
    second = PenalisedModel("ridge", penalties=penalties).fit(design.rows(window), later[window])
    assert first.penalty_scores_ == second.penalty_scores_
    # while the whole history (with those months) does choose differently
    whole = PenalisedModel("ridge", penalties=penalties).fit(design, later)
    assert whole.penalty_scores_ != first.penalty_scores_
