"""What the workbench's forms share: submit on enter or the run button, cancel on escape, one error line
beside the field it is about."""

from __future__ import annotations

from typing import Any, ClassVar

from textual.binding import Binding
from textual.screen import ModalScreen
from textual.widgets import Button, Input, Label

from stages.errors import RemnantError


class FormError(ValueError):
    """A field of a form holds something that cannot be used; the message says which, and
    ``field``, when given, is the id of the widget that holds it."""

    def __init__(self, message: str, field: str | None = None) -> None:
        super().__init__(message)
        self.field = field


def engine_error(err: RemnantError, fields: dict[str, str], prefix: str = "") -> FormError:
    """Return the FormError for a mistake the engine found: its message, at the form's field for the
    key it names (``fields`` maps the engine's keys to the form's widget ids)."""
    return FormError(prefix + str(err), fields.get(err.key or ""))


class FormScreen(ModalScreen[dict | None]):
    """A modal form: ``request()`` returns what it describes or raises FormError naming the field.

    Subclasses set ``ERROR_ID`` (the Label that shows the one-line reason) and ``SUBMIT_ID``
    (the button that submits); any other button cancels.
    """

    BINDINGS = [Binding("escape", "cancel", "cancel")]
    ERROR_ID: ClassVar[str] = ""
    SUBMIT_ID: ClassVar[str] = ""

    def request(self) -> dict[str, Any]:
        """Return what the form describes; raise FormError naming a field that cannot be used."""
        raise NotImplementedError

    def _submit(self) -> None:
        try:
            request = self.request()
        except FormError as err:
            self.query_one(f"#{self.ERROR_ID}", Label).update(str(err))
            if err.field is not None:
                self.query_one(f"#{err.field}").focus()
            return
        self.dismiss(request)

    def on_input_submitted(self, event: Input.Submitted) -> None:
        """Enter in any field submits the form."""
        event.stop()
        self._submit()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Submit or cancel."""
        event.stop()
        if event.button.id == self.SUBMIT_ID:
            self._submit()
        else:
            self.dismiss(None)

    def action_cancel(self) -> None:
        """Close the form without doing anything."""
        self.dismiss(None)
