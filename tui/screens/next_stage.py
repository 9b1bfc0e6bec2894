"""The main screen's actions that decide the next stage: audition, grow, references and the reveal.

A mixin of ``WorkbenchScreen`` (which declares the keys): each action opens its form, starts
its job in the app's fit worker, and the results come back as messages handled here.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from textual.widgets import Static

from .. import decision_jobs
from ..messages import AuditionDone, ReferencesFitted, StageGrown
from ..widgets.reference_pane import ReferencePane
from ..widgets.stage_details import StageDetails
from .audition_form import AuditionForm, parse_candidates
from .audition_result import AuditionResultScreen
from .confirm import ConfirmScreen
from .grow_form import GrowForm

if TYPE_CHECKING:
    from textual import getters
    from textual.screen import Screen as _Screen

    from stages.chain import Chain

    from ..app import RemnantApp
    from ..view import ChainView, ImportanceCache
    from ..worker import FitJob
else:
    _Screen = object  # a mixin at run time; mypy checks it as the screen it is mixed into

REVEAL_NOTE = ("Decisions made after seeing it bias it: use it for the final check only. The reference "
               "models are scored on it too. The reveal is recorded, and any change to the chain locks it again.")


class NextStageActions(_Screen):
    """Audition, grow, references and reveal for the workbench screen (``self`` is the screen)."""

    audition_text = ""
    grow_last: dict[str, Any] | None = None
    if TYPE_CHECKING:  # what the workbench screen provides
        chain: Chain | None
        view: ChainView | None
        cache: ImportanceCache
        timings: bool
        app = getters.app(RemnantApp)

        def _start(self, job: FitJob) -> None: ...

        def _finish(self, summary: str) -> None: ...

        def chain_changed(self, view: ChainView, summary: str, select: int | None = None) -> None: ...

    @property
    def shown(self) -> ChainView:
        """Return the view on screen (an action that reads it runs only once the chain is built)."""
        if self.view is None:
            raise RuntimeError("the workbench has no chain on screen yet")
        return self.view

    @property
    def live(self) -> Chain:
        """Return the live chain (an action that changes it runs only once the chain is built)."""
        if self.chain is None:
            raise RuntimeError("the workbench has no chain yet")
        return self.chain

    # ----- audition --------------------------------------------------------------------
    def action_audition(self) -> None:
        """Open the audition form; fit what it returns side by side."""
        form = AuditionForm(self.shown.task, self.audition_text, self.shown.n_stages + 1)

        def written(tables: list | None) -> None:
            self.audition_text = form.text
            if tables:
                _, count = parse_candidates(form.text, self.shown.task)
                self._start(decision_jobs.audition(self, self.live, tables, count))

        self.app.push_screen(form, written)

    def on_audition_done(self, event: AuditionDone) -> None:
        """Show the candidates side by side; keep the one the user picks."""
        self._finish(f"auditioned {len(event.candidates)} candidates: keep one, or none")
        view = self.shown
        screen = AuditionResultScreen(event.candidates, event.choice, event.best, metric=view.metric,
                                      current=view.rows[-1].valid, next_stage=view.n_stages + 1,
                                      kfold=view.kfold, timings=self.timings)

        def chosen(index: int | None) -> None:
            if index is None:
                self.query_one("#result", Static).update("kept no candidate: the chain is as it was")
                return
            self._start(decision_jobs.keep(self, self.live, self.cache, self.shown, event.candidates[index],
                                           index + 1))

        self.app.push_screen(screen, chosen)

    # ----- grow ------------------------------------------------------------------------
    def action_grow(self) -> None:
        """Open the grow form; grow what it returns, the table and curve following live."""

        def asked(request: dict | None) -> None:
            if request is None:
                return
            self.grow_last = request
            self._start(decision_jobs.grow(self, self.live, self.cache, self.shown, request["spec"],
                                           request["max_stages"], request["patience"]))

        self.app.push_screen(GrowForm(self.shown.task, self.grow_last), asked)

    def on_stage_grown(self, event: StageGrown) -> None:
        """Show the chain as the grow left it so far."""
        self.chain_changed(event.view, "", select=event.view.n_stages)
        self.query_one("#result", Static).update(event.summary)

    # ----- references and the reveal ---------------------------------------------------
    def action_references(self) -> None:
        """Fit the reference models (once), or switch the pane between them and the stage details."""
        pane = self.query_one(ReferencePane)
        if not pane.fitted:
            self._start(decision_jobs.references(self, self.live))
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
                self._start(decision_jobs.reveal(self, self.live, self.cache))

        question = f"Reveal the locked test part ({self.shown.n_test:,} rows)?"
        self.app.push_screen(ConfirmScreen("reveal the test part", question, REVEAL_NOTE, yes="reveal"), answered)
