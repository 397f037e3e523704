"""Forecast: refit every model on all history, predict the months to forecast, and say how sure.

Each forecast carries intervals at 80% and 95% two ways: the analytic OLS
prediction interval (which assumes independent, normal errors of constant
variance, on the scale the model fits: with a log or log1p target it is found
there and turned back, so it is centred on the median while the forecast is the
smeared mean), and an empirical one built from the backtest's out-of-sample errors
at the same horizon (which assumes only that the future errs as the past did).
The final OLS fit also gets its coefficient table with the spec's choice of
standard errors and the residual diagnostics. Scenarios re-forecast with
changed drivers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from pipeline.core.cadence import period_labels
from pipeline.core.catalogue import MODELS
from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.design import Design, series_design
from pipeline.core.errors import DataError
from pipeline.core.execution import IN_PROCESS, Executor
from pipeline.core.intervals import (
    LEVELS,
    analytic_bounds,
    borrowing_note,
    empirical_bounds,
    error_scores,
    floored,
    horizon_bounds,
    percent,
    row_scales,
    trusted_method,
    usable_scales,
)
from pipeline.core.progress import QUIET, Progress
from pipeline.features.future import require_a_year
from pipeline.features.plan import plan_features
from pipeline.models import BASELINE_KINDS, make_model, prediction_spread
from pipeline.models.inference import (
    EXACT,
    EXACT_NOTE,
    EXACT_SHARE,
    FLAT_NOTE,
    diagnose,
    findings_table,
    fit_coefficient_table,
    fit_state,
    newey_west_lags,
    without_tests,
)
from pipeline.spec import Scenario, Spec
from pipeline.stages.backtest import BacktestResult, mase_scales, series_fallbacks, target_floor
from pipeline.stages.check import CheckedData
from pipeline.stages.multistep import needs_strategy, predict_ahead
from pipeline.stages.scenario_where import change_mask


@dataclass(frozen=True)
class ForecastResult:
    """The forecasts with intervals, the final fits' coefficients and diagnostics, and scenarios."""

    forecast: pd.DataFrame
    coefficients: pd.DataFrame
    fit_summary: pd.DataFrame
    diagnostics: pd.DataFrame = field(default_factory=pd.DataFrame)
    vif: pd.DataFrame = field(default_factory=pd.DataFrame)
    influential: pd.DataFrame = field(default_factory=pd.DataFrame)
    scenarios: pd.DataFrame = field(default_factory=pd.DataFrame)
    warnings: list[str] = field(default_factory=list)
    # What the run says about a final fit that asks nothing of the user (a retransformation)
    notes: list[str] = field(default_factory=list)
    residuals: pd.DataFrame = field(default_factory=pd.DataFrame)  # final OLS fit, per history row
    plan: object = None               # the feature plan fitted on all history
    fitted: dict = field(default_factory=dict)   # model name → model fitted on all history
    # Series a model per series forecasts by their mean: too few rows for its terms.
    fallbacks: pd.DataFrame = field(default_factory=pd.DataFrame)
    # What the empirical intervals are read from, for the model file: per model, the bound
    # of its scaled backtest errors per months ahead and level (``error_table``); each
    # series' scale from all history; the target's transform and floor; the last month.
    interval_bounds: dict = field(default_factory=dict)
    series_scales: dict = field(default_factory=dict)
    transform: str = "none"
    floor: float | None = None
    last_period: str | None = None
    # Series whose last actual is before last_period (they report late): series → that month.
    lagging_series: dict = field(default_factory=dict)
    # The direct strategy's fits on all history, one per months ahead it forecast: model
    # name → [(months ahead, feature plan, model)]; empty without target lags shorter than
    # the months ahead, or under the recursive strategy (the model above feeds back).
    horizon_fits: dict = field(default_factory=dict)


def apply_scenario(future: pd.DataFrame, scenario: Scenario, spec: Spec | None = None,
                   index: int = 0) -> pd.DataFrame:
    """Return the future rows with the scenario's changes made; a ``where`` that matches no
    row is refused at its key of the spec (``index``: the scenario's place in it)."""
    changed = future.copy()
    for number, change in enumerate(scenario.changes):
        def fail(key, message, number=number):
            place = ("scenarios", index, "changes", number, *key)
            return spec.error(place, message) if spec is not None else DataError(message)
        mask = change_mask(changed, change, scenario.name, spec.input.date_column if spec else None, fail)
        if change.set is not None:
            changed.loc[mask, change.column] = change.set
        elif change.add is not None:
            changed.loc[mask, change.column] = changed.loc[mask, change.column] + change.add
        else:
            changed.loc[mask, change.column] = changed.loc[mask, change.column] * (1 + change.percent / 100)
    return changed


def _row_labels(history: pd.DataFrame, design) -> list[str]:
    if len(design.series) != len(history):  # rows left out for their lags: no line numbers
        months = design.cadence.labels(design.period)
        return [f"{p} {s}" for p, s in zip(months, design.series)]
    rows = history[ROW].to_numpy()
    return [f"{p} {s} (row {int(r)})" if np.isfinite(r) else f"{p} {s} (filled)"
            for p, s, r in zip(period_labels(history[PERIOD]), history[SERIES], rows.astype(float))]


class _Predictor:
    """Predicts rows to forecast with a model fitted on all history: through the spec's
    multi_step strategy when a target lag is shorter than the months ahead, else from the
    rows' design (each frame's design built once)."""

    def __init__(self, spec: Spec, data: CheckedData, plan, stepwise: bool, *,
                 executor: Executor, progress: Progress) -> None:
        self.spec, self.data, self.plan, self.stepwise = spec, data, plan, stepwise
        self.executor, self.progress = executor, progress
        self.designs: dict[int, Design] = {}
        self.horizon_fits: dict[str, list] = {}   # the direct strategy's fits, for the model file

    def __call__(self, choice, model, frame: pd.DataFrame):
        """Return the point forecasts, their standard errors, residual df and centres (the
        predictions on the scale the model fits; None: the point forecasts) for the rows."""
        if self.stepwise and choice.kind in BASELINE_KINDS:
            return model.predict(series_design(frame, SERIES)), None, None, None
        if self.stepwise:  # a target lag is shorter than the months ahead: the spec's multi_step
            point, se, df, centre, fitted = predict_ahead(self.spec, choice, self.data.history, frame,
                                                          self.data.origins(frame),
                                                          executor=self.executor, progress=self.progress)
            if self.spec.multi_step == "direct":   # the first call: the months to forecast
                self.horizon_fits.setdefault(choice.name, fitted)
            return point, se, df, centre
        if id(frame) not in self.designs:
            self.designs[id(frame)] = self.plan.transform(frame)
        design = self.designs[id(frame)]
        se, df, centre = prediction_spread(model, design)
        return model.predict(design), se, df, centre

    def notes_of(self, frame: pd.DataFrame) -> tuple[str, ...]:
        """Return what the features did to the rows of a frame predicted from its design."""
        return self.designs[id(frame)].notes if id(frame) in self.designs else ()


def error_table(predictions: pd.DataFrame, kind: str, transform: str) -> pd.DataFrame:
    """Return a model's empirical interval bounds per months ahead, read from its backtest
    errors scaled by each series' scale in their window (``core.intervals.horizon_bounds``)."""
    own = predictions[predictions["model"] == kind]
    scores = error_scores(own["actual"].to_numpy(float), own["prediction"].to_numpy(float),
                          row_scales(own), transform)
    return horizon_bounds(own["horizon"].to_numpy(float), scores)


@dataclass(frozen=True)
class _Bounds:
    """What every model's intervals share: the target's transform, its floor, each forecast
    row's series scale (from all history) and months ahead."""

    transform: str
    floor: float | None
    scale: np.ndarray
    horizons: np.ndarray


def _forecast_table(kind: str, future: pd.DataFrame, bounds: _Bounds, point, se, df, centre,
                    errors: pd.DataFrame) -> pd.DataFrame:
    """Return one model's forecasts with their analytic and empirical 80% and 95% bounds.

    The analytic bounds are centre ± t(df)·se on the scale the model fits (``centre`` None:
    the point forecast), turned back by the inverse of the target's transform; the empirical
    ones are the point ± the conformal bound of its months ahead × its series' scale.
    """
    table = {"period": np.asarray(period_labels(future[PERIOD]), dtype=object), "horizon": bounds.horizons,
             "series": future[SERIES].to_numpy(), "model": kind, "forecast": point}
    for level in LEVELS:
        if se is not None:
            low, high = analytic_bounds(point if centre is None else centre, se, df, level, bounds.transform)
            low = floored(low, point, bounds.floor)
        else:
            low = high = np.full(len(point), np.nan)
        table[f"analytic_low_{percent(level)}"] = low
        table[f"analytic_high_{percent(level)}"] = high
    for level in LEVELS:
        low, high = empirical_bounds(point, bounds.horizons, bounds.scale, errors, level,
                                     bounds.transform, bounds.floor)
        table[f"empirical_low_{percent(level)}"] = low
        table[f"empirical_high_{percent(level)}"] = high
    return pd.DataFrame(table)


@dataclass
class _FitReport:
    """What the final fit of a least-squares model says beyond its forecasts."""

    terms: pd.DataFrame
    diagnostics: pd.DataFrame
    vif: pd.DataFrame
    influential: pd.DataFrame
    residuals: pd.DataFrame
    summary: dict
    warnings: list[str]


def _level_sandwich(spec: Spec, fit, matrix: np.ndarray, design: Design) -> dict:
    """Return what the absorbed levels' standard errors need for the spec's kind (none for the
    classical ones): the within columns, the rows' scores, the lags and the time order."""
    if spec.standard_errors == "classical":
        return {}
    within = matrix[:, fit.kept]
    if spec.standard_errors == "hc3":
        with np.errstate(divide="ignore", invalid="ignore"):
            return {"within": within, "scores": fit.residuals / (1.0 - fit.leverage)}
    lags = spec.autocorrelation_lags
    return {"within": within, "scores": fit.residuals, "order": design.period,
            "lags": newey_west_lags(len(fit.residuals)) if lags is None else lags}


def _least_squares_report(spec: Spec, data: CheckedData, model, kind: str, design: Design,
                          y: np.ndarray) -> _FitReport:
    """Return the coefficient table (with the spec's standard errors), the residual checks
    and the fit's summary of a model fitted by least squares on all history."""
    fit = model.least_squares_fit
    matrix = model.design_matrix(design)
    absorbed = getattr(model.inner, "absorbed_", None) is not None
    fitted = y - fit.residuals if absorbed else matrix[:, fit.kept] @ fit.coef[fit.kept]
    state = fit_state(fit, fitted + fit.residuals)
    terms = fit_coefficient_table(fit, matrix, spec.standard_errors, lags=spec.autocorrelation_lags,
                                  groups=design.series, order=design.period, exact=bool(state))
    terms["standard_errors"] = spec.standard_errors
    if absorbed:
        # The levels the fit absorbed, around the slopes, with the same kind of standard errors.
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            terms = model.inner.with_levels(terms, **_level_sandwich(spec, fit, matrix, design))
        terms = without_tests(terms) if state else terms
        terms["standard_errors"] = spec.standard_errors
    findings, vif, influential = diagnose(
        fit, matrix, groups=design.series, order=design.period,
        row_labels=_row_labels(data.history, design),
        term_groups=dict(zip(design.names, design.term_groups)) if design.term_groups else None,
        absorbed_series=design.series if absorbed else None, target=fitted + fit.residuals,
        cadence=design.cadence)
    diagnostics = findings_table(findings)
    residuals = pd.DataFrame({
        "period": design.cadence.labels(design.period),
        "series": design.series, "fitted": fitted, "residual": fit.residuals})
    diagnostics.insert(0, "model", kind)
    levels = len(model.inner.absorbed_.series_names) if absorbed else 0   # the intercept among them
    r2, adj_r2 = diagnostics["value"].iloc[0], diagnostics["value"].iloc[1]   # as the checks read them
    summary = {"model": kind, "rows": len(y), "terms": len(fit.names) + levels,
               "rank": fit.rank, "r2": r2, "adj_r2": adj_r2,
               "resid_sd": 0.0 if state else fit.resid_sd, "condition_number": fit.condition_number,
               "r2_kind": "centred" if fit.centered_r2 else "uncentred (no intercept)"}
    if fit.precision is not None:
        summary.update(refined=fit.precision.refined, refinement_steps=fit.precision.steps,
                       estimated_digits=fit.precision.digits)
    # An exact fit in real data usually means the target was made from a driver: a warning.
    exact = [f"{kind}: {EXACT_NOTE if state == EXACT else FLAT_NOTE}"] if state else []
    return _FitReport(terms, diagnostics, vif, influential, residuals, summary,
                      [f"{kind}: {item.describe()}" for item in fit.dropped] + exact)


def _exact_series(model, design: Design, y: np.ndarray) -> np.ndarray:
    """Return the series a model per series fits exactly: its residual SD no more than
    EXACT_SHARE of the series' largest target (their t-tests would test rounding)."""
    inner = model.inner
    largest = pd.Series(np.abs(np.asarray(y, float))).groupby(np.asarray(design.series, object)).max()
    sizes = largest.reindex(inner.series_).to_numpy(float)
    return np.asarray(inner.series_)[~inner.fell_back_ & (inner.resid_sd_ <= EXACT_SHARE * sizes)]


def _other_terms(spec: Spec, choice, model, kind: str, design: Design,
                 y: np.ndarray) -> tuple[pd.DataFrame, list[str]]:
    """Return the coefficient table of a model not fitted by plain least squares, and the
    warnings that go with it."""
    terms = model.coefficient_table()
    warnings = []
    if choice.per_series and hasattr(model.inner, "resid_sd_"):
        exact = terms["series"].isin(_exact_series(model, design, y)).to_numpy()
        if exact.any():
            terms = pd.concat([terms[~exact], without_tests(terms[exact])]).sort_index()
            warnings.append(f"{kind}: the fit is exact in {len(set(terms['series'][exact]))} series "
                            "(every residual zero, to rounding): their standard errors are zero and "
                            "no t-test applies")
    if choice.per_series:
        terms["standard_errors"] = "classical"
        if spec.standard_errors != "classical":
            warnings.append(f"{kind}: its coefficients' standard errors are classical; "
                            f"standard_errors: {spec.standard_errors} applies to the "
                            "models over all series")
    if MODELS[choice.kind].can("penalised"):
        terms["note"] = ("penalised fit: classical standard errors and p-values do not apply")
    return terms, warnings


def _descriptions(choice, model, kind: str) -> list[str]:
    """Return the notes that describe a model's final fit: what it is, and, for a model per
    series, how many series' fits were refined in twice the working precision."""
    found = [model.describe(), model.inner.precision_note() if choice.per_series else None]
    return [f"{kind}: {text}" for text in found if text]


def _fit_notes(choice, model, kind: str) -> tuple[list[str], pd.DataFrame | None]:
    """Return what the run should warn of about a model's final fit, and the series a model
    per series fitted by their own mean (or None); its description is a note, not a warning."""
    notes = []
    inner = model.inner
    if not choice.per_series:
        return notes, None
    notes += [f"{kind}: {note}" for note in inner.notes()]
    if not len(inner.fallbacks_):
        return notes, None
    notes.append(f"{kind}: {len(inner.fallbacks_)} series have no more rows than "
                 "terms and are forecast by their own mean (series_fallbacks.csv)")
    return notes, inner.fallbacks_.assign(model=kind)


def _scenario_rows(spec: Spec, future: pd.DataFrame, fitted: dict, predict: _Predictor, bounds: _Bounds,
                   error_tables: dict, coverage: pd.DataFrame | None) -> list[pd.DataFrame]:
    """Return, per scenario and model, the base forecast, the scenario's with its 80% and 95%
    interval (of the kind the pages state for the model: the one that held closest in the
    backtest), and their difference."""
    rows = []
    for index, scenario in enumerate(spec.scenarios):
        if not len(future):
            raise spec.error(("scenarios",), "scenarios need months to forecast, and the input has none")
        try:
            changed = apply_scenario(future, scenario, spec, index)
        except (TypeError, ValueError) as exc:
            raise DataError(f"scenario '{scenario.name}' cannot be applied: {exc}") from None
        for choice in spec.models:
            kind, model = choice.name, fitted[choice.name]
            base = predict(choice, model, future)[0]
            what_if = _forecast_table(kind, changed, bounds, *predict(choice, model, changed),
                                      error_tables[kind])
            method = trusted_method(coverage, kind, what_if)
            rows.append(pd.DataFrame({
                "scenario": scenario.name, "period": np.asarray(period_labels(future[PERIOD]), dtype=object),
                "series": future[SERIES].to_numpy(), "model": kind, "base_forecast": base,
                "scenario_forecast": what_if["forecast"].to_numpy(),
                "difference": what_if["forecast"].to_numpy() - base, "interval": method,
                **{f"{side}_{percent(level)}": what_if[f"{method}_{side}_{percent(level)}"].to_numpy()
                   for level in LEVELS for side in ("low", "high")},
            }))
    return rows


def make_forecast(spec: Spec, data: CheckedData, backtest: BacktestResult, *,
                  executor: Executor = IN_PROCESS, progress: Progress = QUIET,
                  coverage: pd.DataFrame | None = None) -> ForecastResult:
    """Return each model's forecast of the future rows, fitted on all history.

    A model per series fits its chunks of series on ``executor`` and counts them on
    ``progress``. ``coverage``: the backtest's interval coverage, which picks the interval a
    scenario states (as the pages pick the forecast's).
    """
    if spec.estimated_columns:
        require_a_year(spec, int(data.history[PERIOD].nunique()), "the history")
    plan = plan_features(spec, SERIES).fit(data.history)
    given = data.future.sort_values([PERIOD, SERIES], kind="stable")
    # Drivers nobody knows ahead: estimated from all history by the rule the backtest used
    # (a scenario may then replace an estimate).
    # Every row to forecast is after its own series' last actual, even one in a month other
    # series have actuals for (a series that lags).
    future = plan.estimate_future(given, every_row=True)
    history_design, y = plan.training_design(data.history)
    horizons = (future[PERIOD].array.asi8 - data.origins(future)).astype(int)
    stepwise = len(future) > 0 and needs_strategy(spec, int(horizons.max()))
    predict = _Predictor(spec, data, plan, stepwise, executor=executor, progress=progress)
    forecasts, coefficients, summaries = [], [], []
    warnings, fit_notes = [*history_design.notes], []
    if plan.future_ is not None and len(future):
        warnings += plan.future_.notes(given, given_ignored=True, every_row=True)
        warnings += plan.estimated_lag_notes(int(horizons.max()))
    if stepwise:
        warnings.append(f"the target's own lags are shorter than the {data.cadence.plural} ahead: forecasts use "
                        f"the {spec.multi_step} strategy (multi_step)")
        if spec.multi_step == "recursive" and spec.target_transform != "none":
            warnings.append(f"with target_transform: {spec.target_transform}, predictions fed back "
                            "as lags on the transformed scale give no analytic interval; only the "
                            "empirical one")
    report = None
    fitted, fallbacks, error_tables = {}, [], {}
    scales = mase_scales(data.history, spec.target, data.cadence.season_lag)
    bounds = _Bounds(spec.target_transform, target_floor(data.history[spec.target]),
                     usable_scales(future[SERIES].map(scales).to_numpy(float)), horizons)
    for choice in spec.models:
        kind = choice.name
        model = make_model(choice, intercept=spec.intercept, target=plan.target_scale,
                           executor=executor, progress=progress)
        model.fit(history_design, y)
        fitted[kind] = model
        notes, fell_back = _fit_notes(choice, model, kind)
        warnings += notes
        fit_notes += _descriptions(choice, model, kind)
        if fell_back is not None:
            fallbacks.append(fell_back)
        errors = error_tables[kind] = error_table(backtest.predictions, kind, spec.target_transform)
        if len(future):
            forecasts.append(_forecast_table(kind, future, bounds, *predict(choice, model, future), errors))
            warnings += [note for note in [borrowing_note(errors, int(horizons.max()), data.cadence.plural)]
                         if note and note not in warnings]
        if model.least_squares_fit is not None:
            report = _least_squares_report(spec, data, model, kind, history_design, y)
            terms = report.terms
            summaries.append(report.summary)
            warnings += report.warnings
        else:
            terms, notes = _other_terms(spec, choice, model, kind, history_design, y)
            warnings += notes
        terms.insert(0, "model", kind)
        coefficients.append(terms)
    # What the features did to the months to forecast.
    warnings += [note for note in predict.notes_of(future) if note not in warnings]
    scenario_rows = _scenario_rows(spec, future, fitted, predict, bounds, error_tables, coverage)
    forecast = pd.concat(forecasts, ignore_index=True) if forecasts else pd.DataFrame(
        columns=["period", "horizon", "series", "model", "forecast"])
    # Residual checks: those of the last model fitted by least squares (OLS over all series).
    empty = pd.DataFrame()
    return ForecastResult(
        forecast=forecast, coefficients=pd.concat(coefficients, ignore_index=True),
        fit_summary=pd.DataFrame(summaries),
        diagnostics=report.diagnostics if report else empty, vif=report.vif if report else empty,
        influential=report.influential if report else empty,
        scenarios=pd.concat(scenario_rows, ignore_index=True) if scenario_rows else pd.DataFrame(),
        warnings=warnings, notes=fit_notes, residuals=report.residuals if report else empty, plan=plan, fitted=fitted,
        fallbacks=pd.concat(fallbacks, ignore_index=True) if fallbacks else pd.DataFrame(
            columns=["model", "series", "rows", "terms"]),
        interval_bounds=error_tables, series_scales=scales, transform=spec.target_transform,
        floor=bounds.floor, last_period=data.cadence.label(data.last_period), horizon_fits=predict.horizon_fits,
        lagging_series=data.lagging_series())


def fallback_table(backtest: BacktestResult, forecast: ForecastResult) -> pd.DataFrame:
    """Return the series a model per series forecast by their own mean, in the backtest
    (windows too short for its terms) and in the final fit on all history."""
    tested = series_fallbacks(backtest.fallbacks).assign(stage="backtest")
    final = forecast.fallbacks
    final = pd.DataFrame({"model": final.get("model", []), "series": final.get("series", []),
                          "windows": 1, "first_window": "all history",
                          "fewest_rows": final.get("rows", []), "terms": final.get("terms", []),
                          "stage": "forecast"})
    columns = ["stage", "model", "series", "windows", "first_window", "fewest_rows", "terms"]
    frames = [frame[columns] for frame in (tested, final) if len(frame)]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=columns)
