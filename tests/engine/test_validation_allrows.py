"""The AllRows scheme: every row fits, nothing is held out for validation or test."""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_diabetes
from sklearn.linear_model import LinearRegression

import stages
from stages.errors import ValidationSpecError
from stages.validation import AllRows, spec_from_dict


def test_every_row_fits_and_validation_and_test_are_empty() -> None:
    frame = pd.DataFrame({"x": np.arange(7.0)}, index=np.arange(100, 107))
    split = AllRows().split(frame, np.linspace(0.0, 1.0, 7), "regression")
    assert split.train.dtype == np.int64
    assert np.array_equal(split.train, np.arange(7))
    assert len(split.valid) == 0 and split.valid.dtype == np.int64
    assert len(split.test) == 0 and split.test.dtype == np.int64
    assert split.folds == ()
    assert split.describe() == "7 fit, 0 validation, 0 test"


def test_binary_targets_also_fit_on_every_row() -> None:
    y = np.array([0, 1, 1, 0, 1], dtype=float)
    split = AllRows().split(pd.DataFrame({"x": y}), y, "binary")
    assert np.array_equal(split.train, np.arange(5))


def test_a_target_of_the_wrong_length_is_refused() -> None:
    with pytest.raises(ValueError, match="3 values but the frame has 4 rows"):
        AllRows().split(pd.DataFrame({"x": np.arange(4.0)}), np.zeros(3), "regression")


def test_describe_says_there_is_no_validation() -> None:
    assert AllRows().describe() == "every row fits (no validation)"


def test_the_scheme_is_none_and_has_no_fields_or_columns() -> None:
    spec = AllRows()
    assert spec.scheme == "none"
    assert dataclasses.fields(spec) == ()
    assert spec.columns_used == ()
    assert spec.to_dict() == {"scheme": "none"}


def test_spec_from_dict_round_trips_through_json() -> None:
    spec = spec_from_dict(json.loads(json.dumps(AllRows().to_dict())))
    assert spec == AllRows()
    assert isinstance(spec, AllRows)


def test_spec_from_dict_refuses_any_key_besides_scheme() -> None:
    with pytest.raises(ValidationSpecError, match="has no key 'fraction'; accepted keys: scheme$"):
        spec_from_dict({"scheme": "none", "fraction": 0.2})


def test_an_unknown_scheme_lists_none_among_the_accepted_ones() -> None:
    with pytest.raises(ValidationSpecError, match="accepted schemes: .*none"):
        spec_from_dict({"scheme": "everything"})


def test_the_spec_is_frozen() -> None:
    with pytest.raises(dataclasses.FrozenInstanceError):
        AllRows().fraction = 0.5  # type: ignore[attr-defined]


def test_the_facade_exports_it() -> None:
    assert stages.AllRows is AllRows
    assert "AllRows" in stages.__all__


def test_a_linear_chain_on_every_row_equals_least_squares_on_all_rows() -> None:
    # Reference: scikit-learn's LinearRegression on all 442 rows of the diabetes data
    # (sklearn.datasets.load_diabetes). A mean start plus one linear stage at shrinkage 1
    # is ordinary least squares, so the fitted values agree to rounding.
    X, y = load_diabetes(return_X_y=True, as_frame=True)
    frame = X.assign(progression=y)
    chain = stages.Chain(frame, "progression", AllRows(), "squared", seed=0)
    chain.add("linear")
    assert chain.layout.n_train == len(frame)
    reference = LinearRegression().fit(X, y).predict(X)
    np.testing.assert_allclose(chain.predict(X), reference, rtol=0, atol=1e-8)


def test_validation_scores_of_such_a_chain_are_nan_and_train_scores_are_finite() -> None:
    X, y = load_diabetes(return_X_y=True, as_frame=True)
    chain = stages.Chain(X.assign(progression=y), "progression", AllRows(), "squared", seed=0)
    chain.add("linear")
    table = chain.table()
    assert table["valid_rmse"].isna().all()
    assert np.isfinite(table["train_rmse"]).all()
    assert chain.fitted().meta["validation"] == {"scheme": "none"}
