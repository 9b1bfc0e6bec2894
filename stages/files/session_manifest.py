"""The schema of a session file's ``session.json``: every key, its type, its range and its size.

A session file sits in the user's data folder, but may have been put there by anyone, so it is
checked like a chain file's manifest before any of it is used (``check_session_manifest``).
"""

from __future__ import annotations

from typing import Any

from .. import limits
from ..kinds.base import Artifact
from ..manifest_schema import (
    ManifestMismatch,
    flag,
    items,
    json_value,
    mapping,
    nullable,
    number,
    table,
    text,
    whole,
)
from .chain_manifest import PARAMS, SCHEMA, SPEC, TASKS

#: the random-stream states a session may store (each distinct one once)
MAX_STATES = 4 * limits.MAX_STAGES
_SHA256 = text(64, pattern="[0-9a-f]{64}")
_NAME = text(4096)
_ID = whole(0, limits.MAX_STAGES * 8)
_STATE_ID = whole(0, MAX_STATES)
LEARNER = table({"member": text(512), "sha256": _SHA256, "fmt": text(16, choices=tuple(Artifact.SUFFIX))},
                {"meta": mapping(json_value(limits.MAX_NESTING, 10_000_000), 64), "size": whole(0, limits.MAX_MEMBER_BYTES)})
_TRACKS = limits.MAX_FOLDS + 1
STAGE = table({
    "id": _ID, "previous": nullable(_ID), "spec": SPEC, "params": PARAMS,
    "feature_index": items(whole(0, limits.MAX_COLUMNS - 1), limits.MAX_COLUMNS, min_items=1),
    "scales": items(number(), _TRACKS, min_items=1), "fit_seconds": number(0),
    "rng_before": items(_STATE_ID, _TRACKS, min_items=1), "rng_after": items(_STATE_ID, _TRACKS, min_items=1),
    "outputs_sha256": _SHA256, "learners": items(LEARNER, _TRACKS, min_items=1),
}, {"step_rule": text(128), "oob_loss": nullable(items(nullable(number()), 2, min_items=2)), "notes": items(text(2000), 16)})
DATA = table({"path": text(4096), "name": _NAME, "size": whole(0, 2**62), "mtime_ns": whole(-(2**62), 2**62),
              "sha256": _SHA256})
FINGERPRINT = table({"rows": whole(0, 2**53), "columns": whole(0, limits.MAX_COLUMNS), "sha256": _SHA256,
                     "split_sha256": _SHA256})
COLUMNS = table({"target": _NAME, "ignore": items(_NAME, limits.MAX_COLUMNS),
                 "features": items(_NAME, limits.MAX_COLUMNS, min_items=1), "task": text(32, choices=TASKS),
                 "positive": nullable(text(4096)), "threshold": number(0, 1), "schema": SCHEMA})
# a state: generator name, 624 keys, position, has_gauss, cached gauss (checked in full by decode_state)
STATE = items(json_value(2, 700), 5, min_items=5)
MANIFEST = table({
    "format": text(64), "format_version": whole(1, 2**31), "saved": text(64),
    "versions": mapping(nullable(text(128)), 64), "data": nullable(DATA), "fingerprint": FINGERPRINT,
    "columns": COLUMNS, "loss": text(64), "validation": mapping(json_value(2, 64), 16),
    "seed": whole(0, limits.MAX_SEED), "test": table({"revealed": flag(), "reveals": whole(0, 2**31)}),
    "streams": items(_STATE_ID, _TRACKS, min_items=1), "current": items(_ID, limits.MAX_STAGES),
    "removals": items(table({"action": text(32), "stages": items(_ID, limits.MAX_STAGES)}), limits.MAX_STAGES),
    "stages": items(STAGE, limits.MAX_STAGES * 8), "states": items(STATE, MAX_STATES),
}, {
    # the weight and exposure columns and the tweedie power, written only when the chain has them
    "weight": _NAME, "exposure": _NAME, "power": number(1, 2),
})


def check_session_manifest(manifest: Any) -> None:
    """Raise ManifestMismatch naming the key unless ``manifest`` fits the session schema."""
    MANIFEST(manifest, "")
    if manifest["columns"]["task"] != manifest["columns"]["schema"].get("task", "regression"):
        raise ManifestMismatch("columns.task does not match columns.schema.task")


__all__ = ["check_session_manifest", "ManifestMismatch"]
