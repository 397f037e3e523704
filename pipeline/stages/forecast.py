"""Forecast: refit every model on all history and predict the future rows of the input."""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from ..models import make_model
from ..spec import Spec
from .check import PERIOD, SERIES, CheckedData
from .features import plan_features


@dataclass(frozen=True)
class ForecastResult:
    """The forecasts, the final fit's coefficients and what the fit reported about itself."""

    forecast: pd.DataFrame
    coefficients: pd.DataFrame
    fit_summary: pd.DataFrame
    warnings: list[str] = field(default_factory=list)


def make_forecast(spec: Spec, data: CheckedData) -> ForecastResult:
    """Return each model's forecast of the future rows, fitted on all history."""
    plan = plan_features(spec, SERIES).fit(data.history)
    future = data.future.sort_values([PERIOD, SERIES], kind="stable")
    history_design, y = plan.training_design(data.history)
    future_design = plan.transform(future)
    forecasts, coefficients, summaries = [], [], []
    warnings = [*history_design.notes, *future_design.notes]
    for kind in spec.models:
        model = plan.for_target(make_model(kind, intercept=spec.intercept), kind)
        model.fit(history_design, y)
        if hasattr(model, "describe"):
            warnings.append(f"{kind}: {model.describe()}")
        if len(future):
            forecasts.append(pd.DataFrame({
                "period": future[PERIOD].astype(str).to_numpy(),
                "horizon": (future[PERIOD] - data.last_period).apply(lambda o: o.n).to_numpy(),
                "series": future[SERIES].to_numpy(),
                "model": kind,
                "forecast": model.predict(future_design),
            }))
        table = model.coefficient_table()
        table.insert(0, "model", kind)
        coefficients.append(table)
        fit = getattr(model, "fit_", None)
        if fit is not None:
            summaries.append({"model": kind, "rows": len(y), "terms": len(fit.names),
                              "rank": fit.rank, "r2": fit.r2, "adj_r2": fit.adj_r2,
                              "resid_sd": fit.resid_sd, "condition_number": fit.condition_number,
                              "r2_kind": "centred" if fit.centered_r2 else "uncentred (no intercept)"})
            warnings += [f"{kind}: {item.describe()}" for item in fit.dropped]
    forecast = pd.concat(forecasts, ignore_index=True) if forecasts else pd.DataFrame(
        columns=["period", "horizon", "series", "model", "forecast"])
    return ForecastResult(forecast=forecast, coefficients=pd.concat(coefficients, ignore_index=True),
                          fit_summary=pd.DataFrame(summaries), warnings=warnings)
