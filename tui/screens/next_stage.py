"""The main screen's actions that decide the next stage: audition, grow, references and the reveal.

A mixin of ``WorkbenchScreen`` (which declares the keys): each action opens its form, starts
its job in the app's fit worker, and the results come back as messages handled here.
"""

from __future__ import annotations

from typing import Any

from textual.widgets import Static

from .. import decision_jobs
from ..messages import AuditionDone, ReferencesFitted, StageGrown
from ..widgets.reference_pane import ReferencePane
from ..widgets.stage_details import StageDetails
from .audition_form import AuditionForm, parse_candidates
from .audition_result import AuditionResultScreen
from .confirm import ConfirmScreen
from .grow_form import GrowForm

REVEAL_NOTE = ("Decisions made after seeing it bias it: use it for the final check only. The reference "
               "models are scored on it too. The reveal is recorded, and any change to the chain locks it again.")


class NextStageActions:
    """Audition, grow, references and reveal for the workbench screen (``self`` is the screen)."""

    audition_text = ""
    grow_last: dict[str, Any] | None = None

    # ----- audition --------------------------------------------------------------------
    def action_audition(self) -> None:
        """Open the audition form; fit what it returns side by side."""
        form = AuditionForm(self.view.task, self.audition_text, self.view.n_stages + 1)

        def written(tables: list | None) -> None:
            self.audition_text = form.text
            if tables:
                _, count = parse_candidates(form.text, self.view.task)
                self._start(decision_jobs.audition(self, self.chain, tables, count))

        self.app.push_screen(form, written)

    def on_audition_done(self, event: AuditionDone) -> None:
        """Show the candidates side by side; keep the one the user picks."""
        self._finish(f"auditioned {len(event.candidates)} candidates: keep one, or none")
        view = self.view
        screen = AuditionResultScreen(event.candidates, event.choice, event.best, metric=view.metric,
                                      current=view.rows[-1].valid, next_stage=view.n_stages + 1,
                                      kfold=view.kfold, timings=self.timings)

        def chosen(index: int | None) -> None:
            if index is None:
                self.query_one("#result", Static).update("kept no candidate: the chain is as it was")
                return
            self._start(decision_jobs.keep(self, self.chain, self.cache, self.view, event.candidates[index],
                                           index + 1))

        self.app.push_screen(screen, chosen)

    # ----- grow ------------------------------------------------------------------------
    def action_grow(self) -> None:
        """Open the grow form; grow what it returns, the table and curve following live."""

        def asked(request: dict | None) -> None:
            if request is None:
                return
            self.grow_last = request
            self._start(decision_jobs.grow(self, self.chain, self.cache, self.view, request["spec"],
                                           request["max_stages"], request["patience"]))

        self.app.push_screen(GrowForm(self.view.task, self.grow_last), asked)

    def on_stage_grown(self, event: StageGrown) -> None:
        """Show the chain as the grow left it so far."""
        self.chain_changed(event.view, "", select=event.view.n_stages)
        self.query_one("#result", Static).update(event.summary)

    # ----- references and the reveal ---------------------------------------------------
    def action_references(self) -> None:
        """Fit the reference models (once), or switch the pane between them and the stage details."""
        pane = self.query_one(ReferencePane)
        if not pane.fitted:
            self._start(decision_jobs.references(self, self.chain))
            return
        self.show_references(not pane.display)

    def show_references(self, shown: bool) -> None:
        """Show the reference pane in place of the stage details, or the details again."""
        pane, details = self.query_one(ReferencePane), self.query_one(StageDetails)
        pane.display, details.display = shown, not shown
        if shown and self.view is not None:
            pane.show(self.view)

    def on_references_fitted(self, event: ReferencesFitted) -> None:
        """Keep the references and show them beside the chain's best stage."""
        pane = self.query_one(ReferencePane)
        pane.take(event.table, event.with_test)
        self.show_references(True)
        if not self.app.fitting:
            self._finish("fitted the reference models on the same split: m switches back to the stage details")

    def action_reveal_test(self) -> None:
        """Ask, then score every row and the reference models on the locked test part."""

        def answered(yes: bool | None) -> None:
            if yes:
                self._start(decision_jobs.reveal(self, self.chain, self.cache))

        question = f"Reveal the locked test part ({self.view.n_test:,} rows)?"
        self.app.push_screen(ConfirmScreen("reveal the test part", question, REVEAL_NOTE, yes="reveal"), answered)
