"""Tagged JSON values and reading a part's fields back (pipeline/core/stored.py).

Every round trip goes through the json module with allow_nan=False, so what is
checked is that the stored form is strict JSON (RFC 8259 has no NaN) and that
reading it back gives the value that was stored, compared with numpy's and
pandas' own equality checks.
"""

from __future__ import annotations

import json
import math
from datetime import date

import numpy as np
import pandas as pd
import pytest

from pipeline.core.errors import ModelFileError
from pipeline.core.stored import FORMAT_VERSION, StoredFields, decode, encode, encode_fields


def through_json(value, parts=None):
    text = json.dumps(encode(value, parts), allow_nan=False)
    return decode(json.loads(text), parts)


# ------------------------------------------------------------ round trips

@pytest.mark.parametrize("array", [
    np.array([1.5, -2.25, 1e-300, 1e300]),
    np.array([[1, 2, 3], [4, 5, 6]], dtype=np.int64),
    np.array([True, False, True]),
    np.array(["North", "South"], dtype=object),
    np.array([1.0, np.nan, np.inf, -np.inf]),
    np.array([0.1, 0.2], dtype=np.float32),
])
def test_arrays_round_trip_with_their_type(array):
    back = through_json(array)
    assert isinstance(back, np.ndarray)
    assert back.dtype == array.dtype
    assert back.shape == array.shape
    np.testing.assert_array_equal(back, array)


def test_floats_round_trip_to_the_last_bit():
    values = np.random.default_rng(3).normal(size=50) * 10.0 ** np.arange(-25, 25)
    back = through_json(values)
    assert back.tobytes() == values.tobytes()


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf])
def test_non_finite_floats_round_trip(value):
    back = through_json(value)
    assert isinstance(back, float)
    assert (math.isnan(back) and math.isnan(value)) or back == value


def test_series_round_trips_with_index_and_name():
    series = pd.Series([1.5, np.nan, 3.0], index=pd.Index(["a", "b", "c"], name="level"), name="mean")
    pd.testing.assert_series_equal(through_json(series), series)


def test_series_with_a_multi_index_round_trips():
    index = pd.MultiIndex.from_tuples([("North", 1), ("North", 2), ("South", 1)], names=["region", "m"])
    series = pd.Series([1.0, 2.0, 3.0], index=index, name="value")
    pd.testing.assert_series_equal(through_json(series), series)


def test_months_and_dates_round_trip():
    assert through_json(pd.Period("2023-07", freq="M")) == pd.Period("2023-07", freq="M")
    assert through_json(pd.Timestamp("2024-02-29")) == pd.Timestamp("2024-02-29")
    assert through_json(date(2020, 1, 31)) == pd.Timestamp("2020-01-31")


def test_tuples_stay_tuples_and_lists_stay_lists():
    value = {"pair": (1, "a", (2.5, None)), "items": [1, [2, 3]]}
    back = through_json(value)
    assert back == value
    assert isinstance(back["pair"], tuple) and isinstance(back["pair"][2], tuple)
    assert isinstance(back["items"], list)


def test_dicts_with_keys_other_than_text_round_trip():
    value = {("North", 3): 1.5, ("South", 0): -2.0, 7: "seven", 2.5: None}
    back = through_json(value)
    assert back == value
    assert set(back) == {("North", 3), ("South", 0), 7, 2.5}


def test_numpy_scalars_become_plain_numbers():
    assert through_json(np.float64(2.5)) == 2.5
    back = through_json(np.int64(4))
    assert back == 4 and isinstance(back, int)


def test_references_to_parts_come_back_as_the_same_objects():
    first, second = object(), object()
    stored = encode_fields({"driver": second, "drivers": [first, second]}, parts=[first, second])
    assert stored["driver"] == {"__part__": 1}
    back = {k: decode(json.loads(json.dumps(v)), [first, second]) for k, v in stored.items()}
    assert back["driver"] is second
    assert back["drivers"][0] is first and back["drivers"][1] is second


def test_a_value_that_cannot_be_stored_is_refused():
    with pytest.raises(TypeError, match="set"):
        encode({1, 2})


@pytest.mark.parametrize("bad", [
    {"__array__": [1, 2], "dtype": "complex128"},
    {"__part__": 3},
    {"__surprise__": 1},
])
def test_decoding_an_unexpected_tag_is_a_model_file_error(bad):
    with pytest.raises(ModelFileError):
        decode(bad, parts=[object()])


# ------------------------------------------------------------ reading fields back

def read_all(data):
    with StoredFields(data, "Thing") as fields:
        return fields.text("name"), fields.number("value"), fields.period("month")


GOOD = encode_fields({"name": "north", "value": 2.5, "month": pd.Period("2022-03", freq="M")})


def test_fields_read_back_as_stored():
    assert read_all(json.loads(json.dumps(GOOD))) == ("north", 2.5, pd.Period("2022-03", freq="M"))


def test_an_extra_field_is_refused_on_leaving():
    with pytest.raises(ModelFileError, match="Thing: unexpected field 'colour'"):
        read_all({**GOOD, "colour": "red"})


def test_a_field_that_is_not_read_is_refused():
    with pytest.raises(ModelFileError, match="unexpected field 'month'"):
        with StoredFields(GOOD, "Thing") as fields:
            fields.text("name")
            fields.number("value")


def test_a_missing_field_is_named():
    data = {k: v for k, v in GOOD.items() if k != "value"}
    with pytest.raises(ModelFileError, match="Thing: the field 'value' is missing"):
        read_all(data)


@pytest.mark.parametrize(("field", "value", "wanted"), [
    ("name", 3, "text"),
    ("value", "2.5", "a number"),
    ("value", True, "a number"),
    ("month", "2022-03", "a period"),
])
def test_a_field_of_the_wrong_type_is_refused_in_one_line(field, value, wanted):
    with pytest.raises(ModelFileError) as info:
        read_all({**GOOD, field: value})
    message = str(info.value)
    assert message == f"Thing: the field '{field}' is not {wanted}"
    assert "\n" not in message


@pytest.mark.parametrize(("reader", "value"), [
    (lambda f: f.whole("k"), 2.0),
    (lambda f: f.whole("k", minimum=1), 0),
    (lambda f: f.flag("k"), 1),
    (lambda f: f.texts("k"), ["a", 1]),
    (lambda f: f.wholes("k"), [1, True]),
    (lambda f: f.numbers("k", length=2), [1.0, 2.0, 3.0]),
    (lambda f: f.number_map("k"), {"__dict__": {"a": "x"}}),
    (lambda f: f.choice("k", ["log", "none"]), "exp"),
    (lambda f: f.array("k", "float64", 2), {"__array__": [1.0, 2.0], "dtype": "float64"}),
])
def test_typed_readers_refuse_values_of_the_wrong_kind(reader, value):
    with pytest.raises(ModelFileError, match="the field 'k' is not"):
        with StoredFields({"k": value}, "Thing") as fields:
            reader(fields)


def test_fields_that_are_not_an_object_or_of_an_unknown_version_are_refused():
    with pytest.raises(ModelFileError, match="not a JSON object"):
        StoredFields([1, 2], "Thing")
    with pytest.raises(ModelFileError, match="version 99"):
        StoredFields({}, "Thing", version=99)
    assert StoredFields({}, "Thing", version=FORMAT_VERSION).version == FORMAT_VERSION
