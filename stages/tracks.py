"""Tracks: the parallel chains behind one validation scheme.

A holdout-type scheme has one track, fit on the fitting rows and scored on the validation
rows. K-fold validation has the full track plus one track per fold, each fit on the other
folds; the validation score is the out-of-fold one. Rows are kept in chain order:
fitting rows first, then validation, then test, so the main track's fitting rows are a
contiguous block of the feature matrix (a view, not a copy).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import DataError
from .validation import Split


@dataclass(frozen=True)
class Track:
    """One chain over a block of rows: ``rows`` is ``slice(0, n_rows)`` of the chain's order.

    ``fit`` indexes into the track's rows; ``evaluate`` (fold tracks only) indexes the rows
    it scores out of fold.
    """

    n_rows: int
    fit: np.ndarray | slice
    evaluate: np.ndarray | None = None

    def fit_positions(self) -> np.ndarray:
        """Return the fitting rows as an index array."""
        if isinstance(self.fit, slice):
            return np.arange(self.fit.start or 0, self.fit.stop)
        return self.fit


@dataclass(frozen=True)
class Layout:
    """Where each part sits in chain order, and the tracks that are fit."""

    order: np.ndarray          # chain position -> position in the prepared rows
    n_train: int
    n_valid: int
    n_test: int
    tracks: tuple[Track, ...]

    @property
    def is_kfold(self) -> bool:
        """Return True when validation is out-of-fold over several tracks."""
        return len(self.tracks) > 1

    @property
    def train(self) -> slice:
        """Return the chain positions of the fitting rows."""
        return slice(0, self.n_train)

    @property
    def valid(self) -> slice:
        """Return the chain positions of the holdout validation rows (empty for k-fold)."""
        return slice(self.n_train, self.n_train + self.n_valid)

    @property
    def test(self) -> slice:
        """Return the chain positions of the locked test rows."""
        start = self.n_train + self.n_valid
        return slice(start, start + self.n_test)

    @property
    def n_rows(self) -> int:
        """Return the number of rows in the chain."""
        return self.n_train + self.n_valid + self.n_test


def build_layout(split: Split) -> Layout:
    """Return the chain order and tracks for ``split``."""
    order = np.concatenate([split.train, split.valid, split.test]).astype(np.int64)
    n_train, n_valid, n_test = len(split.train), len(split.valid), len(split.test)
    main = Track(n_rows=len(order), fit=slice(0, n_train))
    if not split.folds:
        return Layout(order, n_train, n_valid, n_test, (main,))
    # positions of each training row inside the chain order
    where = np.empty(int(order.max()) + 1, dtype=np.int64)
    where[split.train] = np.arange(n_train)
    tracks = [main]
    for fold in split.folds:
        held = np.sort(where[fold])
        mask = np.ones(n_train, dtype=bool)
        mask[held] = False
        tracks.append(Track(n_rows=n_train, fit=np.flatnonzero(mask), evaluate=held))
    return Layout(order, n_train, n_valid, n_test, tuple(tracks))


def classes_missing(layout: Layout, y: np.ndarray, n_classes: int) -> list[tuple[int, int]]:
    """Return (track, class code) for every class that has no row among a track's fitting rows
    (``y`` holds class codes in chain order); empty when every track's fitting rows hold every class."""
    missing: list[tuple[int, int]] = []
    for t, track in enumerate(layout.tracks):
        counts = np.bincount(np.asarray(y[: track.n_rows][track.fit], dtype=np.intp), minlength=n_classes)
        missing.extend((t, int(k)) for k in np.flatnonzero(counts == 0))
    return missing


def check_classes_fit(layout: Layout, y: np.ndarray, schema: Any, source: str) -> None:
    """Raise DataError naming the first class that has no row among a track's fitting rows."""
    missing = classes_missing(layout, y, len(schema.classes))
    if not missing:
        return
    track, code = missing[0]
    name = schema.classes[code]
    rows = int(np.count_nonzero(y == code))
    its = f"its {rows:,} row is" if rows == 1 else f"its {rows:,} rows are all"
    where = ("the train rows: " + its + " in the validation or test part" if track == 0 else
             f"the train rows of fold {track}: {its} held out in that fold")
    raise DataError(f"{source}: class {name!r} of target {schema.target!r} has no row among {where}; a class the "
                    "chain never fits on cannot be predicted (group it with another class, or drop its rows)")
