"""A small TOML writer for the values recipes hold: text, numbers (inf and nan too), booleans,
lists and inline tables (``tomllib`` reads back exactly what ``toml_value`` writes), and
``KeyLines``, which finds the line of a table or key in TOML text so messages can name it."""

from __future__ import annotations

import math
import numbers
import re
from typing import Any

import numpy as np

from ..errors import RecipeError

_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")
_ESCAPES = {"\\": "\\\\", '"': '\\"', "\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}


def toml_key(key: str) -> str:
    """Return ``key`` as a TOML key: bare when it can be, else a quoted string."""
    return key if _BARE_KEY.fullmatch(key) else toml_string(key)


def toml_string(text: str) -> str:
    """Return ``text`` as a TOML basic string, with every character TOML needs escaped."""
    out = []
    for char in text:
        if char in _ESCAPES:
            out.append(_ESCAPES[char])
        elif ord(char) < 0x20 or ord(char) == 0x7F:
            out.append(f"\\u{ord(char):04X}")
        else:
            out.append(char)
    return '"' + "".join(out) + '"'


def toml_value(value: Any) -> str:
    """Return ``value`` (text, whole number, float incl. inf/nan, bool, list or dict) as TOML.

    Anything else (None, dates, objects) raises RecipeError: TOML has no null.
    """
    if isinstance(value, bool | np.bool_):
        return "true" if value else "false"
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        number = float(value)
        if math.isnan(number):
            return "nan"
        if math.isinf(number):
            return "inf" if number > 0 else "-inf"
        return repr(number)
    if isinstance(value, str):
        return toml_string(value)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        if not value:
            return "{}"
        return "{ " + ", ".join(f"{toml_key(str(k))} = {toml_value(v)}" for k, v in value.items()) + " }"
    raise RecipeError(f"cannot write {value!r} ({type(value).__name__}) in a recipe: use text, numbers, "
                      "true/false, lists or tables")


_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\[\]]+?)\s*\]\]?\s*(#.*)?$")
_KEY = re.compile(r"""^\s*(?:"([^"]*)"|'([^']*)'|([A-Za-z0-9_-]+))\s*[=.]""")


class KeyLines:
    """Where each table header and key of a TOML text is (1-based line numbers), for messages.

    Arrays of tables are told apart by their index: the second ``[[stage]]`` is ``("stage", 1)``.
    """

    def __init__(self, text: str) -> None:
        self.headers: dict[tuple[str, int], int] = {}
        self.keys: dict[tuple[str | None, int, str], int] = {}
        table: str | None = None
        index, counts = 0, dict[str, int]()
        for number, line in enumerate(text.splitlines(), 1):
            header = _HEADER.match(line)
            if header:
                parts = [p.strip().strip("\"'") for p in header.group(2).split(".")]
                top = parts[0]
                if header.group(1) == "[[" and len(parts) == 1:
                    counts[top] = counts.get(top, 0) + 1
                index = max(counts.get(top, 1) - 1, 0)
                table = ".".join(parts)
                self.headers.setdefault((table, index), number)
                if len(parts) > 1:
                    self.keys.setdefault((top, index, parts[1]), number)
                continue
            key = _KEY.match(line)
            if key:
                name = next(g for g in key.groups() if g is not None)
                self.keys.setdefault((table, index, name), number)

    def line(self, table: str | None, index: int = 0, key: str | None = None) -> int | None:
        """Return the line of ``key`` in a table (or of the table's header), else None."""
        if key is not None and (table, index, key) in self.keys:
            return self.keys[(table, index, key)]
        if table is not None and (table, index) in self.headers:
            return self.headers[(table, index)]
        return self.keys.get((None, 0, table)) if table else None
