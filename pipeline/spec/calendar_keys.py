"""The spec's calendar terms: features of the period itself."""

from __future__ import annotations

from datetime import date
from typing import ClassVar, Literal

from pydantic import Field

from pipeline.spec.strict import StrictModel


class CalendarFeatures(StrictModel):
    """Features of the period itself: its place in time and in its year, and its days."""

    trend: bool = Field(False, description="periods since the first period of the training window")
    season: Literal["none", "dummies", "fourier"] | None = Field(
        None, description="the period's place in its year (month, quarter or ISO week of the "
                          "year): dummies, a 0/1 column per place but the first; fourier, sine "
                          "and cosine pairs")
    month_of_year: Literal["none", "dummies", "fourier"] | None = Field(
        None, description="monthly data: another name for season")
    harmonics: int | None = Field(None, ge=1, le=26,
                                  description="fourier: how many sine/cosine pairs (default 2; at "
                                              "most 6 for months, 2 for quarters, 26 for weeks)")
    quarter: bool = Field(False, description="monthly or weekly data: a 0/1 column per quarter "
                                             "but the first")
    working_days: bool = Field(False, description="weekdays in the period, less the closures")
    closures: list[date] = Field(default_factory=list,
                                 description="working_days: dates on which no one works")
    holidays: list[str] = Field(default_factory=list,
                                description="moving holidays by name (easter, ...): each adds "
                                            "the share of the holiday's days in the period")
    events: dict[str, list[date]] = Field(
        default_factory=dict, description="dated events of your own by name: each adds how many "
                                          "of its dates fall in the period")

    # Keys added with quarters and weeks, which a model file stores only when given.
    STORED_ONLY_WHEN_GIVEN: ClassVar[tuple[str, ...]] = ("season", "holidays", "events")

    @property
    def effective_harmonics(self) -> int:
        """Return the number of Fourier pairs, 2 unless the spec gives one."""
        return 2 if self.harmonics is None else self.harmonics

    @property
    def seasonal(self) -> str:
        """Return the season's terms: ``season``, else its monthly name ``month_of_year``."""
        return self.season or self.month_of_year or "none"

    @property
    def any_terms(self) -> bool:
        """Return whether the calendar asks for any term at all."""
        return bool(self.trend or self.seasonal != "none" or self.quarter or self.working_days
                    or self.holidays or self.events)
