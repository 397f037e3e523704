"""The spec's calendar terms: features of the period itself."""

from __future__ import annotations

from datetime import date
from typing import Literal

from pydantic import Field

from pipeline.spec.strict import StrictModel


class CalendarFeatures(StrictModel):
    """Features of the month itself, for periodic data."""

    trend: bool = Field(False, description="months since the first month of the training window")
    month_of_year: Literal["none", "dummies", "fourier"] = Field(
        "none", description="dummies: a 0/1 column per month but January; fourier: sine and "
                            "cosine pairs")
    harmonics: int | None = Field(None, ge=1, le=6,
                                  description="fourier: how many sine/cosine pairs (default 2)")
    quarter: bool = Field(False, description="a 0/1 column per quarter but the first")
    working_days: bool = Field(False, description="weekdays in the month, less the closures")
    closures: list[date] = Field(default_factory=list,
                                 description="working_days: dates on which no one works")

    @property
    def effective_harmonics(self) -> int:
        """Return the number of Fourier pairs, 2 unless the spec gives one."""
        return 2 if self.harmonics is None else self.harmonics
