"""Bounded memory: a long chain keeps outputs at checkpoints and rebuilds the others, to the same bits."""

from __future__ import annotations

import numpy as np
import pytest

import stages
from stages import checkpoints

SPECS = [
    ("linear", 1.0, {}),
    ("hist_tree", 0.3, {"max_depth": 3}),
    ("hist_tree", 0.3, {"max_depth": 3}),
    ("tree", 0.3, {"max_depth": 2}),
    ("hist_tree", 0.3, {"max_depth": 3, "subsample": 0.7}),
    ("lightgbm", 0.5, {"n_estimators": 4, "num_leaves": 5}),
    ("forest", 0.5, {"n_estimators": 8}),
    ("knn", 0.5, {}),
    ("spline", 0.5, {}),
    ("hist_tree", 0.3, {"max_depth": 3}),
    ("hist_tree", 0.3, {"max_depth": 3}),
]


def _chain(frame, every, validation):
    chain = stages.Chain(frame, "target", validation, seed=1)
    chain.checkpoint_every = every
    for kind, shrinkage, params in SPECS:
        chain.add(kind, shrinkage, params=params)
    return chain


def _all_outputs(chain):
    return [tuple(np.array(o) for o in chain.outputs(row)) for row in range(len(chain) + 1)]


def _same(a, b):
    assert len(a) == len(b)
    for x, y in zip(a, b, strict=True):
        assert len(x) == len(y) and all(np.array_equal(p, q) for p, q in zip(x, y, strict=True))


@pytest.mark.parametrize("validation", [stages.Holdout(fraction=0.25, seed=0), stages.KFold(folds=3, seed=0)])
def test_rebuilt_outputs_are_the_fitted_ones(diabetes_frame, validation):
    whole = _chain(diabetes_frame, 10_000, validation)
    thinned = _chain(diabetes_frame, 3, validation)
    held = [i + 1 for i, s in enumerate(thinned.stages) if not isinstance(s.outputs, checkpoints.RebuiltOutputs)]
    assert held == [3, 6, 9, 10, 11]   # every third, and the last two
    _same(_all_outputs(whole), _all_outputs(thinned))
    assert whole.table().drop(columns="seconds").equals(thinned.table().drop(columns="seconds"))


def test_step_back_undo_drop_and_refits_agree(diabetes_frame):
    validation = stages.Holdout(fraction=0.25, seed=0)
    chains = [_chain(diabetes_frame, every, validation) for every in (10_000, 2)]
    for chain in chains:
        chain.step_back()
        chain.step_back()
        chain.add("hist_tree", 0.2)
        chain.undo() if chain.can_undo() else None
        chain.drop(3)
        chain.undo()
        chain.trim(6)
        chain.undo()
        chain.add("hist_tree", 0.2, repeat=3)
    _same(_all_outputs(chains[0]), _all_outputs(chains[1]))
    assert [s.scales for s in chains[0].stages] == [s.scales for s in chains[1].stages]


def test_a_long_chain_holds_outputs_for_its_checkpoints_only(diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", seed=0)
    chain.add("hist_tree", 0.1, repeat=45)
    held = [i + 1 for i, s in enumerate(chain.stages) if not isinstance(s.outputs, checkpoints.RebuiltOutputs)]
    assert held == [10, 20, 30, 40, 44, 45]


def test_a_rebuild_walks_back_without_recursion(diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", seed=0)
    chain.checkpoint_every = 10_000
    chain.add("hist_tree", 0.1, repeat=30)
    reference = _all_outputs(chain)
    chain.checkpoint_every = 10_000
    checkpoints.thin(chain.stages, chain.outputs(0), chain.matrix, chain.layout, len(chain.schema.columns), 1)
    _same(reference, _all_outputs(chain))
