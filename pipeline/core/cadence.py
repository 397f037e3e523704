"""The spacing of a forecast's periods: month, quarter or ISO week.

Every row of the checked frame carries its period as a pandas ``Period`` of the spec's
spacing (``input.period``). Code that counts periods reads them as ordinals, which step
by one per period whatever the spacing: lags, rolling means, gaps, the horizon and the
backtest's windows need nothing more. What does differ lives here: the pandas frequency,
how far back the same period last year is, where in its year a period falls, how a period
is written (``2024-03``, ``2024Q1``, ``2024-W05``) and the words for it.

A week is an ISO 8601 week: Monday to Sunday, numbered within the ISO year whose Thursday it
holds, so some years have 53. The same week last year is the week 52 weeks earlier: 364 days
back, which shares six of its seven days (five across 29 February) with the same dates a
year before, whatever the week's number.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from pipeline.core.columns import PERIOD

DAYS_PER_YEAR = 365.25


@dataclass(frozen=True)
class Cadence:
    """One spacing of periods and everything that depends on it."""

    name: str                 # "month": the spec's word and the singular in sentences
    plural: str               # "months"
    freq: str                 # the pandas frequency of the periods
    season_lag: int           # periods back to the same period a year earlier
    per_year: float           # periods in a year on average: 12, 4, 365.25/7
    levels: range             # the positions in a year (months 1-12, quarters 1-4, weeks 1-53)
    pattern: str              # how a period is written, as a regular expression

    @property
    def season_word(self) -> str:
        """Return "month of year" and the like: what a period's place in its year is called."""
        return f"{self.name} of year"

    def count(self, number: float) -> str:
        """Return "1 month", "3 weeks": a number of periods in words."""
        return f"{number:g} {self.name if number == 1 else self.plural}"

    def periods(self, ordinals) -> pd.PeriodIndex:
        """Return the periods of ordinals (steps since the period holding 1970-01-01)."""
        return pd.PeriodIndex.from_ordinals(np.asarray(ordinals, dtype=np.int64), freq=self.freq)

    def period(self, ordinal) -> pd.Period:
        """Return the period of one ordinal."""
        return pd.Period(ordinal=int(ordinal), freq=self.freq)

    def of_dates(self, dates) -> pd.Series:
        """Return the period holding each date of a datetime Series."""
        return dates.dt.to_period(self.freq)

    def label(self, value) -> str:
        """Return how castline writes a period (an ordinal or a Period)."""
        period = value if isinstance(value, pd.Period) else self.period(value)
        if self.name == "week":
            year, week, _ = period.start_time.isocalendar()
            return f"{year}-W{week:02d}"
        return str(period)

    def labels(self, ordinals) -> list[str]:
        """Return the labels of many ordinals (each distinct period written once)."""
        unique, inverse = np.unique(np.asarray(ordinals, dtype=np.int64), return_inverse=True)
        if self.name == "week":
            iso = pd.DatetimeIndex(self.first_days(unique)).isocalendar()
            written = [f"{year}-W{week:02d}" for year, week in zip(iso["year"], iso["week"])]
        else:
            written = list(self.periods(unique).astype(str))
        return np.asarray(written, dtype=object)[inverse.reshape(-1)].tolist()

    def parse(self, text: str) -> pd.Period:
        """Return the period a label written by ``label`` names; ValueError if it is none."""
        text = str(text).strip()
        if not re.fullmatch(self.pattern, text):
            raise ValueError(f"{text!r} is not a {self.name} written as castline writes one")
        if self.name == "week":
            year, week = int(text[:4]), int(text[6:])
            return pd.Period(pd.Timestamp.fromisocalendar(year, week, 1), freq=self.freq)
        return pd.Period(text, freq=self.freq)

    def of_year(self, ordinals) -> np.ndarray:
        """Return each period's place in its year: month 1-12, quarter 1-4 or ISO week 1-53."""
        periods = self.periods(ordinals)
        if self.name == "week":
            return np.asarray(periods.start_time.isocalendar().week, dtype=np.int64)
        return np.asarray(periods.month if self.name == "month" else periods.quarter, dtype=np.int64)

    def first_days(self, ordinals) -> np.ndarray:
        """Return each period's first day (datetime64[D])."""
        return np.asarray(self.periods(ordinals).start_time.values, dtype="datetime64[D]")

    def days_in(self, ordinal) -> np.ndarray:
        """Return the days of one period (datetime64[D])."""
        first = self.first_days([ordinal, int(ordinal) + 1])
        return np.arange(first[0], first[1])


MONTH = Cadence("month", "months", "M", 12, 12.0, range(1, 13), r"\d{4}-\d{2}")
QUARTER = Cadence("quarter", "quarters", "Q-DEC", 4, 4.0, range(1, 5), r"\d{4}Q[1-4]")
WEEK = Cadence("week", "weeks", "W-SUN", 52, DAYS_PER_YEAR / 7, range(1, 54), r"\d{4}-W\d{2}")

CADENCES = {cadence.name: cadence for cadence in (MONTH, QUARTER, WEEK)}


def cadence_named(name: str) -> Cadence:
    """Return the cadence the spec's ``input.period`` names."""
    return CADENCES[name]


def cadence_of_freq(freq) -> Cadence:
    """Return the cadence of a pandas period frequency, Period or period dtype."""
    if isinstance(freq, pd.Period):
        text = freq.freqstr
    elif isinstance(freq, pd.PeriodDtype):
        text = pd.Period(ordinal=0, freq=freq.freq).freqstr
    else:
        text = pd.Period(ordinal=0, freq=freq).freqstr
    for cadence in CADENCES.values():
        if text == cadence.freq:
            return cadence
    raise ValueError(f"no castline period has the frequency {text!r}")


def cadence_of_label(text: str) -> Cadence:
    """Return the cadence whose labels look like ``text`` (``2024-03``, ``2024Q1``, ``2024-W05``)."""
    for cadence in CADENCES.values():
        if re.fullmatch(cadence.pattern, str(text).strip()):
            return cadence
    raise ValueError(f"{text!r} is not a period as castline writes one")


def parse_label(text: str) -> pd.Period:
    """Return the period any castline label names, its spacing read from how it is written."""
    return cadence_of_label(text).parse(text)


def label_of(period: pd.Period) -> str:
    """Return how castline writes a pandas Period of any castline spacing."""
    return cadence_of_freq(period.freq).label(period)


def cadence_of(frame: pd.DataFrame) -> Cadence:
    """Return the cadence of a frame's period column (castline's own), monthly when it has none."""
    if PERIOD not in frame.columns or not isinstance(frame[PERIOD].dtype, pd.PeriodDtype):
        return MONTH
    return cadence_of_freq(frame[PERIOD].dtype)


def period_labels(periods) -> list[str]:
    """Return how castline writes each of a Series or index of Periods (any castline spacing)."""
    index = pd.PeriodIndex(periods)
    return cadence_of_freq(index.dtype).labels(index.asi8)


# Readers of labels alone, for code that holds only what castline wrote (CSVs, JSON, the ledger).

def cadence_of_labels(labels, default: Cadence = MONTH) -> Cadence:
    """Return the spacing of a column of period labels (its first that reads as one), else ``default``."""
    for text in pd.Series(labels, dtype=object).dropna().astype(str).head(20):
        try:
            return cadence_of_label(text)
        except ValueError:
            continue
    return default


def year_before(label) -> str:
    """Return the label of the same period a year earlier: 12 months, 4 quarters or 52 weeks back."""
    cadence = cadence_of_label(label)
    return cadence.label(cadence.parse(label) - cadence.season_lag)


def first_days(labels) -> pd.DatetimeIndex:
    """Return the first day of each labelled period (as a date axis places it)."""
    texts = pd.Series(labels, dtype=object).astype(str)
    cadence = cadence_of_labels(texts)
    starts = {text: cadence.parse(text).start_time for text in texts.unique()}
    return pd.DatetimeIndex([starts[text] for text in texts])


def ordinal_of(label) -> int:
    """Return a labelled period's ordinal (steps of its spacing since the period of 1970-01-01)."""
    return int(parse_label(label).ordinal)
