"""The spec's choices in words, for the summary, the report and metrics.json."""

from __future__ import annotations

from pipeline.core.cadence import cadence_named
from pipeline.spec.schema import Spec


def describe_validation(spec: Spec) -> str:
    """Return the validation scheme in words."""
    v = spec.validation
    plural = cadence_named(spec.input.period).plural
    if v.method == "holdout":
        return f"holdout of the last {v.last_periods} {plural}"
    if v.method == "rolling_origin":
        gap = f", a gap of {v.gap} {plural}" if v.gap else ""
        limit = f", the last {v.origins} origins" if v.origins else ""
        return (f"rolling origin, {v.window} window of at least {v.min_train_periods} {plural}, "
                f"horizon {v.horizon}{gap}, every {v.step} {plural[:-1]}(s){limit}")
    if v.method == "kfold":
        return f"{v.folds}-fold cross-validation, shuffled with seed {v.seed}"
    return f"{v.folds}-fold cross-validation grouped by {', '.join(v.group_by)}"
