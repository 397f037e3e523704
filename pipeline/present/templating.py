"""The template engines of the pages people read (report.html, history.html, summary.md).

Each page's view may name its spacing of periods as ``period`` (a Cadence): the model and column
labels the templates write, and their words for a period, follow it; months when it names none.
"""

from __future__ import annotations

import functools

import jinja2

from pipeline.core.cadence import MONTH
from pipeline.core.catalogue import column_label, model_label
from pipeline.core.formatting import (
    dash_note,
    format_cell,
    format_number,
    format_text,
    has_missing,
    markdown_table,
    missing_in,
    p_phrase,
)


@functools.cache
def page_environment() -> jinja2.Environment:
    """Return the template engine of the HTML pages (the report, the history page): every value
    escaped, an undefined name an error, numbers formatted as the report shows them. One per
    process, so each template is compiled once (jinja2 keeps them)."""
    environment = jinja2.Environment(
        loader=jinja2.PackageLoader("pipeline.present", "templates"),
        autoescape=jinja2.select_autoescape(["html", "j2"], default=True),
        undefined=jinja2.StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    environment.filters["num"] = format_number
    environment.filters["cell"] = format_cell
    environment.filters["text"] = format_text
    environment.filters["p_phrase"] = p_phrase
    environment.filters["has_missing"] = has_missing
    environment.filters["missing_in"] = missing_in
    environment.globals["dash_meaning"] = dash_note   # called with the page's period
    environment.globals["zip"] = zip
    environment.filters["column_label"] = _column_label
    environment.filters["model_label"] = _model_label
    environment.globals["period"] = MONTH   # a page's spacing of periods, months unless its view says
    return environment


@jinja2.pass_context
def _model_label(context, name) -> str:
    """Return a model's label in the words of the page's spacing of periods (``period``)."""
    return model_label(name, context.get("period"))


@jinja2.pass_context
def _column_label(context, name) -> str:
    """Return a column's heading in the words of the page's spacing of periods (``period``)."""
    return column_label(name, context.get("period"))


@jinja2.pass_context
def _markdown_table(context, frame) -> str:
    """Return a table in Markdown, its labels in the words of the page's spacing of periods."""
    return markdown_table(frame, context.get("period"))


def render_markdown(template: str, **context) -> str:
    """Return a Markdown template rendered (Markdown is not HTML: tables escape their pipes)."""
    return _markdown_environment().get_template(template).render(**context)


def compile_templates() -> None:
    """Compile the run's page templates now (a helper preparing to render them does this while
    the run fits: some 0.1 s)."""
    page_environment().get_template("report.html.j2")
    _markdown_environment().get_template("summary.md.j2")


@functools.cache
def _markdown_environment() -> jinja2.Environment:
    environment = jinja2.Environment(loader=jinja2.PackageLoader("pipeline.present", "templates"),
                                     autoescape=False, undefined=jinja2.StrictUndefined,
                                     trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True)
    environment.filters["table"] = _markdown_table
    environment.filters["num"] = format_number
    environment.filters["model_label"] = _model_label
    environment.globals["period"] = MONTH
    return environment
