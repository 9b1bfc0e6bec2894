"""Why a key of the main screen cannot act now, in one line for the status line.

A key that cannot act is hidden from the footer (``check_action``); pressing it still says why,
through a hidden binding on the same key (``why``), which the help leaves out.
"""

from __future__ import annotations

from typing import Any

#: key -> the action it does, for the hidden bindings that explain a key that cannot act
EXPLAINED = {"a": "add_stage", "b": "step_back", "d": "drop_stage", "t": "trim", "u": "undo", "n": "audition",
             "g": "grow", "r": "reveal_test", "s": "save_chain", "e": "export_recipe", "o": "open_chain",
             "v": "switch_view", "m": "references", "p": "next_pane", "z": "zoom", "c": "cancel_fit",
             "k": "next_class"}


def why_not(action: str, screen: Any) -> str:
    """Return why ``action`` cannot act on ``screen`` now (the workbench), in one line."""
    app, view = screen.app, screen.view
    if action == "cancel_fit":
        return "nothing is running to cancel" if not app.fitting else "this job cannot be cancelled: it is quick"
    if app.fitting and action not in ("switch_view", "next_pane", "zoom", "next_class"):
        return f"{app.job_label} is running: wait for it, or cancel it (c)"
    if view is None or screen.chain is None:
        return "the chain is not ready yet"
    reasons = {
        "step_back": lambda: "nothing to step back: the chain has no stages yet (a adds one)",
        "drop_stage": lambda: ("row 0 is the start value, which cannot be dropped: select a stage (up/down)"
                               if view.n_stages else "nothing to drop: the chain has no stages yet (a adds one)"),
        "trim": lambda: (f"nothing to trim: the last stage ({view.n_stages}) has the best validation score"
                         if view.n_stages else "nothing to trim: the chain has no stages yet"),
        "undo": lambda: "nothing to undo: undo brings back what step back, drop and trim removed",
        "reveal_test": lambda: ("the test part is already revealed; any change to the chain locks it again"
                                if view.test_revealed else
                                "this chain has no locked test part (set 'locked test' on the setup screen)"),
        "switch_view": lambda: "no residuals to view here",
        "next_pane": lambda: "every pane is on screen already (p cycles them in a small terminal)",
        "zoom": lambda: "the error curve is not on screen (p shows it)" if not screen.curve_shown()
        else "nothing to zoom onto yet: the chain needs a few stages",
        "references": lambda: "the references can be fitted once the fit is done",
        "next_class": lambda: (f"k picks the class of a multiclass chain's residuals; this chain is {view.task}"
                               if view.task != "multiclass" else "no residuals to view here"),
    }
    return reasons.get(action, lambda: "not now")()
