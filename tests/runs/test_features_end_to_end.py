"""Whole runs with features: the demo still works, notes reach the summary, lags stop clearly.

The demo data is invented: these tests check plumbing, not reference values.
"""

from __future__ import annotations

from pathlib import Path

from conftest import demo_with_planned_weather

import pipeline

SPEC = """\
name: features-run
input:
  file: {data}
  date_column: month
  series: [region]
target: bags_sold
target_transform: {transform}
drivers:
  numeric:
    - shelf_price
    - promo_days
    - column: rainfall_mm
      missing: median
    - column: mean_temp_c
      degree: 2
  categorical: [region]
  calendar:
    trend: true
    month_of_year: fourier
    harmonics: 2
  lags:
    - column: bags_sold
      lags: [{lag}]
validation:
  method: holdout
  last_periods: 12
output:
  folder: {out}
"""


def write(tmp_path: Path, transform: str = "log", lag: int = 12, data: Path | None = None) -> Path:
    if data is None:   # the demo, with its weather given in the months to forecast
        data = tmp_path / "planned.csv"
        demo_with_planned_weather().to_csv(data, index=False)
    path = tmp_path / "spec.yaml"
    path.write_text(SPEC.format(data=data, transform=transform, lag=lag, out=tmp_path / "runs"),
                    encoding="utf-8")
    return path


def test_the_demo_spec_runs(demo_spec_path, tmp_path):
    result = pipeline.run(demo_spec_path, output_folder=tmp_path)
    assert result.evaluation.recommended == "ols"
    assert "months since 2019-01" in set(result.coefficients["term"])
    # six models (the mean of the training months, ols and the four simple rules a rolling origin always
    # compares) × 12 rows to forecast (four regions × three months)
    assert list(result.forecast["model"].unique()) == [
        "mean_baseline", "ols", "calendar_month_mean", "trailing_mean", "last_value", "seasonal_naive"]
    assert len(result.forecast) == 6 * 12


def test_a_log_target_run_says_it_applied_the_smearing_correction(tmp_path):
    frame = demo_with_planned_weather()
    frame.loc[len(frame) - 2, "rainfall_mm"] = None                 # a month to forecast lacks rain
    frame.to_csv(tmp_path / "data.csv", index=False)
    result = pipeline.run(write(tmp_path, data=tmp_path / "data.csv"))
    summary = result.folder.summary.read_text(encoding="utf-8")
    assert "Duan's (1983) smearing correction" in summary
    assert "48 of the 376 rows from 2019-01 to 2026-10 were left out of every model's fit" in summary
    assert "rainfall_mm: 1 of the 12 rows from 2026-11 to 2027-01 had no value" in summary
    assert "bags_sold, 12 months earlier" not in summary                # the log is named
    assert "log(bags_sold), 12 months earlier" in summary
    ols = result.forecast[result.forecast["model"] == "ols"]["forecast"]
    assert ols.notna().all() and (ols > 0).all()


def test_a_lag_of_the_target_shorter_than_the_holdout_uses_the_multi_step_strategy(tmp_path):
    """A 3-month lag with 12 months held out: the direct strategy (the default) fits one
    model per horizon with only the lags known at the origin, and says so."""
    path = write(tmp_path, transform="none", lag=3)
    result = pipeline.run(path)
    assert any("direct strategy (multi_step)" in note for note in result.evaluation.notes)
    ols = result.predictions[result.predictions["model"] == "ols"]
    assert ols["prediction"].notna().all() and set(ols["horizon"]) == set(range(1, 13))
