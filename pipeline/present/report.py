"""The comparison report: one self-contained HTML page built from a run folder's files alone.

``build_report(folder)`` reads the artefacts a run wrote (never refits) and
writes ``report.html``: the answer first, then the evidence. A run of many
series stays readable: the pictures show a few series (named in their
captions), long tables show their first rows and name the CSV that holds the
rest, the drivers of a model per series are summarised across series, and the
Per series section summarises series.csv. Everything is
inline (styles, pictures as data URIs), so the page makes no network request;
every value from the data is escaped by the template engine.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.cadence import MONTH, Cadence
from pipeline.core.catalogue import (
    BASELINE_KINDS,
    HIGHER_IS_BETTER,
    LOWER_IS_BETTER,
    SCORES,
    SKILL,
    model_kind,
    model_label,
)
from pipeline.core.formatting import MISSING, format_number, format_percent
from pipeline.core.intervals import SIZE_GROUPS, percent, shortfall_warning, trusted_method
from pipeline.present import plots
from pipeline.present.ahead import ahead_view
from pipeline.present.first_screen import first_screen_view
from pipeline.present.picture_jobs import PictureJobs
from pipeline.present.run_files import RunFiles, load_run_files
from pipeline.present.templating import (  # noqa: F401  (compile_templates: the runner's helper names it here)
    compile_templates,
    page_environment,
    render_markdown,
)
from pipeline.present.track_record import track_record_view

CAUTIONS = [
    "A forecast is an estimate, not a promise: the backtest shows how far off such estimates "
    "have been, and the next {plural} can be further off.",
    "The analytic intervals assume errors that are independent, normal and of constant spread; "
    "the empirical intervals assume the future errs as the backtest did. Neither covers a change "
    "the history does not hold.",
    "The models learn from the history in the input file only. A structural change (a new "
    "product, a new competitor, a new way of pricing) is not in these numbers.",
    "The comparison rests on the validation windows of this run; other windows can rank the "
    "models differently, and a significance test is only as good as its assumptions.",
]
COMPARISON = ["model", *SCORES, "interval_score_95", "skill_vs_best_rule", "p_holm", "against_mean"]
# The comparison's first table: how far off, the skill and the test, led by the select_by metric;
# the other measures follow in a second table, so neither needs a sideways scroll.
HEADLINE = ["mae", "rmse", "mase", "bias", SKILL, "skill_vs_best_rule", "p_holm", "against_mean"]


def comparison_parts(rows: list[dict], select_by: str) -> tuple[list[str], list[str]]:
    """Return the columns of the comparison's two tables (each led by the model and the rows
    scored): the headline measures, led by the select_by metric; and the others."""
    present = [c for c in COMPARISON if any(c in r for r in rows)]
    headline = [select_by, *[c for c in HEADLINE if c != select_by]]
    first = ["model", "n", *[c for c in headline if c in present]]
    rest = ["model", *[c for c in present if c not in first]]
    return first, rest if len(rest) > 1 else []
# With more series than this, pictures show a few series and the drivers are summarised
# across series; the run folder's CSV files keep every row.
MANY_SERIES = plots.MAX_PANELS
TABLE_ROWS = 50        # rows of a long table shown before pointing to its CSV file
NAMES_SHOWN = 20       # series named in a list before "and N more"
WORST_SHOWN = 5        # worst series pictured in the Per series section
SIGNIFICANT = 0.05     # a coefficient's p-value counted as small in the summary across series


def named(names, shown: int = NAMES_SHOWN) -> str:
    """Return names joined by commas, the first ``shown`` of them and how many more."""
    names = [str(n) for n in names]
    more = len(names) - shown
    return ", ".join(names[:shown]) + (f" and {more:,} more" if more > 0 else "")


def share_text(count: int, total: int) -> str:
    """Return "12 of 30 (40.0%)"."""
    return f"{count:,} of {total:,} ({count / total:.1%})" if total else "none"


def _is_series_effect(terms: pd.Series) -> pd.Series:
    # Models over all series name a series' own level "series: NAME" and its own slope
    # "DRIVER × series: NAME" (pipeline.stages.features).
    text = terms.astype(str)
    return text.str.startswith("series: ") | text.str.contains(" × series: ", regex=False)


def _effect_group(term: str) -> str:
    if term.startswith("series: "):
        return "series level (each series against the first)"
    if " × series: " not in term:   # a 0/1 column of a column that names the series
        return term.split(": ", 1)[0] + ": series level (each series against the reference level)"
    return term.split(" × series: ", 1)[0] + " × series (each series' own slope)"


def series_levels(terms: pd.Series, columns=(), names=()) -> pd.Series:
    """Return which terms are one series' own level: "series: NAME", or a 0/1 column of a
    column that names the series ("region: North" when region names the series; with several
    such columns a series is named "A / B", fingerprint.json's series)."""
    text = terms.astype(str)
    found = text.str.startswith("series: ")
    parts = [str(name).split(" / ") for name in names]
    for at, column in enumerate(columns):
        values = {part[at] for part in parts if len(part) == len(columns)}
        found |= text.isin({f"{column}: {value}" for value in values})
    return found


def levels_summary(terms: pd.DataFrame, logged: bool, label: str) -> dict | None:
    """Return what the Drivers section says of the series' own levels (terms that
    ``series_levels`` finds): how many, their median and range with the series at each end, in
    the section's scale (percent changes for a log target)."""
    names = terms["term"].astype(str).str.split(": ", n=1).str[1].to_numpy()
    values = percent_change(terms["estimate"]) if logged else terms["estimate"].to_numpy(float)
    kept = np.isfinite(values)
    names, values = names[kept], values[kept]
    if not len(values):
        return None
    low, high = int(np.argmin(values)), int(np.argmax(values))
    unit = "%" if logged else ""
    text = (f"{len(values):,} series levels, each against the reference series, as the "
            f"{label.replace(' per unit of the driver', '')}: median {format_number(float(np.median(values)))}{unit}, "
            f"from {format_number(float(values[low]))}{unit} ({names[low]}) to "
            f"{format_number(float(values[high]))}{unit} ({names[high]}); {int((values > 0).sum()):,} above zero.")
    return {"count": len(values), "values": values, "names": names, "median": float(np.median(values)),
            "low": float(values[low]), "high": float(values[high]), "text": text,
            "label": label.replace(" per unit of the driver", "")}


LOG_KINDS = ("log", "log1p")
PERCENT = "% change per unit"   # 100·(exp(b) − 1): a coefficient of a log target as a percent change


def percent_change(estimate) -> np.ndarray:
    """Return coefficients of a model of log(target) as percent changes of the target per unit of
    their term: 100·(exp(b) − 1) (a coefficient of log1p(target): of 1 + target)."""
    return 100 * np.expm1(np.asarray(estimate, dtype=float))


def effect_label(kind: str | None, target: str) -> str:
    """Return what a coefficient of a model fitted on the target transformed by ``kind`` measures."""
    target = target or "the target"
    if kind == "log":
        return f"% change in {target} per unit of the driver"
    if kind == "log1p":
        return f"% change in 1 + {target} per unit of the driver"
    return "effect on the target per unit of the driver"


def spread_across_series(terms: pd.DataFrame, groups: pd.Series, percent: bool = False) -> pd.DataFrame:
    """Return, per group of coefficients (in order of first appearance), how many series have an
    estimate, the median estimate and its quartiles, and the share of those with p < 0.05; with
    ``percent`` (a log target) also the median and quartiles of the percent changes."""
    frame = pd.DataFrame({"term": groups.to_numpy(), "estimate": terms["estimate"].to_numpy(float),
                          "p": terms["p_value"].to_numpy(float) if "p_value" in terms
                          else np.full(len(terms), np.nan)})
    frame = frame[np.isfinite(frame["estimate"])]
    if percent:   # only a log target's estimates: a level's estimate can be too large for exp
        frame["percent"] = percent_change(frame["estimate"])
    grouped = frame.groupby("term", sort=False)
    columns = {"series": grouped["estimate"].size()}
    if percent:
        columns.update({"median " + PERCENT: grouped["percent"].median(),
                        "% 25%": grouped["percent"].quantile(0.25), "% 75%": grouped["percent"].quantile(0.75)})
    columns.update({
        "median estimate": grouped["estimate"].median(),
        "25%": grouped["estimate"].quantile(0.25), "75%": grouped["estimate"].quantile(0.75),
        f"share p < {SIGNIFICANT:g}": grouped["p"].apply(
            lambda p: float((p[np.isfinite(p)] < SIGNIFICANT).mean()) if np.isfinite(p).any()
            else float("nan")),
    })
    return pd.DataFrame(columns).reset_index()


def _with_percent(terms: pd.DataFrame) -> pd.DataFrame:
    """Return the terms of a model of a log target with their percent changes (and those of the
    95% interval's ends) after the term; the intercept is a level, not a change, and has none."""
    shown = terms.copy()
    level = shown["term"].astype(str) == "intercept"
    at = list(shown.columns).index("term") + 1
    for offset, (name, source) in enumerate(((PERCENT, "estimate"), ("% from (95%)", "low_95"),
                                             ("% to (95%)", "high_95"))):
        if source in shown:
            values = percent_change(shown[source])
            values[level.to_numpy()] = np.nan
            shown.insert(at + offset, name, values)
    return shown


def drivers_view(coefficients: pd.DataFrame | None, recommended: str, series_count: int,
                 scale: tuple[str, dict[str, str]] = ("", {}), series: tuple = ((), ())) -> dict:
    """Return what the Drivers section shows: the linear model described, its terms (at most
    TABLE_ROWS), and with many series a summary across series instead of a row per series.
    ``scale`` is the target's name and each model's target transform (RunFiles.target_transforms):
    for a model of log(target) the terms carry their percent changes too. ``series`` is the
    columns that name a series and the series' names: with many series, each series' own level
    (``series_levels``) is summarised (``levels_summary``), never listed."""
    view = {"model": None, "terms": None, "rows": 0, "spread": None, "per_series": False, "note": "",
            "label": effect_label(None, ""), "levels": None, "scale_note": ""}
    if coefficients is None or not len(coefficients):
        return view
    models = set(coefficients["model"])
    linear = "ols" if "ols" in models else None
    if recommended in models and recommended not in BASELINE_KINDS:
        linear = recommended
    if linear is None:
        return view
    terms = coefficients[coefficients["model"] == linear].drop(columns=["model"]).dropna(axis=1, how="all")
    kind = terms["standard_errors"].iloc[0] if "standard_errors" in terms else None
    target, transforms = scale
    logged = transforms.get(linear) in LOG_KINDS
    view["model"] = linear
    view["label"] = effect_label(transforms.get(linear), target)
    if "series" in terms and terms["series"].notna().any() and terms["series"].nunique() <= plots.MAX_LISTED:
        view["series_terms"] = _with_percent(terms) if logged else terms   # the picture names each series
    view["scale_note"] = (f"The model is of {transforms[linear]}({target or 'the target'}): an estimate "
                          f"is on that scale, and {PERCENT} = 100·(exp(estimate) − 1) is the "
                          f"{view['label']} (all else equal)." if logged else "")
    view["note"] = (f"{model_label(linear)} fitted on all history" + (f", {kind} standard errors" if kind else "")
                    + "; the 95% interval is for each coefficient." + (" " + view["scale_note"] if logged else ""))
    many = series_count > MANY_SERIES
    if many and "series" in terms and terms["series"].notna().any():
        # One fit per series: a row per series and term would bury the drivers.
        view.update(per_series=True, spread=spread_across_series(terms, terms["term"], logged), terms=None,
                    note=f"{model_label(linear)} fitted on each series' own history: per term, the median "
                         "estimate across series, its quartiles, and the share of series whose "
                         f"p-value is below {SIGNIFICANT:g}; coefficients.csv holds every series' "
                         "row." + (f" The model is of {transforms[linear]}({target or 'the target'}): "
                                   f"the {PERCENT} columns are 100·(exp(estimate) − 1), the "
                                   f"{view['label']}." if logged else ""))
        return view
    if many:
        levels = series_levels(terms["term"], *series)
        effects = _is_series_effect(terms["term"]) | levels
        if levels.any():
            view["levels"] = levels_summary(terms[levels], logged, view["label"])
        if effects.any():
            view["spread"] = spread_across_series(terms[effects], terms.loc[effects, "term"].map(_effect_group),
                                                  logged)
            terms = terms[~effects]
    view["rows"] = len(terms)
    view["terms"] = (_with_percent(terms) if logged else terms).head(TABLE_ROWS)
    return view


def featured_model(rows: list[dict], candidates: list[str], shown: list[str], recommended: str,
                   select_by: str) -> str | None:
    """Return the model whose worst series are pictured: the recommended one, or when that is the
    mean baseline, the shown model with the best overall score."""
    if recommended in candidates:
        return recommended
    scores = {row["model"]: row.get(select_by) for row in rows}
    ranked = [m for m in shown if isinstance(scores.get(m), (int, float)) and math.isfinite(scores[m])]
    return min(ranked, key=lambda m: scores[m]) if ranked else (shown[0] if shown else None)


def per_series_view(series_table: pd.DataFrame | None, summary: list[dict], fallbacks: pd.DataFrame | None,
                    *, rows: list[dict], recommended: str, select_by: str, level: float,
                    series_count: int) -> dict | None:
    """Return what the Per series section shows, or None for a run of one series (or of the
    mean baseline alone, which has nothing to compare per series).

    The models summarised are the linear ones (the naive baselines when there is none);
    the worst series are those of the featured model (``featured_model``).
    """
    if series_count <= 1 or series_table is None or not len(series_table):
        return None
    others = [m for m in dict.fromkeys(series_table["model"]) if m != "mean_baseline"]
    models = [m for m in others if m not in BASELINE_KINDS] or others
    if not models:
        return None
    by_model = {row["model"]: row for row in summary}
    table = pd.DataFrame([{
        "model": m, "series": by_model[m]["series"],
        "beats the mean": share_text(by_model[m]["beats"], by_model[m]["series"]),
        "significantly": share_text(by_model[m]["beats_significantly"], by_model[m]["series"]),
        "skill 25%": by_model[m]["skill_q25"], "median skill": by_model[m]["skill_median"],
        "skill 75%": by_model[m]["skill_q75"]} for m in models if m in by_model])
    featured = featured_model(rows, others, models, recommended, select_by)
    own = series_table[(series_table["model"] == featured) & series_table["skill_vs_mean"].notna()]
    worst = own.sort_values("skill_vs_mean", kind="stable").head(WORST_SHOWN)
    base_mae = series_table[series_table["model"] == "mean_baseline"].set_index("series")["mae"]
    worst = pd.DataFrame({"series": worst["series"].astype(str).to_numpy(),
                          "skill_vs_mean": worst["skill_vs_mean"].to_numpy(float),
                          "p_value": worst["p_value"].to_numpy(float),
                          "mae": worst["mae"].to_numpy(float),
                          "baseline_mae": worst["series"].map(base_mae).to_numpy(float)})
    fell_back = None
    if fallbacks is not None and len(fallbacks):
        names = list(dict.fromkeys(fallbacks["series"].astype(str)))
        counts = fallbacks.groupby(["model", "stage"], sort=False)["series"].nunique()
        fell_back = {"count": len(names), "names": named(names),
                     "how": "; ".join(f"{model_label(model)}: {n:,} in the {'backtest' if stage == 'backtest' else 'final fit'}"
                                      for (model, stage), n in counts.items())}
    return {"count": series_count, "models": models, "summary": table, "featured": featured,
            "worst": worst, "fallbacks": fell_back, "level": level,
            "series_rows": len(series_table)}


def _best(rows: list[dict]) -> dict[str, str]:
    best = {}
    for column in LOWER_IS_BETTER + HIGHER_IS_BETTER + ("bias", "interval_score_95"):
        values = [(row[column], row["model"]) for row in rows
                  if isinstance(row.get(column), (int, float)) and row.get(column) is not None
                  and math.isfinite(row[column])]
        if not values:
            continue
        if column in LOWER_IS_BETTER or column == "interval_score_95":
            best[column] = min(values)[1]
        elif column == "bias":
            best[column] = min(values, key=lambda v: abs(v[0]))[1]
        else:
            best[column] = max(values)[1]
    return best


def stated_forecast(forecast: pd.DataFrame | None, coverage: pd.DataFrame | None,
                    recommended: str) -> tuple[pd.DataFrame | None, str | None]:
    """Return the recommended model's forecast with the 80% and 95% intervals the pages state,
    and which intervals those are (the kind that held closest in the backtest); (None, None)
    when there is nothing to forecast."""
    if forecast is None or not len(forecast):
        return None, None
    own = forecast[forecast["model"] == recommended]
    method = trusted_method(coverage, recommended, own)
    shown = own[["period", "series", "forecast"]].copy()
    for level in ("80", "95"):
        shown[f"{level}% from"] = own[f"{method}_low_{level}"].to_numpy()
        shown[f"{level}% to"] = own[f"{method}_high_{level}"].to_numpy()
    return shown, method


def cautions(cadence: Cadence = MONTH) -> list[str]:
    """Return the Cautions section's lines, in the words of the run's spacing of periods."""
    return [line.format(plural=cadence.plural) for line in CAUTIONS]


def held_by_view(detail: pd.DataFrame | None, recommended: str, method: str | None,
                 cadence: Cadence = MONTH) -> dict | None:
    """Return the stated interval's backtest coverage for the recommended model by months ahead
    and by size of series, one small table each (levels as columns, shares as percents), or
    None when the run folder has no such breakdown."""
    if detail is None or not len(detail) or method is None:
        return None
    own = detail[(detail["model"] == recommended) & (detail["method"] == method)]
    tables = []
    for by in ("months ahead", "size of series"):
        part = own[own["by"] == by]
        if not len(part):
            continue
        part = part.assign(group=part["group"].astype(str))
        order = list(part["group"].unique())
        order = sorted(order, key=float) if by == "months ahead" else [g for g in SIZE_GROUPS if g in order]
        # The file names the groups of horizons "months ahead" whatever the spacing; the page, in its words.
        shown = pd.DataFrame({f"{cadence.plural} ahead" if by == "months ahead" else by: order})
        for level in sorted(part["level"].unique()):   # a level's first share per group, levels as columns
            held = part[part["level"] == level].dropna(subset="coverage").drop_duplicates("group")
            shares = held.set_index("group")["coverage"].reindex(order)
            shown[f"{percent(level)}% held"] = [format_percent(v) if pd.notna(v) else MISSING for v in shares]
        shown["actuals"] = part.groupby("group")["n"].max().reindex(order).to_numpy()
        tables.append(shown)
    return {"method": method, "tables": tables} if tables else None


def pictured_models(models: list[str], kept: tuple) -> list[str]:
    """Return the models the pictures draw: every one but the simple rules other than the
    mean baseline and those ``kept`` (the best rule, the recommended model)."""
    def drawn(name: str) -> bool:
        try:
            rule = model_kind(name).baseline
        except KeyError:
            return True
        return not rule or name == "mean_baseline" or name in kept
    return [name for name in models if drawn(name)]


def backtest_models(models: list[str], rows: list[dict], recommended: str, best_rule: str | None,
                    select_by: str) -> list[str]:
    """Return the models the backtest picture draws, in the order of ``models``: the recommended
    one and the two references it is measured against (the mean of the training months, the best simple
    rule); when the recommended model is one of those, the fitted model that scored best too."""
    chosen = {recommended, "mean_baseline", best_rule}
    if recommended == "mean_baseline" or recommended == best_rule:
        fitted = [m for m in models if m not in chosen and not _is_rule(m)]
        best = featured_model(rows, [], fitted, recommended, select_by)
        chosen.add(best)
    return [m for m in models if m in chosen]


def _is_rule(name: str) -> bool:
    try:
        return bool(model_kind(name).baseline)
    except KeyError:
        return False


def _only(table: pd.DataFrame, models: list[str]) -> pd.DataFrame:
    return table[table["model"].isin(models)] if len(table) else table


def _track_record(files: RunFiles) -> dict | None:
    """Return the Track record section's view (track_record.json and realised.csv) with its picture."""
    track = track_record_view(files.track, files.table("realised.csv"), rows_shown=TABLE_ROWS,
                              cadence=files.cadence())
    if track is not None and track["pictured"] is not None:
        track["picture"] = plots.track_record_picture(track["pictured"], files.cadence())
    return track


def _drivers_picture(drivers: dict) -> plots.Figure | None:
    """Return the Drivers section's picture: the spread of a model per series' coefficients
    across series, else the recommended model's coefficients (None when it has none); as
    percent changes for a model of log(target)."""
    listed = drivers.get("series_terms")
    if listed is not None:   # a model of each of a few series: the picture names each one
        return plots.coefficient_picture(
            listed, drivers["label"],
            (PERCENT, "% from (95%)", "% to (95%)") if PERCENT in listed else ("estimate", "low_95", "high_95"),
            drivers["model"])
    if drivers["per_series"]:
        return plots.spread_picture(
            drivers["spread"], drivers["model"], drivers["label"],
            ("median " + PERCENT, "% 25%", "% 75%") if "% 25%" in drivers["spread"] else ("median estimate", "25%", "75%"))
    if drivers["terms"] is not None and len(drivers["terms"]):
        return plots.coefficient_picture(
            drivers["terms"], drivers["label"],
            (PERCENT, "% from (95%)", "% to (95%)") if PERCENT in drivers["terms"] else ("estimate", "low_95", "high_95"),
            drivers["model"])
    return None


def _backtest_pictures(jobs: PictureJobs, metrics: dict, history: pd.DataFrame, predictions: pd.DataFrame,
                       every_model: list[str], cadence: Cadence = MONTH) -> list:
    """Return the Backtest section's pictures (stand-ins, ``jobs``): the predictions of the recommended
    model and its two references, then the errors of every pictured model by origin and by months ahead."""
    drawn = backtest_models(every_model, metrics["models"], metrics["recommended"], metrics.get("best_rule"),
                            metrics.get("select_by", "mae"))
    pictures = [jobs.later(30, plots.backtest_picture, history, predictions[predictions["model"].isin(drawn)])]
    by_origin = _only(pd.DataFrame(metrics.get("by_origin", [])), every_model)
    by_horizon = _only(pd.DataFrame(metrics.get("by_horizon", [])), every_model)
    if len(by_origin) and by_origin["origin"].nunique() > 1:
        pictures.append(jobs.later(10, plots.error_picture, by_origin, "origin", "origin", cadence))
    if len(by_horizon) and by_horizon["horizon"].nunique() > 1:
        pictures.append(jobs.later(10, plots.error_picture, by_horizon, "horizon", f"{cadence.plural} ahead",
                                   cadence))
    return pictures


def render_report(files: RunFiles | str | Path, jobs: PictureJobs | None = None) -> str:
    """Return the report's HTML, from the run folder's files alone (the pictures made and drawn as
    jobs, picture_jobs; added to ``jobs`` when given, with what else was asked of them)."""
    files = files if isinstance(files, RunFiles) else load_run_files(files)
    jobs = jobs if jobs is not None else PictureJobs()
    view = jobs.done(_report_view(files, jobs))
    return page_environment().get_template("report.html.j2").render(**view)


def _report_view(files: RunFiles, jobs: PictureJobs) -> dict:
    """Return what the report's template shows, its pictures stand-ins for ``jobs`` (weighed by the
    time each took to make and draw for the demo, in hundredths of a second)."""
    metrics, data = files.metrics, files.fingerprint
    predictions = files.table("predictions.csv")
    forecast = files.table("forecast.csv")
    history = files.table("history.csv")
    coefficients = files.table("coefficients.csv")
    coverage = files.table("interval_coverage.csv")
    scenarios = files.table("scenarios.csv")
    residuals = files.table("residuals.csv")
    diagnostics = files.table("diagnostics.csv")
    influential = files.table("influential_rows.csv")
    series_table = files.table("series.csv")
    fallbacks = files.table("series_fallbacks.csv")

    rows = metrics["models"]
    recommended = metrics["recommended"]
    chosen = next((row for row in rows if row["model"] == recommended), {})
    # The pictures draw the mean of the training months, the fitted models and the best simple rule; the
    # other rules are in the tables (six lines or more would hide the ones that matter).
    every_model = pictured_models(list(predictions["model"].unique()),
                                  (metrics.get("best_rule"), recommended))
    all_predictions = predictions
    predictions = predictions[predictions["model"].isin(every_model)]
    cadence = files.cadence()
    backtest_pictures = _backtest_pictures(jobs, metrics, history, predictions, every_model, cadence)

    series_count = len(data.get("series", [])) or metrics.get("series_count", 0)
    per_series = per_series_view(
        series_table, metrics.get("series_summary", []), fallbacks, rows=rows,
        recommended=recommended, select_by=metrics.get("select_by", "mae"),
        level=metrics.get("significance_level", 0.05), series_count=series_count)
    if per_series is not None:
        drawn = list(dict.fromkeys([*every_model, *per_series["models"], per_series["featured"]]))
        per_series["histogram"] = jobs.later(8, plots.skill_histogram, series_table, per_series["models"], drawn,
                                             cadence)
        worst = all_predictions[all_predictions["series"].isin(set(per_series["worst"]["series"]))
                                & all_predictions["model"].isin(drawn)]
        per_series["pictures"] = [
            jobs.later(13, plots.series_picture, history, worst[worst["series"] == row.series], row.series,
                       per_series["featured"], row.skill_vs_mean, drawn)
            for row in per_series["worst"].itertuples()]

    forecast_picture = None
    forecast_table, method = stated_forecast(forecast, coverage, recommended)
    first_screen = jobs.later(13, first_screen_view, history, forecast_table, method, recommended)
    forecast_rows = len(forecast_table) if forecast_table is not None else 0
    held_by = held_by_view(files.table("interval_coverage_by.csv"), recommended, method, cadence)
    if forecast_table is not None:
        forecast_picture = jobs.later(44, plots.forecast_picture, history, forecast, recommended, method, scenarios)
        forecast_table = forecast_table.head(TABLE_ROWS)
    shown_scenarios = scenarios[scenarios["model"] == recommended].drop(columns=["model"]) \
        if scenarios is not None and len(scenarios) else None
    drivers = drivers_view(coefficients, recommended, series_count, files.target_transforms(),
                           (files.series_columns(), data.get("series", [])))
    if drivers["levels"] is not None:
        drivers["levels"]["picture"] = jobs.later(10, plots.levels_picture, drivers["levels"], drivers["model"])
    coefficient_picture = jobs.later(11, _drivers_picture, drivers)
    ahead = ahead_view(metrics)
    return dict(
        spec_name=metrics.get("spec_name", ""), run_id=metrics["run_id"], created=metrics["created"],
        validation=metrics.get("validation_text", metrics.get("validation", {}).get("method", "")),
        verdict=metrics["verdict"], beats=metrics.get("beats_baseline", False), recommended=recommended,
        recommended_skill=chosen.get("skill_vs_mean") if recommended != "mean_baseline" else None,
        recommended_p=chosen.get("p_holm", chosen.get("p_value")) if recommended != "mean_baseline" else None,
        comparison=rows, comparison_parts=comparison_parts(rows, metrics.get("select_by", "mae")),
        best=_best(rows), backtest_pictures=backtest_pictures,
        coverage=coverage, forecast_picture=forecast_picture, forecast_table=forecast_table,
        held_by=held_by, first_screen=first_screen, interval_warning=shortfall_warning(coverage, recommended, method),
        forecast_rows=forecast_rows, per_series=per_series, track=jobs.later(8, _track_record, files),
        scenarios=shown_scenarios.head(TABLE_ROWS) if shown_scenarios is not None else None,
        scenario_rows=len(shown_scenarios) if shown_scenarios is not None else 0,
        coefficient_picture=coefficient_picture, drivers=drivers,
        coefficients=drivers["terms"], coefficients_note=drivers["note"],
        residual_pictures=jobs.later(21, plots.residual_pictures, residuals)
        if residuals is not None and len(residuals) else [],
        diagnostics=diagnostics.to_dict(orient="records") if diagnostics is not None else [],
        influential=influential, data=data, series_names=named(data.get("series", [])),
        names_shown=NAMES_SHOWN,
        ahead=ahead, notes=metrics.get("notes", []),
        select_by=metrics.get("select_by", "mae"),
        castline_version=metrics.get("castline_version", ""),
        versions=metrics.get("package_versions", {}),
        spec_text=files.spec_text, cautions=cautions(cadence), period=cadence)
