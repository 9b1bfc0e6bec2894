"""The questions the panes ask about a chain, each computed in a worker and named by the chain state.

A key names the question and the stages it is about (``stage_key``), so an answer stays good
exactly while those stages are in place: moving back to a stage shows its answer at once, and
a chain that changed asks afresh. Questions about the live chain (the scan, binned residuals,
partial dependence, coefficients, curves, largest residuals, calibration) go in the "chain"
lane; the residual histogram and its other views read only the snapshot ("view" lane).

At large sizes a bounded sample of rows is used where the statistic allows it (the scan and
binned residuals: ``SCAN_SAMPLE`` rows; partial dependence: ``DEPENDENCE_SAMPLE`` rows), and the
panes say how many rows they used.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd
from textual.message_pump import MessagePump

from . import figures
from .background import Question, on_state, stage_key
from .view import ChainView

#: rows the scan and the binned residuals use at most (fitting rows and scored rows each)
SCAN_SAMPLE = 200_000
#: rows partial dependence averages over at most
DEPENDENCE_SAMPLE = 2_000
#: rows the largest-residual view lists
LARGEST = 50


def _state(view: ChainView, row: int) -> tuple[int, ...]:
    return stage_key(view.stage_objects[:row])


def view_question(owner: MessagePump, view: ChainView, row: int, mode: str,
                  klass: int | None = None) -> Question | None:
    """Return the question behind a residual view that reads only the snapshot, or None without residuals;
    ``klass`` picks the class whose pseudo-residuals the histogram shows (multiclass; None: each row's own)."""
    source = view.residuals
    if source is None:
        return None
    compute: dict[str, Callable[[], Any]] = {
        "histogram": lambda: figures.residual_histogram(source, row, view.task, klass),
        "fitted": lambda: figures.against_fitted(source, row),
        "classes": lambda: figures.by_class(source, row, view.classes),
        "probabilities": lambda: figures.true_class_histogram(source, row),
    }
    key = (mode, klass if mode == "histogram" else None, id(source), _state(view, row))
    return Question(key, compute[mode], owner, "residuals")


def _chain_question(owner: MessagePump, chain: Any, view: ChainView, row: int, channel: str, key: tuple,
                    compute: Callable[[], Any]) -> Question:
    stages = view.stage_objects[:row]
    return Question((*key, _state(view, row)), lambda: on_state(chain, stages, compute), owner, channel, "chain")


def _sample(rows: int, most: int) -> int | None:
    return most if rows > most else None


def scan_question(owner: MessagePump, chain: Any, view: ChainView, row: int) -> Question:
    """Return the question of the residual scan after ``row`` (features ranked, best first)."""
    sample = _sample(view.n_rows, SCAN_SAMPLE)
    return _chain_question(owner, chain, view, row, "residuals", ("scan", sample),
                           lambda: chain.residual_scan(upto=row, sample=sample))


def binned_question(owner: MessagePump, chain: Any, view: ChainView, row: int, feature: str) -> Question:
    """Return the question of the validation residuals in the scan's bins of ``feature`` after ``row``."""
    sample = _sample(view.n_rows, SCAN_SAMPLE)
    numeric = chain.schema.columns[chain.schema.names.index(feature)].role == "numeric"

    def compute() -> figures.Binned:
        return figures.Binned.of(chain.binned_residuals(feature, upto=row, sample=sample), numeric)

    return _chain_question(owner, chain, view, row, "residuals", ("binned", feature, sample), compute)


def largest_question(owner: MessagePump, chain: Any, view: ChainView, row: int, ids: Any) -> Question:
    """Return the question of the validation rows with the largest residuals after ``row``;
    ``ids()`` gives the row ids (indexed by the frame's rows) or None."""

    def compute() -> pd.DataFrame:
        table = chain.largest_residuals(n=LARGEST, part="valid", upto=row)
        names = ids()
        if names is not None:  # looked up here for the few rows shown, not handed over whole
            table.insert(1, "id", names.iloc[table["position"].to_numpy()].to_numpy(dtype=object))
        return table

    return _chain_question(owner, chain, view, row, "residuals", ("largest", view.id_column), compute)


def calibration_question(owner: MessagePump, chain: Any, view: ChainView, row: int) -> Question:
    """Return the question of the calibration of a binary chain after ``row``, on the validation part."""

    def compute() -> tuple[figures.Calibration, pd.DataFrame]:
        table = chain.calibration(part="valid", bins=10, upto=row)
        return figures.Calibration.of(table), table

    return _chain_question(owner, chain, view, row, "residuals", ("calibration",), compute)


def confusion_question(owner: MessagePump, chain: Any, view: ChainView, row: int) -> Question:
    """Return the question of the confusion matrix of the validation part after ``row`` (true classes
    as rows, predicted ones as columns, in the chain's class order)."""
    return _chain_question(owner, chain, view, row, "residuals", ("confusion",),
                           lambda: chain.confusion(part="valid", row=row))


def learned_question(owner: MessagePump, chain: Any, view: ChainView, row: int, feature: str | None) -> Question:
    """Return the question of what stage ``row`` learned: its coefficients (linear kinds), its curves
    (spline) and its partial dependence on ``feature`` (the stage's contribution alone)."""
    kind = view.rows[row].kind
    sample = _sample(view.n_rows, DEPENDENCE_SAMPLE)

    def compute() -> dict[str, Any]:
        from stages.understand.coefficient_table import LINEAR_KINDS

        out: dict[str, Any] = {}
        if kind in LINEAR_KINDS:
            out["coefficients"] = chain.coefficients(row)
        if kind == "spline":
            out["curves"] = chain.curves(row, points=24)
        if feature is not None:
            out["dependence"] = chain.partial_dependence(feature, stage=row, sample=sample)
            out["dependence_rows"] = int(out["dependence"]["rows"].iloc[0]) if len(out["dependence"]) else 0
        return out

    return _chain_question(owner, chain, view, row, "details", ("learned", feature, sample), compute)


def read_ids(path: str, column: str) -> pd.Series:
    """Return the values of one column of a data file, one per row (the chain's row ids)."""
    from .predicting import iter_chunks

    chunks = [compact_ids(chunk[column]) for chunk in iter_chunks(path, [column], [column], 1_000_000)]
    return pd.concat(chunks, ignore_index=True) if chunks else pd.Series([], dtype="string")


def compact_ids(values: pd.Series) -> pd.Series:
    """Return row ids compactly, numbered from 0: whole numbers as int64, anything else as Arrow text
    (a few bytes a row, not a Python object each)."""
    if pd.api.types.is_integer_dtype(values.dtype) and not values.isna().any():
        return pd.Series(values.to_numpy(dtype=np.int64))
    return values.astype("string[pyarrow]").reset_index(drop=True)
