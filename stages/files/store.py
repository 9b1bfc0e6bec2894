"""The chain file: one zip archive holding a manifest and one data-only artifact per stage.

Layout of a chain file::

    manifest.json            what the chain is: versions, schema, loss, start, stages, checksums
    stages/001-linear.json   one artifact per stage, in the format its kind chose
    stages/002-tree.skops    (json, npz, LightGBM model text, or skops with trusted types)
    probe.npz                a few training rows and the chain's raw output on them

A chain file may come from a stranger who recomputes its checksums. Loading never runs code
from it and never lets a damaged structure reach a native library:

* the archive is read within bounds (``container``): regular files only, each member at most
  the size the manifest declares for it, all members together at most a multiple of the file's
  size, no member read twice;
* the manifest is checked against its schema (``chain_manifest``) before any of it is used;
* JSON, ``numpy.load(allow_pickle=False)``, LightGBM's model text (checked line by line first)
  and skops holding exact, recorded classes (trees checked before anything predicts) are the
  only readers;
* every stage then predicts the stored probe rows once, so a learner that cannot is refused here
  rather than at prediction time.

With a key (``load(path, key=...)``), a file without a valid signature (``signing``) is refused
before its manifest is parsed. Every failure while loading is a ChainFileError naming the file.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import os
import platform
import re
import warnings
import weakref
import zipfile
from datetime import UTC, datetime
from typing import IO, TYPE_CHECKING, Any

import numpy as np

from .. import limits
from ..atomic import write_atomic as _write_atomic
from ..container import ArchiveReader, ArchiveWriter, sha256_hex, size_text
from ..errors import DAMAGED_FILE_ERRORS, ChainFileError, RemnantError, VersionDriftWarning
from ..kinds import get_kind
from ..kinds.base import Artifact
from ..losses import get_loss
from ..manifest_schema import strict_json
from ..outputs import squeeze
from ..predictor import FittedChain, FittedStage
from ..schema import Schema
from ..spec import StageSpec
from .chain_manifest import check_manifest

if TYPE_CHECKING:
    from ..chain import Chain

FORMAT_NAME = "remnant-chain"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
PROBE = "probe.npz"
PROBE_ROWS = 64
MAX_MEMBER_BYTES = limits.MAX_MEMBER_BYTES
MAX_MANIFEST_BYTES = 64 * 1024**2
#: relative difference of the probe rows' output above which a drifted file is reported
PROBE_RTOL = 1e-9
#: distributions whose versions are recorded and compared on load
LIBRARIES = ("scikit-learn", "lightgbm", "numpy", "pandas", "skops")
#: keys of a chain's description copied into the manifest as they are
_CHAIN_KEYS = ("validation", "seed", "rows", "test_revealed", "test_reveals", "source", "ignore")
#: written only when the chain has them, so a chain without weights, exposure or power writes what it always has
_ROW_KEYS = ("weight", "exposure", "power")

# probe rows of loaded chains, so that saving a loaded chain again keeps its probe
_PROBES: weakref.WeakKeyDictionary[FittedChain, np.ndarray] = weakref.WeakKeyDictionary()


# ----------------------------------------------------------------------------- saving
def save(chain: Chain | FittedChain, path: str | os.PathLike) -> None:
    """Write ``chain`` (a Chain or a FittedChain) as a chain file at ``path``, atomically; return None.

    Raise ChainFileError when the file cannot be written; an existing file is then untouched.
    """
    from ..chain import Chain as LiveChain  # at call time: the chain module imports this one lazily

    probe: np.ndarray | None
    fingerprint: dict[str, Any] | None
    if isinstance(chain, LiveChain) and hasattr(chain, "probe_rows"):  # rows elsewhere (a Dask cluster)
        fitted, probe, fingerprint = chain.fitted(), chain.probe_rows(), None
    elif isinstance(chain, LiveChain):
        fitted = chain.fitted()
        probe = np.array(chain.matrix[: min(PROBE_ROWS, chain.layout.n_train)], dtype=np.float64)
        fingerprint = data_fingerprint(chain.matrix, chain.y, chain.layout.order)
    else:
        fitted, probe, fingerprint = chain, _PROBES.get(chain), chain.meta.get("data")
    save_fitted(fitted, path, probe, fingerprint)


def save_fitted(fitted: FittedChain, path: str | os.PathLike, probe: np.ndarray | None,
                fingerprint: dict[str, Any] | None) -> None:
    """Write ``fitted`` as a chain file at ``path`` with its probe rows (schema matrix rows) and data
    fingerprint (None when the rows were not all here to hash), atomically; return None."""
    if len(fitted.stages) > limits.MAX_STAGES:
        raise ChainFileError(f"cannot write chain file '{os.fspath(path)}': it has {len(fitted.stages):,} stages; "
                             f"a chain file holds at most {limits.MAX_STAGES:,}")
    target = os.fspath(path)
    write_atomic(target, lambda handle: _write_archive(handle, fitted, probe, fingerprint, target))


def stored_probe(fitted: FittedChain) -> np.ndarray | None:
    """Return the probe rows (schema matrix rows) of a chain loaded from a file, else None."""
    return _PROBES.get(fitted)


def data_fingerprint(matrix: np.ndarray, y: np.ndarray, order: np.ndarray | None = None) -> dict[str, Any]:
    """Return the row and column counts and a SHA-256 of the feature matrix and target, in data order.

    ``order`` maps chain positions to data rows; with it, the hash does not depend on the split.
    """
    rows = np.argsort(order, kind="stable") if order is not None else np.arange(len(y))
    digest = hashlib.sha256(f"{matrix.shape[0]}x{matrix.shape[1]}".encode())
    for start in range(0, len(rows), 65536):
        block = rows[start:start + 65536]
        digest.update(np.ascontiguousarray(matrix[block], dtype=np.float64).tobytes())
    digest.update(np.ascontiguousarray(np.asarray(y, dtype=np.float64)[rows]).tobytes())
    return {"rows": int(matrix.shape[0]), "columns": int(matrix.shape[1]), "sha256": digest.hexdigest()}


def member_name(number: int, kind: str, suffix: str) -> str:
    """Return the archive member of stage ``number``: ``stages/NNN-<kind><suffix>`` with a safe kind."""
    return f"stages/{number:03d}-{re.sub(r'[^A-Za-z0-9_.-]', '_', kind)}{suffix}"


def _write_archive(handle: IO[bytes], fitted: FittedChain, probe: np.ndarray | None,
                   fingerprint: dict[str, Any] | None, path: str) -> None:
    with ArchiveWriter(handle) as archive:
        entries, names = [], fitted.schema.names
        for number, stage in enumerate(fitted.stages, start=1):
            try:
                artifact = get_kind(stage.kind).save(stage.learner)
            except RemnantError as exc:
                raise ChainFileError(f"cannot write chain file '{path}': stage {number} ({stage.kind}) "
                                     f"cannot be saved ({_one_line(exc)})") from None
            written = archive.add(member_name(number, stage.kind, artifact.suffix), artifact.payload)
            entries.append(_stage_entry(number, stage, names, artifact, written))
        probe_entry = None
        if probe is not None and len(probe):
            buffer = io.BytesIO()
            np.savez(buffer, matrix=probe, raw=squeeze(fitted.raw_from_matrix(probe)))
            probe_entry = {**archive.add(PROBE, buffer.getvalue()), "rows": int(len(probe))}
        manifest = build_manifest(fitted, entries, probe_entry, fingerprint)
        archive.add(MANIFEST, json.dumps(manifest, indent=1, allow_nan=False).encode("utf-8"))


def _stage_entry(number: int, stage: FittedStage, names: list[str], artifact: Artifact,
                 written: dict[str, Any]) -> dict[str, Any]:
    return {
        "index": number, "kind": stage.kind, "spec": stage.spec.to_dict(), "params": stage.params,
        "scale": float(stage.scale), "features": [names[i] for i in stage.feature_index],
        "feature_index": [int(i) for i in stage.feature_index], "scores": stage.scores,
        "fit_seconds": float(stage.fit_seconds), **written, "fmt": artifact.fmt, "meta": artifact.meta,
        "step": {"rule": stage.step_rule, "value": float(stage.step)},
        "oob_loss": list(stage.oob_loss) if stage.oob_loss is not None else None, "notes": list(stage.notes),
    }


def build_manifest(fitted: FittedChain, stages: list[dict[str, Any]], probe: dict[str, Any] | None,
                   fingerprint: dict[str, Any] | None) -> dict[str, Any]:
    """Return the manifest of a chain file as a strict-JSON-ready dict (NaN and inf become null)."""
    meta = fitted.meta
    head = {
        "format": FORMAT_NAME, "format_version": FORMAT_VERSION,
        "created": datetime.now(UTC).isoformat(timespec="seconds"), "versions": library_versions(),
        "task": fitted.task, "loss": fitted.loss.name, "start": start_entry(fitted.start),
        "threshold": float(meta.get("threshold", 0.5)),
    }
    chain = {key: meta.get(key) for key in _CHAIN_KEYS}
    chain.update({key: meta[key] for key in _ROW_KEYS if meta.get(key) is not None})
    tail = {"data": fingerprint, "schema": fitted.schema.to_dict(), "start_scores": fitted.start_scores,
            "stages": stages, "probe": probe}
    return json_ready({**head, **chain, **tail})


def start_entry(start: np.ndarray) -> float | list[float]:
    """Return the manifest's ``start``: a number for one raw score per row, a list of the K start
    values (in the schema's class order) for a multiclass chain."""
    values = [float(v) for v in np.ravel(start)]
    return values[0] if len(values) == 1 else values


def library_versions() -> dict[str, str | None]:
    """Return the installed versions of remnant, the libraries in LIBRARIES, and Python."""
    from importlib import metadata

    from .. import __version__

    def installed(name: str) -> str | None:
        try:
            return metadata.version(name)
        except metadata.PackageNotFoundError:
            return None

    return {"remnant": __version__, **{name: installed(name) for name in LIBRARIES},
            "python": platform.python_version()}


def write_atomic(path: str, write) -> None:
    """Write through ``write(handle)`` to ``path`` with the one atomic writer (``stages.atomic``); return None.

    Raise ChainFileError naming ``path`` and the reason when it cannot be written (a folder, a
    device, a named pipe, another writer, a full disk); an existing file is then untouched.
    """
    _write_atomic(path, write, what="chain file", error=ChainFileError)


# ----------------------------------------------------------------------------- loading
def load(path: str | os.PathLike, *, key: bytes | str | None = None) -> FittedChain:
    """Return the FittedChain stored at ``path``, its ``meta`` filled from the manifest.

    Raise ChainFileError, naming the file and what is wrong, for anything that is not an
    intact chain file this version can read, and, when ``key`` is given, for a file that is not
    signed with it. Warn with VersionDriftWarning when the file was saved with other library
    versions, and again when its stored predictions now differ.
    """
    name = os.fspath(path)
    try:
        fitted, manifest, probe = _load(name, key)
    except ChainFileError:
        raise
    except DAMAGED_FILE_ERRORS as exc:  # a malformed manifest or member: always the one error class
        raise ChainFileError(f"{name}: chain file is damaged ({type(exc).__name__}: {_one_line(exc)})") from exc
    _check_drift(fitted, manifest, probe, name)
    return fitted


Probe = tuple[np.ndarray, np.ndarray]


def _load(path: str, key: bytes | str | None) -> tuple[FittedChain, dict[str, Any], Probe | None]:
    with ArchiveReader.open(path, path, ChainFileError, what="chain file") as archive:
        manifest = read_manifest(archive, path, key)
        schema = Schema.from_dict(manifest["schema"])
        try:
            loss = get_loss(manifest["loss"], schema.task, n_classes=len(schema.classes), power=manifest.get("power"))
        except RemnantError as exc:
            raise ChainFileError(f"{path}: {_one_line(exc)}") from None
        start = _start(manifest["start"], loss.outputs, path)
        loaded = [_load_stage(archive, entry, number, schema, path, loss.outputs)
                  for number, entry in enumerate(manifest["stages"], 1)]
        probe = _read_probe(archive, manifest.get("probe"), schema, path, loss.outputs)
    fitted = FittedChain(schema, loss, start, loaded, meta=_meta(manifest),
                         start_scores=_scores(manifest.get("start_scores") or {}))
    for scores in (fitted.start_scores, *(stage.scores for stage in fitted.stages)):
        for part in ("train", "valid"):  # what the stage table reads, even from a file that left it out
            scores.setdefault(part, {}).setdefault(loss.primary, math.nan)
    _check_stages_predict(fitted, probe, path)
    if probe is not None:
        _PROBES[fitted] = probe[0]
    return fitted, manifest, probe


def read_manifest(archive: ArchiveReader, path: str, key: bytes | str | None = None) -> dict[str, Any]:
    """Return the checked manifest of an open chain file (its signature checked first when ``key`` is given)."""
    if not archive.has(MANIFEST):
        raise ChainFileError(f"{path}: not a chain file (no {MANIFEST} inside)")
    archive.claim(MANIFEST, "the manifest")
    raw = archive.read(MANIFEST, limit=MAX_MANIFEST_BYTES)
    if key is not None:
        from .signing import check_signature

        check_signature(archive, raw, key, path)
    try:
        manifest = strict_json(raw.decode("utf-8"))
    except (ValueError, RecursionError) as exc:
        raise ChainFileError(f"{path}: {MANIFEST} is not valid JSON ({_one_line(exc)})") from None
    if not isinstance(manifest, dict):
        raise ChainFileError(f"{path}: {MANIFEST} is not a JSON object")
    _check_format(manifest, path)
    check_manifest(manifest, path)
    return manifest


def _check_format(manifest: dict[str, Any], path: str) -> None:
    found = manifest.get("format")
    if found != FORMAT_NAME:
        shown = found if isinstance(found, str | int | float | bool | type(None)) else type(found).__name__
        raise ChainFileError(f"{path}: not a remnant chain file (format {str(shown)[:60]!r}, expected {FORMAT_NAME!r})")
    version = manifest.get("format_version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise ChainFileError(f"{path}: manifest has no valid format_version (found {str(version)[:40]!r})")
    if version > FORMAT_VERSION:
        raise ChainFileError(f"{path}: written by a newer remnant (format {version}; this one reads {FORMAT_VERSION})")


def _start(entry: Any, outputs: int, path: str) -> np.ndarray:
    """Return the manifest's start value as K numbers; raise ChainFileError when it holds another count."""
    values = np.asarray([entry] if not isinstance(entry, list) else entry, dtype=np.float64)
    if len(values) != outputs or (outputs > 1 and not isinstance(entry, list)):
        raise ChainFileError(f"{path}: manifest start holds {len(values)} values; the chain has {outputs} raw scores a row")
    if not np.isfinite(values).all():
        raise ChainFileError(f"{path}: manifest start is not a finite number")
    return values


def _load_stage(archive: ArchiveReader, entry: dict[str, Any], number: int, schema: Schema, path: str,
                outputs: int = 1) -> FittedStage:
    kind_name = entry["kind"]
    try:
        kind = get_kind(kind_name)
    except RemnantError:
        raise ChainFileError(f"{path}: stage {number} has an unknown kind {kind_name[:200]!r}") from None
    try:
        spec = StageSpec.from_dict(entry["spec"])
    except RemnantError as exc:
        raise ChainFileError(f"{path}: stage {number} has an invalid spec ({_one_line(exc)})") from None
    if spec.kind != kind_name:
        raise ChainFileError(f"{path}: stage {number} has an inconsistent kind or artifact format")
    index = tuple(entry["feature_index"])
    if (any(i >= len(schema.columns) for i in index) or len(set(index)) != len(index)
            or entry["features"] != [schema.names[i] for i in index]):
        raise ChainFileError(f"{path}: stage {number} names features that do not match the schema")
    archive.claim(entry["member"], f"stage {number}")
    payload = archive.read(entry["member"], entry["sha256"], entry.get("size"), limit=MAX_MEMBER_BYTES)
    artifact = Artifact(entry["fmt"], payload, dict(entry.get("meta") or {}), n_features=len(index), n_outputs=outputs)
    try:
        learner = kind.load(artifact)
    except ChainFileError as exc:
        raise ChainFileError(f"{path}: stage {number} ({kind_name}) was refused: {_one_line(exc)}") from None
    if not callable(getattr(learner, "predict", None)):
        raise ChainFileError(f"{path}: stage {number} ({kind_name}) holds a {type(learner).__name__}, not a learner")
    step, oob = entry.get("step") or {}, entry.get("oob_loss")
    return FittedStage(spec, dict(entry.get("params") or {}), learner, float(entry["scale"]), index,
                       _scores(entry.get("scores") or {}), float(entry.get("fit_seconds", 0.0)),
                       str(step.get("rule", "")), None if oob is None else (_number(oob[0]), _number(oob[1])),
                       tuple(entry.get("notes") or ()))


def _read_probe(archive: ArchiveReader, entry: Any, schema: Schema, path: str, outputs: int = 1) -> Probe | None:
    """Return the stored probe rows and their (n, K) raw outputs, or None when the file has none.

    The probe stores a one-output chain's raw output as a vector, a multiclass chain's as (n, K).
    """
    if entry is None:
        return None
    archive.claim(entry["member"], "the probe")
    payload = archive.read(entry["member"], entry["sha256"], entry.get("size"), limit=MAX_MEMBER_BYTES)
    try:
        with np.load(io.BytesIO(payload), allow_pickle=False) as stored:
            matrix = np.asarray(stored["matrix"], dtype=np.float64)
            raw = np.asarray(stored["raw"], dtype=np.float64)
    except (OSError, ValueError, KeyError, TypeError, zipfile.BadZipFile, EOFError) as exc:
        raise ChainFileError(f"{path}: member {entry['member']!r} is not a valid probe ({_one_line(exc)})") from None
    wanted = (len(matrix),) if outputs == 1 else (len(matrix), outputs)
    if matrix.ndim != 2 or matrix.shape != (entry["rows"], len(schema.columns)) or raw.shape != wanted:
        raise ChainFileError(f"{path}: member {entry['member']!r} does not match the schema")
    return matrix, raw.reshape(len(matrix), outputs)


def _check_stages_predict(fitted: FittedChain, probe: Probe | None, path: str) -> None:
    """Raise ChainFileError naming the first stage that cannot predict the probe rows (or, without a
    probe, a row of zeros and a row of missing values) as finite values, one row of output per row."""
    n_columns = len(fitted.schema.columns)
    rows = probe[0] if probe is not None else np.vstack([np.zeros(n_columns), np.full(n_columns, np.nan)])
    for number, stage in enumerate(fitted.stages, 1):
        try:
            with np.errstate(all="ignore"), warnings.catch_warnings():
                warnings.simplefilter("ignore")
                output = np.asarray(stage.learner.predict(rows[:, list(stage.feature_index)]), dtype=np.float64)
        except Exception as exc:  # a learner from a file may raise anything its library raises
            raise ChainFileError(f"{path}: stage {number} ({stage.kind}) cannot predict "
                                 f"({type(exc).__name__}: {_one_line(exc)})") from exc
        wanted = (len(rows),) if fitted.outputs == 1 else (len(rows), fitted.outputs)
        if output.shape not in (wanted, (len(rows), fitted.outputs)) or not np.isfinite(output).all():
            raise ChainFileError(f"{path}: stage {number} ({stage.kind}) does not predict finite values, "
                                 f"{fitted.outputs} per row")


def _meta(manifest: dict[str, Any]) -> dict[str, Any]:
    keys = ("format_version", "created", "versions", "task", "loss", "threshold", *_CHAIN_KEYS, "data")
    meta = {key: manifest.get(key) for key in keys}
    meta.update({key: manifest[key] for key in _ROW_KEYS if manifest.get(key) is not None})
    meta["threshold"] = _number(meta["threshold"] if meta["threshold"] is not None else 0.5)
    return meta


def _check_drift(fitted: FittedChain, manifest: dict[str, Any], probe: Probe | None, path: str) -> None:
    """Warn when the file's library versions differ from ours, then check its stored predictions."""
    recorded = manifest.get("versions")
    recorded = recorded if isinstance(recorded, dict) else {}
    installed = library_versions()
    drifted = [name for name in ("remnant", *LIBRARIES)
               if recorded.get(name) is not None and str(recorded.get(name)) != installed.get(name)]
    if not drifted:
        return
    saved = ", ".join(f"{name} {recorded[name]}" for name in drifted)
    now = ", ".join(str(installed.get(name)) for name in drifted)
    warnings.warn(f"{path}: chain file was saved with {saved}; this machine has {now}", VersionDriftWarning,
                  stacklevel=3)
    if probe is None:
        return
    matrix, stored = probe
    try:
        with np.errstate(all="ignore"):
            now_raw = fitted.raw_from_matrix(matrix)
    except Exception as exc:  # the libraries of this machine refuse a stage: anything they raise
        raise ChainFileError(f"{path}: the chain's stages cannot predict on this machine ({_one_line(exc)})") from exc
    gap, relative = probe_difference(now_raw, stored)
    if relative > PROBE_RTOL:
        warnings.warn(f"{path}: predictions on this machine differ from the saved ones by up to {gap:.3g} "
                      f"({relative:.3g} relative) on {len(stored)} stored rows", VersionDriftWarning, stacklevel=3)


def probe_difference(now: np.ndarray, stored: np.ndarray) -> tuple[float, float]:
    """Return the largest absolute difference and that difference relative to the stored outputs' scale.

    A value that is NaN in one and not the other counts as an infinite difference.
    """
    if now.shape != stored.shape:
        return math.inf, math.inf
    both_nan = np.isnan(now) & np.isnan(stored)
    with np.errstate(invalid="ignore"):
        diff = np.nan_to_num(np.where(both_nan, 0.0, np.abs(now - stored)), nan=np.inf, posinf=np.inf)
    gap = float(diff.max()) if diff.size else 0.0
    finite = np.abs(stored[np.isfinite(stored)])
    scale = max(float(finite.max()) if finite.size else 0.0, np.finfo(np.float64).tiny)
    return gap, gap / scale


# ----------------------------------------------------------------------------- helpers
def json_ready(value: Any) -> Any:
    """Return ``value`` as strict-JSON data: NaN and inf become None, numpy types Python ones."""
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_ready(v) for v in value]
    if isinstance(value, np.ndarray):
        return json_ready(value.tolist())
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        return float(value) if math.isfinite(value) else None
    return repr(value)  # e.g. an estimator object given as a parameter: kept for reading only


def _scores(value: Any) -> Any:
    """Return stored scores with null read back as NaN."""
    if isinstance(value, dict):
        return {str(k): _scores(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_scores(v) for v in value]
    return math.nan if value is None else float(value)


def _number(value: Any) -> float:
    if isinstance(value, bool):
        raise TypeError(f"expected a number, found {value!r}")
    return math.nan if value is None else float(value)


def _sha256(payload: bytes) -> str:
    return sha256_hex(payload)


def _size(n: int) -> str:
    return size_text(n)


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:500] or type(exc).__name__
