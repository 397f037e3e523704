"""The pages' block on the drivers in the months ahead: which the backtest scored at their
actual values (known ahead: a plan must supply them), which castline estimated after each
origin (and by which rule), and what estimating them cost each model (ex-ante against
ex-post), from metrics.json's ``drivers_ahead`` and ``hindsight_models``.

Run folders written before castline told the two kinds apart lack both keys: their pages
have no such block.
"""

from __future__ import annotations

import math

import pandas as pd

from pipeline.core.catalogue import BASELINE, METRIC_BY_NAME
from pipeline.core.formatting import MISSING
from pipeline.features.future import RULE_WORDS
from pipeline.spec import TIME_ORDERED  # only schemes with an origin estimate as the forecast does


def _and(names: list[str]) -> str:
    return " and ".join([", ".join(names[:-1]), names[-1]]) if len(names) > 1 else "".join(names)


def _finite(value) -> float | None:
    return float(value) if isinstance(value, (int, float)) and math.isfinite(value) else None


def _cost_rows(metrics: dict, metric_name: str) -> list[dict]:
    """Return, per model but the mean of the training months, its selection metric as scored (with the
    estimates) and had the estimated drivers been known, and the relative cost."""
    after = {row["model"]: row.get(metric_name) for row in metrics.get("hindsight_models") or []}
    rows = []
    for row in metrics["models"]:
        if row["model"] == BASELINE or row["model"] not in after:
            continue
        ante, post = _finite(row.get(metric_name)), _finite(after[row["model"]])
        cost = (ante - post) / post if ante is not None and post else None
        rows.append({"model": row["model"], "ante": ante, "post": post, "cost": cost,
                     "cost_text": f"{cost:+.0%}" if cost is not None else MISSING})
    return rows


def ahead_view(metrics: dict) -> dict | None:
    """Return what the block shows, or None when there is nothing to show: a run folder
    older than ``drivers_ahead``, or a run with no driver a plan must supply or castline
    estimates (none at all, or calendar terms alone, which the date gives)."""
    ahead = metrics.get("drivers_ahead")
    if not ahead:
        return None
    given, estimated = list(ahead.get("given", [])), dict(ahead.get("estimated", {}))
    if not given and not estimated:
        return None
    method = metrics.get("validation", {}).get("method", "")
    metric_name = metrics.get("select_by", "mae")
    label = METRIC_BY_NAME[metric_name].label if metric_name in METRIC_BY_NAME else metric_name.upper()
    rows = _cost_rows(metrics, metric_name) if estimated else []
    table = pd.DataFrame({
        "model": [r["model"] for r in rows],
        f"{label} as scored": [r["ante"] for r in rows],
        f"{label} if known": [r["post"] for r in rows],
        "cost": [r["cost_text"] for r in rows]}) if rows else None
    return {
        "given": _and(given), "calendar": bool(ahead.get("calendar")),
        "estimated": [{"column": column, "rule": rule, "words": RULE_WORDS.get(rule, rule)}
                      for column, rule in estimated.items()],
        "estimated_names": _and(list(estimated)),
        # k-fold folds have no origin: the backtest scored every driver at its actual value.
        "backtest_estimates": bool(estimated) and method in TIME_ORDERED,
        "label": label, "rows": rows, "table": table,
    }
