"""Drivers nobody knows ahead: their values after an origin, estimated from the window.

A driver the user plans (a price list, promotion days) is ``given``: its values
in the months predicted are read from the data, in the backtest as at forecast
time. A driver nobody knows ahead (rainfall, an economic indicator) must be
guessed at forecast time, so the backtest guesses it the same way: in every
window, its values after the origin are replaced by an estimate learned from
that window alone, by one of four rules:

- ``month_mean``: the series' average for that calendar month over the window;
- ``last_year``: the series' latest value for that calendar month (the same
  month a year earlier, for months up to a year ahead);
- ``last_value``: the series' last value;
- ``mean``: the series' average.

Where a series has no value to estimate from (a calendar month its window
lacks, or a series new after the origin), the estimate falls back, in order, to
the series' own value under the next coarser rule (its last value or its
average), to the average over all series for that calendar month, and to the
average of every value in the window; ``notes`` counts these.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from pipeline.core.cadence import cadence_named, cadence_of
from pipeline.core.columns import loaded_name, period_ordinals, plain_name
from pipeline.core.design import held_series
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode_fields
from pipeline.features.grouped import group_last, group_means, positions_of
from pipeline.spec import Spec
from pipeline.spec.schema import ESTIMATE_RULES

# Rules that read a calendar month of the window, and so need a year of it.
SEASONAL_RULES = ("month_mean", "period_mean", "last_year")
RULE_WORDS = {
    "month_mean": "each series' average for that calendar month over the training months",
    "period_mean": "each series' average for that period of the year over the training window",
    "last_year": "the same month a year earlier",
    "last_value": "each series' last value",
    "mean": "each series' average",
}


# The widest season a table holds: 52 places a year for weeks (a week's place is its ordinal
# modulo 52, so the same place a year earlier is 52 weeks back), 12 for months, 4 for quarters.
SLOTS = 52


def calendar_month(ordinals: np.ndarray, season: int = 12) -> np.ndarray:
    """Return each period's place in its year, from 1: the calendar month (1 to 12) of month
    ordinals (0 = January 1970), the quarter of quarter ordinals (season 4), or the place in
    a 52-week cycle of week ordinals (season 52)."""
    return np.asarray(ordinals, dtype=np.int64) % season + 1


class _ColumnEstimate:
    """What one column's rule learned from a window, as lookup tables: per series and calendar
    month (seasonal rules only), per series, per calendar month over all series, and overall.

    Looked up as arrays (``estimate``); as a model file stores them, the tables are Series
    (``tables``), built when first asked for. Tables read from a file are kept as read.
    """

    def __init__(self, names: pd.Index, series_values: np.ndarray, pooled: np.ndarray, overall: float,
                 month_names: pd.Index | None = None, month_grid: np.ndarray | None = None,
                 tables: tuple | None = None) -> None:
        self.names = names                  # the series of the table by series
        self.series_values = series_values  # their values
        self.pooled = pooled                # by calendar month (see _calendar_table)
        self.overall = overall
        self.month_names = month_names      # the series of the table by series and calendar month
        self.month_grid = month_grid        # (see _grid), or None without a seasonal rule
        self._tables = tables

    @classmethod
    def from_tables(cls, by_month: pd.Series | None, by_series: pd.Series, pooled_month: pd.Series,
                    overall: float) -> _ColumnEstimate:
        """Return the estimate of the tables a model file stores (kept to be stored again)."""
        month_names, month_grid = None, None
        if by_month is not None:
            codes, names = pd.factorize(by_month.index.get_level_values(0).to_numpy(object))
            month_names = pd.Index(names, dtype=object)
            month_grid = _grid(len(names), codes, by_month.index.get_level_values(1).to_numpy(),
                               by_month.to_numpy(float))
        return cls(pd.Index(by_series.index.to_numpy(object), dtype=object), by_series.to_numpy(float),
                   _calendar_table(pooled_month.index.to_numpy(), pooled_month.to_numpy(float)),
                   overall, month_names, month_grid, (by_month, by_series, pooled_month))

    @classmethod
    def learn(cls, rule: str, window: tuple[np.ndarray, np.ndarray, np.ndarray],
              values: np.ndarray, season: int = 12) -> _ColumnEstimate:
        """Return what the rule learns from a column's values; ``window``: the rows' series
        codes, the sorted names they point into and the months, and ``values``, all in the
        window's month order (file order within a month: the order pandas' groupby would
        add them in, and in which the last of a group is found)."""
        codes, names, months = window
        present = ~np.isnan(values)
        if not present.all():
            codes, names = held_series(codes[present], names)
            months, values = months[present], values[present]
        moy = calendar_month(months, season)
        latest = rule in ("last_year", "last_value")
        by_series = (group_last if latest else group_means)(codes, values, len(names))
        cells, inverse = np.unique(moy, return_inverse=True)
        pooled = _calendar_table(cells, group_means(inverse, values, len(cells)))
        overall = float(values.sum() / len(values)) if len(values) else float("nan")
        names = pd.Index(names, dtype=object)
        if rule not in SEASONAL_RULES:
            return cls(names, by_series, pooled, overall)
        cells, inverse = np.unique(codes.astype(np.int64) * season + (moy - 1), return_inverse=True)
        found = (group_last if rule == "last_year" else group_means)(inverse, values, len(cells))
        return cls(names, by_series, pooled, overall, names,
                   _grid(len(names), cells // season, cells % season + 1, found))

    def tables(self) -> tuple[pd.Series | None, pd.Series, pd.Series]:
        """Return the tables as Series: by (series, calendar month) or None, by series, and by
        calendar month, each keyed in sorted order, as groupby gives them."""
        if self._tables is None:
            by_series = pd.Series(self.series_values, index=pd.Index(self.names, name="series"),
                                  name="value")
            months = np.flatnonzero(~np.isnan(self.pooled))
            pooled_month = pd.Series(self.pooled[months], index=pd.Index(months, name="moy"), name="value")
            by_month = None
            if self.month_grid is not None:
                rows, months = np.nonzero(~np.isnan(self.month_grid))   # row by row: sorted keys
                by_month = pd.Series(self.month_grid[rows, months], name="value",
                                     index=pd.MultiIndex.from_arrays(
                                         [self.month_names.to_numpy()[rows], months], names=["series", "moy"]))
            self._tables = (by_month, by_series, pooled_month)
        return self._tables

    def estimate(self, series: np.ndarray, months: np.ndarray, season: int = 12) -> tuple[np.ndarray, int]:
        """Return the estimates of rows given by series and period, and how many fell back
        from the rule's own table."""
        moy = calendar_month(months, season)
        codes = positions_of(self.names, series)
        # The rule's own table first, then the coarser ones in order.
        tables = []
        if self.month_grid is not None:
            month_codes = codes if self.month_names is self.names else positions_of(self.month_names, series)
            tables.append(self.month_grid[month_codes, moy])   # code -1: the last row, all NaN
        tables += [np.append(self.series_values, np.nan)[codes], self.pooled[moy]]
        values = tables[0]
        fell_back = int(np.isnan(values).sum())
        for table in tables[1:]:
            values = np.where(np.isnan(values), table, values)
        return np.where(np.isnan(values), self.overall, values), fell_back

    def to_dict(self) -> dict:
        by_month, by_series, pooled_month = self.tables()
        return {"by_month": by_month, "by_series": by_series,
                "pooled_month": pooled_month, "overall": self.overall}


def _calendar_table(months: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Return values by place in the year as an array indexed 0 to SLOTS (NaN where none; 0
    unused)."""
    table = np.full(SLOTS + 1, np.nan)
    inside = (months >= 1) & (months <= SLOTS)
    table[np.asarray(months)[inside].astype(np.intp)] = np.asarray(values, float)[inside]
    return table


def _grid(rows: int, codes: np.ndarray, months: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Return values by (row, calendar month) as a grid of rows + 1 by 13 (NaN where none; the
    last row, read for a series not in the table, all NaN)."""
    grid = np.full((rows + 1, SLOTS + 1), np.nan)
    months = np.asarray(months)
    inside = (months >= 1) & (months <= SLOTS)
    grid[np.asarray(codes)[inside], months[inside].astype(np.intp)] = np.asarray(values, float)[inside]
    return grid


class FutureEstimates:
    """Estimates of the columns castline must guess after an origin, learned from one window.

    ``fit`` learns each column's tables from the training window (its values up to
    the origin, ``window_end_``); ``apply`` returns rows with those columns replaced
    by their estimates in every month after the origin, and leaves the other rows
    and columns as they are.
    """

    def __init__(self, rules: dict[str, str], series_column: str) -> None:
        unknown = sorted(set(rules.values()) - set(ESTIMATE_RULES))
        if unknown:
            raise ValueError(f"no such estimate rule: {unknown[0]}")
        self.rules = dict(rules)
        self.series_column = series_column

    def fit(self, frame: pd.DataFrame) -> FutureEstimates:
        months = period_ordinals(frame)
        self.season_ = cadence_of(frame).season_lag
        self.window_end_ = int(months.max())
        # The window's series factorised and its rows put in month order once, for every column.
        order = np.argsort(months, kind="stable")
        codes, names = pd.factorize(frame[self.series_column].to_numpy()[order], sort=True)
        window = (codes, np.asarray(names, object), months[order])
        self.tables_ = {column: _ColumnEstimate.learn(rule, window, frame[column].to_numpy(float)[order],
                                                      self.season_)
                        for column, rule in self.rules.items()}
        return self

    def after_origin(self, frame: pd.DataFrame, every_row: bool | np.ndarray = False) -> np.ndarray:
        """Return which rows fall after the window's last month, or are marked by ``every_row``
        (True: all rows; an array: those it marks), each after its own series' last actual."""
        if every_row is True:
            return np.ones(len(frame), bool)
        later = period_ordinals(frame) > self.window_end_ if len(frame) else np.zeros(0, bool)
        return later | every_row if isinstance(every_row, np.ndarray) else later

    def apply(self, frame: pd.DataFrame, *, every_row: bool | np.ndarray = False) -> pd.DataFrame:
        """Return the rows with every estimated column replaced after the origin (``every_row``:
        in every row)."""
        later = self.after_origin(frame, every_row)
        if not later.any():
            return frame
        changed = frame.copy()
        series = frame[self.series_column].to_numpy()[later]
        months = period_ordinals(frame)[later]
        for column, table in self.tables_.items():
            # A file of months to forecast may leave an estimated driver out altogether.
            values = (changed[column].to_numpy(float, copy=True) if column in changed.columns
                      else np.full(len(changed), np.nan))
            values[later] = table.estimate(series, months, self.season_)[0]
            changed[column] = values
        return changed

    def notes(self, frame: pd.DataFrame, *, given_ignored: bool = False,
              every_row: bool | np.ndarray = False) -> list[str]:
        """Return what estimating the rows after the origin (``every_row``: all rows) did:
        estimates that fell back to a coarser rule, and (``given_ignored``) values the rows
        held that were ignored."""
        later = self.after_origin(frame, every_row)
        if not later.any():
            return []
        found = []
        series = frame[self.series_column].to_numpy()[later]
        months = period_ordinals(frame)[later]
        for column, table in self.tables_.items():
            fell_back = table.estimate(series, months, self.season_)[1]
            rule = self.rules[column]
            if fell_back:
                found.append(f"{column}: {fell_back} of {int(later.sum())} estimated values "
                             f"({rule}) had no value of their own series "
                             f"{'and calendar month ' if rule in SEASONAL_RULES else ''}in the "
                             "training window and used a coarser average")
            held = (int(frame[column].notna().to_numpy()[later].sum())
                    if column in frame.columns else 0)
            if given_ignored and held:
                found.append(f"{column}: the {held} values given in the months to forecast "
                             f"were ignored; it is estimated ({rule}: {RULE_WORDS[rule]}), as "
                             "in the backtest")
        return found

    def to_dict(self) -> dict:
        """Return the rules and the learned tables, as stored in a model file."""
        fields = {"rules": self.rules, "series_column": plain_name(self.series_column),
                  "window_end_": self.window_end_,
                  "tables_": {c: t.to_dict() for c, t in self.tables_.items()}}
        if self.season_ != 12:   # a monthly file is written as before periods were added
            fields["season_"] = self.season_
        return encode_fields(fields)

    @classmethod
    def from_dict(cls, data: dict, version: int = FORMAT_VERSION) -> FutureEstimates:
        """Return the fitted estimates ``to_dict`` stored."""
        with StoredFields(data, cls.__name__, version=version) as fields:
            rules = fields.value("rules")
            if not isinstance(rules, dict) or not all(
                    isinstance(c, str) and r in ESTIMATE_RULES for c, r in rules.items()):
                raise fields.bad("rules", "estimate rules by column")
            estimates = cls(rules, loaded_name(fields.text("series_column")))
            estimates.window_end_ = fields.whole("window_end_")
            estimates.season_ = fields.whole("season_") if "season_" in data else 12
            if estimates.season_ not in (4, 12, 52):
                raise fields.bad("season_", "4, 12 or 52")
            tables = fields.value("tables_")
            if not isinstance(tables, dict) or sorted(tables) != sorted(rules):
                raise fields.bad("tables_", "one table per estimated column")
            estimates.tables_ = {column: _read_table(fields, column, entry)
                                 for column, entry in tables.items()}
        return estimates


def _read_table(fields: StoredFields, column: str, entry) -> _ColumnEstimate:
    if not isinstance(entry, dict) or sorted(entry) != ["by_month", "by_series", "overall",
                                                       "pooled_month"]:
        raise fields.bad("tables_", f"the tables of '{column}'")
    for key in ("by_series", "pooled_month"):
        if not isinstance(entry[key], pd.Series) or not pd.api.types.is_numeric_dtype(entry[key]):
            raise fields.bad("tables_", f"numbers keyed for '{column}' ({key})")
    by_month = entry["by_month"]
    if by_month is not None and not (isinstance(by_month, pd.Series) and by_month.index.nlevels == 2):
        raise fields.bad("tables_", f"numbers keyed by series and month for '{column}'")
    if not isinstance(entry["overall"], (int, float)):
        raise fields.bad("tables_", f"a number for '{column}' (overall)")
    return _ColumnEstimate.from_tables(by_month, entry["by_series"], entry["pooled_month"],
                                       float(entry["overall"]))


def estimate_keys(spec: Spec) -> dict[str, tuple]:
    """Return the spec key of each estimated column's rule."""
    keys = {}
    for index, driver in enumerate(spec.drivers.numeric):
        if driver.future in ESTIMATE_RULES:
            keys[driver.column] = ("drivers", "numeric", index, "future")
    for index, lagged in enumerate(spec.drivers.lags):
        if lagged.column in spec.estimated_columns and lagged.column not in keys:
            keys[lagged.column] = ("drivers", "lags", index, "future")
    return keys


def require_a_year(spec: Spec, window_months: int, window: str) -> None:
    """Stop with a SpecError when a seasonal rule has less than a year to read."""
    cadence = cadence_named(spec.input.period)
    if window_months >= cadence.season_lag:
        return
    keys = estimate_keys(spec)
    for column, rule in spec.estimated_columns.items():
        if rule in SEASONAL_RULES:
            raise spec.error(keys[column], f"{rule} estimates '{column}' from each "
                                           f"{cadence.season_word} of the training window, but "
                                           f"{window} has only {cadence.count(window_months)}; "
                                           f"it needs at least {cadence.season_lag} "
                                           "(or use future: last_value or mean)")


def drivers_ahead(spec: Spec) -> dict:
    """Return which drivers the backtest scores at their actual values (``given``: numeric
    and categorical drivers, and whether calendar terms are used) and which castline
    estimates after each origin, with their rules (``estimated``)."""
    estimated = spec.estimated_columns
    given = [d.column for d in spec.drivers.numeric if d.column not in estimated]
    given += [d.column for d in spec.drivers.categorical]
    calendar = spec.drivers.calendar
    return {"given": given, "estimated": dict(estimated),
            "calendar": bool(calendar is not None and calendar.any_terms)}


def ahead_words(spec: Spec) -> str | None:
    """Return, in words, which drivers are treated as known ahead and which are estimated;
    None when the spec has no driver a month ahead could depend on."""
    ahead = drivers_ahead(spec)
    given = ahead["given"] + (["the calendar terms"] if ahead["calendar"] else [])
    estimated = ahead["estimated"]
    if not given and not estimated:
        return None
    parts = []
    if given:
        parts.append(f"known ahead (scored at their actual values, as a plan would give them): "
                     f"{', '.join(given)}")
    if estimated:
        parts.append("estimated by castline from each training window, in the backtest and the "
                     "forecast alike: " + ", ".join(f"{column} ({rule})"
                                                   for column, rule in estimated.items()))
    return "Drivers " + "; ".join(parts)
