"""Bounded memory for long chains: cached outputs kept at checkpoints, the others rebuilt when read.

Every stage's cumulative output on every row costs 8 bytes a row per raw score; at 100 stages
that is twice a 50-column matrix. A chain keeps the outputs of the last two stages (the current
one, and the one a step back lands on) and of every ``CHECKPOINT_EVERY``-th stage. Any other
stage's outputs are rebuilt when read, from the nearest kept outputs before it, by predicting the
stages between: output = previous + scale x prediction, the same sum with the same operands the
fit computed (a learner predicts the same rows to the same bits; ``tests/engine/test_checkpoints.py``
compares every stage of thinned chains with unthinned ones). The two most recently rebuilt
outputs are kept, so reading the stages in order rebuilds each once.

The trade-off (``bench/README.md``): memory of (2 + stages / CHECKPOINT_EVERY) outputs instead of
one per stage, against up to CHECKPOINT_EVERY - 1 predictions when an older stage's output is
read (a residual view of an old row, a drop, a second step back before the next fit).
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Iterator, Sequence
from typing import Any, overload

import numpy as np

from .outputs import block
from .tracks import Layout

#: a stage's outputs are kept when its position in the chain is a multiple of this
CHECKPOINT_EVERY = 10
#: how many rebuilt outputs are kept, most recent first
REBUILT_KEPT = 2

class RebuiltCache:
    """The outputs a chain rebuilt last (at most REBUILT_KEPT), so reading stages in order rebuilds each
    once; one per chain, so it goes with the chain."""

    def __init__(self) -> None:
        # keyed by the lazy outputs themselves (held here), never by an id another object could take over
        self.arrays: OrderedDict[Any, tuple[np.ndarray, ...]] = OrderedDict()
        self.lock = threading.Lock()

    def get(self, lazy: Any) -> tuple[np.ndarray, ...] | None:
        """Return the rebuilt outputs of ``lazy``, or None when they are not kept."""
        with self.lock:
            found = self.arrays.get(lazy)
            if found is not None:
                self.arrays.move_to_end(lazy)
            return found

    def put(self, lazy: Any, arrays: tuple[np.ndarray, ...]) -> None:
        """Keep ``arrays`` as the latest rebuild, letting go of the oldest beyond REBUILT_KEPT; return None."""
        with self.lock:
            self.arrays[lazy] = arrays
            self.arrays.move_to_end(lazy)
            while len(self.arrays) > REBUILT_KEPT:
                self.arrays.popitem(last=False)

    def clear(self) -> None:
        """Let go of every rebuilt output; return None."""
        with self.lock:
            self.arrays.clear()


class RebuiltOutputs(Sequence):
    """A stage's outputs per track, rebuilt from the stage before it when read (a tuple's interface)."""

    __hash__ = object.__hash__   # one stage's outputs: equal only to themselves

    def __init__(self, stage: Any, previous: Any, start: tuple[np.ndarray, ...], matrix: np.ndarray,
                 layout: Layout, n_features: int, outputs: int, cache: RebuiltCache) -> None:
        self.stage, self.previous, self.start, self.cache = stage, previous, start, cache
        self.matrix, self.layout, self.n_features, self.outputs = matrix, layout, n_features, outputs
        self.n_tracks = len(layout.tracks)

    def arrays(self) -> tuple[np.ndarray, ...]:
        """Return the outputs, rebuilt (or the copy rebuilt last)."""
        found = self.cache.get(self)
        if found is not None:
            return found
        # walk back to kept outputs, then predict forward: iterative, so no recursion depth limit
        pending = [self]
        before = self.previous
        while before is not None and isinstance(before.outputs, RebuiltOutputs):
            cached = before.outputs.cache.get(before.outputs)
            if cached is not None:
                base = cached
                break
            pending.append(before.outputs)
            before = before.outputs.previous
        else:
            base = self.start if before is None else before.outputs
        for lazy in reversed(pending):
            base = lazy._forward(base)
            lazy.cache.put(lazy, base)
        return base

    def _forward(self, before: tuple[np.ndarray, ...]) -> tuple[np.ndarray, ...]:
        from .fitting import feature_rows

        stage = self.stage
        out = []
        for t, track in enumerate(self.layout.tracks):
            rows = feature_rows(self.matrix, slice(0, track.n_rows), stage.feature_index, self.n_features)
            output = block(stage.learners[t].predict(rows), track.n_rows, self.outputs)
            out.append(before[t] + stage.scales[t] * output)
        return tuple(out)

    def __len__(self) -> int:
        return self.n_tracks

    @overload
    def __getitem__(self, index: int) -> np.ndarray: ...
    @overload
    def __getitem__(self, index: slice) -> tuple[np.ndarray, ...]: ...

    def __getitem__(self, index: Any) -> Any:
        return self.arrays()[index]

    def __iter__(self) -> Iterator[np.ndarray]:
        return iter(self.arrays())


def kept(position: int, n_stages: int, every: int = CHECKPOINT_EVERY) -> bool:
    """Return True when the stage at ``position`` (1-based) of a chain of ``n_stages`` keeps its outputs."""
    return position >= n_stages - 1 or position % every == 0


def thin(stages: Sequence[Any], start: tuple[np.ndarray, ...], matrix: np.ndarray, layout: Layout,
         n_features: int, outputs: int, every: int = CHECKPOINT_EVERY, cache: RebuiltCache | None = None) -> None:
    """Let go of the outputs of the stages that keep none (``kept``), to be rebuilt when read; return None.

    A stage whose outputs are let go of keeps a reference to the stage before it, whose own outputs
    (kept or rebuilt) it is predicted from. Outputs already let go of stay so.
    """
    cache = RebuiltCache() if cache is None else cache
    for i, stage in enumerate(stages):
        if kept(i + 1, len(stages), every) or isinstance(stage.outputs, RebuiltOutputs):
            continue
        previous = stages[i - 1] if i else None
        # the stage is immutable to its readers; only how its outputs are held changes, not their values
        object.__setattr__(stage, "outputs", RebuiltOutputs(stage, previous, start, matrix, layout, n_features,
                                                            outputs, cache))
