"""Exact linear fits over a Dask cluster: the design from every fitting row, ridge by TSQR.

The in-memory linear family learns its design (``kinds.design.LinearDesign``: median fill,
mean and population standard deviation) from every fitting row. A penalised fit depends on that
standardisation, so here the design comes from every fitting row too, by reductions:

- each column's median is found exactly by a radix selection on the bits of the values (an
  order-preserving map of float64 onto uint64, one byte a round, 8 rounds): each round is one
  reduction of a 256-bin count per column and wanted rank, and the median is the mean of the two
  middle values as ``numpy.median`` takes it;
- the mean and standard deviation of the filled column are one reduction of the sums of
  ``x - median`` and its square.

``ridge`` then factors ``[design - mean | residual - mean]`` by Dask's TSQR
(``dask.array.linalg.tsqr``), so only small triangular factors travel, and solves the penalised
system from R: ``[R_xx; sqrt(alpha) I] b = [R_xy; 0]`` in least squares, whose normal equations
are scikit-learn Ridge's ``(Z'Z + alpha I) b = Z'r`` on the centred design.

Dask is imported inside the functions: this module imports without it.
"""

from __future__ import annotations

import weakref
from typing import Any

import numpy as np

from ..errors import StageSpecError
from ..kinds.design import ColumnStep, LinearDesign
from ..kinds.linear import LinearModel, checked_coefficients, constant_model
from ..schema import ColumnInfo
from .cluster_rows import TRAIN, ClusterRows

#: the ridge solvers whose answer is the exact penalised least squares (the others iterate to a tolerance)
EXACT_RIDGE_SOLVERS = ("auto", "cholesky", "svd")
_SIGN = np.uint64(1 << 63)
#: designs already learnt, per rows object and feature tuple: every stage on the same features shares one
_DESIGNS: dict[int, dict[tuple[int, ...], LinearDesign]] = {}


def sortable_keys(values: np.ndarray) -> np.ndarray:
    """Return uint64 keys in the order of the float64 ``values`` (negative values flip every bit,
    the others set the sign bit), so that selecting a key's rank selects the value's."""
    bits = np.ascontiguousarray(values, dtype=np.float64).view(np.uint64)
    return np.where(bits & _SIGN, ~bits, bits | _SIGN)


def key_values(keys: np.ndarray) -> np.ndarray:
    """Return the float64 values of keys made by ``sortable_keys``."""
    keys = np.asarray(keys, dtype=np.uint64)
    bits = np.where(keys & _SIGN, keys & ~_SIGN, ~keys)
    return bits.view(np.float64)


def _key_block(X: np.ndarray) -> np.ndarray:
    """Return the keys of a block, column by column in memory; a missing value gets the largest key
    (only a NaN's bits map there), so it sorts after every value and the ranks wanted never reach it."""
    keys = np.asfortranarray(sortable_keys(X))
    keys[np.isnan(X)] = np.iinfo(np.uint64).max
    return keys


def _digit_counts(keys: np.ndarray, prefixes: np.ndarray, shift: int) -> np.ndarray:
    """Per column j and wanted rank t, count the keys whose bits above ``shift + 8`` are
    ``prefixes[j, t]``, by their byte at ``shift``: a (1, p * 2 * 256) block."""
    p = keys.shape[1]
    out = np.zeros((p, 2, 256), dtype=np.int64)
    for j in range(p):
        column = keys[:, j]
        digits = ((column >> np.uint64(shift)) & np.uint64(0xFF)).astype(np.intp)
        high = column >> np.uint64(shift + 8) if shift < 56 else None
        for t in range(2):
            if t == 1 and prefixes[j, 1] == prefixes[j, 0]:
                out[j, 1] = out[j, 0]
            else:
                out[j, t] = np.bincount(digits if high is None else digits[high == prefixes[j, t]], minlength=256)
    return out.reshape(1, -1)


def exact_medians(X: Any) -> tuple[np.ndarray, np.ndarray]:
    """Return each column's median of the non-missing values of the Dask matrix ``X`` (0 for a column
    with none, as ``kinds.design.impute_median``) and each column's count of them."""
    import dask.array as da

    p = X.shape[1]
    keys = X.map_blocks(_key_block, dtype=np.uint64).persist()  # held on the workers for the 8 rounds only
    present = X.shape[0] - np.asarray(da.isnan(X).sum(axis=0).compute(), dtype=np.int64).reshape(p)
    ranks = np.stack([(present - 1) // 2, present // 2], axis=1).clip(min=0)  # the two middle values
    prefixes = np.zeros((p, 2), dtype=np.uint64)
    for byte in range(8):
        shift = 56 - 8 * byte
        counts = da.map_blocks(_digit_counts, keys, prefixes.copy(), shift, dtype=np.int64,
                               chunks=((1,) * len(keys.chunks[0]), (p * 512,)))
        total = np.asarray(counts.sum(axis=0).compute(), dtype=np.int64).reshape(p, 2, 256)
        below = np.cumsum(total, axis=2)
        digit = (below <= ranks[:, :, None]).sum(axis=2).clip(max=255)
        before = np.take_along_axis(below, digit[:, :, None], axis=2)[:, :, 0] - np.take_along_axis(
            total, digit[:, :, None], axis=2)[:, :, 0]
        ranks = ranks - before
        prefixes = (prefixes << np.uint64(8)) | digit.astype(np.uint64)
    del keys  # released on the workers with the last reference
    middle = key_values(prefixes.reshape(-1)).reshape(p, 2)
    medians = np.where(present > 0, np.mean(middle, axis=1), 0.0)
    return medians, present


def _shifted_sums(X: np.ndarray, shift: np.ndarray) -> np.ndarray:
    filled = np.where(np.isnan(X), shift, X) - shift
    return np.concatenate([filled.sum(axis=0), (filled * filled).sum(axis=0)]).reshape(1, -1)


def exact_design(rows: ClusterRows, features: tuple[int, ...], columns: tuple[ColumnInfo, ...]) -> LinearDesign:
    """Return the ``LinearDesign`` the in-memory stage learns from every fitting row (numeric columns):
    the exact median, and the mean and population standard deviation of the filled column, by
    reductions over the partitions. Learnt once per rows and features."""
    import dask.array as da

    if id(rows) not in _DESIGNS:  # forgotten with the rows
        weakref.finalize(rows, _DESIGNS.pop, id(rows), None)
    known = _DESIGNS.setdefault(id(rows), {})
    if features in known:
        return known[features]
    X = rows.part_rows(rows.X, TRAIN)[:, list(features)].persist()  # read 10 times: taken once
    n, p = rows.n_part(TRAIN), len(features)
    medians, present = exact_medians(X)
    sums = da.map_blocks(_shifted_sums, X, medians, dtype=np.float64, chunks=((1,) * len(X.chunks[0]), (2 * p,)))
    total = np.asarray(sums.sum(axis=0).compute(), dtype=np.float64)
    first, second = total[:p] / n, total[p:] / n
    std = np.sqrt(np.maximum(second - first * first, 0.0))
    steps = [ColumnStep(col.role, median=float(medians[j]), mean=float(medians[j] + first[j]),
                        std=float(std[j]) if std[j] > 0 else 1.0, indicator=bool(present[j] < n))
             for j, col in enumerate(columns)]
    known[features] = design = LinearDesign(steps)
    return design


def design_rows(rows: ClusterRows, design: LinearDesign, features: tuple[int, ...]) -> Any:
    """Return the design matrix of the fitting rows, a Dask array chunked like them."""
    X = rows.part_rows(rows.X, TRAIN)[:, list(features)]
    return X.map_blocks(design.transform, chunks=(X.chunks[0], (design.width,)), dtype=np.float64,
                        meta=np.empty((0, 0), dtype=np.float64))


def check_ridge_params(params: dict[str, Any]) -> tuple[float, bool]:
    """Return ridge's ``alpha`` and ``fit_intercept``; raise StageSpecError for a value a cluster fit
    does not serve (an iterative solver, whose answer is the exact one only to its tolerance)."""
    alpha, fit_intercept, solver = params.get("alpha", 1.0), params.get("fit_intercept", True), params.get("solver", "auto")
    if isinstance(alpha, bool) or not isinstance(alpha, int | float) or not 0 <= alpha < float("inf"):
        raise StageSpecError(f"kind 'ridge': alpha must be a number of zero or more on a cluster, not {alpha!r}")
    if not isinstance(fit_intercept, bool | np.bool_):
        raise StageSpecError(f"kind 'ridge': fit_intercept must be true or false, not {fit_intercept!r}")
    if solver not in EXACT_RIDGE_SOLVERS:
        raise StageSpecError(f"kind 'ridge': solver {solver!r} is not served on a cluster (it solves exactly: "
                             f"{', '.join(EXACT_RIDGE_SOLVERS)})")
    return float(alpha), bool(fit_intercept)


def centred_factor(Z: Any, residual: Any, fit_intercept: bool, weight: Any = None) -> tuple[np.ndarray, np.ndarray, float]:
    """Return the triangular factor R of the centred ``[Z | residual]`` (Dask, the fitting rows) from
    Dask's TSQR, and the means taken out (zero without an intercept). With row weights (a Dask
    vector), the weighted means, and each centred row times the root of its weight, as
    ``kinds.linear.blocked_least_squares`` and scikit-learn's ``sample_weight`` take them."""
    import dask.array as da

    width = Z.shape[1]
    x_mean, y_mean = np.zeros(width), 0.0
    if fit_intercept and weight is None:
        means = da.compute(Z.mean(axis=0), residual.mean())
        x_mean, y_mean = np.asarray(means[0], dtype=np.float64), float(means[1])
    elif fit_intercept:
        sums = da.compute((Z * weight[:, None]).sum(axis=0), (residual * weight).sum(), weight.sum())
        x_mean, y_mean = np.asarray(sums[0], dtype=np.float64) / float(sums[2]), float(sums[1]) / float(sums[2])
    stacked = da.concatenate([Z - x_mean, (residual - y_mean)[:, None]], axis=1).rechunk({1: -1})
    if weight is not None:
        stacked = stacked * da.sqrt(weight)[:, None]
    factor = np.asarray(da.linalg.tsqr(stacked)[1].compute(), dtype=np.float64)
    return factor, x_mean, y_mean


def fit_ridge(rows: ClusterRows, columns: tuple[ColumnInfo, ...], params: dict[str, Any], residual: Any,
              features: tuple[int, ...], weight: Any = None) -> LinearModel:
    """Return the ridge model of the Dask vector ``residual`` (the fitting rows', weighted by the Dask
    vector ``weight`` when given) on the design learnt from every fitting row: scikit-learn Ridge's
    solution (the penalty on the standardised design, the intercept unpenalised), from the TSQR
    factor of the centred ``[design | residual]``."""
    from scipy import linalg

    alpha, fit_intercept = check_ridge_params(params)
    design = exact_design(rows, features, columns)
    if design.width == 0:
        return constant_model(design, np.array([float(residual.mean().compute())]), fit_intercept)
    Z = design_rows(rows, design, features)
    width = design.width
    factor, x_mean, y_mean = centred_factor(Z, residual, fit_intercept, weight)
    left = np.vstack([factor[:width, :width], np.sqrt(alpha) * np.eye(width)])
    right = np.concatenate([factor[:width, width], np.zeros(width)])
    cond = max(len(left), width) * np.finfo(np.float64).eps
    coef = linalg.lstsq(left, right, cond=cond, check_finite=False)[0]
    coef, intercept = checked_coefficients(coef, y_mean - float(x_mean @ coef), "ridge")
    return LinearModel(design, coef, intercept)
