"""A fitted stage's prediction on every row of its track, from what its fit already knows where it can.

A learner may carry its prediction on the rows it was fit on (``fit_values``: a ``hist_tree``
grown as one more round of a kept booster reads it from LightGBM's training score, the same
bits as predicting them), and on the track's other rows when the fit was given them
(``other_values``, from the score LightGBM keeps for them as a validation set; ``track_values``
holds both in one array, the track's output as it is); then only the rows it does not know are
predicted. The values are read once and let go of, so a stage holds
no second copy of its output.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .tracks import Track


def other_rows(track: Track) -> slice | np.ndarray:
    """Return the track's rows it is not fit on: one block after the fitting rows (holdout), or positions."""
    if isinstance(track.fit, slice) and (track.fit.start or 0) == 0:
        # holdout: the fitting rows come first, the rest is one block (a view)
        return slice(track.fit.stop, track.n_rows)
    others = np.ones(track.n_rows, dtype=bool)
    others[track.fit] = False
    return np.flatnonzero(others)


def others_view(matrix: np.ndarray, track: Track, features: tuple[int, ...], n_all: int) -> np.ndarray | None:
    """Return the stage's columns of the track's other rows when they are a view of ``matrix`` (one
    block, every column), else None; None too when there are none."""
    rest = other_rows(track)
    if not isinstance(rest, slice) or rest.stop <= rest.start or features != tuple(range(n_all)):
        return None
    return matrix[rest]


def track_prediction(learner: Any, matrix: np.ndarray, track: Track, features: tuple[int, ...],
                     n_all: int) -> np.ndarray:
    """Return ``learner``'s prediction on each of ``track``'s rows (the stage's columns of ``matrix``)."""
    from .fitting import feature_rows

    known, known_others, whole = (_take(learner, name) for name in ("fit_values", "other_values", "track_values"))
    leading = isinstance(track.fit, slice) and (track.fit.start or 0) == 0
    if whole is not None and leading and np.shape(whole) == (track.n_rows,):
        return whole   # the fitting rows, then the others: the track's rows in order
    rows = slice(0, track.n_rows)
    if known is None or np.ndim(known) != 1:
        return learner.predict(feature_rows(matrix, rows, features, n_all))
    rest = other_rows(track)
    out = np.empty(track.n_rows, dtype=np.float64)
    out[track.fit] = known
    count = rest.stop - rest.start if isinstance(rest, slice) else len(rest)
    if count and known_others is not None and np.shape(known_others) == (count,):
        out[rest] = known_others
    elif count:
        out[rest] = learner.predict(feature_rows(matrix, rest, features, n_all))
    return out


def _take(learner: Any, name: str) -> Any:
    """Return the learner's values called ``name`` (None when it has none), letting go of them."""
    values = getattr(learner, name, None)
    if values is not None:
        setattr(learner, name, None)
    return values
