"""A crafted skops artifact never runs code: callables under numpy., scipy. and sklearn., and others.

skops builds a node by importing what it names and calling it, so a file naming a function
turns loading into a call. Each payload below would write a marker file if called (the first
test proves the helpers really do); each is put in place of a stage's artifact with its
checksum and size recomputed, then loaded through every route: ``stages.load`` in a guarded
process (address space capped, a timeout that only catches a hang), ``remnant show``,
``remnant predict`` and ``remnant explore``, and a resumed session. Every route refuses the
file with one line (exit 2, or ChainFileError / SessionError) and no marker ever appears.
"""

from __future__ import annotations

import hashlib
import json
import zipfile

import pytest
import skops.io as sio
from hostile import (
    entry_of,
    load_in_guarded_process,
    manifest_of,
    members_of,
    nested_call,
    remnant,
    skops_call,
    with_member,
)

import stages
from stages.files.session import SessionError, load_session, save_session


def callables(marker: str) -> dict[str, tuple[str, str, list]]:
    """Return, by name, a callable reachable under a trusted-looking prefix and arguments that write ``marker``."""
    code = f"open({marker!r}, 'w').write('ran')"
    return {
        "numpy-runstring": ("numpy.testing._private.utils", "runstring", [code, {}]),
        "numpy-savetxt": ("numpy", "savetxt", [marker, [1.0, 2.0]]),
        "numpy-savetxt-defining-module": ("numpy.lib._npyio_impl", "savetxt", [marker, [1.0]]),
        "numpy-save": ("numpy", "save", [marker, [1.0]]),
        "scipy-savemat": ("scipy.io", "savemat", [marker, {}]),
        "scipy-mmwrite": ("scipy.io", "mmwrite", [marker, [[1.0]]]),
        "sklearn-run-script": ("sklearn.utils._testing", "assert_run_python_script_without_output", [code]),
        "sklearn-svmlight": ("sklearn.datasets", "dump_svmlight_file", [[[1.0]], [1.0], marker]),
        "builtins-exec": ("builtins", "exec", [code]),
        "os-system": ("os", "system", [f"touch {marker}"]),
    }


LOADERS = ("ConstructorFromReduceNode", "LossNode", "NdArrayNode", "TypeNode", "FunctionNode")


def test_the_helpers_really_write_the_marker_when_called(tmp_path):
    # the danger the checks stand against: skops, trusting these names, calls them
    import importlib

    for name, (module, function, args) in callables(str(tmp_path / "called")).items():
        if name in ("os-system", "sklearn-run-script", "builtins-exec"):
            continue  # a shell, a child interpreter and exec: the file-writing ones are proof enough
        getattr(importlib.import_module(module), function)(*args)
        made = list(tmp_path.glob("called*"))  # numpy.save and scipy's writers may add a suffix
        assert made, name
        for leftover in made:
            leftover.unlink()
    payload = skops_call(*callables(str(tmp_path / "called"))["numpy-runstring"])
    sio.loads(payload, trusted=sio.get_untrusted_types(data=payload))
    assert (tmp_path / "called").exists()  # skops itself runs it when the name is trusted


@pytest.fixture(scope="module")
def hostile_files(base_chain, tmp_path_factory):
    """Return the folder, the markers and every hostile chain file: each callable, each loader, in the
    place of each skops stage, plus each callable hidden inside a valid estimator."""
    folder = tmp_path_factory.mktemp("hostile-code")
    markers, files = [], []
    base_members = members_of(base_chain)
    manifest = manifest_of(base_chain)
    svr, gbr = "sklearn:sklearn.svm.SVR", "sklearn:sklearn.ensemble.GradientBoostingRegressor"
    cases = [(svr, name, loader) for name in callables("x") for loader in LOADERS]
    cases += [(kind, name, "ConstructorFromReduceNode") for kind in ("tree", "forest", gbr) for name in callables("x")]
    cases += [(kind, name, "nested") for kind in (svr, gbr) for name in callables("x")]
    for kind, name, loader in cases:
        marker = str(folder / f"marker-{len(markers)}")
        markers.append(marker)
        module, function, args = callables(marker)[name]
        target = folder / f"{kind.replace(':', '_')}-{name}-{loader}.chain"
        if loader == "nested":
            valid = base_members[entry_of(manifest, kind)["member"]]
            meta = entry_of(manifest, kind)["meta"]
            # the record of types lists what the smuggled node names, as a careful attacker would write it
            recorded = {**meta, "types": sorted({*meta.get("types", []), f"{module}.{function}"})}
            files.append(with_member(base_chain, target, kind, nested_call(valid, module, function, args), recorded))
        else:
            files.append(with_member(base_chain, target, kind, skops_call(module, function, args, loader)))
    return folder, markers, files


def no_marker(markers: list[str]) -> None:
    from pathlib import Path

    made = [m for m in markers if any(Path(m).parent.glob(Path(m).name + "*"))]
    assert not made, f"code ran: {made[:3]}"


def test_stages_load_refuses_every_callable_and_runs_none(hostile_files):
    folder, markers, files = hostile_files
    reports = load_in_guarded_process(files)
    for path in files:
        report = reports[str(path)]
        assert report["outcome"] == "ChainFileError", (path, report)
        assert "\n" not in report["message"] and "not trusted" in report["message"], report
    no_marker(markers)


@pytest.mark.parametrize("command", ["show", "predict", "explore"])
def test_the_command_line_refuses_a_callable_with_one_error_line(hostile_files, command, base_chain):
    folder, markers, files = hostile_files
    hostile = next(f for f in files if "SVR-numpy-runstring-ConstructorFromReduceNode" in f.name)
    argv = {"show": ("show", hostile), "predict": ("predict", hostile, base_chain.parent / "data.csv"),
            "explore": ("explore", hostile)}[command]
    done = remnant(*argv, cwd=folder)
    assert done.returncode == 2, done.stderr
    lines = done.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and "not trusted" in lines[0], done.stderr
    assert done.stdout == ""
    no_marker(markers)


def test_a_resumed_session_refuses_a_callable(tmp_path, monkeypatch, diabetes_rows):
    monkeypatch.setenv("REMNANT_HOME", str(tmp_path / "home"))
    data = tmp_path / "data.csv"
    diabetes_rows.to_csv(data, index=False)
    chain = stages.Chain.from_file(data, "target")
    chain.add("sklearn:sklearn.svm.SVR", 0.5)
    path = save_session(chain)
    marker = tmp_path / "marker"
    with zipfile.ZipFile(path) as archive:
        members = {n: archive.read(n) for n in archive.namelist()}
    manifest = json.loads(members["session.json"])
    learner = manifest["stages"][0]["learners"][0]
    payload = skops_call(*callables(str(marker))["numpy-runstring"])
    members[learner["member"]] = payload
    learner["sha256"], learner["size"] = hashlib.sha256(payload).hexdigest(), len(payload)
    members["session.json"] = json.dumps(manifest).encode()
    with zipfile.ZipFile(path, "w") as archive:
        for name, data_ in members.items():
            archive.writestr(name, data_)
    with pytest.raises(SessionError) as err:
        load_session(path, data)
    assert "not trusted" in str(err.value) and "\n" not in str(err.value)
    assert not marker.exists()


def test_a_record_of_types_naming_a_function_is_refused_before_the_payload_is_read(base_chain, tmp_path):
    manifest = manifest_of(base_chain)
    meta = {**entry_of(manifest, "tree")["meta"], "types": ["numpy.savetxt", "sklearn.tree._tree.Tree"]}
    valid = members_of(base_chain)[entry_of(manifest, "tree")["member"]]
    path = with_member(base_chain, tmp_path / "c.chain", "tree", valid, meta)
    with pytest.raises(stages.ChainFileError, match="says it holds numpy.savetxt, a type that is not trusted"):
        stages.load(path)
