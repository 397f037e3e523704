"""Key paths of the spec file and the line each is written on."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import yaml

KeyPath = tuple[str | int, ...]


def format_key_path(path: KeyPath) -> str:
    """Return ``a.b[2].c`` for the path ``("a", "b", 2, "c")``."""
    text = ""
    for part in path:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            text += f".{part}" if text else str(part)
    return text


def line_map(node: yaml.Node, path: KeyPath = (), lines: dict | None = None) -> dict[KeyPath, int]:
    """Return the 1-based line of every key path in a composed YAML tree."""
    if lines is None:
        lines = {}
    lines.setdefault(path, node.start_mark.line + 1)
    if isinstance(node, yaml.MappingNode):
        for key_node, value_node in node.value:
            child = path + (str(key_node.value),)
            if key_node.tag != "tag:yaml.org,2002:str":
                raise DuplicateKey(child, key_node.start_mark.line + 1,
                                    f"key {key_node.value!r} must be a name, not a number or other value")
            if child in lines:
                raise DuplicateKey(child, key_node.start_mark.line + 1)
            lines[child] = key_node.start_mark.line + 1
            line_map(value_node, child, lines)
    elif isinstance(node, yaml.SequenceNode):
        for index, item in enumerate(node.value):
            lines[path + (index,)] = item.start_mark.line + 1
            line_map(item, path + (index,), lines)
    return lines


class DuplicateKey(Exception):
    def __init__(self, path: KeyPath, line: int, message: str = "this key is given twice") -> None:
        self.path, self.line, self.message = path, line, message


def line_for(lines: dict[KeyPath, int], path: KeyPath) -> int | None:
    """Return the line of the path, or of its nearest ancestor written in the file."""
    for length in range(len(path), -1, -1):
        if path[:length] in lines:
            return lines[path[:length]]
    return None


@dataclass(frozen=True)
class SpecOrigin:
    """Where a spec was read from: its file, the line of every key, and the model kinds as written.

    Immutable, and never part of the resolved spec (not dumped, not hashed).
    """

    path: Path
    lines: tuple[tuple[KeyPath, int], ...] = ()
    written_models: tuple[str, ...] = ()   # the kinds under `models`, in the file's order

    @classmethod
    def read(cls, path: Path, lines: dict[KeyPath, int], written_models: list[str]) -> SpecOrigin:
        """Return the origin of a spec read from ``path`` with the given line map."""
        return cls(path, tuple(lines.items()), tuple(written_models))

    def line(self, path: KeyPath) -> int | None:
        """Return the line of the key path, or of its nearest ancestor written in the file."""
        return line_for(dict(self.lines), path)
