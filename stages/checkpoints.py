"""Bounded memory for long chains: cached outputs kept at checkpoints, the others rebuilt when read.

Every stage's cumulative output on every row costs 8 bytes a row per raw score; at 100 stages
that is twice a 50-column matrix. A chain keeps the outputs of every ``CHECKPOINT_EVERY``-th
stage and of every stage after the checkpoint at or below its last but ``TAIL`` (its last
``TAIL`` to ``TAIL + CHECKPOINT_EVERY - 1`` stages), so at least ``TAIL - 1`` step backs in a
row land on kept outputs however fast they come. Any other stage's outputs are rebuilt when
read, from the nearest kept outputs before it, by predicting the stages between: output =
previous + scale x prediction, the same sum with the same operands the fit computed (a learner predicts the same rows to the
same bits; ``tests/engine/test_checkpoints.py`` compares every stage of thinned chains with
unthinned ones, also after random sequences of fits, step backs, drops, trims and undos).

After a change that needs no fit (a step back, trim or undo) the chain also wants every stage
after the checkpoint before the last one (``kept(..., ahead=True)``; with the defaults the last
10 to 19 stages), the segment a run of step backs reaches next. One background thread
rebuilds what it wants and does not hold (``RebuiltCache.refill``), newest first; a step back
while it runs lets it go on. A read of an output it is rebuilding waits for it; a fit stops it
(``RebuiltCache.stop``), so the fit has the cores to itself. Stages whose learners predict each
row from that row alone (``predicts_row_by_row``: the hist_tree kind's one tree) are rebuilt a
block of ``BLOCK_ROWS`` rows at a time, every stage of a run on one block before the next, so
each block of the matrix is read from memory once, not once a stage.

Stages a step back or trim removed (kept for undo) keep their outputs only at checkpoints and
within ``TAIL`` stages after the chain's last, so ``TAIL`` undos in a row stay quick. The two
most recently rebuilt outputs are kept, so reading old stages in order rebuilds each once.

The trade-off (``bench/README.md``): after fits at most n / CHECKPOINT_EVERY + TAIL +
CHECKPOINT_EVERY outputs instead of n; after step backs up to about another CHECKPOINT_EVERY,
and TAIL of the stages removed. The price is time: reading an older stage's output (a residual
view of an old row, a drop) predicts up to CHECKPOINT_EVERY - 1 stages, and a run of step backs
faster than the background rebuild waits for it.
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
#: the outputs of at least this many last stages are kept
TAIL = 6
#: how many rebuilt outputs are kept, most recent first
REBUILT_KEPT = 2
#: rows predicted at a time when a run of row-by-row stages is rebuilt (a block of a 50-column
#: matrix is then 6.4 MB, which stays in the processor's cache while every stage of the run reads it)
BLOCK_ROWS = 16_384


def kept(position: int, n_stages: int, every: int = CHECKPOINT_EVERY, tail: int = TAIL, ahead: bool = False) -> bool:
    """Return True when the stage at ``position`` (1-based) of a chain of ``n_stages`` keeps its outputs.

    Kept: every ``every``-th stage, and every stage after the checkpoint at or below ``n_stages -
    tail`` (the last ``tail`` to ``tail + every - 1``: a rebuild of the last ``tail`` would
    predict those anyway); with ``ahead`` (after a step back, trim or undo) also every stage after
    the checkpoint before the last one at or below ``n_stages``, the segment a run of step backs
    reaches next.
    """
    if position % every == 0 or position > every * (max(0, n_stages - tail) // every):
        return True
    return ahead and position > every * (n_stages // every - 1)


class RebuiltCache:
    """A chain's rebuilt outputs: the ones rebuilt last (at most REBUILT_KEPT), so reading stages
    in order rebuilds each once, and the background rebuild of the outputs the chain wants kept;
    one per chain, so it goes with the chain."""

    def __init__(self) -> None:
        # keyed by the lazy outputs themselves (held here), never by an id another object could take over
        self.arrays: OrderedDict[Any, tuple[np.ndarray, ...]] = OrderedDict()
        self.lock = threading.Lock()
        self.changed = threading.Condition(self.lock)
        #: the lazy outputs the chain wants kept: a rebuild of one of them is held by its stage
        self.wanted: set[Any] = set()
        #: the lazy outputs the background rebuild will produce; a read of one waits for it
        self.pending: set[Any] = set()
        self._cancel = threading.Event()
        self._thread: threading.Thread | None = None

    def get(self, lazy: Any) -> tuple[np.ndarray, ...] | None:
        """Return the rebuilt outputs of ``lazy``, or None when they are not kept."""
        with self.lock:
            return self._found(lazy)

    def _found(self, lazy: Any) -> tuple[np.ndarray, ...] | None:
        found = self.arrays.get(lazy)
        if found is not None:
            self.arrays.move_to_end(lazy)
            return found
        held = lazy.stage.outputs
        return None if isinstance(held, RebuiltOutputs) else held

    def wait(self, lazy: Any) -> tuple[np.ndarray, ...] | None:
        """Return the outputs of ``lazy`` once the background rebuild has them, or None when it is not rebuilding them."""
        with self.lock:
            while True:
                found = self._found(lazy)
                if found is not None or lazy not in self.pending:
                    return found
                self.changed.wait()

    def worth_keeping(self, run: Sequence[Any]) -> list[bool]:
        """Return, for each lazy output of ``run`` (consecutive, oldest first), whether a rebuild of
        it is worth keeping: the chain wants it, or it is among the last REBUILT_KEPT."""
        with self.lock:
            return [lazy in self.wanted or i >= len(run) - REBUILT_KEPT for i, lazy in enumerate(run)]

    def put(self, lazy: Any, arrays: tuple[np.ndarray, ...]) -> None:
        """Keep ``arrays`` as the latest rebuild of ``lazy`` (held by its stage when the chain wants
        them kept), letting go of the oldest beyond REBUILT_KEPT; return None."""
        with self.lock:
            self._keep(lazy, arrays)

    def _keep(self, lazy: Any, arrays: tuple[np.ndarray, ...]) -> None:
        if lazy in self.wanted and lazy.stage.outputs is lazy:
            self.wanted.discard(lazy)
            # the stage is immutable to its readers; only how its outputs are held changes, not their values
            object.__setattr__(lazy.stage, "outputs", arrays)
            return
        self.arrays[lazy] = arrays
        self.arrays.move_to_end(lazy)
        while len(self.arrays) > REBUILT_KEPT:
            self.arrays.popitem(last=False)

    def clear(self) -> None:
        """Stop the background rebuild and let go of every rebuilt output; return None."""
        self.stop()
        with self.lock:
            self.arrays.clear()

    def stop(self) -> None:
        """Stop the background rebuild (it ends after the block of rows it is on); return None."""
        self._cancel.set()
        with self.lock:
            self.pending.clear()
            self.changed.notify_all()

    def join(self, timeout: float | None = None) -> bool:
        """Wait for the background rebuild to end; return True when it has (or none runs)."""
        thread = self._thread
        if thread is not None:
            thread.join(timeout)
            return not thread.is_alive()
        return True

    def refill(self, missing: Sequence[RebuiltOutputs]) -> None:
        """Rebuild ``missing`` (newest first) in one background thread, after stopping the one
        running; each is held by its stage when done, if the chain still wants it. Return None."""
        thread = self._thread
        with self.lock:
            going = thread is not None and thread.is_alive() and not self._cancel.is_set()
            if going and set(missing) <= self.pending:
                return   # the rebuild running makes them already: let it go on, not start again
        self.stop()
        if not missing:
            return
        cancel = threading.Event()
        self._cancel = cancel
        with self.lock:
            self.pending = set(missing)
        # the outputs are allocated here, in the chain's thread: freed later by the chain's thread,
        # they go back where the chain's other arrays come from, not to the rebuild thread's own
        # allocator arena, where they would stay resident (np.empty touches no page yet)
        buffers = {lazy: tuple(np.empty_like(start) for start in lazy.start) for lazy in missing}
        thread = threading.Thread(target=self._rebuild, args=(list(missing), cancel, buffers), daemon=True,
                                  name="remnant-rebuild")
        self._thread = thread
        thread.start()

    def _rebuild(self, missing: list[RebuiltOutputs], cancel: threading.Event,
                 buffers: dict[Any, tuple[np.ndarray, ...]]) -> None:
        try:
            for lazy in missing:
                if cancel.is_set():
                    return
                if self.get(lazy) is not None:
                    continue
                run, base = lazy.run_back()
                built = forward(run, base, cancel, self.worth_keeping(run), buffers)
                if built is None:
                    return
                with self.lock:
                    if cancel.is_set():
                        return
                    for done, arrays in zip(run, built, strict=True):
                        if arrays is not None:
                            self._keep(done, arrays)
                        self.pending.discard(done)
                    self.changed.notify_all()
        finally:
            with self.lock:
                if self._cancel is cancel:
                    self.pending.clear()
                self.changed.notify_all()


class RebuiltOutputs(Sequence):
    """A stage's outputs per track, rebuilt from the stage before it when read (a tuple's interface)."""

    __hash__ = object.__hash__   # one stage's outputs: equal only to themselves

    def __init__(self, stage: Any, previous: Any, start: tuple[np.ndarray, ...], matrix: np.ndarray,
                 layout: Layout, n_features: int, outputs: int, cache: RebuiltCache) -> None:
        self.stage, self.previous, self.start, self.cache = stage, previous, start, cache
        self.matrix, self.layout, self.n_features, self.outputs = matrix, layout, n_features, outputs
        self.n_tracks = len(layout.tracks)

    def arrays(self) -> tuple[np.ndarray, ...]:
        """Return the outputs: held, rebuilt in the background (waited for) or rebuilt now."""
        found = self.cache.wait(self)
        if found is not None:
            return found
        run, base = self.run_back()
        built = forward(run, base, None, self.cache.worth_keeping(run))
        assert built is not None  # never cancelled
        for lazy, arrays in zip(run, built, strict=True):
            if arrays is not None:
                lazy.cache.put(lazy, arrays)
        last = built[-1]
        assert last is not None  # the last is always kept
        return last

    def run_back(self) -> tuple[list[RebuiltOutputs], tuple[np.ndarray, ...]]:
        """Return the lazy outputs from the nearest kept ones before this up to this, oldest first,
        and those kept outputs (the start's when none are)."""
        # iterative, so no recursion depth limit
        pending = [self]
        before = self.previous
        while before is not None and isinstance(before.outputs, RebuiltOutputs):
            cached = before.outputs.cache.get(before.outputs)
            if cached is not None:
                return pending[::-1], cached
            pending.append(before.outputs)
            before = before.outputs.previous
        return pending[::-1], (self.start if before is None else before.outputs)

    def _prediction(self, t: int, rows: slice, n_rows: int) -> np.ndarray:
        from .fitting import feature_rows

        X = feature_rows(self.matrix, rows, self.stage.feature_index, self.n_features)
        return block(self.stage.learners[t].predict(X), n_rows, self.outputs)

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


def row_by_row(lazy: RebuiltOutputs) -> bool:
    """Return True when every learner of ``lazy``'s stage predicts each row from that row alone, to
    the same bits in any block of rows (its ``predicts_row_by_row``)."""
    return all(getattr(learner, "predicts_row_by_row", False) for learner in lazy.stage.learners)


def forward(run: Sequence[RebuiltOutputs], base: tuple[np.ndarray, ...], cancel: threading.Event | None,
            keep: Sequence[bool], buffers: dict[Any, tuple[np.ndarray, ...]] | None = None,
            ) -> list[tuple[np.ndarray, ...] | None] | None:
    """Return the outputs of each stage of ``run`` (consecutive stages, oldest first), predicted
    forward from ``base``, the outputs before the first: those ``keep`` marks, None for the others
    (the last is always returned), written into ``buffers`` (by lazy output) where it has them;
    None when ``cancel`` is set first.

    Row-by-row stages next to each other are predicted a block of rows at a time, the block read
    by all of them in turn (the outputs not kept exist a block at a time); the others on all rows
    at once. Either way each output is previous + scale x prediction, the fit's own sum, to the same bits.
    """
    keep = [*keep[:-1], True]
    built: list[tuple[np.ndarray, ...] | None] = []
    i = 0
    while i < len(run):
        j = i + 1
        if row_by_row(run[i]):
            while j < len(run) and row_by_row(run[j]):
                j += 1
            # the last of a stretch is the next one's base
            done = _forward_in_blocks(run[i:j], base, cancel, [*keep[i:j - 1], True], buffers or {})
        else:
            done = [_forward_whole(run[i], base, (buffers or {}).get(run[i]))]
        if done is None or (cancel is not None and cancel.is_set()):
            return None
        last = done[-1]
        assert last is not None
        built.extend(arrays if kept_one else None for arrays, kept_one in zip(done, keep[i:j], strict=True))
        base = last
        i = j
    return built


def _forward_whole(lazy: RebuiltOutputs, before: tuple[np.ndarray, ...],
                   into: tuple[np.ndarray, ...] | None) -> tuple[np.ndarray, ...]:
    stage = lazy.stage
    out = []
    for t, track in enumerate(lazy.layout.tracks):
        step = stage.scales[t] * lazy._prediction(t, slice(0, track.n_rows), track.n_rows)
        out.append(before[t] + step if into is None else np.add(before[t], step, out=into[t]))
    return tuple(out)


def _forward_in_blocks(run: Sequence[RebuiltOutputs], base: tuple[np.ndarray, ...], cancel: threading.Event | None,
                       keep: Sequence[bool], buffers: dict[Any, tuple[np.ndarray, ...]],
                       ) -> list[tuple[np.ndarray, ...] | None] | None:
    layout = run[0].layout
    built = [(buffers.get(lazy) or tuple(np.empty_like(b) for b in base)) if kept_one else None
             for lazy, kept_one in zip(run, keep, strict=True)]
    for t, track in enumerate(layout.tracks):
        for start in range(0, track.n_rows, BLOCK_ROWS):
            if cancel is not None and cancel.is_set():
                return None
            rows = slice(start, min(start + BLOCK_ROWS, track.n_rows))
            n = rows.stop - rows.start
            before = base[t][rows]
            for lazy, outputs in zip(run, built, strict=True):
                if cancel is not None and cancel.is_set():   # a stage's block at most after a stop
                    return None
                before = before + lazy.stage.scales[t] * lazy._prediction(t, rows, n)
                if outputs is not None:
                    outputs[t][rows] = before
    return built


def thin(stages: Sequence[Any], start: tuple[np.ndarray, ...], matrix: np.ndarray, layout: Layout,
         n_features: int, outputs: int, every: int = CHECKPOINT_EVERY, cache: RebuiltCache | None = None,
         *, tail: int = TAIL, ahead: bool = False, removed: Sequence[Sequence[Any]] = ()) -> list[RebuiltOutputs]:
    """Let go of the outputs of the stages ``kept`` keeps none of, to be rebuilt when read; return
    the outputs it keeps that are not held now (to rebuild: ``RebuiltCache.refill``), newest first.

    A stage whose outputs are let go of keeps a reference to the stage before it, whose own outputs
    (kept or rebuilt) it is predicted from. ``removed``: earlier chains (the undo stack's), whose
    stages not in ``stages`` keep their outputs only at checkpoints and within ``tail`` stages
    after the last of ``stages``.
    """
    cache = RebuiltCache() if cache is None else cache
    n = len(stages)

    def let_go(i: int, chain: Sequence[Any]) -> None:
        stage = chain[i]
        previous = chain[i - 1] if i else None
        # the stage is immutable to its readers; only how its outputs are held changes, not their values
        object.__setattr__(stage, "outputs", RebuiltOutputs(stage, previous, start, matrix, layout, n_features,
                                                            outputs, cache))

    missing: list[RebuiltOutputs] = []
    with cache.lock:
        current = {id(stage) for stage in stages}
        for other in removed:
            for i, stage in enumerate(other):
                if id(stage) in current or isinstance(stage.outputs, RebuiltOutputs):
                    continue
                if (i + 1) % every and not n < i + 1 <= n + tail:
                    let_go(i, other)
        for i, stage in enumerate(stages):
            lazy = isinstance(stage.outputs, RebuiltOutputs)
            if not kept(i + 1, n, every, tail, ahead):
                if not lazy:
                    let_go(i, stages)
            elif lazy:
                found = cache.arrays.pop(stage.outputs, None)
                if found is not None:
                    object.__setattr__(stage, "outputs", found)
                else:
                    missing.append(stage.outputs)
        cache.wanted = set(missing)
    return missing[::-1]
