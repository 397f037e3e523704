"""The summary's Track record section, in Markdown, from the run folder's files
(track_record.json and realised.csv)."""

from __future__ import annotations

import pandas as pd

from pipeline.core.formatting import format_number, format_percent, markdown_table
from pipeline.review.track_record import summarise_realised


def track_record_section(track: dict, realised: pd.DataFrame | None, runs_shown: int = 12) -> str:
    """Return the summary's track-record section in Markdown.

    ``track`` is track_record.json (ledger, earlier_runs, recommended, warnings);
    ``realised`` is realised.csv, the earlier forecasts scored against this run's actuals.
    """
    lines = ["## Track record", ""]
    lines += [f"- **Warning:** {w}" for w in track["warnings"]]
    if track["warnings"]:
        lines.append("")
    if not track["earlier_runs"]:
        lines += [f"This is the first run of this spec in the ledger `{track['ledger']}`; later runs "
                  "score its forecasts as their months' actuals arrive.", ""]
        return "\n".join(lines)
    lines += [f"{track['earlier_runs']} earlier run(s) of this spec are in the ledger `{track['ledger']}`."]
    table = summarise_realised(realised if realised is not None else pd.DataFrame(columns=["forecast_run_id"]))
    recommended = track["recommended"]
    table = table[[recommended.get(r) == m for r, m in zip(table["forecast_run_id"], table["model"])]]
    if not len(table):
        lines += ["None of their forecasts has an actual in this run's data yet.", ""]
        return "\n".join(lines)
    lines += _skill_sentences(track.get("realised_skill"))
    runs = list(dict.fromkeys(table["forecast_run_id"]))[-runs_shown:]
    shown = table[table["forecast_run_id"].isin(runs)]
    shown = pd.DataFrame({
        "run": shown["forecast_run_id"], "model": shown["model"], "months ahead": shown["horizon"],
        "forecasts": shown["n"], "realised MAE": shown["realised_mae"],
        "expected MAE": shown["expected_mae"], "realised bias": shown["realised_bias"],
        "inside 80%": shown["inside_80"], "inside 95%": shown["inside_95"]})
    lines += ["", "How their forecasts turned out now that the months have actuals (each run's "
              "recommended model; expected MAE is that run's backtest MAE at the same months "
              "ahead; bias is forecast − actual; inside is the share of actuals within the "
              "interval the run stated). Every scored forecast is in realised.csv.", "",
              markdown_table(shown), ""]
    return "\n".join(lines)


def _skill_sentences(skill: dict | None) -> list[str]:
    """Return the realised skill against the mean baseline's own forecasts in words (nothing for a
    track_record.json written before castline recorded it)."""
    if not skill:
        return []
    left_out = skill.get("without_baseline", 0)
    if not skill.get("forecasts"):
        if not left_out:
            return []
        return ["", f"Realised skill against the mean baseline's own forecasts: not known; the ledger "
                    f"holds no forecast of the mean baseline beside the {left_out} scored forecast(s) "
                    "of the recommended models."]
    value = skill.get("skill")
    said = format_percent(value) if value is not None else "not defined (the mean baseline's MAE is 0)"
    lines = ["", f"Realised skill against the mean baseline's own forecasts: {said} over "
                 f"{skill['months']} month(s), {skill['forecasts']} forecasts from {skill['runs']} "
                 f"earlier run(s) (1 − realised MAE of each run's recommended model, "
                 f"{format_number(skill['model_mae'])}, / realised MAE of the mean baseline's "
                 f"forecasts of the same months and series, {format_number(skill['baseline_mae'])})."]
    if left_out:
        lines[-1] += (f" {left_out} scored forecast(s) of the recommended models have no forecast of "
                      "the mean baseline beside them in the ledger and are left out.")
    return lines


def with_track_record(summary: str, track: dict | None, realised: pd.DataFrame | None) -> str:
    """Return the summary with the track-record section put before its data section."""
    if track is None:
        return summary
    section = track_record_section(track, realised) + "\n"
    for heading in ("\n## Data\n", "\n## Cautions\n"):
        if heading in summary:
            at = summary.index(heading) + 1
            return summary[:at] + section + summary[at:]
    return summary.rstrip("\n") + "\n\n" + section
