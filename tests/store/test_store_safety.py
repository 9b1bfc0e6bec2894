"""Loading a chain file never runs code from it, and every damaged file gives ChainFileError."""

from __future__ import annotations

import functools
import hashlib
import io
import json
import os
import pickle
import warnings
import zipfile

import numpy as np
import pandas as pd
import pytest
import skops.io as sio
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_diabetes
from sklearn.linear_model import LinearRegression
from sklearn.preprocessing import FunctionTransformer

import stages
from stages.errors import ChainFileError
from stages.files import store

FUZZ = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


class CreatesFile:
    """Unpickling this creates the file at ``target``: what a hostile chain file would do."""

    def __init__(self, target: str) -> None:
        self.target = target

    def __reduce__(self):
        return (open, (self.target, "w"))


@pytest.fixture(scope="module")
def diabetes() -> pd.DataFrame:
    """Return 200 rows of scikit-learn's diabetes data with a text column."""
    frame = load_diabetes(as_frame=True).frame.iloc[:200].copy()
    frame["band"] = np.where(frame.age > 0.0, "old", "young")
    return frame


@pytest.fixture(scope="module")
def valid_bytes(diabetes, tmp_path_factory) -> bytes:
    """Return the bytes of a small chain file with one stage of each artifact format."""
    chain = stages.Chain(diabetes, "target", stages.Holdout(fraction=0.2, seed=0))
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 2})
    chain.add("lightgbm", 0.5, params={"n_estimators": 3, "num_leaves": 4, "n_jobs": 1})
    chain.add("knn", 0.5)
    chain.add("sklearn:sklearn.svm.SVR", 0.5)
    path = tmp_path_factory.mktemp("valid") / "c.chain"
    chain.save(path)
    return path.read_bytes()


@pytest.fixture()
def chain_file(tmp_path, valid_bytes):
    path = tmp_path / "c.chain"
    path.write_bytes(valid_bytes)
    return path


def manifest_of(path) -> dict:
    with zipfile.ZipFile(path) as archive:
        return json.loads(archive.read("manifest.json"))


def rewrite(path, manifest: dict | None = None, members: dict[str, bytes | None] | None = None,
            raw_manifest: bytes | None = None) -> None:
    """Rewrite ``path`` with members replaced (None removes one) and the manifest replaced."""
    with zipfile.ZipFile(path) as archive:
        content = {name: archive.read(name) for name in archive.namelist()}
    for name, data in (members or {}).items():
        if data is None:
            content.pop(name, None)
        else:
            content[name] = data
    if manifest is not None:
        content["manifest.json"] = json.dumps(manifest).encode()
    if raw_manifest is not None:
        content["manifest.json"] = raw_manifest
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        for name, data in content.items():
            archive.writestr(name, data)


def replace_member(path, member: str, payload: bytes) -> None:
    """Put ``payload`` in place of ``member`` and update its checksum and size, so only the format checks remain."""
    manifest = manifest_of(path)
    digest = hashlib.sha256(payload).hexdigest()
    for entry in [*manifest["stages"], manifest["probe"]]:
        if entry["member"] == member:
            entry["sha256"], entry["size"] = digest, len(payload)
    rewrite(path, manifest, {member: payload})


def member_of(path, kind: str) -> str:
    return next(s["member"] for s in manifest_of(path)["stages"] if s["kind"] == kind)


def load_error(path) -> str:
    with pytest.raises(ChainFileError) as err:
        stages.load(path)
    message = str(err.value)
    assert "\n" not in message and str(path) in message
    return message


# ----------------------------------------------------------------------------- hostile payloads
def test_the_hostile_pickle_really_creates_a_file_when_unpickled(tmp_path):
    target = tmp_path / "made-by-pickle"
    pickle.loads(pickle.dumps(CreatesFile(str(target)))).close()  # the danger the checks stand against
    assert target.exists()


@pytest.mark.parametrize("kind", ["linear", "tree", "lightgbm", "knn", "sklearn:sklearn.svm.SVR"])
def test_a_pickle_in_place_of_a_stage_is_refused_and_never_runs(chain_file, tmp_path, kind):
    target = tmp_path / "pwned"
    replace_member(chain_file, member_of(chain_file, kind), pickle.dumps(CreatesFile(str(target))))
    assert "was refused" in load_error(chain_file)
    assert not target.exists()


def test_a_pickle_in_place_of_the_probe_is_refused_and_never_runs(chain_file, tmp_path):
    target = tmp_path / "pwned"
    replace_member(chain_file, "probe.npz", pickle.dumps(CreatesFile(str(target))))
    assert "not a valid probe" in load_error(chain_file)
    assert not target.exists()


def test_an_npz_holding_a_pickled_object_array_is_refused(chain_file, tmp_path):
    target = tmp_path / "pwned"
    buffer = io.BytesIO()
    hostile = np.array([CreatesFile(str(target))], dtype=object)
    np.savez(buffer, matrix=hostile, target=hostile)  # numpy pickles object arrays inside the npz
    replace_member(chain_file, member_of(chain_file, "knn"), buffer.getvalue())
    assert "was refused" in load_error(chain_file)
    assert not target.exists()


def test_a_skops_member_with_an_untrusted_type_is_refused(chain_file, tmp_path):
    target = tmp_path / "pwned"
    hostile = functools.partial(os.system, f"touch {target}")
    replace_member(chain_file, member_of(chain_file, "tree"), sio.dumps(hostile))
    message = load_error(chain_file)
    assert "not trusted" in message and "functools.partial" in message
    assert not target.exists()


def test_a_skops_member_holding_another_scikit_learn_estimator_is_refused(chain_file):
    fitted = LinearRegression().fit([[0.0], [1.0]], [0.0, 1.0])
    replace_member(chain_file, member_of(chain_file, "tree"), sio.dumps(fitted))
    load_error(chain_file)


def test_a_skops_member_naming_a_system_function_is_refused(chain_file):
    # scikit-learn types are trusted for this kind, but the function they hold is not
    replace_member(chain_file, member_of(chain_file, "sklearn:sklearn.svm.SVR"), sio.dumps(FunctionTransformer(os.system)))
    assert "not trusted" in load_error(chain_file)


# ----------------------------------------------------------------------------- each error
def test_a_missing_file_a_folder_and_an_empty_file_are_refused(tmp_path):
    assert "no such file" in load_error(tmp_path / "absent.chain")
    (tmp_path / "folder.chain").mkdir()
    assert "is a folder" in load_error(tmp_path / "folder.chain")
    (tmp_path / "empty.chain").write_bytes(b"")
    assert "is empty" in load_error(tmp_path / "empty.chain")


def test_a_file_that_is_not_a_zip_is_refused(tmp_path):
    (tmp_path / "c.chain").write_text("price,rooms\n1,2\n")
    assert "not a zip archive" in load_error(tmp_path / "c.chain")


def test_a_zip_without_manifest_is_refused(tmp_path):
    with zipfile.ZipFile(tmp_path / "c.chain", "w") as archive:
        archive.writestr("notes.txt", "hello")
    assert "no manifest.json" in load_error(tmp_path / "c.chain")


@pytest.mark.parametrize("text", [b"{not json", b"\xff\xfe", b'{"format": NaN}'])
def test_a_manifest_that_is_not_strict_json_is_refused(chain_file, text):
    rewrite(chain_file, raw_manifest=text)
    assert "manifest.json is not valid JSON" in load_error(chain_file)


def test_a_manifest_that_is_not_an_object_is_refused(chain_file):
    rewrite(chain_file, raw_manifest=b"[1, 2]")
    assert "not a JSON object" in load_error(chain_file)


def test_another_format_name_is_refused(chain_file):
    manifest = manifest_of(chain_file)
    manifest["format"] = "some-other-zip"
    rewrite(chain_file, manifest)
    assert "not a remnant chain file (format 'some-other-zip'" in load_error(chain_file)


def test_a_newer_format_version_is_refused_with_both_versions(chain_file):
    manifest = manifest_of(chain_file)
    manifest["format_version"] = store.FORMAT_VERSION + 1
    rewrite(chain_file, manifest)
    assert "written by a newer remnant (format 2; this one reads 1)" in load_error(chain_file)


def test_a_missing_member_is_named(chain_file):
    member = member_of(chain_file, "tree")
    rewrite(chain_file, members={member: None})
    assert f"member {member!r} is missing" in load_error(chain_file)


def test_a_member_changed_without_its_checksum_is_refused(chain_file):
    member = member_of(chain_file, "linear")
    with zipfile.ZipFile(chain_file) as archive:
        body = json.loads(archive.read(member))
    body["intercept"] += 1.0  # a plausible edit: still a valid artifact, but not the saved one
    rewrite(chain_file, members={member: json.dumps(body).encode()})
    assert f"member {member!r} fails its checksum" in load_error(chain_file)


@pytest.mark.parametrize("kind", ["no_such_kind", "sklearn:os.system"])
def test_an_unknown_stage_kind_is_refused(chain_file, kind):
    manifest = manifest_of(chain_file)
    manifest["stages"][0]["kind"] = kind
    manifest["stages"][0]["spec"]["kind"] = kind
    rewrite(chain_file, manifest)
    assert f"stage 1 has an unknown kind {kind!r}" in load_error(chain_file)


def test_an_artifact_its_kind_refuses_is_named_with_its_stage(chain_file):
    member = member_of(chain_file, "linear")
    replace_member(chain_file, member, json.dumps({"estimator": "ridge", "coef": [], "intercept": 0}).encode())
    assert "stage 1 (linear) was refused" in load_error(chain_file)


def test_a_malformed_manifest_gives_chain_file_error(chain_file):
    manifest = manifest_of(chain_file)
    del manifest["stages"][1]["feature_index"]
    manifest["schema"]["columns"] = "oops"
    rewrite(chain_file, manifest)
    assert "chain file is damaged" in load_error(chain_file)


def test_features_that_do_not_match_the_schema_are_refused(chain_file):
    manifest = manifest_of(chain_file)
    manifest["stages"][0]["feature_index"] = [99]
    rewrite(chain_file, manifest)
    assert "do not match the schema" in load_error(chain_file)


def test_a_member_larger_than_the_limit_is_refused_before_it_is_read(chain_file, monkeypatch):
    # a zip bomb in small: 8 MiB of zeros deflate to a few kilobytes
    member = member_of(chain_file, "tree")
    replace_member(chain_file, member, bytes(8 * 1024**2))
    monkeypatch.setattr(store, "MAX_MEMBER_BYTES", 1024**2)
    assert f"member {member!r} is too large (8 MiB; the limit is 1 MiB)" in load_error(chain_file)


def test_a_manifest_larger_than_the_limit_is_refused(chain_file, monkeypatch):
    monkeypatch.setattr(store, "MAX_MANIFEST_BYTES", 100)
    assert "member 'manifest.json' is too large" in load_error(chain_file)


def test_the_size_limits_are_2_gib_per_member_and_64_mib_for_the_manifest():
    assert (store.MAX_MEMBER_BYTES, store.MAX_MANIFEST_BYTES) == (2 * 1024**3, 64 * 1024**2)


def test_the_untouched_file_still_loads(chain_file, diabetes):
    assert len(stages.load(chain_file).predict(diabetes)) == len(diabetes)


# ----------------------------------------------------------------------------- fuzzing
def load_only_chain_file_error(path) -> None:
    """Load ``path``: a FittedChain or ChainFileError are fine, anything else fails the test."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            assert isinstance(stages.load(path), stages.FittedChain)
        except ChainFileError as exc:
            assert "\n" not in str(exc)


@FUZZ
@given(data=st.binary(max_size=4096), zip_magic=st.booleans())
def test_random_bytes_only_ever_give_chain_file_error(tmp_path, data, zip_magic):
    path = tmp_path / "random.chain"
    path.write_bytes((b"PK\x03\x04" if zip_magic else b"") + data)
    load_only_chain_file_error(path)


@FUZZ
@given(flips=st.lists(st.tuples(st.floats(0, 1, exclude_max=True), st.integers(1, 255)), min_size=1, max_size=8),
       cut=st.none() | st.floats(0, 1))
def test_flipped_bytes_and_truncation_only_ever_give_chain_file_error(tmp_path, valid_bytes, flips, cut):
    data = bytearray(valid_bytes)
    for where, mask in flips:
        data[int(where * len(data))] ^= mask
    if cut is not None:
        data = data[: int(cut * len(data))]
    path = tmp_path / "mutated.chain"
    path.write_bytes(bytes(data))
    load_only_chain_file_error(path)


JSON_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers(-(2**70), 2**70) | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=8),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=6), inner, max_size=3),
    max_leaves=6,
)


def manifest_paths(value, prefix=()):
    """Yield the key path of every value inside a manifest."""
    yield prefix
    if isinstance(value, dict):
        for key, inner in value.items():
            yield from manifest_paths(inner, (*prefix, key))
    elif isinstance(value, list):
        for i, inner in enumerate(value):
            yield from manifest_paths(inner, (*prefix, i))


@FUZZ
@given(data=st.data())
def test_a_manifest_with_a_value_replaced_only_ever_gives_chain_file_error(tmp_path, valid_bytes, data):
    path = tmp_path / "edited.chain"
    path.write_bytes(valid_bytes)
    manifest = manifest_of(path)
    where = data.draw(st.sampled_from(list(manifest_paths(manifest))[1:]))
    holder = manifest
    for key in where[:-1]:
        holder = holder[key]
    if data.draw(st.booleans()) and isinstance(holder, dict):
        del holder[where[-1]]
    else:
        holder[where[-1]] = data.draw(JSON_VALUES)
    rewrite(path, manifest)
    load_only_chain_file_error(path)
