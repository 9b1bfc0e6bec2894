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

#: what the marks, columns and labels on the screens mean
LEGEND = [
    ("train / valid / test", "the parts of the rows: the stages fit on train; valid scores them; test stays "
                             "locked until revealed"),
    ("change", "the change in the validation metric from the row before"),
    ("*", "chain table: the stage with the best validation score"),
    ("!", "chain table: overfit, the stage lowered train error but raised validation error"),
    ("±", "k-fold chains: the standard error of the validation score across the folds"),
    ("secs", "the time the stage took to fit"),
    ("importance (impurity)", "trees and forests: the fall in squared error at the splits on a feature"),
    ("importance (gain)", "LightGBM: the loss reduction of the splits on a feature (split count: how often)"),
    ("importance (|coefficient|)", "linear kinds and splines: the size of a feature's coefficients, standardised"),
    ("importance (permutation)", "other kinds: the rise in validation loss when a feature's values are shuffled"),
    ("scan: * and ~", "the feature's residual signal (*) or spread (~) stands out of its noise band: mean + 3 sd of "
                      "the same score with the residuals shuffled 20 times"),
    ("scan: %", "the share of the validation residuals' mean square a one-feature binned stage would remove"),
    ("partial dependence", "the stage's contribution averaged over rows with the feature set to each value; "
                           "the range is the 10th to 90th percentile of the rows' own curves"),
    ("coefficients [a, b]", "95% interval of an unpenalised linear or logistic stage, conditional on the stages "
                            "before it"),
]



def key_name(key: str) -> str:
    """Return a binding's key as the help shows it (``question_mark`` as ``?``)."""
    names = {"question_mark": "?", "escape": "esc", "ctrl+q": "ctrl+q"}
    return ", ".join(names.get(k.strip(), k.strip()) for k in key.split(","))


def describe(bindings: list[BindingType]) -> list[tuple[str, str]]:
    """Return (key, description) for each binding, merged when several keys do one thing."""
    merged: dict[str, list[str]] = {}
    for item in bindings:
        if not isinstance(item, Binding) or not (item.tooltip or item.description):
            continue  # a hidden twin that only says why its key cannot act
        text = item.tooltip or item.description
        merged.setdefault(text, []).append(key_name(item.key))
    return [(" / ".join(keys), text) for text, keys in merged.items()]


class HelpScreen(ModalScreen[None]):
    """Lists every key, section by section, and what the marks mean; escape or ? closes it (q quits)."""

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
        for title, keys in [*self.sections, ("moving around", MOVING), ("what the marks and labels mean", LEGEND)]:
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
