"""pipeline/record/json_text.py: the run folder's JSON documents, indented as json.dumps indents
them except for lists written on one line.

References: the standard library's json module (json.dumps and json.loads); the documents
are made up or generated with a stated design (plumbing only).
"""

from __future__ import annotations

import json
import math

import numpy as np

from pipeline.record.json_text import json_text


def test_objects_are_indented_as_json_dumps_indents_them():
    document = {"format": "castline-model", "version": 4, "nested": {"a": 1.5, "b": None, "c": True,
                                                                         "d": "Zürich \"x\"", "e": {}},
                "empty": [], 3: "a number key", None: "a null key", False: 0}
    for indent in (1, 2, 4):
        assert json_text(document, indent) == json.dumps(document, indent=indent)


def test_lists_without_objects_and_lists_of_lists_are_on_one_line():
    document = {"names": ["x1", "x2"], "rows": [[1.0, 2.5], [3, None]],
                "pairs": [[{"t": ["s", 0]}, 5.5], [{"t": ["s", 1]}, 6.5]],
                "records": [{"a": 1}, [1, {"b": 2}]]}
    assert json_text(document, 1) == (
        '{\n'
        ' "names": ["x1", "x2"],\n'
        ' "rows": [[1.0, 2.5], [3, null]],\n'
        ' "pairs": [[{"t": ["s", 0]}, 5.5], [{"t": ["s", 1]}, 6.5]],\n'
        ' "records": [\n'
        '  {\n'
        '   "a": 1\n'
        '  },\n'
        '  [1, {"b": 2}]\n'
        ' ]\n'
        '}')


def _generated(rng: np.random.Generator, depth: int):
    """A random JSON value: objects, lists, texts with quotes and non-ASCII letters, integers,
    floats including NaN, infinities and -0.0, booleans and null, nested up to ``depth``."""
    kind = rng.integers(0, 9 if depth > 0 else 6)
    if kind == 0:
        return str(rng.choice(["plain", 'qu"ote', "back\\slash", "line\nbreak", "Köln", ""]))
    if kind == 1:
        return int(rng.integers(-10 ** 12, 10 ** 12))
    if kind == 2:
        return float(rng.choice([rng.normal() * 10.0 ** rng.integers(-30, 30), math.nan, math.inf, -math.inf, -0.0]))
    if kind == 3:
        return bool(rng.integers(0, 2))
    if kind in (4, 5):
        return None
    if kind in (6, 7):
        return [_generated(rng, depth - 1) for _ in range(rng.integers(0, 5))]
    return {str(rng.integers(0, 50)): _generated(rng, depth - 1) for _ in range(rng.integers(0, 5))}


def test_every_generated_document_reads_back_as_json_dumps_writes_it():
    # Design: 500 random documents up to 5 levels deep (_generated); both texts parsed by
    # json.loads and written compact again, so NaN compares as text.
    rng = np.random.default_rng(20261203)
    for _ in range(500):
        document = _generated(rng, 5)
        ours, theirs = json.loads(json_text(document, 2)), json.loads(json.dumps(document, indent=2))
        assert json.dumps(ours) == json.dumps(theirs)
