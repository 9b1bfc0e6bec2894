"""Multiclass chains behave as binary ones do: task and class order, splits, every kind, every chain operation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import minimize_scalar
from scipy.special import softmax
from sklearn.datasets import load_wine
from sklearn.model_selection import cross_val_score

import stages
from stages.bridges.estimator import ChainClassifier, wrap_fitted
from stages.errors import DataError, StageSpecError, ValidationSpecError
from stages.kinds.per_class import PerClass

CULTIVARS = np.array(["barolo", "grignolino", "barbera"])


@pytest.fixture(scope="module")
def wine_frame() -> pd.DataFrame:
    """Return the wine data (Forina et al., UCI, shipped with scikit-learn) with the cultivar as text."""
    X, y = load_wine(return_X_y=True, as_frame=True)
    frame = X.rename(columns=lambda c: c.replace("/", "_"))
    frame["cultivar"] = CULTIVARS[y]
    return frame


def _chain(frame: pd.DataFrame, validation=None, **options) -> stages.Chain:
    return stages.Chain(frame, "cultivar", validation or stages.Holdout(fraction=0.25, seed=0), **options)


# ----------------------------------------------------------------------------- task and classes


def test_classes_are_stored_in_a_fixed_order_numbers_by_value_then_text():
    x = np.arange(60.0)
    numbers = pd.DataFrame({"x": x, "band": ["10", "2", "9"] * 20})
    assert _classes(numbers, "band", task="multiclass") == ("2", "9", "10")
    floats = pd.DataFrame({"x": x, "band": [3.0, 1.0, 2.0] * 20})
    assert _classes(floats, "band", task="multiclass") == ("1", "2", "3")  # whole numbers without ".0"
    text = pd.DataFrame({"x": x, "band": ["b", "C", "a"] * 20})
    assert _classes(text, "band") == ("C", "a", "b")  # sorted as text (upper case first)
    ordered = pd.Categorical(["low", "high", "mid"] * 20, categories=["low", "mid", "high"], ordered=True)
    assert _classes(pd.DataFrame({"x": x, "band": ordered}), "band") == ("low", "mid", "high")


def _classes(frame: pd.DataFrame, target: str, **options) -> tuple[str, ...]:
    return stages.Chain(frame, target, stages.Holdout(seed=0), **options).classes


def test_numbers_stay_a_regression_unless_the_task_says_multiclass():
    frame = pd.DataFrame({"x": np.arange(60.0), "band": [1, 2, 3] * 20})
    assert stages.Chain(frame, "band").task == "regression"
    chain = stages.Chain(frame, "band", task="multiclass")
    assert chain.task == "multiclass" and chain.loss.name == "logloss" and chain.loss.outputs == 3
    with pytest.raises(DataError, match="target 'band' has 2 classes; a multiclass target has 3 or more"):
        stages.Chain(frame.assign(band=[1, 2] * 30), "band", task="multiclass")
    with pytest.raises(StageSpecError, match="multiclass .use logloss"):
        stages.Chain(frame, "band", task="multiclass", loss="squared")


def test_a_class_missing_from_the_fitting_rows_is_an_error_naming_it(wine_frame):
    frame = wine_frame.copy()
    frame["part"] = "train"
    frame.loc[frame.index[:5], "cultivar"] = "nebbiolo"
    frame.loc[frame.index[:5], "part"] = "valid"
    frame.loc[frame.index[5:40], "part"] = "valid"
    with pytest.raises(DataError, match="class 'nebbiolo' of target 'cultivar' has no row among the train rows: "
                                        "its 5 rows are all in the validation or test part"):
        _chain(frame.drop(columns=[]), stages.SplitColumn("part"))
    one = wine_frame.copy()
    one.loc[one.index[0], "cultivar"] = "nebbiolo"
    with pytest.raises(ValidationSpecError, match="at least 5 rows of each class; class 'nebbiolo' has 1"):
        _chain(one, stages.KFold(folds=5, seed=0))
    with pytest.raises(DataError, match="class 'nebbiolo' .* has no row among the train rows of fold [1-5]: "
                                        "its 1 row is held out in that fold"):
        _chain(one, stages.KFold(folds=5, seed=0, stratify=False))


def test_holdout_and_kfold_are_stratified_by_class(wine_frame):
    chain = _chain(wine_frame)
    counts = np.bincount(chain.y[chain.layout.valid].astype(int), minlength=3)
    overall = np.bincount(chain.y.astype(int), minlength=3)
    # each class's share of the validation rows is its share of all rows, to one row
    assert np.all(np.abs(counts - overall * chain.layout.n_valid / len(chain.y)) < 1)
    kfold = _chain(wine_frame, stages.KFold(folds=4, seed=0))
    for track in kfold.layout.tracks[1:]:
        held = np.bincount(kfold.y[track.evaluate].astype(int), minlength=3)
        assert np.all(np.abs(held - overall / 4) < 1)  # StratifiedKFold: each fold within one row of its share


# ----------------------------------------------------------------------------- every kind

KINDS = [
    ("mean", 1.0, {}), ("tree", 0.3, {"max_depth": 2}), ("linear", 0.5, {}), ("ridge", 0.5, {"alpha": 10.0}),
    ("lasso", 0.5, {"alpha": 0.01}), ("logistic", 1.0, {}), ("lightgbm", 1.0, {"n_estimators": 10}),
    ("hist_tree", 0.5, {"max_depth": 2}), ("forest", 0.5, {"n_estimators": 10}),
    ("extra_trees", 0.5, {"n_estimators": 10}), ("knn", 0.5, {"n_neighbors": 5}), ("spline", 0.5, {"n_knots": 4}),
    ("sklearn:sklearn.svm.SVR", 0.5, {}),
]


@pytest.mark.parametrize("kind,shrinkage,params", KINDS, ids=[k[0] for k in KINDS])
def test_every_kind_fits_k_outputs_that_predict_and_round_trip_as_cached(wine_frame, tmp_path, kind, shrinkage,
                                                                       params):
    chain = _chain(wine_frame)
    chain.add("logistic", params={"C": 0.05}) if kind != "logistic" else None
    chain.add(kind, shrinkage, params=params)
    output = chain.outputs()[0]
    assert output.shape == (len(chain.y), 3) and np.isfinite(output).all()
    fitted = chain.fitted()
    valid_rows = wine_frame.iloc[chain.layout.order[chain.layout.valid]]
    # the chain's cached output on its validation rows is what prediction computes, bit for bit
    np.testing.assert_array_equal(fitted.predict_raw(valid_rows), output[chain.layout.valid])
    chain.save(tmp_path / "c.chain")
    loaded = stages.load(tmp_path / "c.chain")
    np.testing.assert_array_equal(loaded.predict_proba(valid_rows), fitted.predict_proba(valid_rows))
    assert list(loaded.predict(valid_rows)) == list(fitted.predict(valid_rows))


def test_one_output_kinds_fit_one_learner_per_class_and_the_libraries_fit_all_at_once(wine_frame):
    chain = _chain(wine_frame)
    chain.add("tree", 0.3)
    chain.add("sklearn:sklearn.tree.DecisionTreeRegressor", 0.3, params={"max_depth": 2})
    chain.add("forest", 0.5, params={"n_estimators": 5})
    chain.add("lightgbm", params={"n_estimators": 5})
    trees, sklearn_stage, forest, booster = (s.learners[0] for s in chain.stages)
    assert isinstance(trees, PerClass) and len(trees.learners) == 3
    assert len(sklearn_stage.estimator) == 3
    assert forest.n_outputs_ == 3 and forest.estimators_[0].tree_.n_outputs == 3
    assert booster.booster.num_model_per_iteration() == 3


def test_a_stage_shares_one_step_over_its_k_outputs_the_best_on_rows_the_learner_did_not_fit(wine_frame):
    chain = _chain(wine_frame)
    chain.add("knn", 1.0, params={"n_neighbors": 3})
    stage = chain.stages[0]
    assert stage.step_rule == "cross-fit 5 folds" and stage.step > 0
    # the step minimises the multinomial log loss along the learner's out-of-fold output: the
    # cross-fit draws its folds from the stream after the fit, so rebuild them the same way
    from stages.kinds import get_kind
    from stages.kinds.base import FitRequest
    from stages.steps import cross_fit_predictions

    rng = np.random.RandomState()
    rng.set_state(stage.rng_before[0])
    fit = chain.layout.train
    raw, y = chain.outputs(0)[0][fit], chain.y[fit]
    request = FitRequest(X=chain.matrix[fit], columns=chain.schema.columns, residual=chain.loss.residual(y, raw),
                         y=y, raw=raw, loss=chain.loss, task="multiclass", random_state=rng)
    kind = get_kind("knn")
    kind.fit(request, stage.params)
    held = cross_fit_predictions(kind, stage.params, request)
    best = minimize_scalar(chain.loss.step_objective(y, raw, held), bounds=(0, 50), method="bounded",
                           options={"xatol": 1e-10})
    assert stage.step == pytest.approx(best.x, rel=1e-5)


# ----------------------------------------------------------------------------- chain operations


def test_step_back_drop_trim_undo_and_refit_give_the_exact_earlier_states(wine_frame):
    chain = _chain(wine_frame)
    chain.add("tree", 0.3, params={"max_depth": 2}, repeat=3)
    before = [o.copy() for o in chain.outputs()]
    chain.add("lightgbm", params={"n_estimators": 5})
    chain.step_back()
    assert all(np.array_equal(a, b) for a, b in zip(before, chain.outputs(), strict=True))
    chain.add("lightgbm", params={"n_estimators": 5})
    again = [o.copy() for o in chain.outputs()]
    chain.drop(2)
    assert len(chain) == 3
    chain.undo()
    assert all(np.array_equal(a, b) for a, b in zip(again, chain.outputs(), strict=True))
    chain.trim(2)
    assert len(chain) == 2
    fresh = _chain(wine_frame)
    fresh.add_specs(chain.specs())
    assert all(np.array_equal(a, b) for a, b in zip(fresh.outputs(), chain.outputs(), strict=True))


def test_audition_grow_references_and_the_locked_test_part(wine_frame):
    chain = _chain(wine_frame, stages.Holdout(fraction=0.25, seed=0, test_fraction=0.15))
    chain.add("logistic", params={"C": 0.1})
    candidates = chain.audition([{"kind": "tree", "shrinkage": 0.3}, {"kind": "hist_tree", "shrinkage": 0.3}])
    kept = chain.keep(candidates[0])
    added = _chain(wine_frame, stages.Holdout(fraction=0.25, seed=0, test_fraction=0.15))
    added.add("logistic", params={"C": 0.1})
    added.add("tree", 0.3)
    assert np.array_equal(kept.outputs[0], added.outputs()[0])
    result = chain.grow("tree", 0.3, params={"max_depth": 2}, max_stages=20, patience=2)
    assert result.grown >= 1 and len(chain) == 2 + result.kept
    references = chain.references(rounds=50, early_stopping_rounds=5)
    assert list(references["model"]) == ["linear alone", "LightGBM, default parameters"]
    assert np.isfinite(references["valid_logloss"]).all()
    with pytest.raises(Exception, match="locked"):
        chain.residuals("test")
    tests = chain.reveal_test()
    assert len(tests) == len(chain) + 1 and set(tests[-1]) >= {"logloss", "accuracy", "auc", "brier"}
    assert chain.confusion("test").to_numpy().sum() == chain.layout.n_test


def test_residuals_fitted_values_and_predictions_follow_the_class_order(wine_frame):
    chain = _chain(wine_frame)
    chain.add("tree", 0.5, params={"max_depth": 2}, repeat=2)
    probability = chain.fitted_values("valid")
    assert probability.shape == (chain.layout.n_valid, 3)
    np.testing.assert_allclose(probability.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    y = chain.part_targets("valid").astype(int)
    residuals = chain.residuals("valid")
    np.testing.assert_allclose(residuals, np.eye(3)[y] - probability, rtol=0, atol=1e-15)
    barolo = chain.classes.index("barolo")
    np.testing.assert_array_equal(chain.residuals("valid", of_class="barolo"), residuals[:, barolo])
    with pytest.raises(StageSpecError, match="'nebbiolo' is not one of the classes of 'cultivar'"):
        chain.residuals("valid", of_class="nebbiolo")
    counts, edges = chain.histogram()
    assert counts["valid"].sum() == chain.layout.n_valid and edges[0] >= 0  # 1 - p of each row's class
    rows = wine_frame.iloc[chain.layout.order[chain.layout.valid]]
    fitted = chain.fitted()
    np.testing.assert_array_equal(fitted.predict_proba(rows), probability)
    assert list(fitted.predict(rows)) == list(np.asarray(chain.classes)[probability.argmax(1)])
    np.testing.assert_allclose(softmax(fitted.predict_raw(rows), axis=1), probability, rtol=0, atol=1e-15)


def test_chain_classifier_fits_multiclass_targets(wine_frame):
    X = wine_frame.drop(columns="cultivar")
    y = wine_frame["cultivar"]
    model = ChainClassifier(stages=[{"kind": "logistic"}, {"kind": "tree", "shrinkage": 0.3, "repeat": 3}],
                            random_state=0).fit(X, y)
    assert list(model.classes_) == ["barbera", "barolo", "grignolino"]
    probability = model.predict_proba(X)
    assert probability.shape == (len(X), 3)
    assert list(model.predict(X)) == list(model.classes_[probability.argmax(1)])
    assert model.decision_function(X).shape == (len(X), 3)
    again = wrap_fitted(model.chain_)
    np.testing.assert_array_equal(again.predict_proba(X), probability)
    assert list(again.classes_) == [0, 1, 2]  # the estimator's chain is fit on the codes of classes_
    scores = cross_val_score(ChainClassifier(random_state=0), X, y, cv=3, scoring="accuracy")
    assert scores.min() > 0.85
