"""Stage and validation specs from what a user wrote: a recipe's tables, a form, a dict.

One reader for every place a spec comes in: recipes and their ``[[audition]]`` tables, the
workbench's forms, the scikit-learn estimators and the files the engine writes. Each mistake is
a StageSpecError or ValidationSpecError with a one-line message and a ``key`` naming the entry
key at fault (``kind``, ``shrinkage``, ``features``, ``params``, ``repeat``, ``patience``, or a
validation field), so that a recipe can point at that key's line and a form at that field.

TOML has no null: where a recipe or a form's TOML text is read (``toml=True``), a parameter
written as the text ``"none"`` means Python's ``None``, at any depth.
"""

from __future__ import annotations

import itertools
import json
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from numbers import Integral, Real
from typing import Any

from . import limits
from .errors import StageSpecError
from .spec import StageSpec
from .validation import SCHEMES, ValidationSpec, spec_from_dict

#: the keys of one stage
STAGE_KEYS = ("kind", "shrinkage", "features", "params")
#: the keys of a recipe's [[stage]] entry: a stage, how many times, and when a grow stops
ENTRY_KEYS = (*STAGE_KEYS, "repeat", "patience")
#: more candidates than this in one audition is almost surely a typing slip in a grid
MAX_CANDIDATES = limits.MAX_CANDIDATES
#: TOML's stand-in for None in stage parameters
NONE_TEXT = "none"


@dataclass(frozen=True)
class StageEntry:
    """A checked stage entry: the spec, how many stages of it, and the grow's patience (None: no grow)."""

    spec: StageSpec
    repeat: int = 1
    patience: int | None = None


def shown(value: Any) -> str:
    """Return ``value`` as a user writes it in a recipe: text in double quotes, true/false, lists, tables."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(shown(v) for v in value) + "]"
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{k} = {shown(v)}" for k, v in value.items()) + " }" if value else "{}"
    return repr(value)


# ----------------------------------------------------------------------------- typed values
# Each returns the value of ``key`` in ``table`` (``default`` when it is absent) or raises
# StageSpecError with ``key`` set. Recipes read their own tables with them too, so that every type
# mistake reads alike.


def text_value(table: Mapping[str, Any], key: str, default: Any = None) -> Any:
    """Return the text at ``key``; refuse anything but text in quotes."""
    value = table.get(key, default)
    if value is not default and not isinstance(value, str):
        raise StageSpecError(f"{key} must be text in quotes, not {shown(value)}", key=key)
    return value


def names_value(table: Mapping[str, Any], key: str) -> tuple[str, ...] | None:
    """Return the list of column names at ``key`` as a tuple (None when absent)."""
    value = table.get(key)
    if value is None:
        return None
    if not isinstance(value, list | tuple) or not all(isinstance(v, str) for v in value):
        raise StageSpecError(f"{key} must be a list of column names in quotes, not {shown(value)}", key=key)
    return tuple(value)


def whole_value(table: Mapping[str, Any], key: str, default: int, *, minimum: int | None = None,
                maximum: int | None = None) -> int:
    """Return the whole number at ``key``, at least ``minimum`` and at most ``maximum`` (a documented
    limit, ``stages.limits``) when given."""
    value = table.get(key, default)
    if isinstance(value, bool) or not isinstance(value, Integral):
        raise StageSpecError(f"{key} must be a whole number, not {shown(value)}", key=key)
    whole = int(value)
    if minimum is not None and whole < minimum:
        raise StageSpecError(f"{key} must be at least {minimum}, not {whole}", key=key)
    if maximum is not None and whole > maximum:
        raise StageSpecError(f"{key} must be at most {maximum:,} (a documented limit), not {whole:,}", key=key)
    return whole


def number_value(table: Mapping[str, Any], key: str, default: float) -> float:
    """Return the number at ``key`` as a float."""
    value = table.get(key, default)
    if isinstance(value, bool) or not isinstance(value, Real):
        raise StageSpecError(f"{key} must be a number, not {shown(value)}", key=key)
    return float(value)


# ----------------------------------------------------------------------------- stages


def from_toml(value: Any) -> Any:
    """Return a parameter value with the text ``"none"`` replaced by None at any depth."""
    if isinstance(value, list | tuple):
        return [from_toml(v) for v in value]
    if isinstance(value, Mapping):
        return {k: from_toml(v) for k, v in value.items()}
    return None if value == NONE_TEXT else value


def to_toml(value: Any) -> Any:
    """Return a parameter value with None replaced by the text ``"none"`` at any depth (what TOML can hold)."""
    if isinstance(value, list | tuple):
        return [to_toml(v) for v in value]
    if isinstance(value, Mapping):
        return {k: to_toml(v) for k, v in value.items()}
    return NONE_TEXT if value is None else value


def check_keys(entry: Any, keys: Iterable[str], where: str) -> dict[str, Any]:
    """Return ``entry`` as a dict after checking that it is a table holding only ``keys``."""
    keys = tuple(keys)
    if not isinstance(entry, Mapping):
        raise StageSpecError(f"{where} must be a table of {', '.join(keys)}, not {shown(entry)}")
    for key in entry:
        if key not in keys:
            raise StageSpecError(f"unknown key {key!r} in {where} (keys: {', '.join(keys)})", key=key)
    return dict(entry)


def stage_entry(entry: Any, task: str | None = None, *, keys: Iterable[str] = ENTRY_KEYS, where: str = "[[stage]]",
                toml: bool = False) -> StageEntry:
    """Return the checked stage an entry describes (keys among ``keys``: by default a recipe's
    [[stage]] keys, ``ENTRY_KEYS``).

    Refuses an unknown key, a missing or unknown kind, a shrinkage outside (0, 1], features that
    are not a list of names, params that are not a table, and a repeat or patience below 1. With
    ``task``, the params are checked against the kind for that task too (the chain checks them
    again before any fit). ``where`` names the entry in messages: ``[[stage]]``, ``a stage``.
    """
    values = check_keys(entry, keys, where)
    kind = text_value(values, "kind")
    if kind is None:
        raise StageSpecError(f"{where} has no 'kind'", key="kind")
    found = None if task is None else _kind(kind)
    params = values.get("params", {})
    if not isinstance(params, Mapping):
        raise StageSpecError(f"params must be a table such as {{ max_depth = 3 }}, not {shown(params)}",
                             key="params")
    if _depth(params) > limits.MAX_NESTING:
        raise StageSpecError(f"params are nested more than {limits.MAX_NESTING} levels deep", key="params")
    spec = StageSpec(kind, number_value(values, "shrinkage", 1.0), names_value(values, "features") or (),
                     from_toml(params) if toml else dict(params))
    if found is not None:
        try:
            found.resolve_params(spec.params, task)
        except StageSpecError as err:
            raise StageSpecError(str(err), key="params") from None
    patience = values.get("patience")
    return StageEntry(spec, whole_value(values, "repeat", 1, minimum=1, maximum=limits.MAX_REPEAT),
                      None if patience is None else whole_value(values, "patience", 10, minimum=1))


def stage_spec(entry: Any, task: str | None = None, *, where: str = "a stage", toml: bool = False) -> StageSpec:
    """Return the checked spec of one stage (only the keys kind, shrinkage, features and params)."""
    return stage_entry(entry, task, keys=STAGE_KEYS, where=where, toml=toml).spec


def _depth(value: Any) -> int:
    """Return how deeply lists and tables nest in ``value`` (a plain value is 0 deep)."""
    deepest, stack = 0, [(value, 0)]
    while stack:
        item, depth = stack.pop()
        if isinstance(item, Mapping | list | tuple):
            deepest = max(deepest, depth + 1)
            stack.extend((inner, depth + 1) for inner in (item.values() if isinstance(item, Mapping) else item))
    return deepest


def _kind(name: str) -> Any:
    from .kinds import get_kind

    try:
        return get_kind(name)
    except StageSpecError as err:
        raise StageSpecError(str(err), key="kind") from None


def expand_grid(spec: StageSpec | Mapping[str, Any], task: str | None = None, *, where: str = "a candidate",
                toml: bool = False) -> list[StageSpec]:
    """Return the specs of a candidate grid: one per combination of the list-valued params.

    ``{"kind": "forest", "params": {"max_features": [0.33, 0.5, 1.0]}}`` gives three specs. A
    list-valued ``shrinkage`` is expanded too. A parameter whose own value is a list is
    written as a list of lists (``monotone_constraints = [[1, 0, -1]]``). An empty list
    raises StageSpecError, as does a grid of more than MAX_CANDIDATES specs; each combination
    is checked as ``stage_spec`` checks one stage.
    """
    data = spec.to_dict() if isinstance(spec, StageSpec) else check_keys(spec, STAGE_KEYS, where)
    params = data.get("params") or {}
    if not isinstance(params, Mapping):
        return [stage_spec(data, task, where=where, toml=toml)]  # refused there, naming params
    shrinkages = data.get("shrinkage", 1.0)
    shrinkages = shrinkages if isinstance(shrinkages, list) else [shrinkages]
    axes: list[tuple[str, list[Any]]] = [(name, v) for name, v in params.items() if isinstance(v, list)]
    for name, values in [("shrinkage", shrinkages), *axes]:
        if not values:
            raise StageSpecError(f"stage {data.get('kind', '?')!r}: {name} is an empty list; give at least one value",
                                 key="shrinkage" if name == "shrinkage" else "params")
    size = len(shrinkages) * math.prod(len(v) for _, v in axes)  # exact: a numpy product can overflow
    if size > MAX_CANDIDATES:
        raise StageSpecError(f"the grid of {data.get('kind', '?')!r} has {size:,} candidates; at most {MAX_CANDIDATES}",
                             key="params")
    specs = []
    for shrinkage in shrinkages:
        for combo in itertools.product(*(values for _, values in axes)):
            chosen = {**params, **dict(zip([name for name, _ in axes], combo, strict=True))}
            specs.append(stage_spec({**data, "shrinkage": shrinkage, "params": chosen}, task, where=where, toml=toml))
    return specs


def as_candidate(spec: StageSpec) -> dict[str, Any]:
    """Return one expanded candidate as a table that ``expand_grid`` reads back as that one spec:
    a parameter whose value is a list is written as a list of that list."""
    out = spec.to_dict()
    if "params" in out:
        out["params"] = {name: [value] if isinstance(value, list) else value for name, value in out["params"].items()}
    return out


# ----------------------------------------------------------------------------- validation


def validation_spec(table: Any, *, seed: int | None = None) -> ValidationSpec:
    """Return the validation spec a ``[validation]`` table describes; ``seed``, when given, is the
    seed of a scheme that draws rows and names none (a recipe's ``[chain]`` seed).

    Raise ValidationSpecError with ``key`` naming the field at fault (as ``spec_from_dict``).
    """
    if seed is not None and isinstance(table, Mapping):
        scheme = SCHEMES.get(table.get("scheme", "holdout"))
        if scheme is not None and "seed" in scheme.__dataclass_fields__ and "seed" not in table:
            table = {**table, "seed": seed}
    if isinstance(table, Mapping):
        table = dict(table)
    return spec_from_dict(table)


__all__ = [
    "ENTRY_KEYS", "MAX_CANDIDATES", "NONE_TEXT", "STAGE_KEYS", "StageEntry", "as_candidate",
    "check_keys", "expand_grid", "from_toml", "names_value", "number_value", "shown", "stage_entry", "stage_spec",
    "text_value", "to_toml", "validation_spec", "whole_value",
]
