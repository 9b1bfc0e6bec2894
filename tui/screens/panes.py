"""The main screen's panes: their layout in small terminals, the pane key, the error curve's zoom,
the residual pane's messages, the row ids, and why a key cannot act.

A mixin of ``WorkbenchScreen`` (``self`` is the screen): below ``SMALL_WIDTH`` x ``SMALL_HEIGHT``
the table keeps its key columns on the left and the other panes are shown beside it one at a
time (``p`` cycles them); above it all four panes are on screen.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from textual.widgets import Static

from ..view import ChainView
from ..widgets.error_curve import ErrorCurve
from ..widgets.reference_pane import ReferencePane
from ..widgets.residual_pane import ResidualPane
from ..widgets.stage_details import StageDetails, loss_name
from .reasons import why_not

if TYPE_CHECKING:
    from textual import getters
    from textual.screen import Screen as _Screen

    from stages.chain import Chain

    from ..app import RemnantApp
else:
    _Screen = object  # a mixin at run time; mypy checks it as the screen it is mixed into

#: below this width or height the panes beside the table are shown one at a time (p cycles them)
SMALL_WIDTH, SMALL_HEIGHT = 100, 30
#: the panes p cycles through in a small terminal
SIDE_PANES = ("curve", "residuals", "details")


def title_parts(view: ChainView) -> list[str]:
    """Return the parts of the title line, most important first."""
    return [f"{view.source} → {view.target}", view.task, loss_name(view.loss), view.validation, view.sizes]


def title_line(view: ChainView, width: int | None = None) -> str:
    """Return the one-line summary of a chain's data, loss and validation; within ``width`` cells the
    last parts are left out whole (the start row's details and the title's tooltip show them all)."""
    parts = title_parts(view)
    text = " · ".join(parts)
    while width is not None and len(text) > width - 2 and len(parts) > 1:
        parts = parts[:-1]
        text = " · ".join(parts) + " · …"
    return text


class PaneActions(_Screen):
    """Layout, pane keys and the residual pane's messages for the workbench screen."""

    side = "residuals"
    small = False
    row_ids: Any = None
    if TYPE_CHECKING:  # what the workbench screen provides
        chain: Chain | None
        view: ChainView | None
        app = getters.app(RemnantApp)

        @property
        def selected(self) -> int: ...

    def on_residual_pane_feature_picked(self, event: ResidualPane.FeaturePicked) -> None:
        """Show the partial dependence of the selected stage on the feature highlighted in the scan."""
        details = self.query_one(StageDetails)
        details.feature = event.feature
        if self.view is not None:
            details.show(self.view, self.selected)

    def on_residual_pane_told(self, event: ResidualPane.Told) -> None:
        """Say what the residual pane did."""
        self.query_one("#result", Static).update(event.text)

    def _ids(self) -> Any:
        """Return the frame's id column (read from the data file the first time; in the worker)."""
        view = self.view
        if self.row_ids is None and view is not None and view.id_column and view.data_path:
            from ..answers import read_ids

            self.row_ids = read_ids(view.data_path, view.id_column)
        return self.row_ids

    # ----- layout -----------------------------------------------------------------------
    def on_resize(self) -> None:
        """Show the panes beside the table one at a time when the terminal is small."""
        self._layout()
        if self.view is not None:
            self._title()

    def _title(self) -> None:
        if self.view is None:
            return
        title = self.query_one("#title", Static)
        title.update(title_line(self.view, self.size.width))
        title.tooltip = " · ".join(title_parts(self.view))

    def _layout(self) -> None:
        self.small = self.size.width < SMALL_WIDTH or self.size.height < SMALL_HEIGHT
        self.set_class(self.small, "-small")
        references = self.query_one(ReferencePane).display
        for name in SIDE_PANES:
            pane = self.query_one(f"#{name}")
            shown = not self.small or self.side == name
            if name == "details":
                pane.display = shown and not references
            else:
                pane.display = shown
        if self.small and references and self.side != "details":
            self.query_one(ReferencePane).display = False

    def curve_shown(self) -> bool:
        """Return True when the error curve is on screen."""
        return not self.small or self.side == "curve"

    def action_next_pane(self) -> None:
        """Show the next pane beside the table (small terminals)."""
        self.side = SIDE_PANES[(SIDE_PANES.index(self.side) + 1) % len(SIDE_PANES)]
        self._layout()
        names = {"curve": "the error curve", "residuals": "the residuals", "details": "the stage's details"}
        self.query_one("#result", Static).update(f"beside the table: {names[self.side]} (p shows the next pane)")
        self.refresh_bindings()

    def action_zoom(self) -> None:
        """Zoom the error curve onto the last stages, or show every stage again."""
        curve = self.query_one(ErrorCurve)
        zoomed = curve.toggle_zoom()
        self.query_one("#result", Static).update(
            f"error curve: {'zoomed onto the last stages' if zoomed else 'every stage'} (z switches)")

    def action_why(self, action: str) -> None:
        """Say in the status line why ``action`` cannot act now."""
        self.query_one("#result", Static).display = True
        self.query_one("#result", Static).update(why_not(action, self))
