"""A small residual histogram of one auditioned candidate: validation over train, drawn in text.

Every candidate of an audition is binned on the same edges (the engine's), so the small
histograms can be read side by side. The bins are merged to fit the width, each part is
scaled to shares of its rows, and both parts share one height scale. Drawn with block
characters, so it needs no colour and costs nothing to redraw.
"""

from __future__ import annotations

import math

import numpy as np
from rich.text import Text
from textual.app import RenderResult
from textual.widget import Widget

from ..format import pair_text

#: one-eighth steps of a column, bottom up
_LEVELS = " ▁▂▃▄▅▆▇█"
#: the width of the part names on the left ("valid ")
LABEL = 6
#: the share of the pooled residuals at each end folded into the end bars (as the main pane does)
TAIL = 0.005
#: part -> (label, style); the labels tell the parts apart without colour
PARTS = {"valid": ("valid", "dark_orange"), "train": ("train", "cyan")}


def fold_tails(histograms: list[dict[str, np.ndarray]], edges: np.ndarray,
               tail: float = TAIL) -> tuple[list[dict[str, np.ndarray]], np.ndarray]:
    """Return every histogram and the shared edges with the sparse ends folded into the end bins.

    The cut is the same for every candidate (the pooled shares decide it), so the histograms
    stay comparable; counts are only moved, never dropped.
    """
    if not histograms or len(edges) < 3:
        return histograms, edges
    pooled = np.zeros(len(edges) - 1)
    for counts in histograms:
        for part in counts.values():
            total = part.sum()
            if total:
                pooled += part / total
    if not pooled.sum():
        return histograms, edges
    share = np.cumsum(pooled) / pooled.sum()
    low = int(np.searchsorted(share, tail, side="right"))
    high = int(np.searchsorted(share, 1.0 - tail, side="left")) + 1
    low, high = min(low, len(pooled) - 1), max(high, low + 1)
    if low == 0 and high >= len(pooled):
        return histograms, edges
    folded = []
    for counts in histograms:
        out = {}
        for name, part in counts.items():
            kept = part[low:high].astype(np.int64).copy()
            kept[0] += part[:low].sum()
            kept[-1] += part[high:].sum()
            out[name] = kept
        folded.append(out)
    return folded, edges[low:high + 1]


def merge_bins(counts: np.ndarray, width: int) -> np.ndarray:
    """Return ``counts`` summed in runs of neighbouring bins so that at most ``width`` remain."""
    if width < 1 or len(counts) <= width:
        return counts
    size = math.ceil(len(counts) / width)
    padded = np.concatenate([counts, np.zeros(-len(counts) % size, dtype=counts.dtype)])
    return padded.reshape(-1, size).sum(axis=1)


def bars(shares: np.ndarray, top: float, height: int) -> list[str]:
    """Return ``height`` text rows (top row first) drawing ``shares`` as columns scaled to ``top``."""
    steps = 8 * height
    levels = np.zeros(len(shares), dtype=int) if top <= 0 else np.rint(shares / top * steps).astype(int)
    levels = np.where((shares > 0) & (levels == 0), 1, levels)  # a bin with rows never looks empty
    rows = []
    for r in range(height):
        floor = (height - 1 - r) * 8
        rows.append("".join(_LEVELS[min(8, max(0, level - floor))] for level in levels))
    return rows


class CandidateHistogram(Widget):
    """Validation residuals over train residuals of one candidate, on the audition's shared edges."""

    def __init__(self, counts: dict[str, np.ndarray], edges: np.ndarray, *, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.counts = counts
        self.edges = edges

    def render(self) -> RenderResult:
        """Return the two parts' columns and the range of the residuals below them."""
        if not self.counts or len(self.edges) < 2:
            return Text("no residuals", style="dim")
        width = max(4, self.size.width - LABEL)
        height = max(1, (self.size.height - 1) // 2)
        merged = {name: merge_bins(part, width) for name, part in self.counts.items()}
        shares = {name: part / max(1, part.sum()) for name, part in merged.items()}
        wide = max(1, width // len(next(iter(merged.values()))))  # few bins: draw each wider
        shares = {name: np.repeat(part, wide) for name, part in shares.items()}
        top = max(float(s.max()) for s in shares.values())
        text = Text(no_wrap=True, overflow="crop")
        for name in ("valid", "train"):
            if name not in shares:
                continue
            label, style = PARTS[name]
            for i, row in enumerate(bars(shares[name], top, height)):
                text.append(f"{label if i == height - 1 else '':<{LABEL}}", style="dim")
                text.append(row + "\n", style=style)
        low, high = pair_text(float(self.edges[0]), float(self.edges[-1]), digits=3)
        cells = len(next(iter(shares.values())))
        text.append(" " * LABEL + low + " " * max(1, cells - len(low) - len(high)) + high, style="dim")
        return text
