"""``sklearn:`` stages of HistGradientBoostingRegressor and the neighbour regressors in chain files.

They save and load to the same predictions as the live chain (scikit-learn's own ``predict``), and
crafted files are refused before scikit-learn's C code walks them: a histogram boosting
predictor's node records are checked (child indices, cycles, split features, categorical
bitsets, values), and a neighbour regressor's search tree is never read from a file but built
again by scikit-learn from the stored rows. Data: scikit-learn's diabetes data (Efron et al., 2004).
"""

from __future__ import annotations

import numpy as np
import pytest
import skops.io as sio
from hostile import entry_of, load_in_guarded_process, manifest_of, members_of, with_member
from sklearn.datasets import load_diabetes

import stages

HIST = "sklearn:sklearn.ensemble.HistGradientBoostingRegressor"
KNN = "sklearn:sklearn.neighbors.KNeighborsRegressor"
RADIUS = "sklearn:sklearn.neighbors.RadiusNeighborsRegressor"


@pytest.fixture(scope="module")
def diabetes():
    frame = load_diabetes(as_frame=True).frame.iloc[:300].copy()
    frame.loc[::11, "bmi"] = np.nan  # the boosting's own missing-value branches are saved too
    return frame


@pytest.fixture(scope="module")
def saved(diabetes, tmp_path_factory):
    """Return the live chain and its file: linear, then each of the three classes."""
    chain = stages.Chain(diabetes, "target", stages.Holdout(fraction=0.25, seed=0), seed=0)
    chain.add("linear")
    chain.add(HIST, 0.5, params={"max_iter": 15, "max_features": 0.5})  # max_features: it keeps a generator
    chain.add(KNN, 0.3, params={"n_neighbors": 7, "weights": "distance"})
    chain.add(RADIUS, 0.3, params={"radius": 20.0})  # the design is standardised: every row has neighbours
    path = tmp_path_factory.mktemp("hist") / "c.chain"
    chain.save(path)
    return chain, path


def test_they_save_and_load_to_the_same_predictions(saved, diabetes):
    chain, path = saved
    loaded = stages.load(path)
    assert [s.kind for s in loaded.stages][1:] == [HIST, KNN, RADIUS]
    # reference: the live chain, whose stages are scikit-learn's own fitted estimators
    assert np.array_equal(loaded.predict(diabetes), chain.fitted().predict(diabetes))
    assert loaded.stages[2].learner.estimator._tree is not None  # built again on load, by scikit-learn


def _crafted(path, kind, change):
    payload = members_of(path)[entry_of(manifest_of(path), kind)["member"]]
    model = sio.loads(payload, trusted=sio.get_untrusted_types(data=payload))
    change(model)
    return sio.dumps(model)


def _nodes(change):
    def edit(model):
        nodes = model._predictors[0][0].nodes
        change(nodes)
    return edit


HIST_DEFECTS = [
    ("child-out-of-range", _nodes(lambda n: n["left"].__setitem__(0, 1_000_000)), "child index 1,000,000"),
    ("root-as-a-child", _nodes(lambda n: n["right"].__setitem__(0, 0)), "root as a child"),
    ("a-node-with-two-parents", _nodes(lambda n: n["right"].__setitem__(0, n["left"][0])), "as the child of"),
    ("feature-out-of-range", _nodes(lambda n: n["feature_idx"].__setitem__(0, 100_000)), "splits on a feature"),
    ("a-categorical-split", _nodes(lambda n: n["is_categorical"].__setitem__(0, 1)), "neither a leaf nor"),
    ("an-infinite-leaf", _nodes(lambda n: n["value"].__setitem__(len(n) - 1, np.inf)), "not a number"),
    ("two-trees-an-iteration", lambda m: m._predictors[0].append(m._predictors[0][0]), "one tree an iteration"),
    ("records-of-another-dtype",
     lambda m: setattr(m._predictors[0][0], "nodes", m._predictors[0][0].nodes.astype(
         [(name, "<f8") for name in m._predictors[0][0].nodes.dtype.names])), "could not be loaded"),
    # (TreePredictor's own state setter refuses another dtype while skops builds it; check_hist_predictors too)
]
KNN_DEFECTS = [
    ("rows-of-another-width", lambda m: setattr(m, "_fit_X", m._fit_X[:, :3].copy()), "no finite rows of"),
    ("targets-of-another-length", lambda m: setattr(m, "_y", m._y[:5].copy()), "no finite rows of"),
    ("a-search-tree-in-the-file", lambda m: setattr(m, "_tree", __import__("sklearn.neighbors").neighbors.KDTree(
        m._fit_X)), "not trusted"),
    ("a-metric-that-is-not-one", lambda m: setattr(m, "metric", "no-such-metric"), "could not be built"),
]


def test_every_crafted_file_is_refused_without_a_crash_or_a_hang(saved, tmp_path):
    _, path = saved
    files = []
    for kind, defects in ((HIST, HIST_DEFECTS), (KNN, KNN_DEFECTS)):
        meta = entry_of(manifest_of(path), kind)["meta"]
        for name, change, words in defects:
            target = tmp_path / f"{name}.chain"
            files.append((with_member(path, target, kind, _crafted(path, kind, change), meta), words))
    reports = load_in_guarded_process([p for p, _ in files])
    wrong = [(p.name, reports[str(p)]["outcome"], reports[str(p)]["message"][-200:]) for p, words in files
             if reports[str(p)]["outcome"] != "ChainFileError" or words not in reports[str(p)]["message"]
             or "\n" in reports[str(p)]["message"]]
    assert not wrong, "\n".join(map(str, wrong))
