"""A fitted run saved as JSON, and loaded back to forecast new rows. Never a pickle.

The file holds the feature plan (each transformer's settings and what it
learned), every model's fitted numbers, what the run's empirical intervals were
read from (``StoredIntervals``, from format version 3), and the versions that
made it. Each stored part writes and reads its own named fields (``to_dict`` and
the classmethod ``from_dict``, see ``pipeline.core.stored``); loading builds only
the classes in the plan's ``PART_CLASSES`` and in ``BASELINES`` below, so a
model file cannot run code, and a damaged one stops with a ``ModelFileError``.

A file of version 1 or 2 predates the intervals: it still forecasts, without
them (its table has no horizon or interval columns, and ``StoredModel.notes``
says so). From version 4 the file also holds the run's ``multi_step`` strategy and
the direct strategy's fits (``StoredSteps``), for months further after the last
actual than the target's own lags reach; an older file forecasts every other row.

The rows to forecast may come with their history, as in the run's own input: the
rows whose target is empty are forecast; those with it filled are actuals, read by
the target's lags before the run's history the file keeps, and not forecast.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from pipeline.core.cadence import cadence_named, cadence_of_freq, label_of, parse_label, period_labels
from pipeline.core.catalogue import BASELINE_KINDS, MODELS, model_kind
from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.design import series_design
from pipeline.core.errors import DataError, ModelFileError, SpecError, UserError
from pipeline.core.intervals import LEVELS, empirical_bounds, percent, usable_scales
from pipeline.core.stored import FORMAT_VERSION, READABLE_VERSIONS, StoredFields, encode_fields
from pipeline.core.version import __version__
from pipeline.features.plan import FeaturePlan
from pipeline.features.rows import first_row
from pipeline.models.per_series import PerSeriesOLS
from pipeline.record.stored_fits import StoredLinear, StoredPerSeries
from pipeline.record.stored_steps import STEPS_FROM, StoredSteps, last_actuals, placed_plan
from pipeline.spec import CsvOptions
from pipeline.stages.check import _series_labels
from pipeline.stages.dates import read_dates
from pipeline.stages.ingest import read_table
from pipeline.stages.survey import guess_format

FORMAT = "castline-model"

# The baselines a model file may hold, by the class name it gives them.
# The baseline classes a model file may name: every reference kind in the catalogue.
BASELINES: dict[str, type] = {cls.__name__: cls for cls in (MODELS[kind].model_class() for kind in BASELINE_KINDS)}

__all__ = ["FORMAT", "FORMAT_VERSION", "ModelFileError", "StoredIntervals", "StoredModel", "load_model",
           "model_document"]


# ------------------------------------------------------------------ intervals

INTERVALS_FROM = 3   # the first format version whose files hold the empirical intervals
TRANSFORMS = ("none", "log", "log1p")
# A model's bounds by months ahead and level, as ``core.intervals.horizon_bounds`` gives them.
BOUND_COLUMNS = {"horizon": "int64", "level": "float64", "bound": "float64", "errors": "int64",
                 "from_horizon": "int64", "to_horizon": "int64"}
PREDATES_INTERVALS = "this model file predates intervals: no intervals given"


class StoredIntervals:
    """What a run's empirical intervals were read from, to state them for new rows as the run
    did (``core.intervals.empirical_bounds``): per model, the bounds of its scaled backtest
    errors by months ahead and level; each series' scale from all history (the MASE scale,
    NaN or 0 where unusable); the target's transform and floor (0 for a target never below
    zero, else None); and the last month of history, from which months ahead are counted
    (for a series that lagged behind the others, from its own last month: ``lagging``)."""

    def __init__(self, tables: dict[str, pd.DataFrame], series_scales: dict[str, float], transform: str,
                 floor: float | None, last_period, lagging: dict | None = None) -> None:
        self.tables = {kind: table.reset_index(drop=True) for kind, table in tables.items()}
        self.series_scales = {str(series): float(scale) for series, scale in series_scales.items()}
        self.transform = transform
        self.floor = None if floor is None else float(floor)
        self.last_period = last_period if isinstance(last_period, pd.Period) else parse_label(last_period)
        cadence = cadence_of_freq(self.last_period)
        self.lagging = {str(series): month if isinstance(month, pd.Period) else cadence.parse(month)
                        for series, month in (lagging or {}).items()}

    @classmethod
    def from_forecast(cls, forecast) -> StoredIntervals:
        """Return what a run's ``ForecastResult`` kept of its empirical intervals."""
        return cls(forecast.interval_bounds, forecast.series_scales, forecast.transform, forecast.floor,
                   forecast.last_period, forecast.lagging_series)

    def to_dict(self) -> dict:
        """Return the fields as a model file stores them; the bounds as one object per model;
        the series that lagged by their last month, only when some did."""
        lagging = {"lagging_series": {s: label_of(m) for s, m in self.lagging.items()}} if self.lagging else {}
        return {**encode_fields({"transform": self.transform, "floor": self.floor,
                                 "last_period": self.last_period, "series_scales": self.series_scales}),
                **lagging,
                "bounds": {kind: encode_fields({column: table[column].to_numpy(dtype)
                                                for column, dtype in BOUND_COLUMNS.items()})
                           for kind, table in self.tables.items()}}

    @classmethod
    def from_dict(cls, data, models: list[str], version: int = FORMAT_VERSION) -> StoredIntervals:
        """Return the intervals ``to_dict`` stored, with one table of bounds for each of the
        file's models."""
        with StoredFields(data, "the intervals", version=version) as fields:
            transform = fields.choice("transform", TRANSFORMS)
            floor = fields.number("floor", optional=True)
            if floor is not None and not math.isfinite(floor):
                raise fields.bad("floor", "a finite number or null")
            last_period = fields.period("last_period")
            scales = fields.number_map("series_scales")
            bounds = fields.raw("bounds")
            lagging = fields.raw("lagging_series") if "lagging_series" in data else {}
        if not isinstance(lagging, dict) or not all(
                isinstance(m, str) and re.fullmatch(cadence_of_freq(last_period).pattern, m)
                and cadence_of_freq(last_period).parse(m) < last_period for m in lagging.values()):
            raise ModelFileError("the intervals: the field 'lagging_series' is not a table of months "
                                 "before the last month by series")
        odd = [series for series, scale in scales.items() if not (math.isnan(scale) or 0 <= scale < math.inf)]
        if odd:
            raise ModelFileError(f"the intervals: the scale of series {odd[0]!r} is negative or infinite")
        if not isinstance(bounds, dict) or sorted(bounds) != sorted(models):
            raise ModelFileError("the intervals: the field 'bounds' does not hold one table for each model")
        return cls({kind: _bounds_from_dict(table, kind, version) for kind, table in bounds.items()}, scales,
                   transform, floor, last_period, lagging)

    def horizons(self, periods: pd.Series, series: pd.Series) -> np.ndarray:
        """Return each row's months after its series' last month of history (0 or less at or
        before it)."""
        own = {s: m.ordinal for s, m in self.lagging.items()}
        last = series.astype(str).map(own).fillna(self.last_period.ordinal).to_numpy(np.int64)
        return (periods.array.asi8 - last).astype(int)

    def row_scales(self, series: pd.Series) -> np.ndarray:
        """Return each row's series scale, as the run's forecast takes it: its series' scale,
        one unknown (a series the run never saw) or unusable replaced by ``usable_scales``'
        median of the other rows' usable scales. When no row has one, the median of the
        run's usable scales (the run would use 1)."""
        scale = series.map(self.series_scales).to_numpy(float)
        if len(scale) and not (np.isfinite(scale) & (scale > 0)).any():
            known = np.array(list(self.series_scales.values()), float)
            known = known[np.isfinite(known) & (known > 0)]
            return np.full(len(scale), float(np.median(known)) if len(known) else 1.0)
        return usable_scales(scale)

    def columns(self, kind: str, point, horizons: np.ndarray, scale: np.ndarray) -> dict[str, np.ndarray]:
        """Return a model's empirical 80% and 95% bounds for rows with these points, months
        ahead and scales: NaN for a row at or before the last month of history."""
        ahead = horizons >= 1
        found = {}
        for level in LEVELS:
            low, high = empirical_bounds(point, horizons, scale, self.tables[kind], level, self.transform,
                                         self.floor)
            found[f"empirical_low_{percent(level)}"] = np.where(ahead, low, np.nan)
            found[f"empirical_high_{percent(level)}"] = np.where(ahead, high, np.nan)
        return found


def _bounds_from_dict(data, kind: str, version: int) -> pd.DataFrame:
    """Return one model's bounds by months ahead and level, checked to be a table
    ``core.intervals.horizon_bounds`` could have given."""
    owner = f"the intervals of model '{kind}'"
    with StoredFields(data, owner, version=version) as fields:
        columns = {column: fields.array(column, dtype, ndim=1) for column, dtype in BOUND_COLUMNS.items()}
    if len({len(values) for values in columns.values()}) > 1:
        raise ModelFileError(f"{owner}: its columns are not of one length")
    table = pd.DataFrame(columns)
    level, horizon = table["level"].to_numpy(), table["horizon"].to_numpy()
    problems = {
        "a level that is not 80% or 95%": ~np.isclose(level[:, None], LEVELS).any(axis=1),
        "a negative months ahead": horizon < 0,
        "a negative bound": table["bound"].to_numpy() < 0,
        "a bound read from no errors": table["errors"].to_numpy() < 1,
        "a bound read from months ahead that do not hold its own": (
            (table["from_horizon"].to_numpy() > horizon) | (table["to_horizon"].to_numpy() < horizon)),
        "a months ahead and level given twice": table.duplicated(["horizon", "level"]).to_numpy(),
    }
    for problem, where in problems.items():
        if where.any():
            raise ModelFileError(f"{owner}: {problem}")
    return table


# ------------------------------------------------------------------ save, load

class _Envelope(BaseModel):
    model_config = ConfigDict(extra="forbid")

    format: str
    format_version: int
    castline_version: str
    spec_name: str
    target: str
    date_column: str
    date_format: str | None = None     # input.date_format, when the run's spec set one
    period: Literal["month", "quarter", "week"] = "month"   # input.period; written when not month
    missing_values: list[str] | None = None   # input.csv.missing_values, when the run's spec set them
    series_columns: list[str]
    feature_names: list[str]
    plan: dict
    models: dict[str, dict]
    intervals: dict | None = None      # from format version 3 (StoredIntervals)
    multi_step: dict | None = None     # from format version 4 (StoredSteps)
    versions: dict[str, str] = Field(default_factory=dict)
    notes: list[str] = Field(default_factory=list)


def _model_entry(kind: str, model, names: list[str]) -> dict:
    """Return a fitted model as a model file stores it."""
    if isinstance(model.inner, PerSeriesOLS):
        return {"kind": "linear_per_series", **StoredPerSeries.from_model(model).to_dict()}
    if model_kind(kind).family == "linear":
        return {"kind": "linear", **StoredLinear.from_model(model, names).to_dict()}
    return {"kind": "baseline", "class": type(model).__name__, "state": model.to_dict()}


def model_document(spec, plan, fitted: dict, versions: dict[str, str], intervals: StoredIntervals,
                   steps: StoredSteps | None = None) -> dict:
    """Return the JSON document that stores a run's fitted plan and models, what its
    empirical intervals were read from (``StoredIntervals.from_forecast``) and its
    multi-step strategy with the direct strategy's fits (``StoredSteps.from_run``)."""
    names = plan.get_feature_names_out()
    models = {kind: _model_entry(kind, model, names) for kind, model in fitted.items()}
    steps = steps or StoredSteps(spec.multi_step)
    return {
        "format": FORMAT, "format_version": FORMAT_VERSION, "castline_version": __version__,
        "spec_name": spec.name, "target": spec.target, "date_column": spec.input.date_column,
        "series_columns": list(spec.input.series), "feature_names": names,
        "plan": plan.to_dict(), "models": models, "intervals": intervals.to_dict(),
        "multi_step": steps.to_dict(_model_entry), "versions": versions,
        **({"date_format": spec.input.date_format} if spec.input.date_format else {}),
        **({"period": spec.input.period} if spec.input.period != "month" else {}),
        **({"missing_values": list(missing)} if (missing := spec.input.csv.missing_values) is not None else {}),
    }


def _model_from_dict(kind: str, entry: dict, names: list[str], version: int):
    """Return the stored model of one kind, ready to predict."""
    stored = {key: value for key, value in entry.items() if key != "kind"}
    if entry.get("kind") == "linear":
        return StoredLinear.from_dict(stored, names, version)
    if entry.get("kind") == "linear_per_series":
        return StoredPerSeries.from_dict(stored, version)
    if entry.get("kind") == "baseline":
        with StoredFields(stored, f"model '{kind}'", version=version) as fields:
            name = fields.raw("class")
            if not isinstance(name, str) or name not in BASELINES:
                raise ModelFileError(f"class {name!r} is not one castline stores")
            return BASELINES[name].from_dict(fields.raw("state"), version)
    raise ModelFileError(f"model '{kind}' has an unknown kind")


def _intervals_from(document: _Envelope, version: int) -> StoredIntervals | None:
    """Return a file's stored intervals, or None for a file that predates them."""
    if version < INTERVALS_FROM:
        if document.intervals is not None:
            raise ModelFileError(f"a model file of version {version} holds no intervals, but this one "
                                 "has the field 'intervals'")
        return None
    if document.intervals is None:
        raise ModelFileError("the field 'intervals' is missing")
    return StoredIntervals.from_dict(document.intervals, list(document.models), version)


def _steps_from(document: _Envelope, version: int) -> StoredSteps:
    """Return a file's multi-step strategy and fits (strategy None in a file that predates them)."""
    if version < STEPS_FROM:
        if document.multi_step is not None:
            raise ModelFileError(f"a model file of version {version} holds no multi-step strategy, but "
                                 "this one has the field 'multi_step'")
        return StoredSteps(None, version=version)
    if document.multi_step is None:
        raise ModelFileError("the field 'multi_step' is missing")
    return StoredSteps.from_dict(document.multi_step, list(document.models), _model_from_dict, version)


def _numbers(values: pd.Series, column: str, file: str, start: int = 2) -> pd.Series:
    """Return a column's values as numbers (empty cells NaN); stop at the first cell that
    holds text that is not a number."""
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        return values.astype(float)
    numbers = pd.to_numeric(values, errors="coerce")
    text = values.notna().to_numpy() & (values.astype(str).str.strip() != "").to_numpy()
    wrong = text & numbers.isna().to_numpy()
    if wrong.any():
        at = int(np.flatnonzero(wrong)[0])
        raise DataError(f"{values.iloc[at]!r} is not a number", file=file, column=column, row=at + start)
    return numbers.astype(float)


class StoredModel:
    """A run's fitted feature plan and models, loaded from JSON, ready to forecast; with the
    run's empirical intervals, or ``intervals`` None for a file that predates them; and its
    multi-step strategy (``steps``)."""

    def __init__(self, document: _Envelope, plan, models: dict, path: Path | None = None,
                 intervals: StoredIntervals | None = None, steps: StoredSteps | None = None) -> None:
        self.document = document
        self.plan = plan
        self.models = models
        self.path = path
        self.intervals = intervals
        self.steps = steps or StoredSteps(None, version=document.format_version)

    def read(self, path: Path) -> pd.DataFrame:
        """Return a file of new data as read: a CSV's missing cells as the run read its own."""
        if not path.is_file():
            raise UserError(f"{path}: no such data file")
        return read_table(path, guess_format(path), CsvOptions(missing_values=self.document.missing_values))

    def prepare(self, frame: pd.DataFrame, file: str = "") -> pd.DataFrame:
        """Return the rows with the month, series and row columns the plan expects, and the
        numeric columns it reads (the target's among them) as numbers."""
        doc = self.document
        missing = [c for c in [doc.date_column, *doc.series_columns] if c not in frame.columns]
        if missing:
            raise DataError("the file has no such column, and the model needs it", file=file,
                            column=missing[0])
        prepared = frame.copy()
        start = 1 if file and guess_format(Path(file)) == "parquet" else 2   # the first row's number
        # Read as the run read its dates: with its input.date_format, offsets in UTC.
        dates = read_dates(prepared[doc.date_column], doc.date_format)
        if dates.isna().any():
            at = int(np.flatnonzero(dates.isna().to_numpy())[0])
            value = prepared[doc.date_column].iloc[at]
            said = (f"{value!r} does not match the date format {doc.date_format!r} the run read its "
                    "dates with" if doc.date_format and pd.notna(value) else "not a date")
            raise DataError(said, file=file, column=doc.date_column, row=at + start)
        prepared[PERIOD] = cadence_named(doc.period).of_dates(dates)
        prepared[SERIES] = _series_labels(prepared, doc.series_columns)
        prepared[ROW] = np.arange(len(prepared)) + start
        plan = self.plan
        numeric = [d.column for d in plan.numeric] + [lagged.column for lagged in plan.lags] + [doc.target]
        for column in dict.fromkeys(numeric):
            if column in prepared.columns:
                prepared[column] = _numbers(prepared[column], column, file, start)
        return prepared

    def forecast(self, frame: pd.DataFrame, model: str | None = None, file: str = "") -> pd.DataFrame:
        """Return each stored model's prediction for every row of the frame whose target is
        empty (every row, without a target column): period, series, model, forecast and,
        when the file holds intervals, as in the run's forecast.csv, the months ahead
        (``horizon``, counted from the run's last month of history) and the empirical 80%
        and 95% bounds (none for a row at or before that month).

        Rows whose target is filled are actuals, as in the run's input: the lags read them,
        before the run's history the model file kept. Months further after the last actual
        than the target's lags reach are forecast by the run's multi_step strategy
        (``StoredSteps``)."""
        prepared = self.prepare(frame, file)
        kinds = [model] if model else list(self.models)
        for kind in kinds:
            if kind not in self.models:
                raise UserError(f"the model file holds no model '{kind}' (it holds: "
                                f"{', '.join(self.models)})")
        plan = placed_plan(self.plan, file)   # its messages name the new data file
        with self._applying(prepared, file):
            # Drivers nobody knows ahead are estimated as in the run that wrote the model, in
            # every row to forecast (a series that lagged has some at or before its last month).
            known = plan.estimate_future(prepared, every_row=self._empty_target(prepared))
            actuals, rows = self._actuals(known, file), self._to_forecast(known, file)
            self._check_filled(rows, file)
            lagging = self.intervals.lagging if self.intervals is not None else {}
            origins = last_actuals(plan, rows, actuals, lagging)
            stepwise = self.steps.needed(plan, rows, origins)
            design = None if stepwise else plan.transform(rows, known=actuals)
        if stepwise and self.steps.strategy is None:
            raise UserError(f"{self.path}: {self.steps.predates(plan)}")
        intervals = self.intervals
        if intervals is not None:
            horizons = intervals.horizons(rows[PERIOD], rows[SERIES])
            scale = intervals.row_scales(rows[SERIES])
        out = []
        for kind in kinds:
            stored = self.models[kind]
            with self._applying(prepared, file, kind):
                if design is not None:
                    values = stored.predict(design)
                elif not isinstance(stored, (StoredLinear, StoredPerSeries)):   # a simple rule
                    values = stored.predict(series_design(rows, SERIES))
                else:
                    values = self.steps.predict(kind, plan, stored, rows, actuals, origins, file)
            table = {"period": np.asarray(period_labels(rows[PERIOD]), dtype=object), "series": rows[SERIES].to_numpy(),
                     "model": kind, "forecast": values}
            if intervals is not None:
                table = {"period": table.pop("period"), "horizon": horizons, **table,
                         **intervals.columns(kind, values, horizons, scale)}
            out.append(pd.DataFrame(table))
        return pd.concat(out, ignore_index=True)

    def _check_filled(self, rows: pd.DataFrame, file: str) -> None:
        """Stop at the first empty cell of a numeric driver the run filled no gap of (after the
        drivers castline estimates were estimated)."""
        for driver in self.plan.numeric:
            if driver.missing == "refuse" and driver.column in rows.columns:
                empty = rows[driver.column].isna().to_numpy()
                if empty.any():
                    raise DataError("the cell is empty, and the model needs this driver in every row "
                                    "it forecasts", file=file, column=driver.column,
                                    row=first_row(rows, empty))

    def _empty_target(self, rows: pd.DataFrame) -> np.ndarray:
        """Return which rows have no target (all of them without a target column)."""
        target = self.document.target
        return rows[target].isna().to_numpy() if target in rows.columns else np.ones(len(rows), bool)

    def _to_forecast(self, rows: pd.DataFrame, file: str) -> pd.DataFrame:
        """Return the rows whose target is empty; stop if there is none."""
        target = self.document.target
        if target not in rows.columns:
            return rows
        if rows[target].notna().all():
            raise DataError("every row has the target filled, so there is nothing to forecast: leave "
                            "it empty in the months to forecast, as in the run's input", file=file,
                            column=target)
        return rows[rows[target].isna()]

    def _actuals(self, rows: pd.DataFrame, file: str) -> pd.DataFrame | None:
        """Return the rows whose target is filled (None without any); stop at the first the
        model's target transform cannot take."""
        target = self.document.target
        if target not in rows.columns or not rows[target].notna().any():
            return None
        try:
            self.plan.target_scale.check(rows)
        except DataError as problem:
            raise DataError(problem.message, file=file, column=problem.column, row=problem.row) from None
        return rows[rows[target].notna()]

    @contextmanager
    def _applying(self, prepared: pd.DataFrame, file: str, kind: str | None = None) -> Iterator[None]:
        """Turn what goes wrong applying the plan, or a model, to the rows into a one-line
        error: the data file's (a column missing) or the model file's (damaged)."""
        what = f"model '{kind}' cannot predict" if kind else "its feature plan cannot be applied"
        try:
            yield
        except KeyError as exc:
            column = exc.args[0] if exc.args else None
            if isinstance(column, str) and column not in prepared.columns:
                raise DataError("the file has no such column, and the model needs it", file=file,
                                column=column) from None
            raise ModelFileError(f"{self.path}: the model file is damaged: {what} "
                                 f"({type(exc).__name__}: {exc})") from None
        except SpecError as exc:   # a lag of a column nobody gives ahead reads past the origin
            raise DataError(exc.message, file=file) from None
        except ModelFileError as exc:
            raise ModelFileError(f"{self.path}: the model file is damaged: {exc}") from None
        except (AttributeError, TypeError, ValueError, IndexError) as exc:
            raise ModelFileError(f"{self.path}: the model file is damaged: {what} "
                                 f"({type(exc).__name__}: {exc})") from None

    def notes(self, table: pd.DataFrame) -> list[str]:
        """Return what ``castline forecast`` says of a forecast table's intervals: none from a
        file that predates them; the series the run never saw (their scale is the median of
        the others'); the rows at or before the run's last month of history (no interval)."""
        if self.intervals is None:
            return [PREDATES_INTERVALS]
        notes = []
        unseen = {str(series) for series in table["series"]} - set(self.intervals.series_scales)
        if unseen:
            one = len(unseen) == 1
            notes.append(f"{len(unseen)} series {'was' if one else 'were'} not in the run's history: "
                         f"{'its' if one else 'their'} intervals use the median scale of the others")
        before = table.loc[table["horizon"] < 1, ["period", "series"]].drop_duplicates()
        if len(before):
            rows = "1 row is" if len(before) == 1 else f"{len(before)} rows are"
            notes.append(f"{rows} at or before the run's last month of history "
                         f"({self.intervals.last_period}): no interval")
        return notes


def load_model(path: str | Path) -> StoredModel:
    """Return the stored model in a JSON file, after checking it is one castline wrote."""
    path = Path(path)
    try:
        raw = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ModelFileError(f"{path}: no such model file") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ModelFileError(f"{path}: not a readable JSON model file ({exc})") from None
    try:
        document = _Envelope.model_validate(raw)
    except ValidationError as exc:
        first = exc.errors()[0]
        where = ".".join(str(p) for p in first["loc"])
        raise ModelFileError(f"{path}: not a castline model file ({where}: {first['msg']})") from None
    if document.format != FORMAT or document.format_version not in READABLE_VERSIONS:
        raise ModelFileError(f"{path}: not a castline model file of version "
                             f"{' or '.join(str(v) for v in READABLE_VERSIONS)}")
    version = document.format_version
    try:
        plan = FeaturePlan.from_dict(document.plan, version)
        if plan.get_feature_names_out() != document.feature_names:
            raise ModelFileError("the feature plan does not give the features the models were fitted on")
        models = {kind: _model_from_dict(kind, entry, document.feature_names, version)
                  for kind, entry in document.models.items()}
        intervals = _intervals_from(document, version)
        steps = _steps_from(document, version)
    except ModelFileError as exc:
        raise ModelFileError(f"{path}: {exc}") from None
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise ModelFileError(f"{path}: damaged model file ({type(exc).__name__}: {exc})") from None
    return StoredModel(document, plan, models, path, intervals, steps)
