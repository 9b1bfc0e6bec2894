"""The chain's loss over a Dask cluster: the losses served, the start value, scores and residuals.

A chain on a cluster fits the squared loss or a loss on the log link (``poisson``, ``gamma``,
``tweedie``: ``stages.loglink``). What the in-memory chain computes row by row is here one
reduction over the partitions, with only sums travelling:

- the start value: the mean of y on the fitting rows (its log on the log link, kept above the
  same floor), and the rows the loss cannot take (negative, or for gamma zero) counted on every row;
- the scores of a part: the row count and the sums of the deviance, of the squared and absolute
  error of the mean ``mu``, and of y about the start and its square, one reduction for all parts;
- the residual a stage fits (the negative gradient) and the residual users see (the deviance
  residual), partition by partition;
- an exposure column: checked, and its log persisted as every row's offset, the start value then
  in its closed form;
- the line search of a ``linear`` or ``ridge`` stage on the log link: the in-memory search, each
  evaluation of the mean deviance one reduction.

Dask is imported inside the functions: this module imports without it.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import DataError, StageSpecError
from ..loglink import MEAN_FLOOR, RAW_CEILING, LogLinkLoss, unit_deviance
from ..losses import LOG_LINK_NAMES, Loss, bracketed_step, get_loss, newton_step
from .cluster_rows import TRAIN, ClusterRows

#: the losses a chain on a cluster fits
CLUSTER_LOSSES = ("squared", "poisson", "gamma", "tweedie")


def cluster_loss(name: str | None, power: float | None = None) -> Loss:
    """Return the loss called ``name`` (squared when None); raise DataError for one a cluster does not fit yet."""
    if name not in (None, *CLUSTER_LOSSES):
        raise DataError(f"a chain on a Dask cluster fits the losses {', '.join(CLUSTER_LOSSES)} for now, not {name!r}")
    return get_loss(name or "squared", "regression", power=power)


def check_cluster_target(rows: ClusterRows, loss: Loss, target: str, source: str) -> None:
    """Raise DataError (as the in-memory chain does) when a row's target is one the loss cannot take."""
    if not isinstance(loss, LogLinkLoss):
        return
    bad = int(rows.y.map_blocks(_bad_targets, loss, chunks=((1,) * len(rows.chunks),), dtype=np.int64).sum().compute())
    if bad:
        loss.check_target(np.full(bad, -1.0), target, source)  # the same message, naming the count


def _bad_targets(y: np.ndarray, loss: LogLinkLoss) -> np.ndarray:
    return np.array([loss.bad_targets(y)], dtype=np.int64)


def start_value(loss: Loss, mean: float) -> float:
    """Return the start value from the mean target of the fitting rows: the loss's optimal constant."""
    if isinstance(loss, LogLinkLoss):
        return float(np.log(max(mean, MEAN_FLOOR)))
    return mean


def loss_residual(loss: Loss, y: Any, raw: Any) -> Any:
    """Return the negative gradient of the loss at ``raw`` (Dask vectors alike): what a stage is fit to."""
    if not isinstance(loss, LogLinkLoss):
        return y - raw
    return y.map_blocks(_negative_gradient, raw, loss, dtype=np.float64)


def _negative_gradient(y: np.ndarray, raw: np.ndarray, loss: LogLinkLoss) -> np.ndarray:
    return -loss.gradient(y, raw)


def shown_residual(loss: Loss, y: Any, raw: Any) -> Any:
    """Return the residual the chain shows (y - F, or the deviance residual on the log link), a Dask vector."""
    if not isinstance(loss, LogLinkLoss):
        return y - raw
    return y.map_blocks(_deviance_residual, raw, loss, dtype=np.float64)


def _deviance_residual(y: np.ndarray, raw: np.ndarray, loss: LogLinkLoss) -> np.ndarray:
    return np.asarray(loss.display_residual(y, raw), dtype=np.float64)


def mean_shift(rows: ClusterRows, loss: LogLinkLoss, previous: Any) -> float:
    """Return the ``mean`` stage's constant on the log link, as the in-memory stage sets it: right after
    a constant (every fitting row's raw score the same) the optimal constant, else one Newton step,
    mean residual over mean curvature, from one reduction."""
    y, raw = rows.part_rows(rows.y, TRAIN), rows.part_rows(previous[:, 0], TRAIN)
    total = np.asarray(block_sums(y, raw, _newton_sums, loss, 6).compute(), dtype=np.float64).reshape(-1, 6)
    n, y_sum, residual, curvature = (float(v) for v in total[:, :4].sum(axis=0))
    low, high = float(total[:, 4].min()), float(total[:, 5].max())
    if loss.start_is_optimal and low == high:
        return start_value(loss, y_sum / n) - low
    return newton_step(residual / n, curvature / n)


def block_sums(y: Any, raw: Any, function: Any, loss: Loss, width: int) -> Any:
    """Return ``function(y_block, raw_block, loss)`` (``width`` numbers) per chunk, a Dask vector."""
    import dask.array as da

    return da.map_blocks(function, y, raw, loss, dtype=np.float64, chunks=((width,) * len(y.chunks[0]),))


def _newton_sums(y: np.ndarray, raw: np.ndarray, loss: LogLinkLoss) -> np.ndarray:
    if len(y) == 0:
        return np.array([0.0, 0.0, 0.0, 0.0, np.inf, -np.inf])
    return np.array([len(y), y.sum(), -loss.gradient(y, raw).sum(), loss.hessian(y, raw).sum(), raw.min(), raw.max()])


def log_link_part_sums(rows: ClusterRows, output: Any, loss: LogLinkLoss, shift: float) -> np.ndarray:
    """Return per part (train, valid, test) the row count and the sums of the deviance, of the squared and
    absolute error of mu = exp(F), and of y - shift and its square: one reduction over the partitions."""
    import dask.array as da

    sums = da.map_blocks(_part_block_sums, rows.y, output[:, 0], rows.part, loss, shift, dtype=np.float64,
                         chunks=((18,) * len(rows.chunks),))
    return np.asarray(sums.compute(), dtype=np.float64).reshape(-1, 3, 6).sum(axis=0)


def _part_block_sums(y: np.ndarray, raw: np.ndarray, part: np.ndarray, loss: LogLinkLoss, shift: float) -> np.ndarray:
    out = np.zeros((3, 6))
    mu = loss.link(raw)
    for k in range(3):
        at = part == k
        error, centred = y[at] - mu[at], y[at] - shift
        out[k] = (at.sum(), unit_deviance(y[at], mu[at], loss.power).sum(), error @ error, np.abs(error).sum(),
                  centred.sum(), centred @ centred)
    return out.reshape(-1)


def log_link_scores(sums: np.ndarray) -> dict[str, float]:
    """Return RMSE, MAE and R² of the mean, the mean deviance and the loss (that deviance) of one part
    from its ``log_link_part_sums`` row (NaN without rows), as ``LogLinkLoss.scores`` names them."""
    n, deviance, squared, absolute, total, total_squared = (float(v) for v in sums)
    if n == 0:
        return dict.fromkeys(("rmse", "mae", "r2", "deviance", "loss"), float("nan"))
    spread = total_squared - total * total / n
    return {"rmse": float(np.sqrt(squared / n)), "mae": absolute / n,
            "r2": 1.0 - squared / spread if spread > 0 else float("nan"), "deviance": deviance / n, "loss": deviance / n}


def check_exposure_column(meta: Any, name: Any, loss: Loss, source: str) -> str:
    """Return the exposure column's name; raise StageSpecError for a loss off the log link (as in memory)
    and DataError when it is not a numeric column of the data (values given in Python stay in memory)."""
    import pandas as pd

    if not isinstance(loss, LogLinkLoss):
        raise StageSpecError(f"an exposure is for the log-link losses ({', '.join(LOG_LINK_NAMES)}); "
                             f"loss {loss.name!r} takes none")
    if not isinstance(name, str):
        raise DataError("a chain on a Dask cluster takes its exposure from a column of the data: give its name")
    if name not in meta.columns:
        raise DataError(f"{source}: exposure column {name!r} is not a column of the data")
    if not pd.api.types.is_numeric_dtype(meta[name].dtype) or pd.api.types.is_bool_dtype(meta[name].dtype):
        raise DataError(f"{source}: exposure column {name!r} is {meta[name].dtype}; an exposure is a positive number")
    return name


def exposure_offset(rows: ClusterRows, name: str, source: str) -> Any:
    """Return log(exposure) of every row, a Dask vector persisted on the workers; raise DataError naming
    the column, the count of rows that are not a positive number and the first (as ``row_weights``
    does, the row counted from 1 by its label)."""
    import dask
    import dask.array as da

    values = rows.columns[name]
    bad = ~(da.isfinite(values) & (values > 0))
    count, first = dask.compute(bad.sum(), da.where(bad, rows.labels, np.iinfo(np.int64).max).min())
    if count:
        at, count = int(first), int(count)
        value = float(da.where(bad & (rows.labels == at), values, 0.0).sum().compute())
        shown = "missing" if np.isnan(value) else f"{value:g}"
        raise DataError(f"{source}: exposure column {name!r} must be a positive number; {count:,} "
                        f"row{'' if count == 1 else 's'} {'is' if count == 1 else 'are'} not "
                        f"(first: row {at + 1}, {shown})")
    (offset,) = dask.persist(da.log(values))
    return offset


def offset_start(rows: ClusterRows, loss: LogLinkLoss, offset: Any) -> float:
    """Return the start value with an offset: the closed-form optimal constant of ``LogLinkLoss._start``,
    log(sum y e^{(1 - p) o} / sum e^{(2 - p) o}) over the fitting rows, from one reduction."""
    import dask

    y, o = rows.part_rows(rows.y, TRAIN), rows.part_rows(offset, TRAIN)
    p = loss.power
    top, bottom = dask.compute((y * np.exp(np.minimum((1 - p) * o, RAW_CEILING))).sum(),
                               np.exp(np.minimum((2 - p) * o, RAW_CEILING)).sum())
    return float(np.log(max(float(top) / float(bottom), MEAN_FLOOR))) if bottom > 0 else 0.0


def line_search(rows: ClusterRows, loss: LogLinkLoss, previous: Any, output: Any, weight: Any = None) -> float:
    """Return the step (at least 0) minimising the mean deviance of the fitting rows along ``output``
    (the stage's output on them, a Dask vector), as ``LogLinkLoss.line_search`` finds it in memory:
    the same bracket unit (the spread of each row's Newton step over the spread of the output) and
    Brent's search, each evaluation one reduction. With row weights (a Dask vector over every row)
    the mean deviance is weighted, as in memory; the bracket unit is not."""
    import dask

    y, raw = rows.part_rows(rows.y, TRAIN), rows.part_rows(previous[:, 0], TRAIN)
    y, raw, output = dask.persist(y, raw, output)  # read at every evaluation: taken once, for this search
    n = rows.n_part(TRAIN)
    working, spread = dask.compute(y.map_blocks(_working_squares, raw, loss, dtype=np.float64).sum(),
                                   (output * output).sum())
    spread_res, spread_out = np.sqrt(float(working) / n), np.sqrt(float(spread) / n)
    scale = spread_res / spread_out if spread_out > 0 and spread_res > 0 and np.isfinite(spread_out + spread_res) else 0.0

    w = None if weight is None else rows.part_rows(weight, TRAIN).persist()
    total_weight = float(n) if w is None else float(w.sum().compute())

    def objective(step: float) -> float:
        deviance = y.map_blocks(_deviance_along, raw, output, step, loss, dtype=np.float64)
        return float((deviance if w is None else deviance * w).sum().compute()) / total_weight

    return bracketed_step(objective, scale)


def _working_squares(y: np.ndarray, raw: np.ndarray, loss: LogLinkLoss) -> np.ndarray:
    curvature = loss.hessian(y, raw)
    working = np.divide(-loss.gradient(y, raw), curvature, out=np.zeros_like(raw), where=curvature > 0)
    return working * working


def _deviance_along(y: np.ndarray, raw: np.ndarray, output: np.ndarray, step: float, loss: LogLinkLoss) -> np.ndarray:
    return unit_deviance(y, loss.link(raw + step * output), loss.power)
