"""The setup screen: columns and their roles, the target, exclusions, the loss (with its exposure and
tweedie power), row weights and the validation scheme.

Nothing heavy runs on the event loop: the columns' roles (every distinct value of every
column) and the target's task are worked out in a worker while the screen says so. Start
(``ctrl+s`` from any field, ``s`` elsewhere) builds the chain in the fit worker; when it cannot
start yet the state line says why. A choice the engine refuses comes back as a one-line reason
in a modal, and the screen stays as it was. When the data file has a saved session, the app
offers it over this screen; resuming loads it in the worker too.
"""

from __future__ import annotations

import dataclasses
from typing import TYPE_CHECKING, Any

import pandas as pd
from textual import on
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import Screen
from textual.widgets import Button, Footer, Input, Label, Select, Static

from stages.data import infer_task
from stages.errors import ValidationSpecError
from stages.losses import LOG_LINK_NAMES, default_loss, loss_names
from stages.parsing import validation_spec
from stages.roles import EXCLUDED, ID, describe_columns
from stages.schema import DATETIME, Task
from stages.validation import SCHEMES, ValidationSpec

from ..background import Answered, Question
from ..caution import CAUTION
from ..jobs import SetupChoices, new_chain
from ..messages import ChainReady, FitFailed, FitStarted
from ..sessions import resume_job
from ..view import ImportanceCache
from ..widgets.column_roles import ColumnRoles
from .date_parts import DatePartsScreen
from .form import FormError, engine_error

if TYPE_CHECKING:
    from textual import getters

    from ..app import RemnantApp

#: the validation schemes the form offers, by the engine's scheme name, with their labels
LABELS = {"holdout": "holdout", "kfold": "k-fold", "time": "time order", "group": "groups", "column": "split column"}
#: the form's field for each setting of a scheme (the engine's names; stratify is left at its default)
FIELDS = {"fraction": "fraction", "folds": "folds", "column": "column", "test_fraction": "test", "seed": "seed",
          "scheme": "scheme"}
#: the settings typed as whole numbers
WHOLE = ("folds", "seed")


def fields_of(scheme: str) -> tuple[str, ...]:
    """Return the settings of the engine's validation scheme ``scheme`` that the form shows."""
    return tuple(f.name for f in dataclasses.fields(SCHEMES[scheme]) if f.name in FIELDS)


def losses_for(task: Task) -> list[str]:
    """Return the loss names that fit ``task``."""
    return loss_names(task)


def task_and_classes(values: pd.Series, source: str, target: str) -> tuple[Task, int]:
    """Return the task a target column infers and, for a multiclass one, its number of classes (else 0)."""
    task = infer_task(values, source=source, target=target)
    return task, int(values.dropna().astype("string").nunique()) if task == "multiclass" else 0


class SetupScreen(Screen):
    """Choose what to predict and how to validate, then start the chain."""

    BINDINGS = [
        Binding("ctrl+s", "start", "start", tooltip="start: build the chain with these choices (from any field)"),
        Binding("s", "start_key", "start", show=False, tooltip="start, when no text field has the cursor"),
    ]
    if TYPE_CHECKING:
        app = getters.app(RemnantApp)

    def __init__(self, frame: pd.DataFrame, source: str, data_path: str | None, target: str | None) -> None:
        super().__init__()
        self.frame = frame
        self.source = source
        self.data_path = data_path
        self.reports: list[Any] | None = None  # read in a worker: every distinct value of every column
        self.names = [str(c) for c in frame.columns]
        self.target = target if target in self.names else None
        self.excluded: set[str] = set()
        self.included: set[str] = set()  # id columns the user made features
        self.dates: dict[str, tuple[str, ...]] = {}
        self.chain_task: Task | None = None
        self.n_classes = 0
        self.task_problem = ""
        self.cache = ImportanceCache()
        self.wanted: dict[str, Any] = {}

    def compose(self) -> ComposeResult:
        """Return the column list, the choices form, the caution line and the footer."""
        rows, cols = self.frame.shape
        yield Static(f"new chain · {self.source} · {rows:,} rows × {cols:,} columns", id="title", markup=False)
        with Horizontal(id="setup-panes"):
            roles = ColumnRoles(id="columns")
            roles.border_title = "columns"
            roles.border_subtitle = "t target · x exclude · f date features"
            yield roles
            with Vertical(id="choices") as form:
                form.border_title = "choices"
                yield self._field("target", Select([(n, n) for n in self.names], id="target",
                                                        prompt="pick a column", compact=True))
                yield self._field("task", Label("-", id="task"))
                yield self._field("loss", Select([], id="loss", prompt="-", compact=True))
                yield self._field("power", Input("1.5", id="power", type="number", compact=True))
                yield self._field("exposure", Select([(n, n) for n in self.names], id="exposure",
                                                          prompt="none", compact=True))
                yield self._field("weight", Select([(n, n) for n in self.names], id="weight",
                                                        prompt="none", compact=True))
                yield self._field("validation", Select([(label, key) for key, label in LABELS.items()],
                                                            value="holdout", allow_blank=False, id="scheme",
                                                            compact=True))
                yield self._field("fraction", Input("0.2", id="fraction", type="number", compact=True))
                yield self._field("folds", Input("5", id="folds", type="integer", compact=True))
                yield self._field("column", Select([(n, n) for n in self.names], id="column",
                                                        prompt="pick a column", compact=True))
                yield self._field("locked test", Input("0", id="test", type="number", compact=True), "test")
                yield self._field("seed", Input("0", id="seed", type="integer", compact=True))
                yield Button("start (ctrl+s)", id="start", variant="primary", compact=True)
                yield Label("", id="setup-state", markup=False)
        yield Static(CAUTION, id="setup-caution", markup=False)
        yield Footer(compact=True, show_command_palette=False)

    def _field(self, label: str, widget: Any, key: str | None = None) -> Horizontal:
        return Horizontal(Label(label, classes="name"), widget, classes="field", id=f"row-{key or label.split()[0]}")

    def on_mount(self) -> None:
        """Show the preselected target and the fields of the default scheme; read the columns in a worker."""
        if self.target is not None:
            self.query_one("#target", Select).value = self.target
        self._say(f"reading the columns of {len(self.frame):,} rows …")
        frame = self.frame
        self._ask("columns", ("columns", id(frame)), lambda: describe_columns(frame))
        self._target_changed()
        self._scheme_changed()
        self._loss_changed()
        self.query_one("#columns", ColumnRoles).focus()

    def _say(self, text: str) -> None:
        self.query_one("#setup-state", Label).update(text)

    def _ask(self, what: str, key: Any, compute: Any) -> None:
        self.wanted[what] = key
        known, answer = self.app.ask(Question(key, compute, self, "setup"))
        if known:
            self._answered(what, answer, "")

    def on_answered(self, event: Answered) -> None:
        """Take the columns' roles or the target's task, worked out in the worker."""
        event.stop()
        what = next((w for w, key in self.wanted.items() if key == event.key), None)
        if what is not None:
            self._answered(what, event.answer, event.error)

    def _answered(self, what: str, answer: Any, error: str) -> None:
        if what == "columns":
            self.reports = answer or []
            roles = self.query_one("#columns", ColumnRoles)
            roles.take(self.reports)
            roles.show(self.target, self.excluded, self.dates)
            self._say(error or self._readiness())
            return
        task_label, loss = self.query_one("#task", Label), self.query_one("#loss", Select)
        if error:
            self.chain_task, self.task_problem = None, error.split(": ", 1)[-1]
            task_label.update("-")
            loss.set_options([])
            self._say(f"cannot use {self.target!r} as the target: {self.task_problem}")
            return
        task, classes = answer
        self.chain_task, self.task_problem, self.n_classes = task, "", classes
        task_label.update(f"multiclass · {classes} classes" if task == "multiclass" else task)
        loss.set_options([(name, name) for name in losses_for(task)])
        loss.value = default_loss(task)
        self._say(self._readiness())

    def _readiness(self) -> str:
        """Return why start is not possible yet, or how to start."""
        if self.reports is None:
            return f"reading the columns of {len(self.frame):,} rows …"
        if self.target is None:
            return "pick the target (t on a column, or the target list), then ctrl+s starts"
        if self.task_problem:
            return f"cannot use {self.target!r} as the target: {self.task_problem}"
        if self.chain_task is None:
            return f"working out what {self.target!r} holds …"
        if self.chain_task == "multiclass":
            return (f"ready: ctrl+s starts · {self.target!r} has {self.n_classes} classes: a multiclass chain "
                    "(one raw score per class, softmax)")
        return "ready: ctrl+s starts"

    # ----- choices ---------------------------------------------------------------------
    def _target_changed(self) -> None:
        roles = self.query_one("#columns", ColumnRoles)
        self.excluded.discard(self.target or "")
        self.included.discard(self.target or "")
        self.dates.pop(self.target or "", None)
        roles.show(self.target, self.excluded, self.dates, self.included)
        task_label, loss = self.query_one("#task", Label), self.query_one("#loss", Select)
        self.chain_task, self.task_problem = None, ""
        loss.set_options([])
        if self.target is None:
            task_label.update("-")
            self._say(self._readiness())
            return
        task_label.update("…")
        values, source, target = self.frame[self.target], self.source, self.target
        self._ask("task", ("task", id(self.frame), target), lambda: task_and_classes(values, source, target))
        self._say(self._readiness())

    @on(Select.Changed, "#target")
    def _target_picked(self, event: Select.Changed) -> None:
        picked = None if event.value is Select.NULL else str(event.value)
        if picked != self.target:
            self.target = picked
            self._target_changed()

    @on(Select.Changed, "#loss")
    def _loss_changed(self) -> None:
        """Show the exposure on the log-link losses and the power on tweedie only."""
        value = self.query_one("#loss", Select).value
        loss = None if value is Select.NULL else str(value)
        self.query_one("#row-exposure").display = loss in LOG_LINK_NAMES
        self.query_one("#row-power").display = loss == "tweedie"

    def _column_choice(self, field: str) -> str | None:
        value = self.query_one(f"#{field}", Select).value
        return None if value is Select.NULL else str(value)

    def row_settings(self, loss: str | None) -> dict[str, Any]:
        """Return the weight and exposure columns and the tweedie power the form describes; raise
        FormError at a field that cannot be used."""
        weight = self._column_choice("weight")
        exposure = self._column_choice("exposure") if loss in LOG_LINK_NAMES else None
        for field, column in (("weight", weight), ("exposure", exposure)):
            if column is not None and column == self.target:
                raise FormError(f"{field} {column!r} is the target; pick another column", field)
        if weight is not None and weight == exposure:
            raise FormError(f"weight and exposure are both {weight!r}; pick two columns", "weight")
        power = self._number("power", False) if loss == "tweedie" else None
        if power is not None and not 1 < power < 2:
            raise FormError(f"power must be strictly between 1 and 2, not {power:g}", "power")
        return {"weight": weight, "exposure": exposure, "power": power}

    @on(Select.Changed, "#scheme")
    def _scheme_changed(self) -> None:
        scheme = str(self.query_one("#scheme", Select).value)
        used = [FIELDS[name] for name in fields_of(scheme)]
        for key in ("fraction", "folds", "column", "test", "seed"):
            self.query_one(f"#row-{key}").display = key in used or key == "seed"  # seed: the chain's too
        column = self.query_one("#column", Select)
        if "column" in used and column.value is Select.NULL:
            guess = self._column_for(scheme)
            if guess is not None:
                column.value = guess

    def _column_for(self, scheme: str) -> str | None:
        """Return the likely column for a scheme: the first dates column for time order, one called split."""
        if scheme == "time":
            return next((r.name for r in self.reports or () if r.role == DATETIME), None)
        if scheme == "column":
            return next((n for n in self.names if n.lower() == "split"), None)
        return None

    def on_column_roles_target_picked(self, event: ColumnRoles.TargetPicked) -> None:
        """Make the picked column the target."""
        self.query_one("#target", Select).value = event.name

    def on_column_roles_exclusion_toggled(self, event: ColumnRoles.ExclusionToggled) -> None:
        """Exclude the column, or include it again; an id column becomes a feature, or an id again."""
        report = next((r for r in self.reports or () if r.name == event.name), None)
        if report is not None and report.role == ID and event.name not in self.excluded:
            self.included ^= {event.name}
            now = "a feature" if event.name in self.included else "an id again (not a feature)"
            self._say(f"column {event.name!r} is {now}")
        else:
            self.excluded ^= {event.name}
        self.query_one("#columns", ColumnRoles).show(self.target, self.excluded, included=self.included)

    def on_column_roles_dates_asked(self, event: ColumnRoles.DatesAsked) -> None:
        """Ask which parts of a dates column become features (or say why a column gives none)."""
        report = next((r for r in self.reports or () if r.name == event.name), None)
        if report is None or report.role != DATETIME:
            self._say(f"{event.name!r} holds no dates: only a dates column gives date features")
            return

        def picked(parts: tuple[str, ...] | None) -> None:
            if parts is None:
                return
            if parts:
                self.dates[event.name] = parts
            else:
                self.dates.pop(event.name, None)
            self.query_one("#columns", ColumnRoles).show(self.target, self.excluded, self.dates)
            shown = ", ".join(parts) if parts else "none (it only orders rows)"
            self._say(f"date features of {event.name!r}: {shown}")

        self.app.push_screen(DatePartsScreen(event.name, self.dates.get(event.name, ())), picked)

    # ----- starting --------------------------------------------------------------------
    def _number(self, field: str, whole: bool) -> Any:
        text = self.query_one(f"#{field}", Input).value.strip()
        try:
            return int(text) if whole else float(text)
        except ValueError:
            raise FormError(f"{field} must be {'a whole number' if whole else 'a number'}, not {text!r}",
                            field) from None

    def validation(self) -> ValidationSpec:
        """Return the validation spec the form describes, read by the engine's validation reader;
        raise FormError at the field that cannot be used."""
        scheme = str(self.query_one("#scheme", Select).value)
        table: dict[str, Any] = {"scheme": scheme}
        for name in fields_of(scheme):
            if name == "column":
                column = self.query_one("#column", Select).value
                if column is Select.NULL:
                    raise FormError(f"{LABELS[scheme]} needs a column: pick one", "column")
                table[name] = str(column)
            else:
                table[name] = self._number(FIELDS[name], name in WHOLE)
        try:
            return validation_spec(table)
        except ValidationSpecError as err:
            raise engine_error(err, FIELDS) from None

    def choices(self) -> SetupChoices:
        """Return what the form describes; raise FormError for a bad choice."""
        if self.target is None:
            raise FormError("pick the target: t on a column, or the target list", "target")
        value = self.query_one("#loss", Select).value
        loss = None if value is Select.NULL else str(value)
        return SetupChoices(
            frame=self.frame, source=self.source, data_path=self.data_path, target=self.target,
            ignore=tuple(sorted(self.excluded)), features=self._features(), loss=loss,
            validation=self.validation(), seed=self._number("seed", True),
            dates={k: v for k, v in self.dates.items() if k not in self.excluded}, **self.row_settings(loss),
        )

    def _features(self) -> tuple[str, ...] | None:
        """Return the feature columns when the user made an id column one (every column the engine
        would use, then those), else None: the engine's own choice."""
        if not self.included:
            return None
        usual = [r.name for r in self.reports or () if r.role not in (ID, EXCLUDED, DATETIME)
                 and r.name != self.target and r.name not in self.excluded]
        return (*usual, *sorted(self.included - self.excluded - {self.target or ""}))

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Leave ``s`` to a text field that has the cursor (ctrl+s starts from there)."""
        if action == "start_key":
            return not isinstance(self.focused, Input)
        return True

    def action_start_key(self) -> None:
        """Start (``s``, when no text field has the cursor)."""
        self.action_start()

    def action_start(self) -> None:
        """Build the chain in the fit worker; say why not when it cannot start yet."""
        if self.app.fitting:
            self._say(f"{self.app.job_label} is running: wait for it")
            return
        if self.target is None or self.reports is None or (self.chain_task is None and not self.task_problem):
            self._say(f"cannot start yet: {self._readiness()}")
            return
        try:
            choices = self.choices()
        except FormError as err:
            self._say(f"cannot start: {err}")
            if err.field is not None:
                self.query_one(f"#{err.field}").focus()
            self.app.show_failure("cannot start", str(err), "change the choice and start again")
            return
        self.app.start_job(new_chain(self, choices, self.cache))

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Start on the start button."""
        event.stop()
        self.action_start()

    def on_fit_started(self, event: FitStarted) -> None:
        """Say that the chain is being built (or the session resumed)."""
        self.query_one("#setup-state", Label).update(f"{event.label}…")

    def on_fit_failed(self, event: FitFailed) -> None:
        """Clear the state line; the failure modal says why."""
        self.query_one("#setup-state", Label).update("")

    def on_chain_ready(self, event: ChainReady) -> None:
        """Open the workbench on the new (or resumed) chain, letting go of the data read for this form
        (the chain holds its own copy; this screen is not shown again)."""
        self.frame = None
        self.app.open_workbench(event.chain, event.view, self.cache, event.summary, event.session_error, event.ids)

    def resume_answered(self, choice: str | None) -> None:
        """Resume the offered session in the fit worker, or stay here to start fresh."""
        offer = self.app.offer
        if choice == "resume" and offer is not None:
            self.app.start_job(resume_job(self, offer, self.cache))
        else:
            self._say("starting fresh: ctrl+s starts, and replaces the saved session")
