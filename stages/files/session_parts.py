"""The parts of a session file: the data file's reference and what changed in it, random-stream
states, digests, and restoring stages.

Restoring refits nothing. Each track's learner is loaded from its artifact and the track's
cumulative output is recomputed as ``previous + scale * learner.predict(rows)``, in the order
the stages were fit, with the same row selection the fit used; a loaded learner predicts
what the fitted one did bit for bit, so the outputs equal the saved ones exactly. Each
stage's outputs digest is checked: a difference is damage, unless the library versions
changed since the save, which is warned about (VersionDriftWarning).
"""

from __future__ import annotations

import errno
import hashlib
import math
import os
import stat
import threading
import warnings
import weakref
from collections.abc import Callable
from datetime import datetime
from typing import TYPE_CHECKING, Any

import numpy as np

from ..atomic import node_kind
from ..errors import VersionDriftWarning
from ..fitting import Stage, feature_rows, resolve_features
from ..kinds import get_kind
from ..kinds.base import Artifact
from ..outputs import block
from ..reading import source_name
from ..spec import StageSpec
from ..tracks import Layout
from .store import json_ready, library_versions

if TYPE_CHECKING:
    from ..chain import Chain

#: the generator numpy's RandomState uses: the only state a session stores
GENERATOR = "MT19937"
_KEYS = 624

ReadMember = Callable[..., bytes]

# per stage: its artifacts and output digest (a stage never changes once fit)
_PARTS: weakref.WeakKeyDictionary[Stage, tuple[tuple[Artifact, ...], str]] = weakref.WeakKeyDictionary()
# the data files' SHA-256 by (absolute path, size, modification time): saving after every action
# hashes a data file once, not once per save
_HASHES: dict[tuple[str, int, int], str] = {}
_HASH_LOCK = threading.Lock()


def file_sha256(path: str | os.PathLike) -> str:
    """Return the SHA-256 of a regular file, computed once per (path, size, modification time) in a process.

    Raise OSError for anything but a regular file (a device or a named pipe would be read for ever).
    """
    absolute = os.path.realpath(os.fspath(path))
    info = os.stat(absolute)
    if not stat.S_ISREG(info.st_mode):
        raise OSError(errno.EINVAL, f"is {node_kind(info.st_mode)}, not a regular file")
    key = (absolute, info.st_size, info.st_mtime_ns)
    with _HASH_LOCK:
        if key in _HASHES:
            return _HASHES[key]
    digest = hashlib.sha256()
    with open(absolute, "rb") as handle:
        while block := handle.read(1 << 20):
            digest.update(block)
    with _HASH_LOCK:
        _HASHES[key] = digest.hexdigest()
    return _HASHES[key]


def data_reference(path: str | os.PathLike) -> dict[str, Any]:
    """Return the path, name, size, modification time (ns) and SHA-256 of a data file."""
    absolute = os.path.realpath(os.fspath(path))
    info = os.stat(absolute)
    return {"path": absolute, "name": source_name(absolute), "size": int(info.st_size),
            "mtime_ns": int(info.st_mtime_ns), "sha256": file_sha256(absolute)}


def describe_changes(saved: dict[str, Any], path: str | os.PathLike | None = None) -> list[str]:
    """Return what differs between a stored data reference and the file at ``path`` now (default: the
    stored path), one line each; empty when they hold the same data."""
    name = str(saved["name"])
    path = str(saved["path"]) if path is None else os.fspath(path)
    try:
        info = os.stat(path)
    except OSError:
        return [f"{name}: the file no longer exists"]
    if not stat.S_ISREG(info.st_mode):
        return [f"{name}: is {node_kind(info.st_mode)}, not a regular file"]
    try:
        if file_sha256(path) == saved["sha256"]:
            return []  # a file only touched, or copied back, holds the same data
    except OSError as exc:
        return [f"{name}: the file cannot be read ({exc.strerror or type(exc).__name__})"]
    if os.path.realpath(path) != os.path.realpath(str(saved["path"])):
        return [f"{name}: {source_name(path)} is not the file the session was fit on (content differs, sha256)"]
    changes = []
    grown = info.st_size - int(saved["size"])
    if grown:
        changes.append(f"{name}: {abs(grown):,} bytes {'larger' if grown > 0 else 'smaller'}")
    if info.st_mtime_ns != saved["mtime_ns"]:
        now, then = _when(info.st_mtime_ns, saved["mtime_ns"])
        changes.append(f"{name}: modified {now} (was {then})")
    changes.append(f"{name}: content differs (sha256)")
    return changes


def _when(now_ns: int, then_ns: int) -> tuple[str, str]:
    now, then = (datetime.fromtimestamp(t / 1e9) for t in (now_ns, then_ns))
    shape = "%Y-%m-%d %H:%M" if now.strftime("%Y%m%d%H%M") != then.strftime("%Y%m%d%H%M") else "%Y-%m-%d %H:%M:%S"
    shown_then = then.strftime(shape)
    if now.date() == then.date():
        shown_then = shown_then[11:]
    return now.strftime(shape), shown_then


def encode_state(state: Any) -> list[Any]:
    """Return a RandomState state (``get_state()``) as a JSON-ready list: name, keys, pos, has_gauss, gauss."""
    name, keys, pos, has_gauss, gauss = state
    return [str(name), [int(k) for k in keys], int(pos), int(has_gauss), float(gauss)]


def decode_state(value: Any) -> tuple[Any, ...]:
    """Return the RandomState state ``encode_state`` stored; raise ValueError when it is not one."""
    name, keys, pos, has_gauss, gauss = value
    if name != GENERATOR or not isinstance(keys, list) or len(keys) != _KEYS:
        raise ValueError("a random-stream state is not an MT19937 state")
    if not all(isinstance(k, int) and not isinstance(k, bool) and 0 <= k < 2**32 for k in keys):
        raise ValueError("a random-stream state has keys outside 0..2**32-1")
    if not (_whole(pos) and 0 <= pos <= _KEYS and has_gauss in (0, 1) and math.isfinite(float(gauss))):
        raise ValueError("a random-stream state has a bad position or cached value")
    return (GENERATOR, np.array(keys, dtype=np.uint32), int(pos), int(has_gauss), float(gauss))


def output_digest(outputs: tuple[np.ndarray, ...]) -> str:
    """Return the SHA-256 of a stage's outputs on every track (float64 bytes, track after track)."""
    digest = hashlib.sha256()
    for output in outputs:
        digest.update(np.ascontiguousarray(output, dtype=np.float64).tobytes())
    return digest.hexdigest()


def split_digest(layout: Layout) -> str:
    """Return the SHA-256 of a chain's split: the row order, the part sizes and every track's rows."""
    digest = hashlib.sha256(f"{layout.n_train},{layout.n_valid},{layout.n_test}".encode())
    digest.update(np.ascontiguousarray(layout.order, dtype=np.int64).tobytes())
    for track in layout.tracks:
        digest.update(np.ascontiguousarray(track.fit_positions(), dtype=np.int64).tobytes())
        if track.evaluate is not None:
            digest.update(np.ascontiguousarray(track.evaluate, dtype=np.int64).tobytes())
    return digest.hexdigest()


def stage_parts(stage: Stage) -> tuple[tuple[Artifact, ...], str]:
    """Return a stage's artifacts (one per track) and its outputs digest, computed once per stage."""
    if stage not in _PARTS:
        kind = get_kind(stage.kind)
        _PARTS[stage] = tuple(kind.save(learner) for learner in stage.learners), output_digest(stage.outputs)
    return _PARTS[stage]


def restore_stages(chain: Chain, manifest: dict[str, Any], read: ReadMember, name: str) -> None:
    """Put the session's stages, removal stack, streams and test reveals back into ``chain``.

    ``read(member, sha256, size)`` returns a member's checked bytes. Raise ValueError, KeyError or
    TypeError (or the kind's ChainFileError) for anything inconsistent, and ValueError when a
    stage does not reproduce its saved outputs with the library versions it was saved with;
    with other versions, warn (VersionDriftWarning) and keep the recomputed outputs.
    """
    states = [decode_state(s) for s in manifest["states"]]
    drifted = manifest["versions"] != library_versions()
    built: list[Stage] = []
    for position, entry in enumerate(manifest["stages"]):
        if entry["id"] != position:
            raise ValueError(f"stage ids are not in order (entry {position} has id {entry['id']!r})")
        previous = entry["previous"]
        before = chain.outputs(0) if previous is None else _pick(built, previous, position).outputs
        built.append(_restore_stage(chain, entry, before, states, read, name, drifted))
    current = _stage_list(built, manifest["current"], manifest["stages"])
    removals = [(str(r["action"]), _stage_list(built, r["stages"], manifest["stages"])) for r in manifest["removals"]]
    streams = tuple(_pick(states, i) for i in manifest["streams"])
    if len(streams) != len(chain.layout.tracks):
        raise ValueError("the session has the wrong number of random streams")
    test = manifest["test"]
    chain.restore(current, removals, streams, revealed=bool(test["revealed"]), reveals=int(test["reveals"]))


def _restore_stage(chain: Chain, entry: dict[str, Any], before: tuple[np.ndarray, ...], states: list[Any],
                   read: ReadMember, name: str, drifted: bool) -> Stage:
    spec = StageSpec.from_dict(entry["spec"])
    kind = get_kind(spec.kind)
    features = resolve_features(spec, chain.schema)
    if list(features) != entry["feature_index"]:
        raise ValueError(f"stage {spec.kind!r} names features that do not match the data")
    resolved = kind.resolve_params(spec.params, chain.schema.task)
    params = resolved if json_ready(resolved) == entry["params"] else dict(entry["params"])
    tracks = chain.layout.tracks
    items, scales = entry["learners"], [float(s) for s in entry["scales"]]
    if len(items) != len(tracks) or len(scales) != len(tracks) or not all(map(math.isfinite, scales)):
        raise ValueError(f"stage {spec.kind!r} does not have one learner and one finite scale per track")
    learners, outputs, artifacts = [], [], []
    for t, (item, scale) in enumerate(zip(items, scales, strict=True)):
        if item["fmt"] not in Artifact.SUFFIX:
            raise ValueError(f"artifact format {item['fmt']!r} is not one remnant writes")
        outputs_per_row = chain.loss.outputs
        artifact = Artifact(item["fmt"], read(item["member"], item["sha256"], item.get("size")),
                            dict(item.get("meta") or {}), n_features=len(features), n_outputs=outputs_per_row)
        learner = kind.load(artifact)
        rows = feature_rows(chain.matrix, slice(0, tracks[t].n_rows), features, len(chain.schema.columns))
        try:
            output = block(learner.predict(rows), tracks[t].n_rows, outputs_per_row)
        except ValueError:
            output = np.full((1, 1), np.nan)
        if output.shape != (tracks[t].n_rows, outputs_per_row) or not np.isfinite(output).all():
            raise ValueError(f"stage {spec.kind!r} does not predict {outputs_per_row} finite value(s) per row")
        learners.append(learner)
        artifacts.append(artifact)
        outputs.append(before[t] + scale * output)
    oob, notes = entry.get("oob_loss"), entry.get("notes") or []
    if not all(isinstance(note, str) for note in notes):
        raise ValueError(f"stage {spec.kind!r} has notes that are not text")
    stage = Stage(spec=spec, params=params, feature_index=features, learners=tuple(learners), scales=tuple(scales),
                  outputs=tuple(outputs), fit_seconds=float(entry["fit_seconds"]),
                  rng_before=tuple(_pick(states, i) for i in entry["rng_before"]),
                  rng_after=tuple(_pick(states, i) for i in entry["rng_after"]),
                  step_rule=str(entry.get("step_rule", "")),
                  oob_loss=None if oob is None else _loss_pair(oob),
                  notes=tuple(notes))
    if len(stage.rng_before) != len(tracks) or len(stage.rng_after) != len(tracks):
        raise ValueError(f"stage {spec.kind!r} does not have one random-stream state per track")
    digest = output_digest(stage.outputs)
    if digest != entry["outputs_sha256"] and not drifted:
        raise ValueError(f"stage {entry['id'] + 1} ({spec.kind}) does not reproduce its saved outputs")
    if digest != entry["outputs_sha256"]:
        warnings.warn(f"{name}: stage {entry['id'] + 1} ({spec.kind}) predicts differently on this machine than "
                      "when the session was saved (other library versions?)", VersionDriftWarning, stacklevel=4)
    _PARTS[stage] = tuple(artifacts), digest
    return stage


def _stage_list(built: list[Stage], ids: Any, entries: list[dict[str, Any]]) -> list[Stage]:
    """Return the stages with ``ids``, checking each follows the one before it as it was fit."""
    stages = []
    for i, stage_id in enumerate(ids):
        stage = _pick(built, stage_id)
        expected = ids[i - 1] if i else None
        if entries[stage_id]["previous"] != expected:
            raise ValueError(f"stage {stage_id} does not follow stage {expected} as it was fit")
        stages.append(stage)
    return stages


def _pick(items: list[Any], index: Any, below: int | None = None) -> Any:
    """Return ``items[index]`` for a whole, non-negative index (below ``below`` when given)."""
    limit = len(items) if below is None else min(below, len(items))
    if not _whole(index) or not 0 <= index < limit:
        raise ValueError(f"reference {index!r} points at nothing")
    return items[index]


def _whole(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _loss_pair(values: Any) -> tuple[float, float]:
    """Return a stored out-of-bag loss pair, before and after the stage (None as NaN); a value that is
    not two numbers raises ValueError, as other damage does."""
    before, after = (math.nan if v is None else float(v) for v in values)
    return before, after
