"""The months to forecast: ``forecast.months``, ragged last months, and the validation defaults.

Data: a generated panel (stated below), never the demo's numbers. Each expected set of
rows to forecast is built with pandas (``pd.period_range`` after each series' last actual,
an independent construction), and the forecasts of the months castline adds are checked
against those of the same months typed into the file, the path that existed before.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import run_cli

from pipeline.core.columns import PERIOD, SERIES
from pipeline.runner import check
from pipeline.spec import load_spec
from pipeline.stages.splits import settle_validation

SHOPS = ("Alder", "Birch", "Cedar")


def panel(months: int = 48, last_missing: dict[str, int] | None = None, seed: int = 7) -> pd.DataFrame:
    """Monthly rows from 2020-01 for three series: y = level + 2·t + 15·sin(2πm/12) + 4·price
    + noise (sd 3), price a random walk, temp a yearly cycle. ``last_missing``: per series,
    how many of the last months have no row (a series that reports late)."""
    rng = np.random.default_rng(seed)
    rows = []
    for number, name in enumerate(SHOPS):
        price = 10 + np.cumsum(rng.normal(0, 0.2, months))
        for t in range(months):
            month = pd.Period("2020-01", "M") + t
            temp = 10 + 8 * np.sin(2 * np.pi * (month.month - 4) / 12) + rng.normal(0, 1)
            sales = (100 * (number + 1) + 2 * t + 15 * np.sin(2 * np.pi * month.month / 12)
                     + 4 * price[t] + rng.normal(0, 3))
            rows.append({"month": month.to_timestamp().date().isoformat(), "shop": name,
                         "sales": round(sales, 3), "price": round(price[t], 3), "temp": round(temp, 2)})
    frame = pd.DataFrame(rows)
    for name, dropped in (last_missing or {}).items():
        cut = frame[frame["shop"] == name].index[-dropped:]
        frame = frame.drop(cut)
    return frame.reset_index(drop=True)


SPEC = """name: ahead-test
input:
  file: data.csv
  date_column: month
  series: [shop]
target: sales
drivers:
  numeric:
    - column: price
      future: {price_future}
    - column: temp
      future: month_mean
  calendar:
    trend: true
    month_of_year: fourier
    harmonics: 1
{lags}{validation}{forecast}models: [ols]
output:
  folder: out
"""
VALIDATION = """validation:
  method: rolling_origin
  horizon: {horizon}
  min_train_periods: 30
  origins: 3
"""


def write(folder: Path, frame: pd.DataFrame, *, months: int | None = None, price_future: str = "last_value",
          validation: str | None = None, horizon: int = 6, lags: str = "") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "data.csv", index=False)
    spec = folder / "spec.yaml"
    spec.write_text(SPEC.format(
        price_future=price_future, lags=lags,
        validation=VALIDATION.format(horizon=horizon) if validation is None else validation,
        forecast=f"forecast:\n  months: {months}\n" if months else ""), encoding="utf-8")
    return spec


def forecast_csv(stdout: str) -> pd.DataFrame:
    folder = Path(re.search(r"^run folder: (.+)$", stdout, re.MULTILINE).group(1))
    return pd.read_csv(folder / "forecast.csv")


def expected_rows(frame: pd.DataFrame, months: int) -> pd.DataFrame:
    """The months to forecast built with pandas: per series, the months after its last actual."""
    last = frame.assign(period=pd.PeriodIndex(frame["month"], freq="M")).groupby("shop")["period"].max()
    parts = [pd.DataFrame({"series": shop, "period": pd.period_range(end + 1, periods=months, freq="M"),
                           "horizon": np.arange(1, months + 1)}) for shop, end in last.items()]
    return pd.concat(parts, ignore_index=True)


def as_keys(table: pd.DataFrame) -> list[tuple]:
    return sorted(zip(table["series"].astype(str), table["period"].astype(str), table["horizon"].astype(int)))


def test_forecast_months_adds_each_series_months_after_its_own_last_actual(tmp_path):
    frame = panel(last_missing={"Birch": 1, "Cedar": 2})     # ragged: two series report late
    spec = write(tmp_path, frame, months=5)
    data = check(spec)
    expected = expected_rows(frame, 5)
    got = sorted(zip(data.future[SERIES].astype(str), data.future[PERIOD].astype(str)))
    assert got == sorted(zip(expected["series"], expected["period"].astype(str)))
    notes = " ".join(data.notes)
    assert "castline added 15 row(s)" in notes
    assert "2 series lag" in notes and "'Birch' (2023-11)" in notes and "'Cedar' (2023-10)" in notes
    code, out, err = run_cli(["run", str(spec)])
    assert code == 0, err
    table = forecast_csv(out)
    assert as_keys(table[table["model"] == "ols"]) == as_keys(expected)
    assert "note: 2 series lag behind the newest actual month 2023-12" in out


LAGS = {"no lags": "",
        "a target lag that reaches": "  lags:\n    - column: sales\n      lags: [12]\n",
        "a target lag of 1, recursive": "  lags:\n    - column: sales\n      lags: [1]\nmulti_step: recursive\n"}


@pytest.mark.parametrize("lags", list(LAGS))
def test_added_months_forecast_as_the_same_months_typed_into_the_file(tmp_path, lags):
    """The rows forecast.months adds give the same forecasts and intervals as the same
    months typed into the file with the estimated drivers left empty (the older path),
    with calendar terms, estimated drivers and lags of the target."""
    frame = panel(last_missing={"Birch": 1})
    added = write(tmp_path / "added", frame, months=4, lags=LAGS[lags])
    typed_rows = expected_rows(frame, 4)
    typed = pd.concat([frame, pd.DataFrame({
        "month": typed_rows["period"].dt.to_timestamp().dt.strftime("%Y-%m-%d"),
        "shop": typed_rows["series"]})], ignore_index=True)
    typed_spec = write(tmp_path / "typed", typed, lags=LAGS[lags])
    results = []
    for spec in (added, typed_spec):
        code, out, err = run_cli(["run", str(spec)])
        assert code == 0, err
        results.append(forecast_csv(out).sort_values(["model", "series", "period"]).reset_index(drop=True))
    assert len(results[0]) == len(results[1]) > 0
    pd.testing.assert_frame_equal(results[0], results[1], rtol=1e-10, atol=1e-9)


def test_a_driver_given_ahead_without_values_is_one_line_naming_it_and_the_months(tmp_path):
    spec = write(tmp_path, panel(), months=3, price_future="given")
    code, out, err = run_cli(["run", str(spec)])
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert "'price'" in lines[0] and "2024-01 to 2024-03" in lines[0] and "forecast.months" in lines[0]


def test_a_month_to_forecast_skipped_by_the_file_is_named_as_such(tmp_path):
    frame = panel(last_missing={"Cedar": 1})
    rows = expected_rows(panel(), 2)      # every series' next two months, Cedar's first lacking
    rows = rows[~((rows["series"] == "Cedar") & (rows["period"] == pd.Period("2023-12", "M")))]
    typed = pd.concat([frame, pd.DataFrame({
        "month": rows["period"].dt.to_timestamp().dt.strftime("%Y-%m-%d"), "shop": rows["series"],
        "price": 10.0})], ignore_index=True)
    code, out, err = run_cli(["check", str(write(tmp_path, typed))])
    assert code == 2
    assert "month to forecast missing" in out and "2023-12 for series 'Cedar'" in out
    assert "forecast.months" in out


def test_a_series_further_behind_than_the_months_ahead_is_refused(tmp_path):
    spec = write(tmp_path, panel(last_missing={"Cedar": 8}), months=6)
    code, out, err = run_cli(["run", str(spec)])
    assert code == 2 and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert "series too far behind" in err and "'Cedar'" in err and "8 months before" in err


def test_a_series_behind_with_nothing_to_forecast_is_history_only(tmp_path):
    """Without forecast.months, a series with no row after its last actual (a product no
    longer sold) is fitted on but not forecast, and not refused however far behind."""
    frame = panel(last_missing={"Cedar": 20})
    data = check(write(tmp_path, frame))
    assert len(data.future) == 0 and not data.notes


@pytest.mark.parametrize(("months", "chosen", "reason"), [(60, 24, "the default, 24 months"),
                                                          (40, 20, "half the history's 40 months")])
def test_min_train_periods_defaults_to_24_or_half_the_history(tmp_path, months, chosen, reason):
    """The rule the issue states: 24 months, or half the history when that is shorter."""
    spec_path = write(tmp_path, panel(months=months), validation="")   # no validation key at all
    spec = load_spec(spec_path)
    assert spec.validation.method == "rolling_origin" and spec.validation.horizon == 12
    assert spec.validation.min_train_periods is None
    code, out, err = run_cli(["check", str(spec_path)])
    assert code == 0, err
    assert f"first training window has {chosen} months ({reason}" in out
    data = check(spec_path)
    settled, notes = settle_validation(spec, data)
    assert settled.validation.min_train_periods == chosen and len(notes) == 1


def test_the_horizon_defaults_to_the_months_forecast(tmp_path):
    spec = load_spec(write(tmp_path, panel(), months=9, validation="validation:\n  method: rolling_origin\n"))
    assert spec.validation.horizon == 9


def test_every_missing_key_is_reported_at_once(tmp_path):
    spec = tmp_path / "spec.yaml"
    spec.write_text("input:\n  file: data.csv\nforecast:\n  months: 0\n", encoding="utf-8")
    panel().to_csv(tmp_path / "data.csv", index=False)
    code, out, err = run_cli(["check", str(spec)])
    assert code == 2 and "Traceback" not in err
    for key in ("name", "input.date_column", "target", "output", "forecast.months"):
        assert re.search(rf":\d+: {re.escape(key)}: ", err), (key, err)


def test_the_total_over_series_adds_only_months_every_series_is_forecast_in():
    """A series that lags is forecast in a month the others have actuals for: that month's
    'total' would be one series, so the first screen adds up only months every series has."""
    from pipeline.present.first_screen import all_series_total
    stated = pd.DataFrame({"period": ["2024-01", "2024-02", "2024-03", "2023-12", "2024-01", "2024-02"],
                           "series": ["A", "A", "A", "B", "B", "B"],
                           "forecast": [1.0, 2.0, 3.0, 10.0, 20.0, 30.0]})
    total = all_series_total(stated)
    assert total["period"].tolist() == ["2024-01", "2024-02"]
    assert total["total"].tolist() == [21.0, 32.0] and total["series"].tolist() == [2, 2]


def test_a_spec_without_validation_or_models_compares_ols_with_every_simple_rule(tmp_path):
    """The defaults a practitioner expects: a rolling origin, OLS, and beside it the mean and
    the simple rules (a model must beat the best of them, not only the plain average)."""
    panel(months=36).to_csv(tmp_path / "data.csv", index=False)
    (tmp_path / "spec.yaml").write_text("name: bare\ninput:\n  file: data.csv\n  date_column: month\n"
                                        "  series: [shop]\ntarget: sales\noutput:\n  folder: out\n",
                                        encoding="utf-8")
    spec = load_spec(tmp_path / "spec.yaml")
    assert spec.validation.method == "rolling_origin"
    assert spec.model_names == ["mean_baseline", "ols", "calendar_month_mean", "trailing_mean",
                                "last_value", "seasonal_naive"]
