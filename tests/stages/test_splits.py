"""The backtest's validation windows (pipeline/stages/splits.py).

rolling_origin_windows is checked against windows enumerated by hand in each
test; holdout against the last N months of the sorted months (pandas); k-fold
against sklearn.model_selection.KFold with the spec's seed. The data are a small
simulated panel (numpy.random.default_rng(41)), two regions × 24 months, with
the rows written in a shuffled order so no split can lean on the file's order.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import yaml
from sklearn.model_selection import KFold

import pipeline
from pipeline.core.columns import PERIOD, SERIES
from pipeline.core.errors import SpecError
from pipeline.stages.splits import OriginWindow, rolling_origin_windows, validation_splits

MONTHS = 24


# ------------------------------------------------------------ rolling origin windows by hand

def windows(**kwargs) -> list[tuple[int, int, int, int]]:
    return [(w.origin, w.train_start, w.test_start, w.test_end)
            for w in rolling_origin_windows(10, **kwargs)]


def test_expanding_windows_of_ten_months():
    # 10 months (0..9), 4 to train, 2 ahead: the first origin is month 3 (months 0..3 train),
    # the last is month 7 (it predicts 8 and 9).
    assert windows(horizon=2, min_train=4) == [(3, 0, 4, 5), (4, 0, 5, 6), (5, 0, 6, 7),
                                              (6, 0, 7, 8), (7, 0, 8, 9)]


def test_sliding_windows_keep_min_train_months():
    # the same origins; each trains on its own 4 months: origin 5 on months 2..5
    assert windows(horizon=2, min_train=4, window="sliding") == [
        (3, 0, 4, 5), (4, 1, 5, 6), (5, 2, 6, 7), (6, 3, 7, 8), (7, 4, 8, 9)]


def test_a_gap_skips_months_after_the_origin():
    # gap 1: origin 6 skips month 7 and predicts 8..9; the last origin moves back by one
    assert windows(horizon=2, min_train=4, gap=1) == [(3, 0, 5, 6), (4, 0, 6, 7), (5, 0, 7, 8),
                                                     (6, 0, 8, 9)]


def test_steps_count_back_from_the_latest_origin():
    # step 3 from origin 7: 7, 4 (1 would leave only 2 months to train), in time order
    assert windows(horizon=2, min_train=4, step=3) == [(4, 0, 5, 6), (7, 0, 8, 9)]
    assert windows(horizon=2, min_train=4, step=2) == [(3, 0, 4, 5), (5, 0, 6, 7), (7, 0, 8, 9)]


def test_origins_keeps_the_latest_and_refuses_more_than_there_are():
    assert windows(horizon=2, min_train=4, origins=2) == [(6, 0, 7, 8), (7, 0, 8, 9)]
    with pytest.raises(ValueError, match="at most 5"):
        windows(horizon=2, min_train=4, origins=6)


def test_too_short_a_history_has_no_window():
    # 4 to train + 7 ahead needs 11 months
    assert windows(horizon=7, min_train=4) == []
    assert windows(horizon=6, min_train=4) == [(3, 0, 4, 9)]


def test_every_window_respects_its_limits():
    for kwargs in ({"horizon": 1, "min_train": 2}, {"horizon": 3, "min_train": 5, "gap": 2, "step": 2},
                   {"horizon": 2, "min_train": 3, "window": "sliding"}):
        for w in rolling_origin_windows(10, **kwargs):
            assert isinstance(w, OriginWindow)
            assert w.origin - w.train_start + 1 >= kwargs["min_train"]
            assert w.test_start == w.origin + 1 + kwargs.get("gap", 0)
            assert w.test_end - w.test_start + 1 == kwargs["horizon"] and w.test_end <= 9


# ------------------------------------------------------------ holdout and k-fold on checked data

@pytest.fixture(scope="module")
def panel() -> pd.DataFrame:
    rng = np.random.default_rng(41)
    months = pd.period_range("2021-01", periods=MONTHS, freq="M")
    frame = pd.DataFrame([(m.to_timestamp().strftime("%Y-%m-%d"), r) for m in months for r in ("North", "South")],
                         columns=["month", "region"])
    frame["x"] = rng.normal(10, 2, len(frame)).round(3)
    frame["y"] = (3 * frame["x"] + rng.normal(0, 1, len(frame))).round(3)
    return frame.sample(frac=1.0, random_state=3).reset_index(drop=True)


def checked(folder, frame, validation):
    frame.to_csv(folder / "data.csv", index=False)
    spec = {"name": "splits-test", "input": {"file": "data.csv", "date_column": "month", "series": ["region"]},
            "target": "y", "drivers": {"numeric": ["x"]}, "validation": validation, "models": ["ols"],
            "output": {"folder": "out"}}
    (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    spec = pipeline.load_spec(folder / "spec.yaml")
    return spec, pipeline.check(spec)


def months_of(frame) -> list[str]:
    return sorted(frame[PERIOD].astype(str).unique())


def test_holdout_predicts_the_last_n_months(tmp_path, panel):
    spec, data = checked(tmp_path, panel, {"method": "holdout", "last_periods": 5})
    splits, horizon = validation_splits(spec, data)
    all_months = sorted(pd.to_datetime(panel["month"]).dt.to_period("M").astype(str).unique())
    assert horizon == 5 and len(splits) == 1
    assert months_of(splits[0].test) == all_months[-5:]
    assert months_of(splits[0].train) == all_months[:-5]
    assert len(splits[0].test) == 5 * 2 and len(splits[0].train) == (MONTHS - 5) * 2
    assert str(splits[0].origin) == all_months[-6]


def test_holdout_of_the_whole_history_is_refused_at_its_key(tmp_path, panel):
    # the check stage already cuts the splits, so the spec is refused there
    with pytest.raises(SpecError, match=f"at most {MONTHS - 1}") as info:
        checked(tmp_path, panel, {"method": "holdout", "last_periods": MONTHS})
    assert info.value.key == "validation.last_periods"
    written = (tmp_path / "spec.yaml").read_text(encoding="utf-8").splitlines()
    assert info.value.line == 1 + next(i for i, line in enumerate(written) if "last_periods:" in line)


def test_rolling_origin_splits_cover_the_windows_months(tmp_path, panel):
    spec, data = checked(tmp_path, panel, {"method": "rolling_origin", "horizon": 3, "min_train_periods": 12,
                                           "step": 4, "window": "sliding"})
    splits, horizon = validation_splits(spec, data)
    months = [str(m) for m in pd.period_range("2021-01", periods=MONTHS, freq="M")]
    expected = rolling_origin_windows(MONTHS, horizon=3, min_train=12, step=4, window="sliding")
    assert horizon == 3 and len(splits) == len(expected) == 3   # origins 12, 16, 20 … counted back from 20
    for split, w in zip(splits, expected):
        assert months_of(split.train) == months[w.train_start:w.origin + 1]
        assert months_of(split.test) == months[w.test_start:w.test_end + 1]


def test_kfold_equals_sklearn_kfold_with_the_same_seed(tmp_path, panel):
    spec, data = checked(tmp_path, panel, {"method": "kfold", "folds": 4, "seed": 17})
    splits, horizon = validation_splits(spec, data)
    history = data.history.reset_index(drop=True)
    keys = history[PERIOD].astype(str) + "/" + history[SERIES].astype(str)
    reference = list(KFold(n_splits=4, shuffle=True, random_state=17).split(history))
    assert horizon == 0 and len(splits) == 4
    for split, (train, test) in zip(splits, reference):
        split_test = split.test[PERIOD].astype(str) + "/" + split.test[SERIES].astype(str)
        split_train = split.train[PERIOD].astype(str) + "/" + split.train[SERIES].astype(str)
        assert sorted(split_test) == sorted(keys.iloc[test])
        assert sorted(split_train) == sorted(keys.iloc[train])
    # every row is predicted exactly once
    predicted = pd.concat([s.test for s in splits])
    assert len(predicted) == len(history) and not predicted.duplicated([PERIOD, SERIES]).any()


def test_predicted_rows_are_sorted_by_month_then_series_as_pandas_sorts_them(tmp_path, panel):
    # Reference: pandas, the window's rows of the month-sorted history sorted by
    # sort_values([PERIOD, SERIES], kind="stable"): the same rows, labels and order.
    shuffled = panel.copy()
    shuffled["region"] = shuffled["region"].map({"North": "Nörth", "South": "South"})   # not ASCII
    spec, data = checked(tmp_path, shuffled, {"method": "rolling_origin", "horizon": 4,
                                              "min_train_periods": 12})
    history = data.history.iloc[np.argsort(data.history[PERIOD].array.asi8, kind="stable")]
    history = history.reset_index(drop=True)
    splits, _ = validation_splits(spec, data)
    for split in splits:
        months = split.test[PERIOD]
        rows = history[(history[PERIOD] >= months.min()) & (history[PERIOD] <= months.max())]
        pd.testing.assert_frame_equal(split.test, rows.sort_values([PERIOD, SERIES], kind="stable"))
