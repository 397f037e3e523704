"""The design a model is fitted on or predicts from, and the rows' series."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from pipeline.core.cadence import MONTH, Cadence, cadence_of
from pipeline.core.columns import PERIOD, period_ordinals


@dataclass(frozen=True)
class Design:
    """The numbers a model is fitted on or predicts from, with their names."""

    matrix: np.ndarray
    names: list[str]
    series: np.ndarray
    period: np.ndarray | None = None   # period ordinals (see core/cadence.py), when time-ordered
    notes: tuple[str, ...] = ()        # what the features did that a reader should know
    series_level: np.ndarray | None = None   # columns that only tell series apart (SeriesTerms)
    # The rows' series as codes into sorted names, when known already (a window of a larger
    # design); the names may include series that have no row here.
    series_codes: np.ndarray | None = None
    series_names: np.ndarray | None = None
    # Each column's group of terms (a driver's levels or powers, a calendar block), by its label
    term_groups: tuple[str, ...] | None = None
    # The word naming the series levels that are not columns here but absorbed by the fit (a
    # model over very many series: see pipeline/models/absorbed.py); None when they are columns.
    absorbed_levels: str | None = None
    absorbed_at: int = 0   # where their columns would be among the names
    cadence: Cadence = MONTH   # the spacing of the periods

    def rows(self, positions) -> Design:
        """Return the design of some of its rows (positions or a slice), notes kept."""
        return Design(self.matrix[positions], self.names, self.series[positions],
                      None if self.period is None else self.period[positions], self.notes,
                      self.series_level,
                      None if self.series_codes is None else self.series_codes[positions],
                      self.series_names, self.term_groups, self.absorbed_levels, self.absorbed_at,
                      self.cadence)

    def with_series_codes(self) -> Design:
        """Return the design with its series factorised once, for windows to share."""
        codes, names = series_index(self)
        return Design(self.matrix, self.names, self.series, self.period, self.notes,
                      self.series_level, codes, names, self.term_groups, self.absorbed_levels,
                      self.absorbed_at, self.cadence)


def series_index(design) -> tuple[np.ndarray, np.ndarray]:
    """Return each row's series as a code into the sorted names of the series it holds."""
    codes = getattr(design, "series_codes", None)
    if codes is None:
        codes, names = pd.factorize(np.asarray(design.series), sort=True)
        return codes, np.asarray(names, dtype=object)
    return held_series(codes, design.series_names)


def held_series(codes: np.ndarray, names: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return codes and names with the names no row has left out (a window of a larger
    design holds only some of its series), the codes renumbered to match."""
    held = np.bincount(codes, minlength=len(names)) > 0
    if held.all():
        return codes, names
    return (np.cumsum(held) - 1)[codes], names[held]


def series_design(frame: pd.DataFrame, series_column: str) -> Design:
    """Return a design with no terms: the rows' series and months, all a baseline reads."""
    period = period_ordinals(frame) if PERIOD in frame.columns else None
    return Design(np.empty((len(frame), 0)), [], frame[series_column].to_numpy(), period,
                  cadence=cadence_of(frame))
