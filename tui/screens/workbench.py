"""The main screen: the chain table, the error curve, the residuals and the stage details of one chain.

Widgets show a ``ChainView`` snapshot; every action runs in the app's fit worker and comes
back as a message, after which ``chain_changed`` refreshes everything. The actions that
decide the next stage (audition, grow, references, reveal) are in ``next_stage``.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Container, Vertical
from textual.screen import Screen
from textual.widgets import Footer, Static

from stages.spec import StageSpec

from .. import jobs
from ..caution import CAUTION_LINE
from ..messages import (
    ChainChanged,
    ChainFileOpened,
    ChainReady,
    FileWritten,
    FitFailed,
    FitProgressed,
    FitStarted,
    StageFitted,
)
from ..sessions import ResumeOffer, resume_job
from ..view import ChainView, ImportanceCache, view_of_fitted
from ..widgets.chain_table import ChainTable
from ..widgets.error_curve import ErrorCurve
from ..widgets.fit_progress import FitProgress
from ..widgets.reference_pane import ReferencePane
from ..widgets.residual_pane import ResidualPane
from ..widgets.stage_details import StageDetails
from .add_stage import AddStageScreen
from .confirm import ConfirmScreen
from .next_stage import NextStageActions
from .panes import PaneActions
from .reasons import EXPLAINED
from .save import PathPrompt, default_path

if TYPE_CHECKING:
    from stages.chain import Chain
    from stages.files.recipe import Recipe

    from ..worker import FitJob


#: actions that change the chain or write files: none of them while a job runs
CHANGES = {"add_stage", "step_back", "drop_stage", "trim", "undo", "reveal_test", "save_chain",
           "export_recipe", "open_chain", "audition", "grow"}


class WorkbenchScreen(PaneActions, NextStageActions, Screen):
    """The workbench over one chain (or over a recipe being fit, or a session being resumed)."""

    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (70, "-normal"), (150, "-wide")]
    VERTICAL_BREAKPOINTS = [(0, "-short"), (40, "-tall")]

    BINDINGS = [
        Binding("a", "add_stage", "add", tooltip="add a stage (a form: kind, shrinkage, features, params)"),
        Binding("b", "step_back", "back", show=False, tooltip="step back: remove the last stage (no refit)"),
        Binding("d", "drop_stage", "drop", tooltip="drop the selected stage; the stages after it are refit"),
        Binding("t", "trim", "trim", tooltip="trim to the stage with the best validation score"),
        Binding("u", "undo", "undo", tooltip="undo the last step back, drop or trim"),
        Binding("n", "audition", "audition", tooltip="audition candidate next stages side by side, keep one"),
        Binding("g", "grow", "grow", tooltip="grow stages of one kind until validation stops improving"),
        Binding("m", "references", "refs", tooltip="reference models (linear alone, LightGBM) / stage details"),
        Binding("r", "reveal_test", "reveal", show=False, tooltip="reveal the locked test part (the chain and the references)"),
        Binding("s", "save_chain", "save", show=False, tooltip="save the chain file"),
        Binding("v", "switch_view", "view", show=False,
                tooltip="residual pane: histogram, against fitted (probabilities by class), against a feature "
                        "ranked by the scan, largest residuals, calibration (binary); probability of the true "
                        "class and the confusion matrix (multiclass)"),
        Binding("k", "next_class", "class",
                tooltip="multiclass: the class whose pseudo-residuals the histogram shows (after the last, each "
                        "row's own class again)"),
        Binding("p", "next_pane", "pane", tooltip="small terminal: show the next pane beside the table"),
        Binding("z", "zoom", "zoom", show=False, tooltip="error curve: zoom onto the last stages, or show them all"),
        Binding("e", "export_recipe", "recipe", show=False, tooltip="export the recipe (TOML)"),
        Binding("o", "open_chain", "open", show=False, tooltip="open a saved chain file read-only"),
        Binding("c,escape", "cancel_fit", "cancel", tooltip="cancel the running fit (the chain stays as it was)"),
        # when a key above cannot act, its twin below says why in the status line (help leaves them out)
        *[Binding(key, f"why('{action}')", "", show=False) for key, action in EXPLAINED.items()],
    ]

    def __init__(self, chain: Chain | None = None, view: ChainView | None = None, *, recipe: Recipe | None = None,
                 recipe_data: str | None = None, resume: ResumeOffer | None = None,
                 cache: ImportanceCache | None = None, summary: str = "", session_error: str = "",
                 timings: bool = True, ids: Any = None) -> None:
        super().__init__()
        self.chain = chain
        self.view = view
        self.recipe = recipe
        self.recipe_data = recipe_data
        self.resume = resume
        self.cache = cache or ImportanceCache()
        self.summary = summary
        self.session_error = session_error
        self.timings = timings
        self.last_kind = ""
        #: the pane shown beside the table in a small terminal
        self.side = "residuals"
        #: the frame's id column, indexed by the frame's rows (read from the data file when first needed)
        self.row_ids: Any = ids
        self.small = False
        self._droppable = True

    def compose(self) -> ComposeResult:
        """Return the title, the four panes, the status lines and the footer."""
        yield Static("", id="title", markup=False)
        with Container(id="panes"):
            yield ChainTable(timings=self.timings, id="chain", classes="pane")
            yield ErrorCurve(id="curve", classes="pane")
            yield ResidualPane(id="residuals", classes="pane")
            yield StageDetails(timings=self.timings, id="details", classes="pane")
            yield ReferencePane(id="references", classes="pane")
        with Vertical(id="status"):
            yield Static("", id="result", markup=False)
            yield FitProgress(timings=self.timings, id="progress")
            yield Static(CAUTION_LINE, id="caution", markup=False)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Show the chain, or start resuming the session, or fitting the recipe."""
        self.query_one(FitProgress).display = False
        self.query_one(ReferencePane).display = False
        self.query_one(ResidualPane).ids = self._ids
        self._layout()
        self.query_one(ChainTable).focus()
        if self.view is not None:
            self.chain_changed(self.view, self.summary, select=self.view.n_stages)
        if self.session_error:
            self.app.session_not_saved(self.session_error)
        if self.resume is not None:
            self.query_one("#title", Static).update("resuming the saved session …")
            self.app.start_job(resume_job(self, self.resume, self.cache))
        elif self.recipe is not None:
            self._fit_recipe()

    def _fit_recipe(self) -> None:
        if self.recipe is None:
            return
        self.query_one("#title", Static).update(f"fitting {self.recipe.name} …")
        self.app.start_job(jobs.replay_recipe(self, self.recipe, self.recipe_data, self.cache))

    # ----- the one refresh -------------------------------------------------------------
    @property
    def selected(self) -> int:
        """Return the selected row of the chain table."""
        return self.query_one(ChainTable).selected

    def chain_changed(self, view: ChainView, summary: str, select: int | None = None) -> None:
        """Show ``view`` in every pane; called after every completed action."""
        self.view = view
        self._title()
        for pane in (self.query_one(ResidualPane), self.query_one(StageDetails)):
            pane.chain = self.chain
        self.query_one(ChainTable).show(view, select)
        self._show_selection()
        if summary:
            self.query_one("#result", Static).update(summary)
        elif view.n_stages == 0:
            self.query_one("#result", Static).update("a adds the first stage · n auditions candidates · ? lists every key")
        references = self.query_one(ReferencePane)
        if references.display:
            references.show(view)
        self.refresh_bindings()

    def _show_selection(self) -> None:
        if self.view is None:
            return
        row = self.selected
        self.query_one(ErrorCurve).show(self.view, row)
        self.query_one(ResidualPane).show(self.view, row)
        self.query_one(StageDetails).show(self.view, row)

    def on_chain_table_stage_selected(self, event: ChainTable.StageSelected) -> None:
        """Show the newly selected stage in the other panes (the footer changes only when drop does:
        recomposing it on every move would cost more than the move)."""
        self._show_selection()
        droppable = event.row >= 1
        if droppable != self._droppable:
            self._droppable = droppable
            self.refresh_bindings()

    # ----- messages from the fit worker ------------------------------------------------
    def on_chain_ready(self, event: ChainReady) -> None:
        """Take the chain a recipe job built, or the session resumed."""
        self.chain = event.chain
        if not self.app.fitting:  # a resumed session (a recipe's chain comes while its stages fit)
            self._job_over()
        self.chain_changed(event.view, event.summary, select=event.view.n_stages)
        if event.session_error:
            self.app.session_not_saved(event.session_error)

    def on_stage_fitted(self, event: StageFitted) -> None:
        """Show a stage a longer job fitted."""
        self.chain_changed(event.view, event.summary, select=event.view.n_stages)

    def on_chain_changed(self, event: ChainChanged) -> None:
        """Show the chain after a completed action."""
        self._job_over()
        self.chain_changed(event.view, event.summary, select=event.select)
        if event.session_error:
            self.app.session_not_saved(event.session_error)

    def on_fit_started(self, event: FitStarted) -> None:
        """Show the progress line and hide the actions that must wait."""
        self.query_one("#result").display = False
        self.query_one(FitProgress).begin(event.label, event.cancellable)
        self.refresh_bindings()

    def on_fit_progressed(self, event: FitProgressed) -> None:
        """Move the progress bar."""
        self.query_one(FitProgress).advance(event.fraction, event.detail)

    def on_fit_failed(self, event: FitFailed) -> None:
        """Hide the progress line and say what happened."""
        result = self._job_over()
        if self.chain is None and self.resume is not None and self.recipe is not None:
            self.resume = None  # the session cannot be resumed: fit the recipe as if fresh
            self._fit_recipe()
            return
        note = "the chain is as it was"
        if self.recipe is not None or event.label.startswith("growing"):
            note = "the stages fitted before it are kept"
        if event.cancelled:
            where = event.reason.split(":")[0] if event.reason.startswith("stage ") else ""
            what = f"cancelled during {where}" if where else "cancelled"
        else:
            what = f"failed: {event.reason}"
        result.update(f"{event.label} {what}; {note}")
        self.refresh_bindings()

    def on_file_written(self, event: FileWritten) -> None:
        """Say where the file went."""
        self._finish(f"saved the {event.what} {event.path}")

    def on_chain_file_opened(self, event: ChainFileOpened) -> None:
        """Show a saved chain file read-only."""
        from .inspect import InspectScreen

        self._finish(f"opened {event.path.name} read-only")
        self.app.push_screen(InspectScreen(view_of_fitted(event.fitted, event.path.name), timings=self.timings,
                                          fitted=event.fitted))

    def _finish(self, summary: str) -> None:
        self._job_over().update(summary)
        self.refresh_bindings()

    def _job_over(self) -> Static:
        """Hide the progress line, show the result line again and return it."""
        self.query_one(FitProgress).end()
        result = self.query_one("#result", Static)
        result.display = True
        return result

    def on_screen_resume(self) -> None:
        """Put the result line back after a modal."""
        if not self.app.fitting:
            self.query_one("#result").display = True

    # ----- what can be done now --------------------------------------------------------
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Return whether ``action`` makes sense now; False hides it from the footer (its twin says why)."""
        if action == "cancel_fit":
            return self.app.job_cancellable
        if action == "references":
            return self._references_apply()
        if action == "next_pane":
            return self.small
        if action == "zoom":
            return self.curve_shown() and self.view is not None and self.view.n_stages >= 3
        if action == "next_class":
            return self.view is not None and self.view.task == "multiclass" and self.view.residuals is not None
        if action not in CHANGES and action != "switch_view":
            return True
        if self.app.fitting and action in CHANGES:
            return False
        view = self.view
        if view is None or self.chain is None:
            return action == "open_chain"
        checks = {
            "step_back": view.n_stages > 0,
            "drop_stage": 1 <= self.selected <= view.n_stages,
            "trim": view.best < view.n_stages,
            "undo": view.can_undo,
            "reveal_test": view.has_test and not view.test_revealed,
            "switch_view": view.residuals is not None,
        }
        return checks.get(action, True)

    def _references_apply(self) -> bool:
        """Return whether the reference key works now: to fit them (no job running) or to show them."""
        return self.chain is not None and (self.query_one(ReferencePane).fitted or not self.app.fitting)

    def _start(self, job: FitJob) -> None:
        if not self.app.start_job(job):
            self.notify("a fit is running; wait for it or cancel it (c)", severity="warning")

    # ----- actions ---------------------------------------------------------------------
    def action_add_stage(self) -> None:
        """Open the add-stage form (on the kind last added); fit what it returns."""
        kind = self.last_kind or (self.shown.rows[-1].kind if self.shown.n_stages else None)
        form = AddStageScreen(self.shown.task, self.shown.features, kind)
        self.app.push_screen(form, self._stage_requested)

    def _stage_requested(self, request: dict | None) -> None:
        if request is None:
            return
        spec: StageSpec = request["spec"]
        self.last_kind = spec.kind
        self._start(jobs.add_stages(self, self.live, self.cache, self.shown, spec, request["repeat"]))

    def action_step_back(self) -> None:
        """Remove the last stage (no refit; undo brings it back)."""
        self._start(jobs.quick_change(self, self.live, self.cache, self.shown, "step back"))

    def action_drop_stage(self) -> None:
        """Ask, then drop the selected stage and refit the stages after it."""
        row = self.selected
        later = self.shown.n_stages - row
        detail = (f"The {later} stage{'s' if later != 1 else ''} after it will be refit on the new residuals."
                  if later else "It is the last stage: nothing needs a refit.")
        question = f"Drop stage {row} ({self.shown.rows[row].kind})?"

        def answered(yes: bool | None) -> None:
            if yes:
                self._start(jobs.drop_stage(self, self.live, self.cache, self.shown, row))

        self.app.push_screen(ConfirmScreen("drop a stage", question, detail, yes="drop"), answered)

    def action_trim(self) -> None:
        """Keep the stages up to the best validation score."""
        self._start(jobs.quick_change(self, self.live, self.cache, self.shown, "trim"))

    def action_undo(self) -> None:
        """Undo the last step back, drop or trim."""
        self._start(jobs.quick_change(self, self.live, self.cache, self.shown, "undo"))

    def action_switch_view(self) -> None:
        """Switch the residual pane to its next view (showing the pane in a small terminal)."""
        pane = self.query_one(ResidualPane)
        if self.small and self.side != "residuals":
            self.side = "residuals"
            self._layout()
        mode = pane.next_mode()
        hint = " · tab to the pane, then up/down move through the features, w ranks by spread" if \
            pane.mode == "feature" else ""
        self.query_one("#result", Static).update(f"residual pane: {mode} (v for the next view){hint}")

    def action_next_class(self) -> None:
        """Show the pseudo-residuals of the next class in the residual pane's histogram (multiclass)."""
        pane = self.query_one(ResidualPane)
        if self.small and self.side != "residuals":
            self.side = "residuals"
            self._layout()
        shown = pane.next_class()
        self.query_one("#result", Static).update(f"residual pane: pseudo-residuals of {shown} (k for the next class)")

    def _ask_path(self, title: str, suffix: str, then: Callable[[Path], None], must_exist: bool = False) -> None:
        view = self.view
        default = default_path(view.source if view else "chain", suffix)

        def answered(path: Path | None) -> None:
            if path is not None:
                then(Path(path))

        self.app.push_screen(PathPrompt(title, default, must_exist=must_exist), answered)

    def action_save_chain(self) -> None:
        """Ask where, then write the chain file."""
        self._ask_path("save the chain file", ".chain", lambda p: self._start(jobs.save_chain(self, self.live, p)))

    def action_export_recipe(self) -> None:
        """Ask where, then write the chain's recipe."""
        self._ask_path("export the recipe", ".toml",
                       lambda p: self._start(jobs.export_recipe(self, self.live, p)))

    def action_open_chain(self) -> None:
        """Ask which chain file, then show it read-only."""
        self._ask_path("open a chain file (read-only)", ".chain",
                       lambda p: self._start(jobs.open_chain_file(self, p)), must_exist=True)

    def action_cancel_fit(self) -> None:
        """Ask the running fit to stop; the chain stays as it was."""
        self.app.cancel_job()
        self.query_one(FitProgress).advance(self.query_one(FitProgress).bar.progress or 0.0, "cancelling…")
