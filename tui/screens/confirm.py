"""A yes-or-no question in a modal: y or enter says yes, n or escape says no."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Footer, Label


class ConfirmScreen(ModalScreen[bool]):
    """Asks ``question``; dismisses with True for yes, False for no."""

    BINDINGS = [
        Binding("y", "answer(True)", "yes"),
        Binding("n", "answer(False)", "no"),
        Binding("escape", "answer(False)", "no", show=False),
    ]

    def __init__(self, title: str, question: str, detail: str = "", yes: str = "yes") -> None:
        super().__init__()
        self.title_text = title
        self.question = question
        self.detail = detail
        self.yes = yes

    def compose(self) -> ComposeResult:
        """Return the question, the detail and the two buttons."""
        with Vertical(id="confirm", classes="dialog") as box:
            box.border_title = self.title_text
            yield Label(self.question, id="confirm-question", markup=False)
            if self.detail:
                yield Label(self.detail, id="confirm-detail", classes="dim", markup=False)
            with Horizontal(classes="buttons"):
                yield Button(f"{self.yes} (y)", id="confirm-yes", variant="primary", compact=True)
                yield Button("no (n)", id="confirm-no", compact=True)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Focus yes, so enter confirms."""
        self.query_one("#confirm-yes", Button).focus()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Answer with the button pressed."""
        event.stop()
        self.dismiss(event.button.id == "confirm-yes")

    def action_answer(self, yes: bool) -> None:
        """Answer yes or no."""
        self.dismiss(yes)
