"""The workbench app: a thin App over the screens, the fit worker and the app-wide keys.

``run`` is what the ``remnant`` command calls: on a data file it opens the setup screen, on a
recipe it fits the recipe and shows the chain growing, on a chain file it shows the file
read-only. Bad input is one ``error:`` line on stderr and exit status 2, before any screen.
When the data file has a saved session, the first screen offers to resume it.
"""

from __future__ import annotations

import difflib
import gc
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

from textual.app import App
from textual.binding import Binding

from stages.errors import DataError, RemnantError

from .background import BackgroundRunner
from .logs import log_to_file, logger, stop_logging
from .screens.add_stage import AddStageScreen
from .screens.audition_form import AuditionForm
from .screens.audition_result import AuditionResultScreen
from .screens.date_parts import DatePartsScreen
from .screens.failure import FailureScreen
from .screens.grow_form import GrowForm
from .screens.help import HelpScreen, describe
from .screens.inspect import InspectScreen
from .screens.resume import ResumeScreen
from .screens.setup import SetupScreen
from .screens.workbench import WorkbenchScreen
from .sessions import ResumeOffer, resume_offer
from .view import ChainView, ImportanceCache, view_of_chain, view_of_fitted
from .widgets.column_roles import ColumnRoles
from .widgets.residual_pane import ResidualPane
from .worker import FitRunner

if TYPE_CHECKING:
    import pandas as pd

    from stages.chain import Chain
    from stages.files.recipe import Recipe
    from stages.predictor import FittedChain

log = logger(__name__)


class RemnantApp(BackgroundRunner, FitRunner, App):
    """The workbench: one chain, its panes, and every action by keyboard.

    Give one of: ``frame`` (the setup screen), ``recipe`` (fit it, then the workbench),
    ``chain`` (the workbench on a live chain) or ``fitted`` (a chain file, read-only).
    ``offer`` is a saved session to offer first (with ``frame`` or ``recipe``). ``timings=False``
    hides elapsed and fit times, for screenshots that must not change; ``sessions=False`` saves
    no session.
    """

    CSS_PATH = "app.tcss"
    #: the log file this run writes (``run`` sets it; an app built for a test or a screenshot has none)
    log_file: Path | None = None
    TITLE = "remnant"
    ENABLE_COMMAND_PALETTE = False
    BINDINGS = [
        Binding("question_mark,f1", "help", "help", tooltip="list every key"),
        # priority: q quits from every screen and dialog, unless a text field takes the letter
        Binding("q", "quit", "quit", priority=True, tooltip="quit (a running fit is cancelled); in a text field, ctrl+q"),
        Binding("ctrl+q", "quit", "quit", show=False, priority=True, tooltip="quit, from anywhere"),
    ]

    def __init__(self, *, frame: pd.DataFrame | None = None, source: str = "data", data_path: str | None = None,
                 target: str | None = None, recipe: Recipe | None = None, recipe_data: str | None = None,
                 chain: Chain | None = None, fitted: FittedChain | None = None, offer: ResumeOffer | None = None,
                 timings: bool = True, sessions: bool = True) -> None:
        super().__init__()
        self.start: dict[str, Any] = {"frame": frame, "source": source, "data_path": data_path, "target": target,
                      "recipe": recipe, "recipe_data": recipe_data, "chain": chain, "fitted": fitted}
        self.offer = offer
        self.timings = timings
        self.sessions = sessions

    def on_mount(self) -> None:
        """Open the first screen for what the app was given."""
        s = self.start
        if s["fitted"] is not None:
            self.push_screen(InspectScreen(view_of_fitted(s["fitted"], s["source"]), timings=self.timings, alone=True,
                                           fitted=s["fitted"]))
        elif s["recipe"] is not None and self.offer is not None:
            self.push_screen(ResumeScreen(self.offer, "fit the recipe afresh"), self._recipe_or_session)
        elif s["recipe"] is not None:
            self._recipe_or_session("fresh")
        elif s["chain"] is not None:
            cache = ImportanceCache()
            self.open_workbench(s["chain"], view_of_chain(s["chain"], cache), cache)
        else:
            setup = SetupScreen(s["frame"], s["source"], s["data_path"], s["target"])
            self.push_screen(setup)
            if self.offer is not None:
                self.push_screen(ResumeScreen(self.offer), setup.resume_answered)
        self.call_after_refresh(self._freeze_heap)

    def _recipe_or_session(self, choice: str | None) -> None:
        resume = self.offer if choice == "resume" else None
        self.push_screen(WorkbenchScreen(recipe=self.start["recipe"], recipe_data=self.start["recipe_data"],
                                         resume=resume, timings=self.timings))

    def _freeze_heap(self) -> None:
        # What is alive once the first screen is up (modules, data, widgets) lives as long as the
        # app. A full garbage collection holds the GIL while it walks every object; during a
        # fit on a busy machine that walk stalled the screen for 100-250 ms. Frozen objects are
        # not walked again.
        gc.collect()
        gc.freeze()

    def open_workbench(self, chain: Chain, view: ChainView, cache: ImportanceCache, summary: str = "",
                       session_error: str = "", ids: Any = None) -> None:
        """Show the workbench over ``chain`` in place of the current screen, ``summary`` in its status line
        (and ``session_error``, why the session was not saved, once it is up); ``ids`` names the rows."""
        self.start["frame"] = None  # the chain holds the data now; the frame read for setup would be a second copy
        screen = WorkbenchScreen(chain, view, cache=cache, summary=summary, session_error=session_error,
                                 timings=self.timings, ids=ids)
        if len(self.screen_stack) > 1:
            self.switch_screen(screen)
        else:
            self.push_screen(screen)

    def show_failure(self, title: str, reason: str, note: str = "") -> None:
        """Show the one-line ``reason`` in a modal."""
        self.push_screen(FailureScreen(title, reason, note))

    def help_sections(self) -> list[tuple[str, list[tuple[str, str]]]]:
        """Return every key of the app, grouped by where it works."""
        return [
            ("main screen", describe(WorkbenchScreen.BINDINGS)),
            ("residual pane (tab to it)", [("up / down", "scan view: move through the ranked features (the "
                                                         "stage's details show the partial dependence on it)"),
                                           *describe(ResidualPane.BINDINGS)]),
            ("setup screen", describe(SetupScreen.BINDINGS + ColumnRoles.BINDINGS)),
            ("date features", [("space", "tick a part"), *describe(DatePartsScreen.BINDINGS)]),
            ("add-stage form", [("enter", "fit the stage (on the kind list too)"),
                                ("down / up", "open the kind list; enter picks a kind and moves on"),
                                *describe(AddStageScreen.BINDINGS)]),
            ("audition form", [("tab", "from the text to the buttons"), *describe(AuditionForm.BINDINGS)]),
            ("audition result", [("arrows / tab", "move between the candidates"),
                                 *describe([b for b in AuditionResultScreen.BINDINGS
                                            if isinstance(b, Binding) and b.show])]),
            ("grow form", [("enter", "grow"), *describe(GrowForm.BINDINGS)]),
            ("saved session offer", describe(ResumeScreen.BINDINGS)),
            ("read-only chain file", describe(InspectScreen.BINDINGS)),
            ("questions", [("y / enter", "yes"), ("n / esc", "no")]),
            ("everywhere", describe(self.BINDINGS)),
        ]

    def on_worker_state_changed(self, event: Any) -> None:
        """Deliver a pane's answer, or a finished job."""
        if not self.answer_finished(event):
            super().on_worker_state_changed(event)

    def action_help(self) -> None:
        """Show every key, and where the log is written."""
        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen(self.help_sections(), self.log_file))

    async def action_quit(self) -> None:
        """Cancel a running fit, then leave."""
        self.cancel_job()
        self.exit()


def _check_target(frame: pd.DataFrame, target: str | None, name: str) -> None:
    if target is None or target in frame.columns:
        return
    close = difflib.get_close_matches(target, [str(c) for c in frame.columns], n=1)
    hint = f" (did you mean {close[0]!r}?)" if close else ""
    raise DataError(f"{name}: target {target!r} is not a column{hint}")


def build_app(data_path: str | None = None, target: str | None = None, recipe_path: str | None = None,
              chain_path: str | None = None, *, timings: bool = True, sessions: bool = True) -> RemnantApp:
    """Return the app for what ``run`` was given; raise RemnantError for input it cannot use.

    With ``sessions`` the app saves the session after every action and offers to resume a
    saved session of the data file.
    """
    from stages.data import read_table, source_name

    if chain_path is not None:
        from stages.files.store import load

        return RemnantApp(fitted=load(chain_path), source=source_name(chain_path), timings=timings)
    if recipe_path is not None:
        from stages.files.recipe import read_recipe

        recipe = read_recipe(recipe_path)
        data = data_path or recipe.data_path
        if data is not None and not Path(data).exists():
            raise DataError(f"{source_name(data)}: no such file (named by {recipe.name})")
        offer = resume_offer(data) if sessions else None
        return RemnantApp(recipe=recipe, recipe_data=data_path, offer=offer, timings=timings, sessions=sessions)
    if data_path is None:
        raise DataError("give a data file, a recipe or a chain file")
    frame = read_table(data_path)
    _check_target(frame, target, source_name(data_path))
    offer = resume_offer(data_path) if sessions else None
    return RemnantApp(frame=frame, source=source_name(data_path), data_path=str(data_path), target=target,
                      offer=offer, timings=timings, sessions=sessions)


def run(data_path: str | None = None, target: str | None = None, recipe_path: str | None = None,
        chain_path: str | None = None) -> int:
    """Open the workbench and return the exit status: 0 done, 2 input it cannot use."""
    try:
        app = build_app(data_path, target, recipe_path, chain_path)
    except RemnantError as err:
        print(f"error: {err}", file=sys.stderr)
        return 2
    handler = log_to_file()
    app.log_file = None if handler is None else Path(handler.baseFilename)
    log.info("workbench started on %s", chain_path or recipe_path or data_path)
    try:
        app.run()
    finally:
        log.info("workbench closed")
        stop_logging(handler)
    return int(app.return_code or 0)
