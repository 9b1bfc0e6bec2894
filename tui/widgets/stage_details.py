"""The selected stage's details: what it is (params, features, time) and what it learned.

What it learned: the importance of each feature, labelled with what it measures; for linear
kinds the coefficients with their 95 % intervals (conditional on the stages before); for a
spline stage its curve per feature; and for any stage the partial dependence of its
contribution on one feature (the one highlighted in the scan, else the stage's most important
one). The learned parts are computed in a worker (``tui.answers``); the pane says so until
they arrive. Drawn as text with block characters, so it reads without colour.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.widgets import Static

from stages.errors import RemnantError
from stages.kinds import get_kind
from stages.schema import Task

from .. import answers
from ..background import Answered
from ..format import bar, column_text, number, seconds, value
from ..view import ChainView, StageInfo

if TYPE_CHECKING:
    from textual import getters

    from ..app import RemnantApp

#: how the start value is chosen, per loss
START_RULE = {
    "squared": "the mean of the train rows",
    "absolute": "the median of the train rows",
    "huber": "the median of the train rows",
    "logloss": "the log-odds of the base rate",
}
#: the most features the importance list shows
TOP = 8
#: what each kind of importance measures, in a few words
MEASURES = {
    "impurity": "the fall in squared error at the splits on the feature",
    "gain": "the loss reduction of the booster's splits on the feature",
    "split count": "how often the booster splits on the feature",
    "|coefficient| standardised": "the size of the feature's coefficients on the standardised scale",
    "|coefficient| of the basis": "the size of the feature's spline coefficients",
    "|coefficient|": "the size of the estimator's coefficients",
    "permutation": "the rise in validation loss when the feature's values are shuffled",
}
#: one-eighth steps of a column, bottom up, for curves drawn in text
SPARKS = "▁▂▃▄▅▆▇█"


def _params(stage: StageInfo, task: Task) -> list[tuple[str, str]]:
    """Return the params worth showing: the user's, then the kind's main ones at their defaults."""
    shown = [(name, value(v)) for name, v in stage.given.items()]
    try:
        kind = get_kind(stage.kind)
        defaults = kind.task_defaults(task)
        main = kind.main_params
    except RemnantError:  # a kind this installation does not know: show what was given
        defaults, main = {}, ()
    shown += [(name, value(defaults.get(name))) for name in main if name not in stage.given]
    return shown


def _name(name: str, width: int) -> str:
    """Return a feature name in ``width`` cells, with an ellipsis when it is longer."""
    return name if len(name) <= width else name[: width - 1] + "…"


def _importance(text: Text, stage: StageInfo, width: int) -> None:
    importance = stage.importance
    label = f"importance ({stage.importance_type})" if stage.importance_type else "importance"
    if importance is None:
        text.append(f"{label}  not stored for this kind\n", style="dim")
        return
    ranked = sorted(importance.items(), key=lambda item: -item[1])[:TOP]
    if not ranked or ranked[0][1] <= 0:
        text.append(f"{label}  none (the stage uses no feature)\n", style="dim")
        return
    name_width = min(18, max(len(name) for name, _ in ranked))
    bar_width = min(30, max(4, width - name_width - 6))
    text.append(f"{label}\n", style="bold")
    for name, share in ranked:
        text.append(f"{_name(name, name_width):<{name_width}} ")
        text.append(bar(share / ranked[0][1], bar_width), style="cyan")
        text.append(f"{share * 100:4.0f}%\n")
    hidden = len(importance) - len(ranked)
    if hidden > 0:
        text.append(f"… {hidden} more\n", style="dim")


def loss_name(loss: str) -> str:
    """Return a loss as the screen names it: ``squared loss``, ``logloss``."""
    return loss if loss.endswith("loss") else f"{loss} loss"


def start_text(view: ChainView) -> Text:
    """Return the details of row 0: the start value and the chain's settings."""
    text = Text()
    text.append("start value ", style="bold")
    text.append(f"{number(view.start_value)}\n")
    text.append(f"{START_RULE.get(view.loss, 'the best constant')} ({loss_name(view.loss)})\n", style="dim")
    text.append(f"{view.source} → {view.target} ({view.task})\n")
    text.append(f"{view.validation}\n{view.sizes}\n")
    text.append(f"{len(view.features)} features\n")
    if view.id_column:
        text.append(f"rows named by {view.id_column!r}\n")
    for note in view.notes:
        text.append(f"· {note}\n", style="dim")
    return text


def stage_text(view: ChainView, stage: StageInfo, width: int, timings: bool) -> Text:
    """Return what the stage is: kind, shrinkage, params, features, time and importance."""
    text = Text()
    text.append(stage.kind, style="bold")
    text.append(f" · shrinkage {stage.shrinkage:g}\n")
    params = _params(stage, view.task)
    if params:
        text.append("params ", style="bold")
        text.append(", ".join(f"{k} {v}" for k, v in params) + "\n")
    text.append("features ", style="bold")
    if stage.all_features:
        text.append(f"all {len(stage.features)}\n")
    else:
        text.append(f"{len(stage.features)} of {len(view.features)}: {', '.join(stage.features)}\n")
    if stage.step_rule:
        text.append("step ", style="bold")
        text.append(f"{number(stage.step)} · {stage.step_rule}\n")
    for note in stage.notes:
        text.append(f"! {note}\n", style="bold yellow")
    if timings:
        text.append("secs ", style="bold")
        text.append(f"{seconds(stage.seconds)}\n")
    _importance(text, stage, width)
    return text


def coefficients_text(table: pd.DataFrame, width: int) -> Text:
    """Return a linear stage's coefficients: term, coefficient, and its 95 % interval where it has one."""
    text = Text()
    text.append("coefficients", style="bold")
    text.append(" (per unit of each feature; a level against its reference)\n", style="dim")
    terms = [str(t) for t in table["term"]]
    coef = column_text(table["coefficient"], signed=True)
    has_ci = "ci_low" in table.columns and table["ci_low"].notna().any()
    interval = []
    if has_ci:
        low, high = column_text(table["ci_low"]), column_text(table["ci_high"])
        interval = [f"[{a}, {b}]" if a else "" for a, b in zip(low, high, strict=True)]
    term_width = min(max(len(t) for t in terms) if terms else 4, max(8, width - len(max(coef, key=len)) - 3))
    for i, term in enumerate(terms):
        text.append(f"{_name(term, term_width):<{term_width}} {coef[i]:>{max(map(len, coef))}}")
        if interval and interval[i]:
            text.append(f" {interval[i]}", style="dim")
        text.append("\n")
    note = table.attrs.get("note", "")
    if has_ci:
        text.append("95% intervals, conditional on the stages before it\n", style="dim")
    elif note:
        text.append(f"{note}\n", style="dim")
    return text


def sparkline(values: np.ndarray) -> str:
    """Return ``values`` as a line of block characters, lowest to highest."""
    finite = values[np.isfinite(values)]
    if not finite.size:
        return ""
    low, high = float(finite.min()), float(finite.max())
    span = high - low
    if span <= 0:
        return SPARKS[3] * len(values)
    return "".join(SPARKS[int(round((v - low) / span * 7))] if np.isfinite(v) else " " for v in values)


def curves_text(table: pd.DataFrame, width: int) -> Text:
    """Return a spline stage's curve per feature as a line of blocks, with its range."""
    text = Text()
    text.append("curves", style="bold")
    text.append(" (what the stage adds along each feature)\n", style="dim")
    names = list(dict.fromkeys(table["feature"]))
    name_width = min(14, max((len(n) for n in names), default=4))
    for name in names:
        part = table[table["feature"] == name]
        values = part["contribution"].to_numpy(dtype=float)
        low, high = column_text([values.min(), values.max()], digits=3, signed=True)
        line = sparkline(values)[: max(8, width - name_width - len(low) - len(high) - 6)]
        text.append(f"{_name(name, name_width):<{name_width}} {line} ")
        text.append(f"{low}..{high}\n", style="dim")
    return text


def dependence_text(table: pd.DataFrame, feature: str, rows: int, task: str, width: int) -> Text:
    """Return the partial dependence of a stage's contribution on ``feature``: one bar per grid value,
    and the 10th to 90th percentile of the individual curves."""
    text = Text()
    scale = "log-odds" if task == "binary" else "the target's units"
    text.append(f"partial dependence on {feature}", style="bold")
    text.append(f" (this stage alone, in {scale}; {rows:,} rows)\n", style="dim")
    grid = [str(g) for g in table["feature"]] if table["feature"].dtype == object else column_text(
        table["feature"], digits=3, trim=True)
    average = table["average"].to_numpy(dtype=float)
    shown = column_text(average, signed=True)
    ends = column_text([*table["ice_low"], *table["ice_high"]], digits=3)  # both ends in one style
    spread = [f"{a}..{b}" for a, b in zip(ends[: len(table)], ends[len(table):], strict=True)]
    grid_width = min(12, max(len(g) for g in grid))
    value_width = max(len(s) for s in shown)
    bar_width = max(4, min(20, width - grid_width - value_width - max(len(s) for s in spread) - 4))
    low, high = float(np.nanmin(average)), float(np.nanmax(average))
    for g, a, s, text_value in zip(grid, average, spread, shown, strict=True):
        share = 0.0 if high <= low or not math.isfinite(a) else (a - low) / (high - low)
        text.append(f"{_name(g, grid_width):>{grid_width}} {text_value:>{value_width}} ")
        text.append(bar(share, bar_width), style="cyan")
        text.append(f" {s}\n", style="dim")
    return text


def stored_learned(fitted: Any, row: int, kind: str) -> dict[str, Any]:
    """Return what stage ``row`` of a chain file learned that the file alone tells: a linear kind's
    coefficients (without standard errors: they need the train rows) and a spline's curves.
    These read the stored learner and a grid, not rows, so they are quick enough to ask directly."""
    from stages.errors import RemnantError
    from stages.understand.coefficient_table import LINEAR_KINDS

    out: dict[str, Any] = {}
    try:
        if kind in LINEAR_KINDS:
            out["coefficients"] = fitted.coefficients(row)
        if kind == "spline":
            out["curves"] = fitted.curves(row, points=24)
    except RemnantError:  # a task the tables are not for (a multiclass chain): nothing to add
        return {}
    return out


#: what the details say of a multiclass stage in place of what it learned
LEARNED_NOT_MULTICLASS = ("partial dependence, coefficients and spline curves read one raw score a row: they "
                          "are for regression and binary chains; this multiclass stage has one per class")


class StageDetails(VerticalScroll):
    """A scrolling pane with the details of the selected row; the screen sets ``chain`` and ``feature``."""

    if TYPE_CHECKING:
        app = getters.app(RemnantApp)

    def __init__(self, *, timings: bool = True, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.timings = timings
        self.body = Static(Text("no chain yet", style="dim"), id="details-body")
        self.learned_body = Static("", id="learned-body")
        self.view: ChainView | None = None
        self.chain: Any = None
        self.feature: str | None = None
        self.row = 0
        self.wanted: Any = None

    def compose(self) -> ComposeResult:
        """Return what the stage is, then what it learned."""
        yield self.body
        yield self.learned_body

    def show(self, view: ChainView, row: int) -> None:
        """Show the details of row ``row`` of ``view``; ask for what the stage learned."""
        self.view, self.row = view, row
        width = max(20, self.size.width - 1)
        stage = view.stage(row)
        self.border_title = "start value" if stage is None else f"stage {row} · {stage.kind}"
        self.body.update(start_text(view) if stage is None else stage_text(view, stage, width, self.timings))
        self.wanted = None
        if stage is not None and self.chain is not None and view.task == "multiclass":
            self.learned_body.update(Text(f"\n{LEARNED_NOT_MULTICLASS}", style="dim"))
            return
        if stage is not None and view.read_only and self.chain is not None:
            self._take(stored_learned(self.chain, row, stage.kind))
            return
        if stage is None or self.chain is None or view.read_only or not view.stage_objects:
            self.learned_body.update("")
            return
        question = answers.learned_question(self, self.chain, view, row, self._feature(stage))
        self.wanted = question.key
        known, answer = self.app.ask(question)
        if known:
            self._take(answer)
        else:
            waiting = " (after the fit)" if self.app.fitting else ""
            self.learned_body.update(Text(f"\n… working out what stage {row} learned{waiting}", style="dim"))

    def _feature(self, stage: StageInfo) -> str | None:
        if self.feature in stage.features:
            return self.feature
        if stage.importance:
            return max(stage.importance.items(), key=lambda item: item[1])[0]
        return stage.features[0] if stage.features else None

    def on_answered(self, event: Answered) -> None:
        """Show what the stage learned, once the worker has it."""
        event.stop()
        if event.key != self.wanted:
            return
        if event.error:
            self.learned_body.update(Text(f"\ncannot show what it learned: {event.error}", style="dim"))
            return
        self._take(event.answer)

    def _take(self, learned: dict[str, Any]) -> None:
        width = max(20, self.size.width - 1)
        text = Text()
        if "coefficients" in learned:
            text.append("\n")
            text.append_text(coefficients_text(learned["coefficients"], width))
        if "curves" in learned and len(learned["curves"]):
            text.append("\n")
            text.append_text(curves_text(learned["curves"], width))
        table = learned.get("dependence")
        stage = self.view.stage(self.row) if self.view is not None else None
        feature = self._feature(stage) if stage is not None else None
        if table is not None and len(table) and feature is not None and self.view is not None:
            text.append("\n")
            text.append_text(dependence_text(table, feature, learned.get("dependence_rows", 0), self.view.task, width))
        self.learned_body.update(text)

    def on_resize(self) -> None:
        """Redraw the bars for the new width."""
        if self.view is not None:
            self.show(self.view, self.row)
