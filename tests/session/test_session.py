"""Sessions: a saved chain comes back exactly, undo survives a restart, and data changes are told."""

from __future__ import annotations

import hashlib
import json
import os
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import platformdirs
import pytest
from session_support import (
    CHEAP_KINDS,
    assert_identical,
    build,
    chain_state,
    refit_state,
    round_trip,
)
from sklearn.datasets import load_diabetes

import stages
from stages.files import session_parts
from stages.files.session import (
    SessionDataChanged,
    SessionError,
    SessionSaveError,
    data_changes,
    load_session,
    save_session,
    session_path,
)


# ----------------------------------------------------------------------------- round trips
def test_a_holdout_chain_of_every_cheap_kind_comes_back_exactly(data_file):
    chain = build(data_file)
    restored = round_trip(chain)
    assert_identical(chain_state(chain), chain_state(restored))
    # the restored learners predict new rows as the originals do (the fitted chain's own reference)
    frame = pd.read_csv(data_file)
    assert np.array_equal(chain.predict(frame), restored.predict(frame))


def test_a_kfold_chain_comes_back_exactly_on_every_track(data_file):
    chain = build(data_file, stages.KFold(folds=3, seed=5), CHEAP_KINDS[:6])
    restored = round_trip(chain)
    assert len(restored.layout.tracks) == 4
    assert_identical(chain_state(chain), chain_state(restored))


def test_a_binary_chain_with_a_locked_test_part_comes_back_revealed(cancer_file):
    chain = stages.Chain.from_file(cancer_file, "malignant", stages.Holdout(fraction=0.2, seed=1, test_fraction=0.2))
    chain.add("logistic")
    chain.add("tree", 0.5, params={"max_depth": 2}, repeat=2)
    chain.add("lightgbm", 0.3, params={"n_estimators": 3, "num_leaves": 4, "n_jobs": 1})
    chain.reveal_test()
    restored = round_trip(chain)
    assert restored.test_revealed and restored.reveal_count == 1
    assert_identical(chain_state(chain), chain_state(restored))


@pytest.mark.parametrize("validation", [
    stages.TimeOrder(column="visit", fraction=0.25), stages.GroupHoldout(column="clinic", fraction=0.3, seed=2),
    stages.SplitColumn(column="part"),
])
def test_chains_validated_by_a_column_come_back_exactly(data_file, validation):
    frame = pd.read_csv(data_file)
    frame["visit"] = pd.date_range("2024-01-01", periods=len(frame), freq="D").strftime("%Y-%m-%d")
    frame["clinic"] = [f"C{i % 9}" for i in range(len(frame))]
    frame["part"] = np.where(np.arange(len(frame)) % 4 == 0, "valid", "train")
    frame.to_csv(data_file, index=False)
    chain = build(data_file, validation, CHEAP_KINDS[:4])
    restored = round_trip(chain)
    assert validation.column not in restored.schema.names
    assert_identical(chain_state(chain), chain_state(restored))


def test_column_choices_are_kept(data_file):
    chain = stages.Chain.from_file(data_file, "target", features=["age", "bmi", "band"], seed=7, threshold=0.4)
    chain.add("tree", 0.5, params={"max_depth": 2})
    restored = round_trip(chain)
    assert restored.schema.names == ["age", "bmi", "band"] and restored.seed == 7 and restored.threshold == 0.4
    assert_identical(chain_state(chain), chain_state(restored))


def test_a_chain_from_a_frame_needs_a_session_path_and_its_frame_to_load(tmp_path):
    frame = load_diabetes(as_frame=True).frame.iloc[:150]
    chain = stages.Chain(frame, "target")
    chain.add("linear")
    with pytest.raises(SessionSaveError, match="not read from a file"):
        save_session(chain)
    path = save_session(chain, tmp_path / "frame.session")
    with pytest.raises(SessionError, match="DataFrame"):
        load_session(path)
    assert_identical(chain_state(chain), chain_state(load_session(path, frame)))
    with pytest.raises(SessionDataChanged, match="differ"):
        load_session(path, frame.iloc[:140])


# ----------------------------------------------------------------------------- after a restart
@pytest.mark.parametrize("removal", ["step_back", "drop", "trim", "drop_then_step_back"])
def test_undo_after_a_restart_gives_the_state_undo_gives_before_it(data_file, removal):
    chain = build(data_file, kinds=[("linear", 1.0, {})] + [("tree", 1.0, {"max_depth": 6, "min_samples_leaf": 1})] * 4)
    if removal == "drop_then_step_back":
        chain.drop(2)
        chain.step_back()
    elif removal == "drop":
        chain.drop(2)
    else:
        getattr(chain, removal)()
    assert chain.can_undo()
    restored = round_trip(chain)
    assert_identical(chain_state(chain), chain_state(restored))
    while chain.can_undo():
        assert chain.undo() == restored.undo()
        assert_identical(chain_state(chain), chain_state(restored))
    assert not restored.can_undo()


def test_a_stage_added_after_a_restart_is_the_stage_added_without_one(data_file):
    chain = build(data_file, kinds=[("forest", 0.5, {"n_estimators": 3})] * 2)
    chain.step_back()
    restored = round_trip(chain)
    for each in (chain, restored):  # the stream was rewound and restored, so the refit is the same fit
        each.add("forest", 0.5, params={"n_estimators": 3})
    assert_identical(refit_state(chain), refit_state(restored))


def test_a_restored_session_saves_again_to_the_same_content(data_file):
    chain = build(data_file, kinds=CHEAP_KINDS[:4])
    first = save_session(chain)
    before = json.loads(zipfile.ZipFile(first).read("session.json"))
    again = json.loads(zipfile.ZipFile(save_session(round_trip(chain))).read("session.json"))
    for manifest in (before, again):
        manifest.pop("saved")
    assert before == again


# ----------------------------------------------------------------------------- where and what
def test_the_session_path_is_keyed_by_the_data_files_absolute_path(data_file, home, tmp_path):
    path = session_path(data_file)
    key = hashlib.sha256(os.path.realpath(data_file).encode()).hexdigest()[:12]  # hashlib: the reference
    assert path == home / "sessions" / f"diabetes-{key}.session"
    other = tmp_path / "elsewhere"
    other.mkdir()
    assert session_path(other / "diabetes.csv") != path
    os.chdir(data_file.parent)
    assert session_path("diabetes.csv") == path


def test_without_remnant_home_sessions_go_to_the_user_data_folder(data_file, monkeypatch):
    monkeypatch.delenv("REMNANT_HOME")
    assert session_path(data_file).parent == Path(platformdirs.user_data_dir("remnant")) / "sessions"


def test_the_file_holds_each_stage_once_with_its_settings(data_file):
    chain = build(data_file, kinds=CHEAP_KINDS[:4])
    chain.step_back()
    chain.drop(1)
    with zipfile.ZipFile(save_session(chain)) as archive:
        manifest = json.loads(archive.read("session.json"))
        names = archive.namelist()
    assert manifest["format"] == "remnant-session" and manifest["format_version"] == 1
    data = manifest["data"]
    assert data["size"] == data_file.stat().st_size
    assert data["sha256"] == hashlib.sha256(data_file.read_bytes()).hexdigest()  # hashlib: the reference
    assert manifest["columns"]["target"] == "target" and manifest["validation"]["scheme"] == "holdout"
    assert [len(r["stages"]) for r in manifest["removals"]] == [4, 3]
    # 4 first fits, then the refits of stages 2 and 3 after the drop: 6 distinct stages, stored once each
    assert len(manifest["stages"]) == 6 and len(manifest["current"]) == 2
    assert len([n for n in names if n.startswith("stages/")]) == 6
    assert not any(n.endswith((".pkl", ".pickle", ".joblib")) for n in names)


def test_saving_again_reuses_each_stages_artifacts(data_file, monkeypatch):
    chain = build(data_file, kinds=CHEAP_KINDS[:3])
    save_session(chain)
    calls = []
    kind = stages.kinds.get_kind("tree")
    original = type(kind).save
    monkeypatch.setattr(type(kind), "save", lambda self, learner: calls.append(1) or original(self, learner))
    chain.add("tree", 0.5, params={"max_depth": 2})
    save_session(chain)
    save_session(chain)
    assert len(calls) == 1  # only the new stage was turned into an artifact


def test_the_session_records_the_data_as_the_chain_read_it(data_file):
    chain = build(data_file, kinds=CHEAP_KINDS[:1])
    save_session(chain)
    with open(data_file, "a") as handle:
        handle.write("0,0,0,0,0,0,0,0,0,0,100,low\n")
    path = save_session(chain)
    assert any("content differs" in line for line in data_changes(path))


# ----------------------------------------------------------------------------- data changes
def test_an_unchanged_or_only_touched_data_file_is_no_change(data_file):
    path = save_session(build(data_file, kinds=CHEAP_KINDS[:1]))
    assert data_changes(path) == []
    os.utime(data_file, ns=(0, data_file.stat().st_mtime_ns + 3_600 * 10**9))
    assert data_changes(path) == []


def test_a_larger_data_file_is_reported_with_its_size_time_and_content(data_file):
    path = save_session(build(data_file, kinds=CHEAP_KINDS[:1]))
    before = data_file.stat()
    extra = "0.01,0,0,0,0,0,0,0,0,0,150,low\n"
    with open(data_file, "a") as handle:
        handle.write(extra)
    os.utime(data_file, ns=(before.st_atime_ns, before.st_mtime_ns + 22 * 60 * 10**9))
    changes = data_changes(path)
    assert changes[0] == f"diabetes.csv: {len(extra)} bytes larger"
    assert changes[1].startswith("diabetes.csv: modified ") and "(was " in changes[1]
    assert changes[2] == "diabetes.csv: content differs (sha256)"
    with pytest.raises(SessionDataChanged) as err:
        load_session(path)
    assert err.value.changes == changes and "\n" not in str(err.value)


def test_same_size_same_time_other_content_is_found_by_its_hash(data_file):
    path = save_session(build(data_file, kinds=CHEAP_KINDS[:1]))
    before = data_file.stat()
    text = data_file.read_bytes()
    data_file.write_bytes(text.replace(b"high", b"HIGH", 1))
    os.utime(data_file, ns=(before.st_atime_ns, before.st_mtime_ns))
    session_parts._HASHES.clear()  # as in a new process: nothing cached
    assert data_changes(path) == ["diabetes.csv: content differs (sha256)"]


def test_a_deleted_data_file_is_reported(data_file):
    path = save_session(build(data_file, kinds=CHEAP_KINDS[:1]))
    data_file.unlink()
    assert data_changes(path) == ["diabetes.csv: the file no longer exists"]


def test_allow_changed_refits_the_stages_on_the_new_data(data_file):
    specs = CHEAP_KINDS[:4]
    path = save_session(build(data_file, kinds=specs))
    frame = pd.read_csv(data_file)
    frame.iloc[:190].to_csv(data_file, index=False)
    restored = load_session(path, allow_changed=True)
    fresh = build(data_file, kinds=specs)  # the reference: the same stages fit from scratch on the new data
    assert len(restored.prepared.y) == 190
    assert_identical(refit_state(fresh)["stages"], refit_state(restored)["stages"])
    assert any("refit" in note for note in restored.notes) and not restored.can_undo()


def test_refitting_on_changed_data_reports_progress_and_can_be_cancelled(data_file):
    import threading

    from stages.errors import FitCancelled

    specs = CHEAP_KINDS[:3]
    path = save_session(build(data_file, kinds=specs))
    before = path.read_bytes()
    pd.read_csv(data_file).iloc[:190].to_csv(data_file, index=False)
    seen: list[float] = []
    load_session(path, allow_changed=True, progress=lambda fraction, detail="": seen.append(fraction))
    assert seen and max(seen) == pytest.approx(1.0) and seen == sorted(seen)
    cancel = threading.Event()

    def stop_after_the_first_stage(fraction: float, detail: str = "") -> None:
        if fraction >= 1 / len(specs):
            cancel.set()

    with pytest.raises(FitCancelled):
        load_session(path, allow_changed=True, cancel=cancel, progress=stop_after_the_first_stage)
    assert path.read_bytes() == before  # the session file is untouched


@pytest.mark.parametrize("validation", [stages.Holdout(fraction=0.25, seed=3, test_fraction=0.1), stages.KFold(folds=3)])
def test_a_multiclass_chain_comes_back_exactly_with_its_undo_stack(tmp_path, validation):
    # the wine data (Forina et al., UCI, shipped with scikit-learn), its cultivar as text
    from sklearn.datasets import load_wine

    X, y = load_wine(return_X_y=True, as_frame=True)
    frame = X.rename(columns=lambda c: c.replace("/", "_"))
    frame["cultivar"] = np.array(["barolo", "grignolino", "barbera"])[y]
    path = tmp_path / "wine.csv"
    frame.to_csv(path, index=False)
    chain = stages.Chain.from_file(path, "cultivar", validation)
    for kind, shrinkage, params in [("logistic", 1.0, {"C": 0.1}), *CHEAP_KINDS[2:9]]:
        chain.add(kind, shrinkage, params=params)
    chain.step_back()
    if validation.test_fraction:
        chain.reveal_test()
    restored = round_trip(chain)
    assert restored.task == "multiclass" and restored.outputs()[0].shape == (len(frame), 3)
    assert_identical(chain_state(chain), chain_state(restored))
    restored.undo()
    chain.undo()
    assert_identical(chain_state(chain), chain_state(restored))
