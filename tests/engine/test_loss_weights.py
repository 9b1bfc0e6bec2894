"""Row weights and offsets in the losses and metrics: the interface weighted and log-link chains fill in.

Every loss function takes optional row weights (None is the unweighted computation itself) and
the start value an optional offset on the raw scale. References: sklearn.metrics with
``sample_weight``, numpy's weighted average, and statsmodels' GLM with an offset.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import expit, logit
from sklearn.metrics import (
    accuracy_score,
    brier_score_loss,
    log_loss,
    mean_absolute_error,
    mean_squared_error,
    r2_score,
    roc_auc_score,
)

from stages import metrics
from stages.losses import AbsoluteLoss, HuberLoss, LogLoss, SquaredLoss
from stages.multinomial import MultinomialLoss
from stages.outputs import block, squeeze, start_block

RNG = np.random.RandomState(11)
N = 400
Y = RNG.normal(size=N) * 3 + 1
BINARY = (RNG.uniform(size=N) < expit(Y / 3)).astype(float)
RAW = RNG.normal(size=N)
OUTPUT = RNG.normal(size=N)
WEIGHT = RNG.uniform(0.1, 4.0, size=N)
LOSSES = [(SquaredLoss(), Y), (AbsoluteLoss(), Y), (HuberLoss(), Y), (LogLoss(), BINARY)]


@pytest.mark.parametrize("loss,y", LOSSES, ids=lambda v: getattr(v, "name", ""))
def test_unit_weights_give_the_unweighted_loss(loss, y):
    ones = np.ones(N)
    assert loss.value(y, RAW, ones) == pytest.approx(loss.value(y, RAW), rel=1e-12)
    np.testing.assert_allclose(loss.start(y, ones), loss.start(y), rtol=1e-12)
    assert loss.line_search(y, RAW, OUTPUT, ones) == pytest.approx(loss.line_search(y, RAW, OUTPUT), rel=1e-7)
    np.testing.assert_array_equal(loss.residual(y, RAW, ones), loss.residual(y, RAW))
    context = loss.refinement_context(y, RAW, ones)
    leaf = loss.leaf_value(y, RAW, loss.residual(y, RAW), context, ones)
    plain = loss.leaf_value(y, RAW, loss.residual(y, RAW), loss.refinement_context(y, RAW))
    assert (leaf is None and plain is None) or leaf == pytest.approx(plain, rel=1e-12)


@pytest.mark.parametrize("loss,y", LOSSES, ids=lambda v: getattr(v, "name", ""))
def test_whole_weights_are_repeated_rows(loss, y):
    # a row of weight 3 counts as three copies of the row
    counts = RNG.randint(1, 4, size=N)
    repeated_y, repeated_raw, repeated_out = (np.repeat(a, counts) for a in (y, RAW, OUTPUT))
    weight = counts.astype(float)
    assert loss.value(y, RAW, weight) == pytest.approx(loss.value(repeated_y, repeated_raw), rel=1e-12)
    np.testing.assert_allclose(loss.start(y, weight), loss.start(repeated_y), rtol=1e-12)
    assert loss.line_search(y, RAW, OUTPUT, weight) == pytest.approx(
        loss.line_search(repeated_y, repeated_raw, repeated_out), rel=1e-6)


def test_weighted_metrics_equal_sklearn_metrics_with_sample_weight():
    prediction = Y + RNG.normal(size=N)
    scores = metrics.regression_scores(Y, prediction, WEIGHT)
    assert scores["rmse"] == pytest.approx(np.sqrt(mean_squared_error(Y, prediction, sample_weight=WEIGHT)), rel=1e-12)
    assert scores["mae"] == pytest.approx(mean_absolute_error(Y, prediction, sample_weight=WEIGHT), rel=1e-12)
    assert scores["r2"] == pytest.approx(r2_score(Y, prediction, sample_weight=WEIGHT), rel=1e-12)
    p = expit(RAW)
    p_ties = np.round(p, 1)  # ties in the score: each tied pair counts one half
    binary = metrics.binary_scores(BINARY, p_ties, threshold=0.4, weight=WEIGHT)
    assert binary["logloss"] == pytest.approx(log_loss(BINARY, p_ties, sample_weight=WEIGHT), rel=1e-12)
    assert binary["auc"] == pytest.approx(roc_auc_score(BINARY, p_ties, sample_weight=WEIGHT), rel=1e-12)
    assert binary["accuracy_at"] == pytest.approx(accuracy_score(BINARY, p_ties >= 0.4, sample_weight=WEIGHT), rel=1e-12)
    assert binary["brier"] == pytest.approx(brier_score_loss(BINARY, p_ties, sample_weight=WEIGHT), rel=1e-12)


def test_weighted_starts_leaves_and_steps_have_their_closed_forms():
    assert SquaredLoss().start(Y, WEIGHT)[0] == pytest.approx(np.average(Y, weights=WEIGHT), rel=1e-14)
    assert LogLoss().start(BINARY, WEIGHT)[0] == pytest.approx(logit(np.average(BINARY, weights=WEIGHT)), rel=1e-12)
    residual = LogLoss().residual(BINARY, RAW)
    p = BINARY - residual
    newton = np.sum(WEIGHT * residual) / np.sum(WEIGHT * p * (1 - p))
    assert LogLoss().leaf_value(BINARY, RAW, residual, {}, WEIGHT) == pytest.approx(newton, rel=1e-12)
    step = np.sum(WEIGHT * (Y - RAW) * OUTPUT) / np.sum(WEIGHT * OUTPUT**2)
    assert SquaredLoss().line_search(Y, RAW, OUTPUT, WEIGHT) == pytest.approx(max(step, 0.0), rel=1e-12)
    codes = RNG.randint(0, 3, size=N).astype(float)
    priors = np.bincount(codes.astype(int), weights=WEIGHT) / WEIGHT.sum()
    np.testing.assert_allclose(MultinomialLoss(n_classes=3).start(codes, WEIGHT),
                               np.log(priors) - np.log(priors).mean(), rtol=1e-12)


def test_the_start_with_an_offset_is_the_best_constant_on_top_of_it():
    offset = RNG.normal(size=N) * 0.5
    assert SquaredLoss().start(Y, offset=offset)[0] == pytest.approx(np.mean(Y - offset), rel=1e-14)
    assert AbsoluteLoss().start(Y, offset=offset)[0] == pytest.approx(np.median(Y - offset), rel=1e-14)
    # Reference: statsmodels' binomial GLM with an intercept only and the offset
    for weight in (None, WEIGHT):
        model = sm.GLM(BINARY, np.ones((N, 1)), family=sm.families.Binomial(), offset=offset,
                       freq_weights=weight).fit(tol=1e-14)
        assert LogLoss().start(BINARY, weight, offset)[0] == pytest.approx(model.params[0], rel=1e-9)
    with pytest.raises(ValueError, match="no offset"):
        MultinomialLoss().start(np.zeros(3), offset=np.zeros(3))


def test_outputs_are_n_by_k_arrays_the_start_takes_the_offset_and_the_edges_squeeze():
    start = np.array([0.5])
    out = start_block(start, 4, offset=np.arange(4.0))
    assert out.shape == (4, 1) and list(out[:, 0]) == [0.5, 1.5, 2.5, 3.5]
    assert squeeze(out).shape == (4,) and squeeze(np.zeros((4, 3))).shape == (4, 3)
    vector = np.arange(4.0)
    assert block(vector, 4, 1).base is vector  # a learner's vector becomes one column without a copy
    with pytest.raises(ValueError, match="not 4 rows of 3 values"):
        block(vector, 4, 3)
