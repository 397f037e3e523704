"""A picture of one metric per model across the runs of a spec."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from pipeline.core.catalogue import BASELINE
from pipeline.core.errors import UserError


def plot_history(table: pd.DataFrame, metric: str, path: Path, title: str) -> None:
    """Draw a metric per model (and spec) across the run dates into an image file."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    figure = Figure(figsize=(8, 4.5), layout="constrained")
    canvas = FigureCanvasAgg(figure)
    supported = canvas.get_supported_filetypes()
    suffix = path.suffix.lower().lstrip(".")
    if suffix not in supported:
        raise UserError(f"{path}: cannot draw a plot of type '.{suffix}'; use one of "
                        f"{', '.join('.' + s for s in sorted(supported))}")
    axes = figure.subplots()
    several = table["spec_name"].nunique() > 1
    for (name, model), rows in table.groupby(["spec_name", "model"], sort=False):
        if metric == "skill_vs_mean" and model == BASELINE:
            continue   # 0 by definition: the line drawn at 0 stands for it
        when = pd.to_datetime(rows["created"], utc=True, format="ISO8601")
        axes.plot(when, rows[metric].astype(float), marker="o",
                  label=f"{name}: {model}" if several else model)
    axes.set_title(title)
    axes.set_xlabel("run date (UTC)")
    axes.set_ylabel(metric.replace("_", " "))
    if metric == "skill_vs_mean":
        axes.axhline(0, color="grey", linewidth=0.8)
    axes.legend()
    figure.autofmt_xdate()
    try:
        canvas.print_figure(path)
    except OSError as exc:
        raise UserError(f"{path}: cannot write the plot: {exc.strerror or exc}") from None
