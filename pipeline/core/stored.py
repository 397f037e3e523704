"""The stored form of a fitted part: plain JSON, one named field at a time.

Every part a model file holds (each feature transformer and the feature plan,
the baselines, the target transform, the numbers of a model per series) writes
its settings and what it learned with ``to_dict()``, naming each field, and is
rebuilt by the classmethod ``from_dict(data)`` from exactly those fields. The
fields are those of ``FORMAT_VERSION``, the model file's ``format_version``: a
change of any part's fields raises it, and that part's ``from_dict`` then reads
the older fields too (it is handed the file's version).

``encode`` and ``decode`` turn what JSON cannot hold (arrays, Series, months,
dates, tuples, non-finite floats, dicts with other than text keys, references
to another part of the same plan) into tagged objects and back. ``StoredFields``
reads a part's fields back, checking each one's type: a field missing, of the
wrong type, or not expected stops with a one-line ``ModelFileError``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from datetime import date, datetime
from typing import Any

import numpy as np
import pandas as pd

from pipeline.core.cadence import cadence_of_freq
from pipeline.core.errors import ModelFileError

FORMAT_VERSION = 4                # the version of the fields every to_dict writes
READABLE_VERSIONS = (1, 2, 3, 4)  # the versions from_dict can read (2 added FeaturePlan.future_,
                                  # 3 the model file's empirical intervals, 4 its multi-step
                                  # strategy and the direct strategy's fits)

ARRAY_TYPES = ("float64", "int64", "bool", "object", "int32", "float32")


# ------------------------------------------------------------ tagged JSON values

def encode(value: Any, parts: Sequence | None = None) -> Any:
    """Return a JSON-safe form of a value, with tags for what JSON cannot hold.

    ``parts``: the parts of the plan being stored; one of them is written as a
    reference to its place in that list.
    """
    if parts is not None:
        referred = _encode_referring(value, parts)
        if referred is not None:
            return referred
    if isinstance(value, (pd.Series, np.ndarray, np.generic, pd.Period, pd.Timestamp, datetime, date)):
        return _encode_typed(value)
    if isinstance(value, float) and not math.isfinite(value):
        return {"__float__": repr(value)}
    if isinstance(value, tuple):
        return {"__tuple__": [encode(v) for v in value]}
    if isinstance(value, dict):
        if all(isinstance(k, str) for k in value):
            return {"__dict__": {k: encode(v) for k, v in value.items()}}
        return {"__pairs__": [[encode(k), encode(v)] for k, v in value.items()]}
    if isinstance(value, list):
        return [encode(v) for v in value]
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    raise TypeError(f"cannot store a value of type {type(value).__name__}")


def _encode_referring(value: Any, parts: Sequence) -> Any:
    """Return a value that is, or holds, one of the parts, encoded with references; else None."""
    for index, part in enumerate(parts):
        if value is part:
            return {"__part__": index}
    if isinstance(value, list):
        return [encode(v, parts) for v in value]
    if isinstance(value, dict) and all(isinstance(k, str) for k in value):
        return {"__dict__": {k: encode(v, parts) for k, v in value.items()}}
    return None


def _encode_typed(value: Any) -> Any:
    """Return the tagged form of a pandas or numpy value, a month or a date."""
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
    if isinstance(value, pd.Period):
        cadence = cadence_of_freq(value)
        return {"__period__": cadence.label(value), "freq": cadence.freq}
    return {"__date__": value.isoformat()}


def encode_fields(fields: dict[str, Any], parts: Sequence | None = None) -> dict[str, Any]:
    """Return a part's named fields with each value encoded (``parts``: as for ``encode``)."""
    return {name: encode(value, parts) for name, value in fields.items()}


def encode_settings(settings) -> dict[str, Any]:
    """Return a spec section (a pydantic model) as stored: its values and its class's name.

    Keys a section lists in ``STORED_ONLY_WHEN_GIVEN`` are left out at their defaults, so a
    file written without them reads and writes as before they were added."""
    values = settings.model_dump(mode="json")
    for key in getattr(type(settings), "STORED_ONLY_WHEN_GIVEN", ()):
        if values.get(key) in (None, [], {}):
            values.pop(key, None)
    return {"__settings__": values, "class": type(settings).__name__}


def decode(value: Any, parts: Sequence | None = None) -> Any:
    """Return the value a tagged JSON form stands for (``parts``: the parts referred to)."""
    if isinstance(value, list):
        return [decode(v, parts) for v in value]
    if not isinstance(value, dict):
        return value
    if "__part__" in value:
        at = value["__part__"]
        if parts is None or not isinstance(at, int) or isinstance(at, bool) or not 0 <= at < len(parts):
            raise ModelFileError("a reference to a feature that is not in the file")
        return parts[at]
    if "__series__" in value:
        body = value["__series__"]
        index_values = [_hashable(decode(i)) for i in body["index"]]
        names = body.get("names") or [None]
        index = (pd.MultiIndex.from_tuples(index_values, names=names) if len(names) > 1
                 else pd.Index(index_values, name=names[0]))
        return pd.Series(decode(body["values"]), index=index, name=body.get("name"))
    if "__array__" in value:
        dtype = value.get("dtype", "float64")
        if not isinstance(dtype, str) or (dtype not in ARRAY_TYPES and not dtype.startswith("<U")):
            raise ModelFileError(f"unexpected array type {dtype!r}")
        items = [decode(v) for v in value["__array__"]]
        return np.array(items, dtype=object if dtype == "object" or dtype.startswith("<U") else dtype)
    if "__float__" in value:
        return float(value["__float__"])
    if "__tuple__" in value:
        return tuple(decode(v) for v in value["__tuple__"])
    if "__period__" in value:
        return cadence_of_freq(value.get("freq", "M")).parse(value["__period__"])
    if "__date__" in value:
        return pd.Timestamp(value["__date__"])
    if "__dict__" in value:
        return {k: decode(v, parts) for k, v in value["__dict__"].items()}
    if "__pairs__" in value:
        return {_hashable(decode(k)): decode(v) for k, v in value["__pairs__"]}
    raise ModelFileError(f"unexpected value {sorted(value)!r}")


def _hashable(value):
    return tuple(value) if isinstance(value, list) else value


# ------------------------------------------------------------ reading fields back

def is_number(value) -> bool:
    """Return whether a decoded value is a number (an int or a float, not a bool)."""
    return isinstance(value, (int, float)) and not isinstance(value, bool)


class StoredFields:
    """The stored fields of one part, each read once and checked, as ``from_dict`` needs them.

    Use it as a context manager: on leaving, a field that was not read is refused,
    so the fields a part reads are exactly those it accepts::

        with StoredFields(data, "TrendTerm", version=version) as fields:
            term = cls()
            term.first_month_ = fields.period("first_month_")
        return term
    """

    def __init__(self, data, owner: str, parts: Sequence = (), version: int = FORMAT_VERSION) -> None:
        if version not in READABLE_VERSIONS:
            raise ModelFileError(f"{owner}: stored fields of version {version!r} cannot be read")
        if not isinstance(data, dict):
            raise ModelFileError(f"{owner}: its fields are not a JSON object")
        self.data = data
        self.owner = owner
        self.parts = list(parts)
        self.version = version
        self._read: set[str] = set()

    def __enter__(self) -> StoredFields:
        return self

    def __exit__(self, kind, error, trace) -> None:
        if kind is None:
            unread = sorted(key for key in self.data if key not in self._read)
            if unread:
                raise ModelFileError(f"{self.owner}: unexpected field {str(unread[0])!r}")

    # -- the raw value

    def bad(self, key: str, wanted: str) -> ModelFileError:
        """Return the error for a field that is not what it should be."""
        return ModelFileError(f"{self.owner}: the field '{key}' is not {wanted}")

    def raw(self, key: str):
        """Return a field's JSON value as stored."""
        if key not in self.data:
            raise ModelFileError(f"{self.owner}: the field '{key}' is missing")
        self._read.add(key)
        return self.data[key]

    def value(self, key: str):
        """Return a field's value, its tags decoded (references to the parts read so far)."""
        raw = self.raw(key)
        try:
            return decode(raw, self.parts)
        except ModelFileError as exc:
            raise ModelFileError(f"{self.owner}: the field '{key}': {exc}") from None
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise self.bad(key, f"readable ({type(exc).__name__}: {exc})") from None

    # -- plain values

    def text(self, key: str, *, optional: bool = False) -> str | None:
        value = self.raw(key)
        if value is None and optional:
            return None
        if not isinstance(value, str):
            raise self.bad(key, "text")
        return value

    def choice(self, key: str, options: Sequence[str]) -> str:
        value = self.raw(key)
        if value not in options:
            raise self.bad(key, "one of " + ", ".join(options))
        return value

    def flag(self, key: str) -> bool:
        value = self.raw(key)
        if not isinstance(value, bool):
            raise self.bad(key, "true or false")
        return value

    def whole(self, key: str, *, minimum: int | None = None, optional: bool = False) -> int | None:
        value = self.raw(key)
        if value is None and optional:
            return None
        if not isinstance(value, int) or isinstance(value, bool) or (minimum is not None and value < minimum):
            raise self.bad(key, "a whole number" + (f" of at least {minimum}" if minimum is not None else ""))
        return value

    def number(self, key: str, *, optional: bool = False) -> float | None:
        value = self.value(key)
        if value is None and optional:
            return None
        if not is_number(value):
            raise self.bad(key, "a number")
        return float(value)

    def texts(self, key: str, *, optional: bool = False) -> list[str] | None:
        value = self.raw(key)
        if value is None and optional:
            return None
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise self.bad(key, "a list of text")
        return list(value)

    def wholes(self, key: str, *, minimum: int | None = None) -> list[int]:
        value = self.raw(key)
        if not isinstance(value, list) or not all(
                isinstance(v, int) and not isinstance(v, bool) and (minimum is None or v >= minimum)
                for v in value):
            raise self.bad(key, "a list of whole numbers" + (
                f" of at least {minimum}" if minimum is not None else ""))
        return list(value)

    def numbers(self, key: str, *, optional: bool = False, length: int | None = None,
                kind: type = list) -> list[float] | tuple[float, ...] | None:
        value = self.value(key)
        if value is None and optional:
            return None
        if not isinstance(value, (list, tuple)) or not all(is_number(v) for v in value) or (
                length is not None and len(value) != length):
            raise self.bad(key, "a list of " + (f"{length} " if length is not None else "") + "numbers")
        return kind(float(v) for v in value)

    def number_map(self, key: str) -> dict[str, float]:
        """Return a field that maps text (a level, a series) to a number."""
        value = self.value(key)
        if not isinstance(value, dict) or not all(
                isinstance(k, str) and is_number(v) for k, v in value.items()):
            raise self.bad(key, "a table of numbers by name")
        return {k: float(v) for k, v in value.items()}

    def period(self, key: str, *, optional: bool = False) -> pd.Period | None:
        value = self.value(key)
        if value is None and optional:
            return None
        if not isinstance(value, pd.Period):
            raise self.bad(key, "a period")
        return value

    def array(self, key: str, dtype: str, ndim: int) -> np.ndarray:
        """Return a field holding an array of the given type and number of dimensions."""
        value = self.value(key)
        try:
            array = np.asarray(value, dtype=dtype)
        except (TypeError, ValueError, OverflowError):   # OverflowError: an infinity as a whole number
            raise self.bad(key, f"an array of {dtype}") from None
        if array.ndim != ndim:
            raise self.bad(key, f"an array of {ndim} dimension(s)")
        return array

    # -- other parts and spec sections

    def part(self, key: str, kinds: type | tuple[type, ...]):
        """Return the earlier part a field refers to, which must be one of the kinds."""
        value = self.value(key)
        if not isinstance(value, kinds) or not any(value is p for p in self.parts):
            raise self.bad(key, "a reference to a feature of the right kind")
        return value

    def part_list(self, key: str, kinds: type | tuple[type, ...]) -> list:
        value = self.value(key)
        if not isinstance(value, list) or not all(
                isinstance(v, kinds) and any(v is p for p in self.parts) for v in value):
            raise self.bad(key, "a list of references to features of the right kind")
        return value

    def settings(self, key: str, cls: type, *, optional: bool = False):
        """Return a field holding a spec section of the given class (see ``encode_settings``)."""
        return self._settings(key, self.raw(key), cls, optional)

    def settings_list(self, key: str, cls: type) -> list:
        value = self.raw(key)
        if not isinstance(value, list):
            raise self.bad(key, f"a list of {cls.__name__}")
        return [self._settings(key, item, cls, False) for item in value]

    def _settings(self, key: str, value, cls: type, optional: bool):
        if value is None and optional:
            return None
        if not isinstance(value, dict) or sorted(value) != ["__settings__", "class"]:
            raise self.bad(key, f"a stored {cls.__name__}")
        if value["class"] != cls.__name__:
            raise ModelFileError(f"{self.owner}: the field '{key}' holds unknown settings class "
                                 f"{value['class']!r}, not {cls.__name__}")
        try:
            return cls.model_validate(value["__settings__"])
        except ValueError as exc:   # pydantic's ValidationError
            first = " ".join(str(exc).split())[:200]
            raise self.bad(key, f"a valid {cls.__name__} ({first})") from None
