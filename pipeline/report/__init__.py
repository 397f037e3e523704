"""The comparison report: one self-contained HTML page built from a run folder's files alone.

``build_report(folder)`` reads the artefacts a run wrote (never refits) and
writes ``report.html``: the answer first, then the evidence. Everything is
inline (styles, pictures as data URIs), so the page makes no network request;
every value from the data is escaped by the template engine.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import jinja2
import pandas as pd

from ..errors import UserError
from ..intervals import trusted_method
from . import plots

CAUTIONS = [
    "A forecast is an estimate, not a promise: the backtest shows how far off such estimates "
    "have been, and the next months can be further off.",
    "The analytic intervals assume errors that are independent, normal and of constant spread; "
    "the empirical intervals assume the future errs as the backtest did. Neither covers a change "
    "the history does not hold.",
    "The models learn from the history in the input file only. A structural change (a new "
    "product, a new competitor, a new way of pricing) is not in these numbers.",
    "The comparison rests on the validation windows of this run; other windows can rank the "
    "models differently, and a significance test is only as good as its assumptions.",
]
REQUIRED = ["metrics.json", "fingerprint.json", "spec.yaml", "predictions.csv", "forecast.csv",
            "coefficients.csv", "history.csv"]
LOWER_IS_BETTER = ("mae", "rmse", "mape", "smape", "wape", "mase")
HIGHER_IS_BETTER = ("r2", "skill_vs_mean")
COMPARISON = ["model", "n", "mae", "rmse", "mape", "smape", "wape", "mase", "r2", "bias",
              "skill_vs_mean", "p_value", "against_mean"]


def format_number(value) -> str:
    """Return a number as the report shows it: four significant digits, n/a when missing."""
    if value is None or value == "":
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:,}"
    if isinstance(value, float):
        if not math.isfinite(value):
            return "n/a"
        if value != 0 and abs(value) < 0.001:
            return f"{value:.3g}"
        return f"{value:,.4g}" if abs(value) >= 1e4 else f"{value:.4g}"
    return str(value)


def _environment() -> jinja2.Environment:
    environment = jinja2.Environment(
        loader=jinja2.PackageLoader("pipeline.report", "templates"),
        autoescape=jinja2.select_autoescape(["html", "j2"], default=True),
        undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    environment.filters["num"] = format_number
    environment.globals["zip"] = zip
    return environment


def markdown_table(frame: pd.DataFrame) -> str:
    """Return a table in Markdown, numbers as the report shows them, pipes escaped."""
    def cell(value) -> str:
        return format_number(value).replace("|", "\\|").replace("\n", " ")
    header = "| " + " | ".join(cell(c) for c in frame.columns) + " |"
    rule = "|" + "|".join(" --- " for _ in frame.columns) + "|"
    body = ["| " + " | ".join(cell(v) for v in row) + " |" for row in frame.itertuples(index=False)]
    return "\n".join([header, rule, *body])


def render_markdown(template: str, **context) -> str:
    """Return a Markdown template rendered (Markdown is not HTML: tables escape their pipes)."""
    environment = jinja2.Environment(loader=jinja2.PackageLoader("pipeline.report", "templates"),
                                     autoescape=False, undefined=jinja2.StrictUndefined,
                                     trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True)
    environment.filters["table"] = markdown_table
    return environment.get_template(template).render(**context)


def _read_csv(folder: Path, name: str) -> pd.DataFrame | None:
    path = folder / name
    if not path.exists() or path.stat().st_size == 0:
        return None
    try:
        frame = pd.read_csv(path, keep_default_na=True)
    except pd.errors.EmptyDataError:
        return None
    return frame if len(frame.columns) else None


def _best(rows: list[dict]) -> dict[str, str]:
    best = {}
    for column in LOWER_IS_BETTER + HIGHER_IS_BETTER + ("bias",):
        values = [(row[column], row["model"]) for row in rows
                  if isinstance(row.get(column), (int, float)) and row.get(column) is not None
                  and math.isfinite(row[column])]
        if not values:
            continue
        if column in LOWER_IS_BETTER:
            best[column] = min(values)[1]
        elif column == "bias":
            best[column] = min(values, key=lambda v: abs(v[0]))[1]
        else:
            best[column] = max(values)[1]
    return best


def render_report(folder: Path) -> str:
    """Return the report's HTML, from the run folder's files alone."""
    folder = Path(folder)
    missing = [name for name in REQUIRED if not (folder / name).exists()]
    if not folder.is_dir():
        raise UserError(f"{folder}: no such run folder")
    if missing:
        raise UserError(f"{folder}: not a complete castline run folder (missing {', '.join(missing)})")
    try:
        metrics = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))
        data = json.loads((folder / "fingerprint.json").read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise UserError(f"{folder}: a run file cannot be read ({exc})") from None
    predictions = _read_csv(folder, "predictions.csv")
    forecast = _read_csv(folder, "forecast.csv")
    history = _read_csv(folder, "history.csv")
    coefficients = _read_csv(folder, "coefficients.csv")
    coverage = _read_csv(folder, "interval_coverage.csv")
    scenarios = _read_csv(folder, "scenarios.csv")
    residuals = _read_csv(folder, "residuals.csv")
    diagnostics = _read_csv(folder, "diagnostics.csv")
    influential = _read_csv(folder, "influential_rows.csv")
    for frame in (predictions, forecast, history, scenarios, residuals):
        for column in ("series", "period", "origin", "model", "scenario"):
            if frame is not None and column in frame.columns:
                frame[column] = frame[column].astype(str)

    rows = metrics["models"]
    recommended = metrics["recommended"]
    chosen = next((row for row in rows if row["model"] == recommended), {})
    backtest_pictures = [plots.backtest_picture(history, predictions)]
    by_origin = pd.DataFrame(metrics.get("by_origin", []))
    by_horizon = pd.DataFrame(metrics.get("by_horizon", []))
    if len(by_origin) and by_origin["origin"].nunique() > 1:
        backtest_pictures.append(plots.error_picture(by_origin, "origin", "origin"))
    if len(by_horizon) and by_horizon["horizon"].nunique() > 1:
        backtest_pictures.append(plots.error_picture(by_horizon, "horizon", "months ahead"))

    forecast_picture = forecast_table = None
    if forecast is not None and len(forecast):
        own = forecast[forecast["model"] == recommended]
        method = trusted_method(coverage, recommended, forecast[forecast["model"] == recommended])
        forecast_picture = plots.forecast_picture(history, forecast, recommended, method, scenarios)
        forecast_table = own[["period", "series", "forecast"]].copy()
        for level in ("80", "95"):
            forecast_table[f"{level}% from"] = own[f"{method}_low_{level}"].to_numpy()
            forecast_table[f"{level}% to"] = own[f"{method}_high_{level}"].to_numpy()
    linear = "ols" if coefficients is not None and (coefficients["model"] == "ols").any() else None
    if coefficients is not None and recommended in set(coefficients["model"]) and \
            recommended not in ("mean_baseline", "last_value", "seasonal_naive", "drift"):
        linear = recommended
    terms = coefficients[coefficients["model"] == linear].drop(columns=["model"]).dropna(axis=1, how="all") \
        if linear else None
    kind = terms["standard_errors"].iloc[0] if terms is not None and "standard_errors" in terms else None
    note = (f"{linear} fitted on all history" + (f", {kind} standard errors" if kind else "")
            + "; the 95% interval is for each coefficient.") if linear else ""
    return _environment().get_template("report.html.j2").render(
        spec_name=metrics.get("spec_name", ""), run_id=metrics["run_id"], created=metrics["created"],
        validation=metrics.get("validation_text", metrics.get("validation", {}).get("method", "")),
        verdict=metrics["verdict"], beats=metrics.get("beats_baseline", False), recommended=recommended,
        recommended_skill=chosen.get("skill_vs_mean") if recommended != "mean_baseline" else None,
        recommended_p=chosen.get("p_value") if recommended != "mean_baseline" else None,
        comparison=rows, comparison_columns=[c for c in COMPARISON if any(c in r for r in rows)],
        best=_best(rows), backtest_pictures=backtest_pictures,
        coverage=coverage, forecast_picture=forecast_picture, forecast_table=forecast_table,
        scenarios=scenarios[scenarios["model"] == recommended].drop(columns=["model"])
        if scenarios is not None and len(scenarios) else None,
        coefficient_picture=plots.coefficient_picture(terms) if terms is not None and len(terms) else None,
        coefficients=terms, coefficients_note=note,
        residual_pictures=plots.residual_pictures(residuals) if residuals is not None and len(residuals) else [],
        diagnostics=diagnostics.to_dict(orient="records") if diagnostics is not None else [],
        influential=influential, data=data, notes=metrics.get("notes", []),
        castline_version=metrics.get("castline_version", ""),
        versions=metrics.get("package_versions", {}),
        spec_text=(folder / "spec.yaml").read_text(encoding="utf-8"), cautions=CAUTIONS)


def build_report(folder: str | Path) -> Path:
    """Write report.html into a run folder from its files alone and return its path."""
    folder = Path(folder)
    html = render_report(folder)
    target = folder / "report.html"
    partial = folder / ".report.html.partial"
    partial.write_text(html, encoding="utf-8")
    partial.replace(target)
    return target
