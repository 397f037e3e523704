"""Predicting several months ahead when the target's own lags are drivers.

A lag of the target shorter than the months ahead would read an actual that
is not known at the origin. Two strategies, named by the spec's `multi_step`:

- direct: one fit per horizon h, using only the target lags that reach at
  least h months back (so every feature is known at the origin);
- recursive: one fit; months are predicted in order, each prediction fed back
  as the "known" target for the next month's lags.

Without target lags, or when every target lag reaches past the furthest month
predicted, one fit serves every horizon and both strategies agree.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.execution import IN_PROCESS, Executor
from pipeline.core.progress import QUIET, Progress
from pipeline.features.lags import with_predictions
from pipeline.features.plan import FeaturePlan, plan_features
from pipeline.models import TransformedTargetModel, make_model, prediction_spread
from pipeline.spec import LaggedColumn, ModelChoice, Spec


def target_lags_reach(spec: Spec) -> int | None:
    """Return the fewest months back any lag of the target reads, or None without such lags."""
    reaches = []
    for lagged in spec.drivers.lags:
        if lagged.column != spec.target:
            continue
        reaches += list(lagged.lags)
        if lagged.rolling_means or lagged.differences:
            reaches.append(lagged.start_lag)
    return min(reaches) if reaches else None


def needs_strategy(spec: Spec, furthest: int) -> bool:
    """Return True when some target lag is shorter than the furthest month predicted."""
    reach = target_lags_reach(spec)
    return reach is not None and reach < furthest


def spec_for_horizon(spec: Spec, horizon: int) -> Spec:
    """Return the spec with the target lags shorter than ``horizon`` months left out."""
    kept: list[LaggedColumn] = []
    for lagged in spec.drivers.lags:
        if lagged.column != spec.target:
            kept.append(lagged)
            continue
        lags = [lag for lag in lagged.lags if lag >= horizon]
        start = max(lagged.start_lag, horizon)
        if lags or lagged.rolling_means or lagged.differences:
            kept.append(lagged.model_copy(update={"lags": lags, "start_lag": start}))
    drivers = spec.drivers.model_copy(update={"lags": kept})
    return spec.model_copy(update={"drivers": drivers})   # carries the spec's origin


def _fit(spec: Spec, choice: ModelChoice, plan: FeaturePlan, train: pd.DataFrame, *,
         executor: Executor, progress: Progress):
    design, y = plan.training_design(train)
    model = make_model(choice, intercept=spec.intercept, target=plan.target_scale,
                       executor=executor, progress=progress)
    return model.fit(design, y)


def _with_se(model, design, predicted, *, fed_back: bool = False):
    """Return the predictions, their standard errors, residual df and centre (the prediction
    on the scale the model fits); NaN where there is no standard error. Predictions fed back
    as lags (recursive) of a model on a transformed target get none: the recursion on the
    transformed scale is not handled."""
    se, df, centre = prediction_spread(model, design)
    if se is not None and not (fed_back and isinstance(model, TransformedTargetModel)):
        return predicted, se, df, predicted if centre is None else centre
    return predicted, np.full(len(predicted), np.nan), np.nan, np.full(len(predicted), np.nan)


def predict_ahead(spec: Spec, choice: ModelChoice, train: pd.DataFrame, rows: pd.DataFrame,
                  origin: int, *, executor: Executor = IN_PROCESS, progress: Progress = QUIET
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, list]:
    """Return predictions, their standard errors, residual df and centres (the predictions
    on the scale the models fit, which the standard errors go with; NaN where none) for rows
    after the origin (a month ordinal), by the spec's multi-step strategy, and the fitted
    models used (a model per series fitted on ``executor``, reporting to ``progress``)."""
    ahead = rows[PERIOD].array.asi8 - origin
    predicted = np.full(len(rows), np.nan)
    se = np.full(len(rows), np.nan)
    df = np.full(len(rows), np.nan)
    centre = np.full(len(rows), np.nan)
    fitted = []
    if spec.multi_step == "direct":
        for horizon in np.unique(ahead):
            at = ahead == horizon
            horizon_spec = spec_for_horizon(spec, int(horizon))
            plan = plan_features(horizon_spec, SERIES).fit(train)
            model = _fit(horizon_spec, choice, plan, train, executor=executor, progress=progress)
            design = plan.transform(rows[at])
            predicted[at], se[at], df[at], centre[at] = _with_se(model, design, model.predict(design))
            fitted.append((int(horizon), plan, model))
        return predicted, se, df, centre, fitted
    plan = plan_features(spec, SERIES).fit(train)
    model = _fit(spec, choice, plan, train, executor=executor, progress=progress)
    known = None
    for month in np.unique(rows[PERIOD].array.asi8):
        at = (rows[PERIOD].array.asi8 == month)
        step = rows[at]
        design = plan.transform(step, known=known)
        values = model.predict(design)
        predicted[at], se[at], df[at], centre[at] = _with_se(model, design, values, fed_back=True)
        known = with_predictions(known, step, values, spec.target)
    fitted.append((0, plan, model))
    return predicted, se, df, centre, fitted


