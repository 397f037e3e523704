"""A picture of one metric per model across the runs of a spec, placed by the last month of
actuals each run used (what rolls forward from one month's run to the next)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.catalogue import BASELINE
from pipeline.core.errors import UserError

# Reruns on the same last month are drawn to the right of the first run on it, spread over at
# most this share of a month, so none reaches the next month's position.
RERUN_SPREAD = 0.6
RERUN_STEP = 0.2

# The text alternative goes into the file's own metadata, under the key each format reads.
ALT_KEY = {"png": "Description", "svg": "Description", "pdf": "Subject"}


def run_positions(table: pd.DataFrame) -> pd.DataFrame:
    """Return, per spec and run (in the table's order), the last month of actuals it used, its
    place among the runs of that spec on that month (0 for the first, 1 for the first rerun, …),
    and where it is drawn: the month as a count of months since 1970-01, plus a small step to
    the right for each rerun."""
    runs = table.drop_duplicates(["spec_name", "run_id"])[["spec_name", "run_id", "last_period"]].copy()
    runs["month"] = [pd.Period(str(p), "M").ordinal for p in runs["last_period"]]
    runs["rerun"] = runs.groupby(["spec_name", "month"], sort=False).cumcount()
    on_month = runs.groupby(["spec_name", "month"], sort=False)["run_id"].transform("size")
    step = np.minimum(RERUN_STEP, RERUN_SPREAD / np.maximum(on_month - 1, 1))
    runs["x"] = runs["month"] + runs["rerun"] * step
    return runs.reset_index(drop=True)


def _month_label(x: float, _position=None) -> str:
    return str(pd.Period(ordinal=int(round(x)), freq="M")) if abs(x - round(x)) < 1e-9 else ""


def history_figure(table: pd.DataFrame, metric: str, title: str):
    """Return the picture of a metric per model (and spec) by each run's last month of actuals,
    on an Agg canvas of its own, and its text alternative."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    figure = Figure(figsize=(8, 4.5), layout="constrained")
    FigureCanvasAgg(figure)
    axes = figure.subplots()
    positions = run_positions(table).set_index(["spec_name", "run_id"])
    several = table["spec_name"].nunique() > 1
    drawn = []
    for (name, model), rows in table.groupby(["spec_name", "model"], sort=False):
        if metric == "skill_vs_mean" and model == BASELINE:
            continue   # 0 by definition: the line drawn at 0 stands for it
        at = positions.loc[list(zip(rows["spec_name"], rows["run_id"]))]
        order = np.argsort(at["x"].to_numpy(), kind="stable")
        x, y = at["x"].to_numpy()[order], rows[metric].astype(float).to_numpy()[order]
        line, = axes.plot(x, y, marker="o", label=f"{name}: {model}" if several else model)
        reruns = at["rerun"].to_numpy()[order] > 0
        if reruns.any():   # open markers for the reruns, in the line's colour
            axes.plot(x[reruns], y[reruns], linestyle="none", marker="o", color=line.get_color(),
                      markerfacecolor="white", label="_rerun")
        drawn.append(model)
    reruns = int((positions["rerun"] > 0).sum())
    axes.set_title(title)
    caption = "last month of actuals in the run's data"
    if reruns:
        caption += "\nreruns on a month already run: drawn just right of it, with open markers"
    axes.set_xlabel(caption)
    axes.set_ylabel(metric.replace("_", " "))
    axes.xaxis.set_major_locator(MaxNLocator(nbins=8, integer=True))
    axes.xaxis.set_major_formatter(FuncFormatter(_month_label))
    if metric == "skill_vs_mean":
        axes.axhline(0, color="grey", linewidth=0.8)
    axes.legend()
    months = sorted(positions["last_period"].astype(str).unique())
    alt = (f"Line chart of {metric.replace('_', ' ')} per run of {', '.join(dict.fromkeys(drawn))} "
           f"against the last month of actuals each run used, {months[0]} to {months[-1]}, "
           f"{len(positions)} run(s).")
    if reruns:
        alt += (f" {reruns} run(s) were reruns on a month already run; each is drawn a little to "
                "the right of that month, with an open marker.")
    return figure, alt


def plot_history(table: pd.DataFrame, metric: str, path: Path, title: str) -> str:
    """Draw a metric per model (and spec) by each run's last month of actuals into an image file,
    with its text alternative in the file's metadata where the format keeps one; return the text."""
    figure, alt = history_figure(table, metric, title)
    canvas = figure.canvas
    supported = canvas.get_supported_filetypes()
    suffix = path.suffix.lower().lstrip(".")
    if suffix not in supported:
        raise UserError(f"{path}: cannot draw a plot of type '.{suffix}'; use one of "
                        f"{', '.join('.' + s for s in sorted(supported))}")
    metadata = {ALT_KEY[suffix]: alt} if suffix in ALT_KEY else None
    try:
        canvas.print_figure(path, metadata=metadata)
    except OSError as exc:
        raise UserError(f"{path}: cannot write the plot: {exc.strerror or exc}") from None
    return alt
