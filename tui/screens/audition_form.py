"""The audition form: candidate next stages written as TOML tables, or picked from ready-made sets.

Each candidate is a ``[[candidate]]`` table with the keys of a recipe's ``[[stage]]`` (kind,
shrinkage, features, params); a list is a grid, so ``max_features = [0.33, 0.5, 1.0]`` makes
three candidates. A recipe's ``[[audition.candidate]]`` tables paste in as they are. The form
reads each table with the engine's stage reader (keys, kinds, parameter names) and returns the
candidates as dicts, or None.
"""

from __future__ import annotations

import tomllib
from typing import Any

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Footer, Label, Select, TextArea

from stages.errors import StageSpecError
from stages.parsing import MAX_CANDIDATES, expand_grid, from_toml
from stages.schema import Task

from .form import FormError

#: ready-made candidate sets: name -> TOML text (simplest first, for the one-standard-error pick)
READY = {
    "forests by max_features, LightGBM by num_leaves, spline": """\
[[candidate]]
kind = "forest"
shrinkage = 0.5
params = { max_features = [0.33, 0.5, 1.0] }

[[candidate]]
kind = "lightgbm"
shrinkage = 0.5
params = { num_leaves = [15, 63] }

[[candidate]]
kind = "spline"
shrinkage = 0.5
""",
    "forests by max_features (p/3, p/2, all)": """\
[[candidate]]
kind = "forest"
shrinkage = 0.5
params = { max_features = [0.33, 0.5, 1.0] }
""",
    "LightGBM by num_leaves (15, 63)": """\
[[candidate]]
kind = "lightgbm"
shrinkage = 0.5
params = { num_leaves = [15, 63] }
""",
    "spline by n_knots (4, 6, 10)": """\
[[candidate]]
kind = "spline"
shrinkage = 0.5
params = { n_knots = [4, 6, 10] }
""",
    "trees by max_depth (2, 3, 4)": """\
[[candidate]]
kind = "tree"
shrinkage = 0.3
params = { max_depth = [2, 3, 4] }
""",
    "k-NN by n_neighbors (5, 15, 50)": """\
[[candidate]]
kind = "knn"
shrinkage = 0.5
params = { n_neighbors = [5, 15, 50] }
""",
}
HINT = "a list is a grid: max_features = [0.33, 0.5, 1.0] makes three candidates"


def _tables(text: str) -> list[Any]:
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise FormError(f"the candidates are not valid TOML: {err}") from None
    unknown = sorted(set(doc) - {"candidate", "audition"})
    if unknown:
        raise FormError(f"unknown table or key {unknown[0]!r}: write each candidate as a [[candidate]] table")
    tables = doc.get("candidate")
    if tables is None and isinstance(doc.get("audition"), dict | list):
        audition = doc["audition"]
        tables = (audition[0] if isinstance(audition, list) and audition else audition).get("candidate")
    if not isinstance(tables, list) or not tables or not all(isinstance(t, dict) for t in tables):
        raise FormError("write each candidate as a [[candidate]] table with at least a kind")
    return tables


def parse_candidates(text: str, task: Task) -> tuple[list[dict[str, Any]], int]:
    """Return the candidate tables of ``text`` (``"none"`` read as None, grids not yet expanded) and
    how many candidates their grids make.

    Each table is read by the engine's stage reader, as a recipe's ``[[audition.candidate]]`` is.
    Raise FormError naming what is wrong: bad TOML, an unknown key, kind or parameter, an empty
    list, or more than the engine's MAX_CANDIDATES candidates.
    """
    tables = [from_toml(table) for table in _tables(text)]
    count = 0
    for i, table in enumerate(tables, start=1):
        try:
            count += len(expand_grid(table, task, where="[[candidate]]"))
        except StageSpecError as err:
            raise FormError(f"candidate {i}: {err}") from None
    if count > MAX_CANDIDATES:
        raise FormError(f"{count} candidates: at most {MAX_CANDIDATES} in one audition")
    return tables, count


class AuditionForm(ModalScreen[list | None]):
    """Write or pick the candidates; returns their tables (grids not yet expanded) or None."""

    BINDINGS = [
        Binding("ctrl+r", "run", "audition", tooltip="fit the candidates side by side"),
        Binding("escape", "cancel", "cancel"),
    ]

    def __init__(self, task: Task, text: str = "", next_stage: int = 1) -> None:
        super().__init__()
        self.chain_task = task
        self.text = text or next(iter(READY.values()))
        self.next_stage = next_stage

    def compose(self) -> ComposeResult:
        """Return the ready-made sets, the text of the candidates, the count and the buttons."""
        with Vertical(id="audition-form", classes="dialog") as box:
            box.border_title = f"audition candidates for stage {self.next_stage}"
            with Horizontal(classes="field"):
                yield Label("ready-made", classes="name")
                yield Select([(name, name) for name in READY], prompt="pick a set (or write your own)",
                             id="ready", compact=True)
            yield TextArea(self.text, id="candidates", soft_wrap=False, show_line_numbers=False)
            yield Label(HINT, classes="dim", markup=False)
            yield Label("", id="audition-count", markup=False)
            with Horizontal(classes="buttons"):
                yield Button("audition (ctrl+r)", id="audition-run", variant="primary", compact=True)
                yield Button("cancel (esc)", id="audition-cancel", compact=True)
        yield Footer(compact=True, show_command_palette=False)

    def on_mount(self) -> None:
        """Count the candidates and put the cursor in the text."""
        self._count()
        self.query_one("#candidates", TextArea).focus()

    @on(Select.Changed, "#ready")
    def _ready_picked(self, event: Select.Changed) -> None:
        if event.value is not Select.NULL:
            self.query_one("#candidates", TextArea).text = READY[str(event.value)]
            self._count()

    @on(TextArea.Changed, "#candidates")
    def _count(self) -> None:
        label = self.query_one("#audition-count", Label)
        try:
            _, count = parse_candidates(self.query_one("#candidates", TextArea).text, self.chain_task)
        except FormError as err:
            label.update(str(err))
            label.add_class("-error")
            return
        label.remove_class("-error")
        label.update(f"{count} candidate{'s' if count != 1 else ''}, fit side by side on the current residuals")

    def action_run(self) -> None:
        """Return the candidates, or say what is wrong with them."""
        text = self.query_one("#candidates", TextArea).text
        try:
            tables, _ = parse_candidates(text, self.chain_task)
        except FormError as err:
            label = self.query_one("#audition-count", Label)
            label.update(str(err))
            label.add_class("-error")
            return
        self.text = text
        self.dismiss(tables)

    def on_button_pressed(self, event: Button.Pressed) -> None:
        """Audition or cancel."""
        event.stop()
        if event.button.id == "audition-run":
            self.action_run()
        else:
            self.dismiss(None)

    def action_cancel(self) -> None:
        """Close the form without an audition."""
        self.dismiss(None)
