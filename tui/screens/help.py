"""The help screen: every key of the workbench, listed from the bindings themselves."""

from __future__ import annotations

from pathlib import Path

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Footer, Static

from ..caution import CAUTION

#: keys the widgets bring with them, described in our words
MOVING = [
    ("up / down", "move through the rows of a table"),
    ("home / end", "first or last row"),
    ("tab / shift+tab", "next or previous pane or field"),
    ("enter", "open a list, press a button, or submit a form"),
]



def key_name(key: str) -> str:
    """Return a binding's key as the help shows it (``question_mark`` as ``?``)."""
    names = {"question_mark": "?", "escape": "esc", "ctrl+q": "ctrl+q"}
    return ", ".join(names.get(k.strip(), k.strip()) for k in key.split(","))


def describe(bindings: list[BindingType]) -> list[tuple[str, str]]:
    """Return (key, description) for each binding, merged when several keys do one thing."""
    merged: dict[str, list[str]] = {}
    for item in bindings:
        if not isinstance(item, Binding):
            continue
        text = item.tooltip or item.description
        merged.setdefault(text, []).append(key_name(item.key))
    return [(" / ".join(keys), text) for text, keys in merged.items()]


class HelpScreen(ModalScreen[None]):
    """Lists every key, section by section; escape, q or ? closes it."""

    BINDINGS = [
        Binding("escape,question_mark", "close", "close"),
    ]

    def __init__(self, sections: list[tuple[str, list[tuple[str, str]]]], log_file: Path | None = None) -> None:
        super().__init__()
        self.sections = sections
        self.log_file = log_file

    def compose(self) -> ComposeResult:
        """Return the scrolling list of keys."""
        text = Text()
        for title, keys in [*self.sections, ("moving around", MOVING)]:
            text.append(f"{title}\n", style="bold underline")
            width = max((len(k) for k, _ in keys), default=0)
            for key, what in keys:
                text.append(f"  {key:<{width}}  ", style="bold")
                text.append(f"{what}\n")
            text.append("\n")
        text.append(CAUTION[0].upper() + CAUTION[1:] + ".", style="italic")
        if self.log_file is not None:
            text.append(f"\n\nlog file (what each action did, and the cause of any failure): {self.log_file}")
        with VerticalScroll(id="help", classes="dialog") as box:
            box.border_title = "keys"
            box.border_subtitle = "esc closes"
            yield Static(text)
        yield Footer(compact=True, show_command_palette=False)

    def action_close(self) -> None:
        """Close the help."""
        self.dismiss(None)
