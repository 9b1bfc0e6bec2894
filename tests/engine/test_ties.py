"""Conventions at ties: absolute loss at y == F, k-NN neighbours at equal distance, a mean after the start.

References: scikit-learn's GradientBoostingRegressor(loss="absolute_error") and its absolute
error's gradient; GradientBoostingClassifier; KNeighborsRegressor; the diabetes data (Efron et
al. 2004; its target is a whole number, so ties are common) and the breast cancer data, both
shipped with scikit-learn; statsmodels' `fair` data (integer-valued features, read offline).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn._loss.loss import AbsoluteError
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.ensemble import GradientBoostingClassifier, GradientBoostingRegressor

import stages
from stages.kinds.neighbour_search import nearest
from stages.losses import AbsoluteLoss

fair_data = pytest.importorskip("statsmodels.datasets.fair")


def test_absolute_residual_at_a_tie_follows_scikit_learn():
    # Reference: scikit-learn's AbsoluteError.gradient is +1 where F > y and -1 otherwise, so the
    # negative gradient, the residual, is +1 at y == F.
    y = np.array([1.0, 2.0, 3.0, 3.0])
    raw = np.array([2.0, 2.0, 2.0, 3.5])
    expected = -AbsoluteError().gradient(y_true=y, raw_prediction=raw)
    assert AbsoluteLoss().residual(y, raw).tolist() == expected.tolist() == [-1.0, 1.0, 1.0, -1.0]


def test_absolute_loss_trees_equal_gradient_boosting_on_a_target_with_ties():
    # The case: diabetes (integer target, 214 distinct values in 442 rows), holdout 20 %
    # (seed 1), 50 trees of depth 3 at 0.1. With a residual of 0 at ties, held-out predictions
    # differed from scikit-learn's by up to 28; with its convention they are equal.
    frame = load_diabetes(as_frame=True).frame
    chain = stages.Chain(frame, "target", stages.Holdout(fraction=0.2, seed=1), loss="absolute", seed=0)
    chain.add("tree", 0.1, params={"max_depth": 3}, repeat=50)
    X, y = frame.drop(columns="target").to_numpy(), frame["target"].to_numpy()
    fitting = chain.layout.order[: chain.layout.n_train]  # the fitting rows in the chain's order
    reference = GradientBoostingRegressor(loss="absolute_error", n_estimators=50, max_depth=3, learning_rate=0.1,
                                          random_state=0).fit(X[fitting], y[fitting])
    valid = chain.split.valid
    assert len(np.unique(y)) < len(y)  # the target has ties
    np.testing.assert_allclose(chain.predict(frame.iloc[valid]), reference.predict(X[valid]), rtol=0, atol=1e-9)


def _cancer_frame() -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    data = load_breast_cancer()
    order = np.random.RandomState(0).permutation(len(data.target))
    X, y = data.data[order], data.target[order]
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
    frame["y"] = y
    frame["part"] = ["train"] * 427 + ["valid"] * (len(y) - 427)
    return frame, X, y


def test_a_mean_stage_right_after_the_start_adds_exactly_zero():
    # Reference: GradientBoostingClassifier starts from the log-odds of the base rate and has no
    # mean stage; a mean stage that added 7e-17 flipped near-tied splits from stage 12 on.
    frame, X, y = _cancer_frame()
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"), loss="logloss", seed=0)
    chain.add("mean")
    assert chain.stages[0].learners[0].value == 0.0
    assert np.array_equal(chain.outputs(1)[0], chain.outputs(0)[0])
    chain.add("tree", 0.1, params={"max_depth": 3}, repeat=100)
    reference = GradientBoostingClassifier(n_estimators=100, max_depth=3, learning_rate=0.1, random_state=0)
    reference.fit(X[:427], y[:427])
    np.testing.assert_allclose(chain.predict_proba(frame.iloc[427:])[:, 1],
                               reference.predict_proba(X[427:])[:, 1], rtol=0, atol=1e-9)


@pytest.mark.parametrize("loss", ["squared", "absolute"])
def test_a_mean_stage_after_the_start_adds_zero_for_regression_losses(loss):
    frame = load_diabetes(as_frame=True).frame
    chain = stages.Chain(frame, "target", stages.KFold(folds=3, seed=0), loss=loss)
    chain.add("mean")
    assert all(np.array_equal(a, b) for a, b in zip(chain.outputs(1), chain.outputs(0), strict=True))


@pytest.fixture(scope="module")
def fair_knn():
    """Return the fair data and a chain of linear + k-NN on it (integer-valued features: many ties)."""
    frame = fair_data.load_pandas().data
    chain = stages.Chain(frame, "affairs", stages.Holdout(fraction=0.25, seed=1), seed=7)
    chain.add("linear")
    chain.add("knn", 0.5)
    return frame, chain


def test_knn_predictions_do_not_depend_on_how_rows_are_batched(fair_knn):
    # The case: 35 % of rows tie at the 10th neighbour's distance; the brute-force search
    # broke the ties differently per batch, and 106 of 1,592 validation rows changed (by up to 2.52).
    frame, chain = fair_knn
    fitted = chain.fitted()
    rows = frame.iloc[:300]
    whole = fitted.predict(rows)
    for size in (1, 3):
        batched = np.concatenate([fitted.predict(rows.iloc[i:i + size]) for i in range(0, len(rows), size)])
        assert np.array_equal(batched, whole)
    # the cached validation output is what a fresh predict gives
    valid_rows = frame.iloc[chain.layout.order[chain.layout.valid]]
    assert np.array_equal(fitted.predict(valid_rows), chain.outputs()[0][chain.layout.valid, 0])


def test_tied_neighbours_are_taken_in_the_order_of_their_row(fair_knn):
    _, chain = fair_knn
    model = chain.stages[1].learners[0]
    queries = model.design.transform(chain.matrix[:200])
    positions, distances = nearest(model.estimator, model.matrix, queries, 10, 2.0)
    # reference: every squared distance from scratch (column by column), then a sort by (distance
    # to 9 decimals, row position)
    full = np.zeros((len(queries), len(model.matrix)))
    for j in range(queries.shape[1]):
        full += (queries[:, j, None] - model.matrix[None, :, j]) ** 2
    key, tied = np.round(full, 9), 0
    for i in range(len(queries)):
        ranked = np.lexsort((np.arange(len(model.matrix)), key[i]))[:10]
        assert positions[i].tolist() == ranked.tolist()
        np.testing.assert_allclose(distances[i], np.sqrt(full[i, ranked]), rtol=0, atol=1e-12)
        tied += int(np.sum(key[i] == key[i, ranked[-1]]) > np.sum(key[i, ranked] == key[i, ranked[-1]]))
    assert tied > 20  # ties at the 10th distance are common here, and were broken by position


def test_knn_without_ties_equals_scikit_learn_whatever_the_batch():
    # Reference: KNeighborsRegressor on the same standardised design (no ties in diabetes' features)
    from sklearn.neighbors import KNeighborsRegressor
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X, y = load_diabetes(return_X_y=True)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(10)]).assign(y=y)
    chain = stages.Chain(frame, "y", stages.AllRows())
    chain.add("knn", params={"n_neighbors": 7, "weights": "distance"})
    model = chain.stages[0].learners[0]
    residual = y - y.mean()
    expected = make_pipeline(StandardScaler(), KNeighborsRegressor(n_neighbors=7, weights="distance")).fit(X, residual)
    np.testing.assert_allclose(model.predict(X), expected.predict(X), rtol=0, atol=1e-9)
    np.testing.assert_array_equal(np.concatenate([model.predict(X[i:i + 1]) for i in range(40)]), model.predict(X[:40]))
