"""The add-stage form: kind, shrinkage, features, the kind's main params (defaults shown) and repeat.

It returns the stage it describes, read by the engine's stage reader (``spec`` and ``repeat``),
or None when cancelled. Mistakes are shown in the form, at their field; whether the kind takes a
parameter is the engine's call, made when the stage is fit.
"""

from __future__ import annotations

from typing import Any

from textual import on
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.widgets import Button, Footer, Input, Label, Select, SelectionList

from stages.errors import StageSpecError
from stages.kinds import get_kind, kind_names
from stages.parsing import STAGE_KEYS, stage_entry
from stages.schema import Task

from ..format import parse_value, value
from ..widgets.kind_select import KindSelect, kind_label
from .form import FormError, FormScreen, engine_error

#: the option that stands for any scikit-learn regressor, named by its import path
SKLEARN = "sklearn:"
#: kinds that only fit one task
ONLY_FOR = {"logistic": ("binary", "multiclass")}
#: the field that holds each key of a stage
FIELDS = {"kind": "kind", "shrinkage": "shrinkage", "features": "features", "params": "more", "repeat": "repeat"}
#: our starting shrinkage per kind: full steps for kinds fit once, smaller for trees (common practice)
SHRINKAGE = {"tree": 0.3, "hist_tree": 0.3, "forest": 0.5, "extra_trees": 0.5, "lightgbm": 0.5, "knn": 0.5,
             "spline": 0.5}


def parse_pairs(text: str) -> dict[str, Any]:
    """Return ``name=value, name=value`` as a dict of typed values."""
    params: dict[str, Any] = {}
    for chunk in filter(None, (part.strip() for part in text.split(","))):
        name, sep, raw = chunk.partition("=")
        if not sep or not name.strip():
            raise FormError(f"more params: write name=value, not {chunk!r}", "more")
        params[name.strip()] = parse_value(raw)
    return params


#: the order the kind list offers kinds in: the task's own linear start first, a constant shift last
ORDER = ("logistic", "linear", "ridge", "lasso", "tree", "hist_tree", "forest", "extra_trees", "lightgbm", "spline",
         "knn", "mean")


def kinds_for(task: Task) -> list[str]:
    """Return the kinds offered for a chain of ``task``, in ``ORDER`` (a binary or multiclass chain's
    ``logistic`` first; kinds registered later after them)."""
    kinds = [k for k in kind_names() if task in ONLY_FOR.get(k, (task,))]
    return sorted(kinds, key=lambda k: (ORDER.index(k) if k in ORDER else len(ORDER), k))


class AddStageScreen(FormScreen):
    """The form that describes the next stage."""

    ERROR_ID = "add-error"
    SUBMIT_ID = "add-fit"


    def __init__(self, task: Task, features: tuple[str, ...], kind: str | None = None) -> None:
        super().__init__()
        self.chain_task = task
        self.features = features
        self.kinds = kinds_for(task)
        kind = kind or self.kinds[0]
        self.kind = kind if kind in self.kinds or kind.startswith(SKLEARN) else self.kinds[0]

    def compose(self) -> ComposeResult:
        """Return the form's fields and buttons."""
        options = [(kind_label(k, self.chain_task), k) for k in self.kinds] + [
            ("sklearn:<module.Class> — any scikit-learn regressor", SKLEARN)]
        start = SKLEARN if self.kind.startswith(SKLEARN) else self.kind
        with Vertical(id="add-stage", classes="dialog") as box:
            box.border_title = "add a stage"
            with VerticalScroll(id="add-fields"):
                with Horizontal(classes="field"):
                    yield Label("kind", classes="name")
                    yield KindSelect(options, value=start, allow_blank=False, id="kind", compact=True)
                yield Label("", id="kind-summary", classes="dim", markup=False)
                with Horizontal(classes="field", id="estimator-row"):
                    yield Label("estimator", classes="name")
                    yield Input(self.kind[len(SKLEARN):] if self.kind.startswith(SKLEARN) else "",
                                placeholder="sklearn.linear_model.HuberRegressor", id="estimator", compact=True)
                with Horizontal(classes="field"):
                    yield Label("shrinkage", classes="name")
                    yield Input(value(SHRINKAGE.get(self.kind, 1.0)), id="shrinkage", type="number", compact=True)
                    yield Label("repeat", classes="name short")
                    yield Input("1", id="repeat", type="integer", compact=True)
                yield Vertical(id="params")
                with Horizontal(classes="field"):
                    yield Label("more params", classes="name")
                    yield Input(placeholder="name=value, name=value", id="more", compact=True)
                yield Label("features (all ticked: every feature)", classes="dim")
                yield SelectionList(*[(f, f, True) for f in self.features], id="features", compact=True)
            yield Label("", id="add-error", markup=False)
            with Horizontal(classes="buttons"):
                yield Button("fit (enter)", id="add-fit", variant="primary", compact=True)
                yield Button("cancel (esc)", id="add-cancel", compact=True)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Fill in the selected kind's params and focus the kind list."""
        self._show_kind(self.kind)
        self.query_one("#kind", Select).focus()

    @on(Select.Changed, "#kind")
    def _kind_changed(self, event: Select.Changed) -> None:
        kind = str(event.value)
        if kind != (SKLEARN if self.kind.startswith(SKLEARN) else self.kind):
            self.query_one("#shrinkage", Input).value = value(SHRINKAGE.get(kind, 1.0))
        self._show_kind(kind)

    def _show_kind(self, kind: str) -> None:
        self.kind = kind
        sklearn = kind.startswith(SKLEARN)
        self.query_one("#estimator-row").display = sklearn
        summary = "any scikit-learn regressor, by import path" if sklearn else get_kind(kind).summary
        self.query_one("#kind-summary", Label).update(summary)
        box = self.query_one("#params", Vertical)
        box.remove_children()
        if sklearn:
            return
        defaults = get_kind(kind).task_defaults(self.chain_task)
        rows = []
        for name in get_kind(kind).main_params:
            label = Label(name, classes="name")
            label.styles.width = max(14, len(name) + 1)  # the whole name: min_samples_leaf, not min_samples_le
            rows.append(Horizontal(label, Input(value(defaults.get(name)), name=name, compact=True, classes="param"),
                                   classes="field"))
        box.mount_all(rows)

    def on_kind_select_submitted(self, event: KindSelect.Submitted) -> None:
        """Enter on the closed kind list fits, as enter in any other field does."""
        event.stop()
        self._submit()

    def _kind_name(self) -> str:
        if not self.kind.startswith(SKLEARN):
            return self.kind
        path = self.query_one("#estimator", Input).value.strip()
        if not path:
            raise FormError("estimator: type the import path of a regressor, e.g. sklearn.svm.SVR", "estimator")
        return SKLEARN + path

    def _params(self, kind: str) -> dict[str, Any]:
        params: dict[str, Any] = {}
        if not kind.startswith(SKLEARN):
            defaults = get_kind(kind).task_defaults(self.chain_task)
            for field in self.query(".param").results(Input):
                name = field.name or ""
                typed = parse_value(field.value)
                if typed != defaults.get(name):
                    params[name] = typed
        params.update(parse_pairs(self.query_one("#more", Input).value))
        return params

    def _number(self, field: str, whole: bool) -> float:
        text = self.query_one(f"#{field}", Input).value.strip()
        try:
            return int(text) if whole else float(text)
        except ValueError:
            kind = "a whole number" if whole else "a number"
            raise FormError(f"{field} must be {kind}, not {text!r}", field) from None

    def request(self) -> dict[str, Any]:
        """Return the stage the form describes, ``spec`` and ``repeat``, read by the engine's stage
        reader; raise FormError naming the field that cannot be used."""
        kind = self._kind_name()
        shrinkage = self._number("shrinkage", whole=False)
        repeat = int(self._number("repeat", whole=True))
        ticked = list(self.query_one("#features", SelectionList).selected)
        if not ticked:
            raise FormError("tick at least one feature (all ticked means every feature)", "features")
        features = [] if len(ticked) == len(self.features) else [f for f in self.features if f in ticked]
        entry = {"kind": kind, "shrinkage": shrinkage, "features": features, "params": self._params(kind),
                 "repeat": repeat}
        try:
            checked = stage_entry(entry, keys=(*STAGE_KEYS, "repeat"), where="the stage")
        except StageSpecError as err:
            raise engine_error(err, FIELDS) from None
        return {"spec": checked.spec, "repeat": checked.repeat}
