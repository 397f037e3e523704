"""How castline writes a number or a table for people: one formatter, one table writer.

The report, the summary and the command line all show numbers through
``format_number`` (p-values through ``format_p``, a table cell through
``format_cell``, which tells a p-value by its column's name), and Markdown
tables through ``markdown_table``. A value that does not exist reads as a dash,
``MISSING``, and a table holding one says what the dash means (``DASH_NOTE``)
in a line under it.
"""

from __future__ import annotations

import math
import numbers
from decimal import ROUND_HALF_UP, Decimal

from pipeline.core.catalogue import column_label, model_label

MISSING = "—"
DASH_NOTE = ("— no value: not defined for this row (the mean of the training months is not tested against "
             "itself, a check has no p-value or no usual threshold), or too few data to compute it.")


def dash_note(cadence=None) -> str:
    """Return what a dash means in a table, the mean baseline named in the words of ``cadence``
    (a Cadence; DASH_NOTE, of months, when None)."""
    return DASH_NOTE if cadence is None else DASH_NOTE.replace("training months", f"training {cadence.plural}")
TINY = 0.001           # below this a number keeps three significant digits, a p-value reads "< 0.001"
SIGNIFICANT_DIGITS = 4
SMALLEST_DECIMAL = Decimal("0.000001")   # below this a number is written as a power of ten
# From here up a double no longer holds every whole digit (it carries about 16), so a number
# is written as a power of ten with four significant digits (2.587 × 10¹⁴⁷), not in digits
# it does not have.
LARGEST_WHOLE = 1e15
SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")
# Columns holding shares, shown as percents: an interval's level and the share it held.
SHARE_COLUMNS = ("level", "coverage")
P_DIGITS = 2


def is_missing(value) -> bool:
    """Return whether a value does not exist: None, an empty text or the dash, NaN or an
    infinity (and pandas' NA and NaT)."""
    if value is None or (isinstance(value, str) and value in ("", MISSING)):
        return True
    if isinstance(value, (str, bool)):
        return False
    if isinstance(value, numbers.Real):
        return not math.isfinite(value)   # NaN, and an infinity, which no table can show
    try:
        return bool(value != value)   # NaN and NaT are the values unequal to themselves
    except TypeError:                 # pandas' NA will not say whether it equals itself
        return True


def _rounded(value: float, digits: int) -> Decimal:
    """Return a finite value rounded half away from zero to ``digits`` significant digits."""
    exact = Decimal(value)
    rounded = exact.quantize(Decimal(1).scaleb(exact.adjusted() - digits + 1), rounding=ROUND_HALF_UP)
    if rounded.adjusted() > exact.adjusted():     # 0.9996 to two digits is 1.0, not 1.00
        rounded = rounded.quantize(Decimal(1).scaleb(rounded.adjusted() - digits + 1))
    return rounded


def _whole(value: float) -> str:
    return f"{Decimal(value).quantize(Decimal(1), rounding=ROUND_HALF_UP):,}"


def format_number(value) -> str:
    """Return a number as the pages show it: whole numbers in full with thousands separators;
    other numbers to four significant digits without trailing zeros, but never fewer than
    their whole digits (1,234.5 reads "1,235", 12,345.6 reads "12,346"); below 0.001 three
    significant digits; yes or no for a flag; a dash for a value that does not exist."""
    if is_missing(value):
        return MISSING
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, numbers.Integral):
        return f"{int(value):,}"
    if not isinstance(value, numbers.Real):
        return str(value)
    value = float(value)
    if not math.isfinite(value):
        return MISSING
    if value == 0:
        return "0"
    if abs(value) < TINY:
        return _small(value)
    if abs(value) >= LARGEST_WHOLE:
        return _power_of_ten(value, SIGNIFICANT_DIGITS)
    rounded = _rounded(value, SIGNIFICANT_DIGITS)
    if abs(rounded) >= 1000:
        return _whole(value)
    text = f"{rounded:f}"
    return text.rstrip("0").rstrip(".") if "." in text else text


def _small(value: float) -> str:
    """Return a number below 0.001 in size to three significant digits: in decimals down to
    0.000001 (0.0000123), and below that as a power of ten (1.23 × 10⁻⁸), never "1.23e-08"."""
    rounded = _rounded(value, 3)
    if abs(rounded) >= SMALLEST_DECIMAL:
        text = f"{rounded:f}"
        return text.rstrip("0").rstrip(".")
    return _power_of_ten(value, 3)


def _power_of_ten(value: float, digits: int) -> str:
    """Return a number as a mantissa to ``digits`` significant digits (half away from zero,
    trailing zeros dropped) times a power of ten with a superscript exponent."""
    rounded = _rounded(value, digits)
    mantissa = rounded.scaleb(-rounded.adjusted())
    text = f"{mantissa:f}"
    text = text.rstrip("0").rstrip(".") if "." in text else text
    return f"{text} × 10{str(rounded.adjusted()).translate(SUPERSCRIPT)}"


def format_share(value) -> str:
    """Return a share (0 to 1) as a percent to three significant digits, trailing zeros
    dropped: 0.8 reads "80%", 0.8016 "80.2%", 0.0123 "1.23%"; a dash when there is none."""
    if is_missing(value) or isinstance(value, (bool, str)) or not isinstance(value, numbers.Real):
        return format_number(value)
    if float(value) == 0:
        return "0%"
    text = f"{_rounded(float(value) * 100, 3):f}"
    return (text.rstrip("0").rstrip(".") if "." in text else text) + "%"


def format_signed(value) -> str:
    """Return a number as ``format_number`` writes it, with its sign even when positive
    ("+1,235", "-0.5"), as an error or a change is written in words."""
    text = format_number(value)
    return text if text.startswith("-") or text == MISSING or value == 0 else "+" + text


def format_p(value) -> str:
    """Return a p-value as the pages show it: two significant digits, trailing zeros kept
    (0.5 reads "0.50"), "< 0.001" below 0.001, and a dash when there is none."""
    if is_missing(value) or isinstance(value, (bool, str)) or not isinstance(value, numbers.Real):
        return format_number(value)
    value = float(value)
    if not math.isfinite(value):
        return MISSING
    if value < TINY:
        return f"< {TINY:g}"
    return f"{_rounded(value, P_DIGITS):f}"


def p_phrase(value) -> str:
    """Return a p-value in words: "p = 0.037" (two significant digits), "p < 0.001", or
    "p not available" when there is none."""
    shown = format_p(value)
    if shown == MISSING:
        return "p not available"
    return f"p {shown}" if shown.startswith("<") else f"p = {shown}"


def is_p_column(name) -> bool:
    """Return whether a column holds p-values by its name: p, p_value, p_holm, p_best_rule…"""
    name = str(name)
    return name in ("p", "p-value") or name.startswith("p_")


def format_cell(value, column=None) -> str:
    """Return a table cell as the pages show it: a p-value by ``format_p`` when its column
    holds p-values, a share by ``format_share`` when its column holds shares (SHARE_COLUMNS),
    anything else by ``format_number``."""
    if column is not None and is_p_column(column):
        return format_p(value)
    return format_share(value) if column in SHARE_COLUMNS else format_number(value)


def format_text(value) -> str:
    """Return a text cell as the pages show it: the text itself, or a dash when there is none."""
    return MISSING if is_missing(value) else str(value)


def has_missing(rows) -> bool:
    """Return whether any cell of some rows (lists of values) does not exist."""
    return any(is_missing(value) for row in rows for value in row)


def missing_in(rows, columns) -> bool:
    """Return whether any of some rows (mappings) has no value in one of the columns."""
    return any(is_missing(row.get(column)) for row in rows for column in columns)


def format_percent(share: float) -> str:
    """Return a share as a whole percent (0.12 → "12%"), with one decimal where the whole percent
    would read as 0 though it is not (−0.0016 → "-0.2%"), and "0%" for what rounds to 0 even so."""
    for digits in (0, 1):
        text = f"{share:.{digits}%}"
        if text.lstrip("-").strip("0.%"):
            return text
    return "0%"


def markdown_table(frame, cadence=None) -> str:
    """Return a table in Markdown, numbers as the report shows them, pipes escaped, and when a
    cell has no value, the line that says what its dash means under the table. Model and column
    labels name periods in the words of ``cadence`` (a Cadence; months when None)."""
    def cell(value, column=None) -> str:
        if column in ("model", "recommended") and isinstance(value, str):
            value = model_label(value, cadence)
        return format_cell(value, column).replace("|", "\\|").replace("\n", " ")
    header = "| " + " | ".join(cell(column_label(c, cadence)) for c in frame.columns) + " |"
    rule = "|" + "|".join(" --- " for _ in frame.columns) + "|"
    rows = list(frame.itertuples(index=False))
    body = ["| " + " | ".join(cell(v, c) for v, c in zip(row, frame.columns)) + " |" for row in rows]
    note = ["", dash_note(cadence)] if has_missing(rows) else []
    return "\n".join([header, rule, *body, *note])
