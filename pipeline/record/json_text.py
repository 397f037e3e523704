"""JSON text for the run folder's documents: indented like ``json.dumps(value, indent=n)``, but
a list that holds no object (at any depth) or only lists, and a list inside a list, each
written on one line, as ``json.dumps(value)`` writes it.

A model of thousands of series stores thousands of coefficient rows and tens of thousands of
(series, month) pairs: indented item by item they are some 7 MB that Python's JSON encoder
writes in 0.7 s (an indented document is written by its Python encoder, a compact one by its
C encoder); each such list on a line by the C encoder, the document is written in a tenth
of the time.
"""

from __future__ import annotations

import json
import math
from json.encoder import encode_basestring_ascii


def _scalar(value) -> str:
    """Return a number, text, true, false or null as json.dumps writes it (its own code, for the
    many small values of a document: a call of json.dumps each costs more than the writing)."""
    if isinstance(value, str):
        return encode_basestring_ascii(value)
    if value is None:
        return "null"
    if value is True or value is False:
        return "true" if value else "false"
    if type(value) is int:
        return int.__repr__(value)
    if type(value) is float:
        if math.isfinite(value):
            return float.__repr__(value)
        return "NaN" if value != value else ("Infinity" if value > 0 else "-Infinity")
    return json.dumps(value)


def _holds_no_object(items) -> bool:
    """Return whether a list holds no object (dict) at any depth."""
    for item in items:
        if isinstance(item, dict) or (isinstance(item, list | tuple) and not _holds_no_object(item)):
            return False
    return True


def _key(key) -> str:
    """Return an object key as JSON text, as json.dumps writes it (numbers, true, null as text)."""
    if isinstance(key, str):
        return encode_basestring_ascii(key)
    text = json.dumps({key: None})
    return text[1:-len(": null}")]


def json_text(value, indent: int = 2) -> str:
    """Return ``value`` as JSON text, objects indented ``indent`` spaces a level (as json.dumps
    does), some lists on one line (the module's docstring). ``json.loads`` of it
    gives what ``json.loads(json.dumps(value))`` gives."""
    def write(item, level: int) -> str:
        if isinstance(item, dict) and item:
            inner = "\n" + " " * (indent * (level + 1))
            return ("{" + inner + ("," + inner).join(_key(k) + ": " + write(v, level + 1) for k, v in item.items())
                    + "\n" + " " * (indent * level) + "}")
        if isinstance(item, list | tuple) and item:
            if all(isinstance(v, list | tuple) for v in item) or _holds_no_object(item):
                return json.dumps(item)
            inner = "\n" + " " * (indent * (level + 1))
            parts = (json.dumps(v) if isinstance(v, list | tuple) else write(v, level + 1) for v in item)
            return ("[" + inner + ("," + inner).join(parts)
                    + "\n" + " " * (indent * level) + "]")
        return json.dumps(item) if isinstance(item, dict | list | tuple) else _scalar(item)
    return write(value, 0)
