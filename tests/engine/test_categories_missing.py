"""Category order and missing values the fitting rows never had.

References: pandas' ordered Categorical (its ``categories`` order); statsmodels' `fair` data
(read offline; ``yrs_married`` runs from 0.5 to 23 and has no missing value); scikit-learn's
DecisionTreeRegressor (which sends a missing value it never saw in training to the child with
more rows) and LightGBM (which treats it as 0 when a feature had none), whose defaults this rule
replaces.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

import stages
from stages.predictor import UnseenMissingWarning

fair_data = pytest.importorskip("statsmodels.datasets.fair")


@pytest.fixture(scope="module")
def fair() -> pd.DataFrame:
    return fair_data.load_pandas().data


def test_an_ordered_categorical_keeps_its_order_in_the_codes():
    rng = np.random.RandomState(0)
    order = ["low", "medium", "high", "very high"]
    values = pd.Categorical(rng.choice(order, size=200), categories=order, ordered=True)
    frame = pd.DataFrame({"grade": values, "x": rng.normal(size=200)})
    frame["y"] = frame["grade"].cat.codes * 2.0 + rng.normal(scale=0.1, size=200)
    chain = stages.Chain(frame, "y", stages.AllRows())
    grade = chain.schema.columns[chain.schema.index_of(["grade"])[0]]
    # reference: pandas' own order of the categories (text order would be high, low, medium, very high)
    assert grade.levels == tuple(values.categories) and grade.order == "ordered"
    # a tree can now split "grade at most medium" once: depth 1 separates the two lower levels
    chain.add("tree", params={"max_depth": 1})
    split = chain.stages[0].learners[0].tree_.threshold[0]
    assert 1.0 < split < 2.0


def test_levels_that_are_numbers_sort_by_value():
    frame = pd.DataFrame({"size": [str(v) for v in [1, 2, 10, 3, 20, 2, 1, 10] * 10], "y": np.arange(80.0)})
    chain = stages.Chain(frame, "y", stages.AllRows(), features=["size"])
    column = chain.schema.columns[0]
    # text order would put "10" before "2"
    assert column.levels == ("1", "2", "3", "10", "20") and column.order == "numeric"


def test_other_levels_sort_as_text():
    frame = pd.DataFrame({"colour": list("bca") * 10 + ["10"] * 3, "y": np.arange(33.0)})
    chain = stages.Chain(frame, "y", stages.AllRows())
    assert chain.schema.columns[0].levels == ("10", "a", "b", "c") and chain.schema.columns[0].order == "text"


def test_level_order_survives_the_chain_file(tmp_path):
    order = ["c", "a", "b"]
    frame = pd.DataFrame({"g": pd.Categorical(list("abc") * 20, categories=order, ordered=True),
                          "y": np.arange(60.0)})
    chain = stages.Chain(frame, "y", stages.AllRows())
    chain.add("tree")
    chain.save(tmp_path / "c.chain")
    loaded = stages.load(tmp_path / "c.chain")
    assert loaded.schema.columns[0].levels == tuple(order) and loaded.schema.columns[0].order == "ordered"
    np.testing.assert_array_equal(loaded.predict(frame), chain.predict(frame))


@pytest.mark.parametrize("kind", ["linear", "tree", "hist_tree", "lightgbm", "forest", "knn", "spline"])
def test_a_missing_value_the_fitting_rows_never_had_takes_their_median(fair, kind):
    # The case: yrs_married has no missing value; a missing one went to the median in
    # linear, to 0.0 (outside 0.5-23) in lightgbm and hist_tree, to the larger child in tree.
    chain = stages.Chain(fair, "affairs", stages.Holdout(fraction=0.25, seed=1), seed=7)
    params = {"n_estimators": 10} if kind in ("lightgbm", "forest") else None
    chain.add(kind, params=params)
    column = chain.schema.columns[chain.schema.index_of(["yrs_married"])[0]]
    fitting = fair.iloc[chain.split.train]["yrs_married"]
    # reference: numpy's inverted-CDF median of the fitting rows (a value the column holds)
    assert column.fill == np.quantile(fitting, 0.5, method="inverted_cdf")
    assert fitting.min() <= column.fill <= fitting.max()
    rows = fair.iloc[:50].copy()
    rows.loc[rows.index[::2], "yrs_married"] = np.nan
    expected = chain.predict(rows.fillna({"yrs_married": column.fill}))
    with pytest.warns(UnseenMissingWarning, match=r"median \('yrs_married': 25 \(given 6\)\)") as caught:
        got = chain.predict(rows)
    assert len(caught) == 1
    np.testing.assert_array_equal(got, expected)


def test_missing_values_seen_in_fitting_are_left_to_each_stage_and_not_warned_about(fair):
    frame = fair.copy()
    frame.loc[frame.index[::7], "age"] = np.nan
    chain = stages.Chain(frame, "affairs", stages.Holdout(fraction=0.25, seed=1), seed=7)
    chain.add("tree")
    assert chain.schema.columns[chain.schema.index_of(["age"])[0]].fill is None
    with warnings.catch_warnings():
        warnings.simplefilter("error", UnseenMissingWarning)
        chain.predict(frame.iloc[:20])


def test_validation_rows_with_missing_values_score_as_predict_would(fair):
    frame = fair.copy()
    chain_rows = stages.Chain(frame, "affairs", stages.Holdout(fraction=0.25, seed=1), seed=7)
    valid = chain_rows.split.valid
    frame.loc[frame.index[valid[::3]], "yrs_married"] = np.nan  # missing only outside the fitting rows
    chain = stages.Chain(frame, "affairs", stages.Holdout(fraction=0.25, seed=1), seed=7)
    chain.add("hist_tree")
    cached = chain.outputs()[0][chain.layout.valid, 0]
    with pytest.warns(UnseenMissingWarning):
        fresh = chain.predict(frame.iloc[chain.layout.order[chain.layout.valid]])
    np.testing.assert_array_equal(cached, fresh)


def test_the_fill_survives_the_chain_file_and_a_view_of_the_users_frame_is_not_written(tmp_path, fair):
    chain = stages.Chain(fair, "affairs", stages.Holdout(fraction=0.25, seed=1), seed=7)
    chain.add("linear")
    chain.save(tmp_path / "f.chain")
    loaded = stages.load(tmp_path / "f.chain")
    assert loaded.schema == chain.schema
    rows = fair.drop(columns="affairs").iloc[:10].astype(np.float64).copy()
    rows.iloc[0, 2] = np.nan
    before = rows.copy()
    with pytest.warns(UnseenMissingWarning):
        loaded.predict(rows)
    pd.testing.assert_frame_equal(rows, before)  # the user's frame keeps its missing value
