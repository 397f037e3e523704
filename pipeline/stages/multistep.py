"""Predicting several months ahead when the target's own lags are drivers.

A lag of the target shorter than the months ahead would read an actual that
is not known at the origin. Two strategies, named by the spec's `multi_step`:

- direct: one fit per horizon h, using only the target lags that reach at
  least h months back (so every feature is known at the origin);
- recursive: one fit; months are predicted in order, each prediction fed back
  as the "known" target for the next month's lags.

Without target lags, or when every target lag reaches past the furthest month
predicted, one fit serves every horizon and both strategies agree.

The standard errors. Under the direct strategy each horizon's fit has residuals h
months ahead, so its own prediction standard error is the h-step one. Under the
recursive strategy the model's one-step standard error is too narrow beyond the
first month: each fed-back prediction carries its own error into the months after
it. The model is linear in its features and the target's lags, rolling means and
differences are linear in the target's past values, so the recursion is a linear
autoregression with known drivers, and its error h months after the first month
predicted is

    e_h = ε_h + Σ_{k=1}^{h-1} ψ_k ε_{h-k},   Var(e_h) = σ² (1 + Σ_{k=1}^{h-1} ψ_k²),

ψ_k being the impulse response: how much the prediction k months later moves per
unit change of the value fed back (the standard h-step forecast error variance of
a linear autoregression; Box & Jenkins, "Time Series Analysis", ch. 5, and
Hamilton 1994, "Time Series Analysis", ch. 4, cited from memory). The recursion
is the same at every month, so one extra pass finds every ψ_k: it repeats the
recursion with each series' first predicted value raised by δ (the value's own
size, at least 1, so the differences keep their precision) and reads ψ_k as the
change of the prediction k months later, divided by δ. Each row's standard error
is then sqrt(se_h² + σ² Σ_{k≤h-1} ψ_k²): σ is the fit's residual SD (per series for a
model per series) and se_h the model's own one-step standard error at that month's
design, se_h² = σ²(1 + x'(X'X)⁻¹x), which adds the coefficients' uncertainty there.

What it leaves out: the coefficients' uncertainty as it is carried through ψ, so
with few months per fit the intervals far ahead stay somewhat narrow (a model per
series on 59 months of an AR(1) with φ = 0.8, as measured when this was written:
74% of actuals inside the 80% interval 12 months ahead and 91% inside the 95% one,
where one OLS over 2,000 such series gives 80% and 95%). Only months that follow
one another from a series' first month predicted share one ψ; after a month missing
in between, a row has no analytic standard error (NaN). A model with no standard
error (penalised or robust fits) gives none either way, nor does a model on a log
or log1p target: its recursion feeds back smeared means through the transform,
which is not linear, and its standard error would be on the transformed scale (NaN
here too; the empirical intervals still apply).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pandas as pd

from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.design import Design
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


def _in_series_order(rows: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return the rows' months, series codes and the order sorting them by series, then month."""
    months = rows[PERIOD].array.asi8
    codes = pd.factorize(rows[SERIES])[0]
    return months, codes, np.lexsort((months, codes))


def impulse_responses(spec: Spec, plan: FeaturePlan, model, rows: pd.DataFrame,
                      predicted: np.ndarray) -> np.ndarray:
    """Return, per row, ψ_k: how much its prediction moves per unit raise of the value fed back
    for its series' first month predicted, k months before it (0 in that first month); NaN
    from a month missing in the series' months onwards.

    One pass of the recursion (``predicted``: the recursion's own predictions of ``rows``),
    each series' first fed-back value raised by δ = max(|value|, 1); the model is linear in
    the fed-back values, so the change divided by δ is ψ_k to rounding.
    """
    months, codes, order = _in_series_order(rows)
    by_series = pd.Series(months[order]).groupby(codes[order])
    first = np.empty(len(rows), np.int64)
    first[order] = by_series.transform("min").to_numpy()
    missing = np.empty(len(rows), bool)
    step_back = by_series.diff().fillna(1).to_numpy()   # months since the series' row before
    missing[order] = pd.Series(step_back != 1).groupby(codes[order]).cummax().to_numpy()
    starting = months == first
    delta = np.zeros(len(rows))
    delta[starting] = np.maximum(np.abs(predicted[starting]), 1.0)
    delta = pd.Series(delta).groupby(codes).transform("max").to_numpy()   # to every month
    response = np.full(len(rows), np.nan)
    known = None
    for month in np.unique(months):
        at = months == month
        step = rows[at]
        nudged = model.predict(plan.transform(step, known=known))
        response[at] = (nudged - predicted[at]) / delta[at]
        raised = nudged + np.where(starting[at], delta[at], 0.0)
        known = with_predictions(known, step, raised, spec.target)
    return np.where(missing, np.nan, response)


def month_by_month(plan: FeaturePlan, model, rows: pd.DataFrame, target: str,
                   known: pd.DataFrame | None = None) -> Iterator[tuple[np.ndarray, Design, np.ndarray]]:
    """Yield, for each month of the rows in order, which rows are that month's, their design
    and the model's predictions, each month's predictions fed back as the target's values
    for the later months' lags (the recursive strategy). ``known``: rows whose target is
    known beyond the plan's window (actuals), read by the lags before any prediction is.

    The run's forecast and a stored model (``castline forecast``) both predict this way.
    """
    months = rows[PERIOD].array.asi8
    for month in np.unique(months):
        at = months == month
        step = rows[at]
        design = plan.transform(step, known=known)
        values = model.predict(design)
        yield at, design, values
        known = with_predictions(known, step, values, target)


def _recursive(spec: Spec, plan: FeaturePlan, model, rows: pd.DataFrame, predicted: np.ndarray,
               se: np.ndarray, df: np.ndarray, *, spread: bool) -> None:
    """Predict the rows month by month, each prediction fed back, filling ``predicted`` and,
    with ``spread`` and a model that gives standard errors, ``se`` (the h-step ones) and
    ``df``."""
    sigma = np.full(len(rows), np.nan)
    given = spread
    for at, design, values in month_by_month(plan, model, rows, spec.target):
        predicted[at] = values
        if given:
            step_se, step_df, _ = prediction_spread(model, design)
            own_sd = model.residual_sd(design) if step_se is not None else None
            given = own_sd is not None
            if given:
                se[at], df[at], sigma[at] = step_se, step_df, own_sd
    if not given:
        se[:], df[:] = np.nan, np.nan
        return
    psi = impulse_responses(spec, plan, model, rows, predicted)
    _, codes, order = _in_series_order(rows)
    carried = np.empty(len(rows))   # Σ_{k≤h-1} ψ_k², NaN after a month missing
    carried[order] = pd.Series(psi[order] ** 2).groupby(codes[order]).cumsum().to_numpy()
    se[:] = np.sqrt(se ** 2 + sigma ** 2 * carried)


def predict_ahead(spec: Spec, choice: ModelChoice, train: pd.DataFrame, rows: pd.DataFrame,
                  origin: int, *, executor: Executor = IN_PROCESS, progress: Progress = QUIET,
                  spread: bool = True) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, list]:
    """Return predictions, their standard errors, residual df and centres (the predictions
    on the scale the models fit, which the standard errors go with; NaN where none) for rows
    after the origin (a month ordinal), by the spec's multi-step strategy, and the fitted
    models used (a model per series fitted on ``executor``, reporting to ``progress``).

    Under the recursive strategy the standard errors are the h-step ones (see the module's
    docstring), NaN for a model that gives none or fits a transformed target. With
    ``spread`` False (a caller that wants only the predictions) the recursive strategy
    skips the extra pass those need and leaves se and df NaN.
    """
    ahead = rows[PERIOD].array.asi8 - origin   # origin: a month ordinal, or one per row
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
    _recursive(spec, plan, model, rows, predicted, se, df, spread=spread)
    centre = np.where(np.isfinite(se), predicted, np.nan)   # no transform where se is given
    fitted.append((0, plan, model))
    return predicted, se, df, centre, fitted
