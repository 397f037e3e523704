"""Bounds on a spec file's YAML, checked before anything is built from it.

A spec is a small hand-written file: a few dozen keys, nested a handful of levels.
YAML lets a short text stand for a huge or very deep tree: an alias repeats its
anchor's whole subtree (ten lines of aliases of aliases make ten billion values),
a merge key ``<<:`` copies a mapping's keys, and ``[[[[...`` nests as deep as the
brackets go. Reading such a text whole (composing its nodes, the line map of
every key, the typed spec) exhausts memory or the interpreter's stack.

Aliases are not refused: an anchor is a fair way to write one list of levels
twice. Instead the YAML events are walked once, before any node is composed,
counting the values each anchor stands for, so the walk stops as soon as the
text is too deep or stands for too many values, however its aliases multiply.
The walk keeps only a count per anchor and the open collections, never a tree,
and it never recurses; an alias inside its own anchor (a list that holds
itself) is refused. Stopping early matters for depth too: the YAML scanner's
work grows with the square of the open brackets (a flow list 100,000 levels
deep takes minutes to scan whole), so the walk ends at the first level past
the limit. The file is read up to 1 MB and one byte, never more, whatever it
is. The walk also refuses, at their line, the plain scalars (keys too) the YAML
reader would turn into a number too long to be a spec's value (Python refuses
to read an integer of over 4300 digits) or into a date that is not on the
calendar (2025-02-30), either of which would stop the reader with a crash.
"""

from __future__ import annotations

from pathlib import Path

import yaml
from yaml.constructor import SafeConstructor

from pipeline.core.errors import SpecError
from pipeline.spec.keys import KeyPath, format_key_path

MOST_BYTES = 1_000_000      # a hand-written spec is a few kilobytes
MOST_DEPTH = 32             # the spec's own keys nest seven levels at most
MOST_VALUES = 100_000       # values, each alias counted as the values it repeats
MOST_DIGITS = 40            # characters of a number written in the spec

_INT = "tag:yaml.org,2002:int"
_FLOAT = "tag:yaml.org,2002:float"
_TIMESTAMP = "tag:yaml.org,2002:timestamp"
_RESOLVER = yaml.resolver.Resolver()


def check_size(path: Path, size: int) -> None:
    """Refuse a spec file larger than a hand-written spec could be (``size`` is its bytes, read
    up to one past the most)."""
    if size > MOST_BYTES:
        raise SpecError(f"the spec file has more than {MOST_BYTES:,} bytes; a spec is a few "
                        "kilobytes", file=str(path))


def check_shape(text: str, path: Path) -> None:
    """Refuse YAML too deep, standing for too many values, or holding a scalar castline
    cannot read, naming the line and key; YAML errors themselves are left to the reader."""
    walk = _Walk(str(path))
    try:
        for event in yaml.parse(text, Loader=yaml.SafeLoader):
            walk.see(event)
    except yaml.YAMLError:
        return   # the reader reports it, at its line


class _Open:
    """A mapping or list being read: the values before it, its key path, its next key."""

    def __init__(self, before: int, path: KeyPath, anchor: str | None, mapping: bool) -> None:
        self.before, self.path, self.anchor, self.mapping = before, path, anchor, mapping
        self.index = 0          # items seen (a mapping's keys and values alike)
        self.key: str | int = 0
        self.deepest = 0        # levels below it


class _Walk:
    """The YAML events of a spec, followed one by one with counts, never a tree."""

    def __init__(self, shown: str) -> None:
        self.shown = shown
        self.values = 0
        self.open: list[_Open] = []
        self.anchors: dict[str, tuple[int, int]] = {}   # anchor: the values it stands for, its levels

    def _place(self, event: yaml.Event) -> tuple[KeyPath, bool]:
        """Return the key path of the node the event starts, and whether it is a mapping's key."""
        if not self.open:
            return (), False
        parent = self.open[-1]
        item, parent.index = parent.index, parent.index + 1
        if not parent.mapping:
            return parent.path + (item,), False
        if item % 2 == 0:
            parent.key = event.value if isinstance(event, yaml.ScalarEvent) else item // 2
            return parent.path, True
        return parent.path + (parent.key,), False

    def see(self, event: yaml.Event) -> None:
        if isinstance(event, yaml.CollectionEndEvent):
            done = self.open.pop()
            if self.open:
                self.open[-1].deepest = max(self.open[-1].deepest, done.deepest + 1)
            if done.anchor is not None:
                self.anchors[done.anchor] = (self.values - done.before, done.deepest + 1)
            return
        if not isinstance(event, yaml.NodeEvent):
            return
        line = event.start_mark.line + 1
        path, _ = self._place(event)
        if isinstance(event, yaml.CollectionStartEvent):
            self.open.append(_Open(self.values, path, event.anchor,
                                   isinstance(event, yaml.MappingStartEvent)))
            self.values += 1
            self._levels(len(self.open), line, path)
        elif isinstance(event, yaml.ScalarEvent):
            self.values += 1
            _check_scalar(event, self.shown, line, path)   # a key is built too: 2025-02-30: x
            if event.anchor is not None:
                self.anchors[event.anchor] = (1, 0)
        elif any(open_.anchor == event.anchor for open_ in self.open):
            raise SpecError(f"the alias *{event.anchor} is inside its own anchor &{event.anchor}: "
                            "it stands for a value without end", file=self.shown, line=line,
                            key=format_key_path(path) or None)
        elif event.anchor in self.anchors:   # an alias
            repeated, levels = self.anchors[event.anchor]
            self.values += repeated
            if self.open:
                self.open[-1].deepest = max(self.open[-1].deepest, levels)
            self._levels(len(self.open) + levels, line, path)
        if self.values > MOST_VALUES:
            raise SpecError(f"the spec stands for more than {MOST_VALUES:,} values (an alias "
                            "counts as every value of its anchor); write the values out, "
                            "without aliases of aliases", file=self.shown, line=line,
                            key=format_key_path(path) or None)

    def _levels(self, depth: int, line: int, path: KeyPath) -> None:
        if depth > MOST_DEPTH:
            raise SpecError(f"lists and mappings nested more than {MOST_DEPTH} levels deep; a "
                            "spec's keys nest a few levels", file=self.shown, line=line,
                            key=format_key_path(path[:MOST_DEPTH // 4]) or None)


def _check_scalar(event: yaml.ScalarEvent, shown: str, line: int, path: KeyPath) -> None:
    """Refuse a plain scalar read as a number of too many digits, or as a date off the calendar."""
    if not event.implicit[0]:   # quoted or tagged: text, which the typed spec judges
        return
    tag = _RESOLVER.resolve(yaml.ScalarNode, event.value, (True, False))
    key = format_key_path(path) or None
    if tag in (_INT, _FLOAT) and len(event.value) > MOST_DIGITS:
        digits = sum(c.isdigit() for c in event.value)
        raise SpecError(f"a number of {digits:,} digits; a spec's numbers are written in at most "
                        f"{MOST_DIGITS} characters", file=shown, line=line, key=key)
    if tag == _TIMESTAMP:
        try:
            SafeConstructor().construct_yaml_timestamp(yaml.ScalarNode(tag, event.value))
        except (ValueError, OverflowError):
            raise SpecError(f"{event.value!r} is not a date on the calendar (a month has 28 "
                            "to 31 days, a year 12 months)", file=shown, line=line, key=key) from None
