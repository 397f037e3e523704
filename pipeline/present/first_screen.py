"""The report's first screen: after the answer, the recommended model's forecast for the coming
periods as a picture, the numbers for the next three periods and the caution line.

A reviewer who reads no further has the answer and the forecast. With several series the
picture shows the largest (by its total actuals) and the numbers add up every series' point
forecast for the periods ahead; the intervals are per series and follow in the Forecast section.
Periods are months, quarters or weeks, as their labels say; the words follow them.
"""

from __future__ import annotations

import matplotlib
import matplotlib.figure
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg

from pipeline.core.cadence import cadence_of_labels, first_days, year_before
from pipeline.core.catalogue import model_label
from pipeline.core.formatting import format_number, format_percent
from pipeline.present import plots

NEXT_MONTHS = 3          # the periods whose numbers the first screen gives
HISTORY_YEARS = 2        # the years of actuals drawn before the forecast (24 months, 8 quarters, 104 weeks)
HISTORY_MONTHS = 12 * HISTORY_YEARS
CAUTION = ("Forecasts are estimates: the intervals rest on assumptions, the past may not hold, "
           "and decisions that matter deserve a person's judgement (see Cautions below).")


def _months(periods) -> pd.DatetimeIndex:
    return first_days(periods.astype(str))


def _range(low, high) -> str:
    if low is None or high is None or pd.isna(low) or pd.isna(high):
        return "—"
    return f"{format_number(float(low))}–{format_number(float(high))}"


def next_months(stated: pd.DataFrame, series, months: int = NEXT_MONTHS) -> pd.DataFrame:
    """Return the pictured series' forecast for the next `months` periods with its stated
    80% and 95% intervals as ranges (the periods' column named by their spacing: month, quarter, week)."""
    own = stated[stated["series"].astype(str) == str(series)].sort_values("period").head(months)
    return pd.DataFrame({
        cadence_of_labels(own["period"]).name: own["period"].astype(str), "forecast": own["forecast"].astype(float),
        "80% interval": [_range(lo, hi) for lo, hi in zip(own["80% from"], own["80% to"])],
        "95% interval": [_range(lo, hi) for lo, hi in zip(own["95% from"], own["95% to"])]})


def all_series_total(stated: pd.DataFrame, months: int = NEXT_MONTHS) -> pd.DataFrame:
    """Return the sum of every series' point forecast in each of the next `months` months that
    every series is forecast in (a month some series have actuals for is no total), and how
    many series it adds up."""
    periods = stated["period"].astype(str)
    counts = stated.groupby(periods)["series"].nunique()
    whole = counts[counts == stated["series"].nunique()].index
    first = sorted(whole)[:months]
    rows = stated[periods.isin(first)]
    return rows.groupby("period", sort=True).agg(total=("forecast", "sum"), series=("series", "nunique")) \
        .reset_index()


def _a_year_earlier(history: pd.DataFrame, series, months: list[str]) -> float | None:
    """Return the series' actuals summed over the same periods a year earlier (None if any is
    missing): 12 months, 4 quarters or 52 weeks back."""
    own = history[history["series"].astype(str) == str(series)].set_index("period")["actual"]
    earlier = [year_before(m) for m in months]
    values = [own.get(m) for m in earlier]
    if any(v is None or pd.isna(v) for v in values):
        return None
    return float(np.sum(values))


def forecast_glance(history: pd.DataFrame, stated: pd.DataFrame, series, model: str, method: str
                    ) -> plots.Figure:
    """Return the picture of the series' recent actuals and the model's forecast with its stated
    80% and 95% intervals; its text alternative states the next months' forecast against the
    same periods a year earlier."""
    ahead = stated[stated["series"].astype(str) == str(series)].sort_values("period")
    cadence = cadence_of_labels(ahead["period"])
    drawn = HISTORY_YEARS * cadence.season_lag
    past = history[history["series"].astype(str) == str(series)].sort_values("period").tail(drawn)
    with matplotlib.rc_context(plots.STYLE):
        figure = matplotlib.figure.Figure(figsize=(6.2, 3.1))
        FigureCanvasAgg(figure)
        axis = figure.subplots()
        axis.plot(_months(past["period"]), past["actual"], color="#000000", linewidth=1,
                  label="actual")
        months = _months(ahead["period"])
        for level, shade in (("95", 0.18), ("80", 0.32)):
            low, high = ahead[f"{level}% from"], ahead[f"{level}% to"]
            if low.notna().any():
                axis.fill_between(months, low, high, color=plots.PALETTE[0], alpha=shade, linewidth=0,
                                  label=f"{level}% interval")
        axis.plot(months, ahead["forecast"], color=plots.PALETTE[0], marker="o", markersize=3,
                  linewidth=1.4, label=f"forecast ({model_label(model, cadence)})")
        axis.set_title(plots.as_text(series) if series is not None else "", fontsize=9)
        plots.date_axis(axis, most=8, least=5, cadence=cadence)
        axis.legend(fontsize=7, frameon=False, loc="upper left", ncol=2)
        picture = plots.inline_picture(figure, "", "svg")
    shown = ahead.head(NEXT_MONTHS)
    total = float(shown["forecast"].sum())
    before = _a_year_earlier(history, series, list(shown["period"].astype(str)))
    plural = cadence.plural
    alt = (f"Line chart of the last {len(past)} {plural} of actuals{'' if series is None else f' of {series}'} "
           f"and the {model_label(model, cadence)} forecast for the next {len(ahead)} {plural}, with its {method} "
           f"80% and 95% intervals shaded. The next {len(shown)} {plural} are forecast at {format_number(total)} in all")
    if before:
        alt += (f", {format_percent(total / before - 1)} against the same {plural} a year earlier "
                f"({format_number(before)})")
    return plots.Figure(picture.uri, alt + ".")


def pictured_series(history: pd.DataFrame, stated: pd.DataFrame):
    """Return the series the first screen shows: the only one, else the one with the largest
    total actuals (plots.largest_series, as the Forecast section's picture picks them)."""
    names = list(dict.fromkeys(stated["series"]))
    return names[0] if len(names) == 1 else plots.largest_series(history, names, count=1)[0]


def first_screen_view(history: pd.DataFrame | None, stated: pd.DataFrame | None, method: str | None,
                      recommended: str) -> dict | None:
    """Return what the first screen shows after the answer (None when there is nothing to
    forecast): the picture, the next months' numbers, the total over series and the caution."""
    if stated is None or not len(stated) or history is None or method is None:
        return None
    names = list(dict.fromkeys(stated["series"]))
    series = pictured_series(history, stated)
    view = {"picture": forecast_glance(history, stated, series, recommended, method),
            "series": series, "series_count": len(names), "next": next_months(stated, series),
            "method": method, "caution": CAUTION, "total": None}
    if len(names) > 1:
        view["total"] = all_series_total(stated)
    return view
