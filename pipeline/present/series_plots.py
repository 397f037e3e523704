"""The Drivers section's pictures of a few series named one by one: each series' coefficients
in a colour and marker of its own, and the series' own levels each on a row of its own. Past
plots.MAX_LISTED series, plots.py summarises them as distributions instead."""

from __future__ import annotations

import matplotlib
import numpy as np
import pandas as pd

from pipeline.core.catalogue import model_label
from pipeline.core.formatting import format_number
from pipeline.present import plots

# With the palette's 8 colours, one marker each for up to 12 series keeps every pair apart.
MARKERS = ["o", "s", "^", "D", "v", "P", "X", "*", "<", ">", "h", "p"]


def _finding(table: pd.DataFrame, unit: str) -> str:
    """Return the sentences on how the series' estimates agree: the terms whose estimates share
    a sign in every series, and the term on which they differ most, its two ends named."""
    agree = [term for term, rows in table.groupby("term", sort=False)
             if (rows["middle"] > 0).all() or (rows["middle"] < 0).all()]
    ranges = table.groupby("term", sort=False)["middle"].agg(lambda v: v.max() - v.min())
    text = f" The series' estimates share a sign for {len(agree)} of the {len(ranges)} terms."
    if len(ranges) and ranges.max() > 0:
        term = ranges.idxmax()
        rows = table[table["term"] == term]
        low, high = rows.loc[rows["middle"].idxmin()], rows.loc[rows["middle"].idxmax()]
        text += (f" They differ most on {term}: from {format_number(float(low['middle']))}{unit} "
                 f"({low['series']}) to {format_number(float(high['middle']))}{unit} ({high['series']}).")
    return text


def coefficients_by_series(terms: pd.DataFrame, model: str, label: str,
                           columns: tuple[str, str, str]) -> plots.Figure:
    """Each term's estimate in each series (the intercept left out), a row per term and in it a
    dot per series, in the series' colour and marker, with the 95% interval where there is one;
    the legend names the series."""
    middle_name, low_name, high_name = columns
    shown = terms[terms["term"] != "intercept"].dropna(subset=[middle_name])
    table = pd.DataFrame({"term": shown["term"].astype(str).to_numpy(), "series": shown["series"].astype(str).to_numpy(),
                          "middle": shown[middle_name].to_numpy(float)})
    has_interval = {low_name, high_name} <= set(shown.columns) and shown[low_name].notna().any()
    if has_interval:
        table["low"], table["high"] = shown[low_name].to_numpy(float), shown[high_name].to_numpy(float)
    names, series = list(dict.fromkeys(table["term"])), list(dict.fromkeys(table["series"]))
    row = {term: len(names) - 1 - i for i, term in enumerate(names)}
    step = 0.8 / len(series)
    with matplotlib.rc_context(plots.STYLE):
        figure, axis = plots._subplots(figsize=(8, max(2.2, (0.18 + 0.07 * len(series)) * len(names) + 1.2)))
        for number, name in enumerate(series):
            own = table[table["series"] == name]
            y = own["term"].map(row).to_numpy(float) + 0.4 - step * (number + 0.5)
            colour = plots.PALETTE[number % len(plots.PALETTE)]
            error = ([own["middle"] - own["low"], own["high"] - own["middle"]] if has_interval else None)
            axis.errorbar(own["middle"], y, xerr=error, fmt=MARKERS[number % len(MARKERS)], color=colour,
                          ecolor=colour, elinewidth=0.8, capsize=0, markersize=4, label=plots.as_text(name))
        axis.axvline(0, color="#000000", linewidth=0.8)
        axis.set_yticks(list(row.values()))
        axis.set_yticklabels([plots.as_text(term) for term in row], fontsize=7)
        axis.set_xlabel(plots.as_text(label) + (" (95% interval)" if has_interval else ""))
        axis.legend(fontsize=7, frameon=False, loc="lower left", bbox_to_anchor=(0, 1.0),
                    ncol=min(len(series), 6), title="series", title_fontsize=7)
        alt = (f"Dot chart of {len(names)} driver coefficients of {model_label(model)} fitted on each of its "
               f"{len(series)} series ({', '.join(series)}), one colour and marker per series, as the "
               f"{label}" + (" with 95% interval bars." if has_interval else ".")
               + _finding(table, "%" if label.startswith("%") else ""))
        return plots.inline_picture(figure, alt, "svg")


def named_levels(levels: dict, model: str) -> plots.Figure:
    """The series' own levels in a model over all series (report.levels_summary), each named on
    a row of its own, largest at the top, with the median and the reference series' zero."""
    values = np.asarray(levels["values"], float)
    names = [str(n) for n in levels["names"]]
    order = np.argsort(values, kind="stable")
    unit = "%" if levels["label"].startswith("%") else ""
    with matplotlib.rc_context(plots.STYLE):
        figure, axis = plots._subplots(figsize=(8, max(1.8, 0.24 * len(values) + 1.0)))
        axis.plot(values[order], np.arange(len(values)), "o", color=plots.PALETTE[0], markersize=4)
        axis.axvline(levels["median"], color=plots.PALETTE[1], linewidth=1.2, label="median")
        axis.axvline(0, color="#000000", linewidth=0.8, label="as the reference series")
        axis.set_yticks(np.arange(len(values)))
        axis.set_yticklabels([plots.as_text(names[i]) for i in order], fontsize=7)
        axis.set_xlabel(plots.as_text(levels["label"]) + ", each series' own level against the reference series")
        axis.legend(fontsize=7, frameon=False, loc="lower left", bbox_to_anchor=(0, 1.0), ncol=2)
        listed = ", ".join(f"{names[i]} {format_number(float(values[i]))}{unit}" for i in order[::-1])
        alt = (f"Dot chart of the {len(values)} series levels of {model_label(model)}, each named, largest first: {listed}. "
               + levels["text"])
        return plots.inline_picture(figure, alt, "svg")
