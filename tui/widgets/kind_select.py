"""The kind list of the add-stage and grow forms: kinds named by what they do for the chain's task.

Enter on the closed list fits (as everywhere in the form); down, up or space open it. Picking a
kind from the open list (enter) moves on to the next field, so a second enter fits.
"""

from __future__ import annotations

from textual import on
from textual.binding import Binding
from textual.message import Message
from textual.widgets import Select
from textual.widgets._select import SelectOverlay

#: what each kind does to a regression chain's residuals, to a binary chain's log-odds, and to a
#: multiclass chain's K raw scores (one per class)
DOES = {
    "regression": {
        "mean": "shifts every prediction by one value",
        "linear": "a straight line in every feature",
        "ridge": "a line, its slopes shrunk (alpha)",
        "lasso": "a line that drops weak features",
        "tree": "one tree of steps (exact splits)",
        "hist_tree": "one tree of steps (binned, fast)",
        "forest": "a random forest of trees",
        "extra_trees": "randomised trees, averaged",
        "lightgbm": "a boosted run of many trees",
        "knn": "averages of the nearest rows",
        "spline": "a smooth curve per feature",
    },
    "binary": {
        "logistic": "logistic regression on the log-odds",
        "mean": "shifts every log-odds by one value",
        "linear": "a line fit to the pseudo-residuals",
        "ridge": "a shrunk line on the pseudo-residuals",
        "lasso": "a sparse line on the pseudo-residuals",
        "tree": "one tree, Newton leaves on the log-odds",
        "hist_tree": "one binned tree, Newton leaves",
        "forest": "a forest on the pseudo-residuals",
        "extra_trees": "randomised trees on the pseudo-residuals",
        "lightgbm": "boosted trees on the log loss",
        "knn": "nearest rows' pseudo-residuals",
        "spline": "a smooth curve per feature, on the log-odds",
    },
    "multiclass": {
        "logistic": "multinomial logistic on the K scores",
        "mean": "shifts each class's score by one value",
        "linear": "a line per class, on its pseudo-residuals",
        "ridge": "a shrunk line per class",
        "lasso": "a sparse line per class",
        "tree": "one tree per class, Newton leaves",
        "hist_tree": "one binned tree per class, Newton leaves",
        "forest": "one forest of all K pseudo-residuals",
        "extra_trees": "randomised trees of all K pseudo-residuals",
        "lightgbm": "boosted trees on the multinomial loss",
        "knn": "nearest rows' pseudo-residuals, per class",
        "spline": "a smooth curve per feature and class",
    },
}


def kind_label(kind: str, task: str) -> str:
    """Return how the kind list names ``kind`` for a chain of ``task``: ``tree — one tree of steps``."""
    does = DOES.get(task, {}).get(kind)
    return f"{kind} — {does}" if does else kind


class KindSelect(Select):
    """A Select whose enter submits the form when closed, and moves on after a pick when open."""

    BINDINGS = [
        Binding("enter", "submit", "fit", show=False),
        Binding("down,space,up", "show_overlay", "open the list", show=False),
    ]

    class Submitted(Message):
        """Enter was pressed on the closed list: the form should submit."""

    def action_submit(self) -> None:
        """Ask the form to submit."""
        self.post_message(self.Submitted())

    @on(SelectOverlay.UpdateSelection)
    def _update_selection(self, event: SelectOverlay.UpdateSelection) -> None:
        """Take the picked kind, close the list and move on to the next field."""
        super()._update_selection(event)
        self.call_after_refresh(self.screen.focus_next)
