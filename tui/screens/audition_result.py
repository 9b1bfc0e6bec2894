"""The audition's result: every candidate side by side, to keep one as the next stage or none.

Each card shows the candidate's validation metric, its change against the chain as it is,
the spread across folds (k-fold chains), the fit time and its residual histogram on the
edges every candidate shares. The best candidate and the one-standard-error pick (the first
candidate within one standard error of the best; Breiman et al. 1984, Hastie, Tibshirani &
Friedman 2009, section 7.10) are marked. When no candidate improves validation the screen says
so, focus starts on "keep none", and keeping a worse candidate needs a yes. Dismisses with the
index of the candidate to keep, or None.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, VerticalScroll
from textual.screen import Screen
from textual.widgets import Button, Footer, Static

from stages.metrics import HIGHER_IS_BETTER

from ..format import number, pair_text
from ..widgets.candidate_card import BEST, PICK, CandidateCard, shared_texts
from ..widgets.candidate_histogram import fold_tails
from .confirm import ConfirmScreen

if TYPE_CHECKING:
    pass

#: cards per row at each width class of the screen
COLUMNS = {"-narrow": 2, "-normal": 3, "-wide": 5}


def pick_note(kfold: bool) -> str:
    """Return what the marks mean for this chain, in words."""
    best = f"{BEST}: lowest validation score"
    if kfold:
        return f"{best} · {PICK}: the first candidate within one fold standard error of the best"
    return f"{best} · {PICK}: the same as best (no folds, so no standard error to allow)"


def improves(candidate: Any, metric: str) -> bool:
    """Return True when keeping ``candidate`` would make the chain's validation score better."""
    if not candidate.ok or not math.isfinite(candidate.delta):
        return False
    return candidate.delta > 0 if HIGHER_IS_BETTER.get(metric, False) else candidate.delta < 0


class AuditionResultScreen(Screen[int | None]):
    """Candidates side by side; enter keeps the focused one, escape keeps none."""

    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (70, "-normal"), (150, "-wide")]
    VERTICAL_BREAKPOINTS = [(0, "-short"), (30, "-tall")]

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
        texts = shared_texts(self.candidates)
        with VerticalScroll(id="cards"):
            for i, candidate in enumerate(self.candidates):
                marks = tuple(m for m, on in ((BEST, i == self.best), (PICK, i == self.choice)) if on)
                yield CandidateCard(i + 1, candidate, self.metric, next(counts) if candidate.ok else {},
                                    shared, marks=marks, timings=self.timings, texts=texts[i])
        if not self.any_better:
            yield Static(f"none of the {n} candidates improves validation ({self.metric} now "
                         f"{number(self.current)}): keeping one would make the chain worse; keep none (esc)",
                         id="audition-warning", markup=False)
        with Horizontal(id="audition-buttons"):
            yield Static(f"{pick_note(self.kfold)} · the signed number: change against the chain now · "
                         "residuals: valid over train", id="audition-note", markup=False)
            yield Button("keep none (esc)", id="keep-none", compact=True)
        yield Footer(compact=True, show_command_palette=False)

    @property
    def any_better(self) -> bool:
        """Return True when at least one candidate improves validation."""
        return any(improves(c, self.metric) for c in self.candidates)

    def on_mount(self) -> None:
        """Focus the one-standard-error pick, or "keep none" when no candidate improves validation."""
        if self.any_better:
            self.cards[self.choice].focus()
        else:
            self.query_one("#keep-none", Button).focus()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Keep none."""
        event.stop()
        self.dismiss(None)

    @property
    def cards(self) -> list[CandidateCard]:
        """Return the cards, in candidate order."""
        return list(self.query(CandidateCard))

    def focused_index(self) -> int | None:
        """Return the index of the focused card (the pick when no card has focus and "keep none" has not)."""
        cards = self.cards
        if self.focused in cards:
            return cards.index(self.focused)
        return None if isinstance(self.focused, Button) else self.choice

    def _columns(self) -> int:
        return next((n for name, n in COLUMNS.items() if self.has_class(name)), 3)

    def action_move(self, step: int) -> None:
        """Focus the previous or next card."""
        cards = self.cards
        at = self.focused_index()
        target = (0 if step > 0 else len(cards) - 1) if at is None else (at + step) % len(cards)
        cards[target].focus()

    def action_move_row(self, step: int) -> None:
        """Focus the card a row up or down, when there is one."""
        at = self.focused_index()
        target = (0 if at is None else at + step * self._columns())
        if 0 <= target < len(self.cards):
            self.cards[target].focus()

    def action_keep(self) -> None:
        """Keep the focused candidate, when it fitted; ask first when it makes validation worse."""
        index = self.focused_index()
        if index is None:
            self.dismiss(None)
            return
        candidate = self.candidates[index]
        if not candidate.ok:
            self.notify(f"candidate {index + 1} failed: there is nothing to keep", severity="warning")
            return
        if improves(candidate, self.metric):
            self.dismiss(index)
            return
        now, then = pair_text(self.current, candidate.valid)
        question = f"Keep candidate {index + 1}? It makes validation worse: {self.metric} {now} → {then}."

        def answered(yes: bool | None) -> None:
            if yes:
                self.dismiss(index)

        self.app.push_screen(ConfirmScreen("keep a worse candidate", question, "n keeps looking", yes="keep"),
                             answered)

    def action_keep_none(self) -> None:
        """Go back to the chain without keeping a candidate."""
        self.dismiss(None)
