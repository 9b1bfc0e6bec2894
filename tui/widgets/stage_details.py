"""The selected stage's details: params, features, fit time and feature importance as a bar list."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.widgets import Static

from stages.errors import RemnantError
from stages.kinds import get_kind
from stages.schema import Task

from ..format import bar, number, seconds, value
from ..view import ChainView, StageInfo

#: how the start value is chosen, per loss
START_RULE = {
    "squared": "the mean of the fitting rows",
    "absolute": "the median of the fitting rows",
    "huber": "the median of the fitting rows",
    "logloss": "the log-odds of the base rate",
}
#: the most features the importance list shows
TOP = 8


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


def _importance(text: Text, importance: dict[str, float] | None, width: int) -> None:
    if importance is None:
        text.append("importance  not stored for this kind\n", style="dim")
        return
    ranked = sorted(importance.items(), key=lambda item: -item[1])[:TOP]
    if not ranked or ranked[0][1] <= 0:
        text.append("importance  none (the stage uses no feature)\n", style="dim")
        return
    name_width = min(14, max(len(name) for name, _ in ranked))
    bar_width = min(30, max(4, width - name_width - 6))
    text.append("importance\n", style="bold")
    for name, share in ranked:
        text.append(f"{name[:name_width]:<{name_width}} ")
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
    for note in view.notes:
        text.append(f"· {note}\n", style="dim")
    return text


def stage_text(view: ChainView, stage: StageInfo, width: int, timings: bool) -> Text:
    """Return the details of one stage."""
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
        text.append("fit time ", style="bold")
        text.append(f"{seconds(stage.seconds)}\n")
    _importance(text, stage.importance, width)
    return text


class StageDetails(VerticalScroll):
    """A scrolling pane with the details of the selected row."""

    def __init__(self, *, timings: bool = True, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.timings = timings
        self.body = Static(Text("no chain yet", style="dim"), id="details-body")
        self.view: ChainView | None = None
        self.row = 0

    def compose(self) -> ComposeResult:
        """Return the one text block the pane scrolls."""
        yield self.body

    def show(self, view: ChainView, row: int) -> None:
        """Show the details of row ``row`` of ``view``."""
        self.view, self.row = view, row
        width = max(20, self.size.width - 1)
        stage = view.stage(row)
        self.border_title = "start value" if stage is None else f"stage {row} · {stage.kind}"
        self.body.update(start_text(view) if stage is None else stage_text(view, stage, width, self.timings))

    def on_resize(self) -> None:
        """Redraw the bars for the new width."""
        if self.view is not None:
            self.show(self.view, self.row)
