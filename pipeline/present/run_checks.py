"""Checks of a run folder's files as they are read back, so a file changed by hand stops
``castline report`` in one line naming the file (and its column, row or key) and what is wrong.

What is checked is what the pages read: each table's columns and the kind of value in each
(text, a number, a whole number, True or False), that the file ends where castline ends it
(a cut file does not), that its header names no column twice; each JSON document's keys and
the kind of each value. A column or key castline writes but the pages never read may be
missing (a run folder of an older castline lacks a few); one the pages read may not.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import pandas as pd

from pipeline.core.errors import UserError

TEXT, NUMBER, WHOLE, FLAG = "text", "a number", "a whole number", "True or False"

_SCORES = ("n", "mae", "rmse", "mape", "smape", "wape", "mase", "r2", "bias", "mape_rows_left_out",
           "skill_vs_mean")
_BOUNDS = tuple(f"{method}_{side}_{level}" for method in ("analytic", "empirical")
                for level in ("80", "95") for side in ("low", "high"))

# Per table: the columns the pages need, and the kind of value in each column castline writes.
TABLES: dict[str, tuple[tuple[str, ...], dict[str, str]]] = {
    "predictions.csv": (("period", "horizon", "series", "model", "actual", "prediction"),
                        {"horizon": WHOLE, "actual": NUMBER, "prediction": NUMBER, "mase_scale": NUMBER,
                         "prediction_se": NUMBER, "df_resid": NUMBER, "centre": NUMBER}),
    "forecast.csv": (("period", "horizon", "series", "model", "forecast"),
                     {"horizon": WHOLE, "forecast": NUMBER, **dict.fromkeys(_BOUNDS, NUMBER)}),
    "coefficients.csv": (("model", "term", "estimate"),
                         dict.fromkeys(("estimate", "std_error", "t", "p_value", "low_95", "high_95",
                                        "estimate_standardised", "penalty"), NUMBER)),
    "history.csv": (("period", "series", "actual"), {"actual": NUMBER}),
    "residuals.csv": (("period", "series", "fitted", "residual"), {"fitted": NUMBER, "residual": NUMBER}),
    "series.csv": (("model", "series", "n", "mae", "skill_vs_mean", "beats"),
                   {**dict.fromkeys(_SCORES, NUMBER), "n": WHOLE, "test_statistic": NUMBER,
                    "p_value": NUMBER, "p_holm": NUMBER, "test_n": WHOLE, "beats": FLAG,
                    "beats_significantly": FLAG}),
    "realised.csv": (("forecast_run_id", "model", "period", "series", "horizon", "forecast", "actual",
                      "error", "expected_mae", "interval_method", "inside_80", "inside_95"),
                     {"horizon": WHOLE, **dict.fromkeys(("forecast", "actual", "error", "expected_mae", "low_80",
                                                         "high_80", "low_95", "high_95", "backtest_low_95",
                                                         "backtest_high_95"), NUMBER),
                      **dict.fromkeys(("inside_80", "inside_95", "within_backtest_95", "recorded"), FLAG)}),
    "interval_coverage.csv": (("model", "method", "level", "coverage", "n"),
                              {"level": NUMBER, "coverage": NUMBER, "n": WHOLE, "interval_score": NUMBER}),
    "interval_coverage_by.csv": (("model", "method", "level", "by", "group", "coverage", "n"),
                                 {"level": NUMBER, "coverage": NUMBER, "n": WHOLE}),
    "diagnostics.csv": (("model", "check", "value", "flagged", "reading"), {"p_value": NUMBER, "flagged": FLAG}),
    "influential_rows.csv": (("row", "cooks_distance"), {"cooks_distance": NUMBER, "above_4_over_n": FLAG}),
    "series_fallbacks.csv": (("stage", "model", "series"), {}),
    "scenarios.csv": (("scenario", "period", "series", "model", "scenario_forecast"),
                      dict.fromkeys(("base_forecast", "scenario_forecast", "difference", "low_80", "high_80",
                                     "low_95", "high_95"), NUMBER)),
}
# The tables every run folder holds: one of them empty is damaged, not merely absent.
NEEDED = ("predictions.csv", "forecast.csv", "coefficients.csv", "history.csv")
# The tables that hold a row or more in every run folder (a backtest and a history are never empty).
WITH_ROWS = ("predictions.csv", "history.csv")
# The columns that name a row: never empty where castline writes them.
FILLED = ("period", "series", "model", "horizon", "term", "forecast_run_id", "method", "level")


def _wrong(path: Path, where: str, what: str) -> UserError:
    place = f"{path}: {where}: " if where else f"{path}: "
    return UserError(f"{place}{what}; the run file was changed by hand or damaged (castline did not "
                     "write it so), and was left as it is")


def check_text(path: Path, text_end: bytes, header: str) -> None:
    """Check a CSV file's ending and header: a cut file, or a column named twice, is refused."""
    if text_end and not text_end.endswith(b"\n"):
        raise _wrong(path, "", "the file is cut short (its last line has no end)")
    names = next(csv.reader([header]), [])
    twice = sorted({name for name in names if names.count(name) > 1})
    if twice:
        raise _wrong(path, f"column '{twice[0]}'", "is named twice in the header")


def _bad_value(values: pd.Series, kind: str) -> int | None:
    """Return the position of the first value of a column that is not of its kind, else None."""
    given = values.notna()
    if kind == FLAG:
        good = values.astype(object).isin([True, False, "True", "False"]) | ~given
    else:
        numbers = pd.to_numeric(values.astype(object).where(given), errors="coerce") \
            if values.dtype.kind not in "iuf" else values
        good = numbers.notna() | ~given
        if values.dtype.kind == "b":
            good = ~given
        elif kind == WHOLE:
            good &= numbers.isna() | (numbers.fillna(0) % 1 == 0)
    bad = (~good.to_numpy(bool)).nonzero()[0]
    return int(bad[0]) if len(bad) else None


def check_table(path: Path, frame: pd.DataFrame | None) -> None:
    """Check a table read back from a run folder: the columns the pages need, and the kind of
    value in each column castline writes; raise UserError naming the file, column and line."""
    if path.name not in TABLES:
        return
    if frame is None:
        if path.name in NEEDED and path.exists():
            raise _wrong(path, "", "the file is empty")
        return
    needed, kinds = TABLES[path.name]
    lacking = [name for name in needed if name not in frame.columns]
    if lacking:
        raise _wrong(path, f"column '{lacking[0]}'", "is missing")
    if path.name in WITH_ROWS and not len(frame):
        raise _wrong(path, "", "the file has a header and no rows")
    for column in (name for name in needed if name in FILLED):
        empty = frame[column].isna().to_numpy().nonzero()[0]
        if len(empty):
            raise _wrong(path, f"line {int(empty[0]) + 2}, column '{column}'", "is empty")
    for column, kind in kinds.items():
        if column not in frame.columns:
            continue
        position = _bad_value(frame[column], kind)
        if position is not None:
            value = frame[column].iloc[position]
            raise _wrong(path, f"line {position + 2}, column '{column}'", f"holds {str(value)!r} where "
                         f"castline writes {kind}")


# ---------------------------------------------------------------- the JSON documents

def _number(value) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool) and \
        (not isinstance(value, float) or math.isfinite(value))


_KINDS = {TEXT: lambda v: isinstance(v, str), NUMBER: _number,
          WHOLE: lambda v: isinstance(v, int) and not isinstance(v, bool), FLAG: lambda v: isinstance(v, bool),
          "a list": lambda v: isinstance(v, list), "an object": lambda v: isinstance(v, dict),
          "a list of texts": lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v),
          "a list of objects": lambda v: isinstance(v, list) and all(isinstance(x, dict) for x in v)}

# Per document: key -> (kind, needed); a key that is not needed may be missing or null.
DOCUMENTS: dict[str, dict[str, tuple[str, bool]]] = {
    "metrics.json": {"run_id": (TEXT, True), "created": (TEXT, True), "recommended": (TEXT, True),
                     "verdict": (TEXT, True), "select_by": (TEXT, True), "spec_name": (TEXT, True),
                     "validation_text": (TEXT, True), "significance_level": (NUMBER, True),
                     "beats_baseline": (FLAG, True), "models": ("a list of objects", True),
                     "castline_version": (TEXT, False), "validation": ("an object", False),
                     "package_versions": ("an object", False), "fit": ("a list of objects", False),
                     "notes": ("a list of texts", False), "by_origin": ("a list of objects", False),
                     "by_horizon": ("a list of objects", False), "series_count": (WHOLE, False),
                     "series_summary": ("a list of objects", False), "best_rule": (TEXT, False),
                     "beats_best_rule": (FLAG, False), "tested": (FLAG, False),
                     "interval_coverage": ("a list of objects", False), "drivers_ahead": ("an object", False),
                     "hindsight_models": ("a list of objects", False), "diagnostics": ("a list of objects", False)},
    "fingerprint.json": {"file": (TEXT, True), "sha256": (TEXT, True), "rows": (WHOLE, True),
                         "history_rows": (WHOLE, True), "future_rows": (WHOLE, True),
                         "first_period": (TEXT, True), "last_period": (TEXT, True),
                         "series": ("a list of texts", True), "problems_allowed": ("a list of objects", False)},
    "track_record.json": {"ledger": (TEXT, True), "earlier_runs": (WHOLE, True), "recommended": ("an object", True),
                          "warnings": ("a list of texts", True), "runs_without_skill": (WHOLE, False),
                          "realised_skill": ("an object", False)},
    "model.json": {"format": (TEXT, True), "target": (TEXT, True), "models": ("an object", True),
                   "series_columns": ("a list of texts", True)},
}
# The rows of a document's lists: key -> the keys each row needs, and which of its values are numbers.
ROWS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "models": (("model",), (*_SCORES, "p_value", "p_holm", "test_statistic", "skill_vs_best_rule",
                            "interval_score_95")),
    "hindsight_models": (("model",), _SCORES),
    "by_origin": (("model", "origin"), _SCORES),
    "by_horizon": (("model", "horizon"), _SCORES),
    "series_summary": (("model", "series", "beats", "beats_share", "beats_significantly"),
                       ("series", "beats", "beats_share", "beats_significantly", "significant_share",
                        "skill_q25", "skill_median", "skill_q75")),
    "interval_coverage": (("model", "method", "level", "coverage", "n"), ("level", "coverage", "n")),
    "fit": (("model",), ()),
    "diagnostics": (("model", "check"), ()),
}


def check_document(path: Path, document) -> None:
    """Check a JSON document read back from a run folder: an object, with the keys the pages read,
    each of its kind; raise UserError naming the file and key."""
    keys = DOCUMENTS.get(path.name)
    if keys is None:
        return
    if not isinstance(document, dict):
        raise _wrong(path, "", "holds no JSON object")
    for key, (kind, needed) in keys.items():
        if key not in document or document[key] is None:
            if needed:
                raise _wrong(path, f"key '{key}'", "is missing")
            continue
        if not _KINDS[kind](document[key]):
            raise _wrong(path, f"key '{key}'", f"holds {_shown(document[key])} where castline writes {kind}")
        if key in ROWS and path.name == "metrics.json":
            _check_rows(path, key, document[key])
    if path.name == "metrics.json":
        models = [row.get("model") for row in document["models"]]
        if document["recommended"] not in models:
            raise _wrong(path, "key 'recommended'", f"names {document['recommended']!r}, not one of the "
                         "models of key 'models'")
    if path.name == "model.json":
        kinds = [name for name, model in document["models"].items() if not isinstance(model, dict)]
        if kinds:
            raise _wrong(path, f"key 'models.{kinds[0]}'", "holds no JSON object")


def _check_rows(path: Path, key: str, rows: list[dict]) -> None:
    needed, numbers = ROWS[key]
    for index, row in enumerate(rows):
        lacking = [name for name in needed if name not in row]
        if lacking:
            raise _wrong(path, f"key '{key}[{index}].{lacking[0]}'", "is missing")
        if not isinstance(row.get("model", ""), str):
            raise _wrong(path, f"key '{key}[{index}].model'", "is not text")
        for name in numbers:
            value = row.get(name)
            if value is not None and not _number(value):
                raise _wrong(path, f"key '{key}[{index}].{name}'", f"holds {_shown(value)} where castline "
                             "writes a number")


def _shown(value) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."
