"""One auditioned candidate as a card: its spec, scores, change against the chain, and its residuals."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.widgets import Static

from ..format import number, seconds, signed, spec_text
from .candidate_histogram import CandidateHistogram

if TYPE_CHECKING:
    from stages.decide.audition import Candidate

#: the marks of the best candidate and of the one-standard-error pick, as the border says them
BEST, PICK = "* best", "◆ 1-SE pick"


def scores_text(candidate: Candidate, timings: bool) -> Text:
    """Return the card's lines: params; validation metric and its change; fold spread, fit time, train."""
    text = Text(no_wrap=True, overflow="ellipsis")
    text.append(spec_text(candidate.spec) + "\n", style="dim")
    if not candidate.ok:
        text.append("failed: ", style="bold")
        text.append(str(candidate.error))
        return text
    text.append("valid ", style="bold")
    text.append(number(candidate.valid), style="bold")
    text.append(f"  {signed(candidate.delta)}\n")
    more = []
    if candidate.fold_scores and math.isfinite(candidate.spread):
        more.append(f"±{number(candidate.spread, 3)}")
    if timings:
        more.append(seconds(candidate.seconds))
    more.append(f"train {number(candidate.train)}")
    text.append(" · ".join(more), style="dim")
    return text


class CandidateCard(Vertical, can_focus=True):
    """A focusable card for candidate ``number``; ``marks`` are BEST and PICK where they apply."""

    def __init__(self, number: int, candidate: Candidate, metric: str, counts: dict[str, np.ndarray],
                 edges: np.ndarray | None,
                 *, marks: tuple[str, ...] = (), timings: bool = True) -> None:
        super().__init__(classes="candidate")
        self.number = number
        self.candidate = candidate
        self.metric = metric
        self.counts = counts
        self.edges = edges
        self.marks = marks
        self.timings = timings
        spec = candidate.spec
        # the marks on the top border too: a card cut off at the bottom of a small terminal still shows them
        self.border_title = f"{number} · {spec.kind} × {spec.shrinkage:g}" + "".join(f" · {m}" for m in marks)
        self.border_subtitle = " ".join(marks)
        if not candidate.ok:
            self.add_class("-failed")

    def compose(self) -> ComposeResult:
        """Return the scores and, for a candidate that fitted, its residual histogram."""
        yield Static(scores_text(self.candidate, self.timings), classes="candidate-scores")
        if self.candidate.ok and self.edges is not None:  # a fitted candidate has its edges
            yield CandidateHistogram(self.counts, self.edges, classes="candidate-histogram")
