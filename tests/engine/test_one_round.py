"""Many hist_tree stages grown as rounds of one kept booster, and predicted in numpy: the same bits as a
fresh one-round LightGBM fit per stage, and as LightGBM's own boosting of the same trees."""

from __future__ import annotations

import lightgbm
import numpy as np
import pandas as pd
import pytest

import stages
from stages.kinds import one_round
from stages.kinds.one_tree import OneTree, read_tree


def _chain(frame, fast, monkeypatch, validation=None, repeat=25, params=None):
    with monkeypatch.context() as patch:
        if not fast:
            patch.setattr(one_round, "can_grow", lambda *args: False)
        chain = stages.Chain(frame, "target", validation or stages.Holdout(fraction=0.25, seed=0), seed=5)
        chain.add("hist_tree", 0.1, params=params or {"max_depth": 3}, repeat=repeat)
    return chain


def _texts(chain):
    return [s.learners[0].booster.model_to_string() for s in chain.stages]


@pytest.mark.parametrize("validation", [stages.Holdout(fraction=0.25, seed=0), stages.KFold(folds=3, seed=0),
                                        stages.AllRows()])
def test_kept_booster_stages_equal_fresh_one_round_fits(diabetes_frame, monkeypatch, validation):
    fresh = _chain(diabetes_frame, False, monkeypatch, validation, repeat=10)
    kept = _chain(diabetes_frame, True, monkeypatch, validation, repeat=10)
    for a, b in zip(fresh.stages, kept.stages, strict=True):
        for x, y in zip(a.outputs, b.outputs, strict=True):
            assert np.array_equal(x, y)
    assert _texts(fresh) == _texts(kept)          # the saved model text too, byte for byte
    assert fresh.table().drop(columns="seconds").equals(kept.table().drop(columns="seconds"))


def test_the_kept_booster_is_used(diabetes_frame, monkeypatch):
    calls = []
    real = one_round.grow_round
    monkeypatch.setattr(one_round, "grow_round", lambda *a: calls.append(1) or real(*a))
    _chain(diabetes_frame, True, monkeypatch, repeat=5)
    assert len(calls) == 5


def test_a_chain_of_hist_tree_stages_is_lightgbms_own_boosting(diabetes_frame, monkeypatch):
    # LightGBM boosting 40 rounds at learning rate 0.1 from the same start (init_score) grows the
    # same trees: its training score (init + each shrunk tree, in order) is the chain's output
    chain = _chain(diabetes_frame, True, monkeypatch, stages.AllRows(), repeat=40)
    native = chain.stages[0].learners[0].params
    settings = {k: v for k, v in native.items() if k not in ("seed",)}
    start = np.full(len(chain.y), chain.starts[0][0])
    train = lightgbm.Dataset(chain.matrix, chain.y, init_score=start, params=settings)
    booster = lightgbm.train({**settings, "learning_rate": 0.1}, train, num_boost_round=40, keep_training_booster=True)
    assert np.array_equal(one_round.training_score(booster), chain.outputs()[0][:, 0])


def _tree_frame(seed=0, n=3000):
    X, y = _tree_data(seed, n)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
    frame["target"] = y
    return frame


@pytest.mark.parametrize("params", [{"max_depth": 3}, {"max_depth": 4, "zero_as_missing": True}])
def test_validation_rows_read_from_lightgbms_validation_score_equal_predicting_them(monkeypatch, params):
    # NaN, zeros and values LightGBM reads as zero in the validation rows: the kept booster's
    # validation score (the rows binned with the fitting rows' bins) gives the bits the numpy walk
    # and LightGBM's predict give (the fresh one-round fits predict them)
    frame = _tree_frame()
    fresh = _chain(frame, False, monkeypatch, repeat=15, params=params)
    walked = []
    real = OneTree.predict
    monkeypatch.setattr(OneTree, "predict", lambda self, X: walked.append(len(X)) or real(self, X))
    kept = _chain(frame, True, monkeypatch, repeat=15, params=params)
    assert walked == []                                      # no stage walked the validation rows
    for a, b in zip(fresh.stages, kept.stages, strict=True):
        assert np.array_equal(a.outputs[0], b.outputs[0])
    assert _texts(fresh) == _texts(kept)


def test_validation_rows_not_told_apart_are_predicted(monkeypatch):
    # when the change in LightGBM's validation score does not name the leaves, the tree predicts
    # those rows (the numpy walk): the same bits either way
    frame = _tree_frame(seed=1)
    fresh = _chain(frame, False, monkeypatch, repeat=8)
    real = one_round.RunningScore.last_tree
    monkeypatch.setattr(one_round.RunningScore, "last_tree",
                        lambda self, tree, out=None: real(self, tree, out) if self.index == 0 else None)
    walked = []
    predict = OneTree.predict
    monkeypatch.setattr(OneTree, "predict", lambda self, X: walked.append(len(X)) or predict(self, X))
    kept = _chain(frame, True, monkeypatch, repeat=8)
    assert walked == [len(frame) - kept.layout.n_train] * 8
    for a, b in zip(fresh.stages, kept.stages, strict=True):
        assert np.array_equal(a.outputs[0], b.outputs[0])


def test_a_holdout_chain_is_lightgbm_train_with_the_validation_rows_as_valid_set(monkeypatch):
    # lightgbm.train with valid_sets keeps the validation rows' score itself (init + each shrunk
    # tree, in order): the chain's output on those rows is that score, bit for bit
    frame = _tree_frame(seed=2)
    chain = _chain(frame, True, monkeypatch, repeat=30)
    settings = {k: v for k, v in chain.stages[0].learners[0].params.items() if k != "seed"}
    n_train, start = chain.layout.n_train, chain.starts[0][0]
    X, y = chain.matrix, chain.y
    train = lightgbm.Dataset(X[:n_train], y[:n_train], init_score=np.full(n_train, start), params=settings)
    valid = train.create_valid(X[n_train:], y[n_train:], init_score=np.full(len(y) - n_train, start))
    booster = lightgbm.train({**settings, "learning_rate": 0.1}, train, num_boost_round=30, valid_sets=[valid],
                             keep_training_booster=True)
    output = chain.outputs()[0][:, 0]
    assert np.array_equal(one_round.read_score(booster, 1), output[n_train:])
    assert np.array_equal(one_round.read_score(booster, 0), output[:n_train])


@pytest.mark.parametrize("params", [{"max_depth": 3, "subsample": 0.5}, {"max_depth": 2, "colsample_bytree": 0.5},
                                    {"max_depth": 3, "extra_trees": True}])
def test_stages_that_draw_at_random_keep_the_one_round_fit(diabetes_frame, monkeypatch, params):
    calls = []
    monkeypatch.setattr(one_round, "grow_round", lambda *a: calls.append(1))
    _chain(diabetes_frame, True, monkeypatch, repeat=2, params=params)
    assert calls == []


def test_other_losses_keep_the_one_round_fit(cancer_frame, monkeypatch):
    calls = []
    monkeypatch.setattr(one_round, "grow_round", lambda *a: calls.append(1))
    chain = stages.Chain(cancer_frame, "target", seed=0)
    chain.add("hist_tree", 0.5, repeat=2)
    assert calls == []


def _tree_data(seed=0, n=3000):
    rng = np.random.RandomState(seed)
    X = rng.normal(size=(n, 4))
    X[rng.rand(n) < 0.1, 0] = np.nan
    X[rng.rand(n) < 0.2, 1] = 0.0
    X[rng.rand(n) < 0.05, 1] = 1e-40          # read as zero by LightGBM
    X[rng.rand(n) < 0.1, 2] = np.nan
    y = np.nan_to_num(X[:, 0]) * 2 + (X[:, 1] == 0) * 1.5 + np.nan_to_num(X[:, 2]) + rng.normal(size=n) * 0.1
    return X, y


@pytest.mark.parametrize("settings", [{}, {"zero_as_missing": True}, {"use_missing": False}, {"max_depth": 6}])
def test_numpy_prediction_is_lightgbms_to_the_bit(settings):
    X, y = _tree_data()
    params = {"verbosity": -1, "num_leaves": 31, "min_data_in_leaf": 5, "deterministic": True, **settings}
    booster = lightgbm.train(params, lightgbm.Dataset(X, y), num_boost_round=1)
    tree = read_tree(booster.model_to_string())
    assert isinstance(tree, OneTree)
    other, _ = _tree_data(seed=1)              # rows the tree never saw, NaN and zeros included
    for rows in (X, other, other[::3]):
        assert np.array_equal(tree.predict(rows), booster.predict(rows, raw_score=True))


def test_trees_numpy_cannot_read_keep_lightgbms_predict():
    rng = np.random.RandomState(0)
    X = np.column_stack([rng.randint(0, 5, size=500), rng.normal(size=500)]).astype(float)
    y = X[:, 0] + rng.normal(size=500)
    categorical = lightgbm.train({"verbosity": -1}, lightgbm.Dataset(X, y, categorical_feature=[0]), 1)
    assert read_tree(categorical.model_to_string()) is None
    two = lightgbm.train({"verbosity": -1}, lightgbm.Dataset(X, y), 2)
    assert read_tree(two.model_to_string()) is None


def test_leaf_values_too_close_to_tell_apart_are_predicted_instead():
    before = np.array([1e6, 1e6, 0.0])
    leaves = np.array([0.5, 0.5 + 1e-12])
    assert one_round.leaf_values(before, before + 0.5, leaves) is None
    before = np.array([1.0, 2.0, 0.0])
    assert np.array_equal(one_round.leaf_values(before, np.array([1.5, 2.75, 0.5]), np.array([0.5, 0.75])),
                          [0.5, 0.75, 0.5])
    # a change that is no leaf value (not LightGBM's sum of one tree) is told, not guessed
    assert one_round.leaf_values(before, np.array([1.5, 2.6, 0.5]), np.array([0.5, 0.75])) is None
