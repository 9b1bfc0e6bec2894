"""Grow: append stages of one kind until the validation metric stops improving, then trim to the best.

Each stage goes through the chain's normal ``add_specs``, so it is committed as soon as it is
fit and every invariant of the chain holds along the way; a cancel keeps what was grown.
The stopping rule: stop once ``patience`` consecutive stages have not improved on the best
validation score reached during the grow (``scoring.better``: strictly better), then remove
the stages after that best one. This is the early-stopping rule with patience of Goodfellow,
Bengio & Courville 2016 (Deep Learning, section 7.8, algorithm 7.1), the best state restored.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Literal

from .. import scoring
from ..errors import FitCancelled, StageSpecError
from ..kinds.base import ProgressFn
from ..spec import StageSpec

if TYPE_CHECKING:
    from ..chain import Chain

#: why a grow stopped: no improvement for ``patience`` stages, ``max_stages`` grown, or the user cancelled
Stopped = Literal["patience", "max_stages", "cancelled"]


@dataclass(frozen=True)
class GrowResult:
    """What a grow did: ``grown`` stages fit, ``kept`` after the trim, the chain's ``best_row``
    (0 is the start value), why it ``stopped`` (``Stopped``), and the validation metric
    after each grown stage (``curve``)."""

    grown: int
    kept: int
    best_row: int
    stopped: Stopped
    curve: tuple[float, ...] = ()

    @property
    def cancelled(self) -> bool:
        """Return True when the user stopped the grow."""
        return self.stopped == "cancelled"


def grow(chain: Chain, kind: str, shrinkage: float = 0.1, *, params: dict[str, Any] | None = None,
         features: list[str] | tuple[str, ...] = (), max_stages: int = 100, patience: int | None = 10,
         cancel: threading.Event | None = None, progress: ProgressFn | None = None,
         on_stage: Callable[[Chain], None] | None = None, trim: bool = True) -> GrowResult:
    """Append up to ``max_stages`` stages of ``kind``, stopping after ``patience`` without improvement.

    Returns a GrowResult. See ``grow_spec``, which this calls with the spec built from the arguments.
    """
    spec = StageSpec(kind, shrinkage, tuple(features or ()), dict(params or {}))
    return grow_spec(chain, spec, max_stages=max_stages, patience=patience, cancel=cancel,
                     progress=progress, on_stage=on_stage, trim=trim)


def grow_spec(chain: Chain, spec: StageSpec, *, max_stages: int = 100, patience: int | None = 10,
              cancel: threading.Event | None = None, progress: ProgressFn | None = None,
              on_stage: Callable[[Chain], None] | None = None, trim: bool = True) -> GrowResult:
    """Append up to ``max_stages`` stages of ``spec`` and return a GrowResult.

    Stops when ``patience`` consecutive stages have not improved the validation metric
    (``patience=None``: never early); then, when ``trim``, removes the stages after the best
    row reached during the grow (never a stage that was there before it; the trim can be
    undone). ``on_stage(chain)`` is called after each committed stage. A cancel keeps the
    stages grown so far, with no trim. A failing fit raises StageFitError, keeping the stages
    grown before it.
    """
    _check(chain, spec, max_stages, patience, trim)
    metric = chain.metric
    start = len(chain)
    best_row, best = start, chain.scores()[-1].valid[metric]
    stopped: Stopped = "max_stages"
    since, curve = 0, []
    for i in range(max_stages):
        try:
            if cancel is not None and cancel.is_set():
                raise FitCancelled("grow cancelled")
            chain.add_specs([spec], cancel=cancel, progress=_stage_progress(progress, i, max_stages))
        except FitCancelled:
            stopped = "cancelled"
            break
        value = chain.scores()[-1].valid[metric]
        curve.append(value)
        if scoring.better(metric, value, best):
            best_row, best, since = len(chain), value, 0
        else:
            since += 1
        if on_stage is not None:
            on_stage(chain)
        if patience is not None and since >= patience:
            stopped = "patience"
            break
    grown = len(chain) - start
    if trim and stopped != "cancelled":
        chain.trim(best_row)
    return GrowResult(grown, len(chain) - start, best_row, stopped, tuple(curve))


def _check(chain: Chain, spec: StageSpec, max_stages: int, patience: int | None, trim: bool) -> None:
    if isinstance(max_stages, bool) or not isinstance(max_stages, int) or max_stages < 1:
        raise StageSpecError(f"the most stages to grow must be a whole number of at least 1, not {max_stages!r}")
    if patience is not None and (isinstance(patience, bool) or not isinstance(patience, int) or patience < 1):
        raise StageSpecError(f"patience must be a whole number of at least 1, not {patience!r}")
    chain.check_spec(spec)
    has_validation = chain.layout.is_kfold or chain.layout.n_valid > 0
    if (patience is not None or trim) and not has_validation:
        raise StageSpecError("growing with patience or trim needs validation rows to judge the stages; "
                             "this chain has none (choose a validation scheme)")


def _stage_progress(progress: ProgressFn | None, i: int, n: int) -> ProgressFn | None:
    if progress is None:
        return None

    def report(fraction: float, message: str = "") -> None:
        progress((i + fraction) / n, f"stage {i + 1} of at most {n}: {message}")

    return report
