"""The grow form: append stages of one kind until validation stops improving, then trim to the best.

Returns ``spec`` (the stage to grow, read by the engine's stage reader), the form's ``kind``,
``shrinkage`` and ``params``, ``max_stages`` and ``patience`` (None: never stop early), or None
when cancelled.
"""

from __future__ import annotations

from typing import Any

from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.widgets import Button, Footer, Input, Label, Select

from stages.errors import StageSpecError
from stages.kinds import get_kind
from stages.parsing import stage_spec
from stages.schema import Task

from ..format import value
from ..widgets.kind_select import KindSelect, kind_label
from .add_stage import kinds_for, parse_pairs
from .form import FormError, FormScreen, engine_error

#: the grow defaults: a small shrinkage (common practice for boosting) and the engine's stopping rule
DEFAULTS = {"kind": "tree", "shrinkage": 0.1, "max_stages": 100, "patience": 10}
#: the field that holds each key of the grown stages
FIELDS = {"kind": "grow-kind", "shrinkage": "grow-shrinkage", "params": "grow-params"}
EXPLAIN = ("stops once patience stages in a row bring no better validation score, then trims back to "
           "the best (u undoes the trim); cancel keeps what was grown")


class GrowForm(FormScreen):
    """Describe the stages to grow."""

    ERROR_ID = "grow-error"
    SUBMIT_ID = "grow-run"


    def __init__(self, task: Task, last: dict[str, Any] | None = None) -> None:
        super().__init__()
        self.chain_task = task
        self.kinds = [k for k in kinds_for(task) if k != "mean"]
        self.last = {**DEFAULTS, **(last or {})}

    def compose(self) -> ComposeResult:
        """Return the fields and the buttons."""
        last = self.last
        kind = last["kind"] if last["kind"] in self.kinds else self.kinds[0]
        with Vertical(id="grow-form", classes="dialog") as box:
            box.border_title = "grow: stages of one kind"
            with Horizontal(classes="field"):
                yield Label("kind", classes="name")
                yield KindSelect([(kind_label(k, self.chain_task), k) for k in self.kinds], value=kind,
                                 allow_blank=False, id="grow-kind", compact=True)
            with Horizontal(classes="field"):
                yield Label("shrinkage", classes="name")
                yield Input(value(last["shrinkage"]), id="grow-shrinkage", type="number", compact=True)
            with Horizontal(classes="field"):
                yield Label("params", classes="name")
                yield Input(last.get("params_text", ""), placeholder="name=value, name=value", id="grow-params",
                            compact=True)
            yield Label("", id="grow-defaults", classes="dim", markup=False)
            with Horizontal(classes="field"):
                yield Label("max stages", classes="name")
                yield Input(value(last["max_stages"]), id="grow-max", type="integer", compact=True)
                yield Label("patience", classes="name short")
                yield Input(value(last["patience"]), id="grow-patience", compact=True)
            yield Label(EXPLAIN, classes="dim", markup=False)
            yield Label("", id="grow-error", markup=False)
            with Horizontal(classes="buttons"):
                yield Button("grow (enter)", id="grow-run", variant="primary", compact=True)
                yield Button("cancel (esc)", id="grow-cancel", compact=True)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Show the kind's defaults and focus the kind list."""
        self._show_defaults()
        self.query_one("#grow-kind", Select).focus()

    def on_select_changed(self, event: Select.Changed) -> None:
        """Show the new kind's main params at their defaults."""
        self._show_defaults()

    def on_kind_select_submitted(self, event: KindSelect.Submitted) -> None:
        """Enter on the closed kind list grows, as enter in any other field does."""
        event.stop()
        self._submit()

    def _show_defaults(self) -> None:
        kind = str(self.query_one("#grow-kind", Select).value)
        defaults = get_kind(kind).task_defaults(self.chain_task)
        shown = ", ".join(f"{name}={value(defaults.get(name))}" for name in get_kind(kind).main_params)
        self.query_one("#grow-defaults", Label).update(f"defaults: {shown}" if shown else "")

    def _whole(self, field: str, name: str, allow_none: bool = False) -> int | None:
        text = self.query_one(f"#{field}", Input).value.strip()
        if allow_none and text.lower() in ("", "none"):
            return None
        try:
            number = int(text)
        except ValueError:
            none = " or none" if allow_none else ""
            raise FormError(f"{name} must be a whole number{none}, not {text!r}", field) from None
        if number < 1:
            raise FormError(f"{name} must be at least 1, not {number}", field)
        return number

    def request(self) -> dict[str, Any]:
        """Return what to grow (``spec``, read by the engine's stage reader, and the form's values);
        raise FormError naming the field that cannot be used."""
        kind = str(self.query_one("#grow-kind", Select).value)
        text = self.query_one("#grow-shrinkage", Input).value.strip()
        try:
            shrinkage = float(text)
        except ValueError:
            raise FormError(f"shrinkage must be a number, not {text!r}", "grow-shrinkage") from None
        params_text = self.query_one("#grow-params", Input).value
        try:
            params = parse_pairs(params_text)
        except FormError as err:
            raise FormError(str(err), "grow-params") from None
        try:
            spec = stage_spec({"kind": kind, "shrinkage": shrinkage, "params": params}, self.chain_task,
                              where="the grow")
        except StageSpecError as err:
            raise engine_error(err, FIELDS) from None
        return {"spec": spec, "kind": kind, "shrinkage": shrinkage, "params": params, "params_text": params_text,
                "max_stages": self._whole("grow-max", "max stages"),
                "patience": self._whole("grow-patience", "patience", allow_none=True)}
