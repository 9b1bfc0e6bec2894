"""The setup screen's column list: what the chain will do with each column (its inferred role), and a few values."""

from __future__ import annotations

import pandas as pd
from rich.text import Text
from textual import events
from textual.binding import Binding
from textual.message import Message
from textual.widgets import DataTable

from stages.roles import EXCLUDED, ID, ColumnReport
from stages.schema import DATETIME

from ..format import number

#: the width of the "use" column: the longest word it shows is "categorical"
USE_WIDTH = 11
#: the longest column name shown before it is cut with an ellipsis
NAME_WIDTH = 18


def column_use(report: ColumnReport, target: str | None, excluded: set[str],
               included: set[str] | frozenset[str] = frozenset()) -> str:
    """Return what the chain does with a column: target, excluded (by the user), skipped (by the
    engine), id (names the rows), dates (orders rows, or gives date features), or its role as a
    feature (numeric, categorical, boolean); an id column the user ``included`` is a feature."""
    if report.name == target:
        return "target"
    if report.name in excluded:
        return "excluded"
    if report.name in included:
        return feature_role(report.dtype)
    if report.role == EXCLUDED:
        return "skipped"
    if report.role == DATETIME:
        return "dates"
    return report.role


def feature_role(dtype: str) -> str:
    """Return the role a column of ``dtype`` has as a feature the user asked for (as the engine
    gives a listed feature): boolean, numeric, else categorical."""
    try:
        resolved = pd.api.types.pandas_dtype(dtype)
    except TypeError:
        return "categorical"
    if pd.api.types.is_bool_dtype(resolved):
        return "boolean"
    return "numeric" if pd.api.types.is_numeric_dtype(resolved) else "categorical"


def short(example: str) -> str:
    """Return an example value shortened for the list: numbers to 4 significant digits."""
    try:
        value = float(example)
    except ValueError:
        return example if len(example) <= 16 else example[:15] + "…"
    return example if len(example) <= 6 else number(value)


class ColumnRoles(DataTable):
    """One row per data column with what the chain does with it; ``t`` makes the row the target,
    ``x`` excludes or includes it (an id column: makes it a feature, or an id again), ``f`` picks the
    date features of a dates column."""

    BINDINGS = [
        Binding("t", "pick_target", "target", tooltip="make the highlighted column the target"),
        Binding("x", "toggle_exclude", "exclude", tooltip="exclude the highlighted column (x again includes it); on an id column, "
                "make it a feature"),
        Binding("f", "date_features", "date features",
                tooltip="dates column: pick the parts that become features (year, month, day of week, hour, day of year)"),
    ]

    class TargetPicked(Message):
        """The user chose ``name`` as the target."""

        def __init__(self, name: str) -> None:
            self.name = name
            super().__init__()

    class ExclusionToggled(Message):
        """The user excluded (or included again) the column ``name``."""

        def __init__(self, name: str) -> None:
            self.name = name
            super().__init__()

    class DatesAsked(Message):
        """The user asked to pick the date features of the dates column ``name``."""

        def __init__(self, name: str) -> None:
            self.name = name
            super().__init__()

    def __init__(self, reports: list[ColumnReport] | None = None, *, id: str | None = None) -> None:
        super().__init__(cursor_type="row", id=id)
        self.reports = reports or []
        self.target: str | None = None
        self.excluded: set[str] = set()
        self.included: set[str] = set()
        self.dates: dict[str, tuple[str, ...]] = {}
        self._width = 0
        self._values_width = 20
        self._name_width = NAME_WIDTH

    def on_mount(self) -> None:
        """Lay out the columns and one row per data column."""
        self._layout(self.size.width)

    def take(self, reports: list[ColumnReport]) -> None:
        """Show ``reports`` (read in a worker) in place of the placeholder."""
        self.reports = reports
        self._layout(self.size.width)

    def on_resize(self, event: events.Resize) -> None:
        """Give the values column what room there is, so the list never scrolls sideways."""
        if self.size.width != self._width:
            self._layout(self.size.width)

    def _layout(self, width: int) -> None:
        self._width = width
        name = min(NAME_WIDTH, max(6, *(len(r.name) for r in self.reports))) if self.reports else NAME_WIDTH
        self._name_width = name
        self._values_width = max(8, width - name - USE_WIDTH - 8)
        row = self.cursor_row
        self.clear(columns=True)
        self.add_column("column", key="name", width=name)
        self.add_column("use", key="use", width=USE_WIDTH)
        self.add_column("values", key="values", width=self._values_width)
        for report in self.reports:
            self.add_row(*self._cells(report, name), key=report.name)
        self.move_cursor(row=max(0, row), animate=False)

    def _cells(self, report: ColumnReport, name_width: int = NAME_WIDTH) -> list[Text]:
        use = column_use(report, self.target, self.excluded, self.included)
        style = {"target": "bold reverse", "excluded": "dim strike", "skipped": "dim", ID: "dim"}.get(use, "")
        if report.name in self.included:
            values = "an id by its values, kept as a feature (x: an id again)"
        elif report.role in (EXCLUDED, ID) and report.note:
            values = report.note
        elif report.name in self.dates:
            values = "features: " + ", ".join(self.dates[report.name])
        else:
            values = ", ".join(map(short, report.examples))
            if report.role == DATETIME:
                values += " · f: date features"
        if report.n_missing:
            values += f" ({report.n_missing:,} missing)"
        cells = [Text(report.name, style=style), Text(use, style=style), Text(values)]
        for cell, width in zip(cells, (name_width, USE_WIDTH, self._values_width), strict=True):
            cell.truncate(width, overflow="ellipsis")
        return cells

    def show(self, target: str | None, excluded: set[str], dates: dict[str, tuple[str, ...]] | None = None,
             included: set[str] | None = None) -> None:
        """Show ``target``, the ``excluded`` columns, the chosen date features and the id columns
        ``included`` as features; return None."""
        self.target, self.excluded = target, set(excluded)
        if included is not None:
            self.included = set(included)
        if dates is not None:
            self.dates = dict(dates)
        if not self.reports:
            return
        width = self._name_width
        for report in self.reports:
            for key, cell in zip(("name", "use", "values"), self._cells(report, width), strict=True):
                self.update_cell(report.name, key, cell)

    def current(self) -> ColumnReport | None:
        """Return the report of the highlighted column, or None."""
        if not self.reports or self.cursor_row < 0:
            return None
        return self.reports[self.cursor_row]

    def action_pick_target(self) -> None:
        """Make the highlighted column the target."""
        report = self.current()
        if report is not None:
            self.post_message(self.TargetPicked(report.name))

    def action_toggle_exclude(self) -> None:
        """Exclude the highlighted column, or include it again."""
        report = self.current()
        if report is not None and report.name != self.target:
            self.post_message(self.ExclusionToggled(report.name))

    def action_date_features(self) -> None:
        """Ask to pick the date features of the highlighted dates column."""
        report = self.current()
        if report is not None:
            self.post_message(self.DatesAsked(report.name))
