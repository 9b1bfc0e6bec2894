"""One auditioned candidate as a card: its spec, scores, change against the chain, and its residuals."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.widgets import Static

from ..format import column_text, seconds, spec_text
from .candidate_histogram import CandidateHistogram

if TYPE_CHECKING:
    from stages.decide.audition import Candidate

#: the marks of the best candidate and of the one-standard-error pick, as the border says them
BEST, PICK = "* best", "◆ 1-SE pick"


def shared_texts(candidates: list[Candidate]) -> list[dict[str, str]]:
    """Return each candidate's numbers as text, each kind of number in one style across the cards
    (so the change of one card reads against the next): valid, delta, spread and train."""
    columns = {
        "valid": column_text([c.valid if c.ok else None for c in candidates]),
        "delta": column_text([c.delta if c.ok else None for c in candidates], signed=True),
        "spread": column_text([c.spread if c.ok and c.fold_scores else None for c in candidates], digits=3),
        "train": column_text([c.train if c.ok else None for c in candidates]),
    }
    return [{name: values[i] for name, values in columns.items()} for i in range(len(candidates))]


def scores_text(candidate: Candidate, timings: bool, texts: dict[str, str] | None = None) -> Text:
    """Return the card's lines: params; validation metric and its change; fold spread, fit time, train."""
    texts = texts or shared_texts([candidate])[0]
    text = Text(no_wrap=True, overflow="ellipsis")
    text.append(spec_text(candidate.spec) + "\n", style="dim")
    if not candidate.ok:
        text.append("failed: ", style="bold")
        text.append(str(candidate.error))
        return text
    text.append("valid ", style="bold")
    text.append(texts["valid"], style="bold")
    text.append(f"  {texts['delta']}\n")
    more = []
    if candidate.fold_scores and math.isfinite(candidate.spread):
        more.append(f"±{texts['spread']}")
    if timings:
        more.append(seconds(candidate.seconds))
    more.append(f"train {texts['train']}")
    text.append(" · ".join(more), style="dim")
    return text


class CandidateCard(Vertical, can_focus=True):
    """A focusable card for candidate ``number``; ``marks`` are BEST and PICK where they apply."""

    def __init__(self, number: int, candidate: Candidate, metric: str, counts: dict[str, np.ndarray],
                 edges: np.ndarray | None,
                 *, marks: tuple[str, ...] = (), timings: bool = True, texts: dict[str, str] | None = None) -> None:
        super().__init__(classes="candidate")
        self.texts = texts
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
        yield Static(scores_text(self.candidate, self.timings, self.texts), classes="candidate-scores")
        if self.candidate.ok and self.edges is not None:  # a fitted candidate has its edges
            yield CandidateHistogram(self.counts, self.edges, classes="candidate-histogram")
