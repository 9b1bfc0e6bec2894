"""Reference models on the chain's split: the linear model alone and LightGBM with default parameters."""

from __future__ import annotations

import lightgbm as lgb
import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import mean_squared_error

import stages
from stages.data import load_frame
from stages.decide.references import linear_reference
from tui.demo_app import demo_folder

DEMO = demo_folder() / "deliveries.csv"


def _demo_chain(**validation) -> stages.Chain:
    return stages.Chain.from_file(DEMO, target="minutes_late", ignore=["delivery_id", "cargo_out_of_band"],
                                  validation=stages.Holdout(**{"fraction": 0.2, "seed": 0, **validation}), seed=0)


def _rows_by_hand(chain: stages.Chain, frame: pd.DataFrame | None = None) -> tuple[np.ndarray, np.ndarray, list[int]]:
    """Return the features and target in the chain's row order, encoded afresh from ``frame``
    (the chain's data; the demo file by default)."""
    frame = load_frame(DEMO)[0] if frame is None else frame
    frame = frame.iloc[chain.prepared.rows].reset_index(drop=True)
    matrix, _ = chain.schema.encode(frame)
    y = frame[chain.schema.target].to_numpy(dtype=np.float64)
    categorical = [i for i, col in enumerate(chain.schema.columns) if col.role == "categorical"]
    return matrix[chain.layout.order], y[chain.layout.order], categorical


# LightGBM's defaults with the objective of squared loss; seed, quiet and deterministic row-wise
# histograms change no model setting
HAND_PARAMS = {"objective": "regression", "seed": 0, "verbosity": -1, "deterministic": True, "force_row_wise": True}


def test_lightgbm_reference_equals_a_hand_written_lightgbm_fit_on_the_demo_data():
    # Reference: lightgbm.train with its default parameters and early stopping on the same
    # validation rows (lightgbm.early_stopping, 50 rounds of patience, at most 1000 rounds).
    chain = _demo_chain()
    table = chain.references()
    X, y, categorical = _rows_by_hand(chain)
    n = chain.layout.n_train
    assert categorical  # the demo's depot column goes in as a LightGBM category
    train = lgb.Dataset(X[:n], label=y[:n], categorical_feature=categorical)
    valid = lgb.Dataset(X[n:], label=y[n:], reference=train)
    booster = lgb.train(dict(HAND_PARAMS), train, num_boost_round=1000, valid_sets=[valid],
                        callbacks=[lgb.early_stopping(50, verbose=False)])
    predicted = booster.predict(X[n:], num_iteration=booster.best_iteration)
    row = table.set_index("model").loc["LightGBM, default parameters"]
    assert row["valid_rmse"] == pytest.approx(np.sqrt(mean_squared_error(y[n:], predicted)), rel=0, abs=1e-9)
    assert row["best_iteration"] == booster.best_iteration
    fitted = booster.predict(X[:n], num_iteration=booster.best_iteration)
    assert row["train_rmse"] == pytest.approx(np.sqrt(mean_squared_error(y[:n], fitted)), rel=0, abs=1e-9)
    assert list(table.columns) == ["model", "train_rmse", "valid_rmse", "best_iteration", "seconds"]


def test_linear_reference_equals_a_one_stage_linear_chain():
    chain = _demo_chain()
    chain.add("tree", 0.3, params={"max_depth": 2})  # the chain's own stages play no part
    row = linear_reference(chain)
    assert row["model"] == "linear alone"
    linear = _demo_chain()
    linear.add("linear")
    scores = linear.scores()[-1]
    assert row["valid_rmse"] == scores.valid["rmse"]
    assert row["train_rmse"] == scores.train["rmse"]
    assert np.isnan(row["best_iteration"])


def test_the_test_metric_appears_only_once_the_test_part_is_revealed():
    chain = _demo_chain(test_fraction=0.2)
    chain.add("linear")
    assert "test_rmse" not in chain.references(rounds=50)
    chain.reveal_test()
    table = chain.references(rounds=50).set_index("model")
    linear_test = chain.table().iloc[1]["test_rmse"]  # the one-linear-stage chain's test score
    assert table.loc["linear alone", "test_rmse"] == linear_test
    assert np.isfinite(table.loc["LightGBM, default parameters", "test_rmse"])


def test_kfold_lightgbm_reference_is_out_of_fold_with_early_stopping_per_fold(diabetes_frame):
    # Diabetes data shipped with scikit-learn (Efron et al. 2004). Reference: lightgbm.train per
    # fold, early-stopped on that fold, predictions assembled out of fold.
    chain = stages.Chain(diabetes_frame, "target", stages.KFold(folds=4, seed=0), seed=0)
    table = chain.references(lightgbm_params={"num_leaves": 7}).set_index("model")
    X, y, _ = _rows_by_hand(chain, diabetes_frame)
    params = {**HAND_PARAMS, "num_leaves": 7}
    out_of_fold = np.empty(chain.layout.n_train)
    best = []
    for track in chain.layout.tracks[1:]:
        fit, held = track.fit_positions(), track.evaluate
        train = lgb.Dataset(X[fit], label=y[fit])
        booster = lgb.train(dict(params), train, num_boost_round=1000,
                            valid_sets=[lgb.Dataset(X[held], label=y[held], reference=train)],
                            callbacks=[lgb.early_stopping(50, verbose=False)])
        out_of_fold[held] = booster.predict(X[held], num_iteration=booster.best_iteration)
        best.append(booster.best_iteration)
    row = table.loc["LightGBM, default parameters"]
    assert row["valid_rmse"] == pytest.approx(np.sqrt(mean_squared_error(y, out_of_fold)), rel=0, abs=1e-9)
    assert row["best_iteration"] == np.mean(best)
    assert np.isfinite(row["fold_spread"])
    # the full fit runs the mean best iteration on every training row
    full = lgb.train(dict(params), lgb.Dataset(X, label=y), num_boost_round=int(np.rint(np.mean(best))))
    assert row["train_rmse"] == pytest.approx(np.sqrt(mean_squared_error(y, full.predict(X))), rel=0, abs=1e-9)


def test_binary_references_use_logistic_and_lightgbm_binary_objective(cancer_frame):
    # Breast cancer data shipped with scikit-learn (Wisconsin diagnostic, UCI).
    chain = stages.Chain(cancer_frame, "target", stages.Holdout(fraction=0.25, seed=0), seed=0)
    table = chain.references(rounds=200).set_index("model")
    assert "valid_logloss" in table.columns
    logistic = stages.Chain(cancer_frame, "target", stages.Holdout(fraction=0.25, seed=0), seed=0)
    logistic.add("logistic")
    assert table.loc["linear alone", "valid_logloss"] == logistic.scores()[-1].valid["logloss"]
    X, y, _ = _rows_by_hand(chain, cancer_frame)
    n = chain.layout.n_train
    train = lgb.Dataset(X[:n], label=y[:n])
    booster = lgb.train({**HAND_PARAMS, "objective": "binary"}, train, num_boost_round=200,
                        valid_sets=[lgb.Dataset(X[n:], label=y[n:], reference=train)],
                        callbacks=[lgb.early_stopping(50, verbose=False)])
    p = booster.predict(X[n:], num_iteration=booster.best_iteration)
    # log loss by hand (reference: its definition, as sklearn.metrics.log_loss computes it)
    expected = -np.mean(y[n:] * np.log(p) + (1 - y[n:]) * np.log(1 - p))
    assert table.loc["LightGBM, default parameters", "valid_logloss"] == pytest.approx(expected, rel=1e-9)


def test_the_references_report_each_lightgbm_round_and_stop_when_cancelled(diabetes_frame):
    # Diabetes data shipped with scikit-learn (Efron et al. 2004); k-fold: one LightGBM fit per
    # fold track and one on every fitting row, each reported round by round.
    import threading

    from stages.errors import FitCancelled

    chain = stages.Chain(diabetes_frame, "target", stages.KFold(folds=3, seed=0), seed=0)
    heard: list[tuple[float, str]] = []
    chain.references(rounds=40, progress=lambda fraction, detail="": heard.append((fraction, detail)))
    fractions = [f for f, _ in heard]
    assert fractions == sorted(fractions) and fractions[0] >= 0.0 and fractions[-1] <= 1.0
    assert any("fit 4 of 4" in detail for _, detail in heard)
    cancel = threading.Event()
    with pytest.raises(FitCancelled):
        chain.references(rounds=40, cancel=cancel, progress=lambda fraction, detail="": cancel.set())
