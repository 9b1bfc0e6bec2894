"""The stage table as text: aligned columns for a terminal, or CSV for other programs; and a
loaded chain file's settings and schema as text.

Both take the engine's ``StageTable`` (``stages.report.table.stage_rows`` of a live chain,
``fitted_rows`` of a loaded chain file) or its DataFrame (``Chain.table()``): columns ``stage,
kind, shrinkage, features, train_<metric>, valid_<metric>, change, valid_<second>, seconds,
overfit, best, step, step_rule`` and, when present, ``oob_improvement``, ``fold_spread`` and
``test_<metric>``. The text table leaves the step columns to ``describe_steps``. Every text cell
is formatted in one place, ``_cell``.
"""

from __future__ import annotations

import io
import math
from typing import TYPE_CHECKING, Any

import pandas as pd

from stages.report.numbers import column_text, number_text
from stages.report.table import StageTable, fitted_rows

if TYPE_CHECKING:
    from stages.predictor import FittedChain

#: headers shorter than the column names
HEADERS = {"valid_accuracy_at": "valid acc"}
FEATURES_WIDTH = 24


def _frame(table: StageTable | pd.DataFrame) -> pd.DataFrame:
    return table.frame() if isinstance(table, StageTable) else table


def _metric(table: pd.DataFrame) -> str:
    for column in table.columns:
        if column.startswith("train_"):
            return column.removeprefix("train_")
    raise ValueError("a stage table needs a train_<metric> column")


def _columns(table: pd.DataFrame) -> list[tuple[str, str, str]]:
    """Return (column, header, style) for each shown column; style is text, number, change or seconds."""
    metric = _metric(table)
    shown = [("stage", "stage", "int"), ("kind", "kind", "text"), ("shrinkage", "shrink", "shrink"),
             (f"train_{metric}", f"train {metric}", "number"), (f"valid_{metric}", f"valid {metric}", "number"),
             ("change", "change", "change")]
    for column in table.columns:
        if column.startswith("valid_") and column != f"valid_{metric}":
            shown.append((column, HEADERS.get(column, column.replace("_", " ", 1)), "number"))
    if "fold_spread" in table.columns:
        shown.append(("fold_spread", "fold se", "number"))
    if f"test_{metric}" in table.columns:
        shown.append((f"test_{metric}", f"test {metric}", "number"))
    if "oob_improvement" in table.columns:
        shown.append(("oob_improvement", "oob gain", "change"))
    shown += [("features", "features", "text"), ("seconds", "secs", "seconds"), ("flags", "flags", "text")]
    return shown


def _cell(value: Any, style: str) -> str:
    if style == "text":
        text = "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)
        return text if len(text) <= FEATURES_WIDTH else text[: FEATURES_WIDTH - 3] + "..."
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if style == "int":
        return str(int(value))
    if style == "shrink":
        return f"{float(value):g}"
    if style == "seconds":
        return f"{float(value):.2f}"
    return str(value)


def flags_of(row: pd.Series) -> str:
    """Return the short text flags of one table row: "best", "overfit", or both."""
    marks = []
    if bool(row.get("best", False)):
        marks.append("best")
    if bool(row.get("overfit", False)):
        marks.append("overfit")
    return " ".join(marks)


def format_table(table: StageTable | pd.DataFrame) -> str:
    """Return the stage table as aligned text: numbers right-aligned, text left-aligned."""
    table = _frame(table)
    table = table.assign(flags=[flags_of(row) for _, row in table.iterrows()])
    if "seconds" in table.columns:  # the start value takes no fit time: leave its cell empty
        table["seconds"] = table["seconds"].where(table["kind"] != "start")
    columns = _columns(table)
    # each column of numbers in one style (the engine's formatter): the digits that tell the stages apart
    numbers = {column: column_text(table[column], signed=style == "change") for column, _, style in columns
               if style in ("number", "change")}
    cells = [[header for _, header, _ in columns]]
    for i, (_, row) in enumerate(table.iterrows()):
        cells.append([numbers[column][i] if column in numbers else _cell(row.get(column), style)
                      for column, _, style in columns])
    widths = [max(len(line[j]) for line in cells) for j in range(len(columns))]
    lines = []
    for line in cells:
        parts = [text.ljust(width) if style == "text" else text.rjust(width)
                 for text, width, (_, _, style) in zip(line, widths, columns, strict=True)]
        lines.append("  ".join(parts).rstrip())
    return "\n".join(lines) + "\n"


def format_csv(table: StageTable | pd.DataFrame) -> str:
    """Return the stage table as CSV, every number at full precision, flags as true/false."""
    out = _frame(table).copy()
    for column in ("overfit", "best"):
        if column in out.columns:
            out[column] = out[column].map(lambda v: "true" if bool(v) else "false")
    buffer = io.StringIO()
    out.to_csv(buffer, index=False, lineterminator="\n")
    return buffer.getvalue()


def fitted_table(fitted: FittedChain) -> pd.DataFrame:
    """Return the stage table of a loaded chain file as a DataFrame (``fitted_rows(fitted).frame()``:
    the engine builds the rows, from the scores the manifest stored)."""
    return fitted_rows(fitted).frame()


def describe_chain(path: str, fitted: Any) -> str:
    """Return the settings of a loaded chain file, one ``name  value`` line each."""
    meta, schema = fitted.meta, fitted.schema
    task = schema.task + (f" (positive class {schema.positive_class!r})" if schema.positive_class else "")
    if schema.task == "multiclass":
        task += f" ({len(schema.classes)} classes: {', '.join(repr(c) for c in schema.classes)})"
    rows = meta.get("rows") or {}
    starts = [float(v) for v in fitted.start]
    start = number_text(starts[0]) if len(starts) == 1 else ", ".join(
        f"{c} {number_text(v)}" for c, v in zip(schema.classes, starts, strict=True))
    lines = [("chain file", path), ("target", f"{schema.target!r}, {task}"), ("loss", fitted.loss.name),
             ("start value", start), ("validation", _validation_text(meta.get("validation"))),
             ("seed", str(meta.get("seed"))), ("data", str(meta.get("source") or "")),
             ("rows", ", ".join(f"{rows[k]:,} {k}" for k in ("train", "valid", "test") if k in rows))]
    power = meta.get("power")
    if power is not None:
        lines[2] = ("loss", f"{fitted.loss.name} (power {float(power):g})")
    for key, what in (("exposure", "log(exposure) in the raw score; predictions per unit of exposure"),
                      ("weight", "row weights")):
        if meta.get(key) is not None:
            lines.insert(3, (key, f"{meta[key]!r} ({what})"))
    versions = meta.get("versions") or {}
    if versions:
        lines.append(("saved with", ", ".join(f"{k} {v}" for k, v in versions.items() if v)))
    width = max(len(name) for name, _ in lines)
    return "\n".join(f"{name.ljust(width)}  {value}" for name, value in lines) + "\n"


def _validation_text(spec: Any) -> str:
    from stages.validation import describe_stored

    return describe_stored(spec) or str(spec)  # an older or unusual manifest: shown as stored


#: how each level order reads in ``remnant show``
ORDER_TEXT = {"ordered": "as the ordered Categorical", "numeric": "by value", "text": "as text"}


def describe_schema(fitted: Any) -> str:
    """Return the chain's feature columns as an aligned table: column, role, dtype, levels, the
    order of the levels' codes, and what a missing value the fitting rows never had becomes."""
    cells = [("column", "role", "dtype", "levels", "level order", "a missing value")]
    for col in fitted.schema.columns:
        levels = str(len(col.levels)) if col.is_categorical else ""
        order = ORDER_TEXT.get(col.order, "as text") if col.is_categorical else ""
        if col.fill is not None:  # the fitting rows had none: no stage learnt what it means
            missing = f"takes {col.fill:.6g} (fitting median)"
        else:
            missing = "as each stage learnt it"
        cells.append((col.name, col.role, col.dtype, levels, order, missing))
    widths = [max(len(row[j]) for row in cells) for j in range(len(cells[0]))]
    lines = []
    for row in cells:
        parts = [*(c.ljust(w) for c, w in zip(row[:3], widths, strict=False)), row[3].rjust(widths[3]),
                 *(c.ljust(w) for c, w in zip(row[4:], widths[4:], strict=False))]
        lines.append("  ".join(parts).rstrip())
    return "\n".join(lines) + "\n"


def describe_steps(fitted: Any) -> str:
    """Return, per stage, its step and how the step was chosen, then each stage's notes."""
    cells = [("stage", "kind", "step", "step chosen by")]
    steps = column_text([stage.step for stage in fitted.stages])
    for number, (stage, step) in enumerate(zip(fitted.stages, steps, strict=True), start=1):
        cells.append((str(number), stage.kind, step, stage.step_rule or "not recorded"))
    widths = [max(len(row[j]) for row in cells) for j in range(4)]
    lines = ["  ".join((row[0].rjust(widths[0]), row[1].ljust(widths[1]), row[2].rjust(widths[2]), row[3])).rstrip()
             for row in cells]
    for number, stage in enumerate(fitted.stages, start=1):
        lines += [f"note: stage {number} ({stage.kind}): {note}" for note in stage.notes]
    return "\n".join(lines) + "\n"


def describe_coefficients(fitted: Any) -> str:
    """Return the coefficients of each linear, ridge, lasso or logistic stage of a loaded chain as
    aligned text ("" when it has none): one block per stage, one line per term."""
    from stages.understand.coefficient_table import LINEAR_KINDS

    blocks = []
    for k, stage in enumerate(fitted.stages, start=1):
        if stage.kind not in LINEAR_KINDS or fitted.task == "multiclass":
            continue
        table = fitted.coefficients(k)
        scale = "log-odds" if fitted.task == "binary" else f"{fitted.schema.target!r}"
        lines = [f"stage {k} ({stage.kind}): coefficients, per unit of each feature, in {scale}"]
        cells = [("term", "coefficient", "against")]
        for (_, row), text in zip(table.iterrows(), column_text(table["coefficient"]), strict=True):
            cells.append((str(row["term"]), text, str(row["reference"])))
        widths = [max(len(cell[j]) for cell in cells) for j in range(3)]
        for cell in cells:
            lines.append(f"{cell[0].ljust(widths[0])}  {cell[1].rjust(widths[1])}  {cell[2]}".rstrip())
        blocks.append("\n".join(lines) + "\n")
    return "\n".join(blocks)
