"""The run folder: every file of a run, written by this module alone.

Everything is written into a hidden temporary folder beside the final one and
renamed into place at the end, so a failed or killed run leaves no visible
partial folder and never touches an earlier run.
"""

from __future__ import annotations

import functools
import json
import math
import secrets
import shutil
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd
import yaml

from pipeline.core.cadence import period_labels
from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.errors import UserError
from pipeline.core.paths import USER_ERRNOS, PathError, os_problem
from pipeline.core.version import __version__
from pipeline.features.future import drivers_ahead
from pipeline.record import ledger
from pipeline.record.json_text import json_text
from pipeline.record.ledger import write as ledger_write
from pipeline.record.model_file import StoredIntervals, model_document
from pipeline.record.safe_csv import write_csv, write_csvs
from pipeline.record.stored_steps import StoredSteps
from pipeline.spec import Spec
from pipeline.spec.wording import describe_validation, resolved_form
from pipeline.stages.backtest import BacktestResult
from pipeline.stages.check import CheckedData
from pipeline.stages.evaluate import Evaluation
from pipeline.stages.forecast import ForecastResult, fallback_table


@dataclass(frozen=True)
class RunFolder:
    """Where a run's artefacts landed."""

    run_id: str
    path: Path
    summary: Path
    report: Path
    notes: tuple[str, ...] = ()   # on earlier unfinished runs in the ledger left as they were


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
        "first_period": data.cadence.label(data.first_period),
        "last_period": data.cadence.label(data.last_period),
        "series": data.series_names,
        "problems_allowed": [
            {"check": p.check, "column": p.column, "row": p.row, "value": p.value, "count": p.count}
            for p in data.problems_allowed],
    }


# Renders the pages people read from a staged run folder's files alone: folder -> {file name: text}.
PageRenderer = Callable[[Path], dict[str, str]]


def write_page(folder: Path, name: str, text: str) -> Path:
    """Write a page (report.html, summary.md) into a run folder atomically; return its path."""
    target = Path(folder) / name
    partial = Path(folder) / f".{name}.partial"
    try:
        partial.write_text(text, encoding="utf-8")
        partial.replace(target)
    except BaseException as exc:
        partial.unlink(missing_ok=True)   # the page as it was stays; no stray file beside it
        if isinstance(exc, OSError):      # a folder in the way, no permission, a full disk
            raise os_problem(exc, target, "cannot write the page") from None
        raise
    return target


def _output_folder(spec: Spec, output_folder: Path | None) -> Path:
    """Return the folder run folders go into, created if need be."""
    folder = Path(output_folder) if output_folder else spec.output.folder
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise UserError(f"{folder}: the output folder exists and is not a folder") from None
    except OSError as exc:
        raise os_problem(exc, folder, "cannot create the output folder") from None
    return folder


def _metrics_document(spec: Spec, data: CheckedData, evaluation: Evaluation, forecast: ForecastResult,
                      *, run_id: str, created: str, validation: dict) -> dict:
    """Return metrics.json: the run's identity, every model's metrics and the answer."""
    return {
        "run_id": run_id, "created": created, "castline_version": __version__,
        "spec_name": spec.name, "validation": validation,
        "validation_text": describe_validation(spec),
        "package_versions": package_versions(),
        "recommended": evaluation.recommended, "verdict": evaluation.verdict,
        "models": _records(evaluation.table), "fit": _records(forecast.fit_summary),
        "notes": forecast.warnings + forecast.notes + evaluation.notes,
        "by_origin": _records(evaluation.by_origin),
        "by_horizon": _records(evaluation.by_horizon),
        # Per series, the metrics are in series.csv (at thousands of series they would make
        # this file tens of megabytes); here, what the report's Per series section shows.
        "series_count": len(data.series_names),
        "significance_level": spec.significance_level,
        "series_summary": _records(evaluation.series_summary),
        "beats_baseline": evaluation.beats_baseline,
        # The best simple rule, whether the recommended model beats it too, and whether the
        # validation allowed a test at all (a single holdout does not).
        "best_rule": evaluation.best_rule, "beats_best_rule": evaluation.beats_best_rule,
        "tested": evaluation.tested,
        "select_by": evaluation.select_by,
        "interval_coverage": _records(evaluation.coverage),
        "drivers_ahead": drivers_ahead(spec),
        # Had the estimated drivers been known ahead (ex-post); "models" above is ex-ante.
        "hindsight_models": _records(evaluation.hindsight),
        "diagnostics": _records(forecast.diagnostics),
    }


def _write_tables(staging: Path, spec: Spec, data: CheckedData, backtest: BacktestResult,
                  evaluation: Evaluation, forecast: ForecastResult) -> None:
    """Write the run's tables (CSV) and its model file into the staging folder."""
    history = data.history[[PERIOD, SERIES, spec.target]].rename(
        columns={PERIOD: "period", SERIES: "series", spec.target: "actual"}).assign(
        period=lambda t: period_labels(t["period"]))
    tables = [(backtest.predictions, "predictions.csv"), (forecast.coefficients, "coefficients.csv"),
              (forecast.forecast, "forecast.csv"), (forecast.diagnostics, "diagnostics.csv"),
              (forecast.vif, "vif.csv"), (forecast.influential, "influential_rows.csv"),
              (evaluation.coverage, "interval_coverage.csv"),
              (evaluation.coverage_detail, "interval_coverage_by.csv")]
    if len(forecast.scenarios):
        tables.append((forecast.scenarios, "scenarios.csv"))
    tables += [(history, "history.csv"), (forecast.residuals, "residuals.csv"),
               (fallback_table(backtest, forecast), "series_fallbacks.csv"), (evaluation.by_series, "series.csv")]
    write_csvs([(frame, staging / name) for frame, name in tables])
    document = model_document(spec, forecast.plan, forecast.fitted, package_versions(),
                              StoredIntervals.from_forecast(forecast),
                              StoredSteps.from_run(spec.multi_step, forecast.horizon_fits))
    (staging / "model.json").write_text(json_text(document, indent=1), encoding="utf-8")


def _asked(pages: PageRenderer, staging: Path) -> Callable[[], dict[str, str]]:
    """Return what gives the staged folder's pages: asked at once of a renderer that works beside
    this process (one with ``ask``, as the runner's forked helper), else rendered when called."""
    ask = getattr(pages, "ask", None)
    return ask(staging) if ask is not None else functools.partial(pages, staging)


def publish(spec: Spec, data: CheckedData, backtest: BacktestResult, evaluation: Evaluation,
            forecast: ForecastResult, *, output_folder: Path | None = None,
            realised: pd.DataFrame | None = None, track: dict | None = None,
            pages: PageRenderer, periods: Callable[[], pd.DataFrame] | None = None) -> RunFolder:
    """Write the run folder atomically, record it in the run ledger, and return where it landed.

    ``realised`` is the track record's table (earlier forecasts scored against this data) and
    ``track`` what else the track record found (track_record.json: ledger, earlier runs,
    warnings); ``pages`` renders the pages read by people (summary.md, report.html) from the
    files already written: castline's presentation layer, handed in by the runner.
    ``periods`` gives the data's month fingerprints when they were made ahead (the runner's
    forked copy); without it they are made here.
    """
    folder = _output_folder(spec, output_folder)
    now = datetime.now(UTC)
    run_id = new_run_id(now)
    created = now.isoformat(timespec="seconds")
    staging = folder / f".incomplete-{run_id}"
    if staging.resolve().parent != folder.resolve() or (folder / run_id).resolve().parent != folder.resolve():
        raise UserError(f"{folder}: run id {run_id!r} would place the run folder outside the "
                        "output folder")
    staging.mkdir()
    try:
        resolved = resolved_form(spec)
        resolved["output"]["folder"] = str(folder.resolve())
        resolved["output"]["ledger"] = str(ledger.ledger_path(spec, folder))
        (staging / "spec.yaml").write_text(
            yaml.safe_dump(resolved, sort_keys=False, allow_unicode=True), encoding="utf-8")
        (staging / "fingerprint.json").write_text(json.dumps(fingerprint(data), indent=2), encoding="utf-8")
        metrics = _metrics_document(spec, data, evaluation, forecast, run_id=run_id, created=created,
                                    validation=resolved["validation"])
        (staging / "metrics.json").write_text(json.dumps(metrics, indent=2), encoding="utf-8")
        _write_tables(staging, spec, data, backtest, evaluation, forecast)
        if realised is not None:
            write_csv(realised, staging / "realised.csv")
        if track is not None:
            (staging / "track_record.json").write_text(json.dumps(track, indent=2), encoding="utf-8")
        rendered = _asked(pages, staging)
        final = folder / run_id
        rows = ledger_write.run_rows(run_id=run_id, created=now, spec=spec, resolved=resolved, data=data,
                                     evaluation=evaluation, forecast=forecast, realised=realised,
                                     staging=staging, final=final,   # while the pages are drawn
                                     periods=periods() if periods is not None else None)
        for name, text in rendered().items():
            write_page(staging, name, text)
        notes = ledger_write.record_and_place(ledger.ledger_path(spec, folder), staging, final,
                                              run_id=run_id, rows=rows)
    except BaseException as exc:
        shutil.rmtree(staging, ignore_errors=True)
        doing = "cannot write the run folder; nothing was recorded"
        if isinstance(exc, OSError) and exc.errno in USER_ERRNOS:   # a full disk, a read-only folder
            raise os_problem(exc, folder, doing) from None
        if isinstance(exc, PathError) and exc.path.startswith(str(staging)):   # a page, in the hidden folder
            raise PathError(folder, exc.why, doing) from None
        raise
    return RunFolder(run_id=run_id, path=final, summary=final / "summary.md",
                     report=final / "report.html", notes=tuple(notes))
