"""Fixtures of the session tests: a private REMNANT_HOME, small data files and a valid session file."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from session_support import build
from sklearn.datasets import load_breast_cancer, load_diabetes

from stages.files.session import save_session


@pytest.fixture(autouse=True)
def home(tmp_path, monkeypatch) -> Path:
    """Point REMNANT_HOME at a fresh folder, so no test touches the user's sessions."""
    folder = tmp_path / "home"
    monkeypatch.setenv("REMNANT_HOME", str(folder))
    return folder


@pytest.fixture()
def data_file(tmp_path) -> Path:
    """Return a CSV of 200 rows of scikit-learn's diabetes data with a three-level category."""
    frame = load_diabetes(as_frame=True).frame.iloc[:200].copy()
    frame["band"] = pd.cut(frame["bmi"], [-1, -0.02, 0.03, 1], labels=["low", "mid", "high"]).astype(str)
    path = tmp_path / "diabetes.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.fixture()
def cancer_file(tmp_path) -> Path:
    """Return a CSV of 250 rows and six features of scikit-learn's breast cancer data."""
    data = load_breast_cancer(as_frame=True)
    frame = data.frame[list(data.feature_names[:6])].iloc[:250].copy()
    frame.columns = [c.replace(" ", "_") for c in frame.columns]
    frame["malignant"] = (data.target.iloc[:250] == 0).astype(int)
    path = tmp_path / "cancer.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.fixture()
def valid_session(data_file) -> Path:
    chain = build(data_file, kinds=[("linear", 1.0, {}), ("tree", 0.5, {"max_depth": 2}), ("knn", 0.3, {})])
    chain.step_back()
    return save_session(chain)
