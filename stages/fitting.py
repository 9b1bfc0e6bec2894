"""Fitting one stage on every track of a chain, with cancellation, progress and fault checks.

Nothing here changes a chain: it returns a new, complete ``Stage`` or raises, so a failed
or cancelled fit leaves the chain exactly as it was.
"""

from __future__ import annotations

import logging
import threading
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import steps
from .errors import FitCancelled, RemnantError, StageFitError, StageSpecError
from .kinds import FitRequest, get_kind
from .kinds.base import ProgressFn, check_subsample
from .losses import Loss
from .outputs import block, squeeze
from .schema import Schema
from .spec import StageSpec
from .track_output import others_view, track_prediction
from .tracks import Layout

log = logging.getLogger(f"remnant.{__name__}")


@dataclass(frozen=True, eq=False)
class Stage:
    """A fitted stage: one learner per track, and each track's raw output after this stage."""

    spec: StageSpec
    params: dict[str, Any]
    feature_index: tuple[int, ...]
    learners: tuple[Any, ...]
    scales: tuple[float, ...]          # shrinkage times line-search step, per track
    outputs: tuple[np.ndarray, ...]    # cumulative raw output F_k over each track's rows, (n, K) each
    fit_seconds: float
    rng_before: tuple[Any, ...]
    rng_after: tuple[Any, ...]
    step_rule: str = ""                # how the main track's step was chosen (``stages.steps``)
    oob_loss: tuple[float, float] | None = None   # main track, subsampled stages: loss on the rows
    #                                               left out, before and after the stage
    notes: tuple[str, ...] = ()        # what the main track's fit found worth saying (e.g. separation)

    @property
    def kind(self) -> str:
        """Return the stage's kind name."""
        return self.spec.kind

    @property
    def scale(self) -> float:
        """Return the main track's scale: what the stage's output is multiplied by."""
        return self.scales[0]

    @property
    def step(self) -> float:
        """Return the main track's step: its scale over the stage's shrinkage."""
        return steps.step_of(self.scales[0], self.spec.shrinkage)

    @property
    def oob_improvement(self) -> float:
        """Return how much the stage lowered the loss on the rows its subsample left out (NaN without a subsample)."""
        return self.oob_loss[0] - self.oob_loss[1] if self.oob_loss is not None else float("nan")


@dataclass
class FitContext:
    """What a stage fit reads from the chain: data, layout, loss, random streams and row weights.

    ``weight`` holds each row's weight in chain order (None: every row counts once); ``threads``
    the threads a learner may use when its own parameters leave them unset (None: the usable cores).
    """

    matrix: np.ndarray
    y: np.ndarray
    schema: Schema
    layout: Layout
    loss: Loss
    rngs: list[np.random.RandomState]
    weight: np.ndarray | None = None
    threads: int | None = None


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


def check_weights_taken(kind: Any, params: dict[str, Any], spec: StageSpec, weighted: bool) -> None:
    """Raise StageSpecError when the chain has row weights and the kind's learner cannot count them."""
    if weighted and not kind.accepts_weights(params):
        raise StageSpecError(f"kind {spec.kind!r} cannot count rows by their weights, and this chain has "
                             "row weights (choose a kind that takes them, or fit without weights)")


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
    check_weights_taken(kind, params, spec, ctx.weight is not None)
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
        explained = _explain(exc, number, spec)
        if isinstance(explained, FitCancelled):
            log.info("%s", explained)
        else:  # the learner's own traceback goes to the log; the user sees one line
            log.warning("%s", explained, exc_info=exc)
        if explained is exc:
            raise
        raise explained from exc
    main = results[0]
    seconds = time.perf_counter() - started
    log.debug("stage %d (%s) fit on %d track(s) in %.3f s", number, spec.kind, len(results), seconds)
    return Stage(
        spec=spec, params=params, feature_index=features, learners=tuple(r.learner for r in results),
        scales=tuple(r.scale for r in results), outputs=tuple(r.output for r in results),
        fit_seconds=seconds, rng_before=before,
        rng_after=tuple(rng.get_state() for rng in ctx.rngs), step_rule=main.rule, oob_loss=main.oob_loss,
        notes=main.notes,
    )


@dataclass(frozen=True, eq=False)
class TrackFit:
    """One track's part of a stage fit: the learner, its scale and the track's new cumulative output."""

    learner: Any
    scale: float
    output: np.ndarray
    rule: str
    oob_loss: tuple[float, float] | None
    notes: tuple[str, ...]


def draw_in_bag(n_rows: int, fraction: float, random_state: np.random.RandomState) -> np.ndarray:
    """Return a mask of max(1, int(fraction * n_rows)) rows drawn without replacement, in row order.

    Selection sampling (Knuth, TAOCP vol. 2, algorithm S) on ``n_rows`` uniform draws from the
    stream, as scikit-learn's gradient boosting draws its subsample, so a chain of subsampled
    tree stages draws the same rows as GradientBoostingRegressor(subsample=...).
    """
    wanted = max(1, int(fraction * n_rows))
    try:
        from sklearn.ensemble._gradient_boosting import _random_sample_mask
    except ImportError:  # the same algorithm, slower, should the private helper move
        draws = random_state.uniform(size=n_rows)
        mask, taken = np.zeros(n_rows, dtype=bool), 0
        for i, draw in enumerate(draws.tolist()):
            if draw * (n_rows - i) < wanted - taken:
                mask[i], taken = True, taken + 1
        return mask
    return np.asarray(_random_sample_mask(n_rows, wanted, random_state), dtype=bool)


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


def _fit_track(ctx, t, kind, spec, params, features, previous, cancel, progress) -> TrackFit:
    if cancel is not None and cancel.is_set():
        raise FitCancelled("fit cancelled")
    track = ctx.layout.tracks[t]
    n_all, loss = len(ctx.schema.columns), ctx.loss
    fit_raw = previous[track.fit]
    fit_y = ctx.y[: track.n_rows][track.fit]
    weight = None if ctx.weight is None else ctx.weight[: track.n_rows][track.fit]
    # a learner of one output per row sees vectors, as it always has; K outputs are (n, K)
    request = FitRequest(
        X=feature_rows(ctx.matrix, track.fit, features, n_all), columns=ctx.schema.subset(list(features)),
        residual=squeeze(loss.residual(fit_y, fit_raw, weight)), y=fit_y, raw=squeeze(fit_raw), loss=loss,
        task=ctx.schema.task, random_state=ctx.rngs[t], cancel=cancel, progress=progress, weight=weight,
        threads=ctx.threads, others=others_view(ctx.matrix, track, features, n_all),
    )
    if kind.subsamples and check_subsample(params.get("subsample", 1.0), spec.kind) < 1.0:
        request.in_bag = draw_in_bag(len(fit_y), float(params["subsample"]), ctx.rngs[t])
    crossing = kind.step_source(params) == steps.CROSS_FIT
    share = 1.0 / (steps.CROSS_FIT_FOLDS + 1) if crossing else 1.0
    request.progress = _scaled(progress, 0.0, share)
    if progress is not None:
        progress(0.0, "fitting")
    learner = kind.fit(request, params)
    if kind.refines_leaves:
        kind.refine(learner, request)
    request.check_cancel()
    try:
        output = block(track_prediction(learner, ctx.matrix, track, features, n_all), track.n_rows, loss.outputs)
    except ValueError as exc:
        raise StageFitError(str(exc)) from None
    bad = count_not_finite(output)
    if bad:
        raise StageFitError(f"{bad:,} of {output.size:,} predictions are not finite (NaN or infinite)")
    fit_output = output[track.fit]
    choice = steps.choose_step(kind, params, request, learner, squeeze(fit_output), _scaled(progress, share, 1.0))
    scale = spec.shrinkage * choice.step
    oob = None
    if request.in_bag is not None and not request.in_bag.all():
        left_out = ~request.in_bag
        y_out, raw_out = fit_y[left_out], fit_raw[left_out]
        w_out = None if weight is None else weight[left_out]
        oob = (loss.value(y_out, raw_out, w_out), loss.value(y_out, raw_out + scale * fit_output[left_out], w_out))
    if progress is not None:
        progress(1.0, "done")
    moved = scale * output   # previous + scale * output, summed into the one new array
    return TrackFit(learner, scale, np.add(previous, moved, out=moved), choice.rule, oob, tuple(request.notes))


def count_not_finite(values: np.ndarray) -> int:
    """Return how many of ``values`` are NaN or infinite.

    A sum is finite only when every value is (a NaN or an infinity carries into it), so one
    pass over the values answers the usual case; only a sum that is not finite (a value that
    is not, or finite values whose sum overflows) counts them one by one.
    """
    with np.errstate(over="ignore", invalid="ignore"):   # an overflowing sum only sends it to the count
        if np.isfinite(np.sum(values)):
            return 0
    return int(np.count_nonzero(~np.isfinite(values)))


def _scaled(progress: ProgressFn | None, low: float, high: float) -> ProgressFn | None:
    """Return ``progress`` mapping a fit's own 0..1 onto low..high of the track."""
    if progress is None:
        return None
    if (low, high) == (0.0, 1.0):
        return progress

    def report(fraction: float, message: str = "") -> None:
        progress(low + (high - low) * min(max(fraction, 0.0), 1.0), message)

    return report
