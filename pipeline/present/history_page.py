"""The history page: one spec's runs on one self-contained HTML page, from the ledger.

``castline history SPEC --html FILE`` writes it: the warnings first, then each model's
backtest metrics across runs, realised accuracy against what each backtest expected, how
the forecast of each target month was revised from run to run, and what changed between
consecutive runs. It has the report's look (the same styles), every picture inline and
the same policy: the page makes no network request, and every value from the data is
escaped by the template engine.
"""

from __future__ import annotations

import json
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from pipeline.core.cadence import MONTH, Cadence, cadence_of_labels
from pipeline.core.catalogue import BASELINE
from pipeline.core.intervals import closest_method, shortfall_warning
from pipeline.present import plots
from pipeline.present.history_plot import FAN_MONTHS, fan_figure, history_figure, realised_figure
from pipeline.present.picture_jobs import PictureJobs
from pipeline.present.report import page_environment
from pipeline.present.track_record import skill_words
from pipeline.review.history_book import HistoryBook, run_labels

# Written into the page, so a later `history --html` to the same path knows the file is a
# page it may replace (and refuses to write over anything else).
MARKER = '<meta name="generator" content="castline history page">'
REVISION_MONTHS = 12      # target months in the revisions table (the latest)
CAUTIONS = [   # {name}, {plural}: the runs' period (month, quarter, week)
    "Realised accuracy over a few {plural} says little: one unusual {name} moves it a lot, and "
    "a {name} forecast by several runs is counted once per run.",
    "The expected MAE is what each run's backtest found at as many {plural} ahead; the {plural} "
    "that came can be harder or easier than the backtest's.",
    "A revision is not an error: a rerun with more actuals should move the forecast. Large, "
    "repeated revisions in one direction are worth a person's look.",
]


def _models_in_order(metrics: pd.DataFrame) -> list[str]:
    models = list(dict.fromkeys(metrics["model"]))
    return [BASELINE, *[m for m in models if m != BASELINE]] if BASELINE in models else models


def metric_table(metrics: pd.DataFrame, runs: pd.DataFrame, metric: str) -> pd.DataFrame:
    """Return one metric per run (rows, oldest first) and model (columns)."""
    labels = run_labels(runs)
    wide = metrics.pivot(index="run_id", columns="model", values=metric).reindex(runs["run_id"])
    table = pd.DataFrame({"run": [labels[r] for r in wide.index]})
    for model in _models_in_order(metrics):
        if metric == "skill_vs_mean" and model == BASELINE:
            continue   # 0 by definition
        table[model] = wide[model].astype(float).to_numpy()
    return table


def runs_table(book: HistoryBook) -> pd.DataFrame:
    """Return one row per run: when, its data, its recommended model and that model's MAE and skill."""
    chosen = book.metrics[book.metrics["recommended"].astype(bool)].set_index("run_id")
    runs = book.runs

    def beat(value) -> str:
        return "not tested" if value is None or pd.isna(value) else ("yes" if value else "no")

    return pd.DataFrame({
        "run": list(run_labels(runs).values()), "run id": runs["run_id"].astype(str),
        "created": runs["created"].astype(str).str[:16].str.replace("T", " "),
        "rows with actuals": runs["history_rows"].astype(int),
        "recommended": runs["recommended"].astype(str),
        "MAE": runs["run_id"].map(chosen["mae"]).astype(float),
        "skill against the mean": runs["run_id"].map(chosen["skill_vs_mean"]).astype(float),
        "beat the mean": [beat(v) for v in runs["beats_baseline"]]})


def book_cadence(book: HistoryBook) -> Cadence:
    """Return the spacing of the runs' periods, as the ledger's labels of them say (months if none does)."""
    return cadence_of_labels(book.runs["last_period"]) if len(book.runs) else MONTH


def realised_table(book: HistoryBook) -> pd.DataFrame:
    """Return each run's recommended forecasts as they turned out, over the periods scored so far."""
    labels = run_labels(book.runs)
    own = book.realised[book.realised["recommended"].astype(bool)]
    return pd.DataFrame({
        "run": own["forecast_run_id"].map(labels), "model": own["model"].astype(str),
        f"{book_cadence(book).plural} ahead": own["months_ahead"].astype(str), "forecasts": own["n"].astype(int),
        "realised MAE": own["realised_mae"].astype(float), "expected MAE": own["expected_mae"].astype(float),
        "realised bias": own["realised_bias"].astype(float), "inside 80%": own["inside_80"].astype(float),
        "inside 95%": own["inside_95"].astype(float), "scored through": own["scored_through"].astype(str)})


def revisions_table(book: HistoryBook, months: int = REVISION_MONTHS) -> pd.DataFrame:
    """Return each run's forecast of each of the latest target periods, with the change from the
    run before's forecast of it, and the period's actual and error where it has arrived."""
    fan = book.fan
    kept = sorted(fan["period"].astype(str).unique())[-months:]
    rows = fan[fan["period"].astype(str).isin(kept)]
    labels = run_labels(book.runs)
    cadence = book_cadence(book)
    return pd.DataFrame({
        f"target {cadence.name}": rows["period"].astype(str), "run": rows["forecast_run_id"].map(labels),
        f"{cadence.plural} ahead": rows["horizon"].astype(int), "forecast": rows["forecast"].astype(float),
        "change": rows.groupby("period", sort=False)["forecast"].diff().astype(float),
        "actual": rows["actual"].astype(float),
        "error": (rows["forecast"] - rows["actual"]).astype(float)}).reset_index(drop=True)


def changes_table(book: HistoryBook) -> pd.DataFrame:
    """Return what changed from each run to the next, in words."""
    labels = run_labels(book.runs)
    changes = book.changes
    table = pd.DataFrame({
        "from": changes["earlier_run"].map(labels), "to": changes["later_run"].map(labels),
        "spec keys": changes["spec"], "data": changes["data"],
        "planned drivers": changes["planned"], "recommended model": changes["recommended"]})
    # A kind of change no pair of runs had is left out of the table and said in words instead.
    table = table[[c for c in table.columns if c in ("from", "to") or table[c].astype(bool).any()]]
    # An empty cell would read as a dash, "no value"; a kind of change a pair did not have is "none".
    return table.replace("", "none")


UNCHANGED = {"spec keys": "no spec key changed", "planned drivers": "no planned driver changed "
             "in a {name} two runs both forecast", "recommended model": "the recommended model stayed "
             "the same"}


def unchanged_words(table: pd.DataFrame, cadence: Cadence = MONTH) -> str:
    """Return, in words, the kinds of change no pair of consecutive runs had."""
    missing = [words.format(name=cadence.name) for column, words in UNCHANGED.items() if column not in table.columns]
    return ("From run to run, " + "; ".join(missing) + ".") if missing else ""


def _folder_warnings(folder: Path) -> list[str] | None:
    """Return the warnings a run gave, as its folder keeps them; None when it cannot be read."""
    try:
        metrics = json.loads((folder / "metrics.json").read_text(encoding="utf-8"))
        track_file = folder / "track_record.json"
        track = json.loads(track_file.read_text(encoding="utf-8")) if track_file.exists() else {}
    except (OSError, UnicodeDecodeError, json.JSONDecodeError, AttributeError):
        return None
    coverage = pd.DataFrame(metrics.get("interval_coverage") or [])
    recommended = metrics.get("recommended")
    interval = None
    if len(coverage) and recommended:
        interval = shortfall_warning(coverage, recommended, closest_method(coverage, recommended))
    return [w for w in [interval] if w] + list(metrics.get("notes", [])) + list(track.get("warnings", []))


def recorded_warnings(book: HistoryBook) -> tuple[pd.DataFrame, list[str]]:
    """Return each distinct warning the runs gave (from their folders), with the runs that gave
    it; and the runs whose folder could not be read."""
    labels = run_labels(book.runs)
    given: dict[str, list[str]] = {}
    unread = []
    for run_id, folder in zip(book.runs["run_id"], book.runs["folder"]):
        warnings = _folder_warnings(Path(folder))
        if warnings is None:
            unread.append(labels[run_id])
            continue
        for warning in warnings:
            given.setdefault(warning, []).append(labels[run_id])
    table = pd.DataFrame({"warning": list(given), "runs": [", ".join(r) for r in given.values()],
                          "how many runs": [len(r) for r in given.values()]})
    return table, unread


def _drawn(make, *arguments) -> plots.Figure:
    """Return a line chart of the page made by ``make`` as an inline picture: SVG, or PNG past as
    many drawn points as the report's line charts (plots.picture_kind), so it is drawn once."""
    figure, alt = make(*arguments)
    points = sum(len(line.get_xdata()) for axes in figure.axes for line in axes.get_lines())
    return plots.inline_picture(figure, alt, plots.picture_kind(points))


def _pictures(book: HistoryBook) -> dict:
    """Return the page's pictures, made and drawn as jobs (picture_jobs: shared with a forked copy
    of the process where the machine allows)."""
    jobs = PictureJobs()
    title = f"{book.spec_name}: backtest " + "{} per run"
    pictures = {"mae": jobs.later(1, _drawn, history_figure, book.metrics, "mae", title.format("MAE"))}
    if book.metrics["model"].nunique() > 1:
        pictures["skill"] = jobs.later(1, _drawn, history_figure, book.metrics, "skill_vs_mean",
                                       title.format("skill against the mean"))
    own = book.realised[book.realised["recommended"].astype(bool)]
    if len(own):
        pictures["realised"] = jobs.later(1, _drawn, realised_figure, own, book.runs)
        pictures["band"] = jobs.later(1, plots.track_record_picture, book.scored, book_cadence(book))
    if len(book.fan):
        series = int(book.fan["series"].max())
        pictures["fan"] = jobs.later(1, _drawn, fan_figure, book.fan, book.runs, series)
    return jobs.done(pictures)


def render_history_page(book: HistoryBook) -> str:
    """Return the history page's HTML for one spec's runs."""
    runs = book.runs
    warnings_given, unread = recorded_warnings(book)
    fan = book.fan
    changes = changes_table(book)
    cadence = book_cadence(book)
    return page_environment().get_template("history.html.j2").render(
        marker=MARKER, spec_name=book.spec_name, ledger=str(book.ledger), run_count=len(runs),
        first_period=str(runs["last_period"].iloc[0]), last_period=str(runs["last_period"].iloc[-1]),
        written=datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC"),
        warnings=book.warnings, warnings_given=warnings_given, unread=unread,
        runs=runs_table(book), pictures=_pictures(book),
        mae=metric_table(book.metrics, runs, "mae"), skill=metric_table(book.metrics, runs, "skill_vs_mean"),
        realised=realised_table(book), realised_skill=skill_words(book.skill, cadence) if book.skill else None,
        revisions=revisions_table(book), fan_months=FAN_MONTHS, revision_months=REVISION_MONTHS,
        target_months=fan["period"].nunique() if len(fan) else 0,
        series_count=int(fan["series"].max()) if len(fan) else 0,
        changes=changes, unchanged=unchanged_words(changes, cadence), period=cadence,
        cautions=[line.format(name=cadence.name, plural=cadence.plural) for line in CAUTIONS])
