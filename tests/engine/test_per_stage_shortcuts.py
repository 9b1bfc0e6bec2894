"""Shortcuts taken once a stage: the target's spread kept per part for R² (the scores with it are the
bits computed without it, and they agree with sklearn.metrics), and the count of values that are not finite."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import mean_squared_error, r2_score

import stages
from stages import metrics, scoring


@pytest.mark.parametrize("weighted", [False, True])
def test_scores_with_the_kept_spread_are_the_same_bits(weighted):
    rng = np.random.default_rng(0)
    y = rng.normal(3.0, 2.0, 5001)
    prediction = y + rng.normal(0.0, 0.5, len(y))
    weight = rng.uniform(0.5, 2.0, len(y)) if weighted else None
    kept = metrics.target_spread(y, weight)
    assert metrics.regression_scores(y, prediction, weight, kept) == metrics.regression_scores(y, prediction, weight)
    # R² against sklearn.metrics.r2_score, the mean squared error against mean_squared_error
    got, mse = metrics.regression_scores_and_mse(y, prediction, weight)
    assert got["r2"] == pytest.approx(r2_score(y, prediction, sample_weight=weight), rel=1e-12)
    assert mse == pytest.approx(mean_squared_error(y, prediction, sample_weight=weight), rel=1e-12)


@pytest.mark.parametrize("validation", [stages.Holdout(fraction=0.25, seed=0), stages.KFold(folds=3, seed=0)])
def test_a_chains_scores_equal_scores_computed_afresh(diabetes_frame, validation):
    chain = stages.Chain(diabetes_frame, "target", validation)
    chain.add("hist_tree", 0.1, params={"max_depth": 2, "min_child_samples": 5}, repeat=3)
    for stage, kept in zip(chain.stages, chain.scores()[1:], strict=True):
        fresh = scoring.score_state(chain.loss, chain.layout, chain.y, stage.outputs, chain.threshold, chain.weight)
        assert kept == fresh
        # the loss reported for squared error is the mean squared error, as ``value`` computes it
        assert kept.train["loss"] == chain.loss.value(chain.y[chain.layout.train], stage.outputs[0][chain.layout.train])
    y, p = chain.part_targets("valid"), chain.fitted_values("valid")
    assert chain.scores()[-1].valid["r2"] == pytest.approx(r2_score(y, p), rel=1e-12)


def test_count_not_finite_counts_as_isfinite_does():
    from stages.fitting import count_not_finite

    big = np.full((4, 1), np.finfo(np.float64).max)   # finite values whose sum overflows
    for values in (np.zeros((3, 1)), np.array([[1.0], [np.nan], [np.inf]]), np.array([-np.inf, np.inf, 2.0]), big):
        # the reference: numpy's own isfinite, value by value
        assert count_not_finite(values) == int(np.count_nonzero(~np.isfinite(values)))
