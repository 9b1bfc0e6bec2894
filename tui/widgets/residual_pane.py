"""The residual pane: where the selected stage's error lives, in several views (``v`` cycles them).

- ``histogram``: validation residuals over train residuals (the ends hold the 0.5 % tails);
- ``fitted``: validation residuals against fitted values (regression), or ``classes``: the
  predicted probabilities of each class (binary);
- ``feature``: the residual scan's ranking of the features (best candidate for the next stage
  on top, ``*`` where the signal stands out of its noise band, ``~`` where the spread does), and
  the validation residuals in the bins of the highlighted one; up and down move through the
  ranking, ``w`` ranks by the spread instead of the mean;
- ``largest``: the validation rows the chain gets most wrong, with their id;
- ``calibration`` (binary): predicted probability against the observed rate;
- ``probabilities`` (multiclass): the predicted probability of each row's true class, train over
  validation, and ``confusion``: the confusion matrix of the validation part.

On a multiclass chain the histogram shows one pseudo-residual a row: by default each row's own
class (1 - p_y); ``k`` (on the main screen) picks a class k instead (1[y = k] - p_k on every
row). The scan reads one residual a row, so on a multiclass chain its view says so.

Every figure is computed in a worker (``tui.answers``) and cached per chain state; until it
arrives the pane says what it is computing.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.message import Message
from textual.widgets import Static

from stages.losses import LOG_LINK_NAMES

from .. import answers
from ..background import Answered, Question
from ..confusion import confusion_text
from ..figures import Binned, Calibration, Histogram, Points
from ..format import column_text
from ..view import ChainView
from .residual_plot import ResidualPlot

if TYPE_CHECKING:
    from textual import getters

    from ..app import RemnantApp

#: the views one key cycles through, per task
MODES = {"regression": ("histogram", "fitted", "feature", "largest"),
         "binary": ("histogram", "classes", "feature", "largest", "calibration"),
         "multiclass": ("histogram", "probabilities", "confusion", "largest", "feature")}
#: what each view is called in the status line
MODE_NAMES = {"histogram": "histogram", "fitted": "against fitted values", "classes": "probabilities by class",
              "feature": "against a feature, ranked by the scan", "largest": "largest residuals",
              "calibration": "calibration", "probabilities": "probability of the true class",
              "confusion": "confusion matrix of the validation part"}
#: what the scan view says on a multiclass chain
SCAN_NOT_MULTICLASS = ("the residual scan ranks the features by one residual a row: it is for regression and "
                       "binary chains. A multiclass chain has one residual per class; the histogram (k picks "
                       "the class), the probabilities and the confusion matrix show where its error lives.")
#: the width of the scan's ranking beside the plot
RANKING_WIDTH = 22


def residual_word(loss: str) -> str:
    """Return what the histogram, the fitted view and the largest rows call a residual of ``loss``:
    a deviance residual on the log link (poisson, gamma, tweedie), else a residual."""
    return "deviance residual" if loss in LOG_LINK_NAMES else "residual"


def scan_word(loss: str) -> str:
    """Return what the scan's binned view calls its residual: y - mu on the log link (the response scale)."""
    return "residual y-mu" if loss in LOG_LINK_NAMES else "residual"


def stats_text(stats: dict[str, tuple[float, float]]) -> str:
    """Return ``mean±sd`` of each part, the means in one style and the spreads in another; a mean
    below a thousandth of its spread is shown as 0."""
    names = list(stats)
    means = [0.0 if abs(m) < 1e-3 * s else m for m, s in (stats[n] for n in names)]
    mean_text = column_text(means, digits=3, signed=True, missing="-")
    spread_text = column_text([stats[n][1] for n in names], digits=3, missing="-")
    return " ".join(f"{n} {m}±{s}" for n, m, s in zip(names, mean_text, spread_text, strict=True))


class ResidualPane(Vertical, can_focus=True):
    """The views of where the error lives; the screen sets ``chain``, ``ids`` and calls ``show``."""

    if TYPE_CHECKING:
        app = getters.app(RemnantApp)

    BINDINGS = [
        Binding("up", "move(-1)", "previous feature", show=False),
        Binding("down", "move(1)", "next feature", show=False),
        Binding("w", "rank_by", "rank by", tooltip="scan view: rank the features by the residual's mean or by its spread"),
    ]

    class FeaturePicked(Message):
        """The user highlighted ``feature`` in the scan's ranking."""

        def __init__(self, feature: str) -> None:
            self.feature = feature
            super().__init__()

    class Told(Message):
        """Something for the status line: ``text``."""

        def __init__(self, text: str) -> None:
            self.text = text
            super().__init__()

    def __init__(self, *, id: str | None = None, classes: str | None = None) -> None:
        super().__init__(id=id, classes=classes)
        self.view: ChainView | None = None
        self.chain: Any = None
        self.ids: Any = lambda: None
        self.row = 0
        self.mode = "histogram"
        self.feature: str | None = None
        self.by_spread = False
        #: the class whose pseudo-residuals the histogram shows (multiclass); None: each row's own class
        self.klass: int | None = None
        self.scan: pd.DataFrame | None = None
        self.wanted: Any = None
        self.plot = ResidualPlot(id="residual-plot")
        self.ranking = Static("", id="ranking", markup=False)
        self.rows_text = Static("", id="rows-text", markup=False)

    def compose(self) -> ComposeResult:
        """Return the ranking (scan view), the plot, and the rows (largest residuals)."""
        with Horizontal(id="residual-body"):
            yield self.ranking
            yield self.plot
        with VerticalScroll(id="rows-scroll"):
            yield self.rows_text

    def on_mount(self) -> None:
        """Start on the histogram."""
        self._arrange()

    # ----- what is shown --------------------------------------------------------------
    @property
    def modes(self) -> tuple[str, ...]:
        """Return the views of this chain's task."""
        return MODES[self.view.task if self.view else "regression"]

    def show(self, view: ChainView, row: int) -> None:
        """Show the view of row ``row`` of ``view`` in the current mode (asking for what is not known yet)."""
        self.view, self.row = view, row
        if self.mode not in self.modes:
            self.mode = "histogram"
        if view.task != "multiclass" or (self.klass is not None and self.klass >= len(view.classes)):
            self.klass = None
        self._arrange()
        self._ask()

    def next_mode(self) -> str:
        """Switch to the next view for this task and return its name."""
        modes = self.modes
        self.mode = modes[(modes.index(self.mode) + 1) % len(modes)] if self.mode in modes else modes[0]
        if self.view is not None:
            self.show(self.view, self.row)
        return MODE_NAMES[self.mode]

    def next_class(self) -> str:
        """Show the histogram of the next class's pseudo-residuals (after the last class, each row's own
        class again) and return what it shows."""
        classes = self.view.classes if self.view is not None else ()
        if not classes:
            return "no classes to pick"
        self.klass = 0 if self.klass is None else (None if self.klass + 1 >= len(classes) else self.klass + 1)
        self.mode = "histogram"
        if self.view is not None:
            self.show(self.view, self.row)
        return self.class_words()

    def class_words(self, formula: bool = True) -> str:
        """Return whose pseudo-residuals the histogram shows: a class, or each row's own class (with the
        formula, unless ``formula`` is False)."""
        if self.klass is None or self.view is None:
            return "each row's own class" + (" (1 - p of that class)" if formula else "")
        return f"class {self.view.classes[self.klass]}" + (" (1[y = k] - p_k on every row)" if formula else "")

    def _arrange(self) -> None:
        # beside the plot when both fit, else above it (a small terminal); only changes are set,
        # since each one lays the screen out again
        stacked = self.size.width < RANKING_WIDTH + 30
        if self.has_class("-stacked") != stacked:
            self.set_class(stacked, "-stacked")
        listed = self.mode in ("largest", "confusion")
        for widget, shown in ((self.ranking, self.mode == "feature" and not self._multiclass),
                              (self.query_one("#residual-body"), not listed),
                              (self.query_one("#rows-scroll"), listed)):
            if widget.display != shown:
                widget.display = shown

    def on_resize(self) -> None:
        """Show the ranking beside the plot when both fit, above it otherwise."""
        self._arrange()
        if self.mode == "feature" and self.scan is not None:
            self.call_after_refresh(self._show_ranking)

    @property
    def _multiclass(self) -> bool:
        return self.view is not None and self.view.task == "multiclass"

    def _where(self) -> str:
        return "start" if self.row == 0 else f"stage {self.row}"

    # ----- asking -----------------------------------------------------------------------
    def _ask(self) -> None:
        view = self.view
        if view is None or view.residuals is None:
            self.border_title = "residuals"
            self.plot.draw(None, "no residuals to show")
            return
        if self.mode == "feature" and self._multiclass:
            self.wanted = None
            self.border_title = f"scan · {self._where()} · not for a multiclass chain"
            self.border_subtitle = "v for the next view"
            self.plot.draw(None, SCAN_NOT_MULTICLASS)
            return
        question = self._question()
        if question is None:
            return
        self.wanted = question.key
        known, answer = self.app.ask(question)
        if known:
            self._take(answer)
        else:
            self._waiting()

    def _question(self) -> Question | None:
        view, chain, row = self.view, self.chain, self.row
        if view is None:
            return None
        if self.mode in ("histogram", "fitted", "classes", "probabilities"):
            return answers.view_question(self, view, row, self.mode, self.klass)
        if chain is None:
            return None
        if self.mode == "confusion":
            return answers.confusion_question(self, chain, view, row)
        if self.mode == "feature":
            if self.scan is None or self.scan.attrs.get("state") != answers.stage_key(view.stage_objects[:row]):
                return answers.scan_question(self, chain, view, row)
            return answers.binned_question(self, chain, view, row, self._current_feature())
        if self.mode == "largest":
            return answers.largest_question(self, chain, view, row, self.ids)
        return answers.calibration_question(self, chain, view, row)

    def _waiting(self) -> None:
        what = {"histogram": "binning the residuals", "fitted": "sampling the residuals",
                "classes": "binning the probabilities", "feature": "scanning the features",
                "largest": "finding the largest residuals", "calibration": "binning the probabilities",
                "probabilities": "binning the probabilities", "confusion": "counting the classes"}[self.mode]
        if self.mode == "feature" and self.scan is not None:
            what = f"binning the residuals by {self._current_feature()}"
        if self.app.fitting and self.mode in ("feature", "largest", "calibration", "confusion"):
            what += " (after the fit)"
        if self.mode in ("largest", "confusion"):
            self.rows_text.update(Text(f"… {what}", style="dim"))
        else:
            self.plot.draw(None, f"… {what}")

    def on_answered(self, event: Answered) -> None:
        """Take an answer the worker computed, when it is the one this pane waits for."""
        event.stop()
        if event.key != self.wanted:
            return
        if event.error:
            self.plot.draw(None, f"cannot show this: {event.error}")
            self.rows_text.update(Text(f"cannot show this: {event.error}", style="dim"))
            return
        self._take(event.answer)

    def _take(self, answer: Any) -> None:
        if self.view is None:
            return
        if isinstance(answer, pd.DataFrame) and "score" in answer.columns:
            answer.attrs["state"] = answers.stage_key(self.view.stage_objects[:self.row])
            self.scan = answer
            if self.feature not in set(answer["feature"]):
                self.feature = self._ranked()[0] if len(answer) else None
                if self.feature is not None:
                    self.post_message(self.FeaturePicked(self.feature))
            self._show_ranking()
            self._ask()
            return
        if isinstance(answer, Histogram):
            self._histogram(answer)
        elif isinstance(answer, Points):
            self.border_title = f"valid {residual_word(self.view.loss)} against fitted · {self._where()}"
            self.border_subtitle = f"{len(answer.x):,} of {answer.total:,} rows"
            self.plot.draw(answer)
        elif isinstance(answer, Binned):
            self._binned(answer)
        elif isinstance(answer, tuple) and isinstance(answer[0], Calibration):
            self._calibration(*answer)
        elif isinstance(answer, pd.DataFrame) and answer.index.name == "true":
            self._confusion(answer)
        elif isinstance(answer, pd.DataFrame):
            self._largest(answer)

    # ----- the views ------------------------------------------------------------------
    def _histogram(self, figure: Histogram) -> None:
        assert self.view is not None
        where = self._where()
        if self.mode == "classes":
            negative, positive = list(figure.counts)
            self.border_title = f"valid probability · {where} · █ class {negative} • class {positive}"
            total = {name: int(c.sum()) for name, c in figure.counts.items()}
            self.border_subtitle = f"rows: {negative} {total[negative]:,} · {positive} {total[positive]:,}"
        elif self.mode == "probabilities":
            self.border_title = f"probability of the true class · {where} · █ train • valid"
            self.border_subtitle = f"mean±sd {stats_text(figure.stats)}" if figure.stats else ""
        elif self._multiclass:
            self.border_title = f"pseudo-residuals of {self.class_words(False)} · {where} · █ train • valid"
            self.border_subtitle = "k picks the class" + (f" · mean±sd {stats_text(figure.stats)}" if figure.stats else "")
        else:
            word = "pseudo-residuals y-p" if self.view.task == "binary" else residual_word(self.view.loss) + "s"
            self.border_title = f"{word} · {where} · █ train • valid"
            if figure.folded and len(self.border_title) + 22 < self.size.width:
                self.border_title += " · 0.5% tails at ends"
            self.border_subtitle = f"mean±sd {stats_text(figure.stats)}" if figure.stats else ""
        self.plot.draw(figure)

    def _ranked(self) -> list[str]:
        if self.scan is None:
            return []
        column = "spread_score" if self.by_spread else "score"
        ordered = self.scan.sort_values([column, "feature"], ascending=[False, True], kind="mergesort")
        return list(ordered["feature"])

    def _current_feature(self) -> str:
        ranked = self._ranked()
        if self.feature not in ranked:
            self.feature = ranked[0]
        return self.feature

    def _show_ranking(self) -> None:
        if self.scan is None:
            return
        scan = self.scan.set_index("feature")
        column = "spread_score" if self.by_spread else "score"
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append("by spread\n" if self.by_spread else "by mean\n", style="bold")
        name_width = max(8, (self.ranking.size.width or RANKING_WIDTH) - 9)
        ranked = self._ranked()
        room = max(1, (self.ranking.size.height or len(ranked) + 1) - 1)
        at = ranked.index(self.feature) if self.feature in ranked else 0
        first = max(0, min(at - room // 2, len(ranked) - room))  # the highlighted feature stays in view
        for name in ranked[first:first + room]:
            row = scan.loc[name]
            mark = ("*" if row["stands_out"] else " ") + ("~" if row["spread_stands_out"] else " ")
            chosen = name == self.feature
            value = row[column] if self.by_spread else row["share"]
            percent = round(value * 100) if np.isfinite(value) else None
            shown = f"{percent or 0:4d}%" if percent is not None else "   -"  # never "-0%"
            shortened = name if len(name) <= name_width else name[: name_width - 1] + "…"
            line = f"{'▸' if chosen else ' '}{shortened:<{name_width}}{shown}{mark}"
            text.append(line + "\n", style="reverse" if chosen else "")
        self.ranking.update(text)

    def _binned(self, figure: Binned) -> None:
        scan = self.scan.set_index("feature") if self.scan is not None else None
        rank = self._ranked().index(figure.feature) + 1 if figure.feature in self._ranked() else 0
        word = scan_word(self.view.loss) if self.view is not None else "residual"
        self.border_title = f"valid {word} by {figure.feature} · {self._where()} · █ mean ·· ±sd"
        used = ""
        if scan is not None and figure.feature in scan.index:
            record = scan.loc[figure.feature]
            flags = []
            if record["stands_out"]:
                flags.append("* signal")
            if record["spread_stands_out"]:
                flags.append("~ spread")
            used = f" · scan {rank} of {len(scan)}" + (f" ({', '.join(flags)})" if flags else "")
            used += f" · {int(record['scored_rows']):,} rows"
        self.border_subtitle = f"↑↓ feature{used}"
        self.plot.draw(figure)

    def _largest(self, table: pd.DataFrame) -> None:
        assert self.view is not None
        has_id = "id" in table.columns
        name = (self.view.id_column or "id") if has_id else "row"
        before = f"residual_after_{self.row - 1}" if self.row else None
        multiclass = self._multiclass
        classes = self.view.classes
        cells = {
            name: [str(v) for v in (table["id"] if has_id else table["position"] + 1)],
            "actual": ([classes[int(c)] for c in table["actual"]] if multiclass
                       else column_text(table["actual"], distinguish=False)),
            ("p of it" if multiclass else "fitted"): column_text(table["fitted"], distinguish=False),
            "residual": column_text(table["residual"], signed=True, distinguish=False),
        }
        if before is not None:
            cells["before"] = column_text(table[before], signed=True, distinguish=False)
        widths = {k: max(len(k), *(len(v) for v in values)) if values else len(k) for k, values in cells.items()}
        text = Text(no_wrap=True, overflow="ellipsis")
        header = "  ".join(k.ljust(widths[k]) if k == name else k.rjust(widths[k]) for k in cells)
        text.append(header + "\n", style="bold")
        for i in range(len(table)):
            parts = [cells[k][i].ljust(widths[k]) if k == name else cells[k][i].rjust(widths[k]) for k in cells]
            text.append("  ".join(parts) + "\n")
        self.rows_text.update(text)
        self.border_title = f"largest valid {residual_word(self.view.loss)}s · {self._where()}"
        rows = self.view.residuals.targets("valid").size if self.view.residuals is not None else len(table)
        self.border_subtitle = f"{len(table)} of {rows:,} rows" + (" · before: the stage before" if before else "")

    def _confusion(self, table: pd.DataFrame) -> None:
        room = (self.query_one("#rows-scroll").size.width or self.size.width - 2) - 3  # padding and scrollbar
        self.rows_text.update(confusion_text(table, room))
        counts = table.to_numpy()
        total = int(counts.sum())
        right = int(np.trace(counts))
        self.border_title = f"confusion matrix · valid · {self._where()}"
        share = column_text([right / total], digits=3)[0] if total else "-"
        self.border_subtitle = f"accuracy {share} of {total:,} rows · rows: true class, columns: predicted"

    def _calibration(self, figure: Calibration, table: pd.DataFrame) -> None:
        self.border_title = f"calibration · {self._where()} · ● observed rate ·· perfect"
        self.border_subtitle = f"10 bins of predicted probability · {int(table['rows'].sum()):,} valid rows"
        self.plot.draw(figure)

    # ----- keys -------------------------------------------------------------------------
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """Offer the feature keys only in the scan view (elsewhere up and down scroll the rows)."""
        if action in ("move", "rank_by"):
            return self.mode == "feature" and self.scan is not None
        return True

    def action_move(self, step: int) -> None:
        """Highlight the previous or next feature of the ranking."""
        ranked = self._ranked()
        if not ranked:
            return
        at = ranked.index(self._current_feature())
        self.feature = ranked[max(0, min(len(ranked) - 1, at + step))]
        self._show_ranking()
        self.post_message(self.FeaturePicked(self.feature))
        self._ask()

    def action_rank_by(self) -> None:
        """Rank the features by the residual's spread, or by its mean again."""
        self.by_spread = not self.by_spread
        self._show_ranking()
        self.post_message(self.Told(
            "scan ranked by " + ("where the residual's spread widens" if self.by_spread else "the residual signal left")))
        self._ask()
