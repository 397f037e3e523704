"""The starter spec `castline init` writes (pipeline/present/starter_spec.py).

Each test surveys a small invented CSV written here (plumbing only: what it holds is stated
beside it), renders the starter spec, and reads it back both as YAML and with the spec
loader. The correlations it quotes are checked against scipy.stats.pearsonr (reference
library); the 0.9 and 24-month thresholds are castline's own rules, stated in the survey.
"""

from __future__ import annotations

import pandas as pd
import pytest
import yaml
from conftest import invented_shops
from scipy.stats import pearsonr

from pipeline.core.formatting import format_number
from pipeline.present.starter_spec import render_spec
from pipeline.spec import load_spec
from pipeline.stages.survey import infer


def shop(history: int, future: int = 3, *, weather_ahead: bool = True) -> pd.DataFrame:
    """The invented shops of conftest, with a free-text remark column (seed 11)."""
    return invented_shops(history, future, weather_ahead=weather_ahead, seed=11, remark=True)


def starter(tmp_path, frame: pd.DataFrame) -> tuple[str, dict]:
    """Return the starter spec's text and its YAML, after checking that it loads as a spec."""
    frame.to_csv(tmp_path / "shops.csv", index=False)
    spec_path = tmp_path / "shops.spec.yaml"
    text = render_spec(infer(tmp_path / "shops.csv"), spec_path)
    spec_path.write_text(text, encoding="utf-8")
    load_spec(spec_path)   # raises on a spec the loader refuses
    return text, yaml.safe_load(text)


def drivers(spec: dict) -> dict[str, str]:
    return {d["column"]: d["future"] for d in spec["drivers"]["numeric"]}


def test_an_outcome_that_tracks_the_target_is_a_candidate_not_a_driver(tmp_path):
    frame = shop(30)
    text, spec = starter(tmp_path, frame)
    history = frame[frame["sales"].notna()]
    r = pearsonr(history["sales"], history["visits"]).statistic   # reference: scipy.stats.pearsonr
    assert r > 0.9
    assert spec["target"] == "sales"
    assert "visits" not in drivers(spec)
    assert "visits" not in spec["columns"]
    assert "not drivers: they would leak it" in text
    assert f"# visits (r = {format_number(r)})" in text


def test_a_driver_empty_in_the_months_to_forecast_is_estimated_by_month_mean(tmp_path):
    _, spec = starter(tmp_path, shop(30, weather_ahead=False))
    assert drivers(spec) == {"price": "given", "weather": "month_mean"}


def test_drivers_filled_in_every_month_to_forecast_are_given(tmp_path):
    _, spec = starter(tmp_path, shop(30))
    assert drivers(spec) == {"price": "given", "weather": "given"}


def test_without_months_to_forecast_the_drivers_are_estimated_and_the_spec_says_why(tmp_path):
    text, spec = starter(tmp_path, shop(30, future=0))
    assert drivers(spec) == {"price": "month_mean", "weather": "month_mean"}
    assert "The file has no months to forecast" in text
    assert "visits (r = " in text   # still refused as a driver: nothing says it is known ahead


def test_thirty_months_of_history_bring_a_trend_and_the_season(tmp_path):
    _, spec = starter(tmp_path, shop(30))
    assert spec["drivers"]["calendar"] == {"trend": True, "month_of_year": "fourier"}


def test_eighteen_months_of_history_leave_the_calendar_out_and_say_why(tmp_path):
    text, spec = starter(tmp_path, shop(18))
    assert "calendar" not in spec["drivers"]
    assert "18 months of history are too few" in text


def test_columns_lists_only_the_columns_the_spec_uses(tmp_path):
    _, spec = starter(tmp_path, shop(30))
    # the file also holds visits (refused as a driver) and remark (free text, unused)
    assert list(spec["columns"]) == ["shop", "month", "sales", "price", "weather"]
    assert spec["columns"]["sales"] == {"type": "number", "missing_allowed": True}
    assert spec["columns"]["shop"] == {"type": "category", "allowed": ["Hill", "Quay"]}


def test_the_holdout_counts_months_of_history_only(tmp_path):
    # 18 months of history and 6 to forecast: a fifth of the history is 3 months
    _, spec = starter(tmp_path, shop(18, future=6))
    assert spec["validation"] == {"method": "holdout", "last_periods": 3}


@pytest.mark.parametrize("weather_ahead", [True, False])
def test_every_numeric_driver_is_written_as_a_mapping_with_a_future_rule(tmp_path, weather_ahead):
    _, spec = starter(tmp_path, shop(24, weather_ahead=weather_ahead))
    assert all(set(d) == {"column", "future"} for d in spec["drivers"]["numeric"])
