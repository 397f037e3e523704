"""Backtest: at each origin, fit on the training window, predict what follows.

Validation schemes: holdout (one origin, the last N months held out); rolling
origin (many origins, an expanding or sliding window, a horizon, a gap and a
step); k-fold and grouped k-fold for rows without a time order. The feature
plan and every model are fitted on the training window only.

OLS over expanding windows does not refit from scratch at each origin: when
the feature plan learns the same thing in every window, the design is built
once and the QR factor is grown block by block (``GrowingLeastSquares``).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from functools import partial

import numpy as np
import pandas as pd

from pipeline.core.cadence import cadence_named, period_labels
from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.design import Design, held_series, series_design, series_index
from pipeline.core.execution import IN_PROCESS, Executor, InProcess
from pipeline.core.forked import PAYS_FROM, in_copy, map_shared
from pipeline.core.progress import QUIET, Progress
from pipeline.features.future import ahead_words
from pipeline.features.grouped import positions_of
from pipeline.models import BASELINE_KINDS, make_model, prediction_spread
from pipeline.models.ols import expanding_ols_predictions
from pipeline.spec import Spec
from pipeline.stages.check import CheckedData
from pipeline.stages.multistep import needs_strategy, predict_ahead
from pipeline.stages.splits import Split, plan_splits, sorted_by_month

# prediction_se, df_resid and centre: the standard error of a prediction, its residual df and
# the prediction they go with, on the scale the model fits (centre equals prediction without a
# target transform; with log or log1p it is the fit's log-scale prediction, and prediction the
# smeared mean); NaN where a model gives no standard error.
PREDICTION_COLUMNS = ["origin", "period", "horizon", "series", "model", "actual", "prediction",
                      "mase_scale", "prediction_se", "df_resid", "centre"]


FALLBACK_COLUMNS = ["model", "window", "series", "rows", "terms"]


def _fallbacks(name: str, window: str, model, predicted_series: np.ndarray) -> pd.DataFrame | None:
    """Return the series a fitted model per series gave its mean to, labelled, and those it
    predicted without a row of them to fit on (given the mean of every series)."""
    inner = model.inner
    found = inner.fallbacks_
    if found is None:
        return None
    unseen = pd.unique(predicted_series[inner.series_.get_indexer(predicted_series) < 0])
    if len(unseen):
        found = pd.concat([found, pd.DataFrame({"series": unseen, "rows": 0,
                                                "terms": len(inner.names_)})], ignore_index=True)
    if not len(found):
        return None
    return found.assign(model=name, window=window)[FALLBACK_COLUMNS]


def series_fallbacks(fallbacks: pd.DataFrame) -> pd.DataFrame:
    """Return one row per model and series that fell back to its mean: in how many windows,
    the first of them, and the fewest rows it had against the terms needed."""
    if not len(fallbacks):
        return pd.DataFrame(columns=["model", "series", "windows", "first_window", "fewest_rows",
                                     "terms"])
    grouped = fallbacks.groupby(["model", "series"], sort=False)
    return pd.DataFrame({"windows": grouped["window"].nunique(), "first_window": grouped["window"].first(),
                         "fewest_rows": grouped["rows"].min(),
                         "terms": grouped["terms"].max()}).reset_index()


@dataclass(frozen=True)
class BacktestResult:
    """Out-of-sample predictions: one row per origin, period, series and model."""

    predictions: pd.DataFrame
    splits: list[Split]
    scheme: str
    horizon: int
    notes: list[str]
    step: int = 1
    # Series a model per series fitted by their mean instead, per window (see ``series_fallbacks``).
    fallbacks: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=FALLBACK_COLUMNS))
    # With drivers castline estimates: the models' predictions had those drivers been known
    # (ex-post), beside ``predictions``, which estimate them as the forecast must (ex-ante).
    hindsight: pd.DataFrame | None = None
    estimated: dict[str, str] = field(default_factory=dict)   # the estimated columns, by rule
    ahead: str | None = None   # which drivers were known ahead and which estimated, in words
    # The target's transform (none, log, log1p), and 0 when the target is never below zero
    # in the history (no interval bound goes below it), else None.
    transform: str = "none"
    floor: float | None = None


def target_floor(values: pd.Series) -> float | None:
    """Return 0 when the target is never below zero (counts, sales, hours): no interval
    bound then goes below zero; else None."""
    values = pd.to_numeric(values, errors="coerce")
    return 0.0 if len(values) and bool((values.dropna() >= 0).all()) else None


DENSE_GRID_CELLS = 50_000_000   # beyond this, MASE scales look months up by key, not by grid


def mase_scales(train: pd.DataFrame, target: str, season: int = 12,
                series_codes: tuple[np.ndarray, np.ndarray] | None = None) -> dict[str, float]:
    """Return, per series, the in-sample MAE of the seasonal naive forecast on the window.

    Months are matched by date (a value and the one ``season`` months earlier),
    so a gap in a series never pairs the wrong months. A series spanning less
    than a full season uses the one-month naive forecast. ``series_codes``: the
    rows' series already factorised (codes, names), when known.
    """
    if series_codes is None:
        codes, names = pd.factorize(train[SERIES].to_numpy())
    else:
        codes, names = held_series(*series_codes)
    months = train[PERIOD].array.asi8.astype(np.int64)
    values = train[target].to_numpy(float)
    offset = months - months.min() if len(months) else months
    width = int(offset.max()) + 1 if len(months) else 1
    if len(names) * width <= DENSE_GRID_CELLS:
        # A grid of row positions by (series, month): each lookup is one index.
        where = np.full((len(names), width), -1, np.int64)
        where[codes, offset] = np.arange(len(months))
        held = where >= 0
        first = held.argmax(axis=1)
        last = width - 1 - held[:, ::-1].argmax(axis=1)
        lag = np.where(last - first >= season, season, 1)[codes]
        back = offset - lag
        earlier = np.full(len(months), -1, np.int64)
        inside = back >= 0
        earlier[inside] = where[codes[inside], back[inside]]
    else:
        first = np.full(len(names), np.iinfo(np.int64).max)
        last = np.full(len(names), np.iinfo(np.int64).min)
        np.minimum.at(first, codes, months)
        np.maximum.at(last, codes, months)
        lag = np.where(last - first >= season, season, 1)[codes]
        # One integer key per (series, month): look up the value lag months earlier.
        span = width + season + 2
        keys = pd.Index(codes.astype(np.int64) * span + offset)
        earlier = keys.get_indexer(codes.astype(np.int64) * span + (offset - lag))
    found = earlier >= 0
    diffs = np.abs(values[found] - values[earlier[found]])
    total = np.bincount(codes[found], weights=diffs, minlength=len(names))
    count = np.bincount(codes[found], minlength=len(names))
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.where(count > 0, total / np.maximum(count, 1), np.nan)
    return dict(zip(names, scale.tolist()))


def _plan_state(plan) -> str:
    """Return a text form of everything a fitted plan learned (attributes ending in _)."""
    parts = []
    for part in plan.parts_:
        learned = {k: v for k, v in vars(part).items() if k.endswith("_")}
        parts.append(f"{type(part).__name__}:{sorted(learned.items(), key=lambda kv: kv[0])!r}")
    return "|".join(parts)


def _lookup(values: dict, keys: np.ndarray) -> np.ndarray:
    """Return values[key] for each key (NaN for a key not in values), vectorised."""
    if not values:
        return np.full(len(keys), np.nan)
    found = positions_of(list(values), keys)
    table = np.append(np.asarray(list(values.values()), float), np.nan)
    return table[found]


def _split_columns(split: Split, target: str, scales: dict[str, float]) -> dict:
    """Return the prediction table's columns every model of a split shares."""
    test = split.test
    if split.origin is not None:
        horizon = (test[PERIOD].array.asi8 - split.origin.ordinal).astype(int)
        period = np.asarray(period_labels(test[PERIOD]), dtype=object)
    else:
        horizon = np.zeros(len(test), int)
        period = np.asarray(period_labels(test[PERIOD]), dtype=object) if PERIOD in test.columns else ""
    series = test[SERIES].to_numpy()
    return {"origin": split.label, "period": period, "horizon": horizon, "series": series,
            "actual": test[target].to_numpy(float), "mase_scale": _lookup(scales, series)}


def _model_rows(shared: dict, kind: str, predictions: np.ndarray, se=None,
                df_resid=None, centre=None) -> dict[str, np.ndarray]:
    """Return one model's rows of the prediction table, one array per column (``_table``
    joins them); ``centre`` None (with a standard error) means the prediction itself, and is
    NaN wherever the standard error is."""
    rows = len(shared["series"])

    def column(value, dtype=None) -> np.ndarray:
        value = np.asarray(value, dtype)
        return value if value.ndim else np.full(rows, value, value.dtype)

    if se is None:
        centre = np.nan
    else:
        centre = np.asarray(predictions if centre is None else centre, float)
        centre = np.where(np.isfinite(np.asarray(se, float)), centre, np.nan)
    return {"origin": column(shared["origin"], object), "period": column(shared["period"], object),
            "horizon": column(shared["horizon"]), "series": column(shared["series"], object),
            "model": column(kind, object), "actual": column(shared["actual"]),
            "prediction": column(predictions), "mase_scale": column(shared["mase_scale"]),
            "prediction_se": column(np.nan if se is None else se),
            "df_resid": column(np.nan if df_resid is None else df_resid), "centre": column(centre)}


def _table(pieces: list[dict[str, np.ndarray]]) -> pd.DataFrame:
    """Return the prediction table of the pieces' rows, in order: each column joined as one
    array, numbers of mixed types widened as ``pd.concat`` of a frame per piece widens them."""
    return pd.DataFrame({name: np.concatenate([piece[name] for piece in pieces])
                         for name in PREDICTION_COLUMNS})


def _growing_ols(spec: Spec, splits: list[Split], history: pd.DataFrame, matrix: np.ndarray,
                 tests: list[np.ndarray]) -> dict[str, tuple]:
    """Return the OLS predictions (with their standard errors, residual df and centre: None,
    the predictions themselves, as this path runs only without a target transform) of every
    split, growing one QR factor across origins. ``history`` is sorted by month, ``matrix``
    its terms, ``tests`` those of each split's predicted rows."""
    def with_intercept(matrix: np.ndarray) -> np.ndarray:
        if not spec.intercept:
            return matrix
        full = np.empty((len(matrix), matrix.shape[1] + 1))
        full[:, 0] = 1.0
        full[:, 1:] = matrix
        return full

    found = expanding_ols_predictions(with_intercept(matrix), history[spec.target].to_numpy(float),
                                      history[PERIOD].array.asi8,
                                      [split.origin.ordinal for split in splits],
                                      [with_intercept(test) for test in tests])
    # A rank-deficient window (the careful fit drops and names columns), or one the precision
    # rule would refine (the careful fit refines it).
    if found is None:
        return {}
    return {split.label: (*result, None) for split, result in zip(splits, found)}


def _fast_ols(spec: Spec, splits: list[Split], as_happened: list[Split], plan, data: CheckedData,
              shared, estimating: bool) -> dict[str, tuple]:
    """Return, by window, the OLS predictions of the rows as estimated and as they happened
    (the same without estimated drivers), from one QR factor grown across origins; empty when
    a window is rank-deficient. The rows as they happened, and the history, are read from the
    shared design where there is one (a row's terms depend on that row alone)."""
    history = sorted_by_month(data.history)
    matrix = shared[1].matrix if shared is not None else plan.transform(history).matrix

    def terms(split: Split, happened: bool) -> np.ndarray:
        if happened and shared is not None:
            return _design_rows(shared, split.test)[0].matrix
        return plan.transform(split.test).matrix

    ahead = _growing_ols(spec, splits, history, matrix, [terms(split, not estimating) for split in splits])
    as_known = _growing_ols(spec, as_happened, history, matrix, [terms(split, True) for split in as_happened]) \
        if estimating else ahead
    if not (ahead and as_known):
        return {}
    return {label: (ahead[label], as_known[label]) for label in ahead}


def _shared_design(spec: Spec, plan, data: CheckedData):
    """Return the month-sorted history, its design and target, for windows to read rows of;
    None when the history's row labels cannot locate a window's rows."""
    history = sorted_by_month(data.history)
    if not history.index.is_unique:
        return None
    design, y = plan.training_design(history)
    if len(y) != len(history):
        return None
    return history, Design(design.matrix, design.names, design.series, design.period, (),
                           design.series_level, absorbed_levels=design.absorbed_levels,
                           absorbed_at=design.absorbed_at, cadence=design.cadence).with_series_codes(), y


def _design_rows(shared, frame: pd.DataFrame) -> tuple[Design, np.ndarray]:
    """Return the shared design and target of a window's rows (a view for a contiguous run)."""
    history, design, y = shared
    positions = history.index.get_indexer(frame.index)
    if len(positions) and positions[-1] - positions[0] + 1 == len(positions) and \
            (np.diff(positions) == 1).all():
        positions = slice(int(positions[0]), int(positions[-1]) + 1)
    return design.rows(positions), y[positions]


class _WindowDesigns:
    """The designs of one window's training and predicted rows, each built once, when a
    model first asks for it (baselines need only the rows' series and months)."""

    def __init__(self, spec: Spec, split: Split, plan, shared, plain: bool,
                 hindsight: pd.DataFrame | None = None) -> None:
        self.spec, self.split, self.plan, self.shared, self.plain = spec, split, plan, shared, plain
        # With estimated drivers, the predicted rows carry the estimates (so the shared design,
        # built from the actual values, serves only ``hindsight``: the rows as they happened).
        self.hindsight = hindsight
        self.cache: dict[str, tuple | Design] = {}
        if shared is not None:
            self.cache["train"] = _design_rows(shared, split.train)

    def train(self, kind: str) -> tuple[Design, np.ndarray]:
        # With lags, every model fits on the rows whose lags are available.
        if kind in BASELINE_KINDS and self.plain and self.shared is None:
            if "series train" not in self.cache:
                frame = self.split.train
                self.cache["series train"] = (series_design(frame, SERIES),
                                              frame[self.spec.target].to_numpy(float))
            return self.cache["series train"]
        if "train" not in self.cache:
            self.cache["train"] = self.plan.training_design(self.split.train)
        return self.cache["train"]

    def test(self, kind: str, *, hindsight: bool = False) -> Design:
        frame = self.hindsight if hindsight else self.split.test
        name = "hindsight" if hindsight else "test"
        if kind in BASELINE_KINDS:   # only the rows' series and months: never the terms
            if f"series {name}" not in self.cache:
                self.cache[f"series {name}"] = series_design(frame, SERIES)
            return self.cache[f"series {name}"]
        if name not in self.cache:
            as_happened = hindsight or self.hindsight is None
            self.cache[name] = (_design_rows(self.shared, frame)[0]
                                if self.shared is not None and as_happened
                                else self.plan.transform(frame))
        return self.cache[name]

    def left_out_notes(self) -> list[str]:
        """Return the training design's notes on rows left out of the fit, labelled."""
        if "train" not in self.cache:
            return []
        return [f"window ending {self.split.label}: {note}" for note in self.cache["train"][0].notes
                if "left out" in note]


def _strategy_note(spec: Spec, split: Split) -> str | None:
    """Return the note that the window predicts further ahead than a lag of the target
    reaches (so the spec's multi_step strategy is used), or None."""
    furthest = int((split.test[PERIOD].array.asi8 - split.origin.ordinal).max()) \
        if split.origin is not None and len(split.test) else 0
    if not needs_strategy(spec, furthest):
        return None
    return (f"the backtest predicts up to {cadence_named(spec.input.period).count(furthest)} ahead but a "
            "lag of the "
            f"target is shorter: the linear models use the {spec.multi_step} strategy "
            "(multi_step)")


def _predict_window(spec: Spec, split: Split, plan, designs: _WindowDesigns, choice, *,
                    stepwise: bool, fast_ols: dict, executor: Executor, progress: Progress):
    """Return one model's predictions of a window's rows (with standard errors, residual df
    and centres, each None where the model gives none; a centre None means the prediction),
    the series it fell back to the mean for, and, with estimated drivers, its predictions had
    they been known (else None)."""
    tested_series = np.asarray(split.test[SERIES].to_numpy())
    known = designs.hindsight is not None and choice.kind not in BASELINE_KINDS
    if choice.name == "ols" and split.label in fast_ols:
        ahead, as_known = fast_ols[split.label]
        return (*ahead, [], as_known[0] if known else None)
    if stepwise and choice.kind not in BASELINE_KINDS:
        # A target lag is shorter than the months ahead: the spec's multi_step strategy.
        predicted, se, df_resid, centre, used = predict_ahead(spec, choice, split.train, split.test,
                                                              split.origin.ordinal,
                                                              executor=executor, progress=progress)
        as_known = predict_ahead(spec, choice, split.train, designs.hindsight, split.origin.ordinal,
                                 executor=executor, spread=False)[0] if known else None
        return predicted, se, df_resid, centre, [_fallbacks(choice.name, split.label, model, tested_series)
                                                 for _, _, model in used], as_known
    model = make_model(choice, intercept=spec.intercept, target=plan.target_scale,
                       executor=executor, progress=progress)
    design, y_train = designs.train(choice.kind)
    model.fit(design, y_train)
    predicted = model.predict(designs.test(choice.kind))
    se, df_resid, centre = prediction_spread(model, designs.test(choice.kind))
    as_known = model.predict(designs.test(choice.kind, hindsight=True)) if known else None
    return predicted, se, df_resid, centre, [_fallbacks(choice.name, split.label, model, tested_series)], \
        as_known


@dataclass(frozen=True)
class _Backtest:
    """What every window of a backtest reads."""

    spec: Spec
    shared: tuple | None
    plain: bool
    estimating: bool
    time_ordered: bool
    fast_ols: dict
    executor: Executor
    progress: Progress


def _window(backtest: _Backtest, window: tuple) -> tuple:
    """Return one window's prediction rows and hindsight rows (each model's, see ``_model_rows``),
    fallbacks, strategy note, other notes, and whether a forked copy (core.forked) made them: a copy reports no progress of its
    own, the process that made it counts its windows when they come back."""
    spec, (split, happened, plan) = backtest.spec, window
    progress = QUIET if in_copy() else backtest.progress
    designs = _WindowDesigns(spec, split, plan, backtest.shared, backtest.plain,
                             hindsight=happened.test if backtest.estimating else None)
    window_codes = series_index(designs.cache["train"][0]) if backtest.shared is not None else None
    scales = mase_scales(split.train, spec.target, cadence_named(spec.input.period).season_lag,
                         series_codes=window_codes) if backtest.time_ordered else {}
    columns = _split_columns(split, spec.target, scales)
    note = _strategy_note(spec, split)
    rows, known_rows, fallen_back = [], [], []
    for choice in spec.models:
        predicted, se, df_resid, centre, fell_back, as_known = _predict_window(
            spec, split, plan, designs, choice, stepwise=note is not None, fast_ols=backtest.fast_ols,
            executor=backtest.executor, progress=progress)
        fallen_back += fell_back
        rows.append(_model_rows(columns, choice.name, predicted, se, df_resid, centre))
        if as_known is not None:
            known_rows.append(_model_rows(columns, choice.name, as_known))
    if not in_copy():
        progress.advance("origins")
    return rows, known_rows, fallen_back, note, designs.left_out_notes() + list(split.notes), in_copy()


def _fallback_frame(found: list[pd.DataFrame | None]) -> pd.DataFrame:
    frames = [frame for frame in found if frame is not None]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=FALLBACK_COLUMNS)


def _fallback_note(fallbacks: pd.DataFrame) -> str:
    count = fallbacks.groupby("model")["series"].nunique()
    return "; ".join(
        f"{name}: {n} series had no more rows than terms in some training window and were "
        "forecast by their own mean there, or by the mean of all series when the window held "
        "none of their rows (listed in series_fallbacks.csv)"
        for name, n in count.items())


def run_backtest(spec: Spec, data: CheckedData, *, executor: Executor = IN_PROCESS,
                 progress: Progress = QUIET) -> BacktestResult:
    """Return every model's out-of-sample predictions under the spec's validation scheme.

    A model per series fits its chunks of series on ``executor``; the origins done and the
    series fitted are counted on ``progress``.
    """
    time_ordered = spec.validation.method in ("holdout", "rolling_origin")
    splits, horizon, plans = plan_splits(spec, data)
    notes: list[str] = []
    # Drivers nobody knows ahead are estimated after each origin from that window alone,
    # as the forecast will estimate them; ``as_happened`` keeps the rows as they happened.
    estimating = bool(spec.estimated_columns) and time_ordered
    as_happened = splits
    if estimating:
        splits = [replace(split, test=plan.estimate_future(split.test))
                  for split, plan in zip(splits, plans)]
        notes += plans[-1].estimated_lag_notes(horizon)
    fast_ols: dict[str, tuple] = {}
    expanding = spec.validation.method == "rolling_origin" and spec.validation.window == "expanding"
    # Without lags or a target transform, every row of a window is fitted on as it is.
    plain = not spec.drivers.lags and spec.target_transform == "none"
    linear = [name for name, kind in zip(spec.model_names, spec.model_kinds) if kind not in BASELINE_KINDS]
    # When every window's plan learned the same thing, the design of the whole history is
    # built once and each window reads its rows: a row's terms depend on that row alone.
    same_plan = (plain and time_ordered and len(splits) > 1 and bool(linear)
                 and len({_plan_state(plan) for plan in plans}) == 1
                 and not any(split.refilled for split in splits))
    shared = _shared_design(spec, plans[0], data) if same_plan else None
    # (With the series levels absorbed, the design holds no level columns for one QR to grow.)
    if "ols" in spec.model_names and expanding and same_plan and not plans[0].absorbs_levels:
        fast_ols = _fast_ols(spec, splits, as_happened, plans[0], data, shared, estimating)
    rows, known_rows = [], []
    fallen_back: list[pd.DataFrame | None] = []
    progress.start("origins", len(splits))

    # The windows are shared with a forked copy of this process where the machine allows and the
    # fits run here (not on worker processes or a cluster of their own); heavier windows weigh more.
    window = partial(_window, _Backtest(spec, shared, plain, estimating, time_ordered, fast_ols, executor, progress))
    windows = list(zip(splits, as_happened, plans))
    done = (map_shared(window, windows, [len(split.train) + len(split.test) for split in splits], least=PAYS_FROM)
            if isinstance(executor, InProcess) else [window(one) for one in windows])
    for found, known, fell_back, note, more_notes, elsewhere in done:
        rows += found
        known_rows += known
        fallen_back += fell_back
        if note and note not in notes:
            notes.append(note)
        notes += more_notes
        if elsewhere:
            progress.advance("origins")
    if not time_ordered:
        notes.append("k-fold validation ignores time order: MASE is not computed and the "
                     "comparison says nothing about forecasting ahead")
        if spec.estimated_columns:
            notes.append("k-fold folds have no origin, so the drivers castline estimates for the "
                         "forecast are scored here at their actual values")
    predictions = _table(rows)
    fallbacks = _fallback_frame(fallen_back)
    if len(fallbacks):
        notes.insert(0, _fallback_note(fallbacks))
    notes = notes[:5] + ([f"(and {len(notes) - 5} more notes like these)"] if len(notes) > 5 else [])
    notes = [*data.notes, *notes]   # what the data as read says comes first
    return BacktestResult(predictions=predictions, splits=splits, scheme=spec.validation.method,
                          horizon=horizon, notes=notes, ahead=ahead_words(spec),
                          step=getattr(spec.validation, "step", 1), fallbacks=fallbacks,
                          hindsight=_table(known_rows) if known_rows else None,
                          estimated=dict(spec.estimated_columns) if estimating else {},
                          transform=spec.target_transform,
                          floor=target_floor(data.history[spec.target]))

