"""Property tests: random sequences of add / step back / drop / trim / undo keep the chain's invariants."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import stages
from stages import scoring

KINDS = [
    stages.StageSpec("linear"),
    stages.StageSpec("mean"),
    stages.StageSpec("tree", 0.5, params={"max_depth": 2}),
    stages.StageSpec("tree", 0.3, features=("a",), params={"max_depth": 1}),
]

OPS = st.lists(
    st.one_of(
        st.tuples(st.just("add"), st.integers(0, len(KINDS) - 1)),
        st.tuples(st.just("step_back"), st.just(0)),
        st.tuples(st.just("drop"), st.integers(1, 6)),
        st.tuples(st.just("trim"), st.just(0)),
        st.tuples(st.just("undo"), st.just(0)),
    ),
    min_size=1, max_size=8,
)


def _frame(seed: int) -> pd.DataFrame:
    rng = np.random.RandomState(seed)
    frame = pd.DataFrame({"a": rng.normal(size=60), "b": rng.choice(["p", "q", "r"], size=60)})
    frame["y"] = frame["a"] ** 2 + (frame["b"] == "p") + rng.normal(scale=0.2, size=60)
    return frame


def _snapshot(chain: stages.Chain):
    return [o.copy() for o in chain.outputs()], [s.to_dict() for s in chain.scores()], chain.specs()


def _apply(chain: stages.Chain, op: str, arg: int, history: list) -> None:
    if op == "add":
        chain.add_specs([KINDS[arg]])
        history.clear()
    elif op == "step_back" and len(chain):
        history.append(_snapshot(chain))
        chain.step_back()
    elif op == "drop" and 1 <= arg <= len(chain):
        history.append(_snapshot(chain))
        chain.drop(arg)
    elif op == "trim" and chain.best_row() < len(chain):
        history.append(_snapshot(chain))
        chain.trim()
    elif op == "undo" and chain.can_undo():
        expected = history.pop()
        chain.undo()
        outputs, scores, specs = _snapshot(chain)
        assert specs == expected[2]
        assert all(np.array_equal(x, y) for x, y in zip(outputs, expected[0], strict=True))
        assert scores == expected[1]


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(ops=OPS, seed=st.integers(0, 3))
def test_random_edit_sequences_keep_the_chain_consistent(ops, seed):
    frame = _frame(seed)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.3, seed=seed))
    history: list = []
    for op, arg in ops:
        _apply(chain, op, arg, history)
        # prediction = start + sum of scaled stage outputs, bit for bit
        fitted = chain.fitted()
        matrix = chain.matrix
        total = np.full(len(matrix), fitted.start)
        for stage in fitted.stages:
            total = total + stage.scale * stage.learner.predict(matrix[:, list(stage.feature_index)])
        assert np.array_equal(total, chain.outputs()[0][:, 0])
        # cached scores equal scores recomputed from the cached outputs
        for row, cached in enumerate(chain.scores()):
            fresh = scoring.score_state(chain.loss, chain.layout, chain.y, chain.outputs(row))
            assert fresh.train == cached.train and fresh.valid == cached.valid
    # whatever the history, the chain equals a fresh chain built from its specs
    rebuilt = stages.Chain(frame, "y", stages.Holdout(fraction=0.3, seed=seed))
    if chain.specs():
        rebuilt.add_specs(chain.specs())
    assert np.array_equal(rebuilt.outputs()[0], chain.outputs()[0])
