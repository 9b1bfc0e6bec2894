"""Building hostile chain files the way an attacker would, and loading them in a guarded process.

Every payload is generated here, from a valid chain file: a member is replaced and the
manifest's SHA-256 and size for it recomputed, so only remnant's own checks stand between
the file and the process. ``run_guarded`` runs a command with its address space capped and a
generous timeout that only catches a hang; ``load_in_guarded_process`` loads many files in one
such process and reports what each load did, so a crash (a signal) or a hang fails the test.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import resource
import struct
import subprocess
import sys
import textwrap
import zipfile
import zlib
from pathlib import Path
from typing import Any

import numpy as np
import skops.io as sio

#: the address-space cap of a guarded process: the engine and its libraries need about 400 MB
MEMORY_CAP = 1024**3
#: only catches a hang: a guarded load takes a few seconds
HANG_SECONDS = 120


# ----------------------------------------------------------------------------- editing a chain file
def members_of(path: Path) -> dict[str, bytes]:
    """Return every member of the archive at ``path``."""
    with zipfile.ZipFile(path) as archive:
        return {name: archive.read(name) for name in archive.namelist()}


def manifest_of(path: Path) -> dict[str, Any]:
    """Return the manifest of the chain file at ``path``."""
    return json.loads(members_of(path)["manifest.json"])


def write_members(path: Path, members: dict[str, bytes]) -> None:
    """Write ``members`` as a deflated zip archive at ``path``."""
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        for name, payload in members.items():
            archive.writestr(name, payload)


def entry_of(manifest: dict[str, Any], kind: str) -> dict[str, Any]:
    """Return the manifest entry of the first stage of ``kind``."""
    return next(stage for stage in manifest["stages"] if stage["kind"] == kind)


def with_member(source: Path, target: Path, kind: str, payload: bytes, meta: dict | None = None) -> Path:
    """Write at ``target`` the chain file ``source`` with the first ``kind`` stage's artifact replaced by
    ``payload``, its checksum and size recomputed (and its meta replaced when given)."""
    members = members_of(source)
    manifest = json.loads(members["manifest.json"])
    entry = entry_of(manifest, kind)
    members[entry["member"]] = payload
    entry["sha256"], entry["size"] = hashlib.sha256(payload).hexdigest(), len(payload)
    if meta is not None:
        entry["meta"] = meta
    members["manifest.json"] = json.dumps(manifest).encode()
    write_members(target, members)
    return target


def with_manifest(source: Path, target: Path, change) -> Path:
    """Write at ``target`` the chain file ``source`` after ``change(manifest, members)`` edited it."""
    members = members_of(source)
    manifest = json.loads(members["manifest.json"])
    change(manifest, members)
    members["manifest.json"] = json.dumps(manifest).encode()
    write_members(target, members)
    return target


# ----------------------------------------------------------------------------- skops payloads
def skops_members(payload: bytes) -> tuple[dict[str, Any], dict[str, bytes]]:
    """Return the schema and the other members of a skops file."""
    with zipfile.ZipFile(io.BytesIO(payload)) as archive:
        members = {name: archive.read(name) for name in archive.namelist()}
    return json.loads(members.pop("schema.json")), members


def skops_file(schema: dict[str, Any], members: dict[str, bytes] | None = None) -> bytes:
    """Return a skops file with ``schema`` and ``members``."""
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        archive.writestr("schema.json", json.dumps(schema))
        for name, data in (members or {}).items():
            archive.writestr(name, data)
    return buffer.getvalue()


def skops_call(module: str, name: str, args: list[Any], loader: str = "ConstructorFromReduceNode") -> bytes:
    """Return a skops file whose top node makes skops call ``module.name(*args)`` while loading.

    ``ConstructorFromReduceNode`` calls the named callable with the arguments; ``LossNode`` does
    the same through the loss loader; ``NdArrayNode`` calls it on an array; ``TypeNode`` and
    ``FunctionNode`` return the callable itself, for a later call.
    """
    schema, members = skops_members(sio.dumps(tuple(args)))
    header = {k: schema.pop(k) for k in ("protocol", "_skops_version")}
    node: dict[str, Any] = {"__class__": name, "__module__": module, "__loader__": loader, **header}
    if loader == "ConstructorFromReduceNode":
        node["content"] = schema
    elif loader == "LossNode":
        node.update(__reduce__={"args": schema}, content={"__class__": "dict", "__module__": "builtins",
                                                          "__loader__": "DictNode", "content": {}})
    elif loader == "NdArrayNode":
        array = io.BytesIO()
        np.save(array, np.array([0.0]), allow_pickle=False)
        node.update(type="numpy", file="a.npy")
        members["a.npy"] = array.getvalue()
    return skops_file(node, members)


def nested_call(payload_of_estimator: bytes, module: str, name: str, args: list[Any]) -> bytes:
    """Return a valid estimator's skops file with a call of ``module.name(*args)`` hidden as one attribute."""
    schema, members = skops_members(payload_of_estimator)
    call_schema, call_members = skops_members(skops_call(module, name, args))
    for key in ("protocol", "_skops_version"):
        call_schema.pop(key, None)
    schema["content"]["content"]["smuggled_"] = call_schema
    members.update(call_members)
    return skops_file(schema, members)


# ----------------------------------------------------------------------------- raw zip archives
def deflate_zeros(size: int) -> bytes:
    """Return a raw deflate stream that inflates to ``size`` zero bytes, built in a few milliseconds."""
    block = 1 << 20
    compressor = zlib.compressobj(9, zlib.DEFLATED, -15)
    piece = compressor.compress(bytes(block)) + compressor.flush(zlib.Z_FULL_FLUSH)
    whole, rest = divmod(size, block)
    tail = compressor.compress(bytes(rest)) + compressor.flush(zlib.Z_FINISH)
    return piece * whole + tail


def raw_zip(entries: list[tuple[str, bytes, int, int, int]]) -> bytes:
    """Return a zip archive of ``(name, data, method, crc, declared_size)`` entries written byte by byte,
    so that the declared size and CRC may lie about the data."""
    out, central = io.BytesIO(), []
    for name, data, method, crc, declared in entries:
        encoded = name.encode()
        offset = out.tell()
        out.write(struct.pack("<4sHHHHHIIIHH", b"PK\x03\x04", 20, 0, method, 0, 0, crc, len(data), declared,
                              len(encoded), 0) + encoded + data)
        central.append(struct.pack("<4sHHHHHHIIIHHHHHII", b"PK\x01\x02", 20, 20, 0, method, 0, 0, crc, len(data),
                                   declared, len(encoded), 0, 0, 0, 0, 0, offset) + encoded)
    start = out.tell()
    directory = b"".join(central)
    out.write(directory)
    out.write(struct.pack("<4sHHHHIIH", b"PK\x05\x06", 0, 0, len(entries), len(entries), len(directory), start, 0))
    return out.getvalue()


def deflated(data: bytes) -> bytes:
    """Return ``data`` as a raw deflate stream."""
    compressor = zlib.compressobj(6, zlib.DEFLATED, -15)
    return compressor.compress(data) + compressor.flush()


def rezip_raw(source: Path, target: Path, replace: dict[str, tuple[bytes, int, int]],
              manifest_change=None) -> Path:
    """Write at ``target`` the chain file ``source`` with members given as raw ``(data, crc, declared)``
    deflate streams (others deflated honestly), after ``manifest_change(manifest)``."""
    members = members_of(source)
    manifest = json.loads(members["manifest.json"])
    if manifest_change is not None:
        manifest_change(manifest)
    members["manifest.json"] = json.dumps(manifest).encode()
    entries = []
    for name, payload in members.items():
        if name in replace:
            data, crc, declared = replace[name]
            entries.append((name, data, zipfile.ZIP_DEFLATED, crc, declared))
        else:
            entries.append((name, deflated(payload), zipfile.ZIP_DEFLATED, zlib.crc32(payload), len(payload)))
    target.write_bytes(raw_zip(entries))
    return target


# ----------------------------------------------------------------------------- guarded processes
def _cap_memory() -> None:
    resource.setrlimit(resource.RLIMIT_AS, (MEMORY_CAP, MEMORY_CAP))


def run_guarded(args: list[str], cwd: Path | None = None, env: dict[str, str] | None = None) -> subprocess.CompletedProcess:
    """Run ``args`` with the address space capped at MEMORY_CAP; a hang past HANG_SECONDS raises TimeoutExpired."""
    environment = {**os.environ, **(env or {})}
    return subprocess.run(args, cwd=cwd, env=environment, capture_output=True, text=True, timeout=HANG_SECONDS,
                          preexec_fn=_cap_memory)


def remnant(*argv: Any, cwd: Path | None = None) -> subprocess.CompletedProcess:
    """Run the ``remnant`` command in a guarded process."""
    return run_guarded([sys.executable, "-m", "tui.cli", *map(str, argv)], cwd=cwd)


_LOADER = textwrap.dedent("""
    import json, sys, warnings
    warnings.simplefilter("ignore")
    import stages
    from stages.errors import ChainFileError
    for path in sys.argv[1:]:
        print(json.dumps({"path": path, "started": True}), flush=True)
        try:
            stages.load(path)
            outcome, message = "loaded", ""
        except ChainFileError as exc:
            outcome, message = "ChainFileError", str(exc)
        except BaseException as exc:
            outcome, message = type(exc).__name__, str(exc)
        print(json.dumps({"path": path, "outcome": outcome, "message": message}), flush=True)
    # VmHWM is this program's own high-water mark; ru_maxrss would also carry the peak of the
    # parent it was forked from (Linux keeps it across exec: getrusage(2)), a large pytest process
    import resource
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    try:
        with open("/proc/self/status") as status:
            peak = next(int(line.split()[1]) for line in status if line.startswith("VmHWM:"))
    except (OSError, StopIteration):
        pass
    print(json.dumps({"peak_kib": peak}), flush=True)
""")


def load_in_guarded_process(paths: list[Path]) -> dict[str, Any]:
    """Load every chain file of ``paths`` with ``stages.load`` in one guarded process; return, by path, the
    outcome (``ChainFileError``, ``loaded`` or another exception's name) and the message, and under
    ``peak_bytes`` the most memory the process held at once.

    The process must end by itself with status 0: a signal means a crash, and the last file it
    started is named in the failure.
    """
    done = run_guarded([sys.executable, "-c", _LOADER, *map(str, paths)])
    reports = [json.loads(line) for line in done.stdout.splitlines() if line.startswith("{")]
    started = [r["path"] for r in reports if r.get("started")]
    assert done.returncode == 0, (f"the loading process ended with status {done.returncode} while loading "
                                  f"{started[-1] if started else '?'}: {done.stderr[-2000:]}")
    peak = next(r["peak_kib"] for r in reports if "peak_kib" in r)
    return {**{r["path"]: r for r in reports if "outcome" in r}, "peak_bytes": peak * 1024}


# ----------------------------------------------------------------------------- scikit-learn trees
def edit_trees(payload: bytes, change, first_only: bool = True) -> bytes:
    """Return a skops file with its scikit-learn trees edited by ``change(tree)``, where ``tree`` holds the
    arrays ``nodes`` and ``values`` and the numbers ``node_count``, ``max_depth``, ``n_features`` and
    ``n_outputs``, as skops stores them (no checksum inside a skops file to fix up)."""
    schema, members = skops_members(payload)
    header = {k: schema.pop(k) for k in ("protocol", "_skops_version") if k in schema}
    for node in _tree_nodes(schema):
        args, content = node["__reduce__"]["args"]["content"], node["content"]["content"]
        tree = {"nodes": _npy(members[content["nodes"]["file"]]), "values": _npy(members[content["values"]["file"]]),
                "node_count": json.loads(content["node_count"]["content"]),
                "max_depth": json.loads(content["max_depth"]["content"]),
                "n_features": json.loads(args[0]["content"]), "n_outputs": json.loads(args[2]["content"])}
        change(tree)
        members[content["nodes"]["file"]] = _npy_bytes(tree["nodes"])
        members[content["values"]["file"]] = _npy_bytes(tree["values"])
        content["node_count"]["content"] = json.dumps(tree["node_count"])
        content["max_depth"]["content"] = json.dumps(tree["max_depth"])
        args[0]["content"], args[2]["content"] = json.dumps(tree["n_features"]), json.dumps(tree["n_outputs"])
        for edited in (content["node_count"], content["max_depth"], args[0], args[2]):
            edited.pop("__id__", None)  # skops shares nodes by id: an edited number must not be shared
        if first_only:
            break
    return skops_file({**schema, **header}, members)


def _tree_nodes(value: Any):
    if isinstance(value, dict):
        if value.get("__loader__") == "TreeNode":
            yield value
        for inner in value.values():
            yield from _tree_nodes(inner)
    elif isinstance(value, list):
        for inner in value:
            yield from _tree_nodes(inner)


def _npy(data: bytes) -> np.ndarray:
    return np.load(io.BytesIO(data), allow_pickle=False).copy()


def _npy_bytes(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, array, allow_pickle=False)
    return buffer.getvalue()


# ----------------------------------------------------------------------------- LightGBM model text
def edit_lines(text: str, key: str, edit, tree: int = 0) -> str:
    """Return LightGBM model text with the value of ``key`` in tree ``tree`` (or the header, for ``tree=None``)
    replaced by ``edit(value)``; tree_sizes is left as it was."""
    lines = text.split("\n")
    start = 0 if tree is None else lines.index(f"Tree={tree}")
    for i in range(start, len(lines)):
        if lines[i].startswith(f"{key}="):
            lines[i] = f"{key}={edit(lines[i][len(key) + 1:])}"
            return "\n".join(lines)
        if tree is None and lines[i] == "":
            break
    raise KeyError(key)


def fix_tree_sizes(text: str) -> str:
    """Return the text with tree_sizes recomputed for its blocks, as a careful attacker would."""
    lines = text.split("\n")
    starts = [i for i, line in enumerate(lines) if line.startswith("Tree=")]
    end = lines.index("end of trees")
    sizes = [sum(len(line) + 1 for line in lines[a:b]) for a, b in zip(starts, [*starts[1:], end], strict=True)]
    return "\n".join(f"tree_sizes={' '.join(map(str, sizes))}" if line.startswith("tree_sizes=") else line
                     for line in lines)
