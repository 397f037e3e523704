"""The pages a run folder holds for people: summary.md and report.html, from its files."""

from __future__ import annotations

from pathlib import Path

from pipeline.present.report import render_report
from pipeline.present.run_files import load_run_files
from pipeline.present.summary import render_summary

PAGES = ("summary.md", "report.html")


def render_pages(folder: str | Path) -> dict[str, str]:
    """Return every page of a run folder, rendered from its files alone: {file name: text}.

    Raises UserError when the folder is not a complete run folder.
    """
    files = load_run_files(folder)
    return {"summary.md": render_summary(files), "report.html": render_report(files)}
