"""Publish: write the run folder. The only stage that writes anything.

Everything is written into a hidden temporary folder beside the final one and
renamed into place at the end, so a failed or killed run leaves no visible
partial folder and never touches an earlier run.
"""

from __future__ import annotations

import json
import math
import secrets
import shutil
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

from pipeline import __version__, ledger
from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.errors import UserError
from pipeline.core.intervals import trusted_method
from pipeline.report import (
    CAUTIONS,
    NAMES_SHOWN,
    TABLE_ROWS,
    build_report,
    drivers_view,
    named,
    per_series_view,
    render_markdown,
)
from pipeline.safe_csv import write_csv
from pipeline.spec import Spec
from pipeline.stages.backtest import BacktestResult, series_fallbacks
from pipeline.stages.check import CheckedData
from pipeline.stages.evaluate import Evaluation
from pipeline.stages.forecast import ForecastResult
from pipeline.stored_model import model_document


@dataclass(frozen=True)
class RunFolder:
    """Where a run's artefacts landed."""

    run_id: str
    path: Path
    summary: Path
    report: Path


def package_versions() -> dict[str, str]:
    """Return the versions of castline and the libraries its numbers depend on."""
    from importlib.metadata import PackageNotFoundError, version
    found = {"castline": __version__}
    for name in ("numpy", "pandas", "scipy", "scikit-learn", "statsmodels", "pandera", "pydantic"):
        try:
            found[name] = version(name)
        except PackageNotFoundError:
            found[name] = "not installed"
    return found


def new_run_id(now: datetime | None = None) -> str:
    """Return a run id that sorts by time and does not collide: UTC time plus random hex."""
    now = now or datetime.now(UTC)
    return f"run-{now:%Y%m%dT%H%M%S}{now.microsecond:06d}Z-{secrets.token_hex(3)}"


def _clean(value):
    """Return a JSON-safe value: NaN and infinities become null."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_clean(v) for v in value]
    if hasattr(value, "item"):
        return _clean(value.item())
    return value


def _records(frame: pd.DataFrame) -> list[dict]:
    return [_clean(row) for row in frame.to_dict(orient="records")]


def fingerprint(data: CheckedData) -> dict:
    """Return what identifies the input: its sha256, row counts and period range."""
    return {
        "file": str(data.raw.path),
        "sha256": data.raw.sha256,
        "rows": len(data.raw.frame),
        "history_rows": len(data.history),
        "future_rows": len(data.future),
        "first_period": str(data.first_period),
        "last_period": str(data.last_period),
        "series": data.series_names,
        "problems_allowed": [
            {"check": p.check, "column": p.column, "row": p.row, "value": p.value, "count": p.count}
            for p in data.problems_allowed],
    }


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


def render_summary(spec: Spec, run_id: str, created: str, data_print: dict,
                   evaluation: Evaluation, forecast: ForecastResult,
                   fallbacks: pd.DataFrame | None = None) -> str:
    """Return the run's summary in Markdown (from its template): the answer first, the evidence after."""
    def some(frame: pd.DataFrame) -> pd.DataFrame | None:
        return frame if len(frame) else None

    comparison = evaluation.table[["model", "n", "mae", "rmse", "mape", "smape", "wape", "mase", "r2",
                                   "bias", "skill_vs_mean", "against_mean"]]
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


def fallback_table(backtest: BacktestResult, forecast: ForecastResult) -> pd.DataFrame:
    """Return the series a model per series forecast by their own mean, in the backtest
    (windows too short for its terms) and in the final fit on all history."""
    tested = series_fallbacks(backtest.fallbacks).assign(stage="backtest")
    final = forecast.fallbacks
    final = pd.DataFrame({"model": final.get("model", []), "series": final.get("series", []),
                          "windows": 1, "first_window": "all history",
                          "fewest_rows": final.get("rows", []), "terms": final.get("terms", []),
                          "stage": "forecast"})
    columns = ["stage", "model", "series", "windows", "first_window", "fewest_rows", "terms"]
    frames = [frame[columns] for frame in (tested, final) if len(frame)]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=columns)


def publish(spec: Spec, data: CheckedData, backtest: BacktestResult, evaluation: Evaluation,
            forecast: ForecastResult, *, output_folder: Path | None = None,
            track: ledger.TrackRecord | None = None) -> RunFolder:
    """Write the run folder atomically, record it in the run ledger, and return where it landed."""
    folder = Path(output_folder) if output_folder else spec.output.folder
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise UserError(f"{folder}: the output folder exists and is not a folder") from None
    except OSError as exc:
        raise UserError(f"{folder}: cannot create the output folder: {exc.strerror}") from None
    now = datetime.now(UTC)
    run_id = new_run_id(now)
    created = now.isoformat(timespec="seconds")
    staging = folder / f".incomplete-{run_id}"
    if staging.resolve().parent != folder.resolve() or (folder / run_id).resolve().parent != folder.resolve():
        raise UserError(f"{folder}: run id {run_id!r} would place the run folder outside the "
                        "output folder")
    staging.mkdir()
    try:
        data_print = fingerprint(data)
        resolved = spec.model_dump(mode="json")
        resolved["output"]["folder"] = str(folder.resolve())
        resolved["output"]["ledger"] = str(ledger.ledger_path(spec, folder))
        (staging / "spec.yaml").write_text(
            yaml.safe_dump(resolved, sort_keys=False, allow_unicode=True), encoding="utf-8")
        (staging / "fingerprint.json").write_text(json.dumps(data_print, indent=2), encoding="utf-8")
        metrics = {
            "run_id": run_id, "created": created, "castline_version": __version__,
            "spec_name": spec.name, "validation": resolved["validation"],
            "validation_text": describe_validation(spec),
            "package_versions": package_versions(),
            "recommended": evaluation.recommended, "verdict": evaluation.verdict,
            "models": _records(evaluation.table), "fit": _records(forecast.fit_summary),
            "notes": forecast.warnings + evaluation.notes,
        }
        metrics["by_origin"] = _records(evaluation.by_origin)
        metrics["by_horizon"] = _records(evaluation.by_horizon)
        # Per series, the metrics are in series.csv (at thousands of series they would make
        # this file tens of megabytes); here, what the report's Per series section shows.
        metrics["series_count"] = len(data.series_names)
        metrics["significance_level"] = spec.significance_level
        metrics["series_summary"] = _records(evaluation.series_summary)
        metrics["beats_baseline"] = evaluation.beats_baseline
        metrics["select_by"] = evaluation.select_by
        metrics["interval_coverage"] = _records(evaluation.coverage)
        metrics["diagnostics"] = _records(forecast.diagnostics)
        (staging / "metrics.json").write_text(json.dumps(metrics, indent=2), encoding="utf-8")
        write_csv(backtest.predictions, staging / "predictions.csv")
        write_csv(forecast.coefficients, staging / "coefficients.csv")
        write_csv(forecast.forecast, staging / "forecast.csv")
        write_csv(forecast.diagnostics, staging / "diagnostics.csv")
        write_csv(forecast.vif, staging / "vif.csv")
        write_csv(forecast.influential, staging / "influential_rows.csv")
        write_csv(evaluation.coverage, staging / "interval_coverage.csv")
        if len(forecast.scenarios):
            write_csv(forecast.scenarios, staging / "scenarios.csv")
        document = model_document(spec, forecast.plan, forecast.fitted, package_versions())
        (staging / "model.json").write_text(json.dumps(document, indent=1), encoding="utf-8")
        write_csv(data.history[[PERIOD, SERIES, spec.target]].rename(
            columns={PERIOD: "period", SERIES: "series", spec.target: "actual"}).assign(
            period=lambda t: t["period"].astype(str)), staging / "history.csv")
        write_csv(forecast.residuals, staging / "residuals.csv")
        fallbacks = fallback_table(backtest, forecast)
        write_csv(fallbacks, staging / "series_fallbacks.csv")
        write_csv(evaluation.by_series, staging / "series.csv")
        if track is not None:
            write_csv(track.realised, staging / "realised.csv")
        (staging / "summary.md").write_text(ledger.with_track_record(
            render_summary(spec, run_id, created, data_print, evaluation, forecast, fallbacks), track),
            encoding="utf-8")
        build_report(staging)
        final = folder / run_id
        ledger.record_and_place(ledger.ledger_path(spec, folder), staging, final, run_id=run_id,
                                created=now, spec=spec, resolved=resolved, data=data,
                                evaluation=evaluation, forecast=forecast, track=track)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return RunFolder(run_id=run_id, path=final, summary=final / "summary.md",
                     report=final / "report.html")
