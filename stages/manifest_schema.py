"""A small schema language for the JSON manifests of chain and session files: types, ranges, sizes.

A manifest from a stranger is checked against its schema before anything in it is used, so
no later code meets a string where it expects a number, a negative count, a million-element
list or a value nested five thousand deep. A schema is built from the functions below; each
returns a check ``check(value, where)`` that raises ``ManifestMismatch`` naming the key path
(``stages[3].scale``), what it expected and what it found.

``strict_json`` parses manifest text with NaN, infinity and numbers too large for a float
refused, as ``json.loads`` alone does not.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Callable
from typing import Any

from .errors import ManifestMismatch

Check = Callable[[Any, str], None]

#: a whole number JSON may hold without losing precision in other readers
_LARGEST_WHOLE = 2**63


def strict_json(text: str | bytes) -> Any:
    """Return the JSON value in ``text``; raise ValueError for NaN, infinity or a number that overflows."""
    return json.loads(text, parse_constant=_refuse_constant, parse_float=_finite_float)


def _refuse_constant(token: str) -> Any:
    raise ValueError(f"{token} is not strict JSON")


def _finite_float(token: str) -> float:
    value = float(token)
    if not math.isfinite(value):
        raise ValueError(f"{token[:20]} is too large for a number")
    return value


def shown(value: Any) -> str:
    """Return a short description of a found value: its JSON type and, when short, the value."""
    kind = {dict: "an object", list: "a list", str: "text", bool: "true/false", type(None): "null"}.get(type(value))
    if kind is None:
        kind = "a number"
    text = repr(value)
    return f"{kind} {text}" if len(text) <= 40 and not isinstance(value, dict | list) else kind


def mismatch(where: str, expected: str, value: Any = None, *, found: str | None = None) -> ManifestMismatch:
    """Return the error for ``value`` (or what ``found`` describes) at ``where`` not being ``expected``."""
    return ManifestMismatch(_at(where, f"expected {expected}, found {found or shown(value)}"))


def _at(where: str, problem: str) -> str:
    return f"{where}: {problem}" if where else problem


def text(max_length: int = 4096, *, choices: tuple[str, ...] | None = None, pattern: str | None = None) -> Check:
    """Return a check for a string of at most ``max_length`` characters (one of ``choices``, matching ``pattern``)."""
    compiled = re.compile(pattern) if pattern else None

    def check(value: Any, where: str) -> None:
        if not isinstance(value, str):
            raise mismatch(where, "text", value)
        if len(value) > max_length:
            raise mismatch(where, f"text of at most {max_length:,} characters", found=f"{len(value):,} characters")
        if choices is not None and value not in choices:
            raise mismatch(where, "one of " + ", ".join(repr(c) for c in choices), value)
        if compiled is not None and not compiled.fullmatch(value):
            raise mismatch(where, f"text matching {pattern}", value)

    return check


def whole(low: int = -_LARGEST_WHOLE, high: int = _LARGEST_WHOLE) -> Check:
    """Return a check for a whole number between ``low`` and ``high`` (both included)."""

    def check(value: Any, where: str) -> None:
        if isinstance(value, bool) or not isinstance(value, int):
            raise mismatch(where, "a whole number", value)
        if not low <= value <= high:
            raise mismatch(where, f"a whole number from {low:,} to {high:,}", value)

    return check


def number(low: float = -math.inf, high: float = math.inf) -> Check:
    """Return a check for a finite number between ``low`` and ``high`` (both included)."""

    def check(value: Any, where: str) -> None:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise mismatch(where, "a number", value)
        if isinstance(value, int) and abs(value) > _LARGEST_WHOLE:
            raise mismatch(where, "a number of usual size", value)
        if not math.isfinite(value) or not low <= value <= high:
            raise mismatch(where, f"a finite number from {low:g} to {high:g}", value)

    return check


def flag() -> Check:
    """Return a check for true or false."""

    def check(value: Any, where: str) -> None:
        if not isinstance(value, bool):
            raise mismatch(where, "true or false", value)

    return check


def nullable(inner: Check) -> Check:
    """Return a check that accepts null or what ``inner`` accepts."""

    def check(value: Any, where: str) -> None:
        if value is not None:
            inner(value, where)

    return check


def number_or_numbers(max_items: int) -> Check:
    """Return a check for one finite number or a list of 2 to ``max_items`` of them (one per raw score)."""
    one, several = number(), items(number(), max_items, min_items=2)

    def check(value: Any, where: str) -> None:
        (several if isinstance(value, list) else one)(value, where)

    return check


def items(inner: Check, max_items: int, min_items: int = 0) -> Check:
    """Return a check for a list of ``min_items`` to ``max_items`` values, each accepted by ``inner``."""

    def check(value: Any, where: str) -> None:
        if not isinstance(value, list):
            raise mismatch(where, "a list", value)
        if not min_items <= len(value) <= max_items:
            raise mismatch(where, f"a list of {min_items:,} to {max_items:,} values", found=f"{len(value):,} values")
        for i, item in enumerate(value):
            inner(item, f"{where}[{i}]")

    return check


def table(required: dict[str, Check], optional: dict[str, Check] | None = None) -> Check:
    """Return a check for an object with every ``required`` key, any ``optional`` one and no other."""
    optional = optional or {}
    known = {**required, **optional}

    def check(value: Any, where: str) -> None:
        if not isinstance(value, dict):
            raise mismatch(where, "an object", value)
        for key in required:
            if key not in value:
                raise ManifestMismatch(_at(where, f"the key {key!r} is missing"))
        for key, item in value.items():
            if key not in known:
                raise ManifestMismatch(_at(where, f"unknown key {str(key)[:60]!r}"))
            known[key](item, f"{where}.{key}" if where else key)

    return check


def mapping(inner: Check, max_items: int, max_key_length: int = 256) -> Check:
    """Return a check for an object of at most ``max_items`` keys (short text), each value accepted by ``inner``."""

    def check(value: Any, where: str) -> None:
        if not isinstance(value, dict):
            raise mismatch(where, "an object", value)
        if len(value) > max_items:
            raise mismatch(where, f"an object of at most {max_items:,} keys", found=f"{len(value):,} keys")
        for key, item in value.items():
            if len(key) > max_key_length:
                raise mismatch(where, f"keys of at most {max_key_length} characters", found=f"a key of {len(key):,} characters")
            inner(item, f"{where}.{key}" if where else key)

    return check


def json_value(max_depth: int, max_values: int) -> Check:
    """Return a check for any JSON value nested at most ``max_depth`` deep, with at most ``max_values`` values."""

    def check(value: Any, where: str) -> None:
        budget = [max_values]

        def walk(item: Any, depth: int, at: str) -> None:
            budget[0] -= 1
            if budget[0] < 0:
                raise ManifestMismatch(_at(where, f"holds more than {max_values:,} values"))
            if isinstance(item, dict | list):
                if depth >= max_depth:
                    raise ManifestMismatch(_at(at, f"nested more than {max_depth} deep"))
                for key, inner in (item.items() if isinstance(item, dict) else enumerate(item)):
                    if isinstance(key, str) and len(key) > 4096:
                        raise ManifestMismatch(_at(at, "a key is longer than 4,096 characters"))
                    walk(inner, depth + 1, f"{at}.{key}" if isinstance(key, str) else f"{at}[{key}]")
            elif isinstance(item, str):
                if len(item) > 1024**2:
                    raise ManifestMismatch(_at(at, "text longer than 1 MiB"))
            elif isinstance(item, int) and not isinstance(item, bool):
                if abs(item) > _LARGEST_WHOLE:
                    raise mismatch(at, "a number of usual size", item)
            elif isinstance(item, float):
                if not math.isfinite(item):
                    raise mismatch(at, "a finite number", item)
            elif not isinstance(item, bool) and item is not None:
                raise mismatch(at, "a JSON value", item)

        walk(value, 0, where)

    return check
