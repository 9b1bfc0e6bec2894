"""The chain's promises: cached step back, drop with refit, trim, undo, all-or-nothing fits."""

from __future__ import annotations

import threading

import numpy as np
import pytest

import stages
from stages.errors import FitCancelled, StageFitError, StageSpecError


def _state(chain: stages.Chain) -> tuple:
    """Return everything that makes up a chain's observable state."""
    table = chain.table()
    outputs = tuple(o.copy() for o in chain.outputs())
    rng = tuple(s[1].copy() for s in chain.state().streams)
    return len(chain), table.to_dict(), outputs, rng


def _assert_same_state(a: tuple, b: tuple) -> None:
    assert a[0] == b[0]
    assert a[1].keys() == b[1].keys()
    for key in a[1]:
        left, right = a[1][key], b[1][key]
        for k in left:
            lv, rv = left[k], right[k]
            if key == "seconds":
                continue
            assert (lv == rv) or (isinstance(lv, float) and np.isnan(lv) and np.isnan(rv)), key
    for x, y in zip(a[2], b[2], strict=True):
        assert np.array_equal(x, y)
    for x, y in zip(a[3], b[3], strict=True):
        assert np.array_equal(x, y)


def _chain(frame, **kw):
    return stages.Chain(frame, "y", stages.Holdout(fraction=0.25, seed=1), **kw)


def test_prediction_is_start_plus_sum_of_scaled_stage_outputs(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 2})
    chain.add("knn", 0.3, features=["a", "b"])
    fitted = chain.fitted()
    matrix = fitted.encode(mixed_frame)
    total = np.full(len(mixed_frame), fitted.start)
    for stage in fitted.stages:
        total = total + stage.scale * stage.learner.predict(matrix[:, list(stage.feature_index)])
    assert np.array_equal(total, chain.predict(mixed_frame))
    # and the cached output on the chain's own rows is that same sum, bit for bit
    cached = np.empty(len(mixed_frame))
    cached[chain.prepared.rows[chain.layout.order]] = chain.outputs()[0][:, 0]
    assert np.array_equal(cached, total)


def test_add_then_step_back_restores_the_exact_earlier_state(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    before = _state(chain)
    chain.add("forest", 0.5, params={"n_estimators": 5})
    chain.step_back()
    _assert_same_state(before, _state(chain))


def test_readding_a_stage_after_step_back_gives_the_same_fit(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("forest", 0.5, params={"n_estimators": 5})
    first = chain.outputs()[0].copy()
    chain.step_back()
    chain.add("forest", 0.5, params={"n_estimators": 5})
    assert np.array_equal(first, chain.outputs()[0])


def test_drop_of_the_last_stage_equals_step_back(mixed_frame):
    one, two = _chain(mixed_frame), _chain(mixed_frame)
    for chain in (one, two):
        chain.add("linear")
        chain.add("tree", 0.3, params={"max_depth": 2}, repeat=3)
    one.step_back()
    two.drop(4)
    _assert_same_state(_state(one), _state(two))


def test_drop_of_a_middle_stage_equals_a_chain_built_without_it(mixed_frame):
    dropped = _chain(mixed_frame)
    dropped.add("linear")
    dropped.add("forest", 0.5, params={"n_estimators": 4})
    dropped.add("tree", 0.3, params={"max_depth": 2}, repeat=2)
    refits = dropped.drop(2)
    assert len(refits) == 2
    fresh = _chain(mixed_frame)
    fresh.add("linear")
    fresh.add("tree", 0.3, params={"max_depth": 2}, repeat=2)
    _assert_same_state(_state(fresh), _state(dropped))


def test_trim_keeps_the_stages_up_to_the_best_validation_score(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    chain.add("tree", 1.0, params={"max_depth": 8, "min_samples_leaf": 1}, repeat=4)
    best = chain.best_row()
    chain.trim()
    assert len(chain) == best
    assert chain.best_row() == len(chain)


def test_undo_restores_each_removal_exactly(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    chain.add("tree", 0.3, params={"max_depth": 2}, repeat=3)
    full = _state(chain)
    chain.drop(2)
    chain.step_back()
    chain.undo()
    chain.undo()
    _assert_same_state(full, _state(chain))
    assert not chain.can_undo()
    # the stream is where it was: the next stage fits as it would have
    chain.add("tree", 0.3, params={"max_depth": 2})
    other = _chain(mixed_frame)
    other.add("linear")
    other.add("tree", 0.3, params={"max_depth": 2}, repeat=4)
    assert np.array_equal(chain.outputs()[0], other.outputs()[0])


def test_same_data_spec_and_seed_give_identical_predictions(mixed_frame):
    runs = []
    for _ in range(2):
        chain = _chain(mixed_frame, seed=7)
        chain.add("linear")
        chain.add("forest", 0.5, params={"n_estimators": 5})
        chain.add("lightgbm", 0.5, params={"n_estimators": 10, "num_leaves": 4})
        runs.append(chain.predict(mixed_frame))
    assert np.array_equal(runs[0], runs[1])


def test_a_cancelled_fit_leaves_the_chain_as_it_was(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    before = _state(chain)
    cancel = threading.Event()

    def progress(fraction: float, message: str) -> None:
        if fraction > 0.3:
            cancel.set()

    with pytest.raises(FitCancelled):
        chain.add("tree", 0.1, params={"max_depth": 2}, repeat=10, cancel=cancel, progress=progress)
    _assert_same_state(before, _state(chain))


class _Faulty:
    """A learner whose fit or output misbehaves in a chosen way."""

    def __init__(self, fault: str) -> None:
        self.fault = fault

    def predict(self, X):
        if self.fault == "nan":
            return np.full(len(X), np.nan)
        if self.fault == "inf":
            out = np.zeros(len(X))
            out[0] = np.inf
            return out
        return np.zeros(len(X))


@pytest.fixture()
def faulty_kind():
    from stages.kinds import _REGISTRY, register
    from stages.kinds.base import Artifact, StageKind

    class FaultyKind(StageKind):
        name = "faulty"
        summary = "a learner that fails on purpose"
        defaults = {"fault": "raise"}

        def fit(self, request, params):
            if params["fault"] == "raise":
                raise ValueError("the learner refused these rows")
            if params["fault"] == "memory":
                raise MemoryError()
            return _Faulty(params["fault"])

        def save(self, learner):
            return Artifact("json", b"{}")

        def load(self, artifact):
            return _Faulty("none")

    register(FaultyKind())
    yield "faulty"
    _REGISTRY.pop("faulty", None)


@pytest.mark.parametrize("fault, reason", [
    ("raise", "ValueError: the learner refused these rows"),
    ("memory", "ran out of memory"),
    ("nan", "not finite"),
    ("inf", "not finite"),
])
def test_a_failing_learner_leaves_the_chain_as_it_was_and_names_the_stage(mixed_frame, faulty_kind, fault, reason):
    chain = _chain(mixed_frame)
    chain.add("linear")
    before = _state(chain)
    with pytest.raises(StageFitError) as err:
        chain.add(faulty_kind, params={"fault": fault})
    assert str(err.value).startswith("stage 2 (faulty):")
    assert reason in str(err.value)
    assert "\n" not in str(err.value)
    _assert_same_state(before, _state(chain))


def test_a_failure_midway_through_repeat_adds_nothing(mixed_frame, faulty_kind):
    chain = _chain(mixed_frame)
    before = _state(chain)
    specs = [stages.StageSpec("tree", 0.3, params={"max_depth": 2})] * 2 + [stages.StageSpec(faulty_kind)]
    with pytest.raises(StageFitError, match="stage 3"):
        chain.add_specs(specs)
    _assert_same_state(before, _state(chain))


def test_unknown_kind_parameter_and_feature_are_clear_errors(mixed_frame):
    chain = _chain(mixed_frame)
    with pytest.raises(StageSpecError, match="unknown stage kind 'bush'"):
        chain.add("bush")
    with pytest.raises(StageSpecError, match="kind 'tree' has no parameter 'depth'"):
        chain.add("tree", params={"depth": 3})
    with pytest.raises(StageSpecError, match="'nope'"):
        chain.add("linear", features=["nope"])
    with pytest.raises(StageSpecError, match="shrinkage"):
        chain.add("linear", shrinkage=0)
    assert len(chain) == 0


def test_overfit_flag_marks_train_better_and_validation_worse(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    chain.add("tree", 1.0, params={"max_depth": 12, "min_samples_leaf": 1})
    table = chain.table()
    last = table.iloc[-1]
    assert last["train_rmse"] < table.iloc[-2]["train_rmse"]
    assert last["overfit"] == (last["valid_rmse"] > table.iloc[-2]["valid_rmse"])
    assert table["best"].sum() == 1


def test_scores_match_sklearn_metrics(mixed_frame):
    # References: sklearn.metrics.mean_squared_error, mean_absolute_error, r2_score.
    from sklearn.metrics import mean_absolute_error, mean_squared_error, r2_score

    chain = _chain(mixed_frame)
    chain.add("linear")
    y = chain.part_targets("valid")
    prediction = chain.fitted_values("valid")
    valid = chain.scores()[-1].valid
    assert valid["rmse"] == pytest.approx(np.sqrt(mean_squared_error(y, prediction)), rel=1e-12)
    assert valid["mae"] == pytest.approx(mean_absolute_error(y, prediction), rel=1e-12)
    assert valid["r2"] == pytest.approx(r2_score(y, prediction), rel=1e-12)


def test_histogram_counts_every_residual_over_shared_edges(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    counts, edges = chain.histogram(1)
    assert counts["train"].sum() == chain.layout.n_train
    assert counts["valid"].sum() == chain.layout.n_valid
    assert np.all(np.diff(edges) > 0)


def test_importance_is_given_for_every_stage_kind(mixed_frame):
    chain = _chain(mixed_frame)
    chain.add("linear")
    # no native importance: permutation on validation rows. With 10 neighbours the cross-fit
    # finds no signal in these residuals (step 0, nothing to permute); with 5 it finds some.
    chain.add("knn", 0.5, params={"n_neighbors": 5})
    assert chain.stages[1].step > 0
    chain.add("tree", 0.5, params={"max_depth": 3})
    for row in (1, 2, 3):
        importance = chain.importance(row)
        assert set(importance) == {"a", "b", "colour", "flag"}
        assert sum(importance.values()) == pytest.approx(1.0)
    assert chain.importance(1)["a"] > chain.importance(1)["flag"]


def test_locked_test_part_is_scored_only_when_revealed(mixed_frame):
    chain = stages.Chain(mixed_frame, "y", stages.Holdout(fraction=0.2, test_fraction=0.2, seed=0))
    chain.add("linear")
    assert "test_rmse" not in chain.table()
    with pytest.raises(StageSpecError, match="locked"):
        chain.residuals("test")
    chain.reveal_test()
    assert "test_rmse" in chain.table()
    assert chain.describe()["test_reveals"] == 1
    chain.add("tree", 0.3)
    assert "test_rmse" not in chain.table()  # a new chain state locks the test part again


@pytest.mark.parametrize("validation", [stages.Holdout(fraction=0.25, seed=1), stages.KFold(folds=3, seed=1)])
def test_the_chain_keeps_no_reference_to_the_rows_of_the_frame_it_was_built_from(diabetes_frame, validation):
    # Diabetes data shipped with scikit-learn (Efron et al. 2004). The chain works from its own
    # matrix; holding the frame's rows as well would keep a second copy of the data alive.
    import gc
    import weakref

    frame = diabetes_frame.copy()
    column = weakref.ref(frame["bmi"].to_numpy().base if frame["bmi"].to_numpy().base is not None
                         else frame["bmi"].to_numpy())
    chain = stages.Chain(frame, "target", validation)
    chain.add("linear")
    del frame
    gc.collect()
    assert column() is None
    assert list(chain.prepared.frame.columns) == list(diabetes_frame.columns) and len(chain.prepared.frame) == 0
