"""Binary chains on the log-odds scale, checked against scikit-learn and LightGBM."""

from __future__ import annotations

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
from scipy.special import expit
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import accuracy_score, brier_score_loss, log_loss, roc_auc_score
from sklearn.preprocessing import StandardScaler

import stages
from stages.errors import DataError, StageSpecError


def _cancer(cancer_frame, n_fit=400):
    frame = cancer_frame.copy()
    order = np.random.RandomState(1).permutation(len(frame))
    frame = frame.iloc[order].reset_index(drop=True)
    frame["part"] = ["train"] * n_fit + ["valid"] * (len(frame) - n_fit)
    return frame


def test_a_logistic_stage_alone_equals_logistic_regression(cancer_frame):
    # Breast cancer data (Wisconsin diagnostic, UCI, shipped with scikit-learn); reference:
    # sklearn.linear_model.LogisticRegression with the same L2 penalty on standardised features
    # (the stage standardises with the fitting rows' mean and population std, as StandardScaler).
    frame = _cancer(cancer_frame)
    chain = stages.Chain(frame, "target", stages.SplitColumn("part"), loss="logloss")
    chain.add("logistic")
    features = [c for c in frame.columns if c not in ("target", "part")]
    scaler = StandardScaler().fit(frame.loc[:399, features])
    reference = LogisticRegression(C=1.0, solver="newton-cholesky", tol=1e-12, max_iter=1000)
    reference.fit(scaler.transform(frame.loc[:399, features]), frame.loc[:399, "target"])
    theirs = reference.decision_function(scaler.transform(frame.loc[400:, features]))
    ours = chain.fitted().predict_raw(frame.loc[400:])
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-6)


def test_lightgbm_after_logistic_equals_lightgbm_with_init_score(cancer_frame):
    # Reference: lightgbm.train(objective="binary") with init_score = the logistic stage's log-odds.
    frame = _cancer(cancer_frame)
    chain = stages.Chain(frame, "target", stages.SplitColumn("part"), loss="logloss")
    chain.add("logistic")
    params = {"n_estimators": 30, "num_leaves": 7, "learning_rate": 0.1, "min_child_samples": 10}
    chain.add("lightgbm", 1.0, params=params)
    features = [c for c in frame.columns if c not in ("target", "part")]
    fitted = chain.fitted()
    offset_fit = fitted.raw_from_matrix(fitted.encode(frame.loc[:399]), upto=1)[:, 0]
    offset_valid = fitted.raw_from_matrix(fitted.encode(frame.loc[400:]), upto=1)[:, 0]
    native = chain.stages[1].params
    booster = lgb.train(
        {**{k: v for k, v in native.items() if k != "num_boost_round"}, "objective": "binary"},
        lgb.Dataset(frame.loc[:399, features].to_numpy(), label=frame.loc[:399, "target"], init_score=offset_fit),
        num_boost_round=30,
    )
    expected = offset_valid + booster.predict(frame.loc[400:, features].to_numpy(), raw_score=True)
    np.testing.assert_allclose(fitted.predict_raw(frame.loc[400:]), expected, rtol=0, atol=1e-6)


def test_binary_metrics_agree_with_sklearn_metrics(cancer_frame):
    # References: sklearn.metrics.log_loss, roc_auc_score, accuracy_score, brier_score_loss.
    frame = _cancer(cancer_frame)
    chain = stages.Chain(frame, "target", stages.SplitColumn("part"), loss="logloss", threshold=0.3)
    chain.add("logistic", params={"C": 0.05})
    y = chain.part_targets("valid")
    p = chain.fitted_values("valid")
    valid = chain.scores()[-1].valid
    assert valid["logloss"] == pytest.approx(log_loss(y, p), rel=1e-9)
    assert valid["auc"] == pytest.approx(roc_auc_score(y, p), rel=1e-12)
    assert valid["accuracy"] == pytest.approx(accuracy_score(y, p >= 0.5), rel=1e-12)
    assert valid["accuracy_at"] == pytest.approx(accuracy_score(y, p >= 0.3), rel=1e-12)
    assert valid["brier"] == pytest.approx(brier_score_loss(y, p), rel=1e-12)
    assert valid["loss"] == pytest.approx(log_loss(y, p), rel=1e-9)


def test_roc_auc_counts_ties_as_one_half():
    # Reference: sklearn.metrics.roc_auc_score on scores with many ties.
    from stages.metrics import roc_auc

    rng = np.random.RandomState(0)
    y = rng.randint(0, 2, 500).astype(float)
    score = rng.randint(0, 5, 500).astype(float)
    assert roc_auc(y, score) == pytest.approx(roc_auc_score(y, score), rel=1e-12)


def test_a_leaf_that_sees_one_class_gets_a_finite_step():
    frame = pd.DataFrame({"x": np.r_[np.zeros(50), np.ones(50)], "y": np.r_[np.zeros(50), np.ones(50)]})
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0), loss="logloss")
    chain.add("tree", 1.0, params={"max_depth": 1}, repeat=5)
    out = chain.outputs()[0][:, 0]
    assert np.all(np.isfinite(out))
    assert expit(out[chain.y == 1]).min() > 0.99


def test_string_classes_take_the_positive_class_the_user_chose():
    rng = np.random.RandomState(0)
    frame = pd.DataFrame({"x": rng.normal(size=200)})
    frame["outcome"] = np.where(frame["x"] + rng.normal(scale=0.5, size=200) > 0, "kept", "spoiled")
    chain = stages.Chain(frame, "outcome", stages.Holdout(seed=0), positive="spoiled")
    assert chain.task == "binary" and chain.loss.name == "logloss"
    assert chain.schema.positive_class == "spoiled"
    chain.add("logistic")
    fitted = chain.fitted()
    proba = fitted.predict_proba(frame)
    assert np.allclose(proba.sum(axis=1), 1.0)
    labels = fitted.predict(frame)
    assert set(labels) <= {"kept", "spoiled"}
    # a low x means spoiled: the probability of the positive class falls with x
    assert np.corrcoef(frame["x"], proba[:, 1])[0, 1] < -0.5


def test_three_classes_make_a_multiclass_chain_and_a_binary_task_refuses_them():
    frame = pd.DataFrame({"x": np.arange(30.0), "y": ["a", "b", "c"] * 10})
    assert stages.Chain(frame, "y", stages.Holdout(seed=0)).task == "multiclass"
    with pytest.raises(DataError, match="has 3 classes; a binary target has two"):
        stages.Chain(frame, "y", stages.Holdout(seed=0), task="binary")


def test_a_regression_loss_on_a_binary_target_is_refused():
    frame = pd.DataFrame({"x": np.arange(40.0), "y": [0, 1] * 20})
    with pytest.raises(StageSpecError, match="logloss"):
        stages.Chain(frame, "y", stages.Holdout(seed=0), loss="squared", task="binary")


def test_forest_and_knn_stages_line_search_their_step_on_log_loss(cancer_frame):
    frame = _cancer(cancer_frame)
    chain = stages.Chain(frame, "target", stages.SplitColumn("part"), loss="logloss")
    chain.add("forest", 1.0, params={"n_estimators": 10})
    step = chain.stages[0].scale
    assert 0 < step <= 10 and step != 1.0
    before = chain.scores()[0].train["logloss"]
    assert chain.scores()[1].train["logloss"] < before
