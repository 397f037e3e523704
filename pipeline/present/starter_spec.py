"""A starter spec written out as commented YAML from a data file's survey."""

from __future__ import annotations

import os
import re
from pathlib import Path

import yaml

from pipeline.spec import CsvOptions
from pipeline.stages.survey import MAX_LEVELS, Inference


def _yaml_value(value) -> str:
    return yaml.safe_dump(value, default_flow_style=True, allow_unicode=True).strip().removesuffix("...").strip()


def _gaps_line(found: Inference) -> str:
    if found.history_gaps:
        return (f"  gaps: fill              # {found.history_gaps} month(s) inside the history lack "
                "the target or a row: filled by interpolation (refuse | allow | fill)")
    return "  gaps: refuse            # months missing inside a series: refuse | allow | fill"


def render_spec(found: Inference, spec_path: Path) -> str:
    """Return a commented starter spec for the inferred data."""
    data_file = os.path.relpath(found.path.resolve(), spec_path.resolve().parent)
    name = re.sub(r"[^A-Za-z0-9_.-]+", "-", found.path.stem).strip("-.") or "forecast"
    periods = found.periods
    holdout = min(12, max(1, periods // 5))
    lines = [
        f"# Starter spec written by 'castline init' from {found.path.name}",
        f"# ({found.rows} rows, {periods} months). Everything below is a guess to check and edit.",
        "",
        f"name: {_yaml_value(name)}",
        "",
        "input:",
        f"  file: {_yaml_value(data_file)}",
    ]
    if found.file_format == "csv" and found.csv != CsvOptions():
        lines.append("  csv:")
        for key, value in found.csv.model_dump().items():
            if value != getattr(CsvOptions(), key):
                lines.append(f"    {key}: {_yaml_value(value)}")
    lines += [
        f"  date_column: {_yaml_value(found.date_column)}",
        f"  period: month{'' if found.frequency == 'month' else '   # the dates look ' + found.frequency + 'ly: aggregate to months first'}",
        f"  series: {_yaml_value(found.series)}" + ("   # columns that, with the month, identify a row"
                                                  if found.series else "   # one series: no key needed"),
        _gaps_line(found),
        "",
        f"# Other candidates for the target: {', '.join(found.target_candidates[1:]) or 'none'}",
        f"target: {_yaml_value(found.target)}",
        "",
        "drivers:",
        "  numeric:" + ("" if found.numeric_drivers else " []"),
        *[f"    - {_yaml_value(c)}" for c in found.numeric_drivers],
        "  categorical:" + ("" if found.categorical_drivers or found.series else " []"),
        *[f"    - column: {_yaml_value(c)}\n      encoding: one_hot" for c in found.categorical_drivers + found.series],
        "",
        "# What each column must hold; a run stops when the data breaks a rule.",
        "columns:",
    ]
    for column, kind in found.types.items():
        rule = {"type": kind}
        if found.missing[column] and column not in (found.date_column,):
            rule["missing_allowed"] = True
        if kind == "category" and len(found.levels.get(column, [])) <= MAX_LEVELS:
            rule["allowed"] = found.levels[column]
        if column in found.numeric_drivers or column in found.categorical_drivers + found.series:
            rule.pop("missing_allowed", None)
        lines.append(f"  {_yaml_value(column)}: {_yaml_value(rule)}")
    lines += [
        "",
        f"# Test out of sample on the last {holdout} months of history.",
        "validation:",
        "  method: holdout",
        f"  last_periods: {holdout}",
        "",
        "models: [ols]               # the mean baseline is always fitted beside them",
        "",
        "output:",
        "  folder: reports",
        "",
    ]
    return "\n".join(lines)
