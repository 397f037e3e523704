"""Evaluate: score the out-of-sample predictions and compare each model with the mean
baseline and the best simple rule.

Metrics come overall and per origin, horizon and series; skill is measured against the
mean baseline. Whether a model's advantage is more than luck is tested on the mean loss
difference per forecast origin with a variance that holds its size under the dependence
of overlapping forecasts (``core.significance``), for the whole table and for each series;
the p-values are Holm-adjusted for the models compared (and, per series, for the series).
A single holdout or k-fold folds give no p-value, and the answer says so. Skill, the test
and the selection all judge the one loss of ``select_by``; R² is out of sample against the
mean baseline's forecast. The per-series numbers are computed with array sums over sorted
groups, not a loop over series, so that thousands of series cost well under a second.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import partial

import numpy as np
import pandas as pd

from pipeline.core import metrics
from pipeline.core.cadence import cadence_named
from pipeline.core.catalogue import BASELINE, LOWER_IS_BETTER, METRIC_NAMES, METRICS, model_label
from pipeline.core.forked import called, map_shared
from pipeline.core.formatting import format_number
from pipeline.core.intervals import (
    backtest_intervals,
    closest_method,
    shortfall_warning,
    stated_interval_score,
)
from pipeline.core.scale import unit_scale
from pipeline.core.significance import METHOD, MIN_ORIGINS, holm, origin_test, origin_tests
from pipeline.spec import Spec
from pipeline.stages.answer import answer as compose_answer
from pipeline.stages.answer import is_simple_rule, p_text
from pipeline.stages.backtest import BacktestResult

METRIC_COLUMNS = ["n", *METRIC_NAMES]


@dataclass(frozen=True)
class Evaluation:
    """The comparison table (mean baseline first), the breakdowns, and the answer in words."""

    table: pd.DataFrame
    by_origin: pd.DataFrame
    by_horizon: pd.DataFrame
    by_series: pd.DataFrame
    coverage: pd.DataFrame
    recommended: str
    beats_baseline: bool
    verdict: str
    select_by: str
    notes: list[str] = field(default_factory=list)
    # Per model other than the mean of the training months: how many series it beats the mean of the training months on,
    # how many significantly, and the quartiles of its per-series skill (see ``series_summary``).
    series_summary: pd.DataFrame = field(default_factory=pd.DataFrame)
    # With drivers castline estimates: each model's metrics had those drivers been known
    # (ex-post), the mean of the training months first; empty otherwise. ``table`` is ex-ante.
    hindsight: pd.DataFrame = field(default_factory=pd.DataFrame)
    # Which drivers were known ahead, and what not knowing the estimated ones cost each
    # model, in words for the console; the pages say it from metrics.json's drivers_ahead
    # and hindsight_models, so these are not among ``notes``.
    ahead_notes: list[str] = field(default_factory=list)
    # The best simple rule (the mean of the training months when no other rule beats it), whether the
    # recommended model beats it significantly too, and whether the validation gave a test.
    best_rule: str = BASELINE
    beats_best_rule: bool = False
    tested: bool = True
    # The intervals' backtest coverage by months ahead and by size of series (thirds).
    coverage_detail: pd.DataFrame = field(default_factory=pd.DataFrame)
    # When the recommended model's stated interval held more than 5 points below nominal.
    interval_warning: str | None = None


def score(actual, predicted, scale=None) -> dict[str, float]:
    """Return every metric of one set of predictions."""
    actual = np.asarray(actual, float)
    predicted = np.asarray(predicted, float)
    return {"n": len(actual),
            **{metric.name: metric.compute(actual, predicted, scale) for metric in METRICS},
            "mape_rows_left_out": metrics.mape(actual, predicted)[1]}


def _scores_by(predictions: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """Return every metric per group of keys, one ``score`` call per group (for few groups)."""
    rows = []
    for values, group in predictions.groupby(keys, sort=False):
        values = values if isinstance(values, tuple) else (values,)
        rows.append({**dict(zip(keys, values)),
                     **score(group["actual"], group["prediction"], group["mase_scale"])})
    return pd.DataFrame(rows)


def _group_codes(frame: pd.DataFrame, keys: list[str]) -> np.ndarray:
    """Return each row's group number, groups numbered in order of first appearance (as
    ``groupby(keys, sort=False)``); -1 where a key is missing (groupby leaves those out)."""
    codes = np.zeros(len(frame), np.int64)
    missing = np.zeros(len(frame), bool)
    for key in keys:
        found, levels = pd.factorize(frame[key], sort=False)
        missing |= found < 0
        codes = codes * max(len(levels), 1) + np.maximum(found, 0)
    codes, _ = pd.factorize(codes, sort=False)
    codes[missing] = -1
    return codes


def _segments(codes: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return the row order that makes each group contiguous (rows keep their order within a
    group), each group's first position in that order, and its size."""
    order = np.argsort(codes, kind="stable")
    order = order[codes[order] >= 0]
    sorted_codes = codes[order]
    starts = np.flatnonzero(np.r_[True, sorted_codes[1:] != sorted_codes[:-1]]) if len(order) \
        else np.zeros(0, np.int64)
    sizes = np.diff(np.r_[starts, len(order)])
    return order, starts, sizes


def _sums(values: np.ndarray, starts: np.ndarray) -> np.ndarray:
    return np.add.reduceat(values, starts) if len(starts) else np.zeros(0)


def grouped_scores(predictions: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """Return every metric of ``score`` per group of keys, groups in order of first appearance.

    The same definitions as ``score`` (and the metrics module), computed with one
    sum per group over the rows sorted by group instead of a call per group; the
    sums are taken in another order, so values agree with ``score`` to rounding
    (about 1e-15 relative), not bit for bit.
    """
    columns = [*keys, *METRIC_COLUMNS, "mape_rows_left_out"]
    order, starts, sizes = _segments(_group_codes(predictions, keys))
    if not len(starts):
        return pd.DataFrame(columns=columns)
    actual = predictions["actual"].to_numpy(float)[order]
    predicted = predictions["prediction"].to_numpy(float)[order]
    scale = predictions["mase_scale"].to_numpy(float)[order]
    group = np.repeat(np.arange(len(starts)), sizes)
    n = sizes.astype(float)
    error = predicted - actual
    absolute = np.abs(error)

    def masked_mean(ratio: np.ndarray, usable: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        # Rows a metric leaves out add 0 to its sum and 0 to its count.
        count = _sums(usable.astype(np.int64), starts)
        total = _sums(np.where(usable, ratio, 0.0), starts)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(count > 0, total / np.maximum(count, 1), np.nan), count

    with np.errstate(invalid="ignore", divide="ignore"):
        mape_usable = actual != 0
        mape, mape_count = masked_mean(np.abs(error / np.where(mape_usable, actual, 1.0)),
                                       mape_usable)
        denominator = np.abs(actual) + np.abs(predicted)
        smape_usable = denominator != 0
        smape, _ = masked_mean(2 * absolute / np.where(smape_usable, denominator, 1.0),
                               smape_usable)
        scale_usable = np.isfinite(scale) & (scale > 0)
        mase, _ = masked_mean(absolute / np.where(scale_usable, scale, 1.0), scale_usable)
        absolute_sum = _sums(absolute, starts)
        # Squares at the errors' unit scale (errors of 1e-300 would square to 0), in that unit.
        size = unit_scale(error)
        squared_sum = _sums((error / size) ** 2, starts)
        actual_total = _sums(np.abs(actual), starts)
        wape = np.where(actual_total != 0, absolute_sum / actual_total, np.nan)
        spread = _sums(((actual - (_sums(actual, starts) / n)[group]) / size) ** 2, starts)
        r2 = np.where((sizes > 1) & (spread != 0), 1.0 - squared_sum / spread, np.nan)
    first = predictions.iloc[order[starts]]
    table = pd.DataFrame({key: first[key].to_numpy() for key in keys})
    table = table.assign(n=sizes.astype(np.int64), mae=absolute_sum / n, rmse=size * np.sqrt(squared_sum / n),
                         mape=mape, smape=smape, wape=wape, mase=mase, r2=r2,
                         bias=_sums(error, starts) / n,
                         mape_rows_left_out=(sizes - mape_count).astype(np.int64))
    for key in keys:  # keep the key columns' own types (numbers stay numbers)
        table[key] = table[key].astype(predictions[key].dtype)
    return table[columns]


def _with_skill(table: pd.DataFrame, keys: list[str], select_by: str = "mae") -> pd.DataFrame:
    """Add, within each key, skill against the mean of the training months in the ``select_by`` metric,
    1 − metric_model / metric_baseline, and replace R² by R² out of sample against the mean
    baseline's forecast, 1 − SSE_model / SSE_baseline over the same rows (Campbell &
    Thompson 2008, whose benchmark is the historical-mean forecast): the mean of the months
    predicted, which R² against their own mean reads, is not known when forecasting."""
    baseline = table[table["model"] == BASELINE]
    if keys:
        index = table.set_index(keys).index
        metric = index.map(baseline.set_index(keys)[select_by]).to_numpy(float)
        rmse = index.map(baseline.set_index(keys)["rmse"]).to_numpy(float)
    else:
        metric = np.repeat(float(baseline[select_by].iloc[0]), len(table))
        rmse = np.repeat(float(baseline["rmse"].iloc[0]), len(table))
    table = table.copy()
    table["skill_vs_mean"] = [metrics.skill(m, r) for m, r in zip(table[select_by], metric)]
    with np.errstate(invalid="ignore", divide="ignore"):
        table["r2"] = np.where(rmse > 0, 1.0 - (table["rmse"].to_numpy(float) / rmse) ** 2, np.nan)
    return table


# The loss per row that each selection metric averages (WAPE divides a sum of absolute
# errors by one common total, so its loss is the absolute error); NaN where it is undefined.
LOSS_WORDS = {"mae": "absolute error", "rmse": "squared error",
              "mape": "absolute percentage error", "smape": "symmetric absolute percentage error",
              "wape": "absolute error (WAPE's denominator is common to both forecasts)",
              "mase": "absolute error over each series' in-sample seasonal naive error"}


def _loss(actual: np.ndarray, predicted: np.ndarray, scale: np.ndarray,
          select_by: str) -> np.ndarray:
    """Return each row's loss under the ``select_by`` metric, so that skill, the test and the
    selection judge one and the same loss."""
    error = predicted - actual
    with np.errstate(invalid="ignore", divide="ignore"):
        if select_by == "rmse":
            # At the actuals' unit scale, the same for the two forecasts compared: their
            # squares neither underflow nor overflow, and the test does not depend on the unit.
            return (error / unit_scale(actual)) ** 2
        if select_by == "mape":
            return np.where(actual != 0, np.abs(error / actual), np.nan)
        if select_by == "smape":
            total = np.abs(actual) + np.abs(predicted)
            return np.where(total != 0, 2 * np.abs(error) / total, np.nan)
        if select_by == "mase":
            return np.where(np.isfinite(scale) & (scale > 0), np.abs(error) / scale, np.nan)
    return np.abs(error)


def test_refusal(backtest: BacktestResult, origins: int, plural: str = "months") -> str | None:
    """Return why no p-value can be given for this validation, or None when the test runs.

    The test needs many forecast origins in time order: one holdout is one origin, whose
    months share a single fit and whose errors are dependent, and k-fold folds have no
    order in time."""
    if backtest.scheme == "holdout":
        return ("a single holdout gives a point estimate and no p-value: whether the difference is "
                "more than luck needs many forecast origins (validation: method: rolling_origin)")
    if backtest.scheme != "rolling_origin":
        return ("k-fold folds have no order in time, so no p-value is given: validation: method: "
                "rolling_origin tests the difference over many forecast origins")
    if origins < MIN_ORIGINS:
        return (f"{origins} forecast origins are too few for a test that holds its size (at least "
                f"{MIN_ORIGINS}): no p-value is given; lower min_train_periods or step, or add {plural}")
    return None


def _differences(predictions: pd.DataFrame, model: str, reference: str,
                 select_by: str) -> pd.DataFrame:
    """Return, per (origin, period, series) both predicted, the reference's loss less the
    model's (the loss of ``select_by``), rows sorted by origin, period and series; rows the
    loss leaves out are dropped. Where each model predicts a cell once, the cells are matched
    on one integer per cell; otherwise the pivot table takes each cell's first value."""
    keys = ["origin", "period", "series"]
    pair = predictions[predictions["model"].isin([reference, model])]
    codes, sizes = [], []
    for key in keys:   # sorted codes: their combination sorts as the pivot table's rows do
        found, levels = pd.factorize(pair[key], sort=True)
        codes.append(found.astype(np.int64))
        sizes.append(len(levels))
    if any((found < 0).any() for found in codes):
        return _pivoted_differences(pair, model, reference, select_by)
    cell = (codes[0] * sizes[1] + codes[1]) * sizes[2] + codes[2]
    name = pair["model"].to_numpy()
    own, base = np.flatnonzero(name == model), np.flatnonzero(name == reference)
    own_cells, base_cells = pd.Index(cell[own]), pd.Index(cell[base])
    if not (own_cells.is_unique and base_cells.is_unique):
        return _pivoted_differences(pair, model, reference, select_by)
    base = base[np.argsort(cell[base], kind="stable")]
    match = own_cells.get_indexer(cell[base])
    base, own = base[match >= 0], own[match[match >= 0]]
    actual = pair["actual"].to_numpy(float)[base]
    scale = pair["mase_scale"].to_numpy(float)[base]
    difference = (_loss(actual, pair["prediction"].to_numpy(float)[base], scale, select_by)
                  - _loss(actual, pair["prediction"].to_numpy(float)[own], scale, select_by))
    kept = np.isfinite(difference)
    rows = base[kept]
    frame = pd.DataFrame({key: pair[key].to_numpy()[rows] for key in keys})
    frame["d"] = difference[kept]
    return frame


def _pivoted_differences(pair: pd.DataFrame, model: str, reference: str, select_by: str) -> pd.DataFrame:
    """``_differences`` by a pivot table: each cell's first value of each model (a cell predicted
    twice, or a missing key)."""
    wide = pair.pivot_table(index=["origin", "period", "series"], columns="model",
                            values=["prediction", "actual", "mase_scale"], aggfunc="first",
                            dropna=False)
    actual = wide[("actual", reference)].to_numpy(float)
    scale = wide[("mase_scale", reference)].to_numpy(float)
    difference = (_loss(actual, wide[("prediction", reference)].to_numpy(float), scale, select_by)
                  - _loss(actual, wide[("prediction", model)].to_numpy(float), scale, select_by))
    frame = pd.DataFrame({"d": difference}, index=wide.index).reset_index()
    return frame[np.isfinite(frame["d"].to_numpy(float))]


def origin_differences(predictions: pd.DataFrame, model: str, select_by: str,
                       reference: str = BASELINE) -> np.ndarray:
    """Return the mean loss difference (reference − model) at each origin, origins in time
    order: the series the test runs on, so forecasts made at one origin count once."""
    frame = _differences(predictions, model, reference, select_by)
    return frame.groupby("origin", sort=True)["d"].mean().to_numpy(float)


def series_tests(predictions: pd.DataFrame, backtest: BacktestResult,
                 select_by: str) -> pd.DataFrame:
    """Return, per model other than the mean of the training months and per series, the one-sided test of
    "the model's loss is lower than that of the mean of the training months" on that series' mean loss
    difference per origin (``significance.origin_tests``), origins in time order; a series
    scored at fewer than MIN_ORIGINS origins, or a validation that gives no test, gets NaN.
    Columns: model, series, test_statistic, p_value, test_n (the origins tested on)."""
    columns = ["model", "series", "test_statistic", "p_value", "test_n"]
    if not len(predictions):
        return pd.DataFrame(columns=columns)
    testable = test_refusal(backtest, int(predictions["origin"].nunique())) is None
    origin, origins = pd.factorize(predictions["origin"].astype(str), sort=True)
    period, periods = pd.factorize(predictions["period"].astype(str), sort=True)
    series, names = pd.factorize(predictions["series"], sort=False)
    # One integer per (series, origin, period): the rows both models predicted are matched on it.
    key = (series.astype(np.int64) * (len(origins) + 1) + origin) * (len(periods) + 1) + period
    model = predictions["model"].to_numpy()
    actual = predictions["actual"].to_numpy(float)
    predicted = predictions["prediction"].to_numpy(float)
    scale = predictions["mase_scale"].to_numpy(float)
    base = np.flatnonzero(model == BASELINE)
    base = base[~pd.Index(key[base]).duplicated()]   # the first row of a duplicated cell, as pivot_table
    base_index = pd.Index(key[base])
    frames = []
    for name in dict.fromkeys(model):
        if name == BASELINE:
            continue
        own = np.flatnonzero(model == name)
        own = own[~pd.Index(key[own]).duplicated()]
        match = base_index.get_indexer(key[own])
        own, paired = own[match >= 0], base[match[match >= 0]]
        truth = actual[paired]
        differences = (_loss(truth, predicted[paired], scale[paired], select_by)
                       - _loss(truth, predicted[own], scale[paired], select_by))
        defined = np.isfinite(differences)   # rows the loss leaves out (MAPE where actual is 0)
        own, differences = own[defined], differences[defined]
        # The mean difference per (series, origin): a series × origin matrix, NaN where unscored.
        cell = series[own].astype(np.int64) * len(origins) + origin[own]
        total = np.bincount(cell, weights=differences, minlength=len(names) * len(origins))
        count = np.bincount(cell, minlength=len(names) * len(origins))
        with np.errstate(invalid="ignore", divide="ignore"):
            means = (total / count).reshape(len(names), len(origins))
        scored = count.reshape(len(names), len(origins)) > 0
        present = scored.any(axis=1)
        test_n = scored.sum(axis=1)
        statistic = np.full(len(names), np.nan)
        p_value = np.full(len(names), np.nan)
        if testable:
            statistic, p_value = _tests_by_series(means, scored, test_n)
        frames.append(pd.DataFrame({"model": name, "series": names[present],
                                    "test_statistic": statistic[present], "p_value": p_value[present],
                                    "test_n": test_n[present].astype(np.int64)}))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=columns)


def _tests_by_series(means: np.ndarray, scored: np.ndarray,
                     test_n: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return each series' test on its per-origin means, the origins it was scored at taken
    in order; series scored at the same origins are tested together, at fewer than
    MIN_ORIGINS origins not at all."""
    statistic = np.full(len(means), np.nan)
    p_value = np.full(len(means), np.nan)
    enough = np.flatnonzero(test_n >= MIN_ORIGINS)
    if not len(enough):
        return statistic, p_value
    patterns, which = np.unique(scored[enough], axis=0, return_inverse=True)
    for number, pattern in enumerate(patterns):
        rows = enough[np.asarray(which).ravel() == number]
        statistic[rows], p_value[rows] = origin_tests(means[np.ix_(rows, pattern)])
    return statistic, p_value


def series_summary(by_series: pd.DataFrame) -> pd.DataFrame:
    """Return, per model other than the mean of the training months: the series scored, how many and what
    share it beats the mean of the training months on (skill > 0), how many and what share significantly,
    and the quartiles of its per-series skill."""
    columns = ["model", "series", "beats", "beats_share", "beats_significantly",
               "significant_share", "skill_q25", "skill_median", "skill_q75"]
    own = by_series[by_series["model"] != BASELINE]
    if not len(own):
        return pd.DataFrame(columns=columns)
    grouped = own.groupby("model", sort=False)
    skill = grouped["skill_vs_mean"]
    table = pd.DataFrame({
        "series": grouped["series"].size(),
        "beats": grouped["beats"].sum(),
        "beats_share": grouped["beats"].mean(),
        "beats_significantly": grouped["beats_significantly"].sum(),
        "significant_share": grouped["beats_significantly"].mean(),
        # Quartiles of the series whose skill is defined (the baseline's loss is not 0).
        "skill_q25": skill.quantile(0.25), "skill_median": skill.median(),
        "skill_q75": skill.quantile(0.75),
    }).reset_index()
    return table[columns]


def _with_series_tests(by_series: pd.DataFrame, tests: pd.DataFrame, level: float) -> pd.DataFrame:
    """Return the per-series table with each series' test, and whether the model beats the
    mean baseline there (skill > 0) and does so significantly (also p < level)."""
    table = by_series.merge(tests, on=["model", "series"], how="left", validate="one_to_one")
    table["test_n"] = table["test_n"].fillna(0).astype(np.int64)
    table["beats"] = (table["model"] != BASELINE) & (table["skill_vs_mean"] > 0)
    # With many series some pass by luck: each model's series tests are adjusted together
    # (Holm 1979), so "significantly in X of N" claims at most the test's level in all.
    table["p_holm"] = np.nan
    for _, rows in table.groupby("model", sort=False):
        table.loc[rows.index, "p_holm"] = holm(rows["p_value"].to_numpy(float))
    table["beats_significantly"] = table["beats"] & (table["p_holm"] < level)
    return table


def _hindsight_table(predictions: pd.DataFrame, hindsight: pd.DataFrame | None,
                     select_by: str) -> pd.DataFrame:
    """Return every metric of the models had the estimated drivers been known (ex-post),
    with the mean of the training months (which reads no driver) first; empty without such drivers."""
    if hindsight is None or not len(hindsight):
        return pd.DataFrame()
    baseline = predictions[predictions["model"] == BASELINE]
    return _with_skill(_scores_by(pd.concat([baseline, hindsight], ignore_index=True),
                                  ["model"]), [], select_by)


def _ahead_notes(spec: Spec, backtest: BacktestResult,
                 table: pd.DataFrame) -> tuple[list[str], pd.DataFrame]:
    """Return the notes on drivers ahead (which were known, and what not knowing the
    estimated ones costs each model) and the ex-post metrics."""
    hindsight = _hindsight_table(backtest.predictions, backtest.hindsight, spec.select_by)
    said = [backtest.ahead + "."] if backtest.ahead else []
    return said + _hindsight_notes(spec, backtest, table, hindsight), hindsight


def _hindsight_notes(spec: Spec, backtest: BacktestResult, table: pd.DataFrame,
                     hindsight: pd.DataFrame) -> list[str]:
    """Return, per model, what not knowing the estimated drivers ahead costs."""
    if not len(hindsight):
        return []
    metric = spec.select_by
    columns = list(backtest.estimated)
    named = " and ".join([", ".join(columns[:-1]), columns[-1]] if len(columns) > 1 else columns)
    after = hindsight.set_index("model")[metric]
    notes = []
    for row in table.itertuples():
        if row.model == BASELINE or row.model not in after.index:
            continue
        ante, post = float(getattr(row, metric)), float(after[row.model])
        change = (f" ({(ante - post) / post:+.0%} for not knowing them)"
                  if post and metric in LOWER_IS_BETTER else "")
        notes.append(f"{model_label(row.model)}: had {named} been known ahead, its {metric.upper()} "
                     f"would have been {format_number(post)} rather than {format_number(ante)}{change}; the comparison "
                     "and the intervals use the estimates, as the forecast must")
    return notes


def _same_forecasts(predictions: pd.DataFrame, model: str, reference: str) -> bool:
    """Return whether a model's predictions are the reference's up to rounding (a test of
    rounding noise would read as a finding)."""
    own = predictions.loc[predictions["model"] == model, "prediction"].to_numpy(float)
    base = predictions.loc[predictions["model"] == reference, "prediction"].to_numpy(float)
    return len(own) == len(base) and bool(np.allclose(own, base, rtol=1e-9, atol=0))


def _tested(predictions: pd.DataFrame, model: str, reference: str, select_by: str,
            testable: bool) -> tuple[float, float]:
    """Return the statistic and one-sided p-value of "the model's loss is lower than the
    reference's", on the mean loss difference per origin; NaN, NaN when not tested."""
    if not testable or _same_forecasts(predictions, model, reference):
        return np.nan, np.nan
    differences = origin_differences(predictions, model, select_by, reference)
    test = origin_test(differences) if len(differences) else None
    return (test.statistic, test.p_value) if test else (np.nan, np.nan)


def _readings(table: pd.DataFrame, same: list[bool], level: float, metric: str,
              tested: bool) -> list[str]:
    """Return each model's reading against the mean of the training months, by its Holm-adjusted p-value
    (adjusted for the models compared; the raw one is in the table's p_value)."""
    readings = []
    for row, identical in zip(table.itertuples(), same):
        adjusted = row.p_holm
        if row.model == BASELINE:
            readings.append("the reference")
        elif identical:
            readings.append("the same forecasts as the mean")
        elif not tested:
            lower = np.isfinite(row.skill_vs_mean) and row.skill_vs_mean > 0
            readings.append(f"{'lower' if lower else 'no lower'} {metric}, not tested")
        elif np.isfinite(adjusted) and adjusted < level:
            readings.append(f"beats the mean (Holm {p_text(adjusted)})")
        else:
            readings.append(f"no better than the mean (Holm {p_text(adjusted)})")
    return readings


def _against_rules(table: pd.DataFrame, predictions: pd.DataFrame, select_by: str,
                   testable: bool) -> tuple[str, pd.DataFrame]:
    """Return the best simple rule (the mean of the training months when no other rule beats it) and the
    table with each linear model's skill against it and its test, Holm-adjusted over the
    linear models compared with it."""
    rules = table[[is_simple_rule(name) for name in table["model"]]]
    rules = rules[rules[select_by].notna()]
    best_rule = str(rules.sort_values(select_by, kind="stable")["model"].iloc[0]) if len(rules)         else BASELINE
    table = table.copy()
    rule_value = float(table.loc[table["model"] == best_rule, select_by].iloc[0])
    linear = [not is_simple_rule(name) for name in table["model"]]
    table["skill_vs_best_rule"] = [metrics.skill(v, rule_value) if own else np.nan
                                   for v, own in zip(table[select_by], linear)]
    p_values = [_tested(predictions, name, best_rule, select_by, testable)[1]
                if own and best_rule != BASELINE else np.nan
                for name, own in zip(table["model"], linear)]
    table["p_best_rule"] = p_values
    table["p_best_rule_holm"] = holm(p_values)
    return best_rule, table


def _breakdowns(backtest: BacktestResult, select_by: str, level: float) -> tuple:
    """Return the scores by origin, by months ahead (empty without a time order) and by series."""
    predictions = backtest.predictions
    time_ordered = backtest.scheme in ("holdout", "rolling_origin")
    by_origin = _with_skill(grouped_scores(predictions, ["model", "origin"]), ["origin"], select_by)
    by_horizon = _with_skill(grouped_scores(predictions, ["model", "horizon"]), ["horizon"], select_by) \
        if time_ordered else pd.DataFrame()
    by_series = _with_series_tests(_with_skill(grouped_scores(predictions, ["model", "series"]),
                                               ["series"], select_by),
                                   series_tests(predictions, backtest, select_by), level)
    return by_origin, by_horizon, by_series


def evaluate(spec: Spec, backtest: BacktestResult) -> Evaluation:
    """Return the metrics of each model, its skill against the mean of the training months and the best
    simple rule, and the answer."""
    predictions = backtest.predictions
    select_by = spec.select_by
    level = spec.significance_level
    table = _with_skill(_scores_by(predictions, ["model"]), [], select_by)
    notes = list(backtest.notes)
    ahead_notes, hindsight = _ahead_notes(spec, backtest, table)
    refusal = test_refusal(backtest, int(predictions["origin"].nunique()),
                           cadence_named(spec.input.period).plural)
    testable = refusal is None
    tests = [(np.nan, np.nan) if model == BASELINE else
             _tested(predictions, model, BASELINE, select_by, testable) for model in table["model"]]
    same = [model != BASELINE and _same_forecasts(predictions, model, BASELINE)
            for model in table["model"]]
    # A model whose forecasts are the mean's to rounding has a skill of nothing against it (a
    # target that varies only in its last digits would otherwise give one of rounding noise).
    table.loc[np.asarray(same, bool), "skill_vs_mean"] = 0.0
    table["test_statistic"] = [statistic for statistic, _ in tests]
    table["p_value"] = [p for _, p in tests]
    # Picking the best of several models is itself a search: the p-values are adjusted for
    # the number of models compared (Holm 1979), and the answer reads the adjusted one.
    table["p_holm"] = holm(table["p_value"].to_numpy(float))
    table["against_mean"] = _readings(table, same, level, select_by.upper(), testable)
    best_rule, table = _against_rules(table, predictions, select_by, testable)
    if testable:
        notes.append(f"Significance: {METHOD}; on the mean loss at each of "
                     f"{predictions['origin'].nunique()} origins; loss = {LOSS_WORDS[select_by]}, "
                     f"the loss of {select_by.upper()}, which skill and the selection use too.")
    else:
        notes.append(f"Significance: {refusal}.")
    for row in table.itertuples():
        if row.mape_rows_left_out:
            notes.append(f"{model_label(row.model)}: MAPE leaves out {row.mape_rows_left_out} rows whose actual "
                         "is 0 (a percentage error is undefined there)")

    baseline_value = float(table.loc[table["model"] == BASELINE, select_by].iloc[0])
    # A model must beat the baseline by more than rounding to be preferred to it.
    contenders = table[(table["model"] == BASELINE)
                       | ((table[select_by] < baseline_value - 1e-9 * abs(baseline_value)) & ~np.asarray(same))]
    contenders = contenders[contenders[select_by].notna()]
    recommended = str(contenders.sort_values(select_by, kind="stable")["model"].iloc[0])
    answer = compose_answer(table, recommended, best_rule, select_by, level, refusal, cadence_named(spec.input.period))
    # The tables by origin, months ahead and series, and the intervals' coverage, are computed
    # side by side with a forked copy of this process where the machine allows (core.forked).
    (by_origin, by_horizon, by_series), (held, held_by) = map_shared(called, [
        partial(_breakdowns, backtest, select_by, level),
        partial(backtest_intervals, predictions, backtest.transform, backtest.floor)])
    # The interval score (Winkler 1972) of the 95% interval the pages state for each model.
    table["interval_score_95"] = [stated_interval_score(held, model) for model in table["model"]]
    return Evaluation(table=table, by_origin=by_origin, by_horizon=by_horizon, by_series=by_series,
                      coverage=held, coverage_detail=held_by,
                      interval_warning=shortfall_warning(held, recommended, closest_method(held, recommended)),
                      recommended=recommended, beats_baseline=answer.beats, verdict=answer.verdict,
                      select_by=select_by, notes=notes, series_summary=series_summary(by_series),
                      hindsight=hindsight, ahead_notes=ahead_notes, best_rule=best_rule,
                      beats_best_rule=answer.beats_rule, tested=testable)
