"""The chain's state belongs to the chain: read through ``state()``, changed only through its methods."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

import stages
from stages.errors import ChainStateError, StageSpecError

REPOSITORY = Path(stages.__file__).resolve().parent.parent


def _chain(frame, **options) -> stages.Chain:
    return stages.Chain(frame, "y", stages.Holdout(fraction=0.25, seed=0, test_fraction=0.1), seed=2, **options)


def test_the_stages_are_a_tuple_that_no_caller_can_change(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 2})
    assert isinstance(chain.stages, tuple) and len(chain.stages) == 2
    with pytest.raises(AttributeError):
        chain.stages = ()  # type: ignore[misc]
    with pytest.raises(AttributeError):
        chain.stages.append(chain.stages[0])  # type: ignore[attr-defined]
    assert len(chain) == 2


def test_the_data_path_is_set_when_the_chain_is_built(mixed_frame, tmp_path):
    assert _chain(mixed_frame).data_path is None
    assert _chain(mixed_frame, data_path=tmp_path / "rows.csv").data_path == str(tmp_path / "rows.csv")
    mixed_frame.to_csv(tmp_path / "rows.csv", index=False)
    assert stages.Chain.from_file(tmp_path / "rows.csv", "y").data_path == str(tmp_path / "rows.csv")


def test_state_reads_stages_outputs_scores_streams_and_removals_together(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 2})
    chain.step_back()
    state = chain.state()
    assert state.stages == chain.stages
    assert all(np.array_equal(a, b) for a, b in zip(state.outputs, chain.outputs(), strict=True))
    assert state.scores == chain.scores()[-1]
    assert [r.action for r in state.removals] == ["step back"] and len(state.removals[0].stages) == 2
    assert (state.test_revealed, state.reveal_count) == (False, 0)
    # the streams are those the next fit draws from: a stage fit from copies of them is the one add fits
    added = chain.add("tree", 0.5, params={"max_depth": 2})[0]
    for saved, before in zip(state.streams, added.rng_before, strict=True):
        assert np.array_equal(saved[1], before[1]) and saved[2] == before[2]


def test_commit_appends_a_stage_fitted_elsewhere_and_refuses_a_changed_chain(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    twin = _chain(mixed_frame)
    twin.add_specs(list(chain.specs()))
    stage = twin.add("tree", 0.5, params={"max_depth": 2})[0]
    with pytest.raises(ChainStateError, match="changed"):
        chain.commit(stage, after=twin.stages[:1])  # other stage objects: not this chain's state
    chain.commit(stage, after=chain.stages)
    assert chain.stages[-1] is stage and not chain.can_undo()
    again = chain.add("mean")[0]
    assert np.array_equal(again.rng_before[0][1], stage.rng_after[0][1])
    with pytest.raises(ChainStateError):
        chain.commit(stage, after=chain.stages)  # the streams moved on since the stage was fit


def test_restore_puts_back_stages_removals_streams_and_reveals(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 2})
    chain.trim(1)
    chain.reveal_test()
    state = chain.state()
    copy = _chain(mixed_frame)
    copy.restore(list(state.stages), [(r.action, list(r.stages)) for r in state.removals], state.streams,
                 revealed=state.test_revealed, reveals=state.reveal_count)
    assert copy.stages == chain.stages and copy.can_undo()
    assert copy.table().equals(chain.table())
    assert copy.undo() == "trim" and len(copy) == 2


def test_what_the_state_does_not_allow_is_a_state_error(mixed_frame):
    chain = _chain(mixed_frame)
    for action, words in [(chain.step_back, "no stage to step back"), (chain.undo, "no removal to undo"),
                          (lambda: chain.residuals("test"), "test part is locked")]:
        with pytest.raises(ChainStateError, match=words) as caught:
            action()
        assert isinstance(caught.value, StageSpecError)  # what these were before the state error existed
    no_test = stages.Chain(mixed_frame, "y", stages.Holdout(fraction=0.25, seed=0))
    with pytest.raises(ChainStateError, match="no locked test part"):
        no_test.reveal_test()


def test_no_module_outside_the_chain_touches_a_private_attribute_of_a_chain():
    pattern = re.compile(r"\bchain\._[a-z]\w*")
    found = []
    for folder in ("stages", "tui", "tests", "bench"):
        for path in sorted((REPOSITORY / folder).rglob("*.py")):
            if path == REPOSITORY / "stages" / "chain.py":
                continue
            for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
                if pattern.search(line) and "pattern = re.compile" not in line:
                    found.append(f"{path.relative_to(REPOSITORY)}:{number}: {line.strip()}")
    assert not found, "\n".join(found)
