"""Every kind that converts: the exported model in onnxruntime predicts what the chain predicts.

The rows scored are new: missing values in every feature and a level never seen in training.
Where the graph is float64 throughout, the outputs equal ``predict`` to 1e-9 relative (to the
larger of the value and the target's spread); a ``sklearn:`` stage whose skl2onnx graph is
float32 is within 1e-5 of the target's spread.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from onnx_support import relative_gap, run_onnx

import stages

FLOAT64_KINDS = [
    ("mean", {}),
    ("linear", {}),
    ("ridge", {"alpha": 3.0}),
    ("lasso", {"alpha": 0.05}),
    ("tree", {"max_depth": 4}),
    ("hist_tree", {"max_depth": 3}),
    ("forest", {"n_estimators": 15}),
    ("extra_trees", {"n_estimators": 15}),
    ("lightgbm", {"n_estimators": 30, "num_leaves": 7}),
    ("knn", {"n_neighbors": 7}),
    ("knn", {"n_neighbors": 5, "weights": "distance", "p": 1}),
    ("spline", {"n_knots": 5}),
    ("sklearn:sklearn.linear_model.HuberRegressor", {}),
    ("sklearn:sklearn.neural_network.MLPRegressor", {"max_iter": 200, "hidden_layer_sizes": [8]}),
    ("sklearn:sklearn.ensemble.RandomForestRegressor", {"n_estimators": 5, "max_depth": 4}),
    ("sklearn:sklearn.linear_model.ElasticNet", {"alpha": 0.05}),
    ("sklearn:sklearn.ensemble.GradientBoostingRegressor", {"n_estimators": 20}),
]


def exported(frame, target, stages_to_add, tmp_path, loss=None):
    other = "hit" if target == "y" else "y"
    chain = stages.Chain(frame, target, stages.Holdout(fraction=0.25, seed=0), loss, seed=0, ignore=[other])
    for kind, shrinkage, params in stages_to_add:
        chain.add(kind, shrinkage, params=params)
    chain.save(tmp_path / "c.chain")
    fitted = stages.load(tmp_path / "c.chain")
    report = fitted.to_onnx(tmp_path / "c.onnx")
    return fitted, report


def predicted(fitted, rows):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fitted.predict(rows), (fitted.predict_proba(rows)[:, 1] if fitted.task == "binary" else None)


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
@pytest.mark.parametrize(("kind", "params"), FLOAT64_KINDS, ids=[f"{k}-{i}" for i, (k, _) in enumerate(FLOAT64_KINDS)])
def test_each_kind_predicts_as_the_chain_to_1e_9_on_rows_with_missing_and_unseen_values(
        kind, params, train_frame, new_rows, tmp_path):
    start = [] if kind == "mean" else [("linear", 1.0, {})]
    fitted, report = exported(train_frame, "y", [*start, (kind, 0.5, params)], tmp_path)
    assert report.precision == "float64" and all(s.precision == "float64" for s in report.stages)
    got = run_onnx(tmp_path / "c.onnx", new_rows, fitted.schema)["prediction"]
    want, _ = predicted(fitted, new_rows)
    assert relative_gap(got, want, float(train_frame["y"].std())) <= 1e-9
    assert report.share_of_tolerance <= 1.0


@pytest.mark.parametrize("kind", ["logistic", "tree", "lightgbm", "forest", "knn", "spline"])
def test_binary_chains_give_the_same_probabilities_and_classes(kind, train_frame, new_rows, tmp_path):
    fitted, report = exported(train_frame, "hit", [("logistic", 1.0, {}), (kind, 0.5, {})], tmp_path, "logloss")
    out = run_onnx(tmp_path / "c.onnx", new_rows, fitted.schema)
    labels, probability = predicted(fitted, new_rows)
    assert np.max(np.abs(out["probability"] - probability)) <= 1e-9
    assert out["prediction"].dtype == np.int64 and np.array_equal(out["prediction"], labels)


def test_a_float32_operator_stays_within_1e_5_of_the_spread_and_says_which(train_frame, new_rows, tmp_path):
    # skl2onnx writes SVR as ai.onnx.ml SVMRegressor, which onnxruntime implements for float32 only
    fitted, report = exported(train_frame, "y", [("linear", 1.0, {}), ("sklearn:sklearn.svm.SVR", 1.0, {})], tmp_path)
    assert report.precision == "float32"
    assert "SVMRegressor" in report.stages[1].note and report.stages[0].precision == "float64"
    got = run_onnx(tmp_path / "c.onnx", new_rows, fitted.schema)["prediction"]
    want, _ = predicted(fitted, new_rows)
    assert np.max(np.abs(got - want)) <= 1e-5 * float(fitted.start_scores["train"]["rmse"])


def test_a_retired_tree_operator_beside_our_tree_stages_is_refused_naming_the_stage(train_frame, tmp_path):
    # skl2onnx writes AdaBoostRegressor with TreeEnsembleRegressor, retired in ai.onnx.ml opset 5,
    # which the chain's own tree stage needs: one model cannot import both opsets
    from stages.errors import ExportError

    with pytest.raises(ExportError, match=r"stage 2 \(sklearn:sklearn.ensemble.AdaBoostRegressor\).*TreeEnsembleRegressor"):
        exported(train_frame, "y", [("linear", 1.0, {}), ("sklearn:sklearn.ensemble.AdaBoostRegressor", 0.5, {}),
                                    ("tree", 0.5, {})], tmp_path)
    assert not (tmp_path / "c.onnx").exists()


def test_knn_on_tied_distances_follows_the_kinds_tie_rule(tmp_path):
    # integer features: many fitting rows lie at exactly the k-th distance
    from stages.bridges.onnx.neighbours import tie_decimals
    from stages.errors import ExportError

    rng = np.random.RandomState(0)
    frame = pd.DataFrame({"a": rng.randint(0, 4, 400).astype(float), "b": rng.randint(0, 3, 400).astype(float)})
    frame["y"] = frame["a"] + frame["b"] + rng.normal(size=400)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.25, seed=0))
    chain.add("knn", 1.0, params={"n_neighbors": 7})
    if tie_decimals() is None:  # the kind breaks ties as its search meets the rows: no graph can follow that
        with pytest.raises(ExportError, match=r"stage 1 \(knn\)"):
            chain.fitted().to_onnx(tmp_path / "knn.onnx")
        return
    fitted = chain.fitted()
    fitted.to_onnx(tmp_path / "knn.onnx")
    rows = frame.drop(columns="y").iloc[::7]
    got = run_onnx(tmp_path / "knn.onnx", rows, fitted.schema)["prediction"]
    assert relative_gap(got, fitted.predict(rows), 1.0) <= 1e-9
