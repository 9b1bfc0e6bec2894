"""Fixtures of the store tests: one valid chain file with a stage of every artifact format, built once."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_diabetes

import stages

#: the stages of the base chain: every kind whose artifact a stranger could craft
BASE_STAGES = (
    ("linear", 1.0, {}),
    ("tree", 0.5, {"max_depth": 3}),
    ("forest", 0.5, {"n_estimators": 3, "max_depth": 3}),
    ("lightgbm", 0.5, {"n_estimators": 3, "num_leaves": 4, "n_jobs": 1}),
    ("hist_tree", 0.5, {"n_jobs": 1}),
    ("knn", 0.3, {}),
    ("spline", 0.3, {}),
    ("sklearn:sklearn.svm.SVR", 0.3, {}),
    ("sklearn:sklearn.ensemble.GradientBoostingRegressor", 0.3, {"n_estimators": 3, "max_depth": 2}),
    ("mean", 0.5, {}),
)


@pytest.fixture(scope="session")
def diabetes_rows() -> pd.DataFrame:
    """Return 200 rows of scikit-learn's diabetes data with a two-level text column."""
    frame = load_diabetes(as_frame=True).frame.iloc[:200].copy()
    frame["band"] = np.where(frame.age > 0.0, "old", "young")
    return frame


@pytest.fixture(scope="session")
def base_chain(tmp_path_factory, diabetes_rows) -> Path:
    """Return a valid chain file holding one stage of each kind in BASE_STAGES, and its data as data.csv."""
    folder = tmp_path_factory.mktemp("base")
    chain = stages.Chain(diabetes_rows, "target", stages.Holdout(fraction=0.2, seed=0))
    for kind, shrinkage, params in BASE_STAGES:
        chain.add(kind, shrinkage, params=params)
    path = folder / "base.chain"
    chain.save(path)
    diabetes_rows.to_csv(folder / "data.csv", index=False)
    return path
