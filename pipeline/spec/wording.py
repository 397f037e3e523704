"""The spec's choices in words, for the summary, the report and metrics.json."""

from __future__ import annotations

from pipeline.spec.schema import Spec


def describe_validation(spec: Spec) -> str:
    """Return the validation scheme in words."""
    v = spec.validation
    if v.method == "holdout":
        return f"holdout of the last {v.last_periods} months"
    if v.method == "rolling_origin":
        gap = f", a gap of {v.gap} months" if v.gap else ""
        limit = f", the last {v.origins} origins" if v.origins else ""
        return (f"rolling origin, {v.window} window of at least {v.min_train_periods} months, "
                f"horizon {v.horizon}{gap}, every {v.step} month(s){limit}")
    if v.method == "kfold":
        return f"{v.folds}-fold cross-validation, shuffled with seed {v.seed}"
    return f"{v.folds}-fold cross-validation grouped by {', '.join(v.group_by)}"
