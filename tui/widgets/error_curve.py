"""The error curve: train and validation metric over the stages, with the selected stage marked."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import cast

from rich.text import Text
from textual.app import RenderResult
from textual_plotext import PlotextPlot

from ..view import ChainView

#: markers and colours per part; the markers tell the lines apart without colour
LINES = {"train": ("braille", "cyan"), "valid": ("•", "orange"), "test": ("x", "magenta")}
#: how each line looks, for the legend on the pane's border
LEGEND = {"train": "⠒⠒ train", "valid": "•• valid", "test": "xx test"}


def _finite(xs: list[int], ys: Sequence[float | None]) -> tuple[list[int], list[float]]:
    pairs = [(x, y) for x, y in zip(xs, ys, strict=True) if y is not None and math.isfinite(y)]
    return [p[0] for p in pairs], [p[1] for p in pairs]


def _ticks(n_rows: int, width: int) -> list[int]:
    """Return at most about one stage tick per 6 columns, always 0 and the last stage."""
    last = n_rows - 1
    room = max(2, width // 6)
    step = max(1, math.ceil(last / room))
    ticks = list(range(0, last + 1, step))
    if ticks[-1] != last:
        ticks.append(last)
    return ticks


class ErrorCurve(PlotextPlot):
    """Train and validation metric against the stage number (row 0 is the start value)."""

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.view: ChainView | None = None
        self.selected = 0

    def show(self, view: ChainView, selected: int) -> None:
        """Draw the curve of ``view`` with row ``selected`` marked."""
        self.view, self.selected = view, selected
        self.border_title = f"error curve · {view.metric}"
        parts = ["train", "valid"] + (["test"] if view.test_revealed else [])
        self.border_subtitle = "  ".join(LEGEND[p] for p in parts)
        self.refresh()

    def _draw(self) -> bool:
        plt = self.plt
        plt.clear_figure()
        view = self.view
        if view is None:
            return False
        xs = [r.index for r in view.rows]
        parts: dict[str, list[float | None]] = {"train": [r.train for r in view.rows],
                                                "valid": [r.valid for r in view.rows]}
        if view.test_revealed:
            parts["test"] = [r.test for r in view.rows]
        drawn = False
        for part, ys in parts.items():
            x, y = _finite(xs, ys)
            if y:
                marker, color = LINES[part]
                plt.plot(x, y, marker=marker, color=color)
                drawn = True
        if not drawn:
            return False
        plt.frame(False)
        if len(xs) > 1:
            plt.vline(self.selected, color="gray")
        plt.xticks(cast(list[float], _ticks(len(xs), self.size.width)))  # whole numbers, shown as such
        return True

    def render(self) -> RenderResult:
        """Return the plot, or a short note when there is nothing to draw or no room."""
        if self.size.width < 16 or self.size.height < 5:
            return Text("(too small to draw)", style="dim")
        if not self._draw():
            return Text("no scores yet", style="dim")
        return super().render()
