"""Residuals of the selected stage: validation over train as a histogram, or against the fitted values.

Bins come from numpy (through the engine's ``scoring.histogram``), so the plot draws a few
dozen bars whatever the number of rows. The scatter view plots a fixed-size sample. For
binary chains the residuals are y - p, and the second view shows predicted probabilities
by class.
"""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.app import RenderResult
from textual_plotext import PlotextPlot

from stages import scoring

from ..format import number, signed
from ..view import ChainView

#: the most points the residuals-against-fitted view plots
SAMPLE = 2000
#: the share of residuals at each end folded into the end bars of the histogram
TAIL = 0.005
#: up to this many residuals, numpy's "auto" rule picks the number of bins
AUTO_BINS_UP_TO = 100_000
#: the views one key cycles through, per task
MODES = {"regression": ("histogram", "fitted"), "binary": ("histogram", "classes")}


def _nice_ticks(low: float, high: float, count: int) -> list[float]:
    if not np.isfinite(low) or not np.isfinite(high) or high <= low:
        return [float(low)]
    return [float(t) for t in np.linspace(low, high, max(2, count))]


def _stats(values: np.ndarray) -> str:
    """Return ``mean±sd``, the mean shown as 0 when it is below a thousandth of the spread."""
    finite = values[np.isfinite(values)]
    if not finite.size:
        return "-"
    mean, spread = float(finite.mean()), float(finite.std())
    if abs(mean) < 1e-3 * spread:
        mean = 0.0
    return f"{signed(mean, 3)}±{number(spread, 3)}"


def display_range(values: list[np.ndarray], tail: float = TAIL) -> tuple[float, float] | None:
    """Return the range holding all but ``tail`` of the pooled values at each end (None if it is all of them).

    A few extreme residuals would otherwise squeeze the bulk into a bar or two; the
    quantiles come from at most 100,000 evenly spaced values, so this stays fast.
    """
    pooled = np.concatenate([v[np.isfinite(v)] for v in values])
    if pooled.size < 100:
        return None
    step = max(1, pooled.size // 100_000)
    low, high = np.quantile(pooled[::step], [tail, 1.0 - tail])
    if not high > low or (low <= pooled.min() and high >= pooled.max()):
        return None
    return float(low), float(high)


def sample_rows(n: int, size: int = SAMPLE, seed: int = 0) -> np.ndarray:
    """Return at most ``size`` sorted row positions out of ``n``, the same on every call."""
    if n <= size:
        return np.arange(n)
    return np.sort(np.random.RandomState(seed).choice(n, size=size, replace=False))


class ResidualHistogram(PlotextPlot):
    """The residual distribution of one stage, or one of its other views (``mode``)."""

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.view: ChainView | None = None
        self.row = 0
        self.mode = "histogram"
        self.counts: dict[str, np.ndarray] = {}
        self.edges: np.ndarray | None = None
        self._points: tuple[np.ndarray, np.ndarray] | None = None

    def show(self, view: ChainView, row: int) -> None:
        """Draw the residuals of row ``row`` of ``view`` in the current mode."""
        self.view, self.row = view, row
        if self.mode not in MODES[view.task]:
            self.mode = "histogram"
        self._compute()
        self.refresh()

    def next_mode(self) -> str:
        """Switch to the next view for this task and return its name."""
        modes = MODES[self.view.task if self.view else "regression"]
        self.mode = modes[(modes.index(self.mode) + 1) % len(modes)] if self.mode in modes else modes[0]
        if self.view is not None:
            self._compute()
        self.refresh()
        return self.mode

    def _max_bins(self) -> int:
        return int(max(8, min(60, self.size.width - 10)))

    def _compute(self) -> None:
        """Bin (or sample) the selected row's values now, so drawing costs a few dozen points."""
        view, source = self.view, self.view.residuals if self.view else None
        self.counts, self.edges, self._points = {}, None, None
        if view is None or source is None:
            return
        where = "start" if self.row == 0 else f"stage {self.row}"
        if self.mode == "histogram":
            train, valid = source.residuals("train", self.row), source.residuals("valid", self.row)
            shown = display_range([train, valid]) if view.task != "binary" else None
            clipped = [train, valid] if shown is None else [np.clip(v, *shown) for v in (train, valid)]
            # numpy's own bin rule on small parts; on large ones it asks for more bins than
            # fit, so go straight to the most that fit (same result, no quantiles of a million rows)
            bins = "auto" if train.size + valid.size <= AUTO_BINS_UP_TO else self._max_bins()
            counts, self.edges = scoring.histogram(clipped, bins=bins, max_bins=self._max_bins())
            self.counts = dict(zip(("train", "valid"), counts, strict=True))
            word = "pseudo-residuals y-p" if view.task == "binary" else "residuals"
            self.border_title = f"{word} · {where} · █ train • valid"
            if shown is not None and len(self.border_title) + 22 < self.size.width:
                self.border_title += " · 0.5% tails at ends"
            self.border_subtitle = f"mean±sd train {_stats(train)} valid {_stats(valid)}"
        elif self.mode == "fitted":
            fitted, resid = source.fitted("valid", self.row), source.residuals("valid", self.row)
            rows = sample_rows(len(resid))
            self._points = (fitted[rows], resid[rows])
            self.border_title = f"valid residual against fitted · {where}"
            self.border_subtitle = f"{len(rows):,} of {len(resid):,} rows"
        else:
            p, y = source.fitted("valid", self.row), source.targets("valid")
            self.edges = np.linspace(0.0, 1.0, 21)
            negative, positive = (view.classes + ("0", "1"))[:2] if len(view.classes) == 2 else ("0", "1")
            self.counts = {negative: np.histogram(p[y == 0], self.edges)[0],
                           positive: np.histogram(p[y == 1], self.edges)[0]}
            self.border_title = f"valid probability · {where} · █ class {negative} • class {positive}"
            self.border_subtitle = f"rows: {negative} {int((y == 0).sum()):,} · {positive} {int((y == 1).sum()):,}"

    def _draw_bins(self, edges: np.ndarray) -> None:
        plt = self.plt
        centers = (edges[1:] + edges[:-1]) / 2
        (first, under), (second, over) = list(self.counts.items())
        shares = [c / max(1, c.sum()) for c in (under, over)]
        plt.bar(centers.tolist(), shares[0].tolist(), width=1, color="cyan")
        plt.plot(centers.tolist(), shares[1].tolist(), marker="•", color="orange")
        ticks = _nice_ticks(float(edges[0]), float(edges[-1]), max(2, self.size.width // 14))
        plt.xticks(ticks, [number(t, 3) for t in ticks])
        plt.yticks([])
        plt.frame(False)

    def _draw_points(self, points: tuple[np.ndarray, np.ndarray]) -> None:
        plt = self.plt
        fitted, resid = points
        plt.scatter(fitted.tolist(), resid.tolist(), marker="•", color="orange")
        plt.hline(0.0, color="gray")
        low, high = float(np.min(fitted)), float(np.max(fitted))
        ticks = _nice_ticks(low, high, max(2, self.size.width // 14))
        plt.xticks(ticks, [number(t, 3) for t in ticks])
        plt.frame(False)

    def render(self) -> RenderResult:
        """Return the plot, or a short note when there is nothing to draw or no room."""
        if self.size.width < 16 or self.size.height < 5:
            return Text("(too small to draw)", style="dim")
        self.plt.clear_figure()
        if self.counts and self.edges is not None:
            self._draw_bins(self.edges)
        elif self._points is not None and len(self._points[0]):
            self._draw_points(self._points)
        else:
            return Text("no residuals to show", style="dim")
        return super().render()

    def on_resize(self) -> None:
        """Re-bin for the new width: as many bars as there is room for."""
        if self.view is not None and self.mode == "histogram":
            self._compute()
