"""Fitting one stage on every track of a chain, with cancellation, progress and fault checks.

Nothing here changes a chain: it returns a new, complete ``Stage`` or raises, so a failed
or cancelled fit leaves the chain exactly as it was.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import FitCancelled, RemnantError, StageFitError
from .kinds import FitRequest, get_kind
from .kinds.base import ProgressFn
from .losses import Loss
from .schema import Schema
from .spec import StageSpec
from .tracks import Layout


@dataclass(frozen=True, eq=False)
class Stage:
    """A fitted stage: one learner per track, and each track's raw output after this stage."""

    spec: StageSpec
    params: dict[str, Any]
    feature_index: tuple[int, ...]
    learners: tuple[Any, ...]
    scales: tuple[float, ...]          # shrinkage times line-search step, per track
    outputs: tuple[np.ndarray, ...]    # cumulative raw output F_k over each track's rows
    fit_seconds: float
    rng_before: tuple[Any, ...]
    rng_after: tuple[Any, ...]

    @property
    def kind(self) -> str:
        """Return the stage's kind name."""
        return self.spec.kind

    @property
    def scale(self) -> float:
        """Return the main track's scale: what the stage's output is multiplied by."""
        return self.scales[0]


@dataclass
class FitContext:
    """What a stage fit reads from the chain: data, layout, loss and the current outputs."""

    matrix: np.ndarray
    y: np.ndarray
    schema: Schema
    layout: Layout
    loss: Loss
    rngs: list[np.random.RandomState]


def resolve_features(spec: StageSpec, schema: Schema) -> tuple[int, ...]:
    """Return the matrix columns a stage uses (all when its spec names none)."""
    if not spec.features:
        return tuple(range(len(schema.columns)))
    try:
        return tuple(schema.index_of(spec.features))
    except RemnantError as exc:
        raise StageFitError(f"stage {spec.kind!r}: {exc}") from None


def feature_rows(matrix: np.ndarray, rows: np.ndarray | slice, features: tuple[int, ...], n_all: int) -> np.ndarray:
    """Return matrix[rows][:, features], as a view when that is possible."""
    block = matrix[rows]
    if features == tuple(range(n_all)):
        return block
    return block[:, list(features)]


def fit_stage(
    ctx: FitContext,
    spec: StageSpec,
    previous: tuple[np.ndarray, ...],
    *,
    number: int,
    cancel: threading.Event | None = None,
    progress: ProgressFn | None = None,
) -> Stage:
    """Return ``spec`` fit on every track, given each track's raw output ``previous``.

    Raises FitCancelled when ``cancel`` is set, StageFitError (naming the stage) when the
    learner fails or its output is not finite. The random streams are restored on failure.
    """
    kind = get_kind(spec.kind)
    params = kind.resolve_params(spec.params, ctx.schema.task)
    features = resolve_features(spec, ctx.schema)
    before = tuple(rng.get_state() for rng in ctx.rngs)
    started = time.perf_counter()
    try:
        results = [
            _fit_track(ctx, t, kind, spec, params, features, previous[t], cancel, _track_progress(progress, t, ctx))
            for t in range(len(ctx.layout.tracks))
        ]
    except BaseException as exc:
        for rng, state in zip(ctx.rngs, before, strict=True):
            rng.set_state(state)
        raise _explain(exc, number, spec) from None
    learners, scales, outputs = zip(*results, strict=True)
    return Stage(
        spec=spec, params=params, feature_index=features, learners=learners, scales=scales, outputs=outputs,
        fit_seconds=time.perf_counter() - started, rng_before=before,
        rng_after=tuple(rng.get_state() for rng in ctx.rngs),
    )


def _explain(exc: BaseException, number: int, spec: StageSpec) -> BaseException:
    where = f"stage {number} ({spec.kind})"
    if isinstance(exc, FitCancelled):
        return FitCancelled(f"{where}: fit cancelled")
    if isinstance(exc, MemoryError):
        return StageFitError(f"{where}: ran out of memory while fitting")
    if isinstance(exc, RemnantError):
        return exc if str(exc).startswith("stage ") else type(exc)(f"{where}: {exc}")
    if isinstance(exc, KeyboardInterrupt | SystemExit):
        return exc
    reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    return StageFitError(f"{where}: {type(exc).__name__}: {reason}")


def _track_progress(progress: ProgressFn | None, t: int, ctx: FitContext) -> ProgressFn | None:
    if progress is None:
        return None
    n = len(ctx.layout.tracks)
    label = "full chain" if t == 0 else f"fold {t} of {n - 1}"

    def report(fraction: float, message: str = "") -> None:
        progress((t + min(max(fraction, 0.0), 1.0)) / n, f"{label}: {message}" if message else label)

    return report


def _fit_track(ctx, t, kind, spec, params, features, previous, cancel, progress):
    if cancel is not None and cancel.is_set():
        raise FitCancelled("fit cancelled")
    track = ctx.layout.tracks[t]
    n_all = len(ctx.schema.columns)
    fit_raw = previous[track.fit]
    fit_y = ctx.y[: track.n_rows][track.fit]
    request = FitRequest(
        X=feature_rows(ctx.matrix, track.fit, features, n_all), columns=ctx.schema.subset(list(features)),
        residual=ctx.loss.residual(fit_y, fit_raw), y=fit_y, raw=fit_raw, loss=ctx.loss,
        task=ctx.schema.task, random_state=ctx.rngs[t], cancel=cancel, progress=progress,
    )
    if progress is not None:
        progress(0.0, "fitting")
    learner = kind.fit(request, params)
    if kind.refines_leaves:
        kind.refine(learner, request)
    request.check_cancel()
    output = np.asarray(learner.predict(feature_rows(ctx.matrix, slice(0, track.n_rows), features, n_all)), dtype=np.float64)
    bad = int(np.count_nonzero(~np.isfinite(output)))
    if bad:
        raise StageFitError(f"{bad:,} of {len(output):,} predictions are not finite (NaN or infinite)")
    step = 1.0
    if not (kind.fits_loss or kind.refines_leaves or ctx.loss.name == "squared"):
        step = ctx.loss.line_search(fit_y, fit_raw, output[track.fit])
    scale = spec.shrinkage * step
    if progress is not None:
        progress(1.0, "done")
    return learner, scale, previous + scale * output
