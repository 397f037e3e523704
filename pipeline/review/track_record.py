"""The track record: earlier forecasts scored against the actuals that came later.

Read before a run is published; nothing here writes."""

from __future__ import annotations

import json
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from pipeline.core.cadence import MONTH, Cadence, cadence_named, period_labels
from pipeline.core.catalogue import BASELINE, model_label
from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.formatting import format_percent, format_signed
from pipeline.core.metrics import skill
from pipeline.record.ledger.read import latest_realised, rows_of, specs_on_input, visible_runs
from pipeline.record.ledger.store import REALISED_COLUMNS, ledger_path, reading, spec_hash
from pipeline.spec import Spec
from pipeline.spec.wording import resolved_form
from pipeline.stages.check import CheckedData


@dataclass(frozen=True)
class TrackRecord:
    """How the forecasts of earlier runs of a spec turned out against this run's actuals,
    and the warnings that follow; read from the ledger before the run is published."""

    ledger: Path
    realised: pd.DataFrame          # one row per earlier forecast whose month now has an actual
    by_horizon: pd.DataFrame        # per earlier run, model and months ahead
    earlier_runs: int
    recommended: dict[str, str] = field(default_factory=dict)   # earlier run → its recommended model
    warnings: list[str] = field(default_factory=list)
    runs_without_skill: int = 0     # runs in a row, this one included, not beating the baseline
    # The recommended forecasts against the forecasts of the mean of the training months of the same rows
    # (``realised_skill``): over all earlier runs, and per run.
    skill: dict = field(default_factory=dict)
    skill_by_run: pd.DataFrame = field(default_factory=pd.DataFrame)

    def facts(self) -> dict:
        """Return what the run folder keeps of it (track_record.json) beside realised.csv, so
        the summary can be rendered again from the folder alone."""
        by_run = [{key: _plain(value) for key, value in row.items()}
                  for row in self.skill_by_run.to_dict("records")]
        return {"ledger": str(self.ledger), "earlier_runs": self.earlier_runs,
                "recommended": dict(self.recommended), "warnings": list(self.warnings),
                "runs_without_skill": self.runs_without_skill,
                "realised_skill": {**{key: _plain(value) for key, value in self.skill.items()},
                                   "by_run": by_run}}


def _plain(value):
    """Return a value as JSON holds it: NaN as null, numpy numbers as Python's."""
    if isinstance(value, (float, np.floating)):
        return None if np.isnan(value) else float(value)
    if isinstance(value, np.integer):
        return int(value)
    return value


def _empty_realised() -> pd.DataFrame:
    return pd.DataFrame(columns=REALISED_COLUMNS)


def score_forecasts(forecasts: pd.DataFrame, actuals: pd.DataFrame,
                    expected: pd.DataFrame) -> pd.DataFrame:
    """Return each forecast that has an actual, scored: error (forecast − actual), whether
    the actual fell inside the stated 80% and 95% intervals and inside the backtest's 95%
    range of errors at that horizon, and the MAE the backtest led the user to expect.

    ``forecasts`` has the ledger's forecast columns and forecast_created; ``actuals`` has
    period, series and actual; ``expected`` has run_id, model, horizon and expected_mae
    (horizon NaN for a model's overall MAE, used where its horizon was not measured).
    """
    if not len(forecasts):
        return _empty_realised().drop(columns=["recorded"])
    scored = forecasts.merge(actuals, on=["period", "series"], how="inner")
    if not len(scored):
        return _empty_realised().drop(columns=["recorded"])
    scored["error"] = scored["forecast"] - scored["actual"]
    stated = scored["interval_method"].astype(object).where(scored["interval_method"].notna(), None)
    fallback = np.where(scored["empirical_low_95"].notna(), "empirical", "analytic")
    scored["interval_method"] = [s if s else f for s, f in zip(stated, fallback)]
    empirical = scored["interval_method"].to_numpy() == "empirical"
    for level in ("80", "95"):
        for side in ("low", "high"):
            scored[f"{side}_{level}"] = np.where(empirical, scored[f"empirical_{side}_{level}"],
                                                 scored[f"analytic_{side}_{level}"]).astype(float)
        low, high = scored[f"low_{level}"], scored[f"high_{level}"]
        with np.errstate(invalid="ignore"):   # a missing bound compares False; marked None below
            inside = (scored["actual"] >= low) & (scored["actual"] <= high)
        scored[f"inside_{level}"] = inside.astype(object).where(low.notna() & high.notna(), None)
    # The backtest's 95% range of errors at the horizon: the empirical interval's offsets
    # (built from the backtest's own errors), else the stated 95% interval's.
    use_empirical = scored["empirical_low_95"].notna()
    high_bound = scored["empirical_high_95"].where(use_empirical, scored["high_95"])
    low_bound = scored["empirical_low_95"].where(use_empirical, scored["low_95"])
    scored["backtest_low_95"] = scored["forecast"] - high_bound
    scored["backtest_high_95"] = scored["forecast"] - low_bound
    with np.errstate(invalid="ignore"):   # no range: compares False, marked None below
        within = (scored["error"] >= scored["backtest_low_95"]) & (scored["error"] <= scored["backtest_high_95"])
    scored["within_backtest_95"] = within.astype(object).where(scored["backtest_low_95"].notna(), None)
    at_horizon = expected[expected["horizon"].notna()].astype({"horizon": int})
    overall = expected[expected["horizon"].isna()].drop(columns=["horizon"])
    scored = scored.merge(at_horizon, left_on=["forecast_run_id", "model", "horizon"],
                          right_on=["run_id", "model", "horizon"], how="left").drop(columns=["run_id"])
    scored = scored.merge(overall.rename(columns={"expected_mae": "_overall"}),
                          left_on=["forecast_run_id", "model"], right_on=["run_id", "model"],
                          how="left").drop(columns=["run_id"])
    scored["expected_mae"] = scored["expected_mae"].fillna(scored["_overall"])
    columns = [c for c in REALISED_COLUMNS if c != "recorded"]
    return scored[columns].sort_values(["forecast_created", "model", "period", "series"],
                                       kind="stable").reset_index(drop=True)


def summarise_realised(realised: pd.DataFrame) -> pd.DataFrame:
    """Return, per forecast run, model and months ahead: how many forecasts have actuals,
    their MAE and bias against the MAE the backtest expected, and how often the actual
    fell inside the stated 80% and 95% intervals and the backtest's 95% range."""
    columns = ["forecast_run_id", "forecast_created", "model", "horizon", "n", "realised_mae",
               "expected_mae", "realised_bias", "inside_80", "inside_95", "within_backtest_95"]
    if not len(realised):
        return pd.DataFrame(columns=columns)
    def share(values: pd.Series) -> float:
        known = values.dropna()
        return float(known.astype(bool).mean()) if len(known) else float("nan")

    rows = []
    for (run_id, created, model, horizon), group in realised.groupby(
            ["forecast_run_id", "forecast_created", "model", "horizon"], sort=False):
        errors = group["error"].astype(float)
        expected = group["expected_mae"].astype(float).dropna()
        rows.append({"forecast_run_id": run_id, "forecast_created": created, "model": model,
                     "horizon": int(horizon), "n": len(group),
                     "realised_mae": float(errors.abs().mean()),
                     "expected_mae": float(expected.iloc[0]) if len(expected) else float("nan"),
                     "realised_bias": float(errors.mean()),
                     "inside_80": share(group["inside_80"]), "inside_95": share(group["inside_95"]),
                     "within_backtest_95": share(group["within_backtest_95"])})
    return pd.DataFrame(rows, columns=columns).sort_values(
        ["forecast_created", "forecast_run_id", "model", "horizon"], kind="stable").reset_index(drop=True)


SKILL_COLUMNS = ["forecast_run_id", "forecast_created", "model", "forecasts", "months",
                 "model_mae", "baseline_mae", "skill", "without_baseline"]


def realised_skill(realised: pd.DataFrame, recommended: dict[str, str]) -> tuple[pd.DataFrame, dict]:
    """Return the realised skill of each earlier run's recommended model against the mean
    baseline's own forecasts of the same (series, month) rows, per run and over all runs.

    For each earlier run, its recommended model's scored forecasts are paired with the mean
    baseline's forecasts that run made of the same series and month; skill is
    1 − MAE(recommended) / MAE(baseline) over the pairs. A forecast without the baseline's
    (a ledger that recorded none) is left out and counted in ``without_baseline``. A run that
    recommended the mean of the training months itself counts, at a skill of 0: its recommendation was the
    baseline's forecast. The overall figure pools every pair of every run (a month forecast
    by two runs counts twice, once per run); ``months`` counts the distinct months paired.
    """
    wanted = realised["forecast_run_id"].map(recommended)
    own = realised[realised["model"].astype(object).eq(wanted) & realised["error"].notna()]
    base = realised[(realised["model"] == BASELINE) & realised["error"].notna()]
    key = ["forecast_run_id", "period", "series"]
    pairs = own.merge(base[key + ["error"]].rename(columns={"error": "_baseline"}), on=key, how="left")
    pairs["_paired"] = pairs["_baseline"].notna()
    rows = []
    for (run_id, created, model), group in pairs.groupby(["forecast_run_id", "forecast_created", "model"],
                                                         sort=False):
        paired = group[group["_paired"]]
        rows.append({"forecast_run_id": run_id, "forecast_created": created, "model": model,
                     **_skill_of(paired), "without_baseline": int((~group["_paired"]).sum())})
    by_run = pd.DataFrame(rows, columns=SKILL_COLUMNS).sort_values(
        ["forecast_created", "forecast_run_id"], kind="stable").reset_index(drop=True)
    paired = pairs[pairs["_paired"]]
    overall = {**_skill_of(paired), "runs": int(paired["forecast_run_id"].nunique()),
               "without_baseline": int((~pairs["_paired"]).sum()),
               "runs_without_baseline": sorted(set(by_run.loc[by_run["forecasts"] == 0, "forecast_run_id"]))}
    return by_run, overall


def _skill_of(paired: pd.DataFrame) -> dict:
    """Return how many pairs, over how many months, both MAEs and the skill of a set of pairs."""
    if not len(paired):
        return {"forecasts": 0, "months": 0, "model_mae": float("nan"),
                "baseline_mae": float("nan"), "skill": float("nan")}
    model_mae = float(paired["error"].astype(float).abs().mean())
    baseline_mae = float(paired["_baseline"].astype(float).abs().mean())
    return {"forecasts": len(paired), "months": int(paired["period"].nunique()),
            "model_mae": model_mae, "baseline_mae": baseline_mae, "skill": skill(model_mae, baseline_mae)}


def _expected_errors(conn: sqlite3.Connection, run_ids) -> pd.DataFrame:
    """Return the backtest MAE per run, model and horizon, and overall (horizon NaN)."""
    horizons = rows_of(conn, "horizon_metrics", run_ids)[["run_id", "model", "horizon", "mae"]]
    overall = rows_of(conn, "model_metrics", run_ids)[["run_id", "model", "mae"]].assign(horizon=np.nan)
    frame = pd.concat([horizons.astype({"horizon": float}), overall], ignore_index=True)
    return frame.rename(columns={"mae": "expected_mae"})


def _earlier_forecasts(conn: sqlite3.Connection, runs: pd.DataFrame, through: str) -> pd.DataFrame:
    """Return the forecasts the runs made for months up to `through`, with each run's time."""
    forecasts = rows_of(conn, "forecasts", runs["run_id"], " AND period <= ?", (through,))
    created = dict(zip(runs["run_id"], runs["created"]))
    return forecasts.rename(columns={"run_id": "forecast_run_id"}).assign(
        forecast_created=lambda t: t["forecast_run_id"].map(created))


def _actuals(spec: Spec, data: CheckedData) -> pd.DataFrame:
    """Return the months with an actual: a target filled by input.gaps: fill is no actual."""
    history = data.history
    if data.filled is not None and spec.target in data.filled.columns:
        history = history[~data.filled[spec.target].to_numpy(bool)]
    return pd.DataFrame({"period": np.asarray(period_labels(history[PERIOD]), dtype=object),
                         "series": history[SERIES].astype(str).to_numpy(),
                         "actual": history[spec.target].to_numpy(float)})


def _signed(value: float) -> str:
    return format_signed(value)


def _realised_warning(realised: pd.DataFrame, runs: pd.DataFrame, cadence: Cadence = MONTH) -> str | None:
    """Return a warning when forecasts of the latest run that has actuals now, from the model it
    recommended, missed by more than the backtest's 95% range of errors."""
    if not len(realised):
        return None
    latest = realised.sort_values(["forecast_created", "forecast_run_id"]).iloc[-1]["forecast_run_id"]
    recommended = runs.set_index("run_id")["recommended"].get(latest)
    rows = realised[(realised["forecast_run_id"] == latest) & (realised["model"] == recommended)]
    judged = rows[rows["within_backtest_95"].notna()]
    outside = judged[~judged["within_backtest_95"].astype(bool)]
    if not len(outside):
        return None
    shown = "; ".join(f"{r.period} {r.series} ({r.horizon} {cadence.name}(s) ahead): error {_signed(r.error)} "
                      f"outside {_signed(r.backtest_low_95)} to {_signed(r.backtest_high_95)}"
                      for r in outside.head(3).itertuples())
    more = f"; and {len(outside) - 3} more" if len(outside) > 3 else ""
    return (f"realised accuracy: {len(outside)} of {len(judged)} forecasts from {latest} "
            f"({recommended}, the model it recommended) missed by more than the backtest's 95% "
            f"range of errors (about 1 in 20 would by chance; error = forecast − actual): "
            f"{shown}{more}. The model may be getting worse, or the {cadence.plural} just past were unusual.")


def _skill_warning(spec: Spec, runs: pd.DataFrame, beats_now: bool | None) -> tuple[str | None, int]:
    """Return a warning when the recommended model has not beaten the mean of the training months in the last
    N tested runs (this one included), and how many tested runs in a row it has not. A run
    whose validation gave no test (a single holdout: beats_baseline left empty) neither
    breaks nor extends the streak: it says nothing either way."""
    record = [(str(created), bool(beat)) for created, beat in zip(runs["created"], runs["beats_baseline"])
              if beat is not None and not (isinstance(beat, float) and np.isnan(beat))]
    if beats_now is not None:
        record.append(("this run", bool(beats_now)))
    streak = 0
    for _, beat in reversed(record):
        if beat:
            break
        streak += 1
    wanted = spec.output.warn_after_runs_without_skill
    if streak < wanted:
        return None, streak
    since = record[len(record) - wanted][0][:10]
    mean = model_label(BASELINE, cadence_named(spec.input.period))
    return (f"the recommended model has not beaten the {mean} in the last {wanted} tested "
            f"run(s) (since {since}; {streak} in a row): the plain average forecasts as well; "
            f"review the drivers (output.warn_after_runs_without_skill: {wanted})"), streak


# Realised months (distinct months with an actual, paired across earlier runs) before realised
# skill may raise a warning: a year, so every calendar month is in it once (common practice:
# judge monthly forecasts over at least a full seasonal cycle; fewer months say little). Quarters
# and weeks need a year of them alike: the cadence's season_lag (4 quarters, 52 weeks).
REALISED_SKILL_MONTHS = 12


def realised_skill_warning(overall: dict, cadence: Cadence = MONTH) -> str | None:
    """Return a warning when, over at least a year of realised periods (REALISED_SKILL_MONTHS months,
    4 quarters, 52 weeks), the recommended forecasts were no more accurate than the forecasts of
    the mean of the training periods. ``overall["months"]`` counts the distinct periods paired."""
    value = overall.get("skill", float("nan"))
    needed = REALISED_SKILL_MONTHS if cadence.name == "month" else cadence.season_lag
    if overall.get("months", 0) < needed or not np.isfinite(value) or value > 0:
        return None
    mean = model_label(BASELINE, cadence)
    return (f"Over the last {overall['months']} realised {cadence.plural}, the recommended forecasts were no "
            f"more accurate than the forecasts of the {mean} (realised skill {format_percent(value)}; "
            f"{overall['forecasts']} forecasts from {overall['runs']} earlier run(s), "
            f"1 − MAE of the recommended model / MAE of the {mean})")


# Beyond this many different specs tried on one input, a win may be the luck of the search.
SPECS_TRIED_WARNING = 5
# Keys that do not change what the backtest compares: names, paths, where fits run, what-ifs.
_NOT_MODELLING = ("name", "description", "output", "compute", "scenarios")


def modelling_hash(resolved: dict) -> str:
    """Return a sha256 of what a spec asks the backtest to compare (its resolved form without
    its name, description, output, compute and scenarios, and without the input's path)."""
    kept = {key: value for key, value in resolved.items() if key not in _NOT_MODELLING}
    kept["input"] = {key: value for key, value in kept.get("input", {}).items() if key != "file"}
    return spec_hash(kept)


def specs_tried(conn: sqlite3.Connection | None, spec: Spec, data: CheckedData) -> int:
    """Return how many different specs (by ``modelling_hash``) the ledger's runs on this very
    input tried, this run's included."""
    hashes = {modelling_hash(resolved_form(spec))}
    if conn is not None:
        for text in specs_on_input(conn, data.raw.sha256):
            try:
                hashes.add(modelling_hash(json.loads(text)))
            except (TypeError, ValueError, AttributeError):
                continue   # a row the ledger's checks let through but no spec: not counted
    return len(hashes)


def _search_warning(tried: int, cadence: Cadence = MONTH) -> str | None:
    if tried <= SPECS_TRIED_WARNING:
        return None
    return (f"{tried} different specs have been run on this same input: the more specs you try, "
            f"the likelier one beats the average by luck; judge the one you keep on {cadence.plural} none "
            "of them has seen")


def track_record(spec: Spec, data: CheckedData, evaluation, *,
                 output_folder: str | Path | None = None) -> TrackRecord:
    """Return how earlier runs' forecasts turned out against this run's actuals, and the
    warnings for this run; reads the ledger (never writes it).

    A damaged ledger stops the run here, before anything is written.
    """
    path = ledger_path(spec, output_folder)
    if not path.exists() or (path.is_file() and path.stat().st_size == 0):
        runs = pd.DataFrame(columns=["run_id", "created", "recommended", "beats_baseline"])
        realised, latest = _empty_realised(), pd.DataFrame()
        tried = specs_tried(None, spec, data)
    else:
        with reading(path) as conn:
            runs = visible_runs(conn, spec.name)
            forecasts = _earlier_forecasts(conn, runs, data.cadence.label(data.last_period))
            expected = _expected_errors(conn, runs["run_id"])
            latest = latest_realised(conn, runs)
            tried = specs_tried(conn, spec, data)
        realised = score_forecasts(forecasts, _actuals(spec, data), expected)
    if len(realised) and len(latest):
        # Record a score when it is new, or when the actual was revised since it was recorded.
        key = ["forecast_run_id", "model", "period", "series"]
        before = realised.merge(latest[key + ["actual"]].rename(columns={"actual": "_before"}),
                                on=key, how="left")["_before"].astype(float).to_numpy()
        realised["recorded"] = np.isnan(before) | (before != realised["actual"].to_numpy(float))
    elif len(realised):
        realised["recorded"] = True
    else:
        realised = _empty_realised()
    recommended = dict(zip(runs["run_id"], runs["recommended"]))
    by_run, overall = realised_skill(realised, recommended)
    cadence = cadence_named(spec.input.period)
    warnings = [w for w in [_realised_warning(realised, runs, cadence)] if w]
    backtest_skill, streak = _skill_warning(
        spec, runs, evaluation.beats_baseline if evaluation.tested else None)
    warnings += [w for w in [backtest_skill, realised_skill_warning(overall, cadence)] if w]
    search = _search_warning(tried, cadence)
    if search:
        warnings.append(search)
    return TrackRecord(ledger=path, realised=realised, by_horizon=summarise_realised(realised),
                       earlier_runs=len(runs), recommended=recommended, warnings=warnings,
                       runs_without_skill=streak, skill=overall, skill_by_run=by_run)
