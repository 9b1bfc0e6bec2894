"""Shared fixtures for the engine tests: small real data sets shipped with scikit-learn."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes


@pytest.fixture(scope="session")
def diabetes_frame() -> pd.DataFrame:
    """Return the diabetes data (Efron et al. 2004) as a frame with target column 'target'."""
    return load_diabetes(as_frame=True).frame


@pytest.fixture(scope="session")
def cancer_frame() -> pd.DataFrame:
    """Return the breast cancer data (Wisconsin diagnostic, UCI) with a 0/1 'target' (1 = benign)."""
    frame = load_breast_cancer(as_frame=True).frame
    frame.columns = [c.replace(" ", "_") for c in frame.columns]
    return frame


@pytest.fixture()
def mixed_frame() -> pd.DataFrame:
    """Return 300 rows with numeric, categorical and boolean columns and some missing values."""
    rng = np.random.RandomState(0)
    n = 300
    frame = pd.DataFrame({
        "a": rng.normal(size=n),
        "b": rng.uniform(-2, 2, size=n),
        "colour": rng.choice(["red", "green", "blue"], size=n),
        "flag": rng.choice([True, False], size=n),
    })
    frame.loc[rng.choice(n, 20, replace=False), "a"] = np.nan
    frame["y"] = (2 * frame["a"].fillna(0) + np.sin(3 * frame["b"]) + (frame["colour"] == "red") * 1.5
                  + frame["flag"] * 0.5 + rng.normal(scale=0.3, size=n))
    return frame
