"""The schema of a chain file's ``manifest.json``: every key, its type, its range and its size.

``check_manifest`` is called on every manifest before any of it is used, so a manifest edited by
a stranger (types swapped, numbers out of range, lists made huge, values nested deep) is refused
with a line naming the key. A new manifest key needs its line here, or loading refuses it.
"""

from __future__ import annotations

import math
from typing import Any

from .. import limits
from ..dates import DATE_PARTS
from ..errors import DAMAGED_FILE_ERRORS, ChainFileError, ValidationSpecError
from ..kinds.base import Artifact
from ..manifest_schema import (
    ManifestMismatch,
    flag,
    items,
    json_value,
    mapping,
    nullable,
    number,
    number_or_numbers,
    table,
    text,
    whole,
)
from ..schema import FEATURE_ROLES, LEVEL_ORDERS

TASKS = ("regression", "binary", "multiclass")
_NAME = text(4096)
_SHA256 = text(64, pattern="[0-9a-f]{64}")
_SCORE_TABLE = mapping(nullable(number()), max_items=64, max_key_length=64)
SCORES = table({}, {"train": _SCORE_TABLE, "valid": _SCORE_TABLE, "test": _SCORE_TABLE,
                    "fold_valid": items(nullable(number()), limits.MAX_FOLDS)})
COLUMN = table({"name": _NAME, "role": text(32, choices=FEATURE_ROLES), "dtype": text(64)},
               {"levels": items(text(4096), limits.MAX_LEVELS), "order": text(16, choices=LEVEL_ORDERS),
                "fill": number(), "date_column": _NAME, "date_part": text(32, choices=DATE_PARTS)})
SCHEMA = table({"target": _NAME, "columns": items(COLUMN, limits.MAX_COLUMNS, min_items=1)},
               {"task": text(32, choices=TASKS), "classes": items(text(4096), limits.MAX_CLASSES),
                "id_column": _NAME})
PARAMS = mapping(json_value(limits.MAX_NESTING, 1_000_000), max_items=1_000)
SPEC = table({"kind": text(512)}, {"shrinkage": number(0, 1), "features": items(_NAME, limits.MAX_COLUMNS),
                                   "params": PARAMS})
MEMBER = text(512)
#: how a stage's step was chosen (``stages.steps``) and its value (null when the shrinkage is 0)
STEP = table({}, {"rule": text(128), "value": nullable(number())})
STAGE = table(
    {"index": whole(1, limits.MAX_STAGES), "kind": text(512), "spec": SPEC, "params": PARAMS,
     "scale": number(), "features": items(_NAME, limits.MAX_COLUMNS, min_items=1),
     "feature_index": items(whole(0, limits.MAX_COLUMNS - 1), limits.MAX_COLUMNS, min_items=1),
     "member": MEMBER, "sha256": _SHA256, "fmt": text(16, choices=tuple(Artifact.SUFFIX))},
    {"scores": SCORES, "fit_seconds": number(0), "meta": mapping(json_value(limits.MAX_NESTING, 10_000_000), 64),
     "size": whole(0, limits.MAX_MEMBER_BYTES), "step": STEP, "oob_loss": nullable(items(nullable(number()), 2, min_items=2)),
     "notes": items(text(2000), 16)},
)
PROBE = table({"member": MEMBER, "rows": whole(1, 100_000), "sha256": _SHA256},
              {"size": whole(0, limits.MAX_MEMBER_BYTES)})
_COUNT = whole(0, 2**53)
MANIFEST = table(
    {"format": text(64), "format_version": whole(1, 2**31), "task": text(32, choices=TASKS), "loss": text(64),
     # one start value, or one per class of a multiclass chain (in the schema's class order)
     "start": number_or_numbers(limits.MAX_CLASSES), "schema": SCHEMA, "stages": items(STAGE, limits.MAX_STAGES)},
    {"created": nullable(text(64)), "versions": nullable(mapping(nullable(text(128)), 64)),
     "threshold": nullable(number(0, 1)), "validation": nullable(mapping(json_value(2, 64), 16)),
     "seed": nullable(whole(0, limits.MAX_SEED)), "rows": nullable(table({}, {"train": _COUNT, "valid": _COUNT,
                                                                              "test": _COUNT})),
     "test_revealed": nullable(flag()), "test_reveals": nullable(whole(0, 2**31)), "source": nullable(text(4096)),
     "ignore": nullable(items(_NAME, limits.MAX_COLUMNS)),
     "data": nullable(table({"rows": _COUNT, "columns": _COUNT, "sha256": _SHA256})),
     "start_scores": nullable(SCORES), "probe": nullable(PROBE),
     # the weight and exposure columns the chain was fit with, and the tweedie loss's power
     "weight": nullable(_NAME), "exposure": nullable(_NAME), "power": nullable(number(1, 2))},
)


def check_manifest(manifest: Any, path: str) -> None:
    """Raise ChainFileError naming ``path`` and the key unless ``manifest`` fits the schema and agrees with itself."""
    try:
        MANIFEST(manifest, "")
    except ManifestMismatch as exc:
        raise ChainFileError(f"{path}: chain file is damaged: its manifest does not fit the format ({exc})") from exc
    schema = manifest["schema"]
    task = schema.get("task", "regression")
    if manifest["task"] != task:
        raise ChainFileError(f"{path}: manifest task {manifest['task']!r} does not match its schema")
    classes = len(schema.get("classes", ()))
    expected = {"regression": (0,), "binary": (2,)}.get(task)
    if (expected is not None and classes not in expected) or (task == "multiclass" and classes < 3):
        raise ChainFileError(f"{path}: manifest schema of a {task} chain lists {classes} classes")
    if len(set(schema.get("classes", ()))) != classes:
        raise ChainFileError(f"{path}: manifest schema names a class twice")
    starts = len(manifest["start"]) if isinstance(manifest["start"], list) else 1
    if starts != (classes if task == "multiclass" else 1):
        raise ChainFileError(f"{path}: manifest start holds {starts} values for a {task} chain of {classes} classes")
    names = [column["name"] for column in schema["columns"]]
    if len(set(names)) != len(names):
        raise ChainFileError(f"{path}: manifest schema names a feature twice")
    if manifest.get("validation") is not None:
        _check_validation(manifest["validation"], path)
    _check_row_settings(manifest, path)
    for number_, entry in enumerate(manifest["stages"], start=1):
        if entry["index"] != number_:
            raise ChainFileError(f"{path}: stage {number_} in the manifest says it is stage {entry['index']}")
        if not math.isfinite(entry["scale"]):
            raise ChainFileError(f"{path}: stage {number_} has no finite scale")


#: the losses an exposure enters (on the log link)
LOG_LINK_LOSSES = ("poisson", "gamma", "tweedie")


def _check_row_settings(manifest: dict[str, Any], path: str) -> None:
    """Raise ChainFileError when a power or an exposure is recorded for a loss that takes none."""
    loss = manifest["loss"]
    power = manifest.get("power")
    if power is not None and (loss != "tweedie" or not 1 < power < 2):
        raise ChainFileError(f"{path}: manifest power {power!r} does not fit loss {loss[:64]!r} "
                             "(a tweedie power lies strictly between 1 and 2)")
    if manifest.get("exposure") is not None and loss not in LOG_LINK_LOSSES:
        raise ChainFileError(f"{path}: manifest records an exposure column for loss {loss[:64]!r}, which takes none")


#: what a stored validation spec the validation module cannot read raises
_UNREADABLE_SPEC: tuple[type[BaseException], ...] = (ValidationSpecError, *DAMAGED_FILE_ERRORS)


def _check_validation(spec: dict[str, Any], path: str) -> None:
    from ..validation import spec_from_dict

    try:
        spec_from_dict(dict(spec))
    except _UNREADABLE_SPEC as exc:  # a spec the validation module cannot read
        raise ChainFileError(f"{path}: manifest validation is not a scheme remnant knows "
                             f"({' '.join(str(exc).split())[:200]})") from exc
