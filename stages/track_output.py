"""A fitted stage's prediction on every row of its track, from what its fit already knows where it can.

A learner may carry its prediction on the rows it was fit on (``fit_values``: a ``hist_tree``
grown as one more round of a kept booster reads it from LightGBM's training score, the same
bits as predicting them); then only the track's other rows are predicted. The values are read
once and let go of, so a stage holds no second copy of its output.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .tracks import Track


def track_prediction(learner: Any, matrix: np.ndarray, track: Track, features: tuple[int, ...],
                     n_all: int) -> np.ndarray:
    """Return ``learner``'s prediction on each of ``track``'s rows (the stage's columns of ``matrix``)."""
    from .fitting import feature_rows

    known = getattr(learner, "fit_values", None)
    if known is not None:
        learner.fit_values = None
    rows = slice(0, track.n_rows)
    if known is None or np.ndim(known) != 1:
        return learner.predict(feature_rows(matrix, rows, features, n_all))
    out = np.empty(track.n_rows, dtype=np.float64)
    out[track.fit] = known
    others = np.ones(track.n_rows, dtype=bool)
    others[track.fit] = False
    if isinstance(track.fit, slice) and (track.fit.start or 0) == 0:
        # holdout: the fitting rows come first, the rest is one block (a view)
        rest: Any = slice(track.fit.stop, track.n_rows)
    else:
        rest = np.flatnonzero(others)
    if others.any():
        out[rest] = learner.predict(feature_rows(matrix, rest, features, n_all))
    return out
