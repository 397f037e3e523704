"""Evaluate: score the out-of-sample predictions and compare each model with the mean baseline.

Metrics come overall and per origin, horizon and series; skill is measured
against the mean baseline, and the Diebold–Mariano test (with the small-sample
correction) says whether a model's advantage is more than luck — for the whole
table, and for each series on its own. Skill, the test and the selection all
judge the one loss of ``select_by``; R² is out of sample against the mean
baseline's forecast. The per-series numbers are computed
with array sums over sorted groups, not a loop over series, so that thousands
of series cost well under a second.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from pipeline.core import metrics
from pipeline.core.catalogue import BASELINE, LOWER_IS_BETTER, METRIC_NAMES, METRICS, model_label
from pipeline.core.intervals import coverage
from pipeline.core.significance import diebold_mariano, diebold_mariano_by_group, holm
from pipeline.spec import Spec
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
    # Per model other than the mean baseline: how many series it beats the mean baseline on,
    # how many significantly, and the quartiles of its per-series skill (see ``series_summary``).
    series_summary: pd.DataFrame = field(default_factory=pd.DataFrame)
    # With drivers castline estimates: each model's metrics had those drivers been known
    # (ex-post), the mean baseline first; empty otherwise. ``table`` is ex-ante.
    hindsight: pd.DataFrame = field(default_factory=pd.DataFrame)
    # Which drivers were known ahead, and what not knowing the estimated ones cost each
    # model, in words for the console; the pages say it from metrics.json's drivers_ahead
    # and hindsight_models, so these are not among ``notes``.
    ahead_notes: list[str] = field(default_factory=list)


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
        squared_sum = _sums(error ** 2, starts)
        actual_total = _sums(np.abs(actual), starts)
        wape = np.where(actual_total != 0, absolute_sum / actual_total, np.nan)
        spread = _sums((actual - (_sums(actual, starts) / n)[group]) ** 2, starts)
        r2 = np.where((sizes > 1) & (spread != 0), 1.0 - squared_sum / spread, np.nan)
    first = predictions.iloc[order[starts]]
    table = pd.DataFrame({key: first[key].to_numpy() for key in keys})
    table = table.assign(n=sizes.astype(np.int64), mae=absolute_sum / n, rmse=np.sqrt(squared_sum / n),
                         mape=mape, smape=smape, wape=wape, mase=mase, r2=r2,
                         bias=_sums(error, starts) / n,
                         mape_rows_left_out=(sizes - mape_count).astype(np.int64))
    for key in keys:  # keep the key columns' own types (numbers stay numbers)
        table[key] = table[key].astype(predictions[key].dtype)
    return table[columns]


def _with_skill(table: pd.DataFrame, keys: list[str], select_by: str = "mae") -> pd.DataFrame:
    """Add, within each key, skill against the mean baseline in the ``select_by`` metric,
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
            return error ** 2
        if select_by == "mape":
            return np.where(actual != 0, np.abs(error / actual), np.nan)
        if select_by == "smape":
            total = np.abs(actual) + np.abs(predicted)
            return np.where(total != 0, 2 * np.abs(error) / total, np.nan)
        if select_by == "mase":
            return np.where(np.isfinite(scale) & (scale > 0), np.abs(error) / scale, np.nan)
    return np.abs(error)


def autocovariance_lags(backtest: BacktestResult, origins: int) -> int:
    """Return how many autocovariance lags the test allows for (its horizon h).

    Over rolling origins, forecasts from origins less than a horizon apart
    overlap, so their loss differences are correlated up to ceil(horizon / step)
    origins apart; otherwise the differences are treated as independent.
    """
    if backtest.scheme == "rolling_origin" and origins >= 3:
        step = getattr(backtest, "step", 1) or 1
        return max(1, math.ceil(backtest.horizon / step))
    return 1


def loss_differences(predictions: pd.DataFrame, model: str, backtest: BacktestResult,
                     select_by: str) -> tuple[np.ndarray, int, str]:
    """Return the series of (baseline loss − model loss), the lag horizon and how it was formed."""
    pair = predictions[predictions["model"].isin([BASELINE, model])]
    wide = pair.pivot_table(index=["origin", "period", "series"], columns="model",
                            values=["prediction", "actual", "mase_scale"], aggfunc="first",
                            dropna=False)
    actual = wide[("actual", BASELINE)].to_numpy(float)
    scale = wide[("mase_scale", BASELINE)].to_numpy(float)
    difference = (_loss(actual, wide[("prediction", BASELINE)].to_numpy(float), scale, select_by)
                  - _loss(actual, wide[("prediction", model)].to_numpy(float), scale, select_by))
    frame = pd.DataFrame({"d": difference}, index=wide.index).reset_index()
    frame = frame[np.isfinite(frame["d"].to_numpy(float))]   # rows the loss leaves out
    origins = frame["origin"].nunique()
    if backtest.scheme == "rolling_origin" and origins >= 3:
        series = frame.groupby("origin", sort=True)["d"].mean()
        return series.to_numpy(), autocovariance_lags(backtest, origins), \
            f"the mean loss at each of {origins} origins"
    if backtest.scheme in ("holdout", "rolling_origin"):
        series = frame.groupby("period", sort=True)["d"].mean()
        return series.to_numpy(), 1, (f"the mean loss in each of the {len(series)} months scored "
                                      "(treated as independent; rolling origins give a sounder test)")
    return frame["d"].to_numpy(), 1, f"the loss of each of the {len(frame)} rows scored"


def series_tests(predictions: pd.DataFrame, backtest: BacktestResult,
                 select_by: str) -> pd.DataFrame:
    """Return, per model other than the mean baseline and per series, the one-sided
    Diebold–Mariano test of "the model's loss is lower than the mean baseline's".

    For one series the loss differences (baseline − model, the loss of
    ``select_by``) are taken row by row over the rows both predicted, ordered by
    origin then period, with as many lags as the overall test allows for
    (``autocovariance_lags``). Columns: model, series, test_statistic, p_value, test_n.
    """
    columns = ["model", "series", "test_statistic", "p_value", "test_n"]
    if not len(predictions):
        return pd.DataFrame(columns=columns)
    # One integer per (origin, period, series), origins and periods numbered in sorted order,
    # so sorting the integers sorts by series, then origin, then period.
    origin, _ = pd.factorize(predictions["origin"].astype(str), sort=True)
    period, periods = pd.factorize(predictions["period"].astype(str), sort=True)
    series, names = pd.factorize(predictions["series"], sort=False)
    key = (series.astype(np.int64) * (origin.max() + 1) + origin) * (len(periods) + 1) + period
    model = predictions["model"].to_numpy()
    actual = predictions["actual"].to_numpy(float)
    predicted = predictions["prediction"].to_numpy(float)
    scale = predictions["mase_scale"].to_numpy(float)
    base = np.flatnonzero(model == BASELINE)
    base = base[~pd.Index(key[base]).duplicated()]   # the first row of a duplicated cell, as pivot_table
    base_index = pd.Index(key[base])
    lags = autocovariance_lags(backtest, int(predictions["origin"].nunique()))
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
        order = np.argsort(key[own], kind="stable")
        codes = series[own][order]
        starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]]) if len(codes) else \
            np.zeros(0, np.int64)
        sizes = np.diff(np.r_[starts, len(codes)])
        statistic, p_value = diebold_mariano_by_group(differences[order], starts, sizes, lags)
        frames.append(pd.DataFrame({"model": name, "series": names[codes[starts]],
                                    "test_statistic": statistic, "p_value": p_value,
                                    "test_n": sizes.astype(np.int64)}))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=columns)


def series_summary(by_series: pd.DataFrame) -> pd.DataFrame:
    """Return, per model other than the mean baseline: the series scored, how many and what
    share it beats the mean baseline on (skill > 0), how many and what share significantly,
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
    with the mean baseline (which reads no driver) first; empty without such drivers."""
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
                     f"would have been {post:.4g} rather than {ante:.4g}{change}; the comparison "
                     "and the intervals use the estimates, as the forecast must")
    return notes


def _against_mean(predictions: pd.DataFrame, model: str, backtest: BacktestResult,
                  select_by: str) -> tuple[float, float, str | None]:
    """Return the Diebold–Mariano statistic and p-value of a model against the mean baseline,
    and what the test ran on; NaN, NaN and None when the model's predictions are the
    baseline's up to rounding (a test of rounding noise would read as a finding)."""
    own = predictions.loc[predictions["model"] == model, "prediction"].to_numpy(float)
    base = predictions.loc[predictions["model"] == BASELINE, "prediction"].to_numpy(float)
    if len(own) == len(base) and np.allclose(own, base, rtol=1e-9, atol=0):
        return np.nan, np.nan, None
    differences, lags, how = loss_differences(predictions, model, backtest, select_by)
    test = diebold_mariano(differences, np.zeros_like(differences), horizon=lags) \
        if len(differences) else None
    return (test.statistic, test.p_value, how) if test else (np.nan, np.nan, how)


def _readings(table: pd.DataFrame, same: list[bool], level: float) -> list[str]:
    """Return each model's reading against the mean baseline, by its Holm-adjusted p-value
    (the raw one beside it when several models were compared)."""
    compared = int(np.isfinite(table["p_holm"].to_numpy(float)).sum())
    readings = []
    for row, identical in zip(table.itertuples(), same):
        adjusted = row.p_holm
        shown = (f"{_p_text(adjusted)}, Holm-adjusted for {compared} models; raw "
                 f"{_p_text(row.p_value)}" if compared > 1 else _p_text(adjusted))
        readings.append("the reference" if row.model == BASELINE else
                        "the same forecasts as the mean baseline" if identical else
                        f"beats the mean baseline ({shown})"
                        if np.isfinite(adjusted) and adjusted < level else
                        f"no better than the mean baseline ({shown})")
    return readings


def _adjusted_for(table: pd.DataFrame) -> str:
    """Return ", Holm-adjusted for the K models compared" when more than one was."""
    compared = int(np.isfinite(table["p_holm"].to_numpy(float)).sum())
    return f", Holm-adjusted for the {compared} models compared" if compared > 1 else ""


def _p_text(p: float) -> str:
    if not np.isfinite(p):
        return "p not available"
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def evaluate(spec: Spec, backtest: BacktestResult) -> Evaluation:
    """Return the metrics of each model, its skill against the mean baseline, and the answer."""
    predictions = backtest.predictions
    select_by = spec.select_by
    level = spec.significance_level
    table = _with_skill(_scores_by(predictions, ["model"]), [], select_by)
    statistics, p_values, same = [], [], []
    notes = list(backtest.notes)
    ahead_notes, hindsight = _ahead_notes(spec, backtest, table)
    how = ""
    for model in table["model"]:
        statistic, p, ran_on = (np.nan, np.nan, "") if model == BASELINE else \
            _against_mean(predictions, model, backtest, select_by)
        statistics.append(statistic)
        p_values.append(p)
        same.append(ran_on is None)
        how = ran_on or how
    table["test_statistic"] = statistics
    table["p_value"] = p_values
    # Picking the best of several models is itself a search: the p-values are adjusted for
    # the number of models compared (Holm 1979), and the answer reads the adjusted one.
    table["p_holm"] = holm(p_values)
    table["against_mean"] = _readings(table, same, level)
    if how:
        notes.append(f"Significance: Diebold–Mariano test with the Harvey–Leybourne–Newbold "
                     f"correction, one-sided, on {how}; loss = {LOSS_WORDS[select_by]}, the "
                     f"loss of {select_by.upper()}, which skill and the selection use too.")
    for row in table.itertuples():
        if row.mape_rows_left_out:
            notes.append(f"{row.model}: MAPE leaves out {row.mape_rows_left_out} rows whose actual "
                         "is 0 (a percentage error is undefined there)")

    baseline_value = float(table.loc[table["model"] == BASELINE, select_by].iloc[0])
    sign = 1 if select_by in LOWER_IS_BETTER else -1
    # A model must beat the baseline by more than rounding to be preferred to it.
    contenders = table[(table["model"] == BASELINE)
                       | (sign * table[select_by] < sign * baseline_value - 1e-9 * abs(baseline_value))]
    contenders = contenders[contenders[select_by].notna()]
    best = contenders.sort_values(select_by, ascending=sign > 0, kind="stable").iloc[0]
    recommended = str(best["model"])
    metric = select_by.upper()
    if recommended == BASELINE:
        beats = False
        verdict = (f"No model beats the mean baseline out of sample on {metric}: the plain average "
                   "of each series' history is as good a forecast here.")
    else:
        p = float(best["p_holm"])
        beats = bool(np.isfinite(p) and p < level)
        said = _p_text(p) + _adjusted_for(table)
        lower = 1 - best[select_by] / baseline_value if baseline_value else np.nan
        name = model_label(recommended)
        if beats:
            verdict = (f"{name} beats the mean baseline out of sample ({said}): its {metric} is "
                       f"{lower:.1%} lower ({best[select_by]:.4g} against {baseline_value:.4g}).")
        else:
            verdict = (f"{name} has the lowest {metric} ({best[select_by]:.4g} against "
                       f"{baseline_value:.4g} for the mean baseline), but it is no better than the "
                       f"mean baseline by the significance test ({said}): the difference "
                       "may be luck.")
    time_ordered = backtest.scheme in ("holdout", "rolling_origin")
    by_origin = _with_skill(_scores_by(predictions, ["model", "origin"]), ["origin"], select_by)
    by_horizon = _with_skill(_scores_by(predictions, ["model", "horizon"]), ["horizon"], select_by) \
        if time_ordered else pd.DataFrame()
    by_series = _with_series_tests(_with_skill(grouped_scores(predictions, ["model", "series"]),
                                               ["series"], select_by),
                                   series_tests(predictions, backtest, select_by), level)
    return Evaluation(table=table, by_origin=by_origin, by_horizon=by_horizon, by_series=by_series,
                      coverage=coverage(predictions),
                      recommended=recommended, beats_baseline=beats, verdict=verdict,
                      select_by=select_by, notes=notes, series_summary=series_summary(by_series),
                      hindsight=hindsight, ahead_notes=ahead_notes)
