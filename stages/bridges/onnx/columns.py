"""The model's inputs, one per feature column, and each turned into its column of the schema's matrix.

This is ``Schema.encode`` in ONNX operators. Every feature column is one graph input of shape
[N] named as in the schema: doubles for numeric and boolean columns (NaN for missing, 0 and 1
for booleans), strings for categorical ones. Inside the graph each becomes one [N] double
column, as the chain's own matrix holds it:

- numeric: an infinity counts as missing (NaN), as ``Schema.encode`` treats it;
- categorical: the level's code, its position in the schema's levels (a LabelEncoder); a level
  never seen in training, and a missing value (the empty string, unless it is a level), give
  NaN, so every stage then does with it what ``predict`` does with a missing value.

The columns stay one-dimensional, [N], through the element-wise work (onnxruntime broadcasts
an [N, 1] tensor against a constant one element at a time, some 30 times slower); they become
[N, 1] only to be set side by side in a matrix.

Each stage's own preprocessing (imputation, scaling, one-hot, ordinal codes) starts from these
columns: see ``designs.py`` and the converters.
"""

from __future__ import annotations

import numpy as np

from ... import schema as schema_rules
from ...schema import CATEGORICAL, ColumnInfo, Schema
from .builder import ML, GraphBuilder

#: what a missing categorical value is in the model's string inputs
MISSING_TEXT = ""


class SchemaColumns:
    """The graph inputs of a chain's features and, on demand, each feature as a schema column."""

    def __init__(self, builder: GraphBuilder, schema: Schema) -> None:
        from onnx import TensorProto

        self.builder = builder
        self.schema = schema
        self._columns: dict[int, str] = {}
        self._float32: dict[int, str] = {}
        for col in schema.columns:
            kind = TensorProto.STRING if col.role == CATEGORICAL else TensorProto.DOUBLE
            builder.add_input(col.name, kind, ["N"])

    def column(self, index: int) -> str:
        """Return feature ``index`` as an [N] double column of the schema's matrix."""
        if index not in self._columns:
            col = self.schema.columns[index]
            encode = _codes if col.role == CATEGORICAL else _numbers
            self._columns[index] = encode(self.builder, col)
        return self._columns[index]

    def columns(self, indices: tuple[int, ...] | list[int]) -> list[str]:
        """Return the [N] columns of the features at ``indices``, in that order."""
        return [self.column(i) for i in indices]

    def matrix(self, indices: tuple[int, ...] | list[int], *, float32: bool = False) -> str:
        """Return the [N, len(indices)] double matrix of those features; with ``float32`` each value is
        first rounded to float32 and back, as scikit-learn's trees read their input."""
        parts = [self.builder.column(self._rounded(i) if float32 else self.column(i)) for i in indices]
        return self.builder.concat_columns(parts, "stage_matrix")

    def _rounded(self, index: int) -> str:
        from onnx import TensorProto

        if index not in self._float32:
            single = self.builder.op("Cast", [self.column(index)], "as_float32", to=TensorProto.FLOAT)
            self._float32[index] = self.builder.op("Cast", [single], "rounded", to=TensorProto.DOUBLE)
        return self._float32[index]


def _numbers(builder: GraphBuilder, col: ColumnInfo) -> str:
    """Return a numeric or boolean input as its schema column, by the schema's own rules: an infinity
    (or, where the schema says so, any value beyond float32's range) is missing, and a missing value
    takes the column's ``fill`` where the schema gives one."""
    value = col.name
    limit = getattr(schema_rules, "FLOAT32_MAX", None)
    if limit is None:
        unusable = builder.op("IsInf", [value], "is_infinite")
    else:
        unusable = builder.op("Greater", [builder.op("Abs", [value]), builder.constant([limit], "largest")], "too_large")
    value = builder.op("Where", [unusable, builder.constant([np.nan], "nan"), value], f"column_{col.name}")
    fill = getattr(col, "fill", None)
    if fill is None:
        return value
    missing = builder.op("IsNaN", [value], "missing")
    return builder.op("Where", [missing, builder.constant([float(fill)], "fill"), value], f"filled_{col.name}")


def _codes(builder: GraphBuilder, col: ColumnInfo) -> str:
    """Return a categorical input as its schema column: the level's code, NaN when unseen or missing."""
    from onnx import TensorProto, helper

    text = col.name
    if not col.levels:  # no level was ever seen: every value is unseen
        shape = builder.op("Shape", [text], "shape")
        nan = helper.make_tensor("nan", TensorProto.DOUBLE, [1], [np.nan])
        return builder.op("ConstantOfShape", [shape], f"codes_{col.name}", value=nan)
    # codes as float32 (ai.onnx.ml opset 2) are exact: whole numbers below 2**24 levels
    codes = builder.op("LabelEncoder", [text], f"codes32_{col.name}", domain=ML, version=2,
                       keys_strings=list(col.levels), values_floats=[float(i) for i in range(len(col.levels))],
                       default_float=float("nan"))
    return builder.op("Cast", [codes], f"codes_{col.name}", to=TensorProto.DOUBLE)
