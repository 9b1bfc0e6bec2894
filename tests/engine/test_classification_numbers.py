"""Classification numbers: one log loss everywhere, separation said out loud, predict_proba on a live chain.

References: sklearn.metrics.log_loss (its clipping of p and 1 - p to float64's machine epsilon);
scikit-learn's breast cancer data (Wisconsin diagnostic, UCI), whose classes a hyperplane
separates on the fitting rows; Albert & Anderson (1984, Biometrika 71:1-10) on separation.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit
from sklearn.datasets import load_breast_cancer
from sklearn.metrics import log_loss

import stages
from stages import metrics
from stages.losses import LogLoss


def test_log_loss_equals_scikit_learn_on_saturated_predictions():
    y = np.array([1.0, 0.0, 1.0, 0.0, 1.0])
    raw = np.array([800.0, -800.0, -40.0, 40.0, 0.3])  # two right and two wrong beyond float64
    p = expit(raw)
    # reference: sklearn.metrics.log_loss on the same probabilities
    expected = log_loss(y, p, labels=[0, 1])
    assert metrics.log_loss(y, p) == pytest.approx(expected, rel=1e-13)
    assert LogLoss().value(y, raw) == pytest.approx(expected, rel=1e-13)
    assert metrics.binary_scores(y, p)["logloss"] == pytest.approx(expected, rel=1e-13)


def _cancer() -> pd.DataFrame:
    frame = load_breast_cancer(as_frame=True).frame
    frame.columns = [c.replace(" ", "_") for c in frame.columns]
    return frame


def test_the_table_the_metric_and_scikit_learn_give_one_log_loss_on_a_saturated_chain():
    # The case: for the same saturated predictions the table's loss, the logloss metric
    # and sklearn.metrics.log_loss gave 16.18, 1.0595 and 1.1035.
    frame = _cancer()
    chain = stages.Chain(frame, "target", stages.Holdout(fraction=0.3, seed=0))
    chain.add("logistic", params={"penalty": "none"})
    valid_rows = frame.iloc[chain.layout.order[chain.layout.valid]]
    probability = chain.predict_proba(valid_rows)[:, 1]
    assert np.mean((probability == 0) | (probability == 1)) > 0.5  # saturated
    scores = chain.scores()[1].valid
    expected = log_loss(valid_rows["target"], probability, labels=[0, 1])
    assert scores["loss"] == pytest.approx(expected, rel=1e-12)
    assert scores["logloss"] == pytest.approx(expected, rel=1e-12)
    assert chain.table()["valid_logloss"].iloc[1] == pytest.approx(expected, rel=1e-12)


def test_separation_is_detected_and_a_penalty_suggested():
    frame = _cancer()
    chain = stages.Chain(frame, "target", stages.Holdout(fraction=0.3, seed=0))
    stage = chain.add("logistic", params={"penalty": "none"})[0]
    assert len(stage.notes) == 1
    assert stage.notes[0].startswith("separation:") and "penalty='l2'" in stage.notes[0]
    assert chain.fitted().stages[0].notes == stage.notes
    # a penalised fit on the same rows keeps its log-odds finite and says nothing
    chain.step_back()
    assert chain.add("logistic")[0].notes == ()


def test_a_live_chain_predicts_probabilities_as_its_fitted_chain_does():
    frame = _cancer()
    chain = stages.Chain(frame, "target", stages.Holdout(fraction=0.3, seed=0))
    chain.add("logistic")
    chain.add("tree", 0.3, repeat=3)
    np.testing.assert_array_equal(chain.predict_proba(frame), chain.fitted().predict_proba(frame))
    assert chain.predict_proba(frame).shape == (len(frame), 2)
