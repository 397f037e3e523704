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

from dataclasses import dataclass, field
from datetime import date

import numpy as np
import pandas as pd

from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.errors import DataError
from pipeline.core.schema_library import pandera_pandas
from pipeline.spec import ColumnRule, Spec, column_roles
from pipeline.stages.ingest import RawInput

pa = pandera_pandas()
ALL_SERIES = "all"
PROBLEM_COLUMNS = ["check", "column", "row", "value", "count"]


@dataclass(frozen=True)
class Problem:
    """One kind of fault in one column, located at its first row, with how often it occurs."""

    check: str
    column: str
    row: int | None
    value: str
    count: int = 1

    def describe(self, file: str) -> str:
        """Return the problem as one line, naming file, row and column."""
        place = f"{file}:{self.row}" if self.row else file
        more = f" ({self.count} rows like this)" if self.count > 1 else ""
        column = f"column '{self.column}': " if self.column else ""
        return f"{place}: {column}{self.check}: {self.value}{more}"


def problems_table(problems: list[Problem]) -> pd.DataFrame:
    """Return the problems as a table: check, column, row, value, count."""
    return pd.DataFrame([[p.check, p.column, p.row, p.value, p.count] for p in problems],
                        columns=PROBLEM_COLUMNS).astype({"row": "Int64"})


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
    rules = effective_rules(spec)
    for driver in spec.driver_columns:
        # A missing driver is reported by the calendar pass, which can tell a month
        # of history from a month to forecast.
        rules[driver] = rules[driver].model_copy(update={"missing_allowed": True})
    columns = {name: _column_schema(rule) for name, rule in rules.items()}
    return pa.DataFrameSchema(columns, strict=False)


def _check_words(check: str) -> str:
    if check == "not_nullable":
        return "missing value"
    if check.startswith("coerce_dtype") or check.startswith("dtype("):
        return "not a date" if "datetime" in check else "not a number"
    return check


def _problems_from_pandera(failures: pd.DataFrame, raw: RawInput,
                           typed: pd.DataFrame) -> list[Problem]:
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
            row, value, count = _first_unparsed_date(raw, typed, str(column))
        problems.append(Problem(_check_words(check), str(column), row, value, count=count))
    return problems


def _first_unparsed_date(raw: RawInput, typed: pd.DataFrame, column: str
                         ) -> tuple[int | None, str, int]:
    """Return the row, value and count of the dates not written like the column's first one."""
    values = typed[column]
    parsed = pd.to_datetime(values, errors="coerce")   # the format of the first date, for all
    bad = parsed.isna() & values.notna()
    if not bad.any():
        return None, "(a value that is not a date)", 1
    index = int(np.flatnonzero(bad.to_numpy())[0])
    return raw.location(index), (f"{values.iloc[index]!r} (not written like the first date, "
                                 f"{values.dropna().iloc[0]!r})"), int(bad.sum())


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


def _duplicates(frame: pd.DataFrame, spec: Spec) -> list[Problem]:
    duplicated = frame.duplicated([SERIES, PERIOD], keep="first")
    if not duplicated.any():
        return []
    row = _first(frame, duplicated)
    earlier = frame[(frame[SERIES] == row[SERIES]) & (frame[PERIOD] == row[PERIOD])][ROW].min()
    return [Problem("month given twice", spec.input.date_column, int(row[ROW]),
                    f"{row[PERIOD]} for series '{row[SERIES]}' (first on row {earlier})",
                    count=int(duplicated.sum()))]


def missing_months(frame: pd.DataFrame) -> pd.DataFrame:
    """Return, per series, each month missing between its first and last month,
    with the row of the next month present."""
    columns = [SERIES, PERIOD, "next_row"]
    ordinal = pd.Series(frame[PERIOD].array.asi8, index=frame.index)
    spans = ordinal.groupby(frame[SERIES], sort=False).agg(["min", "max", "nunique"])
    gapped = spans.index[(spans["max"] - spans["min"] + 1) > spans["nunique"]]
    if len(gapped) == 0:
        return pd.DataFrame(columns=columns)
    # Only the series with a gap are sorted and walked.
    subset = frame[frame[SERIES].isin(gapped)].assign(_ordinal=ordinal)
    ordered = subset.sort_values([SERIES, "_ordinal"], kind="stable").drop_duplicates([SERIES, "_ordinal"])
    ordinals = ordered["_ordinal"].to_numpy()
    names = ordered[SERIES].to_numpy()
    gaps = np.flatnonzero((names[1:] == names[:-1]) & (np.diff(ordinals) > 1))
    rows = []
    for position in gaps:
        after = ordered.iloc[position + 1]
        for missing in range(int(ordinals[position]) + 1, int(ordinals[position + 1])):
            rows.append({SERIES: after[SERIES], PERIOD: pd.Period(ordinal=missing, freq="M"),
                         "next_row": int(after[ROW])})
    return pd.DataFrame(rows, columns=columns)


def _gap_problem(gaps: pd.DataFrame, spec: Spec, word: str) -> Problem:
    first = gaps.iloc[0]
    return Problem(word, spec.input.date_column, int(first["next_row"]),
                   f"{first[PERIOD]} for series '{first[SERIES]}' (missing before this row)",
                   count=len(gaps))


def _fill_gaps(frame: pd.DataFrame, gaps: pd.DataFrame, spec: Spec) -> pd.DataFrame:
    """Return the frame with each missing month inserted, numbers interpolated in time."""
    numeric = _numeric_columns(spec)
    filled = []
    for series, rows in frame.groupby(SERIES, sort=False):
        rows = rows.set_index(PERIOD).sort_index()
        full = pd.period_range(rows.index.min(), rows.index.max(), freq="M")
        if len(full) == len(rows):
            filled.append(rows.reset_index())
            continue
        grown = rows.reindex(full)
        grown.index.name = PERIOD
        inserted = grown[ROW].isna()
        # The target stays as given for months to forecast: interpolate history only.
        for column in numeric:
            grown[column] = grown[column].astype(float).interpolate(method="linear", limit_area="inside")
        for column in [c for c in grown.columns if c not in numeric]:
            grown[column] = grown[column].ffill()
        grown.loc[inserted, spec.input.date_column] = grown.index[inserted].to_timestamp()
        grown.loc[inserted, ROW] = np.nan
        grown[SERIES] = series
        filled.append(grown.reset_index())
    return pd.concat(filled, ignore_index=True)


def _numeric_columns(spec: Spec) -> list[str]:
    return [c for c, r in effective_rules(spec).items() if r.type in ("number", "whole_number")]


def filled_cells(before: pd.DataFrame, after: pd.DataFrame, spec: Spec) -> pd.DataFrame:
    """Return, for each row of ``after``, which numeric cells hold a value that ``before``
    lacked: every value of an inserted month (no file row), and the empty cells filled.

    Rows are matched by their line in the file (``ROW``); ``after`` keeps its index.
    """
    numeric = _numeric_columns(spec)
    at = pd.Index(before[ROW].to_numpy(float)).get_indexer(after[ROW].to_numpy(float))
    given = before[numeric].notna().to_numpy()[at] & (at >= 0)[:, None]
    now = after[numeric].notna().to_numpy()
    return pd.DataFrame(now & ~given, index=after.index, columns=numeric)


def _target_holes(frame: pd.DataFrame, spec: Spec) -> tuple[pd.DataFrame, list[Problem], list[Problem]]:
    """Return the frame with history months lacking the target handled by the gaps policy,
    and the problems (refused or allowed) that this found."""
    target = spec.target
    has_target = frame[target].notna()
    if not has_target.any():
        return frame, [Problem("no history", target, None, "no row has a value of the target")], []
    last_actual = frame.loc[has_target, PERIOD].max()
    hole = ~has_target & (frame[PERIOD] <= last_actual)
    if not hole.any():
        return frame, [], []
    row = _first(frame, hole)
    value = (f"no value for {row[PERIOD]} (series '{row[SERIES]}'), before the last actual "
             f"month {last_actual}")
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


def _history_and_future(frame: pd.DataFrame, spec: Spec, as_of: pd.Period) -> list[Problem]:
    problems: list[Problem] = []
    target = spec.target
    has_target = frame[target].notna()
    if not has_target.any():
        return problems
    late = has_target & (frame[PERIOD] > as_of)
    if late.any():
        row = _first(frame, late)
        said = "the as-of date" if spec.input.as_of else "the current month"
        problems.append(Problem("actual after the as-of date", target, _row(row),
                                f"{row[PERIOD]} is after {said} {as_of}", count=int(late.sum())))
    last_actual = frame.loc[has_target, PERIOD].max()
    future = ~has_target & (frame[PERIOD] > last_actual)
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
                                    f"{row[driver.column]!r} in {row[PERIOD]} has no history to "
                                    "learn from", count=int(new_level.sum())))
    if spec.target_transform != "none":
        floor = 0.0 if spec.target_transform == "log" else -1.0
        low = has_target & (frame[target] <= floor)
        if low.any():
            row = _first(frame, low)
            problems.append(Problem(f"not above {floor:g}, as target_transform: "
                                    f"{spec.target_transform} needs", target, _row(row),
                                    f"{row[target]:g} in {row[PERIOD]} (series '{row[SERIES]}')",
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
            if empty.any():
                row = _first(frame, empty)
                problems.append(Problem(word, driver, _row(row),
                                        f"no value for {row[PERIOD]} (series '{row[SERIES]}')"
                                        + (_ESTIMATE_HINT if word != "driver missing" else ""),
                                        count=int(empty.sum())))
    return problems


# Said when a driver has no value in a month to forecast.
_ESTIMATE_HINT = ("; fill in its planned values, or set future: month_mean on the driver to have "
                  "castline estimate it (in the backtest too)")


def _row(row: pd.Series) -> int | None:
    return None if pd.isna(row[ROW]) else int(row[ROW])


def _as_of(spec: Spec, today: date | None) -> pd.Period:
    chosen = spec.input.as_of or today or date.today()
    return pd.Period(chosen, freq="M")


def find_problems(spec: Spec, raw: RawInput, *, today: date | None = None
                  ) -> tuple[pd.DataFrame | None, list[Problem], list[Problem]]:
    """Return the validated frame (or None), the problems that stop a run, and those allowed."""
    frame, _, problems, allowed = _checked(spec, raw, today)
    return frame, problems, allowed


def _checked(spec: Spec, raw: RawInput, today: date | None
             ) -> tuple[pd.DataFrame | None, pd.DataFrame | None, list[Problem], list[Problem]]:
    """Return the validated frame (or None), which of its numeric cells the gaps policy
    filled (None when it filled none), the problems that stop a run, and those allowed."""
    schema = build_schema(spec)
    # The spec's columns in a frame of their own, coerced to their types there: the raw
    # input stays as it was read, and the file's other columns are never copied.
    typed = raw.frame.loc[:, raw.frame.columns.isin(list(schema.columns))].copy(deep=False)
    try:
        valid = schema.validate(typed, lazy=True, inplace=True)
    except pa.errors.SchemaErrors as exc:
        problems = _problems_from_pandera(exc.failure_cases, raw, typed)
        problems += _calendar_despite(problems, spec, raw, typed, today)
        return None, None, sorted(problems, key=lambda p: (p.row or 0, p.column)), []
    frame = valid[list(effective_rules(spec))]
    frame[PERIOD] = frame[spec.input.date_column].dt.to_period("M")
    # Plain Python strings: the series labels are read as arrays many times downstream.
    frame[SERIES] = _series_labels(frame, spec.input.series).astype(object)
    frame[ROW] = np.arange(len(frame)) + raw.first_row_number
    problems = _duplicates(frame, spec)
    allowed: list[Problem] = []
    as_read = frame
    gaps = missing_months(frame)
    if len(gaps) and spec.input.gaps == "refuse":
        problems.append(_gap_problem(gaps, spec, "month missing"))
    elif len(gaps) and spec.input.gaps == "allow":
        allowed.append(_gap_problem(gaps, spec, "month missing (allowed by input.gaps)"))
    elif len(gaps) and not problems:
        allowed.append(_gap_problem(gaps, spec, "month missing, filled by interpolation"))
        frame = _fill_gaps(frame, gaps, spec)
    frame, refused, accepted = _target_holes(frame, spec)
    problems += refused
    allowed += accepted
    problems += _history_and_future(frame, spec, _as_of(spec, today))
    filled = (filled_cells(as_read, frame, spec)
              if spec.input.gaps == "fill" and frame is not as_read else None)
    return frame, filled, sorted(problems, key=lambda p: (p.row or 0, p.column)), allowed


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
    frame[PERIOD] = frame[spec.input.date_column].dt.to_period("M")
    frame[SERIES] = _series_labels(frame, spec.input.series)
    frame[ROW] = frame.index.to_numpy() + raw.first_row_number
    problems = _duplicates(frame, spec)
    # A row whose date cannot be read is left out here; its month is not missing.
    dates_readable = not any(p.column == spec.input.date_column for p in found)
    gaps = missing_months(frame) if dates_readable else pd.DataFrame()
    if len(gaps) and spec.input.gaps == "refuse":
        problems.append(_gap_problem(gaps, spec, "month missing"))
    if spec.input.gaps == "refuse":
        problems += _target_holes(frame, spec)[1]
    problems += _history_and_future(frame, spec, _as_of(spec, today))
    # A cell that is not a number is already reported; do not report it again as missing.
    seen = {(p.column, p.row) for p in found}
    return [p for p in problems if (p.column, p.row) not in seen]


def check_data(spec: Spec, raw: RawInput, *, today: date | None = None) -> CheckedData:
    """Return the validated rows split into history and future.

    Raises CheckFailed carrying every problem found.
    """
    frame, filled, problems, allowed = _checked(spec, raw, today)
    if problems:
        raise CheckFailed(problems, str(raw.path))
    # Rows keep the file's order; the stages that write tables order what they write.
    has_target = frame[spec.target].notna()
    if filled is not None:
        filled = filled[has_target].reset_index(drop=True)
        filled = filled.loc[:, filled.any()] if filled.to_numpy().any() else None
    return CheckedData(history=frame[has_target].reset_index(drop=True),
                       future=frame[~has_target].reset_index(drop=True), raw=raw,
                       problems_allowed=allowed, filled=filled)
