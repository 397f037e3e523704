"""The range of every number in the spec, and the text options a CSV can be read with.

The typed sections (schema) refuse numbers that are not finite (no .inf or .nan
anywhere) and values below their least; this module gives each number its most,
from what monthly data could ever use: a lag, a window or a count of months
within a century of history, a horizon within the ten years forecast at most,
counts of rows and sizes within what one machine reads. A value past its most
would be taken by ``check`` and then stall or crash ``run``; each is refused here,
at its key's line, instead. It also judges the CSV options pandas reads the file
with: one printable separator each, and an encoding that reads text.
"""

from __future__ import annotations

import codecs
import math
from collections.abc import Callable

from pipeline.core.errors import SpecError
from pipeline.spec.keys import KeyPath
from pipeline.spec.schema import MOST_AHEAD, Spec

Fail = Callable[[KeyPath, str], SpecError]

MOST_MONTHS = 1200            # a century of months: the longest history a lag or a window may span
MOST_ROWS = 10**12            # rows of a file, or of a level: far past what one machine reads
MOST_MEGABYTES = 1e9          # a petabyte
MOST_SHEETS = 10_000          # an Excel sheet's position
MOST_VALUE = 1e150            # the data check refuses values beyond this (stages/check.py, HUGE)
MOST_PENALTY = 1e12           # far past any penalty worth choosing among
MOST_SCALE_UNITS = 1e6        # huber_threshold: past it every residual counts as squared
MOST_PERCENT = 1e6            # a scenario's percent change
MOST_CHANGE = 1e15            # a scenario's set or add: forecasts past 1e28 cannot be shown in full
MOST_FOLDS = 1000             # folds: each needs a row, a group of rows, of its own
MOST_SEED = 2**32 - 1         # the random generator's seed is a 32-bit unsigned number
MOST_RUNS = 10_000            # output.warn_after_runs_without_skill
SAMPLE = "month,y;x|1 234.5\t-6\"7\"\n"   # what a CSV holds: its encoding must read it back


def check_ranges(spec: Spec, fail: Fail) -> list[SpecError]:
    """Return a problem for every number past its most and every CSV option pandas cannot use."""
    found = [_most(key, value, most, fail) for key, value, most in _bounded(spec)]
    return ([problem for problem in found if problem is not None] + _text_for_numbers(spec, fail)
            + _csv_problems(spec, fail))


def _text_for_numbers(spec: Spec, fail: Fail) -> list[SpecError]:
    """Refuse a scenario that sets a numeric driver to text ('inf', or 1e5, which YAML reads as
    text without a dot and a signed exponent): the months to forecast hold numbers."""
    numeric = {driver.column for driver in spec.drivers.numeric}
    return [fail(("scenarios", index, "changes", number, "set"),
                 f"'{change.column}' is a numeric driver: set it to a number, not the text "
                 f"{change.set!r} (YAML reads 1e5 as text: write 100000 or 1.0e+5)")
            for index, scenario in enumerate(spec.scenarios)
            for number, change in enumerate(scenario.changes)
            if change.column in numeric and isinstance(change.set, str)]


def _most(key: KeyPath, value: float | int | None, most: float, fail: Fail) -> SpecError | None:
    if value is None or isinstance(value, str) or abs(value) <= most:
        return None
    bound = f"at least {_shown(-most)}" if value < 0 else f"at most {_shown(most)}"
    return fail(key, f"{_shown(value)} is beyond what castline can use here: give {bound}")


def _shown(number: float | int) -> str:
    if isinstance(number, int) and abs(number) >= 10**15:   # written as quoted text, of many digits
        try:
            return f"a number of {len(str(abs(number))):,} digits"
        except ValueError:   # past the interpreter's limit on digits turned into text
            return f"a number of about {round(math.log10(abs(number))):,} digits"
    return f"{number:,}" if isinstance(number, int) else f"{number:g}"


def _bounded(spec: Spec) -> list[tuple[KeyPath, float | int | None, float]]:
    """Return every number of the spec, with its key and its most."""
    given = spec.input
    found: list[tuple[KeyPath, float | int | None, float]] = [
        (("input", "max_rows"), given.max_rows, MOST_ROWS),
        (("input", "max_megabytes"), given.max_megabytes, MOST_MEGABYTES),
        (("input", "sheet"), given.sheet, MOST_SHEETS),
        (("autocorrelation_lags",), spec.autocorrelation_lags, MOST_MONTHS),
        (("output", "warn_after_runs_without_skill"), spec.output.warn_after_runs_without_skill, MOST_RUNS),
    ]
    for column, rule in spec.columns.items():
        found += [(("columns", column, "min"), rule.min, MOST_VALUE),
                  (("columns", column, "max"), rule.max, MOST_VALUE)]
    if spec.forecast is not None:   # ten years of periods: 120 months, 40 quarters, 522 weeks
        written = "periods" if spec.forecast.periods is not None else "months"
        found.append((("forecast", written), spec.forecast.ahead, MOST_AHEAD[spec.input.period]))
    for index, driver in enumerate(spec.drivers.categorical):
        key = ("drivers", "categorical", index)
        found += [(key + ("smoothing",), driver.smoothing, MOST_ROWS),
                  (key + ("group_below",), driver.group_below, MOST_ROWS)]
    for index, lagged in enumerate(spec.drivers.lags):
        key = ("drivers", "lags", index)
        found.append((key + ("start_lag",), lagged.start_lag, MOST_MONTHS))
        found += [(key + (name, place), value, MOST_MONTHS)
                  for name in ("lags", "rolling_means", "differences")
                  for place, value in enumerate(getattr(lagged, name))]
    for index, choice in enumerate(spec.models[1:]):   # the baseline the spec does not write comes first
        key = ("models", _written_index(spec, choice.kind, index))
        found += [(key + ("penalties", place), value, MOST_PENALTY)
                  for place, value in enumerate(choice.penalties or [])]
        found.append((key + ("huber_threshold",), choice.huber_threshold, MOST_SCALE_UNITS))
    for index, scenario in enumerate(spec.scenarios):
        for number, change in enumerate(scenario.changes):
            key = ("scenarios", index, "changes", number)
            found += [(key + ("set",), change.set, MOST_CHANGE), (key + ("add",), change.add, MOST_CHANGE),
                      (key + ("percent",), change.percent, MOST_PERCENT)]
    return found + _validation_bounds(spec)


def _written_index(spec: Spec, kind: str, index: int) -> int:
    written = list(spec.origin.written_models) if spec.origin else []
    return written.index(kind) if kind in written else index


def _validation_bounds(spec: Spec) -> list[tuple[KeyPath, float | int | None, float]]:
    validation = spec.validation
    key = ("validation",)
    if validation.method == "holdout":
        return [(key + ("last_periods",), validation.last_periods, MOST_MONTHS)]
    if validation.method == "rolling_origin":
        return [(key + ("horizon",), validation.horizon, MOST_AHEAD[spec.input.period]),
                (key + ("gap",), validation.gap, MOST_MONTHS),
                (key + ("min_train_periods",), validation.min_train_periods, MOST_MONTHS),
                (key + ("step",), validation.step, MOST_MONTHS),
                (key + ("origins",), validation.origins, MOST_MONTHS)]
    found = [(key + ("folds",), validation.folds, MOST_FOLDS)]
    if validation.method == "kfold":   # a seed below 0 is refused by the schema
        found.append((key + ("seed",), validation.seed, MOST_SEED))
    return found


def _csv_problems(spec: Spec, fail: Fail) -> list[SpecError]:
    """Refuse separators pandas cannot split on and encodings that do not read text."""
    csv = spec.input.csv
    key = ("input", "csv")
    problems = []
    for name in ("delimiter", "decimal", "thousands"):
        mark = getattr(csv, name)
        if mark is None:
            continue
        tab = mark == "\t" and name == "delimiter"
        if (not mark.isprintable() and not tab) or mark in "\"'" or mark.isdigit() or mark.isalpha():
            problems.append(fail(key + (name,), f"{mark!r} cannot separate a CSV's values: give one "
                                 "printable mark that is not a letter, a digit or a quote"
                                 + (" (or \"\\t\" for a tab)" if name == "delimiter" else "")))
    if not _reads_text(csv.encoding):
        problems.append(fail(key + ("encoding",), f"{csv.encoding!r} is not a text encoding a CSV "
                             "can be written in; give one like utf-8, latin-1 or cp1252"))
    return problems


def _reads_text(encoding: str) -> bool:
    """Return whether the encoding writes a CSV's characters and reads them back a byte at a
    time, as a file is read (codecs from bytes to bytes or text to text, like rot13, fail)."""
    try:
        data = SAMPLE.encode(encoding)
        decoder = codecs.getincrementaldecoder(encoding)()
        back = "".join(decoder.decode(data[i:i + 1]) for i in range(len(data)))
        return back + decoder.decode(b"", final=True) == SAMPLE
    except (LookupError, UnicodeError, ValueError, TypeError):
        return False
