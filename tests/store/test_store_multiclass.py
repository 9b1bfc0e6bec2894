"""Multiclass chain files: they round-trip, and a crafted one is refused like any other.

A multiclass stage's artifact holds K learners (a list of K trees, K scikit-learn estimators),
one multi-output learner (a forest whose trees have K outputs, K columns of coefficients) or a
LightGBM model of K trees a round. Each count must be the chain's K, the LightGBM class count at
most 100, and every defect of the single-output files is refused in these too.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hostile import (
    edit_lines,
    edit_trees,
    entry_of,
    load_in_guarded_process,
    manifest_of,
    members_of,
    with_manifest,
    with_member,
)
from sklearn.datasets import load_wine
from test_hostile_structures import LIGHTGBM_DEFECTS, TREE_DEFECTS

import stages
from stages.kinds import skops_io
from stages.lightgbm_text import check_model_text

STAGES = (
    ("logistic", 1.0, {"C": 0.1}),
    ("tree", 0.3, {"max_depth": 2}),
    ("forest", 0.5, {"n_estimators": 3, "max_depth": 3}),
    ("lightgbm", 0.5, {"n_estimators": 3, "num_leaves": 4, "n_jobs": 1}),
    ("hist_tree", 0.5, {"n_jobs": 1}),
    ("mean", 0.5, {}),
    ("linear", 0.3, {}),
    ("knn", 0.3, {}),
    ("spline", 0.3, {}),
    ("sklearn:sklearn.tree.DecisionTreeRegressor", 0.3, {"max_depth": 2}),
)


@pytest.fixture(scope="module")
def wine_rows() -> pd.DataFrame:
    """Return the wine data (Forina et al., UCI, shipped with scikit-learn), its cultivar as text."""
    X, y = load_wine(return_X_y=True, as_frame=True)
    frame = X.rename(columns=lambda c: c.replace("/", "_"))
    frame["cultivar"] = np.array(["barolo", "grignolino", "barbera"])[y]
    return frame


@pytest.fixture(scope="module")
def multiclass_chain(tmp_path_factory, wine_rows) -> tuple[Path, stages.Chain]:
    chain = stages.Chain(wine_rows, "cultivar", stages.Holdout(fraction=0.25, seed=0))
    for kind, shrinkage, params in STAGES:
        chain.add(kind, shrinkage, params=params)
    path = tmp_path_factory.mktemp("multiclass") / "wine.chain"
    chain.save(path)
    return path, chain


def test_a_multiclass_chain_file_round_trips_every_kind(multiclass_chain, wine_rows):
    path, chain = multiclass_chain
    loaded = stages.load(path)
    assert loaded.task == "multiclass" and loaded.classes == ("barbera", "barolo", "grignolino")
    np.testing.assert_array_equal(loaded.start, chain.starts[0])
    np.testing.assert_array_equal(loaded.predict_proba(wine_rows), chain.fitted().predict_proba(wine_rows))
    manifest = manifest_of(path)
    assert manifest["start"] == [float(v) for v in chain.starts[0]]
    assert manifest["schema"]["classes"] == ["barbera", "barolo", "grignolino"]
    with np.load(__import__("io").BytesIO(members_of(path)["probe.npz"])) as probe:
        assert probe["raw"].shape == (64, 3)
    assert [s.scores for s in loaded.stages] == [s.scores for s in chain.fitted().stages]


def _three_to_two(text: str) -> str:
    text = edit_lines(text, "num_class", lambda v: "2", tree=None)
    return edit_lines(text, "num_tree_per_iteration", lambda v: "2", tree=None)


def test_lightgbm_text_of_another_class_count_or_beyond_the_limit_is_refused(multiclass_chain):
    path, _ = multiclass_chain
    text = members_of(path)[entry_of(manifest_of(path), "lightgbm")["member"]].decode()
    check_model_text(text, 13, n_classes=3)  # the untouched multiclass text passes
    with pytest.raises(stages.ChainFileError, match="gives 2 raw scores a row; the chain has 3"):
        check_model_text(_three_to_two(text), 13, n_classes=3)
    with pytest.raises(stages.ChainFileError, match="101 classes .*at most 100 classes"):
        check_model_text(edit_lines(text, "num_class", lambda v: "101", tree=None), 13)
    with pytest.raises(stages.ChainFileError, match="gives 3 raw scores a row; the chain has 1"):
        check_model_text(text, 13, n_classes=1)


def _two_trees(payload: bytes) -> tuple[bytes, dict]:
    trees = skops_io.load(payload, expected=(list,), n_features=13)
    crafted, types = skops_io.dump(trees[:2])
    return crafted, {"types": types}


def _one_output_forest(payload: bytes) -> tuple[bytes, dict]:
    from sklearn.ensemble import RandomForestRegressor

    forest = RandomForestRegressor(n_estimators=2, max_depth=2, random_state=0).fit(np.eye(13), np.arange(13.0))
    forest.random_state = None
    crafted, types = skops_io.dump(forest)
    return crafted, {"types": types}


@pytest.fixture(scope="module")
def defect_files(multiclass_chain, tmp_path_factory):
    """Return (path, words of the refusal) for every defect written into the multiclass chain file."""
    path, _ = multiclass_chain
    folder = tmp_path_factory.mktemp("multiclass-defects")
    members, manifest = members_of(path), manifest_of(path)
    files = []
    for kind in ("lightgbm", "hist_tree"):
        text = members[entry_of(manifest, kind)["member"]].decode()
        for name, edit, words in [*LIGHTGBM_DEFECTS, ("two-classes", _three_to_two, "2 raw scores a row")]:
            payload = edit(text).encode("utf-8", "surrogateescape")
            files.append((with_member(path, folder / f"{kind}-{name}.chain", kind, payload), words))
    for kind in ("tree", "forest", "sklearn:sklearn.tree.DecisionTreeRegressor"):
        payload = members[entry_of(manifest, kind)["member"]]
        for name, edit, words in TREE_DEFECTS:
            if kind == "forest" and name == "two-outputs":
                words = "this stage's trees have 3"
            target = folder / f"{kind.replace(':', '_')}-{name}.chain"
            files.append((with_member(path, target, kind, edit_trees(payload, edit)), words))
    crafted, meta = _two_trees(members[entry_of(manifest, "tree")["member"]])
    files.append((with_member(path, folder / "two-trees.chain", "tree", crafted, meta), "holds 2 items, not 3 trees"))
    crafted, meta = _one_output_forest(members[entry_of(manifest, "forest")["member"]])
    files.append((with_member(path, folder / "one-output-forest.chain", "forest", crafted, meta), "outputs"))
    two_values = json.dumps({"value": [0.0, 0.0]}).encode()
    files.append((with_member(path, folder / "mean-two.chain", "mean", two_values), "2 values for 3 outputs"))
    body = json.loads(members[entry_of(manifest, "linear")["member"]])
    body["coef"] = [row[:2] for row in body["coef"]]
    files.append((with_member(path, folder / "linear-narrow.chain", "linear", json.dumps(body).encode()),
                  "rows of 3 numbers"))
    return files


def test_every_defect_of_a_multiclass_file_is_refused_without_a_crash(defect_files):
    reports = load_in_guarded_process([path for path, _ in defect_files])
    wrong = []
    for path, words in defect_files:
        report = reports[str(path)]
        message = report["message"]
        if report["outcome"] != "ChainFileError" or "\n" in message or "stage" not in message or words not in message:
            wrong.append((path.name, report["outcome"], message[-160:]))
    assert not wrong, "\n".join(map(str, wrong))


@pytest.mark.parametrize("change,words", [
    (lambda m, _: m.__setitem__("start", m["start"][:2]), "start holds 2 values"),
    (lambda m, _: m.__setitem__("start", 0.5), "start holds 1 values"),
    (lambda m, _: m["schema"].__setitem__("classes", ["a", "a", "b"]), "names a class twice"),
    (lambda m, _: m["schema"].__setitem__("classes", ["a", "b"]), "lists 2 classes"),
    (lambda m, _: m.__setitem__("start", [0.0] * 101), "start"),
])
def test_a_manifest_whose_start_or_classes_do_not_agree_is_refused(multiclass_chain, tmp_path, change, words):
    path, _ = multiclass_chain
    crafted = with_manifest(path, tmp_path / "crafted.chain", change)
    with pytest.raises(stages.ChainFileError, match=words):
        stages.load(crafted)
