"""The chain's loss over a Dask cluster: the losses served, the start value, scores and residuals.

A chain on a cluster fits the squared loss or a loss on the log link (``poisson``, ``gamma``,
``tweedie``: ``stages.loglink``). What the in-memory chain computes row by row is here one
reduction over the partitions, with only sums travelling:

- the start value: the mean of y on the fitting rows (its log on the log link, kept above the
  same floor), and the rows the loss cannot take (negative, or for gamma zero) counted on every row;
- the scores of a part: the row count and the sums of the deviance, of the squared and absolute
  error of the mean ``mu``, and of y about the start and its square, one reduction for all parts;
- the residual a stage fits (the negative gradient) and the residual users see (the deviance
  residual), partition by partition.

Dask is imported inside the functions: this module imports without it.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import DataError
from ..loglink import MEAN_FLOOR, LogLinkLoss, unit_deviance
from ..losses import Loss, get_loss, newton_step
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
