"""Check: refuse data the spec cannot be fitted on, before any model runs.

Two passes, both reporting every problem at once rather than the first:

1. the column rules — each column's type, whether it may be missing, its range
   and its allowed levels — declared as a pandera schema built from the spec
   and validated lazily;
2. the calendar, per series: one row per month, no month missing inside a
   series (unless the spec allows or fills gaps), the target present in every
   month of history (and above 0 for a log target), every driver present in
   every row unless its spec fills missing values, and no actual dated after
   the as-of date.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field, replace
from datetime import date
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from pipeline.core.cadence import Cadence, cadence_named, cadence_of, label_of
from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.errors import DataError
from pipeline.core.schema_library import pandera_pandas
from pipeline.spec import ColumnRule, CsvOptions, Spec, column_roles
from pipeline.stages.dates import (
    first_unparsed_date,
    has_offsets,
    numbers_look_like,
    read_dates,
    reading_note,
)
from pipeline.stages.gaps import AHEAD_HINT, fill_gaps, filled_cells, gap_problem, missing_months
from pipeline.stages.ingest import MISSING_HINT, RawInput, read_as_missing
from pipeline.stages.months_ahead import (
    add_months_ahead,
    lagging_series,
    missing_given,
    own_last_actual,
    split_gaps,
)
from pipeline.stages.problems import PROBLEM_COLUMNS, Problem, problems_table  # noqa: F401 (re-exported)
from pipeline.stages.spacing import check_spacing

if TYPE_CHECKING:   # pandera loads when a schema is built: a run's modules import CheckedData from here
    import pandera.pandas as pa

ALL_SERIES = "all"


class CheckFailed(DataError):
    """The data breaks one or more checks; every problem is attached."""

    shown = 3

    def __init__(self, problems: list[Problem], file: str) -> None:
        self.problems = problems
        first = "; ".join(p.describe(file) for p in problems[: self.shown])
        more = len(problems) - self.shown
        tail = f" (and {more} more)" if more > 0 else ""
        super().__init__(f"{len(problems)} problem(s) in the data: {first}{tail}; "
                         "'castline check' lists them all", file=file)

    def _render(self) -> str:  # each problem already names file and row
        return self.message


@dataclass(frozen=True)
class CheckedData:
    """Rows that passed the checks, placed in time: history (with the target) and future."""

    history: pd.DataFrame
    future: pd.DataFrame
    raw: RawInput
    problems_allowed: list[Problem] = field(default_factory=list)
    # Which numeric cells of history ``input.gaps: fill`` gave a value (True), one row per
    # history row in its order, one column per column filled; None when nothing was filled.
    # The fill above reads the whole history, right for a fit on all of it; the backtest
    # fills each training window again from its own months (stages/splits.py).
    filled: pd.DataFrame | None = None
    # What the run should say about the data as read: series that lag, months added by
    # forecast.months, defaults chosen from the data.
    notes: tuple[str, ...] = ()

    def with_notes(self, notes) -> CheckedData:
        """Return the data with more notes."""
        return replace(self, notes=(*self.notes, *notes)) if notes else self

    def series_last(self) -> pd.Series:
        """Return each series' last month with an actual, as a month ordinal, by series."""
        ordinals = pd.Series(self.history[PERIOD].array.asi8, index=self.history.index)
        return ordinals.groupby(self.history[SERIES].to_numpy(), sort=True).max()

    def origins(self, rows: pd.DataFrame) -> np.ndarray:
        """Return, per row, the month ordinal of its series' last actual: the origin each
        series is forecast from."""
        return rows[SERIES].map(self.series_last()).fillna(self.last_period.ordinal).to_numpy(np.int64)

    def lagging_series(self) -> dict[str, str]:
        """Return the series whose last actual is before the newest month, with that month."""
        newest = self.last_period.ordinal
        return {str(series): self.cadence.label(int(last))
                for series, last in self.series_last().items() if last < newest}

    @property
    def cadence(self) -> Cadence:
        """Return the spacing of the periods (month, quarter or week)."""
        return cadence_of(self.history)

    @property
    def first_period(self) -> pd.Period:
        return self.history[PERIOD].min()

    @property
    def last_period(self) -> pd.Period:
        return self.history[PERIOD].max()

    @property
    def series_names(self) -> list[str]:
        return sorted(self.history[SERIES].unique())


# ------------------------------------------------------------------ column rules

def _on_numbers(test):
    """Return a pandera check function that judges only the cells that are numbers.

    A cell that is not a number at all is reported once, by the type check.
    """
    def check(values: pd.Series) -> pd.Series:
        numbers = pd.to_numeric(values, errors="coerce")
        return test(numbers) | numbers.isna()
    return check


_finite = _on_numbers(lambda v: ~np.isinf(v))
# Beyond this size a value's square (and the sums of squares a fit takes) can overflow:
# squares of values up to 1e150, summed over up to 1e8 rows, stay below the largest
# double, about 1.8e308 (numpy.finfo(float).max). Infinities are reported by _finite.
HUGE = 1e150
_not_huge = _on_numbers(lambda v: (np.abs(v) <= HUGE) | np.isinf(v))
_whole = _on_numbers(lambda v: v == np.round(v))


def effective_rules(spec: Spec) -> dict[str, ColumnRule]:
    """Return the rule for every column the spec uses or lists, declared or from its role."""
    from_role = {
        "the date column": ColumnRule(type="date"),
        "the target": ColumnRule(type="number", missing_allowed=True),
        "a numeric driver": ColumnRule(type="number"),
        "a categorical driver": ColumnRule(type="category"),
        "a series column": ColumnRule(type="category"),
        "a grouping column": ColumnRule(type="category"),
        # Only earlier months are read: a missing month leaves its lags unavailable.
        "a lagged column": ColumnRule(type="number", missing_allowed=True),
    }
    rules = {column: from_role[role] for column, role in column_roles(spec).items()}
    for column, rule in spec.columns.items():
        if column == spec.target:
            # Months to forecast have no target yet; history gaps are a calendar check.
            rule = rule.model_copy(update={"missing_allowed": True})
        rules[column] = rule
    return rules


def _column_schema(rule: ColumnRule) -> pa.Column:
    pa = pandera_pandas()
    checks: list[pa.Check] = []
    if rule.type in ("number", "whole_number"):
        checks.append(pa.Check(_finite, error="is infinite"))
        checks.append(pa.Check(_not_huge, error=f"too large to compute with (beyond ±{HUGE:.0e})"))
        if rule.type == "whole_number":
            checks.append(pa.Check(_whole, error="not a whole number"))
        low, high = rule.min, rule.max
        if low is not None:
            checks.append(pa.Check(_on_numbers(lambda v: v >= low), error=f"below the minimum {low:g}"))
        if high is not None:
            checks.append(pa.Check(_on_numbers(lambda v: v <= high), error=f"above the maximum {high:g}"))
        return pa.Column(float, coerce=True, nullable=rule.missing_allowed, checks=checks)
    if rule.type == "date":
        return pa.Column(pa.DateTime, coerce=True, nullable=rule.missing_allowed)
    if rule.allowed is not None:
        checks.append(pa.Check.isin(rule.allowed, error=f"not one of {', '.join(rule.allowed)}"))
    return pa.Column(str, coerce=True, nullable=rule.missing_allowed, checks=checks)


def build_schema(spec: Spec) -> pa.DataFrameSchema:
    """Return the pandera schema the input's columns must meet."""
    pa = pandera_pandas()
    rules = effective_rules(spec)
    for driver in set(spec.driver_columns) - set(spec.input.series):
        # A missing driver is reported by the calendar pass, which can tell a month
        # of history from a month to forecast (a series column is never missing: it
        # names the series the calendar is read in).
        rules[driver] = rules[driver].model_copy(update={"missing_allowed": True})
    columns = {name: _column_schema(rule) for name, rule in rules.items()}
    return pa.DataFrameSchema(columns, strict=False)


def _check_words(check: str) -> str:
    if check == "not_nullable":
        return "missing value"
    if check.startswith("coerce_dtype") or check.startswith("dtype("):
        return "not a date" if "datetime" in check else "not a number"
    return check


def _problems_from_pandera(failures: pd.DataFrame, raw: RawInput, typed: pd.DataFrame,
                           csv: CsvOptions) -> list[Problem]:
    """Return one problem per (check, column), located at its first failing row.

    ``typed``: the spec's columns as far as the checks could coerce them to their types.
    """
    failures = failures.copy()
    failures["check"] = failures["check"].astype(str)
    coerced = set(failures.loc[failures["check"].str.startswith("coerce_dtype"), "column"])
    failures = failures[~(failures["check"].str.startswith("dtype(") & failures["column"].isin(coerced))]
    problems: list[Problem] = []
    for (check, column), group in failures.groupby(["check", "column"], sort=False, dropna=False):
        if check == "column_in_dataframe":
            for missing in group["failure_case"]:
                problems.append(Problem("column missing", str(missing), None,
                                        _missing_column_hint(str(missing), raw)))
            continue
        located = group.dropna(subset=["index"]).sort_values("index")
        first = located.iloc[0] if len(located) else group.iloc[0]
        row = raw.location(first["index"]) if len(located) else None
        value, count = _show(first["failure_case"]), len(group)
        if row is None and column in typed.columns and "datetime" in check:
            row, value, count = first_unparsed_date(raw, typed[str(column)])
        text = read_as_missing(raw, csv, row, str(column)) if check == "not_nullable" else None
        if text is not None:   # not empty: a text pandas reads as missing
            value = f"{text!r}, read as missing{MISSING_HINT}"
        problems.append(Problem(_check_words(check), str(column), row, value, count=count))
    return problems


def _show(value) -> str:
    if value is None or (not isinstance(value, str) and pd.isna(value)) or value in ("NaT", "nan"):
        return "(empty)"
    return repr(value) if isinstance(value, str) else str(value)


def _missing_column_hint(column: str, raw: RawInput) -> str:
    found = list(raw.frame.columns)
    if len(found) == 1 and any(sep in found[0] for sep in ";\t|,"):
        return (f"the file was read as a single column {found[0]!r}; is the delimiter "
                "different (input.csv.delimiter)?")
    import difflib
    close = difflib.get_close_matches(column, found, n=1)
    hint = f"; did you mean '{close[0]}'?" if close else ""
    return f"the spec names this column but the file has none such (columns: {', '.join(found)}){hint}"


# ---------------------------------------------------------------------- calendar

def _series_labels(frame: pd.DataFrame, columns: list[str]) -> pd.Series:
    if not columns:
        return pd.Series(ALL_SERIES, index=frame.index)
    labels = frame[columns[0]].astype(str)
    for column in columns[1:]:
        labels = labels + " / " + frame[column].astype(str)
    return labels


def _first(frame: pd.DataFrame, mask: pd.Series) -> pd.Series:
    return frame.loc[mask[mask].index[0]]


def _duplicates(frame: pd.DataFrame, spec: Spec, raw: RawInput) -> list[Problem]:
    """Return the month given twice in a series, with how the dates were read (``frame``
    keeps the raw frame's index)."""
    duplicated = frame.duplicated([SERIES, PERIOD], keep="first")
    if not duplicated.any():
        return []
    row = _first(frame, duplicated)
    earlier = frame[(frame[SERIES] == row[SERIES]) & (frame[PERIOD] == row[PERIOD])][ROW].min()
    written = raw.frame.at[row.name, spec.input.date_column] if row.name in raw.frame.index else None
    cadence = cadence_named(spec.input.period)
    return [Problem(f"{cadence.name} given twice", spec.input.date_column, int(row[ROW]),
                    f"{cadence.label(row[PERIOD])} for series '{row[SERIES]}' (first on row {earlier})"
                    + reading_note(written, row[PERIOD], spec.input.date_format),
                    count=int(duplicated.sum()))]


def _numeric_columns(spec: Spec) -> list[str]:
    return [c for c, r in effective_rules(spec).items() if r.type in ("number", "whole_number")]


def _target_holes(frame: pd.DataFrame, spec: Spec) -> tuple[pd.DataFrame, list[Problem], list[Problem]]:
    """Return the frame with history months lacking the target handled by the gaps policy,
    and the problems (refused or allowed) that this found."""
    target = spec.target
    has_target = frame[target].notna()
    if not has_target.any():
        return frame, [Problem("no history", target, None, "no row has a value of the target")], []
    # Each series' own last actual: the months after it are to forecast, not holes.
    own_last = own_last_actual(frame, target)
    hole = ~has_target & (frame[PERIOD].array.asi8 <= own_last)
    if not hole.any():
        return frame, [], []
    row = _first(frame, hole)
    cadence = cadence_named(spec.input.period)
    value = (f"no value for {cadence.label(row[PERIOD])} (series '{row[SERIES]}'), before the "
             f"series' last actual {cadence.name} {cadence.label(int(own_last[hole.to_numpy()][0]))}")
    policy = spec.input.gaps
    if policy == "refuse":
        return frame, [Problem("target missing in history", target, _row(row), value,
                               count=int(hole.sum()))], []
    if policy == "allow":
        word = "target missing in history (allowed by input.gaps; the months are left out)"
        return frame[~hole].reset_index(drop=True), [], [
            Problem(word, target, _row(row), value, count=int(hole.sum()))]
    filled = frame.copy()
    ordered = filled.sort_values([SERIES, PERIOD], kind="stable")
    interpolated = ordered.groupby(SERIES, sort=False)[target].transform(
        lambda v: v.interpolate(method="linear", limit_area="inside"))
    filled.loc[interpolated.index, target] = interpolated
    still = hole & filled[target].isna()
    word = "target missing in history, filled by interpolation"
    allowed = [Problem(word, target, _row(row), value, count=int((hole & ~still).sum()))]
    if still.any():  # at the start of a series there is nothing to interpolate from
        first = _first(filled, still)
        return filled, [Problem("target missing in history", target, _row(first),
                                f"no value for {first[PERIOD]} (series '{first[SERIES]}') and no "
                                "earlier month to fill from", count=int(still.sum()))], allowed
    return filled, [], allowed


def _history_and_future(frame: pd.DataFrame, spec: Spec, as_of: pd.Period,
                        raw: RawInput | None = None) -> list[Problem]:
    problems: list[Problem] = []
    target = spec.target
    has_target = frame[target].notna()
    if not has_target.any():
        return problems
    late = has_target & (frame[PERIOD] > as_of)
    if late.any():
        row = _first(frame, late)
        cadence = cadence_named(spec.input.period)
        said = "the as-of date" if spec.input.as_of else f"the current {cadence.name}"
        problems.append(Problem("actual after the as-of date", target, _row(row),
                                f"{cadence.label(row[PERIOD])} is after {said} {cadence.label(as_of)}",
                                count=int(late.sum())))
    future = ~has_target & (frame[PERIOD].array.asi8 > own_last_actual(frame, target))
    for driver in spec.drivers.categorical:
        if getattr(driver, "unseen", "stop") != "stop":
            continue
        known = set(map(str, frame.loc[~future, driver.column].dropna().unique()))
        future_levels = frame.loc[future, driver.column]
        new_level = pd.Series(False, index=frame.index)
        new_level[future] = future_levels.notna() & ~future_levels.astype(str).isin(known)
        if new_level.any():
            row = _first(frame, new_level)
            problems.append(Problem("level not seen in history", driver.column, _row(row),
                                    f"{row[driver.column]!r} in {label_of(row[PERIOD])} has no history to "
                                    "learn from", count=int(new_level.sum())))
    if spec.target_transform != "none":
        floor = 0.0 if spec.target_transform == "log" else -1.0
        low = has_target & (frame[target] <= floor)
        if low.any():
            row = _first(frame, low)
            problems.append(Problem(f"not above {floor:g}, as target_transform: "
                                    f"{spec.target_transform} needs", target, _row(row),
                                    f"{row[target]:g} in {label_of(row[PERIOD])} (series '{row[SERIES]}')",
                                    count=int(low.sum())))
    filled = spec.filled_driver_columns
    estimated = spec.estimated_columns
    for driver in spec.driver_columns:
        if driver in filled:
            continue  # filled in every row by a statistic learned in each training window
        for mask, word in ((~future, "driver missing"),
                           (future, "driver missing in a month to forecast")):
            if word != "driver missing" and driver in estimated:
                continue  # castline estimates it in the months to forecast
            empty = mask & frame[driver].isna()
            if word != "driver missing":   # a month castline added: reported by missing_given
                empty &= frame[ROW].notna()
            if empty.any():
                row = _first(frame, empty)
                text = read_as_missing(raw, spec.input.csv, _row(row), driver) if raw else None
                said = f" ({text!r}, read as missing{MISSING_HINT})" if text else ""
                problems.append(Problem(word, driver, _row(row),
                                        f"no value for {label_of(row[PERIOD])} (series '{row[SERIES]}'){said}"
                                        + (_ESTIMATE_HINT if word != "driver missing" and not text else ""),
                                        count=int(empty.sum())))
    return problems + missing_given(frame, spec, future.to_numpy())


# Said when a driver has no value in a month to forecast.
_ESTIMATE_HINT = ("; fill in its planned values, or set future: month_mean on the driver to have "
                  "castline estimate it (in the backtest too)")


def _row(row: pd.Series) -> int | None:
    return None if pd.isna(row[ROW]) else int(row[ROW])


def _as_of(spec: Spec, today: date | None) -> pd.Period:
    chosen = spec.input.as_of or today or date.today()
    return pd.Period(chosen, freq=cadence_named(spec.input.period).freq)


def find_problems(spec: Spec, raw: RawInput, *, today: date | None = None
                  ) -> tuple[pd.DataFrame | None, list[Problem], list[Problem]]:
    """Return the validated frame (or None), the problems that stop a run, and those allowed."""
    frame, _, problems, allowed, _ = _checked(spec, raw, today)
    return frame, problems, allowed


def _checked(spec: Spec, raw: RawInput, today: date | None) -> tuple[
        pd.DataFrame | None, pd.DataFrame | None, list[Problem], list[Problem], list[str]]:
    """Return the validated frame (or None), which of its numeric cells the gaps policy
    filled (None when it filled none), the problems that stop a run, those allowed, and
    notes on the months to forecast (series that lag, rows added by forecast.months)."""
    schema = build_schema(spec)
    # The spec's columns in a frame of their own, coerced to their types there: the raw
    # input stays as it was read, and the file's other columns are never copied.
    typed = raw.frame.loc[:, raw.frame.columns.isin(list(schema.columns))].copy(deep=False)
    date_problems = _own_dates(spec, raw, typed)
    if date_problems is not None:   # the dates are read here; the schema sees them as read
        schema = schema.update_column(spec.input.date_column, nullable=True)
    date_problems = date_problems or []
    try:
        with warnings.catch_warnings():   # the check says how dates were read
            warnings.filterwarnings("ignore", "(Parsing dates in|Could not infer format)", UserWarning)
            valid = schema.validate(typed, lazy=True, inplace=True)
    except pandera_pandas().errors.SchemaErrors as exc:
        problems = date_problems + _problems_from_pandera(exc.failure_cases, raw, typed, spec.input.csv)
        problems += _calendar_despite(problems, spec, raw, typed, today)
        return None, None, sorted(problems, key=lambda p: (p.row or 0, p.column)), [], []
    if date_problems:
        problems = date_problems + _calendar_despite(date_problems, spec, raw, typed, today)
        return None, None, sorted(problems, key=lambda p: (p.row or 0, p.column)), [], []
    frame = valid[list(effective_rules(spec))]
    check_spacing(frame, spec, raw.path)   # rows spaced otherwise than input.period: one line
    frame[PERIOD] = cadence_named(spec.input.period).of_dates(frame[spec.input.date_column])
    # Plain Python strings: the series labels are read as arrays many times downstream.
    frame[SERIES] = _series_labels(frame, spec.input.series).astype(object)
    frame[ROW] = np.arange(len(frame)) + raw.first_row_number
    problems = _duplicates(frame, spec, raw)
    allowed: list[Problem] = []
    as_read = frame
    gaps = missing_months(frame)
    gaps, ahead = split_gaps(frame, gaps, spec.target)
    if spec.forecast is None and len(ahead) and spec.input.gaps == "refuse":
        problems.append(gap_problem(ahead, spec, f"{cadence_named(spec.input.period).name} to forecast missing", AHEAD_HINT))
    elif spec.forecast is None:   # allowed, or filled by interpolation, as any missing month
        gaps = pd.concat([gaps, ahead]) if len(ahead) else gaps
    if len(gaps) and spec.input.gaps == "refuse":
        problems.append(gap_problem(gaps, spec, f"{cadence_named(spec.input.period).name} missing"))
    elif len(gaps) and spec.input.gaps == "allow":
        allowed.append(gap_problem(gaps, spec, f"{cadence_named(spec.input.period).name} missing (allowed by input.gaps)"))
    elif len(gaps) and not problems:
        allowed.append(gap_problem(gaps, spec, f"{cadence_named(spec.input.period).name} missing, filled by interpolation"))
        frame = fill_gaps(frame, gaps, spec, _numeric_columns(spec))
    frame, refused, accepted = _target_holes(frame, spec)
    problems += refused
    allowed += accepted
    behind, notes = lagging_series(frame, spec)
    problems += behind
    grown, added = add_months_ahead(frame, spec)
    problems += _history_and_future(grown, spec, _as_of(spec, today), raw)
    filled = (filled_cells(as_read, grown, _numeric_columns(spec))
              if spec.input.gaps == "fill" and frame is not as_read else None)
    return grown, filled, sorted(problems, key=lambda p: (p.row or 0, p.column)), allowed, notes + added


def _own_dates(spec: Spec, raw: RawInput, typed: pd.DataFrame) -> list[Problem] | None:
    """Read the date column into ``typed`` when the spec gives its format, when it holds
    times with an offset from UTC (converted to UTC) or numbers; return the problems found
    (empty or unreadable dates; numbers, which are refused in one line), or None when the
    column is left to the schema's own reading."""
    column, date_format = spec.input.date_column, spec.input.date_format
    if column not in typed.columns or typed[column].isna().all():
        return None
    values = typed[column]
    numbers = pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values)
    if date_format is None and not numbers and not has_offsets(values):
        return None
    empty = values.isna()
    problems = []
    if empty.any():
        first = empty[empty].index[0]
        problems.append(Problem("missing value", column, raw.location(first), "(empty)",
                                count=int(empty.sum())))
    if date_format is None and numbers:
        first = values.first_valid_index()
        typed[column] = pd.Series(pd.NaT, index=typed.index, dtype="datetime64[ns]")
        return problems + [Problem("not a date", column, raw.location(first),
                                   f"{_show(values[first])}: the column holds "
                                   f"{numbers_look_like(values)}", count=int((~empty).sum()))]
    parsed = read_dates(values, date_format)
    bad = parsed.isna() & ~empty
    if bad.any():
        first = bad[bad].index[0]
        how = (f"does not match input.date_format \"{date_format}\"" if date_format else
               "cannot be read as a date and time with an offset from UTC")
        problems.append(Problem("not a date", column, raw.location(first),
                                f"{_show(str(values[first]))} {how}", count=int(bad.sum())))
    typed[column] = parsed
    return problems


def _calendar_despite(found: list[Problem], spec: Spec, raw: RawInput, typed: pd.DataFrame,
                      today) -> list[Problem]:
    """Return the calendar problems of the rows whose dates and keys can be read,
    so that one bad cell does not hide a duplicated or missing month (``typed``: the
    spec's columns as far as the checks could coerce them)."""
    rules = effective_rules(spec)
    if any(p.check == "column missing" for p in found):
        return []
    frame = pd.DataFrame(index=typed.index)
    for column, rule in rules.items():
        values = typed[column]
        if rule.type == "date":
            frame[column] = pd.to_datetime(values, errors="coerce", format="mixed")
        elif rule.type in ("number", "whole_number"):
            numbers = pd.to_numeric(values, errors="coerce")
            # A cell that is there but not a number is reported as such, not as missing.
            frame[column] = numbers.mask(numbers.isna() & values.notna(), 0.0)
        else:
            frame[column] = values
    readable = frame[spec.input.date_column].notna()
    for column in spec.input.series:
        readable &= frame[column].notna()
    frame = frame[readable].copy()
    if frame.empty:
        return []
    check_spacing(frame, spec, raw.path)
    frame[PERIOD] = cadence_named(spec.input.period).of_dates(frame[spec.input.date_column])
    frame[SERIES] = _series_labels(frame, spec.input.series)
    frame[ROW] = frame.index.to_numpy() + raw.first_row_number
    problems = _duplicates(frame, spec, raw)
    # A row whose date cannot be read is left out here; its month is not missing.
    dates_readable = not any(p.column == spec.input.date_column for p in found)
    gaps = missing_months(frame) if dates_readable else pd.DataFrame()
    if len(gaps) and spec.input.gaps == "refuse":
        problems.append(gap_problem(gaps, spec, f"{cadence_named(spec.input.period).name} missing"))
    if spec.input.gaps == "refuse":
        problems += _target_holes(frame, spec)[1]
    problems += _history_and_future(frame, spec, _as_of(spec, today), raw)
    # A cell that is not a number is already reported; do not report it again as missing.
    seen = {(p.column, p.row) for p in found}
    return [p for p in problems if (p.column, p.row) not in seen]


def check_data(spec: Spec, raw: RawInput, *, today: date | None = None) -> CheckedData:
    """Return the validated rows split into history and future.

    Raises CheckFailed carrying every problem found.
    """
    frame, filled, problems, allowed, notes = _checked(spec, raw, today)
    if problems:
        raise CheckFailed(problems, str(raw.path))
    # Rows keep the file's order; the stages that write tables order what they write.
    has_target = frame[spec.target].notna()
    if filled is not None:
        filled = filled[has_target].reset_index(drop=True)
        filled = filled.loc[:, filled.any()] if filled.to_numpy().any() else None
    return CheckedData(history=frame[has_target].reset_index(drop=True),
                       future=frame[~has_target].reset_index(drop=True), raw=raw,
                       problems_allowed=allowed, filled=filled, notes=tuple(notes))
