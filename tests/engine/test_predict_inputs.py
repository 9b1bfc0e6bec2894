"""Predicting a fitted chain gives each learner exactly what its own ``predict`` would read."""

from __future__ import annotations

import numpy as np
from sklearn.datasets import load_wine

import stages


def _bare_raw(fitted: stages.FittedChain, matrix: np.ndarray) -> np.ndarray:
    # each stage's learner called on the float64 matrix as scikit-learn documents it (its trees
    # and forests cast to float32 themselves: sklearn.tree.DecisionTreeRegressor.predict)
    raw = np.tile(np.asarray(fitted.start, dtype=np.float64).reshape(1, -1), (len(matrix), 1))
    for stage in fitted.stages:
        out = np.asarray(stage.learner.predict(matrix[:, list(stage.feature_index)]), dtype=np.float64)
        raw += stage.scale * out.reshape(len(matrix), -1)
    return raw


def test_trees_and_forests_sharing_one_float32_copy_predict_bit_for_bit(diabetes_frame):
    # the diabetes data (Efron et al. 2004, shipped with scikit-learn); features of a subset too
    chain = stages.Chain(diabetes_frame, "target", seed=1)
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 3})
    chain.add("forest", 0.5, params={"n_estimators": 20}, features=["bmi", "bp", "s5"])
    chain.add("extra_trees", 0.5, params={"n_estimators": 10})
    fitted = chain.fitted()
    matrix = fitted.encode(diabetes_frame.drop(columns="target"))
    assert np.array_equal(fitted.raw_from_matrix(matrix), _bare_raw(fitted, matrix))
    each = fitted.raw_after_each_stage(matrix)
    assert np.array_equal(each[:, -1], fitted.raw_from_matrix(matrix))


def test_per_class_trees_predict_bit_for_bit():
    # the wine data (Forina et al., UCI; shipped with scikit-learn), three classes
    frame = load_wine(as_frame=True).frame
    frame["target"] = frame["target"].map({0: "a", 1: "b", 2: "c"})
    chain = stages.Chain(frame, "target", seed=1)
    chain.add("tree", 0.1, params={"max_depth": 3}, repeat=3)
    fitted = chain.fitted()
    matrix = fitted.encode(frame.drop(columns="target"))
    assert np.array_equal(fitted.raw_from_matrix(matrix), _bare_raw(fitted, matrix))
