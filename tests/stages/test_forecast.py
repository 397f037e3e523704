"""Forecast stage through whole runs: intervals, coefficient tables, diagnostics, scenarios.

Data: simulated monthly sales (numpy.random.default_rng, fixed seeds), written as CSV
into tmp_path with future rows whose drivers are filled in. Reference values come from
statsmodels (OLS, get_prediction, cov_type='hac-panel'), numpy.quantile, and hand
arithmetic on the run's own coefficients.csv, each named where it is used.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import yaml

import pipeline
from pipeline.core.errors import SpecError, UserError
from pipeline.models.inference import newey_west_lags

HISTORY_MONTHS = 96
FUTURE_MONTHS = 6
PRICE, PROMO, TARGET = -4.0, 2.5, 100.0      # the simulated effects


def simulate(seed: int, *, regions=("North", "South"), phi: float = 0.0, sd: float = 3.0,
             history: int = HISTORY_MONTHS, future: int = FUTURE_MONTHS) -> pd.DataFrame:
    """Monthly sales per region: a price effect, a promotion effect, a region level, and
    errors that are AR(1) with coefficient phi within each region (phi = 0: independent)."""
    rng = np.random.default_rng(seed)
    months = pd.period_range("2016-01", periods=history + future, freq="M")
    frames = []
    for k, region in enumerate(regions):
        price = rng.uniform(8, 12, len(months)).round(2)
        promo = rng.integers(0, 8, len(months)).astype(float)
        shocks = rng.normal(0, sd, len(months))
        errors = np.empty(len(months))
        errors[0] = shocks[0] / np.sqrt(1 - phi ** 2)
        for t in range(1, len(months)):
            errors[t] = phi * errors[t - 1] + shocks[t]
        sales = TARGET + 15 * k + PRICE * price + PROMO * promo + errors
        sales[history:] = np.nan
        frames.append(pd.DataFrame({"month": months.to_timestamp().strftime("%Y-%m-%d"),
                                    "region": region, "shelf_price": price, "promo_days": promo,
                                    "sales": sales}))
    return pd.concat(frames, ignore_index=True)


def write_spec(folder: Path, frame: pd.DataFrame, **extra) -> Path:
    """Write the data as CSV and a spec for it (rolling origin, horizon 3); return the spec."""
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "data.csv", index=False)
    series = frame["region"].nunique() > 1
    spec = {"name": "forecast-stage-test",
            "input": {"file": "data.csv", "date_column": "month",
                      **({"series": ["region"]} if series else {})},
            "target": "sales",
            "drivers": {"numeric": ["shelf_price", "promo_days"],
                        **({"categorical": [{"column": "region", "reference": "North"}]}
                           if series else {})},
            "validation": {"method": "rolling_origin", "horizon": 3, "min_train_periods": 48,
                           "step": 3},
            "models": ["ols"]}
    spec.update(extra)
    spec["output"] = {"folder": "reports"}
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


def run(folder: Path, frame: pd.DataFrame, **extra):
    return pipeline.run(write_spec(folder, frame, **extra))


def read(result, name: str) -> pd.DataFrame:
    return pd.read_csv(result.folder.path / name)


def history_design(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, pd.DataFrame]:
    """The OLS design of the history, [1, price, promo, South], and the target, for statsmodels."""
    history = frame[frame["sales"].notna()]
    return _x(history), history["sales"].to_numpy(float), history


def _x(rows: pd.DataFrame) -> np.ndarray:
    columns = [np.ones(len(rows)), rows["shelf_price"], rows["promo_days"]]
    if rows["region"].nunique() > 1 or (rows["region"] != "North").any():
        columns.append((rows["region"] == "South").to_numpy(float))
    return np.column_stack(columns)


# ------------------------------------------------------------------ forecast intervals

SCENARIOS = [
    {"name": "south price up 5 pct",
     "changes": [{"column": "shelf_price", "percent": 5, "where": {"region": "South"}}]},
    {"name": "no promotions", "changes": [{"column": "promo_days", "set": 0}]},
]
FUTURE_PROMO = [3, 0, 5, 7, 1, 2, 4, 6, 0, 2, 3, 1]


@pytest.fixture(scope="module")
def two_series_run(tmp_path_factory):
    """Independent errors, two regions; OLS and ridge; the two scenarios. One run serves the
    interval, scenario, ridge and no-false-flag tests (each run costs seconds)."""
    frame = simulate(101)
    frame.loc[frame["sales"].isna(), "promo_days"] = FUTURE_PROMO
    return frame, run(tmp_path_factory.mktemp("two"), frame, scenarios=SCENARIOS,
                      models=["ols", {"kind": "ridge", "penalties": [0.5]}])


@pytest.fixture(scope="module")
def autocorrelated_runs(tmp_path_factory):
    """AR(1) errors with phi = 0.8, two regions, hac standard errors (the diagnostics do not
    depend on the choice; the classical errors of the same fit come from statsmodels)."""
    frame = simulate(11, phi=0.8)
    return frame, run(tmp_path_factory.mktemp("ar"), frame, standard_errors="hac")


@pytest.fixture(scope="module")
def one_series_runs(tmp_path_factory):
    """One region: AR(1) errors (phi = 0.8) with hac at lag 2, independent errors with hc3."""
    folder = tmp_path_factory.mktemp("one")
    ar = simulate(7, regions=("North",), phi=0.8)
    iid = simulate(7, regions=("North",), phi=0.0)
    return {"ar": (ar, run(folder / "ar", ar, standard_errors="hac", autocorrelation_lags=2)),
            "iid": (iid, run(folder / "iid", iid, standard_errors="hc3"))}


def test_forecast_csv_has_both_kinds_of_interval_at_80_and_95(two_series_run):
    _, result = two_series_run
    forecast = read(result, "forecast.csv")
    # two regions, seven models: the mean of the training months, ols, ridge and the four simple rules a
    # rolling origin always compares
    assert len(forecast) == 2 * FUTURE_MONTHS * 7
    for method in ("analytic", "empirical"):
        for level in ("80", "95"):
            assert {f"{method}_low_{level}", f"{method}_high_{level}"} <= set(forecast.columns)
    ols = forecast[forecast["model"] == "ols"]
    for method in ("analytic", "empirical"):
        low80, high80 = ols[f"{method}_low_80"], ols[f"{method}_high_80"]
        low95, high95 = ols[f"{method}_low_95"], ols[f"{method}_high_95"]
        assert ols[[f"{method}_low_80", f"{method}_low_95"]].notna().all().all()
        assert (low80 < ols["forecast"]).all() and (ols["forecast"] < high80).all()
        assert (low95 < low80).all() and (high80 < high95).all()  # 95% wider than 80%
    baseline = forecast[forecast["model"] == "mean_baseline"]
    assert baseline["analytic_low_95"].isna().all()               # no analytic interval for the mean
    assert (baseline["empirical_low_95"] < baseline["empirical_high_95"]).all()
    assert sorted(ols["horizon"].unique()) == list(range(1, FUTURE_MONTHS + 1))


def test_the_analytic_forecast_interval_equals_statsmodels_on_all_history(two_series_run):
    frame, result = two_series_run
    x, y, _ = history_design(frame)
    future = frame[frame["sales"].isna()].sort_values(["month", "region"], kind="stable")
    reference = sm.OLS(y, x).fit().get_prediction(_x(future))    # statsmodels get_prediction
    forecast = read(result, "forecast.csv")
    ols = forecast[forecast["model"] == "ols"].reset_index(drop=True)
    assert list(ols["series"]) == list(future["region"])
    for level in (0.80, 0.95):
        expected = reference.summary_frame(alpha=1 - level)
        percent = f"{level * 100:g}"
        np.testing.assert_allclose(ols["forecast"], expected["mean"], rtol=1e-9)
        np.testing.assert_allclose(ols[f"analytic_low_{percent}"], expected["obs_ci_lower"], rtol=1e-9)
        np.testing.assert_allclose(ols[f"analytic_high_{percent}"], expected["obs_ci_upper"], rtol=1e-9)


def test_the_empirical_forecast_interval_uses_the_scaled_backtest_errors_of_its_horizon(two_series_run):
    _, result = two_series_run
    predictions = read(result, "predictions.csv")
    forecast = read(result, "forecast.csv")
    history = read(result, "history.csv")
    own = predictions[predictions["model"] == "ols"]
    # Each error on its series' scale in its window (predictions.csv's mase_scale).
    scores = ((own["actual"] - own["prediction"]).abs() / own["mase_scale"]).to_numpy()
    # Each series' scale from all history: the mean absolute 12-month difference (pandas), the
    # in-sample MAE of the seasonal naive forecast.
    scale = {name: group["actual"].diff(12).abs().mean()
             for name, group in history.sort_values("period").groupby("series")}
    for _, row in forecast[forecast["model"] == "ols"].iterrows():
        horizon = min(int(row["horizon"]), 3)                     # beyond 3: the furthest measured
        # 32 errors a horizon (2 series, 16 origins), fewer than 39: each borrows its nearest
        # neighbour, the further-ahead one first: 1 takes 2, 2 takes 3, 3 takes 2.
        pool = {1: (1, 2), 2: (2, 3), 3: (2, 3)}[horizon]
        assert (own["horizon"] == horizon).sum() == 32
        at = np.sort(scores[own["horizon"].isin(pool).to_numpy()])
        for level, low, high in ((0.8, "empirical_low_80", "empirical_high_80"),
                                 (0.95, "empirical_low_95", "empirical_high_95")):
            # split conformal (Lei et al. 2018): the ⌈(n + 1)·level⌉-th smallest score
            bound = at[int(np.ceil((len(at) + 1) * level - 1e-9)) - 1] * scale[row["series"]]
            assert row[high] == pytest.approx(row["forecast"] + bound, rel=1e-9)
            assert row[low] == pytest.approx(max(row["forecast"] - bound, 0.0), rel=1e-9)


def test_the_backtest_reports_the_coverage_of_each_method(two_series_run):
    _, result = two_series_run
    table = read(result, "interval_coverage.csv")
    ols = table[table["model"] == "ols"]
    assert set(zip(ols["method"], ols["level"])) == {(m, lv) for m in ("analytic", "empirical")
                                                     for lv in (0.8, 0.95)}
    assert ols["coverage"].between(0, 1).all()
    summary = result.folder.summary.read_text(encoding="utf-8")
    assert "## How often the intervals held in the backtest" in summary


def test_a_missing_driver_in_a_month_to_forecast_stops_naming_it(tmp_path):
    frame = simulate(5)
    future_row = frame.index[frame["sales"].isna()][2]
    frame.loc[future_row, "promo_days"] = np.nan
    with pytest.raises(UserError) as caught:
        run(tmp_path, frame)
    assert "promo_days" in str(caught.value)
    assert "forecast" in str(caught.value)
    assert not (tmp_path / "reports").exists() or not any((tmp_path / "reports").iterdir())


# ------------------------------------------------------------------ diagnostics

def _diagnostics(result) -> pd.DataFrame:
    table = read(result, "diagnostics.csv")
    return table[table["model"] == "ols"].set_index("check")


def _flag_line(result, check: str) -> str:
    summary = result.folder.summary.read_text(encoding="utf-8")
    return next(text for text in summary.splitlines() if text.startswith(f"| {check}"))


@pytest.mark.parametrize("which", ["one region", "two regions"])
def test_autocorrelated_errors_flag_durbin_watson_and_ljung_box(which, autocorrelated_runs,
                                                                 one_series_runs):
    # AR(1) errors, phi = 0.8: Durbin–Watson ≈ 2(1 − 0.8) = 0.4, well below 1.5.
    result = one_series_runs["ar"][1] if which == "one region" else autocorrelated_runs[1]
    table = _diagnostics(result)
    assert bool(table.loc["Durbin–Watson", "flagged"])
    assert table.loc["Durbin–Watson", "value"] < 1.0
    assert bool(table.loc["Ljung–Box (12 lags)", "flagged"])
    assert table.loc["Ljung–Box (12 lags)", "p_value"] < 0.05
    line = _flag_line(result, "Durbin–Watson")
    assert "FLAG" in line and "autocorrelated" in line
    assert "FLAG" in _flag_line(result, "Ljung–Box")


@pytest.mark.parametrize("which", ["one region", "two regions"])
def test_independent_errors_do_not_flag_autocorrelation(which, two_series_run, one_series_runs):
    result = one_series_runs["iid"][1] if which == "one region" else two_series_run[1]
    table = _diagnostics(result)
    assert not bool(table.loc["Durbin–Watson", "flagged"])
    assert 1.5 < table.loc["Durbin–Watson", "value"] < 2.5
    assert not bool(table.loc["Ljung–Box (12 lags)", "flagged"])
    assert table.loc["Ljung–Box (12 lags)", "p_value"] >= 0.05
    assert "FLAG" not in _flag_line(result, "Durbin–Watson")


def test_every_diagnostic_the_issue_names_is_reported(two_series_run):
    _, result = two_series_run
    checks = set(_diagnostics(result).index)
    assert {"R²", "adjusted R²", "F test (all slopes zero)", "AIC", "BIC", "Durbin–Watson",
            "Ljung–Box (12 lags)", "Breusch–Pagan", "Jarque–Bera", "largest VIF",
            "condition number (scaled design)", "Cook's distance"} <= checks
    assert len(read(result, "vif.csv")) == 3                      # price, promotion, South
    influential = read(result, "influential_rows.csv")
    assert list(influential.columns) == ["row", "cooks_distance", "above_4_over_n"]


# ------------------------------------------------------------------ standard errors

def _ols_terms(result) -> pd.DataFrame:
    return read(result, "coefficients.csv").query("model == 'ols'").reset_index(drop=True)


def _stacked(history: pd.DataFrame) -> np.ndarray:
    """Row order stacked by region, in time order within each (as statsmodels hac-panel needs)."""
    return np.lexsort((history["month"].to_numpy(), history["region"].to_numpy()))


def test_hac_in_the_spec_changes_the_standard_errors_and_the_summary_says_so(autocorrelated_runs,
                                                                          two_series_run):
    frame, hac = autocorrelated_runs
    robust = _ols_terms(hac)
    x, y, history = history_design(frame)
    classical = sm.OLS(y, x).fit()                                # statsmodels, nonrobust
    np.testing.assert_allclose(robust["estimate"], classical.params, rtol=1e-10)
    assert (robust["standard_errors"] == "hac").all()
    assert (np.abs(robust["std_error"] / classical.bse - 1) > 0.05).all()
    np.testing.assert_allclose(robust["t"], robust["estimate"] / robust["std_error"], rtol=1e-12)
    assert "hac standard errors" in hac.folder.summary.read_text(encoding="utf-8")
    assert (_ols_terms(two_series_run[1])["standard_errors"] == "classical").all()
    assert "classical standard errors" in two_series_run[1].folder.summary.read_text(encoding="utf-8")

    # Reference: statsmodels cov_type='hac-panel' (groups = region), Bartlett weights,
    # maxlags = floor(4·(n/100)^(2/9)) (Newey & West 1994), use_correction=False.
    lag = int(np.floor(4 * (len(y) / 100) ** (2 / 9)))
    assert lag == newey_west_lags(len(y)) == 4
    order = _stacked(history)
    reference = sm.OLS(y[order], x[order]).fit(
        use_t=True, cov_type="hac-panel",
        cov_kwds={"groups": history["region"].to_numpy()[order], "maxlags": lag, "use_correction": False,
                  "df_correction": False})     # t(n − k), not statsmodels' t(groups − 1)
    np.testing.assert_allclose(robust["std_error"], reference.bse, rtol=1e-8)
    np.testing.assert_allclose(robust["p_value"], reference.pvalues, rtol=1e-6)   # t(df_resid)


def test_hc3_and_a_given_hac_lag_reach_coefficients_csv(one_series_runs):
    frame, result = one_series_runs["iid"]
    x, y, _ = history_design(frame)
    terms = _ols_terms(result)
    assert (terms["standard_errors"] == "hc3").all()
    np.testing.assert_allclose(terms["std_error"], sm.OLS(y, x).fit(cov_type="HC3").bse,
                               rtol=1e-8)                         # statsmodels fit(cov_type='HC3')
    assert "hc3 standard errors" in result.folder.summary.read_text(encoding="utf-8")
    frame, result = one_series_runs["ar"]
    x, y, _ = history_design(frame)
    reference = sm.OLS(y, x).fit(cov_type="HAC", cov_kwds={"maxlags": 2})   # statsmodels HAC, lag 2
    np.testing.assert_allclose(_ols_terms(result)["std_error"], reference.bse, rtol=1e-8)


# ------------------------------------------------------------------ scenarios

def test_scenarios_change_only_the_selected_rows_by_coefficient_times_change(two_series_run):
    frame, result = two_series_run
    table = read(result, "scenarios.csv")
    assert set(table["scenario"]) == {"south price up 5 pct", "no promotions"}
    rules = {"calendar_month_mean", "trailing_mean", "last_value", "seasonal_naive"}
    assert set(table["model"]) == {"mean_baseline", "ols", "ridge"} | rules
    coefficients = _ols_terms(result).set_index("term")["estimate"]
    future = frame[frame["sales"].isna()].assign(month=lambda f: f["month"].str[:7])
    future = future.set_index(["month", "region"])
    forecast = read(result, "forecast.csv").query("model == 'ols'")

    ols = table[table["model"] == "ols"]
    price = ols[ols["scenario"] == "south price up 5 pct"]
    assert len(price) == 2 * FUTURE_MONTHS
    for _, row in price.iterrows():
        drivers = future.loc[(row["period"], row["series"])]
        # By hand: the price rises by 5% of itself in the South only.
        expected = (coefficients["shelf_price"] * 0.05 * drivers["shelf_price"]
                    if row["series"] == "South" else 0.0)
        assert row["difference"] == pytest.approx(expected, rel=1e-9, abs=1e-9)
        assert row["scenario_forecast"] - row["base_forecast"] == pytest.approx(row["difference"], abs=1e-9)
    assert (price.loc[price["series"] == "North", "difference"] == 0).all()
    assert (price.loc[price["series"] == "South", "difference"] < 0).all()   # price effect is negative

    promo = ols[ols["scenario"] == "no promotions"]
    for _, row in promo.iterrows():
        drivers = future.loc[(row["period"], row["series"])]
        expected = coefficients["promo_days"] * (0 - drivers["promo_days"])   # by hand: set to 0
        assert row["difference"] == pytest.approx(expected, rel=1e-9, abs=1e-9)
    assert (promo["difference"] == 0).sum() == FUTURE_PROMO.count(0)
    np.testing.assert_allclose(promo["base_forecast"].to_numpy(), forecast["forecast"].to_numpy(),
                               rtol=1e-12)
    # The mean of the training months and the simple rules have no drivers: no scenario changes them.
    assert (table.loc[table["model"].isin(rules | {"mean_baseline"}), "difference"] == 0).all()
    summary = result.folder.summary.read_text(encoding="utf-8")
    assert "## Scenarios" in summary and "no promotions" in summary


def test_scenario_forecasts_carry_the_interval_the_pages_state(two_series_run):
    _, result = two_series_run
    table = read(result, "scenarios.csv")
    forecast = read(result, "forecast.csv").set_index(["model", "period", "series"])
    coverage = read(result, "interval_coverage.csv")
    for model, rows in table.groupby("model"):
        method = rows["interval"].iloc[0]
        # The method is the one whose 95% backtest coverage came closest to 95%.
        own = coverage[(coverage["model"] == model) & (coverage["level"] == 0.95)].dropna(subset=["coverage"])
        closest = own.assign(gap=(own["coverage"] - 0.95).abs()).sort_values("gap")["method"].iloc[0]
        assert method == closest
        for _, row in rows.iterrows():
            assert row["low_95"] <= row["low_80"] <= row["scenario_forecast"] <= row["high_80"] <= row["high_95"]
            if method == "empirical" and row["low_95"] > 0:
                # The same bound × scale as the base forecast's row (no floor reached): shifted.
                base = forecast.loc[(model, row["period"], row["series"])]
                for level in ("80", "95"):
                    assert row[f"high_{level}"] - row["scenario_forecast"] == pytest.approx(
                        base[f"empirical_high_{level}"] - base["forecast"], rel=1e-9)


def _line_of(path: Path, pattern: str, after: str = "") -> int:
    lines = path.read_text(encoding="utf-8").splitlines()
    start = next(i for i, text in enumerate(lines) if after in text) if after else 0
    return next(i for i in range(start, len(lines)) if re.search(pattern, lines[i])) + 1


def test_a_scenario_on_a_column_that_is_not_a_driver_names_file_line_and_key(tmp_path):
    frame = simulate(22).assign(footfall=1000.0)
    scenarios = [SCENARIOS[1], {"name": "busier", "changes": [
        {"column": "promo_days", "add": 1}, {"column": "footfall", "percent": 10}]}]
    path = write_spec(tmp_path, frame, scenarios=scenarios)
    with pytest.raises(SpecError) as caught:
        pipeline.run(path)
    error = caught.value
    assert error.file == str(path)
    assert error.key == "scenarios[1].changes[1].column"
    assert error.line == _line_of(path, r"column: footfall")
    assert "'footfall' is not a driver" in error.message
    assert str(error).startswith(f"{path}:{error.line}: scenarios[1].changes[1].column: ")


def test_a_scenario_where_on_an_unused_column_names_its_key(tmp_path):
    frame = simulate(23).assign(store="A")
    scenarios = [{"name": "cheap", "changes": [
        {"column": "shelf_price", "add": -1, "where": {"store": "A"}}]}]
    path = write_spec(tmp_path, frame, scenarios=scenarios)
    with pytest.raises(SpecError) as caught:
        pipeline.run(path)
    assert caught.value.key == "scenarios[0].changes[0].where.store"
    assert caught.value.line == _line_of(path, r"store: A")


# ------------------------------------------------------------------ penalised models

def test_ridge_gives_standardised_coefficients_and_says_p_values_do_not_apply(two_series_run):
    frame, result = two_series_run
    table = read(result, "coefficients.csv")
    ridge = table[table["model"] == "ridge"].set_index("term")
    assert "estimate_standardised" in ridge.columns
    assert ridge["estimate_standardised"].drop("intercept").notna().all()
    assert ridge["note"].str.contains("classical .*p-values do not apply").all()
    assert ridge[["std_error", "t", "p_value"]].isna().all().all()
    # Own scale = standardised estimate ÷ the driver's standard deviation over the history
    # (numpy std, ddof 0: the scale the penalised fit standardised the drivers by).
    history = frame[frame["sales"].notna()]
    for driver in ("shelf_price", "promo_days"):
        assert ridge.loc[driver, "estimate"] == pytest.approx(
            ridge.loc[driver, "estimate_standardised"] / np.std(history[driver].to_numpy()), rel=1e-9)
    ols = table[table["model"] == "ols"]
    assert ols["p_value"].notna().all() and ols["note"].isna().all()


def _future_after(spec_path: Path, index: int = 0):
    """Return the checked future rows and the same rows after the spec's scenario ``index``."""
    from pipeline.stages.forecast import apply_scenario
    spec = pipeline.load_spec(spec_path)
    future = pipeline.check(spec).future
    return future, apply_scenario(future, spec.scenarios[index])


def test_a_scenario_where_selects_rows_by_a_text_level(tmp_path):
    frame = simulate(3)
    scenarios = [{"name": "south", "changes": [{"column": "shelf_price", "add": -1,
                                                "where": {"region": ["South"]}}]}]
    future, changed = _future_after(write_spec(tmp_path, frame, scenarios=scenarios))
    moved = changed["shelf_price"] != future["shelf_price"]
    assert (moved == (future["region"] == "South")).all() and moved.sum() == FUTURE_MONTHS
    np.testing.assert_allclose(changed.loc[moved, "shelf_price"], future.loc[moved, "shelf_price"] - 1)


def test_a_scenario_where_on_a_level_written_as_a_number_selects_its_rows(tmp_path):
    frame = simulate(3)
    frame["region"] = frame["region"].map({"North": 101, "South": 102})
    scenarios = [{"name": "store 102", "changes": [{"column": "shelf_price", "add": -1,
                                                    "where": {"region": 102}}]}]
    path = write_spec(tmp_path, frame, scenarios=scenarios)
    path.write_text(path.read_text(encoding="utf-8").replace("reference: North", "reference: 101"),
                    encoding="utf-8")
    future, changed = _future_after(path)
    moved = changed["shelf_price"] != future["shelf_price"]
    assert moved.sum() == FUTURE_MONTHS
