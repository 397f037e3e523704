"""Models, each following one contract (``models.contract.Model``): baselines, OLS and its
inference, OLS per series, penalised and robust fits, and the transformed-target wrapper.

``make_model`` builds the model a spec's choice names, from the catalogue
(``pipeline.core.catalogue``): a new kind is a new module here and one catalogue entry.
"""

from __future__ import annotations

from pipeline.core.catalogue import BASELINE_KINDS, MODELS
from pipeline.core.execution import IN_PROCESS, Executor
from pipeline.core.progress import QUIET, Progress
from pipeline.models.baselines import (
    CalendarMonthMean,
    Drift,
    LastValue,
    MeanBaseline,
    SeasonalNaive,
    TrailingMean,
)
from pipeline.models.contract import Model
from pipeline.models.ols import OLSModel, least_squares
from pipeline.models.per_series import PerSeriesOLS
from pipeline.models.transformed import TransformedTargetModel


def __getattr__(name: str):
    # The penalised fits load scikit-learn: only when a spec asks for one (the catalogue
    # names their classes, so make_model imports them on first use too).
    if name in ("HuberModel", "PenalisedModel"):
        from pipeline.models import penalised
        return getattr(penalised, name)
    raise AttributeError(f"module 'pipeline.models' has no attribute {name!r}")


def make_model(choice, *, intercept: bool = True, target=None, executor: Executor = IN_PROCESS,
               progress: Progress = QUIET) -> Model:
    """Return a new, unfitted model for a spec's model choice (or a bare kind name).

    With a target transform other than none (``target``, the plan's ``target_scale``), a
    linear model is fitted on the transformed target and its predictions turned back into
    means; a baseline always works on the target as it is. A model per series runs its
    tasks on ``executor`` and counts the series it fitted on ``progress``.

    Raises ValueError for a kind the catalogue does not hold.
    """
    name = choice if isinstance(choice, str) else choice.kind
    if name not in MODELS:
        raise ValueError(f"unknown model kind {name!r}")
    kind = MODELS[name]
    per_series = bool(getattr(choice, "per_series", False))
    model = kind.model_class(per_series).from_choice(choice, fit_intercept=intercept,
                                                     executor=executor, progress=progress)
    if target is None or target.kind == "none" or kind.baseline:
        return model
    return TransformedTargetModel(model, target)


def prediction_spread(model: Model, design) -> tuple:
    """Return (se, df, centre): the standard error of each row's prediction, its residual df
    (per row for a model per series) and the prediction they go with, on the scale the
    model fits; (None, None, None) for a model that gives no standard error.

    ``centre`` is the prediction on the transformed scale for a model fitted on a
    transformed target (``TransformedTargetModel.centre``), whose se and df are on that
    scale too; for any other model it is None, and the caller uses the prediction itself.
    """
    se = model.prediction_se(design)
    if se is None:
        return None, None, None
    centre = model.centre(design) if isinstance(model, TransformedTargetModel) else None
    return se, model.residual_df(design), centre


__all__ = ["BASELINE_KINDS", "CalendarMonthMean", "Drift", "HuberModel", "LastValue", "MeanBaseline", "Model",
           "OLSModel", "PenalisedModel", "PerSeriesOLS", "SeasonalNaive", "TrailingMean",
           "TransformedTargetModel", "least_squares", "make_model", "prediction_spread"]
