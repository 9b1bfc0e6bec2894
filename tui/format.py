"""Values as short text for narrow panes; numbers through the engine's one formatter
(``stages.report.numbers``), so the panes, the table and the command line agree."""

from __future__ import annotations

import math
from typing import Any

from stages.report.numbers import DIGITS, column_text, number_text, pair_text, seconds_text

__all__ = ["bar", "column_text", "nice_ticks", "number", "pair_text", "parse_value", "seconds", "signed", "spec_text",
           "tick_labels", "value"]

#: one-eighth steps of a block, for bars drawn in text
_EIGHTHS = " ▏▎▍▌▋▊▉"


def number(value: float | None, digits: int = DIGITS) -> str:
    """Return one number as the engine's formatter writes it (``digits`` significant); "-" when missing."""
    return number_text(value, digits=digits)


def signed(value: float | None, digits: int = DIGITS) -> str:
    """Return ``value`` as ``number`` does, with a + on positive values."""
    return number_text(value, digits=digits, signed=True)


def seconds(value: float) -> str:
    """Return a duration such as ``0.42 s``, ``12.3 s`` or ``2 min 05 s``."""
    return seconds_text(value)


def value(item: Any) -> str:
    """Return a parameter value as a user would type it in a form or a recipe."""
    if item is None:
        return "none"
    if isinstance(item, bool):
        return "true" if item else "false"
    if isinstance(item, float):
        return f"{item:g}"
    return str(item)


def spec_text(spec: Any) -> str:
    """Return a stage spec's params as short text: ``max_features 0.5, num_leaves 15``."""
    params = ", ".join(f"{name} {value(v)}" for name, v in spec.params.items())
    features = f" · {len(spec.features)} features" if spec.features else ""
    return (params or "default params") + features


def parse_value(text: str) -> Any:
    """Return typed text as a parameter value: true/false, none, a whole number, a number, or text."""
    stripped = text.strip()
    lowered = stripped.lower()
    if lowered in ("true", "false"):
        return lowered == "true"
    if lowered in ("none", "null", ""):
        return None
    for kind in (int, float):
        try:
            return kind(stripped)
        except ValueError:
            pass
    return stripped


def bar(share: float, width: int) -> str:
    """Return a bar of ``share`` (0 to 1) of ``width`` cells, in eighths of a cell."""
    share = min(max(share, 0.0), 1.0)
    eighths = int(round(share * width * 8))
    full, rest = divmod(eighths, 8)
    text = "█" * full + (_EIGHTHS[rest] if rest else "")
    return text.ljust(width)


def nice_ticks(low: float, high: float, count: int) -> list[float]:
    """Return about ``count`` round tick values (steps of 1, 2 or 5 times a power of ten) within [low, high]."""
    if not (math.isfinite(low) and math.isfinite(high)) or high <= low:
        return [float(low)] if math.isfinite(low) else []
    raw = (high - low) / max(1, count - 1)
    power = 10.0 ** math.floor(math.log10(raw))
    # the round step whose number of ticks inside the range is closest to count
    step = min((m * power for m in (0.5, 1, 2, 5, 10)),
               key=lambda s: abs(math.floor(high / s + 1e-9) - math.ceil(low / s - 1e-9) + 1 - count))
    first = math.ceil(low / step - 1e-9)
    ticks = [k * step for k in range(first, math.floor(high / step + 1e-9) + 1)]
    return [0.0 if abs(t) < step * 1e-9 else t for t in ticks] or [float(low), float(high)]


def tick_labels(ticks: list[float]) -> list[str]:
    """Return axis labels for ``ticks``: one style, three significant digits, no trailing zeros."""
    return column_text(ticks, digits=3, trim=True)
