"""Fixtures of the ONNX export tests: rows to fit on, and new rows with missing values and unseen levels."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from onnx_support import mixed

pytest.importorskip("onnxruntime")


@pytest.fixture(scope="session")
def train_frame() -> pd.DataFrame:
    """Return 400 rows to fit chains on."""
    return mixed(400, 0)


@pytest.fixture(scope="session")
def new_rows() -> pd.DataFrame:
    """Return 300 new rows with missing values in every feature and levels never seen in training."""
    frame = mixed(300, 1).drop(columns=["y", "hit"])
    rng = np.random.RandomState(2)
    frame["flag"] = frame["flag"].astype(float)
    for column in ("a", "b", "count", "flag"):
        frame.loc[rng.choice(len(frame), 15, replace=False), column] = np.nan
    frame.loc[rng.choice(len(frame), 15, replace=False), "colour"] = "violet"  # a level never seen
    frame.loc[rng.choice(len(frame), 15, replace=False), "colour"] = None
    return frame
