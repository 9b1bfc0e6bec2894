"""The audition's result: every candidate side by side, to keep one as the next stage or none.

Each card shows the candidate's validation metric, its change against the chain as it is,
the spread across folds (k-fold chains), the fit time and its residual histogram on the
edges every candidate shares. The best candidate and the one-standard-error pick (the first
candidate within one standard error of the best; Breiman et al. 1984, Hastie, Tibshirani &
Friedman 2009, section 7.10) are marked. Dismisses with the index of the candidate to keep,
or None.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Static

from ..format import number
from ..widgets.candidate_card import BEST, PICK, CandidateCard
from ..widgets.candidate_histogram import fold_tails

if TYPE_CHECKING:
    pass

#: cards per row at each width class of the screen
COLUMNS = {"-narrow": 2, "-normal": 3, "-wide": 5}


def pick_note(kfold: bool) -> str:
    """Return what the one-standard-error mark means for this chain."""
    if kfold:
        return "◆ the first candidate within one fold s.e. of the best"
    return "◆ = * without folds"


class AuditionResultScreen(Screen[int | None]):
    """Candidates side by side; enter keeps the focused one, escape keeps none."""

    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (70, "-normal"), (150, "-wide")]

    BINDINGS = [
        Binding("enter,k", "keep", "keep", tooltip="keep the focused candidate as the next stage (no refit)"),
        Binding("escape,n", "keep_none", "keep none", tooltip="keep no candidate (the chain stays as it is)"),
        Binding("left", "move(-1)", "previous", show=False),
        Binding("right", "move(1)", "next", show=False),
        Binding("up", "move_row(-1)", "row up", show=False),
        Binding("down", "move_row(1)", "row down", show=False),
    ]

    def __init__(self, candidates: list[Any], choice: int, best: int, *, metric: str, current: float,
                 next_stage: int, kfold: bool, timings: bool = True) -> None:
        super().__init__()
        self.candidates = candidates
        self.choice = choice
        self.best = best
        self.metric = metric
        self.current = current
        self.next_stage = next_stage
        self.kfold = kfold
        self.timings = timings

    def compose(self) -> ComposeResult:
        """Return the title, one card per candidate, the marks' meaning and the footer."""
        n = len(self.candidates)
        yield Static(f"audition · {n} candidates for stage {self.next_stage} · valid {self.metric} now "
                     f"{number(self.current)}", id="title", markup=False)
        fitted = [c for c in self.candidates if c.ok]
        shared: np.ndarray | None = None
        folded: list[dict[str, np.ndarray]] = []
        if fitted:
            folded, shared = fold_tails([c.histogram for c in fitted], fitted[0].edges)
        counts = iter(folded)
        with VerticalScroll(id="cards"):
            for i, candidate in enumerate(self.candidates):
                marks = tuple(m for m, on in ((BEST, i == self.best), (PICK, i == self.choice)) if on)
                yield CandidateCard(i + 1, candidate, self.metric, next(counts) if candidate.ok else {},
                                    shared, marks=marks, timings=self.timings)
        note = f"{pick_note(self.kfold)} · ± change against the chain now · residuals: valid over train"
        yield Static(note, id="audition-note", markup=False)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Focus the one-standard-error pick."""
        self.cards[self.choice].focus()

    @property
    def cards(self) -> list[CandidateCard]:
        """Return the cards, in candidate order."""
        return list(self.query(CandidateCard))

    def focused_index(self) -> int:
        """Return the index of the focused card (the pick when none has focus)."""
        cards = self.cards
        return cards.index(self.focused) if self.focused in cards else self.choice

    def _columns(self) -> int:
        return next((n for name, n in COLUMNS.items() if self.has_class(name)), 3)

    def action_move(self, step: int) -> None:
        """Focus the previous or next card."""
        cards = self.cards
        cards[(self.focused_index() + step) % len(cards)].focus()

    def action_move_row(self, step: int) -> None:
        """Focus the card a row up or down, when there is one."""
        target = self.focused_index() + step * self._columns()
        if 0 <= target < len(self.cards):
            self.cards[target].focus()

    def action_keep(self) -> None:
        """Keep the focused candidate, when it fitted."""
        index = self.focused_index()
        candidate = self.candidates[index]
        if not candidate.ok:
            self.notify(f"candidate {index + 1} failed: there is nothing to keep", severity="warning")
            return
        self.dismiss(index)

    def action_keep_none(self) -> None:
        """Go back to the chain without keeping a candidate."""
        self.dismiss(None)
