"""What the residual pane draws, computed from a snapshot in a worker: binned counts and samples of points.

Each function reads a ``ResidualSource`` (immutable arrays), never the live chain, so it can run
while a fit holds the chain. The histogram is binned once, finely (at most ``FINE`` bins, numpy's
own rule on small parts); the pane merges neighbouring bins to its width when it draws, so a
resize costs nothing.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from stages import scoring

from .format import column_text
from .view import ResidualSource

#: the most bins a histogram is binned into; the pane merges them to the width it has
FINE = 120
#: the share of residuals at each end folded into the end bars of the histogram
TAIL = 0.005
#: up to this many residuals, numpy's "auto" rule picks the number of bins
AUTO_BINS_UP_TO = 100_000
#: the most points the residuals-against-fitted view plots
SAMPLE = 2000


@dataclass(frozen=True, eq=False)
class Histogram:
    """Counts per part (or per class) over shared ``edges``; ``folded`` when the ends hold the tails."""

    counts: dict[str, np.ndarray]
    edges: np.ndarray
    folded: bool = False
    stats: dict[str, tuple[float, float]] | None = None

    def merged(self, most: int) -> tuple[dict[str, np.ndarray], np.ndarray]:
        """Return the counts and edges with runs of neighbouring bins summed, at most ``most`` bins."""
        n = len(self.edges) - 1
        size = max(1, math.ceil(n / max(1, most)))
        if size == 1:
            return self.counts, self.edges
        cut = list(range(0, n, size)) + [n]
        edges = self.edges[cut]
        counts = {name: np.add.reduceat(part, cut[:-1]) for name, part in self.counts.items()}
        return counts, edges


@dataclass(frozen=True, eq=False)
class Points:
    """A bounded sample of (x, y) points and how many rows it was drawn from."""

    x: np.ndarray
    y: np.ndarray
    total: int


def display_range(values: list[np.ndarray], tail: float = TAIL) -> tuple[float, float] | None:
    """Return the range holding all but ``tail`` of the pooled values at each end (None if it is all of them).

    A few extreme residuals would otherwise squeeze the bulk into a bar or two; the quantiles
    come from at most 100,000 evenly spaced values, so this stays fast.
    """
    pooled = np.concatenate([v[np.isfinite(v)] for v in values])
    if pooled.size < 100:
        return None
    step = max(1, pooled.size // 100_000)
    low, high = np.quantile(pooled[::step], [tail, 1.0 - tail])
    if not high > low or (low <= pooled.min() and high >= pooled.max()):
        return None
    return float(low), float(high)


def _mean_and_spread(values: np.ndarray) -> tuple[float, float]:
    finite = values[np.isfinite(values)]
    if not finite.size:
        return math.nan, math.nan
    return float(finite.mean()), float(finite.std())


def residual_histogram(source: ResidualSource, row: int, task: str, klass: int | None = None) -> Histogram:
    """Return the train and validation residuals after ``row``, binned on shared edges (tails folded
    into the end bins for regression). For a multiclass chain they are the pseudo-residuals of each
    row's own class, or with ``klass`` those of class ``klass`` (1[y = k] - p_k) on every row."""
    if klass is None:
        train, valid = source.residuals("train", row), source.residuals("valid", row)
    else:
        train, valid = source.class_residuals("train", row, klass), source.class_residuals("valid", row, klass)
    # pseudo-residuals of a classifier lie within [-1, 1]: nothing to fold
    shown = display_range([train, valid]) if task == "regression" else None
    clipped = [train, valid] if shown is None else [np.clip(v, *shown) for v in (train, valid)]
    # numpy's own bin rule on small parts; on large ones it asks for more bins than fit, so go
    # straight to the most there is room for (same result, no quantiles of a million rows)
    bins = "auto" if train.size + valid.size <= AUTO_BINS_UP_TO else FINE
    counts, edges = scoring.histogram(clipped, bins=bins, max_bins=FINE)
    return Histogram(dict(zip(("train", "valid"), counts, strict=True)), edges, folded=shown is not None,
                     stats={"train": _mean_and_spread(train), "valid": _mean_and_spread(valid)})


def sample_rows(n: int, size: int = SAMPLE, seed: int = 0) -> np.ndarray:
    """Return at most ``size`` sorted row positions out of ``n``, the same on every call."""
    if n <= size:
        return np.arange(n)
    # a draw in proportion to the sample: shuffling every row would hold the interpreter at 10M rows
    return np.sort(np.random.default_rng(seed).choice(n, size=size, replace=False, shuffle=False))


def against_fitted(source: ResidualSource, row: int) -> Points:
    """Return a sample of the validation rows' (fitted value, residual) after ``row``."""
    fitted, residual = source.fitted("valid", row), source.residuals("valid", row)
    rows = sample_rows(len(residual))
    return Points(fitted[rows], residual[rows], len(residual))


def by_class(source: ResidualSource, row: int, classes: tuple[str, ...]) -> Histogram:
    """Return the validation rows' predicted probabilities after ``row``, in 20 bins per class."""
    p, y = source.fitted("valid", row), source.targets("valid")
    edges = np.linspace(0.0, 1.0, 21)
    negative, positive = classes[:2] if len(classes) == 2 else ("0", "1")
    return Histogram({negative: np.histogram(p[y == 0], edges)[0], positive: np.histogram(p[y == 1], edges)[0]},
                     edges)


#: the bins of [0, 1] the probability views use
PROBABILITY_BINS = 20


def true_class_histogram(source: ResidualSource, row: int) -> Histogram:
    """Return the predicted probability of each row's own class after ``row``, train and validation
    rows in ``PROBABILITY_BINS`` bins of [0, 1], with each part's mean and spread."""
    train, valid = source.true_probability("train", row), source.true_probability("valid", row)
    edges = np.linspace(0.0, 1.0, PROBABILITY_BINS + 1)
    return Histogram({"train": np.histogram(train, edges)[0], "valid": np.histogram(valid, edges)[0]}, edges,
                     stats={"train": _mean_and_spread(train), "valid": _mean_and_spread(valid)})


def _ticks(plt: Any, axis: str, low: float, high: float, room: int) -> None:
    from .format import nice_ticks, tick_labels

    ticks = nice_ticks(low, high, max(2, room))
    (plt.xticks if axis == "x" else plt.yticks)(ticks, tick_labels(ticks))


@dataclass(frozen=True, eq=False)
class Binned:
    """The residuals of one part in the scan's bins of one feature: mean, and mean ± spread."""

    feature: str
    labels: tuple[str, ...]
    mean: np.ndarray
    spread: np.ndarray
    rows: np.ndarray
    fit_mean: np.ndarray
    scored_rows: int

    @classmethod
    def of(cls, table: Any, numeric: bool) -> Binned:
        """Return the figure of a ``binned_residuals`` table, empty bins left out; numeric bins are
        labelled by the mean feature value of their rows."""
        kept = table[table["rows"] > 0]
        if numeric:
            shown = [v if np.isfinite(v) else np.nan for v in kept["value"].to_numpy(dtype=float)]
            labels = tuple(t if t else "missing" for t in column_text(shown, digits=3, trim=True, missing=""))
        else:
            labels = tuple(str(b) for b in kept["bin"])
        return cls(str(table.attrs.get("feature", "")), labels, kept["mean_residual"].to_numpy(dtype=float),
                   kept["spread"].to_numpy(dtype=float), kept["rows"].to_numpy(dtype=np.int64),
                   kept["fit_mean"].to_numpy(dtype=float), int(kept["rows"].sum()))

    def draw(self, plt: Any, width: int, height: int) -> None:
        """Draw the bins as bars of the mean residual, with the mean ± spread as two dotted lines."""
        if not len(self.labels):
            return
        x = list(range(len(self.labels)))
        plt.bar(x, self.mean.tolist(), width=0.6, color="cyan")
        plt.plot(x, (self.mean + self.spread).tolist(), marker="·", color="orange")
        plt.plot(x, (self.mean - self.spread).tolist(), marker="·", color="orange")
        plt.hline(0.0, color="gray")
        every = max(1, -(-len(x) * 6 // max(6, width - 8)))
        shown = x[::every]
        plt.xticks(shown, [self.labels[i][:6] for i in shown])
        low = float(np.nanmin(self.mean - self.spread))
        high = float(np.nanmax(self.mean + self.spread))
        _ticks(plt, "y", low, high, max(2, height // 3))


@dataclass(frozen=True, eq=False)
class Calibration:
    """Predicted probability against the observed rate, per bin with rows."""

    predicted: np.ndarray
    observed: np.ndarray
    rows: np.ndarray

    @classmethod
    def of(cls, table: Any) -> Calibration:
        """Return the figure of a ``calibration`` table (bins without rows left out)."""
        kept = table[table["rows"] > 0]
        return cls(kept["predicted"].to_numpy(dtype=float), kept["observed"].to_numpy(dtype=float),
                   kept["rows"].to_numpy(dtype=np.int64))

    def draw(self, plt: Any, width: int, height: int) -> None:
        """Draw the observed rate against the predicted probability, and the diagonal of perfect calibration."""
        line = np.linspace(0.0, 1.0, 11)
        plt.plot(line.tolist(), line.tolist(), marker="·", color="gray")
        plt.scatter(self.predicted.tolist(), self.observed.tolist(), marker="●", color="orange")
        plt.xlim(0.0, 1.0)
        plt.ylim(0.0, 1.0)
        _ticks(plt, "x", 0.0, 1.0, max(2, width // 12))
        _ticks(plt, "y", 0.0, 1.0, max(2, height // 3))
