"""How a model file forecasts months beyond the reach of the target's own lags.

A lag of the target shorter than the months ahead would read an actual nobody
has yet. The run then forecast by its spec's ``multi_step`` strategy
(``stages/multistep.py``), and a model file from format version 4 keeps what
``castline forecast`` needs to do the same (``StoredSteps``):

- recursive: the model itself, months predicted in order, each prediction fed
  back as the target's value for the later months' lags (the run's own code
  path, ``multistep.month_by_month``);
- direct: the run's fit for each months ahead it forecast, each on the target
  lags reaching at least that far back. A row's fit is the one of its months
  after the last actual; the model's own fit serves the months its lags reach
  (it is the fit for one month ahead), and the furthest fit serves months
  further still when it reads no lag of the target.

The last actual is, per series, the later of the run's last month of history
(the series' own when it lagged behind the others in the run) and its last month
with a target in the new data file: the lags read the file's actuals, and the
ones the model file kept from the run's history where the file has none.
"""

from __future__ import annotations

import copy
from collections.abc import Callable

import numpy as np
import pandas as pd

from pipeline.core.cadence import cadence_of
from pipeline.core.columns import PERIOD, SERIES, period_ordinals
from pipeline.core.errors import DataError, ModelFileError, UserError
from pipeline.core.stored import FORMAT_VERSION, StoredFields
from pipeline.features.plan import FeaturePlan
from pipeline.features.rows import first_row, months_phrase
from pipeline.stages.multistep import month_by_month

STRATEGIES = ("direct", "recursive")
STEPS_FROM = 4   # the first format version whose files say how the run forecast beyond the lags


def target_reach(plan: FeaturePlan) -> int | None:
    """Return the fewest months back any feature of the plan reads the target, or None."""
    reaches = [back for part in plan.lag_parts_ if part.of_target for back, _, _ in part.reaches()]
    return min(reaches) if reaches else None


def last_actuals(plan: FeaturePlan, rows: pd.DataFrame, actuals: pd.DataFrame | None,
                 lagging: dict[str, pd.Period] | None = None) -> np.ndarray | None:
    """Return, per row, the month ordinal of its series' last actual: the plan's window's last
    month (or, for a series that lagged in the run, its own last month: ``lagging``), or a
    later month of the series' actuals in the data file. None without any."""
    if plan.window_end_ is None and (actuals is None or not len(actuals)):
        return None
    end = plan.window_end_.ordinal if plan.window_end_ is not None else -np.inf
    own = {series: period.ordinal for series, period in (lagging or {}).items()}
    origins = rows[SERIES].astype(str).map(own).fillna(end).to_numpy(float)
    if actuals is not None and len(actuals):
        newest = pd.Series(period_ordinals(actuals)).groupby(actuals[SERIES].astype(str).to_numpy()).max()
        origins = np.fmax(origins, rows[SERIES].astype(str).map(newest).to_numpy(float))
    return origins.astype(np.int64)


class StoredSteps:
    """The run's multi_step strategy (None in a file that predates version 4) and, for the
    direct strategy, its fits by months ahead: ``horizons[h] = (plan, {model name: model})``
    (the models as fitted when written, as stored when read)."""

    def __init__(self, strategy: str | None, horizons: dict[int, tuple[FeaturePlan, dict]] | None = None,
                 version: int = FORMAT_VERSION) -> None:
        self.strategy = strategy
        self.horizons = dict(sorted((horizons or {}).items()))
        self.version = version

    @classmethod
    def from_run(cls, strategy: str, horizon_fits: dict) -> StoredSteps:
        """Return what a run's forecast kept (``ForecastResult.horizon_fits``: model name →
        [(months ahead, plan, model)]); the fit for one month ahead is the model's own."""
        horizons: dict[int, tuple[FeaturePlan, dict]] = {}
        for kind, fits in horizon_fits.items():
            for horizon, plan, model in fits:
                if horizon >= 2:
                    horizons.setdefault(horizon, (plan, {}))[1][kind] = model
        return cls(strategy, horizons)

    def to_dict(self, model_entry: Callable[[str, object, list[str]], dict]) -> dict:
        """Return the strategy and the fits as a model file stores them (each model as
        ``model_entry(kind, model, feature names)`` gives it)."""
        stored = []
        for horizon, (plan, models) in self.horizons.items():
            names = plan.get_feature_names_out()
            stored.append({"horizon": horizon, "plan": plan.to_dict(), "feature_names": names,
                           "models": {kind: model_entry(kind, model, names)
                                      for kind, model in models.items()}})
        return {"strategy": self.strategy, "horizons": stored}

    @classmethod
    def from_dict(cls, data, models: list[str],
                  model_from_entry: Callable[[str, dict, list[str], int], object],
                  version: int = FORMAT_VERSION) -> StoredSteps:
        """Return what ``to_dict`` stored; each fit's models among the file's ``models``."""
        with StoredFields(data, "the multi-step strategy", version=version) as fields:
            strategy = fields.choice("strategy", STRATEGIES)
            stored = fields.raw("horizons")
        if not isinstance(stored, list) or (stored and strategy != "direct"):
            raise ModelFileError("the multi-step strategy: the field 'horizons' is not a list of the "
                                 "direct strategy's fits")
        horizons = {}
        for entry in stored:
            with StoredFields(entry, "a fit of the direct strategy", version=version) as fields:
                horizon = fields.whole("horizon", minimum=2)
                plan = FeaturePlan.from_dict(fields.raw("plan"), version)
                names = fields.texts("feature_names")
                entries = fields.raw("models")
            if plan.get_feature_names_out() != names:
                raise ModelFileError(f"the fit for {months_phrase(horizon)} ahead: its plan does not "
                                     "give the features its models were fitted on")
            if not isinstance(entries, dict) or not set(entries) <= set(models) or horizon in horizons:
                raise ModelFileError(f"the fit for {months_phrase(horizon)} ahead: its models are not "
                                     "among the file's, or it is given twice")
            horizons[horizon] = (plan, {kind: model_from_entry(kind, entry, names, version)
                                        for kind, entry in entries.items()})
        return cls(strategy, horizons, version)

    # -- forecasting

    def needed(self, plan: FeaturePlan, rows: pd.DataFrame, origins: np.ndarray | None) -> bool:
        """Return whether some row lies further after its series' last actual (``origins``,
        per row) than the target's lags reach (then the strategy predicts the rows)."""
        reach = target_reach(plan)
        if reach is None or origins is None or not len(rows):
            return False
        return int((rows[PERIOD].array.asi8 - origins).max()) > reach

    def predates(self, plan: FeaturePlan) -> str:
        """Return why a file without the strategy cannot forecast months beyond the lags' reach."""
        return (f"this model file (format version {self.version}) does not say how its run forecast "
                f"months more than {months_phrase(target_reach(plan))} after the last actual (its "
                "target's own lags reach no further): rerun castline run to write a model file that does")

    def predict(self, kind: str, plan: FeaturePlan, model, rows: pd.DataFrame,
                actuals: pd.DataFrame | None, origins: np.ndarray, file: str) -> np.ndarray:
        """Return a model's forecasts of the rows by the run's strategy; a row at or before
        the last actual from its lags' actuals (as the model itself predicts)."""
        if self.strategy is None:
            raise UserError(self.predates(plan))
        ahead = rows[PERIOD].array.asi8 - origins
        predicted = np.full(len(rows), np.nan)
        past = ahead <= 0
        if past.any():
            predicted[past] = model.predict(plan.transform(rows[past], known=actuals))
        later = np.flatnonzero(~past)
        if self.strategy == "recursive":
            for at, _, values in month_by_month(plan, model, rows.iloc[later], plan.target, known=actuals):
                predicted[later[at]] = values
            return predicted
        for horizon in np.unique(ahead[later]):
            at = ahead == horizon
            own_plan, own_model = self._fit_for(kind, int(horizon), plan, model, rows, at, origins, file)
            predicted[at] = own_model.predict(own_plan.transform(rows[at], known=actuals))
        return predicted

    def _fit_for(self, kind: str, horizon: int, plan: FeaturePlan, model, rows: pd.DataFrame,
                 at: np.ndarray, origins: np.ndarray, file: str):
        """Return the direct strategy's plan and model for rows this many months after the last
        actual, or stop with a DataError naming the first such row."""
        if horizon in self.horizons and kind in self.horizons[horizon][1]:
            own_plan, models = self.horizons[horizon]
            return placed_plan(own_plan, file), models[kind]
        reach = target_reach(plan)
        if reach is None or horizon <= reach:
            return plan, model
        fitted = [h for h, (_, models) in self.horizons.items() if kind in models]
        if fitted and horizon > max(fitted) and target_reach(self.horizons[max(fitted)][0]) is None:
            own_plan, models = self.horizons[max(fitted)]
            return placed_plan(own_plan, file), models[kind]
        row, origin = rows[at].iloc[0], int(origins[at][0])
        furthest = max([reach, *fitted])
        cadence = cadence_of(rows)
        raise DataError(f"{cadence.label(row[PERIOD])} (series '{row[SERIES]}') is {cadence.count(horizon)} "
                        f"after the last actual of the target ({cadence.label(origin)}), and model "
                        f"'{kind}' was fitted for at most {cadence.count(furthest)} ahead (the direct "
                        f"strategy fits each {cadence.plural} ahead the run forecast): rerun castline run "
                        f"with these {cadence.plural} in its input", file=file, row=first_row(rows, at))


def placed_plan(plan: FeaturePlan, file: str) -> FeaturePlan:
    """Return a shallow copy of a stored plan whose messages name the new data file."""
    placed = copy.copy(plan)
    placed.source = file or None
    return placed
