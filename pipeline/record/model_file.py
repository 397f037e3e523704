"""A fitted run saved as JSON, and loaded back to forecast new rows. Never a pickle.

The file holds the feature plan (each transformer's settings and what it
learned), every model's fitted numbers, and the versions that made it. Loading
checks the file's shape and builds only the transformer and model classes
named in an allow-list, so a model file cannot run code.
"""

from __future__ import annotations

import json
import math
from datetime import date, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from pipeline.core.catalogue import model_kind
from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.errors import DataError, ModelFileError, UserError
from pipeline.core.version import __version__
from pipeline.features import calendar, categorical, interactions, lags, numeric, series
from pipeline.features import plan as plan_module
from pipeline.features.target import TargetTransform
from pipeline.models import baselines
from pipeline.models.per_series import PerSeriesOLS
from pipeline.models.transformed import TransformedTargetModel
from pipeline.stages.check import _series_labels

FORMAT = "castline-model"
FORMAT_VERSION = 1


# ------------------------------------------------------------ tagged JSON values

def encode(value: Any, parts: list | None = None) -> Any:
    """Return a JSON-safe form of a learned value, with tags for what JSON cannot hold.

    ``parts``: objects stored elsewhere in the file, written as references to them.
    """
    if parts is not None:
        for index, part in enumerate(parts):
            if value is part:
                return {"__part__": index}
        if isinstance(value, list):
            return [encode(v, parts) for v in value]
        if isinstance(value, dict) and all(isinstance(k, str) for k in value):
            return {"__dict__": {k: encode(v, parts) for k, v in value.items()}}
    if isinstance(value, pd.Series):
        index = value.index
        return {"__series__": {"values": encode(value.to_numpy()),
                               "index": [encode(i) for i in index.tolist()],
                               "names": [str(n) if n is not None else None for n in index.names],
                               "name": str(value.name) if value.name is not None else None}}
    if isinstance(value, np.ndarray):
        return {"__array__": [encode(v) for v in value.tolist()], "dtype": str(value.dtype)}
    if isinstance(value, np.generic):
        return encode(value.item())
    if isinstance(value, float) and not math.isfinite(value):
        return {"__float__": repr(value)}
    if isinstance(value, tuple):
        return {"__tuple__": [encode(v) for v in value]}
    if isinstance(value, pd.Period):
        return {"__period__": str(value), "freq": "M"}
    if isinstance(value, (pd.Timestamp, datetime, date)):
        return {"__date__": value.isoformat()}
    if isinstance(value, dict):
        if all(isinstance(k, str) for k in value):
            return {"__dict__": {k: encode(v) for k, v in value.items()}}
        return {"__pairs__": [[encode(k), encode(v)] for k, v in value.items()]}
    if isinstance(value, list):
        return [encode(v) for v in value]
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    if isinstance(value, BaseModel):
        return {"__settings__": value.model_dump(mode="json"), "class": type(value).__name__}
    raise TypeError(f"cannot store a value of type {type(value).__name__}")


def decode(value: Any, parts: list | None = None) -> Any:
    """Return the value a tagged JSON form stands for (``parts``: the objects referred to)."""
    if isinstance(value, list):
        return [decode(v, parts) for v in value]
    if not isinstance(value, dict):
        return value
    if "__part__" in value:
        if parts is None or not isinstance(value["__part__"], int) or not 0 <= value["__part__"] < len(parts):
            raise ModelFileError("a reference to a feature that is not in the file")
        return parts[value["__part__"]]
    if "__series__" in value:
        body = value["__series__"]
        index_values = [decode(i) for i in body["index"]]
        names = body.get("names") or [None]
        index = (pd.MultiIndex.from_tuples(index_values, names=names) if len(names) > 1
                 else pd.Index(index_values, name=names[0]))
        return pd.Series(decode(body["values"]), index=index, name=body.get("name"))
    if "__array__" in value:
        dtype = value.get("dtype", "float64")
        if dtype not in ("float64", "int64", "bool", "object", "int32", "float32") and not dtype.startswith("<U"):
            raise ModelFileError(f"unexpected array type {dtype!r}")
        items = [decode(v) for v in value["__array__"]]
        return np.array(items, dtype=object if dtype == "object" or dtype.startswith("<U") else dtype)
    if "__float__" in value:
        return float(value["__float__"])
    if "__tuple__" in value:
        return tuple(decode(v) for v in value["__tuple__"])
    if "__period__" in value:
        return pd.Period(value["__period__"], freq="M")
    if "__date__" in value:
        return pd.Timestamp(value["__date__"])
    if "__dict__" in value:
        return {k: decode(v, parts) for k, v in value["__dict__"].items()}
    if "__pairs__" in value:
        return {_hashable(decode(k)): decode(v) for k, v in value["__pairs__"]}
    if "__settings__" in value:
        from pipeline import spec as spec_module
        cls = getattr(spec_module, str(value.get("class")), None)
        if not (isinstance(cls, type) and issubclass(cls, spec_module.StrictModel)
                and cls is not spec_module.StrictModel):
            raise ModelFileError(f"unknown settings class {value.get('class')!r}")
        return cls.model_validate(value["__settings__"])
    raise ModelFileError(f"unexpected value {sorted(value)!r}")


def _hashable(value):
    return tuple(value) if isinstance(value, list) else value


def _state(obj, parts: list | None = None) -> dict[str, Any]:
    return {name: encode(val, parts) for name, val in vars(obj).items() if not name.startswith("__")}


# The modules whose classes a model file's feature plan may be rebuilt from.
FEATURE_MODULES = (numeric, categorical, interactions, series, calendar, lags, plan_module)


def _allowed_classes(module) -> dict[str, type]:
    return {name: cls for name, cls in vars(module).items()
            if isinstance(cls, type) and cls.__module__ == module.__name__
            and hasattr(cls, "fit") and (hasattr(cls, "transform") or hasattr(cls, "predict"))}


def _rebuild(entry: dict, allowed: dict[str, type], parts: list | None = None, obj=None):
    name = entry.get("class")
    if name not in allowed:
        raise ModelFileError(f"class {name!r} is not one castline stores")
    if obj is None:
        obj = allowed[name].__new__(allowed[name])
    for attribute, value in entry["state"].items():
        if not attribute.isidentifier() or attribute.startswith("__") or \
                callable(getattr(allowed[name], attribute, None)) or \
                isinstance(getattr(allowed[name], attribute, None), property):
            raise ModelFileError(f"bad attribute name {attribute!r}")
        setattr(obj, attribute, decode(value, parts))
    return obj


# --------------------------------------------------------------- linear models

class StoredLinear:
    """A fitted linear model reduced to its numbers: intercept plus coefficients, and the
    target transform (with its smearing factor) that turns its predictions into means."""

    def __init__(self, intercept: float, coef: np.ndarray, names: list[str],
                 transform: TargetTransform | None = None, smearing: float = 1.0) -> None:
        self.intercept_ = float(intercept)
        self.coef_ = np.asarray(coef, float)
        self.names_ = list(names)
        self.transform = transform
        self.smearing_ = float(smearing)

    def predict(self, design) -> np.ndarray:
        # The same arithmetic as the run's own OLS prediction, so the numbers agree exactly.
        matrix = np.column_stack([np.ones(len(design.matrix)), design.matrix])
        if matrix.shape[1] != len(self.coef_) + 1:
            raise ModelFileError(f"the model has {len(self.coef_)} coefficients for "
                                 f"{matrix.shape[1] - 1} features")
        predicted = (matrix * np.concatenate([[self.intercept_], self.coef_])).sum(axis=1)
        return self.transform.to_mean(predicted, self.smearing_) if self.transform else predicted


def _unwrapped(model) -> tuple[object, dict | None]:
    """Return the model inside a target transform and the transform's entry (or None)."""
    if isinstance(model, TransformedTargetModel):
        return model.model, {"column": model.transform.column, "kind": model.transform.kind,
                             "smearing": model.smearing_}
    return model, None


def _transform_of(entry: dict) -> tuple[TargetTransform | None, float]:
    """Return a stored model's target transform (or None) and its smearing factor."""
    scale = entry.get("target_transform")
    if not scale:
        return None, 1.0
    transform = TargetTransform(str(scale["column"]), str(scale["kind"]))
    if transform.kind not in ("log", "log1p", "none"):
        raise ModelFileError(f"unknown target transform {transform.kind!r}")
    return transform, float(scale["smearing"])


def _linear_numbers(kind: str, model) -> dict:
    model, transform = _unwrapped(model)
    return {**_plain_linear_numbers(kind, model), "target_transform": transform}


def _plain_linear_numbers(kind: str, model) -> dict:
    intercept, slopes = model.linear_coefficients()
    return {"intercept": encode(float(intercept)), "coef": encode(np.asarray(slopes, float))}


def _per_series_numbers(model) -> dict:
    model, transform = _unwrapped(model)
    return {"fit_intercept": model.fit_intercept, "names": list(model.names_),
            "series": [str(s) for s in model.series_], "coef": encode(model.coef_),
            "means": encode(model.means_), "fell_back": encode(model.fell_back_),
            "overall_mean": encode(model.overall_mean_), "target_transform": transform}


class StoredPerSeries:
    """A model per series reduced to what its point forecasts need; predicts as it did."""

    def __init__(self, entry: dict) -> None:
        model = PerSeriesOLS.__new__(PerSeriesOLS)
        model.fit_intercept = bool(entry["fit_intercept"])
        model.names_ = [str(n) for n in entry["names"]]
        model.series_ = pd.Index([str(s) for s in entry["series"]], dtype=object)
        model.coef_ = np.asarray(decode(entry["coef"]), float).reshape(len(model.series_),
                                                                       len(model.names_))
        model.means_ = np.asarray(decode(entry["means"]), float)
        model.fell_back_ = np.asarray(decode(entry["fell_back"]), bool)
        model.overall_mean_ = float(decode(entry["overall_mean"]))
        if not (len(model.means_) == len(model.fell_back_) == len(model.series_)):
            raise ModelFileError("a model per series has lists of different lengths")
        self.model = model
        self.transform, self.smearing_ = _transform_of(entry)

    def predict(self, design) -> np.ndarray:
        predicted = self.model.predict(design)
        return self.transform.to_mean(predicted, self.smearing_) if self.transform else predicted


# ------------------------------------------------------------------ save, load

class _Envelope(BaseModel):
    model_config = ConfigDict(extra="forbid")

    format: str
    format_version: int
    castline_version: str
    spec_name: str
    target: str
    date_column: str
    series_columns: list[str]
    feature_names: list[str]
    plan: dict
    models: dict[str, dict]
    versions: dict[str, str] = Field(default_factory=dict)
    notes: list[str] = Field(default_factory=list)


def model_document(spec, plan, fitted: dict, versions: dict[str, str]) -> dict:
    """Return the JSON document that stores a run's fitted plan and models."""
    models = {}
    for kind, model in fitted.items():
        if isinstance(model.inner, PerSeriesOLS):
            models[kind] = {"kind": "linear_per_series", **_per_series_numbers(model)}
        elif model_kind(kind).family == "linear":
            models[kind] = {"kind": "linear", **_linear_numbers(kind, model)}
        else:
            models[kind] = {"kind": "baseline", "class": type(model).__name__, "state": _state(model)}
    # A part may refer to another (an interaction or series slopes to a driver's terms).
    parts = [{"class": type(part).__name__, "state": _state(part, plan.parts_)}
             for part in plan.parts_]
    # The plan's other lists of features refer to the same objects as parts_; a bound
    # method (how to report a spec error) is not state and is restored to the default.
    plan_state = {key: encode(val, plan.parts_) for key, val in vars(plan).items()
                  if key != "parts_" and not callable(val)}
    return {
        "format": FORMAT, "format_version": FORMAT_VERSION, "castline_version": __version__,
        "spec_name": spec.name, "target": spec.target, "date_column": spec.input.date_column,
        "series_columns": list(spec.input.series), "feature_names": plan.get_feature_names_out(),
        "plan": {"class": type(plan).__name__, "state": plan_state, "parts": parts},
        "models": models, "versions": versions,
    }


class StoredModel:
    """A run's fitted feature plan and models, loaded from JSON, ready to forecast."""

    def __init__(self, document: _Envelope, plan, models: dict, path: Path | None = None) -> None:
        self.document = document
        self.plan = plan
        self.models = models
        self.path = path

    def prepare(self, frame: pd.DataFrame, file: str = "") -> pd.DataFrame:
        """Return the rows with the month, series and row columns the plan expects."""
        doc = self.document
        missing = [c for c in [doc.date_column, *doc.series_columns] if c not in frame.columns]
        if missing:
            raise DataError("the file lacks the column(s) the model needs", file=file, column=missing[0])
        prepared = frame.copy()
        dates = pd.to_datetime(prepared[doc.date_column], errors="coerce")
        if dates.isna().any():
            row = int(np.flatnonzero(dates.isna().to_numpy())[0]) + 2
            raise DataError("not a date", file=file, column=doc.date_column, row=row)
        prepared[PERIOD] = dates.dt.to_period("M")
        prepared[SERIES] = _series_labels(prepared, doc.series_columns)
        prepared[ROW] = np.arange(len(prepared)) + 2
        return prepared

    def forecast(self, frame: pd.DataFrame, model: str | None = None, file: str = "") -> pd.DataFrame:
        """Return each stored model's prediction for every row of the frame."""
        prepared = self.prepare(frame, file)
        try:
            design = self.plan.transform(prepared)
        except KeyError as exc:
            raise DataError(f"the file lacks a driver column the model needs: {exc}", file=file) from None
        except (AttributeError, TypeError, ValueError, IndexError) as exc:
            raise ModelFileError(f"{self.path}: the model file is damaged: its feature plan cannot "
                                 f"be applied ({type(exc).__name__}: {exc})") from None
        kinds = [model] if model else list(self.models)
        out = []
        for kind in kinds:
            if kind not in self.models:
                raise UserError(f"the model file holds no model '{kind}' (it holds: "
                                f"{', '.join(self.models)})")
            try:
                values = self.models[kind].predict(design)
            except ModelFileError as exc:
                raise ModelFileError(f"{self.path}: the model file is damaged: {exc}") from None
            except (AttributeError, TypeError, ValueError, KeyError, IndexError) as exc:
                raise ModelFileError(f"{self.path}: the model file is damaged: model '{kind}' cannot "
                                     f"predict ({type(exc).__name__}: {exc})") from None
            out.append(pd.DataFrame({"period": prepared[PERIOD].astype(str).to_numpy(),
                                     "series": prepared[SERIES].to_numpy(), "model": kind,
                                     "forecast": values}))
        return pd.concat(out, ignore_index=True)


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
    if document.format != FORMAT or document.format_version != FORMAT_VERSION:
        raise ModelFileError(f"{path}: not a castline model file of version {FORMAT_VERSION}")
    try:
        transformers = {name: cls for module in FEATURE_MODULES
                        for name, cls in _allowed_classes(module).items()}
        plan_entry = document.plan
        if plan_entry.get("class") != "FeaturePlan":
            raise ModelFileError("the plan is not a feature plan")
        entries = plan_entry.get("parts", [])
        # Every part first, then their states, which may refer to one another.
        parts = [_rebuild({"class": part.get("class"), "state": {}}, transformers) for part in entries]
        for part, entry in zip(parts, entries):
            _rebuild(entry, transformers, parts, obj=part)
        plan = _rebuild({"class": plan_entry.get("class"), "state": plan_entry.get("state", {})},
                        transformers, parts)
        plan.parts_ = parts
        plan.error = plan_module.unplaced_spec_error
        models = {}
        for kind, entry in document.models.items():
            if entry.get("kind") == "linear":
                transform, smearing = _transform_of(entry)
                models[kind] = StoredLinear(decode(entry["intercept"]), decode(entry["coef"]),
                                            document.feature_names, transform, smearing)
            elif entry.get("kind") == "linear_per_series":
                models[kind] = StoredPerSeries(entry)
            elif entry.get("kind") == "baseline":
                models[kind] = _rebuild(entry, _allowed_classes(baselines))
            else:
                raise ModelFileError(f"model '{kind}' has an unknown kind")
    except ModelFileError as exc:
        raise ModelFileError(f"{path}: {exc}") from None
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise ModelFileError(f"{path}: damaged model file ({type(exc).__name__}: {exc})") from None
    return StoredModel(document, plan, models, path)
