"""summary.md: the run's answer and evidence in Markdown, for a pull request or an e-mail.

Rendered from the run folder's files alone (``present.run_files``), as the report is.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.intervals import shortfall_warning
from pipeline.present.ahead import ahead_view
from pipeline.present.first_screen import (
    CAUTION,
    NEXT_MONTHS,
    all_series_total,
    next_months,
    pictured_series,
)
from pipeline.present.report import (
    NAMES_SHOWN,
    TABLE_ROWS,
    cautions,
    comparison_parts,
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
    shown = found[["check", "value", "p_value", "threshold", "reading"]].copy()
    # A flagged check's reading starts "FLAG: ", as the report writes it.
    shown["reading"] = np.where(found["flagged"].astype(bool), "FLAG: ", "") + shown["reading"].astype(str)
    return shown


def comparison_tables(rows: list[dict], select_by: str) -> list[pd.DataFrame]:
    """Return the comparison as the report shows it: two tables headed in words (the headline
    measures led by select_by, then the others), models named by the catalogue."""
    tables = []
    for columns in comparison_parts(rows, select_by):
        if columns:
            # markdown_table heads the columns in words and names the models by the catalogue.
            tables.append(pd.DataFrame(rows).reindex(columns=columns))
    return tables


def next_months_view(shown: pd.DataFrame | None, history: pd.DataFrame | None) -> dict | None:
    """Return the report's first-screen numbers for the summary: the largest series' next months
    with their intervals, and every series' total (None when there is nothing to forecast)."""
    if shown is None or history is None:
        return None
    names = list(dict.fromkeys(shown["series"]))
    series = pictured_series(history, shown)
    total = all_series_total(shown) if len(names) > 1 else None
    return {"series": series, "series_count": len(names), "table": next_months(shown, series),
            "total": total, "months": NEXT_MONTHS, "caution": CAUTION}


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
    cadence = files.cadence()
    summary = render_markdown(
        "summary.md.j2", spec_name=metrics["spec_name"], run_id=metrics["run_id"],
        created=metrics["created"], verdict=metrics["verdict"], recommended=recommended,
        select_by=metrics["select_by"], beats=metrics["beats_baseline"], ahead=ahead,
        tested=metrics.get("tested", True),
        validation=metrics["validation_text"],
        comparison=comparison_tables(rows, metrics["select_by"]),
        next_months=next_months_view(shown, files.table("history.csv")),
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
        notes=metrics.get("notes", []), data=data_print, cautions=cautions(cadence),
        castline_version=metrics.get("castline_version", ""), period=cadence)
    return with_track_record(summary, files.track, files.table("realised.csv"), cadence)
