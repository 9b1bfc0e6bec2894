"""Shared data and checks for the command-line tests: small CSV files made from scikit-learn's datasets.

``diabetes.csv``: scikit-learn's diabetes data (442 rows, 10 numeric features, target
``progression``), with ``patient`` (an id) and ``band`` (a category cut from ``bmi``) added.
``cancer.csv``: five columns of scikit-learn's breast cancer data, target ``malignant`` (1 when
the tumour is malignant, so the classes are 0 and 1).
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.datasets import load_breast_cancer, load_diabetes


def diabetes_frame() -> pd.DataFrame:
    """Return the diabetes data with an id column and a three-level category."""
    frame = load_diabetes(as_frame=True).frame.rename(columns={"target": "progression"})
    frame.insert(0, "patient", [f"P{i:03d}" for i in range(len(frame))])
    frame["band"] = pd.cut(frame["bmi"], [-1, -0.02, 0.03, 1], labels=["low", "mid", "high"]).astype(str)
    return frame


def cancer_frame() -> pd.DataFrame:
    """Return five features of the breast cancer data and ``malignant`` (0 benign, 1 malignant)."""
    data = load_breast_cancer(as_frame=True)
    frame = data.frame[list(data.feature_names[:5])].copy()
    frame.columns = [c.replace(" ", "_") for c in frame.columns]
    frame["malignant"] = (data.target == 0).astype(int)  # scikit-learn codes malignant as 0
    return frame


REGRESSION_RECIPE = """
[data]
path = "diabetes.csv"
target = "progression"
ignore = ["patient"]

[chain]
loss = "squared"
seed = 3

[validation]
scheme = "holdout"
fraction = 0.25

[[stage]]
kind = "linear"

[[stage]]
kind = "tree"
shrinkage = 0.5
repeat = 2
params = { max_depth = 2 }
"""

BINARY_RECIPE = """
[data]
path = "cancer.csv"
target = "malignant"
task = "binary"

[chain]
loss = "logloss"
seed = 0

[validation]
scheme = "kfold"
folds = 3

[[stage]]
kind = "logistic"

[[stage]]
kind = "tree"
shrinkage = 0.3
params = { max_depth = 2 }
"""


def write_recipe(folder: Path, text: str, name: str = "recipe.toml") -> Path:
    """Write a recipe (dedented) into ``folder`` and return its path."""
    path = folder / name
    path.write_text(textwrap.dedent(text).lstrip(), encoding="utf-8")
    return path


def error_lines(stderr: str) -> list[str]:
    """Return the lines of ``stderr`` that start with "error:"."""
    return [line for line in stderr.splitlines() if line.startswith("error:")]


def assert_one_error(status: int, stderr: str, *fragments: str) -> None:
    """Check a bad-input run: status 2, exactly one error line holding ``fragments``, no traceback."""
    assert status == 2, stderr
    lines = error_lines(stderr)
    assert len(lines) == 1, stderr
    assert "Traceback" not in stderr
    for fragment in fragments:
        assert fragment in lines[0], lines[0]


def numbers(text: str) -> np.ndarray:
    """Return the ``prediction`` column of CSV text as floats."""
    import io

    return pd.read_csv(io.StringIO(text))["prediction"].to_numpy(dtype=float)
