"""The progress of the running fit: what it does, a bar, the elapsed time and how to cancel.

A learner that fits in parts (boosting rounds, batches of trees) moves the bar. One that
reports nothing while it fits (k-NN, a spline, most scikit-learn regressors) would leave it
standing at the same place: after ``STALE`` seconds without a move the bar turns indeterminate
(it sweeps instead of standing still), while the elapsed time keeps counting.
"""

from __future__ import annotations

import time

from textual.app import ComposeResult
from textual.containers import Horizontal
from textual.widgets import Label, ProgressBar

from ..format import seconds

#: seconds without progress after which the bar sweeps instead of standing still
STALE = 1.0


class FitProgress(Horizontal):
    """One line shown while a job runs; hidden otherwise."""

    def __init__(self, *, timings: bool = True, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.timings = timings
        self.started = 0.0
        self.label = Label("", id="fit-label")
        self.bar = ProgressBar(total=1.0, show_eta=False, id="fit-bar")
        self.elapsed = Label("", id="fit-elapsed")
        self.hint = Label("", id="fit-hint")
        self.detail = ""
        self.fraction = 0.0
        self.moved = 0.0
        self.clock = time.monotonic

    def compose(self) -> ComposeResult:
        """Return the label, the bar, the elapsed time and the cancel hint."""
        yield self.label
        yield self.bar
        yield self.elapsed
        yield self.hint

    def on_mount(self) -> None:
        """Start the clock that updates the elapsed time while a job runs."""
        self._clock = self.set_interval(0.25, self._tick, pause=True)

    def begin(self, label: str, cancellable: bool) -> None:
        """Show the line for a new job called ``label``."""
        self.started = self.moved = self.clock()
        self.detail = ""
        self.fraction = 0.0
        self.label.update(label)
        self.bar.update(total=1.0, progress=0.0)
        self.hint.update("c cancels" if cancellable else "")
        self.elapsed.update("")
        self.display = True
        self._clock.resume()

    def advance(self, fraction: float, detail: str) -> None:
        """Move the bar to ``fraction`` (0 to 1) and show ``detail``."""
        self.detail = detail
        fraction = min(max(fraction, 0.0), 1.0)
        if fraction != self.fraction or self.bar.total is None:
            self.moved = self.clock()
        self.fraction = fraction
        self.bar.update(total=1.0, progress=fraction)
        self._tick()

    @property
    def sweeping(self) -> bool:
        """Return True while the bar is indeterminate (no progress for STALE seconds)."""
        return self.bar.total is None

    def end(self) -> None:
        """Hide the line."""
        self._clock.pause()
        self.display = False

    def _tick(self) -> None:
        now = self.clock()
        if self.display and self.bar.total is not None and now - self.moved >= STALE:
            self.bar.update(total=None)
        shown = seconds(now - self.started) if self.timings else ""
        detail = self.detail.split(": ")[-1] if self.detail else ""
        self.elapsed.update(" · ".join(part for part in (detail, shown) if part))
