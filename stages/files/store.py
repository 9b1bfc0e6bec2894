"""The chain file: one zip archive holding a manifest and one data-only artifact per stage.

Layout of a chain file::

    manifest.json            what the chain is: versions, schema, loss, start, stages, checksums
    stages/001-linear.json   one artifact per stage, in the format its kind chose
    stages/002-tree.skops    (json, npz, LightGBM model text, or skops with trusted types)
    probe.npz                a few training rows and the chain's raw output on them

Loading never runs code from the file: JSON, ``numpy.load(allow_pickle=False)``, LightGBM's
model text and skops with an explicit list of trusted types are the only readers. Every
failure while loading becomes a ChainFileError naming the file.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import io
import json
import math
import os
import platform
import re
import stat
import tempfile
import warnings
import weakref
import zipfile
from datetime import UTC, datetime
from typing import IO, TYPE_CHECKING, Any

import numpy as np

from ..errors import ChainFileError, RemnantError
from ..kinds import get_kind
from ..kinds.base import Artifact
from ..losses import get_loss
from ..predictor import FittedChain, FittedStage
from ..schema import Schema
from ..spec import StageSpec

if TYPE_CHECKING:
    from ..chain import Chain

FORMAT_NAME = "remnant-chain"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
PROBE = "probe.npz"
PROBE_ROWS = 64
MAX_MEMBER_BYTES = 2 * 1024**3
MAX_MANIFEST_BYTES = 64 * 1024**2
#: relative difference of the probe rows' output above which a drifted file is reported
PROBE_RTOL = 1e-9
#: distributions whose versions are recorded and compared on load
LIBRARIES = ("scikit-learn", "lightgbm", "numpy", "pandas", "skops")
#: keys of a chain's description copied into the manifest as they are
_CHAIN_KEYS = ("validation", "seed", "rows", "test_revealed", "test_reveals", "source", "ignore")

# probe rows of loaded chains, so that saving a loaded chain again keeps its probe
_PROBES: weakref.WeakKeyDictionary[FittedChain, np.ndarray] = weakref.WeakKeyDictionary()


class VersionDriftWarning(UserWarning):
    """A chain file was saved with other library versions than the ones installed."""


# ----------------------------------------------------------------------------- saving
def save(chain: Chain | FittedChain, path: str | os.PathLike) -> None:
    """Write ``chain`` (a Chain or a FittedChain) as a chain file at ``path``, atomically; return None.

    Raise ChainFileError when the file cannot be written; an existing file is then untouched.
    """
    from ..chain import Chain as LiveChain  # at call time: the chain module imports this one lazily

    if isinstance(chain, LiveChain):
        fitted = chain.fitted()
        probe = np.array(chain.matrix[: min(PROBE_ROWS, chain.layout.n_train)], dtype=np.float64)
        fingerprint = data_fingerprint(chain.matrix, chain.y, chain.layout.order)
    else:
        fitted, probe, fingerprint = chain, _PROBES.get(chain), chain.meta.get("data")
    target = os.fspath(path)
    write_atomic(target, lambda handle: _write_archive(handle, fitted, probe, fingerprint, target))


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
    with zipfile.ZipFile(handle, "w", zipfile.ZIP_DEFLATED) as archive:
        entries, names = [], fitted.schema.names
        for number, stage in enumerate(fitted.stages, start=1):
            try:
                artifact = get_kind(stage.kind).save(stage.learner)
            except RemnantError as exc:
                raise ChainFileError(f"cannot write chain file '{path}': stage {number} ({stage.kind}) "
                                     f"cannot be saved ({_one_line(exc)})") from None
            name = member_name(number, stage.kind, artifact.suffix)
            archive.writestr(name, artifact.payload)
            entries.append(_stage_entry(number, stage, names, artifact, name))
        probe_entry = None
        if probe is not None and len(probe):
            buffer = io.BytesIO()
            np.savez(buffer, matrix=probe, raw=fitted.raw_from_matrix(probe))
            archive.writestr(PROBE, buffer.getvalue())
            probe_entry = {"member": PROBE, "rows": int(len(probe)), "sha256": _sha256(buffer.getvalue())}
        manifest = build_manifest(fitted, entries, probe_entry, fingerprint)
        archive.writestr(MANIFEST, json.dumps(manifest, indent=1, allow_nan=False))


def _stage_entry(number: int, stage: FittedStage, names: list[str], artifact: Artifact, member: str) -> dict[str, Any]:
    return {
        "index": number, "kind": stage.kind, "spec": stage.spec.to_dict(), "params": stage.params,
        "scale": float(stage.scale), "features": [names[i] for i in stage.feature_index],
        "feature_index": [int(i) for i in stage.feature_index], "scores": stage.scores,
        "fit_seconds": float(stage.fit_seconds), "member": member, "sha256": _sha256(artifact.payload),
        "fmt": artifact.fmt, "meta": artifact.meta,
    }


def build_manifest(fitted: FittedChain, stages: list[dict[str, Any]], probe: dict[str, Any] | None,
                   fingerprint: dict[str, Any] | None) -> dict[str, Any]:
    """Return the manifest of a chain file as a strict-JSON-ready dict (NaN and inf become null)."""
    meta = fitted.meta
    head = {
        "format": FORMAT_NAME, "format_version": FORMAT_VERSION,
        "created": datetime.now(UTC).isoformat(timespec="seconds"), "versions": library_versions(),
        "task": fitted.task, "loss": fitted.loss.name, "start": float(fitted.start),
        "threshold": float(meta.get("threshold", 0.5)),
    }
    chain = {key: meta.get(key) for key in _CHAIN_KEYS}
    tail = {"data": fingerprint, "schema": fitted.schema.to_dict(), "start_scores": fitted.start_scores,
            "stages": stages, "probe": probe}
    return json_ready({**head, **chain, **tail})


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
    """Write through ``write(handle)`` into a temporary file beside ``path``, fsync it, rename it onto ``path``.

    Return None. Raise ChainFileError naming ``path`` and the reason when it cannot be written; an
    existing file at ``path`` is then untouched and the temporary file removed.
    """
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise ChainFileError(f"cannot write chain file '{path}': folder '{folder}' does not exist")
    if os.path.isdir(path):
        raise ChainFileError(f"cannot write chain file '{path}': it is a folder")
    mode = stat.S_IMODE(os.stat(path).st_mode) if os.path.isfile(path) else 0o644
    try:
        fd, temp = tempfile.mkstemp(dir=folder, prefix=f".{os.path.basename(path)}.", suffix=".tmp")
    except OSError as exc:
        raise _write_error(path, exc) from None
    try:
        with os.fdopen(fd, "w+b") as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.chmod(temp, mode)
        os.replace(temp, path)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            os.unlink(temp)
        if isinstance(exc, OSError):
            raise _write_error(path, exc) from None
        raise
    with contextlib.suppress(OSError):  # flush the rename itself, where a folder can be opened
        folder_fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(folder_fd)
        finally:
            os.close(folder_fd)


_WRITE_REASONS = {
    errno.ENOSPC: "the disk is full", errno.EACCES: "permission denied", errno.EPERM: "permission denied",
    errno.EROFS: "the file system is read-only", errno.ENOENT: "its folder does not exist",
    errno.EDQUOT: "the disk quota is exceeded", errno.EISDIR: "it is a folder",
}


def _write_error(path: str, exc: OSError) -> ChainFileError:
    reason = _WRITE_REASONS.get(exc.errno) or exc.strerror or _one_line(exc)
    return ChainFileError(f"cannot write chain file '{path}': {reason}")


# ----------------------------------------------------------------------------- loading
def load(path: str | os.PathLike) -> FittedChain:
    """Return the FittedChain stored at ``path``, its ``meta`` filled from the manifest.

    Raise ChainFileError, naming the file and what is wrong, for anything that is not an
    intact chain file this version can read. Warn with VersionDriftWarning when the file was
    saved with other library versions, and again when its stored predictions now differ.
    """
    name = os.fspath(path)
    try:
        fitted, manifest, probe = _load(name)
    except ChainFileError:
        raise
    except Exception as exc:  # a malformed manifest or member: always the one error class
        raise ChainFileError(f"{name}: chain file is damaged ({type(exc).__name__}: {_one_line(exc)})") from None
    _check_drift(fitted, manifest, probe, name)
    return fitted


Probe = tuple[np.ndarray, np.ndarray]


def _load(path: str) -> tuple[FittedChain, dict[str, Any], Probe | None]:
    with _open_archive(path) as archive:
        manifest = _read_manifest(archive, path)
        schema = Schema.from_dict(manifest["schema"])
        if manifest.get("task", schema.task) != schema.task:
            raise ChainFileError(f"{path}: manifest task {manifest['task']!r} does not match its schema")
        try:
            loss = get_loss(manifest["loss"], schema.task)
        except RemnantError as exc:
            raise ChainFileError(f"{path}: {_one_line(exc)}") from None
        stages = manifest["stages"]
        if not isinstance(stages, list):
            raise ChainFileError(f"{path}: manifest 'stages' is not a list")
        loaded = [_load_stage(archive, entry, number, schema, path) for number, entry in enumerate(stages, 1)]
        probe = _read_probe(archive, manifest.get("probe"), schema, path)
    fitted = FittedChain(schema, loss, _number(manifest["start"]), loaded, meta=_meta(manifest),
                         start_scores=_scores(manifest.get("start_scores") or {}))
    if probe is not None:
        _PROBES[fitted] = probe[0]
    return fitted, manifest, probe


def _open_archive(path: str) -> zipfile.ZipFile:
    if os.path.isdir(path):
        raise ChainFileError(f"{path}: is a folder, not a chain file")
    if not os.path.exists(path):
        raise ChainFileError(f"{path}: no such file")
    try:
        if os.path.getsize(path) == 0:
            raise ChainFileError(f"{path}: is empty, not a chain file")
        return zipfile.ZipFile(path)
    except (zipfile.BadZipFile, EOFError, ValueError):
        raise ChainFileError(f"{path}: not a chain file (not a zip archive)") from None
    except OSError as exc:
        raise ChainFileError(f"{path}: cannot be read ({exc.strerror or _one_line(exc)})") from None


def _read_manifest(archive: zipfile.ZipFile, path: str) -> dict[str, Any]:
    if MANIFEST not in archive.namelist():
        raise ChainFileError(f"{path}: not a chain file (no {MANIFEST} inside)")
    raw = read_member(archive, MANIFEST, None, path, limit=MAX_MANIFEST_BYTES)
    try:
        manifest = json.loads(raw.decode("utf-8"), parse_constant=_refuse_constant)
    except ValueError as exc:
        raise ChainFileError(f"{path}: {MANIFEST} is not valid JSON ({_one_line(exc)})") from None
    if not isinstance(manifest, dict):
        raise ChainFileError(f"{path}: {MANIFEST} is not a JSON object")
    _check_format(manifest, path)
    return manifest


def _refuse_constant(token: str) -> Any:
    raise ValueError(f"{token} is not strict JSON")


def _check_format(manifest: dict[str, Any], path: str) -> None:
    found = manifest.get("format")
    if found != FORMAT_NAME:
        raise ChainFileError(f"{path}: not a remnant chain file (format {found!r}, expected {FORMAT_NAME!r})")
    version = manifest.get("format_version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise ChainFileError(f"{path}: manifest has no valid format_version (found {version!r})")
    if version > FORMAT_VERSION:
        raise ChainFileError(f"{path}: written by a newer remnant (format {version}; this one reads {FORMAT_VERSION})")


def read_member(archive: zipfile.ZipFile, name: Any, sha256: str | None, path: str, limit: int | None = None) -> bytes:
    """Return the bytes of member ``name`` after checking its size (before reading) and its SHA-256."""
    limit = MAX_MEMBER_BYTES if limit is None else limit
    try:
        info = archive.getinfo(name)
    except (KeyError, TypeError, AttributeError):
        raise ChainFileError(f"{path}: member {name!r} is missing") from None
    if info.file_size > limit:
        raise ChainFileError(f"{path}: member {name!r} is too large ({_size(info.file_size)}; the limit is {_size(limit)})")
    try:
        payload = archive.read(info)
    except (zipfile.BadZipFile, EOFError, OSError, ValueError, RuntimeError, NotImplementedError) as exc:
        raise ChainFileError(f"{path}: member {name!r} cannot be read ({_one_line(exc)})") from None
    if sha256 is not None and _sha256(payload) != sha256:
        raise ChainFileError(f"{path}: member {name!r} fails its checksum (the file was changed or damaged)")
    return payload


def _load_stage(archive: zipfile.ZipFile, entry: Any, number: int, schema: Schema, path: str) -> FittedStage:
    if not isinstance(entry, dict):
        raise ChainFileError(f"{path}: stage {number} in the manifest is not an object")
    kind_name = entry["kind"]
    try:
        kind = get_kind(kind_name)
    except RemnantError:
        raise ChainFileError(f"{path}: stage {number} has an unknown kind {kind_name!r}") from None
    try:
        spec = StageSpec.from_dict(entry["spec"])
    except RemnantError as exc:
        raise ChainFileError(f"{path}: stage {number} has an invalid spec ({_one_line(exc)})") from None
    if spec.kind != kind_name or entry["fmt"] not in Artifact.SUFFIX:
        raise ChainFileError(f"{path}: stage {number} has an inconsistent kind or artifact format")
    payload = read_member(archive, entry["member"], entry["sha256"], path)
    try:
        learner = kind.load(Artifact(entry["fmt"], payload, dict(entry.get("meta") or {})))
    except ChainFileError as exc:
        raise ChainFileError(f"{path}: stage {number} ({kind_name}) was refused: {_one_line(exc)}") from None
    if not callable(getattr(learner, "predict", None)):
        raise ChainFileError(f"{path}: stage {number} ({kind_name}) holds a {type(learner).__name__}, not a learner")
    index = tuple(int(i) for i in entry["feature_index"])
    if not index or any(not 0 <= i < len(schema.columns) for i in index) or list(entry["features"]) != [
            schema.names[i] for i in index]:
        raise ChainFileError(f"{path}: stage {number} names features that do not match the schema")
    scale = _number(entry["scale"])
    if not math.isfinite(scale):
        raise ChainFileError(f"{path}: stage {number} has no finite scale")
    return FittedStage(spec, dict(entry.get("params") or {}), learner, scale, index,
                       _scores(entry.get("scores") or {}), _number(entry.get("fit_seconds", 0.0)))


def _read_probe(archive: zipfile.ZipFile, entry: Any, schema: Schema, path: str) -> Probe | None:
    """Return the stored probe rows and raw outputs, or None when the file has none."""
    if entry is None:
        return None
    payload = read_member(archive, entry["member"], entry["sha256"], path)
    try:
        with np.load(io.BytesIO(payload), allow_pickle=False) as stored:
            matrix = np.asarray(stored["matrix"], dtype=np.float64)
            raw = np.asarray(stored["raw"], dtype=np.float64)
    except (OSError, ValueError, KeyError, TypeError, zipfile.BadZipFile, EOFError) as exc:
        raise ChainFileError(f"{path}: member {entry['member']!r} is not a valid probe ({_one_line(exc)})") from None
    if matrix.ndim != 2 or matrix.shape[1] != len(schema.columns) or raw.shape != (len(matrix),):
        raise ChainFileError(f"{path}: member {entry['member']!r} does not match the schema")
    return matrix, raw


def _meta(manifest: dict[str, Any]) -> dict[str, Any]:
    keys = ("format_version", "created", "versions", "task", "loss", "threshold", *_CHAIN_KEYS, "data")
    meta = {key: manifest.get(key) for key in keys}
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
    except Exception as exc:
        raise ChainFileError(f"{path}: the chain's stages cannot predict on this machine ({_one_line(exc)})") from None
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
    return hashlib.sha256(payload).hexdigest()


def _size(n: int) -> str:
    if n >= 1024**3:
        return f"{n / 1024**3:.3g} GiB"
    return f"{n / 1024**2:.3g} MiB" if n >= 1024**2 else f"{n:,} bytes"


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__
