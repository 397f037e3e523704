"""Splits: the backtest's training windows and the rows each predicts.

Time-ordered schemes (holdout, rolling origin) cut the sorted months at each
origin; k-fold and grouped k-fold cut rows without a time order.

With ``input.gaps: fill`` the check interpolated the filled cells over the whole
history, reading actuals after a window's origin. Each time-ordered training
window fills them again from its own months (``refill_window``), and months
whose target was filled are never predicted as if they were actuals.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import partial

import numpy as np
import pandas as pd

from pipeline.core.cadence import label_of
from pipeline.core.catalogue import LINEAR_KINDS
from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.forked import PAYS_FROM, map_shared
from pipeline.features.future import require_a_year
from pipeline.features.plan import plan_features
from pipeline.spec import Spec
from pipeline.stages.check import CheckedData


@dataclass(frozen=True)
class OriginWindow:
    """One origin of a time-ordered scheme, as positions in the sorted list of months."""

    origin: int          # index of the origin month (the last month of training)
    train_start: int     # index of the first training month
    test_start: int      # index of the first predicted month
    test_end: int        # index of the last predicted month


@dataclass(frozen=True)
class Split:
    """One training window and the rows predicted from it."""

    label: str                 # the origin month, or "fold k"
    train: pd.DataFrame
    test: pd.DataFrame
    origin: pd.Period | None = None
    # The training rows held cells filled by input.gaps: fill, filled again from the
    # window's own months: they differ from the same rows of the checked history.
    refilled: bool = False
    notes: tuple[str, ...] = ()


def rolling_origin_windows(n_periods: int, *, horizon: int, min_train: int, gap: int = 0,
                           step: int = 1, window: str = "expanding",
                           origins: int | None = None) -> list[OriginWindow]:
    """Return every origin that has min_train months before it and a full horizon after.

    Origins are counted back from the latest possible one, ``step`` months apart,
    so the newest data is always scored. Raises ValueError saying how many
    origins the data allows when ``origins`` asks for more.
    """
    last = n_periods - 1 - gap - horizon
    positions = list(range(last, min_train - 2, -step))[::-1]
    if origins is not None:
        if origins > len(positions):
            raise ValueError(f"asks for {origins} origins but the history allows at most "
                             f"{len(positions)}")
        positions = positions[-origins:]
    return [OriginWindow(origin=i,
                         train_start=0 if window == "expanding" else i - min_train + 1,
                         test_start=i + 1 + gap, test_end=i + gap + horizon)
            for i in positions]


def time_splits(spec: Spec, data: CheckedData) -> tuple[list[Split], int]:
    validation = spec.validation
    months = np.sort(data.history[PERIOD].unique())
    count = data.cadence.count
    if validation.method == "holdout":
        held_out = validation.last_periods
        if held_out >= len(months):
            raise spec.error(("validation", "last_periods"),
                             f"holding out {count(held_out)} leaves nothing to fit on: the history "
                             f"has {count(len(months))}, so at most {len(months) - 1} can be held out")
        windows = [OriginWindow(len(months) - held_out - 1, 0, len(months) - held_out, len(months) - 1)]
        horizon = held_out
    else:
        needed = validation.min_train_periods + validation.gap + validation.horizon
        try:
            windows = rolling_origin_windows(
                len(months), horizon=validation.horizon, min_train=validation.min_train_periods,
                gap=validation.gap, step=validation.step, window=validation.window,
                origins=validation.origins)
        except ValueError as exc:
            raise spec.error(("validation", "origins"), f"{exc} (history: {count(len(months))})") from None
        if not windows:
            raise spec.error(("validation", "min_train_periods"),
                             f"the history has {count(len(months))}; one origin needs "
                             f"min_train_periods + gap + horizon = {needed}")
        horizon = validation.gap + validation.horizon
    splits = []
    history = sorted_by_month(data.history)
    filled = _filled_in_month_order(data)
    ordinals = history[PERIOD].array.asi8
    # Each window's predicted rows in month order, then series order (a stable sort, as
    # sort_values([PERIOD, SERIES], kind="stable") would give): the series' codes found once.
    series_codes = pd.factorize(history[SERIES].to_numpy(), sort=True)[0]

    def in_order(positions: np.ndarray) -> pd.DataFrame:
        return history.iloc[positions[np.lexsort((series_codes[positions], ordinals[positions]))]]

    def rows(first: int, last: int) -> slice:
        return slice(int(np.searchsorted(ordinals, months[first].ordinal, side="left")),
                     int(np.searchsorted(ordinals, months[last].ordinal, side="right")))

    for window in windows:
        # Windows are slices of the month-sorted history: no copy of the training rows, unless
        # input.gaps: fill filled some of them (filled again from the window's own months).
        origin = months[window.origin]
        train_rows, test_rows = rows(window.train_start, window.origin), rows(window.test_start, window.test_end)
        train, tested = history.iloc[train_rows], np.arange(test_rows.start, test_rows.stop)
        refilled, notes = False, ()
        if filled is not None:
            tested = tested[~_filled_target(filled, spec.target)[test_rows]]
            if not len(tested):
                continue  # every month it would predict was filled, not observed
            marks = filled.iloc[train_rows]
            if marks.to_numpy().any():
                train, left_out = refill_window(train, marks)
                refilled = True
                notes = (f"window ending {origin}: {left_out} row(s) filled by input.gaps were "
                         "left out of its fit: the window's own months cannot fill them (the gap "
                         "runs past the origin or starts before the window)",) if left_out else ()
        splits.append(Split(label=label_of(origin), train=train, test=in_order(tested),
                            origin=origin, refilled=refilled, notes=notes))
    if not splits:
        raise spec.error(("input", "gaps"), "every month the validation predicts was filled by "
                                            "interpolation (input.gaps: fill): no actual to score")
    return splits, horizon


def _filled_in_month_order(data: CheckedData) -> pd.DataFrame | None:
    """Return which history cells input.gaps: fill gave a value, in the rows' month order
    (row for row with ``sorted_by_month(data.history)``), or None when none was filled."""
    if data.filled is None:
        return None
    order = np.argsort(data.history[PERIOD].array.asi8, kind="stable")
    return data.filled.iloc[order].reset_index(drop=True)


def _filled_target(filled: pd.DataFrame, target: str) -> np.ndarray:
    """Return, per row, whether its target was filled rather than given."""
    if target not in filled.columns:
        return np.zeros(len(filled), bool)
    return filled[target].to_numpy(bool)


def refill_window(train: pd.DataFrame, marks: pd.DataFrame) -> tuple[pd.DataFrame, int]:
    """Return a training window with its filled cells interpolated again from the window's own
    given values, and how many rows were left out.

    ``marks``: which cells were filled (one row per training row, in order; one column per
    filled column). Each is interpolated linearly in time between the nearest given months of
    its series inside the window; a row with a filled cell that has no given month after it
    inside the window (its gap runs past the origin) or before it is left out.
    """
    frame = train.copy()
    months = frame[PERIOD].array.asi8.astype(float)
    series = frame[SERIES].to_numpy()
    positions = pd.Series(np.arange(len(frame))).groupby(series, sort=False).indices
    left_out = np.zeros(len(frame), bool)
    for column in marks.columns:
        marked = marks[column].to_numpy(bool)
        if not marked.any():
            continue
        values = frame[column].to_numpy(float).copy()
        values[marked] = np.nan
        for name in pd.unique(series[marked]):
            rows = positions[name]   # in month order: the window is sorted by month
            given = rows[~np.isnan(values[rows])]
            wanted = rows[marked[rows]]
            if len(given):
                wanted = wanted[(months[wanted] > months[given[0]]) & (months[wanted] < months[given[-1]])]
                values[wanted] = np.interp(months[wanted], months[given], values[given])
        frame[column] = values
        left_out |= marked & np.isnan(values)
    return (frame[~left_out] if left_out.any() else frame), int(left_out.sum())


def sorted_by_month(history: pd.DataFrame) -> pd.DataFrame:
    """Return the history in month order (file order within a month)."""
    order = np.argsort(history[PERIOD].array.asi8, kind="stable")
    if (order == np.arange(len(order))).all():
        return history
    return history.iloc[order].reset_index(drop=True)


def fold_splits(spec: Spec, data: CheckedData) -> list[Split]:
    # scikit-learn loads only for the k-fold schemes (never in 'castline check' of the others)
    from sklearn.model_selection import GroupKFold, KFold
    validation = spec.validation
    history = data.history.reset_index(drop=True)
    if validation.method == "kfold":
        if validation.folds > len(history):
            raise spec.error(("validation", "folds"),
                             f"{validation.folds} folds need at least as many rows; the history has "
                             f"{len(history)}")
        folds = KFold(n_splits=validation.folds, shuffle=True, random_state=validation.seed).split(history)
    else:
        groups = history[validation.group_by].astype(str).agg(" / ".join, axis=1)
        if groups.nunique() < validation.folds:
            raise spec.error(("validation", "folds"),
                             f"{validation.folds} folds need as many groups; the columns "
                             f"{', '.join(validation.group_by)} hold {groups.nunique()}")
        folds = GroupKFold(n_splits=validation.folds).split(history, groups=groups)
    # A month filled by input.gaps: fill is not an actual: it is never scored (the folds,
    # without a time order, still fit on it).
    observed = (np.ones(len(history), bool) if data.filled is None
                else ~_filled_target(data.filled, spec.target))
    return [Split(label=f"fold {k + 1}", train=history.iloc[train], test=history.iloc[test[observed[test]]])
            for k, (train, test) in enumerate(folds) if observed[test].any()]


def validation_splits(spec: Spec, data: CheckedData) -> tuple[list[Split], int]:
    """Return the spec's validation splits and the longest horizon (0 without a time order).

    Raises SpecError when the validation scheme does not fit the data.
    """
    if spec.validation.method in ("holdout", "rolling_origin"):
        return time_splits(spec, data)
    return fold_splits(spec, data), 0


def _fitted_plan(spec: Spec, split: Split):
    return plan_features(spec, SERIES).fit(split.train)


def plan_splits(spec: Spec, data: CheckedData) -> tuple[list[Split], int, list]:
    """Return the validation splits, the longest horizon and each split's fitted feature plan.

    Raises SpecError when the validation scheme does not fit the data.
    """
    splits, horizon = validation_splits(spec, data)
    if spec.estimated_columns and splits and splits[0].origin is not None:
        months, label = min((split.train[PERIOD].nunique(), split.label) for split in splits)
        require_a_year(spec, int(months), f"the training window ending {label}")
    # Each window's plan is learned from that window alone: the windows are shared with a forked
    # copy of this process where the machine allows and they are work enough (core.forked), the
    # longer ones weighing more.
    plans = map_shared(partial(_fitted_plan, spec), splits, [len(split.train) for split in splits], least=PAYS_FROM)
    for split, plan in zip(splits, plans):
        _check_rows(spec, split, len(plan.get_feature_names_out()) + int(spec.intercept))
    return splits, horizon, plans


def _check_rows(spec: Spec, split: Split, terms: int) -> None:
    linear = [k for k in spec.model_kinds if k in LINEAR_KINDS]
    if linear and len(split.train) <= terms:
        key = ("validation", "last_periods" if spec.validation.method == "holdout" else
               "min_train_periods" if spec.validation.method == "rolling_origin" else "folds")
        raise spec.error(key, f"the training window ending {split.label} has {len(split.train)} rows, "
                              f"too few for the {terms} terms of the linear models")


# Without validation.min_train_periods the first training window has this many months
# (two years of quarters or weeks for those), or half the history when that is shorter
# (common practice: two years, enough to see each month, quarter or week of the year twice).
DEFAULT_MIN_TRAIN = 24


def settle_validation(spec: Spec, data: CheckedData) -> tuple[Spec, list[str]]:
    """Return the spec with the defaults that depend on the data chosen, and a note per choice.

    A rolling origin without ``min_train_periods`` starts from 24 months, or half the
    history's months when that is fewer.
    """
    validation = spec.validation
    if validation.method != "rolling_origin" or validation.min_train_periods is not None:
        return spec, []
    cadence = data.cadence
    default = DEFAULT_MIN_TRAIN // 12 * cadence.season_lag   # two years of periods
    months = int(data.history[PERIOD].nunique())
    chosen = max(2, min(default, months // 2))
    reason = (f"the default, {cadence.count(default)}" if chosen == default
              else f"half the history's {cadence.count(months)}, fewer than the default {default}")
    settled = spec.model_copy(update={
        "validation": validation.model_copy(update={"min_train_periods": chosen})})
    return settled, [f"validation.min_train_periods is not set, so the first training window has "
                     f"{cadence.count(chosen)} ({reason}); set the key to choose"]
