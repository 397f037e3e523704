"""Perfect and extreme fits through `castline run`: every diagnostic gives a value or an
undefined one with its reason, never an exception, and scale-free checks do not move when
the target is multiplied by 1e145 or 1e-300.

The design (invented data, seeded; plumbing, not a reference): two series r0 and r1, 40
months of history from 2019-01 and 3 months to forecast, one driver x ~ uniform(0, 10)
(two decimals) and y = 10 + 2·x + 3·[r1] + N(0, 1). The instances change only the target:

- ``plain``: y as above; ``e145`` and ``em300``: y × 1e145 and y × 1e-300;
- ``zero``: y = 0 throughout; ``constant``: y = 5 throughout;
- ``exact``: y = 3 + 2·x + [r1], a linear function of the drivers (every residual zero);
- ``flat``: one series only, y = 100 + 1e-13·N(0, 1), whose variation is within rounding of 100;
- ``e300``: y × 1e300, which the check refuses (beyond what castline computes with).

The models: OLS over both series and OLS per series. Validation is a rolling origin
(horizon 3, from 24 months), 14 origins, so the comparison test runs too. The references for the residual checks are statsmodels' own functions
(jarque_bera, durbin_watson, het_breuschpagan, acorr_ljungbox) on the plain run's
residuals, an implementation independent of castline's.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import run_cli
from statsmodels.stats.diagnostic import acorr_ljungbox, het_breuschpagan
from statsmodels.stats.stattools import durbin_watson, jarque_bera

MONTHS, AHEAD = 40, 3
SCALE_FREE = ["R²", "adjusted R²", "F test (all slopes zero)", "Durbin–Watson", "Ljung–Box (12 lags)",
              "Breusch–Pagan", "Jarque–Bera", "condition number (scaled design)", "largest VIF",
              "Cook's distance"]
RESIDUAL_TESTS = ["Durbin–Watson", "Ljung–Box (12 lags)", "Breusch–Pagan", "Jarque–Bera", "Cook's distance"]
READING = "residual tests do not apply"


def _data(kind: str) -> pd.DataFrame:
    rng = np.random.default_rng(22)
    frames = []
    for number in range(1 if kind == "flat" else 2):
        x = rng.uniform(0, 10, MONTHS + AHEAD).round(2)
        noise = rng.normal(0, 1, MONTHS + AHEAD)
        y = {"plain": 10 + 2 * x + 3 * number + noise, "zero": np.zeros_like(x),
             "constant": np.full_like(x, 5.0), "exact": 3 + 2 * x + number,
             "flat": 100 + 1e-13 * noise}.get(kind)
        if y is None:   # e145, em300, e300: the plain target times a power of ten
            y = (10 + 2 * x + 3 * number + noise) * {"e145": 1e145, "em300": 1e-300, "e300": 1e300}[kind]
        y = y.astype(object)
        y[MONTHS:] = None
        frames.append(pd.DataFrame({
            "month": pd.date_range("2019-01-01", periods=MONTHS + AHEAD, freq="MS").strftime("%Y-%m-%d"),
            "region": f"r{number}", "x": x, "y": y}))
    return pd.concat(frames, ignore_index=True)


def _spec(folder: Path, kind: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    frame = _data(kind)
    # repr keeps every digit of a float (1e-300 included), as the target was made
    frame["y"] = [repr(float(v)) if v is not None else "" for v in frame["y"]]
    frame.to_csv(folder / "data.csv", index=False)
    spec = {"name": f"extreme-{kind}",
            "input": {"file": "data.csv", "date_column": "month", "period": "month", "series": ["region"]},
            "target": "y", "drivers": {"numeric": ["x"]},
            "validation": {"method": "rolling_origin", "horizon": AHEAD, "min_train_periods": 24},
            "models": ["ols", {"kind": "ols", "per_series": True}], "output": {"folder": "runs"}}
    path = folder / "spec.yaml"
    path.write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict:
    """Run every instance once: kind → (exit code, stderr, run folder or None)."""
    base = tmp_path_factory.mktemp("extreme_fits")
    found = {}
    for kind in ("plain", "e145", "em300", "zero", "constant", "exact", "flat", "e300"):
        # --verbose prints the libraries' warnings (numpy's among them) on stderr
        code, _, err = run_cli(["run", "--verbose", str(_spec(base / kind, kind))])
        folders = sorted(p for p in (base / kind / "runs").glob("run-*") if p.is_dir()) \
            if (base / kind / "runs").exists() else []
        found[kind] = (code, err, folders[-1] if folders else None)
    return found


def _diagnostics(folder: Path) -> pd.Series:
    table = pd.read_csv(folder / "diagnostics.csv")
    return table.set_index("check")["value"]


@pytest.mark.parametrize("kind", ["plain", "e145", "em300", "zero", "constant", "exact", "flat"])
def test_the_run_ends_well_with_a_complete_folder_and_no_library_warning(runs, kind):
    code, err, folder = runs[kind]
    assert code == 0, err
    assert "library warning" not in err and "Warning" not in err, err
    expected = {p.name for p in runs["plain"][2].iterdir()}
    assert {p.name for p in folder.iterdir()} == expected
    for name in ("report.html", "summary.md", "diagnostics.csv", "coefficients.csv", "forecast.csv"):
        assert (folder / name).stat().st_size > 0, name
    forecast = pd.read_csv(folder / "forecast.csv")
    assert np.isfinite(forecast["forecast"].to_numpy(float)).all()


@pytest.mark.parametrize("kind", ["zero", "constant", "exact", "flat"])
def test_an_exact_fit_leaves_its_residual_checks_undefined_and_says_why(runs, kind):
    _, _, folder = runs[kind]
    values = _diagnostics(folder)
    for check in [*RESIDUAL_TESTS, "AIC", "BIC", "F test (all slopes zero)"]:
        assert np.isnan(values[check]), check
    # The design's own checks do not depend on the target.
    assert values["condition number (scaled design)"] == pytest.approx(
        _diagnostics(runs["plain"][2])["condition number (scaled design)"], rel=1e-12) or kind == "flat"
    for page in ("summary.md", "report.html"):
        assert READING in (folder / page).read_text(encoding="utf-8"), page
    # No t-test of an exact fit, over all series or per series.
    terms = pd.read_csv(folder / "coefficients.csv")
    assert set(terms["model"]) >= {"ols", "ols_per_series"}
    assert terms["p_value"].isna().all() and (terms["std_error"].dropna() == 0).all()


def test_a_flat_target_has_no_r2_and_an_exact_one_has_r2_of_one(runs):
    for kind in ("zero", "constant", "flat"):
        assert np.isnan(_diagnostics(runs[kind][2])["R²"]), kind
        assert "the target does not vary" in (runs[kind][2] / "summary.md").read_text(encoding="utf-8")
    assert _diagnostics(runs["exact"][2])["R²"] == 1.0


def test_a_model_with_the_means_forecasts_to_rounding_is_not_recommended_over_it(runs):
    # The flat target varies in its last digits only: OLS's lower MAE there is rounding noise.
    metrics = yaml.safe_load((runs["flat"][2] / "metrics.json").read_text(encoding="utf-8"))
    assert metrics["recommended"] == "mean_baseline"
    same = [row for row in metrics["models"] if row["against_mean"] == "the same forecasts as the mean"]
    assert same and all(row["skill_vs_mean"] == 0.0 for row in same)


@pytest.mark.parametrize("kind", ["e145", "em300"])
def test_scale_free_checks_do_not_move_when_the_target_is_scaled(runs, kind):
    plain, scaled = _diagnostics(runs["plain"][2]), _diagnostics(runs[kind][2])
    for check in SCALE_FREE:
        assert scaled[check] == pytest.approx(plain[check], rel=1e-9), check
    # AIC moves by exactly 2·n·ln(scale) (the likelihood of residuals in other units).
    rows = len(pd.read_csv(runs["plain"][2] / "residuals.csv"))
    factor = {"e145": 1e145, "em300": 1e-300}[kind]
    assert scaled["AIC"] - plain["AIC"] == pytest.approx(2 * rows * np.log(factor), rel=1e-9)
    # The comparison with the mean: skill and the test's p-value are those of the plain target.
    plain_table = pd.read_csv(runs["plain"][2] / "series.csv")
    scaled_table = pd.read_csv(runs[kind][2] / "series.csv")
    for column in ("skill_vs_mean", "p_value"):
        if column in plain_table:
            np.testing.assert_allclose(scaled_table[column], plain_table[column], rtol=1e-9)
    plain_terms = pd.read_csv(runs["plain"][2] / "coefficients.csv")
    scaled_terms = pd.read_csv(runs[kind][2] / "coefficients.csv")
    np.testing.assert_allclose(scaled_terms["t"], plain_terms["t"], rtol=1e-8)
    np.testing.assert_allclose(scaled_terms["std_error"], plain_terms["std_error"] * factor, rtol=1e-8)
    held = pd.read_csv(runs["plain"][2] / "interval_coverage.csv")["coverage"]
    np.testing.assert_allclose(pd.read_csv(runs[kind][2] / "interval_coverage.csv")["coverage"], held)


def test_the_residual_checks_match_statsmodels_on_the_unscaled_residuals(runs):
    residuals = pd.read_csv(runs["plain"][2] / "residuals.csv")
    data = pd.read_csv(runs["plain"][2].parents[1] / "data.csv").dropna(subset=["y"])
    data["period"] = data["month"].str[:7]
    rows = residuals.merge(data, left_on=["period", "series"], right_on=["period", "region"])
    assert len(rows) == len(residuals)
    e = rows["residual"].to_numpy(float)
    exog = np.column_stack([np.ones(len(rows)), rows["x"], rows["series"] == "r1"]).astype(float)
    jb = jarque_bera(e)[0]
    bp = het_breuschpagan(e, exog)[0]   # robust=True: n·R² of e² on the design (Koenker)
    # Durbin–Watson within each series: statsmodels' per series, weighted by each series' Σe²,
    # is Σ(differences²) / Σe² over both.
    runs_of_e = [group.sort_values("period")["residual"].to_numpy(float)
                 for _, group in residuals.groupby("series")]
    dw = sum(durbin_watson(run) * (run @ run) for run in runs_of_e) / sum(run @ run for run in runs_of_e)
    lb = acorr_ljungbox(np.concatenate(runs_of_e), lags=[12])["lb_stat"].iloc[0]
    for kind in ("plain", "e145", "em300"):
        values = _diagnostics(runs[kind][2])
        assert values["Jarque–Bera"] == pytest.approx(jb, rel=1e-8), kind
        assert values["Breusch–Pagan"] == pytest.approx(bp, rel=1e-8), kind
        assert values["Durbin–Watson"] == pytest.approx(dw, rel=1e-8), kind
        assert values["Ljung–Box (12 lags)"] == pytest.approx(lb, rel=1e-8), kind


def test_a_target_too_large_to_compute_with_is_refused_in_one_line(runs):
    code, err, folder = runs["e300"]
    assert code == 2 and folder is None
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("castline: ") and "'y'" in lines[0]
