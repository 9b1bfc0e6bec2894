"""The workbench's session: the chain saved after every completed action, restored without refitting.

A session file lives in the user's data folder (``REMNANT_HOME`` replaces it), one per data
file. It is a zip archive, written atomically like a chain file::

    session.json               format and version; the data file's path, size, modification time
                               and SHA-256; the column choices; loss, validation and seed; the
                               random-stream states (each distinct one once); every distinct
                               stage once (spec, params, per-track scales, the states before and
                               after its fit, fit time, a SHA-256 of its outputs, its artifacts);
                               the current stages and the removal stack as lists of stage ids
    stages/0003/track-0.json   one safe artifact per stage and track (the kind's own format)

Loading treats the file as a stranger's: it is read within bounds by the archive container
(``stages.container``), its manifest is checked against its schema (``session_manifest``), and
only JSON and the kinds' safe formats are read, each member checked against its SHA-256. Any
damage is a SessionError naming the file. The data is the file the user opened (or passes),
compared with the fingerprint the session stored; the path stored in the session is read on
its own only when the session file is the one remnant keeps for that very path. Restoring
refits nothing: each track's output is recomputed from the loaded learners in the order they
were fit, which gives the saved outputs bit for bit.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import re
import threading
import weakref
from datetime import UTC, datetime
from pathlib import Path
from typing import IO, Any

import pandas as pd

from .. import limits
from ..atomic import write_atomic
from ..chain import Chain
from ..chain_state import ChainState
from ..container import ArchiveReader, ArchiveWriter
from ..errors import (
    DAMAGED_FILE_ERRORS,
    RemnantError,
    SessionDataChanged,
    SessionError,
    SessionSaveError,
)
from ..fitting import Stage
from ..kinds.base import ProgressFn
from ..manifest_schema import ManifestMismatch, strict_json
from ..reading import load_frame
from ..row_weights import GIVEN
from ..schema import Schema
from ..validation import spec_from_dict
from . import store
from .session_manifest import check_session_manifest
from .session_parts import (
    data_reference,
    describe_changes,
    encode_state,
    file_sha256,
    restore_stages,
    split_digest,
    stage_parts,
)

FORMAT_NAME = "remnant-session"
FORMAT_VERSION = 1
MANIFEST = "session.json"
SUFFIX = ".session"
#: environment variable naming the folder that replaces the platform's user data folder
HOME_VARIABLE = "REMNANT_HOME"
MAX_MANIFEST_BYTES = 512 * 1024**2


#: what settings that do not fit the data, or a damaged manifest, raise while a session is read
_NOT_APPLICABLE: tuple[type[BaseException], ...] = (RemnantError, *DAMAGED_FILE_ERRORS)


# ----------------------------------------------------------------------------- where
def sessions_folder() -> Path:
    """Return the folder holding session files: ``$REMNANT_HOME/sessions`` or the user data folder's."""
    home = os.environ.get(HOME_VARIABLE)
    if not home:
        import platformdirs

        home = platformdirs.user_data_dir("remnant")
    return Path(home) / "sessions"


def session_path(data_path: str | os.PathLike) -> Path:
    """Return the session file of a data file: ``<stem>-<12 hex of sha256(absolute path)>.session``."""
    absolute = os.path.realpath(os.fspath(data_path))
    stem = re.sub(r"[^A-Za-z0-9_.-]", "_", Path(absolute).stem)[:60] or "data"
    key = hashlib.sha256(absolute.encode("utf-8", "surrogateescape")).hexdigest()[:12]
    return sessions_folder() / f"{stem}-{key}{SUFFIX}"


def data_changes(path: str | os.PathLike, data: str | os.PathLike | None = None) -> list[str]:
    """Return what changed in the data since the session was saved (empty when unchanged).

    ``data`` is the file the user opened; without it, the session's own stored path, when the
    session file is the one remnant keeps for that path. Raise SessionError when the session
    file cannot be read, holds no data file (a frame), or names a file it may not read.
    """
    name = os.fspath(path)
    with _open(name) as archive:
        manifest = _read_manifest(archive, name)
    reference = manifest.get("data")
    if reference is None:
        raise SessionError(f"{name}: the session was saved from a DataFrame, not a data file")
    with _damaged(name):
        return describe_changes(reference, _data_path(reference, data, name))


def session_summary(path: str | os.PathLike) -> dict[str, Any]:
    """Return what a resume offer shows: saved time, data file name, target, stage kinds, removals."""
    name = os.fspath(path)
    with _open(name) as archive:
        manifest = _read_manifest(archive, name)
    with _damaged(name):
        kinds = {entry["id"]: entry["spec"]["kind"] for entry in manifest["stages"]}
        return {"saved": manifest["saved"], "data": (manifest.get("data") or {}).get("name", "frame"),
                "target": manifest["columns"]["target"], "stages": [kinds[i] for i in manifest["current"]],
                "removals": len(manifest["removals"])}


# ----------------------------------------------------------------------------- saving
# per chain: its data reference and fingerprint, taken at its first save (the data it holds)
_CHAIN_DATA: weakref.WeakKeyDictionary[Chain, dict[str, Any]] = weakref.WeakKeyDictionary()


def save_session(chain: Chain, path: str | os.PathLike | None = None) -> Path:
    """Write the chain's session atomically and return the file's path (default ``session_path``).

    Takes the chain's lock while reading it, so it waits for a fit in progress. Raise
    SessionSaveError naming the file when it cannot be written; the previous file and the
    chain in memory are then untouched.
    """
    if path is None:
        if chain.data_path is None:
            raise SessionSaveError("the chain was not read from a file; name the session file to save it")
        path = session_path(chain.data_path)
    target = Path(os.fspath(path))
    try:
        manifest, members = _snapshot(chain, chain.state())
    except RemnantError as exc:
        raise SessionSaveError(f"cannot write session file '{target}': {exc}") from None
    _prepare_folder(target)
    write_atomic(os.fspath(target), lambda handle: _write_archive(handle, manifest, members), what="session file",
                 error=SessionSaveError)
    return target


def _prepare_folder(target: Path) -> None:
    """Create the session folder (the writer removes temporary files left by a killed save)."""
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        reason = exc.strerror or type(exc).__name__
        raise SessionSaveError(f"cannot write session file '{target}': its folder cannot be created ({reason})") from None


def _chain_data(chain: Chain) -> dict[str, Any]:
    if chain not in _CHAIN_DATA:
        data_path = chain.data_path
        fingerprint = store.data_fingerprint(chain.matrix, chain.y, chain.layout.order)
        _CHAIN_DATA[chain] = {
            "data": None if data_path is None else data_reference(data_path),
            "fingerprint": {**fingerprint, "split_sha256": split_digest(chain.layout)},
        }
    return _CHAIN_DATA[chain]


def _snapshot(chain: Chain, state: ChainState) -> tuple[dict[str, Any], dict[str, bytes]]:
    """Return the session manifest and its artifact members for the chain in ``state``."""
    ids: dict[int, int] = {}
    previous: dict[int, int | None] = {}
    order: list[Stage] = []
    lists = [list(state.stages)] + [list(r.stages) for r in state.removals]
    for stages in lists:
        for i, stage in enumerate(stages):
            if id(stage) not in ids:
                ids[id(stage)] = len(order)
                previous[id(stage)] = ids[id(stages[i - 1])] if i else None
                order.append(stage)
    states: dict[bytes, int] = {}
    table: list[list[Any]] = []

    def state_id(stream: Any) -> int:
        encoded = encode_state(stream)
        key = json.dumps(encoded).encode()
        if key not in states:
            states[key] = len(table)
            table.append(encoded)
        return states[key]

    entries, members = [], {}
    for number, stage in enumerate(order):
        artifacts, digest = stage_parts(stage)
        learners = []
        for t, artifact in enumerate(artifacts):
            member = f"stages/{number:04d}/track-{t}{artifact.suffix}"
            members[member] = artifact.payload
            learners.append({"member": member, "sha256": hashlib.sha256(artifact.payload).hexdigest(),
                             "size": len(artifact.payload), "fmt": artifact.fmt, "meta": artifact.meta})
        entries.append({
            "id": number, "previous": previous[id(stage)], "spec": stage.spec.to_dict(), "params": stage.params,
            "feature_index": list(stage.feature_index), "scales": list(stage.scales),
            "fit_seconds": stage.fit_seconds, "rng_before": [state_id(s) for s in stage.rng_before],
            "rng_after": [state_id(s) for s in stage.rng_after], "outputs_sha256": digest, "learners": learners,
            "step_rule": stage.step_rule, "oob_loss": list(stage.oob_loss) if stage.oob_loss else None,
            "notes": list(stage.notes),
        })
    manifest = {
        "format": FORMAT_NAME, "format_version": FORMAT_VERSION,
        "saved": datetime.now(UTC).isoformat(timespec="seconds"), "versions": store.library_versions(),
        **_chain_data(chain), "columns": _columns(chain), "loss": chain.loss.name,
        "validation": chain.validation.to_dict(), "seed": chain.seed,
        "test": {"revealed": state.test_revealed, "reveals": state.reveal_count},
        "streams": [state_id(s) for s in state.streams], "current": [ids[id(s)] for s in state.stages],
        "removals": [{"action": r.action, "stages": [ids[id(s)] for s in r.stages]} for r in state.removals],
        "stages": entries, "states": table, **chain.row_settings(),
    }
    return store.json_ready(manifest), members


def _columns(chain: Chain) -> dict[str, Any]:
    schema = chain.schema
    return {"target": schema.target, "ignore": list(chain.ignore), "features": schema.names,
            "task": schema.task, "positive": schema.positive_class, "threshold": chain.threshold,
            "schema": schema.to_dict()}


def _write_archive(handle: IO[bytes], manifest: dict[str, Any], members: dict[str, bytes]) -> None:
    with ArchiveWriter(handle, compresslevel=1) as archive:
        for name, payload in members.items():
            archive.add(name, payload)
        archive.add(MANIFEST, json.dumps(manifest, separators=(",", ":"), allow_nan=False).encode("utf-8"))


# ----------------------------------------------------------------------------- loading
def load_session(path: str | os.PathLike, data: str | os.PathLike | pd.DataFrame | None = None, *,
                 allow_changed: bool = False, cancel: threading.Event | None = None,
                 progress: ProgressFn | None = None) -> Chain:
    """Return the chain a session file holds, its stages restored without refitting.

    ``data`` (the file the user opened, or a DataFrame) is what the chain is rebuilt on; it is
    compared with the fingerprint the session stored. Without it, the session's stored path is
    used only when the session file is the one remnant keeps for that path (``session_path``).
    Raise SessionDataChanged when the data differs from what the session was fit on, unless
    ``allow_changed``: then the chain is rebuilt on the data as it is now and its stages are
    refit from their specs (the removal stack is not kept), reporting to ``progress`` and
    stopping with FitCancelled when ``cancel`` is set. Raise SessionError for a damaged file,
    DataError when the data file cannot be read.
    """
    name = os.fspath(path)
    with _open(name) as archive:
        manifest = _read_manifest(archive, name)
        source = _data_source(manifest, data, name, allow_changed)
        chain = _rebuild(manifest, source, name)
        if not _same_data(chain, manifest):
            if not allow_changed:
                raise SessionDataChanged(name, ["its rows, columns or split differ from the session's"])
            return _refit(chain, manifest, name, cancel, progress)
        with _damaged(name):
            restore_stages(chain, manifest, lambda member, sha, size=None: _member(archive, member, sha, name, size),
                           name)
    return chain


def _data_path(reference: dict[str, Any], data: str | os.PathLike | None, name: str) -> str:
    """Return the data file to compare and read: ``data``, or the stored path when this session is its own."""
    if data is not None:
        return os.fspath(data)
    stored = str(reference["path"])
    if os.path.realpath(name) != os.path.realpath(session_path(stored)):
        raise SessionError(f"{name}: name the data file to resume this session with (a session file read from "
                           "elsewhere never chooses the file it reads)")
    return stored


def _data_source(manifest: dict[str, Any], data: Any, name: str, allow_changed: bool) -> Any:
    if isinstance(data, pd.DataFrame):
        return data
    reference = manifest.get("data")
    if reference is None:
        if data is not None:
            return data
        raise SessionError(f"{name}: the session was saved from a DataFrame; pass that frame as data")
    path = _data_path(reference, data, name)
    with _damaged(name):
        changes = describe_changes(reference, path)
    if changes and not allow_changed:
        raise SessionDataChanged(name, changes)
    return path


def _row_settings(manifest: dict[str, Any], name: str) -> dict[str, Any]:
    """Return the session's weight and exposure columns and tweedie power as Chain arguments."""
    settings: dict[str, Any] = {key: manifest[key] for key in ("weight", "exposure", "power") if key in manifest}
    for key in ("weight", "exposure"):
        if settings.get(key) == GIVEN:
            raise SessionError(f"{name}: the session's {key}s were given in Python, not as a column; "
                               "a session restores only a column")
    return settings


def _rebuild(manifest: dict[str, Any], source: Any, name: str) -> Chain:
    """Return a chain without stages over ``source`` with the session's settings."""
    frame, data_name = load_frame(source)
    with _damaged(name):
        columns = manifest["columns"]
        settings = {"validation": spec_from_dict(dict(manifest["validation"])), "loss": str(manifest["loss"]),
                    "seed": int(manifest["seed"]), "ignore": [str(c) for c in columns["ignore"]],
                    "task": str(columns["task"]), "positive": columns["positive"],
                    "threshold": float(columns["threshold"]), "source": data_name,
                    "dates": {k: list(v) for k, v in Schema.from_dict(columns["schema"]).dates().items()},
                    **_row_settings(manifest, name)}
        target, features = str(columns["target"]), [str(c) for c in columns["features"]]
    data_path = os.fspath(source) if isinstance(source, str | os.PathLike) else None
    try:
        chain = Chain(frame, target, data_path=data_path, **settings)
        if chain.schema.to_dict() != columns["schema"]:
            chain = Chain(frame, target, features=features, data_path=data_path, **settings)
    except _NOT_APPLICABLE as exc:  # settings that do not fit this data: a damaged
        reason = " ".join(str(exc).split()) or type(exc).__name__  # session or changed data
        raise SessionError(f"{name}: the session's settings do not apply to {data_name} ({reason})") from exc
    return chain


def _same_data(chain: Chain, manifest: dict[str, Any]) -> bool:
    with contextlib.suppress(*DAMAGED_FILE_ERRORS):
        stored = manifest["fingerprint"]
        now = store.data_fingerprint(chain.matrix, chain.y, chain.layout.order)
        return (chain.schema.to_dict() == manifest["columns"]["schema"] and now["sha256"] == stored["sha256"]
                and split_digest(chain.layout) == stored["split_sha256"])
    return False


def _refit(chain: Chain, manifest: dict[str, Any], name: str, cancel: threading.Event | None,
           progress: ProgressFn | None) -> Chain:
    from ..spec import StageSpec

    with _damaged(name):
        specs = {entry["id"]: StageSpec.from_dict(entry["spec"]) for entry in manifest["stages"]}
        current = [specs[i] for i in manifest["current"]]
    chain.add_specs(current, cancel=cancel, progress=progress)
    chain.prepared.notes = (*chain.prepared.notes,
                            f"the data changed since the session was saved: its {len(current)} stages were refit")
    return chain


@contextlib.contextmanager
def _damaged(name: str):
    """Turn what a damaged file raises inside into a SessionError naming the file (SessionErrors pass
    through; a fault of remnant itself is not hidden as damage)."""
    try:
        yield
    except SessionError:
        raise
    except _NOT_APPLICABLE as exc:
        reason = " ".join(str(exc).split()) or type(exc).__name__
        raise SessionError(f"{name}: session file is damaged ({type(exc).__name__}: {reason})") from exc


def _open(name: str) -> ArchiveReader:
    if not os.path.lexists(name):
        raise SessionError(f"{name}: no such session file")
    return ArchiveReader.open(name, name, SessionError, what="session file")


def _member(archive: ArchiveReader, member: Any, sha256: Any, name: str, size: Any = None,
            limit: int = limits.MAX_MEMBER_BYTES) -> bytes:
    archive.claim(member, "a stage")
    return archive.read(member, sha256, size, limit=limit)


def _read_manifest(archive: ArchiveReader, name: str) -> dict[str, Any]:
    if not archive.has(MANIFEST):
        raise SessionError(f"{name}: not a remnant session file (no {MANIFEST} inside)")
    raw = _member(archive, MANIFEST, None, name, limit=MAX_MANIFEST_BYTES)
    with _damaged(name):
        manifest = strict_json(raw.decode("utf-8"))
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT_NAME:
        raise SessionError(f"{name}: not a remnant session file")
    version = manifest.get("format_version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise SessionError(f"{name}: session file has no valid format_version (found {str(version)[:40]!r})")
    if version > FORMAT_VERSION:
        raise SessionError(f"{name}: written by a newer remnant (session format {version}; "
                           f"this one reads {FORMAT_VERSION})")
    try:
        check_session_manifest(manifest)
    except ManifestMismatch as exc:
        raise SessionError(f"{name}: session file is damaged: its manifest does not fit the format ({exc})") from exc
    return manifest


__all__ = ["SessionError", "SessionSaveError", "SessionDataChanged", "session_path", "sessions_folder",
           "save_session", "load_session", "data_changes", "session_summary", "data_reference",
           "file_sha256"]
