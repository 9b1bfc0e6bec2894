"""The plot of the residual pane: whatever figure the pane hands it, drawn with plotext.

Figures are computed in a worker (``tui.figures``, ``tui.answers``); drawing them costs a few
dozen points. Every axis gets its ticks from the one number formatter, never plotext's own
labels. Lines are told apart by their markers as well as their colours, so the plot reads
under NO_COLOR.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from rich.text import Text
from textual.app import RenderResult
from textual_plotext import PlotextPlot

from ..figures import Histogram, Points
from ..format import nice_ticks, tick_labels


def _axis(plt: Any, axis: str, low: float, high: float, room: int) -> None:
    ticks = nice_ticks(low, high, max(2, room))
    setter = plt.xticks if axis == "x" else plt.yticks
    setter(ticks, tick_labels(ticks))


class ResidualPlot(PlotextPlot):
    """Draws one figure: a histogram of parts or classes, points, binned residuals or calibration."""

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.figure: Any = None
        self.message = "no residuals to show"
        #: the merged counts and edges last drawn (a histogram), for what the pane reports
        self.counts: dict[str, np.ndarray] = {}
        self.edges: np.ndarray | None = None

    def draw(self, figure: Any, message: str = "") -> None:
        """Draw ``figure`` (None: show ``message`` instead)."""
        self.figure, self.message = figure, message or "no residuals to show"
        self._merge()
        self.refresh()

    def most_bins(self) -> int:
        """Return the most histogram bars there is room for."""
        return int(max(8, min(60, self.size.width - 10)))

    def _merge(self) -> None:
        self.counts, self.edges = {}, None
        if isinstance(self.figure, Histogram):
            self.counts, self.edges = self.figure.merged(self.most_bins())

    def on_resize(self) -> None:
        """Merge the fine bins again for the new width (no re-binning)."""
        self._merge()

    def render(self) -> RenderResult:
        """Return the plot, or a short note when there is nothing to draw or no room."""
        if self.size.width < 16 or self.size.height < 5:
            return Text("(too small to draw)", style="dim")
        if self.figure is None:
            return Text(self.message, style="dim")
        self.plt.clear_figure()
        draw = {Histogram: self._bins, Points: self._points}.get(type(self.figure))
        if draw is None:
            draw = getattr(self.figure, "draw", None)
            if draw is None:
                return Text(self.message, style="dim")
            draw(self.plt, self.size.width, self.size.height)
        else:
            draw()
        self.plt.frame(False)
        return super().render()

    def _bins(self) -> None:
        plt, edges = self.plt, self.edges
        assert edges is not None
        centers = (edges[1:] + edges[:-1]) / 2
        (_, under), (_, over) = list(self.counts.items())
        shares = [c / max(1, c.sum()) for c in (under, over)]
        plt.bar(centers.tolist(), shares[0].tolist(), width=1, color="cyan")
        plt.plot(centers.tolist(), shares[1].tolist(), marker="•", color="orange")
        _axis(plt, "x", float(edges[0]), float(edges[-1]), self.size.width // 12)
        plt.yticks([])

    def _points(self) -> None:
        plt, points = self.plt, self.figure
        if not len(points.x):
            return
        plt.scatter(points.x.tolist(), points.y.tolist(), marker="•", color="orange")
        plt.hline(0.0, color="gray")
        _axis(plt, "x", float(np.min(points.x)), float(np.max(points.x)), self.size.width // 12)
        _axis(plt, "y", float(np.min(points.y)), float(np.max(points.y)), self.size.height // 3)
