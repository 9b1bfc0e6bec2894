"""Honest validation: no row outside the fitting part reaches a learner; k-fold is out-of-fold."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import KFold as SklearnKFold

import stages
from stages.kinds import _REGISTRY, register
from stages.kinds.base import Artifact, StageKind
from stages.steps import CROSS_FIT_FOLDS


class _Zero:
    def predict(self, X):
        return np.zeros(len(X))


@pytest.fixture()
def recording_kind():
    """A kind whose fit records the row ids (feature 'row_id') it was given."""
    seen: list[np.ndarray] = []

    class RecordingKind(StageKind):
        name = "recording"
        summary = "remembers the rows it was fit on"

        def fit(self, request, params):
            seen.append(request.X[:, 0].astype(int).copy())
            return _Zero()

        def save(self, learner):
            return Artifact("json", b"{}")

        def load(self, artifact):
            return _Zero()

    register(RecordingKind())
    yield seen
    _REGISTRY.pop("recording", None)


def _frame(n: int = 120) -> pd.DataFrame:
    rng = np.random.RandomState(0)
    frame = pd.DataFrame({"row_id": np.arange(n, dtype=float), "x": rng.normal(size=n)})
    frame["y"] = frame["x"] * 2 + rng.normal(size=n)
    frame["when"] = pd.date_range("2024-01-01", periods=n, freq="D").astype(str)
    frame["site"] = np.repeat(np.arange(12), n // 12).astype(str)
    frame["part"] = np.where(np.arange(n) % 5 == 0, "valid", np.where(np.arange(n) % 7 == 0, "test", "train"))
    return frame


SCHEMES = [
    stages.Holdout(fraction=0.25, seed=3, test_fraction=0.1),
    stages.KFold(folds=4, seed=3, test_fraction=0.1),
    stages.TimeOrder("when", fraction=0.2, test_fraction=0.1),
    stages.GroupHoldout("site", fraction=0.25, seed=3, test_fraction=0.1),
    stages.SplitColumn("part"),
]


@pytest.mark.parametrize("scheme", SCHEMES, ids=lambda s: s.scheme)
def test_no_row_outside_the_fitting_part_reaches_a_learner(recording_kind, scheme):
    frame = _frame()
    chain = stages.Chain(frame, "y", scheme, features=["row_id", "x"])
    chain.add("recording", repeat=2)
    train_ids = set(chain.matrix[chain.layout.train, 0].astype(int))
    held = set(chain.matrix[chain.layout.n_train:, 0].astype(int))
    tracks = len(chain.layout.tracks)
    fits = 1 + CROSS_FIT_FOLDS  # the stage itself, then one fit per fold of its cross-fit step
    assert len(recording_kind) == 2 * tracks * fits  # every stage is fit so on every track
    for i, rows in enumerate(recording_kind):
        assert not set(rows) & held, "a validation or test row reached fit()"
        t, within = (i // fits) % tracks, i % fits
        fitting = train_ids if t == 0 else train_ids - set(chain.matrix[chain.layout.tracks[t].evaluate, 0].astype(int))
        if within == 0:
            assert set(rows) == fitting
        else:  # a cross-fit fold: four fifths of the track's own fitting rows
            assert set(rows) < fitting and len(rows) == pytest.approx(0.8 * len(fitting), abs=1)


def test_kfold_validation_is_the_out_of_fold_error_of_k_separate_fits():
    # Reference: a hand-built loop over sklearn.model_selection.KFold with LinearRegression per fold.
    frame = _frame()
    chain = stages.Chain(frame, "y", stages.KFold(folds=4, seed=0, stratify=False), features=["x"])
    chain.add("linear")
    X, y = frame[["x"]].to_numpy(), frame["y"].to_numpy()
    oof = np.empty(len(y))
    for fit_rows, held_rows in SklearnKFold(4, shuffle=True, random_state=0).split(X):
        oof[held_rows] = LinearRegression().fit(X[fit_rows], y[fit_rows]).predict(X[held_rows])
    expected = float(np.sqrt(np.mean((y - oof) ** 2)))
    assert chain.scores()[1].valid["rmse"] == pytest.approx(expected, rel=1e-10)
    assert len(chain.scores()[1].fold_valid) == 4
    # the full chain is fit on every non-test row: its train score is LinearRegression's on all rows
    full = LinearRegression().fit(X, y).predict(X)
    assert chain.scores()[1].train["rmse"] == pytest.approx(float(np.sqrt(np.mean((y - full) ** 2))), rel=1e-10)


def test_kfold_table_shows_the_spread_across_folds():
    frame = _frame()
    chain = stages.Chain(frame, "y", stages.KFold(folds=4, seed=0), features=["x"])
    chain.add("linear")
    spread = chain.table()["fold_spread"]
    assert np.isnan(spread.iloc[0]) or spread.iloc[0] >= 0
    folds = chain.scores()[1].fold_valid
    assert spread.iloc[1] == pytest.approx(np.std(folds, ddof=1) / np.sqrt(4))
