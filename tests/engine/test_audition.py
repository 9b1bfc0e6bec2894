"""Audition: candidates fit side by side equal the same stage added alone; keep commits with no refit."""

from __future__ import annotations

import threading

import numpy as np
import pytest
from scipy.stats import sem
from sklearn.metrics import mean_squared_error

import stages
from stages.decide.audition import (
    Candidate,
    audition_table,
    best_candidate,
    expand_grid,
    one_standard_error_choice,
)
from stages.errors import FitCancelled, StageFitError, StageSpecError
from stages.scoring import Scores


def _state(chain: stages.Chain) -> tuple:
    """Return what makes up a chain's observable state: length, stage objects, outputs, streams."""
    outputs = tuple(o.copy() for o in chain.outputs())
    streams = tuple(s[1].copy() for s in chain.state().streams)
    return len(chain), tuple(chain.stages), outputs, streams


def _assert_same_state(a: tuple, b: tuple) -> None:
    assert a[0] == b[0]
    assert all(x is y for x, y in zip(a[1], b[1], strict=True))
    for x, y in zip(a[2], b[2], strict=True):
        assert np.array_equal(x, y)
    for x, y in zip(a[3], b[3], strict=True):
        assert np.array_equal(x, y)


def _assert_same_outputs(a: stages.Chain, b: stages.Chain) -> None:
    for x, y in zip(a.outputs(), b.outputs(), strict=True):
        assert np.array_equal(x, y)
    for x, y in zip(a.state().streams, b.state().streams, strict=True):
        assert np.array_equal(x[1], y[1])


def _diabetes_chain(frame, validation=None) -> stages.Chain:
    # Diabetes data shipped with scikit-learn (Efron et al. 2004, Annals of Statistics 32:407-499).
    chain = stages.Chain(frame, "target", validation or stages.Holdout(fraction=0.25, seed=0), seed=3)
    chain.add("linear")
    return chain


GRID = [
    {"kind": "forest", "shrinkage": 0.5, "params": {"max_features": [0.33, 0.5, 1.0], "n_estimators": 8}},
    {"kind": "lightgbm", "shrinkage": 0.5, "params": {"num_leaves": [15, 63], "n_estimators": 20,
                                                     "min_child_samples": 5}},
    {"kind": "spline", "shrinkage": 0.5},
]


def test_expand_grid_makes_one_spec_per_combination_of_list_valued_params():
    specs = expand_grid({"kind": "forest", "params": {"max_features": [0.33, 0.5, 1.0], "n_estimators": 8}})
    assert [s.params["max_features"] for s in specs] == [0.33, 0.5, 1.0]
    assert all(s.params["n_estimators"] == 8 for s in specs)  # a scalar stays
    product = expand_grid(stages.StageSpec("lightgbm", 0.5, params={"num_leaves": [7, 15], "max_depth": [2, 3, 4]}))
    assert len(product) == 6
    assert {(s.params["num_leaves"], s.params["max_depth"]) for s in product} == {
        (a, b) for a in (7, 15) for b in (2, 3, 4)}
    nested = expand_grid({"kind": "lightgbm", "params": {"monotone_constraints": [[1, 0]]}})
    assert [s.params["monotone_constraints"] for s in nested] == [[1, 0]]
    with pytest.raises(StageSpecError, match="max_features is an empty list"):
        expand_grid({"kind": "forest", "params": {"max_features": []}})


def test_audition_of_one_candidate_then_keep_equals_add(diabetes_frame):
    spec = stages.StageSpec("forest", 0.5, params={"n_estimators": 6})
    added, kept = _diabetes_chain(diabetes_frame), _diabetes_chain(diabetes_frame)
    added.add_specs([spec])
    [candidate] = kept.audition([spec])
    stage = kept.keep(candidate)
    assert stage is kept.stages[-1] and stage.spec == added.stages[-1].spec
    _assert_same_outputs(added, kept)
    assert added.table().drop(columns="seconds").equals(kept.table().drop(columns="seconds"))
    # the streams are where add left them, so the next stage fits alike too
    added.add("forest", 0.5, params={"n_estimators": 6})
    kept.add("forest", 0.5, params={"n_estimators": 6})
    _assert_same_outputs(added, kept)


def test_concurrent_candidates_each_equal_the_stage_added_alone(diabetes_frame):
    chain = _diabetes_chain(diabetes_frame)
    before = _state(chain)
    candidates = chain.audition(GRID, workers=2)
    _assert_same_state(before, _state(chain))  # the chain and its streams are untouched
    assert [c.spec.kind for c in candidates] == ["forest"] * 3 + ["lightgbm"] * 2 + ["spline"]
    base = chain.scores()[-1].valid["rmse"]
    for candidate in candidates:
        assert candidate.ok, candidate.error
        alone = _diabetes_chain(diabetes_frame)
        alone.add_specs([candidate.spec])
        for x, y in zip(candidate.stage.outputs, alone.stages[-1].outputs, strict=True):
            assert np.array_equal(x, y), candidate.spec
        assert candidate.stage.params == alone.stages[-1].params
        assert candidate.valid == alone.scores()[-1].valid["rmse"]
        assert candidate.delta == candidate.valid - base
        counts = candidate.histogram
        assert counts["train"].sum() == chain.layout.n_train and counts["valid"].sum() == chain.layout.n_valid
        assert np.array_equal(candidate.edges, candidates[0].edges)  # shared edges: comparable side by side


def test_keep_refuses_a_candidate_from_a_chain_that_has_changed(diabetes_frame):
    chain = _diabetes_chain(diabetes_frame)
    first, second = chain.audition([{"kind": "tree", "params": {"max_depth": [2, 3]}}])
    chain.keep(first)
    with pytest.raises(StageSpecError, match="the chain changed since this audition; audition again"):
        chain.keep(second)
    chain.step_back()  # back to the audition's state: keeping is safe again
    chain.keep(second)
    other = _diabetes_chain(diabetes_frame)
    with pytest.raises(StageSpecError, match="changed"):
        other.keep(first)
    stale = chain.audition([stages.StageSpec("tree", params={"max_depth": 2})])[0]
    chain.step_back()
    chain.add("tree", params={"max_depth": 4})  # same length, a different last stage
    with pytest.raises(StageSpecError, match="changed"):
        chain.keep(stale)


@pytest.fixture()
def failing_kind():
    from stages.kinds import _REGISTRY, register
    from stages.kinds.base import Artifact, StageKind

    class FailingKind(StageKind):
        name = "failing"
        summary = "a learner that always fails"

        def fit(self, request, params):
            raise ValueError("cannot fit these rows")

        def save(self, learner):
            return Artifact("json", b"{}")

        def load(self, artifact):
            raise NotImplementedError

    register(FailingKind())
    yield "failing"
    _REGISTRY.pop("failing", None)


def test_a_failing_candidate_is_reported_and_the_others_come_back(diabetes_frame, failing_kind):
    chain = _diabetes_chain(diabetes_frame)
    candidates = chain.audition([stages.StageSpec("tree"), stages.StageSpec(failing_kind), stages.StageSpec("spline")])
    assert [c.ok for c in candidates] == [True, False, True]
    assert candidates[1].error == "stage 2 (failing): ValueError: cannot fit these rows"
    table = audition_table(candidates)
    assert list(table["error"]) == ["", candidates[1].error, ""]
    assert np.isnan(table.loc[1, "valid_rmse"])
    with pytest.raises(StageSpecError, match="nothing to keep"):
        chain.keep(candidates[1])
    with pytest.raises(StageFitError, match="every candidate failed"):
        chain.audition([stages.StageSpec(failing_kind)])


def test_cancel_stops_the_audition_and_leaves_the_chain_as_it_was(diabetes_frame):
    chain = _diabetes_chain(diabetes_frame)
    before = _state(chain)
    cancel = threading.Event()
    cancel.set()
    with pytest.raises(FitCancelled):
        chain.audition(GRID, cancel=cancel)
    _assert_same_state(before, _state(chain))
    cancel.clear()
    seen: list[float] = []

    def progress(fraction: float, message: str) -> None:
        seen.append(fraction)
        cancel.set()  # the first report of any candidate cancels them all

    with pytest.raises(FitCancelled):
        chain.audition(GRID, cancel=cancel, progress=progress)
    assert seen
    _assert_same_state(before, _state(chain))


def test_kfold_candidates_carry_out_of_fold_fold_scores_and_their_standard_error(diabetes_frame):
    chain = _diabetes_chain(diabetes_frame, stages.KFold(folds=5, seed=0))
    candidates = chain.audition([{"kind": "tree", "params": {"max_depth": [1, 2, 3]}}])
    y = chain.y
    for c in candidates:
        assert len(c.fold_scores) == 5
        # each fold's RMSE on its held-out rows (reference: sklearn.metrics.mean_squared_error)
        for track, output, score in zip(chain.layout.tracks[1:], c.stage.outputs[1:], c.fold_scores, strict=True):
            held = track.evaluate
            assert score == pytest.approx(np.sqrt(mean_squared_error(y[held], output[held])), rel=1e-12)
        # the spread is the standard error of the mean over folds (reference: scipy.stats.sem, ddof=1)
        assert c.spread == pytest.approx(sem(c.fold_scores), rel=1e-12)
        assert c.valid == chain.scores()[-1].valid["rmse"] + c.delta
    assert "fold_spread" in audition_table(candidates)
    choice = one_standard_error_choice(candidates)
    best = min(candidates, key=lambda c: c.valid)
    assert choice.valid <= best.valid + best.spread
    assert all(c.valid > best.valid + best.spread for c in candidates[: candidates.index(choice)])


def _made_up(valid: float, folds: tuple[float, ...]) -> Candidate:
    scores = Scores({"rmse": valid}, {"rmse": valid}, folds)
    return Candidate(stages.StageSpec("tree"), "rmse", stage=object(), scores=scores)


def test_one_standard_error_choice_is_the_first_within_one_standard_error_of_the_best():
    # The one standard error rule (Breiman et al. 1984, Classification and Regression Trees;
    # Hastie, Tibshirani & Friedman 2009, ESL 2nd ed., section 7.10): the simplest model whose
    # error is no more than one standard error above the best one's. Candidates come simplest first.
    best_folds = (0.8, 1.0, 1.2, 1.0)  # standard error 0.0816...
    candidates = [_made_up(1.2, (1.2,) * 4), _made_up(1.05, (1.05,) * 4), _made_up(1.0, best_folds)]
    assert sem(best_folds) == pytest.approx(0.08165, abs=1e-5)
    assert one_standard_error_choice(candidates) is candidates[1]
    assert best_candidate(candidates) is candidates[2]
    tight = [_made_up(1.05, (1.05,) * 4), _made_up(1.0, (1.0, 1.0, 1.0, 1.0))]
    assert one_standard_error_choice(tight) is tight[1]  # zero spread: only the best qualifies
    no_folds = [_made_up(1.05, ()), _made_up(1.0, ())]
    assert one_standard_error_choice(no_folds) is no_folds[1]
