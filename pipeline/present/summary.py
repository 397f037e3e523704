"""summary.md: the run's answer and evidence in Markdown, for a pull request or an e-mail.

Rendered from the run folder's files alone (``present.run_files``), as the report is.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.catalogue import SCORES
from pipeline.core.intervals import shortfall_warning
from pipeline.present.ahead import ahead_view
from pipeline.present.report import (
    CAUTIONS,
    NAMES_SHOWN,
    TABLE_ROWS,
    drivers_view,
    named,
    per_series_view,
    render_markdown,
    stated_forecast,
)
from pipeline.present.run_files import RunFiles
from pipeline.present.track_record import with_track_record


def _some(frame: pd.DataFrame | None) -> pd.DataFrame | None:
    return frame if frame is not None and len(frame) else None


def _diagnostics(files: RunFiles) -> pd.DataFrame | None:
    found = _some(files.table("diagnostics.csv"))
    if found is None:
        return None
    shown = found[["check", "value", "p_value", "threshold", "flagged", "reading"]].copy()
    shown["flagged"] = np.where(shown["flagged"].astype(bool), "FLAG", "")
    return shown


def render_summary(files: RunFiles) -> str:
    """Return the run's summary in Markdown (from its template): the answer first, the evidence
    after, and the track record of earlier runs when the run folder holds one."""
    metrics, data_print = files.metrics, files.fingerprint
    recommended, rows = metrics["recommended"], metrics["models"]
    coverage = files.table("interval_coverage.csv")
    shown, method = stated_forecast(files.table("forecast.csv"), coverage, recommended)
    if shown is not None and not len(shown):
        shown = method = None
    scenarios = _some(files.table("scenarios.csv"))
    if scenarios is not None:
        scenarios = scenarios[scenarios["model"] == recommended].drop(columns=["model"])
    series_count = len(data_print.get("series", []))
    drivers = drivers_view(files.table("coefficients.csv"), recommended, series_count,
                           files.target_transforms(), (files.series_columns(), data_print.get("series", [])))
    terms = drivers["terms"]
    standard_errors = terms["standard_errors"].iloc[0] \
        if terms is not None and len(terms) and "standard_errors" in terms else None
    per_series = per_series_view(
        files.table("series.csv"), metrics.get("series_summary", []), files.table("series_fallbacks.csv"),
        rows=rows, recommended=recommended, select_by=metrics["select_by"],
        level=metrics["significance_level"], series_count=series_count)
    ahead = ahead_view(metrics)
    summary = render_markdown(
        "summary.md.j2", spec_name=metrics["spec_name"], run_id=metrics["run_id"],
        created=metrics["created"], verdict=metrics["verdict"], recommended=recommended,
        select_by=metrics["select_by"], beats=metrics["beats_baseline"], ahead=ahead,
        tested=metrics.get("tested", True),
        validation=metrics["validation_text"],
        comparison=pd.DataFrame(rows)[["model", *SCORES, "against_mean"]],
        forecast=shown.head(TABLE_ROWS) if shown is not None else None,
        forecast_rows=len(shown) if shown is not None else 0, method=method,
        interval_warning=shortfall_warning(coverage, recommended, method),
        coverage=_some(coverage),
        scenarios=scenarios.head(TABLE_ROWS) if scenarios is not None else None,
        scenario_rows=len(scenarios) if scenarios is not None else 0,
        drivers=drivers, terms=terms if terms is not None and len(terms) else None,
        terms_model=drivers["model"] or "", standard_errors=standard_errors,
        per_series=per_series, series_names=named(data_print.get("series", [])),
        names_shown=NAMES_SHOWN, fit=_some(pd.DataFrame(metrics.get("fit", []))),
        diagnostics=_diagnostics(files), influential=_some(files.table("influential_rows.csv")),
        notes=metrics.get("notes", []), data=data_print, cautions=CAUTIONS,
        castline_version=metrics.get("castline_version", ""))
    return with_track_record(summary, files.track, files.table("realised.csv"))
