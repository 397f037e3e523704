"""The pages a run folder holds for people: summary.md and report.html."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from pipeline.present.report import render_report
from pipeline.present.summary import render_summary
from pipeline.present.track_record import with_track_record
from pipeline.review.track_record import TrackRecord
from pipeline.spec import Spec
from pipeline.stages.evaluate import Evaluation
from pipeline.stages.forecast import ForecastResult


def page_renderer(spec: Spec, evaluation: Evaluation, forecast: ForecastResult,
                  track: TrackRecord | None):
    """Return the function the run folder writer calls, once the data files are staged, to
    render the pages: (staging folder, run id, created, fingerprint, fallbacks) -> pages."""
    def pages(staging: Path, run_id: str, created: str, data_print: dict,
              fallbacks: pd.DataFrame) -> dict[str, str]:
        summary = render_summary(spec, run_id, created, data_print, evaluation, forecast, fallbacks)
        return {"summary.md": with_track_record(summary, track), "report.html": render_report(staging)}
    return pages
