"""The spec's typed sections: every key, its type, its default and its own checks.

Unknown keys are refused (a ``StrictModel`` forbids extras); values are immutable.
"""

from __future__ import annotations

from datetime import date
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    Field,
    field_validator,
    model_validator,
)
from pydantic_core import PydanticCustomError

from pipeline.core.catalogue import (
    BASELINE,
    MODELS,
    PER_SERIES,
    PER_SERIES_KINDS,
    SELECT_METRICS,
    SIMPLE_REFERENCES,
)
from pipeline.core.errors import SpecError
from pipeline.spec.calendar_keys import CalendarFeatures
from pipeline.spec.keys import KeyPath, SpecOrigin, format_key_path
from pipeline.spec.strict import StrictModel


def _name_as_mapping(value: Any) -> Any:
    """Let a bare column name stand for ``{column: name}``."""
    return {"column": value} if isinstance(value, str) else value


class CsvOptions(StrictModel):
    """How a CSV file is written: analysts' extracts vary."""

    delimiter: str = Field(",", min_length=1, max_length=1)
    decimal: str = Field(".", min_length=1, max_length=1)
    thousands: str | None = Field(None, min_length=1, max_length=1)
    encoding: str = "utf-8"
    missing_values: list[Annotated[str, Field(coerce_numbers_to_str=True)]] | None = Field(
        None, exclude_if=lambda v: v is None, description="the only cell texts read as missing, "
        "besides an empty cell; default: pandas' own list (NA, N/A, null, None, nan, ...)")

    @model_validator(mode="after")
    def _separators_differ(self) -> CsvOptions:
        used = [c for c in (self.delimiter, self.decimal, self.thousands) if c is not None]
        if len(set(used)) != len(used):
            raise ValueError("delimiter, decimal and thousands must be different characters")
        return self

    @field_validator("encoding")
    @classmethod
    def _known_encoding(cls, value: str) -> str:
        import codecs
        try:
            codecs.lookup(value)
        except LookupError:
            raise ValueError(f"unknown text encoding {value!r}") from None
        return value


class InputSection(StrictModel):
    """Where the data lives and how its rows are placed in time."""

    file: Path = Field(description="CSV, Parquet or Excel file, relative to the spec's folder")
    format: Literal["auto", "csv", "parquet", "excel"] = "auto"
    csv: CsvOptions = Field(default_factory=CsvOptions)
    sheet: str | int = Field(0, description="Excel: the sheet's name or its position from 0")
    date_column: str
    date_format: str | None = Field(
        None, description="how the dates are written, in strftime form (\"%d/%m/%Y\"); "
                          "without it each date is read on its own, month first where ambiguous")
    period: Literal["month", "quarter", "week"] = Field(
        "month", description="the spacing of the rows: month, quarter or ISO week (Monday to "
                             "Sunday); each given by any date within it")
    series: list[str] = Field(default_factory=list,
                              description="columns that, with the month, identify a row")
    as_of: date | None = Field(None, description="no actual may be dated after this day")
    gaps: Literal["refuse", "allow", "fill"] = Field(
        "refuse", description="months missing inside a series: refuse, allow, or fill by "
                              "interpolating between the neighbouring months")
    max_rows: int | None = Field(None, strict=True, ge=1,
                                 description="refuse a file with more rows than this")
    max_megabytes: float | None = Field(None, gt=0,
                                        description="refuse a file larger than this (1 MB = 10^6 bytes)")

    @property
    def resolved_format(self) -> str:
        """Return csv, parquet or excel, from the key or else the file's suffix."""
        if self.format != "auto":
            return self.format
        suffix = self.file.suffix.lower()
        if suffix in (".parquet", ".pq"):
            return "parquet"
        if suffix in (".xlsx", ".xlsm"):
            return "excel"
        return "csv"


ColumnType = Literal["number", "whole_number", "date", "category", "text"]


class ColumnRule(StrictModel):
    """What one input column must hold."""

    type: ColumnType
    missing_allowed: bool = False
    min: float | None = None
    max: float | None = None
    allowed: list[str] | None = Field(None, description="category: the only levels allowed")

    @field_validator("allowed")
    @classmethod
    def _levels_given(cls, value: list[str] | None) -> list[str] | None:
        if value is not None and not value:
            raise ValueError("list at least one level, or leave the key out")
        return [str(v) for v in value] if value is not None else None


def _as_text(value: Any) -> Any:
    """Let a level written as a number in YAML (``reference: 3``) stand for its text."""
    if isinstance(value, bool):
        return value
    if isinstance(value, int | float):
        return str(value)
    if isinstance(value, list):
        return [_as_text(item) for item in value]
    return value


# How the values of a driver in the months after an origin are found: given in the data
# (a plan, a price list), or estimated by castline from the training window alone.
FUTURE_RULES = ("given", "month_mean", "last_year", "last_value", "mean", "period_mean")
ESTIMATE_RULES = FUTURE_RULES[1:]
MOST_MONTHS_AHEAD = 120   # forecast.periods is at most ten years of periods: 120 months,
MOST_AHEAD = {"month": MOST_MONTHS_AHEAD, "quarter": 40, "week": 522}   # 40 quarters, 522 weeks
MOST_PERIODS_AHEAD = max(MOST_AHEAD.values())
DEFAULT_HORIZON = 12      # each origin's months ahead without validation.horizon or forecast.periods
DEFAULT_AHEAD = {"month": DEFAULT_HORIZON, "quarter": 4, "week": 52}   # a year ahead
FutureRule = Literal[FUTURE_RULES]
FUTURE_DESCRIPTION = (
    "given: the months to forecast carry the values (a plan, a price list); or estimated "
    "from the training window, in every backtest window and for the forecast alike: "
    "period_mean (the series' average for that month, quarter or week of the year; month_mean "
    "is its monthly name), last_year (the same period a year earlier), last_value (the "
    "series' last value), mean (the series' average)")


class NumericDriver(StrictModel):
    """A numeric driver, prepared in this order: fill, clip, transform, standardise, powers.

    Everything a step learns (the fill value, the clip bounds, the mean and
    standard deviation) is learned in each training window only.
    """

    column: str
    degree: int = Field(1, strict=True, ge=1, le=10, description="1 = straight line; 2 adds the square")
    transform: Literal["none", "log", "log1p"] = Field(
        "none", description="log, or log1p = log(1 + value) for drivers that can be 0")
    clip_quantiles: list[float] | None = Field(
        None, description="[low, high]: values outside these quantiles of the training window "
                          "are set to them")
    missing: Literal["refuse", "mean", "median"] = Field(
        "refuse", description="refuse rows without a value, or fill them with the training "
                              "window's mean or median and add a was-missing column")
    standardise: bool = Field(False, description="centre on the training window's mean and "
                                                 "divide by its standard deviation")
    future: FutureRule | None = Field(
        None, description=FUTURE_DESCRIPTION + "; without it, given when the months to "
                                               "forecast have values")

    @field_validator("clip_quantiles")
    @classmethod
    def _two_quantiles(cls, value: list[float] | None) -> list[float] | None:
        if value is None:
            return None
        if len(value) != 2:
            raise ValueError("give two quantiles, low then high, like [0.01, 0.99]")
        low, high = value
        if not 0 <= low < high <= 1:
            raise ValueError(f"the quantiles must satisfy 0 <= low < high <= 1 (got {low:g}, {high:g})")
        return value


class CategoricalDriver(StrictModel):
    """A categorical driver turned into numbers."""

    column: str
    encoding: Literal["one_hot", "ordinal", "target_mean"] = Field(
        "one_hot", description="one_hot: a 0/1 column per level but the reference; ordinal: the "
                               "level's place in `order`; target_mean: the level's smoothed "
                               "mean of the target")
    reference: str | None = Field(
        None, description="level left out as the baseline (one_hot) and used for unseen levels "
                          "under `unseen: use_reference`; default: the most frequent level")
    order: list[str] | None = Field(None, description="ordinal: the levels, lowest first")
    smoothing: float | None = Field(
        None, ge=0, description="target_mean: how many rows' weight the overall mean gets "
                                "(default 10)")
    group_below: int | None = Field(
        None, ge=2, description="levels with fewer training rows than this share one level")
    unseen: Literal["stop", "use_reference"] = Field(
        "stop", description="a level not in the training rows: stop, or treat it as the "
                            "reference level and warn")

    @field_validator("reference", "order", mode="before")
    @classmethod
    def _levels_as_text(cls, value: Any) -> Any:
        return _as_text(value)

    @property
    def effective_smoothing(self) -> float:
        """Return the smoothing weight, 10 rows unless the spec gives one."""
        return 10.0 if self.smoothing is None else self.smoothing


class LaggedColumn(StrictModel):
    """Earlier values of the target, a numeric driver or any other numeric column, per series."""

    column: str
    lags: list[Annotated[int, Field(ge=1)]] = Field(
        default_factory=list, description="the value this many months earlier")
    rolling_means: list[Annotated[int, Field(ge=2)]] = Field(
        default_factory=list, description="the mean over this many months, ending start_lag "
                                          "months earlier")
    differences: list[Annotated[int, Field(ge=1)]] = Field(
        default_factory=list, description="the value start_lag months earlier minus the value "
                                          "this many months before that")
    start_lag: int = Field(1, ge=1, description="how many months back the rolling means and "
                                                "differences end")
    future: FutureRule | None = Field(
        None, description="for a column that is neither the target nor a driver: "
                          + FUTURE_DESCRIPTION + "; without it, a lag may not reach past the "
                                                 "origin")


class SeriesEffects(StrictModel):
    """What models fitted over all series at once learn about each series."""

    intercepts: bool = Field(True, strict=True, description="a level of its own for each series "
                             "(with more than one series), measured against the first series")
    slopes: list[str] = Field(default_factory=list, description="numeric drivers whose effect "
                              "differs by series: a slope of its own for each series")


class ComputeSection(StrictModel):
    """Where the per-series fits run: this process, worker processes, or a Dask cluster."""

    workers: int = Field(1, strict=True, ge=1, le=256,
                         description="processes on this machine for the per-series fits")
    scheduler: str | None = Field(None, pattern=r"^(tcp|tls|inproc|ucx|ws|wss)://\S+$",
                                  description="address of a Dask scheduler, e.g. "
                                              "tcp://10.0.0.5:8786; the fits then run there")


class DriversSection(StrictModel):
    """Columns, and features of the calendar, that explain the target."""

    numeric: list[NumericDriver] = Field(default_factory=list)
    categorical: list[CategoricalDriver] = Field(default_factory=list)
    interactions: list[list[str]] = Field(default_factory=list,
                                          description="pairs of drivers whose product is a term")
    calendar: CalendarFeatures | None = None
    lags: list[LaggedColumn] = Field(default_factory=list)
    series_effects: SeriesEffects = Field(default_factory=lambda: SeriesEffects())

    @field_validator("numeric", "categorical", "lags", mode="before")
    @classmethod
    def _names_as_mappings(cls, value: Any) -> Any:
        return [_name_as_mapping(item) for item in value] if isinstance(value, list) else value


class HoldoutValidation(StrictModel):
    """Hold out the last periods of history; fit on everything before them."""

    method: Literal["holdout"]
    last_periods: int = Field(strict=True, ge=1)


class RollingOriginValidation(StrictModel):
    """Many forecast origins: at each, fit on the months up to it, predict the next ones."""

    method: Literal["rolling_origin"]
    window: Literal["expanding", "sliding"] = Field(
        "expanding", description="expanding: all months up to the origin; sliding: the last "
                                 "min_train_periods months only")
    horizon: int | None = Field(None, strict=True, ge=1, description="each origin predicts 1..horizon "
                                "months ahead; default forecast.months, else 12")
    gap: int = Field(0, strict=True, ge=0, description="months skipped between the origin and the first "
                                          "predicted month")
    min_train_periods: int | None = Field(None, strict=True, ge=2, description=(
        "months in the first training window (the window length when sliding); default 24, or "
        "half the history when it has fewer than 48 months"))
    step: int = Field(1, strict=True, ge=1, description="months between consecutive origins")
    origins: int | None = Field(None, strict=True, ge=1, description="use only the last N origins")


class KFoldValidation(StrictModel):
    """Rows without a time order: shuffled (seeded) into folds, each held out once."""

    method: Literal["kfold"]
    folds: int = Field(5, strict=True, ge=2)
    seed: int = Field(0, ge=0)


class GroupedKFoldValidation(StrictModel):
    """Like kfold, but rows sharing the values of group_by stay in one fold."""

    method: Literal["grouped_kfold"]
    folds: int = Field(5, strict=True, ge=2)
    group_by: list[str] = Field(min_length=1)


Validation = Annotated[HoldoutValidation | RollingOriginValidation | KFoldValidation | GroupedKFoldValidation, Field(discriminator="method")]
TIME_ORDERED = ("holdout", "rolling_origin")

ModelKindName = Literal[tuple(MODELS)]   # every kind in the catalogue, in its order


class ModelChoice(StrictModel):
    """One model to fit and compare; a bare name stands for its defaults."""

    kind: ModelKindName
    penalties: list[float] | None = Field(
        None, description="ridge, lasso, elastic_net: penalties to choose from by an inner, "
                          "time-ordered validation inside each training window")
    l1_share: float = Field(0.5, gt=0, lt=1, description="elastic_net: the lasso share of the penalty")
    huber_threshold: float = Field(1.35, gt=1, description="huber: residuals beyond this many "
                                                            "scale units count linearly")
    per_series: bool = Field(False, strict=True, description="ols: fit one model to each series "
                             "on its own (batched), instead of one model over all series")

    @property
    def name(self) -> str:
        """Return the model's name in every table: its kind, marked when fitted per series."""
        return f"{self.kind}{PER_SERIES}" if self.per_series else self.kind

    @model_validator(mode="after")
    def _per_series_ols_only(self) -> ModelChoice:
        if self.per_series and not MODELS[self.kind].can("per_series"):
            offered = ", ".join(PER_SERIES_KINDS)
            raise ValueError(f"per_series is available for {offered} (baselines are always per series)")
        return self

    @field_validator("penalties")
    @classmethod
    def _positive(cls, value: list[float] | None) -> list[float] | None:
        if value is not None and (not value or any(v <= 0 for v in value)):
            raise ValueError("list one or more penalties, each above 0")
        return value


class DriverChange(StrictModel):
    """One what-if change to a driver in the months to forecast."""

    column: str
    set: float | str | None = Field(None, description="replace the value")
    add: float | None = Field(None, description="add to the value")
    percent: float | None = Field(None, description="raise (or, below 0, cut) the value by this %")
    where: dict[str, str | float | list[str | float]] = Field(
        default_factory=dict, description="only rows whose columns hold these values")

    @field_validator("where", mode="before")
    @classmethod
    def _levels_as_text(cls, value: Any) -> Any:
        # Levels are compared as text: 102 written bare must match the level '102'.
        def text(item):
            if isinstance(item, bool):
                return str(item)
            if isinstance(item, float) and item.is_integer():
                return str(int(item))
            return str(item) if isinstance(item, (int, float, date)) else item
        if isinstance(value, dict):
            return {k: [text(i) for i in v] if isinstance(v, list) else text(v) for k, v in value.items()}
        return value

    @model_validator(mode="after")
    def _one_change(self) -> DriverChange:
        given = [k for k in ("set", "add", "percent") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("give exactly one of set, add or percent")
        return self


class Scenario(StrictModel):
    """A named what-if: changes to future drivers, forecast beside the base forecast."""

    name: str = Field(min_length=1, pattern=r"^[A-Za-z0-9][A-Za-z0-9 _.-]*$")
    changes: list[DriverChange] = Field(min_length=1)


class ForecastSection(StrictModel):
    """The periods to forecast, added by castline after each series' last actual."""

    periods: int | None = Field(None, strict=True, ge=1, le=MOST_PERIODS_AHEAD, description=(
        "forecast this many periods (months, quarters or weeks) after each series' last actual; "
        "castline adds the rows the file lacks (drivers given ahead must still have their values "
        "in the data)"))
    months: int | None = Field(None, strict=True, ge=1, le=MOST_PERIODS_AHEAD,
                               description="monthly data: another name for periods")

    @model_validator(mode="after")
    def _one_name(self) -> ForecastSection:
        if (self.periods is None) == (self.months is None):
            raise PydanticCustomError("forecast_periods", "give `periods` (or, for monthly data, "
                                                          "`months`), not both and not neither")
        return self

    @property
    def ahead(self) -> int:
        """Return how many periods are forecast after each series' last actual."""
        return self.periods if self.periods is not None else self.months


class OutputSection(StrictModel):
    folder: Path = Field(description="run folders are created inside it")
    ledger: Path | None = Field(
        None, description="the run ledger, an SQLite file that records every run; default "
                          "ledger.sqlite in the folder the run folders are written to")
    warn_after_runs_without_skill: int = Field(
        3, strict=True, ge=1, description="warn when the recommended model has not beaten the "
                                          "mean baseline in this many runs in a row")


class Spec(StrictModel):
    """A whole forecast spec, with every path resolved."""

    name: str = Field(min_length=1, pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")
    description: str = ""
    input: InputSection
    target: str
    drivers: DriversSection = Field(default_factory=DriversSection)
    columns: dict[str, ColumnRule] = Field(
        default_factory=dict, description="rules per input column; columns the spec uses but "
                                          "does not list here get rules from their role")
    multi_step: Literal["direct", "recursive"] = Field(
        "direct", description="when a lag of the target is shorter than the months predicted: "
                              "one fit per horizon (direct) or predictions fed back month by "
                              "month (recursive)")
    target_transform: Literal["none", "log", "log1p"] = Field(
        "none", description="fit the linear models on log(target) or log(1 + target); their "
                            "predictions are turned back with Duan's smearing correction")
    intercept: bool = Field(True, strict=True)
    validation: Validation = Field(default_factory=lambda: RollingOriginValidation(method="rolling_origin"))
    forecast: ForecastSection | None = Field(
        None, description="months to forecast; without it, the rows after the last actual "
                          "month with an empty target are the months to forecast")
    # validate_default: without a `models` key the baseline must still be put first.
    models: list[ModelChoice] = Field(default_factory=lambda: [{"kind": "ols"}], validate_default=True)
    select_by: Literal[SELECT_METRICS] = Field(
        "mae", description="the metric that picks the recommended model")
    significance_level: float = Field(0.05, gt=0, lt=0.5, description="a model beats the mean "
                                      "baseline when the one-sided test's p is below this")
    standard_errors: Literal["classical", "hc3", "hac"] = Field(
        "classical", description="OLS coefficient table: classical, robust to non-constant "
                                 "variance (hc3), or robust to autocorrelation too (hac)")
    autocorrelation_lags: int | None = Field(
        None, strict=True, ge=1, description="hac: lags to include; default floor(4·(n/100)^(2/9))")
    scenarios: list[Scenario] = Field(default_factory=list)
    compute: ComputeSection = Field(default_factory=lambda: ComputeSection())
    output: OutputSection

    # Where the spec was read from (set by the loader, carried by model_copy). It is not a key:
    # the file cannot set it, and it is left out of model_dump, the run's spec.yaml and its hash.
    origin: SpecOrigin | None = Field(None, exclude=True, repr=False)

    @field_validator("origin", mode="plain")
    @classmethod
    def _origin_is_not_a_key(cls, value: Any) -> SpecOrigin:
        if isinstance(value, SpecOrigin):
            return value
        raise PydanticCustomError("extra_forbidden", "Extra inputs are not permitted")

    def error(self, key: KeyPath, message: str) -> SpecError:
        """Return a SpecError placed at a key of the spec file this spec was read from."""
        origin = self.origin
        return SpecError(message, file=str(origin.path) if origin else None,
                         line=origin.line(key) if origin else None, key=format_key_path(key))

    @property
    def source(self) -> Path | None:
        """Return the spec file this spec was read from, if any."""
        return self.origin.path if self.origin else None

    @field_validator("name", mode="before")
    @classmethod
    def _plain_name(cls, value: Any) -> Any:
        # The name is written into files and the ledger: it may never read as a path.
        if isinstance(value, str) and ("/" in value or "\\" in value or ".." in value):
            raise ValueError("a name, not a path: '/', '\\' and '..' are refused")
        return value

    @model_validator(mode="after")
    def _default_horizon(self) -> Spec:
        # A rolling origin without a horizon predicts as far as the forecast does.
        validation = self.validation
        if validation.method == "rolling_origin" and validation.horizon is None:
            horizon = self.forecast.ahead if self.forecast else DEFAULT_AHEAD[self.input.period]
            object.__setattr__(self, "validation", validation.model_copy(update={"horizon": horizon}))
        return self

    @model_validator(mode="before")
    @classmethod
    def _simple_rules_beside(cls, data: Any) -> Any:
        # A model must beat the best simple rule a planner could use, not only the plain
        # average: under a time-ordered validation the simple rules are always compared,
        # whatever ``models`` lists (they cost next to nothing).
        if not isinstance(data, dict):
            return data
        if "models" not in data:   # the default: OLS
            data = {**data, "models": [{"kind": "ols"}]}
        if not isinstance(data.get("models"), list):
            return data
        validation = data.get("validation")
        method = validation.get("method") if isinstance(validation, dict) else \
            getattr(validation, "method", None) if "validation" in data else "rolling_origin"
        if method not in TIME_ORDERED:
            return data
        listed = {item if isinstance(item, str) else
                  item.get("kind") if isinstance(item, dict) else getattr(item, "kind", None)
                  for item in data["models"]}
        missing = [kind for kind in SIMPLE_REFERENCES if kind not in listed]
        return {**data, "models": [*data["models"], *missing]} if missing else data

    @field_validator("models", mode="before")
    @classmethod
    def _names_as_choices(cls, value: Any) -> Any:
        if isinstance(value, list):
            return [{"kind": item} if isinstance(item, str) else item for item in value]
        return value

    @field_validator("models")
    @classmethod
    def _baseline_always_first(cls, models: list[ModelChoice]) -> list[ModelChoice]:
        kinds = [m.name for m in models]
        if len(set(kinds)) != len(kinds):
            repeated = next(k for k in kinds if kinds.count(k) > 1)
            raise ValueError(f"model '{repeated}' is listed twice")
        return [ModelChoice(kind=BASELINE)] + [m for m in models if m.kind != BASELINE]

    @property
    def model_kinds(self) -> list[str]:
        """Return the kinds of every model fitted, the mean of the training months first."""
        return [m.kind for m in self.models]

    @property
    def model_names(self) -> list[str]:
        """Return the names of every model fitted (``ols``, ``ols_per_series``), baseline first."""
        return [m.name for m in self.models]

    def model(self, name: str) -> ModelChoice:
        """Return the choice of the given name."""
        return next(m for m in self.models if m.name == name)

    @property
    def driver_columns(self) -> list[str]:
        """Return every driver column, numeric first, in spec order."""
        return [d.column for d in self.drivers.numeric] + [d.column for d in self.drivers.categorical]

    @property
    def filled_driver_columns(self) -> set[str]:
        """Return the numeric drivers whose missing values are filled rather than refused."""
        return {d.column for d in self.drivers.numeric if d.missing != "refuse"}

    @property
    def estimated_columns(self) -> dict[str, str]:
        """Return the columns castline estimates in the months after an origin, with their rule:
        numeric drivers, and lagged columns that are neither the target nor a driver."""
        rules = {d.column: d.future for d in self.drivers.numeric if d.future in ESTIMATE_RULES}
        drivers = set(self.driver_columns)
        rules.update({lagged.column: lagged.future for lagged in self.drivers.lags
                      if lagged.future in ESTIMATE_RULES and lagged.column != self.target
                      and lagged.column not in drivers})
        return rules

    @property
    def lagged_only_columns(self) -> list[str]:
        """Return the lagged columns that are neither the target nor a driver."""
        drivers = set(self.driver_columns)
        return [lagged.column for lagged in self.drivers.lags
                if lagged.column != self.target and lagged.column not in drivers]

    @property
    def has_features(self) -> bool:
        """Return whether the spec asks for any term besides the intercept."""
        calendar = self.drivers.calendar
        return bool(self.driver_columns or self.drivers.lags or (calendar and calendar.any_terms))
