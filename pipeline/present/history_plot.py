"""A picture of one metric per model across the runs of a spec, placed by the last period of
actuals each run used (what rolls forward from one month's run to the next; or quarter's, or
week's: the ledger's labels say which, and the axes and words follow them)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.cadence import Cadence, cadence_of_labels, ordinal_of
from pipeline.core.catalogue import BASELINE, model_label
from pipeline.core.errors import UserError
from pipeline.core.formatting import format_signed

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
    runs["month"] = [ordinal_of(p) for p in runs["last_period"]]   # the period's ordinal, whatever its spacing
    runs["rerun"] = runs.groupby(["spec_name", "month"], sort=False).cumcount()
    on_month = runs.groupby(["spec_name", "month"], sort=False)["run_id"].transform("size")
    step = np.minimum(RERUN_STEP, RERUN_SPREAD / np.maximum(on_month - 1, 1))
    runs["x"] = runs["month"] + runs["rerun"] * step
    return runs.reset_index(drop=True)


def _period_labeller(cadence: Cadence):
    """Return the tick formatter of an axis of period ordinals: a whole ordinal as castline writes its period."""
    def label(x: float, _position=None) -> str:
        return cadence.label(int(round(x))) if abs(x - round(x)) < 1e-9 else ""
    return label


def _metric_words(metric: str) -> str:
    """Return a metric's column name as the picture writes it: skill as 'skill against the mean'."""
    return "skill against the mean" if metric == "skill_vs_mean" else metric.replace("_", " ")


def history_figure(table: pd.DataFrame, metric: str, title: str):
    """Return the picture of a metric per model (and spec) by each run's last month of actuals,
    on an Agg canvas of its own, and its text alternative."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    figure = Figure(figsize=(8, 4.5), layout="constrained")
    FigureCanvasAgg(figure)
    axes = figure.subplots()
    from pipeline.present.plots import model_colours

    positions = run_positions(table).set_index(["spec_name", "run_id"])
    cadence = cadence_of_labels(positions["last_period"])
    several = table["spec_name"].nunique() > 1
    # Each model keeps its colour from picture to picture (and spec to spec).
    colours = model_colours(list(dict.fromkeys(table["model"])))
    drawn = []
    for (name, model), rows in table.groupby(["spec_name", "model"], sort=False):
        if metric == "skill_vs_mean" and model == BASELINE:
            continue   # 0 by definition: the line drawn at 0 stands for it
        at = positions.loc[list(zip(rows["spec_name"], rows["run_id"]))]
        order = np.argsort(at["x"].to_numpy(), kind="stable")
        x, y = at["x"].to_numpy()[order], rows[metric].astype(float).to_numpy()[order]
        line, = axes.plot(x, y, marker="o", color=colours[model],
                          label=f"{name}: {model_label(model, cadence)}" if several else model_label(model, cadence))
        reruns = at["rerun"].to_numpy()[order] > 0
        if reruns.any():   # open markers for the reruns, in the line's colour
            axes.plot(x[reruns], y[reruns], linestyle="none", marker="o", color=line.get_color(),
                      markerfacecolor="white", label="_rerun")
        drawn.append(model_label(model, cadence))
    reruns = int((positions["rerun"] > 0).sum())
    axes.set_title(title)
    caption = f"last {cadence.name} of actuals in the run's data"
    if reruns:
        caption += f"\nreruns on a {cadence.name} already run: drawn just right of it, with open markers"
    axes.set_xlabel(caption)
    axes.set_ylabel(_metric_words(metric))
    axes.xaxis.set_major_locator(MaxNLocator(nbins=8, integer=True))
    axes.xaxis.set_major_formatter(FuncFormatter(_period_labeller(cadence)))
    if metric == "skill_vs_mean":
        axes.axhline(0, color="grey", linewidth=0.8)
    axes.legend()
    months = sorted(positions["last_period"].astype(str).unique())
    alt = (f"Line chart of {_metric_words(metric)} per run of {', '.join(dict.fromkeys(drawn))} "
           f"against the last {cadence.name} of actuals each run used, {months[0]} to {months[-1]}, "
           f"{len(positions)} run(s).")
    if reruns:
        alt += (f" {reruns} run(s) were reruns on a {cadence.name} already run; each is drawn a little to "
                f"the right of that {cadence.name}, with an open marker.")
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


# The revision fan draws this many target months (the latest); more lines would hide each other.
FAN_MONTHS = 8


def _run_x(runs: pd.DataFrame) -> dict[str, float]:
    """Return where each run is drawn: its last month of actuals, reruns a step to the right."""
    table = runs.assign(spec_name="", model="")
    return dict(zip(*[run_positions(table)[c] for c in ("run_id", "x")]))


def fan_figure(fan: pd.DataFrame, runs: pd.DataFrame, series_count: int):
    """Return the picture of how the forecast of each target month was revised from run to run
    (the latest FAN_MONTHS months): one line per month through each run's forecast of it, placed
    by the run's last month of actuals, ending at the month's actual; and its text alternative."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    from pipeline.present.plots import PALETTE

    figure = Figure(figsize=(8, 4.2), layout="constrained")
    FigureCanvasAgg(figure)
    axes = figure.subplots()
    at = _run_x(runs)
    months = sorted(fan["period"].astype(str).unique())[-FAN_MONTHS:]
    cadence = cadence_of_labels(months)
    name = cadence.name
    closing = []
    for index, month in enumerate(months):
        rows = fan[fan["period"].astype(str) == month]
        colour = PALETTE[index % len(PALETTE)]
        x = rows["forecast_run_id"].map(at).to_numpy(float)
        axes.plot(x, rows["forecast"].to_numpy(float), marker="o", markersize=4, color=colour, label=month)
        actual = rows["actual"].dropna()
        if len(actual):
            target = float(ordinal_of(month))
            axes.plot([x[-1], target], [rows["forecast"].iloc[-1], actual.iloc[-1]], linestyle=":",
                      color=colour)
            axes.plot([target], [actual.iloc[-1]], marker="*", markersize=11, color=colour,
                      markeredgecolor="black", markeredgewidth=0.5, linestyle="none")
            first = float(rows["forecast"].iloc[0])
            closing.append((month, first - actual.iloc[-1], float(rows["forecast"].iloc[-1]) - actual.iloc[-1]))
    whose = "" if series_count == 1 else f", summed over the {series_count:,} series"
    axes.set_title(f"Each target {name}'s forecast, run by run{whose}")
    axes.set_xlabel(f"last {name} of actuals in the run's data (★ the {name}'s actual, at the {name} itself)")
    axes.set_ylabel("forecast of the recommended model")
    axes.xaxis.set_major_locator(MaxNLocator(nbins=8, integer=True))
    axes.xaxis.set_major_formatter(FuncFormatter(_period_labeller(cadence)))
    axes.legend(title=f"target {name}", fontsize=7, title_fontsize=7, loc="center left",
                bbox_to_anchor=(1.01, 0.5), frameon=False)
    alt = (f"Line chart of the forecasts of the last {len(months)} target {name}(s) ({months[0]} to "
           f"{months[-1]}){whose}, one line per {name} through each run's forecast of it, placed by the "
           f"run's last {name} of actuals, and a star at the {name}'s actual where it has arrived.")
    if closing:
        alt += " First and last errors (forecast − actual): " + "; ".join(
            f"{m} {format_signed(first)} then {format_signed(last)}" for m, first, last in closing) + "."
    return figure, alt


def realised_figure(realised: pd.DataFrame, runs: pd.DataFrame):
    """Return the picture of each run's realised MAE (its recommended model, over the months
    scored so far) beside the MAE its backtest expected there, by the run's last month of
    actuals; and its text alternative."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    from pipeline.present.plots import PALETTE

    figure = Figure(figsize=(8, 3.6), layout="constrained")
    FigureCanvasAgg(figure)
    axes = figure.subplots()
    rows = realised.assign(x=realised["forecast_run_id"].map(_run_x(runs))).sort_values("x")
    cadence = cadence_of_labels(runs["last_period"])
    axes.plot(rows["x"], rows["realised_mae"].astype(float), marker="o", color=PALETTE[0],
              label=f"realised MAE (the {cadence.plural} scored so far)")
    axes.plot(rows["x"], rows["expected_mae"].astype(float), marker="s", linestyle="--",
              color=PALETTE[1], label=f"MAE the backtest expected at the same {cadence.plural} ahead")
    highest = float(np.nanmax(rows[["realised_mae", "expected_mae"]].to_numpy(float), initial=0.0))
    axes.set_ylim(0, highest * 1.15 or 1.0)   # from 0, so a ratio of heights is a ratio of errors
    axes.set_title("Realised accuracy against expectation, run by run")
    axes.set_xlabel(f"last {cadence.name} of actuals in the run's data")
    axes.set_ylabel("MAE")
    axes.xaxis.set_major_locator(MaxNLocator(nbins=8, integer=True))
    axes.xaxis.set_major_formatter(FuncFormatter(_period_labeller(cadence)))
    axes.legend(fontsize=7, frameon=False, loc="upper center", bbox_to_anchor=(0.5, -0.2), ncol=2)
    worse = int((rows["realised_mae"] > rows["expected_mae"]).sum())
    alt = (f"Line chart of the realised MAE of {len(rows)} run(s)' recommended forecasts beside the MAE "
           f"each run's backtest expected, by the run's last {cadence.name} of actuals ({rows['last_period'].iloc[0]}"
           f" to {rows['last_period'].iloc[-1]}): realised above expected in {worse} of {len(rows)}.")
    return figure, alt
