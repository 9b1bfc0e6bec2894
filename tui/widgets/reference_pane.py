"""The reference pane: the chain's best stage beside two reference models fit on the same split.

"linear alone" and "LightGBM, default" (early-stopped on the validation part) tell the user
whether the hand-built chain is competitive. The test column appears only while the test
part is revealed, with the reminder that choices made after seeing it bias it.
"""

from __future__ import annotations

import math
from typing import Any

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.widgets import Static

from stages.metrics import HIGHER_IS_BETTER

from ..format import number
from ..view import ChainView

#: the reference models' names as the pane shows them: (in full, when narrow)
NAMES = {"linear alone": ("linear alone", "linear"), "LightGBM, default parameters": ("LightGBM, default", "LightGBM")}
#: the width of one score column (``format.number`` gives at most 8 characters) and of the names in full
COLUMN, FULL = 9, 18


def _value(record: dict[str, Any], key: str) -> float | None:
    item = record.get(key)
    try:
        return None if item is None or math.isnan(float(item)) else float(item)
    except (TypeError, ValueError):
        return None


def verdict(view: ChainView, references: list[dict[str, Any]]) -> str:
    """Return one line comparing the chain's best validation score with the best reference's."""
    metric = view.metric
    values = [(r["model"], _value(r, f"valid_{metric}")) for r in references]
    scored = [(m, v) for m, v in values if v is not None]
    chain = view.rows[view.best].valid
    if not scored or not math.isfinite(chain):
        return ""
    higher = HIGHER_IS_BETTER.get(metric, False)
    model, best = (max if higher else min)(scored, key=lambda item: item[1])
    name = NAMES.get(model, (model,))[0]
    gap = (best - chain) if higher else (chain - best)
    share = abs(gap) / abs(best) * 100 if best else math.inf
    if share < 0.05:
        return f"the chain's best stage scores as well as {name} on validation"
    if gap > 0:
        return f"{name} is {share:.1f}% better on validation than the chain's best stage"
    return f"the chain's best stage is {share:.1f}% better on validation than {name}"


def reference_text(view: ChainView, references: list[dict[str, Any]], with_test: bool, width: int = 40) -> Text:
    """Return the pane's text in ``width`` cells: a small table (train, valid, test once revealed) and the verdict."""
    metric = view.metric
    test = with_test and view.test_revealed
    parts = ["train", "valid"] + (["test"] if test else [])
    names = max(8, min(FULL, width - COLUMN * len(parts)))
    full = names >= FULL
    text = Text(no_wrap=False)
    text.append(f"{'':<{names}}" + "".join(f"{p:>{COLUMN}}" for p in parts) + "\n", style="bold")
    best = view.rows[view.best]
    chain = f"chain, stage {best.index} *" if full else f"chain {best.index}"
    rows = [(chain, {"train": best.train, "valid": best.valid, "test": best.test})]
    for record in references:
        shown = NAMES.get(record["model"], (record["model"], record["model"]))
        rows.append((shown[0] if full else shown[1], {p: _value(record, f"{p}_{metric}") for p in parts}))
    for i, (name, values) in enumerate(rows):
        text.append(f"{name[:names]:<{names}}", style="bold" if i == 0 else "")
        text.append("".join(f"{number(values.get(p)):>{COLUMN}}" for p in parts) + "\n")
    lightgbm = next((r for r in references if r["model"].startswith("LightGBM")), None)
    if lightgbm is not None and _value(lightgbm, "best_iteration") is not None:
        text.append(f"LightGBM stopped at round {_value(lightgbm, 'best_iteration'):.0f} on the validation part\n",
                    style="dim")
    line = verdict(view, references)
    if line:
        text.append(line + "\n")
    if test:
        text.append(f"test revealed ({view.reveals} time{'s' if view.reveals != 1 else ''} for this chain): "
                    "decisions made after seeing it bias it\n", style="italic")
    elif view.has_test:
        text.append("the test part is locked (r reveals it)\n", style="dim")
    return text


class ReferencePane(VerticalScroll):
    """Shows the reference models' scores beside the chain's best stage; m toggles it with the details."""

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.body = Static(Text("no references yet: m fits them", style="dim"), id="references-body")
        self.references: list[dict[str, Any]] = []
        self.with_test = False
        self.view: ChainView | None = None

    def compose(self) -> ComposeResult:
        """Return the one text block the pane scrolls."""
        yield self.body

    @property
    def fitted(self) -> bool:
        """Return True once the references have been fit."""
        return bool(self.references)

    def take(self, table: Any, with_test: bool) -> None:
        """Keep the references fitted by the worker (a DataFrame, one row per model)."""
        self.references = table.to_dict("records")
        self.with_test = with_test

    def show(self, view: ChainView) -> None:
        """Show the references beside ``view``'s best stage."""
        self.view = view
        self.border_title = f"references · {view.metric}"
        self.border_subtitle = "same split"
        if self.references:
            self.body.update(reference_text(view, self.references, self.with_test, max(20, self.size.width - 3)))

    def on_resize(self) -> None:
        """Lay the table out again for the new width."""
        if self.view is not None:
            self.show(self.view)
