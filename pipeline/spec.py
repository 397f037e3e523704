"""The forecast spec: its typed model and the loader that reads it from YAML.

Only this module reads the YAML. Every key is checked: unknown keys are refused
with the nearest valid key suggested, and each problem is reported as
``FILE:LINE: key.path: what is wrong``. Relative paths resolve against the
folder of the spec file.
"""

from __future__ import annotations

import difflib
import types
import typing
from datetime import date
from pathlib import Path
from typing import Annotated, Any, Literal, Union

import yaml
from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    PrivateAttr,
    ValidationError,
    field_validator,
    model_validator,
)

from pipeline.core.errors import SpecError

KeyPath = tuple[str | int, ...]
BASELINE = "mean_baseline"


class StrictModel(BaseModel):
    """A spec section: unknown keys are refused, values are immutable."""

    model_config = ConfigDict(extra="forbid", frozen=True)


def _name_as_mapping(value: Any) -> Any:
    """Let a bare column name stand for ``{column: name}``."""
    if isinstance(value, str):
        return {"column": value}
    return value


class CsvOptions(StrictModel):
    """How a CSV file is written: analysts' extracts vary."""

    delimiter: str = Field(",", min_length=1, max_length=1)
    decimal: str = Field(".", min_length=1, max_length=1)
    thousands: str | None = Field(None, min_length=1, max_length=1)
    encoding: str = "utf-8"

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
    period: Literal["month"] = "month"
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


class NumericDriver(StrictModel):
    """A numeric driver, prepared in this order: fill, clip, transform, standardise, powers.

    Everything a step learns (the fill value, the clip bounds, the mean and
    standard deviation) is learned in each training window only.
    """

    column: str
    degree: int = Field(1, strict=True, ge=1, le=6, description="1 = straight line; 2 adds the square")
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


class CalendarFeatures(StrictModel):
    """Features of the month itself, for periodic data."""

    trend: bool = Field(False, description="months since the first month of the training window")
    month_of_year: Literal["none", "dummies", "fourier"] = Field(
        "none", description="dummies: a 0/1 column per month but January; fourier: sine and "
                            "cosine pairs")
    harmonics: int | None = Field(None, ge=1, le=6,
                                  description="fourier: how many sine/cosine pairs (default 2)")
    quarter: bool = Field(False, description="a 0/1 column per quarter but the first")
    working_days: bool = Field(False, description="weekdays in the month, less the closures")
    closures: list[date] = Field(default_factory=list,
                                 description="working_days: dates on which no one works")

    @property
    def effective_harmonics(self) -> int:
        """Return the number of Fourier pairs, 2 unless the spec gives one."""
        return 2 if self.harmonics is None else self.harmonics


class LaggedColumn(StrictModel):
    """Earlier values of the target or of a numeric driver, per series."""

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
        if isinstance(value, list):
            return [_name_as_mapping(item) for item in value]
        return value


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
    horizon: int = Field(strict=True, ge=1, description="each origin predicts 1..horizon months ahead")
    gap: int = Field(0, strict=True, ge=0, description="months skipped between the origin and the first "
                                          "predicted month")
    min_train_periods: int = Field(strict=True, ge=2, description="months in the first training window "
                                                     "(the window length when sliding)")
    step: int = Field(1, strict=True, ge=1, description="months between consecutive origins")
    origins: int | None = Field(None, strict=True, ge=1, description="use only the last N origins")


class KFoldValidation(StrictModel):
    """Rows without a time order: shuffled (seeded) into folds, each held out once."""

    method: Literal["kfold"]
    folds: int = Field(5, strict=True, ge=2)
    seed: int = 0


class GroupedKFoldValidation(StrictModel):
    """Like kfold, but rows sharing the values of group_by stay in one fold."""

    method: Literal["grouped_kfold"]
    folds: int = Field(5, strict=True, ge=2)
    group_by: list[str] = Field(min_length=1)


Validation = Annotated[HoldoutValidation | RollingOriginValidation | KFoldValidation | GroupedKFoldValidation, Field(discriminator="method")]
TIME_ORDERED = ("holdout", "rolling_origin")

BASELINE_KINDS = ("mean_baseline", "last_value", "seasonal_naive", "drift")
LINEAR_KINDS = ("ols", "ridge", "lasso", "elastic_net", "huber")
ModelKind = Literal["mean_baseline", "last_value", "seasonal_naive", "drift",
                    "ols", "ridge", "lasso", "elastic_net", "huber"]
SELECT_METRICS = ("mae", "rmse", "mape", "smape", "wape", "mase")


class ModelChoice(StrictModel):
    """One model to fit and compare; a bare name stands for its defaults."""

    kind: ModelKind
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
        return f"{self.kind}_per_series" if self.per_series else self.kind

    @model_validator(mode="after")
    def _per_series_ols_only(self) -> ModelChoice:
        if self.per_series and self.kind != "ols":
            raise ValueError("per_series is available for ols (baselines are always per series)")
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
            return str(item) if isinstance(item, (int, float)) else item
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
    validation: Validation
    # validate_default: without a `models` key the baseline must still be put first.
    models: list[ModelChoice] = Field(default_factory=lambda: [{"kind": "ols"}], validate_default=True)
    select_by: Literal["mae", "rmse", "mape", "smape", "wape", "mase"] = Field(
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

    _source: Path | None = PrivateAttr(None)
    _lines: dict = PrivateAttr(default_factory=dict)
    _written_models: list = PrivateAttr(default_factory=list)   # kinds in the file's order

    def error(self, key: KeyPath, message: str) -> SpecError:
        """Return a SpecError placed at a key of the spec file this spec was read from."""
        line = _line_for(self._lines, key) if self._lines else None
        return SpecError(message, file=str(self._source) if self._source else None, line=line,
                         key=format_key_path(key))

    @property
    def source(self) -> Path | None:
        """Return the spec file this spec was read from, if any."""
        return self._source

    @field_validator("name", mode="before")
    @classmethod
    def _plain_name(cls, value: Any) -> Any:
        # The name is written into files and the ledger: it may never read as a path.
        if isinstance(value, str) and ("/" in value or "\\" in value or ".." in value):
            raise ValueError("a name, not a path: '/', '\\' and '..' are refused")
        return value

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
        """Return the kinds of every model fitted, the mean baseline first."""
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
    def has_features(self) -> bool:
        """Return whether the spec asks for any term besides the intercept."""
        calendar = self.drivers.calendar
        return bool(self.driver_columns or self.drivers.lags or (calendar and (
            calendar.trend or calendar.month_of_year != "none" or calendar.quarter
            or calendar.working_days)))



# ---------------------------------------------------------------- the loader

def format_key_path(path: KeyPath) -> str:
    """Return ``a.b[2].c`` for the path ``("a", "b", 2, "c")``."""
    text = ""
    for part in path:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            text += f".{part}" if text else str(part)
    return text


def _line_map(node: yaml.Node, path: KeyPath = (), lines: dict | None = None) -> dict[KeyPath, int]:
    """Return the 1-based line of every key path in a composed YAML tree."""
    if lines is None:
        lines = {}
    lines.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        for key_node, value_node in node.value:
            child = path + (str(key_node.value),)
            if key_node.tag != "tag:yaml.org,2002:str":
                raise _DuplicateKey(child, key_node.start_mark.line + 1,
                                    f"key {key_node.value!r} must be a name, not a number or other value")
            if child in lines:
                raise _DuplicateKey(child, key_node.start_mark.line + 1)
            lines[child] = key_node.start_mark.line + 1
            _line_map(value_node, child, lines)
    elif isinstance(node, yaml.SequenceNode):
        for index, item in enumerate(node.value):
            lines[path + (index,)] = item.start_mark.line + 1
            _line_map(item, path + (index,), lines)
    return lines


class _DuplicateKey(Exception):
    def __init__(self, path: KeyPath, line: int, message: str = "this key is given twice") -> None:
        self.path, self.line, self.message = path, line, message


def _line_for(lines: dict[KeyPath, int], path: KeyPath) -> int | None:
    """Return the line of the path, or of its nearest ancestor written in the file."""
    for length in range(len(path), -1, -1):
        if path[:length] in lines:
            return lines[path[:length]]
    return None


def _union_member(current: Any, tag: Any) -> type[BaseModel] | None:
    """Return the member of a tagged union of sections that the tag (a method name) picks."""
    if not isinstance(tag, str):
        return None
    while typing.get_origin(current) is Annotated:
        current = typing.get_args(current)[0]
    if typing.get_origin(current) not in (Union, types.UnionType):
        return None
    for member in typing.get_args(current):
        field = getattr(member, "model_fields", {}).get("method")
        if field is not None and tag in typing.get_args(field.annotation):
            return member
    return None


def _walk(loc: KeyPath) -> tuple[KeyPath, Any]:
    """Follow an error location through the spec's sections.

    Return the location without the union tags pydantic inserts
    (validation.holdout.x becomes validation.x) and the type found at its end
    (None where the path leaves the spec's sections).
    """
    kept: list = []
    current: Any = Spec
    for part in loc:
        member = _union_member(current, part)
        if member is not None:
            current = member
            continue
        kept.append(part)
        if isinstance(part, int):
            args = typing.get_args(current)
            current = args[0] if args else None
        elif typing.get_origin(current) is dict:   # a mapping of names (columns) to sections
            current = typing.get_args(current)[1]
        elif isinstance(current, type) and issubclass(current, BaseModel) and part in current.model_fields:
            current = current.model_fields[part].annotation
            # Unwrap Annotated, Optional and single-member unions down to the class.
            while typing.get_origin(current) in (Annotated, Union, types.UnionType):
                members = [a for a in typing.get_args(current) if a is not type(None)]
                if typing.get_origin(current) is Annotated:
                    members = members[:1]
                if len(members) != 1:
                    break
                current = members[0]
        else:
            current = None
    return tuple(kept), current


def _without_tags(loc: KeyPath) -> KeyPath:
    """Return an error location without the union tags pydantic inserts."""
    return _walk(loc)[0]


def _section_class(path: KeyPath) -> type[BaseModel] | None:
    """Return the spec section class found at the key path, if the path leads to one."""
    current = _walk(path)[1]
    return current if isinstance(current, type) and issubclass(current, BaseModel) else None


def _describe(error: dict[str, Any]) -> str:
    """Turn one pydantic error into plain words, with a suggestion for unknown keys."""
    kind = error["type"]
    loc: KeyPath = tuple(p for p in error["loc"])
    if kind == "extra_forbidden":
        section = _section_class(loc[:-1])
        valid = sorted(section.model_fields) if section else []
        close = difflib.get_close_matches(str(loc[-1]), valid, n=1, cutoff=0.5)
        hint = f"; did you mean '{close[0]}'?" if close else (
            f"; valid keys here: {', '.join(valid)}" if valid else "")
        return f"unknown key{hint}"
    if kind == "missing":
        return "this key is required but missing"
    if kind == "literal_error":
        return f"{error['msg'].replace('Input should be', 'must be')} (got {error['input']!r})"
    if kind == "union_tag_invalid":
        ctx = error.get("ctx", {})
        return f"unknown method {ctx.get('tag')!r}; expected one of {ctx.get('expected_tags')}"
    if kind == "union_tag_not_found":
        return "the key 'method' is required here"
    message = error["msg"]
    if message.startswith("Value error, "):
        message = message[len("Value error, "):]
    message = message.replace("Input should be", "must be")
    if kind == "string_pattern_mismatch" and "://" in str(error.get("ctx", {}).get("pattern", "")):
        return (f"{error['input']!r} is not a Dask scheduler address: give protocol://host:port, "
                "e.g. tcp://10.0.0.5:8786 (protocols: tcp, tls, inproc, ucx, ws, wss)")
    if kind == "string_pattern_mismatch":
        return (f"{error['input']!r} is not a plain name: use letters, digits, '-', '_' and '.', "
                "starting with a letter or digit")
    if kind.endswith("_type") or kind.endswith("_parsing"):
        message += f" (got {error['input']!r})"
    return message


def _read_yaml(path: Path) -> tuple[Any, dict[KeyPath, int]]:
    """Return the spec file's data and the line of every key, with a safe loader."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise SpecError("no such spec file", file=str(path)) from None
    except IsADirectoryError:
        raise SpecError("is a folder, not a spec file", file=str(path)) from None
    except UnicodeDecodeError:
        raise SpecError("the spec is not UTF-8 text", file=str(path)) from None
    except OSError as exc:
        raise SpecError(f"cannot read the spec: {exc.strerror}", file=str(path)) from None
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
        data = yaml.load(text, Loader=yaml.SafeLoader)  # noqa: S506 - SafeLoader constructs no objects
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = min(mark.line + 1, max(1, len(text.splitlines()))) if mark else None
        what = exc.problem or exc.context or "malformed YAML"
        if "\\t" in str(what) or "\t" in str(what):
            what = "a tab character: YAML indents with spaces only"
        elif exc.context and "flow" in str(exc.context):
            what = f"{what} ({exc.context}); a bracket or brace is not closed"
        if "tag" in str(what) or "constructor" in type(exc).__name__.lower():
            what = f"YAML tags that build objects are not allowed ({what})"
        raise SpecError(f"{what}", file=str(path), line=line) from None
    except yaml.YAMLError as exc:
        raise SpecError(f"malformed YAML: {exc}", file=str(path)) from None
    if node is None or data is None:
        raise SpecError("the spec file is empty", file=str(path), line=1)
    if not isinstance(data, dict):
        raise SpecError("the spec must be a mapping of keys to values", file=str(path), line=1)
    try:
        return data, _line_map(node)
    except _DuplicateKey as dup:
        raise SpecError(dup.message, file=str(path), line=dup.line,
                        key=format_key_path(dup.path)) from None


def _resolve(raw: Path, base: Path) -> Path:
    expanded = raw.expanduser()
    return (expanded if expanded.is_absolute() else base / expanded).resolve()


def load_spec(path: str | Path) -> Spec:
    """Return the typed spec read from a YAML file, with every path resolved.

    Raises SpecError naming the file, line and key of the first problem.
    """
    spec_path = Path(path)
    data, lines = _read_yaml(spec_path)
    shown = str(spec_path)
    try:
        spec = Spec.model_validate(data)
    except ValidationError as exc:
        # An unknown key is usually why a required one is missing: report it first.
        errors = sorted(exc.errors(), key=lambda e: (e["type"] != "extra_forbidden",
                                                     _line_for(lines, _without_tags(tuple(e["loc"]))) or 0))
        first = errors[0]
        loc = _without_tags(tuple(first["loc"]))
        if first["type"] == "union_tag_invalid":
            loc += ("method",)
        elif first["type"] != "missing" and loc not in lines and loc[:-1] in lines and len(loc) > 1:
            loc = loc[:-1]  # a bare name standing for a mapping (models: [ols] is {kind: ols})
        raise SpecError(_describe(first), file=shown, line=_line_for(lines, loc),
                        key=format_key_path(loc) or None) from None

    spec._source = spec_path
    written = data.get("models") if isinstance(data.get("models"), list) else []
    spec._written_models = [m.get("kind") if isinstance(m, dict) else m for m in written]
    spec._lines = lines
    fail = spec.error
    _check_roles(spec, fail)
    base = spec_path.resolve().parent
    data_file = _resolve(spec.input.file, base)
    if not data_file.exists():
        raise fail(("input", "file"), f"no such data file: {data_file}")
    if data_file.is_dir():
        raise fail(("input", "file"), f"is a folder, not a data file: {data_file}")
    output_folder = _resolve(spec.output.folder, base)
    if output_folder.exists() and not output_folder.is_dir():
        raise fail(("output", "folder"), f"exists and is not a folder: {output_folder}")
    ledger_file = _resolve(spec.output.ledger, base) if spec.output.ledger else None
    if ledger_file is not None and ledger_file.is_dir():
        raise fail(("output", "ledger"), f"is a folder, not a ledger file: {ledger_file}")
    resolved = spec.model_copy(update={
        "input": spec.input.model_copy(update={"file": data_file}),
        "output": spec.output.model_copy(update={"folder": output_folder, "ledger": ledger_file}),
    })
    resolved._source = spec_path
    resolved._lines = lines
    return resolved


def _check_roles(spec: Spec, fail) -> None:
    """Refuse a column given two roles (target, date, series, driver) or listed twice."""
    seen: dict[str, str] = {spec.target: "the target", spec.input.date_column: "the date column"}
    for index, column in enumerate(spec.input.series):
        if column in seen:
            raise fail(("input", "series", index), f"column '{column}' is already {seen[column]}")
        seen[column] = "a series column"
    series = set(spec.input.series)
    for group in ("numeric", "categorical"):
        for index, driver in enumerate(getattr(spec.drivers, group)):
            key = ("drivers", group, index, "column")
            column = driver.column
            if column in seen and not (group == "categorical" and column in series
                                       and seen[column] == "a series column"):
                raise fail(key, f"column '{column}' is already {seen[column]}")
            seen[column] = "a driver"
    if not spec.intercept and not spec.has_features:
        raise fail(("intercept",), "a model without an intercept needs at least one driver")
    _check_column_rules(spec, fail)
    _check_models(spec, fail)
    _check_scenarios(spec, fail)
    _check_features(spec, fail)


def _check_scenarios(spec: Spec, fail) -> None:
    """Refuse scenarios that change a column no model uses, or repeat a name."""
    names: set[str] = set()
    usable = set(spec.driver_columns)
    numeric = {d.column for d in spec.drivers.numeric}
    for index, scenario in enumerate(spec.scenarios):
        if scenario.name in names:
            raise fail(("scenarios", index, "name"), f"scenario '{scenario.name}' is named twice")
        names.add(scenario.name)
        for number, change in enumerate(scenario.changes):
            key = ("scenarios", index, "changes", number)
            if change.column not in usable:
                raise fail(key + ("column",), f"'{change.column}' is not a driver, so changing it "
                           "changes no forecast")
            if change.column not in numeric and change.set is None:
                raise fail(key + ("column",), f"'{change.column}' is categorical: use set, not "
                           "add or percent")
            for column in change.where:
                if column not in column_roles(spec):
                    raise fail(key + ("where", column), f"'{column}' is not a column the spec uses")


def _check_models(spec: Spec, fail) -> None:
    """Refuse models and metrics that need a time order under a scheme without one."""
    if spec.validation.method in TIME_ORDERED:
        return
    written = spec._written_models or [m.kind for m in spec.models[1:]]
    for choice in spec.models[1:]:
        if choice.kind in ("last_value", "seasonal_naive", "drift"):
            index = written.index(choice.kind) if choice.kind in written else 0
            raise fail(("models", index), f"'{choice.kind}' needs months in time order; "
                       f"validation method '{spec.validation.method}' has none")
    if spec.select_by == "mase":
        raise fail(("select_by",), "MASE needs months in time order; choose another metric "
                   f"for validation method '{spec.validation.method}'")


_TYPES_FOR_ROLE = {
    "the target": ("number", "whole_number"),
    "the date column": ("date",),
    "a numeric driver": ("number", "whole_number"),
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
    if spec.validation.method == "grouped_kfold":
        roles.update({c: "a grouping column" for c in spec.validation.group_by if c not in roles})
    return roles


def _check_column_rules(spec: Spec, fail) -> None:
    """Refuse column rules that contradict themselves or the column's role."""
    roles = column_roles(spec)
    for column, rule in spec.columns.items():
        key = ("columns", column)
        if rule.min is not None and rule.max is not None and rule.min > rule.max:
            raise fail(key + ("min",), f"min {rule.min:g} is above max {rule.max:g}")
        if (rule.min is not None or rule.max is not None) and rule.type not in ("number", "whole_number"):
            bound = "min" if rule.min is not None else "max"
            raise fail(key + (bound,), f"min and max apply to numbers, not to type '{rule.type}'")
        if rule.allowed is not None and rule.type != "category":
            raise fail(key + ("allowed",), f"allowed levels apply to type 'category', not '{rule.type}'")
        role = roles.get(column)
        if role and rule.type not in _TYPES_FOR_ROLE[role]:
            wanted = " or ".join(_TYPES_FOR_ROLE[role])
            raise fail(key + ("type",), f"'{column}' is {role}, so its type must be {wanted}")
        if rule.missing_allowed and role in ("the date column", "a series column"):
            raise fail(key + ("missing_allowed",), f"'{column}' is {role} and may not be missing")
        if (rule.missing_allowed and role in ("a numeric driver", "a categorical driver")
                and column not in spec.filled_driver_columns):
            fill = " (or set missing: mean or median on the driver to fill it)" \
                if role == "a numeric driver" else ""
            raise fail(key + ("missing_allowed",), f"'{column}' is {role}: the models need a "
                       f"value in every row, so it may not be missing{fill}")


def _check_features(spec: Spec, fail) -> None:
    """Refuse feature keys that contradict each other (each problem placed at its key)."""
    for index, driver in enumerate(spec.drivers.categorical):
        key = ("drivers", "categorical", index)
        if driver.encoding == "ordinal":
            if driver.order is None:
                raise fail(key + ("encoding",), "ordinal encoding needs `order`: the levels, "
                                                "lowest first")
            if len(set(driver.order)) != len(driver.order):
                raise fail(key + ("order",), "a level is listed twice")
            if driver.reference is not None and driver.reference not in driver.order:
                raise fail(key + ("reference",), f"'{driver.reference}' is not one of the "
                                                 f"levels in `order`")
            if driver.group_below is not None:
                raise fail(key + ("group_below",), "grouping rare levels would break the order "
                                                   "of an ordinal driver")
        elif driver.order is not None:
            raise fail(key + ("order",), "`order` applies to encoding: ordinal")
        if driver.smoothing is not None and driver.encoding != "target_mean":
            raise fail(key + ("smoothing",), "`smoothing` applies to encoding: target_mean")
    numeric = [d.column for d in spec.drivers.numeric]
    drivers = set(spec.driver_columns)
    pairs: set[frozenset[str]] = set()
    for index, pair in enumerate(spec.drivers.interactions):
        key = ("drivers", "interactions", index)
        if len(pair) != 2:
            raise fail(key, f"an interaction is a pair of drivers, like [{', '.join(numeric[:2]) or 'a, b'}]")
        for place, column in enumerate(pair):
            if column not in drivers:
                listed = ", ".join(spec.driver_columns) or "none"
                raise fail(key + (place,), f"'{column}' is not a driver (drivers: {listed})")
        if pair[0] == pair[1]:
            raise fail(key, "an interaction needs two different drivers (for a square, use degree: 2)")
        if frozenset(pair) in pairs:
            raise fail(key, "this pair is listed twice")
        pairs.add(frozenset(pair))
    calendar = spec.drivers.calendar
    if calendar is not None:
        key = ("drivers", "calendar")
        if calendar.harmonics is not None and calendar.month_of_year != "fourier":
            raise fail(key + ("harmonics",), "`harmonics` applies to month_of_year: fourier")
        if calendar.closures and not calendar.working_days:
            raise fail(key + ("closures",), "`closures` applies to working_days: true")
        if calendar.quarter and calendar.month_of_year == "dummies":
            raise fail(key + ("quarter",), "quarter dummies are sums of month dummies; use one or "
                                           "the other")
    for index, column in enumerate(spec.drivers.series_effects.slopes):
        key = ("drivers", "series_effects", "slopes", index)
        if not spec.input.series:
            raise fail(key, "series slopes need series: name the series columns in input.series")
        if column not in numeric:
            raise fail(key, f"'{column}' is not a numeric driver (numeric drivers: "
                            f"{', '.join(numeric) or 'none'})")
        if spec.drivers.series_effects.slopes.index(column) != index:
            raise fail(key, f"'{column}' is listed twice")
    seen: set[str] = set()
    for index, lagged in enumerate(spec.drivers.lags):
        key = ("drivers", "lags", index)
        if lagged.column != spec.target and lagged.column not in numeric:
            raise fail(key + ("column",), f"'{lagged.column}' is neither the target nor a numeric "
                                          "driver; lags are taken of those")
        if lagged.column in seen:
            raise fail(key + ("column",), f"'{lagged.column}' already has an entry in drivers.lags")
        seen.add(lagged.column)
        if not (lagged.lags or lagged.rolling_means or lagged.differences):
            raise fail(key, "give at least one of lags, rolling_means or differences")
        for name in ("lags", "rolling_means", "differences"):
            values = getattr(lagged, name)
            if len(set(values)) != len(values):
                raise fail(key + (name,), "a value is listed twice")
