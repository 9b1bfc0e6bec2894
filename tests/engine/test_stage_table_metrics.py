"""The metrics the stage table shows besides the chain's own: checked against sklearn.metrics."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import (
    accuracy_score,
    brier_score_loss,
    mean_absolute_error,
    r2_score,
    roc_auc_score,
)

import stages


def test_a_regression_table_shows_mae_beside_rmse_and_r2(diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", stages.Holdout(fraction=0.25, seed=0))
    chain.add("linear")
    table = chain.table()
    assert {"valid_rmse", "valid_r2", "valid_mae"} <= set(table.columns)
    y, p = chain.part_targets("valid"), chain.fitted_values("valid")
    assert table.loc[1, "valid_mae"] == pytest.approx(mean_absolute_error(y, p), rel=1e-12)
    assert table.loc[1, "valid_r2"] == pytest.approx(r2_score(y, p), rel=1e-12)


def test_an_absolute_loss_table_shows_rmse_beside_its_mae(diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", stages.Holdout(fraction=0.25, seed=0), loss="absolute")
    assert {"valid_mae", "valid_r2", "valid_rmse"} <= set(chain.table().columns)


def test_a_binary_table_shows_auc_brier_and_accuracy_at_the_threshold(cancer_frame):
    chain = stages.Chain(cancer_frame, "target", stages.Holdout(fraction=0.25, seed=0), threshold=0.7)
    chain.add("logistic")
    table = chain.table()
    y, p = chain.part_targets("valid"), chain.fitted_values("valid")
    assert table.loc[1, "valid_auc"] == pytest.approx(roc_auc_score(y, p), rel=1e-12)
    assert table.loc[1, "valid_brier"] == pytest.approx(brier_score_loss(y, p), rel=1e-12)
    assert table.loc[1, "valid_accuracy_at"] == pytest.approx(accuracy_score(y, (p >= 0.7).astype(float)))
    assert np.isfinite(table["valid_logloss"]).all()
