"""The catalogue of model kinds and metrics (pipeline/core/catalogue.py).

Every list derived from the catalogue is checked against the two declarations
(MODEL_KINDS, METRICS), and the places that consume them (the spec's allowed kinds
and select_by metrics, the command line's metric choices, the ledger's score
columns) are checked to offer exactly those. Each metric that scikit-learn also
computes is checked against scikit-learn's sklearn.metrics function on simulated
values (numpy.random.default_rng(7): actuals uniform on [5, 50], so none is 0,
predictions the actuals plus normal noise of SD 4).
"""

from __future__ import annotations

import typing

import numpy as np
import pytest
from sklearn import metrics as skm

from pipeline.core import catalogue
from pipeline.core.catalogue import (
    BASELINE,
    BASELINE_KINDS,
    HIGHER_IS_BETTER,
    LINEAR_KINDS,
    LOWER_IS_BETTER,
    METRIC_BY_NAME,
    METRIC_NAMES,
    METRICS,
    MODEL_KINDS,
    MODELS,
    PER_SERIES_KINDS,
    SCORES,
    SELECT_METRICS,
    SIMPLE_REFERENCES,
    SKILL,
    model_kind,
    model_label,
)
from pipeline.models.contract import Model


@pytest.fixture(scope="module")
def pair():
    rng = np.random.default_rng(7)
    actual = rng.uniform(5, 50, size=40)
    return actual, actual + rng.normal(0, 4, size=40)


# ------------------------------------------------------------ lists derived from the declarations

def test_model_lists_agree_with_model_kinds():
    names = [kind.name for kind in MODEL_KINDS]
    assert len(set(names)) == len(names)
    assert list(MODELS) == names
    assert list(BASELINE_KINDS) == [k.name for k in MODEL_KINDS if k.family == "reference"]
    assert list(LINEAR_KINDS) == [k.name for k in MODEL_KINDS if k.family == "linear"]
    assert set(BASELINE_KINDS) | set(LINEAR_KINDS) == set(names)
    assert not set(BASELINE_KINDS) & set(LINEAR_KINDS)
    assert list(PER_SERIES_KINDS) == [k.name for k in MODEL_KINDS if k.per_series]
    assert BASELINE in BASELINE_KINDS
    assert list(SIMPLE_REFERENCES) == [k.name for k in MODEL_KINDS if k.always]


def test_the_simple_references_are_time_ordered_baselines_beside_the_mean_baseline():
    assert SIMPLE_REFERENCES == ("calendar_month_mean", "trailing_mean", "last_value", "seasonal_naive")
    assert MODEL_KINDS[0].name == BASELINE and not MODEL_KINDS[0].always
    for name in SIMPLE_REFERENCES:
        assert MODELS[name].baseline and MODELS[name].can("needs_time_order"), name


def test_metric_lists_agree_with_metrics():
    names = [metric.name for metric in METRICS]
    assert len(set(names)) == len(names)
    assert list(METRIC_NAMES) == names
    assert list(METRIC_BY_NAME) == names
    assert list(SELECT_METRICS) == [m.name for m in METRICS if m.selectable]
    assert list(LOWER_IS_BETTER) == [m.name for m in METRICS if m.better == "lower"]
    assert list(HIGHER_IS_BETTER) == [m.name for m in METRICS if m.better == "higher"] + [SKILL]
    assert SCORES == ("n", *names, SKILL)
    assert {m.better for m in METRICS} <= {"lower", "higher", "nearer_zero"}


def test_every_kind_names_a_class_that_follows_the_model_contract():
    for kind in MODEL_KINDS:
        assert issubclass(kind.model_class(), Model), kind.name
        assert kind.baseline == (kind.family == "reference")
        assert kind.capabilities <= set(catalogue.CAPABILITIES), kind.name
        if kind.per_series:
            assert issubclass(kind.model_class(per_series=True), Model)
        else:
            with pytest.raises(ValueError, match=kind.name):
                kind.model_class(per_series=True)


def test_the_spec_allows_exactly_the_catalogue():
    from pipeline.spec.schema import ModelChoice, Spec
    assert typing.get_args(ModelChoice.model_fields["kind"].annotation) == tuple(MODELS)
    assert typing.get_args(Spec.model_fields["select_by"].annotation) == SELECT_METRICS


def test_the_command_line_offers_every_metric():
    from pipeline import cli
    assert cli.PLOT_METRICS == [*METRIC_NAMES, SKILL]


def test_a_new_ledger_has_a_column_per_score(tmp_path):
    # the per-model and per-origin tables hold every score (the per-horizon table a chosen few)
    from pipeline.record.ledger.store import open_for_writing
    conn = open_for_writing(tmp_path / "ledger.sqlite")
    try:
        for table in ("model_metrics", "origin_metrics"):
            columns = {row[1] for row in conn.execute(f"PRAGMA table_info({table})")}
            assert set(SCORES) <= columns, table
    finally:
        conn.close()


# ------------------------------------------------------------ metric values against scikit-learn

def test_mae_equals_sklearn(pair):
    actual, predicted = pair
    assert METRIC_BY_NAME["mae"].compute(actual, predicted) == pytest.approx(
        skm.mean_absolute_error(actual, predicted), rel=1e-12)


def test_rmse_equals_the_root_of_sklearns_mean_squared_error(pair):
    actual, predicted = pair
    assert METRIC_BY_NAME["rmse"].compute(actual, predicted) == pytest.approx(
        np.sqrt(skm.mean_squared_error(actual, predicted)), rel=1e-12)


def test_mape_equals_sklearn_as_a_fraction(pair):
    actual, predicted = pair
    assert METRIC_BY_NAME["mape"].compute(actual, predicted) == pytest.approx(
        skm.mean_absolute_percentage_error(actual, predicted), rel=1e-12)


def test_r2_equals_sklearn(pair):
    actual, predicted = pair
    assert METRIC_BY_NAME["r2"].compute(actual, predicted) == pytest.approx(
        skm.r2_score(actual, predicted), rel=1e-12)


def test_bias_is_prediction_minus_actual(pair):
    actual, predicted = pair
    # the project's sign: error = prediction − actual (numpy as the reference)
    assert METRIC_BY_NAME["bias"].compute(actual, predicted) == pytest.approx(
        float(np.mean(predicted - actual)), rel=1e-12)
    assert METRIC_BY_NAME["bias"].compute([10.0, 10.0], [12.0, 13.0]) == pytest.approx(2.5)   # by hand: ((12 − 10) + (13 − 10)) / 2


def test_metrics_rank_a_better_forecast_the_way_they_say():
    actual = np.array([10.0, 20.0, 30.0, 40.0])
    close, far = actual + [1, -1, 1, -1], actual + [5, -5, 5, -5]
    for metric in METRICS:
        if metric.needs_time_order or metric.better == "nearer_zero":
            continue
        good, bad = metric.compute(actual, close), metric.compute(actual, far)
        assert (good < bad) if metric.better == "lower" else (good > bad), metric.name


# ------------------------------------------------------------ names and labels

@pytest.mark.parametrize(("name", "label"), [
    ("ols", "OLS"),
    ("ols_per_series", "OLS per series"),
    ("mean_baseline", "mean of the training months"),
    ("seasonal_naive", "same month last year"),
    ("calendar_month_mean", "calendar-month average"),
    ("trailing_mean", "trailing 12-month mean"),
    ("elastic_net", "elastic net"),
    ("drift_per_series", "drift_per_series"),   # drift is never fitted per series: shown as given
    ("not_a_model", "not_a_model"),
])
def test_model_label(name, label):
    assert model_label(name) == label


def test_model_kind_of_a_per_series_name():
    assert model_kind("ols_per_series") is MODELS["ols"]
    with pytest.raises(KeyError):
        model_kind("drift_per_series")
