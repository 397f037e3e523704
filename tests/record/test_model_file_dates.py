"""castline forecast reads the new data file's dates as the run read its own: with the spec's
input.date_format, kept in model.json.

Data: a generated monthly panel (two series, a trend, a yearly cycle and a price driver; numpy,
seeded), its dates written day first; no value here is a reference value. The reference is
the run's own forecast.csv.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import yaml
from conftest import run_cli


def _write_run_input(folder: Path) -> Path:
    rng = np.random.default_rng(11)
    months = pd.period_range("2019-01", periods=60, freq="M")
    rows = []
    for k, shop in enumerate(["Ash", "Elm"]):
        price = rng.uniform(4, 6, len(months)).round(2)
        sales = (80 + 20 * k + 0.5 * np.arange(len(months)) - 3 * price
                 + 5 * np.sin(2 * np.pi * months.month.to_numpy() / 12) + rng.normal(0, 2, len(months)))
        sales[-4:] = np.nan          # the months to forecast
        rows.append(pd.DataFrame({"month": (months.to_timestamp() + pd.Timedelta(days=4)).strftime("%d/%m/%Y"),
                                  "shop": shop, "price": price, "sales": sales.round(2)}))
    pd.concat(rows, ignore_index=True).to_csv(folder / "data.csv", index=False)
    spec = {"name": "day-first", "input": {"file": "data.csv", "date_column": "month",
                                          "date_format": "%d/%m/%Y", "series": ["shop"]},
            "target": "sales", "drivers": {"numeric": ["price"],
                                           "calendar": {"trend": True, "month_of_year": "fourier"}},
            "validation": {"method": "holdout", "last_periods": 6}, "models": ["ols"],
            "output": {"folder": "out"}}
    (folder / "spec.yaml").write_text(yaml.safe_dump(spec, sort_keys=False), encoding="utf-8")
    return folder / "spec.yaml"


def test_castline_forecast_reads_day_first_dates_with_the_runs_format(tmp_path):
    spec = _write_run_input(tmp_path)
    code, out, err = run_cli(["run", str(spec)])
    assert code == 0, err
    folder = Path(next(line for line in out.splitlines() if line.startswith("run folder:")).split(": ", 1)[1])
    assert json.loads((folder / "model.json").read_text(encoding="utf-8"))["date_format"] == "%d/%m/%Y"
    data = pd.read_csv(tmp_path / "data.csv")
    rows = data[data["sales"].isna()].drop(columns=["sales"])
    # The 5th of each month, day first: read month first, '05/01/2024' would be May.
    assert rows["month"].str.startswith("05/").all()
    rows.to_csv(tmp_path / "rows.csv", index=False)
    code, out, err = run_cli(["forecast", str(folder / "model.json"), str(tmp_path / "rows.csv"),
                           "--output", str(tmp_path / "mine.csv")])
    assert code == 0, err
    mine = pd.read_csv(tmp_path / "mine.csv")
    written = pd.read_csv(folder / "forecast.csv")
    merged = mine.merge(written, on=["period", "series", "model"], validate="one_to_one", suffixes=("", "_run"))
    assert len(merged) == len(mine) == len(written) == 8 * written["model"].nunique()
    np.testing.assert_allclose(merged["forecast"], merged["forecast_run"], rtol=1e-12)

    # ISO dates in a file for a model read day first: one line naming the value and the format.
    rows.assign(month="2024-01-05").to_csv(tmp_path / "iso.csv", index=False)
    code, out, err = run_cli(["forecast", str(folder / "model.json"), str(tmp_path / "iso.csv")])
    assert code == 2 and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert "iso.csv:2" in err and "'2024-01-05' does not match the date format '%d/%m/%Y'" in err
