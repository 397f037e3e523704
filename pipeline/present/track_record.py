"""The Track record section of the pages, from the run folder's files (track_record.json and
realised.csv): in Markdown for summary.md, and as the tables and words report.html shows."""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.cadence import MONTH, Cadence
from pipeline.core.formatting import MISSING, format_number, format_percent, format_signed, markdown_table
from pipeline.review.track_record import summarise_realised


def track_record_section(track: dict, realised: pd.DataFrame | None, runs_shown: int = 12,
                         cadence: Cadence = MONTH) -> str:
    """Return the summary's track-record section in Markdown.

    ``track`` is track_record.json (ledger, earlier_runs, recommended, warnings);
    ``realised`` is realised.csv, the earlier forecasts scored against this run's actuals.
    """
    lines = ["## Track record", ""]
    lines += [f"- **Warning:** {w}" for w in track["warnings"]]
    if track["warnings"]:
        lines.append("")
    if not track["earlier_runs"]:
        lines += [first_run_words(track, cadence), ""]
        return "\n".join(lines)
    lines += [f"{track['earlier_runs']} earlier run(s) of this spec are in the ledger `{track['ledger']}`."]
    table = summarise_realised(realised if realised is not None else pd.DataFrame(columns=["forecast_run_id"]))
    recommended = track["recommended"]
    table = table[[recommended.get(r) == m for r, m in zip(table["forecast_run_id"], table["model"])]]
    if not len(table):
        lines += ["None of their forecasts has an actual in this run's data yet.", ""]
        return "\n".join(lines)
    lines += _skill_sentences(track.get("realised_skill"), cadence)
    runs = list(dict.fromkeys(table["forecast_run_id"]))[-runs_shown:]
    shown = table[table["forecast_run_id"].isin(runs)]
    shown = pd.DataFrame({
        "run": shown["forecast_run_id"], "model": shown["model"], f"{cadence.plural} ahead": shown["horizon"],
        "forecasts": shown["n"], "realised MAE": shown["realised_mae"],
        "expected MAE": shown["expected_mae"], "realised bias": shown["realised_bias"],
        "inside 80%": shown["inside_80"], "inside 95%": shown["inside_95"]})
    lines += ["", f"How their forecasts turned out now that the {cadence.plural} have actuals (each run's "
              f"recommended model; expected MAE is that run's backtest MAE at the same {cadence.plural} "
              "ahead; bias is forecast − actual; inside is the share of actuals within the "
              "interval the run stated). Every scored forecast is in realised.csv.", "",
              markdown_table(shown, cadence), ""]
    return "\n".join(lines)


def _skill_sentences(skill: dict | None, cadence: Cadence = MONTH) -> list[str]:
    words = skill_words(skill, cadence)
    return ["", words] if words else []


def skill_words(skill: dict | None, cadence: Cadence = MONTH) -> str | None:
    """Return the realised skill against the forecasts of the mean of the training periods in words (None for a
    track_record.json written before castline recorded it). ``skill["months"]`` counts the distinct
    periods paired, whatever their spacing (the key keeps its name in the file)."""
    if not skill:
        return None
    mean, plural = f"the mean of the training {cadence.plural}", cadence.plural
    left_out = skill.get("without_baseline", 0)
    if not skill.get("forecasts"):
        if not left_out:
            return None
        return (f"Realised skill against the forecasts of {mean}: not known; the ledger "
                f"holds no forecast of {mean} beside the {left_out} scored forecast(s) "
                "of the recommended models.")
    value = skill.get("skill")
    said = format_percent(value) if value is not None else f"not defined (the MAE of {mean} is 0)"
    words = (f"Realised skill against the forecasts of {mean}: {said} over "
             f"{skill['months']} {cadence.name}(s), {skill['forecasts']} forecasts from {skill['runs']} "
             f"earlier run(s) (1 − realised MAE of each run's recommended model, "
             f"{format_number(skill['model_mae'])}, / realised MAE of the "
             f"forecasts of {mean} over the same {plural} and series, "
             f"{format_number(skill['baseline_mae'])}).")
    if left_out:
        words += (f" {left_out} scored forecast(s) of the recommended models have no forecast of "
                  f"{mean} beside them in the ledger and are left out.")
    return words


def with_track_record(summary: str, track: dict | None, realised: pd.DataFrame | None,
                      cadence: Cadence = MONTH) -> str:
    """Return the summary with the track-record section put before its data section."""
    if track is None:
        return summary
    section = track_record_section(track, realised, cadence=cadence) + "\n"
    for heading in ("\n## Data\n", "\n## Cautions\n"):
        if heading in summary:
            at = summary.index(heading) + 1
            return summary[:at] + section + summary[at:]
    return summary.rstrip("\n") + "\n\n" + section


RUNS_SHOWN = 12      # earlier runs shown by periods ahead and pictured; realised.csv holds them all


def first_run_words(track: dict, cadence: Cadence = MONTH) -> str:
    """Return the one line the pages give when the ledger holds no earlier run of the spec."""
    return (f"This is the first run of this spec in the ledger `{track['ledger']}`; later runs "
            f"score its forecasts as their {cadence.plural}' actuals arrive.")


def _recommended_rows(realised: pd.DataFrame | None, recommended: dict) -> pd.DataFrame:
    """Return realised.csv's rows of each earlier run's recommended model."""
    if realised is None or not len(realised):
        return pd.DataFrame(columns=["forecast_run_id", "forecast_created", "model", "horizon"])
    return realised[[recommended.get(r) == m for r, m in zip(realised["forecast_run_id"], realised["model"])]]


def _yes_no(values: pd.Series) -> list[str]:
    """Return a column of flags read back from a CSV file (True, False, empty) as yes, no or ''."""
    text = values.astype(str).str.lower()
    return ["yes" if t in ("true", "1", "1.0") else "no" if t in ("false", "0", "0.0") else "" for t in text]


def _range(low: float, high: float) -> str:
    """Return a range of errors as the track record's warnings write it ("-1.9 to +1.9")."""
    if not (np.isfinite(low) and np.isfinite(high)):
        return MISSING
    return f"{format_signed(low)} to {format_signed(high)}"


def track_record_view(track: dict | None, realised: pd.DataFrame | None, *, rows_shown: int,
                      runs_shown: int = RUNS_SHOWN, cadence: Cadence = MONTH) -> dict | None:
    """Return what report.html's Track record section shows (None when the run folder has no
    track_record.json): the warnings; for the recommended model of each earlier run, its forecasts
    against the actuals (the latest run's first, at most ``rows_shown``), its realised MAE beside
    the expected MAE and its interval hits by periods ahead (the latest ``runs_shown`` runs), its
    realised skill against the forecasts of the mean of the training periods; and the rows the picture draws.
    Columns and words name the periods by ``cadence`` (months ahead, quarters ahead, weeks ahead)."""
    if track is None:
        return None
    view = {"warnings": list(track["warnings"]), "earlier_runs": track["earlier_runs"],
            "ledger": track["ledger"], "first": False, "none_yet": False, "skill": skill_words(track.get("realised_skill"), cadence),
            "forecasts": None, "forecast_rows": 0, "by_horizon": None, "runs": 0, "runs_shown": 0,
            "by_run": None, "pictured": None}
    if not track["earlier_runs"]:
        view["first"] = True
        return view
    own = _recommended_rows(realised, track["recommended"])
    if not len(own):
        view["none_yet"] = True
        return view
    latest_first = own.sort_values(["forecast_created", "forecast_run_id"], ascending=False, kind="stable")
    shown = latest_first.head(rows_shown)
    view["forecasts"] = pd.DataFrame({
        "run": shown["forecast_run_id"].astype(str), "period": shown["period"].astype(str), "series": shown["series"].astype(str),
        f"{cadence.plural} ahead": shown["horizon"].astype(int), "forecast": shown["forecast"].astype(float),
        "actual": shown["actual"].astype(float), "error": shown["error"].astype(float),
        "errors expected (95%)": [_range(low, high) for low, high in
                                  zip(shown["backtest_low_95"].astype(float), shown["backtest_high_95"].astype(float))],
        "inside 80% · 95%": [f"{a} · {b}" if a or b else MISSING for a, b in
                             zip(_yes_no(shown["inside_80"]), _yes_no(shown["inside_95"]))]})
    view["forecast_rows"] = len(own)
    table = summarise_realised(own)
    runs = list(dict.fromkeys(table["forecast_run_id"]))
    kept = runs[-runs_shown:]
    table = table[table["forecast_run_id"].isin(kept)]
    view.update(runs=len(runs), runs_shown=len(kept))
    view["by_horizon"] = pd.DataFrame({
        "run": table["forecast_run_id"].astype(str), "model": table["model"].astype(str),
        f"{cadence.plural} ahead": table["horizon"].astype(int), "forecasts": table["n"].astype(int),
        "realised MAE": table["realised_mae"], "expected MAE": table["expected_mae"],
        "realised bias": table["realised_bias"], "inside 80%": table["inside_80"],
        "inside 95%": table["inside_95"]})
    by_run = pd.DataFrame((track.get("realised_skill") or {}).get("by_run", []))
    if len(by_run):
        by_run = by_run[by_run["forecast_run_id"].isin(kept)]
        view["by_run"] = pd.DataFrame({
            "run": by_run["forecast_run_id"].astype(str), "model": by_run["model"].astype(str),
            "forecasts": by_run["forecasts"].astype(int), cadence.plural: by_run["months"].astype(int),
            "realised MAE": by_run["model_mae"].astype(float),
            "realised MAE of the mean": by_run["baseline_mae"].astype(float),
            "realised skill": by_run["skill"].astype(float)})
    view["pictured"] = own[own["forecast_run_id"].isin(kept)]
    return view
