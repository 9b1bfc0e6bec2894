"""Read-only inspection of a saved chain file: its table, error curve and stage details, from stored scores."""

from __future__ import annotations

from typing import TYPE_CHECKING

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Container
from textual.screen import Screen
from textual.widgets import Footer, Static

from ..caution import CAUTION_LINE
from ..view import ChainView
from ..widgets.chain_table import ChainTable
from ..widgets.error_curve import ErrorCurve
from ..widgets.stage_details import StageDetails
from .panes import title_line

if TYPE_CHECKING:
    from stages import FittedChain

NOTE = ("read-only: the scores are the ones stored in the file. Residuals need the data: open the "
        "data file to build on this chain.")


class InspectScreen(Screen):
    """A chain file's stages and scores; nothing here changes the file."""

    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (70, "-normal"), (150, "-wide")]

    BINDINGS = [Binding("escape,b", "close", "back", tooltip="close the chain file (back to the workbench)")]

    def __init__(self, view: ChainView, *, timings: bool = True, alone: bool = False,
                 fitted: FittedChain | None = None) -> None:
        super().__init__()
        self.view = view
        self.fitted = fitted
        self.timings = timings
        self.alone = alone

    def compose(self) -> ComposeResult:
        """Return the title, the panes, the read-only note and the footer."""
        yield Static(f"{title_line(self.view)}", id="title", markup=False)
        with Container(id="panes"):
            yield ChainTable(timings=self.timings, id="chain", classes="pane")
            yield ErrorCurve(id="curve", classes="pane")
            note = Static(NOTE, id="stored", classes="pane", markup=False)
            note.border_title = "residuals"
            yield note
            yield StageDetails(timings=self.timings, id="details", classes="pane")
        data = self.view.extra.get("data")
        where = f" · fit on {data}" if data else ""
        yield Static(f"read-only chain file{where} · {CAUTION_LINE}", id="caution", markup=False)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Show the stored chain, its last stage selected."""
        self.query_one(StageDetails).chain = self.fitted
        table = self.query_one(ChainTable)
        table.show(self.view, self.view.n_stages)
        table.focus()
        self._show_selection()

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Offer "back" only when there is a screen to go back to."""
        if action == "close":
            return not self.alone
        return True

    def _show_selection(self) -> None:
        row = self.query_one(ChainTable).selected
        self.query_one(ErrorCurve).show(self.view, row)
        self.query_one(StageDetails).show(self.view, row)

    def on_chain_table_stage_selected(self, event: ChainTable.StageSelected) -> None:
        """Show the selected stage."""
        self._show_selection()

    def action_close(self) -> None:
        """Go back to the screen that opened the file."""
        if not self.alone:
            self.app.pop_screen()
