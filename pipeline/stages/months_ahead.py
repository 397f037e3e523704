"""The months to forecast: each series' own last actual, and the rows ``forecast.months`` adds.

Each series is forecast from its own last actual. A series whose newest actual is
older than the newest over all series (a ragged last month: a region that reports
late) is named in a note, and refused when it lags by more months than are
forecast ahead. With ``forecast.months: N``, castline adds the months after each
series' last actual up to N that the file lacks: their calendar terms, lags and
estimated drivers it works out itself; a driver given ahead must still have its
values in the file, or the check names it with the months it lacks.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.cadence import Cadence, cadence_named
from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.spec import Spec
from pipeline.stages.problems import Problem

# Series named in a note before "and N more".
NAMED = 5


def last_actuals(frame: pd.DataFrame, target: str) -> pd.Series:
    """Return each series' last month with an actual, as a month ordinal (float; NaN for a
    series with none), indexed by series label."""
    has_target = frame[target].notna().to_numpy()
    series = frame[SERIES]
    ordinals = pd.Series(frame[PERIOD].array.asi8.astype(float), index=frame.index)
    last = ordinals[has_target].groupby(series[has_target], sort=False).max()
    return last.reindex(pd.unique(series)).astype(float)


def own_last_actual(frame: pd.DataFrame, target: str) -> np.ndarray:
    """Return, per row, the month ordinal of its series' last actual (-inf without any)."""
    last = last_actuals(frame, target)
    return frame[SERIES].map(last).fillna(-np.inf).to_numpy(float)


def months_limit(spec: Spec) -> int:
    """Return how many months ahead a series may be forecast: forecast.months, else the
    validation's horizon (or held-out months), else 12."""
    if spec.forecast is not None:
        return spec.forecast.ahead
    validation = spec.validation
    return int(getattr(validation, "horizon", None) or getattr(validation, "last_periods", None)
               or cadence_named(spec.input.period).season_lag)


def _named(labels) -> str:
    labels = [f"'{label}'" for label in labels]
    more = f" and {len(labels) - NAMED} more" if len(labels) > NAMED else ""
    return ", ".join(labels[:NAMED]) + more


def _span(ordinals, cadence: Cadence) -> str:
    """Return the periods as a range when they run on without a gap, else listed (up to six)."""
    months = sorted(set(int(o) for o in ordinals))
    first, last = cadence.label(months[0]), cadence.label(months[-1])
    if first == last:
        return first
    if months[-1] - months[0] + 1 == len(months):
        return f"{first} to {last}"
    if len(months) <= 6:
        return ", ".join(cadence.labels(months))
    return f"{len(months)} {cadence.plural} from {first} to {last}"


def _ahead_key(spec: Spec) -> str:
    """Return the key the spec gives the periods ahead by, as written."""
    return "forecast.periods" if spec.forecast.periods is not None else "forecast.months"


def lagging_series(frame: pd.DataFrame, spec: Spec) -> tuple[list[Problem], list[str]]:
    """Return the refusals and the note for series whose last actual is older than the newest.

    A series to forecast that lags by more months than are forecast ahead is refused; one
    with nothing to forecast (no row after its last actual, and no forecast.months) is
    history only and not named. A series with no actual at all is refused.
    """
    target = spec.target
    cadence = cadence_named(spec.input.period)
    word, _month = cadence.name, cadence.label
    last = last_actuals(frame, target)
    problems: list[Problem] = []
    column = spec.input.series[0] if spec.input.series else spec.input.date_column
    never = last[last.isna()]
    if last.isna().all():
        return [], []   # no actual at all: the check's "no history" says so
    if len(never):
        first = frame[frame[SERIES] == never.index[0]].iloc[0]
        problems.append(Problem("series without an actual", column, _row(first),
                                f"series {_named(never.index)} {'has' if len(never) == 1 else 'have'} no value of {target} in any "
                                f"{word}, so there is nothing to learn it from",
                                count=len(never)))
    known = last.dropna()
    newest = known.max()
    behind = known[known < newest]
    if spec.forecast is None:   # only series with rows to forecast are forecast
        ordinals = frame[PERIOD].array.asi8
        has_target = frame[target].notna().to_numpy()
        to_forecast = set(frame[SERIES].to_numpy()[~has_target & (ordinals > frame[SERIES].map(
            last).fillna(np.inf).to_numpy())])
        behind = behind[behind.index.isin(to_forecast)]
    if behind.empty:
        return problems, []
    limit = months_limit(spec)
    too_far = behind[newest - behind > limit]
    if len(too_far):
        first = too_far.index[0]
        row = frame[(frame[SERIES] == first) & (frame[PERIOD].array.asi8 == too_far.iloc[0])].iloc[0]
        problems.append(Problem(
            "series too far behind", target, _row(row),
            f"series {_named(too_far.index)} last has an actual in {_month(too_far.iloc[0])}, "
            f"{cadence.count(int(newest - too_far.iloc[0]))} before the newest ({_month(newest)}): more "
            f"than the {cadence.count(limit)} forecast ahead; bring its actuals up to date or leave it out",
            count=len(too_far)))
    shown = ", ".join(f"'{s}' ({_month(v)})" for s, v in list(behind.items())[:NAMED])
    more = f" and {len(behind) - NAMED} more" if len(behind) > NAMED else ""
    lag = "1 series lags" if len(behind) == 1 else f"{len(behind)} series lag"
    note = (f"{lag} behind the newest actual {word} {_month(newest)}, with its last actual in: "
            f"{shown}{more}; each series is forecast from its own last actual")
    return problems, [note]


def _row(row: pd.Series) -> int | None:
    return None if pd.isna(row[ROW]) else int(row[ROW])


def add_months_ahead(frame: pd.DataFrame, spec: Spec) -> tuple[pd.DataFrame, list[str]]:
    """Return the frame with the months to forecast that ``forecast.months`` asks for and the
    file lacks, and the notes on what was added or left out (no change without the key).

    Added rows carry their series' key columns and their month's first day as the date; every
    other column is empty (the calendar terms, lags and estimated drivers are worked out from
    the month). Rows after a series' last actual beyond the months asked for are left out.
    """
    if spec.forecast is None or frame.empty:
        return frame, []
    months = spec.forecast.ahead
    cadence = cadence_named(spec.input.period)
    target = spec.target
    last = last_actuals(frame, target).dropna()
    if last.empty:
        return frame, []
    ordinals = frame[PERIOD].array.asi8
    own = frame[SERIES].map(last).to_numpy(float)
    notes = []
    beyond = frame[target].isna().to_numpy() & (ordinals > own + months)
    if beyond.any():
        notes.append(f"{int(beyond.sum())} row(s) after the {cadence.count(months)} to forecast "
                     f"({_ahead_key(spec)}) are left out: {_span(ordinals[beyond], cadence)}")
        frame = frame[~beyond]
        ordinals = ordinals[~beyond]
    present = set(zip(frame[SERIES].to_numpy(), ordinals.tolist()))
    keys = list(spec.input.series)
    newest = frame[frame[target].notna()].sort_values(PERIOD).groupby(SERIES, sort=False).tail(1)
    newest = newest.set_index(SERIES)
    added = []
    for series, end in last.items():
        wanted = [o for o in range(int(end) + 1, int(end) + months + 1) if (series, o) not in present]
        if wanted:
            added.append(pd.DataFrame({SERIES: series, PERIOD: cadence.periods(wanted),
                                       **{key: newest.at[series, key] for key in keys}}))
    if not added:
        return frame, notes
    rows = pd.concat(added, ignore_index=True)
    rows[spec.input.date_column] = rows[PERIOD].dt.to_timestamp()
    rows[ROW] = np.nan
    grown = pd.concat([frame, rows.reindex(columns=frame.columns)], ignore_index=True)
    for column in frame.columns:   # keep the file's types where the added rows allow
        if column in keys or column in (SERIES, PERIOD, spec.input.date_column):
            grown[column] = grown[column].astype(frame[column].dtype)
    span = _span(rows[PERIOD].array.asi8, cadence)
    notes.append(f"castline added {len(rows)} row(s) to forecast ({span}) for {_ahead_key(spec)}: "
                 f"{months}; their calendar terms, lags and estimated drivers are worked out")
    return grown, notes


def missing_given(frame: pd.DataFrame, spec: Spec, future: np.ndarray) -> list[Problem]:
    """Return, per driver given ahead, the months castline added (or filled in a gap) to
    forecast that lack its value: one problem naming the driver and the months."""
    inserted = future & frame[ROW].isna().to_numpy()
    if not inserted.any():
        return []
    problems = []
    cadence = cadence_named(spec.input.period)
    keys = set(spec.input.series)
    estimated = spec.estimated_columns
    filled = spec.filled_driver_columns
    for driver in spec.driver_columns:
        if driver in estimated or driver in filled or driver in keys:
            continue
        empty = inserted & frame[driver].isna().to_numpy()
        if empty.any():
            where = frame.loc[empty, SERIES]
            problems.append(Problem(
                "driver missing in a month to forecast", driver, None,
                f"no value for {_span(frame.loc[empty, PERIOD].array.asi8, cadence)} (series "
                f"{_named(pd.unique(where))}), {cadence.plural} castline adds to forecast "
                f"({_ahead_key(spec) if spec.forecast else 'input.gaps: fill'}); add rows with its "
                "planned values, or set future: month_mean on the driver to have castline estimate "
                "it (in the backtest too)", count=int(empty.sum())))
    return problems


def split_gaps(frame: pd.DataFrame, gaps: pd.DataFrame, target: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return the missing months (``gaps.missing_months``) inside each series' history, and
    those after its last actual: months to forecast that the file skips."""
    if not len(gaps):
        return gaps, gaps
    last = last_actuals(frame, target)
    after = gaps[PERIOD].array.asi8 > gaps[SERIES].map(last).fillna(-np.inf).to_numpy(float)
    return gaps[~after], gaps[after]
