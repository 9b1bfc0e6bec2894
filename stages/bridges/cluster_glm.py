"""The ``glm`` kind over a Dask cluster: the in-memory Newton's method, each step from one reduction.

The in-memory stage (``kinds.glm.fit_glm``) minimises the mean loss of ``raw + design @ b + b0``
plus ``alpha / 2 * ||b||^2`` by Newton steps with Armijo's backtracking, from b = 0. Here every
evaluation of the objective is one reduction over the fitting rows' partitions that returns the
loss's sum, the gradient ``D' slope`` and the Hessian ``D' diag(curvature) D`` of the design
``D = [design | 1]`` (small: width + 1 numbers and their square), so the iterates, the line search
and the stopping rule are the in-memory stage's, and only those small sums travel. The design
is the one the in-memory stage learns from every fitting row (``cluster_lstsq.exact_design``).

Dask is imported inside the functions: this module imports without it.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..kinds.design import LinearDesign
from ..kinds.glm import glm_settings, newton_minimise, per_row
from ..kinds.linear import LinearModel, checked_coefficients
from ..losses import Loss
from ..schema import ColumnInfo
from .cluster_lstsq import exact_design
from .cluster_rows import TRAIN, ClusterRows


def _newton_block(X: np.ndarray, y: np.ndarray, offset: np.ndarray, weight: np.ndarray, design: LinearDesign,
                  theta: np.ndarray, loss: Loss) -> np.ndarray:
    matrix = np.c_[design.transform(X), np.ones(len(X))]
    value, slope, curvature = per_row(loss, y[:, 0], offset[:, 0] + matrix @ theta)
    w = weight[:, 0]
    value, slope, curvature = w * value, w * slope, w * curvature
    hessian = (matrix * curvature[:, None]).T @ matrix
    return np.concatenate([[float(np.sum(value))], matrix.T @ slope, hessian.ravel()]).reshape(1, -1)


def fit_glm_on_cluster(rows: ClusterRows, columns: tuple[ColumnInfo, ...], params: dict[str, Any], loss: Loss,
                       previous: Any, features: tuple[int, ...], weight: Any = None) -> LinearModel:
    """Return the glm stage fit on every fitting row from the chain's raw output ``previous`` (an (n, 1)
    Dask array), each row counted by ``weight`` (a Dask vector over every row) when given: the
    in-memory stage's coefficients, Newton's method over reductions."""
    import dask
    import dask.array as da

    alpha, max_iter, tol = glm_settings(params)
    design = exact_design(rows, features, columns)
    X = rows.part_rows(rows.X, TRAIN)[:, list(features)]
    y = rows.part_rows(rows.y, TRAIN)[:, None]
    offset = rows.part_rows(previous[:, 0], TRAIN)[:, None]
    if weight is None:
        w, n = da.ones_like(y), float(rows.n_part(TRAIN))
    else:  # the objective's weights are w / sum w, as in memory
        w = rows.part_rows(weight, TRAIN)[:, None]
        n = float(w.sum().compute())
    X, y, offset, w = dask.persist(X, y, offset, w)  # read at every evaluation: taken once, for this fit
    width = design.width
    size = 1 + (width + 1) + (width + 1) ** 2
    penalty = np.r_[np.full(width, alpha), 0.0]

    def evaluate(theta: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
        sums = da.map_blocks(_newton_block, X, y, offset, w, design, theta, loss, dtype=np.float64,
                             chunks=((1,) * len(X.chunks[0]), (size,)))
        total = np.asarray(sums.sum(axis=0).compute(), dtype=np.float64) / n
        gradient = total[1:width + 2] + penalty * theta
        hessian = total[width + 2:].reshape(width + 1, width + 1)
        hessian[np.diag_indices_from(hessian)] += penalty
        return float(total[0]) + 0.5 * float(penalty @ theta**2), gradient, hessian

    def evaluate_all(theta: np.ndarray) -> tuple[float, tuple[np.ndarray, np.ndarray]]:
        value, gradient, hessian = evaluate(theta)  # one reduction gives all three
        return value, (gradient, hessian)

    theta = newton_minimise(evaluate_all, lambda _, found: found, np.zeros(width + 1), max_iter, tol)
    coef, intercept = checked_coefficients(theta[:width], float(theta[width]), "glm")
    return LinearModel(design, coef, intercept)
