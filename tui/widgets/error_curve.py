"""The error curve: train and validation metric over the stages, with the selected stage marked.

After many stages the first drops flatten the rest of the curve: ``z`` zooms onto the last
stages (the last half, at least ``ZOOM_MIN`` of them), scaling the axis to them alone. The
border says the best stage's validation value either way, and a dotted line marks it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import cast

from rich.text import Text
from textual.app import RenderResult
from textual_plotext import PlotextPlot

from ..format import nice_ticks, number, tick_labels
from ..view import ChainView

#: markers and colours per part; the markers tell the lines apart without colour
LINES = {"train": ("braille", "cyan"), "valid": ("•", "orange"), "test": ("x", "magenta")}
#: how each line looks, for the legend on the pane's border
LEGEND = {"train": "⠒⠒ train", "valid": "•• valid", "test": "xx test"}
#: a zoomed curve shows at least this many of the last rows
ZOOM_MIN = 5


def _finite(xs: list[int], ys: Sequence[float | None]) -> tuple[list[int], list[float]]:
    pairs = [(x, y) for x, y in zip(xs, ys, strict=True) if y is not None and math.isfinite(y)]
    return [p[0] for p in pairs], [p[1] for p in pairs]


def _ticks(first: int, last: int, width: int) -> list[int]:
    """Return at most about one stage tick per 6 columns, always the first and the last stage."""
    room = max(2, width // 6)
    step = max(1, math.ceil((last - first) / room))
    ticks = list(range(first, last + 1, step))
    if ticks[-1] != last:
        ticks.append(last)
    return ticks


def zoom_start(n_rows: int) -> int:
    """Return the first row a zoomed curve shows: the last half of the rows, at least ZOOM_MIN of them."""
    return max(0, min(n_rows - ZOOM_MIN, n_rows // 2))


class ErrorCurve(PlotextPlot):
    """Train and validation metric against the stage number (row 0 is the start value)."""

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.view: ChainView | None = None
        self.selected = 0
        self.zoomed = False

    def show(self, view: ChainView, selected: int) -> None:
        """Draw the curve of ``view`` with row ``selected`` marked."""
        self.view, self.selected = view, selected
        best = view.rows[view.best]
        zoom = f" · stages {zoom_start(len(view.rows))}-{view.n_stages} (z: all)" if self.zoomed else ""
        self.border_title = f"error curve · {view.metric}{zoom}"
        parts = ["train", "valid"] + (["test"] if view.test_revealed else [])
        self.border_subtitle = f"best {number(best.valid)} at {best.index} ···  " + "  ".join(LEGEND[p] for p in parts)
        self.refresh()

    def toggle_zoom(self) -> bool:
        """Zoom onto the last stages, or show every stage again; return True when zoomed."""
        self.zoomed = not self.zoomed
        if self.view is not None:
            self.show(self.view, self.selected)
        return self.zoomed

    def _draw(self) -> bool:
        plt = self.plt
        plt.clear_figure()
        view = self.view
        if view is None:
            return False
        first = zoom_start(len(view.rows)) if self.zoomed else 0
        rows = view.rows[first:]
        xs = [r.index for r in rows]
        parts: dict[str, list[float | None]] = {"train": [r.train for r in rows], "valid": [r.valid for r in rows]}
        if view.test_revealed:
            parts["test"] = [r.test for r in rows]
        drawn, values = False, list[float]()
        for part, ys in parts.items():
            x, y = _finite(xs, ys)
            if y:
                marker, color = LINES[part]
                plt.plot(x, y, marker=marker, color=color)
                drawn, values = True, values + y
        if not drawn:
            return False
        plt.frame(False)
        best = view.rows[view.best].valid
        if math.isfinite(best) and len(xs) > 1:
            plt.hline(best, color="gray")
        if len(xs) > 1 and xs[0] <= self.selected <= xs[-1]:
            plt.vline(self.selected, color="gray")
        plt.xticks(cast(list[float], _ticks(xs[0], xs[-1], self.size.width)))  # whole numbers, shown as such
        ticks = nice_ticks(min(values), max(values), max(2, self.size.height // 3))
        plt.yticks(ticks, tick_labels(ticks))
        return True

    def render(self) -> RenderResult:
        """Return the plot, or a short note when there is nothing to draw or no room."""
        if self.size.width < 16 or self.size.height < 5:
            return Text("(too small to draw)", style="dim")
        if not self._draw():
            return Text("no scores yet", style="dim")
        return super().render()
