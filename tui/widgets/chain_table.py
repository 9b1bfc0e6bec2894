"""The chain table: one row per stage (row 0 is the start value); the selected row drives the other panes."""

from __future__ import annotations

from rich.text import Text
from textual import events
from textual.binding import Binding
from textual.message import Message
from textual.widgets import DataTable

from ..format import number, seconds, signed
from ..view import ChainView, StageRow

#: from these widths on, the table also shows the second metric, then the fit time
WIDE, WIDER = 56, 66
#: the mark column: best validation row, and a stage that lowered train error but raised validation error
BEST, OVERFIT = "*", "!"


def short_kind(kind: str) -> str:
    """Return a kind as the table shows it: ``sklearn:sklearn.svm.SVR`` as ``SVR``, at most 11 characters."""
    if kind.startswith("sklearn:"):
        kind = kind.rsplit(".", 1)[-1]
    return kind[:11]


class ChainTable(DataTable):
    """The stages of a chain with their scores; posts ``StageSelected`` when the cursor moves."""

    BINDINGS = [
        Binding("home", "scroll_top", "first row", show=False),
        Binding("end", "scroll_bottom", "last row", show=False),
    ]

    class StageSelected(Message):
        """The user moved to another row of the chain."""

        def __init__(self, row: int) -> None:
            self.row = row
            super().__init__()

    def __init__(self, *, timings: bool = True, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(cursor_type="row", zebra_stripes=False, id=id, classes=classes)
        self.timings = timings
        self.view: ChainView | None = None
        self.selected = 0
        self._wide = False
        self._width_class = 0

    @property
    def row_total(self) -> int:
        """Return the number of rows shown (stages plus the start value)."""
        return 0 if self.view is None else len(self.view.rows)

    def show(self, view: ChainView, select: int | None = None) -> None:
        """Show ``view``; move to row ``select`` (default: keep the row, within the new length)."""
        self.view = view
        target = self.selected if select is None else select
        self.selected = max(0, min(target, len(view.rows) - 1))
        self._rebuild()
        self.border_title = f"chain · {view.metric}" + (" · read-only" if view.read_only else "")
        spread = "  ± fold s.e." if view.kfold else ""
        self.border_subtitle = f"{BEST} best  {OVERFIT} overfit{spread}"

    def _columns(self) -> list[tuple[str, str]]:
        assert self.view is not None
        columns = [("#", "index"), (" ", "mark"), ("kind", "kind"), ("shrink", "shrinkage"),
                   ("train", "train"), ("valid", "valid"), ("change", "change")]
        if self.view.kfold:
            columns.append(("±", "spread"))
        if self.view.test_revealed:
            columns.append(("test", "test"))
        if self._wide:
            columns.append((f"v {self.view.second}", "second"))
            if self.timings and self.size.width >= WIDER:
                columns.append(("fit", "seconds"))
        return columns

    def _rebuild(self) -> None:
        """Lay the table out again; column widths are measured here, so they never lag the rows."""
        assert self.view is not None
        self._wide = self.size.width >= WIDE
        self._width_class = self._layout_width_class()
        self.clear(columns=True)
        columns = self._columns()
        rows = [[self._cell(row, key) for _, key in columns] for row in self.view.rows]
        for i, (label, key) in enumerate(columns):
            width = max([len(label)] + [cells[i].cell_len for cells in rows])
            self.add_column(Text(label, justify="left" if key in ("kind", "mark") else "right"), key=key,
                            width=width)
        for row, cells in zip(self.view.rows, rows, strict=True):
            self.add_row(*cells, key=str(row.index))
        self.move_cursor(row=self.selected, animate=False)

    def _cell(self, row: StageRow, key: str) -> Text:
        style = "bold" if row.best else ""
        if key == "index":
            return Text(str(row.index), justify="right", style=style)
        if key == "kind":
            return Text(short_kind(row.kind), style=style)
        if key == "mark":
            return Text((BEST if row.best else "") + (OVERFIT if row.overfit else ""), style="bold")
        if key == "shrinkage":
            return Text(f"{row.shrinkage:g}" if row.shrinkage is not None else "", justify="right")
        if key == "change":
            return Text(signed(row.change) if row.change is not None else "", justify="right")
        if key == "seconds":
            return Text(seconds(row.seconds) if row.index else "", justify="right")
        if key == "second":
            return Text(f"{round(row.second, 3) or 0.0:.3f}" if row.second is not None else "-", justify="right")
        value = {"train": row.train, "valid": row.valid, "test": row.test, "spread": row.spread}[key]
        return Text(number(value), justify="right", style=style if key == "valid" else "")

    def _layout_width_class(self) -> int:
        return (self.size.width >= WIDE) + (self.size.width >= WIDER)

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        """Tell the screen about a new selection (the cursor's real row, not a stale event's)."""
        event.stop()
        row = self.cursor_row
        if self.view is not None and row != self.selected and 0 <= row < len(self.view.rows):
            self.selected = row
            self.post_message(self.StageSelected(row))

    def on_resize(self, event: events.Resize) -> None:
        """Show or hide the extra columns when the table crosses the wide width."""
        if self.view is not None and self._layout_width_class() != self._width_class:
            self._rebuild()
