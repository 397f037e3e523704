"""The console's tables and lines name the period of the runs they show (issue 24); monthly as before."""

from __future__ import annotations

from pipeline.cli import _cadence, _print_planned, _print_table
from pipeline.core.cadence import MONTH, QUARTER, WEEK


def test_a_table_is_headed_and_its_models_named_in_the_periods_words(capsys):
    rows = [{"last_period": "2024Q1", "model": "seasonal_naive", "months_ahead": "1–4"}]
    _print_table(rows, ["last_period", "model", "months_ahead"], cadence=_cadence(["2024Q1"]))
    quarterly = capsys.readouterr().out.splitlines()
    assert quarterly[0].split("  ")[0] == "last actual quarter" and quarterly[0].endswith("quarters_ahead")
    assert "same quarter last year" in quarterly[1]
    _print_table(rows, ["last_period", "model", "months_ahead"])
    monthly = capsys.readouterr().out.splitlines()
    assert monthly[0].startswith("last actual month") and monthly[0].endswith("months_ahead")
    assert "same month last year" in monthly[1]


def test_the_spacing_is_read_from_the_labels():
    assert _cadence(["2025-W01"]) is WEEK and _cadence(["2025Q1"]) is QUARTER and _cadence(["2025-01"]) is MONTH


def test_planned_drivers_name_the_period(capsys):
    class Planned:
        months, named = ["2025-W01"], True

        @staticmethod
        def by_month():
            import pandas as pd
            return pd.DataFrame(columns=["driver", "period", "series_changed", "series"])

    _print_planned(Planned(), 5, "week")
    assert "the weeks' other columns changed" in capsys.readouterr().out
    _print_planned(Planned(), 5)
    assert "the months' other columns changed" in capsys.readouterr().out
