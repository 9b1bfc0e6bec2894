"""The error classes: where they live, what a cancellation is, and that damage is not a fault."""

from __future__ import annotations

import inspect
import json
import zipfile

import pytest

import stages
from stages import errors
from stages.errors import Cancelled, ChainFileError, FitCancelled, RemnantError
from stages.files import session, store


def test_every_error_and_warning_class_of_the_engine_is_defined_in_errors():
    import stages.files.session_parts
    import stages.predictor  # noqa: F401

    for module in (stages, store, session, stages.files.session_parts, stages.predictor):
        for name, value in vars(module).items():
            if inspect.isclass(value) and issubclass(value, Exception) and value.__module__.startswith("stages"):
                assert value.__module__ == "stages.errors", f"{module.__name__}.{name} is defined in {value.__module__}"


def test_a_cancellation_is_not_a_mistake_of_the_user():
    assert issubclass(FitCancelled, Cancelled) and not issubclass(FitCancelled, RemnantError)
    assert stages.Cancelled is Cancelled and stages.FitCancelled is FitCancelled


def test_an_error_can_name_the_key_at_fault():
    err = errors.StageSpecError("shrinkage must be in (0, 1], not 2", key="shrinkage")
    assert err.key == "shrinkage" and str(err) == "shrinkage must be in (0, 1], not 2"
    assert errors.StageSpecError("no key").key is None


def _chain_file(folder, diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", stages.Holdout(seed=0))
    chain.add("linear")
    path = folder / "diabetes.chain"
    chain.save(path)
    return path


def test_a_damaged_manifest_is_refused_as_damage_and_keeps_its_cause(tmp_path, diabetes_frame):
    path = _chain_file(tmp_path, diabetes_frame)
    with zipfile.ZipFile(path) as old:
        members = {info.filename: old.read(info) for info in old.infolist()}
    manifest = json.loads(members["manifest.json"])
    manifest["schema"] = ["not", "a", "schema"]
    members["manifest.json"] = json.dumps(manifest).encode()
    bad = tmp_path / "bad.chain"
    with zipfile.ZipFile(bad, "w") as new:
        for name, payload in members.items():
            new.writestr(name, payload)
    with pytest.raises(ChainFileError, match="chain file is damaged") as caught:
        store.load(bad)
    assert caught.value.__cause__ is not None


def test_a_fault_of_remnant_while_loading_is_not_called_damage(tmp_path, diabetes_frame, monkeypatch):
    path = _chain_file(tmp_path, diabetes_frame)

    def broken(data):
        raise RuntimeError("a fault of remnant itself")

    monkeypatch.setattr(store.Schema, "from_dict", staticmethod(broken))
    with pytest.raises(RuntimeError, match="a fault of remnant itself"):
        store.load(path)


def test_a_fault_of_remnant_while_resuming_a_session_is_not_called_damage(tmp_path, diabetes_frame, monkeypatch):
    data = tmp_path / "diabetes.csv"
    diabetes_frame.to_csv(data, index=False)
    chain = stages.Chain.from_file(data, "target", stages.Holdout(seed=0))
    chain.add("linear")
    saved = session.save_session(chain, tmp_path / "diabetes.session")

    def broken(data):
        raise RuntimeError("a fault of remnant itself")

    monkeypatch.setattr(session, "spec_from_dict", broken)
    with pytest.raises(RuntimeError, match="a fault of remnant itself"):
        session.load_session(saved, data=data)


@pytest.mark.parametrize("seed", [-1, 2**32, 1.5, "7", True])
def test_a_seed_numpy_cannot_take_is_a_clear_error_from_python(diabetes_frame, seed):
    # numpy's RandomState takes 0 to 2**32 - 1 (numpy.random.RandomState docs); outside that it
    # raises its own ValueError, which would not name the setting
    with pytest.raises(stages.StageSpecError, match="seed must be"):
        stages.Chain(diabetes_frame, "target", seed=seed)
