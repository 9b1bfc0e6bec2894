"""Bounded memory: a long chain keeps outputs at checkpoints and rebuilds the others, to the same bits."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

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


def _chain(frame, every, validation, tail=2):
    chain = stages.Chain(frame, "target", validation, seed=1)
    chain.checkpoint_every, chain.checkpoint_tail = every, tail
    for kind, shrinkage, params in SPECS:
        chain.add(kind, shrinkage, params=params)
    return chain


def _all_outputs(chain):
    return [tuple(np.array(o) for o in chain.outputs(row)) for row in range(len(chain) + 1)]


def _held(chain_stages):
    return [i + 1 for i, s in enumerate(chain_stages) if not isinstance(s.outputs, checkpoints.RebuiltOutputs)]


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
    # every tenth, and every stage after the checkpoint at or below 45 - TAIL (6)
    assert _held(chain.stages) == [10, 20, *range(30, 46)]


def test_a_rebuild_walks_back_without_recursion(diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", seed=0)
    chain.checkpoint_every = 10_000
    chain.add("hist_tree", 0.1, repeat=30)
    reference = _all_outputs(chain)
    chain.checkpoint_every = 10_000
    checkpoints.thin(chain.stages, chain.outputs(0), chain.matrix, chain.layout, len(chain.schema.columns), 1)
    _same(reference, _all_outputs(chain))


# ----- random sequences of changes against an unthinned chain ---------------------------------
RANDOM_SPECS = [
    stages.StageSpec("hist_tree", 0.3, params={"max_depth": 2}),    # rebuilt a block of rows at a time
    stages.StageSpec("tree", 0.5, params={"max_depth": 2}),         # rebuilt on all rows at once
    stages.StageSpec("linear"),
]
CHANGES = st.lists(
    st.one_of(
        st.tuples(st.just("add"), st.integers(0, len(RANDOM_SPECS) - 1), st.integers(1, 4)),
        st.tuples(st.just("step_back"), st.just(0), st.integers(1, 4)),
        st.tuples(st.just("drop"), st.integers(1, 12), st.just(1)),
        st.tuples(st.just("trim"), st.integers(0, 12), st.just(1)),
        st.tuples(st.just("undo"), st.just(0), st.integers(1, 3)),
        st.tuples(st.just("read"), st.integers(0, 12), st.just(1)),
    ),
    min_size=1, max_size=10,
)


def _random_frame() -> pd.DataFrame:
    rng = np.random.default_rng(3)
    frame = pd.DataFrame(rng.normal(size=(150, 3)), columns=["a", "b", "c"])
    frame["y"] = frame["a"] ** 2 + np.sin(3 * frame["b"]) + rng.normal(scale=0.3, size=150)
    return frame


RANDOM_FRAME = _random_frame()


def _change(chain, op, arg, times):
    for _ in range(times):
        if op == "add":
            chain.add_specs([RANDOM_SPECS[arg]])
        elif op == "step_back" and len(chain):
            chain.step_back()
        elif op == "drop" and 1 <= arg <= len(chain):
            chain.drop(arg)
        elif op == "trim" and arg < len(chain):
            chain.trim(arg)
        elif op == "undo" and chain.can_undo():
            chain.undo()
        elif op == "read" and arg <= len(chain):
            np.asarray(chain.outputs(arg)[0]).sum()


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(changes=CHANGES)
def test_random_changes_give_the_unthinned_chain_s_outputs(changes):
    whole = stages.Chain(RANDOM_FRAME, "y", stages.Holdout(fraction=0.3, seed=0), seed=2)
    whole.checkpoint_every = whole.checkpoint_tail = 10_000
    thinned = stages.Chain(RANDOM_FRAME, "y", stages.Holdout(fraction=0.3, seed=0), seed=2)
    thinned.checkpoint_every, thinned.checkpoint_tail = 3, 2
    for chain in (whole, thinned):
        chain.add_specs([RANDOM_SPECS[0]] * 8)   # long enough to be thinned from the start
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(checkpoints, "BLOCK_ROWS", 16)   # several blocks at this size
        for op, arg, times in changes:
            for chain in (whole, thinned):
                _change(chain, op, arg, times)
            # read at once, while the background rebuild may still run
            _same(_all_outputs(whole), _all_outputs(thinned))
            assert whole.table().drop(columns="seconds").equals(thinned.table().drop(columns="seconds"))
        assert thinned.wait_for_rebuilds(timeout=60)
    # once the rebuild is done the chain holds what the rule keeps, and nothing beyond it after a step back
    n, held = len(thinned), set(_held(thinned.stages))
    assert {p for p in range(1, n + 1) if checkpoints.kept(p, n, 3, 2)} <= held
    assert held <= {p for p in range(1, n + 1) if checkpoints.kept(p, n, 3, 2, ahead=True)}
    _same(_all_outputs(whole), _all_outputs(thinned))
