"""Stochastic stages: ``subsample`` for tree and hist_tree (Friedman 2002, Stochastic gradient boosting,
Computational Statistics & Data Analysis 38:367-378).

References: scikit-learn's GradientBoostingRegressor(subsample=...) and its oob_scores_ and
oob_improvement_; LightGBM's lightgbm.train on the same drawn rows; Friedman #1 data
(sklearn.datasets.make_friedman1).
"""

from __future__ import annotations

import lightgbm
import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import make_friedman1
from sklearn.ensemble import GradientBoostingRegressor

import stages
from stages.errors import StageSpecError
from stages.fitting import draw_in_bag


def _friedman_frame():
    X, y = make_friedman1(n_samples=600, noise=1.0, random_state=0)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
    frame["y"] = y
    frame["part"] = ["train"] * 450 + ["valid"] * 150
    return frame, X, y


def test_subsampled_tree_stages_reproduce_gradient_boosting_with_subsample():
    frame, X, y = _friedman_frame()
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"), seed=0)
    chain.add("mean")
    chain.add("tree", 0.1, params={"max_depth": 3, "subsample": 0.5}, repeat=100)
    # reference: GradientBoostingRegressor(subsample=0.5) with the same seed: it draws each
    # stage's rows from the one RandomState before growing that stage's tree
    reference = GradientBoostingRegressor(n_estimators=100, max_depth=3, learning_rate=0.1, subsample=0.5,
                                          random_state=0).fit(X[:450], y[:450])
    np.testing.assert_allclose(chain.predict(frame.iloc[450:]), reference.predict(X[450:]), rtol=0, atol=1e-9)
    # the loss on each stage's rows left out, after the stage, is scikit-learn's oob_scores_ (MSE
    # for squared error), and the first stage's improvement its oob_improvement_[0]
    after = np.array([stage.oob_loss[1] for stage in chain.stages[1:]])
    np.testing.assert_allclose(after, reference.oob_scores_, rtol=1e-12)
    table = chain.table()
    assert table["oob_improvement"].iloc[2] == pytest.approx(reference.oob_improvement_[0], rel=1e-12)
    # both compare each stage's own left-out rows before and after it (scikit-learn from version
    # 1.3 on subtracts the previous stage's score, on other rows, for the later stages)
    before = np.array([stage.oob_loss[0] for stage in chain.stages[1:]])
    np.testing.assert_allclose(table["oob_improvement"].iloc[2:], before - after, rtol=1e-12)
    assert np.isnan(table["oob_improvement"].iloc[1])  # the mean stage fits every row


def test_the_rows_drawn_match_scikit_learns_sampler_and_count():
    from sklearn.ensemble._gradient_boosting import _random_sample_mask

    mask = draw_in_bag(1000, 0.3, np.random.RandomState(4))
    # reference: the sampler GradientBoostingRegressor uses, with max(1, int(0.3 * n)) rows
    assert np.array_equal(mask, _random_sample_mask(1000, 300, np.random.RandomState(4)).astype(bool))
    assert mask.sum() == 300


def test_a_subsampled_hist_tree_is_lightgbms_tree_on_the_rows_drawn():
    frame, X, y = _friedman_frame()
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"), seed=3)
    chain.add("hist_tree", params={"max_depth": 3, "subsample": 0.6})
    stage = chain.stages[0]
    # the stage draws its rows from the chain's stream first, then the booster's seed
    rows = np.flatnonzero(draw_in_bag(450, 0.6, np.random.RandomState(3)))
    params = dict(stage.learners[0].params)  # what the stage passed to lightgbm.train, its seed included
    start = np.full(450, y[:450].mean())
    # reference: lightgbm.train on the drawn rows, binned as the chain bins all its fitting rows
    binned = lightgbm.Dataset(X[:450], params={k: v for k, v in params.items() if k != "seed"}, free_raw_data=True)
    binned.construct()
    binned.set_label(y[:450])
    binned.set_init_score(start)
    booster = lightgbm.train(params, binned.subset(rows), num_boost_round=1)
    np.testing.assert_allclose(stage.outputs[0][450:, 0] - y[:450].mean(), booster.predict(X[450:], raw_score=True),
                               rtol=0, atol=1e-12)
    assert stage.oob_loss is not None and stage.oob_loss[1] < stage.oob_loss[0]


@pytest.mark.parametrize("kind", ["tree", "hist_tree"])
@pytest.mark.parametrize("bad", [0.0, 1.5, "half", True])
def test_subsample_must_be_a_fraction(kind, bad):
    frame, _, _ = _friedman_frame()
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"))
    with pytest.raises(StageSpecError, match="subsample must be a fraction"):
        chain.add(kind, params={"subsample": bad})


def test_a_subsampled_chain_refits_the_same_after_a_step_back():
    frame, _, _ = _friedman_frame()
    chain = stages.Chain(frame, "y", stages.SplitColumn("part"), seed=1)
    chain.add("tree", 0.1, params={"subsample": 0.5}, repeat=3)
    last = chain.stages[-1].outputs[0].copy()
    chain.step_back()
    chain.add("tree", 0.1, params={"subsample": 0.5})
    assert np.array_equal(chain.stages[-1].outputs[0], last)
