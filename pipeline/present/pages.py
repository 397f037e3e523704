"""The pages a run folder holds for people: summary.md and report.html, from its files."""

from __future__ import annotations

from pathlib import Path

from pipeline.present.picture_jobs import PictureJobs
from pipeline.present.report import render_report
from pipeline.present.run_files import load_run_files
from pipeline.present.summary import render_summary

PAGES = ("summary.md", "report.html")
SUMMARY_WEIGHT = 6   # the summary's time for the demo, in the report's jobs' unit (hundredths of a second)


def render_pages(folder: str | Path) -> dict[str, str]:
    """Return every page of a run folder, rendered from its files alone: {file name: text}.

    Raises UserError when the folder is not a complete run folder.
    """
    files = load_run_files(folder)
    jobs = PictureJobs()
    summary = jobs.later(SUMMARY_WEIGHT, render_summary, files)   # made beside the report's pictures
    report = render_report(files, jobs)
    return {"summary.md": jobs.result(summary), "report.html": report}
