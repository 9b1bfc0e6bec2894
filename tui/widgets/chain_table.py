"""The chain table: one row per stage (row 0 is the start value); the selected row drives the other panes.

The key columns always show: the stage, its marks (``*`` best, ``!`` overfit), kind, train and
validation metric and the change; the test score once revealed and the folds' spread (k-fold)
come next; then, as the width allows, the shrinkage, the second metric and the time. Each
column's numbers are written in one style (the engine's formatter). A kind too long for its
column ends in an ellipsis; the details pane names it in full.
"""

from __future__ import annotations

from rich.text import Text
from textual import events
from textual.binding import Binding
from textual.message import Message
from textual.widgets import DataTable

from ..format import column_text, seconds
from ..view import ChainView

#: the mark column: best validation row, and a stage that lowered train error but raised validation error
BEST, OVERFIT = "*", "!"
#: the longest kind shown before it is cut with an ellipsis
KIND_WIDTH = 12
#: columns in the order they are given room: key columns first
KEY = ("index", "mark", "kind", "train", "valid", "change")
OPTIONAL = ("test", "spread", "shrinkage", "second", "seconds")


def short_kind(kind: str, width: int = KIND_WIDTH) -> str:
    """Return a kind as the table shows it: ``sklearn:sklearn.svm.SVR`` as ``SVR``, an ellipsis past ``width``."""
    if kind.startswith("sklearn:"):
        kind = kind.rsplit(".", 1)[-1]
    return kind if len(kind) <= width else kind[: width - 1] + "…"


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
        super().__init__(cursor_type="row", zebra_stripes=False, id=id, classes=classes, cell_padding=0)
        self.timings = timings
        self.view: ChainView | None = None
        self.selected = 0
        self._width = -1
        self.shown: tuple[str, ...] = ()

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
        spread = "  ± fold std. error" if "spread" in self.shown else ""
        self.border_subtitle = f"{BEST} best  {OVERFIT} overfit{spread}"

    def _headers(self) -> dict[str, str]:
        view = self.view
        assert view is not None
        return {"index": "#", "mark": "", "kind": "kind", "train": "train", "valid": "valid", "change": "change",
                "test": "test", "spread": "±", "shrinkage": "shrink", "second": f"valid {view.second}",
                "seconds": "secs"}

    def _available(self) -> list[str]:
        view = self.view
        assert view is not None
        keys = list(KEY)
        for key in OPTIONAL:
            if key == "test" and not view.test_revealed:
                continue
            if key == "spread" and not view.kfold:
                continue
            if key == "seconds" and not self.timings:
                continue
            keys.append(key)
        return keys

    def _rebuild(self) -> None:
        """Lay the table out again; column widths are measured here, so they never lag the rows."""
        assert self.view is not None
        self._width = self.size.width
        cells = self._cells()
        headers = self._headers()
        widths = {key: max([len(headers[key])] + [c.cell_len for c in column]) + 1 for key, column in cells.items()}
        room = max(0, self.size.width - 2)
        shown, used = [], 0
        for key in self._available():
            if key in KEY or used + widths[key] <= room:
                shown.append(key)
                used += widths[key]
        self.shown = tuple(shown)
        self.clear(columns=True)
        for key in shown:
            left = key in ("kind", "mark")
            self.add_column(Text(headers[key] + (" " if left else ""), justify="left" if left else "right"),
                            key=key, width=widths[key])
        for i, stage_row in enumerate(self.view.rows):
            self.add_row(*(cells[key][i] for key in shown), key=str(stage_row.index))
        self.move_cursor(row=self.selected, animate=False)

    def _cells(self) -> dict[str, list[Text]]:
        assert self.view is not None
        rows = self.view.rows
        bold = ["bold" if r.best else "" for r in rows]

        def numbers(values: list[float | None], *, signed: bool = False, styled: bool = False) -> list[Text]:
            texts = column_text(values, signed=signed)
            return [Text(t, justify="right", style=bold[i] if styled else "") for i, t in enumerate(texts)]

        cells = {
            "index": [Text(str(r.index), justify="right", style=bold[i]) for i, r in enumerate(rows)],
            "mark": [Text((BEST if r.best else "") + (OVERFIT if r.overfit else ""), style="bold") for r in rows],
            "kind": [Text(short_kind(r.kind) + " ", style=bold[i]) for i, r in enumerate(rows)],
            "train": numbers([r.train for r in rows]),
            "valid": numbers([r.valid for r in rows], styled=True),
            "change": numbers([r.change for r in rows], signed=True),
            "test": numbers([r.test for r in rows]),
            "spread": numbers([r.spread for r in rows]),
            "shrinkage": [Text(f"{r.shrinkage:g}" if r.shrinkage is not None else "", justify="right") for r in rows],
            "second": numbers([r.second for r in rows]),
            "seconds": [Text(seconds(r.seconds) if r.index else "", justify="right") for r in rows],
        }
        return cells

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        """Tell the screen about a new selection (the cursor's real row, not a stale event's)."""
        event.stop()
        row = self.cursor_row
        if self.view is not None and row != self.selected and 0 <= row < len(self.view.rows):
            self.selected = row
            self.post_message(self.StageSelected(row))

    def on_resize(self, event: events.Resize) -> None:
        """Give the optional columns the room there is now."""
        if self.view is not None and self.size.width != self._width:
            self._rebuild()
