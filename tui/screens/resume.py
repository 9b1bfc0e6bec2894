"""The resume offer: a saved session exists for the data file just opened; resume it or start fresh.

Dismisses with "resume" (which refits when the data changed) or "fresh". Starting fresh
deletes nothing: the saved session is replaced only once a new chain is started.
"""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Footer, Label

from ..sessions import ResumeOffer, describe_offer, saved_when

FRESH_NOTE = "Starting fresh keeps the saved session until a new chain is started, which replaces it."


class ResumeScreen(ModalScreen[str]):
    """Offers to resume ``offer``; ``fresh`` names what starting fresh does (set up, or fit the recipe)."""

    BINDINGS = [
        Binding("r", "answer('resume')", "resume", tooltip="resume the saved session (refit it when the data changed)"),
        Binding("f", "answer('fresh')", "fresh", tooltip="start fresh (the saved session stays until a new chain starts)"),
        Binding("escape", "answer('fresh')", "fresh", show=False,
                tooltip="start fresh (the saved session stays until a new chain starts)"),
    ]

    def __init__(self, offer: ResumeOffer, fresh: str = "start fresh") -> None:
        super().__init__()
        self.offer = offer
        self.fresh = fresh

    def resume_label(self) -> str:
        """Return the resume button's text: plain, or refitting on the changed data."""
        if self.offer.changed:
            n = len(self.offer.stages)
            return f"resume: refit {n} stage{'s' if n != 1 else ''} (r)"
        return "resume (r)"

    def compose(self) -> ComposeResult:
        """Return what the session holds, what changed, and the choices."""
        offer = self.offer
        with Vertical(id="resume", classes="dialog") as box:
            box.border_title = "a saved session"
            if offer.problem:
                yield Label(f"A session was saved for this data, but it cannot be read: {offer.problem}",
                            id="resume-problem", markup=False)
            else:
                yield Label(f"Saved {saved_when(offer.summary)}.", id="resume-when", markup=False)
                yield Label(describe_offer(offer), id="resume-summary", markup=False)
                if offer.changed:
                    yield Label("The data file changed since:", id="resume-changed", markup=False)
                    yield Label("\n".join(f"· {line}" for line in offer.changes), id="resume-changes",
                                classes="dim", markup=False)
                    yield Label("Resuming refits every stage on the data as it is now; the removals "
                                "are not kept.", classes="dim", markup=False)
            yield Label(FRESH_NOTE, id="resume-note", classes="dim", markup=False)
            with Horizontal(classes="buttons"):
                if not offer.problem:
                    yield Button(self.resume_label(), id="resume-yes", variant="primary", compact=True)
                yield Button(f"{self.fresh} (f)", id="resume-fresh", compact=True)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Focus the first choice, so enter takes it."""
        self.query(Button).first().focus()

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Offer resume only for a session that can be read."""
        if action == "answer" and parameters == ("resume",):
            return not self.offer.problem
        return True

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Answer with the button pressed."""
        event.stop()
        self.dismiss("resume" if event.button.id == "resume-yes" else "fresh")

    def action_answer(self, choice: str) -> None:
        """Resume or start fresh."""
        self.dismiss(choice)
