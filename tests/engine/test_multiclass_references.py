"""Multiclass chains checked against scikit-learn and LightGBM.

Data shipped with scikit-learn: the wine data (Forina et al., UCI; 178 rows, 13 features, 3
classes) and the digits data (UCI optical recognition of handwritten digits; 1,797 rows of 8 x 8
pixels, 10 classes). References: sklearn.ensemble.GradientBoostingClassifier (multinomial
deviance, Friedman 2001 algorithm 6), sklearn.linear_model.LogisticRegression (multinomial),
lightgbm.train with the multiclass objective, and sklearn.metrics.
"""

from __future__ import annotations

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
from scipy.special import softmax
from sklearn.datasets import load_digits, load_wine
from sklearn.ensemble import GradientBoostingClassifier
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import (
    accuracy_score,
    brier_score_loss,
    confusion_matrix,
    log_loss,
    roc_auc_score,
)
from sklearn.preprocessing import StandardScaler

import stages
from stages import metrics
from stages.multinomial import MultinomialLoss


def _split(loader, fraction: float = 0.8, seed: int = 0) -> tuple[pd.DataFrame, np.ndarray, np.ndarray, int]:
    """Return a frame of the data in a seeded random order with a ``part`` column, X, y and the fitting rows' count."""
    X, y = loader(return_X_y=True)
    order = np.random.RandomState(seed).permutation(len(y))
    X, y = X[order], y[order]
    n_fit = int(fraction * len(y))
    frame = pd.DataFrame(X, columns=[f"f{j}" for j in range(X.shape[1])])
    frame["y"] = y
    frame["part"] = np.where(np.arange(len(y)) < n_fit, "train", "valid")
    return frame, X, y, n_fit


@pytest.fixture(scope="module")
def wine():
    return _split(load_wine)


@pytest.fixture(scope="module")
def wine_frame(wine) -> pd.DataFrame:
    frame = wine[0].copy()
    frame["y"] = np.array(["barolo", "grignolino", "barbera"])[frame["y"]]  # the three cultivars, as text
    return frame


def _tree_chain(frame: pd.DataFrame, n_stages: int) -> stages.Chain:
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"), task="multiclass", seed=0)
    chain.add("tree", 0.1, params={"max_depth": 3}, repeat=n_stages)
    return chain


def _used(chain: stages.Chain) -> list[int]:
    """Return the data columns the chain uses (constant columns are excluded, see below)."""
    return [int(name[1:]) for name in chain.schema.names]


def test_tree_stages_reproduce_gradient_boosting_classifier_on_wine(wine):
    # Reference: GradientBoostingClassifier(n_estimators=100, max_depth=3, learning_rate=0.1), its
    # staged probabilities after 5 and after 100 rounds of 3 trees.
    frame, X, y, n_fit = wine
    chain = _tree_chain(frame, 100)
    reference = GradientBoostingClassifier(n_estimators=100, max_depth=3, learning_rate=0.1, random_state=0)
    reference.fit(X[:n_fit], y[:n_fit])
    staged = list(reference.staged_predict_proba(X[n_fit:]))
    fitted = chain.fitted()
    matrix = fitted.encode(frame.iloc[n_fit:])
    for k in (5, 100):
        ours = fitted.loss.link(fitted.raw_from_matrix(matrix, upto=k))
        np.testing.assert_allclose(ours, staged[k - 1], rtol=0, atol=1e-9)


def test_tree_stages_reproduce_gradient_boosting_classifier_on_digits():
    # Reference: GradientBoostingClassifier with 10 trees a round. The digits data has three
    # pixels that are 0 on every row (f0, f32, f39); the chain excludes constant columns, and
    # scikit-learn's splitter visits the features in a random order drawn over their count, which
    # decides between equally good splits (pixels that split the fitting rows the same way). Given
    # the same 61 columns the classifier takes the same splits, and the probabilities agree to
    # rounding at 5 rounds and at 40. (On all 64 columns the near-tied splits differ from round 1
    # and the probabilities by up to 0.07 on a few rows after 100 rounds, with the log loss within
    # 0.3 % and the same accuracy.)
    frame, X, y, n_fit = _split(load_digits)
    chain = _tree_chain(frame, 40)
    used = _used(chain)
    assert sorted(set(range(64)) - set(used)) == [0, 32, 39]
    reference = GradientBoostingClassifier(n_estimators=40, max_depth=3, learning_rate=0.1, random_state=0)
    reference.fit(X[:n_fit][:, used], y[:n_fit])
    staged = list(reference.staged_predict_proba(X[n_fit:][:, used]))
    fitted = chain.fitted()
    matrix = fitted.encode(frame.iloc[n_fit:])
    for k in (5, 40):
        ours = fitted.loss.link(fitted.raw_from_matrix(matrix, upto=k))
        np.testing.assert_allclose(ours, staged[k - 1], rtol=0, atol=1e-9)
    probability = fitted.predict_proba(frame.iloc[n_fit:])
    assert log_loss(y[n_fit:], probability) == pytest.approx(log_loss(y[n_fit:], staged[-1]), rel=0.01)
    assert abs(accuracy_score(y[n_fit:], probability.argmax(1)) - accuracy_score(y[n_fit:], staged[-1].argmax(1))) <= 0.01


def test_the_start_is_the_log_of_the_class_priors_centred_on_their_geometric_mean(wine):
    # GradientBoostingClassifier starts from DummyClassifier(strategy="prior") through the symmetric
    # multinomial logit: log(p_k) - mean_j log(p_j), p_k the class shares of the fitting rows.
    frame, _, y, n_fit = wine
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"), task="multiclass")
    priors = np.bincount(y[:n_fit]) / n_fit
    np.testing.assert_allclose(chain.starts[0], np.log(priors) - np.mean(np.log(priors)), rtol=0, atol=1e-15)
    np.testing.assert_allclose(softmax(chain.starts[0]), priors, rtol=1e-14)


def test_a_logistic_stage_alone_equals_multinomial_logistic_regression(wine_frame):
    # Reference: sklearn.linear_model.LogisticRegression (multinomial for three classes, the same L2
    # penalty C = 1 on standardised features, the stage standardising with the fitting rows' mean
    # and population std as StandardScaler does).
    frame = wine_frame
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"))
    assert chain.task == "multiclass" and chain.classes == ("barbera", "barolo", "grignolino")
    chain.add("logistic")
    features = [c for c in frame.columns if c not in ("y", "part")]
    fit, valid = frame[frame.part == "train"], frame[frame.part == "valid"]
    scaler = StandardScaler().fit(fit[features])
    reference = LogisticRegression(C=1.0, solver="newton-cholesky", tol=1e-12, max_iter=1000)
    reference.fit(scaler.transform(fit[features]), fit["y"])
    assert list(reference.classes_) == list(chain.classes)
    theirs = reference.predict_proba(scaler.transform(valid[features]))
    ours = chain.fitted().predict_proba(valid)
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-6)
    assert list(chain.fitted().predict(valid)) == list(reference.predict(scaler.transform(valid[features])))


def test_an_unpenalised_logistic_stage_equals_the_maximum_likelihood_fit(wine_frame):
    # Reference: LogisticRegression(C=inf), unpenalised; the classes overlap on four features, so the
    # maximum-likelihood fit exists and its probabilities are unique.
    frame = wine_frame[["f0", "f1", "f3", "f11", "y", "part"]]
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"))
    chain.add("logistic", params={"penalty": "none"})
    fit, valid = frame[frame.part == "train"], frame[frame.part == "valid"]
    features = ["f0", "f1", "f3", "f11"]
    scaler = StandardScaler().fit(fit[features])
    reference = LogisticRegression(C=np.inf, solver="newton-cholesky", tol=1e-12, max_iter=1000)
    reference.fit(scaler.transform(fit[features]), fit["y"])
    np.testing.assert_allclose(chain.fitted().predict_proba(valid),
                               reference.predict_proba(scaler.transform(valid[features])), rtol=0, atol=1e-6)


def test_lightgbm_after_logistic_equals_lightgbm_with_the_logistic_raw_scores_as_init_score(wine_frame):
    # Reference: lightgbm.train(objective="multiclass", num_class=3) with init_score the (n, 3)
    # raw scores of the chain after its logistic stage, and the stage's own parameters.
    frame = wine_frame
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"))
    chain.add("logistic")
    chain.add("lightgbm", params={"n_estimators": 30, "num_leaves": 7, "min_child_samples": 10})
    fitted = chain.fitted()
    fit, valid = frame[frame.part == "train"], frame[frame.part == "valid"]
    offset_fit = fitted.raw_from_matrix(fitted.encode(fit), upto=1)
    offset_valid = fitted.raw_from_matrix(fitted.encode(valid), upto=1)
    params = dict(chain.stages[1].learners[0].params)
    assert params["objective"] == "multiclass" and params["num_class"] == 3
    codes = pd.Categorical(fit["y"], categories=list(chain.classes)).codes
    features = [c for c in frame.columns if c not in ("y", "part")]
    booster = lgb.train(params, lgb.Dataset(fit[features].to_numpy(), label=codes, init_score=offset_fit),
                        num_boost_round=30)
    expected = softmax(offset_valid + booster.predict(valid[features].to_numpy(), raw_score=True), axis=1)
    np.testing.assert_allclose(fitted.predict_proba(valid), expected, rtol=0, atol=1e-6)


def test_multiclass_metrics_equal_sklearn_metrics():
    # Reference: sklearn.metrics.log_loss, accuracy_score, roc_auc_score(multi_class="ovr",
    # average="macro"), brier_score_loss (its multiclass form) and confusion_matrix.
    rng = np.random.RandomState(3)
    y = rng.randint(0, 4, 300)
    raw = rng.normal(size=(300, 4)) + 1.5 * np.eye(4)[y]
    probability = softmax(raw, axis=1)
    probability[0] = [1.0, 0.0, 0.0, 0.0]  # a saturated row: clipped as sklearn clips it
    scores = MultinomialLoss(n_classes=4).scores(y.astype(float), np.log(np.clip(probability, 1e-300, None)))
    assert scores["logloss"] == pytest.approx(log_loss(y, probability), rel=1e-12)
    assert scores["accuracy"] == pytest.approx(accuracy_score(y, probability.argmax(1)), rel=1e-15)
    assert scores["auc"] == pytest.approx(roc_auc_score(y, probability, multi_class="ovr", average="macro"), rel=1e-12)
    assert scores["brier"] == pytest.approx(brier_score_loss(y, probability), rel=1e-12)
    predicted = probability.argmax(1)
    np.testing.assert_array_equal(metrics.confusion_counts(y, predicted, 4), confusion_matrix(y, predicted))
    weight = rng.uniform(0.2, 3.0, 300)
    weighted = metrics.multiclass_scores(y.astype(float), probability, weight)
    assert weighted["logloss"] == pytest.approx(log_loss(y, probability, sample_weight=weight), rel=1e-12)
    assert weighted["accuracy"] == pytest.approx(accuracy_score(y, predicted, sample_weight=weight), rel=1e-12)
    assert weighted["brier"] == pytest.approx(brier_score_loss(y, probability, sample_weight=weight), rel=1e-12)
    auc = roc_auc_score(y, probability, multi_class="ovr", average="macro", sample_weight=weight)
    assert weighted["auc"] == pytest.approx(auc, rel=1e-12)


def test_the_chain_scores_its_validation_rows_as_sklearn_metrics_do(wine_frame):
    frame = wine_frame
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"))
    chain.add("tree", 0.3, params={"max_depth": 2}, repeat=3)
    valid = frame[frame.part == "valid"]
    probability = chain.fitted().predict_proba(valid)
    scores = chain.scores()[-1].valid
    labels = list(chain.classes)
    assert scores["logloss"] == pytest.approx(log_loss(valid["y"], probability, labels=labels), rel=1e-12)
    assert scores["auc"] == pytest.approx(roc_auc_score(valid["y"], probability, multi_class="ovr", labels=labels),
                                          rel=1e-12)
    table = chain.confusion()
    expected = confusion_matrix(valid["y"], np.asarray(labels)[probability.argmax(1)], labels=labels)
    np.testing.assert_array_equal(table.to_numpy(), expected)
    assert list(table.index) == labels and list(table.columns) == labels
