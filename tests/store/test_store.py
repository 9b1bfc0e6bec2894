"""The chain file: round trips for every stage kind, the manifest, atomic writes and version drift."""

from __future__ import annotations

import errno
import hashlib
import io
import json
import os
import warnings
import zipfile

import lightgbm
import numpy as np
import pandas as pd
import pytest
import sklearn
from sklearn.datasets import load_breast_cancer, load_diabetes

import stages
from stages.errors import ChainFileError
from stages.files import store
from stages.files.store import FORMAT_NAME, FORMAT_VERSION, VersionDriftWarning
from stages.kinds.base import Artifact
from stages.predictor import FittedChain, UnseenLevelsWarning

SMALL = {"n_estimators": 10}
# one thread: LightGBM's thread pool only slows tiny fits down
LGB_SMALL = {"n_estimators": 10, "n_jobs": 1}


@pytest.fixture(scope="module")
def diabetes() -> pd.DataFrame:
    """Return 200 rows of scikit-learn's diabetes data with a text column made from age."""
    frame = load_diabetes(as_frame=True).frame.iloc[:200].copy()
    frame["band"] = np.where(frame.age > 0.02, "old", np.where(frame.age < -0.02, "young", "mid"))
    return frame


@pytest.fixture(scope="module")
def cancer() -> pd.DataFrame:
    """Return 200 rows of scikit-learn's breast cancer data (a binary target)."""
    return load_breast_cancer(as_frame=True).frame.iloc[:200].copy()


def make_chain(frame: pd.DataFrame, *stage_list) -> stages.Chain:
    chain = stages.Chain(frame, "target", stages.Holdout(fraction=0.2, seed=0))
    for kind, shrinkage, params in stage_list:
        chain.add(kind, shrinkage, params=params)
    return chain


def read_manifest(path) -> dict:
    with zipfile.ZipFile(path) as archive:
        return json.loads(archive.read("manifest.json"))


def rewrite(path, manifest: dict | None = None, members: dict[str, bytes] | None = None) -> None:
    """Rewrite the chain file at ``path`` with some members or the manifest replaced."""
    with zipfile.ZipFile(path) as archive:
        content = {name: archive.read(name) for name in archive.namelist()}
    content.update(members or {})
    if manifest is not None:
        content["manifest.json"] = json.dumps(manifest).encode()
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        for name, data in content.items():
            archive.writestr(name, data)


# ----------------------------------------------------------------------------- round trips
REGRESSION_KINDS = [
    ("mean", None, "json"),
    ("linear", None, "json"),
    ("ridge", None, "json"),
    ("lasso", {"alpha": 0.1}, "json"),
    ("tree", {"max_depth": 3}, "skops"),
    ("forest", SMALL, "skops"),
    ("extra_trees", SMALL, "skops"),
    ("lightgbm", LGB_SMALL, "lgb"),
    ("hist_tree", {"max_depth": 3, "n_jobs": 1}, "lgb"),
    ("knn", None, "npz"),
    ("spline", None, "json"),
    ("sklearn:sklearn.svm.SVR", {"C": 10.0}, "skops"),
]


@pytest.mark.parametrize(("kind", "params", "fmt"), REGRESSION_KINDS, ids=[k for k, _, _ in REGRESSION_KINDS])
def test_regression_chain_predicts_bitwise_the_same_after_a_round_trip(tmp_path, diabetes, kind, params, fmt):
    # two stages of the kind, so the second is fit on the first one's residuals
    chain = make_chain(diabetes, (kind, 1.0, params), (kind, 0.5, params))
    chain.save(tmp_path / "c.chain")
    loaded = stages.load(tmp_path / "c.chain")
    # reference: the live chain; every artifact stores its floats exactly (JSON floats are
    # written with repr, npz and skops keep the arrays' bytes, LightGBM writes 17 digits)
    assert np.array_equal(loaded.predict(diabetes), chain.predict(diabetes))
    assert [s["fmt"] for s in read_manifest(tmp_path / "c.chain")["stages"]] == [fmt, fmt]
    assert [s.kind for s in loaded.stages] == [kind, kind]


@pytest.mark.parametrize("kind", ["logistic", "tree"])
def test_binary_chain_predicts_labels_and_probabilities_bitwise_after_a_round_trip(tmp_path, cancer, kind):
    chain = make_chain(cancer, (kind, 1.0, None), ("tree", 0.1, {"max_depth": 2}))
    chain.save(tmp_path / "b.chain")
    loaded = stages.load(tmp_path / "b.chain")
    live = chain.fitted()
    # reference: the live chain's labels and probabilities
    assert np.array_equal(loaded.predict(cancer), chain.predict(cancer))
    assert np.array_equal(loaded.predict_proba(cancer), live.predict_proba(cancer))
    assert loaded.task == "binary" and loaded.schema.classes == live.schema.classes


def test_loaded_chain_keeps_start_scale_scores_and_settings(tmp_path, diabetes):
    chain = make_chain(diabetes, ("linear", 1.0, None), ("tree", 0.3, {"max_depth": 2}))
    chain.save(tmp_path / "c.chain")
    loaded, live = stages.load(tmp_path / "c.chain"), chain.fitted()
    assert loaded.start == live.start
    assert [s.scale for s in loaded.stages] == [s.scale for s in live.stages]
    assert [s.scores for s in loaded.stages] == [s.scores for s in live.stages]
    assert [s.spec for s in loaded.stages] == chain.specs()
    assert loaded.start_scores == live.start_scores
    assert loaded.meta["validation"] == chain.validation.to_dict()
    assert loaded.meta["rows"] == {"train": 160, "valid": 40, "test": 0}
    assert loaded.meta["seed"] == 0 and loaded.meta["threshold"] == 0.5


def test_a_loaded_chain_saved_again_keeps_its_probe_and_fingerprint(tmp_path, diabetes):
    chain = make_chain(diabetes, ("linear", 1.0, None))
    chain.save(tmp_path / "a.chain")
    stages.files.store.save(stages.load(tmp_path / "a.chain"), tmp_path / "b.chain")
    first, second = read_manifest(tmp_path / "a.chain"), read_manifest(tmp_path / "b.chain")
    assert second["data"] == first["data"]
    assert second["probe"]["sha256"] == first["probe"]["sha256"]
    assert np.array_equal(stages.load(tmp_path / "b.chain").predict(diabetes), chain.predict(diabetes))


def test_scores_that_are_nan_are_written_as_null_and_read_back_as_nan(tmp_path, diabetes):
    live = make_chain(diabetes, ("mean", 1.0, None)).fitted()
    fitted = FittedChain(live.schema, live.loss, live.start, live.stages, dict(live.meta),
                         {"train": {"rmse": float("nan"), "r2": float("inf")}, "valid": {}})
    store.save(fitted, tmp_path / "n.chain")
    with zipfile.ZipFile(tmp_path / "n.chain") as archive:
        text = archive.read("manifest.json").decode()
    # strict JSON (RFC 8259 has no NaN or Infinity): Python's parser must not meet those tokens
    manifest = json.loads(text, parse_constant=lambda token: pytest.fail(f"non-strict token {token}"))
    assert manifest["start_scores"]["train"] == {"rmse": None, "r2": None}
    assert manifest["probe"] is None  # a FittedChain built by hand has no training rows to probe
    assert np.isnan(stages.load(tmp_path / "n.chain").start_scores["train"]["rmse"])


# ----------------------------------------------------------------------------- manifest
def test_manifest_records_format_versions_schema_levels_specs_and_checksums(tmp_path, diabetes):
    chain = make_chain(diabetes, ("linear", 1.0, None), ("tree", 0.5, {"max_depth": 2}))
    chain.add("sklearn:sklearn.svm.SVR", 0.5, features=["bmi", "band"])
    chain.save(tmp_path / "c.chain")
    manifest = read_manifest(tmp_path / "c.chain")
    assert (manifest["format"], manifest["format_version"]) == (FORMAT_NAME, FORMAT_VERSION)
    # reference: the installed libraries' own version strings
    assert manifest["versions"]["scikit-learn"] == sklearn.__version__
    assert manifest["versions"]["lightgbm"] == lightgbm.__version__
    assert manifest["versions"]["numpy"] == np.__version__
    assert manifest["versions"]["remnant"] == stages.__version__
    assert (manifest["task"], manifest["loss"]) == ("regression", "squared")
    # reference: the start value of squared loss is the mean target of the fitting rows
    assert manifest["start"] == pytest.approx(float(chain.y[: chain.layout.n_train].mean()), rel=1e-12)
    band = next(c for c in manifest["schema"]["columns"] if c["name"] == "band")
    # reference: pandas' distinct values of the column, sorted
    assert band["role"] == "categorical" and band["levels"] == sorted(diabetes["band"].unique())
    assert [s["spec"] for s in manifest["stages"]] == [s.to_dict() for s in chain.specs()]
    svr = manifest["stages"][2]
    assert svr["features"] == ["bmi", "band"] and svr["feature_index"] == chain.schema.index_of(["bmi", "band"])
    assert svr["member"] == "stages/003-sklearn_sklearn.svm.SVR.skops"
    assert svr["params"]["C"] == 1.0 and svr["scale"] == 0.5 * svr["step"]["value"]
    # an SVR can interpolate its fitting rows: its step is chosen on rows out of fold
    assert svr["step"]["rule"] == "cross-fit 5 folds" and svr["step"]["value"] == chain.stages[2].step
    assert manifest["stages"][0]["step"] == {"rule": "none (least squares)", "value": 1.0}
    with zipfile.ZipFile(tmp_path / "c.chain") as archive:
        assert all(info.compress_type == zipfile.ZIP_DEFLATED for info in archive.infolist())
        for entry in [*manifest["stages"], manifest["probe"]]:
            # reference: hashlib's SHA-256 of the member's bytes
            assert entry["sha256"] == hashlib.sha256(archive.read(entry["member"])).hexdigest()
        probe = np.load(io.BytesIO(archive.read("probe.npz")), allow_pickle=False)
        assert np.array_equal(probe["matrix"], chain.matrix[:64])
        assert np.array_equal(probe["raw"], chain.fitted().raw_from_matrix(chain.matrix[:64])[:, 0])  # one output: a vector


def test_data_fingerprint_is_the_sha256_of_the_data_whatever_the_split(tmp_path, diabetes):
    one = make_chain(diabetes, ("mean", 1.0, None))
    other = stages.Chain(diabetes, "target", stages.Holdout(fraction=0.3, seed=7))
    one.save(tmp_path / "a.chain")
    other.save(tmp_path / "b.chain")
    first, second = read_manifest(tmp_path / "a.chain")["data"], read_manifest(tmp_path / "b.chain")["data"]
    # reference: hashlib over the matrix in the data's own row order, then the target
    order = np.argsort(one.layout.order, kind="stable")
    digest = hashlib.sha256(f"{len(diabetes)}x{one.matrix.shape[1]}".encode())
    digest.update(np.ascontiguousarray(one.matrix[order]).tobytes())
    digest.update(diabetes["target"].to_numpy(dtype=np.float64).tobytes())
    assert first == {"rows": 200, "columns": 11, "sha256": digest.hexdigest()}
    assert second == first


# ----------------------------------------------------------------------------- writing
def test_save_replaces_an_existing_file_with_the_new_chain(tmp_path, diabetes):
    path = tmp_path / "c.chain"
    make_chain(diabetes, ("mean", 1.0, None)).save(path)
    chain = make_chain(diabetes, ("linear", 1.0, None))
    chain.save(path)
    assert [s.kind for s in stages.load(path).stages] == ["linear"]
    assert os.listdir(tmp_path) == ["c.chain"]  # no temporary file left behind


def test_a_failed_rename_leaves_the_existing_file_untouched(tmp_path, diabetes, monkeypatch):
    path = tmp_path / "c.chain"
    path.write_bytes(b"the old chain")

    def refuse(src, dst):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(store.os, "replace", refuse)
    with pytest.raises(ChainFileError, match="the disk is full") as err:
        make_chain(diabetes, ("mean", 1.0, None)).save(path)
    assert str(path) in str(err.value) and "\n" not in str(err.value)
    assert path.read_bytes() == b"the old chain"
    assert os.listdir(tmp_path) == ["c.chain"]


def test_a_full_disk_while_writing_gives_chain_file_error_and_keeps_the_old_file(tmp_path, diabetes, monkeypatch):
    path = tmp_path / "c.chain"
    path.write_bytes(b"the old chain")

    def full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(store.os, "fsync", full)
    with pytest.raises(ChainFileError, match="disk is full"):
        make_chain(diabetes, ("mean", 1.0, None)).save(path)
    assert path.read_bytes() == b"the old chain"
    assert os.listdir(tmp_path) == ["c.chain"]


def test_a_failing_stage_artifact_leaves_the_existing_file_untouched(tmp_path, diabetes, monkeypatch):
    path = tmp_path / "c.chain"
    path.write_bytes(b"the old chain")
    from stages.kinds.mean import MeanKind

    def broken(self, learner) -> Artifact:
        raise RuntimeError("writer failed")

    monkeypatch.setattr(MeanKind, "save", broken)
    with pytest.raises(RuntimeError, match="writer failed"):
        make_chain(diabetes, ("mean", 1.0, None)).save(path)
    assert path.read_bytes() == b"the old chain"
    assert os.listdir(tmp_path) == ["c.chain"]


def test_saving_into_a_missing_folder_names_the_path(tmp_path, diabetes):
    path = tmp_path / "nowhere" / "c.chain"
    with pytest.raises(ChainFileError, match="does not exist") as err:
        make_chain(diabetes, ("mean", 1.0, None)).save(path)
    assert str(path) in str(err.value)


def test_saving_onto_a_folder_is_refused(tmp_path, diabetes):
    (tmp_path / "c.chain").mkdir()
    with pytest.raises(ChainFileError, match="is a folder"):
        make_chain(diabetes, ("mean", 1.0, None)).save(tmp_path / "c.chain")


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root ignores folder permissions")
def test_saving_into_an_unwritable_folder_names_the_path(tmp_path, diabetes):
    folder = tmp_path / "locked"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        with pytest.raises(ChainFileError, match="permission denied") as err:
            make_chain(diabetes, ("mean", 1.0, None)).save(folder / "c.chain")
    finally:
        folder.chmod(0o700)
    assert str(folder / "c.chain") in str(err.value)


# ----------------------------------------------------------------------------- versions
def test_a_file_from_the_same_versions_loads_without_warning(tmp_path, diabetes):
    make_chain(diabetes, ("linear", 1.0, None)).save(tmp_path / "c.chain")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        stages.load(tmp_path / "c.chain")


def test_other_library_versions_give_one_warning_naming_them(tmp_path, diabetes):
    path = tmp_path / "c.chain"
    make_chain(diabetes, ("linear", 1.0, None), ("lightgbm", 0.5, LGB_SMALL)).save(path)
    manifest = read_manifest(path)
    manifest["versions"].update({"scikit-learn": "1.5.2", "lightgbm": "4.3.0"})
    rewrite(path, manifest)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        stages.load(path)
    drift = [w for w in caught if issubclass(w.category, VersionDriftWarning)]
    assert len(drift) == 1  # the stored predictions still match, so no second warning
    assert (f"saved with scikit-learn 1.5.2, lightgbm 4.3.0; this machine has "
            f"{sklearn.__version__}, {lightgbm.__version__}") in str(drift[0].message)


def test_stored_predictions_that_no_longer_match_give_a_second_warning(tmp_path, diabetes):
    path = tmp_path / "c.chain"
    make_chain(diabetes, ("linear", 1.0, None)).save(path)
    manifest = read_manifest(path)
    with zipfile.ZipFile(path) as archive:
        probe = np.load(io.BytesIO(archive.read("probe.npz")), allow_pickle=False)
        matrix, raw = probe["matrix"], probe["raw"]
    buffer = io.BytesIO()
    np.savez(buffer, matrix=matrix, raw=raw * (1 + 1e-6))  # as if another library predicted 1e-6 apart
    manifest["versions"]["numpy"] = "1.26.0"
    manifest["probe"]["sha256"] = hashlib.sha256(buffer.getvalue()).hexdigest()
    rewrite(path, manifest, {"probe.npz": buffer.getvalue()})
    with pytest.warns(VersionDriftWarning) as caught:
        stages.load(path)
    messages = [str(w.message) for w in caught if issubclass(w.category, VersionDriftWarning)]
    assert len(messages) == 2 and "numpy 1.26.0" in messages[0]
    assert "predictions on this machine differ" in messages[1] and "1e-06 relative" in messages[1]


# ----------------------------------------------------------------------------- predicting
def test_an_unseen_category_level_is_treated_as_missing_and_warned(tmp_path, diabetes):
    chain = make_chain(diabetes, ("linear", 1.0, None), ("tree", 0.5, {"max_depth": 3}),
                       ("lightgbm", 0.5, {"n_estimators": 5, "min_child_samples": 5, "n_jobs": 1}))
    chain.save(tmp_path / "c.chain")
    loaded = stages.load(tmp_path / "c.chain")
    unseen, missing = diabetes.copy(), diabetes.copy()
    unseen.loc[unseen.index[:7], "band"] = "ancient"
    missing.loc[missing.index[:7], "band"] = None
    with pytest.warns(UnseenLevelsWarning, match="'band': 7"):
        predicted = loaded.predict(unseen)
    # the schema's promise: a level never seen in training is encoded as a missing value
    assert np.array_equal(predicted, loaded.predict(missing))
    with pytest.warns(UnseenLevelsWarning):
        assert np.array_equal(predicted, chain.predict(unseen))
    assert not np.array_equal(predicted[:7], loaded.predict(diabetes)[:7])


def test_a_tree_that_splits_missing_values_from_the_rest_loads_back(tmp_path):
    # scikit-learn gives such a split the threshold +inf (every number goes one way, NaN the other)
    rng = np.random.RandomState(0)
    frame = pd.DataFrame({"a": rng.normal(size=300), "b": rng.normal(size=300)})
    frame.loc[rng.rand(300) < 0.3, "a"] = np.nan
    frame["y"] = frame["a"].isna() * 3.0 + rng.normal(scale=0.1, size=300)
    chain = stages.Chain(frame, "y", stages.Holdout(fraction=0.2, seed=0))
    chain.add("tree", 1.0, params={"max_depth": 1})
    chain.add("forest", 0.5, params={"n_estimators": 5})
    assert np.isinf(chain.fitted().stages[0].learner.tree_.threshold[0])
    chain.save(tmp_path / "m.chain")
    loaded = stages.load(tmp_path / "m.chain")
    assert np.array_equal(loaded.predict(frame), chain.fitted().predict(frame))
