"""The answer names the mean baseline and the simple rules in the words of the run's period (issue 24):
"the mean of the training quarters", "same week last year"; a monthly run's answer is as before."""

from __future__ import annotations

import pandas as pd

from pipeline.core.cadence import MONTH, QUARTER, WEEK
from pipeline.stages.answer import answer

# Invented scores: OLS has MAE 2 against the mean baseline's 4 (50% lower, p = 0.01) and the best
# simple rule's 3 (a third lower, p = 0.02).
TABLE = pd.DataFrame({"model": ["mean_baseline", "seasonal_naive", "ols"], "mae": [4.0, 3.0, 2.0],
                      "p_holm": [float("nan"), 0.2, 0.01], "p_best_rule_holm": [float("nan"), float("nan"), 0.02]})


def verdict(recommended: str, cadence=None) -> str:
    return answer(TABLE, recommended, "seasonal_naive", "mae", 0.05, None, cadence).verdict


def test_the_answer_speaks_of_quarters_and_weeks():
    quarterly = verdict("ols", QUARTER)
    assert quarterly.startswith("OLS beats the mean of the training quarters by 50% and the best simple rule, "
                                "the same quarter last year, by 33% on MAE out of sample")
    assert "month" not in quarterly
    weekly = verdict("seasonal_naive", WEEK)
    assert weekly.startswith("The best forecast here is a simple rule, the same week last year: its MAE is 25% "
                             "lower than that of the mean of the training weeks")


def test_a_monthly_answer_is_word_for_word_as_before():
    assert verdict("ols") == verdict("ols", MONTH)
    assert verdict("ols").startswith("OLS beats the mean of the training months by 50% and the best simple rule, "
                                     "the same month last year, by 33%")
    assert verdict("mean_baseline").startswith("No model or simple rule beats the mean of the training months")
