"""Write the binary cases of the broken-input corpus from clean.csv.

The outputs are committed; rerun with ``.venv/bin/python
tests/data/broken_inputs/make_binary_cases.py`` to rebuild them. The cases:

- ``month_twice.parquet``: a real Parquet file whose 4th row (Parquet rows
  count from 1) repeats the month of its 2nd row for the same series;
- ``not_a_number.xlsx``: an Excel workbook whose sheet row 6 (header = row 1)
  holds a word in the target column;
- ``parquet_named.csv`` and ``workbook_named.csv``: a Parquet file and an
  .xlsx workbook (a zip archive) saved under a .csv name.
"""

from pathlib import Path

import pandas as pd

HERE = Path(__file__).resolve().parent


def main() -> None:
    clean = pd.read_csv(HERE / "clean.csv", parse_dates=["month"])
    # A copy of row 2 (2020-02, North) inserted as row 4, after 2020-03.
    twice = pd.concat([clean.iloc[:3], clean.iloc[[1]].assign(sales=999.0), clean.iloc[3:]],
                      ignore_index=True)
    twice.to_parquet(HERE / "month_twice.parquet", index=False)

    words = clean.astype({"sales": object})
    words.loc[4, "sales"] = "lots"  # frame index 4 = sheet row 6
    words.to_excel(HERE / "not_a_number.xlsx", index=False, engine="openpyxl")

    clean.to_parquet(HERE / "parquet_named.csv", index=False)
    clean.to_excel(HERE / "workbook_named.csv", index=False, engine="openpyxl")


if __name__ == "__main__":
    main()
