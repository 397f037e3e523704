"""Models behind one small interface: ``fit(design, y)`` returns self, ``predict(design)``,
``coefficient_table()``.

A new model is a class with that interface, built by ``make_model`` from the
spec's model choice.
"""

from __future__ import annotations

from pipeline.models.baselines import Drift, LastValue, MeanBaseline, SeasonalNaive
from pipeline.models.ols import OLSModel, least_squares
from pipeline.models.penalised import HuberModel, PenalisedModel
from pipeline.models.per_series import PerSeriesOLS
from pipeline.models.transformed import TransformedTargetModel

BASELINES = {
    "mean_baseline": MeanBaseline,
    "last_value": LastValue,
    "seasonal_naive": SeasonalNaive,
    "drift": Drift,
}


def make_model(choice, *, intercept: bool = True, target=None):
    """Return a new, unfitted model for a spec's model choice (or a bare kind name).

    With a target transform other than none (``target``, the plan's ``target_scale``), a
    linear model is fitted on the transformed target and its predictions turned back into
    means; a baseline always works on the target as it is.
    """
    kind = choice if isinstance(choice, str) else choice.kind
    model = _new_model(choice, kind, intercept)
    if target is None or target.kind == "none" or kind in BASELINES:
        return model
    return TransformedTargetModel(model, target)


def _new_model(choice, kind: str, intercept: bool):
    if kind in BASELINES:
        return BASELINES[kind]()
    if kind == "ols":
        if getattr(choice, "per_series", False):
            return PerSeriesOLS(fit_intercept=intercept)
        return OLSModel(fit_intercept=intercept)
    if kind == "huber":
        return HuberModel(threshold=getattr(choice, "huber_threshold", 1.35))
    if kind in ("ridge", "lasso", "elastic_net"):
        return PenalisedModel(kind, penalties=getattr(choice, "penalties", None),
                              l1_share=getattr(choice, "l1_share", 0.5))
    raise ValueError(f"unknown model kind {kind!r}")


def prediction_spread(model, design) -> tuple:
    """Return the standard error of each row's prediction and its residual df (per row for a
    model per series), or (None, None) for a model that gives none."""
    if not hasattr(model, "prediction_se"):
        return None, None
    inner = getattr(model, "model", model)   # under a target transform, the model inside
    if hasattr(inner, "df_resid_for"):
        return model.prediction_se(design), inner.df_resid_for(design)
    return model.prediction_se(design), model.df_resid_


__all__ = ["PerSeriesOLS", "prediction_spread", "BASELINES", "Drift", "HuberModel", "LastValue", "MeanBaseline", "OLSModel",
           "PenalisedModel", "SeasonalNaive", "TransformedTargetModel", "least_squares", "make_model"]
