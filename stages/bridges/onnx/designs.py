"""The linear family's preprocessing in ONNX operators: ``LinearDesign`` and ``SplineDesign``.

Each function takes a stage's input columns ([N] doubles of the schema's matrix) and returns
the stage's design matrix, computed with the same operations in the same order as the kind's
``transform``, so the design is the same to the last bit:

- ``linear_design``: a missing value becomes the fitting rows' median, then ``(x - mean) / std``,
  a 0/1 missing indicator where the fitting rows had missing values, and one 0/1 column per
  category code seen in the fitting rows (a missing or unseen code gives all zeros);
- ``spline_design``: the median for a missing value, then the B-spline basis on the stored knots
  (the value first held within the boundary knots), a boolean as its 0/1 column, categories
  one-hot. The basis is de Boor's recursion exactly as scipy evaluates it
  (``BSpline.design_matrix``): the knot interval of each row, then the k + 1 non-zero basis
  values by the same divisions, products and sums.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ...errors import ExportError
from ...kinds.design import LinearDesign
from ...schema import CATEGORICAL
from .builder import GraphBuilder


def linear_design(builder: GraphBuilder, columns: list[str], design: LinearDesign) -> str | None:
    """Return the [N, width] design matrix of ``design`` over ``columns``, or None when it has no column."""
    parts = []
    for value, step in zip(columns, design.steps, strict=True):
        if step.role == CATEGORICAL:
            if step.codes:
                parts.append(one_hot(builder, value, step.codes))
            continue
        missing = builder.op("IsNaN", [value], "missing")
        filled = builder.op("Where", [missing, builder.constant([step.median], "median"), value], "imputed")
        centred = builder.op("Sub", [filled, builder.constant([step.mean], "mean")], "centred")
        parts.append(builder.column(builder.op("Div", [centred, builder.constant([step.std], "std")], "scaled")))
        if step.indicator:
            parts.append(builder.column(as_double(builder, missing)))
    return builder.concat_columns(parts, "design") if parts else None


def spline_design(builder: GraphBuilder, columns: list[str], design: Any) -> str | None:
    """Return the [N, width] design matrix of a ``SplineDesign`` over ``columns``, or None when it is empty."""
    parts = []
    for value, step in zip(columns, design.steps, strict=True):
        if step["role"] == CATEGORICAL:
            if step["codes"]:
                parts.append(one_hot(builder, value, tuple(step["codes"])))
            continue
        missing = builder.op("IsNaN", [value], "missing")
        filled = builder.op("Where", [missing, builder.constant([step["median"]], "median"), value], "imputed")
        if "knots" in step:
            parts.append(spline_basis(builder, filled, np.asarray(step["knots"], dtype=np.float64), design.degree))
        else:
            parts.append(builder.column(filled))
    return builder.concat_columns(parts, "design") if parts else None


def one_hot(builder: GraphBuilder, codes: str, seen: tuple[int, ...]) -> str:
    """Return one 0/1 column per code in ``seen`` ([N, len(seen)]); NaN and other codes give zeros."""
    levels = builder.constant(np.asarray(seen, dtype=np.float64)[None, :], "levels")
    return as_double(builder, builder.op("Equal", [builder.column(codes), levels], "is_level"))


def as_double(builder: GraphBuilder, value: str) -> str:
    """Return a boolean or integer tensor as doubles."""
    from onnx import TensorProto

    return builder.op("Cast", [value], "as_double", to=TensorProto.DOUBLE)


def linear_output(builder: GraphBuilder, design: str | None, coef: np.ndarray, intercept: Any,
                  like: str) -> str:
    """Return ``design @ coef + intercept`` as [N]; with no design, the intercept on every row of ``like`` ([N]).
    With K intercepts (a multiclass stage: ``coef`` is [width, K]) the output is [N, K]."""
    intercepts = np.atleast_1d(np.asarray(intercept, dtype=np.float64))
    several = intercepts.size > 1
    if design is None or not len(coef):
        zero = builder.op("Mul", [like, builder.constant([0.0], "zero")], "zero")
        zero = builder.op("Where", [builder.op("IsNaN", [zero]), builder.constant([0.0], "zero"), zero])
        if several:
            zero = builder.op("Unsqueeze", [zero, builder.constant([1], "axis", np.int64)], "zero_column")
        return builder.op("Add", [zero, builder.constant(intercepts, "intercept")], "linear")
    if several:
        product = builder.op("MatMul", [design, builder.constant(np.asarray(coef, dtype=np.float64), "coef")],
                             "product")
        return builder.op("Add", [product, builder.constant(intercepts, "intercept")], "linear")
    # coef as a [width, 1] matrix: onnxruntime's float64 MatMul takes a slow path for a vector
    product = builder.flat(builder.op("MatMul", [design, builder.constant(np.asarray(coef)[:, None], "coef")], "product"))
    return builder.op("Add", [product, builder.constant([float(intercepts[0])], "intercept")], "linear")


# ----------------------------------------------------------------------------- B-splines
def spline_basis(builder: GraphBuilder, values: str, knots: np.ndarray, degree: int) -> str:
    """Return the [N, len(knots) - degree - 1] B-spline basis of the [N] ``values`` (no NaN)."""
    n_basis = len(knots) - degree - 1
    low, high = builder.constant([knots[degree]], "low_knot"), builder.constant([knots[n_basis]], "high_knot")
    x = builder.op("Min", [builder.op("Max", [values, low], "above_low"), high], "inside")
    interval = _knot_interval(builder, x, knots, degree)
    table = builder.constant(knots, "knots")

    def knot(offset: int) -> str:
        where = builder.op("Add", [interval, builder.constant([offset], "offset", np.int64)], "knot_index")
        return builder.op("Gather", [table, where], "knot", axis=0)

    zero = builder.constant([0.0], "zero")
    one = builder.op("Add", [builder.op("Mul", [x, zero], "zeros"), builder.constant([1.0], "one")], "ones")
    h = [one]
    for j in range(1, degree + 1):
        previous = list(h)
        h = [builder.op("Mul", [x, zero], "zeros")] + [zero] * j
        for n in range(1, j + 1):
            after, before = knot(n), knot(n - j)
            width = builder.op("Sub", [after, before], "knot_gap")
            ratio = builder.op("Div", [previous[n - 1], width], "ratio")
            same = builder.op("Equal", [after, before], "same_knot")
            w = builder.op("Where", [same, zero, ratio], "w")
            h[n - 1] = builder.op("Add", [h[n - 1], builder.op("Mul", [w, builder.op("Sub", [after, x])])], "h")
            h[n] = builder.op("Mul", [w, builder.op("Sub", [x, before])], "h")
    return _scatter_basis(builder, h, interval, degree, n_basis)


def _knot_interval(builder: GraphBuilder, x: str, knots: np.ndarray, degree: int) -> str:
    """Return, per row, the index l of the knot interval scipy evaluates x in: the largest l in
    [degree, n_basis - 1] with knots[l] <= x (as int64, [N])."""
    from onnx import TensorProto

    n_basis = len(knots) - degree - 1
    inner = knots[degree + 1:n_basis]
    start = builder.constant([degree], "degree", np.int64)
    if not len(inner):
        zeros = builder.op("Cast", [builder.op("Mul", [x, builder.constant([0.0], "zero")])], to=TensorProto.INT64)
        return builder.op("Add", [zeros, start], "interval")
    passed = builder.op("LessOrEqual", [builder.constant(inner[None, :], "inner_knots"), builder.column(x)], "passed")
    count = builder.op("ReduceSum", [builder.op("Cast", [passed], to=TensorProto.INT64),
                                     builder.constant([1], "axis", np.int64)], "passed_count", keepdims=0)
    return builder.op("Add", [count, start], "interval")


def _scatter_basis(builder: GraphBuilder, h: list[str], interval: str, degree: int, n_basis: int) -> str:
    """Return the [N, n_basis] matrix with h[i] in column interval - degree + i and zeros elsewhere."""
    positions = builder.constant(np.arange(n_basis)[None, :], "basis_positions", np.int64)
    total = None
    for i, value in enumerate(h):
        column = builder.op("Add", [interval, builder.constant([i - degree], "offset", np.int64)], "basis_column")
        here = as_double(builder, builder.op("Equal", [builder.column(column), positions], "is_column"))
        term = builder.op("Mul", [here, builder.column(value)], "basis_term")
        total = term if total is None else builder.op("Add", [total, term], "basis")
    if total is None:
        raise ExportError("a spline basis of no function has nothing to export")
    return total
