"""One way to write numbers as text, for every pane, the stage table, the status line and the command line.

Numbers that are read together (a table column, the ticks of an axis, a ``before → after``
pair) are written in one style, chosen from all of them (``style_of``):

- **scientific** when the largest magnitude is 1e7 or more, or below 1e-4 (every value is
  tiny): ``DIGITS`` significant digits each, ``-7.488e-05``;
- otherwise **fixed**, one number of decimals for the whole column: enough for the largest
  magnitude to show ``DIGITS`` significant digits, more when the two closest distinct values
  need them to differ, but never more than ``EXTRA`` beyond what the largest needs (nor more
  than ``MAX_DECIMALS``). So ``7.480`` never stands beside ``7.506``, ``-0.004000`` stands
  beside ``-0.000325``, and a value far smaller than the column's largest shows as zero in the
  column's decimals, keeping its sign (``-0.00`` beside ``-24.67``).

A single number is a column of one. Missing values (None, NaN) are written as ``missing``.
Whole counts of rows are written with thousands separators (``count_text``); measurements
never are, so that every number in a column reads the same way.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

#: significant digits of the largest value of a column
DIGITS = 4
#: decimals beyond what the largest value needs, at most, to tell values apart
EXTRA = 2
#: at most this many decimals in fixed style
MAX_DECIMALS = 8
#: magnitudes from here up are written in scientific style
LARGE = 1e7
#: a column whose every magnitude is below this is written in scientific style
TINY = 1e-4


def _finite(values: Iterable[Any]) -> list[float]:
    out = []
    for value in values:
        number = _as_float(value)
        if number is not None and math.isfinite(number):
            out.append(number)
    return out


def _as_float(value: Any) -> float | None:
    if value is None or isinstance(value, bool | str):
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(number) else number


def _exponent(size: float) -> int:
    return math.floor(math.log10(size))


@dataclass(frozen=True)
class NumberStyle:
    """How one column of numbers is written: ``decimals`` fixed decimals, or scientific with
    ``digits`` significant digits when ``decimals`` is None."""

    decimals: int | None
    digits: int = DIGITS

    def text(self, value: Any, *, signed: bool = False, missing: str = "") -> str:
        """Return ``value`` in this style (``+`` before positive values when ``signed``); ``missing``
        for None or NaN; ``inf`` and ``-inf`` as such."""
        number = _as_float(value)
        if number is None:
            return missing
        sign = "+" if signed else ""
        if math.isinf(number):
            return ("+" if signed and number > 0 else "") + ("inf" if number > 0 else "-inf")
        if self.decimals is None:
            return f"{number:{sign}.{self.digits - 1}e}"
        return f"{number:{sign}.{self.decimals}f}"


def style_of(values: Iterable[Any], digits: int = DIGITS, *, distinguish: bool = True) -> NumberStyle:
    """Return the one style that writes every value of ``values`` (see the module's rules); without
    ``distinguish``, close values get no extra decimals (a list of rows rather than stages)."""
    finite = _finite(values)
    sizes = [abs(v) for v in finite if v != 0]
    if not sizes:
        return NumberStyle(digits - 1, digits)
    largest = max(sizes)
    if largest >= LARGE or largest < TINY:
        return NumberStyle(None, digits)
    base = max(0, digits - 1 - _exponent(largest))
    wanted = base
    distinct = sorted(set(finite)) if distinguish else []
    gaps = [b - a for a, b in zip(distinct, distinct[1:], strict=False) if b - a > 0]
    if gaps:
        wanted = max(wanted, -_exponent(min(gaps)))
    return NumberStyle(min(wanted, base + EXTRA, MAX_DECIMALS), digits)


def column_text(values: Iterable[Any], *, digits: int = DIGITS, signed: bool = False, missing: str = "",
                trim: bool = False, distinguish: bool = True) -> list[str]:
    """Return every value of ``values`` as text in their one style. With ``trim``, zeros that end
    every fixed-style value are dropped together (axis ticks: ``0.10, 0.35`` rather than
    ``0.100, 0.350``); ``distinguish`` as ``style_of``."""
    values = list(values)
    style = style_of(values, digits, distinguish=distinguish)
    if trim and style.decimals:
        while style.decimals and all(_ends_in_zero(v, style) for v in _finite(values)):
            style = NumberStyle(style.decimals - 1, digits)
    return [style.text(v, signed=signed, missing=missing) for v in values]


def _ends_in_zero(value: float, style: NumberStyle) -> bool:
    return style.text(value).endswith("0")


def number_text(value: Any, *, digits: int = DIGITS, signed: bool = False, missing: str = "-") -> str:
    """Return one number as text: a column of one."""
    return column_text([value], digits=digits, signed=signed, missing=missing)[0]


def pair_text(before: Any, after: Any, *, digits: int = DIGITS, missing: str = "-") -> tuple[str, str]:
    """Return two numbers read together (``before → after``) in their one style."""
    first, second = column_text([before, after], digits=digits, missing=missing)
    return first, second


def count_text(count: Any) -> str:
    """Return a whole count with thousands separators: ``12,345``."""
    return f"{int(count):,}"


def seconds_text(value: Any, *, missing: str = "-") -> str:
    """Return a duration: ``0.42 s``, ``12.3 s`` or ``2 min 05 s``."""
    number = _as_float(value)
    if number is None or math.isinf(number):
        return missing
    if number < 10:
        return f"{number:.2f} s"
    if number < 60:
        return f"{number:.1f} s"
    minutes, rest = divmod(int(round(number)), 60)
    return f"{minutes} min {rest:02d} s"


def share_text(share: Any, *, missing: str = "-") -> str:
    """Return a share between 0 and 1 as a percentage: ``41%``, ``4.1%``, ``0.04%``."""
    number = _as_float(share)
    if number is None or math.isinf(number):
        return missing
    percent = number * 100
    if percent == 0 or abs(percent) >= 10:
        return f"{percent:.0f}%"
    return f"{percent:.{max(0, 1 - _exponent(abs(percent)))}f}%"
