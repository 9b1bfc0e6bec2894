"""Sessions that cannot be saved or are damaged: a clear one-line error, the previous file intact, no code run."""

from __future__ import annotations

import contextlib
import errno
import hashlib
import io
import json
import os
import pickle
import zipfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from session_support import CHEAP_KINDS, assert_identical, build, chain_state

from stages.files import session
from stages.files.session import (
    SessionError,
    SessionSaveError,
    data_changes,
    load_session,
    save_session,
)
from stages.files.store import VersionDriftWarning

FUZZ = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


class CreatesFile:
    """Unpickling this creates the file at ``target``: what a hostile session file would do."""

    def __init__(self, target: str) -> None:
        self.target = target

    def __reduce__(self):
        return (open, (self.target, "w"))


# ----------------------------------------------------------------------------- failing saves
def test_a_full_disk_keeps_the_previous_file_and_the_chain(data_file, monkeypatch):
    chain = build(data_file, kinds=CHEAP_KINDS[:2])
    path = save_session(chain)
    kept = path.read_bytes()
    chain.add("knn", 0.3)
    before = chain_state(chain)

    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "fsync", full)
    with pytest.raises(SessionSaveError) as err:
        save_session(chain)
    message = str(err.value)
    assert "\n" not in message and str(path) in message and "disk is full" in message
    assert path.read_bytes() == kept
    assert list(path.parent.iterdir()) == [path]  # the temporary file is gone
    assert_identical(before, chain_state(chain))
    monkeypatch.undo()
    assert len(load_session(save_session(chain))) == 3  # once there is room, the next save works


def test_an_unwritable_folder_is_a_one_line_error_naming_the_file(data_file, tmp_path):
    chain = build(data_file, kinds=CHEAP_KINDS[:1])
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    target = blocker / "sessions" / "x.session"  # its folder cannot be created: a file is in the way
    with pytest.raises(SessionSaveError) as err:
        save_session(chain, target)
    assert "\n" not in str(err.value) and str(target) in str(err.value)
    assert len(chain) == 1


def test_temporary_files_left_by_a_killed_save_are_removed_by_the_next(data_file):
    chain = build(data_file, kinds=CHEAP_KINDS[:1])
    path = save_session(chain)
    leftover = path.parent / f".{path.name}.abc123.tmp"
    leftover.write_bytes(b"half a zip")
    save_session(chain)
    assert not leftover.exists() and len(load_session(path)) == 1


# ----------------------------------------------------------------------------- damaged files
def load_error(path, **kwargs) -> str:
    with pytest.raises(SessionError) as err:
        load_session(path, **kwargs)
    assert "\n" not in str(err.value)
    return str(err.value)


def rewrite(path: Path, change) -> None:
    """Rewrite the session at ``path`` after ``change(manifest, members)`` edits it in place."""
    with zipfile.ZipFile(path) as archive:
        members = {n: archive.read(n) for n in archive.namelist()}
    manifest = json.loads(members.pop("session.json"))
    change(manifest, members)
    with zipfile.ZipFile(path, "w") as archive:
        for name, payload in members.items():
            archive.writestr(name, payload)
        archive.writestr("session.json", json.dumps(manifest))


def test_missing_empty_folder_and_foreign_files_are_refused(tmp_path, valid_session):
    assert "no such session file" in load_error(tmp_path / "absent.session")
    (tmp_path / "folder.session").mkdir()
    assert "is a folder" in load_error(tmp_path / "folder.session")
    (tmp_path / "empty.session").write_bytes(b"")
    assert "not a zip archive" in load_error(tmp_path / "empty.session")
    rewrite(valid_session, lambda manifest, members: manifest.update(format="remnant-chain"))
    assert "not a remnant session file" in load_error(valid_session)


def test_a_newer_format_is_refused(valid_session):
    rewrite(valid_session, lambda manifest, members: manifest.update(format_version=2))
    assert "newer remnant" in load_error(valid_session)


def test_a_changed_artifact_fails_its_checksum(valid_session):
    def change(manifest, members):
        name = next(n for n in members if n.startswith("stages/"))
        members[name] = members[name] + b" "
    rewrite(valid_session, change)
    assert "fails its checksum" in load_error(valid_session)


@pytest.mark.parametrize("change", [
    lambda m: m["current"].append(-1), lambda m: m["current"].reverse(), lambda m: m["streams"].pop(),
    lambda m: m["stages"][0].update(previous=5), lambda m: m["states"][0][1].append(7),
    lambda m: m["stages"][1].update(scales=[float("1e400")]), lambda m: m.pop("columns"),
    lambda m: m["removals"][0].update(stages=[0, 0]), lambda m: m["stages"][0]["learners"].pop(),
    lambda m: m.update(validation={"scheme": "nonsense"}),
])
def test_an_inconsistent_manifest_is_refused(valid_session, change):
    rewrite(valid_session, lambda manifest, members: change(manifest))
    assert "damaged" in load_error(valid_session) or "settings" in load_error(valid_session)


def test_a_stage_that_does_not_reproduce_its_outputs_is_damage(valid_session):
    rewrite(valid_session, lambda manifest, members: manifest["stages"][0].update(scales=[0.5]))
    assert "does not reproduce its saved outputs" in load_error(valid_session)


def test_with_other_library_versions_a_different_output_is_a_warning(valid_session):
    def change(manifest, members):
        manifest["stages"][0].update(scales=[0.5])  # stands in for a library that now predicts otherwise
        manifest["versions"]["numpy"] = "0.0.1"
    rewrite(valid_session, change)
    with pytest.warns(VersionDriftWarning, match="predicts differently"):
        restored = load_session(valid_session)
    assert restored.stages[0].scales == (0.5,)


def test_a_pickle_in_place_of_a_stage_is_refused_and_never_runs(valid_session, tmp_path):
    target = tmp_path / "pwned"
    payload = pickle.dumps(CreatesFile(str(target)))

    def change(manifest, members):
        for entry in manifest["stages"]:
            item = entry["learners"][0]
            members[item["member"]] = payload
            item["sha256"] = hashlib.sha256(payload).hexdigest()
    rewrite(valid_session, change)
    load_error(valid_session)
    assert not target.exists()


@FUZZ
@given(st.binary(max_size=600))
def test_random_bytes_only_ever_raise_session_error(tmp_path, payload):
    path = tmp_path / "random.session"
    path.write_bytes(payload)
    with pytest.raises(SessionError):
        load_session(path)


@FUZZ
@given(st.lists(st.tuples(st.integers(min_value=0), st.integers(min_value=1, max_value=255)), min_size=1, max_size=4))
def test_byte_flips_only_ever_raise_session_error_or_load(valid_session, tmp_path, flips):
    data = bytearray(valid_session.read_bytes())
    for where, mask in flips:
        data[where % len(data)] ^= mask
    path = tmp_path / "flipped.session"
    path.write_bytes(bytes(data))
    try:
        restored = load_session(path)
    except SessionError:
        return
    assert len(restored) == 2  # a flip the archive does not read (a timestamp, say) changes nothing


def json_paths(value, prefix=()) -> list[tuple]:
    """Return the path of every value inside a manifest, random-stream states and versions left out."""
    if isinstance(value, dict):
        items = [(k, v) for k, v in value.items() if k not in ("states", "versions", "saved")]
    elif isinstance(value, list):
        items = list(enumerate(value))
    else:
        return [prefix]
    return [prefix, *(p for key, item in items for p in json_paths(item, (*prefix, key)))]


JSON_VALUES = st.one_of(st.none(), st.booleans(), st.integers(-3, 10**6), st.floats(allow_nan=False),
                        st.text(max_size=5), st.lists(st.integers(-2, 5), max_size=3), st.just({}))


@FUZZ
@given(st.integers(min_value=0), JSON_VALUES)
def test_any_value_of_the_manifest_replaced_only_ever_raises_session_error_or_loads(valid_session, tmp_path,
                                                                                    where, value):
    with zipfile.ZipFile(valid_session) as archive:
        members = {n: archive.read(n) for n in archive.namelist()}
    manifest = json.loads(members["session.json"])
    paths = json_paths(manifest)
    path = paths[1 + where % (len(paths) - 1)]
    holder = manifest
    for key in path[:-1]:
        holder = holder[key]
    holder[path[-1]] = value
    members["session.json"] = json.dumps(manifest).encode()
    mutated = tmp_path / "mutated.session"
    with zipfile.ZipFile(mutated, "w") as archive:
        for name, payload in members.items():
            archive.writestr(name, payload)
    with contextlib.suppress(SessionError):  # or it loads: a value the restore does not depend on
        load_session(mutated)


def test_data_changes_and_summary_on_a_damaged_file_raise_session_error(tmp_path, valid_session):
    garbage = tmp_path / "garbage.session"
    garbage.write_bytes(io.BytesIO(b"PK\x03\x04 not really").getvalue())
    for reader in (data_changes, session.session_summary):
        with pytest.raises(SessionError):
            reader(garbage)
    summary = session.session_summary(valid_session)
    assert summary["stages"] == ["linear", "tree"] and summary["removals"] == 1 and summary["data"] == "diabetes.csv"
