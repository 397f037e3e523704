"""input.gaps: fill in the backtest: each training window is filled from its own months only,
and filled months are never scored as actuals.

The check fills a missing month (or an empty target) by interpolating over the
whole history, which is right for the final fit on all of it; a backtest window
must not read the months after its origin. References: the invariance that
defines a backtest (a window's predictions depend only on months up to its
origin: the same run before and after a later actual changes), and linear
interpolation written out by hand (v0 + (v1 - v0)·(m - m0)/(m1 - m0)) in a plain
loop. The data are simulated with fixed seeds (numpy.random.default_rng).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

import pipeline
from pipeline.core.columns import PERIOD, SERIES
from pipeline.stages.backtest import run_backtest
from pipeline.stages.splits import validation_splits

START = "2018-01"
N_MONTHS = 48
MODELS = ["ols", "mean_baseline", "last_value"]


def gapped_panel(missing: list[str], empty_target: list[str] = (), seed: int = 7) -> pd.DataFrame:
    """Two series, A and B, y = 20 + 3·x + noise; series A lacks the months ``missing``
    (rows dropped) and has no target in the months ``empty_target``."""
    rng = np.random.default_rng(seed)
    months = pd.period_range(START, periods=N_MONTHS, freq="M")
    frame = pd.DataFrame([(m, r) for m in months for r in ("A", "B")], columns=["period", "region"])
    frame["x"] = rng.uniform(0, 10, len(frame))
    frame["y"] = 20 + 3 * frame["x"] + rng.normal(0, 1, len(frame))
    in_a = frame["region"] == "A"
    frame = frame[~(in_a & frame["period"].astype(str).isin(missing))].copy()
    frame.loc[(frame["region"] == "A") & frame["period"].astype(str).isin(empty_target), "y"] = np.nan
    frame.insert(0, "month", frame.pop("period").dt.to_timestamp())
    return frame.reset_index(drop=True)


def load(folder: Path, frame: pd.DataFrame, validation: dict, models=MODELS, **extra):
    """Return (spec, checked data) for the frame with input.gaps: fill."""
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "data.csv", index=False)
    spec = {"name": "gap-fill", "input": {"file": "data.csv", "date_column": "month",
                                          "series": ["region"], "gaps": "fill",
                                          "as_of": "2030-01-31"},
            "target": "y", "drivers": {"numeric": ["x"]}, "validation": validation,
            "models": models, "output": {"folder": "reports"}, **extra}
    (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    spec = pipeline.load_spec(folder / "spec.yaml")
    return spec, pipeline.check(spec)


def raised(frame: pd.DataFrame, series: str, month: str, by: float = 1000.0) -> pd.DataFrame:
    changed = frame.copy()
    at = (changed["region"] == series) & (changed["month"] == pd.Timestamp(month))
    assert at.sum() == 1
    changed.loc[at, "y"] += by
    return changed


HOLDOUT = {"method": "holdout", "last_periods": 12}            # origin 2020-12, first held out 2021-01
ROLLING = {"method": "rolling_origin", "horizon": 3, "min_train_periods": 24, "step": 1,
           "window": "expanding"}
ROLLING_PER_SERIES = ["ols", {"kind": "ols", "per_series": True}, "mean_baseline", "last_value"]


@pytest.mark.parametrize("validation, missing, first_held_out, models", [
    # The month just before the first held-out month is missing: its fill read that month.
    (HOLDOUT, ["2020-12"], "2021-01", MODELS),
    # Two missing months before 2021-01, inside several rolling origins' windows (the
    # expanding OLS path that grows one factor across origins must not read them either).
    (ROLLING, ["2020-11", "2020-12"], "2021-01", ROLLING_PER_SERIES),
], ids=["holdout", "rolling_origin"])
def test_a_later_actual_leaves_the_predictions_of_earlier_origins_unchanged(
        validation, missing, first_held_out, models, tmp_path):
    # Reference: the invariance that defines a backtest; a window whose origin is before
    # first_held_out may read no actual of first_held_out, so raising it by 1000 changes none
    # of its predictions (compared with the same run on the data before the change).
    frame = gapped_panel(missing)
    spec, data = load(tmp_path / "before", frame, validation, models)
    before = run_backtest(spec, data).predictions
    spec, data = load(tmp_path / "after", raised(frame, "A", first_held_out), validation, models)
    after = run_backtest(spec, data).predictions
    cut = pd.Period(first_held_out, "M")
    earlier = [o for o in before["origin"].unique() if pd.Period(o, "M") < cut]
    assert earlier, "no origin before the changed month"
    assert set(before["model"]) == set(spec.model_names)
    key = ["origin", "period", "series", "model"]
    left = before[before["origin"].isin(earlier)].sort_values(key).reset_index(drop=True)
    right = after[after["origin"].isin(earlier)].sort_values(key).reset_index(drop=True)
    assert left[key].equals(right[key])
    np.testing.assert_allclose(right["prediction"], left["prediction"], rtol=0, atol=1e-9)
    # The change is seen: it is the actual of the rows that score the first held-out month.
    moved = (right["actual"] - left["actual"]).to_numpy()
    scored = ((right["series"] == "A") & (right["period"] == first_held_out)).to_numpy()
    np.testing.assert_allclose(moved[scored], 1000.0)
    np.testing.assert_allclose(moved[~scored], 0.0)


@pytest.mark.parametrize("validation", [
    HOLDOUT, ROLLING, {"method": "kfold", "folds": 4, "seed": 3},
], ids=["holdout", "rolling_origin", "kfold"])
def test_filled_months_are_never_scored(validation, tmp_path):
    # Reference: the file itself; every scored (series, month) is a row of the file with a
    # target, and every such row in the months predicted is scored.
    missing, empty = ["2021-03", "2021-04"], ["2021-08"]
    frame = gapped_panel(missing, empty_target=empty)
    spec, data = load(tmp_path, frame, validation, ["ols", "mean_baseline"])
    result = run_backtest(spec, data)
    predictions = result.predictions
    scored = set(zip(predictions["series"], predictions["period"]))
    for month in missing + empty:
        assert ("A", month) not in scored
    given = frame[frame["y"].notna()]
    observed = set(zip(given["region"], given["month"].dt.to_period("M").astype(str)))
    assert scored <= observed
    if validation["method"] == "kfold":
        assert scored == observed   # every given row is scored once over the folds
        assert len(predictions) == 2 * len(given)
    else:
        predicted_months = {str(p) for split in result.splits for p in split.test[PERIOD]}
        assert {(s, m) for s, m in observed if m in predicted_months} == scored
    # The checked history still holds the filled months, as the forecast fits on them.
    history = set(zip(data.history[SERIES], data.history[PERIOD].astype(str)))
    assert {("A", m) for m in missing + empty} <= history


def hand_interpolation(given: pd.DataFrame, months: pd.PeriodIndex, column: str = "y") -> dict[str, float]:
    """Return each month of ``months`` missing from ``given`` (columns month and ``column``),
    interpolated linearly between the nearest given months before and after it, both in
    ``months``; months without both are left out."""
    values = {m: v for m, v in zip(given["month"].dt.to_period("M"), given[column]) if m in months}
    filled = {}
    for month in months:
        if month in values:
            continue
        before = [m for m in values if m < month]
        after = [m for m in values if m > month]
        if not before or not after:
            continue
        m0, m1 = max(before), min(after)
        v0, v1 = values[m0], values[m1]
        filled[str(month)] = v0 + (v1 - v0) * (month.ordinal - m0.ordinal) / (m1.ordinal - m0.ordinal)
    return filled


def test_a_window_holds_its_own_interpolation_and_leaves_out_what_it_cannot_fill(tmp_path):
    # Reference: hand_interpolation, linear interpolation written out in a loop over the
    # file's own rows up to each origin.
    missing, empty = ["2020-03", "2020-04", "2020-10"], ["2020-06"]
    validation = {"method": "rolling_origin", "horizon": 2, "min_train_periods": 24,
                  "step": 3, "window": "expanding"}
    frame = gapped_panel(missing, empty_target=empty)
    spec, data = load(tmp_path, frame, validation)
    splits, _ = validation_splits(spec, data)
    given = frame[(frame["region"] == "A") & frame["y"].notna()]
    checked = 0
    for split in splits:
        train = split.train[split.train[SERIES] == "A"]
        window = pd.period_range(train[PERIOD].min(), split.origin, freq="M")
        expected = hand_interpolation(given, window)
        held = dict(zip(train[PERIOD].astype(str), train["y"]))
        for month, value in expected.items():
            assert held[month] == pytest.approx(value, rel=1e-12, abs=0)
            checked += 1
        # Every other month of A in the window is a given value, as in the file.
        for month, value in zip(given["month"].dt.to_period("M"), given["y"]):
            if month in window:
                assert held[str(month)] == value
        # A filled month that cannot be interpolated inside the window is left out of it.
        left_out = {str(m) for m in window} - set(held)
        assert left_out == {str(m) for m in window} - set(expected) - {
            str(m) for m in given["month"].dt.to_period("M")}
        assert split.refilled == any(m in window for m in pd.PeriodIndex(missing + empty, freq="M"))
        # The driver of an inserted month is filled from the window's months as well.
        rows_of_a = frame[frame["region"] == "A"]
        for month, value in hand_interpolation(rows_of_a, window, "x").items():
            if month in held:
                assert train.loc[train[PERIOD] == pd.Period(month, "M"), "x"].item() == \
                    pytest.approx(value, rel=1e-12, abs=0)
                checked += 1
    assert checked > 0
    # Origins run from 2020-01 to 2021-10, three months apart: at 2020-04 the next given
    # month after the gap is 2020-05, after the origin, so 2020-03 and 2020-04 are left out;
    # at 2020-10 the missing origin month itself is.
    for origin, gone in (("2020-04", {"2020-03", "2020-04"}), ("2020-10", {"2020-10"})):
        split = next(s for s in splits if s.origin == pd.Period(origin, "M"))
        months_of_a = set(split.train.loc[split.train[SERIES] == "A", PERIOD].astype(str))
        assert not gone & months_of_a
        assert f"{len(gone)} row(s) filled by input.gaps were left out" in " ".join(split.notes)


def test_the_checked_data_marks_the_cells_it_filled(tmp_path):
    # Reference: the file; a filled cell is one the file did not give (an inserted month's
    # numbers, an empty target), in the history's own row order.
    missing, empty = ["2019-05"], ["2019-09"]
    frame = gapped_panel(missing, empty_target=empty)
    spec, data = load(tmp_path, frame, HOLDOUT)
    assert data.filled is not None and len(data.filled) == len(data.history)
    marked = data.history[data.filled["y"].to_numpy()]
    assert set(zip(marked[SERIES], marked[PERIOD].astype(str))) == {("A", "2019-05"), ("A", "2019-09")}
    marked_x = data.history[data.filled["x"].to_numpy()]
    assert set(zip(marked_x[SERIES], marked_x[PERIOD].astype(str))) == {("A", "2019-05")}
    # Without gaps nothing is marked.
    _, whole = load(tmp_path / "whole", gapped_panel([]), HOLDOUT)
    assert whole.filled is None
