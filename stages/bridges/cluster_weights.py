"""Row weights on a chain over a Dask cluster: reading and checking the column, weighted reductions.

A weight says how much a row counts in every start value, stage fit, step, score and histogram,
as in memory (``stages.row_weights``). The column is read with the rows (``cluster_rows``) and
checked by one reduction; the start value, the scores of each part and the ``mean`` stage then
come from weighted sums, one reduction each. Without weights none of this runs: the unweighted
reductions stay as they were.

Dask is imported inside the functions: this module imports without it.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import DataError
from ..loglink import MEAN_FLOOR, RAW_CEILING, LogLinkLoss, unit_deviance
from ..losses import Loss, newton_step
from .cluster_rows import TRAIN, ClusterRows


def check_weight_column(meta: Any, name: Any, source: str) -> str:
    """Return the weight column's name; raise DataError when it is not a numeric column of the data
    (weights given in Python as values stay with the in-memory chain)."""
    import pandas as pd

    if not isinstance(name, str):
        raise DataError("a chain on a Dask cluster takes its row weights from a column of the data: give its name")
    if name not in meta.columns:
        raise DataError(f"{source}: weight column {name!r} is not a column of the data")
    if not pd.api.types.is_numeric_dtype(meta[name].dtype) or pd.api.types.is_bool_dtype(meta[name].dtype):
        raise DataError(f"{source}: weight column {name!r} is {meta[name].dtype}; a weight is a number of zero or more")
    return name


def weight_vector(rows: ClusterRows, name: str, source: str) -> Any:
    """Return the weight of every row, a Dask vector persisted on the workers; raise DataError as
    ``row_weights.check_weights`` does (a missing or negative weight, naming the first row counted
    from 1 by its label, or zero on every row)."""
    import dask
    import dask.array as da

    values = rows.columns[name]
    far = np.iinfo(np.int64).max
    missing, negative = ~da.isfinite(values), values < 0
    counts = dask.compute(missing.sum(), da.where(missing, rows.labels, far).min(),
                          da.where(negative, rows.labels, far).min(), (values > 0).sum())
    n_missing, first_missing, first_negative, positive = (int(v) for v in counts)
    label = f"weight column {name!r}"
    if n_missing:
        raise DataError(f"{source}: {label} is missing or not a finite number in {n_missing:,} row"
                        f"{'' if n_missing == 1 else 's'} (first: row {first_missing + 1})")
    if first_negative != far:
        value = float(da.where(rows.labels == first_negative, values, 0.0).sum().compute())
        raise DataError(f"{source}: {label} is negative in row {first_negative + 1} ({value:g}); "
                        "weights must be zero or more")
    if not positive:
        raise DataError(f"{source}: {label} is zero in every row; at least one row must count")
    (weight,) = dask.persist(values)
    return weight


def weighted_start(rows: ClusterRows, loss: Loss, weight: Any, offset: Any = None) -> float:
    """Return the loss's weighted optimal constant on the fitting rows (``Loss._start`` with weights):
    the weighted mean, its log on the log link, and with an offset the closed form there."""
    import dask

    y, w = rows.part_rows(rows.y, TRAIN), rows.part_rows(weight, TRAIN)
    if offset is None:
        top, bottom = dask.compute((w * y).sum(), w.sum())
        mean = float(top) / float(bottom)
        return float(np.log(max(mean, MEAN_FLOOR))) if isinstance(loss, LogLinkLoss) else mean
    assert isinstance(loss, LogLinkLoss)
    o, p = rows.part_rows(offset, TRAIN), loss.power
    top, bottom = dask.compute((w * y * np.exp(np.minimum((1 - p) * o, RAW_CEILING))).sum(),
                               (w * np.exp(np.minimum((2 - p) * o, RAW_CEILING))).sum())
    return float(np.log(max(float(top) / float(bottom), MEAN_FLOOR))) if bottom > 0 else 0.0


def weighted_mean_shift(rows: ClusterRows, loss: Loss, previous: Any, weight: Any) -> float:
    """Return the weighted ``mean`` stage's constant: the weighted mean residual (squared loss), or on the
    log link the optimal constant right after a constant raw score, else one weighted Newton step."""
    import dask.array as da

    y, raw = rows.part_rows(rows.y, TRAIN), rows.part_rows(previous[:, 0], TRAIN)
    w = rows.part_rows(weight, TRAIN)
    sums = da.map_blocks(_shift_sums, y, raw, w, loss, dtype=np.float64, chunks=((6,) * len(y.chunks[0]),))
    total = np.asarray(sums.compute(), dtype=np.float64).reshape(-1, 6)
    weights, y_sum, residual, curvature = (float(v) for v in total[:, :4].sum(axis=0))
    if not isinstance(loss, LogLinkLoss):
        return residual / weights
    low, high = float(total[:, 4].min()), float(total[:, 5].max())
    if loss.start_is_optimal and low == high:
        return float(np.log(max(y_sum / weights, MEAN_FLOOR))) - low
    return newton_step(residual / weights, curvature / weights)


def _shift_sums(y: np.ndarray, raw: np.ndarray, w: np.ndarray, loss: Loss) -> np.ndarray:
    if len(y) == 0:
        return np.array([0.0, 0.0, 0.0, 0.0, np.inf, -np.inf])
    if isinstance(loss, LogLinkLoss):
        residual, curvature = -loss.gradient(y, raw), loss.hessian(y, raw)
    else:
        residual, curvature = y - raw, np.ones_like(y)
    return np.array([w.sum(), w @ y, w @ residual, w @ curvature, raw.min(), raw.max()])


def weighted_part_scores(rows: ClusterRows, output: Any, loss: Loss, shift: float, weight: Any) -> list[dict[str, float]]:
    """Return the weighted scores of each part (train, valid, test), as the in-memory ``loss.scores``
    with weights names them: RMSE, MAE and R² of the mean, the loss, and on the log link the
    deviance; one reduction over the partitions."""
    import dask.array as da

    sums = da.map_blocks(_part_sums, rows.y, output[:, 0], rows.part, weight, loss, shift, dtype=np.float64,
                         chunks=((18,) * len(rows.chunks),))
    total = np.asarray(sums.compute(), dtype=np.float64).reshape(-1, 3, 6).sum(axis=0)
    return [_scores(row, isinstance(loss, LogLinkLoss)) for row in total]


def _part_sums(y: np.ndarray, raw: np.ndarray, part: np.ndarray, w: np.ndarray, loss: Loss, shift: float) -> np.ndarray:
    out = np.zeros((3, 6))
    log_link = isinstance(loss, LogLinkLoss)
    mean = loss.link(raw) if log_link else raw
    for k in range(3):
        at = part == k
        wk, error, centred = w[at], y[at] - mean[at], y[at] - shift
        deviance = unit_deviance(y[at], mean[at], loss.power) if isinstance(loss, LogLinkLoss) else error * error
        out[k] = (wk.sum(), wk @ deviance, wk @ (error * error), wk @ np.abs(error), wk @ centred, wk @ (centred * centred))
    return out.reshape(-1)


def _scores(sums: np.ndarray, log_link: bool) -> dict[str, float]:
    weights, deviance, squared, absolute, total, total_squared = (float(v) for v in sums)
    names = ("rmse", "mae", "r2", "deviance", "loss") if log_link else ("rmse", "mae", "r2", "loss")
    if weights == 0:
        return dict.fromkeys(names, float("nan"))
    spread = total_squared - total * total / weights
    out = {"rmse": float(np.sqrt(squared / weights)), "mae": absolute / weights,
           "r2": 1.0 - squared / spread if spread > 0 else float("nan")}
    if log_link:
        out["deviance"] = deviance / weights
    out["loss"] = deviance / weights
    return out
