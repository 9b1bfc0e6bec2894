"""hist_tree stages keep LightGBM's binned rows between fits on the same rows (stages/kinds/binned.py)."""

from __future__ import annotations

import gc

import lightgbm as lgb
import numpy as np

import stages
from stages.kinds import binned


def test_a_stage_on_kept_bins_equals_lightgbm_on_freshly_binned_rows(diabetes_frame):
    # Reference: lightgbm.train (one round, learning rate 1) on a Dataset binned afresh, with
    # init_score set to the chain's output before the stage.
    chain = stages.Chain(diabetes_frame, "target", stages.Holdout(fraction=0.2, seed=0), seed=0)
    chain.add("hist_tree", 1.0, params={"max_depth": 3}, repeat=3)
    fit = chain.layout.train
    for row in (2, 3):
        before = chain.outputs(row - 1)[0][:, 0]
        params = chain.stages[row - 1].learners[0].params
        data = lgb.Dataset(chain.matrix[fit], label=chain.y[fit], init_score=before[fit])
        booster = lgb.train(params, data, num_boost_round=1)
        expected = before + booster.predict(chain.matrix, raw_score=True)
        np.testing.assert_allclose(chain.outputs(row)[0][:, 0], expected, rtol=0, atol=1e-12)


def test_kept_bins_give_the_fits_of_a_fresh_start(diabetes_frame):
    first = stages.Chain(diabetes_frame, "target", stages.Holdout(fraction=0.2, seed=0), seed=0)
    first.add("hist_tree", 0.5, params={"max_depth": 2}, repeat=2)
    binned.clear()
    second = stages.Chain(diabetes_frame, "target", stages.Holdout(fraction=0.2, seed=0), seed=0)
    second.add("hist_tree", 0.5, params={"max_depth": 2})
    binned.clear()  # the second stage bins afresh here, where the first chain reused its bins
    second.add("hist_tree", 0.5, params={"max_depth": 2})
    np.testing.assert_array_equal(first.outputs()[0], second.outputs()[0])


def test_kept_bins_go_with_the_chain(diabetes_frame):
    binned.clear()
    chain = stages.Chain(diabetes_frame, "target", stages.Holdout(fraction=0.2, seed=0), seed=0)
    chain.add("hist_tree", params={"max_depth": 2})
    assert len(binned._ENTRIES) == 1
    del chain
    gc.collect()
    assert len(binned._ENTRIES) == 0
