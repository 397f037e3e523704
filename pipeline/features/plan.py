"""The feature plan: turn driver columns into the numeric design a linear model fits.

Every transformer here follows the scikit-learn contract: ``fit`` learns from
the rows of one training window only (levels, reference levels, quantiles,
fill values, target means, means and standard deviations, the first month of
the trend, the values lags are taken from) and keeps what it learned in
attributes ending in ``_``; ``transform`` applies what was learned and never
learns. ``get_feature_names_out()`` names every column so that a coefficient
reads without a legend (``region: South``, ``month: March``,
``bags_sold, 12 months earlier``).

A fitted ``FeaturePlan`` remembers the window it was fitted on. Lags of the
target are taken only from the target values of that window, or from values
the caller hands over explicitly in ``known`` (predictions fed back, for a
recursive multi-step forecast; see ``with_predictions``). A target value in
the rows being transformed is never read, so transforming the rows after the
origin cannot see their actuals. Drivers of the rows being transformed are
inputs the analyst supplies for those months, and are used, as the unlagged
drivers are.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager

import numpy as np
import pandas as pd

from pipeline.core.cadence import cadence_of, label_of
from pipeline.core.catalogue import LINEAR_KINDS
from pipeline.core.columns import PERIOD, loaded_name, period_ordinals, plain_name
from pipeline.core.design import Design
from pipeline.core.errors import DataError, ModelFileError, SpecError
from pipeline.core.stored import FORMAT_VERSION, StoredFields, encode, encode_settings
from pipeline.features.calendar import (
    FourierTerms,
    MonthDummies,
    QuarterDummies,
    TrendTerm,
    WeekDummies,
    WorkingDays,
)
from pipeline.features.categorical import OneHotEncoder, OrdinalEncoder, TargetMeanEncoder
from pipeline.features.future import FutureEstimates
from pipeline.features.holidays import EventCounts, HolidayShares
from pipeline.features.interactions import InteractionTerms
from pipeline.features.lags import LagFeatures
from pipeline.features.numeric import NumericTerms
from pipeline.features.rows import first_row, which_rows
from pipeline.features.series import SeriesTerms, series_effects_of
from pipeline.features.target import TargetTransform
from pipeline.spec import (
    CalendarFeatures,
    CategoricalDriver,
    KeyPath,
    LaggedColumn,
    NumericDriver,
    SeriesEffects,
    Spec,
    format_key_path,
)

# Every class a fitted plan's parts may be, by the name a model file gives it: the only
# classes a model file's plan is rebuilt from (each with to_dict and from_dict).
PART_CLASSES: dict[str, type] = {cls.__name__: cls for cls in (
    NumericTerms, OneHotEncoder, OrdinalEncoder, TargetMeanEncoder, InteractionTerms, TrendTerm,
    MonthDummies, FourierTerms, QuarterDummies, WeekDummies, WorkingDays, HolidayShares, EventCounts,
    SeriesTerms, LagFeatures)}


def unplaced_spec_error(key: KeyPath, message: str) -> SpecError:
    return SpecError(message, key=format_key_path(key))


class FeaturePlan:
    """Every feature the spec asks for, in a fixed order, fitted together on one window.

    Order of the columns: numeric drivers, categorical drivers, interactions,
    calendar, lags. Use ``training_design`` for the rows a model is fitted on
    (rows whose lags are unavailable are left out and said so) and
    ``transform`` for the rows it predicts.
    """

    def __init__(self, numeric: list[NumericDriver], categorical: list[CategoricalDriver],
                 series_column: str, *, interactions: list[list[str]] = (),
                 calendar: CalendarFeatures | None = None, lags: list[LaggedColumn] = (),
                 target: str | None = None, target_transform: str = "none",
                 error: Callable[[KeyPath, str], SpecError] = unplaced_spec_error,
                 source: str | None = None, series_effects=None, absorbable: bool = False,
                 period: str = "month") -> None:
        self.period = period   # the spacing of the rows: month, quarter or week
        self.numeric = list(numeric)
        self.categorical = list(categorical)
        self.series_column = series_column
        self.interactions = [list(pair) for pair in interactions]
        self.calendar = calendar
        self.lags = list(lags)
        self.target = target
        self.target_transform = target_transform
        self.error = error
        self.source = source
        self.series_effects = series_effects   # a SeriesEffects spec section, or None for none
        # Whether every model over all series can absorb the series levels (see
        # _check_series_terms): OLS with an intercept can, a penalised fit cannot.
        self.absorbable = absorbable
        drivers = {d.column for d in self.numeric} | {d.column for d in self.categorical}
        # Columns castline estimates after the origin (numeric drivers, and lagged columns
        # that are not drivers), by rule; and lagged columns nobody gives ahead, whose lags
        # may read only months up to the origin, as the target's do.
        self.estimated = {d.column: d.future for d in self.numeric
                          if d.future not in (None, "given")}
        self.estimated.update({lagged.column: lagged.future for lagged in self.lags
                               if lagged.column != target and lagged.column not in drivers
                               and lagged.future not in (None, "given")})
        self.unknown_ahead = {lagged.column for lagged in self.lags
                              if lagged.column != target and lagged.column not in drivers
                              and lagged.future is None}

    # -- fitting

    @contextmanager
    def _located(self) -> Iterator[None]:
        """Name the input file in a DataError raised by a transformer, which cannot know it."""
        try:
            yield
        except DataError as problem:
            if problem.file is None and self.source is not None:
                raise DataError(problem.message, file=self.source, column=problem.column,
                                row=problem.row) from None
            raise

    @property
    def target_scale(self) -> TargetTransform:
        return TargetTransform(self.target or "the target", self.target_transform)

    def _target_values(self, frame: pd.DataFrame) -> np.ndarray | None:
        if self.target is None or self.target not in frame.columns:
            return None
        return self.target_scale.forward(frame[self.target].to_numpy(float))

    def fit(self, frame: pd.DataFrame) -> FeaturePlan:
        with self._located():
            self.target_scale.check(frame)
            y = self._target_values(frame)
            numeric = {d.column: NumericTerms(d.column, d.degree, d.transform, d.clip_quantiles,
                                              d.missing, d.standardise).fit(frame)
                       for d in self.numeric}
            categorical = {d.column: self._encoder(d).fit(frame, y) for d in self.categorical}
            drivers = {**numeric, **categorical}
            parts = [*numeric.values(), *categorical.values()]
            parts += [InteractionTerms(drivers[a], drivers[b]).fit(frame) for a, b in self.interactions]
            parts += [part.fit(frame) for part in self._calendar_parts()]
            effects = self.series_effects
            if effects is not None and (effects.intercepts or effects.slopes):
                terms = SeriesTerms(self.series_column, effects.intercepts,
                                    [numeric[column] for column in effects.slopes]).fit(frame)
                if plain_name(self.series_column) in categorical:   # the user's driver keeps its name
                    terms.word = f"the {plain_name(self.series_column)}"
                self._check_series_terms(terms, frame)
                parts.append(terms)
            self.row_parts_ = parts
            self.lag_parts_ = [self._lag_part(index, lagged).fit(
                self._lag_values(lagged.column, frame, numeric))
                for index, lagged in enumerate(self.lags)]
            self.parts_ = [*self.row_parts_, *self.lag_parts_]
            self.numeric_parts_ = numeric
            self.window_end_ = (cadence_of(frame).period(period_ordinals(frame).max())
                                if PERIOD in frame.columns and len(frame) else None)
            self.future_ = (FutureEstimates(self.estimated, self.series_column).fit(frame)
                            if self.estimated and self.window_end_ is not None else None)
        return self

    def estimate_future(self, frame: pd.DataFrame, *, every_row: bool | np.ndarray = False) -> pd.DataFrame:
        """Return the rows with every driver castline estimates replaced, in the months after
        the window (``every_row``: in every row, all of them to forecast), by its estimate from
        the window (see ``FutureEstimates``); the rows as they are without such drivers.
        ``transform`` reads values as it is handed them."""
        return frame if self.future_ is None else self.future_.apply(frame, every_row=every_row)

    # Series columns are dense: beyond this many cells in a window's design, the fit would
    # need gigabytes. OLS then absorbs the series levels (the within transformation, which
    # gives the same fit without their columns); series slopes stay columns, and a penalised
    # model cannot absorb its levels: for those a model per series is the way.
    LARGEST_SERIES_DESIGN = 100_000_000

    @property
    def absorbs_levels(self) -> bool:
        """Whether the fitted plan's series levels are absorbed by the fit, not columns."""
        return any(isinstance(part, SeriesTerms) and part.absorbed_ for part in self.parts_)

    def _check_series_terms(self, terms: SeriesTerms, frame: pd.DataFrame) -> None:
        columns = len(terms.get_feature_names_out())
        if terms.intercepts and self.absorbable and columns * len(frame) > self.LARGEST_SERIES_DESIGN:
            terms.absorbed_ = True
            columns = len(terms.get_feature_names_out())
        if columns * len(frame) > self.LARGEST_SERIES_DESIGN:
            way = ("drop the series slopes" if terms.absorbed_ else
                   "use OLS (which absorbs the series levels)" if terms.intercepts else "drop the slopes")
            raise self.error(("drivers", "series_effects"),
                             f"{len(terms.levels_) + 1} series give the models over all series "
                             f"{columns} series columns on {len(frame)} rows, about "
                             f"{columns * len(frame) * 8 / 1e9:.0f} GB; fit per series instead "
                             f"(models: [{{kind: ols, per_series: true}}]) or {way}")

    def _encoder(self, driver: CategoricalDriver):
        if driver.encoding == "ordinal":
            return OrdinalEncoder(driver.column, driver.order, driver.reference, driver.unseen)
        if driver.encoding == "target_mean":
            if self.target is None:
                raise ValueError("target-mean encoding needs the plan to know the target column")
            return TargetMeanEncoder(driver.column, driver.effective_smoothing, driver.reference,
                                     driver.group_below, driver.unseen, self.target_scale.name)
        return OneHotEncoder(driver.column, driver.reference, driver.group_below, driver.unseen)

    def _calendar_parts(self) -> list:
        calendar = self.calendar
        if calendar is None:
            return []
        parts: list = [TrendTerm()] if calendar.trend else []
        if calendar.seasonal == "dummies":
            parts.append({"month": MonthDummies, "quarter": QuarterDummies, "week": WeekDummies}[self.period]())
        elif calendar.seasonal == "fourier":
            parts.append(FourierTerms(calendar.effective_harmonics, self.period))
        if calendar.quarter:
            parts.append(QuarterDummies())
        if calendar.working_days:
            parts.append(WorkingDays(calendar.closures))
        if calendar.holidays:
            parts.append(HolidayShares(calendar.holidays))
        if calendar.events:
            parts.append(EventCounts(calendar.events))
        return parts

    def _lag_part(self, index: int, lagged: LaggedColumn) -> LagFeatures:
        of_target = lagged.column == self.target
        label = self.target_scale.name if of_target else lagged.column
        return LagFeatures(lagged.column, lagged.lags, lagged.rolling_means, lagged.differences,
                           lagged.start_lag, label=label, of_target=of_target,
                           key=("drivers", "lags", index), period=self.period)

    def _lag_values(self, column: str, frame: pd.DataFrame, numeric: dict | None = None) -> pd.Series:
        """Return a lagged column's values keyed by (series, month): the target on the models'
        scale (rows without it left out), a driver filled as the driver is."""
        numeric = self.numeric_parts_ if numeric is None else numeric
        if column == self.target:
            rows = frame[frame[column].notna()]
            values = self.target_scale.forward(rows[column].to_numpy(float))
        else:
            rows = frame
            values = rows[column].to_numpy(float)
            fill = numeric[column].fill_value_ if column in numeric else None
            if fill is not None:
                values = np.where(np.isnan(values), fill, values)
        index = pd.MultiIndex.from_arrays([rows[self.series_column].to_numpy(), period_ordinals(rows)])
        return pd.Series(values, index=index, dtype=float)

    # -- transforming

    def _origin(self, known: pd.DataFrame | None) -> int | None:
        """Return the last month whose target is known: the window's, or a later one in known."""
        months = [self.window_end_.ordinal] if self.window_end_ is not None else []
        if known is not None and self.target in known.columns:
            has_target = known[self.target].notna().to_numpy()
            if has_target.any():
                months.append(int(period_ordinals(known)[has_target].max()))
        return max(months) if months else None

    def _check_reach(self, frame: pd.DataFrame, known: pd.DataFrame | None) -> None:
        """Stop with a SpecError if a lag of the target, or of a column nobody gives ahead,
        reads a month after the origin."""
        if not len(frame):
            return
        for part in self.lag_parts_:
            if part.of_target:
                origin, remedy = self._origin(known), (
                    "the target must be at least {ahead} months (or multi_step: recursive feeds "
                    "predictions back month by month)")
            elif part.column in self.unknown_ahead:
                origin, remedy = self._origin(None), (
                    f"'{part.column}' must be at least {{ahead}} months, or set future on this "
                    "entry: given (its values in the months predicted are in the data) or a rule "
                    "to estimate them, such as month_mean")
            else:
                continue
            if origin is None:
                continue
            ahead = int((period_ordinals(frame) - origin).max())
            for back, key, name in part.reaches():
                if back < ahead:
                    cadence = cadence_of(frame)
                    at = cadence.label(origin)
                    raise self.error(key, f"'{name}' reaches past the forecast origin ({at}): the "
                                          f"{cadence.plural} predicted run up to "
                                          f"{cadence.count(ahead)} after it, so "
                                          f"each lag of {remedy.format(ahead=ahead)}")

    def feature_table(self, frame: pd.DataFrame, known: pd.DataFrame | None = None) -> pd.DataFrame:
        """Return the features of the rows as a table (columns named, the frame's index),
        with NaN where a lag is unavailable.

        ``known`` holds rows whose target is known beyond the training window
        (predictions fed back, see ``with_predictions``); target values in
        ``frame`` itself are never read.
        """
        with self._located():
            self._check_reach(frame, known)
            blocks = [part.transform(frame) for part in self.row_parts_]
            if self.lag_parts_:
                series = frame[self.series_column].to_numpy()
                months = period_ordinals(frame)
                for part in self.lag_parts_:
                    blocks.append(part.transform(series, months, self._extra_values(part, frame, known)))
        matrix = np.hstack(blocks) if blocks else np.empty((len(frame), 0))
        return pd.DataFrame(matrix, index=frame.index, columns=self.get_feature_names_out())

    def _extra_values(self, part: LagFeatures, frame: pd.DataFrame,
                      known: pd.DataFrame | None) -> pd.Series | None:
        """Return the values a lag may read beyond the window: for the target, those in
        known only; for a column nobody gives ahead, none; for a driver, those of the rows
        themselves and of known."""
        if part.column in self.unknown_ahead:
            return None
        sources = [] if part.of_target else [frame]
        if known is not None:
            sources.append(known)
        if not sources:
            return None
        return pd.concat([self._lag_values(part.column, source) for source in sources])

    def estimated_lag_notes(self, furthest: int) -> list[str]:
        """Return a note for each lag of an estimated driver shorter than the months predicted
        ahead (``furthest``): beyond its reach it reads castline's estimates."""
        notes = []
        for part in self.lag_parts_:
            rule = self.estimated.get(part.column)
            for back, _, name in part.reaches() if rule else ():
                if back < furthest:
                    notes.append(f"'{name}' reads castline's estimate of {part.column} ({rule}), "
                                 f"not its actual value, for months more than {back} ahead of "
                                 "the origin")
        return notes

    def _notes(self, frame: pd.DataFrame) -> list[str]:
        return [note for part in self.row_parts_ if hasattr(part, "notes") for note in part.notes(frame)]

    # Beyond this size a term's square, summed over many rows, overflows a float; the
    # check stage holds the input's own numbers to the same bound.
    LARGEST_TERM = 1e150

    def _design(self, frame: pd.DataFrame, matrix: np.ndarray, notes: list[str]) -> Design:
        if matrix.size:
            with np.errstate(invalid="ignore"):
                too_large = ~(np.abs(matrix) <= self.LARGEST_TERM)   # also catches inf and NaN
            if too_large.any():
                row, column = (int(i) for i in np.argwhere(too_large)[0])
                at = frame.iloc[row]
                raise DataError(f"the term '{self.get_feature_names_out()[column]}' is "
                                f"{matrix[row, column]:g} for {label_of(at[PERIOD])} (series "
                                f"'{at[self.series_column]}'), too large to fit; rescale the driver "
                                "or lower its degree", file=self.source,
                                row=first_row(frame, np.arange(len(frame)) == row))
        period = period_ordinals(frame) if PERIOD in frame.columns else None
        series_level = np.concatenate([
            np.full(len(part.get_feature_names_out()), isinstance(part, SeriesTerms), bool)
            for part in self.parts_]) if self.parts_ else np.zeros(0, bool)
        return Design(matrix=matrix, names=self.get_feature_names_out(),
                      series=frame[self.series_column].to_numpy(), period=period, notes=tuple(notes),
                      series_level=series_level,
                      absorbed_levels=next((part.name for part in self.parts_
                                            if isinstance(part, SeriesTerms) and part.absorbed_), None),
                      absorbed_at=self._absorbed_at(), cadence=cadence_of(frame),
                      term_groups=tuple(label for part in self.parts_ for label in term_group_labels(part)))

    def _absorbed_at(self) -> int:
        """Return where the series levels' columns would be among the names (the series
        terms' place), when the fit absorbs them."""
        at = 0
        for part in self.parts_:
            if isinstance(part, SeriesTerms):
                return at
            at += len(part.get_feature_names_out())
        return at

    def transform(self, frame: pd.DataFrame, known: pd.DataFrame | None = None) -> Design:
        """Return the design of rows to predict; stop if one of their lags is unavailable."""
        with np.errstate(over="ignore"):   # too large a term is refused in _design
            table = self.feature_table(frame, known)
        unavailable = table.isna().to_numpy()
        if unavailable.any():
            self._refuse_empty_terms(frame, table)
            row, column = (int(i) for i in np.argwhere(unavailable)[0])
            at = frame.iloc[row]
            raise DataError(f"'{table.columns[column]}' is not available for {label_of(at[PERIOD])} (series "
                            f"'{at[self.series_column]}'): the month it reads is before the "
                            "series starts or missing", file=self.source,
                            row=first_row(frame, np.arange(len(frame)) == row))
        return self._design(frame, table.to_numpy(), self._notes(frame))

    def training_design(self, frame: pd.DataFrame) -> tuple[Design, np.ndarray]:
        """Return the design and the target of the training rows a model can be fitted on.

        Rows whose lags reach before their series starts (the first months of
        each series, or months after a gap) are left out, and the design's
        notes say how many.
        """
        with self._located():
            self.target_scale.check(frame)
        with np.errstate(over="ignore"):
            table = self.feature_table(frame)
        usable = ~table.isna().any(axis=1).to_numpy()
        notes = self._notes(frame)
        if not usable.all():
            self._refuse_empty_terms(frame, table)
            if not usable.any():
                raise DataError("no training row has every lag available: the lags reach further "
                                "back than the training window holds", file=self.source)
            left_out, word = frame[~usable], cadence_of(frame).name
            notes.append(f"{which_rows(frame, ~usable)} were left out of every model's fit: their "
                         f"lags reach before the first {word} of their series or into a missing "
                         f"{word} (left out: {label_of(left_out[PERIOD].min())} to "
                         f"{label_of(left_out[PERIOD].max())})")
        kept = frame[usable]
        y = kept[self.target].to_numpy(float) if self.target in kept.columns else np.empty(0)
        return self._design(kept, table.to_numpy()[usable], notes), y

    def _refuse_empty_terms(self, frame: pd.DataFrame, table: pd.DataFrame) -> None:
        """Stop at the first row a term other than a lag has no number for: only the lags may
        leave a row without a value (a month they read is missing); for any other term its own
        driver, or that driver's settings, is the cause."""
        at = 0
        for part in self.row_parts_:
            width = len(part.get_feature_names_out())
            empty = table.iloc[:, at:at + width].isna().to_numpy()
            if empty.any():
                row, column = (int(i) for i in np.argwhere(empty)[0])
                where, name = frame.iloc[row], table.columns[at + column]
                source = getattr(part, "column", None)
                cause = f"the driver '{source}' (its value in this row, or" if source else "(its"
                raise DataError(f"the term '{name}' is not a number for {where[PERIOD]} (series "
                                f"'{where[self.series_column]}'): it is not a lag, so {cause} its "
                                "settings in the spec) gives it none", file=self.source,
                                row=first_row(frame, np.arange(len(frame)) == row))
            at += width

    def get_feature_names_out(self) -> list[str]:
        return [name for part in self.parts_ for name in part.get_feature_names_out()]

    # -- storing

    def to_dict(self) -> dict:
        """Return the fitted plan as a model file stores it: its settings and what it learned
        (``state``), and each part's class and fields (``parts``), in the order of the columns.
        A part or a list of them in the state is a reference to its place in ``parts``; how to
        report a spec error is not stored."""
        parts = self.parts_
        state = {
            "numeric": [encode_settings(d) for d in self.numeric],
            "categorical": [encode_settings(d) for d in self.categorical],
            "series_column": plain_name(self.series_column), "interactions": self.interactions,
            "calendar": encode_settings(self.calendar) if self.calendar is not None else None,
            "lags": [encode_settings(lagged) for lagged in self.lags],
            "target": self.target, "target_transform": self.target_transform, "source": self.source,
            "series_effects": (encode_settings(self.series_effects)
                               if self.series_effects is not None else None),
            "row_parts_": encode(self.row_parts_, parts), "lag_parts_": encode(self.lag_parts_, parts),
            "numeric_parts_": encode(self.numeric_parts_, parts),
            "window_end_": encode(self.window_end_),
            "future_": self.future_.to_dict() if self.future_ is not None else None}
        return {"class": type(self).__name__, "state": state,
                "parts": [{"class": type(part).__name__, "state": part.to_dict(parts)} for part in parts]}

    @classmethod
    def from_dict(cls, data: dict, version: int = FORMAT_VERSION) -> FeaturePlan:
        """Return the fitted plan ``to_dict`` stored, its parts rebuilt in order (a part may
        refer only to one before it), only from the classes in ``PART_CLASSES``."""
        with StoredFields(data, "the plan", version=version) as entry:
            if entry.raw("class") != cls.__name__:
                raise ModelFileError("the plan is not a feature plan")
            stored_parts = entry.raw("parts")
            if not isinstance(stored_parts, list):
                raise entry.bad("parts", "a list")
            parts: list = []
            for stored in stored_parts:
                with StoredFields(stored, "a feature of the plan", version=version) as part:
                    name = part.raw("class")
                    if not isinstance(name, str) or name not in PART_CLASSES:
                        raise ModelFileError(f"class {name!r} is not one castline stores")
                    parts.append(PART_CLASSES[name].from_dict(part.raw("state"), parts, version))
            plan = cls._from_state(entry.raw("state"), parts, version)
        return plan

    @classmethod
    def _from_state(cls, data: dict, parts: list, version: int) -> FeaturePlan:
        with StoredFields(data, "FeaturePlan", parts, version) as fields:
            interactions = fields.raw("interactions")
            if not isinstance(interactions, list) or not all(
                    isinstance(pair, list) and len(pair) == 2 and all(isinstance(c, str) for c in pair)
                    for pair in interactions):
                raise fields.bad("interactions", "a list of pairs of columns")
            plan = cls(fields.settings_list("numeric", NumericDriver),
                       fields.settings_list("categorical", CategoricalDriver),
                       loaded_name(fields.text("series_column")), interactions=interactions,
                       calendar=fields.settings("calendar", CalendarFeatures, optional=True),
                       lags=fields.settings_list("lags", LaggedColumn),
                       target=fields.text("target", optional=True),
                       target_transform=fields.choice("target_transform", ("none", "log", "log1p")),
                       source=fields.text("source", optional=True),
                       series_effects=fields.settings("series_effects", SeriesEffects, optional=True))
            row_kinds = tuple(kind for kind in PART_CLASSES.values() if kind is not LagFeatures)
            plan.row_parts_ = fields.part_list("row_parts_", row_kinds)
            plan.lag_parts_ = fields.part_list("lag_parts_", LagFeatures)
            numeric = fields.value("numeric_parts_")
            if not isinstance(numeric, dict) or not all(
                    isinstance(part, NumericTerms) and part.column == column
                    for column, part in numeric.items()):
                raise fields.bad("numeric_parts_", "the numeric drivers' features by column")
            plan.numeric_parts_ = numeric
            plan.window_end_ = fields.period("window_end_", optional=True)
            stored = fields.raw("future_") if version >= 2 else None
            plan.future_ = FutureEstimates.from_dict(stored, version) if stored is not None else None
            if plan.estimated != (plan.future_.rules if plan.future_ else {}):
                raise ModelFileError("the plan's estimated drivers do not match its settings")
        plan.parts_ = parts
        if [id(part) for part in [*plan.row_parts_, *plan.lag_parts_]] != [id(part) for part in parts]:
            raise ModelFileError("the plan's features are not its parts, each once, in order")
        return plan


def term_group_labels(part) -> list[str]:
    """Return the label of the group of terms each of a part's columns belongs to, for the
    generalised VIF: a driver's columns (its levels, its powers) are one group, named by the
    driver; a calendar block, the series' levels and each driver's slopes per series one
    each; a lag, a single term, is its own."""
    names = part.get_feature_names_out()
    if isinstance(part, SeriesTerms):
        levels = len(part.levels_)
        word = part.word or "series"
        return [word] * (levels if part.intercepts else 0) + [
            f"{slope.column} × {word}" for slope in part.slopes for _ in range(levels)]
    if isinstance(part, LagFeatures | TrendTerm | WorkingDays | HolidayShares | EventCounts) or len(names) == 1:
        return names
    if isinstance(part, FourierTerms):
        return [f"{part.period} of year (sine and cosine)"] * len(names)
    if isinstance(part, MonthDummies | QuarterDummies | WeekDummies):
        return [f"{part.word} of year"] * len(names)
    if isinstance(part, InteractionTerms):
        return [f"{part.first.column} × {part.second.column}"] * len(names)
    return [part.column] * len(names)


def plan_features(spec: Spec, series_column: str) -> FeaturePlan:
    """Return the unfitted feature plan the spec describes."""
    drivers = spec.drivers
    return FeaturePlan(list(drivers.numeric), list(drivers.categorical), series_column,
                       interactions=drivers.interactions, calendar=drivers.calendar,
                       lags=list(drivers.lags), target=spec.target,
                       target_transform=spec.target_transform, error=spec.error,
                       source=str(spec.input.file), series_effects=series_effects_of(spec),
                       period=spec.input.period,
                       absorbable=spec.intercept and all(
                           model.kind == "ols" for model in spec.models
                           if model.kind in LINEAR_KINDS and not model.per_series))
