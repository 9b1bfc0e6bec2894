"""Numbers and values as short text for narrow panes."""

from __future__ import annotations

import math
from typing import Any

#: one-eighth steps of a block, for bars drawn in text
_EIGHTHS = " ▏▎▍▌▋▊▉"


def number(value: float | None, digits: int = 4) -> str:
    """Return ``value`` with about ``digits`` significant digits in at most 8 characters; "-" when missing."""
    if value is None or not math.isfinite(value):
        return "-"
    size = abs(value)
    if size >= 1e6 or (0 < size < 1e-3):
        return f"{value:.2e}"
    if size >= 1000:
        return f"{value:,.0f}"
    return f"{value:.{digits}g}" if size >= 1 else f"{value:.{digits - 1}f}"


def signed(value: float | None, digits: int = 4) -> str:
    """Return ``value`` as ``number`` does, with a + on positive values."""
    text = number(value, digits)
    if value is not None and math.isfinite(value) and value > 0:
        return "+" + text
    return text


def seconds(value: float) -> str:
    """Return a duration such as ``0.42 s``, ``12.3 s`` or ``2 min 05 s``."""
    if value < 10:
        return f"{value:.2f} s"
    if value < 60:
        return f"{value:.1f} s"
    minutes, rest = divmod(int(round(value)), 60)
    return f"{minutes} min {rest:02d} s"


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
