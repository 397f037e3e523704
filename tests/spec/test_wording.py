"""The validation scheme in words (pipeline/spec/wording.py), one sentence per method.

Each expected sentence is written out by hand from the spec's values.
"""

from __future__ import annotations

import pytest

from pipeline.spec import Spec
from pipeline.spec.wording import describe_validation


def spec_with(validation: dict) -> Spec:
    return Spec.model_validate({"name": "words", "input": {"file": "data.csv", "date_column": "month"},
                                "target": "y", "validation": validation, "output": {"folder": "out"}})


@pytest.mark.parametrize(("validation", "words"), [
    ({"method": "holdout", "last_periods": 12}, "holdout of the last 12 months"),
    ({"method": "rolling_origin", "horizon": 3, "min_train_periods": 24},
     "rolling origin, expanding window of at least 24 months, horizon 3, every 1 month(s)"),
    ({"method": "rolling_origin", "window": "sliding", "horizon": 6, "min_train_periods": 36, "gap": 2,
      "step": 3, "origins": 4},
     "rolling origin, sliding window of at least 36 months, horizon 6, a gap of 2 months, every 3 month(s), "
     "the last 4 origins"),
    ({"method": "kfold"}, "5-fold cross-validation, shuffled with seed 0"),
    ({"method": "kfold", "folds": 10, "seed": 42}, "10-fold cross-validation, shuffled with seed 42"),
    ({"method": "grouped_kfold", "folds": 3, "group_by": ["region", "store"]},
     "3-fold cross-validation grouped by region, store"),
])
def test_each_method_in_words(validation, words):
    assert describe_validation(spec_with(validation)) == words
