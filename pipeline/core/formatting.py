"""How castline writes a number or a table for people: one formatter, one table writer.

The report, the summary and the command line all show numbers through
``format_number``, and Markdown tables through ``markdown_table``.
"""

from __future__ import annotations

import math


def format_number(value) -> str:
    """Return a number as the report shows it: four significant digits, n/a when missing."""
    if value is None or value == "":
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:,}"
    if isinstance(value, float):
        if not math.isfinite(value):
            return "n/a"
        if value != 0 and abs(value) < 0.001:
            return f"{value:.3g}"
        return f"{value:,.4g}" if abs(value) >= 1e4 else f"{value:.4g}"
    return str(value)


def format_percent(share: float) -> str:
    """Return a share as a whole percent (0.12 → "12%"), with one decimal where the whole percent
    would read as 0 though it is not (−0.0016 → "-0.2%"), and "0%" for what rounds to 0 even so."""
    for digits in (0, 1):
        text = f"{share:.{digits}%}"
        if text.lstrip("-").strip("0.%"):
            return text
    return "0%"


def markdown_table(frame) -> str:
    """Return a table in Markdown, numbers as the report shows them, pipes escaped."""
    def cell(value) -> str:
        return format_number(value).replace("|", "\\|").replace("\n", " ")
    header = "| " + " | ".join(cell(c) for c in frame.columns) + " |"
    rule = "|" + "|".join(" --- " for _ in frame.columns) + "|"
    body = ["| " + " | ".join(cell(v) for v in row) + " |" for row in frame.itertuples(index=False)]
    return "\n".join([header, rule, *body])
