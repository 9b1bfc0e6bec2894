"""The rows a chain gets most wrong: the largest absolute residuals of a part.

The residual is the one users see, target minus prediction (for binary chains y - p, which is
also the log loss's pseudo-residual; for multiclass chains 1 - p of the row's own class, and
``fitted`` is that probability). Each row comes with its residual after every stage, so a
reader sees which stage helped it and which made it worse.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import StageSpecError
from ..scoring import shown_residual
from ..validation import Part
from .cache import remembered
from .rows import check_part, check_upto, encode_target, frame_positions, part_positions, part_raw

if TYPE_CHECKING:
    from ..chain import Chain
    from ..predictor import FittedChain


def largest_residuals(chain: Chain, n: int = 20, part: Part = "valid", upto: int | None = None, *,
                      ids: Any = None) -> pd.DataFrame:
    """Return the ``n`` rows of ``part`` with the largest absolute residual after row ``upto`` (default
    the last stage), largest first: ``position`` (row of the frame the chain was built from), ``id``
    (when ``ids`` is given: a sequence indexed by that position, such as the frame's id column),
    ``actual``, ``fitted`` (a probability for binary chains), ``residual``, and ``residual_after_0``
    (the start value) to ``residual_after_<upto>``."""
    n = _count(n)
    row = check_upto(len(chain.stages), upto)
    check_part(chain, part)

    def compute() -> pd.DataFrame:
        positions = part_positions(chain, part)
        y = chain.part_targets(part)
        after = np.column_stack([shown_residual(chain.loss, y, part_raw(chain, part, r)) for r in range(row + 1)])
        return _table(frame_positions(chain, positions), y, _fitted(chain.loss, y, part_raw(chain, part, row)), after, n)

    table = remembered(chain, list(chain.stages[:row]), ("largest", n, part), compute)
    if ids is not None:
        table.insert(1, "id", np.asarray(ids, dtype=object)[table["position"].to_numpy()])
    return table


def fitted_largest_residuals(fitted: FittedChain, frame: pd.DataFrame, n: int = 20, upto: int | None = None, *,
                             id_column: str | None = None) -> pd.DataFrame:
    """Return the ``n`` rows of ``frame`` (which holds the target) with the largest absolute residual
    of a loaded chain, as ``largest_residuals`` (``position`` is the row of ``frame``)."""
    n = _count(n)
    row = check_upto(len(fitted.stages), upto)
    target = fitted.schema.target
    if target not in frame.columns:
        raise StageSpecError(f"the frame has no target column {target!r}")
    if id_column is not None and id_column not in frame.columns:
        raise StageSpecError(f"the frame has no id column {id_column!r}")
    y = encode_target(fitted.schema, frame[target], "frame")
    matrix = fitted.encode(frame, source="frame")
    known = np.flatnonzero(~np.isnan(y))
    raws = [fitted.raw_from_matrix(matrix[known], r) for r in range(row + 1)]
    after = np.column_stack([shown_residual(fitted.loss, y[known], raw) for raw in raws])
    table = _table(known, y[known], _fitted(fitted.loss, y[known], raws[-1]), after, n)
    if id_column is not None:
        table.insert(1, id_column, frame[id_column].to_numpy()[table["position"].to_numpy()])
    return table


def _fitted(loss: Any, y: np.ndarray, raw: np.ndarray) -> np.ndarray:
    """Return the prediction of each row (for a multiclass chain, the probability of its own class)."""
    shown = loss.link(raw)
    if shown.ndim == 2 and shown.shape[1] > 1:
        return shown[np.arange(len(y)), np.asarray(y, dtype=np.intp)]
    return shown.reshape(-1)


def _table(positions: np.ndarray, y: np.ndarray, fitted: np.ndarray, after: np.ndarray, n: int) -> pd.DataFrame:
    residual = after[:, -1]
    # largest first; equal sizes keep the rows' order
    order = np.lexsort((positions, -np.abs(residual)))[:n]
    data: dict[str, Any] = {"position": positions[order].astype(np.int64), "actual": y[order],
                            "fitted": fitted[order], "residual": residual[order]}
    for k in range(after.shape[1]):
        data[f"residual_after_{k}"] = after[order, k]
    return pd.DataFrame(data)


def _count(n: int) -> int:
    if isinstance(n, bool) or not isinstance(n, int | np.integer) or n < 1:
        raise StageSpecError(f"n must be a whole number of at least 1, not {n!r}")
    return int(n)
