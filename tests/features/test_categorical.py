"""Categorical drivers (pipeline.features.categorical): one-hot against statsmodels'
treatment coding, the ordinal and target-mean encodings by hand, rare and unseen levels.

Every reference value names its source beside it: a reference library
(statsmodels, pandas, numpy), or a hand example worked in the comment. The
data are simulated here (tests/features/test_plan.py's make_panel); they are not
reference values themselves.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from test_plan import fitted_plan, make_panel, make_spec

from pipeline.core.columns import ROW, SERIES
from pipeline.core.errors import DataError
from pipeline.features.categorical import OneHotEncoder, OrdinalEncoder, TargetMeanEncoder
from pipeline.features.plan import plan_features
from pipeline.models.ols import OLSModel

# ------------------------------------------------------------------ one-hot against statsmodels

def test_one_hot_coefficients_equal_statsmodels_treatment_coding():
    # Reference library: statsmodels' formula interface, C(region, Treatment('North')).
    frame = make_panel(months=24)
    frame["y"] = frame["sales"]
    plan = plan_features(make_spec({"numeric": ["price"],
                                    "categorical": [{"column": "region", "reference": "North"}]}),
                         SERIES).fit(frame)
    design, y = plan.training_design(frame)
    ours = OLSModel().fit(design, y).coefficient_table().set_index("term")
    reference = smf.ols("y ~ C(region, Treatment('North')) + price", data=frame).fit()
    names = {"Intercept": "intercept", "price": "price",
             "C(region, Treatment('North'))[T.East]": "region: East",
             "C(region, Treatment('North'))[T.West]": "region: West"}
    assert sorted(ours.index) == sorted(names.values())
    for theirs, term in names.items():
        assert ours.loc[term, "estimate"] == pytest.approx(reference.params[theirs], rel=1e-9)
        assert ours.loc[term, "std_error"] == pytest.approx(reference.bse[theirs], rel=1e-8)


def test_one_hot_reference_defaults_to_the_most_frequent_level():
    frame = pd.DataFrame({"c": ["b", "a", "b", "c", "a", "b"]})
    encoder = OneHotEncoder("c").fit(frame)
    assert encoder.reference_ == "b"                       # 3 rows, more than a or c
    assert encoder.get_feature_names_out() == ["c: a", "c: c"]
    tie = OneHotEncoder("c").fit(pd.DataFrame({"c": ["y", "x", "y", "x"]}))
    assert tie.reference_ == "x"                           # a tie goes to the first alphabetically


# ------------------------------------------------------------------ encoders by hand

def test_ordinal_encoding_hand_example():
    frame = pd.DataFrame({"size": ["medium", "small", "large", "medium"]})
    encoder = OrdinalEncoder("size", ["small", "medium", "large"]).fit(frame)
    # By hand: the place in the order, lowest = 0.
    assert encoder.transform(frame)[:, 0].tolist() == [1.0, 0.0, 2.0, 1.0]
    assert encoder.get_feature_names_out() == ["size: rank (small = 0, medium = 1, large = 2)"]
    with pytest.raises(DataError, match="'huge' is not in the order"):
        OrdinalEncoder("size", ["small", "medium", "large"]).fit(pd.DataFrame({"size": ["huge"]}))


def test_target_mean_encoding_hand_example():
    # The smoothed mean of a level is (n·mean_level + m·mean_all) / (n + m).
    # By hand, with m = 2: mean_all = (1 + 2 + 3 + 10) / 4 = 4;
    # level A: n = 3, mean 2 → (3·2 + 2·4) / 5 = 2.8; level B: n = 1, mean 10 → (10 + 8) / 3 = 6.
    frame = pd.DataFrame({"c": ["A", "A", "A", "B"]})
    encoder = TargetMeanEncoder("c", smoothing=2, target_name="sales").fit(frame, [1, 2, 3, 10])
    assert encoder.means_ == pytest.approx({"A": 2.8, "B": 6.0})
    assert encoder.transform(pd.DataFrame({"c": ["B", "A"]}))[:, 0] == pytest.approx([6.0, 2.8])
    assert encoder.get_feature_names_out() == ["c: smoothed mean of sales"]
    unsmoothed = TargetMeanEncoder("c", smoothing=0).fit(frame, [1, 2, 3, 10])
    assert unsmoothed.means_ == pytest.approx({"A": 2.0, "B": 10.0})


def test_target_mean_is_taken_on_the_models_scale():
    frame = make_panel(months=12)
    plan = fitted_plan({"categorical": [{"column": "region", "encoding": "target_mean",
                                         "smoothing": 0}]}, frame, target_transform="log")
    encoder = plan.parts_[0]
    assert encoder.means_["East"] == pytest.approx(np.log(frame.loc[frame.region == "East", "sales"]).mean())
    assert encoder.get_feature_names_out() == ["region: smoothed mean of log(sales)"]


def test_rare_levels_are_grouped_below_the_count():
    frame = pd.DataFrame({"store": ["A"] * 5 + ["B"] * 5 + ["C"] + ["D"] * 2})
    encoder = OneHotEncoder("store", group_below=3).fit(frame)
    assert encoder.grouped_ == ["C", "D"]
    assert encoder.reference_ == "A"
    assert encoder.get_feature_names_out() == ["store: B", "store: other (levels with fewer than 3 rows)"]
    assert encoder.transform(pd.DataFrame({"store": ["C", "D", "B", "A"]})).tolist() == [
        [0, 1], [0, 1], [1, 0], [0, 0]]
    means = TargetMeanEncoder("store", smoothing=0, group_below=3).fit(frame, np.arange(13.0))
    assert means.means_["other (levels with fewer than 3 rows)"] == pytest.approx((10 + 11 + 12) / 3)
    with pytest.raises(DataError, match="reference level 'C' has fewer than 3"):
        OneHotEncoder("store", reference="C", group_below=3).fit(frame)


def test_an_unseen_level_stops_by_default_naming_row_and_column():
    train = make_panel(months=12)
    later = make_panel(months=2, start="2021-01")
    later.loc[later.index[1], "region"] = "Central"
    plan = plan_features(make_spec({"categorical": ["region"]}), "region").fit(train)
    with pytest.raises(DataError) as stopped:
        plan.transform(later)
    assert stopped.value.column == "region" and stopped.value.row == int(later[ROW].iloc[1])
    assert "level 'Central' was not in the training rows" in str(stopped.value)
    assert "unseen: use_reference" in str(stopped.value)


@pytest.mark.parametrize("encoding", ["one_hot", "target_mean", "ordinal"])
def test_an_unseen_level_can_be_treated_as_the_reference_with_a_warning(encoding):
    train = pd.DataFrame({"c": ["x", "x", "y"], "sales": [1.0, 2.0, 6.0]})
    later = pd.DataFrame({"c": ["z", "y"], "sales": [np.nan, np.nan]})
    driver = {"column": "c", "encoding": encoding, "unseen": "use_reference"}
    if encoding == "ordinal":
        driver["order"] = ["x", "y"]
    spec = make_spec({"categorical": [driver]})
    plan = plan_features(spec, "c").fit(train)
    design = plan.transform(later)
    reference = plan.transform(pd.DataFrame({"c": ["x"]}))
    np.testing.assert_array_equal(design.matrix[0], reference.matrix[0])   # z is read as x
    assert design.notes == ("c: level 'z' was not in the training rows; 1 of the 2 rows were "
                            "treated as the reference level 'x'",)


@pytest.mark.parametrize("group_below", [None, 3, 6])
def test_levels_rare_levels_and_reference_equal_a_value_counts_construction(group_below):
    # Reference: pandas' value_counts of the levels as text (missing values not counted): rare
    # levels below group_below, the levels left after grouping them, and the most frequent of
    # those as reference (ties alphabetically), as castline learned them before.
    rng = np.random.default_rng(31)
    values = pd.Series(rng.choice(["b", "a", "c", "d", "e", "Ä"], 60, p=[.3, .3, .2, .1, .05, .05]),
                       dtype="str")
    values[rng.random(60) < 0.1] = np.nan
    frame = pd.DataFrame({"shop": values})
    encoder = OneHotEncoder("shop", group_below=group_below).fit(frame)
    counts = frame["shop"].astype(str).value_counts()
    rare = sorted(level for level in counts.index if group_below is not None and counts[level] < group_below)
    text = frame["shop"].astype(str)
    grouped = (text.where(~text.isin(rare), encoder.group_label) if rare else text).value_counts()
    top = grouped.max()
    assert encoder.grouped_ == rare
    assert encoder.known_levels_ == sorted(grouped.index)
    assert encoder.reference_ == min(level for level in grouped.index if grouped[level] == top)
    labels = text.where(~text.isin(rare), encoder.group_label) if rare else text
    expected = pd.get_dummies(labels).reindex(columns=encoder.levels_, fill_value=False).to_numpy(float)
    assert np.array_equal(encoder.transform(frame.dropna()), expected[frame["shop"].notna().to_numpy()])
