"""Regenerate the demo data exactly: monthly bags of potting compost sold by a
regional chain of garden centres, in four regions.

Invented for the demo only. Run: python data_samples/make_compost_demo.py
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20190101
FIRST_MONTH, LAST_ACTUAL, MONTHS_PLANNED = "2019-01", "2026-10", 3
REGIONS = {  # region: (base demand, warmth offset in °C, wetness factor)
    "North": (2600, -2.0, 1.3),
    "South": (3400, 1.5, 0.8),
    "East": (2900, 0.0, 0.7),
    "West": (3100, 0.5, 1.4),
}
OUT = Path(__file__).with_name("compost_sales.csv")


def make_demo(seed: int = SEED) -> pd.DataFrame:
    """Return the demo table: one row per region and month, future months without sales or
    weather."""
    rng = np.random.default_rng(seed)
    months = pd.period_range(FIRST_MONTH, pd.Period(LAST_ACTUAL, "M") + MONTHS_PLANNED, freq="M")
    rows = []
    for region, (base, warmth, wetness) in REGIONS.items():
        for index, month in enumerate(months):
            season = np.sin(2 * np.pi * (month.month - 4) / 12)
            temp = 10.0 + warmth + 7.0 * season + rng.normal(0, 1.2)
            rain = max(5.0, wetness * (70 - 25 * season) + rng.normal(0, 15))
            price = 6.49 + 0.25 * (month.year - 2019) + rng.choice([0.0, 0.0, -0.5])
            promo = int(rng.integers(0, 11) if month.month in (3, 4, 5, 9) else rng.integers(0, 5))
            demand = (base + 150 * temp - 4.5 * temp**2 - 180 * price + 55 * promo
                      - 3.0 * rain + 1.5 * index + rng.normal(0, 140))
            rows.append({
                "month": month.to_timestamp().strftime("%Y-%m-%d"),
                "region": region,
                "bags_sold": max(0, round(demand)),
                "shelf_price": round(price, 2),
                "promo_days": promo,
                "rainfall_mm": round(rain, 1),
                "mean_temp_c": round(temp, 1),
            })
    table = pd.DataFrame(rows)
    planned = pd.PeriodIndex(table["month"], freq="M") > pd.Period(LAST_ACTUAL, "M")
    table["bags_sold"] = table["bags_sold"].astype("Int64").mask(planned)
    # Nobody knows next year's weather: the months to forecast carry the planned price and
    # promotion days only, and castline estimates rainfall and temperature (future: month_mean).
    for column in ("rainfall_mm", "mean_temp_c"):
        table[column] = table[column].mask(planned)
    return table.sort_values(["month", "region"], kind="stable").reset_index(drop=True)


if __name__ == "__main__":
    make_demo().to_csv(OUT, index=False)
    print(f"wrote {OUT}")
