"""Which parts of a dates column become features: year, month, day of week, hour, day of year.

Dismisses with the ticked parts (an empty tuple: none, the column only orders rows), or None
when cancelled. The choice is recorded in the recipe and the chain file, so ``predict``
derives the same features from the same column.
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Footer, Label, SelectionList

from stages.dates import DATE_PARTS, PART_NAMES, derived_name


class DatePartsScreen(ModalScreen[tuple[str, ...] | None]):
    """Tick the parts of ``column`` that become features."""

    BINDINGS = [
        Binding("enter", "done", "done", priority=True, tooltip="keep the ticked parts as features (space ticks)"),
        Binding("escape", "cancel", "cancel"),
    ]

    def __init__(self, column: str, chosen: tuple[str, ...] = ()) -> None:
        super().__init__()
        self.column = column
        self.chosen = chosen

    def compose(self) -> ComposeResult:
        """Return the list of parts and the buttons."""
        with Vertical(id="date-parts", classes="dialog") as box:
            box.border_title = f"date features of {self.column}"
            yield Label("space ticks a part; each ticked part becomes a numeric feature named "
                        f"{derived_name(self.column, '<part>')}", classes="dim", markup=False)
            yield SelectionList(*[(PART_NAMES[p], p, p in self.chosen) for p in DATE_PARTS], id="parts", compact=True)
            with Horizontal(classes="buttons"):
                yield Button("done (enter)", id="parts-done", variant="primary", compact=True)
                yield Button("cancel (esc)", id="parts-cancel", compact=True)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Put the cursor in the list."""
        self.query_one("#parts", SelectionList).focus()

    def action_done(self) -> None:
        """Dismiss with the ticked parts, in the order the list shows them."""
        ticked = set(self.query_one("#parts", SelectionList).selected)
        self.dismiss(tuple(p for p in DATE_PARTS if p in ticked))

    def action_cancel(self) -> None:
        """Dismiss without a change."""
        self.dismiss(None)

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Done or cancel."""
        event.stop()
        if event.button.id == "parts-done":
            self.action_done()
        else:
            self.dismiss(None)
