"""A k-NN stage in ONNX operators: every fitting row's distance, the k nearest by the kind's own rule.

The graph holds the stage's fitting rows (its design matrix) and their residuals. For each row
it sums ``|q_j - x_j|^p`` over the design's columns one column at a time, in column order, as
the kind does, so the sums are the same to the last bit. The k nearest are then taken by the
kind's tie rule (``stages.kinds.knn``): sums that agree to the kind's ``TIE_DECIMALS`` decimals
count as tied (rounded as numpy rounds: times 10^d, to the nearest even integer, divided back),
and tied rows are taken in the order of their position among the fitting rows; ``TopK`` breaks
ties by the lower index, which is that position. The mean (or inverse-distance weighted mean,
with rows at distance 0 averaged alone) is summed over the neighbours in that order.

The distance matrix is N x (fitting rows): an ONNX runtime holds it for every row of a batch at
once, so score a large table in batches of rows.
"""

from __future__ import annotations

import importlib

import numpy as np

from ...errors import ExportError
from .builder import GraphBuilder


def tie_decimals() -> int | None:
    """Return the decimals to which the k-NN kind rounds distance sums before breaking ties by
    position, or None when the kind ranks by the unrounded sums."""
    try:
        search = importlib.import_module("stages.kinds.neighbour_search")
    except ImportError:
        return None
    return getattr(search, "TIE_DECIMALS", None)


def neighbours_output(builder: GraphBuilder, design: str, matrix: np.ndarray, target: np.ndarray,
                      k: int, p: float, weights: str) -> str:
    """Return the [N] k-NN prediction of the [N, width] ``design`` rows from the fitting rows ``matrix``."""
    reduced = _reduced_distances(builder, design, matrix, p)
    decimals = tie_decimals()
    key = reduced
    if decimals is not None:
        scale = builder.constant([10.0**decimals], "tie_scale")
        key = builder.op("Div", [builder.op("Round", [builder.op("Mul", [reduced, scale])]), scale], "tie_key")
    positions = builder.op("TopK", [key, builder.constant([k], "k", np.int64)], "nearest", outputs=2,
                           axis=1, largest=0, sorted=1)[1]
    chosen = builder.op("GatherElements", [reduced, positions], "nearest_sums", axis=1)
    residuals = builder.op("Gather", [builder.constant(target, "fit_residuals"), positions], "nearest_residuals", axis=0)
    if weights == "uniform":
        total = _sum_columns(builder, [builder.flat(_column(builder, residuals, j)) for j in range(k)])
        return builder.op("Div", [total, builder.constant([float(k)], "k_rows")], "knn")
    return _distance_weighted(builder, chosen, residuals, k, p)


def _reduced_distances(builder: GraphBuilder, design: str, matrix: np.ndarray, p: float) -> str:
    total = None
    for j in range(matrix.shape[1]):
        fitted = builder.constant(matrix[:, j][None, :], "fit_column")
        gap = builder.op("Abs", [builder.op("Sub", [_column(builder, design, j), fitted])], "gap")
        if p == 2:
            term = builder.op("Mul", [gap, gap], "gap_power")
        elif p == 1:
            term = gap
        else:
            term = builder.op("Pow", [gap, builder.constant([float(p)], "p")], "gap_power")
        start = builder.constant([0.0], "zero") if total is None else total  # the kind starts from zeros
        total = builder.op("Add", [start, term], "sums")
    if total is None:
        raise ExportError("a k-NN stage with no design column has no distances to export")
    return total


def _distance_weighted(builder: GraphBuilder, chosen: str, residuals: str, k: int, p: float) -> str:
    from onnx import TensorProto

    if p == 2:
        distance = builder.op("Sqrt", [chosen], "distance")
    elif p == 1:
        distance = chosen
    else:
        distance = builder.op("Pow", [chosen, builder.constant([1.0 / p], "root")], "distance")
    inverse = builder.op("Div", [builder.constant([1.0], "one"), distance], "inverse")
    exact = builder.op("IsInf", [inverse], "at_zero")
    exact_double = builder.op("Cast", [exact], to=TensorProto.DOUBLE)
    on_a_row = builder.op("ReduceMax", [exact_double, builder.constant([1], "axis", np.int64)], keepdims=1)
    any_exact = builder.op("Greater", [on_a_row, builder.constant([0.0], "zero")], "has_exact")
    inverse = builder.op("Where", [any_exact, exact_double, inverse], "weights")
    weighted = builder.op("Mul", [inverse, residuals], "weighted")
    total = _sum_columns(builder, [builder.flat(_column(builder, weighted, j)) for j in range(k)])
    weight = _sum_columns(builder, [builder.flat(_column(builder, inverse, j)) for j in range(k)])
    return builder.op("Div", [total, weight], "knn")


def _column(builder: GraphBuilder, matrix: str, j: int) -> str:
    """Return column ``j`` of ``matrix`` as [N, 1]."""
    return builder.op("Slice", [matrix, builder.constant([j], "start", np.int64), builder.constant([j + 1], "end", np.int64),
                                builder.constant([1], "axis", np.int64)], "column")


def _sum_columns(builder: GraphBuilder, columns: list[str]) -> str:
    """Return the sum of [N] columns, added one at a time from zero, in order."""
    total = builder.constant([0.0], "zero")
    for value in columns:
        total = builder.op("Add", [total, value], "sum")
    return total
