"""Rules across keys: roles of columns, models, scenarios and features that must agree.

Each rule takes the typed spec and ``fail`` (``Spec.error``), which places its
message at the key's line, and returns every problem it finds: one per item
(a driver, a model, a scenario's change, a column's rule), since the later
problems of one item often follow from its first.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from datetime import UTC, datetime

from pipeline.core.cadence import cadence_named
from pipeline.core.catalogue import METRIC_BY_NAME, MODELS
from pipeline.core.errors import SpecError
from pipeline.core.holidays import HOLIDAYS
from pipeline.spec.keys import KeyPath
from pipeline.spec.ranges import check_ranges
from pipeline.spec.schema import TIME_ORDERED, Spec

# Fourier pairs a season holds: beyond half its length the sines and cosines repeat.
MOST_HARMONICS = {"month": 6, "quarter": 2, "week": 26}

Fail = Callable[[KeyPath, str], SpecError]


def check_rules(spec: Spec, fail: Fail) -> list[SpecError]:
    """Return every problem across keys, rule by rule (an empty list when the spec is sound)."""
    problems = check_roles(spec, fail)
    if not problems:   # the column rules are judged against the roles, which must be sound first
        problems += _check_column_rules(spec, fail)
    return (problems + _check_date_format(spec, fail) + _check_models(spec, fail)
            + _check_scenarios(spec, fail) + _check_features(spec, fail) + check_ranges(spec, fail))


def _check_calendar(spec: Spec, calendar, key: KeyPath, fail: Fail) -> list[SpecError]:
    """Refuse calendar keys that do not fit together or do not fit the data's period."""
    period = spec.input.period
    problems = []
    if calendar.season is not None and calendar.month_of_year is not None:
        problems.append(fail(key + ("month_of_year",), "`month_of_year` is another name for `season`; "
                                                       "give one of them"))
    elif calendar.month_of_year is not None and period != "month":
        problems.append(fail(key + ("month_of_year",), f"`month_of_year` is for monthly data and "
                                                       f"input.period is {period}; use `season`"))
    if calendar.harmonics is not None and calendar.seasonal != "fourier":
        problems.append(fail(key + ("harmonics",), "`harmonics` applies to season: fourier"))
    elif calendar.harmonics is not None and calendar.harmonics > MOST_HARMONICS[period]:
        problems.append(fail(key + ("harmonics",), f"at most {MOST_HARMONICS[period]} sine/cosine "
                                                   f"pairs for a {period}ly season"))
    if calendar.closures and not calendar.working_days:
        problems.append(fail(key + ("closures",), "`closures` applies to working_days: true"))
    if calendar.quarter and period == "quarter":
        problems.append(fail(key + ("quarter",), "quarterly data: use season: dummies for the "
                                                 "quarter of the year"))
    elif calendar.quarter and period == "month" and calendar.seasonal == "dummies":
        problems.append(fail(key + ("quarter",), "quarter dummies are sums of month dummies; use "
                                                 "one or the other"))
    return problems + _check_dated_terms(calendar, key, fail)


def _check_dated_terms(calendar, key: KeyPath, fail: Fail) -> list[SpecError]:
    """Refuse a holiday castline does not know or listed twice, and an event without dates,
    without a name or named as a holiday."""
    problems = []
    for index, name in enumerate(calendar.holidays):
        if name not in HOLIDAYS:
            problems.append(fail(key + ("holidays", index), f"'{name}' is not a holiday castline "
                                 f"knows (holidays: {', '.join(HOLIDAYS)})"))
        elif calendar.holidays.index(name) != index:
            problems.append(fail(key + ("holidays", index), f"'{name}' is listed twice"))
    holiday_words = {word.lower() for holiday in HOLIDAYS.values() for word in (holiday.name, holiday.words)}
    for name, dates in calendar.events.items():
        at = key + ("events", name)
        if not name.strip():
            problems.append(fail(at, "an event needs a name"))
        elif not name.isprintable():
            problems.append(fail(at, "an event's name is one line of text, without tabs or other "
                                     "control characters"))
        elif name.strip().lower() in holiday_words:
            problems.append(fail(at, f"'{name}' is the name of a holiday castline knows: list it under "
                                     "holidays, or give the event a name of its own"))
        elif not dates:
            problems.append(fail(at, f"the event '{name}' has no dates: give at least one"))
    return problems


def _check_date_format(spec: Spec, fail: Fail) -> list[SpecError]:
    """Refuse an input.date_format without a year or a month, or that cannot read back a
    date it writes (Python's strftime and strptime, whose directives pandas reads too)."""
    written = spec.input.date_format
    if written is None:
        return []
    key = ("input", "date_format")
    if not re.search(r"%[Yy]", written):
        return [fail(key, f"{written!r} has no year (%Y or %y)")]
    if not re.search(r"%[mbB]", written):
        return [fail(key, f"{written!r} has no month (%m, %b or %B)")]
    sample = datetime(2019, 3, 25, 13, 45, 30, tzinfo=UTC)
    try:
        back = datetime.strptime(sample.strftime(written), written)
    except ValueError as exc:
        return [fail(key, f"{written!r} is not a date format castline can read ({exc}); "
                          "write it in strftime form, like \"%d/%m/%Y\"")]
    if (back.year, back.month) != (2019, 3):
        return [fail(key, f"{written!r} reads 2019-03-25, written with it, as another month")]
    return []


def check_roles(spec: Spec, fail: Fail) -> list[SpecError]:
    """Refuse a column given two roles (target, date, series, driver) or listed twice."""
    problems = []
    seen: dict[str, str] = {spec.target: "the target", spec.input.date_column: "the date column"}
    for index, column in enumerate(spec.input.series):
        if column in seen:
            problems.append(fail(("input", "series", index), f"column '{column}' is already {seen[column]}"))
            continue
        seen[column] = "a series column"
    series = set(spec.input.series)
    for group in ("numeric", "categorical"):
        for index, driver in enumerate(getattr(spec.drivers, group)):
            key = ("drivers", group, index, "column")
            column = driver.column
            if column in seen and not (group == "categorical" and column in series
                                       and seen[column] == "a series column"):
                problems.append(fail(key, f"column '{column}' is already {seen[column]}"))
                continue
            seen[column] = "a driver"
    if not spec.intercept and not spec.has_features:
        problems.append(fail(("intercept",), "a model without an intercept needs at least one driver"))
    return problems


def _check_scenarios(spec: Spec, fail: Fail) -> list[SpecError]:
    """Refuse scenarios that change a column no model uses, or repeat a name."""
    problems = []
    names: set[str] = set()
    usable = set(spec.driver_columns)
    numeric = {d.column for d in spec.drivers.numeric}
    roles = column_roles(spec)
    for index, scenario in enumerate(spec.scenarios):
        if scenario.name in names:
            problems.append(fail(("scenarios", index, "name"), f"scenario '{scenario.name}' is named twice"))
        names.add(scenario.name)
        for number, change in enumerate(scenario.changes):
            key = ("scenarios", index, "changes", number)
            if change.column not in usable:
                problems.append(fail(key + ("column",), f"'{change.column}' is not a driver, so "
                                     "changing it changes no forecast"))
            elif change.column not in numeric and change.set is None:
                problems.append(fail(key + ("column",), f"'{change.column}' is categorical: use set, "
                                     "not add or percent"))
            problems += [fail(key + ("where", column), f"'{column}' is not a column the spec uses")
                         for column in change.where if column not in roles]
    return problems


def _check_models(spec: Spec, fail: Fail) -> list[SpecError]:
    """Refuse models and metrics that need a time order under a scheme without one."""
    if spec.validation.method in TIME_ORDERED:
        return []
    problems = []
    plural = cadence_named(spec.input.period).plural
    written = list(spec.origin.written_models) if spec.origin else [m.kind for m in spec.models[1:]]
    for choice in spec.models[1:]:
        if MODELS[choice.kind].can("needs_time_order"):
            index = written.index(choice.kind) if choice.kind in written else 0
            problems.append(fail(("models", index), f"'{choice.kind}' needs {plural} in time order; "
                                 f"validation method '{spec.validation.method}' has none"))
    if METRIC_BY_NAME[spec.select_by].needs_time_order:
        problems.append(fail(("select_by",), f"{METRIC_BY_NAME[spec.select_by].label} needs {plural} in "
                             "time order; choose another metric "
                             f"for validation method '{spec.validation.method}'"))
    return problems


_TYPES_FOR_ROLE = {
    "the target": ("number", "whole_number"),
    "the date column": ("date",),
    "a numeric driver": ("number", "whole_number"),
    "a lagged column": ("number", "whole_number"),
    "a categorical driver": ("category", "text", "whole_number"),
    "a series column": ("category", "text", "whole_number"),
    "a grouping column": ("category", "text", "whole_number", "date"),
}


def text_columns(spec: Spec) -> list[str]:
    """Return the columns read as text (levels, keys): '1' stays '1', never 1.0."""
    roles = column_roles(spec)
    chosen = [c for c, role in roles.items()
              if role in ("a categorical driver", "a series column", "a grouping column")
              and (c not in spec.columns or spec.columns[c].type in ("category", "text"))]
    chosen += [c for c, rule in spec.columns.items() if rule.type in ("category", "text") and c not in chosen]
    return chosen


def column_roles(spec: Spec) -> dict[str, str]:
    """Return the role of every column the spec uses."""
    roles = {spec.input.date_column: "the date column", spec.target: "the target"}
    roles.update({column: "a series column" for column in spec.input.series})
    roles.update({d.column: "a numeric driver" for d in spec.drivers.numeric})
    roles.update({d.column: "a categorical driver" for d in spec.drivers.categorical})
    roles.update({column: "a lagged column" for column in spec.lagged_only_columns
                  if column not in roles})
    if spec.validation.method == "grouped_kfold":
        roles.update({c: "a grouping column" for c in spec.validation.group_by if c not in roles})
    return roles


def _check_column_rules(spec: Spec, fail: Fail) -> list[SpecError]:
    """Refuse column rules that contradict themselves or the column's role (one problem per column)."""
    roles = column_roles(spec)
    found = (_column_rule_problem(spec, column, rule, roles.get(column), fail)
             for column, rule in spec.columns.items())
    return [problem for problem in found if problem is not None]


def _column_rule_problem(spec: Spec, column: str, rule, role: str | None, fail: Fail) -> SpecError | None:
    key = ("columns", column)
    if rule.min is not None and rule.max is not None and rule.min > rule.max:
        return fail(key + ("min",), f"min {rule.min:g} is above max {rule.max:g}")
    if (rule.min is not None or rule.max is not None) and rule.type not in ("number", "whole_number"):
        bound = "min" if rule.min is not None else "max"
        return fail(key + (bound,), f"min and max apply to numbers, not to type '{rule.type}'")
    if rule.allowed is not None and rule.type != "category":
        return fail(key + ("allowed",), f"allowed levels apply to type 'category', not '{rule.type}'")
    if role and rule.type not in _TYPES_FOR_ROLE[role]:
        wanted = " or ".join(_TYPES_FOR_ROLE[role])
        return fail(key + ("type",), f"'{column}' is {role}, so its type must be {wanted}")
    if rule.missing_allowed and role in ("the date column", "a series column"):
        return fail(key + ("missing_allowed",), f"'{column}' is {role} and may not be missing")
    if (rule.missing_allowed and role in ("a numeric driver", "a categorical driver")
            and column not in spec.filled_driver_columns):
        fill = " (or set missing: mean or median on the driver to fill it)" \
            if role == "a numeric driver" else ""
        return fail(key + ("missing_allowed",), f"'{column}' is {role}: the models need a "
                    f"value in every row, so it may not be missing{fill}")
    return None


def _check_features(spec: Spec, fail: Fail) -> list[SpecError]:
    """Refuse feature keys that contradict each other (each problem placed at its key).

    One problem per categorical driver, interaction, series slope and entry of
    drivers.lags; the calendar's keys are judged each on its own.
    """
    problems = [_categorical_problem(driver, ("drivers", "categorical", index), fail)
                for index, driver in enumerate(spec.drivers.categorical)]
    numeric = [d.column for d in spec.drivers.numeric]
    pairs: set[frozenset[str]] = set()
    for index, pair in enumerate(spec.drivers.interactions):
        problem = _interaction_problem(spec, pair, ("drivers", "interactions", index), pairs, fail)
        problems.append(problem)
        if problem is None:
            pairs.add(frozenset(pair))
    calendar = spec.drivers.calendar
    if calendar is not None:
        key = ("drivers", "calendar")
        problems += _check_calendar(spec, calendar, key, fail)
    slopes = spec.drivers.series_effects.slopes
    for index, column in enumerate(slopes):
        key = ("drivers", "series_effects", "slopes", index)
        if not spec.input.series:   # said once, at the first slope
            problems.append(fail(key, "series slopes need series: name the series columns in "
                                      "input.series"))
            break
        if column not in numeric:
            problems.append(fail(key, f"'{column}' is not a numeric driver (numeric drivers: "
                                      f"{', '.join(numeric) or 'none'})"))
        elif slopes.index(column) != index:
            problems.append(fail(key, f"'{column}' is listed twice"))
    seen: set[str] = set()
    for index, lagged in enumerate(spec.drivers.lags):
        problems.append(_lags_problem(spec, lagged, ("drivers", "lags", index), numeric, seen, fail))
        seen.add(lagged.column)
    return [problem for problem in problems if problem is not None]


def _categorical_problem(driver, key: KeyPath, fail: Fail) -> SpecError | None:
    if driver.encoding == "ordinal":
        if driver.order is None:
            return fail(key + ("encoding",), "ordinal encoding needs `order`: the levels, lowest first")
        if len(set(driver.order)) != len(driver.order):
            return fail(key + ("order",), "a level is listed twice")
        if driver.reference is not None and driver.reference not in driver.order:
            return fail(key + ("reference",), f"'{driver.reference}' is not one of the levels in `order`")
        if driver.group_below is not None:
            return fail(key + ("group_below",), "grouping rare levels would break the order of an "
                                                "ordinal driver")
    elif driver.order is not None:
        return fail(key + ("order",), "`order` applies to encoding: ordinal")
    if driver.smoothing is not None and driver.encoding != "target_mean":
        return fail(key + ("smoothing",), "`smoothing` applies to encoding: target_mean")
    return None


def _interaction_problem(spec: Spec, pair: list[str], key: KeyPath, pairs: set[frozenset[str]],
                         fail: Fail) -> SpecError | None:
    numeric = [d.column for d in spec.drivers.numeric]
    if len(pair) != 2:
        return fail(key, f"an interaction is a pair of drivers, like [{', '.join(numeric[:2]) or 'a, b'}]")
    for place, column in enumerate(pair):
        if column not in spec.driver_columns:
            listed = ", ".join(spec.driver_columns) or "none"
            return fail(key + (place,), f"'{column}' is not a driver (drivers: {listed})")
    if pair[0] == pair[1]:
        return fail(key, "an interaction needs two different drivers (for a square, use degree: 2)")
    if frozenset(pair) in pairs:
        return fail(key, "this pair is listed twice")
    return None


def _lags_problem(spec: Spec, lagged, key: KeyPath, numeric: list[str], seen: set[str],
                  fail: Fail) -> SpecError | None:
    roles = column_roles(spec)
    role = roles.get(lagged.column)
    if role in ("a categorical driver", "a series column", "a grouping column", "the date column"):
        return fail(key + ("column",), f"'{lagged.column}' is {role}; lags are taken of numbers: "
                                       "the target, a numeric driver or another numeric column")
    rule = spec.columns.get(lagged.column)
    if rule is not None and rule.type not in ("number", "whole_number"):
        return fail(key + ("column",), f"'{lagged.column}' is of type '{rule.type}' in columns; "
                                       "lags are taken of numbers")
    if lagged.future is not None and lagged.column == spec.target:
        return fail(key + ("future",), "the target's months ahead are what is forecast; "
                                       "multi_step decides how its lags read them")
    if lagged.future is not None and lagged.column in numeric:
        return fail(key + ("future",), f"'{lagged.column}' is a numeric driver: set future on "
                                       "its entry in drivers.numeric")
    if lagged.column in seen:
        return fail(key + ("column",), f"'{lagged.column}' already has an entry in drivers.lags")
    if not (lagged.lags or lagged.rolling_means or lagged.differences):
        return fail(key, "give at least one of lags, rolling_means or differences")
    for name in ("lags", "rolling_means", "differences"):
        values = getattr(lagged, name)
        if len(set(values)) != len(values):
            return fail(key + (name,), "a value is listed twice")
    return None
