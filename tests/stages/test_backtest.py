"""Backtest stage: splits, baselines, OLS at every origin, folds, penalised and robust fits.

Reference values come from independent computations written here:
statsmodels.api.OLS for every origin's OLS prediction, scikit-learn's KFold /
Ridge / Lasso / ElasticNet / HuberRegressor (with StandardScaler) for the folds
and the penalised and robust fits, and hand arithmetic for the baselines. The
data are simulated with fixed seeds (numpy.random.default_rng) and written
into tmp_path; the demo data is not used.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import yaml
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.linear_model import ElasticNet, HuberRegressor, Lasso, Ridge
from sklearn.model_selection import KFold
from sklearn.preprocessing import StandardScaler

import pipeline
import pipeline.stages.backtest as backtest_stage
from pipeline.core.columns import PERIOD, ROW, SERIES
from pipeline.core.errors import SpecError
from pipeline.models.penalised import PenalisedModel
from pipeline.stages.backtest import run_backtest
from pipeline.stages.splits import rolling_origin_windows

# ------------------------------------------------------------------ helpers


def write_spec(folder: Path, frame: pd.DataFrame, *, validation: dict, models: list,
               numeric: list | None = None, categorical: list | None = None,
               series: list[str] | None = None, **extra) -> Path:
    """Write the frame as Parquet and a spec for it; return the spec's path."""
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_parquet(folder / "data.parquet", index=False)
    # The references below fit the drivers alone: no series levels unless a test asks.
    drivers: dict = {"series_effects": extra.pop("series_effects", {"intercepts": False})}
    if numeric:
        drivers["numeric"] = numeric
    if categorical:
        drivers["categorical"] = categorical
    spec = {"name": "backtest-test",
            "input": {"file": "data.parquet", "date_column": "month",
                      "series": ["region"] if series is None else series},
            "target": "y"}
    spec["drivers"] = drivers
    spec.update({"validation": validation, "models": models, **extra,
                 "output": {"folder": "reports"}})
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def load(folder: Path, frame: pd.DataFrame, **kwargs):
    """Return (spec, checked data) for a frame and spec options."""
    spec = pipeline.load_spec(write_spec(folder, frame, **kwargs))
    return spec, pipeline.check(spec)


def panel(n_series: int = 3, n_months: int = 72, seed: int = 0, start: str = "2014-01") -> pd.DataFrame:
    """Simulated monthly panel: y depends on x1, x2, a quadratic in x3 (offset 1000) and region.

    x3 = 1000 + u with u ~ N(0, 1), so 1, x3 and x3² are nearly collinear (the
    column-scaled design has a condition number of about 3e6): the normal
    equations would lose about 12 of the 16 digits, Householder QR does not.
    """
    rng = np.random.default_rng(seed)
    months = pd.period_range(start, periods=n_months, freq="M")
    regions = [chr(ord("A") + k) for k in range(n_series)]
    frame = pd.DataFrame([(m.to_timestamp(), r) for m in months for r in regions],
                         columns=["month", "region"])
    n = len(frame)
    frame["x1"] = rng.normal(size=n)
    frame["x2"] = rng.normal(size=n)
    u = rng.normal(size=n)
    frame["x3"] = 1000.0 + u
    effect = frame["region"].map({r: 5.0 * k for k, r in enumerate(regions)})
    frame["y"] = (200 + 3 * frame["x1"] - 2 * frame["x2"] + 1.5 * u - 0.5 * u ** 2 + effect
                  + rng.normal(size=n))
    return frame


PANEL_DRIVERS = {"numeric": ["x1", "x2", {"column": "x3", "degree": 2}],
                 "categorical": [{"column": "region"}]}


def reference_design(frame: pd.DataFrame) -> np.ndarray:
    """The OLS design in an equivalent, well-conditioned basis (same column space).

    1, x3, x3² span the same space as 1, (x3 − 1000), (x3 − 1000)², and region
    dummies against 'A' span the same space as against any other level, so the
    fitted values and predictions are identical; this basis lets statsmodels
    compute them to full accuracy.
    """
    u = frame["x3"].to_numpy(float) - 1000.0
    dummies = [(frame["region"].astype(str) == r).to_numpy(float)
               for r in sorted(frame["region"].astype(str).unique())[1:]]
    return np.column_stack([np.ones(len(frame)), frame["x1"], frame["x2"], u, u ** 2, *dummies])


def expected_windows(n_months: int, validation: dict) -> list[tuple[int, int, int, int]]:
    """(train_start, origin, test_start, test_end) month positions, from the scheme's definition."""
    if validation["method"] == "holdout":
        origin = n_months - 1 - validation["last_periods"]
        return [(0, origin, origin + 1, n_months - 1)]
    horizon, gap = validation["horizon"], validation.get("gap", 0)
    step, count = validation.get("step", 1), validation["origins"]
    last = n_months - 1 - gap - horizon
    origins = [last - k * step for k in range(count)][::-1]
    sliding = validation.get("window", "expanding") == "sliding"
    min_train = validation["min_train_periods"]
    return [(o - min_train + 1 if sliding else 0, o, o + 1 + gap, o + gap + horizon) for o in origins]


class Spy:
    """Wraps _growing_ols and records what it returned."""

    def __init__(self, original):
        self.original = original
        self.outputs: list[dict] = []

    def __call__(self, *args, **kwargs):
        out = self.original(*args, **kwargs)
        self.outputs.append(out)
        return out


def prediction_of(value) -> np.ndarray:
    """The prediction array from one _growing_ols entry (an array, or a tuple led by it)."""
    return np.asarray(value[0] if isinstance(value, tuple) else value, float)


# ------------------------------------------------------------------ OLS at every origin

OLS_CASES = {
    "expanding h3": {"method": "rolling_origin", "horizon": 3, "min_train_periods": 24, "origins": 12},
    "expanding gap2 step3": {"method": "rolling_origin", "horizon": 2, "gap": 2, "step": 3,
                             "min_train_periods": 24, "origins": 8},
    "sliding gap1 step2": {"method": "rolling_origin", "window": "sliding", "horizon": 3, "gap": 1,
                           "step": 2, "min_train_periods": 30, "origins": 10},
    "holdout": {"method": "holdout", "last_periods": 6},
}


@pytest.mark.parametrize("case", list(OLS_CASES))
def test_every_origin_ols_prediction_equals_a_fresh_statsmodels_fit(case, tmp_path, monkeypatch):
    validation = OLS_CASES[case]
    frame = panel(seed=11)
    spec, data = load(tmp_path, frame, validation=validation, models=["ols"], **PANEL_DRIVERS)
    spy = Spy(backtest_stage._growing_ols)
    monkeypatch.setattr(backtest_stage, "_growing_ols", spy)
    result = run_backtest(spec, data)

    history = data.history
    months = np.sort(history[PERIOD].unique())
    windows = expected_windows(len(months), validation)
    ols = result.predictions[result.predictions["model"] == "ols"]
    assert sorted(ols["origin"].unique()) == sorted(str(months[w[1]]) for w in windows)

    growing = validation["method"] == "rolling_origin" and validation.get("window") != "sliding"
    if growing:
        # The plan learns the same in every window, so the growing-QR path must have run.
        assert len(spy.outputs) == 1
        assert set(spy.outputs[0]) == {str(months[w[1]]) for w in windows}
    else:
        assert spy.outputs == []

    for train_start, origin, test_start, test_end in windows:
        label = str(months[origin])
        in_train = history[PERIOD].between(months[train_start], months[origin])
        in_test = history[PERIOD].between(months[test_start], months[test_end])
        train, test = history[in_train], history[in_test]
        assert train[PERIOD].nunique() == origin - train_start + 1
        reference = sm.OLS(train["y"].to_numpy(float), reference_design(train)).fit()
        expected = pd.DataFrame({"period": test[PERIOD].astype(str).to_numpy(),
                                 "series": test[SERIES].to_numpy(),
                                 "expected": reference.predict(reference_design(test))})
        got = ols[ols["origin"] == label].merge(expected, on=["period", "series"], validate="1:1")
        assert len(got) == len(test) == (test_end - test_start + 1) * frame["region"].nunique()
        np.testing.assert_allclose(got["prediction"], got["expected"], rtol=1e-8, atol=0)
        # No target transform: the interval's centre is the prediction itself (the growing-QR
        # path included).
        assert got["prediction_se"].notna().all()
        np.testing.assert_array_equal(got["centre"], got["prediction"])
        assert (got["horizon"].to_numpy() >= 1 + validation.get("gap", 0)).all()
        if growing:
            recorded = prediction_of(spy.outputs[0][label])
            np.testing.assert_array_equal(ols.loc[ols["origin"] == label, "prediction"].to_numpy(),
                                          recorded)


@pytest.mark.parametrize("kind", ["log", "log1p"])
@pytest.mark.parametrize("window", ["expanding", "sliding"])
def test_a_transformed_targets_centre_and_se_are_a_statsmodels_fit_on_that_scale(kind, window, tmp_path):
    # At every origin: statsmodels OLS of log(y) (or log(1 + y)) on 1, x1, x2 over the training
    # window. Its prediction is the centre, its se_obs the prediction_se, its df_resid the df;
    # the prediction is the smeared mean exp(centre)·S (− 1 for log1p), S = mean(exp(resid)).
    frame = panel(n_series=2, n_months=48, seed=8)
    validation = {"method": "rolling_origin", "window": window, "horizon": 3,
                  "min_train_periods": 30, "origins": 4}
    spec, data = load(tmp_path, frame, validation=validation, models=["ols"], numeric=["x1", "x2"],
                      target_transform=kind)
    result = run_backtest(spec, data)
    history = data.history
    months = np.sort(history[PERIOD].unique())
    forward, shift = (np.log, 0.0) if kind == "log" else (np.log1p, 1.0)
    predictions = result.predictions
    for train_start, origin, test_start, test_end in expected_windows(len(months), validation):
        train = history[history[PERIOD].between(months[train_start], months[origin])]
        test = history[history[PERIOD].between(months[test_start], months[test_end])]
        reference = sm.OLS(forward(train["y"].to_numpy(float)),
                           sm.add_constant(train[["x1", "x2"]].to_numpy(float))).fit()
        new = reference.get_prediction(sm.add_constant(test[["x1", "x2"]].to_numpy(float)))
        smearing = float(np.mean(np.exp(reference.resid)))
        expected = pd.DataFrame({"period": test[PERIOD].astype(str).to_numpy(),
                                 "series": test[SERIES].to_numpy(), "mean": new.predicted_mean,
                                 "se_obs": new.se_obs})
        ols = predictions[(predictions["model"] == "ols") & (predictions["origin"] == str(months[origin]))]
        got = ols.merge(expected, on=["period", "series"], validate="1:1")
        assert len(got) == len(test)
        np.testing.assert_allclose(got["centre"], got["mean"], rtol=1e-9)
        np.testing.assert_allclose(got["prediction_se"], got["se_obs"], rtol=1e-9)
        assert (got["df_resid"] == reference.df_resid).all()
        np.testing.assert_allclose(got["prediction"], np.exp(got["mean"]) * smearing - shift, rtol=1e-9)
    # The baselines give no standard error, so no centre.
    rules = predictions[predictions["model"] != "ols"]
    assert len(rules) and rules["centre"].isna().all() and rules["prediction_se"].isna().all()


def test_growing_path_is_skipped_when_the_plan_differs_between_windows_and_the_answer_is_still_right(
        tmp_path, monkeypatch):
    # 'channel' is most often "web" early on and "shop" later, so the one-hot
    # reference level (the most frequent one) changes between training windows.
    frame = panel(n_series=2, n_months=60, seed=3)
    rng = np.random.default_rng(4)
    late = frame["month"] >= pd.Timestamp("2015-06-01")
    frame["channel"] = np.where(late, rng.choice(["shop", "web"], len(frame), p=[0.9, 0.1]),
                                rng.choice(["shop", "web"], len(frame), p=[0.1, 0.9]))
    frame["y"] += np.where(frame["channel"] == "web", 4.0, 0.0)
    validation = {"method": "rolling_origin", "horizon": 1, "min_train_periods": 24, "origins": 36}
    spec, data = load(tmp_path, frame, validation=validation, models=["ols"], numeric=["x1", "x2"],
                      categorical=[{"column": "channel"}])
    history = data.history
    months = np.sort(history[PERIOD].unique())
    windows = expected_windows(len(months), validation)
    first, last = (history[history[PERIOD] <= months[w[1]]]["channel"].value_counts().idxmax()
                   for w in (windows[0], windows[-1]))
    assert (first, last) == ("web", "shop")  # the reference level does change
    spy = Spy(backtest_stage._growing_ols)
    monkeypatch.setattr(backtest_stage, "_growing_ols", spy)
    result = run_backtest(spec, data)
    assert spy.outputs == []

    ols = result.predictions[result.predictions["model"] == "ols"]
    for _, origin, test_start, test_end in windows:
        train = history[history[PERIOD] <= months[origin]]
        test = history[history[PERIOD].between(months[test_start], months[test_end])]

        def design(rows):
            return np.column_stack([np.ones(len(rows)), rows["x1"], rows["x2"],
                                    (rows["channel"] == "web").to_numpy(float)])

        expected = sm.OLS(train["y"].to_numpy(float), design(train)).fit().predict(design(test))
        got = ols[ols["origin"] == str(months[origin])].sort_values("series")
        np.testing.assert_allclose(got["prediction"], expected[np.argsort(test[SERIES].to_numpy())],
                                   rtol=1e-8)


# ------------------------------------------------------------------ splits, property-tested


def allowed_origins(n_periods: int, horizon: int, gap: int, min_train: int, step: int) -> int:
    """How many origins fit: the latest origin is n − 1 − gap − horizon, the earliest min_train − 1."""
    last = n_periods - 1 - gap - horizon
    return (last - (min_train - 1)) // step + 1 if last >= min_train - 1 else 0


@settings(deadline=None, database=None, max_examples=300)
@given(n_periods=st.integers(1, 180), horizon=st.integers(1, 24), gap=st.integers(0, 12),
       min_train=st.integers(2, 60), step=st.integers(1, 12),
       window=st.sampled_from(["expanding", "sliding"]),
       origins=st.one_of(st.none(), st.integers(1, 60)))
def test_rolling_origin_windows_never_train_on_what_they_predict(n_periods, horizon, gap, min_train,
                                                                 step, window, origins):
    allowed = allowed_origins(n_periods, horizon, gap, min_train, step)
    kwargs = {"horizon": horizon, "min_train": min_train, "gap": gap, "step": step, "window": window}
    if origins is not None and origins > allowed:
        with pytest.raises(ValueError) as raised:
            rolling_origin_windows(n_periods, origins=origins, **kwargs)
        assert re.search(rf"\b{allowed}\b", str(raised.value)), str(raised.value)
        return
    windows = rolling_origin_windows(n_periods, origins=origins, **kwargs)
    assert len(windows) == (allowed if origins is None else origins)
    for w in windows:
        train = range(w.train_start, w.origin + 1)
        assert w.train_start >= 0
        assert all(i <= w.origin < w.test_start for i in train)
        assert w.test_start == w.origin + 1 + gap
        assert w.test_end - w.test_start + 1 == horizon
        assert w.test_end <= n_periods - 1
        assert len(train) >= min_train
        if window == "sliding":
            assert len(train) == min_train
        else:
            assert w.train_start == 0
    assert all(b.origin - a.origin == step for a, b in zip(windows, windows[1:]))
    if windows:
        assert windows[-1].test_end == n_periods - 1


def test_too_many_origins_in_the_spec_names_file_line_key_and_the_number_allowed(tmp_path):
    frame = panel(n_series=2, n_months=40, seed=1)
    validation = {"method": "rolling_origin", "horizon": 3, "gap": 1, "step": 2,
                  "min_train_periods": 20, "origins": 50}
    path = write_spec(tmp_path, frame, validation=validation, models=["ols"], numeric=["x1"])
    spec = pipeline.load_spec(path)
    allowed = allowed_origins(40, 3, 1, 20, 2)
    assert allowed == 9  # origins at months 19, 21, ..., 35 (0-based): (35 - 19) / 2 + 1
    with pytest.raises(SpecError) as raised:  # from the check stage, or at the latest the backtest
        run_backtest(spec, pipeline.check(spec))
    error = raised.value
    line = next(i for i, text in enumerate(path.read_text().splitlines(), 1) if "origins:" in text)
    assert error.file == str(path)
    assert error.line == line
    assert error.key == "validation.origins"
    assert f"at most {allowed}" in str(error)
    assert str(error).startswith(f"{path}:{line}: validation.origins: ")


# ------------------------------------------------------------------ baselines by hand


def tiny_frame() -> pd.DataFrame:
    """Two series, 2020-01 .. 2021-06; the last three months are what the holdout predicts."""
    a = [10, 12, 11, 13, 15, 14, 16, 18, 17, 19, 21, 20, 22, 24, 23, 25, 27, 26]
    b = [5, 5, 6, 4, 5, 7, 8, 6, 5, 4, 6, 5, 7, 6, 5, 9, 3, 8]
    months = pd.date_range("2020-01-01", periods=18, freq="MS")
    return pd.concat([pd.DataFrame({"month": months, "region": "A", "y": np.array(a, float)}),
                      pd.DataFrame({"month": months, "region": "B", "y": np.array(b, float)})],
                     ignore_index=True)


# Hand computation over the 15 training months, 2020-01 .. 2021-03, predicting 2021-04 .. 2021-06:
#   mean:     A: (10+12+11+13+15+14+16+18+17+19+21+20+22+24+23) / 15 = 255 / 15 = 17
#             B: (5+5+6+4+5+7+8+6+5+4+6+5+7+6+5) / 15 = 84 / 15 = 5.6
#   last:     A: 23 (2021-03)               B: 5
#   seasonal: the same month a year before: 2020-04, 2020-05, 2020-06
#             A: 13, 15, 14                 B: 4, 5, 7
#   drift:    last + h · (last − first) / (15 − 1)
#             A: 23 + h · 13 / 14           B: 5 + h · 0 / 14 = 5
HAND = {
    "mean_baseline": {"A": [255 / 15] * 3, "B": [84 / 15] * 3},
    "last_value": {"A": [23.0] * 3, "B": [5.0] * 3},
    "seasonal_naive": {"A": [13.0, 15.0, 14.0], "B": [4.0, 5.0, 7.0]},
    "drift": {"A": [23 + h * 13 / 14 for h in (1, 2, 3)], "B": [5.0] * 3},
}


@pytest.mark.parametrize("validation", [
    {"method": "holdout", "last_periods": 3},
    {"method": "rolling_origin", "horizon": 3, "min_train_periods": 15, "origins": 1},
], ids=["holdout", "rolling_origin"])
def test_baselines_per_series_match_hand_computation(validation, tmp_path):
    spec, data = load(tmp_path, tiny_frame(), validation=validation,
                      models=["last_value", "seasonal_naive", "drift"])
    predictions = run_backtest(spec, data).predictions
    assert set(predictions["origin"]) == {"2021-03"}
    for model, by_series in HAND.items():
        for series, expected in by_series.items():
            rows = predictions[(predictions["model"] == model) & (predictions["series"] == series)]
            rows = rows.sort_values("period")
            assert list(rows["period"]) == ["2021-04", "2021-05", "2021-06"]
            assert list(rows["horizon"]) == [1, 2, 3]
            np.testing.assert_allclose(rows["prediction"], expected, rtol=1e-12, err_msg=f"{model} {series}")


# ------------------------------------------------------------------ k-fold and grouped k-fold


def fold_rows(result) -> list[set[int]]:
    return [set(split.test[ROW].astype(int)) for split in result.splits]


def test_kfold_is_seeded_and_matches_sklearn_kfold(tmp_path):
    frame = panel(n_series=3, n_months=30, seed=5)
    validation = {"method": "kfold", "folds": 4, "seed": 7}
    spec, data = load(tmp_path / "a", frame, validation=validation, models=["ols"], numeric=["x1", "x2"])
    first = run_backtest(spec, data)
    again = run_backtest(*load(tmp_path / "b", frame, validation=validation, models=["ols"],
                               numeric=["x1", "x2"]))
    assert fold_rows(first) == fold_rows(again)

    rows = data.history[ROW].to_numpy().astype(int)
    reference = [set(rows[test]) for _, test in
                 KFold(n_splits=4, shuffle=True, random_state=7).split(np.arange(len(rows)))]
    assert fold_rows(first) == reference
    assert set().union(*reference) == set(rows)
    for split in first.splits:
        assert not set(split.train[ROW]) & set(split.test[ROW])
        assert len(split.train) + len(split.test) == len(rows)

    other = run_backtest(*load(tmp_path / "c", frame, validation={**validation, "seed": 8},
                               models=["ols"], numeric=["x1", "x2"]))
    assert fold_rows(other) != fold_rows(first)
    assert (first.predictions["horizon"] == 0).all()
    assert first.predictions["mase_scale"].isna().all()


def test_grouped_kfold_never_splits_a_group(tmp_path):
    frame = panel(n_series=6, n_months=20, seed=6)
    frame["cluster"] = frame["region"].map({"A": "north", "B": "north", "C": "south", "D": "east",
                                            "E": "west", "F": "east"})
    frame["tier"] = np.where(frame["month"].dt.month <= 6, "h1", "h2")
    validation = {"method": "grouped_kfold", "folds": 3, "group_by": ["cluster", "tier"]}
    spec, data = load(tmp_path, frame, validation=validation, models=["ols"], numeric=["x1", "x2"])
    result = run_backtest(spec, data)
    assert len(result.splits) == 3
    groups = data.history.set_index(ROW)[["cluster", "tier"]].astype(str).agg("/".join, axis=1)
    seen: dict[str, int] = {}
    for k, split in enumerate(result.splits):
        test_groups = set(groups[split.test[ROW]])
        train_groups = set(groups[split.train[ROW]])
        assert not test_groups & train_groups
        for group in test_groups:
            assert group not in seen, f"group {group} is in the test rows of two folds"
            seen[group] = k
    assert set(seen) == set(groups)


@pytest.mark.parametrize("kind", ["last_value", "seasonal_naive", "drift"])
@pytest.mark.parametrize("validation", [{"method": "kfold", "folds": 3},
                                        {"method": "grouped_kfold", "folds": 2, "group_by": ["region"]}],
                         ids=["kfold", "grouped_kfold"])
def test_time_based_baselines_under_kfold_are_refused_at_their_line(kind, validation, tmp_path):
    path = write_spec(tmp_path, panel(n_series=2, n_months=12), validation=validation,
                      models=["ols", kind], numeric=["x1"])
    with pytest.raises(SpecError) as raised:
        pipeline.load_spec(path)
    line = next(i for i, text in enumerate(path.read_text().splitlines(), 1) if f"- {kind}" in text)
    assert raised.value.key == "models[1]"
    assert raised.value.line == line
    assert kind in str(raised.value) and "time order" in str(raised.value)


def test_refused_baseline_is_placed_at_its_own_line_when_mean_baseline_is_listed(tmp_path):
    path = write_spec(tmp_path, panel(n_series=2, n_months=12), validation={"method": "kfold", "folds": 3},
                      models=["mean_baseline", "drift"], numeric=["x1"])
    with pytest.raises(SpecError) as raised:
        pipeline.load_spec(path)
    line = next(i for i, text in enumerate(path.read_text().splitlines(), 1) if "- drift" in text)
    assert (raised.value.key, raised.value.line) == ("models[1]", line)


def test_mase_selection_under_kfold_is_refused(tmp_path):
    path = write_spec(tmp_path, panel(n_series=2, n_months=12), validation={"method": "kfold", "folds": 3},
                      models=["ols"], numeric=["x1"], select_by="mase")
    with pytest.raises(SpecError) as raised:
        pipeline.load_spec(path)
    assert raised.value.key == "select_by"


# ------------------------------------------------------------------ ridge, lasso, elastic net, Huber


def penalised_frame(seed: int = 21, n_months: int = 60) -> pd.DataFrame:
    """Two series; y depends on x1..x3, x4..x6 are noise, x2 is nearly a copy of x1."""
    rng = np.random.default_rng(seed)
    months = pd.date_range("2013-01-01", periods=n_months, freq="MS")
    frame = pd.DataFrame([(m, r) for m in months for r in ("A", "B")], columns=["month", "region"])
    n = len(frame)
    x = rng.normal(size=(n, 6))
    x[:, 1] = x[:, 0] + 0.1 * rng.normal(size=n)
    for k in range(6):
        frame[f"x{k + 1}"] = x[:, k] * (k + 1) + 10 * k  # different scales and offsets
    frame["y"] = 50 + 2 * x[:, 0] + 1 * x[:, 1] - 1.5 * x[:, 2] + 2.0 * rng.normal(size=n)
    return frame


DRIVERS6 = [f"x{k}" for k in range(1, 7)]
ROLLING = {"method": "rolling_origin", "horizon": 2, "min_train_periods": 24, "origins": 6}


class PenaltyRecorder:
    """Records, per training window (its last month), the penalty chosen and every score."""

    def __init__(self, monkeypatch):
        self.chosen: dict[tuple[str, int], tuple] = {}
        original = PenalisedModel.choose_penalty
        recorder = self

        def choose(model, design, y):
            best, scores = original(model, design, y)
            recorder.chosen[(model.kind, int(np.max(design.period)))] = (best, dict(scores))
            return best, scores

        monkeypatch.setattr(PenalisedModel, "choose_penalty", choose)


@pytest.mark.parametrize("kind", ["ridge", "lasso", "elastic_net"])
def test_penalty_is_chosen_inside_the_training_window_only(kind, tmp_path, monkeypatch):
    frame = penalised_frame()
    recorder = PenaltyRecorder(monkeypatch)
    spec, data = load(tmp_path / "before", frame, validation=ROLLING, models=[kind], numeric=DRIVERS6)
    before = run_backtest(spec, data).predictions
    chosen_before = dict(recorder.chosen)
    assert len(chosen_before) == ROLLING["origins"]

    # Change every target value after the third origin, wildly.
    origins = sorted(before["origin"].unique())
    cut = pd.Period(origins[2], freq="M")
    changed = frame.copy()
    after_cut = changed["month"].dt.to_period("M") > cut
    changed.loc[after_cut, "y"] = 1e4 * np.random.default_rng(0).normal(size=int(after_cut.sum()))
    recorder.chosen.clear()
    spec2, data2 = load(tmp_path / "after", changed, validation=ROLLING, models=[kind], numeric=DRIVERS6)
    after = run_backtest(spec2, data2).predictions

    for (model_kind, last_month), (penalty, scores) in chosen_before.items():
        if last_month <= cut.ordinal:
            assert recorder.chosen[(model_kind, last_month)] == (penalty, scores)
        assert penalty in scores and scores[penalty] == min(scores.values())
    for origin in origins:
        old = before[(before["model"] == kind) & (before["origin"] == origin)]["prediction"].to_numpy()
        new = after[(after["model"] == kind) & (after["origin"] == origin)]["prediction"].to_numpy()
        if origin <= str(cut):
            np.testing.assert_array_equal(old, new)
        else:
            assert not np.allclose(old, new)  # the change did reach the later origins


def standardised_reference(estimator, train: pd.DataFrame, test: pd.DataFrame) -> np.ndarray:
    """Fit the sklearn estimator on X and y standardised over the training rows; predict test."""
    scaler = StandardScaler().fit(train[DRIVERS6].to_numpy(float))
    y = train["y"].to_numpy(float)
    y_mean, y_sd = y.mean(), y.std()
    estimator.fit(scaler.transform(train[DRIVERS6].to_numpy(float)), (y - y_mean) / y_sd)
    return estimator.predict(scaler.transform(test[DRIVERS6].to_numpy(float))) * y_sd + y_mean


REFERENCES = {
    "ridge": (2.5, lambda: Ridge(alpha=2.5), 1e-9),
    "lasso": (0.02, lambda: Lasso(alpha=0.02, max_iter=10000), 1e-7),
    "elastic_net": (0.02, lambda: ElasticNet(alpha=0.02, l1_ratio=0.5, max_iter=10000), 1e-7),
}


def origin_frames(data, predictions, kind):
    """Yield (training rows, test rows, castline's predictions in the test rows' order) per origin."""
    history = data.history
    for origin, rows in predictions[predictions["model"] == kind].groupby("origin"):
        cut = pd.Period(origin, freq="M")
        train = history[history[PERIOD] <= cut]
        test = history[history[PERIOD].astype(str).isin(rows["period"])].copy()
        test["period_text"] = test[PERIOD].astype(str)
        merged = test.merge(rows, left_on=["period_text", SERIES], right_on=["period", "series"],
                            validate="1:1")
        yield train, merged, merged["prediction"].to_numpy()


@pytest.mark.parametrize("kind", list(REFERENCES))
def test_one_penalty_given_equals_sklearn_on_standardised_data(kind, tmp_path):
    penalty, make, rtol = REFERENCES[kind]
    spec, data = load(tmp_path, penalised_frame(seed=22), validation=ROLLING,
                      models=[{"kind": kind, "penalties": [penalty]}], numeric=DRIVERS6)
    predictions = run_backtest(spec, data).predictions
    count = 0
    for train, test, got in origin_frames(data, predictions, kind):
        np.testing.assert_allclose(got, standardised_reference(make(), train, test), rtol=rtol)
        count += 1
    assert count == ROLLING["origins"]


def test_ridge_equals_its_closed_form_on_standardised_data(tmp_path):
    # A second reference for ridge: beta = (ZᵀZ + αI)⁻¹ Zᵀv on the centred, scaled Z and v.
    spec, data = load(tmp_path, penalised_frame(seed=23), validation=ROLLING,
                      models=[{"kind": "ridge", "penalties": [2.5]}], numeric=DRIVERS6)
    predictions = run_backtest(spec, data).predictions
    for train, test, got in origin_frames(data, predictions, "ridge"):
        x = train[DRIVERS6].to_numpy(float)
        mean, sd = x.mean(axis=0), x.std(axis=0)
        z = (x - mean) / sd
        y = train["y"].to_numpy(float)
        v = (y - y.mean()) / y.std()
        beta = np.linalg.solve(z.T @ z + 2.5 * np.eye(z.shape[1]), z.T @ v)
        expected = ((test[DRIVERS6].to_numpy(float) - mean) / sd) @ beta * y.std() + y.mean()
        np.testing.assert_allclose(got, expected, rtol=1e-9)


def test_huber_equals_sklearn_huber_regressor_on_standardised_data(tmp_path):
    frame = penalised_frame(seed=24)
    rng = np.random.default_rng(25)
    outliers = rng.choice(len(frame), size=8, replace=False)
    frame.loc[outliers, "y"] += 40.0  # a few gross errors, the case Huber's loss is for
    spec, data = load(tmp_path, frame, validation=ROLLING,
                      models=[{"kind": "huber", "huber_threshold": 1.5}], numeric=DRIVERS6)
    predictions = run_backtest(spec, data).predictions
    count = 0
    for train, test, got in origin_frames(data, predictions, "huber"):
        reference = HuberRegressor(epsilon=1.5, alpha=0.0, max_iter=1000)
        np.testing.assert_allclose(got, standardised_reference(reference, train, test), rtol=1e-6)
        count += 1
    assert count == ROLLING["origins"]


def test_the_prediction_table_equals_a_frame_per_model_concatenated():
    # Reference: pandas, a DataFrame per model and window joined by pd.concat (castline's
    # former way): the same values, column types and row order.
    rng = np.random.default_rng(21)
    pieces, frames = [], []
    for window, kind, spread in [("2021-01", "mean_baseline", None), ("2021-01", "ols", "int"),
                                 ("2021-02", "ols", "array"), ("fold 1", "ridge", "centre")]:
        n = int(rng.integers(1, 9))
        shared = {"origin": window, "period": "" if window.startswith("fold") else
                  np.array([f"2021-{m:02d}" for m in rng.integers(1, 13, n)], object),
                  "horizon": rng.integers(0, 12, n), "series": np.array(["a", "b"] * n, object)[:n],
                  "actual": rng.normal(size=n), "mase_scale": rng.normal(size=n)}
        predicted = rng.normal(size=n)
        se = None if spread is None else np.where(rng.random(n) < 0.3, np.nan, rng.random(n))
        df_resid = {None: None, "int": 40, "array": rng.integers(5, 9, n), "centre": 12.0}[spread]
        centre = rng.normal(size=n) if spread == "centre" else None
        pieces.append(backtest_stage._model_rows(shared, kind, predicted, se, df_resid, centre))
        if se is None:
            centre_column = np.nan
        else:
            centre_column = np.where(np.isfinite(se), predicted if centre is None else centre, np.nan)
        frames.append(pd.DataFrame({
            "origin": shared["origin"], "period": shared["period"], "horizon": shared["horizon"],
            "series": shared["series"], "model": kind, "actual": shared["actual"],
            "prediction": predicted, "mase_scale": shared["mase_scale"],
            "prediction_se": np.nan if se is None else se,
            "df_resid": np.nan if df_resid is None else df_resid, "centre": centre_column}))
    expected = pd.concat(frames, ignore_index=True)[backtest_stage.PREDICTION_COLUMNS]
    pd.testing.assert_frame_equal(backtest_stage._table(pieces), expected, check_exact=True)
