"""A run folder's files, read back for the pages people read (report.html, summary.md).

Both pages are rendered from these files alone, never from a run's memory, so
``castline report RUN_FOLDER`` rebuilds them exactly as the run wrote them.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
from pandas._libs.parsers import STR_NA_VALUES  # pandas' missing texts

from pipeline.core.cadence import Cadence, cadence_of_labels
from pipeline.core.errors import UserError
from pipeline.present.run_checks import TABLES, check_document, check_table, check_text

REQUIRED = ["metrics.json", "fingerprint.json", "spec.yaml", "predictions.csv", "forecast.csv",
            "coefficients.csv", "history.csv"]
# Columns that hold names (of series, months, origins, models, scenarios), read as text. A name
# that would start a spreadsheet formula keeps the single quote the run's writer put in front
# (record.safe_csv): it reads back as the CSV shows it, the same in every table.
NAME_COLUMNS = ("series", "period", "origin", "model", "scenario")
NAMED_TABLES = ("predictions.csv", "forecast.csv", "history.csv", "scenarios.csv", "residuals.csv",
                "series.csv", "realised.csv")


def _read_csv(folder: Path, name: str, text_columns: tuple[str, ...] = ()) -> pd.DataFrame | None:
    path = folder / name
    if not path.exists() or path.stat().st_size == 0:
        return None
    try:
        with path.open("rb") as handle:
            header = handle.readline().decode("utf-8")
            handle.seek(max(path.stat().st_size - 1, 0))
            check_text(path, handle.read(1), header.rstrip("\r\n"))
        # Whole-column type inference: a column empty for most rows (a per-series model's
        # series column in coefficients.csv) is read the same however long the file is.
        # Names are read as text from the start: series '007' stays '007', not 7.
        # Only an empty cell of a name is missing: a series or level 'NA' (input.csv.missing_values
        # keeps one) stays its name; the other columns read pandas' usual missing texts.
        header = pd.read_csv(path, nrows=0).columns if text_columns else ()
        missing = {"keep_default_na": False, "na_values": {
            column: [""] if column in text_columns else sorted(STR_NA_VALUES) for column in header}} \
            if text_columns else {"keep_default_na": True}
        frame = pd.read_csv(path, low_memory=False, dtype=dict.fromkeys(text_columns, str), **missing)
    except pd.errors.EmptyDataError:
        return None
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        raise UserError(f"{path}: cannot be read as a table castline wrote ({' '.join(str(exc).split())}); "
                        "it was left as it is") from None
    except OSError as exc:
        raise UserError(f"{path}: cannot be read: {exc.strerror or exc}") from None
    return frame if len(frame.columns) else None


@dataclass(frozen=True)
class RunFiles:
    """A run folder's JSON documents, spec text and tables (each read once, when first asked)."""

    folder: Path
    metrics: dict
    fingerprint: dict
    spec_text: str
    track: dict | None = None     # track_record.json: what the ledger said of earlier runs
    _tables: dict = field(default_factory=dict, repr=False, compare=False)

    def table(self, name: str) -> pd.DataFrame | None:
        """Return a CSV file of the run as a table (None when absent or empty)."""
        if name not in self._tables:
            named = name in NAMED_TABLES
            frame = _read_csv(self.folder, name, NAME_COLUMNS if named else ())
            check_table(self.folder / name, frame)
            if frame is not None and named:
                for column in NAME_COLUMNS:
                    if column in frame.columns:
                        frame[column] = frame[column].astype(str)
            self._tables[name] = frame
        return self._tables[name]


    def cadence(self) -> Cadence:
        """Return the spacing of the run's periods, read from how its labels are written
        (``2024-03``, ``2024Q1``, ``2024-W05``): months for a run folder that holds none."""
        if "cadence" not in self._tables:
            labels = [str(self.fingerprint.get(key)) for key in ("first_period", "last_period")
                      if self.fingerprint.get(key) is not None]
            for name in ("history.csv", "forecast.csv"):
                frame = self.table(name)
                if frame is not None and "period" in frame.columns:
                    labels += list(frame["period"].head(5))
            self._tables["cadence"] = cadence_of_labels(labels)
        return self._tables["cadence"]

    def _model_document(self) -> dict:
        """Return model.json as read ({} when absent: a run folder of an older castline)."""
        if "model.json" not in self._tables:
            path = self.folder / "model.json"
            self._tables["model.json"] = _document(path) if path.exists() else {}
        return self._tables["model.json"]

    def target_transforms(self) -> tuple[str, dict[str, str]]:
        """Return the target's name and each fitted model's target transform ('log', 'log1p'),
        as model.json records them (models fitted on the target as it is are left out); ('',
        {}) when the run folder has no readable model.json."""
        document = self._model_document()
        models = document.get("models") if isinstance(document.get("models"), dict) else {}
        kinds = {name: model["target_transform"]["kind"] for name, model in models.items()
                 if isinstance(model, dict) and isinstance(model.get("target_transform"), dict)
                 and model["target_transform"].get("kind") not in (None, "none")}
        return str(document.get("target", "")), kinds

    def series_columns(self) -> list[str]:
        """Return the columns that name a series, as model.json records them ([] without it)."""
        columns = self._model_document().get("series_columns")
        return [str(c) for c in columns] if isinstance(columns, list) else []


def load_run_files(folder: str | Path) -> RunFiles:
    """Return a run folder's files, read back.

    Raises UserError (one line naming the folder) when it is not a complete run folder or a
    file of it cannot be read.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise UserError(f"{folder}: no such run folder")
    missing = [name for name in REQUIRED if not (folder / name).exists()]
    if missing:
        raise UserError(f"{folder}: not a complete castline run folder (missing {', '.join(missing)})")
    metrics = _document(folder / "metrics.json")
    fingerprint = _document(folder / "fingerprint.json")
    try:
        spec_text = (folder / "spec.yaml").read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise UserError(f"{folder / 'spec.yaml'}: cannot be read ({exc})") from None
    track_file = folder / "track_record.json"
    track = _document(track_file) if track_file.exists() else None
    files = RunFiles(folder, metrics, fingerprint, spec_text, track)
    # Every table and model.json read (and checked) now, before any page is drawn.
    for name in TABLES:
        files.table(name)
    files.target_transforms()
    return files


def _document(path: Path) -> dict:
    """Return a run folder's JSON document, read and checked (run_checks)."""
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise UserError(f"{path}: cannot be read as JSON ({' '.join(str(exc).split())}); the run file "
                        "was changed by hand or damaged, and was left as it is") from None
    check_document(path, document)
    return document
