"""Grow: stages of one kind until validation stops improving, against scikit-learn's early stopping."""

from __future__ import annotations

import threading

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import make_friedman1
from sklearn.ensemble import GradientBoostingRegressor
from sklearn.metrics import mean_squared_error
from sklearn.model_selection import train_test_split

import stages
from stages.errors import StageSpecError

SEED = 0
FRACTION = 0.2


def _gbr_split_chain(X: np.ndarray, y: np.ndarray) -> tuple[stages.Chain, np.ndarray, np.ndarray]:
    """Return a chain on GradientBoostingRegressor's own early-stopping split, and its validation rows.

    With ``n_iter_no_change`` set, GradientBoostingRegressor.fit (sklearn/ensemble/_gb.py)
    holds out ``train_test_split(X, y, random_state=random_state, test_size=validation_fraction)``
    (no stratification for a regressor) and fits on the rest in that order; the chain gets
    the same rows, in the same order, through a split column.
    """
    X_fit, X_val, y_fit, y_val = train_test_split(X, y, random_state=SEED, test_size=FRACTION)
    frame = pd.DataFrame(np.vstack([X_fit, X_val]), columns=[f"x{i}" for i in range(X.shape[1])])
    frame["y"] = np.concatenate([y_fit, y_val])
    frame["part"] = ["train"] * len(y_fit) + ["valid"] * len(y_val)
    return stages.Chain(frame, "y", stages.SplitColumn("part"), seed=SEED), X_val, y_val


def _gbr(X, y, patience: int, n_estimators: int = 300) -> GradientBoostingRegressor:
    return GradientBoostingRegressor(
        n_estimators=n_estimators, learning_rate=0.3, max_depth=3, n_iter_no_change=patience,
        validation_fraction=FRACTION, tol=0.0, random_state=SEED,
    ).fit(X, y)


def _friedman():
    # Friedman #1 (Friedman 1991, Multivariate adaptive regression splines), from sklearn.datasets.
    return make_friedman1(n_samples=400, noise=1.0, random_state=0)


def test_grow_with_patience_one_stops_where_gradient_boosting_does():
    # Reference: sklearn.ensemble.GradientBoostingRegressor(n_iter_no_change=1, tol=0).
    # The stopping rules differ in general (next test): scikit-learn continues while the new
    # validation loss beats at least one of the last n_iter_no_change losses (by more than
    # tol; tol=0 here), the chain while some stage of the last `patience` beat the best so
    # far. With one stage of patience both stop at the first stage that is no better than the
    # one before. After stopping, scikit-learn keeps every stage it fit; the chain trims back
    # to its best stage.
    X, y = _friedman()
    chain, X_val, y_val = _gbr_split_chain(X, y)
    seen: list[np.ndarray] = []
    result = chain.grow("tree", 0.3, params={"max_depth": 3}, max_stages=300, patience=1,
                        on_stage=lambda c: seen.append(c.outputs()[0].copy()))
    reference = _gbr(X, y, patience=1)
    assert result.stopped == "patience"
    assert result.grown == reference.n_estimators_ == len(seen)
    n_fit = chain.layout.n_train
    np.testing.assert_allclose(seen[-1][n_fit:, 0], reference.predict(X_val), rtol=0, atol=1e-9)
    # trimmed back to the best stage, which is the one before the stop
    assert result.kept == result.best_row == result.grown - 1 == len(chain)
    staged = list(reference.staged_predict(X_val))
    np.testing.assert_allclose(chain.fitted_values("valid"), staged[result.best_row - 1], rtol=0, atol=1e-9)


def _gbr_stop(losses: list[float], n_iter_no_change: int, tol: float = 0.0) -> int:
    """Return the n_estimators_ scikit-learn's rule gives on a validation-loss curve.

    The loop of BaseGradientBoosting._fit_stages (sklearn/ensemble/_gb.py): stage i is kept
    and boosting goes on while loss_i + tol beats one of the last n_iter_no_change losses.
    """
    history = np.full(n_iter_no_change, np.inf)
    for i, loss in enumerate(losses):
        if np.any(loss + tol < history):
            history[i % n_iter_no_change] = loss
        else:
            return i + 1
    return len(losses)


def test_grow_follows_the_gradient_boosting_curve_and_only_the_stopping_rule_differs():
    X, y = _friedman()
    patience = 5
    reference = _gbr(X, y, patience=patience)
    full, X_val, y_val = _gbr_split_chain(X, y)
    full.grow("tree", 0.3, params={"max_depth": 3}, max_stages=80, patience=None, trim=False)
    mse = [s.valid["rmse"] ** 2 for s in full.scores()[1:]]
    # the chain's validation curve is scikit-learn's, stage for stage (reference: staged_predict)
    theirs = [mean_squared_error(y_val, p) for p in reference.staged_predict(X_val)]
    np.testing.assert_allclose(mse[: len(theirs)], theirs, rtol=1e-9)
    assert _gbr_stop(mse, patience) == reference.n_estimators_
    # the chain's rule on the same curve: `patience` stages in a row no better than the best
    chain, _, _ = _gbr_split_chain(X, y)
    result = chain.grow("tree", 0.3, params={"max_depth": 3}, max_stages=80, patience=patience)
    best = int(np.argmin(mse[: result.grown])) + 1
    assert result.best_row == best == len(chain)
    assert result.grown == best + patience
    assert result.stopped == "patience"
    assert all(m >= mse[best - 1] for m in mse[best:result.grown])
    assert result.grown != reference.n_estimators_  # on this curve the two rules part ways


def _chain(frame) -> stages.Chain:
    return stages.Chain(frame, "y", stages.Holdout(fraction=0.25, seed=1), seed=2)


def test_grown_stages_equal_the_same_stages_added_and_on_stage_is_called_once_per_stage(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    calls: list[int] = []
    result = chain.grow("tree", 0.5, params={"max_depth": 2}, max_stages=40, patience=3,
                        on_stage=lambda c: calls.append(len(c)))
    assert calls == list(range(2, 2 + result.grown))
    assert len(result.curve) == result.grown
    added = _chain(mixed_frame)
    added.add("linear")
    added.add("tree", 0.5, params={"max_depth": 2}, repeat=result.kept)
    for x, y in zip(chain.outputs(), added.outputs(), strict=True):
        assert np.array_equal(x, y)
    # the trim can be undone: back to every stage grown
    if result.kept < result.grown:
        chain.undo()
        assert len(chain) == 1 + result.grown


def test_grow_never_trims_below_the_chain_it_started_from():
    rng = np.random.RandomState(0)
    frame = pd.DataFrame({"a": rng.normal(size=300), "b": rng.normal(size=300)})
    frame["y"] = frame["a"] + 0.5 * frame["b"] + rng.normal(scale=0.5, size=300)
    chain = _chain(frame)
    chain.add("linear")  # the linear model is the truth here: what is left is noise
    chain.add("tree", 1.0, params={"max_depth": None})  # fits the noise: worse than the linear stage alone
    assert chain.best_row() == 1
    result = chain.grow("tree", 1.0, params={"max_depth": None}, max_stages=10, patience=2)
    assert result.stopped == "patience" and result.kept == 0 and result.best_row == 2
    assert len(chain) == 2


def test_a_cancelled_grow_keeps_what_was_grown(mixed_frame):
    chain = _chain(mixed_frame)
    cancel = threading.Event()

    def on_stage(c: stages.Chain) -> None:
        if len(c) == 3:
            cancel.set()

    result = chain.grow("tree", 0.1, params={"max_depth": 2}, max_stages=50, patience=None,
                        cancel=cancel, on_stage=on_stage)
    assert (result.stopped, result.grown, result.kept, len(chain)) == ("cancelled", 3, 3, 3)
    assert result.cancelled
    # cancelled during a fit: the stage in progress is dropped, the ones before it stay
    cancel.clear()

    def progress(fraction: float, message: str) -> None:
        if "stage 2 " in message:
            cancel.set()

    result = chain.grow("tree", 0.1, params={"max_depth": 2}, max_stages=50, progress=progress, cancel=cancel)
    assert (result.stopped, result.grown, len(chain)) == ("cancelled", 1, 4)


def test_grow_stops_at_max_stages_and_refuses_what_it_cannot_judge(mixed_frame):
    chain = _chain(mixed_frame)
    result = chain.grow("tree", 0.1, params={"max_depth": 2}, max_stages=4, patience=10)
    assert (result.stopped, result.grown) == ("max_stages", 4)
    with pytest.raises(StageSpecError, match="patience must be a whole number"):
        chain.grow("tree", patience=0)
    with pytest.raises(StageSpecError, match="has no parameter 'depth'"):
        chain.grow("tree", params={"depth": 2})
    unjudged = stages.Chain(mixed_frame, "y", stages.AllRows())
    with pytest.raises(StageSpecError, match="needs validation rows"):
        unjudged.grow("tree")
    assert unjudged.grow("tree", max_stages=2, patience=None, trim=False).grown == 2
