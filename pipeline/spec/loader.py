"""Reading a spec file: safe YAML, every key checked, each problem placed at its line.

Only this module reads the YAML. Every key is checked: unknown keys are refused
with the nearest valid key suggested, and each problem is reported as
``FILE:LINE: key.path: what is wrong``. Relative paths resolve against the
folder of the spec file.
"""

from __future__ import annotations

import difflib
import types
import typing
from pathlib import Path
from typing import Annotated, Any, Union

import yaml
from pydantic import BaseModel, ValidationError

from pipeline.core.errors import SpecError
from pipeline.core.paths import PathError, given_path, resolved_path
from pipeline.spec.guard import MOST_BYTES, check_shape, check_size
from pipeline.spec.keys import DuplicateKey, KeyPath, SpecOrigin, format_key_path, line_for, line_map
from pipeline.spec.rules import check_rules
from pipeline.spec.schema import CategoricalDriver, Spec


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
        valid = sorted(k for k, f in section.model_fields.items() if not f.exclude) if section else []
        if loc[-1] == "future" and section is CategoricalDriver:
            return ("future applies to numeric drivers: a categorical driver's levels in the "
                    "months to forecast must be given in the data")
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
        with path.open("rb") as file:   # never more than a spec can hold, whatever the file is
            raw = file.read(MOST_BYTES + 1)
        check_size(path, len(raw))
        text = raw.decode("utf-8").replace("\r\n", "\n").replace("\r", "\n")
    except FileNotFoundError:
        raise SpecError("no such spec file", file=str(path)) from None
    except IsADirectoryError:
        raise SpecError("is a folder, not a spec file", file=str(path)) from None
    except UnicodeDecodeError:
        raise SpecError("the spec is not UTF-8 text", file=str(path)) from None
    except OSError as exc:
        raise SpecError(f"cannot read the spec: {exc.strerror}", file=str(path)) from None
    check_shape(text, path)
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
        return data, line_map(node)
    except DuplicateKey as dup:
        raise SpecError(dup.message, file=str(path), line=dup.line,
                        key=format_key_path(dup.path)) from None


def _resolve(raw: Path, base: Path) -> Path:
    return resolved_path(raw, base)


def _schema_problems(exc: ValidationError, lines: dict[KeyPath, int], shown: str) -> list[SpecError]:
    """Return every problem pydantic found, one per key, in the order of their lines.

    An unknown key is usually why a required key beside it is missing: such a
    missing key is reported after the unknown keys of its section.
    """
    found: dict[KeyPath, tuple[dict[str, Any], int | None]] = {}
    for error in exc.errors():
        loc = _without_tags(tuple(error["loc"]))
        if error["type"] == "union_tag_invalid":
            loc += ("method",)
        elif error["type"] != "missing" and loc not in lines and loc[:-1] in lines and len(loc) > 1:
            loc = loc[:-1]  # a bare name standing for a mapping (models: [ols] is {kind: ols})
        found.setdefault(loc, (error, line_for(lines, loc)))   # one problem per key: the first
    unknown_lines: dict[KeyPath, list[int]] = {}
    for loc, (error, line) in found.items():
        if error["type"] == "extra_forbidden":
            unknown_lines.setdefault(loc[:-1], []).append(line or 0)

    def order(item: tuple[int, tuple[KeyPath, tuple[dict[str, Any], int | None]]]) -> tuple[int, int, int]:
        index, (loc, (error, line)) = item
        caused = error["type"] == "missing" and loc[:-1] in unknown_lines
        at = max([line or 0, *unknown_lines[loc[:-1]]]) if caused else line or 0
        return at, int(caused), index

    return [SpecError(_describe(error), file=shown, line=line, key=format_key_path(loc) or None)
            for _, (loc, (error, line)) in sorted(enumerate(found.items()), key=order)]


def _path_problems(spec: Spec, base: Path) -> list[SpecError]:
    """Return the problems of the data file, the output folder and the ledger named in the spec."""
    problems = []
    for key, raw in ((("input", "file"), spec.input.file), (("output", "folder"), spec.output.folder),
                     (("output", "ledger"), spec.output.ledger)):
        try:
            if raw is not None:
                _resolve(raw, base)
        except PathError as refused:   # the system cannot name it (NUL, ~nobody, too long, a loop)
            problems.append(spec.error(key, f"{refused.why}: {refused.path}"))
    if problems:
        return problems
    data_file = _resolve(spec.input.file, base)
    if not data_file.exists():
        problems.append(spec.error(("input", "file"), f"no such data file: {data_file}"))
    elif data_file.is_dir():
        problems.append(spec.error(("input", "file"), f"is a folder, not a data file: {data_file}"))
    output_folder = _resolve(spec.output.folder, base)
    if output_folder.exists() and not output_folder.is_dir():
        problems.append(spec.error(("output", "folder"), f"exists and is not a folder: {output_folder}"))
    ledger_file = _resolve(spec.output.ledger, base) if spec.output.ledger else None
    if ledger_file is not None and ledger_file.is_dir():
        problems.append(spec.error(("output", "ledger"), f"is a folder, not a ledger file: {ledger_file}"))
    return problems


def load_spec(path: str | Path) -> Spec:
    """Return the typed spec read from a YAML file, with every path resolved.

    Raises SpecError naming the file, line and key of a problem; where the spec
    has several, a SpecErrors holding each, in the order of their lines (its
    message is the first).
    """
    spec_path = given_path(path)
    data, lines = _read_yaml(spec_path)
    try:
        spec = Spec.model_validate(data)
    except ValidationError as exc:
        raise SpecError.of(_schema_problems(exc, lines, str(spec_path))) from None
    written = data.get("models") if isinstance(data.get("models"), list) else []
    spec = spec.model_copy(update={"origin": SpecOrigin.read(
        spec_path, lines, [m.get("kind") if isinstance(m, dict) else m for m in written])})
    base = spec_path.resolve().parent
    problems = check_rules(spec, spec.error) + _path_problems(spec, base)
    if problems:
        raise SpecError.of(sorted(problems, key=lambda p: p.line or 0))
    output = spec.output
    return spec.model_copy(update={
        "input": spec.input.model_copy(update={"file": _resolve(spec.input.file, base)}),
        "output": output.model_copy(update={
            "folder": _resolve(output.folder, base),
            "ledger": _resolve(output.ledger, base) if output.ledger else None}),
    })
