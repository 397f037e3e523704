"""summary.md: the run's answer and evidence in Markdown, for a pull request or an e-mail."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.catalogue import SCORES
from pipeline.core.intervals import trusted_method
from pipeline.core.version import __version__
from pipeline.present.report import (
    CAUTIONS,
    NAMES_SHOWN,
    TABLE_ROWS,
    drivers_view,
    named,
    per_series_view,
    render_markdown,
)
from pipeline.spec import Spec
from pipeline.spec.wording import describe_validation
from pipeline.stages.evaluate import Evaluation
from pipeline.stages.forecast import ForecastResult


def _records(frame: pd.DataFrame) -> list[dict]:
    return frame.to_dict(orient="records")


def render_summary(spec: Spec, run_id: str, created: str, data_print: dict,
                   evaluation: Evaluation, forecast: ForecastResult,
                   fallbacks: pd.DataFrame | None = None) -> str:
    """Return the run's summary in Markdown (from its template): the answer first, the evidence after."""
    def some(frame: pd.DataFrame) -> pd.DataFrame | None:
        return frame if len(frame) else None

    comparison = evaluation.table[["model", *SCORES, "against_mean"]]
    recommended = forecast.forecast[forecast.forecast["model"] == evaluation.recommended]
    method = shown = None
    if len(recommended):
        method = trusted_method(evaluation.coverage, evaluation.recommended, recommended)
        shown = recommended[["period", "series", "forecast"]].copy()
        for level in ("80", "95"):
            shown[f"{level}% from"] = recommended[f"{method}_low_{level}"].to_numpy()
            shown[f"{level}% to"] = recommended[f"{method}_high_{level}"].to_numpy()
    scenarios = None
    if len(forecast.scenarios):
        scenarios = forecast.scenarios[forecast.scenarios["model"] == evaluation.recommended].drop(columns=["model"])
    series_count = len(data_print.get("series", []))
    drivers = drivers_view(forecast.coefficients, evaluation.recommended, series_count)
    terms = drivers["terms"]
    standard_errors = terms["standard_errors"].iloc[0] \
        if terms is not None and len(terms) and "standard_errors" in terms else None
    per_series = per_series_view(
        evaluation.by_series, _records(evaluation.series_summary), fallbacks,
        rows=_records(evaluation.table), recommended=evaluation.recommended,
        select_by=evaluation.select_by, level=spec.significance_level, series_count=series_count)
    diagnostics = None
    if len(forecast.diagnostics):
        diagnostics = forecast.diagnostics[["check", "value", "p_value", "threshold", "flagged", "reading"]].copy()
        diagnostics["flagged"] = np.where(diagnostics["flagged"], "FLAG", "")
    return render_markdown(
        "summary.md.j2", spec_name=spec.name, run_id=run_id, created=created,
        verdict=evaluation.verdict, recommended=evaluation.recommended,
        select_by=evaluation.select_by, beats=evaluation.beats_baseline,
        validation=describe_validation(spec), comparison=comparison,
        forecast=shown.head(TABLE_ROWS) if shown is not None else None,
        forecast_rows=len(shown) if shown is not None else 0, method=method,
        coverage=some(evaluation.coverage),
        scenarios=scenarios.head(TABLE_ROWS) if scenarios is not None else None,
        scenario_rows=len(scenarios) if scenarios is not None else 0,
        drivers=drivers, terms=terms if terms is not None and len(terms) else None,
        terms_model=drivers["model"] or "", standard_errors=standard_errors,
        per_series=per_series, series_names=named(data_print.get("series", [])),
        names_shown=NAMES_SHOWN,
        fit=some(forecast.fit_summary), diagnostics=diagnostics, influential=some(forecast.influential),
        notes=forecast.warnings + evaluation.notes, data=data_print, cautions=CAUTIONS,
        castline_version=__version__)
