"""Backtest: fit each model on a training window, predict the periods after it.

Validation by holdout: the last N months of history are held out; every model
and the feature plan are fitted on the months before them only.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from ..models import make_model
from ..spec import Spec
from .check import PERIOD, SERIES, CheckedData
from .features import plan_features


@dataclass(frozen=True)
class Split:
    """One training window and the periods predicted from it."""

    origin: pd.Period          # the last period of the training window
    train: pd.DataFrame
    test: pd.DataFrame


@dataclass(frozen=True)
class BacktestResult:
    """Out-of-sample predictions: one row per origin, period, series and model."""

    predictions: pd.DataFrame
    splits: list[Split]


def holdout_split(spec: Spec, data: CheckedData) -> Split:
    """Return the split holding out the spec's last N months of history."""
    held_out = spec.validation.last_periods
    periods = sorted(data.history[PERIOD].unique())
    if held_out >= len(periods):
        raise spec.error(("validation", "last_periods"),
                         f"holding out {held_out} months leaves nothing to fit on: the history has "
                         f"{len(periods)} months, so at most {len(periods) - 1} can be held out")
    origin = periods[-held_out - 1]
    train = data.history[data.history[PERIOD] <= origin]
    test = data.history[data.history[PERIOD] > origin]
    terms = len(plan_features(spec, SERIES).fit(train).get_feature_names_out()) + int(spec.intercept)
    if "ols" in spec.models and len(train) <= terms:
        raise spec.error(("validation", "last_periods"),
                         f"the training window keeps {len(train)} rows, too few for the {terms} "
                         f"terms of the linear model; hold out fewer months")
    return Split(origin=origin, train=train, test=test)


def run_backtest(spec: Spec, data: CheckedData) -> BacktestResult:
    """Return every model's out-of-sample predictions on the spec's validation split."""
    split = holdout_split(spec, data)
    split = Split(origin=split.origin, train=split.train,
                  test=split.test.sort_values([PERIOD, SERIES], kind="stable"))
    plan = plan_features(spec, SERIES).fit(split.train)
    # Rows whose lags are unavailable are left out of the fit; the plan remembers the
    # window, so the test rows' lags never read an actual after the origin.
    train_design, y_train = plan.training_design(split.train)
    test_design = plan.transform(split.test)
    horizon = (split.test[PERIOD] - split.origin).apply(lambda offset: offset.n).to_numpy()
    frames = []
    for kind in spec.models:
        model = plan.for_target(make_model(kind, intercept=spec.intercept), kind)
        model.fit(train_design, y_train)
        frames.append(pd.DataFrame({
            "origin": str(split.origin),
            "period": split.test[PERIOD].astype(str).to_numpy(),
            "horizon": horizon,
            "series": split.test[SERIES].to_numpy(),
            "model": kind,
            "actual": split.test[spec.target].to_numpy(float),
            "prediction": model.predict(test_design),
        }))
    return BacktestResult(predictions=pd.concat(frames, ignore_index=True), splits=[split])
