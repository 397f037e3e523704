"""The spec's choices in words, for the summary, the report and metrics.json."""

from __future__ import annotations

from pipeline.core.cadence import cadence_named
from pipeline.spec.calendar_keys import CalendarFeatures
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


def resolved_form(spec: Spec) -> dict:
    """Return the spec with every default filled in, as the run folder's spec.yaml and the
    ledger hold it. Keys added with quarters and weeks are left out at their defaults (the
    calendar's season, holidays and events; the name of forecast's count not given), so a
    spec that does not use them resolves, and hashes, as it did before they were added."""
    resolved = spec.model_dump(mode="json")
    calendar = resolved["drivers"].get("calendar")
    if calendar is not None:
        for key in CalendarFeatures.STORED_ONLY_WHEN_GIVEN:
            if calendar.get(key) in (None, [], {}):
                calendar.pop(key, None)
    if resolved.get("forecast") is not None:
        resolved["forecast"] = {key: value for key, value in resolved["forecast"].items() if value is not None}
    return resolved
