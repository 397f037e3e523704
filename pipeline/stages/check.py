"""Check: refuse data the spec cannot be fitted on, before any model runs.

The column rules are declared as a pandera schema built from the spec and run
lazily, so every failure is found at once; then the calendar is checked (one
row per series and month, history before the forecast rows).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pandera.pandas as pa

from ..errors import DataError
from ..spec import Spec
from .ingest import RawInput

PERIOD = "period"
SERIES = "series"
ROW = "source_row"
ALL_SERIES = "all"


@dataclass(frozen=True)
class Problem:
    """One kind of fault found in the input, with its first place and how often it occurs."""

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


class CheckFailed(DataError):
    """The data breaks one or more checks; every problem is attached."""

    def __init__(self, problems: list[Problem], file: str) -> None:
        self.problems = problems
        first = problems[0].describe(file)
        more = f" (and {len(problems) - 1} more problems)" if len(problems) > 1 else ""
        super().__init__(f"{first}{more}; 'castline check' lists them all")
        self.file = file

    def _render(self) -> str:  # the message already names file and row
        return self.message


@dataclass(frozen=True)
class CheckedData:
    """Rows that passed the checks, placed in time: history (with the target) and future."""

    history: pd.DataFrame
    future: pd.DataFrame
    raw: RawInput
    problems_allowed: list[Problem] = field(default_factory=list)

    @property
    def first_period(self) -> pd.Period:
        return self.history[PERIOD].min()

    @property
    def last_period(self) -> pd.Period:
        return self.history[PERIOD].max()

    @property
    def series_names(self) -> list[str]:
        return sorted(self.history[SERIES].unique())


def _finite(values: pd.Series) -> pd.Series:
    return ~np.isinf(values) | values.isna()


def build_schema(spec: Spec) -> pa.DataFrameSchema:
    """Return the pandera schema the spec's columns must meet."""
    columns: dict[str, pa.Column] = {
        spec.input.date_column: pa.Column(pa.DateTime, coerce=True, nullable=False),
        spec.target: pa.Column(float, coerce=True, nullable=True,
                               checks=pa.Check(_finite, error="is infinite")),
    }
    for driver in spec.drivers.numeric:
        columns[driver.column] = pa.Column(float, coerce=True, nullable=False,
                                           checks=pa.Check(_finite, error="is infinite"))
    for column in [d.column for d in spec.drivers.categorical] + spec.input.series:
        columns[column] = pa.Column(str, coerce=True, nullable=False)
    return pa.DataFrameSchema(columns, strict=False)


_CHECK_WORDS = {
    "column_in_dataframe": "column missing",
    "not_nullable": "missing value",
}


def _problems_from_pandera(failures: pd.DataFrame, raw: RawInput) -> list[Problem]:
    """Return one problem per (check, column), located at its first failing row."""
    problems: list[Problem] = []
    failures = failures.copy()
    failures["check"] = failures["check"].astype(str)
    is_dtype = failures["check"].str.startswith("dtype(")
    coerced = set(failures.loc[failures["check"].str.startswith("coerce_dtype"), "column"])
    failures = failures[~(is_dtype & failures["column"].isin(coerced))]
    for (check, column), group in failures.groupby(["check", "column"], sort=False, dropna=False):
        if check == "column_in_dataframe":
            missing = str(group["failure_case"].iloc[0])
            problems.append(Problem("column missing", missing, None,
                                    "the spec names this column but the file has none such"))
            continue
        if check.startswith("coerce_dtype") or check.startswith("dtype("):
            wanted = "a date" if "datetime" in check else "a number"
            words = f"not {wanted}"
        else:
            words = _CHECK_WORDS.get(check, check)
        indexes = group["index"].dropna()
        row = raw.location(indexes.iloc[0]) if len(indexes) else None
        problems.append(Problem(words, str(column), row, str(group["failure_case"].iloc[0]),
                                count=len(group)))
    return sorted(problems, key=lambda p: (p.row or 0, p.column))


def _series_labels(frame: pd.DataFrame, columns: list[str]) -> pd.Series:
    if not columns:
        return pd.Series(ALL_SERIES, index=frame.index)
    labels = frame[columns[0]].astype(str)
    for column in columns[1:]:
        labels = labels + " / " + frame[column].astype(str)
    return labels


def _calendar_problems(frame: pd.DataFrame, spec: Spec, raw: RawInput) -> list[Problem]:
    """Return duplicated months per series and target gaps inside the history."""
    problems: list[Problem] = []
    date = spec.input.date_column
    duplicated = frame.duplicated([SERIES, PERIOD], keep="first")
    if duplicated.any():
        first = frame[duplicated].iloc[0]
        problems.append(Problem("month given twice", date, int(first[ROW]),
                                f"{first[PERIOD]} for series '{first[SERIES]}'",
                                count=int(duplicated.sum())))
    has_target = frame[spec.target].notna()
    if not has_target.any():
        problems.append(Problem("no history", spec.target, None,
                                "no row has a value of the target"))
        return problems
    last_actual = frame.loc[has_target, PERIOD].max()
    gap = ~has_target & (frame[PERIOD] <= last_actual)
    if gap.any():
        first = frame[gap].iloc[0]
        problems.append(Problem("target missing in history", spec.target, int(first[ROW]),
                                f"no value for {first[PERIOD]}, before the last actual month "
                                f"{last_actual}", count=int(gap.sum())))
    return problems


def check_data(spec: Spec, raw: RawInput) -> CheckedData:
    """Return the validated rows split into history and future.

    Raises CheckFailed carrying every problem found.
    """
    schema = build_schema(spec)
    try:
        valid = schema.validate(raw.frame, lazy=True)
    except pa.errors.SchemaErrors as exc:
        raise CheckFailed(_problems_from_pandera(exc.failure_cases, raw), str(raw.path)) from None
    frame = valid.copy()
    frame[PERIOD] = frame[spec.input.date_column].dt.to_period("M")
    frame[SERIES] = _series_labels(frame, spec.input.series)
    frame[ROW] = [raw.location(i) for i in frame.index]
    problems = _calendar_problems(frame, spec, raw)
    if problems:
        raise CheckFailed(problems, str(raw.path))
    frame = frame.sort_values([PERIOD, SERIES], kind="stable").reset_index(drop=True)
    has_target = frame[spec.target].notna()
    history = frame[has_target].reset_index(drop=True)
    future = frame[~has_target].reset_index(drop=True)
    return CheckedData(history=history, future=future, raw=raw)
