"""The answer in words: the recommended model against the mean of the training months (the user's
question) and against the best simple rule, with the Holm-adjusted p-values, or why the
validation gave none."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from pipeline.core import metrics
from pipeline.core.catalogue import BASELINE, model_kind, model_label
from pipeline.core.formatting import format_number, p_phrase


def is_simple_rule(name: str) -> bool:
    """Return whether a model is a simple reference rule (the mean of the training months among them)."""
    try:
        return model_kind(name).baseline
    except KeyError:
        return False


def adjusted_for(table: pd.DataFrame, column: str = "p_holm", what: str = "models") -> str:
    """Return ", Holm-adjusted for the K models compared" when more than one was."""
    compared = int(np.isfinite(table[column].to_numpy(float)).sum())
    return f", Holm-adjusted for the {compared} {what} compared" if compared > 1 else ""


def p_text(p: float) -> str:
    """Return a p-value in words: "p = 0.037" (two significant digits), "p < 0.001"."""
    return p_phrase(p)


@dataclass(frozen=True)
class Answer:
    verdict: str
    beats: bool          # significantly better than the mean of the training months
    beats_rule: bool     # ... and than the best simple rule


def answer(table: pd.DataFrame, recommended: str, best_rule: str, select_by: str, level: float,
            refusal: str | None, cadence=None) -> Answer:
    """Return the answer in words: against the mean of the training months (the user's question) and the
    best simple rule, with the Holm-adjusted p-values, or why there are none. The models' labels name
    the periods by ``cadence`` (a Cadence: "the mean of the training quarters"; months when None)."""
    metric = select_by.upper()
    value = table.set_index("model")[select_by].astype(float)
    base, own = value[BASELINE], value[recommended]
    name = model_label(recommended, cadence)
    rule_name = model_label(best_rule, cadence)
    mean = "the " + model_label(BASELINE, cadence)
    lower = metrics.skill(own, base)
    said = f"({format_number(own)} against {format_number(base)})"
    if recommended == BASELINE:
        return Answer(f"No model or simple rule beats {mean} out of sample on {metric}: "
                       "the plain average of each series' history is as good a forecast here.",
                       False, False)
    row = table.set_index("model").loc[recommended]
    p = float(row["p_holm"])
    beats = refusal is None and np.isfinite(p) and p < level
    against = f"{p_text(p)}{adjusted_for(table)}"
    untested = f" {refusal[0].upper()}{refusal[1:]}." if refusal else ""
    if is_simple_rule(recommended):
        if refusal:
            lead = f"its {metric} is {lower:.0%} lower than that of {mean} {said}"
        elif beats:
            lead = f"its {metric} is {lower:.0%} lower than that of {mean} {said}; {against}"
        else:
            lead = (f"its {metric} is {lower:.0%} lower than that of {mean} {said}, though by "
                    f"the significance test that may be luck ({against})")
        return Answer(f"The best forecast here is a simple rule, the {name}: {lead}. No linear "
                       f"model does better.{untested}", beats, False)
    rule = value[best_rule]
    over_rule = metrics.skill(own, rule)
    p_rule = float(row["p_best_rule_holm"])
    beats_rule = beats and (best_rule == BASELINE or (np.isfinite(p_rule) and p_rule < level))
    rule_said = f"{p_text(p_rule)}{adjusted_for(table, 'p_best_rule_holm', 'linear models')}"
    no_rule = f"; no simple rule beats {mean}" if best_rule == BASELINE else ""
    if refusal:
        versus = (f" and {over_rule:.0%} lower than the best simple rule's (the {rule_name}, "
                  f"{format_number(rule)})" if best_rule != BASELINE else "")
        return Answer(f"{name} has the lowest {metric}: {lower:.0%} lower than that of {mean} "
                       f"{said}{versus}{no_rule}.{untested}", False, False)
    if not beats:
        versus = (f", nor than the best simple rule, the {rule_name} ({format_number(rule)})"
                  if best_rule != BASELINE else no_rule)
        return Answer(f"{name} has the lowest {metric} ({format_number(own)} against "
                       f"{format_number(base)} for {mean}), but it is no better than {mean} by the significance "
                       f"test ({against}): the difference may be luck{versus}.", False, False)
    if best_rule == BASELINE:
        return Answer(f"{name} beats {mean} out of sample ({against}): its {metric} is "
                       f"{lower:.1%} lower {said}{no_rule}.", True, True)
    if beats_rule:
        return Answer(f"{name} beats {mean} by {lower:.0%} and the best simple rule, the "
                       f"{rule_name}, by {over_rule:.0%} on {metric} out of sample ({format_number(own)} "
                       f"against {format_number(base)} and {format_number(rule)}; {against}; against the "
                       f"rule {rule_said}).",
                       True, True)
    return Answer(f"{name} beats {mean} by {lower:.0%} on {metric} out of sample "
                   f"({against}), but not clearly the best simple rule, the {rule_name}: its "
                   f"{metric} is {over_rule:.0%} lower than that rule's ({format_number(own)} "
                   f"against {format_number(rule)}), which may be luck ({rule_said}). The simple rule "
                   "forecasts nearly as well.", True, False)
