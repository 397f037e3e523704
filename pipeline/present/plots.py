"""The report's pictures: matplotlib, non-interactive, deterministic, colour-blind-safe.

Each function returns a Figure value: the picture as a data URI (inline.py: SVG, or PNG for
a scatter of many points) plus the text that stands in for it for a reader who cannot see it.

Pictures are drawn on figures of their own with the Agg canvas, never through
pyplot, and in the report's style (``STYLE``) set only while each is drawn: importing
this module or drawing a picture leaves matplotlib's global settings and backend
as they were.
"""

from __future__ import annotations

import functools

import matplotlib
import matplotlib.dates as mdates
import matplotlib.figure
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg

from pipeline.core.cadence import MONTH, Cadence, cadence_of_labels, first_days, year_before
from pipeline.core.catalogue import model_label
from pipeline.core.distributions import normal_order_medians
from pipeline.core.formatting import format_number, format_signed
from pipeline.present.inline import (  # noqa: F401  (the pictures' encoding, named here as well)
    SVG_DOTS,
    SVG_MARKERS,
    Figure,
    compact_svg,
    data_uri,
    inline_picture,
    picture_bytes,
    picture_data,
    picture_kind,
)
from pipeline.present.period_axis import period_ticks

# Okabe & Ito (2008) colour-blind-safe palette; the mean baseline always in grey.
PALETTE = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000"]
BASELINE_COLOUR = "#7F7F7F"
MAX_PANELS = 6
MAX_LABELS = 12     # date or origin labels on an axis at most
MAX_LISTED = 12     # series named one by one in the Drivers pictures; more are summarised, never listed

STYLE = {
    "font.size": 9, "axes.spines.top": False, "axes.spines.right": False,
    "axes.grid": True, "grid.color": "#DDDDDD", "grid.linewidth": 0.6,
    "figure.dpi": 100, "savefig.dpi": 100, "svg.hashsalt": "castline", "svg.fonttype": "none",
}


def _styled(draw):
    """Draw (and save) the picture in the report's style, set for the drawing only."""
    @functools.wraps(draw)
    def styled(*args, **kwargs):
        with matplotlib.rc_context(STYLE):
            return draw(*args, **kwargs)
    return styled


def _subplots(*grid: int, figsize: tuple[float, float], **options):
    """Return a new figure on an Agg canvas of its own, and its axes (as pyplot.subplots)."""
    figure = matplotlib.figure.Figure(figsize=figsize)
    FigureCanvasAgg(figure)
    return figure, figure.subplots(*grid, **options)


def as_text(value) -> str:
    """Return a label matplotlib draws as it reads: a '$' in a name is not maths."""
    return str(value).replace("$", r"\$")

def _straight_line(x: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """Return the slope and intercept of y's least-squares line on x (NaN for fewer than two points)."""
    if len(x) < 2:
        return np.nan, np.nan
    (variance, covariance), _ = np.cov(x, y, bias=True)
    slope = covariance / variance
    return slope, float(np.mean(y) - slope * np.mean(x))


def the_model(name: str, cadence: Cadence | None = None) -> str:
    """Return a model's name as a sentence writes it after a verb: its catalogue label, with
    'the' before a label that is a description (the mean baseline's) rather than a name."""
    label = model_label(name, cadence)
    return label if label.startswith("the ") or name != "mean_baseline" else "the " + label


def model_names(models, cadence: Cadence | None = None) -> str:
    """Return models' catalogue labels, joined by commas."""
    return ", ".join(model_label(m, cadence) for m in models)


def model_colours(models: list[str]) -> dict[str, str]:
    """Return each model's colour in the pictures: the mean baseline grey, the others in turn."""
    others = [m for m in models if m != "mean_baseline"]
    colours = {m: PALETTE[i % len(PALETTE)] for i, m in enumerate(others)}
    colours["mean_baseline"] = BASELINE_COLOUR
    return colours


def date_axis(axis, most: int = 7, least: int = 3, cadence: Cadence = MONTH) -> None:
    """Label a date axis with ``least`` to ``most`` ticks (about), concisely. matplotlib's
    AutoDateLocator ticks by years only from ``least`` years up, and by months only every 1 to 6
    of them: a span too short for years and too long for ``most`` ticks every 6 months (30 to 33
    months with at most 6 ticks, 41 to 55 with 5 to 8) found no interval, warned and fell back
    to 6. Ticks every 12 months (each January) close that gap. Quarters and weeks are ticked at
    their own starts and labelled as castline writes them (period_ticks)."""
    if cadence.name != "month":
        period_ticks(axis, cadence, most)
        return
    locator = mdates.AutoDateLocator(minticks=least, maxticks=most)
    locator.intervald[mdates.MONTHLY] = [1, 2, 3, 4, 6, 12]
    axis.xaxis.set_major_locator(locator)
    axis.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))


def _months(values) -> pd.DatetimeIndex:
    return first_days(values)


def largest_series(history: pd.DataFrame, among=None, count: int = MAX_PANELS) -> list:
    """Return the names of the ``count`` series with the largest total actuals (ties by name
    order in the history), among the given names if any."""
    totals = history.groupby("series", sort=False)["actual"].sum()
    if among is not None:
        totals = totals[totals.index.isin(set(among))]
    return list(totals.sort_values(ascending=False, kind="stable").index[:count])


def _nearest(predictions: pd.DataFrame) -> pd.DataFrame:
    """Return one prediction per period and series: the one from the nearest origin."""
    return predictions.sort_values("horizon", kind="stable").drop_duplicates(["period", "series"])


def _one_step_and_longest(predictions: pd.DataFrame, cadence: Cadence = MONTH
                           ) -> list[tuple[str, pd.DataFrame]]:
    """Return the predictions made one period ahead and those made the furthest ahead, each
    with what they are; from a single origin (a holdout), its predictions as one part."""
    steps = sorted(set(predictions["horizon"].astype(int)))
    origins = list(predictions["origin"].unique())
    if len(origins) == 1 and len(steps) > 1:
        return [(f"from {origins[0]}, {steps[0]} to {_ahead_text(steps[-1], cadence)}", predictions)]
    return [(_ahead_text(h, cadence), predictions[predictions["horizon"].astype(int) == h])
            for h in dict.fromkeys(steps[:1] + steps[-1:])]


def _ahead_text(months: int, cadence: Cadence = MONTH) -> str:
    return f"{months} {cadence.name if months == 1 else cadence.plural} ahead"


def _months_text(scored: list, cadence: Cadence = MONTH) -> str:
    count = f"{len(scored):,} {cadence.name if len(scored) == 1 else cadence.plural}"
    return count + (f", {scored[0]} to {scored[-1]}" if len(scored) > 1 else f", {scored[0]}" if scored else "")


def _least_error(rows: pd.DataFrame, what: str, cadence: Cadence = MONTH) -> str:
    """Return the sentence naming the model whose predictions in ``rows`` erred least (MAE per
    series and period), and the others' MAE."""
    if not len(rows) or "actual" not in rows:
        return ""
    errors = (rows["prediction"] - rows["actual"]).abs().groupby(rows["model"], sort=False).mean().dropna()
    if not len(errors):
        return ""
    ranked = errors.sort_values(kind="stable")
    others = ", ".join(f"{model_label(m, cadence)} {format_number(v)}" for m, v in ranked.iloc[1:].items())
    return (f" {what[:1].upper() + what[1:]}, {model_label(ranked.index[0], cadence)} erred least of the models "
            f"drawn: MAE {format_number(ranked.iloc[0])} per series and {cadence.name}"
            + (f", against {others}." if others else "."))


@_styled
def backtest_picture(history: pd.DataFrame, predictions: pd.DataFrame) -> Figure:
    """Actuals and each model's out-of-sample predictions, summed over series: those made one
    month ahead and those made the furthest ahead in two panels side by side (one y axis), or
    from a single origin one panel; the legend below them; the text names the model whose
    one-month-ahead errors were smallest."""
    actual = history.groupby("period")["actual"].sum().sort_index()
    cadence = cadence_of_labels(actual.index)
    parts = _one_step_and_longest(predictions, cadence)
    figure, axes = _subplots(1, len(parts), figsize=(8, 3.6), sharey=True, squeeze=False)
    axes = axes[0]
    models = list(predictions["model"].unique())
    colours = model_colours(models)
    spans = []
    for axis, (what, rows) in zip(axes, parts):
        scored = sorted(set(rows["period"]))
        # Actuals from a year before the first period scored, so the level before it shows.
        start = year_before(scored[0]) if scored else actual.index.min()
        shown = actual[(actual.index >= start) & (actual.index <= (scored[-1] if scored else actual.index.max()))]
        axis.plot(_months(shown.index), shown.to_numpy(), color="#000000", linewidth=1.2, label="actual")
        for model in models:
            total = rows[rows["model"] == model].groupby("period")["prediction"].sum().sort_index()
            axis.plot(_months(total.index), total.to_numpy(), linestyle="--" if model == "mean_baseline" else "-",
                      marker=".", markersize=3 if len(total) > 24 else 5, linewidth=1, color=colours[model],
                      label=as_text(model_label(model, cadence)))
        axis.set_title(f"predicted {what}", fontsize=8)
        date_axis(axis, most=MAX_LABELS // len(parts), cadence=cadence)
        spans.append(f"{what} ({_months_text(scored, cadence)})")
    axes[0].set_ylabel("target, all series")
    handles, labels = axes[0].get_legend_handles_labels()
    figure.legend(handles, labels, loc="lower center", ncol=len(labels), fontsize=7, frameon=False)
    count = history["series"].nunique()
    summed = "summed over all series" if count < 2 else f"summed over all {count:,} series"
    alt = (f"{'Two line charts sharing the y axis' if len(parts) > 1 else 'Line chart'}: the actual "
           f"target {summed} (black) and the out-of-sample predictions of {model_names(models, cadence)} summed "
           f"alike, made {' and '.join(spans)}.")
    points = sum(rows.groupby("model")["period"].nunique().sum() for _, rows in parts)
    return inline_picture(figure, alt + _least_error(parts[0][1], parts[0][0], cadence), picture_kind(points))


@_styled
def error_picture(table: pd.DataFrame, key: str, label: str, cadence: Cadence = MONTH) -> Figure:
    """MAE per model at each origin or horizon (the simple rules named in the words of ``cadence``)."""
    figure, axis = _subplots(figsize=(8, 2.8))
    models = list(dict.fromkeys(table["model"]))
    colours = model_colours(models)
    for model in models:
        own = table[table["model"] == model]
        positions = np.arange(len(own))
        axis.plot(positions, own["mae"].to_numpy(), marker="o", markersize=3, linewidth=1,
                  color=colours[model], label=as_text(model_label(model, cadence)))
        # At most MAX_LABELS labels: every k-th origin or horizon, the first one labelled.
        every = -(-len(own) // MAX_LABELS)
        axis.set_xticks(positions[::every])
        axis.set_xticklabels([str(v) for v in own[key]][::every], rotation=45 if len(own) > 8 else 0,
                             fontsize=7, ha="right" if len(own) > 8 else "center")
    axis.set_xlabel(label)
    axis.set_ylabel("MAE")
    axis.legend(fontsize=7, frameon=False, ncol=len(models), loc="lower left", bbox_to_anchor=(0, 1.0))
    worst = table.loc[table["mae"].idxmax()] if len(table) else None
    alt = (f"Line chart of the mean absolute error of {model_names(models, cadence)} by {label}. "
           + (f"The largest error is {format_number(worst['mae'])} ({model_label(worst['model'], cadence)}, "
              f"{label} {worst[key]})."
              if worst is not None else ""))
    return inline_picture(figure, alt, picture_kind(len(table)))


def _against_last_year(history: pd.DataFrame, forecast: pd.DataFrame, series: list,
                       cadence: Cadence = MONTH) -> str:
    """Return the sentence comparing each pictured series' forecast, summed over the periods
    ahead, with its actuals in the same periods a year earlier (where every one is known)."""
    parts = []
    actual = history.set_index(["series", "period"])["actual"]
    for name in series:
        ahead = forecast[forecast["series"] == name]
        earlier = [(name, year_before(p)) for p in ahead["period"]]
        if not len(ahead) or not all(key in actual.index for key in earlier):
            continue
        before = float(actual.loc[earlier].sum())
        if before != 0 and np.isfinite(before):
            parts.append(f"{name} {float(ahead['forecast'].sum()) / before - 1:+.1%}")
    return (f" Against the same {cadence.plural} a year earlier, the forecast is: " + ", ".join(parts) + "."
            if parts else "")


@_styled
def forecast_picture(history: pd.DataFrame, forecast: pd.DataFrame, model: str, method: str,
                     scenarios: pd.DataFrame | None) -> Figure:
    """History and the forecast with 80% and 95% intervals, one panel per series: with more
    series than panels, the series with the largest total actuals."""
    own = forecast[forecast["model"] == model]
    cadence = cadence_of_labels(history["period"])
    shown_years = 3   # the years of actuals drawn: 36 months, 12 quarters, 156 weeks
    series = list(dict.fromkeys(own["series"])) or list(dict.fromkeys(history["series"]))
    total = len(series)
    if total > MAX_PANELS:
        series = largest_series(history, series)
    columns = min(2, len(series)) or 1
    rows = int(np.ceil(len(series) / columns)) or 1
    figure, axes = _subplots(rows, columns, figsize=(8, 2.4 * rows), squeeze=False)
    for index, name in enumerate(series):
        axis = axes[index // columns][index % columns]
        past = history[history["series"] == name].sort_values("period").tail(shown_years * cadence.season_lag)
        axis.plot(_months(past["period"]), past["actual"], color="#000000", linewidth=1, label="actual")
        ahead = own[own["series"] == name].sort_values("period")
        if len(ahead):
            months = _months(ahead["period"])
            for level, shade in (("95", 0.18), ("80", 0.32)):
                low, high = ahead.get(f"{method}_low_{level}"), ahead.get(f"{method}_high_{level}")
                if low is not None and low.notna().any():
                    axis.fill_between(months, low, high, color=PALETTE[0], alpha=shade, linewidth=0,
                                      label=f"{level}% interval")
            axis.plot(months, ahead["forecast"], color=PALETTE[0], marker="o", markersize=3,
                      linewidth=1.2, label="forecast")
            if scenarios is not None and len(scenarios):
                for number, (scenario, rows_) in enumerate(scenarios[(scenarios["model"] == model)
                                                                     & (scenarios["series"] == name)]
                                                           .groupby("scenario", sort=False)):
                    rows_ = rows_.sort_values("period")
                    axis.plot(_months(rows_["period"]), rows_["scenario_forecast"], linestyle="--",
                              linewidth=1, color=PALETTE[(number + 1) % len(PALETTE)], label=scenario)
        axis.set_title(as_text(name), fontsize=8)
        date_axis(axis, cadence=cadence)
        if index == 0:
            axis.legend(fontsize=6, frameon=False, loc="upper left")
    for index in range(len(series), rows * columns):
        axes[index // columns][index % columns].axis("off")
    which = (f"one per series ({', '.join(map(str, series))})" if total <= MAX_PANELS else
             f"for the {len(series)} of {total:,} series with the largest total actuals "
             f"({', '.join(map(str, series))}; forecast.csv holds every series)")
    alt = (f"{len(series)} small line charts, {which}: the last "
           f"{shown_years * cadence.season_lag} {cadence.plural} of actuals and the {model_label(model, cadence)} "
           f"forecast for {len(set(own['period']))} {cadence.plural} "
           f"ahead with shaded 80% and 95% {method} intervals"
           + ("; dashed lines show the scenarios." if scenarios is not None and len(scenarios) else ".")
           + _against_last_year(history, own, series, cadence))
    return inline_picture(figure, alt, "svg")


def _clearest(names, middle, low, high, unit: str) -> str:
    """Return the sentence naming the term whose interval lies furthest from zero for its width."""
    width = (np.asarray(high, float) - np.asarray(low, float)) / 2
    with np.errstate(divide="ignore", invalid="ignore"):   # an exact fit's intervals have no width
        distance = np.where((width > 0) & np.isfinite(width), np.abs(np.asarray(middle, float)) / width, np.nan)
    if not np.isfinite(distance).any():
        return ""
    at = int(np.nanargmax(distance))
    return (f" Furthest from zero for its interval: {names[at]}, {format_number(float(middle[at]))}{unit} "
            f"(95% interval {format_number(float(low[at]))} to {format_number(float(high[at]))}).")


@_styled
def coefficient_picture(terms: pd.DataFrame, label: str = "effect on the target per unit of the driver",
                        columns: tuple[str, str, str] = ("estimate", "low_95", "high_95"),
                        model: str = "the model") -> Figure:
    """Each driver's effect with its 95% interval (the intercept left out): ``columns`` name the
    estimate and the interval's ends (for a log target, their percent changes), ``label`` what
    they measure. A model fitted on each series (a ``series`` column): up to MAX_LISTED series
    each named in a colour and marker of its own, more summarised by term (spread_picture)."""
    middle_name, low_name, high_name = columns
    if "series" in terms and terms["series"].nunique() > 1:
        if terms["series"].nunique() <= MAX_LISTED:
            from pipeline.present.series_plots import coefficients_by_series
            return coefficients_by_series(terms, model, label, columns)
        grouped = terms.groupby("term", sort=False)[middle_name]
        spread = pd.DataFrame({"median": grouped.median(), "25%": grouped.quantile(0.25),
                               "75%": grouped.quantile(0.75)}).reset_index()
        return spread_picture(spread, model, label, ("median", "25%", "75%"))
    shown = terms[terms["term"] != "intercept"].dropna(subset=[middle_name])
    figure, axis = _subplots(figsize=(8, max(1.8, 0.28 * len(shown) + 0.8)))
    positions = np.arange(len(shown))[::-1]
    middle = shown[middle_name].to_numpy(float)
    has_interval = {low_name, high_name} <= set(shown.columns) and shown[low_name].notna().any()
    if has_interval:
        low, high = shown[low_name].to_numpy(float), shown[high_name].to_numpy(float)
        axis.errorbar(middle, positions, xerr=[middle - low, high - middle],
                      fmt="o", color=PALETTE[0], ecolor=PALETTE[5], capsize=2, markersize=3)
    else:
        axis.plot(middle, positions, "o", color=PALETTE[0], markersize=3)
    axis.axvline(0, color="#000000", linewidth=0.8)
    axis.set_yticks(positions)
    axis.set_yticklabels([as_text(term) for term in shown["term"]], fontsize=7)
    axis.set_xlabel(as_text(label) + (" (95% interval)" if has_interval else ""))
    crossing = int(((low < 0) & (high > 0)).sum()) if has_interval else 0
    unit = "%" if label.startswith("%") else ""
    alt = (f"Dot chart of {len(shown)} driver coefficients as the {label}"
           + (" with 95% interval bars" if has_interval else "")
           + (f"; {crossing} of the intervals include zero." if has_interval else ".")
           + (_clearest(list(shown["term"]), middle, low, high, unit) if has_interval else ""))
    return inline_picture(figure, alt, "svg")


@_styled
def spread_picture(spread: pd.DataFrame, model: str, label: str = "effect on the target per unit of the driver",
                   columns: tuple[str, str, str] = ("median estimate", "25%", "75%")) -> Figure:
    """Each term's median effect across series with the quartiles as bars (intercept left out):
    ``columns`` name the median and quartiles (for a log target, of the percent changes)."""
    middle_name, low_name, high_name = columns
    shown = spread[spread["term"] != "intercept"].dropna(subset=[middle_name])
    figure, axis = _subplots(figsize=(8, max(1.8, 0.28 * len(shown) + 0.8)))
    positions = np.arange(len(shown))[::-1]
    middle = shown[middle_name].to_numpy(float)
    low, high = shown[low_name].to_numpy(float), shown[high_name].to_numpy(float)
    axis.errorbar(middle, positions, xerr=[middle - low, high - middle],
                  fmt="o", color=PALETTE[0], ecolor=PALETTE[5], capsize=2, markersize=3)
    axis.axvline(0, color="#000000", linewidth=0.8)
    axis.set_yticks(positions)
    axis.set_yticklabels([as_text(term) for term in shown["term"]], fontsize=7)
    axis.set_xlabel(as_text(label) + ": median across series, bars from the 25% to the 75% quantile")
    crossing = int(((low < 0) & (high > 0)).sum())
    alt = (f"Dot chart of {len(shown)} driver coefficients of {model_label(model)} across series as the {label}: "
           f"the median with bars over the middle half of the series; for {crossing} of the "
           "terms the middle half includes zero.")
    return inline_picture(figure, alt, "svg")


@_styled
def levels_picture(levels: dict, model: str) -> Figure:
    """The series' own levels in a model over all series (report.levels_summary) as a histogram,
    the median marked: with many series a distribution reads where a list of rows would not; up
    to MAX_LISTED series, each level named on a row of its own instead."""
    if len(levels["values"]) <= MAX_LISTED:
        from pipeline.present.series_plots import named_levels
        return named_levels(levels, model)
    values = np.asarray(levels["values"], float)
    figure, axis = _subplots(figsize=(8, 2.4))
    axis.set_axisbelow(True)
    axis.hist(values, bins=int(np.clip(len(values) // 3, 5, 30)), color=PALETTE[0], edgecolor="#FFFFFF", linewidth=0.5)
    axis.axvline(levels["median"], color=PALETTE[1], linewidth=1.2, label="median")
    axis.axvline(0, color="#000000", linewidth=0.8, label="as the reference series")
    axis.set_xlabel(as_text(levels["label"]) + ", each series' own level against the reference series")
    axis.set_ylabel("series")
    axis.legend(fontsize=7, frameon=False, loc="lower left", bbox_to_anchor=(0, 1.0), ncol=2)
    alt = f"Histogram of {model_label(model)}: {levels['text']}"
    return inline_picture(figure, alt, "svg")


@_styled
def skill_histogram(series_table: pd.DataFrame, models: list[str], all_models: list[str],
                    cadence: Cadence = MONTH) -> Figure:
    """Per-series skill against the mean baseline, one outline per model, skill below −1 in
    the leftmost bar (skill is at most 1, so the other end needs no clipping)."""
    colours = model_colours(all_models)
    values = {m: series_table.loc[series_table["model"] == m, "skill_vs_mean"].dropna().to_numpy(float)
              for m in models}
    found = np.concatenate([v for v in values.values() if len(v)] or [np.zeros(1)])
    low = max(-1.0, float(found.min()))
    high = max(float(found.max()), low + 0.1)
    edges = np.linspace(low, high, 31)
    figure, axis = _subplots(figsize=(8, 2.8))
    parts = []
    for model in models:
        own = values[model]
        if not len(own):
            continue
        axis.hist(np.clip(own, low, high), bins=edges, histtype="step", linewidth=1.4,
                  color=colours[model], label=as_text(model_label(model, cadence)))
        parts.append(f"{model_label(model, cadence)}: {len(own):,} series, median {np.median(own):.3g}, "
                     f"{(own > 0).mean():.0%} above 0")
    baseline = the_model("mean_baseline", cadence)
    axis.axvline(0, color=BASELINE_COLOUR, linewidth=1, linestyle="--", label=as_text(f"as good as {baseline}"))
    axis.set_xlabel(as_text(f"skill against the mean (1 − loss / the loss of {baseline}, in select_by), per series"))
    axis.set_ylabel("series")
    axis.legend(fontsize=7, frameon=False, loc="upper left")
    clipped = int(sum((v < -1).sum() for v in values.values()))
    if clipped:
        axis.annotate(f"{clipped:,} below −1", xy=(low, 0), xytext=(4, 14), textcoords="offset points",
                      fontsize=7, color="#333333")
    alt = (f"Histogram of per-series skill against {baseline}, right of the dashed line at 0 "
           "the model beats it; " + "; ".join(parts)
           + (f". {clipped} values below −1 are counted in the leftmost bar." if clipped else "."))
    return inline_picture(figure, alt, "svg")


@_styled
def series_picture(history: pd.DataFrame, predictions: pd.DataFrame, name, model: str,
                   skill: float, all_models: list[str]) -> Figure:
    """One series: actuals, and the model's and the mean baseline's backtest predictions (the
    model in the colour the other pictures give it)."""
    past = history[history["series"] == name].sort_values("period")
    own = predictions[predictions["series"] == name]
    scored = sorted(set(own["period"]))
    cadence = cadence_of_labels(past["period"])
    # Actuals from a year before the first scored period, so the level before it shows.
    start = year_before(scored[0]) if scored else None
    past = past[past["period"] >= start] if start else past.tail(3 * cadence.season_lag)
    figure, axis = _subplots(figsize=(4, 2.3))
    axis.plot(_months(past["period"]), past["actual"], color="#000000", linewidth=1.1, label="actual")
    colours = model_colours(all_models)
    for kind, style in ((model, "-"), ("mean_baseline", "--")):
        rows = _nearest(own[own["model"] == kind]).sort_values("period")
        axis.plot(_months(rows["period"]), rows["prediction"], color=colours[kind], linestyle=style,
                  marker=".", markersize=3, linewidth=1, label=as_text(model_label(kind, cadence)))
    # A "$" in a series name would start matplotlib's maths notation.
    axis.set_title(as_text(f"{name} (skill {skill:.3g})"), fontsize=8)
    date_axis(axis, cadence=cadence)
    axis.legend(fontsize=6, frameon=False, loc="upper left")
    alt = (f"Line chart of series {name}: actuals from {past['period'].min()} to "
           f"{past['period'].max()} and the out-of-sample predictions of {model_label(model, cadence)} and of "
           f"{the_model('mean_baseline', cadence)} for the {len(scored)} {cadence.plural} scored (nearest origin "
           f"first); the skill of {model_label(model, cadence)} on this series is {skill:.3g}.")
    return inline_picture(figure, alt, "svg")


def _spread_by_level(residuals: pd.DataFrame) -> str:
    """Return the sentence comparing the residuals' spread above and below the median fitted value."""
    fitted, residual = residuals["fitted"].to_numpy(float), residuals["residual"].to_numpy(float)
    kept = np.isfinite(fitted) & np.isfinite(residual)
    fitted, residual = fitted[kept], residual[kept]
    middle = np.median(fitted) if len(fitted) else np.nan
    low, high = residual[fitted <= middle], residual[fitted > middle]
    if len(low) < 2 or len(high) < 2 or not low.std(ddof=1) > 0:
        return ""
    return (f" Above the median fitted value ({format_number(float(middle))}) the residuals' standard "
            f"deviation is {format_number(float(high.std(ddof=1) / low.std(ddof=1)))} times that below it.")


@_styled
def residual_pictures(residuals: pd.DataFrame) -> list[Figure]:
    """Residuals over time, against fitted values, and against the normal quantiles."""
    pictures = []
    by_month = residuals.groupby("period")["residual"].mean().sort_index()
    cadence = cadence_of_labels(by_month.index)
    figure, axis = _subplots(figsize=(8, 2.6))
    axis.plot(_months(by_month.index), by_month.to_numpy(), color=PALETTE[0], linewidth=1)
    axis.axhline(0, color="#000000", linewidth=0.8)
    axis.set_ylabel("residual (mean over series)")
    date_axis(axis, cadence=cadence)
    worst = by_month.abs().idxmax() if len(by_month) else None
    pictures.append(inline_picture(figure, "Line chart of the final fit's residuals over time, averaged "
                            "over series; a pattern or drift means the model misses something."
                            + (f" The {cadence.name} furthest from zero is {worst} ({format_number(float(by_month[worst]))})."
                               if worst is not None else ""), "svg"))
    figure, axis = _subplots(figsize=(4, 3))
    axis.scatter(residuals["fitted"], residuals["residual"], s=6, color=PALETTE[0], alpha=0.6)
    axis.axhline(0, color="#000000", linewidth=0.8)
    axis.set_xlabel("fitted value")
    axis.set_ylabel("residual")
    pictures.append(inline_picture(figure, "Scatter of residuals against fitted values; a funnel shape "
                            "means the spread changes with the level." + _spread_by_level(residuals),
                                   picture_kind(len(residuals), SVG_DOTS)))
    figure, axis = _subplots(figsize=(4, 3))
    ordered = np.sort(residuals["residual"].to_numpy(float))
    theoretical = normal_order_medians(len(ordered))
    slope, intercept = _straight_line(theoretical, ordered)
    axis.scatter(theoretical, ordered, s=6, color=PALETTE[0], alpha=0.6)
    axis.plot(theoretical, slope * np.asarray(theoretical) + intercept, color=PALETTE[1], linewidth=1)
    axis.set_xlabel("normal quantile")
    axis.set_ylabel("ordered residual")
    values = residuals["residual"].to_numpy(float)
    values = values[np.isfinite(values)]
    far = float(np.mean(np.abs(values - values.mean()) > 1.96 * values.std(ddof=1))) if len(values) > 1 else np.nan
    pictures.append(inline_picture(figure, "Normal quantile plot of the residuals; points off the line "
                            "in the tails mean larger surprises than a normal curve allows."
                            + (f" {far:.1%} of the {len(values):,} residuals lie more than 1.96 standard "
                               "deviations from their mean, where a normal curve puts 5%." if np.isfinite(far) else ""),
                                   picture_kind(len(residuals), SVG_DOTS)))
    return pictures


@_styled
def track_record_picture(scored: pd.DataFrame, cadence: Cadence = MONTH) -> Figure:
    """The realised errors of earlier runs' forecasts by periods ahead, each against the backtest's
    95% range of errors its run expected there (realised.csv's backtest_low_95 and
    backtest_high_95); a miss outside it is drawn as a cross in the warning colour."""
    rows = scored.sort_values(["horizon", "forecast_created", "forecast_run_id", "period", "series"],
                              kind="stable")
    horizon = rows["horizon"].to_numpy(int)
    error = rows["error"].to_numpy(float)
    low, high = rows["backtest_low_95"].to_numpy(float), rows["backtest_high_95"].to_numpy(float)
    # Each forecast has a place of its own within its months ahead, older runs to the left.
    place = horizon.astype(float)
    for value in np.unique(horizon):
        at = horizon == value
        place[at] += np.linspace(-0.3, 0.3, at.sum()) if at.sum() > 1 else 0.0
    banded = np.isfinite(low) & np.isfinite(high)
    outside = banded & ((error < low) | (error > high))
    inside = banded & ~outside
    figure, axis = _subplots(figsize=(8, 3))
    width = float(np.clip(120 / max(len(rows), 1), 0.8, 6))
    axis.vlines(place[banded], low[banded], high[banded], color="#BBBBBB", linewidth=width,
                label="the backtest's 95% range of errors")
    axis.axhline(0, color="#000000", linewidth=0.8)
    axis.scatter(place[inside], error[inside], s=14, color=PALETTE[0], zorder=3, label="error, inside it")
    axis.scatter(place[outside], error[outside], s=26, marker="X", color=PALETTE[1], zorder=3,
                 label="error, outside it")
    unknown = ~banded
    if unknown.any():
        axis.scatter(place[unknown], error[unknown], s=10, color="#000000", zorder=3,
                     label="error, no range recorded")
    horizons = sorted(set(horizon.tolist()))
    axis.set_xticks(horizons)
    axis.set_xlim(min(horizons) - 0.6, max(horizons) + 0.6)
    axis.set_xlabel(f"{cadence.plural} ahead (each earlier run's forecasts, older runs to the left)")
    axis.set_ylabel("error (forecast − actual)")
    # Room above the highest bar or point for the legend, on one line.
    top = float(np.nanmax(np.concatenate([high[banded], error, [0.0]])))
    bottom = float(np.nanmin(np.concatenate([low[banded], error, [0.0]])))
    axis.set_ylim(bottom - 0.08 * (top - bottom or 1), top + 0.4 * (top - bottom or 1))
    axis.legend(fontsize=7, frameon=False, loc="upper left", ncol=4)
    runs = rows["forecast_run_id"].nunique()
    alt = (f"Dot chart of the realised errors (forecast − actual) of {len(rows):,} forecast(s) from "
           f"{runs:,} earlier run(s) by {cadence.plural} ahead, each against the backtest's 95% range of "
           "errors its run expected there (grey bars): ")
    if banded.any():
        alt += f"{int(outside.sum()):,} of {int(banded.sum()):,} fell outside it"
        if outside.any():
            by_horizon = pd.Series(horizon[outside]).value_counts().sort_index()
            alt += " (" + ", ".join(f"{n} at {h} {cadence.name}(s) ahead" for h, n in by_horizon.items()) + ")"
        alt += ", where about 1 in 20 would by chance"
    else:
        alt += "none of them has a range recorded"
    worst = int(np.nanargmax(np.abs(error))) if np.isfinite(error).any() else None
    if worst is not None:
        alt += (f". The largest error was {format_signed(error[worst])} ({rows['period'].iloc[worst]}, "
                f"{rows['series'].iloc[worst]}, {horizon[worst]} {cadence.name}(s) ahead).")
    return inline_picture(figure, alt, picture_kind(len(rows), SVG_DOTS))
