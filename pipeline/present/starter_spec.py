"""A starter spec written out as commented YAML from a data file's survey."""

from __future__ import annotations

import os
import re
from pathlib import Path

import yaml

from pipeline.core.cadence import Cadence
from pipeline.core.formatting import format_number
from pipeline.core.significance import MIN_ORIGINS
from pipeline.spec import CsvOptions
from pipeline.spec.ranges import MOST_MONTHS
from pipeline.stages.survey import CALENDAR_YEARS, MAX_LEVELS, Inference

# The holdout, and the periods castline adds to forecast when the file has none: a year of
# months (12) or of quarters (4), but a quarter of weeks (13): weekly figures serve plans a
# few months ahead (orders, staff), and a holdout of 52 weeks would leave a test of two years'
# history with a single year to fit on; a year ahead is better forecast from monthly totals.
HORIZON = {"month": 12, "quarter": 4, "week": 13}
# Weekly data: the season of the year as sine/cosine pairs (52 dummies would take a column
# per week). Four pairs draw waves down to 13 weeks long (52 / 4): the shape of the seasons,
# in eight columns that two years of history pin down; a single week's spike (a holiday) is
# for drivers.calendar.holidays or events, not for more pairs.
WEEK_HARMONICS = 4


def _yaml_value(value) -> str:
    return yaml.safe_dump(value, default_flow_style=True, allow_unicode=True).strip().removesuffix("...").strip()


def _gaps_line(found: Inference) -> str:
    period = found.cadence
    if found.history_gaps:
        return (f"  gaps: fill              # {found.history_gaps} {period.name}(s) inside the history lack "
                "the target or a row: filled by interpolation (refuse | allow | fill)")
    return f"  gaps: refuse            # {period.plural} missing inside a series: refuse | allow | fill"


def _date_format_lines(found: Inference) -> list[str]:
    if found.date_format is None:
        return []
    order = ("day first: some dates have a first field above 12" if found.date_format.startswith("%d")
             else "month first: some dates have a second field above 12")
    return [f"  date_format: {_yaml_value(found.date_format)}   # how the dates are written; {order}"]


def _lookalike_lines(found: Inference) -> list[str]:
    if not found.target_lookalikes:
        return []
    listed = ", ".join(f"{column} (r = {format_number(r)})" for column, r in found.target_lookalikes.items())
    name = found.cadence.name
    return [f"# Other columns that move with the target {name} by {name} (candidates for the target, "
            "not drivers: they would leak it):",
            f"# {listed}"]


def _future_comment(found: Inference, column: str) -> str:
    if found.driver_future[column] == "given":
        return f"the {found.cadence.plural} to forecast carry its values"
    if not found.future_rows:
        return "estimated: see above"
    empty = found.future_missing[column]
    return (f"empty in {empty} of the {found.future_rows} rows to forecast: estimated, "
            "in the backtest too")


def _numeric_lines(found: Inference) -> list[str]:
    if not found.numeric_drivers:
        return ["  numeric: []"]
    period = found.cadence
    place = "calendar month" if period.name == "month" else f"{period.name} of the year"
    lines = [f"  # future: how a driver's values in the {period.plural} to forecast are found. given: the "
             "file carries them",
             f"  # (a plan, a price list); {'month_mean' if period.name == 'month' else 'period_mean'}: "
             "castline estimates them (the series' average for that",
             f"  # {place}, learned in each training window)."]
    if not found.future_rows:
        lines += [f"  # The file has no {period.plural} to forecast (rows after the last actual, target "
                  "empty), so castline",
                  "  # cannot tell which drivers you know in advance: each is estimated, so the "
                  "backtest never uses",
                  "  # a value you would not have had. Write 'future: given' for one you plan "
                  "(a price list) and",
                  f"  # add the {period.plural} to forecast with its values."]
    lines.append("  numeric:")
    for column in found.numeric_drivers:
        rule = found.driver_future[column]
        lines += [f"    - column: {_yaml_value(column)}",
                  f"      future: {rule:<10} # {_future_comment(found, column)}"]
    return lines


def _season_lines(period: Cadence) -> list[str]:
    if period.name == "month":
        return ["    month_of_year: fourier"]
    if period.name == "quarter":
        return ["    season: dummies         # a 0/1 column per quarter of the year but the first"]
    return ["    season: fourier",
            f"    harmonics: {WEEK_HARMONICS}            # sine/cosine pairs: waves down to "
            f"{52 // WEEK_HARMONICS} weeks long"]


def _calendar_lines(found: Inference) -> list[str]:
    period, months = found.cadence, found.history_periods
    needed = CALENDAR_YEARS * period.season_lag
    if months >= needed:
        return [f"  calendar:                 # {months} {period.plural} of history: a straight-line trend "
                "and the season of the year",
                "    trend: true",
                *_season_lines(period)]
    monthly = period.name == "month"
    return [f"  # calendar (trend, {'month_of_year' if monthly else 'season'}) left out: {months} "
            f"{period.plural} of history are too few to tell a trend",
            f"  # from the season; add them once there are {needed} (each "
            f"{'calendar month' if monthly else period.season_word.replace(' of ', ' of the ')} "
            "seen twice)."]


def _column_lines(found: Inference) -> list[str]:
    used = {found.date_column, found.target, *found.series, *found.numeric_drivers,
            *found.categorical_drivers}
    lines = []
    for column, kind in found.types.items():
        if column not in used:
            continue
        rule = {"type": kind}
        if column == found.target and found.missing[column]:
            rule["missing_allowed"] = True
        if kind == "category" and len(found.levels.get(column, [])) <= MAX_LEVELS:
            rule["allowed"] = found.levels[column]
        lines.append(f"  {_yaml_value(column)}: {_yaml_value(rule)}")
    return lines


def _forecast_lines(found: Inference, months: int) -> list[str]:
    """Return the forecast section when the file has no periods to forecast: castline adds
    them after each series' last actual (every driver is estimated then)."""
    if found.future_rows:
        return []
    return [f"# The file has no {found.cadence.plural} to forecast: castline adds this many after "
            "each series' last",
            "# actual (a driver you mark 'future: given' then needs its values in the file).",
            "forecast:", f"  {'months' if found.cadence.name == 'month' else 'periods'}: {months}", ""]


def _validation_lines(history: int, horizon: int, period: Cadence) -> list[str]:
    """Return the validation section: rolling origins when the history allows a test (a
    first window of two years or more, then MIN_ORIGINS origins or more), else a holdout."""
    first = max(CALENDAR_YEARS * period.season_lag, history - horizon - 23)   # about 24 origins
    first = min(first, MOST_MONTHS)            # once the history is long; the spec's bound
    name, plural = period.name, period.plural
    if first + horizon + MIN_ORIGINS - 1 <= history:
        return [f"# Test out of sample at every {name} from the {first}th on: fit on the {plural} up to it,",
                f"# predict the next {horizon}, and compare with what happened; many origins let the",
                "# answer say whether a model's advantage is more than luck.",
                "validation:", "  method: rolling_origin", f"  horizon: {horizon}",
                f"  min_train_periods: {first}"]
    return [f"# Test out of sample on the last {horizon} {plural} of history. With so few {plural} a",
            "# single holdout gives a point estimate and no test of luck; with more history,",
            "# method: rolling_origin does.",
            "validation:", "  method: holdout", f"  last_periods: {horizon}"]


def _period_line(found: Inference) -> str:
    """Return input.period: bare for monthly data whose spacing was read, else with what the
    dates showed (weekly and quarterly data; monthly assumed when the spacing told nothing)."""
    line = f"  period: {found.cadence.name}"
    if found.frequency == "month" and found.spacing.endswith(" apart: monthly data"):
        return line
    return f"{line:<26}# {found.spacing}"


def render_spec(found: Inference, spec_path: Path) -> str:
    """Return a commented starter spec for the inferred data."""
    data_file = os.path.relpath(found.path.resolve(), spec_path.resolve().parent)
    name = re.sub(r"[^A-Za-z0-9_.-]+", "-", found.path.stem).strip("-.") or "forecast"
    periods, period = found.periods, found.cadence
    holdout = min(HORIZON[period.name], max(1, found.history_periods // 5))
    lines = [
        f"# Starter spec written by 'castline init' from {found.path.name}",
        f"# ({found.rows} rows, {periods} {period.plural}, {found.history_periods} of them with the target). "
        "Everything below is a guess to check and edit.",
        "",
        f"name: {_yaml_value(name)}",
        "",
        "input:",
        f"  file: {_yaml_value(data_file)}",
    ]
    if found.file_format == "csv" and found.csv != CsvOptions():
        lines.append("  csv:")
        for key, value in found.csv.model_dump().items():
            if value != getattr(CsvOptions(), key):
                lines.append(f"    {key}: {_yaml_value(value)}")
    lines += [
        f"  date_column: {_yaml_value(found.date_column)}",
        *_date_format_lines(found),
        _period_line(found),
        f"  series: {_yaml_value(found.series)}" + (f"   # columns that, with the {period.name}, identify a row"
                                                  if found.series else "   # one series: no key needed"),
        _gaps_line(found),
        "",
        f"# Other candidates for the target: {', '.join(found.target_candidates[1:]) or 'none'}",
        *_lookalike_lines(found),
        f"target: {_yaml_value(found.target)}",
        "",
        "drivers:",
        *_numeric_lines(found),
        "  categorical:" + ("" if found.categorical_drivers or found.series else " []"),
        *[f"    - column: {_yaml_value(c)}\n      encoding: one_hot" for c in found.categorical_drivers + found.series],
        *_calendar_lines(found),
        "",
        "# What each column the spec uses must hold; a run stops when the data breaks a rule.",
        "columns:",
        *_column_lines(found),
        "",
        *_validation_lines(found.history_periods, holdout, period),
        "",
        *_forecast_lines(found, holdout),
        f"models: [ols]               # the mean of the training {period.plural} is always fitted beside them",
        "",
        "output:",
        "  folder: reports",
        "",
    ]
    return "\n".join(lines)
