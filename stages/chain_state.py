"""The state of a chain beside its stages: random streams, the undo stack, and a consistent snapshot.

``Chain.state()`` returns a ``ChainState``; the operations over a chain (audition, sessions) read
the chain through it, never through the chain's private attributes.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .fitting import Stage
from .scoring import Scores

#: the state of one of the chain's random streams, as ``numpy.random.RandomState.get_state()`` gives it
StreamState = tuple[Any, ...]


@dataclass(frozen=True)
class Removal:
    """An undoable removal: what it was (step back, drop or trim), the stages before it and their scores."""

    action: str
    stages: tuple[Stage, ...]
    scores: tuple[Scores, ...]


@dataclass(frozen=True, eq=False)
class ChainState:
    """The chain at one moment, read under its lock: what an operation needs to work on the chain
    from another thread (an audition) or to save it (a session).

    ``stages`` are the current stages; ``outputs`` each track's raw output after the last one (the
    start value without stages) and ``scores`` its scores; ``streams`` the random streams' states, one
    per track; ``removals`` the undo stack, oldest first; the test part's reveal and reveal count.
    """

    stages: tuple[Stage, ...]
    outputs: tuple[np.ndarray, ...]
    scores: Scores
    streams: tuple[StreamState, ...]
    removals: tuple[Removal, ...]
    test_revealed: bool
    reveal_count: int

    def new_streams(self) -> list[np.random.RandomState]:
        """Return fresh random streams set to ``streams``: what the next fit would draw from."""
        rngs = []
        for state in self.streams:
            rng = np.random.RandomState()
            rng.set_state(state)
            rngs.append(rng)
        return rngs


def seeded_streams(seed: int, n_tracks: int) -> list[np.random.RandomState]:
    """Return the random streams of a chain with ``seed`` and ``n_tracks`` tracks, before any fit."""
    return [np.random.RandomState(seed)] + [np.random.RandomState([seed, t]) for t in range(1, n_tracks)]


def stream_state(rng: np.random.RandomState) -> StreamState:
    """Return the state of one random stream, as ``get_state()`` gives it (a tuple)."""
    return tuple(rng.get_state(legacy=True))


def same_stream(a: StreamState, b: StreamState) -> bool:
    """Return True when two random-stream states are the same state."""
    return a[0] == b[0] and np.array_equal(a[1], b[1]) and tuple(a[2:]) == tuple(b[2:])
