"""Raw outputs: a chain's cached output on a block of rows is an n x K float64 array.

K is the number of raw scores a row has: the class count of a multiclass chain (one score per
class, turned into probabilities by softmax), 1 for regression and binary chains. The chain, its
stages, scoring, saving, sessions and prediction hold (n, K) arrays for every task, so each is
written once. A learner that predicts one value per row returns a vector of n values; ``block``
makes it an (n, 1) view without a copy, so a one-output chain costs 8 bytes a row per stage, as
a vector would.

The edges squeeze: what users read of a one-output chain (its residuals, predictions, raw output,
the start value shown) is a vector or a number, through ``squeeze``.
"""

from __future__ import annotations

import numpy as np


def block(values: object, n_rows: int, outputs: int) -> np.ndarray:
    """Return a learner's prediction as a float64 (n_rows, outputs) array (a vector becomes one column).

    Raise ValueError when it has another shape.
    """
    array = np.asarray(values, dtype=np.float64)
    if array.ndim == 1 and outputs == 1:
        array = array.reshape(-1, 1)
    if array.shape != (n_rows, outputs):
        wanted = f"{n_rows:,} values" if outputs == 1 else f"{n_rows:,} rows of {outputs} values"
        raise ValueError(f"the learner predicted an array of shape {array.shape}, not {wanted}")
    return array


def squeeze(raw: np.ndarray) -> np.ndarray:
    """Return an (n, 1) array as its column (a view), and an (n, K) array with K > 1 as it is."""
    return raw[:, 0] if raw.ndim == 2 and raw.shape[1] == 1 else raw


def start_block(start: np.ndarray, n_rows: int, offset: np.ndarray | None = None) -> np.ndarray:
    """Return the start output of ``n_rows`` rows: each row holds ``start`` (K values), plus its offset.

    ``offset`` is on the raw scale, one value per row (or an (n, K) array): ``log(exposure)`` for a
    log link, None otherwise.
    """
    start = np.asarray(start, dtype=np.float64).reshape(-1)
    out = np.empty((n_rows, len(start)), dtype=np.float64)
    out[:] = start
    if offset is not None:
        offset = np.asarray(offset, dtype=np.float64)
        out += offset.reshape(n_rows, -1)
    return out
