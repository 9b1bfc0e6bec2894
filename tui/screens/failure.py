"""A modal with the one-line reason something failed; never a traceback."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Footer, Label


class FailureScreen(ModalScreen[None]):
    """Says what failed and why, in one line, and what state things were left in."""

    BINDINGS = [
        Binding("escape", "close", "close"),
        Binding("enter", "close", "close", show=False),
        Binding("o", "close", "ok", show=False),
    ]

    def __init__(self, title: str, reason: str, note: str = "") -> None:
        super().__init__()
        self.title_text = title
        self.reason = reason
        self.note = note

    def compose(self) -> ComposeResult:
        """Return the title, the reason, the note and an OK button."""
        with Vertical(id="failure", classes="dialog") as box:
            box.border_title = self.title_text
            yield Label(self.reason, id="failure-reason", markup=False)
            if self.note:
                yield Label(self.note, id="failure-note", classes="dim", markup=False)
            yield Button("OK", id="failure-ok", compact=True)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Focus the button, so enter closes the modal."""
        self.query_one("#failure-ok", Button).focus()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Close on OK."""
        event.stop()
        self.dismiss(None)

    def action_close(self) -> None:
        """Close the modal."""
        self.dismiss(None)
