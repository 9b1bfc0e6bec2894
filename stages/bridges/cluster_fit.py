"""Fitting one stage of a chain whose rows live on a Dask cluster, by kind (docs/scaling.md).

- ``mean``: a reduction (the mean residual on the fitting rows).
- ``linear``: the design is learnt from every fitting row (``cluster_lstsq.exact_design``); the
  least squares come from Dask's TSQR
  (``dask.array.linalg.tsqr``) of ``[design | residual]`` over every fitting row, so only small
  triangular factors travel, and the solution is the in-memory stage's.
- ``ridge``: the design from every fitting row (exact medians, means and deviations by
  reductions), then the penalised least squares from the same TSQR factor (``cluster_lstsq``).
- ``glm``: Newton's method of the in-memory stage, each step from one reduction (``cluster_glm``).
- ``lightgbm`` and ``hist_tree``: ``lightgbm.DaskLGBMRegressor`` (the loss's objective) from the chain's output as
  ``init_score``, on bin codes (quantile edges of the sample, the same on every worker), so the
  trees are those one machine grows on the same codes. The booster's thresholds are then turned
  back from codes into the features' own values (``thresholds_on_values``): the stage is a plain
  LightGBM booster, saved and predicted like any other.
- every other kind: the ordinary fit (``stages.fitting.fit_stage``) on the sample pulled to this
  machine, then predicted on every partition; its notes say "fit on a sample of N rows".

Each stage's output is a new Dask array persisted on the workers; nothing of the chain changes
here, so a fit that fails leaves the chain as it was.
"""

from __future__ import annotations

import math
import threading
import time
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import FitCancelled, StageFitError, StageSpecError
from ..fitting import FitContext, Stage, check_weights_taken, fit_stage, resolve_features
from ..kinds import get_kind
from ..kinds.lightgbm_stage import BoosterLearner
from ..kinds.linear import LinearModel, checked_coefficients, constant_model
from ..kinds.mean import Constant
from ..loglink import LogLinkLoss
from ..losses import Loss
from ..outputs import block
from ..schema import Schema
from ..spec import StageSpec
from ..tracks import Layout, Track
from .cluster_glm import fit_glm_on_cluster
from .cluster_loss import line_search, loss_residual, mean_shift
from .cluster_lstsq import centred_factor, exact_design, fit_ridge
from .cluster_rows import N_BINS, TRAIN, ClusterRows
from .cluster_weights import weighted_mean_shift

#: the kinds fit on every fitting row over the cluster; every other kind fits on the sample
CLUSTER_KINDS = ("mean", "linear", "ridge", "glm", "lightgbm", "hist_tree")
#: LightGBM settings of a cluster fit: one bin per code, the data-parallel learner, no timing choices
CODE_PARAMS: dict[str, Any] = {"max_bin": 255, "min_data_in_bin": 1, "tree_learner": "data", "deterministic": True,
                               "force_row_wise": True, "verbosity": -1,
                               # minutes a worker waits on a peer's socket (LightGBM's default is 120):
                               # a worker lost mid-fit fails the stage instead of holding the others
                               "time_out": 3}
_BIG = 1.7976931348623157e308


@dataclass
class ClusterContext:
    """What a stage fit over the cluster reads: the rows, schema, loss, random streams, the client,
    the sample (X, y), its bin edges and the row weights."""

    rows: ClusterRows
    schema: Schema
    loss: Loss
    rngs: list[np.random.RandomState]
    client: Any
    sample: tuple[np.ndarray, np.ndarray]
    edges: list[np.ndarray]
    #: each row's weight (a Dask vector chunked like the rows), None when every row counts once
    weight: Any = None


def bin_edges(sample: np.ndarray, n_bins: int = N_BINS) -> list[np.ndarray]:
    """Return per feature the inner quantile edges of ``sample`` (at most ``n_bins - 1``, distinct)."""
    inner = np.linspace(0.0, 1.0, n_bins + 1)[1:-1]
    out = []
    for j in range(sample.shape[1]):
        column = sample[:, j][~np.isnan(sample[:, j])]
        out.append(np.unique(np.quantile(column, inner)) if len(column) else np.zeros(0))
    return out


def bin_codes(X: np.ndarray, edges: list[np.ndarray]) -> np.ndarray:
    """Return the bin code (1, 2, ...) of every value of ``X``; NaN stays NaN (LightGBM's missing value)."""
    codes = np.empty(X.shape, dtype=np.float64)
    for j, cuts in enumerate(edges):
        codes[:, j] = np.searchsorted(cuts, X[:, j], side="left") + 1
    codes[np.isnan(X)] = np.nan
    return codes


def thresholds_on_values(model_text: str, edges: list[np.ndarray]) -> str:
    """Return LightGBM model text trained on bin codes with each split threshold put back on the
    feature's own scale: ``code <= t`` is ``value <= edges[floor(t) - 1]`` (codes count the edges below)."""
    lines = model_text.splitlines()
    features: list[int] = []
    for i, line in enumerate(lines):
        if line.startswith("split_feature="):
            features = [int(v) for v in line.split("=", 1)[1].split()]
        elif line.startswith("threshold=") and features:
            values = [float(v) for v in line.split("=", 1)[1].split()]
            lines[i] = "threshold=" + " ".join(repr(_on_values(t, edges[f])) for t, f in zip(values, features, strict=True))
            features = []
    # the byte sizes of the trees no longer hold; without them LightGBM reads the trees in turn
    return "\n".join(line for line in lines if not line.startswith("tree_sizes=")) + "\n"


def _on_values(threshold: float, cuts: np.ndarray) -> float:
    k = math.floor(threshold)
    if k < 1:
        return -_BIG
    return float(cuts[k - 1]) if k <= len(cuts) else _BIG


def _check_cancel(cancel: threading.Event | None) -> None:
    if cancel is not None and cancel.is_set():
        raise FitCancelled("fit cancelled")


def fit_cluster_stage(ctx: ClusterContext, spec: StageSpec, previous: Any, *, number: int,
                      cancel: threading.Event | None = None) -> Stage:
    """Return ``spec`` fit from the chain's output ``previous`` (an (n, 1) Dask array on the workers),
    its output persisted; raise StageFitError naming the stage when it cannot be fit."""
    kind = get_kind(spec.kind)
    params = kind.resolve_params(spec.params, ctx.schema.task)
    features = resolve_features(spec, ctx.schema)
    check_weights_taken(kind, params, spec, ctx.weight is not None)
    before = tuple(rng.get_state() for rng in ctx.rngs)
    started = time.perf_counter()
    try:
        _check_cancel(cancel)
        if spec.kind == "mean":
            learner, scale, rule, notes = _fit_mean(ctx, spec, previous)
        elif spec.kind == "linear":
            learner, scale, rule, notes = _fit_linear(ctx, spec, params, previous, features)
        elif spec.kind == "glm":
            model = fit_glm_on_cluster(ctx.rows, ctx.schema.subset(list(features)), params, ctx.loss, previous,
                                       features, ctx.weight)
            learner, scale, rule, notes = model, spec.shrinkage, "none (fits the loss)", ()
        elif spec.kind == "ridge":
            learner, scale, rule, notes = _fit_ridge(ctx, spec, params, previous, features)
        elif spec.kind in ("lightgbm", "hist_tree"):
            learner, scale, rule, notes = _fit_booster(ctx, spec, params, previous, features)
        else:
            learner, scale, rule, notes = _fit_on_sample(ctx, spec, previous, number, cancel)
        if spec.kind in ("linear", "ridge") and isinstance(ctx.loss, LogLinkLoss):  # in memory: the same search
            fitted = _fitting_output(ctx, learner, features)
            step = line_search(ctx.rows, ctx.loss, previous, fitted, ctx.weight)
            scale, rule = spec.shrinkage * step, "line search on fitting rows"
        _check_cancel(cancel)
        output = _persisted_output(ctx, previous, learner, scale, features)
    except BaseException as exc:
        for rng, state in zip(ctx.rngs, before, strict=True):
            rng.set_state(state)
        if isinstance(exc, FitCancelled | StageFitError | StageSpecError | KeyboardInterrupt):
            raise
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise StageFitError(f"stage {number} ({spec.kind}) on the cluster: {type(exc).__name__}: {reason}") from exc
    return Stage(spec=spec, params=params, feature_index=features, learners=(learner,), scales=(scale,),
                 outputs=(output,), fit_seconds=time.perf_counter() - started, rng_before=before,
                 rng_after=tuple(rng.get_state() for rng in ctx.rngs), step_rule=rule, notes=notes)


def _residual_rows(ctx: ClusterContext, previous: Any) -> Any:
    """Return the residual (the loss's negative gradient; y - F for squared loss) on the fitting rows, a Dask vector."""
    rows = ctx.rows
    return loss_residual(ctx.loss, rows.part_rows(rows.y, TRAIN), rows.part_rows(previous[:, 0], TRAIN))


def _fitting_weight(ctx: ClusterContext) -> Any:
    """Return the row weights of the fitting rows (a Dask vector), or None when every row counts once."""
    return None if ctx.weight is None else ctx.rows.part_rows(ctx.weight, TRAIN)


def _fit_mean(ctx: ClusterContext, spec: StageSpec, previous: Any) -> tuple[Any, float, str, tuple[str, ...]]:
    rule = get_kind("mean").leaf_rule(ctx.loss)
    if ctx.weight is not None:
        return Constant(weighted_mean_shift(ctx.rows, ctx.loss, previous, ctx.weight)), spec.shrinkage, rule, ()
    if isinstance(ctx.loss, LogLinkLoss):
        return Constant(mean_shift(ctx.rows, ctx.loss, previous)), spec.shrinkage, rule, ()
    value = float(_residual_rows(ctx, previous).mean().compute())
    return Constant(value), spec.shrinkage, get_kind("mean").leaf_rule(ctx.loss), ()


def _fit_linear(ctx: ClusterContext, spec: StageSpec, params: dict[str, Any], previous: Any,
                features: tuple[int, ...]) -> tuple[Any, float, str, tuple[str, ...]]:
    from scipy import linalg

    fit_intercept = bool(params.get("fit_intercept", True))
    rows, columns = ctx.rows, ctx.schema.subset(list(features))
    design = exact_design(rows, features, columns)  # every fitting row's, as in memory (the fill matters)
    residual = _residual_rows(ctx, previous)
    n = rows.n_part(TRAIN)
    if design.width == 0:
        return constant_model(design, np.array([float(residual.mean().compute())]), fit_intercept), spec.shrinkage, "", ()
    X = rows.part_rows(rows.X, TRAIN)[:, list(features)]
    Z = X.map_blocks(design.transform, chunks=(X.chunks[0], (design.width,)), dtype=np.float64,
                     meta=np.empty((0, 0), dtype=np.float64))
    factor, x_mean, y_mean = centred_factor(Z, residual, fit_intercept, _fitting_weight(ctx))
    width = design.width
    cond = max(n, width) * np.finfo(np.float64).eps
    coef = linalg.lstsq(factor[:width, :width], factor[:width, width], cond=cond, check_finite=False)[0]
    coef, intercept = checked_coefficients(coef, y_mean - float(x_mean @ coef), "linear")
    return LinearModel(design, coef, intercept), spec.shrinkage, "none (least squares)", ()


def _fit_ridge(ctx: ClusterContext, spec: StageSpec, params: dict[str, Any], previous: Any,
               features: tuple[int, ...]) -> tuple[Any, float, str, tuple[str, ...]]:
    model = fit_ridge(ctx.rows, ctx.schema.subset(list(features)), params, _residual_rows(ctx, previous), features,
                      _fitting_weight(ctx))
    return model, spec.shrinkage, "none (least squares)", ()


def _fit_booster(ctx: ClusterContext, spec: StageSpec, params: dict[str, Any], previous: Any,
                 features: tuple[int, ...]) -> tuple[Any, float, str, tuple[str, ...]]:
    import lightgbm

    from .cluster_lightgbm_log import QuietDaskLGBMRegressor
    from .cluster_lost_worker import training_guard

    native = cluster_booster_params(spec.kind, params, ctx.rngs[0], ctx.loss)
    rounds = native.pop("num_boost_round")
    rows = ctx.rows
    edges = [ctx.edges[j] for j in features]
    X = rows.part_rows(rows.X, TRAIN)[:, list(features)]
    codes = X.map_blocks(bin_codes, edges, dtype=np.float64, meta=np.empty((0, 0), dtype=np.float64))
    y = rows.part_rows(rows.y, TRAIN)
    init = rows.part_rows(previous[:, 0], TRAIN)
    model = QuietDaskLGBMRegressor(client=ctx.client, n_estimators=rounds, **native)
    # a worker lost mid-training fails the stage at once, and the next stage cannot wait behind it
    with training_guard(ctx.client, f"{spec.kind} stage"), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Parameter n_jobs will be ignored")  # each worker sets its own
        model.fit(codes, y, init_score=init, sample_weight=_fitting_weight(ctx))
    text = thresholds_on_values(model.to_local().booster_.model_to_string(), edges)
    booster = lightgbm.Booster(model_str=text)
    learner = BoosterLearner(booster, importance_type=params.get("importance_type", "gain"))
    return learner, spec.shrinkage, "none (fits the loss)", ()


def cluster_booster_params(kind: str, params: dict[str, Any], rng: np.random.RandomState,
                           loss: Loss | None = None) -> dict[str, Any]:
    """Return the LightGBM parameters of a ``lightgbm`` or ``hist_tree`` stage fit on codes (native
    names, ``num_boost_round`` and ``random_state`` from the chain's stream, as the in-memory fit
    draws its seed; the objective of ``loss``, squared when None); raise StageSpecError for what a
    cluster fit does not serve yet."""
    if params.get("early_stopping_rounds") is not None:
        raise StageSpecError(f"kind {kind!r}: early_stopping_rounds is not served on a cluster yet")
    if float(params.get("subsample", 1.0)) < 1.0:
        raise StageSpecError(f"kind {kind!r}: subsample below 1 is not served on a cluster yet")
    skip = ("early_stopping_rounds", "validation_fraction", "importance_type", "subsample", "num_threads",
            "bin_construct_sample_cnt", "max_bin", "min_data_in_bin")
    native = {k: v for k, v in params.items() if k not in skip and v is not None}
    if kind == "hist_tree":
        native.update(num_boost_round=1, learning_rate=1.0)
        if native.get("num_leaves") is None:
            from ..kinds.hist_tree import default_leaves

            native["num_leaves"] = default_leaves(native.get("max_depth"))
    native.setdefault("num_boost_round", 100)
    native.update(CODE_PARAMS, objective="regression" if loss is None else loss.lightgbm_objective,
                  random_state=int(rng.randint(0, 2**31 - 1)))
    if loss is not None:
        native.update(loss.lightgbm_params())
    if kind == "hist_tree" and native["objective"] == "poisson":  # Newton leaves, as kinds.hist_tree sets them
        native.setdefault("poisson_max_delta_step", 1e-12)
    return native


def _fit_on_sample(ctx: ClusterContext, spec: StageSpec, previous: Any, number: int,
                   cancel: threading.Event | None) -> tuple[Any, float, str, tuple[str, ...]]:
    X, y = ctx.sample
    raw = np.asarray(ctx.rows.sampled_rows(previous).compute(), dtype=np.float64).reshape(-1, 1)
    weight = None if ctx.weight is None else np.asarray(ctx.rows.sampled_rows(ctx.weight).compute(), dtype=np.float64)
    stage = fit_on_rows(X, y, raw, ctx.schema, ctx.loss, ctx.rngs, spec, number, cancel, weight)
    return stage.learners[0], stage.scales[0], stage.step_rule, (*stage.notes, f"fit on a sample of {len(y):,} rows")


def fit_on_rows(X: np.ndarray, y: np.ndarray, raw: np.ndarray, schema: Schema, loss: Loss,
                rngs: list[np.random.RandomState], spec: StageSpec, number: int,
                cancel: threading.Event | None = None, weight: np.ndarray | None = None) -> Stage:
    """Return ``spec`` fit in memory on the rows ``X``, ``y`` (every one a fitting row, weighted by
    ``weight`` when given) from the chain's output ``raw`` ((n, 1)), drawing from the main random
    stream: the ordinary stage fit."""
    n = len(y)
    layout = Layout(np.arange(n), n, 0, 0, (Track(n_rows=n, fit=slice(0, n)),))
    ctx = FitContext(np.ascontiguousarray(X), y, schema, layout, loss, rngs[:1], weight)
    return fit_stage(ctx, spec, (raw,), number=number, cancel=cancel)


def _fitting_output(ctx: ClusterContext, learner: Any, features: tuple[int, ...]) -> Any:
    """Return the learner's output on the fitting rows, a Dask vector."""
    X = ctx.rows.part_rows(ctx.rows.X, TRAIN)[:, list(features)]
    return X.map_blocks(_predict_rows, learner, drop_axis=1, dtype=np.float64, meta=np.empty(0, dtype=np.float64))


def _predict_rows(X: np.ndarray, learner: Any) -> np.ndarray:
    return np.asarray(learner.predict(X), dtype=np.float64).reshape(-1)


def _persisted_output(ctx: ClusterContext, previous: Any, learner: Any, scale: float, features: tuple[int, ...]) -> Any:
    import dask.array as da

    every = tuple(range(len(ctx.schema.columns)))

    def add(x: np.ndarray, before: np.ndarray) -> np.ndarray:
        rows = x if features == every else x[:, list(features)]
        return before + scale * block(learner.predict(rows), len(rows), 1)

    output = da.map_blocks(add, ctx.rows.X, previous, chunks=previous.chunks, dtype=np.float64,
                           meta=np.empty((0, 1), dtype=np.float64)).persist()
    bad = int((~da.isfinite(output)).sum().compute())
    if bad:
        raise StageFitError(f"{bad:,} predictions are not finite (NaN or infinite)")
    return output
